//! Sync between devices through a shared folder (issue 6): change-sets
//! travel both ways, merge per field with conflicts kept for review, clocks
//! that are wrong lose nothing, and damaged, duplicated or contradictory
//! files are refused or recognised — never half applied.
//!
//! Check values here are behaviours of the design (docs/methods.md §10.1), not
//! published numbers; dates and counts are invented for the tests.

use crate::util::Raw;
use std::fs;
use std::path::{Path, PathBuf};

use fieldcage_core::model::*;
use fieldcage_core::sync::{self, ConflictChoice, ConflictKind, SkipKind};
use fieldcage_core::{Error, tables};
use rusqlite::types::Value;

use crate::util::{Device, SEASON_MILLIS, Temp, Tiny, data_snapshot, fast_temp, snapshot};

const HOUR: i64 = 3_600_000;
const DAY: i64 = 24 * HOUR;

fn target(tmp: &Temp) -> PathBuf {
    let t = tmp.path("target");
    fs::create_dir_all(&t).unwrap();
    t
}

fn census(id: u64, visit: VisitId, taxon: TaxonId, alive: i64) -> Census {
    Census {
        id: CensusId(crate::util::fixed_id(id)),
        visit_id: visit,
        taxon_id: taxon,
        alive: Some(alive),
        dead: None,
        missing: None,
        notes: None,
    }
}

fn set_alive(d: &mut Device, id: CensusId, alive: i64) {
    let mut c: Census = d.store.get(id.uuid()).unwrap().unwrap();
    c.alive = Some(alive);
    d.store.write(|w| w.update(&c)).unwrap();
}

fn alive(d: &Device, id: CensusId) -> Option<i64> {
    d.store
        .raw()
        .query_row(
            "SELECT alive FROM census WHERE id = ?1",
            [id.to_string()],
            |r| r.get(0),
        )
        .unwrap()
}

fn files_in(dir: &Path) -> Vec<PathBuf> {
    let mut v: Vec<PathBuf> = fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().path())
        .filter(|p| p.is_file())
        .collect();
    v.sort();
    v
}

/// Every value of the change log of one row and field, oldest first.
fn logged_values(d: &Device, row: &str, field: &str) -> Vec<Value> {
    crate::util::log_entries(&d.store);
    d.store
        .raw()
        .prepare("SELECT new_value FROM log_entry WHERE row_id = ?1 AND field = ?2 ORDER BY hlc")
        .unwrap()
        .query_map([row, field], |r| r.get(0))
        .unwrap()
        .collect::<Result<_, _>>()
        .unwrap()
}

/// The acceptance point: `fieldcage init` of the demo definition on a
/// second database, then sync against a target the demo database synced
/// to, gives the same exported tables.
#[test]
fn a_tablet_initialised_from_the_demo_definition_syncs_to_the_demo_tables() {
    let tmp = Temp::new();
    let target = target(&tmp);
    let mut demo = crate::util::demo_store(&tmp);
    sync::sync_once(&mut demo, &target).unwrap();
    let mut second = tmp.store("second.db");
    let def = fieldcage_core::demo::definition().unwrap();
    fieldcage_core::setup::init(&mut second, &def, fieldcage_core::demo::LAYOUT_SEED).unwrap();
    let report = sync::sync_once(&mut second, &target).unwrap();
    assert_eq!(report.applied.len(), 1, "{report}");
    assert_eq!(report.open_conflicts, 0, "identical setup rows agree");
    fieldcage_core::export::export(&demo, &tmp.path("a")).unwrap();
    fieldcage_core::export::export(&second, &tmp.path("b")).unwrap();
    for schema in tables::all() {
        let name = format!("{}.csv", schema.name);
        assert_eq!(
            fs::read(tmp.path("a").join(&name)).unwrap(),
            fs::read(tmp.path("b").join(&name)).unwrap(),
            "{name}"
        );
    }
    // And back: the demo database takes the second tablet's setup entries
    // without a change to its tables.
    let before = data_snapshot(&demo);
    let report = sync::sync_once(&mut demo, &target).unwrap();
    assert_eq!(report.applied.len(), 1);
    assert_eq!(data_snapshot(&demo), before);
}

#[test]
fn edits_travel_both_ways_and_a_repeat_sync_changes_nothing() {
    let tmp = fast_temp();
    let target = target(&tmp);
    let mut a = Device::tiny(&tmp, "a", SEASON_MILLIS);
    let mut b = Device::tiny(&tmp, "b", SEASON_MILLIS + 5);
    let [v0, v1] = Tiny::visits();
    let [herb, _] = Tiny::taxa();
    a.store
        .write(|w| w.insert(&census(100, v0, herb, 7)))
        .unwrap();
    b.store
        .write(|w| w.insert(&census(101, v1, herb, 3)))
        .unwrap();
    assert!(sync::pending_changes(&a.store).unwrap() > 0);
    let ra = a.sync(&target);
    assert_eq!((ra.written.len(), ra.applied.len()), (1, 0));
    assert_eq!(ra.pending_changes, 0);
    let rb = b.sync(&target);
    assert_eq!((rb.written.len(), rb.applied.len()), (1, 1));
    let ra = a.sync(&target);
    assert_eq!((ra.written.len(), ra.applied.len()), (0, 1));
    assert_eq!(data_snapshot(&a.store), data_snapshot(&b.store));
    assert_eq!(crate::util::count(&a.store, "census"), 2);
    // The remote entries keep their own device and seq: never sent again.
    let foreign: i64 = a
        .store
        .raw()
        .query_row(
            "SELECT count(*) FROM change_log WHERE device_id = ?1",
            [b.store.device_id()],
            |r| r.get(0),
        )
        .unwrap();
    assert!(foreign > 0);
    assert_eq!(sync::pending_changes(&a.store).unwrap(), 0);
    // Nothing new: nothing written, nothing applied, nothing changed.
    let before = snapshot(&a.store);
    let again = a.sync(&target);
    assert!(again.written.is_empty() && again.applied.is_empty() && again.skipped.is_empty());
    let after = snapshot(&a.store);
    // Only the run log grows.
    let strip = |s: &str| s.split("== sync_run").next().unwrap().to_owned();
    assert_eq!(strip(&before), strip(&after));
    assert!(sync::last_success(&a.store).unwrap().is_some());
}

#[test]
fn concurrent_edits_of_one_field_make_one_conflict_and_the_later_clock_wins() {
    let tmp = fast_temp();
    let target = target(&tmp);
    let mut a = Device::tiny(&tmp, "a", SEASON_MILLIS);
    let mut b = Device::tiny(&tmp, "b", SEASON_MILLIS);
    let [v0, _] = Tiny::visits();
    let [herb, _] = Tiny::taxa();
    let id = CensusId(crate::util::fixed_id(100));
    a.store
        .write(|w| w.insert(&census(100, v0, herb, 7)))
        .unwrap();
    a.sync(&target);
    b.sync(&target);
    // Both change the count without seeing the other's change; b's clock is later.
    a.clock.advance(HOUR);
    b.clock.advance(2 * HOUR);
    set_alive(&mut a, id, 5);
    set_alive(&mut b, id, 6);
    a.sync(&target);
    b.sync(&target);
    a.sync(&target);
    assert_eq!(alive(&a, id), Some(6));
    assert_eq!(alive(&b, id), Some(6));
    for d in [&a, &b] {
        let open = sync::conflicts(&d.store).unwrap();
        assert_eq!(open.len(), 1, "exactly one conflict on each device");
        assert_eq!(open[0].kind, ConflictKind::Concurrent);
        assert_eq!(open[0].field.as_deref(), Some("alive"));
        assert_eq!(open[0].current.value, Value::Integer(6));
        assert_eq!(open[0].other.value, Value::Integer(5));
        // The losing value stays in the log.
        let values = logged_values(d, &id.to_string(), "alive");
        assert!(values.contains(&Value::Integer(5)) && values.contains(&Value::Integer(6)));
    }
    // a takes the other version (its own 5): the conflict closes everywhere.
    let key = sync::conflicts(&a.store).unwrap()[0].key.clone();
    assert!(sync::conflicts(&a.store).unwrap()[0].other.is_local);
    sync::resolve_conflict(&mut a.store, &key, ConflictChoice::TakeOther).unwrap();
    assert_eq!(alive(&a, id), Some(5));
    assert!(sync::conflicts(&a.store).unwrap().is_empty());
    a.sync(&target);
    b.sync(&target);
    assert_eq!(alive(&b, id), Some(5));
    assert!(sync::conflicts(&b.store).unwrap().is_empty());
    assert_eq!(data_snapshot(&a.store), data_snapshot(&b.store));
}

