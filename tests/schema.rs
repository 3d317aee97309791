//! The table schemas in schemas/tables are the one definition of every column:
//! the SQLite tables and the record structs must agree with them. The
//! analysis tables (schemas/tables/analysis) are derived on export and never
//! stored: the SQLite checks apply to the stored tables only, and the
//! analysis row structs must agree with their schemas instead.

use crate::util::Raw;
use fieldcage_core::model::*;
use fieldcage_core::store::{self, Projection, Record};
use fieldcage_core::tables::{self, FieldType};
use rusqlite::types::Value;

use crate::util::{Temp, demo_store};

#[test]
fn sqlite_tables_match_the_table_schemas() {
    let tmp = Temp::new();
    let store = tmp.store("a.db");
    for schema in tables::all() {
        let conn = store.raw();
        let mut stmt = conn
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
        let conn = store.raw();
        let mut stmt = conn
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

#[test]
fn every_record_lists_its_schemas_columns_in_order() {
    let mut declared: Vec<&str> = RECORDS.iter().map(|(t, _, _)| *t).collect();
    declared.sort_unstable();
    let mut stored: Vec<&str> = tables::all().iter().map(|t| t.name.as_str()).collect();
    stored.sort_unstable();
    assert_eq!(
        declared, stored,
        "one record per stored table, and only those"
    );
    for (table, columns, kinds) in RECORDS {
        let schema = tables::get(table).unwrap();
        let names: Vec<&str> = schema.fields.iter().map(|f| f.name.as_str()).collect();
        assert_eq!(*columns, names.as_slice(), "{table}: the record's columns");
        let types: Vec<FieldType> = schema.fields.iter().map(|f| f.kind).collect();
        assert_eq!(
            *kinds,
            types.as_slice(),
            "{table}: the record's column types"
        );
    }
}

/// Every live row of `R` read by its generated reader and by the
/// schema-driven path (stored values → JSON → serde): the same records, in
/// the same order, and the same record by id. The number of rows.
fn reads_alike<R: Record + PartialEq + std::fmt::Debug>(store: &fieldcage_core::Store) -> usize {
    let schema = tables::get(R::TABLE).unwrap();
    assert_eq!(
        R::SELECT,
        format!("SELECT {} FROM {}", schema.column_list(), schema.name)
    );
    let generated = store.list::<R>().unwrap();
    let by_schema: Vec<R> = store
        .rows(schema)
        .unwrap()
        .into_iter()
        .map(|v| store::from_values(schema, v).unwrap())
        .collect();
    assert_eq!(generated, by_schema, "{}", R::TABLE);
    for r in generated.iter().step_by(7) {
        assert_eq!(store.get::<R>(r.id()).unwrap().as_ref(), Some(r));
    }
    let mut unordered = Vec::new();
    store::each::<R>(&store, |r| unordered.push(r)).unwrap();
    unordered.sort_by_key(Record::id);
    assert_eq!(unordered, generated, "{}: every row once", R::TABLE);
    generated.len()
}

fn every_reader_reads_alike(store: &fieldcage_core::Store) -> Vec<usize> {
    let counts = vec![
        reads_alike::<Experiment>(store),
        reads_alike::<Site>(store),
        reads_alike::<Block>(store),
        reads_alike::<Treatment>(store),
        reads_alike::<Enclosure>(store),
        reads_alike::<Taxon>(store),
        reads_alike::<Scale>(store),
        reads_alike::<ScaleClass>(store),
        reads_alike::<StockingPlan>(store),
        reads_alike::<Assignment>(store),
        reads_alike::<CoverProtocol>(store),
        reads_alike::<GroundCategory>(store),
        reads_alike::<DamageProtocol>(store),
        reads_alike::<ScheduleEntry>(store),
        reads_alike::<TaggedLeaf>(store),
        reads_alike::<Visit>(store),
        reads_alike::<StockingEvent>(store),
        reads_alike::<Census>(store),
        reads_alike::<CoverRecord>(store),
        reads_alike::<DamageRecord>(store),
        reads_alike::<StoredFlag>(store),
    ];
    assert_eq!(counts.len(), RECORDS.len());
    counts
}

#[test]
fn generated_readers_read_what_the_schema_driven_path_reads() {
    let tmp = Temp::new();
    let demo = every_reader_reads_alike(&demo_store(&tmp));
    assert!(demo.iter().all(|n| *n > 0), "{demo:?}");
    let mut synthetic = tmp.store("synthetic.db");
    let size = fieldcage_testkit::synth::SeasonSize {
        cages: 8,
        visits: 3,
        species: 6,
    };
    fieldcage_testkit::synth::build(&mut synthetic, size, 7).unwrap();
    let counts = every_reader_reads_alike(&synthetic);
    assert_eq!(
        counts[18],
        size.cover_rows(),
        "cover rows of the synthetic season"
    );
}

#[test]
fn the_cover_projection_reads_the_records_columns() {
    assert_eq!(
        CoverRow::select(),
        "SELECT visit_id, id, taxon_id, category, value_pct, class_code, pin_hits, cover_pct \
         FROM cover_record"
    );
    let tmp = Temp::new();
    let store = demo_store(&tmp);
    let mut projected: Vec<(VisitId, CoverRow)> = Vec::new();
    store::each_projected::<CoverRow>(&store, |visit, row| projected.push((visit, row))).unwrap();
    projected.sort_by_key(|(_, r)| r.id);
    let from_records: Vec<(VisitId, CoverRow)> = store
        .list::<CoverRecord>()
        .unwrap()
        .into_iter()
        .map(|c| {
            let row = CoverRow {
                id: c.id,
                taxon_id: c.taxon_id,
                category: c.category.map(String::into_boxed_str),
                value_pct: c.value_pct,
                class_code: c.class_code.map(String::into_boxed_str),
                pin_hits: c.pin_hits,
                cover_pct: c.cover_pct,
            };
            (c.visit_id, row)
        })
        .collect();
    assert!(from_records.len() > 500);
    assert_eq!(projected, from_records);
}

/// Rows of `R`'s columns in a table without types (so that SQLite keeps
/// every value as given), each read by the generated reader and by the
/// schema-driven path: both read the same record, or both refuse the row.
fn odd_rows_read_alike<R: Record + PartialEq + std::fmt::Debug>(rows: &[Vec<Value>]) -> usize {
    let schema = tables::get(R::TABLE).unwrap();
    let conn = rusqlite::Connection::open_in_memory().unwrap();
    conn.execute_batch(&format!(
        "CREATE TABLE {} ({}, deleted INTEGER NOT NULL DEFAULT 0)",
        schema.name,
        schema.column_list()
    ))
    .unwrap();
    let marks = vec!["?"; schema.fields.len()].join(", ");
    let insert = format!(
        "INSERT INTO {} ({}) VALUES ({marks})",
        schema.name,
        schema.column_list()
    );
    let mut refused = 0;
    for (n, row) in rows.iter().enumerate() {
        conn.execute(&format!("DELETE FROM {}", schema.name), [])
            .unwrap();
        conn.execute(&insert, rusqlite::params_from_iter(row))
            .unwrap();
        let generated = store::list::<R>(&conn);
        let stored: Vec<Value> = conn
            .query_row(R::SELECT, [], |r| {
                (0..schema.fields.len())
                    .map(|i| r.get::<_, Value>(i))
                    .collect()
            })
            .unwrap();
        let by_schema = store::from_values::<R>(schema, stored);
        match (generated, by_schema) {
            (Ok(g), Ok(s)) => assert_eq!(g, vec![s], "{} row {n}", R::TABLE),
            (Err(g), Err(s)) => {
                refused += 1;
                assert!(g.to_string().contains("does not fit"), "{g}");
                assert!(s.to_string().contains("does not fit"), "{s}");
            }
            (g, s) => panic!("{} row {n}: generated {g:?}, by schema {s:?}", R::TABLE),
        }
    }
    refused
}

#[test]
fn generated_readers_read_odd_values_as_the_schema_driven_path_does() {
    let id = || Value::Text(uuid::Uuid::now_v7().to_string());
    let text = |s: &str| Value::Text(s.to_owned());
    let (int, real, null) = (Value::Integer, Value::Real, Value::Null);
    let enclosure = |area: Value, height: Value| {
        vec![
            id(),
            id(),
            text("C-1"),
            area,
            height,
            int(5),
            real(0.5),
            null.clone(),
            null.clone(),
        ]
    };
    let refused = odd_rows_read_alike::<Enclosure>(&[
        enclosure(int(4), int(2)),                     // integers in REAL columns
        enclosure(real(f64::INFINITY), real(-0.0)),    // a real JSON cannot hold
        enclosure(real(4.0), real(f64::NEG_INFINITY)), // … where NULL is allowed
        enclosure(null.clone(), real(1.0)),            // NULL where it is not
        enclosure(text("4"), real(1.0)),               // text in a REAL column
        enclosure(real(4.0), Value::Blob(vec![1, 2])), // a blob reads as NULL
    ]);
    assert_eq!(refused, 3, "infinite, NULL and text areas are refused");
    let visit = |at: &str, completed: Value, kind: &str| {
        vec![
            id(),
            id(),
            text(kind),
            int(3),
            text(at),
            null.clone(),
            text("tab"),
            completed,
            null.clone(),
        ]
    };
    let refused = odd_rows_read_alike::<Visit>(&[
        visit("2024-05-01T08:30:00Z", int(1), "census"),
        visit("2024-05-01T08:30:00.125+02:00", int(0), "cover"),
        visit("2024-05-01 08:30:00+02:00", int(2), "damage"), // a space for the T
        visit("2024-05-01T08:30:00", int(1), "census"),       // no offset
        visit("2024-05-01T08:30:00Z", real(1.0), "census"),   // a real for a boolean
        visit("2024-05-01T08:30:00Z", int(1), "Census"),      // not a kind
    ]);
    assert_eq!(
        refused, 3,
        "no offset, a real boolean and an unknown kind are refused"
    );
    let leaf = |on: &str, fate: Value| {
        vec![
            id(),
            id(),
            id(),
            text("L1"),
            null.clone(),
            text(on),
            fate,
            null.clone(),
            text("not an id"),
            null.clone(),
        ]
    };
    let refused = odd_rows_read_alike::<TaggedLeaf>(&[
        vec![
            id(),
            id(),
            id(),
            text("L1"),
            null.clone(),
            text("2024-05-01"),
            text("lost"),
            text("2024-06-01"),
            null.clone(),
            null.clone(),
        ],
        leaf("2024-5-1", null.clone()),   // unpadded date parts
        leaf("2024-05-01", text("lost")), // an id that is not a UUID
        leaf("01/05/2024", null.clone()), // not a date
    ]);
    assert_eq!(refused, 3, "only the well-formed leaf is read");
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
            .raw()
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
