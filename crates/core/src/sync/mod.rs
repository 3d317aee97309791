//! Sync between devices through a shared folder (the *target*): a USB stick, a
//! folder on a station laptop, a network share. Each device writes its own
//! change-log entries as change-set files into its own sub-folder
//! (`<target>/<device id>/<first seq>.csv`, format in `schemas/changeset.json`,
//! see [`changeset`]) and applies the files of every other device.
//!
//! One run ([`sync_once`]):
//! 1. checks that the target is reachable and writable;
//! 2. checks this device's own folder: a file this database did not write
//!    means another database uses this device's identity (a copy, a backup
//!    restored onto a second tablet) and sync is refused
//!    ([`Error::DeviceClash`]); a missing or damaged copy of a file it wrote
//!    is written again, byte for byte;
//! 3. writes the entries made since the last change-set (atomically: temp
//!    name, flush, rename, folder flush);
//! 4. reads every other device's files, verifies each whole file, and
//!    applies each one that is ready in one transaction (`apply`): in
//!    sequence order per device, after the change-sets its author had seen.
//!    A bad file is skipped with a message naming it and read again on the
//!    next run; a duplicate is recognised by device, sequence range and hash.
//!
//! Merging follows per-field last-writer-wins by hybrid logical clock (Kulkarni
//! et al. 2014, "Logical Physical Clocks"), with conflicts kept for review;
//! the rules are in `store::merge` and conflicts are listed and
//! settled with [`conflicts`] and [`resolve_conflict`].
//!
//! The target a database syncs with on its own is a local setting
//! ([`saved_target`], [`save_target`]); `fieldcage_ops::auto_sync` (the operation set) watches
//! it and syncs when it is reachable and something is new.
//!
//! Never keep the live database in the target or any cloud-synced folder;
//! only change-set files go there.

mod apply;
pub mod changeset;
mod conflicts;
mod target;

use std::collections::{BTreeMap, HashMap};
use std::fs;
use std::path::{Path, PathBuf};

use rusqlite::{Connection, OptionalExtension, params};
use uuid::Uuid;

pub use conflicts::{
    Conflict, ConflictChoice, ConflictKind, Version, conflicts, describe_record, device_label,
    resolve_conflict,
};
pub use target::{check_target, save_target, saved_target};

use crate::disk::{Disk, OsDisk};
use crate::store::{Store, log, sync_state};
use crate::tables;
use crate::{Error, Result};
use changeset::{Change, ChangeSet};

/// Default limit for a remote clock ahead of this device's clock before the
/// change-set is flagged: one day.
pub const DEFAULT_CLOCK_AHEAD_LIMIT_MILLIS: i64 = 24 * 60 * 60 * 1000;

/// Default largest number of entries in one change-set file; a bigger batch
/// is cut between transactions into several files.
pub const DEFAULT_MAX_ROWS_PER_FILE: usize = 100_000;

/// Settings of a sync run.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SyncOptions {
    /// A remote timestamp more than this far ahead of this device's clock is
    /// accepted but flagged; so is this device's clock when it is more than
    /// this far behind the newest timestamp it holds.
    pub clock_ahead_limit_millis: i64,
    /// Largest number of entries in one change-set file.
    pub max_rows_per_file: usize,
}

impl Default for SyncOptions {
    fn default() -> Self {
        SyncOptions {
            clock_ahead_limit_millis: DEFAULT_CLOCK_AHEAD_LIMIT_MILLIS,
            max_rows_per_file: DEFAULT_MAX_ROWS_PER_FILE,
        }
    }
}

/// A change-set file this device wrote in a run.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct WrittenFile {
    /// Where.
    pub file: PathBuf,
    /// First sequence number.
    pub first_seq: i64,
    /// Last sequence number.
    pub last_seq: i64,
    /// The file had been written before and was missing or damaged.
    pub rewritten: bool,
}

/// A change-set of another device applied in a run.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct AppliedFile {
    /// Where it was read.
    pub file: PathBuf,
    /// The device that made it.
    pub device_id: String,
    /// That device's name.
    pub device_name: String,
    /// First sequence number.
    pub first_seq: i64,
    /// Last sequence number.
    pub last_seq: i64,
}

/// Why a file was not applied in a run.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum SkipKind {
    /// The file is damaged, foreign or contradicts what was applied; it is
    /// read again on the next run.
    Rejected,
    /// The same change-set was applied from another file.
    Duplicate,
    /// Valid, but it needs other change-sets first (a gap in its device's
    /// sequence, or changes its author had seen); it is applied once they
    /// arrive.
    Waiting,
}

/// A file not applied in a run, with the reason.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SkippedFile {
    /// The file.
    pub file: PathBuf,
    /// What kind of skip.
    pub kind: SkipKind,
    /// Why, in words.
    pub reason: String,
}

/// Which way a clock looked wrong.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum AnomalyKind {
    /// Another device's timestamps were far ahead of this device's clock.
    Ahead,
    /// This device's clock was far behind the newest timestamp it holds.
    Behind,
}

/// A clock that looked wrong. Changes are accepted anyway (the hybrid
/// logical clock keeps their order); the anomaly is shown so that someone
/// checks the tablet's date.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ClockAnomaly {
    /// The device whose clock looked wrong.
    pub device_id: String,
    /// Which way.
    pub kind: AnomalyKind,
    /// The timestamp (hybrid logical clock, milliseconds part) concerned.
    pub clock_millis: i64,
    /// This device's clock when it was noticed.
    pub local_millis: i64,
    /// The change-set that showed it, if any.
    pub file: Option<String>,
    /// When it was noticed (this device's clock, RFC 3339).
    pub noticed_at: String,
}

