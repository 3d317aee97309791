//! Opening, durable settings and migrations.

use crate::util::Raw;
use fieldcage_core::Store;
use fieldcage_core::store::migrations::{self, MIGRATIONS};
use rusqlite::Connection;

use crate::util::Temp;

#[test]
fn durable_settings_are_in_force_after_open() {
    let tmp = Temp::new();
    let store = tmp.store("a.db");
    // The store's own connection, as SQLite reports it.
    let s = store.settings().unwrap();
    // WAL + synchronous=FULL (2) + foreign keys on: the durability rules of docs/methods.md §10.2.
    assert_eq!(
        (s.journal_mode.as_str(), s.synchronous, s.foreign_keys),
        ("wal", 2, true)
    );
}

#[test]
fn migrations_bring_an_empty_file_to_the_latest_version() {
    let tmp = Temp::new();
    let store = tmp.store("a.db");
    assert_eq!(
        migrations::current_version(&store.raw()).unwrap(),
        migrations::latest_version()
    );
    let mut names = crate::util::table_names(&store);
    // The data tables (schemas/tables), then this device's own bookkeeping:
    // identity, change log, the answers kept for repeated saves (0008) and
    // the sync tables of 0003_sync.
    names.retain(|n| fieldcage_core::tables::get(n).is_none());
    assert_eq!(
        names,
        [
            "change_log",
            "local_device",
            "operation_receipt",
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
        .raw()
        .query_row(
            "SELECT count(*) FROM sqlite_schema WHERE type = 'table'",
            [],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(data, fieldcage_core::tables::all().len() as i64 + 11);
}

#[test]
fn every_earlier_version_migrates_to_the_latest() {
    for from in 0..MIGRATIONS.len() {
        let tmp = Temp::new();
        let path = tmp.path("old.db");
        {
            let conn = Connection::open(&path).unwrap();
            for m in &MIGRATIONS[..from] {
                apply(&conn, m);
            }
            conn.execute_batch(&format!("PRAGMA user_version = {from}"))
                .unwrap();
        }
        let store = Store::open(&path).unwrap();
        assert_eq!(
            migrations::current_version(&store.raw()).unwrap(),
            migrations::latest_version(),
            "from {from}"
        );
    }
}

/// One migration as `migrate` applies it: its SQL, then its Rust step.
fn apply(conn: &Connection, m: &migrations::Migration) {
    conn.execute_batch(m.sql).unwrap();
    if let Some(step) = m.then {
        step(conn).unwrap();
    }
}

/// (device, seq, row, op, field, value) of a change-log entry.
type Logged = (
    &'static str,
    i64,
    &'static str,
    &'static str,
    Option<&'static str>,
    rusqlite::types::Value,
);

#[test]
fn the_change_log_rebuilds_keep_every_entry_and_pack_each_insert() {
    // 0005 writes the op check without an IN list; 0006-0007 store each
    // insert run (id entry, then the row's other fields) as one entry.
    use rusqlite::types::Value;
    let tmp = Temp::new();
    let path = tmp.path("v4.db");
    #[rustfmt::skip]
    let rows: Vec<Logged> = vec![
        ("d1", 1, "r1", "insert", Some("id"), Value::Text("r1".into())),
        ("d1", 2, "r1", "insert", Some("alive"), Value::Integer(3)),
        ("d1", 3, "r1", "insert", Some("notes"), Value::Text("x, \"y\"".into())),
        ("d1", 4, "r1", "update", Some("alive"), Value::Real(2.5)),
        ("d1", 5, "r2", "insert", Some("id"), Value::Text("r2".into())),
        ("d1", 6, "r2", "insert", Some("alive"), Value::Real(0.1 + 0.2)),
        // an insert entry that follows no id entry (never written by
        // fieldcage) is kept as an insert of its own
        ("d1", 7, "r1", "insert", Some("dead"), Value::Integer(0)),
        ("d2", 1, "r1", "delete", None, Value::Null),
        ("d2", 2, "r1", "restore", None, Value::Null),
    ];
    {
        let conn = Connection::open(&path).unwrap();
        for m in &MIGRATIONS[..4] {
            apply(&conn, m);
        }
        for (device, seq, row, op, field, value) in &rows {
            conn.execute(
                "INSERT INTO change_log (device_id, seq, hlc, table_name, row_id, op, field, \
                 old_value, new_value) VALUES (?1, ?2, 7, 'census', ?3, ?4, ?5, NULL, ?6)",
                rusqlite::params![device, seq, row, op, field, value],
            )
            .unwrap();
        }
        conn.execute_batch("PRAGMA user_version = 4").unwrap();
    }
    let store = Store::open(&path).unwrap();
    let kept: Vec<_> = fieldcage_core::store::log::all_entries(&store.raw())
        .unwrap()
        .into_iter()
        .map(|c| {
            let e = c.entry;
            (
                e.device_id,
                e.seq,
                c.row_id,
                e.op.as_str(),
                e.field,
                e.new_value,
            )
        })
        .collect();
    let expected: Vec<_> = rows
        .iter()
        .map(|(d, s, r, o, f, v)| {
            (
                d.to_string(),
                *s,
                r.to_string(),
                *o,
                f.map(str::to_owned),
                v.clone(),
            )
        })
        .collect();
    assert_eq!(kept, expected, "every entry, with its value's type");
    let conn = store.raw();
    let stored: Vec<(String, i64, String)> = conn
        .prepare("SELECT device_id, seq, op FROM change_log ORDER BY device_id, seq")
        .unwrap()
        .query_map([], |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)))
        .unwrap()
        .collect::<rusqlite::Result<_>>()
        .unwrap();
    let stored: Vec<(&str, i64, &str)> = stored
        .iter()
        .map(|(d, s, o)| (d.as_str(), *s, o.as_str()))
        .collect();
    assert_eq!(
        stored,
        [
            ("d1", 1, "insert"),
            ("d1", 4, "update"),
            ("d1", 5, "insert"),
            ("d1", 7, "insert"),
            ("d2", 1, "delete"),
            ("d2", 2, "restore"),
        ],
        "one stored entry per insert run"
    );
    assert_eq!(store.change_count().unwrap(), rows.len() as i64);
    let refused = store.raw().execute(
        "INSERT INTO change_log (device_id, seq, hlc, table_name, row_id, op) \
         VALUES ('d3', 1, 1, 'census', 'r1', 'merge')",
        [],
    );
    assert!(
        refused.unwrap_err().to_string().contains("CHECK"),
        "an unknown op is still refused"
    );
    let index: i64 = store
        .raw()
        .query_row(
            "SELECT count(*) FROM sqlite_schema WHERE type = 'index' AND name = 'change_log_row_idx' \
             AND tbl_name = 'change_log'",
            [],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(index, 1, "the row index is rebuilt");
    // The reason for 0005: storing an entry builds no temporary b-tree.
    let conn = store.raw();
    let opcodes: Vec<String> = conn
        .prepare(&format!(
            "EXPLAIN {}",
            fieldcage_core::store::log::INSERT_SQL
        ))
        .unwrap()
        .query_map(
            rusqlite::params_from_iter(std::iter::repeat_n(rusqlite::types::Null, 9)),
            |r| r.get::<_, String>(1),
        )
        .unwrap()
        .collect::<rusqlite::Result<_>>()
        .unwrap();
    assert!(opcodes.iter().any(|o| o == "Insert" || o == "IdxInsert"));
    assert!(!opcodes.iter().any(|o| o == "OpenEphemeral"), "{opcodes:?}");
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

/// A reader connection (for long reads such as the results screen's
/// analysis) cannot write, and inside one snapshot it sees one state of the
/// data while the writer goes on.
#[test]
fn a_reader_sees_one_snapshot_and_cannot_write() {
    let tmp = Temp::new();
    let mut store = crate::util::demo_store(&tmp);
    let mut reader = Store::open_reader(store.path()).unwrap();
    assert_eq!(reader.device_id(), store.device_id());
    let cover = fieldcage_core::tables::get("cover_record").unwrap();
    let id: String = store
        .raw()
        .query_row("SELECT id FROM cover_record ORDER BY id LIMIT 1", [], |r| {
            r.get(0)
        })
        .unwrap();
    // Through the store's own connection (inside the snapshot, the reader's).
    let live = |s: &Store| fieldcage_core::store::rows(s, cover).unwrap().len();
    let before = live(&store);
    let (inside_before, inside_after) = reader
        .read_snapshot(|r| {
            let first = live(r);
            store.write(|w| w.delete(cover, &id)).unwrap();
            Ok((first, live(r)))
        })
        .unwrap();
    assert_eq!(inside_before, before);
    assert_eq!(
        inside_after, before,
        "the writer's delete is after the snapshot"
    );
    assert_eq!(live(&reader), before - 1, "a new read sees it");
    let live_id: String = store
        .raw()
        .query_row(
            "SELECT id FROM cover_record WHERE deleted = 0 LIMIT 1",
            [],
            |r| r.get(0),
        )
        .unwrap();
    let refused = reader.write(|w| w.delete(cover, &live_id));
    let refused = refused.unwrap_err().to_string();
    assert!(
        refused.contains("readonly") || refused.contains("read-only"),
        "a reader cannot write: {refused}"
    );
}
