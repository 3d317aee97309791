//! The change log: how entries are stored and read back.
//!
//! Every field a write sets has its own sequence number on its device. An
//! update, a delete and a restore are one stored entry each. A new row is
//! stored as ONE entry (migration 0006): `op` = 'insert', `field` NULL and
//! `new_value` the fields it set, packed ([`pack_insert`]): a JSON array of
//! `[field, value]` pairs in column order, each value in its [`typed_text`]
//! form. Its seq is the first of the consecutive seqs its fields take, one
//! per pair (so a change-set file, which has one line per field, reads the
//! same as before). Inserts are
//! nearly all of a season's log, and storing one entry per row instead of one
//! per field is what lets a new tablet merge a crew's season in seconds.
//!
//! Readers see one [`LogEntry`] per field either way: every read of entries
//! goes through this module, which unpacks inserts.

use rusqlite::types::Value;
use rusqlite::{Connection, OptionalExtension, Row, params};

use super::{Op, typed_text};
use crate::{Error, Result};

/// One change-log entry: one field of an insert, an update, a delete or a
/// restore.
#[derive(Debug, Clone, PartialEq)]
pub struct LogEntry {
    /// Device that made it.
    pub device_id: String,
    /// Its sequence number on that device.
    pub seq: i64,
    /// Hybrid logical clock when it was made.
    pub hlc: i64,
    /// What it did.
    pub op: Op,
    /// The field, or `None` for a delete or restore.
    pub field: Option<String>,
    /// The field's value before (NULL for an insert).
    pub old_value: Value,
    /// The field's value after.
    pub new_value: Value,
}

/// A [`LogEntry`] with the row it belongs to.
#[derive(Debug, Clone, PartialEq)]
pub struct LoggedChange {
    /// Table of the row.
    pub table: String,
    /// Id of the row.
    pub row_id: String,
    /// The entry.
    pub entry: LogEntry,
}

/// A query of stored entries: every column, in the order [`expand`] reads
/// them, then the rest of the statement.
macro_rules! select_entries {
    ($rest:literal) => {
        concat!(
            "SELECT device_id, seq, hlc, table_name, row_id, op, field, old_value, new_value \
             FROM change_log ",
            $rest
        )
    };
}

/// The statement that stores one entry.
pub const INSERT_SQL: &str = "INSERT INTO change_log \
     (device_id, seq, hlc, table_name, row_id, op, field, old_value, new_value) \
     VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9)";

/// One entry another device made, as a change-set being applied stores it
/// (an insert's fields already packed, [`pack_insert`]).
#[derive(Debug)]
pub(crate) struct Received<'a> {
    /// Its device's sequence number.
    pub seq: i64,
    /// Its hybrid-logical-clock timestamp.
    pub hlc: i64,
    /// Data table.
    pub table: &'a str,
    /// Row id.
    pub row_id: &'a str,
    /// What it did.
    pub op: Op,
    /// Column (none for an insert, a delete and a restore).
    pub field: Option<&'a str>,
    /// Value before.
    pub old_value: &'a Value,
    /// Value after (an insert: its packed fields).
    pub new_value: Value,
}

/// Store entries of `device_id` received from another device, in the
/// caller's transaction.
pub(crate) fn store_received<'a>(
    conn: &Connection,
    device_id: &str,
    entries: impl IntoIterator<Item = Received<'a>>,
) -> Result<()> {
    let mut insert = conn.prepare_cached(INSERT_SQL)?;
    for e in entries {
        insert.execute(params![
            device_id,
            e.seq,
            e.hlc,
            e.table,
            e.row_id,
            e.op.as_str(),
            e.field,
            e.old_value,
            e.new_value
        ])?;
    }
    Ok(())
}

/// The packed form of an insert's fields: `[field, value]` pairs, in the
/// order given (the writer gives the fields that have a value, in column
/// order). Written straight into one buffer: every row a merge stores is
/// packed once.
pub fn pack_insert<'a>(fields: impl IntoIterator<Item = (&'a str, &'a Value)>) -> String {
    let mut out: Vec<u8> = Vec::with_capacity(256);
    out.push(b'[');
    for (n, (field, value)) in fields.into_iter().enumerate() {
        if n > 0 {
            out.push(b',');
        }
        out.push(b'[');
        json_string(&mut out, "", field);
        out.push(b',');
        match value {
            // typed_text's forms: numbers need no escaping
            Value::Integer(_) | Value::Real(_) | Value::Null => {
                out.push(b'"');
                out.extend_from_slice(typed_text::encode(value).as_bytes());
                out.push(b'"');
            }
            Value::Text(t) => json_string(&mut out, "t:", t),
            Value::Blob(_) => json_string(&mut out, "", &typed_text::encode(value)),
        }
        out.push(b']');
    }
    out.push(b']');
    // Only whole UTF-8 strings and ASCII were written.
    String::from_utf8(out).unwrap_or_default()
}