impl ClockAnomaly {
    /// A sentence for people.
    pub fn describe(&self) -> String {
        let days = (self.clock_millis - self.local_millis) as f64 / 86_400_000.0;
        match self.kind {
            AnomalyKind::Ahead => format!(
                "device {}'s clock is {days:.1} days ahead of this device's{}; its changes were \
                 accepted — check the date on both tablets",
                self.device_id,
                self.file
                    .as_deref()
                    .map(|f| format!(" (change-set {f})"))
                    .unwrap_or_default()
            ),
            AnomalyKind::Behind => format!(
                "this device's clock is {days:.1} days behind the newest change it holds (its own \
                 or another tablet's); changes are still ordered correctly — check this tablet's \
                 date, and if it is right, the clock of the tablet flagged as ahead"
            ),
        }
    }
}

/// What one sync run did.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SyncReport {
    /// The target folder.
    pub target: PathBuf,
    /// Change-sets written (new, or copies written again).
    pub written: Vec<WrittenFile>,
    /// Change-sets of other devices applied.
    pub applied: Vec<AppliedFile>,
    /// Files not applied, with reasons.
    pub skipped: Vec<SkippedFile>,
    /// Things that did not stop the run (a folder flush refused, a stray file).
    pub warnings: Vec<String>,
    /// Clock anomalies noticed in this run.
    pub anomalies: Vec<ClockAnomaly>,
    /// Conflicts open after the run (see [`conflicts`]).
    pub open_conflicts: usize,
    /// This device's entries not yet in any change-set after the run.
    pub pending_changes: i64,
    /// When the run finished (this device's clock, RFC 3339): the last
    /// successful sync.
    pub finished_at: String,
}

impl std::fmt::Display for SyncReport {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        writeln!(
            f,
            "sync with {} finished at {}",
            self.target.display(),
            self.finished_at
        )?;
        for w in &self.written {
            writeln!(
                f,
                "  wrote {} (changes {}-{}){}",
                w.file.display(),
                w.first_seq,
                w.last_seq,
                if w.rewritten {
                    ", a lost or damaged copy written again"
                } else {
                    ""
                }
            )?;
        }
        for a in &self.applied {
            writeln!(
                f,
                "  applied {} from {} (changes {}-{})",
                a.file.display(),
                a.device_name,
                a.first_seq,
                a.last_seq
            )?;
        }
        for s in &self.skipped {
            let kind = match s.kind {
                SkipKind::Rejected => "skipped",
                SkipKind::Duplicate => "duplicate",
                SkipKind::Waiting => "waiting",
            };
            writeln!(f, "  {kind}: {}: {}", s.file.display(), s.reason)?;
        }
        for w in &self.warnings {
            writeln!(f, "  warning: {w}")?;
        }
        for a in &self.anomalies {
            writeln!(f, "  clock: {}", a.describe())?;
        }
        writeln!(
            f,
            "  {} written, {} applied, {} not applied; {} conflict(s) open; {} change(s) not yet written",
            self.written.len(),
            self.applied.len(),
            self.skipped.len(),
            self.open_conflicts,
            self.pending_changes
        )
    }
}

/// Whether a target can be used now.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum TargetStatus {
    /// It exists, is a folder and accepts a new file.
    Ready,
    /// It cannot be used; the reason says why.
    Unavailable(String),
}

/// Check that `target` exists, is a folder and is writable (by making and
/// removing a small probe file). This is what "back online" means.
pub fn target_is_reachable(target: &Path) -> TargetStatus {
    probe_target(target, &OsDisk)
}

/// [`target_is_reachable`], writing the probe through `disk`.
fn probe_target(target: &Path, disk: &dyn Disk) -> TargetStatus {
    match fs::metadata(target) {
        Err(e) => return TargetStatus::Unavailable(format!("cannot be reached ({e})")),
        Ok(m) if !m.is_dir() => return TargetStatus::Unavailable("is not a folder".into()),
        Ok(_) => {}
    }
    let probe = target.join(format!(".fieldcage-probe-{}", Uuid::now_v7().simple()));
    let written = disk
        .create(&probe)
        .and_then(|mut file| disk.write(&mut file, b"probe"));
    if written.is_ok() || probe.exists() {
        let _ = disk.remove_file(&probe);
    }
    match written {
        Ok(()) => TargetStatus::Ready,
        Err(e) => TargetStatus::Unavailable(format!("is not writable ({e})")),
    }
}

/// This device's change-log entries not yet written into any change-set.
pub fn pending_changes(store: &Store) -> Result<i64> {
    let conn = store.conn();
    let written = last_written(conn)?;
    log::count(conn, Some(store.device_id()), written)
}

/// A finished sync run.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SyncRun {
    /// When it finished (RFC 3339).
    pub finished_at: String,
    /// Against which target.
    pub target: String,
    /// Change-sets written.
    pub written: i64,
    /// Change-sets applied.
    pub applied: i64,
    /// Files not applied.
    pub skipped: i64,
}

/// The last sync run that finished, if any.
pub fn last_success(store: &Store) -> Result<Option<SyncRun>> {
    Ok(store
        .conn()
        .query_row(
            "SELECT finished_at, target, written, applied, skipped FROM sync_run \
             WHERE finished = 1 ORDER BY id DESC LIMIT 1",
            [],
            |r| {
                Ok(SyncRun {
                    finished_at: r.get(0)?,
                    target: r.get(1)?,
                    written: r.get(2)?,
                    applied: r.get(3)?,
                    skipped: r.get(4)?,
                })
            },
        )
        .optional()?)
}

