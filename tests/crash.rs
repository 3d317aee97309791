//! The crash test: a writer process (`fieldcage-crash-writer`, see
//! `fieldcage_testkit::crash_writer`) saves censuses and cover through the operation
//! set and logs each save before the call and again once it returned; this
//! test kills it with SIGKILL at a seeded random point, reopens the database
//! and checks that
//!
//! - `PRAGMA integrity_check` is `ok` and no foreign key is broken;
//! - every acknowledged save is there, with its value, in the row it was
//!   acknowledged as (an update keeps the row), and the one save in flight
//!   at the kill is either wholly there or not at all;
//! - there is no other row: no save appears twice or without being made, and
//!   no visit was left without the record it was started for;
//! - the change log's sequence has no gap and the next sequence number
//!   follows it.
//!
//! Then it starts the writer again on the same database, for
//! `FIELDCAGE_CRASH_CYCLES` cycles (500 by default; the release run is
//! 10 000, see README "Reliability"). `FIELDCAGE_CRASH_SEED` changes the
//! seed; a failure prints the seed and cycle to replay.

#![allow(clippy::unwrap_used)] // a failed unwrap is a failed test

use std::collections::BTreeMap;
use std::io::{BufRead, BufReader};
use std::path::Path;
use std::process::{Command, Stdio};
use std::time::Duration;

use fieldcage_core::Store;
use fieldcage_testkit::crash_writer::{self, LogLine, SaveKey, SaveKind};
use rand::{Rng, SeedableRng};

use fieldcage_testkit::fixture::{Temp, store_with};

const DEFAULT_CYCLES: u64 = 500;
const DEFAULT_SEED: u64 = 82_026;

fn setting(name: &str, default: u64) -> u64 {
    std::env::var(name)
        .ok()
        .map(|v| {
            v.parse()
                .unwrap_or_else(|_| panic!("{name}={v:?} is not a number"))
        })
        .unwrap_or(default)
}

/// What the test knows is saved: the row and its value.
#[derive(Debug, Clone, PartialEq)]
struct Known {
    id: String,
    value: f64,
}

#[derive(Debug, Default)]
struct Tally {
    acked: u64,
    /// Saves in flight at the kill that turned out committed / not.
    in_flight_committed: u64,
    in_flight_absent: u64,
    /// Cycles killed before the writer said it was ready.
    early_kills: u64,
}

#[test]
fn every_acknowledged_save_survives_sigkill() {
    let cycles = setting("FIELDCAGE_CRASH_CYCLES", DEFAULT_CYCLES);
    let seed = setting("FIELDCAGE_CRASH_SEED", DEFAULT_SEED);
    let tmp = Temp::new();
    let db = store_with(&tmp, &[], 3).path().to_path_buf();
    let log = tmp.path("saves.log");
    let stderr = tmp.path("writer.stderr");
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let mut known: BTreeMap<SaveKey, Known> = BTreeMap::new();
    let mut tally = Tally::default();
    for cycle in 0..cycles {
        let replay = format!("cycle {cycle} of FIELDCAGE_CRASH_SEED={seed}");
        let _ = std::fs::remove_file(&log);
        let mut child = Command::new(env!("CARGO_BIN_EXE_fieldcage-crash-writer"))
            .arg("--db")
            .arg(&db)
            .arg("--log")
            .arg(&log)
            .arg("--seed")
            .arg(rng.random::<u64>().to_string())
            .stdin(Stdio::null())
            .stdout(Stdio::piped())
            .stderr(std::fs::File::create(&stderr).unwrap())
            .spawn()
            .unwrap();
        // One kill in ten lands anywhere from the start (opening the
        // database, its recovery after the last kill); the others while
        // saving, 0–40 ms after the writer is ready.
        if rng.random_bool(0.1) {
            tally.early_kills += 1;
            std::thread::sleep(Duration::from_micros(rng.random_range(0..30_000)));
        } else {
            let mut ready = String::new();
            BufReader::new(child.stdout.take().unwrap())
                .read_line(&mut ready)
                .unwrap();
            assert_eq!(
                ready.trim(),
                "ready",
                "{replay}: the writer did not start: {}",
                std::fs::read_to_string(&stderr).unwrap()
            );
            std::thread::sleep(Duration::from_micros(rng.random_range(0..40_000)));
        }
        if let Some(status) = child.try_wait().unwrap() {
            panic!(
                "{replay}: the writer stopped by itself ({status}): {}",
                std::fs::read_to_string(&stderr).unwrap()
            );
        }
        child.kill().unwrap(); // SIGKILL on Unix
        child.wait().unwrap();
        check_after_kill(&db, &log, &mut known, &mut tally, &replay);
    }
    eprintln!(
        "crash test: {cycles} kills (seed {seed}), {} saves acknowledged, {} rows known; \
         in flight at the kill: {} committed, {} not; {} kills before the writer was ready",
        tally.acked,
        known.len(),
        tally.in_flight_committed,
        tally.in_flight_absent,
        tally.early_kills
    );
    assert!(
        tally.acked > 0,
        "no save was ever acknowledged: the test tested nothing"
    );
}