/// Append `prefix` + `text` as one JSON string (the prefix needs no escaping).
fn json_string(out: &mut Vec<u8>, prefix: &str, text: &str) {
    let start = out.len();
    // serde_json writes the quoted, escaped text; the prefix goes after the
    // opening quote.
    if serde_json::to_writer(&mut *out, text).is_ok() && !prefix.is_empty() {
        out.splice(start + 1..start + 1, prefix.bytes());
    }
}

/// The fields of a packed insert, in their order. The error says what is
/// wrong with the text.
pub fn unpack_insert(text: &str) -> std::result::Result<Vec<(String, Value)>, String> {
    let pairs: Vec<(String, String)> = serde_json::from_str(text)
        .map_err(|e| format!("is not a list of [field, value] pairs ({e})"))?;
    if pairs.is_empty() {
        return Err("sets no field".to_owned());
    }
    pairs
        .into_iter()
        .map(|(field, value)| {
            typed_text::decode(&value)
                .map(|v| (field.clone(), v))
                .map_err(|e| format!("field {field}: {value:?} {e}"))
        })
        .collect()
}

/// Read one stored entry and append the [`LoggedChange`]s it holds.
fn expand(r: &Row<'_>, out: &mut Vec<LoggedChange>) -> Result<()> {
    let device_id: String = r.get(0)?;
    let seq: i64 = r.get(1)?;
    let hlc: i64 = r.get(2)?;
    let table: String = r.get(3)?;
    let row_id: String = r.get(4)?;
    let op_word: String = r.get(5)?;
    let op = Op::parse(&op_word).ok_or_else(|| {
        Error::Invariant(format!(
            "change log entry {device_id}/{seq}: op {op_word:?} is not insert, update, delete or restore"
        ))
    })?;
    if op == Op::Insert {
        let text: String = r.get(8)?;
        let fields = unpack_insert(&text).map_err(|e| {
            Error::Invariant(format!(
                "change log entry {device_id}/{seq}: the insert {e}"
            ))
        })?;
        for (i, (field, value)) in fields.into_iter().enumerate() {
            out.push(LoggedChange {
                table: table.clone(),
                row_id: row_id.clone(),
                entry: LogEntry {
                    device_id: device_id.clone(),
                    seq: seq + i as i64,
                    hlc,
                    op,
                    field: Some(field),
                    old_value: Value::Null,
                    new_value: value,
                },
            });
        }
    } else {
        out.push(LoggedChange {
            table,
            row_id,
            entry: LogEntry {
                device_id,
                seq,
                hlc,
                op,
                field: r.get(6)?,
                old_value: r.get(7)?,
                new_value: r.get(8)?,
            },
        });
    }
    Ok(())
}

/// The [`LoggedChange`]s of the stored entries a query selects (made with
/// `select_entries!`).
fn query(conn: &Connection, sql: &str, args: impl rusqlite::Params) -> Result<Vec<LoggedChange>> {
    let mut stmt = conn.prepare_cached(sql)?;
    let mut rows = stmt.query(args)?;
    let mut out = Vec::new();
    while let Some(r) = rows.next()? {
        expand(r, &mut out)?;
    }
    Ok(out)
}

/// The SQL of [`row_entries`]: the stored entries of one row, through the
/// row index.
const ROW_ENTRIES: &str =
    select_entries!("WHERE table_name = ?1 AND row_id = ?2 ORDER BY device_id, seq");

/// Every change-log entry of one row, in the order of (device, seq).
pub fn row_entries(
    source: &impl super::Source,
    table: &str,
    row_id: &str,
) -> Result<Vec<LogEntry>> {
    Ok(
        query(super::conn_of(source), ROW_ENTRIES, params![table, row_id])?
            .into_iter()
            .map(|c| c.entry)
            .collect(),
    )
}

/// How SQLite plans [`row_entries`] (for the test that it uses the index).
pub fn row_entries_plan(conn: &Connection) -> Result<Vec<String>> {
    let mut stmt = conn.prepare(&format!("EXPLAIN QUERY PLAN {ROW_ENTRIES}"))?;
    let rows = stmt.query_map(params![Value::Null, Value::Null], |r| r.get::<_, String>(3))?;
    Ok(rows.collect::<rusqlite::Result<_>>()?)
}

/// The entries of `device` with seqs `first..=last`, in seq order. The range
/// must not cut an insert (write transactions never share seqs).
pub fn device_entries(
    conn: &Connection,
    device: &str,
    first: i64,
    last: i64,
) -> Result<Vec<LoggedChange>> {
    const SQL: &str =
        select_entries!("WHERE device_id = ?1 AND seq BETWEEN ?2 AND ?3 ORDER BY seq");
    query(conn, SQL, params![device, first, last])
}

