//! The table definitions: Frictionless Table Schemas in `schemas/tables/`,
//! embedded at build time. They are the one place where a table's columns,
//! types and constraints are written down; the store, the export, the import
//! and the data dictionary all read them from here.
//!
//! Per-value rules (type, required, range, enum, pattern) live here and are
//! enforced on every write. Rules that relate several records (cover totals,
//! repeat visits, …) are the day's-end checks, not schema constraints.
//!
//! Two lists: the stored tables ([`all`], `schemas/tables/*.json`), which
//! live in SQLite and are exported and imported; and the analysis tables
//! ([`analysis`], `schemas/tables/analysis/*.json`), which are derived from
//! the stored ones on export and never stored or imported.

use std::sync::OnceLock;

use chrono::{DateTime, NaiveDate};
use regex::Regex;
use rusqlite::types::Value;
use serde::Deserialize;

/// Table Schema JSON of every data table, in dependency order: a table comes
/// after every table it references. Export and import follow this order.
const SOURCES: &[(&str, &str)] = &[
    (
        "experiment",
        include_str!("../../../schemas/tables/experiment.json"),
    ),
    ("site", include_str!("../../../schemas/tables/site.json")),
    ("block", include_str!("../../../schemas/tables/block.json")),
    (
        "treatment",
        include_str!("../../../schemas/tables/treatment.json"),
    ),
    (
        "enclosure",
        include_str!("../../../schemas/tables/enclosure.json"),
    ),
    ("taxon", include_str!("../../../schemas/tables/taxon.json")),
    ("scale", include_str!("../../../schemas/tables/scale.json")),
    (
        "scale_class",
        include_str!("../../../schemas/tables/scale_class.json"),
    ),
    (
        "stocking_plan",
        include_str!("../../../schemas/tables/stocking_plan.json"),
    ),
    (
        "assignment",
        include_str!("../../../schemas/tables/assignment.json"),
    ),
    (
        "cover_protocol",
        include_str!("../../../schemas/tables/cover_protocol.json"),
    ),
    (
        "ground_category",
        include_str!("../../../schemas/tables/ground_category.json"),
    ),
    (
        "damage_protocol",
        include_str!("../../../schemas/tables/damage_protocol.json"),
    ),
    (
        "schedule_entry",
        include_str!("../../../schemas/tables/schedule_entry.json"),
    ),
    (
        "tagged_leaf",
        include_str!("../../../schemas/tables/tagged_leaf.json"),
    ),
    ("visit", include_str!("../../../schemas/tables/visit.json")),
    (
        "stocking_event",
        include_str!("../../../schemas/tables/stocking_event.json"),
    ),
    (
        "census",
        include_str!("../../../schemas/tables/census.json"),
    ),
    (
        "cover_record",
        include_str!("../../../schemas/tables/cover_record.json"),
    ),
    (
        "damage_record",
        include_str!("../../../schemas/tables/damage_record.json"),
    ),
    ("flag", include_str!("../../../schemas/tables/flag.json")),
];

/// Table Schema JSON of every analysis table (derived on export, never
/// stored), in export order.
const ANALYSIS_SOURCES: &[(&str, &str)] = &[
    (
        "species_cover",
        include_str!("../../../schemas/tables/analysis/species_cover.json"),
    ),
    (
        "group_cover",
        include_str!("../../../schemas/tables/analysis/group_cover.json"),
    ),
    (
        "diversity",
        include_str!("../../../schemas/tables/analysis/diversity.json"),
    ),
    (
        "herbivory",
        include_str!("../../../schemas/tables/analysis/herbivory.json"),
    ),
    (
        "cage_survival",
        include_str!("../../../schemas/tables/analysis/cage_survival.json"),
    ),
    (
        "survival_curve",
        include_str!("../../../schemas/tables/analysis/survival_curve.json"),
    ),
    (
        "cage_response",
        include_str!("../../../schemas/tables/analysis/cage_response.json"),
    ),
    (
        "treatment_summary",
        include_str!("../../../schemas/tables/analysis/treatment_summary.json"),
    ),
    (
        "effect",
        include_str!("../../../schemas/tables/analysis/effect.json"),
    ),
    (
        "predator_split",
        include_str!("../../../schemas/tables/analysis/predator_split.json"),
    ),
];

