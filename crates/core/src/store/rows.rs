//! Conversion between typed records (serde structs in [`crate::model`]) and
//! rows of stored values, driven by the table schema: a struct's serde field
//! names must be the schema's column names.

use rusqlite::types::Value;
use serde::Serialize;
use serde::de::DeserializeOwned;
use serde_json::{Map, Number, Value as Json};
use uuid::Uuid;

use crate::tables::{FieldType, TableSchema};
use crate::{Error, Result};

/// A typed row of one table.
pub trait Record: Serialize + DeserializeOwned {
    /// The table (and Table Schema) name.
    const TABLE: &'static str;
    /// The row's id.
    fn id(&self) -> Uuid;
}

/// A record as stored values, in the schema's column order.
pub fn to_values<R: Record>(schema: &TableSchema, record: &R) -> Result<Vec<Value>> {
    let Json::Object(mut map) = serde_json::to_value(record)
        .map_err(|e| Error::State(format!("{}: cannot serialise record: {e}", schema.name)))?
    else {
        return Err(Error::State(format!(
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
        return Err(Error::State(format!(
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
        Error::State(format!(
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
