//! This device's sync bookkeeping, and the only code that writes it: the
//! `sync_*` tables of migration 0003 (the runs, the change-sets written and
//! applied, what each device knew, the clock anomalies noticed, the other
//! devices' names) and `local_device`'s `hlc` and `sync_target`. They are
//! local: never logged, exported or sent.
//!
//! One function per write. Each runs on the connection it is given, inside
//! whatever transaction is open on it (a [`rusqlite::Transaction`] derefs to
//! the connection): the apply path passes its IMMEDIATE transaction, so its
//! bookkeeping commits or rolls back with the entries it applied; the others
//! run on the store's connection as single statements. `sync_conflict` and
//! `sync_hidden` are not here: the merge recomputes them
//! ([`crate::store::merge`]).

use rusqlite::{Connection, params};

use crate::Result;

/// A sync run, as `sync_run` keeps it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub(crate) struct Run<'a> {
    /// When it started (RFC 3339).
    pub started_at: &'a str,
    /// When it ended (RFC 3339).
    pub finished_at: &'a str,
    /// The target folder, as shown.
    pub target: &'a str,
    /// Change-sets written.
    pub written: i64,
    /// Change-sets applied.
    pub applied: i64,
    /// Files not applied.
    pub skipped: i64,
    /// Whether it ended without an error.
    pub finished: bool,
}

/// Record a sync run.
pub(crate) fn record_run(conn: &Connection, run: &Run<'_>) -> Result<()> {
    conn.execute(
        "INSERT INTO sync_run (started_at, finished_at, target, written, applied, skipped, finished) \
         VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7)",
        params![
            run.started_at,
            run.finished_at,
            run.target,
            run.written,
            run.applied,
            run.skipped,
            i64::from(run.finished)
        ],
    )?;
    Ok(())
}

/// A change-set this device wrote, as `sync_written` keeps it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub(crate) struct Written<'a> {
    /// Its first seq.
    pub first_seq: i64,
    /// Its last seq.
    pub last_seq: i64,
    /// The device name its header carries.
    pub device_name: &'a str,
    /// SHA-256 of its bytes (hex).
    pub sha256: &'a str,
    /// Its size.
    pub size_bytes: u64,
    /// When it was written (RFC 3339).
    pub written_at: &'a str,
}

/// Record a change-set this device wrote.
pub(crate) fn record_written(conn: &Connection, w: &Written<'_>) -> Result<()> {
    conn.execute(
        "INSERT INTO sync_written (first_seq, last_seq, device_name, sha256, size_bytes, written_at) \
         VALUES (?1, ?2, ?3, ?4, ?5, ?6)",
        params![
            w.first_seq,
            w.last_seq,
            w.device_name,
            w.sha256,
            w.size_bytes as i64,
            w.written_at
        ],
    )?;
    Ok(())
}

/// Which way a clock looked wrong, as `sync_clock_anomaly.kind` stores it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum ClockSide {
    /// Another device's timestamps far ahead of this device's clock.
    Ahead,
    /// This device's clock far behind the newest timestamp it holds.
    Behind,
}

impl ClockSide {
    fn as_str(self) -> &'static str {
        match self {
            ClockSide::Ahead => "ahead",
            ClockSide::Behind => "behind",
        }
    }
}

/// A clock anomaly, as `sync_clock_anomaly` keeps it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub(crate) struct Anomaly<'a> {
    /// When it was noticed (RFC 3339).
    pub noticed_at: &'a str,
    /// The device whose clock looked wrong.
    pub device_id: &'a str,
    /// Which way.
    pub kind: ClockSide,
    /// The hybrid logical clock value concerned.
    pub hlc: i64,
    /// This device's clock when it was noticed (ms since the epoch).
    pub local_millis: i64,
    /// The change-set that showed it, if one did.
    pub file_name: Option<&'a str>,
}