/// Reopen the database after a kill and hold it to everything the side file
/// says; fold the acknowledged saves into `known`.
fn check_after_kill(
    db: &Path,
    log: &Path,
    known: &mut BTreeMap<SaveKey, Known>,
    tally: &mut Tally,
    replay: &str,
) {
    let lines = crash_writer::read_log(log).unwrap();
    let store = Store::open(db).unwrap_or_else(|e| panic!("{replay}: cannot reopen: {e}"));
    let conn = &own_connection(&store);
    let integrity: String = conn
        .query_row("PRAGMA integrity_check", [], |r| r.get(0))
        .unwrap();
    assert_eq!(integrity, "ok", "{replay}");
    let broken: i64 = conn
        .query_row("SELECT count(*) FROM pragma_foreign_key_check", [], |r| {
            r.get(0)
        })
        .unwrap();
    assert_eq!(broken, 0, "{replay}: broken foreign keys");
    let entries = fieldcage_core::store::log::count(conn, Some(store.device_id()), 0).unwrap();
    let last = fieldcage_core::store::log::last_seq(conn, store.device_id())
        .unwrap()
        .unwrap_or(0);
    let next: i64 = conn
        .query_row(
            "SELECT next_seq FROM local_device WHERE singleton = 1",
            [],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(
        (entries, next),
        (last, last + 1),
        "{replay}: the change log has a gap"
    );

    let mut in_flight: Option<(u64, SaveKey, f64)> = None;
    for line in lines {
        match line {
            LogLine::Try { n, key, value } => in_flight = Some((n, key, value)),
            LogLine::Ack { n, id } => {
                let (tried, key, value) = in_flight.take().expect("an ack follows its try");
                assert_eq!(tried, n, "{replay}: side file out of order");
                tally.acked += 1;
                if let Some(before) = known.get(&key) {
                    assert_eq!(
                        before.id, id,
                        "{replay}: saving {key:?} again made a new row"
                    );
                }
                known.insert(key, Known { id, value });
            }
        }
    }
    if let Some((_, key, value)) = in_flight {
        match stored(conn, &key) {
            Some(row) if row.value == value => {
                tally.in_flight_committed += 1;
                known.insert(key, row);
            }
            _ => tally.in_flight_absent += 1,
        }
    }
    for (key, expected) in known.iter() {
        let row = stored(conn, key)
            .unwrap_or_else(|| panic!("{replay}: acknowledged save {key:?} is missing"));
        assert_eq!(
            &row, expected,
            "{replay}: {key:?} does not hold its acknowledged value"
        );
    }
    let rows: i64 = conn
        .query_row(
            "SELECT (SELECT count(*) FROM census WHERE deleted = 0) + \
             (SELECT count(*) FROM cover_record WHERE deleted = 0)",
            [],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(
        rows as usize,
        known.len(),
        "{replay}: rows that no save made"
    );
    let empty_visits: i64 = conn
        .query_row(
            "SELECT count(*) FROM visit v WHERE v.deleted = 0 \
             AND NOT EXISTS (SELECT 1 FROM census c WHERE c.visit_id = v.id) \
             AND NOT EXISTS (SELECT 1 FROM cover_record c WHERE c.visit_id = v.id)",
            [],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(
        empty_visits, 0,
        "{replay}: a visit was kept without its record"
    );
}

/// The live row a save key points at, if there is one (and never two).
/// The test's own read connection to a store's file (the store's own
/// connection stays inside the core).
fn own_connection(store: &Store) -> rusqlite::Connection {
    let conn = rusqlite::Connection::open(store.path()).expect("the test's connection");
    conn.busy_timeout(std::time::Duration::from_secs(10))
        .expect("a busy timeout");
    conn
}

fn stored(conn: &rusqlite::Connection, key: &SaveKey) -> Option<Known> {
    let (table, column, kind) = match key.kind {
        SaveKind::Census => ("census", "alive", "census"),
        SaveKind::Cover => ("cover_record", "value_pct", "cover"),
    };
    let mut stmt = conn
        .prepare(&format!(
            "SELECT r.id, r.{column} FROM {table} r JOIN visit v ON v.id = r.visit_id \
             WHERE v.enclosure_id = ?1 AND v.kind = ?2 AND substr(v.visited_at, 1, 10) = ?3 \
             AND r.taxon_id = ?4 AND r.deleted = 0 AND v.deleted = 0"
        ))
        .unwrap();
    let rows: Vec<Known> = stmt
        .query_map(
            rusqlite::params![key.cage, kind, key.date.to_string(), key.taxon],
            |r| {
                Ok(Known {
                    id: r.get(0)?,
                    value: r.get(1)?,
                })
            },
        )
        .unwrap()
        .collect::<Result<_, _>>()
        .unwrap();
    assert!(rows.len() <= 1, "{key:?} has {} rows", rows.len());
    rows.into_iter().next()
}

/// The writer stops by itself after `--max-saves`; its side file holds a try
/// and then an ack for each save, in order, each ack naming the row that was
/// saved, and each row holds the value last saved to it.
#[test]
fn the_writer_logs_a_try_and_an_ack_for_each_save() {
    let tmp = Temp::new();
    let db = store_with(&tmp, &[], 4).path().to_path_buf();
    let log = tmp.path("saves.log");
    let out = Command::new(env!("CARGO_BIN_EXE_fieldcage-crash-writer"))
        .arg("--db")
        .arg(&db)
        .arg("--log")
        .arg(&log)
        .args(["--seed", "9", "--max-saves", "6"])
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let lines = crash_writer::read_log(&log).unwrap();
    assert_eq!(lines.len(), 12);
    let store = Store::open(&db).unwrap();
    let conn = &own_connection(&store);
    let mut last: BTreeMap<SaveKey, Known> = BTreeMap::new();
    for (i, pair) in lines.chunks(2).enumerate() {
        let [
            LogLine::Try { n, key, value },
            LogLine::Ack { n: acked, id },
        ] = pair
        else {
            panic!("save {}: not a try and an ack: {pair:?}", i + 1);
        };
        assert_eq!((*n, *acked), (i as u64 + 1, i as u64 + 1));
        let row = stored(conn, key).expect("the saved row");
        assert_eq!(&row.id, id);
        last.insert(
            key.clone(),
            Known {
                id: id.clone(),
                value: *value,
            },
        );
    }
    for (key, expected) in &last {
        assert_eq!(stored(conn, key).as_ref(), Some(expected));
    }
}