/// Every clock anomaly noticed on this device, oldest first.
pub fn clock_anomalies(store: &Store) -> Result<Vec<ClockAnomaly>> {
    let mut stmt = store.conn().prepare(
        "SELECT device_id, kind, hlc, local_millis, file_name, noticed_at FROM sync_clock_anomaly ORDER BY id",
    )?;
    let rows = stmt.query_map([], |r| {
        let kind: String = r.get(1)?;
        Ok(ClockAnomaly {
            device_id: r.get(0)?,
            kind: if kind == "ahead" {
                AnomalyKind::Ahead
            } else {
                AnomalyKind::Behind
            },
            clock_millis: crate::store::Hlc(r.get(2)?).millis(),
            local_millis: r.get(3)?,
            file: r.get(4)?,
            noticed_at: r.get(5)?,
        })
    })?;
    Ok(rows.collect::<rusqlite::Result<_>>()?)
}

/// What happened to a change-set offered to [`apply_changeset`].
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum ApplyResult {
    /// Applied, in one transaction; the anomaly is set when the change-set's
    /// clock was far ahead of this device's.
    Applied {
        /// A remote clock far ahead, if it was.
        anomaly: Option<ClockAnomaly>,
    },
    /// The same change-set was applied before (from the source named).
    AlreadyApplied {
        /// Where it was applied from.
        source: String,
    },
    /// Not yet: it needs other change-sets first (the reason names them).
    Waiting(String),
}

/// Apply one verified change-set (from a folder, or later from another
/// transport) if it is ready: next in its device's sequence, and after every
/// change-set its author had applied. All of it in one transaction, or
/// nothing. `source` names where it came from in messages and records.
/// A change-set that contradicts what was applied before is an
/// [`Error::ChangeSet`].
pub fn apply_changeset(
    store: &mut Store,
    cs: &ChangeSet,
    source: &str,
    size_bytes: u64,
    options: &SyncOptions,
) -> Result<ApplyResult> {
    Ok(
        match apply::apply(store, cs, source, size_bytes, options)? {
            apply::Outcome::Applied { ahead } => ApplyResult::Applied {
                anomaly: ahead.map(|a| clock_ahead(cs, source, &a)),
            },
            apply::Outcome::AlreadyApplied { file } => ApplyResult::AlreadyApplied { source: file },
            apply::Outcome::Waiting(reason) => ApplyResult::Waiting(reason),
        },
    )
}

/// The lock one sync run holds on its database: an OS file lock on
/// `<database>.sync-lock` beside it, so that two runs in two processes never
/// write and record change-sets at once (which used to leave the sync state
/// claiming that another database used this device's identity). Released
/// when dropped, and by the system when the process ends.
#[derive(Debug)]
pub struct SyncLock {
    _file: fs::File,
}

impl SyncLock {
    /// How long a second run waits for the first to finish.
    pub const WAIT: std::time::Duration = std::time::Duration::from_secs(10);

    /// Take the lock of the database at `db`, waiting up to [`Self::WAIT`].
    pub fn take(db: &Path) -> Result<SyncLock> {
        let mut name = db.as_os_str().to_owned();
        name.push(".sync-lock");
        let path = PathBuf::from(name);
        let file = fs::OpenOptions::new()
            .create(true)
            .truncate(false)
            .write(true)
            .open(&path)
            .map_err(|e| Error::io(&path, e))?;
        let until = std::time::Instant::now() + Self::WAIT;
        loop {
            match file.try_lock() {
                Ok(()) => return Ok(SyncLock { _file: file }),
                Err(fs::TryLockError::WouldBlock) if std::time::Instant::now() < until => {
                    std::thread::sleep(std::time::Duration::from_millis(50));
                }
                Err(fs::TryLockError::WouldBlock) => {
                    return Err(Error::State(format!(
                        "a sync of {} is already running (the automatic sync, another \
                         `fieldcage sync` or the tablet app); try again when it has finished",
                        db.display()
                    )));
                }
                Err(fs::TryLockError::Error(e)) => return Err(Error::io(&path, e)),
            }
        }
    }
}

/// One sync run with the default options.
pub fn sync_once(store: &mut Store, target: &Path) -> Result<SyncReport> {
    sync_with(store, target, &SyncOptions::default())
}

/// One sync run: write this device's new changes into `target`, then apply
/// every other device's change-sets found there.
pub fn sync_with(store: &mut Store, target: &Path, options: &SyncOptions) -> Result<SyncReport> {
    sync_with_disk(store, target, options, &OsDisk)
}

/// [`sync_with`], writing every file through `disk` (tests pass one that
/// fails a step). A failed write ends the run with an error naming the file;
/// what was written before it is recorded, what was not is written by the
/// next run.
pub fn sync_with_disk(
    store: &mut Store,
    target: &Path,
    options: &SyncOptions,
    disk: &dyn Disk,
) -> Result<SyncReport> {
    // One sync run at a time on a database, whoever starts it (the server's
    // automatic sync, `fieldcage sync`, the tablet app): held to the end.
    let _lock = SyncLock::take(store.path())?;
    let started = timestamp(store.now_millis());
    if let TargetStatus::Unavailable(reason) = probe_target(target, disk) {
        return Err(Error::TargetUnavailable {
            target: target.to_path_buf(),
            reason,
        });
    }
    let mut report = SyncReport {
        target: target.to_path_buf(),
        written: Vec::new(),
        applied: Vec::new(),
        skipped: Vec::new(),
        warnings: Vec::new(),
        anomalies: Vec::new(),
        open_conflicts: 0,
        pending_changes: 0,
        finished_at: String::new(),
    };
    let result = run(store, target, options, disk, &mut report);
    let finished = timestamp(store.now_millis());
    let recorded = sync_state::record_run(
        store.conn(),
        &sync_state::Run {
            started_at: &started,
            finished_at: &finished,
            target: &target.display().to_string(),
            written: report.written.len() as i64,
            applied: report.applied.len() as i64,
            skipped: report.skipped.len() as i64,
            finished: result.is_ok(),
        },
    );
    // A failed run: its own error is what the crew must see and act on, so
    // it is returned even when the run could not be recorded either (only
    // finished runs are ever shown, so that record is the lesser loss).
    result?;
    // A run that did its work but is not recorded is reported: the last
    // sync shown would otherwise stay the one before, as if this one had not
    // happened.
    recorded.map_err(|e| Error::RunNotRecorded(Box::new(e)))?;
    report.open_conflicts = open_conflict_count(store)?;
    report.pending_changes = pending_changes(store)?;
    report.finished_at = finished;
    Ok(report)
}