/// A Frictionless field type used by fieldcage's tables.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum FieldType {
    /// Text (stored as TEXT).
    String,
    /// Whole number (INTEGER).
    Integer,
    /// Real number (REAL).
    Number,
    /// `true` / `false` (INTEGER 1 / 0).
    Boolean,
    /// ISO 8601 date `YYYY-MM-DD` (TEXT).
    Date,
    /// ISO 8601 / RFC 3339 timestamp with offset (TEXT).
    Datetime,
}

/// Constraints of one field.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(default)]
pub struct Constraints {
    /// The cell may not be empty.
    pub required: bool,
    /// No two live rows share the value.
    pub unique: bool,
    /// Smallest allowed number.
    pub minimum: Option<f64>,
    /// Largest allowed number.
    pub maximum: Option<f64>,
    /// Allowed values.
    #[serde(rename = "enum")]
    pub allowed: Option<Vec<String>>,
    /// Regular expression the whole text must match.
    pub pattern: Option<String>,
}

/// One column of a table.
#[derive(Debug, Deserialize)]
pub struct FieldSchema {
    /// Column name.
    pub name: String,
    /// Column type.
    #[serde(rename = "type")]
    pub kind: FieldType,
    /// Human description (with the unit).
    pub description: String,
    /// Constraints.
    #[serde(default)]
    pub constraints: Constraints,
    #[serde(skip)]
    pattern: Option<Regex>,
}

/// A foreign key: `field` holds the id of a row of `resource`.
#[derive(Debug, Clone)]
pub struct ForeignKey {
    /// Referencing column.
    pub field: String,
    /// Referenced table.
    pub resource: String,
}

/// One table's schema.
#[derive(Debug)]
pub struct TableSchema {
    /// Table name (also the CSV file stem).
    pub name: String,
    /// Human title.
    pub title: String,
    /// What one row is.
    pub description: String,
    /// Columns in order.
    pub fields: Vec<FieldSchema>,
    /// Foreign keys.
    pub foreign_keys: Vec<ForeignKey>,
    /// The primary key's columns (`["id"]` for every stored table).
    pub primary_key: Vec<String>,
    /// Column sets unique among live rows (the primary key and single `unique`
    /// fields included).
    pub unique_keys: Vec<Vec<usize>>,
    /// The raw JSON, as shipped (for the data package).
    pub json: serde_json::Value,
}

#[derive(Deserialize)]
struct RawSchema {
    name: String,
    title: String,
    description: String,
    fields: Vec<FieldSchema>,
    #[serde(rename = "primaryKey")]
    primary_key: Vec<String>,
    #[serde(rename = "foreignKeys", default)]
    foreign_keys: Vec<RawForeignKey>,
    #[serde(rename = "uniqueKeys", default)]
    unique_keys: Vec<Vec<String>>,
}

#[derive(Deserialize)]
struct RawForeignKey {
    fields: String,
    reference: RawReference,
}

#[derive(Deserialize)]
struct RawReference {
    resource: String,
}

/// Whether a schema describes a stored or a derived (analysis) table.
#[derive(Clone, Copy, PartialEq)]
enum Kind {
    Stored,
    Analysis,
}

fn parse_schema(name: &str, text: &str, kind: Kind) -> TableSchema {
    // The schemas are part of the build; a broken one is a programming error
    // that the test suite catches before release.
    let json: serde_json::Value =
        serde_json::from_str(text).unwrap_or_else(|e| panic!("schema {name} is not JSON: {e}"));
    let raw: RawSchema = serde_json::from_value(json.clone())
        .unwrap_or_else(|e| panic!("schema {name} is not a table schema: {e}"));
    assert_eq!(raw.name, name, "schema {name} names another table");
    if kind == Kind::Stored {
        // Stored rows are addressed by id everywhere (writer, change log, sync).
        assert_eq!(raw.primary_key, ["id"], "{name}: primary key must be id");
    }
    let mut fields = raw.fields;
    for f in &mut fields {
        if let Some(p) = &f.constraints.pattern {
            let re =
                Regex::new(p).unwrap_or_else(|e| panic!("{name}.{}: bad pattern {p}: {e}", f.name));
            f.pattern = Some(re);
        }
    }
    let index = |col: &str| {
        fields
            .iter()
            .position(|f| f.name == col)
            .unwrap_or_else(|| panic!("{name}: key names unknown column {col}"))
    };
    let mut unique_keys: Vec<Vec<usize>> = fields
        .iter()
        .enumerate()
        .filter(|(_, f)| f.constraints.unique)
        .map(|(i, _)| vec![i])
        .collect();
    for key in std::iter::once(&raw.primary_key).chain(&raw.unique_keys) {
        let cols: Vec<usize> = key.iter().map(|c| index(c)).collect();
        if !unique_keys.contains(&cols) {
            unique_keys.push(cols);
        }
    }
    let foreign_keys = raw
        .foreign_keys
        .into_iter()
        .map(|fk| {
            index(&fk.fields);
            ForeignKey {
                field: fk.fields,
                resource: fk.reference.resource,
            }
        })
        .collect();
    TableSchema {
        name: raw.name,
        title: raw.title,
        description: raw.description,
        fields,
        foreign_keys,
        primary_key: raw.primary_key,
        unique_keys,
        json,
    }
}

