//! The change log: every write is in it, in the same transaction; a rejected
//! write leaves nothing behind; the tables can be rebuilt from the log.

use crate::util::Raw;
use std::collections::BTreeMap;

use fieldcage_core::model::*;
use fieldcage_core::tables;
use rusqlite::types::Value;

use crate::util::{Temp, count, demo_store, log_entries, snapshot};

/// Replay the log: (table, row id) → field → value, and the deleted rows.
fn replay(store: &fieldcage_core::Store) -> BTreeMap<(String, String), BTreeMap<String, Value>> {
    let mut rows: BTreeMap<(String, String), BTreeMap<String, Value>> = BTreeMap::new();
    log_entries(store);
    let conn = store.raw();
    let mut stmt = conn
        .prepare("SELECT table_name, row_id, op, field, new_value FROM log_entry ORDER BY hlc, device_id, seq")
        .unwrap();
    let entries = stmt
        .query_map([], |r| {
            Ok((
                r.get::<_, String>(0)?,
                r.get::<_, String>(1)?,
                r.get::<_, String>(2)?,
                r.get::<_, Option<String>>(3)?,
                r.get::<_, Value>(4)?,
            ))
        })
        .unwrap();
    for e in entries {
        let (table, id, op, field, value) = e.unwrap();
        match op.as_str() {
            "delete" => {
                rows.remove(&(table, id));
            }
            _ => {
                rows.entry((table, id))
                    .or_default()
                    .insert(field.unwrap(), value);
            }
        }
    }
    rows
}

/// The live tables in the same shape, leaving out NULLs.
fn live_tables(
    store: &fieldcage_core::Store,
) -> BTreeMap<(String, String), BTreeMap<String, Value>> {
    let mut out = BTreeMap::new();
    for schema in tables::all() {
        for row in store.rows(schema).unwrap() {
            let Value::Text(id) = &row[0] else {
                panic!("id is text")
            };
            let fields: BTreeMap<String, Value> = schema
                .fields
                .iter()
                .zip(&row)
                .filter(|(_, v)| !matches!(v, Value::Null))
                .map(|(f, v)| (f.name.clone(), v.clone()))
                .collect();
            out.insert((schema.name.clone(), id.clone()), fields);
        }
    }
    out
}

#[test]
fn every_write_of_the_demo_build_is_in_the_change_log() {
    let tmp = Temp::new();
    let store = demo_store(&tmp);
    let live = live_tables(&store);
    assert!(
        live.len() > 2_000,
        "the demo season has {} rows",
        live.len()
    );
    // Rebuilding every row from the log gives exactly the tables.
    assert_eq!(replay(&store), live);
    // Every non-empty field of every row has its entries: nothing written unlogged,
    // and every entry beyond the first of a field is an update of it. (A field
    // left empty at insert and set later, such as a flag's confirmation note,
    // starts with an update.)
    let fields: usize = live.values().map(|f| f.len()).sum();
    log_entries(&store);
    let (distinct, inserts, updates, inserted_twice): (i64, i64, i64, i64) = store
        .raw()
        .query_row(
            "SELECT (SELECT count(*) FROM (SELECT DISTINCT table_name, row_id, field FROM log_entry)), \
                    (SELECT count(*) FROM log_entry WHERE op = 'insert'), \
                    (SELECT count(*) FROM log_entry WHERE op = 'update'), \
                    (SELECT count(*) FROM (SELECT 1 FROM log_entry WHERE op = 'insert' \
                                           GROUP BY table_name, row_id, field HAVING count(*) > 1))",
            [],
            |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?, r.get(3)?)),
        )
        .unwrap();
    assert_eq!(distinct as usize, fields);
    assert_eq!(inserted_twice, 0, "a field is inserted once at most");
    assert_eq!(store.change_count().unwrap(), inserts + updates);
}

#[test]
fn sequence_numbers_are_contiguous_and_persisted() {
    let tmp = Temp::new();
    let store = demo_store(&tmp);
    log_entries(&store);
    let (min, max, n): (i64, i64, i64) = store
        .raw()
        .query_row(
            "SELECT min(seq), max(seq), count(*) FROM log_entry WHERE device_id = ?1",
            [store.device_id()],
            |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)),
        )
        .unwrap();
    assert_eq!((min, max), (1, n));
    let next: i64 = store
        .raw()
        .query_row("SELECT next_seq FROM local_device", [], |r| r.get(0))
        .unwrap();
    assert_eq!(next, n + 1);
}

