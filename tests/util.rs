//! Shared fixtures.

use std::path::PathBuf;

use fieldcage::Store;
use fieldcage::setup::{self, Definition};
use rusqlite::types::Value;

/// A temporary folder that lives as long as the value.
pub struct Temp {
    pub dir: tempfile::TempDir,
}

impl Temp {
    pub fn new() -> Temp {
        Temp {
            dir: tempfile::tempdir().expect("temp dir"),
        }
    }

    pub fn path(&self, name: &str) -> PathBuf {
        self.dir.path().join(name)
    }

    /// A new empty store in this folder.
    pub fn store(&self, name: &str) -> Store {
        Store::open(self.path(name)).expect("open store")
    }
}

/// The demo season, built by the same code as `fieldcage demo`.
pub fn demo_store(tmp: &Temp) -> Store {
    let mut store = tmp.store("demo.db");
    fieldcage::demo::build(&mut store).expect("demo builds");
    store
}

/// The demo definition with parts of its text replaced.
pub fn demo_definition_with(replacements: &[(&str, &str)]) -> Result<Definition, fieldcage::Error> {
    let mut text = fieldcage::demo::DEFINITION.to_owned();
    for (from, to) in replacements {
        assert!(text.contains(from), "the demo definition has no {from:?}");
        text = text.replacen(from, to, 1);
    }
    setup::definition::parse(std::path::Path::new("test.toml"), &text)
}

/// A store initialised from the demo definition with some text replaced.
pub fn store_with(tmp: &Temp, replacements: &[(&str, &str)], seed: u64) -> Store {
    let def = demo_definition_with(replacements).expect("definition is valid");
    let mut store = tmp.store("variant.db");
    setup::init(&mut store, &def, seed).expect("init");
    store
}

/// Every row of every table (tombstones, device and change log included), as
/// text: two equal snapshots mean nothing at all changed.
pub fn snapshot(store: &Store) -> String {
    let conn = store.conn();
    let mut names: Vec<String> = conn
        .prepare("SELECT name FROM sqlite_schema WHERE type = 'table' ORDER BY name")
        .unwrap()
        .query_map([], |r| r.get(0))
        .unwrap()
        .collect::<Result<_, _>>()
        .unwrap();
    names.retain(|n| !n.starts_with("sqlite_"));
    let mut out = String::new();
    for name in names {
        out.push_str(&format!("== {name}\n"));
        let mut stmt = conn
            .prepare(&format!("SELECT * FROM {name} ORDER BY 1, 2"))
            .unwrap();
        let n = stmt.column_count();
        let rows = stmt
            .query_map([], |r| {
                (0..n)
                    .map(|i| r.get::<_, Value>(i))
                    .collect::<Result<Vec<_>, _>>()
            })
            .unwrap();
        for row in rows {
            out.push_str(&format!("{:?}\n", row.unwrap()));
        }
    }
    out
}

/// Count of live rows in a table.
pub fn count(store: &Store, table: &str) -> i64 {
    store
        .conn()
        .query_row(
            &format!("SELECT count(*) FROM {table} WHERE deleted = 0"),
            [],
            |r| r.get(0),
        )
        .unwrap()
}

/// Every row (tombstones included) of the data tables only: what two devices
/// holding the same data agree on.
pub fn data_snapshot(store: &Store) -> String {
    let mut out = String::new();
    for schema in fieldcage::tables::all() {
        out.push_str(&format!("== {}\n", schema.name));
        let mut stmt = store
            .conn()
            .prepare(&format!("SELECT * FROM {} ORDER BY id", schema.name))
            .unwrap();
        let n = stmt.column_count();
        let rows = stmt
            .query_map([], |r| {
                (0..n)
                    .map(|i| r.get::<_, Value>(i))
                    .collect::<Result<Vec<_>, _>>()
            })
            .unwrap();
        for row in rows {
            out.push_str(&format!("{:?}\n", row.unwrap()));
        }
    }
    out
}
