//! Chart data for the results screen: plain serde structs the UI draws
//! (cover over time by treatment with intervals, damage by treatment,
//! survival curves, effect sizes with their intervals, the predator split).
//! Built from [`Results`]; nothing here computes a new statistic. The effect
//! sizes and the split are those of the report's headline responses on their
//! last day (every response and day is in the analysis tables).

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};

use super::report::headline;
use super::{Contrast, Results, SplitRow, response};

/// One point of a treatment's series: the mean with its t-based 95 % interval.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SeriesPoint {
    /// Day of the experiment.
    pub day: i64,
    /// Cages.
    pub n: i64,
    /// Mean over cages.
    pub mean: f64,
    /// Lower end of the interval (`None` for one cage).
    pub ci_low: Option<f64>,
    /// Upper end.
    pub ci_high: Option<f64>,
}

/// A response over time for one treatment.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Series {
    /// Response name.
    pub response: String,
    /// Treatment code.
    pub treatment: String,
    /// Points by day.
    pub points: Vec<SeriesPoint>,
}

/// One step of a survival curve.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CurvePoint {
    /// Day.
    pub day: i64,
    /// Kaplan–Meier survival from this day on.
    pub survival: f64,
    /// Lower end of the log–log 95 % interval.
    pub ci_low: Option<f64>,
    /// Upper end.
    pub ci_high: Option<f64>,
}

/// The survival curve of one stocked taxon in one treatment, starting at 1
/// on the first stocking day.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Curve {
    /// Treatment code.
    pub treatment: String,
    /// Taxon code.
    pub taxon: String,
    /// Steps by day.
    pub points: Vec<CurvePoint>,
}

/// One effect size with its interval.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EffectPoint {
    /// Response name.
    pub response: String,
    /// Day.
    pub day: i64,
    /// Contrast.
    pub contrast: Contrast,
    /// Treatment / control codes.
    pub label: String,
    /// Log response ratio.
    pub lrr: f64,
    /// 95 % interval.
    pub ci_low: Option<f64>,
    /// 95 % interval.
    pub ci_high: Option<f64>,
    /// A warning about this estimate (a doubtful normal approximation, …).
    pub note: Option<String>,
}

/// Everything the results screen draws.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Charts {
    /// Summed and plant-group cover over time, one series per response and treatment.
    pub cover_over_time: Vec<Series>,
    /// Herbivory index and mean damage over time, one series per response and treatment.
    pub damage_by_treatment: Vec<Series>,
    /// Kaplan–Meier curves per treatment and stocked taxon.
    pub survival_curves: Vec<Curve>,
    /// Effect sizes of the headline responses on their last day.
    pub effect_sizes: Vec<EffectPoint>,
    /// The consumptive / non-consumptive split of the headline responses on
    /// their last day.
    pub predator_split: Vec<SplitRow>,
}

fn series(r: &Results, wanted: impl Fn(&str) -> bool) -> Vec<Series> {
    let mut by_key: BTreeMap<(String, String), Vec<SeriesPoint>> = BTreeMap::new();
    for t in r.treatment_summary.iter().filter(|t| wanted(&t.response)) {
        by_key
            .entry((t.response.clone(), t.treatment.clone()))
            .or_default()
            .push(SeriesPoint {
                day: t.day,
                n: t.n,
                mean: t.mean,
                ci_low: t.ci_low,
                ci_high: t.ci_high,
            });
    }
    by_key
        .into_iter()
        .map(|((response, treatment), points)| Series {
            response,
            treatment,
            points,
        })
        .collect()
}

/// The chart data of a season's results.
pub fn charts(r: &Results) -> Charts {
    let cover_over_time = series(r, |n| {
        n == response::COVER_TOTAL || n.starts_with(response::COVER_GROUP)
    });
    let damage_by_treatment = series(r, |n| {
        n == response::DAMAGE_INDEX || n == response::DAMAGE_MEAN
    });
    let mut curves: BTreeMap<(String, String), Vec<CurvePoint>> = BTreeMap::new();
    for row in &r.survival_curve {
        let points = curves
            .entry((row.treatment.clone(), row.taxon.clone()))
            .or_insert_with(|| {
                let start = r
                    .cage_survival
                    .iter()
                    .filter(|c| {
                        c.cage.treatment.as_deref() == Some(row.treatment.as_str())
                            && c.taxon == row.taxon
                    })
                    .map(|c| c.first_day)
                    .min()
                    .unwrap_or(0);
                vec![CurvePoint {
                    day: start,
                    survival: 1.0,
                    ci_low: Some(1.0),
                    ci_high: Some(1.0),
                }]
            });
        points.push(CurvePoint {
            day: row.day,
            survival: row.survival,
            ci_low: row.ci_low,
            ci_high: row.ci_high,
        });
    }
    let survival_curves = curves
        .into_iter()
        .map(|((treatment, taxon), points)| Curve {
            treatment,
            taxon,
            points,
        })
        .collect();
    let effect_sizes = r
        .effect
        .iter()
        .filter(|e| headline(&e.response) && r.last_day(&e.response) == Some(e.day))
        .filter_map(|e| {
            Some(EffectPoint {
                response: e.response.clone(),
                day: e.day,
                contrast: e.contrast,
                label: format!("{} / {}", e.treatment, e.control),
                lrr: e.lrr?,
                ci_low: e.ci_low,
                ci_high: e.ci_high,
                note: e.note.clone(),
            })
        })
        .collect();
    let predator_split = r
        .predator_split
        .iter()
        .filter(|p| headline(&p.response) && r.last_day(&p.response) == Some(p.day))
        .cloned()
        .collect();
    Charts {
        cover_over_time,
        damage_by_treatment,
        survival_curves,
        effect_sizes,
        predator_split,
    }
}
