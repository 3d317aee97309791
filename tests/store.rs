//! Opening, durable settings and migrations.

use fieldcage::Store;
use fieldcage::store::migrations::{self, MIGRATIONS};
use rusqlite::Connection;

use crate::util::Temp;

#[test]
fn durable_settings_are_in_force_after_open() {
    let tmp = Temp::new();
    let store = tmp.store("a.db");
    let conn = store.conn();
    let mode: String = conn
        .query_row("PRAGMA journal_mode", [], |r| r.get(0))
        .unwrap();
    let sync: i64 = conn
        .query_row("PRAGMA synchronous", [], |r| r.get(0))
        .unwrap();
    let fk: i64 = conn
        .query_row("PRAGMA foreign_keys", [], |r| r.get(0))
        .unwrap();
    // WAL + synchronous=FULL (2) + foreign keys on: the durability rules of DESIGN.md.
    assert_eq!((mode.as_str(), sync, fk), ("wal", 2, 1));
}

#[test]
fn migrations_bring_an_empty_file_to_the_latest_version() {
    let tmp = Temp::new();
    let store = tmp.store("a.db");
    assert_eq!(
        migrations::current_version(store.conn()).unwrap(),
        migrations::latest_version()
    );
    let mut names = crate::util::table_names(&store);
    // The data tables (schemas/tables), then this device's own bookkeeping:
    // identity, change log and the sync tables of 0003_sync.
    names.retain(|n| fieldcage::tables::get(n).is_none());
    assert_eq!(
        names,
        [
            "change_log",
            "local_device",
            "sync_applied",
            "sync_clock_anomaly",
            "sync_conflict",
            "sync_device",
            "sync_hidden",
            "sync_knowledge",
            "sync_run",
            "sync_written"
        ]
    );
    let data: i64 = store
        .conn()
        .query_row(
            "SELECT count(*) FROM sqlite_schema WHERE type = 'table'",
            [],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(data, fieldcage::tables::all().len() as i64 + 10);
}

#[test]
fn every_earlier_version_migrates_to_the_latest() {
    for from in 0..MIGRATIONS.len() {
        let tmp = Temp::new();
        let path = tmp.path("old.db");
        {
            let conn = Connection::open(&path).unwrap();
            for (_, sql) in &MIGRATIONS[..from] {
                conn.execute_batch(sql).unwrap();
            }
            conn.execute_batch(&format!("PRAGMA user_version = {from}"))
                .unwrap();
        }
        let store = Store::open(&path).unwrap();
        assert_eq!(
            migrations::current_version(store.conn()).unwrap(),
            migrations::latest_version(),
            "from {from}"
        );
    }
}

#[test]
fn reopening_is_a_no_op() {
    let tmp = Temp::new();
    let path = tmp.path("a.db");
    let device = Store::open(&path).unwrap().device_id().to_owned();
    let before = crate::util::snapshot(&Store::open(&path).unwrap());
    let mut conn = Connection::open(&path).unwrap();
    assert_eq!(
        migrations::migrate(&mut conn).unwrap(),
        0,
        "nothing left to apply"
    );
    drop(conn);
    let store = Store::open(&path).unwrap();
    assert_eq!(store.device_id(), device, "the device id is made once");
    assert_eq!(crate::util::snapshot(&store), before);
}

#[test]
fn a_database_from_a_newer_release_is_refused() {
    let tmp = Temp::new();
    let path = tmp.path("new.db");
    Connection::open(&path)
        .unwrap()
        .execute_batch(&format!(
            "PRAGMA user_version = {}",
            migrations::latest_version() + 1
        ))
        .unwrap();
    let err = Store::open(&path).unwrap_err().to_string();
    assert!(err.contains("newer than this fieldcage"), "{err}");
}

#[test]
fn a_failing_migration_leaves_the_file_untouched() {
    let tmp = Temp::new();
    let path = tmp.path("clash.db");
    // A table with a name the first migration wants makes it fail half-way.
    Connection::open(&path)
        .unwrap()
        .execute_batch("CREATE TABLE visit (x INTEGER)")
        .unwrap();
    assert!(Store::open(&path).is_err());
    let conn = Connection::open(&path).unwrap();
    let version: i64 = conn
        .query_row("PRAGMA user_version", [], |r| r.get(0))
        .unwrap();
    let tables: i64 = conn
        .query_row(
            "SELECT count(*) FROM sqlite_schema WHERE type = 'table'",
            [],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(
        (version, tables),
        (0, 1),
        "the migration rolled back as a whole"
    );
}
