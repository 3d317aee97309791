//! The demo season: the invented wet-meadow experiment of
//! `demo_data/definition.toml`, with a whole season of field records made by a
//! small seeded simulation and written through the same field-entry commands
//! the crew uses. The result is the same on every build (seeded ids, seeded
//! draws), so its exported tables can be shipped in `demo_data/season/` and
//! checked for drift. Tests build their fixtures with this code too.
//!
//! The simulation is a toy for demonstration, not a model of any real system.
//! A few deliberate problems are planted for the day's-end checks; they are
//! listed by [`planted_problems`] and in `demo_data/README.md`.

use std::collections::HashMap;
use std::path::Path;

use chrono::{DateTime, Duration, FixedOffset, NaiveDate};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

use crate::model::*;
use crate::record::{self, CoverEntry, CoverTarget, DamageEntry, NewVisit};
use crate::season::Frame;
use crate::setup::{self, Definition};
use crate::store::{Store, Writer};
use crate::{Error, Result, checks};

/// The demo definition file, as shipped.
pub const DEFINITION: &str = include_str!("../../../demo_data/definition.toml");

/// Seed of the demo's treatment randomisation.
pub const LAYOUT_SEED: u64 = 20_260_511;

/// Seed of the demo's simulated field records and ids.
const RECORD_SEED: u64 = 7_311;

/// The demo definition, checked.
pub fn definition() -> Result<Definition> {
    setup::definition::parse(Path::new("demo_data/definition.toml"), DEFINITION)
}

/// A deliberate problem planted in the demo season.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct PlantedProblem {
    /// Cage label.
    pub enclosure: String,
    /// Day of the experiment.
    pub day: i64,
    /// What was planted.
    pub what: &'static str,
}

/// The crew lead's note on the one flag the demo confirms: the slug in the
/// plants-only cage was real (invented).
pub const CONFIRMATION_NOTE: &str = "The slug was really there: it came in under the rim where the mesh had lifted after rain. Removed, rim pegged down.";

/// Build the whole demo season into an empty database, run the day's-end
/// checks as of the end of the season and confirm the contamination flag
/// (the crew lead's day's-end work), so that the demo holds flags of every
/// status the data allow.
pub fn build(store: &mut Store) -> Result<Vec<PlantedProblem>> {
    build_as_of(store, None)
}

/// The time of a field day up to which [`build_as_of`] records: mid-morning,
/// when the crew is half-way round (the cages visited after it are still due).
pub const AS_OF_TIME: (u32, u32) = (9, 45);

/// [`build`] as the season stood on `as_of` at [`AS_OF_TIME`] (local): every
/// visit made by then is recorded, none after it, so a crew opening the demo
/// on that day finds cages still due and nothing dated in the future. `None`
/// (or a day after the season) builds the whole season. The checks run as of
/// the end of that day (or of the season).
pub fn build_as_of(store: &mut Store, as_of: Option<NaiveDate>) -> Result<Vec<PlantedProblem>> {
    let def = definition()?;
    store.use_seeded_ids(RECORD_SEED, start_millis(&def));
    setup::init(store, &def, LAYOUT_SEED)?;
    let mut season = Season::load(store, &def)?;
    let end = check_day(&def);
    let as_of = as_of.filter(|d| *d < end);
    season.until = as_of.and_then(|d| {
        d.and_hms_opt(AS_OF_TIME.0, AS_OF_TIME.1, 0)?
            .and_local_timezone(season.offset)
            .single()
    });
    let problems = season.plan_problems();
    store.write(|w| season.record(w, &problems))?;
    let report = checks::run(store, &checks::Scope::Season, as_of.unwrap_or(end))?;
    if let Some(flag) = report
        .flags
        .iter()
        .find(|f| f.rule_id == checks::counts::CONTAMINATION.id)
    {
        checks::confirm(store, &flag.id.to_string(), CONFIRMATION_NOTE)?;
    }
    Ok(problems)
}