fn run(
    store: &mut Store,
    target: &Path,
    options: &SyncOptions,
    disk: &dyn Disk,
    report: &mut SyncReport,
) -> Result<()> {
    write_own(store, target, options, disk, report)?;
    apply_others(store, target, options, report)?;
    let setups: i64 = store.conn().query_row(
        "SELECT count(*) FROM sync_hidden WHERE table_name = 'experiment'",
        [],
        |r| r.get(0),
    )?;
    if setups > 0 {
        report.warnings.push(
            "tablets in this target were set up differently (another definition file or another \
             seed): their experiments, cages and taxa are listed as duplicates. Set every tablet \
             up from the same file with the same seed, or start a tablet empty and let sync \
             bring the setup."
                .to_owned(),
        );
    }
    notice_local_clock(store, options, report)
}

/// RFC 3339 text of a millisecond timestamp.
pub(crate) fn timestamp(millis: i64) -> String {
    chrono::DateTime::from_timestamp_millis(millis)
        .unwrap_or_default()
        .to_rfc3339_opts(chrono::SecondsFormat::Millis, true)
}

/// How many conflicts [`conflicts`] would list.
pub fn open_conflict_count(store: &Store) -> Result<usize> {
    let conn = store.conn();
    let n: i64 = conn.query_row(
        "SELECT (SELECT count(*) FROM sync_conflict) + (SELECT count(*) FROM sync_hidden)",
        [],
        |r| r.get(0),
    )?;
    Ok(n as usize + conflicts::orphan_rows(conn)?.len())
}

fn last_written(conn: &Connection) -> Result<i64> {
    Ok(conn.query_row(
        "SELECT coalesce(max(last_seq), 0) FROM sync_written",
        [],
        |r| r.get(0),
    )?)
}

/// A change-set file this device wrote, as recorded.
#[derive(Debug, Clone)]
struct Written {
    first: i64,
    last: i64,
    name: String,
    sha256: String,
    size: u64,
}

fn written_files(conn: &Connection) -> Result<Vec<Written>> {
    let mut stmt = conn.prepare(
        "SELECT first_seq, last_seq, device_name, sha256, size_bytes FROM sync_written ORDER BY first_seq",
    )?;
    let rows = stmt.query_map([], |r| {
        Ok(Written {
            first: r.get(0)?,
            last: r.get(1)?,
            name: r.get(2)?,
            sha256: r.get(3)?,
            size: r.get::<_, i64>(4)? as u64,
        })
    })?;
    Ok(rows.collect::<rusqlite::Result<_>>()?)
}

/// This device's entries `first..=last` from the change log.
fn own_changes(conn: &Connection, me: &str, first: i64, last: i64) -> Result<Vec<Change>> {
    log::device_entries(conn, me, first, last)?
        .into_iter()
        .map(|c| {
            let unknown = || {
                Error::Invariant(format!(
                    "change log entry {me}/{}: {}.{} is not a column of this build's tables",
                    c.entry.seq,
                    c.table,
                    c.entry.field.as_deref().unwrap_or_default()
                ))
            };
            let schema = tables::get(&c.table).ok_or_else(unknown)?;
            let field = match &c.entry.field {
                Some(f) => Some(schema.field(f).ok_or_else(unknown)?.name.as_str()),
                None => None,
            };
            Ok(Change {
                seq: c.entry.seq,
                hlc: c.entry.hlc,
                table: schema.name.as_str(),
                row_id: c.row_id,
                op: c.entry.op,
                field,
                old_value: c.entry.old_value,
                new_value: c.entry.new_value,
            })
        })
        .collect()
}

/// What this device had applied of other devices when it made entry `seq`.
fn own_knowledge(conn: &Connection, me: &str, seq: i64) -> Result<BTreeMap<String, i64>> {
    let mut stmt = conn.prepare_cached(
        "SELECT other_device, upto_seq FROM sync_knowledge WHERE device_id = ?1 AND from_seq = \
         (SELECT max(from_seq) FROM sync_knowledge WHERE device_id = ?1 AND from_seq <= ?2)",
    )?;
    let rows = stmt.query_map(params![me, seq], |r| Ok((r.get(0)?, r.get(1)?)))?;
    Ok(rows.collect::<rusqlite::Result<_>>()?)
}

/// The bytes of this device's change-set `first..=last` as written with `name`.
fn own_changeset_bytes(
    conn: &Connection,
    me: &str,
    name: &str,
    first: i64,
    last: i64,
) -> Result<(Vec<u8>, String)> {
    let changes = own_changes(conn, me, first, last)?;
    if changes.len() as i64 != last - first + 1 {
        return Err(Error::Invariant(format!(
            "this database does not hold its own changes {first}-{last}"
        )));
    }
    let seen = own_knowledge(conn, me, first)?;
    changeset::encode_for(experiment_tag(conn)?.as_ref(), me, name, &seen, &changes)
}