/// Every stored data table, in dependency order.
pub fn all() -> &'static [TableSchema] {
    static TABLES: OnceLock<Vec<TableSchema>> = OnceLock::new();
    TABLES.get_or_init(|| {
        SOURCES
            .iter()
            .map(|(name, text)| parse_schema(name, text, Kind::Stored))
            .collect()
    })
}

/// The schema of one stored table, if it exists.
pub fn get(name: &str) -> Option<&'static TableSchema> {
    all().iter().find(|t| t.name == name)
}

/// Every analysis table (derived on export; never stored or imported), in
/// export order.
pub fn analysis() -> &'static [TableSchema] {
    static TABLES: OnceLock<Vec<TableSchema>> = OnceLock::new();
    TABLES.get_or_init(|| {
        ANALYSIS_SOURCES
            .iter()
            .map(|(name, text)| parse_schema(name, text, Kind::Analysis))
            .collect()
    })
}

/// The schema of one analysis table, if it exists.
pub fn get_analysis(name: &str) -> Option<&'static TableSchema> {
    analysis().iter().find(|t| t.name == name)
}

impl TableSchema {
    /// Position of a column.
    pub fn index(&self, column: &str) -> Option<usize> {
        self.fields.iter().position(|f| f.name == column)
    }

    /// The field of a column.
    pub fn field(&self, column: &str) -> Option<&FieldSchema> {
        self.fields.iter().find(|f| f.name == column)
    }

    /// Comma-separated column list for SQL.
    pub fn column_list(&self) -> String {
        self.fields
            .iter()
            .map(|f| f.name.as_str())
            .collect::<Vec<_>>()
            .join(", ")
    }
}

/// Characters that make a spreadsheet treat a text cell as a formula
/// (OWASP "CSV Injection"; CWE-1236).
const FORMULA_TRIGGERS: &[char] = &['=', '+', '-', '@', '\t', '\r', '\n'];

/// Prefix a text cell with `'` when a spreadsheet could read it as a formula.
/// A text that already starts with `'` is prefixed too, so that
/// [`restore_text`] can undo the escape without loss.
pub fn neutralise_text(text: &str) -> std::borrow::Cow<'_, str> {
    match text.chars().next() {
        Some(c) if FORMULA_TRIGGERS.contains(&c) || c == '\'' => format!("'{text}").into(),
        _ => text.into(),
    }
}

/// Undo [`neutralise_text`]: drop one leading `'`.
pub fn restore_text(cell: &str) -> &str {
    cell.strip_prefix('\'').unwrap_or(cell)
}

impl FieldSchema {
    /// Parse one CSV cell into a stored value and check it against the
    /// field's constraints. An empty cell is NULL. Free-text cells are
    /// restored from their formula-injection escape.
    pub fn parse_cell(&self, cell: &str) -> Result<Value, String> {
        if cell.is_empty() {
            self.check(&Value::Null)?;
            return Ok(Value::Null);
        }
        let value = match self.kind {
            FieldType::String if self.is_free_text() => Value::Text(restore_text(cell).to_owned()),
            FieldType::String => Value::Text(cell.to_owned()),
            FieldType::Integer => cell
                .parse::<i64>()
                .map(Value::Integer)
                .map_err(|_| "is not a whole number".to_owned())?,
            FieldType::Number => {
                let x: f64 = cell.parse().map_err(|_| "is not a number".to_owned())?;
                if !x.is_finite() {
                    return Err("is not a finite number".to_owned());
                }
                Value::Real(x)
            }
            FieldType::Boolean => match cell {
                "true" => Value::Integer(1),
                "false" => Value::Integer(0),
                _ => return Err("is not true or false".to_owned()),
            },
            FieldType::Date | FieldType::Datetime => Value::Text(cell.to_owned()),
        };
        self.check(&value)?;
        Ok(value)
    }

