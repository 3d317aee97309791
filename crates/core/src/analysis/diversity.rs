//! Diversity of a plant community from species cover.
//!
//! Proportions p_i = c_i / Σ c over the species with cover above 0.
//! - Richness S: species with cover above 0.
//! - Shannon H′ = −Σ p_i ln p_i (natural log).
//! - Pielou J′ = H′ / ln S; undefined for one species (reported as NA:
//!   an empty cell, never 0 or NaN).
//! - Simpson D = Σ p_i² (Simpson 1949, Nature 163:688); Gini–Simpson 1 − D;
//!   inverse Simpson 1/D. The n(n−1) unbiased form is for counts, not cover.
//! - Hill numbers ^qD = (Σ p_i^q)^(1/(1−q)): ^0D = S, ^1D = exp H′ (the limit
//!   at q = 1), ^2D = 1/D (Hill 1973, Ecology 54:427–432; Jost 2006, Oikos
//!   113:363–375).

use serde::{Deserialize, Serialize};

use super::CageRef;
use super::cover::VisitCover;
use super::season::Season;
use crate::model::VisitId;
use crate::{Error, Result};

/// Diversity indices of one community. Indices are `None` where undefined:
/// everything but richness for an empty community, Pielou's J′ for one species.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Diversity {
    /// Species with cover above 0.
    pub richness: usize,
    /// Summed species cover (percent; may pass 100 with layered cover).
    pub total_cover_pct: f64,
    /// Shannon H′, natural log.
    pub shannon: Option<f64>,
    /// Pielou J′ = H′ / ln S.
    pub pielou: Option<f64>,
    /// Simpson D = Σ p².
    pub simpson: Option<f64>,
    /// 1 − D.
    pub gini_simpson: Option<f64>,
    /// 1 / D.
    pub inverse_simpson: Option<f64>,
    /// Hill number of order 0 (= S).
    pub hill_0: Option<f64>,
    /// Hill number of order 1 (= exp H′).
    pub hill_1: Option<f64>,
    /// Hill number of order 2 (= 1/D).
    pub hill_2: Option<f64>,
}

/// Proportions of the positive values. Refuses negative or non-finite cover.
pub fn proportions(cover: &[f64]) -> Result<Vec<f64>> {
    if let Some(bad) = cover.iter().find(|c| !c.is_finite() || **c < 0.0) {
        return Err(Error::invalid(
            "cover_record",
            "cover_pct",
            bad,
            "must be a finite number of at least 0",
        ));
    }
    let total: f64 = cover.iter().sum();
    Ok(cover
        .iter()
        .filter(|c| **c > 0.0)
        .map(|c| c / total)
        .collect())
}

/// Hill number of order `q` (≥ 0) of proportions that sum to 1 (Hill 1973).
/// q = 1 is the limit exp H′.
pub fn hill_number(p: &[f64], q: f64) -> f64 {
    if p.is_empty() {
        return 0.0;
    }
    if (q - 1.0).abs() < 1e-12 {
        return shannon(p).exp();
    }
    if q == 0.0 {
        return p.len() as f64;
    }
    p.iter()
        .map(|x| x.powf(q))
        .sum::<f64>()
        .powf(1.0 / (1.0 - q))
}

/// Shannon H′ = −Σ p ln p of proportions.
pub fn shannon(p: &[f64]) -> f64 {
    -p.iter().map(|x| x * x.ln()).sum::<f64>()
}

/// Every index of a community given as cover values (0 = absent).
pub fn diversity(cover: &[f64]) -> Result<Diversity> {
    let p = proportions(cover)?;
    let s = p.len();
    let total: f64 = cover.iter().sum();
    if s == 0 {
        return Ok(Diversity {
            richness: 0,
            total_cover_pct: total,
            shannon: None,
            pielou: None,
            simpson: None,
            gini_simpson: None,
            inverse_simpson: None,
            hill_0: None,
            hill_1: None,
            hill_2: None,
        });
    }
    let h = shannon(&p);
    let d: f64 = p.iter().map(|x| x * x).sum();
    Ok(Diversity {
        richness: s,
        total_cover_pct: total,
        shannon: Some(h),
        pielou: (s > 1).then(|| h / (s as f64).ln()),
        simpson: Some(d),
        gini_simpson: Some(1.0 - d),
        inverse_simpson: Some(1.0 / d),
        hill_0: Some(s as f64),
        hill_1: Some(h.exp()),
        hill_2: Some(hill_number(&p, 2.0)),
    })
}

/// Diversity of one cage at one cover visit (analysis table `diversity`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DiversityRow {
    pub visit_id: VisitId,
    #[serde(flatten)]
    pub cage: CageRef,
    pub day: i64,
    pub species_not_assessed: i64,
    #[serde(flatten)]
    pub index: Diversity,
}