/// [`own_changeset_bytes`] as the file was first written: with the
/// experiment of this database, or without one (written before this
/// database held an experiment, or before files carried it).
fn own_changeset_bytes_as(
    conn: &Connection,
    me: &str,
    name: &str,
    first: i64,
    last: i64,
    sha256: &str,
) -> Result<(Vec<u8>, String)> {
    let tagged = own_changeset_bytes(conn, me, name, first, last)?;
    if tagged.1 == sha256 {
        return Ok(tagged);
    }
    let changes = own_changes(conn, me, first, last)?;
    changeset::encode(me, name, &own_knowledge(conn, me, first)?, &changes)
}

/// The experiment this database holds, as a change-set's header names it.
fn experiment_tag(conn: &Connection) -> Result<Option<changeset::Experiment>> {
    Ok(
        crate::store::first::<crate::model::Experiment>(conn)?.map(|e| changeset::Experiment {
            id: e.id.to_string(),
            code: e.code,
            seed: e.randomisation_seed,
        }),
    )
}

fn clash(path: &Path, what: &str) -> Error {
    Error::DeviceClash(format!(
        "{}: {what}. Another database is using this device's identity — most likely a copy of \
         this database, or a backup restored onto a second tablet. Sync is refused so that \
         neither database overwrites or mixes up the other's changes. Use only one of the two \
         databases with this target (copies for safekeeping are made with the backup command and \
         never synced).",
        path.display()
    ))
}

/// Does the change-set at `path` read whole with the content hash `sha256`?
fn file_holds(path: &Path, sha256: &str) -> bool {
    changeset::read_bounded(path)
        .ok()
        .and_then(|bytes| changeset::content_hash(&bytes).ok())
        .is_some_and(|sha| sha == sha256)
}

/// Step 2 and 3: check this device's folder, then write its new changes.
fn write_own(
    store: &mut Store,
    target: &Path,
    options: &SyncOptions,
    disk: &dyn Disk,
    report: &mut SyncReport,
) -> Result<()> {
    let me = store.device_id().to_owned();
    let dir = target.join(&me);
    fs::create_dir_all(&dir).map_err(|e| Error::io(&dir, e))?;
    let mut recorded = written_files(store.conn())?;
    let mut on_disk: BTreeMap<String, u64> = BTreeMap::new();
    for entry in fs::read_dir(&dir).map_err(|e| Error::io(&dir, e))? {
        let entry = entry.map_err(|e| Error::io(&dir, e))?;
        let name = entry.file_name().to_string_lossy().into_owned();
        let meta = entry.metadata().map_err(|e| Error::io(entry.path(), e))?;
        if meta.is_file() && !name.starts_with('.') && name.ends_with(".csv") {
            on_disk.insert(name, meta.len());
        }
    }
    // Copies of files written before: there, unchanged, or written again.
    for w in &recorded {
        let name = changeset::file_name(w.first);
        let path = dir.join(&name);
        let replace = match on_disk.remove(&name) {
            // Compare the content, not the size: a damaged copy of the same
            // size used to be left in place, refused by every receiver.
            Some(size) if size == w.size && file_holds(&path, &w.sha256) => continue,
            Some(_) => {
                if let Ok(cs) = changeset::read(&path)
                    && cs.device_id == me
                {
                    return Err(clash(
                        &path,
                        "holds changes of this device that differ from the ones this database wrote",
                    ));
                }
                report
                    .warnings
                    .push(format!("{}: damaged; written again", path.display()));
                true
            }
            None => false,
        };
        let (bytes, sha) =
            own_changeset_bytes_as(store.conn(), &me, &w.name, w.first, w.last, &w.sha256)?;
        if sha != w.sha256 {
            return Err(Error::Invariant(format!(
                "{}: cannot be written again exactly (its content changed in this database)",
                path.display()
            )));
        }
        if let Some(warning) = changeset::write_atomically(disk, &dir, &name, &bytes, replace)? {
            report.warnings.push(warning);
        }
        report.written.push(WrittenFile {
            file: path,
            first_seq: w.first,
            last_seq: w.last,
            rewritten: true,
        });
    }
    // Files this database has no record of.
    let (next_seq, name): (i64, String) = store.conn().query_row(
        "SELECT next_seq, name FROM local_device WHERE singleton = 1",
        [],
        |r| Ok((r.get(0)?, r.get(1)?)),
    )?;
    let mut unknown: Vec<(i64, PathBuf, ChangeSet)> = Vec::new();
    let mut damaged: Vec<String> = Vec::new();
    for file in on_disk.keys() {
        let path = dir.join(file);
        match changeset::read(&path) {
            Ok(cs) if cs.device_id == me => {
                let copy = recorded.iter().any(|w| {
                    w.first == cs.first_seq && w.last == cs.last_seq && w.sha256 == cs.sha256
                });
                if !copy {
                    unknown.push((cs.first_seq, path, cs));
                }
            }
            Ok(cs) => report.warnings.push(format!(
                "{}: holds device {}'s changes but lies in this device's folder; ignored",
                path.display(),
                cs.device_id
            )),
            Err(e) => {
                report.warnings.push(format!(
                    "{e}; it lies in this device's folder and is ignored"
                ));
                damaged.push(file.clone());
            }
        }
    }
    unknown.sort_by_key(|(first, _, _)| *first);
    for (first, path, cs) in unknown {
        // A file written just before a crash, before it was recorded: the
        // same bytes this database would write now.
        let expected = last_written(store.conn())? + 1;
        let ours = first == expected
            && cs.last_seq < next_seq
            && own_changeset_bytes_as(
                store.conn(),
                &me,
                &cs.device_name,
                first,
                cs.last_seq,
                &cs.sha256,
            )
            .map(|(_, sha)| sha == cs.sha256)
            .unwrap_or(false);
        if !ours {
            return Err(clash(
                &path,
                &format!(
                    "holds this device's changes {}-{}, which this database did not write",
                    cs.first_seq, cs.last_seq
                ),
            ));
        }
        let size = fs::metadata(&path).map_err(|e| Error::io(&path, e))?.len();
        sync_state::record_written(
            store.conn(),
            &sync_state::Written {
                first_seq: first,
                last_seq: cs.last_seq,
                device_name: &cs.device_name,
                sha256: &cs.sha256,
                size_bytes: size,
                written_at: &timestamp(store.now_millis()),
            },
        )?;
        recorded.push(Written {
            first,
            last: cs.last_seq,
            name: cs.device_name.clone(),
            sha256: cs.sha256.clone(),
            size,
        });
    }
    // New changes, each file naming the experiment they belong to.
    let tag = experiment_tag(store.conn())?;
    let from = last_written(store.conn())? + 1;
    let to = next_seq - 1;
    if from > to {
        return Ok(());
    }
    let mut cuts: Vec<i64> = {
        let mut stmt = store.conn().prepare(
            "SELECT DISTINCT from_seq FROM sync_knowledge WHERE device_id = ?1 AND from_seq > ?2 AND from_seq <= ?3 ORDER BY from_seq",
        )?;
        let rows = stmt.query_map(params![me, from, to], |r| r.get(0))?;
        rows.collect::<rusqlite::Result<_>>()?
    };
    cuts.push(to + 1);
    let mut start = from;
    for cut in cuts {
        let end = cut - 1;
        if end < start {
            continue;
        }
        let changes = own_changes(store.conn(), &me, start, end)?;
        let seen = own_knowledge(store.conn(), &me, start)?;
        for piece in split_between_transactions(&changes, options.max_rows_per_file) {
            let (Some(first), Some(last)) = (piece.first(), piece.last()) else {
                continue;
            };
            let (bytes, sha) = changeset::encode_for(tag.as_ref(), &me, &name, &seen, piece)?;
            let file = changeset::file_name(first.seq);
            let replace = damaged.contains(&file);
            if let Some(warning) = changeset::write_atomically(disk, &dir, &file, &bytes, replace)?
            {
                report.warnings.push(warning);
            }
            sync_state::record_written(
                store.conn(),
                &sync_state::Written {
                    first_seq: first.seq,
                    last_seq: last.seq,
                    device_name: &name,
                    sha256: &sha,
                    size_bytes: bytes.len() as u64,
                    written_at: &timestamp(store.now_millis()),
                },
            )?;
            report.written.push(WrittenFile {
                file: dir.join(file),
                first_seq: first.seq,
                last_seq: last.seq,
                rewritten: false,
            });
        }
        start = cut;
    }
    Ok(())
}