#[test]
fn keeping_the_current_value_closes_the_conflict_on_every_device() {
    let tmp = fast_temp();
    let target = target(&tmp);
    let mut a = Device::tiny(&tmp, "a", SEASON_MILLIS);
    let mut b = Device::tiny(&tmp, "b", SEASON_MILLIS);
    let mut c = Device::tiny(&tmp, "c", SEASON_MILLIS);
    let [t0, _] = Tiny::treatments();
    for (d, note) in [(&mut a, "mesh torn"), (&mut b, "mesh mended")] {
        let mut t: Treatment = d.store.get(t0.uuid()).unwrap().unwrap();
        t.notes = Some(note.into());
        d.clock.advance(HOUR);
        d.store.write(|w| w.update(&t)).unwrap();
        d.sync(&target);
    }
    c.sync(&target);
    let open = sync::conflicts(&c.store).unwrap();
    assert_eq!(open.len(), 1, "a third device sees the conflict too");
    // c had no part in it: neither side is its own.
    assert!(!open[0].current.is_local && !open[0].other.is_local);
    sync::resolve_conflict(&mut c.store, &open[0].key, ConflictChoice::KeepCurrent).unwrap();
    c.sync(&target);
    a.sync(&target);
    b.sync(&target);
    for d in [&a, &b, &c] {
        assert!(sync::conflicts(&d.store).unwrap().is_empty());
    }
    assert_eq!(data_snapshot(&a.store), data_snapshot(&c.store));
    assert_eq!(data_snapshot(&b.store), data_snapshot(&c.store));
}

#[test]
fn an_edit_that_saw_the_other_is_no_conflict_even_with_an_earlier_clock() {
    let tmp = fast_temp();
    let target = target(&tmp);
    let mut a = Device::tiny(&tmp, "a", SEASON_MILLIS + DAY / 2);
    let mut b = Device::tiny(&tmp, "b", SEASON_MILLIS);
    let [v0, _] = Tiny::visits();
    let [herb, _] = Tiny::taxa();
    let id = CensusId(crate::util::fixed_id(100));
    a.store
        .write(|w| w.insert(&census(100, v0, herb, 7)))
        .unwrap();
    set_alive(&mut a, id, 8);
    a.sync(&target);
    b.sync(&target);
    // b's wall clock is half a day behind a's, but b edits after seeing a's
    // value: its edit must win and nothing is in conflict.
    set_alive(&mut b, id, 9);
    b.sync(&target);
    a.sync(&target);
    assert_eq!(alive(&a, id), Some(9));
    assert!(sync::conflicts(&a.store).unwrap().is_empty());
    assert!(sync::conflicts(&b.store).unwrap().is_empty());
}

#[test]
fn an_edit_against_a_delete_is_shown_and_can_bring_the_row_back() {
    let tmp = fast_temp();
    let target = target(&tmp);
    let mut a = Device::tiny(&tmp, "a", SEASON_MILLIS);
    let mut b = Device::tiny(&tmp, "b", SEASON_MILLIS);
    let [v0, _] = Tiny::visits();
    let [herb, _] = Tiny::taxa();
    let id = CensusId(crate::util::fixed_id(100));
    a.store
        .write(|w| w.insert(&census(100, v0, herb, 7)))
        .unwrap();
    a.sync(&target);
    b.sync(&target);
    // a deletes; b, later by the clock and without knowing, edits.
    let schema = tables::get("census").unwrap();
    a.store
        .write(|w| w.delete(schema, &id.to_string()))
        .unwrap();
    b.clock.advance(DAY);
    set_alive(&mut b, id, 4);
    a.sync(&target);
    b.sync(&target);
    a.sync(&target);
    for d in [&a, &b] {
        assert!(
            d.store.get::<Census>(id.uuid()).unwrap().is_none(),
            "stays deleted"
        );
        assert_eq!(
            alive(d, id),
            Some(4),
            "the edit is kept in the tombstoned row"
        );
        let open = sync::conflicts(&d.store).unwrap();
        assert_eq!(open.len(), 1);
        assert_eq!(open[0].kind, ConflictKind::Deleted);
    }
    // b takes its edit: the row comes back on both devices.
    let key = sync::conflicts(&b.store).unwrap()[0].key.clone();
    sync::resolve_conflict(&mut b.store, &key, ConflictChoice::TakeOther).unwrap();
    b.sync(&target);
    a.sync(&target);
    for d in [&a, &b] {
        assert_eq!(
            d.store.get::<Census>(id.uuid()).unwrap().map(|c| c.alive),
            Some(Some(4))
        );
        assert!(sync::conflicts(&d.store).unwrap().is_empty());
    }
}

#[test]
fn two_censuses_of_one_taxon_at_one_visit_show_one_and_hide_the_other() {
    let tmp = fast_temp();
    let target = target(&tmp);
    let mut a = Device::tiny(&tmp, "a", SEASON_MILLIS);
    let mut b = Device::tiny(&tmp, "b", SEASON_MILLIS);
    let [v0, _] = Tiny::visits();
    let [herb, _] = Tiny::taxa();
    a.store
        .write(|w| w.insert(&census(200, v0, herb, 7)))
        .unwrap();
    b.store
        .write(|w| w.insert(&census(100, v0, herb, 6)))
        .unwrap();
    a.sync(&target);
    b.sync(&target);
    a.sync(&target);
    for d in [&a, &b] {
        let live = d.store.list::<Census>().unwrap();
        assert_eq!(live.len(), 1, "the unique key holds");
        assert_eq!(live[0].alive, Some(6), "the smaller id is shown");
        let open = sync::conflicts(&d.store).unwrap();
        assert_eq!(open.len(), 1);
        assert_eq!(open[0].kind, ConflictKind::Duplicate);
    }
    assert_eq!(data_snapshot(&a.store), data_snapshot(&b.store));
    // a takes the hidden one (its own): the shown one is deleted.
    let key = sync::conflicts(&a.store).unwrap()[0].key.clone();
    sync::resolve_conflict(&mut a.store, &key, ConflictChoice::TakeOther).unwrap();
    assert_eq!(a.store.list::<Census>().unwrap()[0].alive, Some(7));
    a.sync(&target);
    b.sync(&target);
    assert_eq!(b.store.list::<Census>().unwrap()[0].alive, Some(7));
    assert!(sync::conflicts(&b.store).unwrap().is_empty());
    assert_eq!(data_snapshot(&a.store), data_snapshot(&b.store));
}

