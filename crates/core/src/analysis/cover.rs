//! Cover in percent, relative cover and cover by plant group.
//!
//! - Class scales: a class converts to the midpoint of its range, and the
//!   midpoints are data (`scale_class.midpoint_pct`), so any scale a site
//!   defines works, e.g. Daubenmire (1959, Northwest Science 33:43–64) or
//!   Braun-Blanquet classes. Midpoint conversion biases diversity indices
//!   computed from cover (Dembicz & Dengler 2025, Vegetation Classification
//!   and Survey 6:133–140); the report says so.
//! - Pin frames (point intercept): cover = 100 × hits / pins (Elzinga, Salzer
//!   & Willoughby 1998, *Measuring and Monitoring Plant Populations*).
//! - Relative cover of a species (or group) = 100 × its cover / the summed
//!   cover of all species at the visit (common practice). Ground categories
//!   are not species and take no part.
//!
//! The analysis converts every cover row again from what was entered (the
//! percent, the class code or the pin hits), so a corrected scale applies to
//! the whole season.

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};

use super::season::{DayVisit, Season};
use super::{CageRef, Notes};
use crate::model::*;
use crate::{Error, Result};

/// Percent cover of a class code of a scale: the class midpoint.
pub fn class_to_percent(classes: &[ScaleClass], scale: &str, code: &str) -> Result<f64> {
    classes
        .iter()
        .find(|c| c.code == code)
        .map(|c| c.midpoint_pct)
        .ok_or_else(|| {
            let codes: Vec<&str> = classes.iter().map(|c| c.code.as_str()).collect();
            Error::invalid(
                "cover_record",
                "class_code",
                code,
                format!("is not a class of scale {scale} ({})", codes.join(", ")),
            )
        })
}

/// Percent cover from pin hits in a frame of `pins` pins: 100 × hits / pins
/// (Elzinga, Salzer & Willoughby 1998).
pub fn pins_to_percent(hits: i64, pins: i64) -> Result<f64> {
    if pins <= 0 {
        return Err(Error::invalid(
            "cover_protocol",
            "pins_per_frame",
            pins,
            "must be at least 1 to convert pin hits",
        ));
    }
    if !(0..=pins).contains(&hits) {
        return Err(Error::invalid(
            "cover_record",
            "pin_hits",
            hits,
            format!("must be between 0 and the frame's {pins} pins"),
        ));
    }
    Ok(100.0 * hits as f64 / pins as f64)
}

/// Relative cover in percent of each value: 100 × c_i / Σ c. `None` for
/// every value when the sum is 0 (nothing to be relative to).
pub fn relative_cover(covers: &[f64]) -> Vec<Option<f64>> {
    let total: f64 = covers.iter().sum();
    covers
        .iter()
        .map(|c| (total > 0.0).then(|| 100.0 * c / total))
        .collect()
}

/// Percent cover of one cover row by the protocol's method, from what was
/// entered. `Ok(None)` = not assessed.
pub fn record_percent(
    protocol: &CoverProtocol,
    scale: Option<(&str, &[ScaleClass])>,
    record: &CoverRecord,
) -> Result<Option<f64>> {
    match protocol.method {
        CoverMethod::Percent => Ok(record.value_pct),
        CoverMethod::Class => match (&record.class_code, scale) {
            (None, _) => Ok(None),
            (Some(code), Some((name, classes))) => class_to_percent(classes, name, code).map(Some),
            (Some(code), None) => Err(Error::invalid(
                "cover_record",
                "class_code",
                code,
                format!("protocol {} names no cover scale", protocol.code),
            )),
        },
        CoverMethod::Pins => record
            .pin_hits
            .map(|h| pins_to_percent(h, protocol.pins_per_frame.unwrap_or(0)))
            .transpose(),
    }
}

/// The species cover of one cover visit.
#[derive(Debug, Clone)]
pub(crate) struct VisitCover {
    pub visit: DayVisit,
    /// Plant taxa with their percent cover (0 = looked, absent), by taxon code.
    pub species: Vec<(TaxonId, f64)>,
    /// Species rows not assessed (or not convertible).
    pub not_assessed: usize,
}