    /// Format a stored value as a CSV cell (text neutralised, numbers exact).
    pub fn format_cell(&self, value: &Value) -> String {
        match (value, self.kind) {
            (Value::Null, _) => String::new(),
            (Value::Integer(i), FieldType::Boolean) => (*i != 0).to_string(),
            (Value::Integer(i), _) => i.to_string(),
            (Value::Real(x), _) => format_number(*x),
            (Value::Text(t), FieldType::String) if self.is_free_text() => {
                neutralise_text(t).into_owned()
            }
            (Value::Text(t), _) => t.clone(),
            (Value::Blob(_), _) => String::new(),
        }
    }

    /// Whether the field holds free text, which a spreadsheet could run as a
    /// formula. Codes, ids and offsets are held to an anchored pattern or an
    /// enum on every write, so they carry no formula and are written as they
    /// are (a Braun-Blanquet class `+` or an offset `+02:00` must stay valid
    /// against its own pattern for the analyst's validator).
    pub fn is_free_text(&self) -> bool {
        self.kind == FieldType::String
            && self.constraints.pattern.is_none()
            && self.constraints.allowed.is_none()
    }

    /// Check a value against this field's type and constraints.
    /// The error says what is wrong, without the field name.
    pub fn check(&self, value: &Value) -> Result<(), String> {
        let c = &self.constraints;
        let text = match value {
            Value::Null => {
                return if c.required {
                    Err("is required".to_owned())
                } else {
                    Ok(())
                };
            }
            Value::Blob(_) => return Err("binary values are not accepted".to_owned()),
            Value::Integer(i) => {
                match self.kind {
                    FieldType::Integer | FieldType::Number => {}
                    FieldType::Boolean if *i == 0 || *i == 1 => {}
                    _ => return Err(format!("must be {}", self.kind.noun())),
                }
                self.check_range(*i as f64)?;
                return Ok(());
            }
            Value::Real(x) => {
                if self.kind != FieldType::Number {
                    return Err(format!("must be {}", self.kind.noun()));
                }
                if !x.is_finite() {
                    return Err("is not a finite number".to_owned());
                }
                self.check_range(*x)?;
                return Ok(());
            }
            Value::Text(t) => t,
        };
        match self.kind {
            FieldType::String => {}
            FieldType::Date => {
                NaiveDate::parse_from_str(text, "%Y-%m-%d")
                    .ok()
                    .filter(|d| d.format("%Y-%m-%d").to_string() == *text)
                    .ok_or_else(|| "is not a date YYYY-MM-DD".to_owned())?;
            }
            FieldType::Datetime => {
                DateTime::parse_from_rfc3339(text).map_err(|_| {
                    "is not a timestamp with offset, e.g. 2026-05-04T09:15:00+02:00".to_owned()
                })?;
            }
            _ => return Err(format!("must be {}", self.kind.noun())),
        }
        if text.is_empty() {
            return Err("is empty; leave it out instead".to_owned());
        }
        if let Some(allowed) = &c.allowed
            && !allowed.iter().any(|a| a == text)
        {
            return Err(format!("must be one of {}", allowed.join(", ")));
        }
        if let Some(re) = &self.pattern
            && !re.is_match(text)
        {
            return Err(format!(
                "does not match the pattern {}",
                c.pattern.as_deref().unwrap_or_default()
            ));
        }
        Ok(())
    }

    fn check_range(&self, x: f64) -> Result<(), String> {
        let c = &self.constraints;
        if let Some(min) = c.minimum
            && x < min
        {
            return Err(format!("is below the minimum {}", format_number(min)));
        }
        if let Some(max) = c.maximum
            && x > max
        {
            return Err(format!("is above the maximum {}", format_number(max)));
        }
        Ok(())
    }
}

impl FieldType {
    fn noun(self) -> &'static str {
        match self {
            FieldType::String => "text",
            FieldType::Integer => "a whole number",
            FieldType::Number => "a number",
            FieldType::Boolean => "true or false",
            FieldType::Date => "a date YYYY-MM-DD",
            FieldType::Datetime => "a timestamp with offset",
        }
    }
}