#[test]
fn every_sqlite_type_survives_a_change_set_exactly() {
    let tmp = fast_temp();
    let target = target(&tmp);
    let mut a = Device::tiny(&tmp, "a", SEASON_MILLIS);
    let mut b = Device::empty(&tmp, "b", SEASON_MILLIS);
    let [c0, _] = Tiny::cages();
    let schema = tables::get("enclosure").unwrap();
    a.store
        .write(|w| {
            w.update_fields(
                schema,
                &c0.to_string(),
                &[
                    ("x_m", Value::Real(0.1 + 0.2)),
                    ("y_m", Value::Real(-0.0)),
                    ("mesh_mm", Value::Real(1e-7)),
                    ("notes", Value::Text("=1+1, \"quoted\"\nnew line".into())),
                ],
            )
        })
        .unwrap();
    a.sync(&target);
    b.sync(&target);
    assert_eq!(snapshot_row(&a, c0), snapshot_row(&b, c0));
    let x: f64 = b
        .store
        .raw()
        .query_row(
            "SELECT x_m FROM enclosure WHERE id = ?1",
            [c0.to_string()],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(
        x.to_bits(),
        (0.1f64 + 0.2).to_bits(),
        "bit for bit (common practice)"
    );
    let kinds: Vec<String> = b
        .store
        .raw()
        .prepare("SELECT typeof(x_m), typeof(height_m), typeof(notes), typeof(label) FROM enclosure WHERE id = ?1")
        .unwrap()
        .query_row([c0.to_string()], |r| Ok(vec![r.get(0)?, r.get(1)?, r.get(2)?, r.get(3)?]))
        .unwrap();
    assert_eq!(kinds, ["real", "real", "text", "text"]);
}

fn snapshot_row(d: &Device, id: EnclosureId) -> Vec<Value> {
    d.store
        .raw()
        .query_row(
            "SELECT * FROM enclosure WHERE id = ?1",
            [id.to_string()],
            |r| (0..10).map(|i| r.get::<_, Value>(i)).collect(),
        )
        .unwrap()
}

#[test]
fn an_unreachable_target_is_an_error_to_retry_and_nothing_changes() {
    let tmp = fast_temp();
    let mut a = Device::tiny(&tmp, "a", SEASON_MILLIS);
    let missing = tmp.path("not-mounted");
    assert!(matches!(
        sync::target_is_reachable(&missing),
        sync::TargetStatus::Unavailable(_)
    ));
    let before = snapshot(&a.store);
    let err = sync::sync_once(&mut a.store, &missing).unwrap_err();
    assert!(matches!(err, Error::TargetUnavailable { .. }), "{err}");
    assert!(err.to_string().contains("not-mounted"), "{err}");
    assert_eq!(snapshot(&a.store), before);
    fs::write(tmp.path("a-file"), b"x").unwrap();
    assert!(matches!(
        sync::target_is_reachable(&tmp.path("a-file")),
        sync::TargetStatus::Unavailable(r) if r.contains("not a folder")
    ));
    let t = target(&tmp);
    assert_eq!(sync::target_is_reachable(&t), sync::TargetStatus::Ready);
}

/// Make the database refuse new rows of `table` (as a full disk would),
/// through a trigger the test adds to the file (the store's connection sees
/// it at its next statement) and takes away again ([`allow_inserts`]).
fn refuse_inserts(d: &Device, table: &str, reason: &str) {
    d.store
        .raw()
        .execute_batch(&format!(
            "CREATE TRIGGER refuse_{table} BEFORE INSERT ON {table} \
             BEGIN SELECT RAISE(ABORT, '{reason}'); END"
        ))
        .unwrap();
}

fn allow_inserts(d: &Device, table: &str) {
    d.store
        .raw()
        .execute_batch(&format!("DROP TRIGGER refuse_{table}"))
        .unwrap();
}

/// A sync that did its work but whose run cannot be recorded is reported
/// (the last sync shown would be the one before); a run that failed keeps
/// its own error even when its record fails too.
#[test]
fn a_sync_run_that_cannot_be_recorded_is_reported_and_a_failed_run_keeps_its_error() {
    let tmp = fast_temp();
    let target = target(&tmp);
    let mut a = Device::tiny(&tmp, "a", SEASON_MILLIS);
    let mut b = Device::tiny(&tmp, "b", SEASON_MILLIS + 5);
    b.sync(&target);
    let rows = |d: &Device, table: &str| -> i64 {
        d.store
            .raw()
            .query_row(&format!("SELECT count(*) FROM {table}"), [], |r| r.get(0))
            .unwrap()
    };
    let runs = |d: &Device| rows(d, "sync_run");
    let applied = |d: &Device| rows(d, "sync_applied");
    assert!(sync::pending_changes(&a.store).unwrap() > 0);

    // The run fails (its written change-set cannot be recorded), and so
    // does its record: the crew sees why the run failed.
    refuse_inserts(&a, "sync_run", "no room for the run");
    refuse_inserts(&a, "sync_written", "no room for the change-set");
    let err = sync::sync_once(&mut a.store, &target).unwrap_err();
    assert!(matches!(err, Error::Sqlite(_)), "{err:?}");
    assert!(
        err.to_string().contains("no room for the change-set"),
        "{err}"
    );
    assert_eq!(runs(&a), 0);

    // The run does its work, only its record is refused: an error that
    // says so, with everything it did kept.
    allow_inserts(&a, "sync_written");
    let err = sync::sync_once(&mut a.store, &target).unwrap_err();
    assert!(matches!(err, Error::RunNotRecorded(_)), "{err:?}");
    let text = err.to_string();
    assert!(
        text.contains("written and applied") && text.contains("no room for the run"),
        "{text}"
    );
    assert_eq!(runs(&a), 0);
    assert_eq!(
        sync::pending_changes(&a.store).unwrap(),
        0,
        "a's changes are recorded as sent"
    );
    assert_eq!(own_files(&target, &a).len(), 1);
    assert_eq!(applied(&a), 1, "b's change-set is applied");
    assert_eq!(sync::last_success(&a.store).unwrap(), None);

    // Once the database takes it again, the next run is recorded.
    allow_inserts(&a, "sync_run");
    let r = a.sync(&target);
    assert!(r.written.is_empty() && r.applied.is_empty(), "{r}");
    assert_eq!(runs(&a), 1);
    assert!(sync::last_success(&a.store).unwrap().is_some());

    // A failed run whose record is taken is recorded as unfinished.
    refuse_inserts(&a, "sync_written", "no room for the change-set");
    a.store
        .write(|w| {
            let [v0, _] = Tiny::visits();
            let [herb, _] = Tiny::taxa();
            w.insert(&census(100, v0, herb, 7))
        })
        .unwrap();
    sync::sync_once(&mut a.store, &target).unwrap_err();
    let unfinished: i64 = a
        .store
        .raw()
        .query_row(
            "SELECT count(*) FROM sync_run WHERE finished = 0",
            [],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!((runs(&a), unfinished), (2, 1));
}

#[test]
fn device_names_are_checked_and_travel_with_the_changes() {
    let tmp = fast_temp();
    let target = target(&tmp);
    let mut a = Device::tiny(&tmp, "a", SEASON_MILLIS);
    let mut b = Device::tiny(&tmp, "b", SEASON_MILLIS);
    let err = a.store.set_device_name("").unwrap_err().to_string();
    assert!(err.contains("device.name"), "{err}");
    let err = a.store.set_device_name("tab\nlet").unwrap_err().to_string();
    assert!(err.contains("line breaks"), "{err}");
    a.store.set_device_name("Tablet by the gate").unwrap();
    a.sync(&target);
    let r = b.sync(&target);
    assert_eq!(r.applied[0].device_name, "Tablet by the gate");
}

/// The change-sets a device wrote into `target`, by file name.
fn own_files(target: &Path, d: &Device) -> Vec<PathBuf> {
    files_in(&target.join(d.store.device_id()))
}

#[test]
fn a_lost_or_damaged_copy_of_an_own_change_set_is_written_again() {
    let tmp = fast_temp();
    let target = target(&tmp);
    let mut a = Device::tiny(&tmp, "a", SEASON_MILLIS);
    a.sync(&target);
    let file = own_files(&target, &a).pop().unwrap();
    let good = fs::read(&file).unwrap();
    fs::remove_file(&file).unwrap();
    let r = a.sync(&target);
    assert!(r.written[0].rewritten);
    assert_eq!(fs::read(&file).unwrap(), good, "byte for byte");
    fs::write(&file, &good[..good.len() / 2]).unwrap();
    let r = a.sync(&target);
    assert!(r.warnings.iter().any(|w| w.contains("damaged")), "{r}");
    assert_eq!(fs::read(&file).unwrap(), good);
}

#[test]
fn a_database_restored_onto_a_second_tablet_is_refused_with_an_explanation() {
    let tmp = fast_temp();
    let target = target(&tmp);
    let mut a = Device::tiny(&tmp, "a", SEASON_MILLIS);
    a.sync(&target);
    a.store.backup_to(tmp.path("copy.db")).unwrap();
    let clock = crate::util::TestClock::at(SEASON_MILLIS + HOUR);
    let mut copy = Device {
        store: fieldcage_core::Store::open_with_clock(tmp.path("copy.db"), clock.clock()).unwrap(),
        clock,
    };
    assert_eq!(copy.store.device_id(), a.store.device_id());
    // Both go on recording; the original syncs first.
    let [v0, v1] = Tiny::visits();
    let [herb, _] = Tiny::taxa();
    a.store
        .write(|w| w.insert(&census(100, v0, herb, 1)))
        .unwrap();
    copy.store
        .write(|w| w.insert(&census(101, v1, herb, 2)))
        .unwrap();
    a.sync(&target);
    let before = snapshot(&copy.store);
    let err = sync::sync_once(&mut copy.store, &target).unwrap_err();
    assert!(matches!(err, Error::DeviceClash(_)), "{err}");
    let text = err.to_string();
    assert!(
        text.contains("backup") && text.contains("identity"),
        "{text}"
    );
    let theirs = own_files(&target, &a).pop().unwrap();
    assert!(
        text.contains(&theirs.display().to_string()),
        "names the file: {text}"
    );
    let strip = |s: &str| s.split("== sync_run").next().unwrap().to_owned();
    assert_eq!(
        strip(&snapshot(&copy.store)),
        strip(&before),
        "nothing written"
    );
}

#[test]
fn a_reused_seq_with_other_content_is_refused_by_the_other_devices() {
    let tmp = fast_temp();
    let target = target(&tmp);
    let other_target = tmp.path("other-target");
    fs::create_dir_all(&other_target).unwrap();
    let mut a = Device::tiny(&tmp, "a", SEASON_MILLIS);
    a.sync(&target);
    a.store.backup_to(tmp.path("copy.db")).unwrap();
    let clock = crate::util::TestClock::at(SEASON_MILLIS + HOUR);
    let mut copy = Device {
        store: fieldcage_core::Store::open_with_clock(tmp.path("copy.db"), clock.clock()).unwrap(),
        clock,
    };
    let mut c = Device::empty(&tmp, "c", SEASON_MILLIS);
    c.sync(&target);
    let [v0, v1] = Tiny::visits();
    let [herb, _] = Tiny::taxa();
    a.store
        .write(|w| w.insert(&census(100, v0, herb, 1)))
        .unwrap();
    copy.store
        .write(|w| w.insert(&census(101, v1, herb, 2)))
        .unwrap();
    a.sync(&target);
    c.sync(&target);
    // The copy writes the same seq range with other content somewhere else,
    // and the file reaches c's target.
    copy.sync(&other_target);
    let reused = own_files(&other_target, &copy).pop().unwrap();
    let name = reused.file_name().unwrap().to_owned();
    let dest = target.join(a.store.device_id()).join("copied-in.csv");
    fs::copy(&reused, &dest).unwrap();
    assert!(target.join(a.store.device_id()).join(&name).exists());
    let before = data_snapshot(&c.store);
    let r = c.sync(&target);
    let skipped: Vec<_> = r.skipped.iter().filter(|s| s.file == dest).collect();
    assert_eq!(skipped.len(), 1, "{r}");
    assert_eq!(skipped[0].kind, SkipKind::Rejected);
    assert!(
        skipped[0].reason.contains("identity"),
        "{}",
        skipped[0].reason
    );
    assert_eq!(data_snapshot(&c.store), before, "nothing of it applied");
}

/// Every (device, seq) of every device's log, with its value: the union of
/// what all devices wrote. Used to show that no edit is lost anywhere.
fn log_entries(d: &Device) -> std::collections::BTreeSet<(String, i64, String)> {
    crate::util::log_entries(&d.store);
    d.store
        .raw()
        .prepare("SELECT device_id, seq, quote(new_value) FROM log_entry")
        .unwrap()
        .query_map([], |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)))
        .unwrap()
        .collect::<Result<_, _>>()
        .unwrap()
}

