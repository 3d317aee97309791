//! Results for the analyst: cover, diversity, herbivory, survival, treatment
//! summaries and predator effects, computed from the stored season.
//!
//! Everything here reads the store and writes nothing: [`analyse`] gives a
//! [`Results`] whose tables are exported next to the data tables (schemas in
//! `schemas/tables/analysis/`), summarised in `report.md`, printed by
//! `fieldcage results`, and drawn by the UI ([`charts`]). The results are a
//! pure function of the stored rows: ordering is by labels and codes, the
//! bootstrap is seeded, and numbers are written with a fixed number of
//! decimals, so the same data always give the same bytes.
//!
//! The methods and their sources are named in each topic module:
//! [`cover`], [`diversity`], [`herbivory`], [`survival`], [`summary`],
//! [`effects`].

pub mod charts;
pub mod cover;
pub mod diversity;
pub mod effects;
pub mod herbivory;
pub mod probe;
pub mod report;
mod season;
pub mod summary;
pub mod survival;
pub mod tables;

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};

use crate::model::*;
use crate::store::Store;
use crate::{Error, Result};

pub use effects::{Contrast, EffectRow, SplitRow};
pub use survival::MissingRule;

use season::Season;

/// Plain-word notes on how the data were handled.
pub(crate) type Notes = Vec<String>;

/// Choices the analysis makes; the defaults are what `fieldcage export` and
/// `fieldcage results` use.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Options {
    /// How animals not found at a census count.
    pub missing_as: MissingRule,
    /// Bootstrap resamples for the non-consumptive share.
    pub bootstrap_reps: usize,
    /// Base seed of the bootstrap (each response and day gets its own stream).
    pub bootstrap_seed: u64,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            missing_as: MissingRule::Dead,
            bootstrap_reps: 2000,
            bootstrap_seed: 1,
        }
    }
}

/// The cage a row is about, with the labels the analyst reads.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CageRef {
    /// Enclosure id.
    pub enclosure_id: EnclosureId,
    /// Cage label.
    pub enclosure: String,
    /// Block code.
    pub block: String,
    /// Treatment code (`None` when unassigned).
    pub treatment: Option<String>,
}

impl CageRef {
    fn of(season: &Season, cage: usize) -> CageRef {
        let c = &season.cages[cage];
        CageRef {
            enclosure_id: c.id,
            enclosure: c.label.clone(),
            block: c.block.clone(),
            treatment: season.treatment_of(cage).map(|t| t.code.clone()),
        }
    }
}

/// One response of one cage on one day (analysis table `cage_response`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CageResponse {
    #[serde(flatten)]
    pub cage: CageRef,
    pub response: String,
    pub day: i64,
    pub value: f64,
}

/// Summary of one response for one treatment on one day (analysis table
/// `treatment_summary`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TreatmentSummaryRow {
    pub response: String,
    pub day: i64,
    pub treatment_id: TreatmentId,
    pub treatment: String,
    pub n: i64,
    pub mean: f64,
    pub sd: Option<f64>,
    pub se: Option<f64>,
    pub ci_low: Option<f64>,
    pub ci_high: Option<f64>,
}

/// A treatment and the role the contrasts give it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TreatmentRole {
    /// Code.
    pub code: String,
    /// Name.
    pub name: String,
    /// Herbivores stocked.
    pub herbivores: bool,
    /// Predator mode.
    pub predator_mode: PredatorMode,
}