/// The entry `seq` of `device`, also when it is a field of a packed insert.
pub fn entry_at(conn: &Connection, device: &str, seq: i64) -> Result<Option<LoggedChange>> {
    const SQL: &str =
        select_entries!("WHERE device_id = ?1 AND seq <= ?2 ORDER BY seq DESC LIMIT 1");
    Ok(query(conn, SQL, params![device, seq])?
        .into_iter()
        .find(|c| c.entry.seq == seq))
}

/// Every entry of the log, in the order of (device, seq).
pub fn all_entries(conn: &Connection) -> Result<Vec<LoggedChange>> {
    query(conn, select_entries!("ORDER BY device_id, seq"), [])
}

/// Number of entries (fields of inserts counted one by one) of `device`
/// after seq `after`, or of every device when `device` is `None`.
///
/// Derived from the last seqs, without unpacking a single insert: every
/// device's entries in a log run gapless from seq 1 (a device numbers its
/// own entries one by one, and another device's are applied whole
/// change-sets at a time, in seq order). Summing the fields of every packed
/// insert instead took a quarter of a second on a merged season, at every
/// overview the UI asks for.
pub fn count(conn: &Connection, device: Option<&str>, after: i64) -> Result<i64> {
    let devices: Vec<String> = match device {
        Some(d) => vec![d.to_owned()],
        None => conn
            .prepare_cached("SELECT DISTINCT device_id FROM change_log")?
            .query_map([], |r| r.get(0))?
            .collect::<rusqlite::Result<_>>()?,
    };
    let mut total = 0;
    for d in &devices {
        total += (last_seq(conn, d)?.unwrap_or(0) - after).max(0);
    }
    Ok(total)
}

/// The SQL of [`last_seq`]: the device's last stored entry, and the seqs it
/// takes.
const LAST_SEQ: &str = "SELECT seq + (CASE WHEN op = 'insert' THEN json_array_length(new_value) ELSE 1 END) - 1 \
     FROM change_log WHERE device_id = ?1 ORDER BY seq DESC LIMIT 1";

/// The highest seq of `device` in the log (the last field of a packed
/// insert), or `None` when it has no entry.
pub fn last_seq(conn: &Connection, device: &str) -> Result<Option<i64>> {
    Ok(conn
        .prepare_cached(LAST_SEQ)?
        .query_row([device], |r| r.get(0))
        .optional()?)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn an_insert_packs_its_fields_in_order_with_their_types() {
        let id = Value::Text("0190-row".into());
        let count = Value::Integer(3);
        let cover = Value::Real(12.5);
        let empty = Value::Text(String::new());
        let quoted = Value::Text("a \"b\", \\ c\n\u{e9}".into());
        let text = pack_insert([
            ("id", &id),
            ("alive", &count),
            ("cover", &cover),
            ("label", &empty),
            ("notes", &quoted),
        ]);
        // common practice: JSON pairs of field and typed text.
        assert_eq!(
            text,
            r#"[["id","t:0190-row"],["alive","i:3"],["cover","r:12.5"],["label","t:"],["notes","t:a \"b\", \\ c\né"]]"#
        );
        let back = unpack_insert(&text).unwrap();
        assert_eq!(
            back,
            vec![
                ("id".to_owned(), id),
                ("alive".to_owned(), count),
                ("cover".to_owned(), cover),
                ("label".to_owned(), empty),
                ("notes".to_owned(), quoted),
            ]
        );
    }

    /// The count of a device's unsent entries is read at every sync and
    /// status call: it must not read the whole log.
    #[test]
    fn a_devices_count_reads_only_its_last_entry() {
        let dir = tempfile::tempdir().expect("temp dir");
        let store = crate::Store::open(dir.path().join("count.db")).expect("open");
        let plan: Vec<String> = store
            .conn()
            .prepare(&format!("EXPLAIN QUERY PLAN {LAST_SEQ}"))
            .expect("valid SQL")
            .query_map(["d"], |r| r.get(3))
            .expect("plan")
            .collect::<rusqlite::Result<_>>()
            .expect("plan rows");
        assert!(plan.iter().all(|p| p.starts_with("SEARCH")), "{plan:?}");
    }

    #[test]
    fn a_damaged_packed_insert_is_refused_with_the_reason() {
        assert!(unpack_insert("[").unwrap_err().contains("pairs"));
        assert!(unpack_insert("[]").unwrap_err().contains("no field"));
        let bad = unpack_insert(r#"[["id","t:a"],["alive","i:x"]]"#).unwrap_err();
        assert!(
            bad.contains("alive") && bad.contains("whole number"),
            "{bad}"
        );
    }
}