/// Clocks at 1970, one day behind, one year ahead: every edit arrives
/// everywhere, an edit made after seeing another wins whatever the clocks
/// say, and the wrong clocks are flagged.
#[test]
fn wrong_clocks_lose_no_edit_and_are_flagged() {
    let tmp = fast_temp();
    let target = target(&tmp);
    let year = 365 * DAY;
    let mut ok = Device::tiny(&tmp, "right", SEASON_MILLIS);
    let mut old = Device::tiny(&tmp, "in-1970", 0);
    let mut behind = Device::tiny(&tmp, "day-behind", SEASON_MILLIS - DAY);
    let mut ahead = Device::tiny(&tmp, "year-ahead", SEASON_MILLIS + year);
    let [v0, v1] = Tiny::visits();
    let [herb, pred] = Tiny::taxa();
    let [c0, c1] = Tiny::cages();
    let x = CensusId(crate::util::fixed_id(100));
    ok.store
        .write(|w| w.insert(&census(100, v0, herb, 7)))
        .unwrap();
    old.store
        .write(|w| w.insert(&census(101, v0, pred, 1)))
        .unwrap();
    behind
        .store
        .write(|w| w.insert(&census(102, v1, herb, 2)))
        .unwrap();
    ahead
        .store
        .write(|w| w.insert(&census(103, v1, pred, 3)))
        .unwrap();
    let notes = |d: &mut Device, cage: EnclosureId, text: &str| {
        let mut e: Enclosure = d.store.get(cage.uuid()).unwrap().unwrap();
        e.notes = Some(text.into());
        d.store.write(|w| w.update(&e)).unwrap();
    };
    notes(&mut ahead, c1, "ahead wrote this");
    for d in [&mut ok, &mut old, &mut behind, &mut ahead] {
        d.clock.advance(HOUR);
        d.sync(&target);
    }
    // The 1970 tablet has now seen everything; its next edits must win.
    old.sync(&target);
    set_alive(&mut old, x, 8);
    notes(&mut old, c1, "1970 wrote this after seeing the note");
    notes(&mut behind, c0, "behind wrote this");
    for _ in 0..2 {
        for d in [&mut ok, &mut old, &mut behind, &mut ahead] {
            d.clock.advance(HOUR);
            d.sync(&target);
        }
    }
    let all = log_entries(&ok);
    for d in [&old, &behind, &ahead] {
        assert_eq!(log_entries(d), all, "every device holds every edit");
        assert_eq!(data_snapshot(&d.store), data_snapshot(&ok.store));
    }
    assert_eq!(
        alive(&ok, x),
        Some(8),
        "the 1970 edit made after seeing 7 wins"
    );
    let e1: Enclosure = ok.store.get(c1.uuid()).unwrap().unwrap();
    assert_eq!(
        e1.notes.as_deref(),
        Some("1970 wrote this after seeing the note")
    );
    assert_eq!(ok.store.list::<Census>().unwrap().len(), 4);
    for d in [&ok, &old, &behind, &ahead] {
        assert!(
            sync::conflicts(&d.store).unwrap().is_empty(),
            "no edit raced another"
        );
    }
    // Flags: the year-ahead device is flagged by the others; the 1970 device
    // and (after taking the year-ahead timestamps) the others find their
    // own clock behind.
    let anomalies = |d: &Device| sync::clock_anomalies(&d.store).unwrap();
    for d in [&ok, &old, &behind] {
        let a = anomalies(d);
        assert!(
            a.iter()
                .any(|a| a.kind == sync::AnomalyKind::Ahead
                    && a.device_id == ahead.store.device_id()),
            "{:?}",
            a
        );
        assert!(a.iter().any(|a| a.kind == sync::AnomalyKind::Behind));
    }
    let a = anomalies(&old);
    assert!(
        a.iter()
            .any(|a| a.kind == sync::AnomalyKind::Ahead && a.device_id == ok.store.device_id())
    );
    assert!(
        anomalies(&ahead)
            .iter()
            .all(|a| a.kind == sync::AnomalyKind::Ahead || a.device_id != ahead.store.device_id()),
        "the device with the year-ahead clock is never behind"
    );
    assert!(
        !anomalies(&ahead)
            .iter()
            .any(|a| a.device_id == behind.store.device_id()),
        "one day behind is within the default limit of a day"
    );
}

/// A tablet whose clock is set back after a reboot: its later edit still
/// comes later, locally and on the other tablets.
#[test]
fn a_clock_set_back_after_a_reboot_keeps_the_order_of_edits() {
    let tmp = fast_temp();
    let target = target(&tmp);
    let mut a = Device::tiny(&tmp, "a", SEASON_MILLIS);
    let mut b = Device::tiny(&tmp, "b", SEASON_MILLIS);
    let [v0, _] = Tiny::visits();
    let [herb, _] = Tiny::taxa();
    let x = CensusId(crate::util::fixed_id(100));
    a.store
        .write(|w| w.insert(&census(100, v0, herb, 7)))
        .unwrap();
    set_alive(&mut a, x, 8);
    // Reboot: the database is closed and reopened with the clock two days back.
    let path = a.store.path().to_path_buf();
    drop(a.store);
    let clock = crate::util::TestClock::at(SEASON_MILLIS - 2 * DAY);
    let mut a = Device {
        store: fieldcage_core::Store::open_with_clock(&path, clock.clock()).unwrap(),
        clock,
    };
    set_alive(&mut a, x, 9);
    assert_eq!(alive(&a, x), Some(9));
    crate::util::log_entries(&a.store);
    let hlcs: Vec<i64> = a
        .store
        .raw()
        .prepare("SELECT hlc FROM log_entry WHERE row_id = ?1 AND field = 'alive' ORDER BY seq")
        .unwrap()
        .query_map([x.to_string()], |r| r.get(0))
        .unwrap()
        .collect::<Result<_, _>>()
        .unwrap();
    assert!(hlcs.windows(2).all(|w| w[0] < w[1]), "{hlcs:?}");
    let r = a.sync(&target);
    assert!(
        r.anomalies
            .iter()
            .any(|x| x.kind == sync::AnomalyKind::Behind),
        "the clock two days back is flagged: {r}"
    );
    b.sync(&target);
    assert_eq!(alive(&b, x), Some(9));
    assert!(sync::conflicts(&b.store).unwrap().is_empty());
    assert_eq!(
        logged_values(&b, &x.to_string(), "alive").len(),
        3,
        "7, 8, 9 all logged"
    );
}

