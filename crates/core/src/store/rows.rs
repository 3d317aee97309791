//! Typed records: the [`Record`] and [`Projection`] traits (implemented by the
//! macros of [`crate::model`], which generate the readers), and the conversion
//! between records and rows of stored values driven by the table schema (a
//! struct's serde field names are the schema's column names), which writes,
//! import, export and sync use.

use rusqlite::Row;
use rusqlite::types::Value;
use serde::Serialize;
use serde::de::DeserializeOwned;
use serde_json::{Map, Number, Value as Json};
use uuid::Uuid;

use crate::tables::{FieldType, TableSchema};
use crate::{Error, Result};

/// A typed row of one table, declared with `records!` in [`crate::model`].
/// Reads go through [`Record::from_row`] (one typed read per column); writes
/// through [`to_values`].
pub trait Record: Serialize + DeserializeOwned + Sized {
    /// The table (and Table Schema) name.
    const TABLE: &'static str;
    /// The columns, in the schema's order (= the struct's fields).
    const COLUMNS: &'static [&'static str];
    /// The schema type of each column.
    const KINDS: &'static [FieldType];
    /// `SELECT <every column> FROM <table>`, to which a reader adds its
    /// `WHERE` and `ORDER BY`.
    const SELECT: &'static str;
    /// The row's id.
    fn id(&self) -> Uuid;
    /// The record from a row of [`Record::SELECT`]: column `i` is field `i`,
    /// read as [`from_values`] reads it.
    fn from_row(row: &Row<'_>) -> rusqlite::Result<Self>;
}

/// Some columns of a record, read keyed by another of its columns (declared
/// with `projection!` in [`crate::model`], which checks the names against the
/// record's when it compiles).
pub trait Projection: Sized {
    /// The record projected.
    type Of: Record;
    /// The type of the key column.
    type Key;
    /// The key column, then the projected ones.
    const COLUMNS: &'static [&'static str];
    /// The key and the projection from a row of [`Projection::select`].
    fn from_row(row: &Row<'_>) -> rusqlite::Result<(Self::Key, Self)>;
    /// `SELECT <key>, <columns> FROM <table>`.
    fn select() -> String {
        format!(
            "SELECT {} FROM {}",
            Self::COLUMNS.join(", "),
            <Self::Of as Record>::TABLE
        )
    }
}

/// A reader's error: a stored value that does not fit its field is reported
/// as [`from_values`] reports it.
pub(crate) fn read_error(table: &str, e: rusqlite::Error) -> Error {
    match e {
        rusqlite::Error::FromSqlConversionFailure(..) | rusqlite::Error::InvalidColumnType(..) => {
            Error::Invariant(format!("{table}: stored row does not fit its record: {e}"))
        }
        e => e.into(),
    }
}

/// A record as stored values, in the schema's column order.
pub fn to_values<R: Record>(schema: &TableSchema, record: &R) -> Result<Vec<Value>> {
    let Json::Object(mut map) = serde_json::to_value(record)
        .map_err(|e| Error::Invariant(format!("{}: cannot serialise record: {e}", schema.name)))?
    else {
        return Err(Error::Invariant(format!(
            "{}: record is not a struct",
            schema.name
        )));
    };
    let values = schema
        .fields
        .iter()
        .map(|f| {
            let json = map.remove(&f.name).unwrap_or(Json::Null);
            json_to_value(f.kind, json).ok_or_else(|| {
                Error::invalid(&schema.name, &f.name, "(value)", "has the wrong type")
            })
        })
        .collect::<Result<Vec<_>>>()?;
    if let Some(extra) = map.keys().next() {
        // A struct field with no column is a programming error, caught by the tests.
        return Err(Error::Invariant(format!(
            "{}: record field {extra} is not a column of the table schema",
            schema.name
        )));
    }
    Ok(values)
}

/// Stored values (schema column order) as a typed record.
pub fn from_values<R: Record>(schema: &TableSchema, values: Vec<Value>) -> Result<R> {
    let map: Map<String, Json> = schema
        .fields
        .iter()
        .zip(values)
        .map(|(f, v)| (f.name.clone(), value_to_json(f.kind, v)))
        .collect();
    serde_json::from_value(Json::Object(map)).map_err(|e| {
        Error::Invariant(format!(
            "{}: stored row does not fit its record: {e}",
            schema.name
        ))
    })
}

fn json_to_value(kind: FieldType, json: Json) -> Option<Value> {
    Some(match json {
        Json::Null => Value::Null,
        Json::Bool(b) if kind == FieldType::Boolean => Value::Integer(b.into()),
        Json::Number(n) if kind == FieldType::Integer => Value::Integer(n.as_i64()?),
        Json::Number(n) if kind == FieldType::Number => Value::Real(n.as_f64()?),
        Json::String(s)
            if matches!(
                kind,
                FieldType::String | FieldType::Date | FieldType::Datetime
            ) =>
        {
            Value::Text(s)
        }
        _ => return None,
    })
}

fn value_to_json(kind: FieldType, value: Value) -> Json {
    match value {
        Value::Null | Value::Blob(_) => Json::Null,
        Value::Integer(i) if kind == FieldType::Boolean => Json::Bool(i != 0),
        Value::Integer(i) if kind == FieldType::Number => {
            Number::from_f64(i as f64).map_or(Json::Null, Json::Number)
        }
        Value::Integer(i) => Json::Number(i.into()),
        Value::Real(x) => Number::from_f64(x).map_or(Json::Null, Json::Number),
        Value::Text(s) => Json::String(s),
    }
}