/// Open the database at `path`, building the demo season into it when it holds
/// no experiment yet (a new file) — as it stood on `as_of` ([`build_as_of`]).
/// Used by `fieldcage serve --demo` and the tablet app's `--demo`, which open
/// it on their field day.
pub fn open_or_build(path: &Path, as_of: Option<NaiveDate>) -> Result<Store> {
    let mut store = Store::open(path)?;
    let experiments: i64 = store.conn().query_row(
        "SELECT count(*) FROM experiment WHERE deleted = 0",
        [],
        |r| r.get(0),
    )?;
    if experiments == 0 {
        build_as_of(&mut store, as_of)?;
    }
    Ok(store)
}

/// The day the demo's checks run as of: the last day any planned visit is
/// on time, so that every visit is due and none is in the future.
pub fn check_day(def: &Definition) -> NaiveDate {
    let last = def
        .schedule
        .iter()
        .map(|(_, day, grace)| day + grace)
        .max()
        .unwrap_or(0);
    def.start_date() + Duration::days(last)
}

/// The problems the demo plants, found from the demo's layout (which is fixed
/// by [`LAYOUT_SEED`]).
pub fn planted_problems(store: &Store) -> Result<Vec<PlantedProblem>> {
    let def = definition()?;
    Ok(Season::load(store, &def)?.plan_problems())
}

fn start_millis(def: &Definition) -> u64 {
    let start = def.start_date().and_hms_opt(6, 0, 0).unwrap_or_default();
    start.and_utc().timestamp_millis().max(0) as u64
}

struct Cage {
    id: EnclosureId,
    label: String,
    block: String,
    index: usize,
    treatment: String,
    herbivores: bool,
    mode: PredatorMode,
}

struct Season {
    start: NaiveDate,
    offset: FixedOffset,
    cages: Vec<Cage>,
    taxa: HashMap<String, TaxonId>,
    plans: HashMap<(String, String), StockingPlan>,
    schedule: Vec<(VisitKind, i64)>,
    /// Record only the visits made by then (`None`: all).
    until: Option<DateTime<FixedOffset>>,
}

/// What one planted problem does to the records.
#[derive(Clone, Copy, PartialEq)]
enum Plant {
    CoverTypo,
    SkippedCensus,
    Contamination,
    TooManyAlive,
    DamageDecrease,
    LeafUnscored,
    NoObserver,
    DuplicateCensus,
}

impl Season {
    /// The demo's view of the season just set up: the shared [`Frame`]
    /// with the taxa by code.
    fn load(store: &Store, def: &Definition) -> Result<Season> {
        let frame = Frame::load(store)?;
        let mut cages = Vec::with_capacity(frame.cages.len());
        // The frame's cages are ordered by label: `index` is the place on
        // the crew's round.
        for (index, c) in frame.cages.iter().enumerate() {
            let t = c.treatment.as_ref().ok_or_else(|| {
                Error::Invariant(format!("demo cage {} has no treatment", c.label))
            })?;
            cages.push(Cage {
                id: c.id,
                label: c.label.clone(),
                block: c.block.clone(),
                index,
                treatment: t.code.clone(),
                herbivores: t.herbivores,
                mode: t.predator_mode,
            });
        }
        let taxa: HashMap<String, TaxonId> = store
            .list::<Taxon>()?
            .into_iter()
            .map(|t| (t.code, t.id))
            .collect();
        let taxon_code: HashMap<TaxonId, String> =
            taxa.iter().map(|(c, id)| (*id, c.clone())).collect();
        let treatment_code: HashMap<TreatmentId, String> = frame
            .cages
            .iter()
            .filter_map(|c| c.treatment.as_ref())
            .map(|t| (t.id, t.code.clone()))
            .collect();
        // Plans of a treatment no cage has are never asked for.
        let plans = frame
            .plans
            .into_values()
            .filter_map(|p| {
                let key = (
                    treatment_code.get(&p.treatment_id)?.clone(),
                    taxon_code.get(&p.taxon_id)?.clone(),
                );
                Some((key, p))
            })
            .collect();
        Ok(Season {
            start: frame.calendar.start,
            offset: frame.calendar.offset,
            cages,
            taxa,
            plans,
            schedule: def.schedule.iter().map(|(k, d, _)| (*k, *d)).collect(),
            until: None,
        })
    }