/// A sample change-set and an observer that has applied everything before it.
struct FileCase {
    tmp: Temp,
    target: PathBuf,
    sample: PathBuf,
    bytes: Vec<u8>,
    observer: Device,
}

fn file_case() -> FileCase {
    let tmp = fast_temp();
    let target = target(&tmp);
    let mut a = Device::tiny(&tmp, "a", SEASON_MILLIS);
    let mut observer = Device::empty(&tmp, "observer", SEASON_MILLIS);
    a.sync(&target);
    observer.sync(&target);
    let [v0, _] = Tiny::visits();
    let [herb, _] = Tiny::taxa();
    a.store
        .write(|w| {
            let mut c = census(100, v0, herb, 7);
            c.notes = Some("two, with a \"quote\"".into());
            w.insert(&c)
        })
        .unwrap();
    a.sync(&target);
    let sample = own_files(&target, &a).pop().unwrap();
    let bytes = fs::read(&sample).unwrap();
    FileCase {
        tmp,
        target,
        sample,
        bytes,
        observer,
    }
}

impl FileCase {
    /// Sync the observer; assert the file was skipped as `kind` and that
    /// nothing at all was applied.
    fn refused(&mut self, file: &Path, kind: SkipKind) -> String {
        let before = data_snapshot(&self.observer.store);
        let log = self.observer.store.change_count().unwrap();
        let r = self.observer.sync(&self.target);
        let s: Vec<_> = r.skipped.iter().filter(|s| s.file == file).collect();
        assert_eq!(s.len(), 1, "{} must be named: {r}", file.display());
        assert_eq!(s[0].kind, kind, "{r}");
        assert!(r.applied.is_empty(), "{r}");
        assert_eq!(
            data_snapshot(&self.observer.store),
            before,
            "no partial apply"
        );
        assert_eq!(self.observer.store.change_count().unwrap(), log);
        s[0].reason.clone()
    }
}

#[test]
fn a_change_set_cut_at_any_byte_is_refused_and_nothing_of_it_applied() {
    let mut case = file_case();
    let (sample, bytes) = (case.sample.clone(), case.bytes.clone());
    for cut in 0..bytes.len() {
        fs::write(&sample, &bytes[..cut]).unwrap();
        let reason = case.refused(&sample, SkipKind::Rejected);
        assert!(
            reason.contains("truncated")
                || reason.contains("does not match")
                || reason.contains("trailer"),
            "cut at {cut}: {reason}"
        );
    }
    fs::write(&sample, &bytes).unwrap();
    let r = case.observer.sync(&case.target);
    assert_eq!(
        r.applied.len(),
        1,
        "the whole file applies once it is whole again"
    );
    assert_eq!(crate::util::count(&case.observer.store, "census"), 1);
}

#[test]
fn a_change_set_with_any_bit_flipped_is_refused_and_nothing_of_it_applied() {
    let mut case = file_case();
    let (sample, bytes) = (case.sample.clone(), case.bytes.clone());
    for i in 0..bytes.len() {
        let mut bad = bytes.clone();
        bad[i] ^= 1 << (i % 8);
        fs::write(&sample, &bad).unwrap();
        case.refused(&sample, SkipKind::Rejected);
    }
    fs::write(&sample, &bytes).unwrap();
    assert_eq!(case.observer.sync(&case.target).applied.len(), 1);
}

#[test]
fn copies_under_other_names_are_recognised_as_duplicates() {
    let mut case = file_case();
    let dir = case.sample.parent().unwrap().to_path_buf();
    let copy = dir.join("copy of the change-set.csv");
    let upper = dir.join("ANOTHER COPY.CSV");
    fs::copy(&case.sample, &copy).unwrap();
    let r = case.observer.sync(&case.target);
    assert_eq!(r.applied.len(), 1, "{r}");
    assert_eq!(
        r.applied[0].file, case.sample,
        "the canonical name is applied"
    );
    let dup: Vec<_> = r.skipped.iter().filter(|s| s.file == copy).collect();
    assert_eq!(dup.len(), 1, "{r}");
    assert_eq!(dup[0].kind, SkipKind::Duplicate);
    assert!(dup[0].reason.contains(&case.sample.display().to_string()));
    // A copy that turns up later is a duplicate of what was applied.
    fs::copy(&case.sample, &upper).unwrap();
    let reason = case.refused(&upper, SkipKind::Duplicate);
    assert!(reason.contains("applied before"), "{reason}");
    // Temporary files of a writer in progress are not read at all.
    fs::write(dir.join(".5.csv.123-abc.tmp"), b"half a file").unwrap();
    let r = case.observer.sync(&case.target);
    assert!(
        r.skipped.iter().all(|s| !s
            .file
            .file_name()
            .unwrap()
            .to_string_lossy()
            .starts_with('.')),
        "{r}"
    );
    assert_eq!(r.skipped.len(), 2, "the two copies only: {r}");
}

#[test]
fn a_reused_seq_with_another_hash_is_refused_naming_the_file() {
    let mut case = file_case();
    assert_eq!(case.observer.sync(&case.target).applied.len(), 1);
    // Another valid change-set for the same device and seq range.
    let cs = fieldcage_core::sync::changeset::decode(&case.bytes).unwrap();
    let mut changes = cs.changes.clone();
    for c in &mut changes {
        if c.field == Some("alive") {
            c.new_value = Value::Integer(99);
        }
    }
    let (other, _) =
        fieldcage_core::sync::changeset::encode(&cs.device_id, &cs.device_name, &cs.seen, &changes)
            .unwrap();
    let sample = case.sample.clone();
    fs::write(&sample, &other).unwrap();
    let reason = case.refused(&sample, SkipKind::Rejected);
    assert!(reason.contains("other content"), "{reason}");
    assert_eq!(
        case.observer.store.list::<Census>().unwrap()[0].alive,
        Some(7),
        "the first version stays"
    );
}

#[test]
fn two_versions_of_one_change_set_that_both_arrive_are_both_refused() {
    let tmp = fast_temp();
    let target = target(&tmp);
    let mut a = Device::tiny(&tmp, "a", SEASON_MILLIS);
    a.sync(&target);
    let sample = own_files(&target, &a).pop().unwrap();
    let bytes = fs::read(&sample).unwrap();
    let cs = fieldcage_core::sync::changeset::decode(&bytes).unwrap();
    let mut changes = cs.changes.clone();
    changes[0].hlc += 1;
    let (other, _) =
        fieldcage_core::sync::changeset::encode(&cs.device_id, "a", &cs.seen, &changes).unwrap();
    let twin = sample.with_file_name("twin.csv");
    fs::write(&twin, other).unwrap();
    let mut b = Device::empty(&tmp, "b", SEASON_MILLIS);
    let r = b.sync(&target);
    assert!(r.applied.is_empty(), "{r}");
    for f in [&sample, &twin] {
        let s: Vec<_> = r.skipped.iter().filter(|s| &s.file == f).collect();
        assert_eq!(s.len(), 1, "{r}");
        assert_eq!(s[0].kind, SkipKind::Rejected);
        assert!(s[0].reason.contains("identity"));
    }
    assert_eq!(b.store.change_count().unwrap(), 0);
}

#[test]
fn foreign_misplaced_and_newer_files_are_refused_with_the_reason() {
    let mut case = file_case();
    assert_eq!(case.observer.sync(&case.target).applied.len(), 1);
    let dir = case.sample.parent().unwrap().to_path_buf();
    // A table export dropped into a device folder.
    let foreign = dir.join("census.csv");
    fs::write(&foreign, "id,visit_id\n1,2\n").unwrap();
    let reason = case.refused(&foreign, SkipKind::Rejected);
    assert!(reason.contains("trailer"), "{reason}");
    fs::remove_file(&foreign).unwrap();
    // A file of a newer format version (re-signed so that only the version differs).
    let text = String::from_utf8(case.bytes.clone()).unwrap();
    let body: String = text
        .lines()
        .take(text.lines().count() - 1)
        .map(|l| format!("{l}\n"))
        .collect();
    let body = body.replacen("version=1", "version=2", 1);
    let newer = dir.join("newer.csv");
    fs::write(
        &newer,
        format!(
            "{body}sha256,{}\n",
            fieldcage_core::sync::changeset::sha256_hex(body.as_bytes())
        ),
    )
    .unwrap();
    let reason = case.refused(&newer, SkipKind::Rejected);
    assert!(
        reason.contains("version 2") && reason.contains("update fieldcage"),
        "{reason}"
    );
    fs::remove_file(&newer).unwrap();
    // A valid change-set in another device's folder.
    let elsewhere = case.target.join(uuid::Uuid::now_v7().to_string());
    fs::create_dir_all(&elsewhere).unwrap();
    let moved = elsewhere.join(case.sample.file_name().unwrap());
    fs::rename(&case.sample, &moved).unwrap();
    let reason = case.refused(&moved, SkipKind::Rejected);
    assert!(reason.contains("folder"), "{reason}");
    let _ = &case.tmp;
}

