//! One stored column read into one record field: the decoding the generated
//! record readers ([`crate::store::Record::from_row`]) use, column `i` into
//! field `i`.
//!
//! It reads exactly what the schema-driven conversion
//! ([`crate::store::from_values`]: stored value → JSON → serde) reads, so the
//! two cannot tell a row apart (a test compares them on every row of the
//! demo season): NULL, a blob and a non-finite real are "no value"; an
//! integer in a REAL column is a real; a boolean is an integer, non-zero for
//! true; a date is parsed as chrono's serde parses it (`%Y-%m-%d`), a
//! timestamp too (RFC 3339, `str::parse`); ids are UUID text and enums their
//! stored text. It is a trait of the crate's own because rusqlite's `FromSql`
//! cannot be implemented here for chrono's types.

use chrono::{DateTime, FixedOffset, NaiveDate};
use rusqlite::Row;
use rusqlite::types::{FromSql, FromSqlError, FromSqlResult, ValueRef};
use uuid::Uuid;

use crate::tables::FieldType;

/// A record field's type: how it is read from its column, and the schema
/// field type of the column it is read from (a test holds every record's
/// kinds against its schema).
pub trait Column: Sized {
    /// The schema type of the column.
    const KIND: FieldType;
    /// The field from a stored value that is not "no value" (see [`absent`]).
    fn decode(value: ValueRef<'_>) -> FromSqlResult<Self>;
    /// The field when the column holds no value: an error but for `Option`.
    fn absent() -> FromSqlResult<Self> {
        Err(FromSqlError::InvalidType)
    }
}

/// Whether a stored value reads as "no value" (JSON `null` on the
/// schema-driven path): NULL, a blob, or a real that JSON cannot hold.
pub fn absent(value: ValueRef<'_>) -> bool {
    match value {
        ValueRef::Null | ValueRef::Blob(_) => true,
        ValueRef::Real(x) => !x.is_finite(),
        ValueRef::Integer(_) | ValueRef::Text(_) => false,
    }
}

/// Read column `i` of a row as a field.
pub fn read<T: Column>(row: &Row<'_>, i: usize) -> rusqlite::Result<T> {
    row.get::<_, Decoded<T>>(i).map(|d| d.0)
}

struct Decoded<T>(T);

impl<T: Column> FromSql for Decoded<T> {
    fn column_result(value: ValueRef<'_>) -> FromSqlResult<Self> {
        if absent(value) {
            T::absent()
        } else {
            T::decode(value)
        }
        .map(Decoded)
    }
}

impl<T: Column> Column for Option<T> {
    const KIND: FieldType = T::KIND;
    fn decode(value: ValueRef<'_>) -> FromSqlResult<Self> {
        T::decode(value).map(Some)
    }
    fn absent() -> FromSqlResult<Self> {
        Ok(None)
    }
}

impl Column for i64 {
    const KIND: FieldType = FieldType::Integer;
    fn decode(value: ValueRef<'_>) -> FromSqlResult<Self> {
        value.as_i64()
    }
}

impl Column for f64 {
    const KIND: FieldType = FieldType::Number;
    fn decode(value: ValueRef<'_>) -> FromSqlResult<Self> {
        match value {
            #[allow(clippy::cast_precision_loss)] // as the JSON path reads it
            ValueRef::Integer(i) => Ok(i as f64),
            ValueRef::Real(x) => Ok(x),
            _ => Err(FromSqlError::InvalidType),
        }
    }
}

impl Column for bool {
    const KIND: FieldType = FieldType::Boolean;
    fn decode(value: ValueRef<'_>) -> FromSqlResult<Self> {
        value.as_i64().map(|i| i != 0)
    }
}

impl Column for String {
    const KIND: FieldType = FieldType::String;
    fn decode(value: ValueRef<'_>) -> FromSqlResult<Self> {
        value.as_str().map(str::to_owned)
    }
}

impl Column for Box<str> {
    const KIND: FieldType = FieldType::String;
    fn decode(value: ValueRef<'_>) -> FromSqlResult<Self> {
        value.as_str().map(Box::from)
    }
}

impl Column for Uuid {
    const KIND: FieldType = FieldType::String;
    fn decode(value: ValueRef<'_>) -> FromSqlResult<Self> {
        parsed(value)
    }
}

impl Column for NaiveDate {
    const KIND: FieldType = FieldType::Date;
    fn decode(value: ValueRef<'_>) -> FromSqlResult<Self> {
        parsed(value)
    }
}

impl Column for DateTime<FixedOffset> {
    const KIND: FieldType = FieldType::Datetime;
    fn decode(value: ValueRef<'_>) -> FromSqlResult<Self> {
        parsed(value)
    }
}

/// A text column parsed with `FromStr` (as serde parses these types).
pub fn parsed<T>(value: ValueRef<'_>) -> FromSqlResult<T>
where
    T: std::str::FromStr,
    T::Err: std::fmt::Display,
{
    value
        .as_str()?
        .parse()
        .map_err(|e: T::Err| FromSqlError::Other(e.to_string().into()))
}

/// Whether every name of `wanted` is in `all`, with the same kind
/// (`const`: a projection's columns are checked when it compiles).
pub const fn has_columns(
    all: &[&str],
    all_kinds: &[FieldType],
    wanted: &[&str],
    wanted_kinds: &[FieldType],
) -> bool {
    if wanted.len() != wanted_kinds.len() || all.len() != all_kinds.len() {
        return false;
    }
    let mut w = 0;
    while w < wanted.len() {
        let mut a = 0;
        let mut found = false;
        while a < all.len() {
            if same(all[a].as_bytes(), wanted[w].as_bytes())
                && all_kinds[a] as u8 == wanted_kinds[w] as u8
            {
                found = true;
            }
            a += 1;
        }
        if !found {
            return false;
        }
        w += 1;
    }
    true
}

const fn same(a: &[u8], b: &[u8]) -> bool {
    if a.len() != b.len() {
        return false;
    }
    let mut i = 0;
    while i < a.len() {
        if a[i] != b[i] {
            return false;
        }
        i += 1;
    }
    true
}
