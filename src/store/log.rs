//! Reading the change log by row.
//!
//! The row index (`change_log_row_idx`, migration 0005) holds every entry
//! that is not an insert, and of each insert only its `id` entry: an insert
//! is a run of entries with consecutive seqs on one device, the `id` entry
//! first and then one entry per other field that has a value (the writer
//! logs it so, and the change-set reader refuses files that do not). The
//! other entries of an insert are read from its `id` entry by seq, through
//! the primary key. Every read of a row's entries goes through
//! [`row_entries`]; a query by row that does not repeat the index's WHERE
//! clause would read the whole log.

use rusqlite::Connection;
use rusqlite::types::Value;

use super::Op;
use crate::Result;
use crate::tables;

/// One change-log entry of a row.
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

/// The SQL of [`row_entries`]: the indexed entries of the row (`h`), each
/// with itself and, for an insert's `id` entry, the rest of its run (`c`,
/// by primary key, within as many seqs as the table has columns).
const ROW_ENTRIES: &str = "\
SELECT c.device_id, c.seq, c.hlc, c.op, c.field, c.old_value, c.new_value
  FROM change_log AS h
  JOIN change_log AS c
    ON c.device_id = h.device_id
   AND c.seq >= h.seq
   AND c.seq < h.seq + (CASE WHEN h.op = 'insert' THEN ?3 ELSE 1 END)
 WHERE h.table_name = ?1 AND h.row_id = ?2 AND (h.op <> 'insert' OR h.field = 'id')
   AND c.table_name = ?1 AND c.row_id = ?2
   AND (c.seq = h.seq OR (c.op = 'insert' AND c.field <> 'id'))";

/// Every change-log entry of one row, in the order of (device, seq).
pub fn row_entries(conn: &Connection, table: &str, row_id: &str) -> Result<Vec<LogEntry>> {
    let columns = tables::get(table).map_or(1, |t| t.fields.len()) as i64;
    let mut stmt = conn.prepare_cached(ROW_ENTRIES)?;
    let rows = stmt.query_map(rusqlite::params![table, row_id, columns], |r| {
        let op: String = r.get(3)?;
        Ok(LogEntry {
            device_id: r.get(0)?,
            seq: r.get(1)?,
            hlc: r.get(2)?,
            op: Op::parse(&op).unwrap_or(Op::Update),
            field: r.get(4)?,
            old_value: r.get(5)?,
            new_value: r.get(6)?,
        })
    })?;
    let mut entries = rows.collect::<rusqlite::Result<Vec<_>>>()?;
    entries.sort_by(|a, b| (&a.device_id, a.seq).cmp(&(&b.device_id, b.seq)));
    entries.dedup_by(|a, b| a.device_id == b.device_id && a.seq == b.seq);
    Ok(entries)
}

/// How SQLite plans [`row_entries`] (for the test that it uses the index).
pub fn row_entries_plan(conn: &Connection) -> Result<Vec<String>> {
    let mut stmt = conn.prepare(&format!("EXPLAIN QUERY PLAN {ROW_ENTRIES}"))?;
    let rows = stmt.query_map(
        rusqlite::params![Value::Null, Value::Null, Value::Null],
        |r| r.get::<_, String>(3),
    )?;
    Ok(rows.collect::<rusqlite::Result<_>>()?)
}
