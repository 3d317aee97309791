//! Synthetic seasons of any size, for benchmarks and scale tests: blocks of
//! four cages (the demo's four treatments), `species` plants, a stocking visit
//! on day 0 and `visits` visits of each other kind. Seeded, so a size always
//! gives the same season. Numbers are random draws, not a model of anything;
//! they are drawn within what the day's-end checks accept (counts within what
//! was stocked, no animals where the treatment has none, little damage without
//! herbivores), so the flags of a synthetic season are the few that chance
//! makes (cover totals above 100 %), as in a well-kept real season.

use std::fmt::Write as _;
use std::path::Path;

use chrono::{Duration, FixedOffset, NaiveDate, TimeZone};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

use fieldcage_core::model::*;
use fieldcage_core::record::{self, CoverEntry, CoverTarget, DamageEntry, NewVisit};
use fieldcage_core::setup;
use fieldcage_core::store::Store;
use fieldcage_core::{Error, Result};

/// The size of a synthetic season.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct SeasonSize {
    /// Cages (rounded up to a multiple of 4, one per treatment and block).
    pub cages: usize,
    /// Visits of each kind (census, cover, damage) per cage.
    pub visits: usize,
    /// Plant species recorded at every cover visit.
    pub species: usize,
}

impl SeasonSize {
    /// Rows of cover records the season holds (species plus one ground category).
    pub fn cover_rows(&self) -> usize {
        self.blocks() * 4 * self.visits * (self.species + 1)
    }

    fn blocks(&self) -> usize {
        self.cages.div_ceil(4).max(1)
    }
}

/// The experiment definition of a synthetic season.
pub fn definition_text(size: SeasonSize) -> String {
    let mut t = String::new();
    let _ = write!(
        t,
        "[experiment]\ncode = \"synthetic\"\ntitle = \"Synthetic season ({} cages, {} visits, {} species)\"\n\
         start_date = 2026-04-01\nutc_offset = \"+00:00\"\n\n[[site]]\ncode = \"SYN\"\nname = \"Synthetic site\"\n\n",
        size.blocks() * 4,
        size.visits,
        size.species
    );
    for b in 0..size.blocks() {
        let labels: Vec<String> = (0..4)
            .map(|i| format!("\"Z-{:04}\"", b * 4 + i + 1))
            .collect();
        let _ = write!(
            t,
            "[[block]]\ncode = \"K{:03}\"\nenclosures = [{}]\n\n",
            b + 1,
            labels.join(", ")
        );
    }
    t.push_str("[enclosure_defaults]\narea_m2 = 0.5\n\n");
    for (code, herb, mode, stock) in [
        ("P", false, "none", ""),
        (
            "S",
            true,
            "none",
            r#"{ taxon = "HERB", count = 10, restock_below = 5 }"#,
        ),
        (
            "SB",
            true,
            "lethal",
            r#"{ taxon = "HERB", count = 10, restock_below = 5 }, { taxon = "PRED", count = 2 }"#,
        ),
        (
            "SR",
            true,
            "risk",
            r#"{ taxon = "HERB", count = 10, restock_below = 5 }, { taxon = "PRED", count = 2 }"#,
        ),
    ] {
        let _ = write!(
            t,
            "[[treatment]]\ncode = \"{code}\"\nname = \"{code}\"\nherbivores = {herb}\npredator_mode = \"{mode}\"\nstock = [{stock}]\n\n"
        );
    }
    let groups = ["grass", "forb", "legume", "sedge"];
    for s in 0..size.species {
        let _ = write!(
            t,
            "[[taxon]]\ncode = \"PL{s:03}\"\nscientific_name = \"Planta synthetica {s}\"\nrole = \"plant\"\nplant_group = \"{}\"\n\n",
            groups[s % groups.len()]
        );
    }
    t.push_str("[[taxon]]\ncode = \"HERB\"\nscientific_name = \"Herbivorus syntheticus\"\nrole = \"herbivore\"\n\n");
    t.push_str("[[taxon]]\ncode = \"PRED\"\nscientific_name = \"Predator syntheticus\"\nrole = \"predator\"\n\n");
    t.push_str(
        "[cover]\ncode = \"visual\"\nmethod = \"percent\"\nground = [{ code = \"bare\", name = \"Bare\" }]\n\n\
         [damage]\ncode = \"classes\"\nmethod = \"class\"\nscale = \"dirzo-dominguez\"\nleaves_per_enclosure = 3\n\n",
    );
    let days: Vec<String> = (1..=size.visits).map(|d| d.to_string()).collect();
    let _ = write!(
        t,
        "[schedule]\nstocking = [0]\ncensus = [{d}]\ncover = [{d}]\ndamage = [{d}]\n",
        d = days.join(", ")
    );
    t
}

/// Build a synthetic season into an empty database.
pub fn build(store: &mut Store, size: SeasonSize, seed: u64) -> Result<()> {
    build_share(store, size, seed, 0, 1)
}

/// Set up a synthetic season in an empty database without recording visits
/// (a tablet that joins the crew). The setup rows are the same as those of
/// [`build`] and [`build_share`] with the same seed.
pub fn set_up(store: &mut Store, size: SeasonSize, seed: u64) -> Result<()> {
    let def = setup::definition::parse(Path::new("synthetic.toml"), &definition_text(size))?;
    setup::init(store, &def, seed).map(drop)
}

