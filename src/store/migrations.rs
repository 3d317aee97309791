//! Schema migrations: numbered `.sql` files in `schemas/sqlite/`, embedded in
//! the binary, applied at open in one transaction and tracked by
//! `PRAGMA user_version`. Old files are never edited; a change is a new file.

use rusqlite::{Connection, TransactionBehavior};

use crate::{Error, Result};

/// Every migration in order; the version after applying entry `i` is `i + 1`.
pub const MIGRATIONS: &[(&str, &str)] = &[
    (
        "0001_initial",
        include_str!("../../schemas/sqlite/0001_initial.sql"),
    ),
    (
        "0002_flags",
        include_str!("../../schemas/sqlite/0002_flags.sql"),
    ),
    (
        "0003_sync",
        include_str!("../../schemas/sqlite/0003_sync.sql"),
    ),
    (
        "0004_sync_target",
        include_str!("../../schemas/sqlite/0004_sync_target.sql"),
    ),
    (
        "0005_change_log_rebuild",
        include_str!("../../schemas/sqlite/0005_change_log_rebuild.sql"),
    ),
];

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
        return Err(Error::State(format!(
            "the database has a negative schema version {current}; it was not made by fieldcage"
        )));
    }
    let pending = &MIGRATIONS[current as usize..];
    for (name, sql) in pending {
        tx.execute_batch(sql)
            .map_err(|e| Error::State(format!("migration {name} failed: {e}")))?;
    }
    if !pending.is_empty() {
        // user_version cannot be a bound parameter; the value is our own integer.
        tx.execute_batch(&format!("PRAGMA user_version = {latest}"))?;
    }
    tx.commit()?;
    Ok(pending.len())
}