/// Species cover of every cover visit that has species rows.
pub(crate) fn visit_covers(season: &Season, notes: &mut Notes) -> Vec<VisitCover> {
    let Some(protocol) = &season.cover_protocol else {
        return Vec::new();
    };
    let scale = protocol.scale_id.and_then(|id| {
        let name = season.scales.get(&id).map_or("?", |s| s.code.as_str());
        season.scale_classes.get(&id).map(|c| (name, c.as_slice()))
    });
    let mut out = Vec::new();
    for v in season.visits.iter().filter(|v| v.kind == VisitKind::Cover) {
        let Some(rows) = season.cover.get(&v.id) else {
            continue;
        };
        let mut species = Vec::new();
        let mut not_assessed = 0;
        for r in rows {
            let Some(taxon) = r.taxon_id else { continue };
            match record_percent(protocol, scale, r) {
                Ok(Some(x)) => species.push((taxon, x)),
                Ok(None) => not_assessed += 1,
                Err(e) => {
                    not_assessed += 1;
                    notes.push(format!(
                        "cage {} day {}: a cover row was left out: {e}",
                        season.cages[v.cage].label, v.day
                    ));
                }
            }
        }
        if species.is_empty() && not_assessed == 0 {
            continue;
        }
        species.sort_by_key(|(t, _)| season.taxon_code(*t));
        out.push(VisitCover {
            visit: v.clone(),
            species,
            not_assessed,
        });
    }
    out
}

/// Cover of one plant species at one cover visit (analysis table
/// `species_cover`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SpeciesCoverRow {
    pub visit_id: VisitId,
    #[serde(flatten)]
    pub cage: CageRef,
    pub day: i64,
    pub taxon_id: TaxonId,
    pub taxon: String,
    pub plant_group: PlantGroup,
    pub cover_pct: f64,
    pub relative_cover_pct: Option<f64>,
}

/// Cover of one plant group at one cover visit (analysis table `group_cover`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct GroupCoverRow {
    pub visit_id: VisitId,
    #[serde(flatten)]
    pub cage: CageRef,
    pub day: i64,
    pub plant_group: PlantGroup,
    pub species_present: i64,
    pub cover_pct: f64,
    pub relative_cover_pct: Option<f64>,
}

/// The plant group of a taxon; a plant without one counts as `other`.
pub(crate) fn group_of(season: &Season, taxon: TaxonId) -> PlantGroup {
    season
        .taxa
        .get(&taxon)
        .and_then(|t| t.plant_group)
        .unwrap_or(PlantGroup::Other)
}

