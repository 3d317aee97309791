//! The table schemas in schemas/tables are the one definition of every column:
//! the SQLite tables and the record structs must agree with them.

use fieldcage::model::*;
use fieldcage::store::Record;
use fieldcage::tables::{self, FieldType};

use crate::util::{Temp, demo_store};

#[test]
fn sqlite_tables_match_the_table_schemas() {
    let tmp = Temp::new();
    let store = tmp.store("a.db");
    for schema in tables::all() {
        let mut stmt = store
            .conn()
            .prepare(&format!("PRAGMA table_info({})", schema.name))
            .unwrap();
        let columns: Vec<(String, String, bool, bool)> = stmt
            .query_map([], |r| {
                Ok((
                    r.get(1)?,
                    r.get(2)?,
                    r.get::<_, i64>(3)? == 1,
                    r.get::<_, i64>(5)? > 0,
                ))
            })
            .unwrap()
            .collect::<Result<_, _>>()
            .unwrap();
        let (last, columns) = columns.split_last().unwrap();
        assert_eq!(
            last.0, "deleted",
            "{}: the tombstone column comes last",
            schema.name
        );
        assert_eq!(
            columns.len(),
            schema.fields.len(),
            "{}: column count",
            schema.name
        );
        for ((name, sql_type, not_null, pk), field) in columns.iter().zip(&schema.fields) {
            assert_eq!(name, &field.name, "{}: column order", schema.name);
            let expected = match field.kind {
                FieldType::Integer | FieldType::Boolean => "INTEGER",
                FieldType::Number => "REAL",
                FieldType::String | FieldType::Date | FieldType::Datetime => "TEXT",
            };
            assert_eq!(sql_type, expected, "{}.{}", schema.name, name);
            assert_eq!(
                *not_null, field.constraints.required,
                "{}.{}: NOT NULL vs required",
                schema.name, name
            );
            assert_eq!(*pk, name == "id", "{}.{}: primary key", schema.name, name);
        }
    }
}

#[test]
fn foreign_keys_in_sqlite_match_the_table_schemas() {
    let tmp = Temp::new();
    let store = tmp.store("a.db");
    for schema in tables::all() {
        let mut stmt = store
            .conn()
            .prepare(&format!("PRAGMA foreign_key_list({})", schema.name))
            .unwrap();
        let mut sql: Vec<(String, String)> = stmt
            .query_map([], |r| Ok((r.get(3)?, r.get(2)?)))
            .unwrap()
            .collect::<Result<_, _>>()
            .unwrap();
        let mut declared: Vec<(String, String)> = schema
            .foreign_keys
            .iter()
            .map(|fk| (fk.field.clone(), fk.resource.clone()))
            .collect();
        sql.sort();
        declared.sort();
        assert_eq!(sql, declared, "{}", schema.name);
    }
}

#[test]
fn tables_are_listed_after_every_table_they_reference() {
    let names: Vec<&str> = tables::all().iter().map(|t| t.name.as_str()).collect();
    for (i, schema) in tables::all().iter().enumerate() {
        for fk in &schema.foreign_keys {
            let j = names
                .iter()
                .position(|n| *n == fk.resource)
                .expect("referenced table exists");
            assert!(
                j < i || fk.resource == schema.name,
                "{} comes before {}",
                schema.name,
                fk.resource
            );
        }
    }
}

fn record_round_trips<R: Record + PartialEq + std::fmt::Debug>(store: &fieldcage::Store) -> usize {
    let schema = tables::get(R::TABLE).unwrap();
    let rows = store.list::<R>().unwrap();
    for r in &rows {
        let values = fieldcage::store::to_values(schema, r).unwrap();
        let back: R = fieldcage::store::from_values(schema, values).unwrap();
        assert_eq!(&back, r);
    }
    rows.len()
}

#[test]
fn every_record_struct_fits_its_table_schema() {
    let tmp = Temp::new();
    let store = demo_store(&tmp);
    let counts = [
        record_round_trips::<Experiment>(&store),
        record_round_trips::<Site>(&store),
        record_round_trips::<Block>(&store),
        record_round_trips::<Treatment>(&store),
        record_round_trips::<Enclosure>(&store),
        record_round_trips::<Taxon>(&store),
        record_round_trips::<Scale>(&store),
        record_round_trips::<ScaleClass>(&store),
        record_round_trips::<StockingPlan>(&store),
        record_round_trips::<Assignment>(&store),
        record_round_trips::<CoverProtocol>(&store),
        record_round_trips::<GroundCategory>(&store),
        record_round_trips::<DamageProtocol>(&store),
        record_round_trips::<ScheduleEntry>(&store),
        record_round_trips::<TaggedLeaf>(&store),
        record_round_trips::<Visit>(&store),
        record_round_trips::<StockingEvent>(&store),
        record_round_trips::<Census>(&store),
        record_round_trips::<CoverRecord>(&store),
        record_round_trips::<DamageRecord>(&store),
        record_round_trips::<StoredFlag>(&store),
    ];
    // One struct per table, each with rows in the demo season.
    assert_eq!(counts.len(), tables::all().len());
    assert!(counts.iter().all(|n| *n > 0), "{counts:?}");
}

#[test]
fn schema_files_on_disk_are_the_embedded_ones() {
    let dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("schemas/tables");
    let mut on_disk: Vec<String> = std::fs::read_dir(&dir)
        .unwrap()
        .map(|e| {
            e.unwrap()
                .file_name()
                .to_string_lossy()
                .trim_end_matches(".json")
                .to_owned()
        })
        .collect();
    on_disk.sort();
    let mut embedded: Vec<String> = tables::all().iter().map(|t| t.name.clone()).collect();
    embedded.sort();
    assert_eq!(
        on_disk, embedded,
        "every schema file is embedded, and only those"
    );
}