/// Every result of a season.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Results {
    /// The options used.
    pub options: Options,
    /// Experiment code and title, when the database holds one.
    pub experiment: Option<(String, String)>,
    /// Treatments ordered by code.
    pub treatments: Vec<TreatmentRole>,
    /// Species cover per cover visit.
    pub species_cover: Vec<cover::SpeciesCoverRow>,
    /// Plant-group cover per cover visit.
    pub group_cover: Vec<cover::GroupCoverRow>,
    /// Diversity per cover visit.
    pub diversity: Vec<diversity::DiversityRow>,
    /// Herbivory per damage visit and plant species.
    pub herbivory: Vec<herbivory::HerbivoryRow>,
    /// Survival per cage and stocked taxon.
    pub cage_survival: Vec<survival::CageSurvivalRow>,
    /// Kaplan–Meier curves per treatment and stocked taxon.
    pub survival_curve: Vec<survival::SurvivalCurveRow>,
    /// Every response per cage and day.
    pub cage_response: Vec<CageResponse>,
    /// Treatment summaries per response and day.
    pub treatment_summary: Vec<TreatmentSummaryRow>,
    /// Log response ratios per response, day and contrast.
    pub effect: Vec<EffectRow>,
    /// Predator splits per response and day.
    pub predator_split: Vec<SplitRow>,
    /// How the data were handled (visits set aside, impossible counts, …).
    pub notes: Vec<String>,
}

/// Names of the responses (the `response` column and `--response`).
pub mod response {
    /// Summed species cover, percent.
    pub const COVER_TOTAL: &str = "cover.total";
    /// Prefix of a plant group's cover (`cover.group.forb`).
    pub const COVER_GROUP: &str = "cover.group.";
    /// Prefix of a species' cover (`cover.taxon.FOR1`).
    pub const COVER_TAXON: &str = "cover.taxon.";
    /// Prefix of diversity indices (`diversity.shannon`).
    pub const DIVERSITY: &str = "diversity.";
    /// Herbivory index of all tagged leaves of a cage.
    pub const DAMAGE_INDEX: &str = "damage.index";
    /// Mean percent damage of all tagged leaves of a cage.
    pub const DAMAGE_MEAN: &str = "damage.mean_pct";
    /// Prefix of the proportion of a stocked taxon recovered (`survival.SLUG`).
    pub const SURVIVAL: &str = "survival.";
}