/// Diversity of every cover visit.
pub(crate) fn diversity_rows(season: &Season, covers: &[VisitCover]) -> Result<Vec<DiversityRow>> {
    covers
        .iter()
        .map(|vc| {
            let values: Vec<f64> = vc.species.iter().map(|(_, c)| *c).collect();
            Ok(DiversityRow {
                visit_id: vc.visit.id,
                cage: CageRef::of(season, vc.visit.cage),
                day: vc.visit.day,
                species_not_assessed: vc.not_assessed as i64,
                index: diversity(&values)?,
            })
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn close(a: f64, b: f64) {
        assert!((a - b).abs() < 5e-7, "{a} vs {b}");
    }

    #[test]
    fn three_species_50_30_20() {
        // docs/methods.md §4 check values (computed from the formulas of
        // Shannon; Pielou; Simpson 1949; Hill 1973): cover 50, 30, 20.
        let d = diversity(&[50.0, 30.0, 20.0]).unwrap();
        assert_eq!(d.richness, 3);
        close(d.shannon.unwrap(), 1.029653);
        close(d.pielou.unwrap(), 0.937231);
        close(d.simpson.unwrap(), 0.380000);
        close(d.gini_simpson.unwrap(), 0.620000);
        close(d.inverse_simpson.unwrap(), 2.631579);
        close(d.hill_1.unwrap(), 2.800094);
        // Hill 1973: ^0D = S, ^2D = 1/D.
        assert_eq!(d.hill_0, Some(3.0));
        close(d.hill_2.unwrap(), 2.631579);
    }

    #[test]
    fn four_even_species() {
        // docs/methods.md §4 check values (computed): 25, 25, 25, 25.
        let d = diversity(&[25.0, 25.0, 25.0, 25.0]).unwrap();
        close(d.shannon.unwrap(), 1.386294);
        close(d.pielou.unwrap(), 1.0);
        close(d.simpson.unwrap(), 0.25);
        close(d.gini_simpson.unwrap(), 0.75);
        close(d.inverse_simpson.unwrap(), 4.0);
        close(d.hill_1.unwrap(), 4.0);
    }

    #[test]
    fn one_species_has_no_evenness() {
        // docs/methods.md §4 check values (computed): one species → H′ 0,
        // J′ NA (never 0 or NaN), D 1, 1−D 0, 1/D 1, exp H′ 1.
        let d = diversity(&[40.0, 0.0, 0.0]).unwrap();
        assert_eq!(d.richness, 1);
        assert_eq!(d.shannon, Some(0.0));
        assert_eq!(d.pielou, None);
        assert_eq!(d.simpson, Some(1.0));
        assert_eq!(d.gini_simpson, Some(0.0));
        assert_eq!(d.inverse_simpson, Some(1.0));
        assert_eq!(d.hill_1, Some(1.0));
    }

    #[test]
    fn zero_cover_means_absent_and_an_empty_plot_has_no_indices() {
        // 0 = looked, absent (common practice): zeros do not change the indices.
        assert_eq!(
            diversity(&[50.0, 30.0, 20.0, 0.0]).unwrap().shannon,
            diversity(&[50.0, 30.0, 20.0]).unwrap().shannon
        );
        let empty = diversity(&[0.0, 0.0]).unwrap();
        assert_eq!(empty.richness, 0);
        assert_eq!(empty.shannon, None);
        assert_eq!(empty.simpson, None);
    }

    #[test]
    fn negative_cover_is_refused() {
        let err = diversity(&[10.0, -1.0]).unwrap_err().to_string();
        assert!(err.contains("cover_pct") && err.contains("-1"), "{err}");
    }

    #[test]
    fn hill_numbers_fall_with_order() {
        // Hill 1973: ^qD is non-increasing in q; equal for an even community.
        let p = proportions(&[50.0, 30.0, 20.0]).unwrap();
        let (d0, d1, d2) = (
            hill_number(&p, 0.0),
            hill_number(&p, 1.0),
            hill_number(&p, 2.0),
        );
        assert!(d0 > d1 && d1 > d2, "{d0} {d1} {d2}");
        let even = proportions(&[1.0, 1.0, 1.0]).unwrap();
        close(hill_number(&even, 0.5), 3.0);
        close(hill_number(&even, 3.0), 3.0);
    }

    proptest::proptest! {
        /// Bounds that hold for any community (Hill 1973; Jost 2006):
        /// 0 ≤ H′ ≤ ln S, 0 ≤ J′ ≤ 1, ^0D ≥ ^1D ≥ ^2D ≥ 1.
        #[test]
        fn indices_stay_within_their_bounds(cover in proptest::collection::vec(0.0f64..100.0, 1..40)) {
            let d = diversity(&cover).unwrap();
            if d.richness == 0 {
                proptest::prop_assert_eq!(d.shannon, None);
            } else {
                let s = d.richness as f64;
                let h = d.shannon.unwrap();
                proptest::prop_assert!(h >= -1e-12 && h <= s.ln() + 1e-9);
                if let Some(j) = d.pielou {
                    proptest::prop_assert!((-1e-12..=1.0 + 1e-9).contains(&j));
                }
                let (h0, h1, h2) = (d.hill_0.unwrap(), d.hill_1.unwrap(), d.hill_2.unwrap());
                proptest::prop_assert!(h0 + 1e-9 >= h1 && h1 + 1e-9 >= h2 && h2 >= 1.0 - 1e-9);
            }
        }
    }
}