#[test]
fn a_rejected_write_leaves_every_table_unchanged() {
    let tmp = Temp::new();
    let mut store = demo_store(&tmp);
    let before = snapshot(&store);
    let visit = store
        .list::<Visit>()
        .unwrap()
        .into_iter()
        .find(|v| v.kind == VisitKind::Cover)
        .unwrap();
    let animals: Vec<TaxonId> = store
        .list::<Taxon>()
        .unwrap()
        .into_iter()
        .filter(|t| t.role != Role::Plant)
        .map(|t| t.id)
        .collect();
    let result = store.write(|w| {
        // Two good writes, then a bad one: the whole transaction must go.
        let mut v = visit.clone();
        v.notes = Some("looked twice".into());
        w.update(&v)?;
        let id = w.new_id();
        w.insert(&Census {
            id: CensusId(id),
            visit_id: visit.id,
            taxon_id: animals[0],
            alive: Some(3),
            dead: None,
            missing: None,
            notes: None,
        })?;
        let id = w.new_id();
        w.insert(&Census {
            id: CensusId(id),
            visit_id: visit.id,
            taxon_id: animals[1],
            alive: Some(-1),
            dead: None,
            missing: None,
            notes: None,
        })
    });
    let err = result.unwrap_err().to_string();
    assert!(
        err.contains("census.alive") && err.contains("-1"),
        "names field and value: {err}"
    );
    assert_eq!(snapshot(&store), before);
}

#[test]
fn updates_and_deletes_log_old_and_new_values() {
    let tmp = Temp::new();
    let mut store = demo_store(&tmp);
    let mut c = store.list::<Census>().unwrap()[0].clone();
    let old_alive = c.alive;
    c.alive = Some(old_alive.unwrap() + 1);
    let changed = store.write(|w| w.update(&c)).unwrap();
    assert_eq!(changed, 1, "only alive changed");
    let (op, old, new): (String, i64, i64) = store
        .raw()
        .query_row(
            "SELECT op, old_value, new_value FROM change_log WHERE row_id = ?1 AND field = 'alive' ORDER BY seq DESC LIMIT 1",
            [c.id.to_string()],
            |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)),
        )
        .unwrap();
    assert_eq!(
        (op.as_str(), old, new),
        ("update", old_alive.unwrap(), old_alive.unwrap() + 1)
    );

    let schema = tables::get("census").unwrap();
    let before = count(&store, "census");
    store
        .write(|w| w.delete(schema, &c.id.to_string()))
        .unwrap();
    assert_eq!(count(&store, "census"), before - 1);
    assert!(store.get::<Census>(c.id.uuid()).unwrap().is_none());
    // A tombstone: the row is still there, flagged, and the delete is logged.
    let (deleted, logged): (i64, i64) = store
        .raw()
        .query_row(
            "SELECT (SELECT deleted FROM census WHERE id = ?1), \
                    (SELECT count(*) FROM change_log WHERE row_id = ?1 AND op = 'delete')",
            [c.id.to_string()],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .unwrap();
    assert_eq!((deleted, logged), (1, 1));
}

#[test]
fn deleting_a_row_that_others_refer_to_is_refused() {
    let tmp = Temp::new();
    let mut store = demo_store(&tmp);
    let before = snapshot(&store);
    let visit = store.list::<Census>().unwrap()[0].visit_id;
    let err = store
        .write(|w| w.delete(tables::get("visit").unwrap(), &visit.to_string()))
        .unwrap_err()
        .to_string();
    assert!(err.contains("census row(s) refer to it"), "{err}");
    assert_eq!(snapshot(&store), before);
}

