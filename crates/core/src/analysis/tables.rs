//! The analysis tables: [`Results`] as rows of the schemas in
//! `schemas/tables/analysis/`, ready for CSV export.
//!
//! A row struct's serde field names are its table's column names (a test
//! keeps them in step, as for the stored tables). Numbers are written with
//! at most nine decimals (rounded half away from zero, trailing zeros
//! dropped): the results then read the same on every machine even where two
//! maths libraries differ in the last bit, and the export stays
//! byte-identical after an import.

use rusqlite::types::Value;
use serde::Serialize;
use serde_json::Value as Json;

use super::Results;
use crate::tables::{self, FieldType, TableSchema};
use crate::{Error, Result};

/// Decimals kept in analysis tables.
pub const DECIMALS: usize = 9;

/// `x` rounded to [`DECIMALS`] decimals, without a negative zero.
pub fn fixed(x: f64) -> f64 {
    let rounded: f64 = format!("{x:.DECIMALS$}").parse().unwrap_or(x);
    if rounded == 0.0 { 0.0 } else { rounded }
}

/// Rows of one analysis table from its row structs.
pub fn rows<T: Serialize>(schema: &TableSchema, items: &[T]) -> Result<Vec<Vec<Value>>> {
    items.iter().map(|item| row(schema, item)).collect()
}

fn row<T: Serialize>(schema: &TableSchema, item: &T) -> Result<Vec<Value>> {
    let failed = |what: String| Error::Invariant(format!("analysis table {}: {what}", schema.name));
    let Json::Object(mut map) =
        serde_json::to_value(item).map_err(|e| failed(format!("cannot serialise a row: {e}")))?
    else {
        return Err(failed("a row is not a struct".to_owned()));
    };
    let values = schema
        .fields
        .iter()
        .map(|f| {
            let json = map
                .remove(&f.name)
                .ok_or_else(|| failed(format!("the row has no field {}", f.name)))?;
            to_value(f.kind, json)
                .ok_or_else(|| failed(format!("field {} has the wrong type", f.name)))
        })
        .collect::<Result<Vec<_>>>()?;
    if let Some(extra) = map.keys().next() {
        return Err(failed(format!("row field {extra} is not a column")));
    }
    Ok(values)
}

fn to_value(kind: FieldType, json: Json) -> Option<Value> {
    Some(match (kind, json) {
        (_, Json::Null) => Value::Null,
        (FieldType::Integer, Json::Number(n)) => Value::Integer(n.as_i64()?),
        (FieldType::Number, Json::Number(n)) => {
            let x = n.as_f64()?;
            if !x.is_finite() {
                return None;
            }
            Value::Real(fixed(x))
        }
        (FieldType::Boolean, Json::Bool(b)) => Value::Integer(i64::from(b)),
        (FieldType::String | FieldType::Date | FieldType::Datetime, Json::String(s)) => {
            Value::Text(s)
        }
        _ => return None,
    })
}

/// One analysis table: its schema and its rows.
pub type Table = (&'static TableSchema, Vec<Vec<Value>>);

/// Every analysis table of the results, in the order of [`tables::analysis`].
pub fn all(results: &Results) -> Result<Vec<Table>> {
    tables::analysis()
        .iter()
        .map(|schema| Ok((schema, table(results, schema)?)))
        .collect()
}

fn table(r: &Results, schema: &TableSchema) -> Result<Vec<Vec<Value>>> {
    match schema.name.as_str() {
        "species_cover" => rows(schema, &r.species_cover),
        "group_cover" => rows(schema, &r.group_cover),
        "diversity" => rows(schema, &r.diversity),
        "herbivory" => rows(schema, &r.herbivory),
        "cage_survival" => rows(schema, &r.cage_survival),
        "survival_curve" => rows(schema, &r.survival_curve),
        "cage_response" => rows(schema, &r.cage_response),
        "treatment_summary" => rows(schema, &r.treatment_summary),
        "effect" => rows(schema, &r.effect),
        "predator_split" => rows(schema, &r.predator_split),
        other => Err(Error::Invariant(format!(
            "analysis table {other} has no rows in the results"
        ))),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn numbers_keep_nine_decimals_and_no_negative_zero() {
        assert_eq!(fixed(0.405_465_108_108_164_4), 0.405_465_108);
        assert_eq!(fixed(37.5), 37.5);
        assert_eq!(fixed(-1e-12).to_string(), "0");
        assert_eq!(fixed(2.0 / 3.0).to_string(), "0.666666667");
    }

    proptest::proptest! {
        /// Fixed decimals are stable: rounding again changes nothing, and the
        /// written text reads back as the same number.
        #[test]
        fn fixed_numbers_are_stable(x in -1.0e6f64..1.0e6) {
            let y = fixed(x);
            proptest::prop_assert_eq!(fixed(y).to_bits(), y.to_bits());
            proptest::prop_assert!((y - x).abs() <= 0.5e-9 + 1e-9 * x.abs() * 1e-6);
            let text = crate::tables::format_number(y);
            proptest::prop_assert_eq!(text.parse::<f64>().unwrap().to_bits(), y.to_bits());
        }
    }
}