    /// First cage of a treatment in a block.
    fn cage(&self, block: &str, treatment: &str) -> &Cage {
        self.cages
            .iter()
            .find(|c| c.block == block && c.treatment == treatment)
            .unwrap_or(&self.cages[0])
    }

    fn plan_problems(&self) -> Vec<PlantedProblem> {
        let p = |c: &Cage, day, what| PlantedProblem {
            enclosure: c.label.clone(),
            day,
            what,
        };
        vec![
            p(
                self.cage("B3", "S"),
                14,
                "cover typo: a forb entered as 45 % instead of 4.5 %, so species + ground exceed 100 %",
            ),
            p(
                self.cage("B4", "SB"),
                18,
                "census visit skipped (missing repeat visit)",
            ),
            p(
                self.cage("B4", "P"),
                21,
                "one slug found alive in a plants-only cage (contamination)",
            ),
            p(
                self.cage("B2", "S"),
                12,
                "12 slugs counted alive in a cage stocked with 10",
            ),
            p(
                self.cage("B2", "SR"),
                21,
                "damage on tagged leaf T1 scored lower than at day 14, with no fate",
            ),
            p(
                self.cage("B5", "SB"),
                28,
                "tagged leaf T3 not scored and no fate recorded",
            ),
            p(
                self.cage("B1", "S"),
                9,
                "census recorded without an observer",
            ),
            p(
                self.cage("B6", "SR"),
                27,
                "census entered twice on the same day",
            ),
        ]
    }

    fn problem(&self, problems: &[PlantedProblem], cage: &Cage, day: i64) -> Option<Plant> {
        let i = problems
            .iter()
            .position(|p| p.enclosure == cage.label && p.day == day)?;
        Some(
            [
                Plant::CoverTypo,
                Plant::SkippedCensus,
                Plant::Contamination,
                Plant::TooManyAlive,
                Plant::DamageDecrease,
                Plant::LeafUnscored,
                Plant::NoObserver,
                Plant::DuplicateCensus,
            ][i],
        )
    }

    fn at(&self, day: i64, cage: &Cage, minutes: i64) -> DateTime<FixedOffset> {
        let local = (self.start + Duration::days(day))
            .and_hms_opt(8, 30, 0)
            .unwrap_or_default()
            + Duration::minutes(6 * cage.index as i64 + minutes);
        local
            .and_local_timezone(self.offset)
            .single()
            .unwrap_or_else(|| DateTime::from_naive_utc_and_offset(local, self.offset))
    }