/// Cut entries into pieces of at most `max` (more only when one transaction
/// is larger), never between two entries of one transaction (they share a
/// clock value): a change-set holds whole transactions.
fn split_between_transactions(changes: &[Change], max: usize) -> Vec<&[Change]> {
    let mut pieces = Vec::new();
    let mut start = 0;
    let max = max.max(1);
    for i in 1..changes.len() {
        if i - start >= max && changes[i].hlc != changes[i - 1].hlc {
            pieces.push(&changes[start..i]);
            start = i;
        }
    }
    if start < changes.len() {
        pieces.push(&changes[start..]);
    }
    pieces
}

/// A change-set found in another device's folder.
#[derive(Debug)]
struct Found {
    path: PathBuf,
    /// `<device folder>/<file name>`, as recorded once applied.
    label: String,
    size: u64,
    canonical: bool,
    cs: ChangeSet,
}

/// Step 4: read and apply every other device's change-sets.
fn apply_others(
    store: &mut Store,
    target: &Path,
    options: &SyncOptions,
    report: &mut SyncReport,
) -> Result<()> {
    let me = store.device_id().to_owned();
    let applied_sizes: HashMap<(String, i64), u64> = {
        let mut stmt = store
            .conn()
            .prepare("SELECT device_id, first_seq, size_bytes FROM sync_applied")?;
        let rows = stmt.query_map([], |r| {
            Ok(((r.get(0)?, r.get(1)?), r.get::<_, i64>(2)? as u64))
        })?;
        rows.collect::<rusqlite::Result<_>>()?
    };
    let mut found: Vec<Found> = Vec::new();
    let mut to_read = Vec::new();
    let mut folders: Vec<(String, PathBuf)> = Vec::new();
    for entry in fs::read_dir(target).map_err(|e| Error::io(target, e))? {
        let entry = entry.map_err(|e| Error::io(target, e))?;
        let name = entry.file_name().to_string_lossy().into_owned();
        if name == me || name.starts_with('.') || Uuid::parse_str(&name).is_err() {
            continue;
        }
        if entry.file_type().map(|t| t.is_dir()).unwrap_or(false) {
            folders.push((name, entry.path()));
        }
    }
    folders.sort();
    for (device, folder) in folders {
        let mut files: Vec<(String, PathBuf, u64)> = Vec::new();
        for entry in fs::read_dir(&folder).map_err(|e| Error::io(&folder, e))? {
            let entry = entry.map_err(|e| Error::io(&folder, e))?;
            let name = entry.file_name().to_string_lossy().into_owned();
            let Ok(meta) = entry.metadata() else {
                continue;
            };
            if meta.is_file()
                && !name.starts_with('.')
                && name.to_ascii_lowercase().ends_with(".csv")
            {
                files.push((name, entry.path(), meta.len()));
            }
        }
        files.sort();
        for (name, path, size) in files {
            let first = changeset::seq_of_file_name(&name);
            if let Some(first) = first
                && applied_sizes.get(&(device.clone(), first)) == Some(&size)
            {
                continue; // applied before from this very file
            }
            to_read.push((device.clone(), name, path, size, first));
        }
    }
    let paths: Vec<&Path> = to_read.iter().map(|(_, _, p, _, _)| p.as_path()).collect();
    for ((device, name, path, size, first), read) in to_read.iter().zip(read_all(&paths)) {
        match read {
            Ok(cs) if cs.device_id != *device => report.skipped.push(SkippedFile {
                file: path.clone(),
                kind: SkipKind::Rejected,
                reason: format!(
                    "holds device {}'s changes but lies in device {device}'s folder",
                    cs.device_id
                ),
            }),
            Ok(cs) => found.push(Found {
                label: format!("{device}/{name}"),
                canonical: *first == Some(cs.first_seq),
                path: path.clone(),
                size: *size,
                cs,
            }),
            Err(e) => report.skipped.push(SkippedFile {
                file: path.clone(),
                kind: SkipKind::Rejected,
                reason: strip_path(&e),
            }),
        }
    }
    // Copies of change-sets applied before, under another name.
    let mut fresh = Vec::new();
    for f in found {
        match applied_file(store.conn(), &f.cs)? {
            Some(file) if file != f.label => report.skipped.push(SkippedFile {
                reason: format!("same change-set as {file}, applied before; skipped"),
                file: f.path,
                kind: SkipKind::Duplicate,
            }),
            _ => fresh.push(f),
        }
    }
    // Canonical names first, so that a copy under another name is the one
    // reported as the duplicate.
    fresh.sort_by(|a, b| {
        (&a.cs.device_id, a.cs.first_seq, !a.canonical, &a.label).cmp(&(
            &b.cs.device_id,
            b.cs.first_seq,
            !b.canonical,
            &b.label,
        ))
    });
    let mut open: Vec<Found> = Vec::new();
    for f in fresh {
        if let Some(same) = open.iter().find(|o| {
            o.cs.device_id == f.cs.device_id
                && o.cs.first_seq == f.cs.first_seq
                && o.cs.last_seq == f.cs.last_seq
                && o.cs.sha256 == f.cs.sha256
        }) {
            report.skipped.push(SkippedFile {
                reason: format!("same change-set as {}; skipped", same.path.display()),
                file: f.path,
                kind: SkipKind::Duplicate,
            });
            continue;
        }
        open.push(f);
    }
    // Two different change-sets claiming the same device and seq: neither is
    // applied, since neither can be trusted over the other.
    let clashing: Vec<usize> = (0..open.len())
        .filter(|&i| {
            open.iter().enumerate().any(|(j, o)| {
                j != i
                    && o.cs.device_id == open[i].cs.device_id
                    && o.cs.first_seq <= open[i].cs.last_seq
                    && open[i].cs.first_seq <= o.cs.last_seq
            })
        })
        .collect();
    for i in clashing.iter().rev() {
        let f = open.remove(*i);
        report.skipped.push(SkippedFile {
            reason: format!(
                "another file in the target holds device {}'s changes {}-{} with other content; \
                 two databases are using that device's identity (a copy or a restored backup), \
                 so neither file is applied",
                f.cs.device_id, f.cs.first_seq, f.cs.last_seq
            ),
            file: f.path,
            kind: SkipKind::Rejected,
        });
    }
    let mut waiting: Vec<(Found, String)> = open.into_iter().map(|f| (f, String::new())).collect();
    loop {
        let mut progress = false;
        let mut still = Vec::new();
        let mut queue: std::collections::VecDeque<Found> =
            waiting.into_iter().map(|(f, _)| f).collect();
        while !queue.is_empty() {
            let (applied, committed) = {
                let mut batch = apply::Batch::begin(store)?;
                let mut applied = Vec::new();
                let mut failed = false;
                while let Some(f) = queue.pop_front() {
                    match batch.offer(&f.cs, &f.label, f.size, options) {
                        Ok(apply::Outcome::Applied { ahead }) => {
                            let anomaly = ahead.map(|a| clock_ahead(&f.cs, &f.label, &a));
                            applied.push((f, anomaly));
                            if batch.changes() >= BATCH_CHANGES {
                                break;
                            }
                        }
                        Ok(apply::Outcome::AlreadyApplied { file }) => {
                            if file != f.label {
                                report.skipped.push(SkippedFile {
                                    file: f.path,
                                    kind: SkipKind::Duplicate,
                                    reason: format!(
                                        "same change-set as {file}, applied before; skipped"
                                    ),
                                });
                            }
                        }
                        Ok(apply::Outcome::Waiting(reason)) => still.push((f, reason)),
                        Err(_) => {
                            // Dropped below (rolled back); each change-set of
                            // the batch is applied again on its own.
                            applied.push((f, None));
                            failed = true;
                            break;
                        }
                    }
                }
                (applied, !failed && batch.commit().is_ok())
            };
            progress |= report_batch(store, applied, committed, options, report, &mut still)?;
        }
        waiting = still;
        if !progress || waiting.is_empty() {
            break;
        }
    }
    for (f, reason) in waiting {
        report.skipped.push(SkippedFile {
            file: f.path,
            kind: SkipKind::Waiting,
            reason,
        });
    }
    Ok(())
}

