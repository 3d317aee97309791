//! Power loss: saves of cover values through the operation set (the calls
//! the HTTP API and the tablet app make) on a database opened through the
//! `powercut` VFS (`crates/powercut`), which keeps only what fsync made
//! durable. The power is cut at a seeded random write, truncate, sync or
//! delete; the files are rebuilt from their durable images plus a seeded
//! random subset of the unsynced writes, and the database is reopened with
//! the ordinary VFS. With `synchronous=FULL` (what `Store::open` sets) every
//! acknowledged save must be there; with `synchronous=NORMAL` the harness
//! must find lost acknowledged saves, which shows that it can see a loss.

use crate::util::Raw;
use chrono::NaiveDate;
use fieldcage_core::Store;
use fieldcage_core::model::{CoverRecord, Enclosure, Role, Taxon};
use fieldcage_ops::Service;
use fieldcage_powercut::Power;
use fieldcage_testkit::synth::{self, SeasonSize};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use serde_json::json;
use uuid::Uuid;

use crate::util::fast_temp;

/// Seeded power cuts per synchronous setting (each one a fresh database).
const RUNS: u64 = 24;
/// Saves a run would make if the power stayed on.
const SAVES: usize = 240;

const SIZE: SeasonSize = SeasonSize {
    cages: 8,
    visits: 10,
    species: 10,
};

/// One save to make: a cage, a plant, a field day and a percent.
#[derive(Debug, Clone, Copy)]
struct Save {
    cage: Uuid,
    plant: Uuid,
    day: u64,
    percent: f64,
}

/// What one run found after the power came back.
#[derive(Debug)]
struct Outcome {
    acknowledged: usize,
    lost: usize,
    integrity: String,
    cut: bool,
}

fn start() -> NaiveDate {
    // The synthetic season starts on 2026-04-01 (src/synth.rs).
    NaiveDate::from_ymd_opt(2026, 4, 1).unwrap()
}

/// A set-up synthetic season (no visits yet), closed cleanly.
fn template(dir: &std::path::Path) -> (std::path::PathBuf, Vec<Save>) {
    let path = dir.join("template.db");
    let mut store = Store::open(&path).unwrap();
    synth::set_up(&mut store, SIZE, 1).unwrap();
    let cages: Vec<Uuid> = store
        .list::<Enclosure>()
        .unwrap()
        .iter()
        .map(|e| e.id.0)
        .collect();
    let plants: Vec<Uuid> = store
        .list::<Taxon>()
        .unwrap()
        .iter()
        .filter(|t| t.role == Role::Plant)
        .map(|t| t.id.0)
        .collect();
    let mut rng = ChaCha8Rng::seed_from_u64(7);
    let mut saves = Vec::new();
    'all: for day in 1..=SIZE.visits as u64 {
        for &cage in &cages {
            for &plant in &plants {
                if saves.len() == SAVES {
                    break 'all;
                }
                saves.push(Save {
                    cage,
                    plant,
                    day,
                    percent: f64::from(rng.random_range(0..=40u32)),
                });
            }
        }
    }
    assert_eq!(saves.len(), SAVES);
    (path, saves)
}

/// Copy the template into a new folder, save until the power goes off after
/// `cut_after` operations (never, when `None`), restore, reopen and count
/// the acknowledged saves that are missing. Returns the outcome and the
/// operations seen.
fn run(
    template: &Store,
    saves: &[Save],
    synchronous: &str,
    checkpoint_pages: Option<u32>,
    cut_after: Option<u64>,
    seed: u64,
    keep: f64,
) -> (Outcome, u64) {
    let tmp = fast_temp();
    template.backup_to(tmp.path("season.db")).unwrap();
    let power = Power::watch(tmp.dir.path()).unwrap();
    let store = Store::open(power.uri("season.db")).unwrap();
    // Settings of the store's own connection (a test hook).
    store
        .set_pragma_for_test("synchronous", synchronous)
        .unwrap();
    if let Some(pages) = checkpoint_pages {
        store
            .set_pragma_for_test("wal_autocheckpoint", &pages.to_string())
            .unwrap();
    }
    let service = Service::new(store).with_today(start() + chrono::Days::new(SIZE.visits as u64));
    if let Some(n) = cut_after {
        power.cut_after(n);
    }
    let mut acknowledged: Vec<(Uuid, f64)> = Vec::new();
    for s in saves {
        let args = json!({
            "enclosure_id": s.cage,
            "taxon_id": s.plant,
            "percent": s.percent,
            "date": (start() + chrono::Days::new(s.day)).to_string(),
        });
        match service.call("save_cover", args) {
            Ok(saved) => {
                let id = saved["record"]["id"].as_str().unwrap().parse().unwrap();
                acknowledged.push((id, s.percent));
            }
            Err(problem) => {
                // Only the power cut may refuse a save.
                assert!(
                    power.is_off(),
                    "save refused with the power on: {problem:?}"
                );
                break;
            }
        }
    }
    let ops = power.ops();
    let cut = power.is_off();
    drop(service);
    if cut {
        power.restore(seed, keep).unwrap();
    }
    drop(power);
    let store = Store::open(tmp.path("season.db")).unwrap();
    let integrity: String = store
        .raw()
        .query_row("PRAGMA integrity_check", [], |r| r.get(0))
        .unwrap();
    let mut lost = 0;
    for (id, percent) in &acknowledged {
        let logged: i64 = store
            .raw()
            .query_row(
                "SELECT count(*) FROM change_log WHERE table_name = 'cover_record' AND row_id = ?1",
                [id.to_string()],
                |r| r.get(0),
            )
            .unwrap();
        match store.get::<CoverRecord>(*id).unwrap() {
            Some(r) if r.value_pct == Some(*percent) && logged > 0 => {}
            _ => lost += 1,
        }
    }
    let outcome = Outcome {
        acknowledged: acknowledged.len(),
        lost,
        integrity,
        cut,
    };
    (outcome, ops)
}

