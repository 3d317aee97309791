//! The hand-off folder: one CSV per table and a `datapackage.json` that
//! describes them, so that the tables load straight into R or pandas and can
//! be checked by any Frictionless Data validator.
//!
//! - Tables follow [`tables::all`] (dependency order); a file is named
//!   `<table>.csv`, its header is the schema's field names and its rows are the
//!   live rows ordered by id.
//! - CSV per RFC 4180: comma-separated, a value is quoted only when it holds a
//!   comma, a quote, CR or LF, and embedded quotes are doubled. UTF-8 without a
//!   byte-order mark; records end with LF, which each resource's `dialect`
//!   states (Frictionless CSV Dialect, `lineTerminator`).
//! - Cells are written by [`FieldSchema::format_cell`](crate::tables::FieldSchema::format_cell):
//!   free text is neutralised against formula injection (OWASP "CSV Injection"),
//!   numbers are written exactly.
//! - `datapackage.json` is a Frictionless Tabular Data Package whose table
//!   schemas are the ones in `schemas/tables/`. It holds no timestamp, so the
//!   same data always gives byte-identical files.
//! - Each file is written to a temporary name in the folder, flushed to disk
//!   and renamed ([`crate::disk::write_atomically`]), so a reader never sees
//!   half a file. A failed export names the file it could not write; the
//!   files written before stay whole (each of them is complete, but the
//!   folder then mixes this export with an earlier one: export again).
//! - Next to the data tables come the analysis tables ([`tables::analysis`],
//!   computed by [`crate::analysis`] from the same snapshot; described in
//!   `datapackage.json` too) and `report.md`. They are derived, so import
//!   reads only the data tables and the analysis is computed again.

use std::fs;
use std::path::Path;

use serde_json::{Map, Value as Json, json};

use crate::analysis::{self, Options};
use crate::disk::{self, Disk, Existing, OsDisk};
use crate::model::Experiment;
use crate::store::Store;
use crate::tables::{self, TableSchema};
use crate::{Error, Result};

/// Name of the data package descriptor in an export folder.
pub const DESCRIPTOR: &str = "datapackage.json";

/// Package name used when the database does not hold exactly one experiment.
const FALLBACK_NAME: &str = "fieldcage";

/// Table Schema keys copied into the data package. Others (`$schema`, and
/// `uniqueKeys`, which Table Schema v1 does not define) are left out; the
/// table's name, title and description go on the resource instead.
const SCHEMA_KEYS: &[&str] = &["fields", "missingValues", "primaryKey", "foreignKeys"];

/// What an export wrote.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct ExportSummary {
    /// Rows written per data table, in export order.
    pub tables: Vec<(String, usize)>,
    /// Rows written per analysis table, in export order.
    pub analysis: Vec<(String, usize)>,
}

/// The CSV file name of a table.
pub fn file_name(schema: &TableSchema) -> String {
    format!("{}.csv", schema.name)
}

/// Write every table and `datapackage.json` into `out` (made if missing).
/// Files of an earlier export in the same folder are replaced.
pub fn export(store: &Store, out: &Path) -> Result<ExportSummary> {
    export_with(store, out, &OsDisk)
}

/// [`export`] through the given [`Disk`] (tests pass one that fails a step).
pub fn export_with(store: &Store, out: &Path, disk: &dyn Disk) -> Result<ExportSummary> {
    fs::create_dir_all(out).map_err(|e| Error::io(out, e))?;
    // One read transaction: every table comes from the same snapshot, even if
    // another connection writes meanwhile. It only reads, so dropping it
    // (a rollback) is all the cleanup it needs.
    let snapshot = store.conn().unchecked_transaction()?;
    let mut summary = ExportSummary {
        tables: data_tables(store, out, disk)?,
        ..ExportSummary::default()
    };
    let results = analysis::analyse(store, &Options::default())?;
    for (schema, rows) in analysis::tables::all(&results)? {
        let bytes = table_csv(schema, &rows)?;
        write_file(disk, out, &file_name(schema), &bytes)?;
        summary.analysis.push((schema.name.clone(), rows.len()));
    }
    let report = analysis::report::render(&results);
    write_file(disk, out, analysis::report::FILE, report.as_bytes())?;
    let descriptor = data_package(store)?;
    drop(snapshot);
    let mut text = serde_json::to_string_pretty(&descriptor)
        .map_err(|e| Error::Invariant(format!("{DESCRIPTOR}: cannot serialise: {e}")))?;
    text.push('\n');
    write_file(disk, out, DESCRIPTOR, text.as_bytes())?;
    disk::sync_dir(disk, out)?;
    Ok(summary)
}