/// Read and verify change-set files, several at once (one per core, at
/// most four): results in the order of `paths`. Verifying is hashing and
/// parsing, which a sync would otherwise do on one core while the others
/// wait.
fn read_all(paths: &[&Path]) -> Vec<Result<ChangeSet>> {
    let workers = std::thread::available_parallelism()
        .map_or(1, std::num::NonZeroUsize::get)
        .min(4)
        .min(paths.len());
    if workers <= 1 {
        return paths.iter().map(|p| changeset::read(p)).collect();
    }
    // Worker w reads files w, w + workers, …; the results are put back in order.
    let mut read: Vec<(usize, Result<ChangeSet>)> = std::thread::scope(|scope| {
        let handles: Vec<_> = (0..workers)
            .map(|w| {
                scope.spawn(move || {
                    paths
                        .iter()
                        .enumerate()
                        .skip(w)
                        .step_by(workers)
                        .map(|(i, p)| (i, changeset::read(p)))
                        .collect::<Vec<_>>()
                })
            })
            .collect();
        handles
            .into_iter()
            .flat_map(|h| h.join().unwrap_or_else(|e| std::panic::resume_unwind(e)))
            .collect()
    });
    read.sort_by_key(|(i, _)| *i);
    read.into_iter().map(|(_, r)| r).collect()
}

