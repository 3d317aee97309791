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

/// The cages of one treatment with a value of a response on a day, in label
/// order, and their values.
#[derive(Debug, Default)]
struct CageValues {
    cages: Vec<usize>,
    values: Vec<f64>,
}

/// The values of one response on one day, by treatment, and their summaries.
#[derive(Debug)]
struct ResponseDay {
    name: usize,
    day: i64,
    by_treatment: BTreeMap<usize, CageValues>,
    summaries: BTreeMap<usize, summary::Summary>,
}

/// Response names, interned.
#[derive(Debug, Default)]
struct Names {
    names: Vec<String>,
    ids: std::collections::HashMap<String, usize>,
}

impl Names {
    /// The id of a name, added if new.
    fn id(&mut self, name: &str) -> usize {
        if let Some(id) = self.ids.get(name) {
            return *id;
        }
        self.names.push(name.to_owned());
        self.ids.insert(name.to_owned(), self.names.len() - 1);
        self.names.len() - 1
    }

    fn name(&self, id: usize) -> &str {
        &self.names[id]
    }

    /// Each id's position in name order.
    fn ranks(&self) -> Vec<usize> {
        let mut order: Vec<usize> = (0..self.names.len()).collect();
        order.sort_by(|a, b| self.names[*a].cmp(&self.names[*b]));
        let mut rank = vec![0; order.len()];
        for (position, id) in order.into_iter().enumerate() {
            rank[id] = position;
        }
        rank
    }
}

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

    // Every response per cage and day. Names are interned: a large season
    // has hundreds of thousands of values but only a few dozen responses.
    let cage_of: std::collections::HashMap<EnclosureId, usize> = season
        .cages
        .iter()
        .enumerate()
        .map(|(i, c)| (c.id, i))
        .collect();
    let cage_index = |id: EnclosureId| cage_of.get(&id).copied().unwrap_or_default();
    let mut names = Names::default();
    let mut values: Vec<(usize, i64, usize, f64)> = Vec::new();
    let mut by_group = std::collections::HashMap::new();
    for g in &group_cover {
        let name = *by_group
            .entry(g.plant_group)
            .or_insert_with(|| names.id(&format!("{}{}", response::COVER_GROUP, g.plant_group)));
        values.push((name, g.day, cage_index(g.cage.enclosure_id), g.cover_pct));
    }
    let mut by_taxon = std::collections::HashMap::new();
    for s in &species_cover {
        let name = *by_taxon
            .entry(s.taxon.as_str())
            .or_insert_with(|| names.id(&format!("{}{}", response::COVER_TAXON, s.taxon)));
        values.push((name, s.day, cage_index(s.cage.enclosure_id), s.cover_pct));
    }
    let total = names.id(response::COVER_TOTAL);
    let indices = [
        "richness",
        "shannon",
        "pielou",
        "simpson",
        "gini_simpson",
        "inverse_simpson",
        "hill_1",
    ]
    .map(|index| names.id(&format!("{}{index}", response::DIVERSITY)));
    for d in &diversity {
        let cage = cage_index(d.cage.enclosure_id);
        let i = &d.index;
        values.push((total, d.day, cage, i.total_cover_pct));
        let index_values = [
            Some(i.richness as f64),
            i.shannon,
            i.pielou,
            i.simpson,
            i.gini_simpson,
            i.inverse_simpson,
            i.hill_1,
        ];
        for (name, value) in indices.iter().zip(index_values) {
            if let Some(v) = value {
                values.push((*name, d.day, cage, v));
            }
        }
    }
    let (damage_index, damage_mean) = (
        names.id(response::DAMAGE_INDEX),
        names.id(response::DAMAGE_MEAN),
    );
    for vd in &damage {
        let (index, mean) = herbivory::summarise_leaves(&vd.all());
        if let Some(v) = index {
            values.push((damage_index, vd.day, vd.cage, v));
        }
        if let Some(v) = mean {
            values.push((damage_mean, vd.day, vd.cage, v));
        }
    }
    for ((cage, code), s) in &histories {
        let name = names.id(&format!("{}{code}", response::SURVIVAL));
        for c in &s.history.censuses {
            values.push((name, c.day, *cage, c.survival));
        }
    }
    // Order: response name, day, cage label (cages are held in label order).
    let rank = names.ranks();
    values.sort_by_key(|(name, day, cage, _)| (rank[*name], *day, *cage));
    let cage_response: Vec<CageResponse> = values
        .iter()
        .map(|(name, day, cage, v)| CageResponse {
            cage: CageRef::of(&season, *cage),
            response: names.name(*name).to_owned(),
            day: *day,
            value: *v,
        })
        .collect();

    // Cage values per (response, day) and treatment, cages in label order.
    let mut groups: Vec<ResponseDay> = Vec::new();
    for (name, day, cage, v) in &values {
        let Some(t) = season.cages[*cage].treatment else {
            continue;
        };
        if groups
            .last()
            .is_none_or(|g| (g.name, g.day) != (*name, *day))
        {
            groups.push(ResponseDay {
                name: *name,
                day: *day,
                by_treatment: BTreeMap::new(),
                summaries: BTreeMap::new(),
            });
        }
        if let Some(g) = groups.last_mut() {
            let cv = g.by_treatment.entry(t).or_default();
            cv.cages.push(*cage);
            cv.values.push(*v);
        }
    }
    let mut treatment_summary = Vec::new();
    for g in &mut groups {
        for (t, cv) in &g.by_treatment {
            if let Some(s) = summary::summarise(&cv.values)? {
                let treatment = &season.treatments[*t];
                treatment_summary.push(TreatmentSummaryRow {
                    response: names.name(g.name).to_owned(),
                    day: g.day,
                    treatment_id: treatment.id,
                    treatment: treatment.code.clone(),
                    n: s.n as i64,
                    mean: s.mean,
                    sd: s.sd,
                    se: s.se,
                    ci_low: s.ci_low,
                    ci_high: s.ci_high,
                });
                g.summaries.insert(*t, s);
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
    fn group<'a>(season: &'a Season, g: &'a ResponseDay, t: usize) -> Option<effects::Group<'a>> {
        Some(effects::Group {
            code: &season.treatments[t].code,
            values: &g.by_treatment.get(&t)?.values,
            summary: g.summaries.get(&t)?,
        })
    }
    let mut effect = Vec::new();
    // Splits wait for their bootstrap: (stream key, response-day, treatments).
    let mut split_jobs: Vec<(String, usize, [usize; 3])> = Vec::new();
    for (i, g) in groups.iter().enumerate() {
        let response = names.name(g.name);
        for (contrast, t, c) in &pairs {
            if let (Some(tg), Some(cg)) = (group(&season, g, *t), group(&season, g, *c)) {
                effect.push(effects::effect_row(response, g.day, *contrast, tg, cg));
            }
        }
        for n in &no_predator {
            for l in &lethal {
                for k in &risk {
                    let trio = [*n, *l, *k];
                    if trio.iter().any(|t| !g.summaries.contains_key(t)) {
                        continue;
                    }
                    // The stream is keyed by the day and the cages resampled, so
                    // every response measured on the same cages shares one draw.
                    let labels: Vec<String> = trio
                        .iter()
                        .map(|t| {
                            g.by_treatment[t]
                                .cages
                                .iter()
                                .map(|c| season.cages[*c].label.as_str())
                                .collect::<Vec<_>>()
                                .join(",")
                        })
                        .collect();
                    split_jobs.push((format!("{}|{}", g.day, labels.join("|")), i, trio));
                }
            }
        }
    }
    split_jobs.sort_by(|a, b| a.0.cmp(&b.0));
    let mut predator_split = Vec::new();
    let mut resamples: Option<(String, effects::Resamples)> = None;
    for (stream, i, [n, l, k]) in split_jobs {
        let g = &groups[i];
        let (Some(ng), Some(lg), Some(rg)) = (
            group(&season, g, n),
            group(&season, g, l),
            group(&season, g, k),
        ) else {
            continue;
        };
        if resamples.as_ref().is_none_or(|(s, _)| *s != stream) {
            let sizes = [ng.values.len(), lg.values.len(), rg.values.len()];
            let seed = effects::stream_seed(options.bootstrap_seed, &stream);
            let draw = effects::Resamples::draw(sizes, options.bootstrap_reps, seed);
            resamples = Some((stream, draw));
        }
        if let Some((_, draw)) = &resamples {
            predator_split.push(effects::split_row(
                names.name(g.name),
                g.day,
                ng,
                lg,
                rg,
                draw,
            ));
        }
    }
    predator_split.sort_by(|a, b| {
        (&a.response, a.day, &a.no_predator, &a.lethal, &a.risk).cmp(&(
            &b.response,
            b.day,
            &b.no_predator,
            &b.lethal,
            &b.risk,
        ))
    });

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