#[test]
fn a_change_set_after_a_gap_waits_and_applies_once_the_gap_is_filled() {
    let tmp = fast_temp();
    let target = target(&tmp);
    let mut a = Device::tiny(&tmp, "a", SEASON_MILLIS);
    let mut b = Device::empty(&tmp, "b", SEASON_MILLIS);
    let [v0, v1] = Tiny::visits();
    let [herb, pred] = Tiny::taxa();
    a.sync(&target);
    a.store
        .write(|w| w.insert(&census(100, v0, herb, 1)))
        .unwrap();
    a.sync(&target);
    a.store
        .write(|w| w.insert(&census(101, v1, pred, 2)))
        .unwrap();
    a.sync(&target);
    let files = own_files(&target, &a);
    assert_eq!(files.len(), 3);
    // Order by seq: 1.csv, then the two census files.
    let mut by_seq: Vec<(i64, PathBuf)> = files
        .iter()
        .map(|f| {
            let n = fieldcage_core::sync::changeset::seq_of_file_name(
                &f.file_name().unwrap().to_string_lossy(),
            )
            .unwrap();
            (n, f.clone())
        })
        .collect();
    by_seq.sort();
    let middle = by_seq[1].1.clone();
    let aside = tmp.path("aside.csv");
    fs::rename(&middle, &aside).unwrap();
    let r = b.sync(&target);
    assert_eq!(r.applied.len(), 1, "{r}");
    let waiting: Vec<_> = r
        .skipped
        .iter()
        .filter(|s| s.kind == SkipKind::Waiting)
        .collect();
    assert_eq!(waiting.len(), 1, "{r}");
    assert_eq!(waiting[0].file, by_seq[2].1);
    assert!(
        waiting[0].reason.contains("waits for"),
        "{}",
        waiting[0].reason
    );
    assert_eq!(crate::util::count(&b.store, "census"), 0);
    fs::rename(&aside, &middle).unwrap();
    let r = b.sync(&target);
    assert_eq!(r.applied.len(), 2, "{r}");
    assert_eq!(crate::util::count(&b.store, "census"), 2);
}

/// `schemas/changeset.json` is the format's definition: every row a device
/// writes fits its field list, types and constraints, and the code reads
/// the same version and columns.
#[test]
fn the_format_file_describes_every_row_written() {
    let tmp = fast_temp();
    let target = target(&tmp);
    let mut a = Device::tiny(&tmp, "a", SEASON_MILLIS);
    let [v0, _] = Tiny::visits();
    let [herb, _] = Tiny::taxa();
    let x = CensusId(crate::util::fixed_id(100));
    a.store
        .write(|w| {
            let mut c = census(100, v0, herb, 0);
            c.notes = Some("=looked, none\nfound".into());
            w.insert(&c)
        })
        .unwrap();
    let schema = tables::get("census").unwrap();
    a.store.write(|w| w.delete(schema, &x.to_string())).unwrap();
    a.store
        .write(|w| w.restore(schema, &x.to_string()))
        .unwrap();
    set_alive(&mut a, x, 2);
    a.sync(&target);
    let json: serde_json::Value =
        serde_json::from_str(fieldcage_core::sync::changeset::SCHEMA_JSON).unwrap();
    let fields = json["fields"].as_array().unwrap();
    assert_eq!(
        json["fieldcageFile"]["version"].as_i64(),
        Some(fieldcage_core::sync::changeset::format_version())
    );
    let mut ops = std::collections::BTreeSet::new();
    for file in own_files(&target, &a) {
        let text = fs::read_to_string(&file).unwrap();
        let mut reader = csv::ReaderBuilder::new()
            .has_headers(false)
            .flexible(true)
            .from_reader(text.as_bytes());
        let records: Vec<csv::StringRecord> = reader.records().map(|r| r.unwrap()).collect();
        let names: Vec<&str> = fields.iter().map(|f| f["name"].as_str().unwrap()).collect();
        assert_eq!(records[1].iter().collect::<Vec<_>>(), names);
        let rows = &records[2..records.len() - 1];
        assert!(!rows.is_empty());
        for row in rows {
            assert_eq!(row.len(), fields.len());
            for (cell, f) in row.iter().zip(fields) {
                let name = f["name"].as_str().unwrap();
                let c = &f["constraints"];
                if cell.is_empty() {
                    assert!(c["required"].as_bool() != Some(true), "{name} is required");
                    continue;
                }
                match f["type"].as_str().unwrap() {
                    "integer" => {
                        let n: i64 = cell.parse().unwrap();
                        assert!(n as f64 >= c["minimum"].as_f64().unwrap_or(f64::MIN));
                    }
                    "string" => {}
                    other => panic!("unexpected type {other}"),
                }
                if let Some(p) = c["pattern"].as_str() {
                    let re = regex::Regex::new(p).unwrap();
                    assert!(re.is_match(cell), "{name}: {cell:?} does not match {p}");
                }
                if let Some(allowed) = c["enum"].as_array() {
                    assert!(allowed.iter().any(|a| a == cell), "{name}: {cell}");
                }
                if name == "op" {
                    ops.insert(cell.to_owned());
                }
            }
        }
    }
    assert_eq!(
        ops.into_iter().collect::<Vec<_>>(),
        ["delete", "insert", "restore", "update"].map(String::from),
        "the sample covers every operation"
    );
}

/// A census recorded on one tablet for a visit another tablet deleted, and a
/// census of a taxon that turned out to be a duplicate: both are listed as
/// rows referring to a gone row, and both ways of settling work.
#[test]
fn rows_left_referring_to_a_deleted_or_hidden_row_are_listed_and_settled() {
    let tmp = fast_temp();
    let target = target(&tmp);
    let mut a = Device::tiny(&tmp, "a", SEASON_MILLIS);
    let mut b = Device::tiny(&tmp, "b", SEASON_MILLIS);
    let [_, v1] = Tiny::visits();
    let [herb, _] = Tiny::taxa();
    // a deletes visit 1 (it has no census there); b records one on it.
    a.store
        .write(|w| w.delete(tables::get("visit").unwrap(), &v1.to_string()))
        .unwrap();
    b.store
        .write(|w| w.insert(&census(100, v1, herb, 3)))
        .unwrap();
    // Both add a taxon with the same code; b records a census of its own one.
    let taxon = |n: u64| Taxon {
        id: TaxonId(crate::util::fixed_id(n)),
        experiment_id: Tiny::experiment(),
        code: "NEW".into(),
        scientific_name: format!("Animalia nova {n}"),
        common_name: None,
        role: Role::Herbivore,
        plant_group: None,
        notes: None,
    };
    a.store.write(|w| w.insert(&taxon(300))).unwrap();
    b.store.write(|w| w.insert(&taxon(301))).unwrap();
    let [v0, _] = Tiny::visits();
    b.store
        .write(|w| w.insert(&census(101, v0, TaxonId(crate::util::fixed_id(301)), 1)))
        .unwrap();
    a.sync(&target);
    b.sync(&target);
    a.sync(&target);
    for d in [&a, &b] {
        let open = sync::conflicts(&d.store).unwrap();
        let orphans: Vec<_> = open
            .iter()
            .filter(|c| c.kind == ConflictKind::Orphan)
            .collect();
        assert_eq!(orphans.len(), 2, "{open:#?}");
        assert_eq!(
            open.iter()
                .filter(|c| c.kind == ConflictKind::Duplicate)
                .count(),
            1,
            "the taxon with the larger id is hidden"
        );
        assert_eq!(sync::open_conflict_count(&d.store).unwrap(), open.len());
    }
    // a takes b's side for the visit: the deleted visit comes back. The
    // hidden taxon cannot be brought back that way (the duplicate decides
    // which taxon is shown), so its census is deleted instead.
    let open = sync::conflicts(&a.store).unwrap();
    let on_visit = open
        .iter()
        .find(|c| c.kind == ConflictKind::Orphan && c.field.as_deref() == Some("visit_id"))
        .unwrap();
    assert_eq!(on_visit.current.op, fieldcage_core::store::Op::Delete);
    assert!(on_visit.current.is_local && !on_visit.other.is_local);
    sync::resolve_conflict(&mut a.store, &on_visit.key, ConflictChoice::TakeOther).unwrap();
    assert!(
        a.store.get::<Visit>(v1.uuid()).unwrap().is_some(),
        "the visit is back"
    );
    let on_taxon = sync::conflicts(&a.store)
        .unwrap()
        .into_iter()
        .find(|c| c.kind == ConflictKind::Orphan)
        .unwrap();
    let err = sync::resolve_conflict(&mut a.store, &on_taxon.key, ConflictChoice::TakeOther)
        .unwrap_err()
        .to_string();
    assert!(err.contains("duplicate"), "{err}");
    sync::resolve_conflict(&mut a.store, &on_taxon.key, ConflictChoice::KeepCurrent).unwrap();
    a.sync(&target);
    b.sync(&target);
    for d in [&a, &b] {
        let open = sync::conflicts(&d.store).unwrap();
        assert_eq!(open.len(), 1, "only the duplicate taxon is left: {open:#?}");
        assert_eq!(open[0].kind, ConflictKind::Duplicate);
    }
    assert_eq!(data_snapshot(&a.store), data_snapshot(&b.store));
}