    fn record(&self, w: &mut Writer<'_>, problems: &[PlantedProblem]) -> Result<()> {
        let mut rng = ChaCha8Rng::seed_from_u64(RECORD_SEED);
        let slug = self.taxa["SLUG"];
        let beetle = self.taxa["BEET"];
        let plants = [
            "GRA1", "GRA2", "CLO1", "CLO2", "FOR1", "FOR2", "FOR3", "SED1",
        ];
        let leaf_taxa = ["FOR1", "CLO1", "FOR2"];
        let last_day = self.schedule.iter().map(|(_, d)| *d).max().unwrap_or(0);
        for cage in &self.cages {
            let observer = if cage.index % 2 == 0 {
                "crew-A"
            } else {
                "crew-B"
            };
            let visit = |w: &mut Writer<'_>, kind, day, minutes, observer: Option<&str>| {
                record::start_visit(
                    w,
                    NewVisit {
                        enclosure_id: cage.id,
                        kind,
                        day: Some(day),
                        visited_at: self.at(day, cage, minutes),
                        observer: observer.map(str::to_owned),
                        device: Some("tablet-1".to_owned()),
                    },
                )
            };
            let plan = |taxon: &str| self.plans.get(&(cage.treatment.clone(), taxon.to_owned()));
            // Animals in the cage now, and those that died unseen since the last census.
            let mut slugs = plan("SLUG").map_or(0, |p| p.initial_count);
            let mut beetles = plan("BEET").map_or(0, |p| p.initial_count);
            let (mut slug_dead, mut slug_gone, mut beetle_dead) = (0i64, 0i64, 0i64);
            let mut slug_days = 0.0f64;
            // Cover state: base community of this cage.
            let mut cover: Vec<f64> = [24.0, 14.0, 10.0, 8.0, 12.0, 6.0, 5.0, 7.0]
                .iter()
                .map(|c| (c * rng.random_range(0.7..1.3f64)).round())
                .collect();
            let mut leaves: Vec<(LeafId, f64)> = Vec::new();

            for day in 0..=last_day {
                // Slugs die at a daily rate that a lethal beetle raises (toy numbers).
                if day > 0 {
                    let kill = if cage.mode == PredatorMode::Lethal && beetles > 0 {
                        0.04
                    } else {
                        0.0
                    };
                    for _ in 0..slugs.max(0) {
                        let u: f64 = rng.random();
                        if u < kill {
                            slugs -= 1;
                            slug_gone += 1;
                        } else if u < kill + 0.008 {
                            slugs -= 1;
                            if rng.random_bool(0.6) {
                                slug_dead += 1
                            } else {
                                slug_gone += 1
                            }
                        }
                    }
                    for _ in 0..beetles.max(0) {
                        if rng.random_bool(0.004) {
                            beetles -= 1;
                            beetle_dead += 1;
                        }
                    }
                    // Slugs feed less when a predator is present (risk or lethal).
                    let fear = if cage.mode == PredatorMode::None {
                        1.0
                    } else {
                        0.55
                    };
                    slug_days += slugs as f64 * fear;
                }
                let plant = self.problem(problems, cage, day);
                for (kind, _) in self.schedule.iter().filter(|(_, d)| *d == day) {
                    // Not yet made at the time the demo stands at.
                    if self
                        .until
                        .is_some_and(|until| self.at(day, cage, 0) > until)
                    {
                        continue;
                    }
                    match kind {
                        VisitKind::Stocking => {
                            let v = visit(w, VisitKind::Stocking, day, 0, Some(observer))?;
                            for (code, taxon) in [("SLUG", slug), ("BEET", beetle)] {
                                if let Some(p) = plan(code) {
                                    record::stock(
                                        w,
                                        v.id,
                                        taxon,
                                        StockingKind::Initial,
                                        p.initial_count,
                                        p.stage.clone(),
                                    )?;
                                }
                            }
                            record::complete_visit(w, v.id)?;
                        }
                        VisitKind::Census => {
                            if plant == Some(Plant::SkippedCensus) {
                                continue;
                            }
                            let obs = (plant != Some(Plant::NoObserver)).then_some(observer);
                            let repeats = if plant == Some(Plant::DuplicateCensus) {
                                2
                            } else {
                                1
                            };
                            for r in 0..repeats {
                                let v = visit(w, VisitKind::Census, day, 1 + 3 * r, obs)?;
                                let mut alive = slugs;
                                if plant == Some(Plant::TooManyAlive) {
                                    alive = 12;
                                }
                                if plant == Some(Plant::Contamination) {
                                    alive = 1;
                                }
                                record::census(
                                    w,
                                    v.id,
                                    slug,
                                    Some(alive),
                                    Some(slug_dead),
                                    Some(slug_gone),
                                )?;
                                if plant == Some(Plant::Contamination) {
                                    // The crew takes the intruder out.
                                    record::stock(w, v.id, slug, StockingKind::Removal, 1, None)?;
                                }
                                record::census(
                                    w,
                                    v.id,
                                    beetle,
                                    Some(beetles),
                                    Some(beetle_dead),
                                    Some(0),
                                )?;
                                if r + 1 < repeats {
                                    continue;
                                }
                                if let Some(p) = plan("SLUG")
                                    && slugs < p.restock_below.unwrap_or(0)
                                {
                                    let n = p.initial_count - slugs;
                                    record::stock(
                                        w,
                                        v.id,
                                        slug,
                                        StockingKind::Restock,
                                        n,
                                        p.stage.clone(),
                                    )?;
                                    slugs += n;
                                }
                                if let Some(p) = plan("BEET")
                                    && beetles < p.restock_below.unwrap_or(0)
                                {
                                    let n = p.initial_count - beetles;
                                    record::stock(
                                        w,
                                        v.id,
                                        beetle,
                                        StockingKind::Restock,
                                        n,
                                        p.stage.clone(),
                                    )?;
                                    beetles += n;
                                }
                                record::complete_visit(w, v.id)?;
                            }
                            (slug_dead, slug_gone, beetle_dead) = (0, 0, 0);
                        }
                        VisitKind::Cover => {
                            let v = visit(w, VisitKind::Cover, day, 2, Some(observer))?;
                            // Grazing removes forbs and legumes; grasses and sedge fill in.
                            let pressure = (slug_days / 300.0).min(0.8);
                            for (i, code) in plants.iter().enumerate() {
                                let palatable = code.starts_with("FOR") || code.starts_with("CLO");
                                if palatable {
                                    cover[i] = (cover[i]
                                        * (1.0 - pressure * rng.random_range(0.6..1.0f64)))
                                    .round();
                                } else if day > 0 {
                                    cover[i] = (cover[i] * rng.random_range(1.0..1.15f64)).round();
                                }
                            }
                            slug_days = 0.0;
                            let mut total = 0.0;
                            for (i, code) in plants.iter().enumerate() {
                                let mut value = cover[i].clamp(0.0, 100.0);
                                if plant == Some(Plant::CoverTypo) && *code == "FOR1" {
                                    value = 45.0;
                                } else {
                                    total += value;
                                }
                                record::cover(
                                    w,
                                    v.id,
                                    CoverTarget::Taxon(self.taxa[*code]),
                                    CoverEntry::Percent(value),
                                )?;
                            }
                            if plant == Some(Plant::CoverTypo) {
                                total += 4.5;
                            }
                            let rest = (100.0 - total).max(0.0);
                            let moss = (rest * 0.2).round();
                            let bare = (rest * 0.3).round();
                            for (code, value) in [
                                ("litter", rest - moss - bare),
                                ("bare", bare),
                                ("moss", moss),
                            ] {
                                record::cover(
                                    w,
                                    v.id,
                                    CoverTarget::Category(code.to_owned()),
                                    CoverEntry::Percent(value),
                                )?;
                            }
                            if day == 0 {
                                for (i, code) in leaf_taxa.iter().enumerate() {
                                    let label = format!("{}-T{}", cage.label, i + 1);
                                    let leaf = record::tag_leaf(
                                        w,
                                        cage.id,
                                        self.taxa[*code],
                                        &label,
                                        self.start,
                                        None,
                                    )?;
                                    leaves.push((leaf.id, 0.0));
                                }
                            }
                            record::complete_visit(w, v.id)?;
                        }
                        VisitKind::Damage => {
                            let v = visit(w, VisitKind::Damage, day, 3, Some(observer))?;
                            let rate = match (cage.herbivores, cage.mode) {
                                (false, _) => 0.2,
                                (true, PredatorMode::None) => 1.8,
                                (true, PredatorMode::Lethal) => 0.7,
                                (true, PredatorMode::Risk) => 1.0,
                            };
                            for (i, (leaf, damage)) in leaves.iter_mut().enumerate() {
                                *damage = (*damage + rate * 7.0 * rng.random_range(0.2..1.4f64))
                                    .min(95.0);
                                if plant == Some(Plant::LeafUnscored) && i == 2 {
                                    continue;
                                }
                                let mut code = damage_class(*damage);
                                if plant == Some(Plant::DamageDecrease) && i == 0 {
                                    code = "0";
                                }
                                record::damage(
                                    w,
                                    v.id,
                                    *leaf,
                                    DamageEntry::Class(code.to_owned()),
                                )?;
                            }
                            record::complete_visit(w, v.id)?;
                        }
                    }
                }
            }
        }
        Ok(())
    }
}

/// Class of the damage scale holding a percent (classes of Dirzo & Domínguez
/// 1995, from memory).
pub fn damage_class(pct: f64) -> &'static str {
    match pct {
        x if x <= 0.0 => "0",
        x if x <= 6.0 => "1",
        x if x <= 12.0 => "2",
        x if x <= 25.0 => "3",
        x if x <= 50.0 => "4",
        _ => "5",
    }
}
