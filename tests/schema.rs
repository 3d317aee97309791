//! The table schemas in schemas/tables are the one definition of every column:
//! the SQLite tables and the record structs must agree with them. The
//! analysis tables (schemas/tables/analysis) are derived on export and never
//! stored: the SQLite checks apply to the stored tables only, and the
//! analysis row structs must agree with their schemas instead.

use fieldcage_core::model::*;
use fieldcage_core::store::Record;
use fieldcage_core::tables::{self, FieldType};

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

fn record_round_trips<R: Record + PartialEq + std::fmt::Debug>(
    store: &fieldcage_core::Store,
) -> usize {
    let schema = tables::get(R::TABLE).unwrap();
    let rows = store.list::<R>().unwrap();
    for r in &rows {
        let values = fieldcage_core::store::to_values(schema, r).unwrap();
        let back: R = fieldcage_core::store::from_values(schema, values).unwrap();
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

/// The `.json` file stems of one schema folder (sub-folders are not files).
fn schema_files(dir: &std::path::Path) -> Vec<String> {
    let mut names: Vec<String> = std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().path())
        .filter(|p| p.is_file())
        .map(|p| {
            let name = p.file_name().unwrap().to_string_lossy().into_owned();
            assert!(name.ends_with(".json"), "{} is not a schema", p.display());
            name.trim_end_matches(".json").to_owned()
        })
        .collect();
    names.sort();
    names
}

#[test]
fn schema_files_on_disk_are_the_embedded_ones() {
    let dir = crate::util::repo_root().join("schemas/tables");
    let mut embedded: Vec<String> = tables::all().iter().map(|t| t.name.clone()).collect();
    embedded.sort();
    assert_eq!(
        schema_files(&dir),
        embedded,
        "every stored-table schema file is embedded, and only those"
    );
    let mut analysis: Vec<String> = tables::analysis().iter().map(|t| t.name.clone()).collect();
    analysis.sort();
    assert_eq!(
        schema_files(&dir.join("analysis")),
        analysis,
        "every analysis-table schema file is embedded, and only those"
    );
}

#[test]
fn analysis_tables_are_not_stored_and_refer_to_real_tables() {
    let tmp = Temp::new();
    let store = tmp.store("a.db");
    let stored: Vec<&str> = tables::all().iter().map(|t| t.name.as_str()).collect();
    for schema in tables::analysis() {
        assert!(
            !stored.contains(&schema.name.as_str()),
            "{} is both a stored and an analysis table",
            schema.name
        );
        assert!(tables::get(&schema.name).is_none(), "{}", schema.name);
        let in_sqlite: i64 = store
            .conn()
            .query_row(
                "SELECT count(*) FROM sqlite_schema WHERE name = ?1",
                [&schema.name],
                |r| r.get(0),
            )
            .unwrap();
        assert_eq!(in_sqlite, 0, "{} must not be a SQLite table", schema.name);
        for fk in &schema.foreign_keys {
            assert!(
                stored.contains(&fk.resource.as_str()),
                "{}.{} refers to {}, which is not a stored table",
                schema.name,
                fk.field,
                fk.resource
            );
            assert!(schema.field(&fk.field).is_some());
        }
        for key in &schema.primary_key {
            let field = schema.field(key).expect("key column exists");
            assert!(
                field.constraints.required,
                "{}.{key}: primary-key columns are required",
                schema.name
            );
        }
    }
}