/// Tablets set up with different seeds hold two randomisations of one
/// experiment. Issue 16: they used to be merged into one database with
/// hundreds of duplicates and conflicts (a layout that mixes both); now the
/// other tablet's files are refused whole, naming both seeds, and nothing
/// of them is applied.
#[test]
fn tablets_set_up_with_different_seeds_are_told_so() {
    let tmp = Temp::new();
    let target = target(&tmp);
    let def = fieldcage_core::demo::definition().unwrap();
    let mut a = tmp.store("a.db");
    let mut b = tmp.store("b.db");
    fieldcage_core::setup::init(&mut a, &def, 1).unwrap();
    fieldcage_core::setup::init(&mut b, &def, 2).unwrap();
    let before = data_snapshot(&b);
    sync::sync_once(&mut a, &target).unwrap();
    let r = sync::sync_once(&mut b, &target).unwrap();
    let refused: Vec<_> = r
        .skipped
        .iter()
        .filter(|s| s.kind == SkipKind::Rejected)
        .collect();
    assert_eq!(refused.len(), 1, "{r}");
    let reason = &refused[0].reason;
    assert!(
        reason.contains("seed 1") && reason.contains("seed 2"),
        "{reason}"
    );
    assert!(reason.contains("two randomisations"), "{reason}");
    assert_eq!(crate::util::count(&b, "experiment"), 1);
    assert_eq!(r.open_conflicts, 0, "{r}");
    assert_eq!(
        data_snapshot(&b),
        before,
        "nothing of the other setup applied"
    );
}

/// Issue 16: `init` of one definition on two tablets gave two sets of
/// setup ids whenever the two copies of the file differed in anything at all
/// (a comment, Windows line endings), and a second `init` without `--seed`
/// drew another layout: 792 conflicts. Setup ids now come from the
/// experiment's code, each row's natural key and its place in the file
/// (comments and line endings do not count), and a definition may carry
/// its seed, so two inits converge with no conflict; a field record made on
/// one tablet then reaches the other.
#[test]
fn regression_16_two_inits_of_one_definition_converge_with_no_conflicts() {
    let tmp = Temp::new();
    let target = target(&tmp);
    let shipped = fieldcage_core::demo::DEFINITION;
    // The second tablet's copy: comments stripped, CRLF line endings, and
    // the seed written into [experiment] instead of given on the command line.
    let copy: String = shipped
        .lines()
        .filter(|l| !l.trim_start().starts_with('#'))
        .map(|l| {
            if l == "[experiment]" {
                "[experiment]\r\nseed = 77\r\n".to_owned()
            } else {
                format!("{l}\r\n")
            }
        })
        .collect();
    let def_a = fieldcage_core::demo::definition().unwrap();
    let def_b = fieldcage_core::setup::definition::parse(Path::new("copy.toml"), &copy).unwrap();
    let (seed_b, source) = fieldcage_core::setup::choose_seed(&def_b, None).unwrap();
    assert_eq!(
        (seed_b, source),
        (77, fieldcage_core::setup::SeedSource::Definition)
    );
    let mut a = tmp.store("a.db");
    let mut b = tmp.store("b.db");
    fieldcage_core::setup::init(&mut a, &def_a, 77).unwrap();
    fieldcage_core::setup::init(&mut b, &def_b, seed_b).unwrap();
    assert_eq!(data_snapshot(&a), data_snapshot(&b), "the same setup rows");

    // A first field record on a, then sync both ways.
    let cage = a.list::<Enclosure>().unwrap()[0].id;
    let visit = Visit {
        id: VisitId(uuid::Uuid::now_v7()),
        enclosure_id: cage,
        kind: VisitKind::Census,
        day: Some(3),
        visited_at: chrono::DateTime::parse_from_rfc3339("2026-05-14T09:00:00+02:00").unwrap(),
        observer: Some("crew-A".into()),
        device: None,
        completed: true,
        notes: None,
    };
    a.write(|w| w.insert(&visit)).unwrap();
    sync::sync_once(&mut a, &target).unwrap();
    let rb = sync::sync_once(&mut b, &target).unwrap();
    let ra = sync::sync_once(&mut a, &target).unwrap();
    for r in [&ra, &rb] {
        assert_eq!(r.applied.len(), 1, "{r}");
        assert!(r.skipped.is_empty(), "{r}");
        assert_eq!(r.open_conflicts, 0, "{r}");
        assert!(r.warnings.is_empty(), "{r}");
    }
    assert_eq!(data_snapshot(&a), data_snapshot(&b), "one season on both");
    assert_eq!(crate::util::count(&b, "visit"), 1);
    assert_eq!(crate::util::count(&b, "enclosure"), 24);
}

/// Issue 16: a change-set of another experiment was merged instead of
/// refused (its cages appeared in this experiment's blocks, 47 conflicts
/// opened, and the export no longer imported). It is refused whole, naming
/// both experiments.
#[test]
fn regression_16_a_change_set_of_another_experiment_is_refused() {
    let tmp = Temp::new();
    let target = target(&tmp);
    let def = fieldcage_core::demo::definition().unwrap();
    let text = std::fs::read_to_string(crate::util::repo_root().join("demo_data/definition.toml"))
        .unwrap();
    let other_text = text.replacen(
        "code = \"demo-meadow-2026\"",
        "code = \"other-site-2026\"",
        1,
    );
    assert_ne!(other_text, text, "the demo definition has its code");
    let other_path = tmp.path("other.toml");
    std::fs::write(&other_path, other_text).unwrap();
    let other = fieldcage_core::setup::definition::read(&other_path).unwrap();
    let mut a = tmp.store("a.db");
    let mut b = tmp.store("b.db");
    fieldcage_core::setup::init(&mut a, &other, 5).unwrap();
    fieldcage_core::setup::init(&mut b, &def, 5).unwrap();
    let before = data_snapshot(&b);
    sync::sync_once(&mut a, &target).unwrap();
    let r = sync::sync_once(&mut b, &target).unwrap();
    let refused: Vec<_> = r
        .skipped
        .iter()
        .filter(|s| s.kind == SkipKind::Rejected)
        .collect();
    assert_eq!(refused.len(), 1, "{r}");
    let reason = &refused[0].reason;
    assert!(
        reason.contains("other-site-2026") && reason.contains("demo-meadow-2026"),
        "{reason}"
    );
    assert_eq!(
        data_snapshot(&b),
        before,
        "nothing of the other experiment applied"
    );
    // A tablet joining empty takes the first experiment it meets.
    let mut c = tmp.store("c.db");
    sync::sync_once(&mut c, &target).unwrap();
    assert_eq!(crate::util::count(&c, "experiment"), 1);
}

