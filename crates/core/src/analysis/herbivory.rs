//! Leaf damage: the herbivory index and mean percent damage.
//!
//! - Herbivory index (Dirzo & Domínguez 1995, in Bullock, Mooney & Medina
//!   (eds), *Seasonally Dry Tropical Forests*): leaves are scored in damage
//!   classes i = 0…5 (0: 0 %, 1: 1–6, 2: 6–12, 3: 12–25, 4: 25–50, 5: 50–100;
//!   classes from memory) and IH = Σ(n_i × i) / N. The class number i is the
//!   scale's `ordinal`, so a site's own damage scale works too.
//! - Mean percent damage: the mean over leaves of each leaf's percent, which
//!   for class scores is the class midpoint (data in `scale_class`).
//! - Percent leaf area removed = 100 × (intact − remaining) / intact (common
//!   practice), for leaves measured rather than scored.
//!
//! Damage on a tagged leaf is cumulative, so an index at a later visit
//! includes the damage of earlier ones.

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};

use super::season::Season;
use super::{CageRef, Notes};
use crate::model::*;
use crate::{Error, Result};

/// The herbivory index IH = Σ(n_i × i) / N from (class number i, leaves n_i)
/// pairs (Dirzo & Domínguez 1995). `None` when no leaf was scored.
pub fn herbivory_index(counts: &[(i64, u64)]) -> Option<f64> {
    let n: u64 = counts.iter().map(|(_, k)| k).sum();
    (n > 0).then(|| {
        let weighted: f64 = counts.iter().map(|(i, k)| *i as f64 * *k as f64).sum();
        weighted / n as f64
    })
}

/// Mean of leaf damage percents; `None` for no leaves.
pub fn mean_damage(percents: &[f64]) -> Option<f64> {
    (!percents.is_empty()).then(|| percents.iter().sum::<f64>() / percents.len() as f64)
}

/// Percent of leaf area removed: 100 × (intact − remaining) / intact
/// (common practice).
pub fn percent_removed(intact: f64, remaining: f64) -> Result<f64> {
    if !(intact.is_finite() && intact > 0.0) {
        return Err(Error::invalid(
            "leaf",
            "intact_area",
            intact,
            "must be a number above 0",
        ));
    }
    if !(remaining.is_finite() && (0.0..=intact).contains(&remaining)) {
        return Err(Error::invalid(
            "leaf",
            "remaining_area",
            remaining,
            format!("must be between 0 and the intact area {intact}"),
        ));
    }
    Ok(100.0 * (intact - remaining) / intact)
}

/// Damage of one plant species' tagged leaves in one cage at one damage visit
/// (analysis table `herbivory`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct HerbivoryRow {
    pub visit_id: VisitId,
    #[serde(flatten)]
    pub cage: CageRef,
    pub day: i64,
    pub taxon_id: TaxonId,
    pub taxon: String,
    pub leaves: i64,
    pub herbivory_index: Option<f64>,
    pub mean_damage_pct: Option<f64>,
}

/// One scored leaf: its class number (when scored in classes with
/// ordinals) and its percent damage.
#[derive(Debug, Clone, Copy)]
pub(crate) struct LeafScore {
    pub class: Option<i64>,
    pub pct: f64,
}

/// The scored leaves of one damage visit, by plant taxon.
#[derive(Debug, Clone)]
pub(crate) struct VisitDamage {
    pub cage: usize,
    pub day: i64,
    pub visit_id: VisitId,
    pub by_taxon: BTreeMap<String, (TaxonId, Vec<LeafScore>)>,
}

impl VisitDamage {
    /// Every leaf of the visit.
    pub fn all(&self) -> Vec<LeafScore> {
        self.by_taxon
            .values()
            .flat_map(|(_, v)| v.iter().copied())
            .collect()
    }
}

/// Index and mean damage of a set of leaves. The index is `None` when any
/// leaf lacks a class number (percent scores).
pub(crate) fn summarise_leaves(leaves: &[LeafScore]) -> (Option<f64>, Option<f64>) {
    let classes: Option<Vec<i64>> = leaves.iter().map(|l| l.class).collect();
    let index = classes.and_then(|c| {
        let mut counts: BTreeMap<i64, u64> = BTreeMap::new();
        for i in c {
            *counts.entry(i).or_default() += 1;
        }
        herbivory_index(&counts.into_iter().collect::<Vec<_>>())
    });
    let pcts: Vec<f64> = leaves.iter().map(|l| l.pct).collect();
    (index, mean_damage(&pcts))
}