/// Cut the power `RUNS` times at seeded random points with `synchronous`
/// set as given; every run alternates between losing every unsynced write
/// and keeping a random half of them, and between the default WAL
/// checkpoint and a checkpoint every 20 pages (so cuts land in checkpoints).
fn cuts(synchronous: &str) -> Vec<Outcome> {
    let tmp = fast_temp();
    let (path, saves) = template(tmp.dir.path());
    let template = Store::open(&path).unwrap();
    let mut rng = ChaCha8Rng::seed_from_u64(20_261_202);
    // How many operations a whole run makes with the power on, for each
    // checkpoint setting (the cut lands anywhere within it).
    let ops: Vec<u64> = [None, Some(20)]
        .into_iter()
        .map(|checkpoint| {
            let (full, ops) = run(&template, &saves, synchronous, checkpoint, None, 0, 0.0);
            assert_eq!(full.acknowledged, SAVES);
            assert_eq!(full.lost, 0);
            ops
        })
        .collect();
    let mut out = Vec::new();
    for i in 0..RUNS {
        let small_checkpoints = i / 2 % 2 == 1;
        let checkpoint = small_checkpoints.then_some(20);
        let ops = ops[usize::from(small_checkpoints)];
        let keep = if i % 2 == 0 { 0.0 } else { 0.5 };
        let at = rng.random_range(1..=ops);
        let (outcome, _) = run(
            &template,
            &saves,
            synchronous,
            checkpoint,
            Some(at),
            i,
            keep,
        );
        assert!(outcome.cut, "run {i}: the power was cut at operation {at}");
        out.push(outcome);
    }
    out
}

#[test]
fn full_sync_keeps_every_acknowledged_save_through_power_cuts() {
    let outcomes = cuts("FULL");
    for (i, o) in outcomes.iter().enumerate() {
        assert_eq!(o.integrity, "ok", "run {i}: {o:?}");
        assert_eq!(o.lost, 0, "run {i}: acknowledged saves lost: {o:?}");
    }
    // The cuts landed at many points of the runs, not all at the start.
    let acknowledged: Vec<usize> = outcomes.iter().map(|o| o.acknowledged).collect();
    assert!(
        acknowledged.iter().any(|&n| n > SAVES / 2),
        "{acknowledged:?}"
    );
    assert!(
        acknowledged.iter().any(|&n| n < SAVES / 2),
        "{acknowledged:?}"
    );
}

#[test]
fn normal_sync_loses_acknowledged_saves_and_the_harness_sees_it() {
    let outcomes = cuts("NORMAL");
    // NORMAL in WAL mode stays consistent (it loses commits, it does not
    // corrupt: SQLite documentation on PRAGMA synchronous, from memory).
    for (i, o) in outcomes.iter().enumerate() {
        assert_eq!(o.integrity, "ok", "run {i}: {o:?}");
    }
    let lost: usize = outcomes.iter().map(|o| o.lost).sum();
    let runs_with_loss = outcomes.iter().filter(|o| o.lost > 0).count();
    assert!(
        lost > 0,
        "no acknowledged save was lost with synchronous=NORMAL: the harness cannot see a loss"
    );
    eprintln!(
        "synchronous=NORMAL: {lost} acknowledged saves lost in {runs_with_loss} of {RUNS} power cuts"
    );
}