/// Species and group cover rows of every cover visit.
pub(crate) fn cover_rows(
    season: &Season,
    covers: &[VisitCover],
) -> (Vec<SpeciesCoverRow>, Vec<GroupCoverRow>) {
    let mut species_rows = Vec::new();
    let mut group_rows = Vec::new();
    for vc in covers {
        let cage = CageRef::of(season, vc.visit.cage);
        let values: Vec<f64> = vc.species.iter().map(|(_, c)| *c).collect();
        let relative = relative_cover(&values);
        let mut groups: BTreeMap<PlantGroup, (i64, f64)> = BTreeMap::new();
        for ((taxon, c), rel) in vc.species.iter().zip(relative) {
            let group = group_of(season, *taxon);
            let g = groups.entry(group).or_default();
            g.0 += i64::from(*c > 0.0);
            g.1 += c;
            species_rows.push(SpeciesCoverRow {
                visit_id: vc.visit.id,
                cage: cage.clone(),
                day: vc.visit.day,
                taxon_id: *taxon,
                taxon: season.taxon_code(*taxon),
                plant_group: group,
                cover_pct: *c,
                relative_cover_pct: rel,
            });
        }
        let totals: Vec<f64> = groups.values().map(|(_, c)| *c).collect();
        for ((group, (present, c)), rel) in groups.into_iter().zip(relative_cover(&totals)) {
            group_rows.push(GroupCoverRow {
                visit_id: vc.visit.id,
                cage: cage.clone(),
                day: vc.visit.day,
                plant_group: group,
                species_present: present,
                cover_pct: c,
                relative_cover_pct: rel,
            });
        }
    }
    (species_rows, group_rows)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn class(code: &str, order: i64, lower: f64, upper: f64, mid: f64) -> ScaleClass {
        ScaleClass {
            id: ScaleClassId(uuid::Uuid::nil()),
            scale_id: ScaleId(uuid::Uuid::nil()),
            code: code.to_owned(),
            sort_order: order,
            lower_pct: Some(lower),
            upper_pct: Some(upper),
            midpoint_pct: mid,
            ordinal: None,
            description: None,
        }
    }

    /// Daubenmire 1959 (Northwest Science 33:43–64) classes and midpoints.
    fn daubenmire() -> Vec<ScaleClass> {
        vec![
            class("1", 1, 0.0, 5.0, 2.5),
            class("2", 2, 5.0, 25.0, 15.0),
            class("3", 3, 25.0, 50.0, 37.5),
            class("4", 4, 50.0, 75.0, 62.5),
            class("5", 5, 75.0, 95.0, 85.0),
            class("6", 6, 95.0, 100.0, 97.5),
        ]
    }

    #[test]
    fn daubenmire_classes_convert_to_midpoints() {
        let scale = daubenmire();
        // docs/methods.md §1 check value (computed from Daubenmire 1959 midpoints):
        // classes 3, 2, 1 → 37.5 + 15 + 2.5 = 55 %.
        let total: f64 = ["3", "2", "1"]
            .iter()
            .map(|c| class_to_percent(&scale, "daubenmire", c).unwrap())
            .sum();
        assert_eq!(total, 55.0);
        // Class 6 is 95–100 % → 97.5 (Daubenmire 1959).
        assert_eq!(class_to_percent(&scale, "daubenmire", "6").unwrap(), 97.5);
    }

    #[test]
    fn any_scale_converts_by_its_own_midpoints() {
        // Modified Daubenmire (Interagency Technical Reference 1734-4, 1996):
        // T (trace, under 1 %) → 0.5, 1 (1–5 %) → 3.0.
        let modified = vec![
            class("0", 0, 0.0, 0.0, 0.0),
            class("T", 1, 0.0, 1.0, 0.5),
            class("1", 2, 1.0, 5.0, 3.0),
        ];
        assert_eq!(class_to_percent(&modified, "mod", "T").unwrap(), 0.5);
        assert_eq!(class_to_percent(&modified, "mod", "1").unwrap(), 3.0);
        assert_eq!(class_to_percent(&modified, "mod", "0").unwrap(), 0.0);
        // Braun-Blanquet "+" (few, cover small) → 0.5 (midpoint from memory).
        let bb = vec![class("+", 1, 0.0, 5.0, 0.5), class("r", 0, 0.0, 5.0, 0.1)];
        assert_eq!(class_to_percent(&bb, "bb", "+").unwrap(), 0.5);
        assert_eq!(class_to_percent(&bb, "bb", "r").unwrap(), 0.1);
    }

    #[test]
    fn an_unknown_class_is_refused_with_field_and_value() {
        let err = class_to_percent(&daubenmire(), "daubenmire", "7")
            .unwrap_err()
            .to_string();
        assert!(err.contains("cover_record.class_code"), "{err}");
        assert!(err.contains("\"7\""), "{err}");
        assert!(err.contains("1, 2, 3, 4, 5, 6"), "{err}");
    }

    #[test]
    fn first_hit_pins_give_percent_and_sum_to_100() {
        // docs/methods.md §2 check value (computed; Elzinga, Salzer & Willoughby
        // 1998 formula): 10 pins, first hits 4 grass, 3 forb, 2 litter, 1 bare
        // → 40/30/20/10 %, sum 100.
        let hits = [4, 3, 2, 1];
        let pct: Vec<f64> = hits
            .iter()
            .map(|h| pins_to_percent(*h, 10).unwrap())
            .collect();
        assert_eq!(pct, vec![40.0, 30.0, 20.0, 10.0]);
        assert_eq!(pct.iter().sum::<f64>(), 100.0);
    }

    #[test]
    fn impossible_pin_counts_are_refused() {
        let err = pins_to_percent(11, 10).unwrap_err().to_string();
        assert!(
            err.contains("cover_record.pin_hits") && err.contains("\"11\""),
            "{err}"
        );
        assert!(pins_to_percent(-1, 10).is_err());
        let err = pins_to_percent(1, 0).unwrap_err().to_string();
        assert!(err.contains("pins_per_frame"), "{err}");
    }

    #[test]
    fn relative_cover_is_a_share_of_species_cover() {
        // Common practice: relative cover = 100 × c_i / Σ c.
        let rel = relative_cover(&[50.0, 30.0, 20.0]);
        assert_eq!(rel, vec![Some(50.0), Some(30.0), Some(20.0)]);
        let rel = relative_cover(&[30.0, 10.0]);
        assert_eq!(rel, vec![Some(75.0), Some(25.0)]);
        // Nothing to be relative to: not a division by zero.
        assert_eq!(relative_cover(&[0.0, 0.0]), vec![None, None]);
    }

    proptest::proptest! {
        /// Relative cover of species with any cover sums to 100 (common practice).
        #[test]
        fn relative_cover_sums_to_100(cover in proptest::collection::vec(0.0f64..100.0, 1..40)) {
            let rel = relative_cover(&cover);
            if cover.iter().sum::<f64>() > 0.0 {
                let total: f64 = rel.iter().map(|r| r.unwrap()).sum();
                proptest::prop_assert!((total - 100.0).abs() < 1e-9);
            } else {
                proptest::prop_assert!(rel.iter().all(Option::is_none));
            }
        }
    }
}