/// Analyse the season in the store.
pub fn analyse(store: &Store, options: &Options) -> Result<Results> {
    if options.bootstrap_reps == 0 {
        return Err(Error::invalid(
            "analysis",
            "bootstrap_reps",
            0,
            "must be at least 1",
        ));
    }
    let season = Season::load(store)?;
    let mut notes = season.notes.clone();

    let covers = cover::visit_covers(&season, &mut notes);
    let (species_cover, group_cover) = cover::cover_rows(&season, &covers);
    let diversity = diversity::diversity_rows(&season, &covers)?;
    let damage = herbivory::visit_damage(&season, &mut notes);
    let herbivory = herbivory::herbivory_rows(&season, &damage);
    let histories = survival::cage_histories(&season, options.missing_as, &mut notes);
    let cage_survival = survival::cage_survival_rows(&season, &histories, options.missing_as)?;
    let survival_curve = survival::survival_curve_rows(&season, &histories, options.missing_as)?;

    // Every response per cage and day.
    let cage_of: std::collections::HashMap<EnclosureId, usize> = season
        .cages
        .iter()
        .enumerate()
        .map(|(i, c)| (c.id, i))
        .collect();
    let season_cage = |id: EnclosureId| cage_of.get(&id).copied().unwrap_or_default();
    let mut values: Vec<(String, i64, usize, f64)> = Vec::new();
    for g in &group_cover {
        let cage = season_cage(g.cage.enclosure_id);
        values.push((
            format!("{}{}", response::COVER_GROUP, g.plant_group),
            g.day,
            cage,
            g.cover_pct,
        ));
    }
    for s in &species_cover {
        let cage = season_cage(s.cage.enclosure_id);
        values.push((
            format!("{}{}", response::COVER_TAXON, s.taxon),
            s.day,
            cage,
            s.cover_pct,
        ));
    }
    for d in &diversity {
        let cage = season_cage(d.cage.enclosure_id);
        let i = &d.index;
        values.push((
            response::COVER_TOTAL.to_owned(),
            d.day,
            cage,
            i.total_cover_pct,
        ));
        for (name, value) in [
            ("richness", Some(i.richness as f64)),
            ("shannon", i.shannon),
            ("pielou", i.pielou),
            ("simpson", i.simpson),
            ("gini_simpson", i.gini_simpson),
            ("inverse_simpson", i.inverse_simpson),
            ("hill_1", i.hill_1),
        ] {
            if let Some(v) = value {
                values.push((format!("{}{name}", response::DIVERSITY), d.day, cage, v));
            }
        }
    }
    for vd in &damage {
        let (index, mean) = herbivory::summarise_leaves(&vd.all());
        if let Some(v) = index {
            values.push((response::DAMAGE_INDEX.to_owned(), vd.day, vd.cage, v));
        }
        if let Some(v) = mean {
            values.push((response::DAMAGE_MEAN.to_owned(), vd.day, vd.cage, v));
        }
    }
    for ((cage, code), s) in &histories {
        for c in &s.history.censuses {
            values.push((
                format!("{}{code}", response::SURVIVAL),
                c.day,
                *cage,
                c.survival,
            ));
        }
    }
    values.sort_by(|a, b| {
        (&a.0, a.1, &season.cages[a.2].label).cmp(&(&b.0, b.1, &season.cages[b.2].label))
    });
    let cage_response: Vec<CageResponse> = values
        .iter()
        .map(|(r, day, cage, v)| CageResponse {
            cage: CageRef::of(&season, *cage),
            response: r.clone(),
            day: *day,
            value: *v,
        })
        .collect();

    // Cage values per (response, day) and treatment, cages in label order.
    let mut groups: BTreeMap<(String, i64), BTreeMap<usize, Vec<f64>>> = BTreeMap::new();
    for (r, day, cage, v) in &values {
        if let Some(t) = season.cages[*cage].treatment {
            groups
                .entry((r.clone(), *day))
                .or_default()
                .entry(t)
                .or_default()
                .push(*v);
        }
    }
    let mut treatment_summary = Vec::new();
    let mut summaries: BTreeMap<(String, i64), BTreeMap<usize, summary::Summary>> = BTreeMap::new();
    for ((r, day), by_treatment) in &groups {
        for (t, vals) in by_treatment {
            if let Some(s) = summary::summarise(vals)? {
                let treatment = &season.treatments[*t];
                treatment_summary.push(TreatmentSummaryRow {
                    response: r.clone(),
                    day: *day,
                    treatment_id: treatment.id,
                    treatment: treatment.code.clone(),
                    n: s.n as i64,
                    mean: s.mean,
                    sd: s.sd,
                    se: s.se,
                    ci_low: s.ci_low,
                    ci_high: s.ci_high,
                });
                summaries
                    .entry((r.clone(), *day))
                    .or_default()
                    .insert(*t, s);
            }
        }
    }

    // Treatment roles, from the treatment rows.
    let role = |herbivores: bool, mode: PredatorMode| -> Vec<usize> {
        season
            .treatments
            .iter()
            .enumerate()
            .filter(|(_, t)| t.herbivores == herbivores && t.predator_mode == mode)
            .map(|(i, _)| i)
            .collect()
    };
    let plants_only = role(false, PredatorMode::None);
    let no_predator = role(true, PredatorMode::None);
    let lethal = role(true, PredatorMode::Lethal);
    let risk = role(true, PredatorMode::Risk);
    let pairs: Vec<(Contrast, usize, usize)> = Contrast::ALL
        .iter()
        .flat_map(|c| {
            let (ts, cs) = match c {
                Contrast::HerbivoresVsPlantsOnly => (&no_predator, &plants_only),
                Contrast::LethalVsNoPredator => (&lethal, &no_predator),
                Contrast::RiskVsNoPredator => (&risk, &no_predator),
            };
            ts.iter()
                .flat_map(move |t| cs.iter().map(move |k| (*c, *t, *k)))
        })
        .collect();
    let mut effect = Vec::new();
    let mut predator_split = Vec::new();
    for (key, by_treatment) in &summaries {
        let group = |t: usize| -> Option<effects::Group<'_>> {
            Some(effects::Group {
                code: &season.treatments[t].code,
                values: groups.get(key)?.get(&t)?,
                summary: by_treatment.get(&t)?,
            })
        };
        for (contrast, t, c) in &pairs {
            if let (Some(tg), Some(cg)) = (group(*t), group(*c)) {
                effect.push(effects::effect_row(&key.0, key.1, *contrast, tg, cg));
            }
        }
        for n in &no_predator {
            for l in &lethal {
                for k in &risk {
                    if let (Some(ng), Some(lg), Some(rg)) = (group(*n), group(*l), group(*k)) {
                        predator_split.push(effects::split_row(
                            &key.0,
                            key.1,
                            ng,
                            lg,
                            rg,
                            options.bootstrap_reps,
                            options.bootstrap_seed,
                        ));
                    }
                }
            }
        }
    }

    Ok(Results {
        options: *options,
        experiment: season
            .experiment
            .as_ref()
            .map(|e| (e.code.clone(), e.title.clone())),
        treatments: season
            .treatments
            .iter()
            .map(|t| TreatmentRole {
                code: t.code.clone(),
                name: t.name.clone(),
                herbivores: t.herbivores,
                predator_mode: t.predator_mode,
            })
            .collect(),
        species_cover,
        group_cover,
        diversity,
        herbivory,
        cage_survival,
        survival_curve,
        cage_response,
        treatment_summary,
        effect,
        predator_split,
        notes,
    })
}