/// Set up a synthetic season in an empty database and record the visits of
/// the cages whose position modulo `devices` is `share`: one tablet of a crew
/// of `devices` (ids seeded by `seed` and the share, so that tablets never
/// make the same id; the setup is the same on every tablet).
pub fn build_share(
    store: &mut Store,
    size: SeasonSize,
    seed: u64,
    share: usize,
    devices: usize,
) -> Result<()> {
    let def = setup::definition::parse(Path::new("synthetic.toml"), &definition_text(size))?;
    store.use_seeded_ids(
        seed.wrapping_add(share as u64 * 1_000_003),
        1_775_000_000_000,
    );
    setup::init(store, &def, seed)?;
    let enclosures: Vec<Enclosure> = store
        .list::<Enclosure>()?
        .into_iter()
        .enumerate()
        .filter(|(i, _)| i % devices.max(1) == share)
        .map(|(_, e)| e)
        .collect();
    let taxa = store.list::<Taxon>()?;
    let plants: Vec<TaxonId> = taxa
        .iter()
        .filter(|t| t.role == Role::Plant)
        .map(|t| t.id)
        .collect();
    let animals: Vec<TaxonId> = taxa
        .iter()
        .filter(|t| t.role != Role::Plant)
        .map(|t| t.id)
        .collect();
    let treatment_of: std::collections::HashMap<EnclosureId, TreatmentId> = store
        .list::<Assignment>()?
        .into_iter()
        .map(|a| (a.enclosure_id, a.treatment_id))
        .collect();
    let herbivores: std::collections::HashMap<TreatmentId, bool> = store
        .list::<Treatment>()?
        .into_iter()
        .map(|t| (t.id, t.herbivores))
        .collect();
    let plans = store.list::<StockingPlan>()?;
    let start =
        NaiveDate::from_ymd_opt(2026, 4, 1).ok_or_else(|| Error::State("bad start date".into()))?;
    let utc = FixedOffset::east_opt(0).ok_or_else(|| Error::State("bad offset".into()))?;
    let mut rng = ChaCha8Rng::seed_from_u64(seed.wrapping_add(share as u64));
    // One transaction per cage, as a crew saves cage by cage (so the WAL of
    // a large season stays small).
    for (i, e) in enclosures.iter().enumerate() {
        store.write(|w| {
            let at = |day: usize, minute: usize| {
                let local = (start + Duration::days(day as i64))
                    .and_hms_opt(8, 0, 0)
                    .unwrap_or_default()
                    + Duration::minutes((i * 4 + minute) as i64);
                utc.from_utc_datetime(&local)
            };
            let visit = |w: &mut fieldcage_core::store::Writer<'_>, kind, day: usize, minute| {
                record::start_visit(
                    w,
                    NewVisit {
                        enclosure_id: e.id,
                        kind,
                        day: Some(day as i64),
                        visited_at: at(day, minute),
                        observer: Some("synthetic".into()),
                        device: None,
                    },
                )
            };
            let treatment = treatment_of[&e.id];
            let stocked: Vec<(TaxonId, i64)> = animals
                .iter()
                .map(|a| {
                    let plan = plans
                        .iter()
                        .find(|p| p.treatment_id == treatment && p.taxon_id == *a);
                    (*a, plan.map_or(0, |p| p.initial_count))
                })
                .collect();
            let v = visit(w, VisitKind::Stocking, 0, 0)?;
            for (a, n) in &stocked {
                if *n > 0 {
                    record::stock(w, v.id, *a, StockingKind::Initial, *n, None)?;
                }
            }
            // Damage accrues slowly where no herbivores were stocked.
            let damage_step = if herbivores[&treatment] { 4.0 } else { 0.4 };
            let mut leaves = Vec::new();
            for k in 0..3 {
                let leaf = record::tag_leaf(
                    w,
                    e.id,
                    plants[k % plants.len()],
                    &format!("{}-T{}", e.label, k + 1),
                    start,
                    None,
                )?;
                leaves.push(leaf.id);
            }
            let mut damage = [0.0f64; 3];
            for day in 1..=size.visits {
                let v = visit(w, VisitKind::Census, day, 0)?;
                for (a, n) in &stocked {
                    // Between half the stocked number (the restock threshold) and all of them.
                    let alive = if *n > 0 {
                        rng.random_range((n + 1) / 2..=*n)
                    } else {
                        0
                    };
                    record::census(w, v.id, *a, Some(alive), Some(0), Some(n - alive))?;
                }
                let v = visit(w, VisitKind::Cover, day, 1)?;
                let mut total = 0.0;
                for p in &plants {
                    let c =
                        f64::from(rng.random_range(0..(200 / size.species.max(1)).max(2) as u32));
                    total += c;
                    record::cover(
                        w,
                        v.id,
                        CoverTarget::Taxon(*p),
                        CoverEntry::Percent(c.min(100.0)),
                    )?;
                }
                let bare = (100.0 - total).max(0.0);
                record::cover(
                    w,
                    v.id,
                    CoverTarget::Category("bare".into()),
                    CoverEntry::Percent(bare),
                )?;
                let v = visit(w, VisitKind::Damage, day, 2)?;
                for (leaf, d) in leaves.iter().zip(damage.iter_mut()) {
                    *d = (*d + rng.random_range(0.0..damage_step)).min(100.0);
                    let class = fieldcage_core::demo::damage_class(*d);
                    record::damage(w, v.id, *leaf, DamageEntry::Class(class.into()))?;
                }
            }
            Ok(())
        })?;
    }
    Ok(())
}