/// Record a clock anomaly.
pub(crate) fn record_clock_anomaly(conn: &Connection, a: &Anomaly<'_>) -> Result<()> {
    conn.execute(
        "INSERT INTO sync_clock_anomaly (noticed_at, device_id, kind, hlc, local_millis, file_name) \
         VALUES (?1, ?2, ?3, ?4, ?5, ?6)",
        params![
            a.noticed_at,
            a.device_id,
            a.kind.as_str(),
            a.hlc,
            a.local_millis,
            a.file_name
        ],
    )?;
    Ok(())
}

/// Record (or replace) what `device`'s entries from `from_seq` on had seen
/// of `other_device`: its changes up to `upto_seq`.
pub(crate) fn record_knowledge(
    conn: &Connection,
    device: &str,
    from_seq: i64,
    other_device: &str,
    upto_seq: i64,
) -> Result<()> {
    conn.prepare_cached(
        "INSERT OR REPLACE INTO sync_knowledge (device_id, from_seq, other_device, upto_seq) \
         VALUES (?1, ?2, ?3, ?4)",
    )?
    .execute(params![device, from_seq, other_device, upto_seq])?;
    Ok(())
}

/// Make this device's knowledge from `from_seq` on (its next entry) all that
/// is applied here now: every device's last applied seq, in place of what was
/// recorded for that seq before. The two statements are one write: the
/// delete alone would leave the entries from `from_seq` on seeing nothing.
pub(crate) fn record_own_knowledge(conn: &Connection, me: &str, from_seq: i64) -> Result<()> {
    conn.execute(
        "DELETE FROM sync_knowledge WHERE device_id = ?1 AND from_seq = ?2",
        params![me, from_seq],
    )?;
    conn.execute(
        "INSERT INTO sync_knowledge (device_id, from_seq, other_device, upto_seq) \
         SELECT ?1, ?2, device_id, max(last_seq) FROM sync_applied GROUP BY device_id",
        params![me, from_seq],
    )?;
    Ok(())
}

/// A change-set of another device applied here, as `sync_applied` keeps it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub(crate) struct Applied<'a> {
    /// The device that made it.
    pub device_id: &'a str,
    /// Its first seq.
    pub first_seq: i64,
    /// Its last seq.
    pub last_seq: i64,
    /// SHA-256 of its bytes (hex).
    pub sha256: &'a str,
    /// Where it was read.
    pub file_name: &'a str,
    /// Its size.
    pub size_bytes: u64,
    /// When it was applied (RFC 3339).
    pub applied_at: &'a str,
}

/// Record a change-set applied here.
pub(crate) fn record_applied(conn: &Connection, a: &Applied<'_>) -> Result<()> {
    conn.execute(
        "INSERT INTO sync_applied (device_id, first_seq, last_seq, sha256, file_name, size_bytes, applied_at) \
         VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7)",
        params![
            a.device_id,
            a.first_seq,
            a.last_seq,
            a.sha256,
            a.file_name,
            a.size_bytes as i64,
            a.applied_at
        ],
    )?;
    Ok(())
}

/// Record another device's name (the latest change-set's name wins).
pub(crate) fn record_device_name(conn: &Connection, device_id: &str, name: &str) -> Result<()> {
    conn.execute(
        "INSERT INTO sync_device (device_id, name) VALUES (?1, ?2) \
         ON CONFLICT (device_id) DO UPDATE SET name = ?2",
        params![device_id, name],
    )?;
    Ok(())
}

/// Set this device's hybrid logical clock (`local_device.hlc`).
pub(crate) fn set_hlc(conn: &Connection, hlc: i64) -> Result<()> {
    conn.execute(
        "UPDATE local_device SET hlc = ?1 WHERE singleton = 1",
        [hlc],
    )?;
    Ok(())
}

/// Set (or, with `None`, clear) the saved sync target
/// (`local_device.sync_target`).
pub(crate) fn set_sync_target(conn: &Connection, target: Option<&str>) -> Result<()> {
    conn.execute(
        "UPDATE local_device SET sync_target = ?1 WHERE singleton = 1",
        [target],
    )?;
    Ok(())
}