/// Change-sets ready together are applied in one transaction; one whose
/// references fail only at commit must not take the others down with it.
#[test]
fn a_change_set_refused_at_commit_leaves_the_others_of_its_batch_applied() {
    use fieldcage_core::sync::changeset::{self, Change};
    let tmp = fast_temp();
    let target = target(&tmp);
    let mut a = Device::tiny(&tmp, "a", SEASON_MILLIS);
    a.sync(&target);
    let mut c = Device::tiny(&tmp, "c", SEASON_MILLIS + HOUR);
    c.store
        .write(|w| w.insert(&census(200, Tiny::visits()[0], Tiny::taxa()[0], 4)))
        .unwrap();
    c.sync(&target);
    // A well-formed change-set of a third device whose census names a visit
    // that exists nowhere: only the commit's foreign-key check can tell.
    let stranger = "01a20000-0000-7000-8000-000000000001";
    let row = crate::util::fixed_id(300).to_string();
    let value = |field: &'static str, v: Value| (field, v);
    let fields = [
        value("id", Value::Text(row.clone())),
        value(
            "visit_id",
            Value::Text(crate::util::fixed_id(301).to_string()),
        ),
        value("taxon_id", Value::Text(Tiny::taxa()[0].to_string())),
        value("alive", Value::Integer(5)),
    ];
    let changes: Vec<Change> = fields
        .into_iter()
        .enumerate()
        .map(|(i, (field, v))| Change {
            seq: i as i64 + 1,
            hlc: fieldcage_core::store::Hlc::new(SEASON_MILLIS, 0).0,
            table: "census",
            row_id: row.clone(),
            op: fieldcage_core::store::Op::Insert,
            field: Some(field),
            old_value: Value::Null,
            new_value: v,
        })
        .collect();
    let (bytes, _) =
        changeset::encode(stranger, "stranger", &Default::default(), &changes).unwrap();
    let folder = target.join(stranger);
    fs::create_dir_all(&folder).unwrap();
    let bad = folder.join(changeset::file_name(1));
    fs::write(&bad, bytes).unwrap();

    let mut b = Device::empty(&tmp, "b", SEASON_MILLIS + 2 * HOUR);
    let r = b.sync(&target);
    assert_eq!(r.applied.len(), 2, "a's and c's change-sets: {r}");
    let refused: Vec<_> = r.skipped.iter().filter(|s| s.file == bad).collect();
    assert_eq!(refused.len(), 1, "{r}");
    assert_eq!(refused[0].kind, SkipKind::Rejected);
    assert!(
        refused[0].reason.contains("committed") && refused[0].reason.contains("FOREIGN KEY"),
        "{}",
        refused[0].reason
    );
    assert_eq!(alive(&b, CensusId(crate::util::fixed_id(200))), Some(4));
    let strangers: i64 = b
        .store
        .raw()
        .query_row(
            "SELECT count(*) FROM change_log WHERE device_id = ?1",
            [stranger],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(strangers, 0, "nothing of the refused change-set stays");
    let rows: i64 = b
        .store
        .raw()
        .query_row("SELECT count(*) FROM census WHERE id = ?1", [&row], |r| {
            r.get(0)
        })
        .unwrap();
    assert_eq!(rows, 0);
    // The same tables as a device that never saw the stranger's file.
    fs::remove_dir_all(&folder).unwrap();
    let mut d = Device::empty(&tmp, "d", SEASON_MILLIS + 2 * HOUR);
    d.sync(&target);
    assert_eq!(data_snapshot(&b.store), data_snapshot(&d.store));
    // The next run tries it again and refuses it again, naming it.
    fs::create_dir_all(&folder).unwrap();
    fs::write(
        &bad,
        changeset::encode(stranger, "stranger", &Default::default(), &changes)
            .unwrap()
            .0,
    )
    .unwrap();
    let again = b.sync(&target);
    assert!(again.applied.is_empty(), "{again}");
    assert!(again.skipped.iter().any(|s| s.file == bad), "{again}");
}

/// Issue 16: a change-set whose clock lies near the top of its range (a
/// crafted file with a valid hash, or a tablet whose clock jumped decades
/// ahead) used to wrap the receiver's clock negative, so that every later
/// save failed ("CHECK constraint failed: hlc >= 0"). It is refused whole,
/// naming the device and the value, and saves go on.
#[test]
fn regression_16_a_change_set_with_a_clock_off_the_end_is_refused_and_saves_go_on() {
    let mut case = file_case();
    let text = String::from_utf8(case.bytes.clone()).unwrap();
    let body_end = text.rfind("sha256,").unwrap();
    let far = (fieldcage_core::store::Hlc::MAX_MILLIS - 10) << 16;
    let mut in_rows = false;
    let body: String = text[..body_end]
        .lines()
        .map(|line| {
            if line.starts_with("seq,hlc,") {
                in_rows = true;
                return line.to_owned();
            }
            match (in_rows, line.split_once(',')) {
                (true, Some((seq, rest))) if seq.parse::<i64>().is_ok() => {
                    let (_, after) = rest.split_once(',').unwrap();
                    format!("{seq},{far},{after}")
                }
                _ => line.to_owned(),
            }
        })
        .map(|l| l + "\n")
        .collect();
    assert!(
        body.contains(&far.to_string()),
        "the crafted file carries the clock"
    );
    let crafted = format!(
        "{body}sha256,{}\n",
        fieldcage_core::sync::changeset::sha256_hex(body.as_bytes())
    );
    fs::write(&case.sample, crafted).unwrap();
    let reason = case.refused(&case.sample.clone(), SkipKind::Rejected);
    assert!(reason.contains("more than five years"), "{reason}");
    assert!(
        reason.contains(&far.to_string()),
        "names the value: {reason}"
    );
    // The observer's own saves still work.
    let [v0, _] = Tiny::visits();
    let [herb, _] = Tiny::taxa();
    case.observer
        .store
        .write(|w| w.insert(&census(200, v0, herb, 3)))
        .unwrap();
}

/// Issue 16: a copy of an own change-set damaged without changing its size
/// (a flipped byte) was never written again, since only the size was
/// compared: every receiver refused it while its writer saw nothing to do.
#[test]
fn regression_16_a_damaged_own_file_of_the_same_size_is_written_again() {
    let tmp = fast_temp();
    let target = target(&tmp);
    let mut a = Device::tiny(&tmp, "a", SEASON_MILLIS);
    a.sync(&target);
    let file = own_files(&target, &a).pop().unwrap();
    let good = fs::read(&file).unwrap();
    let mut bad = good.clone();
    let middle = bad.len() / 2;
    bad[middle] ^= 0x20;
    fs::write(&file, &bad).unwrap();
    assert_eq!(fs::metadata(&file).unwrap().len(), good.len() as u64);
    let r = a.sync(&target);
    assert!(r.warnings.iter().any(|w| w.contains("damaged")), "{r}");
    assert_eq!(
        fs::read(&file).unwrap(),
        good,
        "written again, byte for byte"
    );
}

/// Issue 16: two sync runs on one database at once (the server's automatic
/// sync and `fieldcage sync`, or two CLI runs) used to corrupt the sync
/// state, after which every sync was refused ("Another database is using
/// this device's identity"). Two processes race here, round after round,
/// with saves between the rounds: no run is refused, and a receiver ends
/// with exactly the writer's data.
#[test]
fn regression_16_two_sync_processes_on_one_database_never_clash() {
    let tmp = fast_temp();
    let target = target(&tmp);
    let mut a = Device::tiny(&tmp, "a", SEASON_MILLIS);
    a.sync(&target);
    let db = a.store.path().to_path_buf();
    let [v0, _] = Tiny::visits();
    let [herb, _] = Tiny::taxa();
    let sync = || {
        std::process::Command::new(env!("CARGO_BIN_EXE_fieldcage"))
            .args(["sync", "--db"])
            .arg(&db)
            .arg("--target")
            .arg(&target)
            .output()
            .unwrap()
    };
    a.store
        .write(|w| w.insert(&census(300, v0, herb, 10)))
        .unwrap();
    let counted = CensusId(crate::util::fixed_id(300));
    for round in 0..8u64 {
        set_alive(&mut a, counted, round as i64);
        let (first, second) = std::thread::scope(|s| {
            let one = s.spawn(sync);
            let two = s.spawn(sync);
            (one.join().unwrap(), two.join().unwrap())
        });
        for out in [first, second] {
            let said = String::from_utf8_lossy(&out.stderr);
            assert!(out.status.success(), "round {round}: {said}");
            assert!(!said.contains("identity"), "round {round}: {said}");
        }
    }
    let mut b = Device::empty(&tmp, "b", SEASON_MILLIS);
    b.sync(&target);
    assert_eq!(data_snapshot(&b.store), data_snapshot(&a.store));
}