/// Entries applied in one transaction before it is committed and the next
/// one begins: large enough that a season's worth of change-sets needs few
/// commits, small enough to bound the write-ahead log and the work a
/// failed commit sends back.
const BATCH_CHANGES: usize = 250_000;

/// Report what a batch applied once it is committed. When it failed (a
/// change-set could not be applied, or a reference that does not hold was
/// found at commit), nothing of the batch stayed, and each of its
/// change-sets is applied again on its own so that only the one at fault is
/// refused, with its own message. Returns whether anything was applied.
fn report_batch(
    store: &mut Store,
    applied: Vec<(Found, Option<ClockAnomaly>)>,
    committed: bool,
    options: &SyncOptions,
    report: &mut SyncReport,
    still: &mut Vec<(Found, String)>,
) -> Result<bool> {
    let mut progress = false;
    for (f, anomaly) in applied {
        let outcome = if committed {
            Ok(ApplyResult::Applied { anomaly })
        } else {
            apply_changeset(store, &f.cs, &f.label, f.size, options)
        };
        match outcome {
            Ok(ApplyResult::Applied { anomaly }) => {
                progress = true;
                report.anomalies.extend(anomaly);
                report.applied.push(applied_file_of(f));
            }
            Ok(ApplyResult::AlreadyApplied { .. }) => {}
            Ok(ApplyResult::Waiting(reason)) => still.push((f, reason)),
            Err(e) => report.skipped.push(SkippedFile {
                file: f.path,
                kind: SkipKind::Rejected,
                reason: strip_path(&e),
            }),
        }
    }
    Ok(progress)
}

fn applied_file_of(f: Found) -> AppliedFile {
    AppliedFile {
        file: f.path,
        device_id: f.cs.device_id,
        device_name: f.cs.device_name,
        first_seq: f.cs.first_seq,
        last_seq: f.cs.last_seq,
    }
}

/// The anomaly of a change-set whose clock was far ahead of this device's.
fn clock_ahead(cs: &ChangeSet, source: &str, a: &apply::ClockAhead) -> ClockAnomaly {
    ClockAnomaly {
        device_id: cs.device_id.clone(),
        kind: AnomalyKind::Ahead,
        clock_millis: crate::store::Hlc(a.hlc).millis(),
        local_millis: a.local_millis,
        file: Some(source.to_owned()),
        noticed_at: timestamp(a.local_millis),
    }
}

/// The file a change-set with exactly this content was applied from, if any.
fn applied_file(conn: &Connection, cs: &ChangeSet) -> Result<Option<String>> {
    Ok(conn
        .query_row(
            "SELECT file_name FROM sync_applied WHERE device_id = ?1 AND first_seq = ?2 \
             AND last_seq = ?3 AND sha256 = ?4",
            params![cs.device_id, cs.first_seq, cs.last_seq, cs.sha256],
            |r| r.get(0),
        )
        .optional()?)
}

/// An error's text without the leading file path (the report names the file).
fn strip_path(e: &Error) -> String {
    match e {
        Error::ChangeSet { reason, .. } => reason.clone(),
        other => other.to_string(),
    }
}

/// Flag this device's clock when it is far behind the newest timestamp it holds.
fn notice_local_clock(
    store: &mut Store,
    options: &SyncOptions,
    report: &mut SyncReport,
) -> Result<()> {
    let now = store.now_millis();
    let me = store.device_id().to_owned();
    let hlc: i64 = store.conn().query_row(
        "SELECT hlc FROM local_device WHERE singleton = 1",
        [],
        |r| r.get(0),
    )?;
    let clock_millis = crate::store::Hlc(hlc).millis();
    if clock_millis - now <= options.clock_ahead_limit_millis {
        return Ok(());
    }
    let known: bool = store.conn().query_row(
        "SELECT EXISTS (SELECT 1 FROM sync_clock_anomaly WHERE device_id = ?1 AND kind = 'behind' AND hlc = ?2)",
        params![me, hlc],
        |r| r.get(0),
    )?;
    if known {
        return Ok(());
    }
    let anomaly = ClockAnomaly {
        device_id: me.clone(),
        kind: AnomalyKind::Behind,
        clock_millis,
        local_millis: now,
        file: None,
        noticed_at: timestamp(now),
    };
    sync_state::record_clock_anomaly(
        store.conn(),
        &sync_state::Anomaly {
            noticed_at: &anomaly.noticed_at,
            device_id: &me,
            kind: sync_state::ClockSide::Behind,
            hlc,
            local_millis: now,
            file_name: None,
        },
    )?;
    report.anomalies.push(anomaly);
    Ok(())
}