#[test]
fn hlc_timestamps_never_go_backwards_when_the_clock_does() {
    use std::sync::Arc;
    use std::sync::atomic::{AtomicI64, Ordering};
    let tmp = Temp::new();
    let wall = Arc::new(AtomicI64::new(1_800_000_000_000));
    let clock = {
        let wall = wall.clone();
        Arc::new(move || wall.load(Ordering::SeqCst))
    };
    let path = tmp.path("clock.db");
    let mut store = fieldcage_core::Store::open_with_clock(&path, clock).unwrap();
    let def = crate::util::demo_definition_with(&[]).unwrap();
    fieldcage_core::setup::init(&mut store, &def, 1).unwrap();
    wall.store(0, Ordering::SeqCst); // the tablet's clock falls back to 1970
    let mut t = store.list::<Treatment>().unwrap()[0].clone();
    t.notes = Some("after the clock reset".into());
    store.write(|w| w.update(&t)).unwrap();
    let hlcs: Vec<i64> = crate::util::column(&store, "SELECT hlc FROM change_log ORDER BY seq");
    assert!(
        hlcs.windows(2).all(|w| w[0] <= w[1]),
        "timestamps follow the sequence"
    );
    assert!(
        hlcs.last() > hlcs.first(),
        "the later write has the later timestamp"
    );
}

/// The row index keeps one entry per insert (its `id` entry); the other
/// entries of an insert are found from it by seq. For every row of the demo
/// season, after edits, deletes, restores and a second device's entries, the
/// entries found through the index are exactly those a full read of the log
/// finds.
#[test]
fn the_entries_of_every_row_are_found_through_the_row_index() {
    let tmp = Temp::new();
    let mut store = demo_store(&tmp);
    let cover = tables::get("cover_record").unwrap();
    let ids: Vec<String> =
        crate::util::column(&store, "SELECT id FROM cover_record ORDER BY id LIMIT 3");
    store
        .write(|w| {
            w.update_fields(cover, &ids[0], &[("notes", Value::Text("edited".into()))])?;
            w.delete(cover, &ids[1])?;
            w.delete(cover, &ids[2])?;
            w.restore(cover, &ids[2])
        })
        .unwrap();
    // Entries of another device, in the log as a sync stores them.
    let target = tmp.path("target");
    std::fs::create_dir_all(&target).unwrap();
    fieldcage_core::sync::sync_once(&mut store, &target).unwrap();
    let mut other = fieldcage_core::Store::open(tmp.path("other.db")).unwrap();
    fieldcage_core::sync::sync_once(&mut other, &target).unwrap();
    other
        .write(|w| w.update_fields(cover, &ids[0], &[("notes", Value::Text("again".into()))]))
        .unwrap();
    fieldcage_core::sync::sync_once(&mut other, &target).unwrap();
    fieldcage_core::sync::sync_once(&mut store, &target).unwrap();

    let mut scanned: BTreeMap<(String, String), Vec<(String, i64)>> = BTreeMap::new();
    log_entries(&store);
    let conn = store.raw();
    let mut stmt = conn
        .prepare("SELECT table_name, row_id, device_id, seq FROM log_entry ORDER BY device_id, seq")
        .unwrap();
    for row in stmt
        .query_map([], |r| {
            Ok((
                r.get::<_, String>(0)?,
                r.get::<_, String>(1)?,
                r.get(2)?,
                r.get(3)?,
            ))
        })
        .unwrap()
    {
        let (table, row_id, device, seq) = row.unwrap();
        scanned
            .entry((table, row_id))
            .or_default()
            .push((device, seq));
    }
    assert!(scanned.len() > 1000, "the demo season has many rows");
    let devices: std::collections::BTreeSet<&String> =
        scanned.values().flatten().map(|(d, _)| d).collect();
    assert_eq!(devices.len(), 2, "entries of both devices");
    for ((table, row_id), expected) in &scanned {
        let found: Vec<(String, i64)> =
            fieldcage_core::store::log::row_entries(&store, table, row_id)
                .unwrap()
                .into_iter()
                .map(|e| (e.device_id, e.seq))
                .collect();
        assert_eq!(&found, expected, "{table} {row_id}");
    }
    let plan = fieldcage_core::store::log::row_entries_plan(&store.raw()).unwrap();
    assert!(
        plan.iter().any(|p| p.contains("INDEX change_log_row_idx"))
            && !plan.iter().any(|p| p.starts_with("SCAN")),
        "{plan:?}"
    );
}
