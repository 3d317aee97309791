//! Fields as the crew meets them: their labels on the sheet, strict parsing
//! of what a save sends (a count is a whole number of 0 or more, never a
//! coerced 1.5 or "2o"), "not touched" kept apart from "cleared", and the
//! values a person saw before changing a row ([`Seen`]).

use rusqlite::types::Value;
use serde::{Deserialize, Deserializer};
use serde_json::{Map, Value as Json};

use fieldcage_core::record::Seen;
use fieldcage_core::tables::{self, FieldType};
use fieldcage_core::{Error, Result};

/// The sheet's label of a field (`census.dead` or a request's `dead`), for
/// messages in the crew's words; `None` for a field the sheet does not show.
pub fn label(field: &str) -> Option<&'static str> {
    let name = field.rsplit(['.', '/']).next().unwrap_or(field);
    Some(match name {
        "alive" => "Alive",
        "dead" => "Dead",
        "missing" => "Missing",
        "count" => "Number of animals",
        "stage" => "Stage",
        "sex" => "Sex",
        "notes" => "Notes",
        "observer" => "Observer",
        "value_pct" | "percent" | "cover_pct" | "damage_pct" => "Percent",
        "class_code" => "Class",
        "pin_hits" => "Pin hits",
        "tag_label" | "replacement_label" => "Tag label",
        "category" => "Ground category",
        _ => return None,
    })
}

/// A field a save may leave out: `None` = not touched (what is stored
/// stays), `Some(None)` = sent as null (cleared: not assessed).
pub type FieldChange<T> = Option<Option<T>>;

/// Deserialise a [`FieldChange`] of a whole number: a field that is present
/// is `Some`, a null is `Some(None)`; 1.5, "2o" or "7" are refused with the
/// value in the message (never coerced).
pub fn count_change<'de, D: Deserializer<'de>>(
    d: D,
) -> std::result::Result<FieldChange<i64>, D::Error> {
    let value = Option::<Json>::deserialize(d)?;
    match value {
        None => Ok(Some(None)),
        Some(v) => whole(&v)
            .map(|n| Some(Some(n)))
            .map_err(serde::de::Error::custom),
    }
}

/// Deserialise a whole number, refusing anything else with the value in the
/// message.
pub fn count<'de, D: Deserializer<'de>>(d: D) -> std::result::Result<i64, D::Error> {
    whole(&Json::deserialize(d)?).map_err(serde::de::Error::custom)
}

/// Deserialise an optional whole number (null = none).
pub fn count_opt<'de, D: Deserializer<'de>>(d: D) -> std::result::Result<Option<i64>, D::Error> {
    match Option::<Json>::deserialize(d)? {
        None => Ok(None),
        Some(v) => whole(&v).map(Some).map_err(serde::de::Error::custom),
    }
}

/// Deserialise a [`FieldChange`] of any JSON-typed value (text, for notes).
pub fn change<'de, D: Deserializer<'de>, T: Deserialize<'de>>(
    d: D,
) -> std::result::Result<FieldChange<T>, D::Error> {
    Option::<T>::deserialize(d).map(Some)
}

/// A whole number (its range is the table schema's to check, so that a
/// negative count is refused by the same rule as in an import).
fn whole(v: &Json) -> std::result::Result<i64, String> {
    match v.as_i64() {
        Some(n) => Ok(n),
        None if v.is_number() => Err(format!("{v} is not a whole number")),
        None => Err(format!("{v} is not a number; a count is a whole number")),
    }
}

/// The stored values a person saw before a change, sent as `base` (field
/// name → value, null where nothing was stored), as the core compares them.
pub fn seen(table: &str, base: Option<&Map<String, Json>>) -> Result<Seen> {
    let Some(base) = base else {
        return Ok(Seen::default());
    };
    let schema = tables::get(table)
        .ok_or_else(|| Error::Invariant(format!("no table schema for {table}")))?;
    let mut seen = Vec::with_capacity(base.len());
    for (name, json) in base {
        let Some(field) = schema.fields.iter().find(|f| f.name == *name) else {
            return Err(Error::invalid(
                table,
                name,
                json.to_string(),
                "is not a field of the table (base names the fields as stored)",
            ));
        };
        let value = match (json, field.kind) {
            (Json::Null, _) => Value::Null,
            (Json::Number(n), FieldType::Integer) if n.is_i64() => {
                Value::Integer(n.as_i64().unwrap_or_default())
            }
            (Json::Number(n), FieldType::Number | FieldType::Integer) => {
                Value::Real(n.as_f64().unwrap_or(f64::NAN))
            }
            (Json::Bool(b), FieldType::Boolean) => Value::Integer(i64::from(*b)),
            (Json::String(t), _) => Value::Text(t.clone()),
            (other, _) => {
                return Err(Error::invalid(
                    table,
                    name,
                    other.to_string(),
                    "is not a value this field can hold",
                ));
            }
        };
        seen.push((name.clone(), value));
    }
    Ok(Seen(seen))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[derive(Debug, Deserialize)]
    struct Probe {
        #[serde(default, deserialize_with = "count_change")]
        dead: FieldChange<i64>,
    }

    fn probe(json: &str) -> std::result::Result<FieldChange<i64>, String> {
        serde_json::from_str::<Probe>(json)
            .map(|p| p.dead)
            .map_err(|e| e.to_string())
    }

    /// Not touched, cleared and set are three answers, and nothing is coerced.
    #[test]
    fn a_count_change_is_strict_and_tells_absent_from_cleared() {
        assert_eq!(probe("{}"), Ok(None));
        assert_eq!(probe(r#"{"dead": null}"#), Ok(Some(None)));
        assert_eq!(probe(r#"{"dead": 3}"#), Ok(Some(Some(3))));
        // The range is the table schema's rule (checked by the core).
        assert_eq!(probe(r#"{"dead": -1}"#), Ok(Some(Some(-1))));
        for (bad, says) in [
            ("1.5", "1.5 is not a whole number"),
            (r#""2o""#, "\"2o\" is not a number"),
            (r#""7""#, "\"7\" is not a number"),
        ] {
            let got = probe(&format!(r#"{{"dead": {bad}}}"#)).unwrap_err();
            assert!(got.contains(says), "{bad}: {got}");
        }
    }

    #[test]
    fn labels_are_the_sheets_words() {
        assert_eq!(label("census.dead"), Some("Dead"));
        assert_eq!(label("dead"), Some("Dead"));
        assert_eq!(label("cover_record.value_pct"), Some("Percent"));
        assert_eq!(label("enclosure_id"), None);
    }
}
