//! Schema migrations: numbered `.sql` files in `schemas/sqlite/` (0006 with
//! a step in Rust after its SQL), embedded in the binary, applied at open in
//! one transaction and tracked by `PRAGMA user_version`. Old files are never
//! edited; a change is a new file.

use rusqlite::types::Value;
use rusqlite::{Connection, TransactionBehavior};

use crate::{Error, Result};

/// One migration: its SQL, then (for the few that need it) a step in Rust.
#[derive(Debug)]
pub struct Migration {
    /// File name without `.sql`.
    pub name: &'static str,
    /// The SQL, run first.
    pub sql: &'static str,
    /// A step run after the SQL, in the same transaction.
    pub then: Option<fn(&Connection) -> Result<()>>,
}

const fn sql(name: &'static str, sql: &'static str) -> Migration {
    Migration {
        name,
        sql,
        then: None,
    }
}

/// Every migration in order; the version after applying entry `i` is `i + 1`.
pub const MIGRATIONS: &[Migration] = &[
    sql(
        "0001_initial",
        include_str!("../../../../schemas/sqlite/0001_initial.sql"),
    ),
    sql(
        "0002_flags",
        include_str!("../../../../schemas/sqlite/0002_flags.sql"),
    ),
    sql(
        "0003_sync",
        include_str!("../../../../schemas/sqlite/0003_sync.sql"),
    ),
    sql(
        "0004_sync_target",
        include_str!("../../../../schemas/sqlite/0004_sync_target.sql"),
    ),
    sql(
        "0005_change_log_rebuild",
        include_str!("../../../../schemas/sqlite/0005_change_log_rebuild.sql"),
    ),
    Migration {
        name: "0006_packed_inserts",
        sql: include_str!("../../../../schemas/sqlite/0006_packed_inserts.sql"),
        then: Some(pack_inserts),
    },
    sql(
        "0007_packed_inserts_swap",
        include_str!("../../../../schemas/sqlite/0007_packed_inserts_swap.sql"),
    ),
    sql(
        "0008_operation_receipt",
        include_str!("../../../../schemas/sqlite/0008_operation_receipt.sql"),
    ),
];

/// The Rust step of 0006: every insert run of `change_log` (an `id` entry
/// and the insert entries of the same row that follow it with consecutive
/// seqs on its device) becomes one packed entry in `change_log_next`. An
/// insert entry that follows no `id` entry (never written by fieldcage)
/// starts a run of its own, so that no entry is lost.
fn pack_inserts(conn: &Connection) -> Result<()> {
    let mut read = conn.prepare(
        "SELECT device_id, seq, hlc, table_name, row_id, field, new_value FROM change_log \
         WHERE op = 'insert' ORDER BY device_id, seq",
    )?;
    let mut write = conn.prepare(
        "INSERT INTO change_log_next \
         (device_id, seq, hlc, table_name, row_id, op, field, old_value, new_value) \
         VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9)",
    )?;
    let mut rows = read.query([])?;
    type Run = (String, i64, i64, String, String, Vec<(String, Value)>);
    let mut run: Option<Run> = None;
    let mut flush = |run: Option<Run>| -> Result<()> {
        if let Some((device, seq, hlc, table, row_id, fields)) = run {
            let packed = super::log::pack_insert(fields.iter().map(|(f, v)| (f.as_str(), v)));
            write.execute(rusqlite::params![
                device,
                seq,
                hlc,
                table,
                row_id,
                "insert",
                Value::Null,
                Value::Null,
                packed
            ])?;
        }
        Ok(())
    };
    while let Some(r) = rows.next()? {
        let device: String = r.get(0)?;
        let seq: i64 = r.get(1)?;
        let row_id: String = r.get(4)?;
        let field: String = r.get::<_, Option<String>>(5)?.unwrap_or_default();
        let value: Value = r.get(6)?;
        let continues = run.as_ref().is_some_and(|(d, s, _, _, id, fields)| {
            field != "id" && *d == device && *id == row_id && s + fields.len() as i64 == seq
        });
        if continues {
            if let Some(run) = run.as_mut() {
                run.5.push((field, value));
            }
        } else {
            flush(run.take())?;
            run = Some((
                device,
                seq,
                r.get(2)?,
                r.get(3)?,
                row_id,
                vec![(field, value)],
            ));
        }
    }
    flush(run)
}

/// The schema version this build writes.
pub fn latest_version() -> i64 {
    MIGRATIONS.len() as i64
}

/// Read the database's schema version.
pub fn current_version(conn: &Connection) -> Result<i64> {
    Ok(conn.query_row("PRAGMA user_version", [], |r| r.get(0))?)
}

/// Apply every migration the database lacks, all in one transaction: either the
/// database reaches the latest version or it stays as it was.
/// Returns the number of migrations applied (0 when already current).
pub fn migrate(conn: &mut Connection) -> Result<usize> {
    let tx = conn.transaction_with_behavior(TransactionBehavior::Immediate)?;
    let current = current_version(&tx)?;
    let latest = latest_version();
    if current > latest {
        return Err(Error::State(format!(
            "the database has schema version {current}, newer than this fieldcage \
             (version {latest}); use a newer fieldcage"
        )));
    }
    if current < 0 {
        return Err(Error::Invariant(format!(
            "the database has a negative schema version {current}; it was not made by fieldcage"
        )));
    }
    let pending = &MIGRATIONS[current as usize..];
    for m in pending {
        let failed = |e: String| Error::Invariant(format!("migration {} failed: {e}", m.name));
        tx.execute_batch(m.sql).map_err(|e| failed(e.to_string()))?;
        if let Some(step) = m.then {
            step(&tx).map_err(|e| failed(e.to_string()))?;
        }
    }
    if !pending.is_empty() {
        // user_version cannot be a bound parameter; the value is our own integer.
        tx.execute_batch(&format!("PRAGMA user_version = {latest}"))?;
    }
    tx.commit()?;
    Ok(pending.len())
}