impl Results {
    /// Every response name, sorted.
    pub fn responses(&self) -> Vec<&str> {
        let mut names: Vec<&str> = self
            .treatment_summary
            .iter()
            .map(|s| s.response.as_str())
            .collect();
        names.dedup();
        names
    }

    /// The last day a response was summarised.
    pub fn last_day(&self, response: &str) -> Option<i64> {
        self.treatment_summary
            .iter()
            .filter(|s| s.response == response)
            .map(|s| s.day)
            .max()
    }

    /// Effects and splits of one response (or all) on one day (or each
    /// response's last day). An unknown response or a day without data is
    /// an error naming the value and what there is.
    pub fn select(
        &self,
        response: Option<&str>,
        day: Option<i64>,
    ) -> Result<(Vec<&EffectRow>, Vec<&SplitRow>)> {
        let names = self.responses();
        if let Some(r) = response
            && !names.contains(&r)
        {
            return Err(Error::invalid(
                "results",
                "response",
                r,
                format!("is not a response of this season ({})", names.join(", ")),
            ));
        }
        let wanted = |r: &str, d: i64| {
            response.is_none_or(|x| x == r)
                && match day {
                    Some(day) => d == day,
                    None => self.last_day(r) == Some(d),
                }
        };
        let effects: Vec<&EffectRow> = self
            .effect
            .iter()
            .filter(|e| wanted(&e.response, e.day))
            .collect();
        let splits: Vec<&SplitRow> = self
            .predator_split
            .iter()
            .filter(|s| wanted(&s.response, s.day))
            .collect();
        if let (Some(d), true) = (day, effects.is_empty() && splits.is_empty()) {
            let mut days: Vec<i64> = self
                .effect
                .iter()
                .filter(|e| response.is_none_or(|x| x == e.response))
                .map(|e| e.day)
                .collect();
            days.sort_unstable();
            days.dedup();
            let days: Vec<String> = days.iter().map(i64::to_string).collect();
            return Err(Error::invalid(
                "results",
                "day",
                d,
                format!("has no effects; days with effects: {}", days.join(", ")),
            ));
        }
        Ok((effects, splits))
    }
}