/// The scored leaves of every damage visit.
pub(crate) fn visit_damage(season: &Season, notes: &mut Notes) -> Vec<VisitDamage> {
    let Some(protocol) = &season.damage_protocol else {
        return Vec::new();
    };
    let classes: &[ScaleClass] = protocol
        .scale_id
        .and_then(|id| season.scale_classes.get(&id))
        .map_or(&[], |c| c.as_slice());
    let mut out = Vec::new();
    for v in season.visits.iter().filter(|v| v.kind == VisitKind::Damage) {
        let Some(rows) = season.damage.get(&v.id) else {
            continue;
        };
        let mut by_taxon: BTreeMap<String, (TaxonId, Vec<LeafScore>)> = BTreeMap::new();
        for r in rows {
            let Some(leaf) = season.leaves.get(&r.leaf_id) else {
                continue;
            };
            let score = match (protocol.method, &r.class_code, r.value_pct) {
                (DamageMethod::Class, Some(code), _) => {
                    match classes.iter().find(|c| c.code == *code) {
                        Some(c) => Some(LeafScore {
                            class: c.ordinal,
                            pct: c.midpoint_pct,
                        }),
                        None => {
                            notes.push(format!(
                                "cage {} day {}: damage class {code:?} is not on the damage scale; the leaf is left out",
                                season.cages[v.cage].label, v.day
                            ));
                            None
                        }
                    }
                }
                (DamageMethod::Percent, _, Some(pct)) => Some(LeafScore { class: None, pct }),
                _ => None,
            };
            if let Some(score) = score {
                by_taxon
                    .entry(season.taxon_code(leaf.taxon_id))
                    .or_insert_with(|| (leaf.taxon_id, Vec::new()))
                    .1
                    .push(score);
            }
        }
        if !by_taxon.is_empty() {
            out.push(VisitDamage {
                cage: v.cage,
                day: v.day,
                visit_id: v.id,
                by_taxon,
            });
        }
    }
    out
}

/// Herbivory rows of every damage visit and plant species.
pub(crate) fn herbivory_rows(season: &Season, damage: &[VisitDamage]) -> Vec<HerbivoryRow> {
    let mut rows = Vec::new();
    for vd in damage {
        let cage = CageRef::of(season, vd.cage);
        for (code, (taxon, leaves)) in &vd.by_taxon {
            let (index, mean) = summarise_leaves(leaves);
            rows.push(HerbivoryRow {
                visit_id: vd.visit_id,
                cage: cage.clone(),
                day: vd.day,
                taxon_id: *taxon,
                taxon: code.clone(),
                leaves: leaves.len() as i64,
                herbivory_index: index,
                mean_damage_pct: mean,
            });
        }
    }
    rows
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn herbivory_index_check_value() {
        // docs/methods.md §3 check value (computed; formula of Dirzo & Domínguez
        // 1995, from memory): n = (8, 5, 3, 2, 1, 1), N = 20 → IH = 1.3.
        let counts: Vec<(i64, u64)> = [8u64, 5, 3, 2, 1, 1]
            .iter()
            .enumerate()
            .map(|(i, n)| (i as i64, *n))
            .collect();
        let ih = herbivory_index(&counts).unwrap();
        assert!((ih - 1.3).abs() < 1e-12, "{ih}");
        // Same leaves, class midpoints (0, 3.5, 9, 18.5, 37.5, 75) → mean
        // damage 9.7 % (docs/methods.md §3, computed).
        let midpoints = [0.0, 3.5, 9.0, 18.5, 37.5, 75.0];
        let leaves: Vec<LeafScore> = counts
            .iter()
            .flat_map(|(i, n)| {
                std::iter::repeat_n(
                    LeafScore {
                        class: Some(*i),
                        pct: midpoints[*i as usize],
                    },
                    *n as usize,
                )
            })
            .collect();
        let (index, mean) = summarise_leaves(&leaves);
        assert!((index.unwrap() - 1.3).abs() < 1e-12);
        assert!((mean.unwrap() - 9.7).abs() < 1e-12, "{mean:?}");
    }

    #[test]
    fn no_leaves_no_index() {
        assert_eq!(herbivory_index(&[]), None);
        assert_eq!(herbivory_index(&[(3, 0)]), None);
        assert_eq!(mean_damage(&[]), None);
        // Percent scores have no class number: no index, but a mean.
        let (index, mean) = summarise_leaves(&[LeafScore {
            class: None,
            pct: 12.0,
        }]);
        assert_eq!(index, None);
        assert_eq!(mean, Some(12.0));
    }

    #[test]
    fn percent_removed_from_areas() {
        // Common practice: 100 × (intact − remaining) / intact.
        assert_eq!(percent_removed(20.0, 15.0).unwrap(), 25.0);
        assert_eq!(percent_removed(8.0, 8.0).unwrap(), 0.0);
        let err = percent_removed(10.0, 12.0).unwrap_err().to_string();
        assert!(
            err.contains("remaining_area") && err.contains("12"),
            "{err}"
        );
        assert!(percent_removed(0.0, 0.0).is_err());
    }
}