/// Shortest text that reads back as the same `f64` (never an exponent).
pub fn format_number(x: f64) -> String {
    format!("{x}")
}

/// Render a stored value for messages and the change log display.
pub fn display_value(value: &Value) -> String {
    match value {
        Value::Null => "(empty)".to_owned(),
        Value::Integer(i) => i.to_string(),
        Value::Real(x) => format_number(*x),
        Value::Text(t) => t.clone(),
        Value::Blob(b) => format!("<{} bytes>", b.len()),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    fn field(table: &str, column: &str) -> &'static FieldSchema {
        get(table)
            .and_then(|t| t.field(column))
            .unwrap_or_else(|| panic!("{table}.{column}"))
    }

    #[test]
    fn formula_triggers_are_escaped_in_free_text_only() {
        let notes = field("census", "notes");
        let text = |s: &str| Value::Text(s.to_owned());
        // OWASP "CSV Injection" / CWE-1236 check values (docs/methods.md section 8).
        assert_eq!(notes.format_cell(&text("=SUM(A1)")), "'=SUM(A1)");
        assert_eq!(notes.format_cell(&text("@x")), "'@x");
        assert_eq!(notes.format_cell(&text("-3.5")), "'-3.5");
        assert_eq!(notes.format_cell(&text("\tx")), "'\tx");
        assert_eq!(notes.format_cell(&text("plain")), "plain");
        // Numbers stay byte-exact (docs/methods.md section 8).
        assert_eq!(
            field("site", "longitude").format_cell(&Value::Real(-3.5)),
            "-3.5"
        );
        // Pattern-held codes carry no formula and must stay valid: a
        // Braun-Blanquet class "+" and an offset "+02:00" (common practice).
        assert_eq!(field("scale_class", "code").format_cell(&text("+")), "+");
        assert_eq!(
            field("experiment", "utc_offset").format_cell(&text("+02:00")),
            "+02:00"
        );
    }

    #[test]
    fn cells_are_checked_against_type_and_constraints() {
        let alive = field("census", "alive");
        assert_eq!(alive.parse_cell("3"), Ok(Value::Integer(3)));
        assert_eq!(alive.parse_cell(""), Ok(Value::Null));
        assert_eq!(
            alive.parse_cell("-1"),
            Err("is below the minimum 0".to_owned())
        );
        assert_eq!(
            alive.parse_cell("2.5"),
            Err("is not a whole number".to_owned())
        );
        let visit = field("census", "visit_id");
        assert_eq!(visit.parse_cell(""), Err("is required".to_owned()));
        let date = field("tagged_leaf", "tagged_on");
        assert!(date.parse_cell("2026-02-30").is_err(), "no 30 February");
        assert!(
            date.parse_cell("2026-5-1").is_err(),
            "ISO 8601 needs two-digit month and day"
        );
        let at = field("visit", "visited_at");
        assert!(at.parse_cell("2026-05-11T09:00:00+02:00").is_ok());
        assert!(
            at.parse_cell("2026-05-11T09:00:00").is_err(),
            "a timestamp needs its offset"
        );
        let mode = field("treatment", "predator_mode");
        assert_eq!(mode.parse_cell("risk"), Ok(Value::Text("risk".into())));
        assert!(
            mode.parse_cell("Risk")
                .unwrap_err()
                .contains("none, lethal, risk")
        );
        let flag = field("treatment", "herbivores");
        assert_eq!(flag.parse_cell("true"), Ok(Value::Integer(1)));
        assert!(flag.parse_cell("yes").is_err());
    }

    proptest! {
        /// Any free text survives export and import unchanged.
        #[test]
        fn free_text_round_trips(s in "\\PC*") {
            let notes = field("census", "notes");
            let value = if s.is_empty() { Value::Null } else { Value::Text(s.clone()) };
            prop_assert_eq!(notes.parse_cell(&notes.format_cell(&value)), Ok(value));
        }

        /// Any finite number survives export and import bit for bit.
        #[test]
        fn numbers_round_trip_exactly(x in -1.0e6f64..1.0e6) {
            let cell = field("enclosure", "x_m").format_cell(&Value::Real(x));
            prop_assert_eq!(cell.parse::<f64>().map(f64::to_bits), Ok(x.to_bits()));
        }
    }
}