/// Write the tidy CSV of every stored table into `out` (the data-table part
/// of [`export`]); returns each table's name and row count. Callers that
/// need one consistent snapshot hold a read transaction around it.
pub fn write_data_tables(store: &Store, out: &Path) -> Result<Vec<(String, usize)>> {
    fs::create_dir_all(out).map_err(|e| Error::io(out, e))?;
    data_tables(store, out, &OsDisk)
}

/// The data tables through the given [`Disk`].
fn data_tables(store: &Store, out: &Path, disk: &dyn Disk) -> Result<Vec<(String, usize)>> {
    let mut written = Vec::new();
    for schema in tables::all() {
        let rows = store.rows(schema)?;
        let bytes = table_csv(schema, &rows)?;
        write_file(disk, out, &file_name(schema), &bytes)?;
        written.push((schema.name.clone(), rows.len()));
    }
    Ok(written)
}

/// One table as CSV bytes: the header, then one line per row.
fn table_csv(schema: &TableSchema, rows: &[Vec<rusqlite::types::Value>]) -> Result<Vec<u8>> {
    let mut csv = csv::WriterBuilder::new()
        .quote_style(csv::QuoteStyle::Necessary)
        .terminator(csv::Terminator::Any(b'\n'))
        .from_writer(Vec::new());
    let failed =
        |e: csv::Error| Error::Invariant(format!("{}: cannot write CSV: {e}", schema.name));
    csv.write_record(schema.fields.iter().map(|f| f.name.as_str()))
        .map_err(failed)?;
    for row in rows {
        csv.write_record(schema.fields.iter().zip(row).map(|(f, v)| f.format_cell(v)))
            .map_err(failed)?;
    }
    csv.into_inner()
        .map_err(|e| Error::Invariant(format!("{}: cannot write CSV: {e}", schema.name)))
}

/// The `datapackage.json` descriptor.
fn data_package(store: &Store) -> Result<Json> {
    let (name, title) = package_name(store)?;
    let resources: Vec<Json> = tables::all()
        .iter()
        .chain(tables::analysis())
        .map(resource)
        .collect();
    Ok(json!({
        "profile": "tabular-data-package",
        "name": name,
        "title": title,
        "resources": resources,
    }))
}

/// Package name and title from the experiment: its code in lower case and its
/// title, or fieldcage's own when there is not exactly one experiment.
fn package_name(store: &Store) -> Result<(String, String)> {
    let experiments = store.list::<Experiment>()?;
    let fallback = || (FALLBACK_NAME.to_owned(), "fieldcage export".to_owned());
    Ok(match experiments.as_slice() {
        [experiment] => {
            let name = experiment.code.to_ascii_lowercase();
            // Data Package names are lower-case letters, digits, . _ and -.
            let valid = !name.is_empty()
                && name
                    .bytes()
                    .all(|b| b.is_ascii_lowercase() || b.is_ascii_digit() || b"._-".contains(&b));
            if valid {
                (name, experiment.title.clone())
            } else {
                fallback()
            }
        }
        _ => fallback(),
    })
}

/// The Tabular Data Resource of one table.
fn resource(schema: &TableSchema) -> Json {
    let mut table_schema = Map::new();
    if let Json::Object(source) = &schema.json {
        for key in SCHEMA_KEYS {
            if let Some(v) = source.get(*key) {
                table_schema.insert((*key).to_owned(), v.clone());
            }
        }
    }
    json!({
        "name": schema.name,
        "path": file_name(schema),
        "profile": "tabular-data-resource",
        "title": schema.title,
        "description": schema.description,
        "format": "csv",
        "mediatype": "text/csv",
        "encoding": "utf-8",
        "dialect": {
            "delimiter": ",",
            "lineTerminator": "\n",
            "quoteChar": "\"",
            "doubleQuote": true,
            "header": true,
        },
        "schema": table_schema,
    })
}

/// Write one file of the export whole, replacing an earlier export's.
fn write_file(disk: &dyn Disk, dir: &Path, name: &str, bytes: &[u8]) -> Result<()> {
    disk::write_atomically(disk, dir, name, bytes, Existing::Replace).map(drop)
}
