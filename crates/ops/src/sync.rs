//! The sync operations of the operation set: the state the header shows,
//! "sync now" and the conflicts screen (keep mine / take theirs). They wrap
//! [`fieldcage_core::sync`]; the rules live there.

use std::path::{Path, PathBuf};

use chrono::DateTime;
use serde::{Deserialize, Serialize};
use serde_json::Value as Json;

use crate::{Service, auto_sync, json_value};
use fieldcage_core::store::{Hlc, Op};
use fieldcage_core::sync::{
    self, AnomalyKind, ConflictChoice, ConflictKind, SkipKind, TargetStatus,
};
use fieldcage_core::{Error, Result};

// ----- requests -----

/// An operation that takes no arguments (`{}`).
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct NoArgs {}

/// Settle one conflict.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ResolveConflict {
    /// The conflict's key, from `conflicts`.
    pub key: String,
    /// What to keep.
    pub choice: Resolution,
}

/// How to settle a conflict. `keep_mine` / `take_theirs` name the sides by
/// where they were made; they need exactly one side made on this device.
/// `keep_current` / `take_other` name them by which one is in force.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Resolution {
    /// Keep the version made on this device.
    KeepMine,
    /// Take the version made on the other device.
    TakeTheirs,
    /// Keep the version in force.
    KeepCurrent,
    /// Take the other version.
    TakeOther,
}

impl Resolution {
    fn as_str(self) -> &'static str {
        match self {
            Resolution::KeepMine => "keep_mine",
            Resolution::TakeTheirs => "take_theirs",
            Resolution::KeepCurrent => "keep_current",
            Resolution::TakeOther => "take_other",
        }
    }
}

// ----- responses -----

/// Whether the sync target can be used now.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum TargetState {
    /// No target is set.
    NotSet,
    /// It is reachable and takes new files.
    Ready,
    /// It cannot be used now (unplugged, unmounted, read-only).
    Unavailable,
}

/// The last sync run that finished.
#[derive(Debug, Clone, Serialize)]
pub struct LastSync {
    /// When it finished (RFC 3339, UTC).
    pub finished_at: String,
    /// The target it used.
    pub target: String,
    /// Change-sets written.
    pub written: i64,
    /// Change-sets of other devices applied.
    pub applied: i64,
    /// Files not applied (damaged, duplicate or waiting).
    pub skipped: i64,
}

/// A clock that looked wrong.
#[derive(Debug, Clone, Serialize)]
pub struct ClockLine {
    /// When it was noticed.
    pub noticed_at: String,
    /// The device whose clock looked wrong.
    pub device_id: String,
    /// `ahead` (another device's) or `behind` (this device's).
    pub kind: &'static str,
    /// A sentence for people.
    pub message: String,
}

/// Everything the header and the settings screen show about sync.
#[derive(Debug, Clone, Serialize)]
pub struct SyncStatus {
    /// This device.
    pub device_id: String,
    /// Its name.
    pub device_name: String,
    /// The sync target, if set.
    pub target: Option<String>,
    /// Whether it can be used now.
    pub target_state: TargetState,
    /// Why not, when unavailable.
    pub target_problem: Option<String>,
    /// The last sync that finished.
    pub last_sync: Option<LastSync>,
    /// Changes made here not yet written for sync.
    pub pending_changes: i64,
    /// Conflicts waiting for review.
    pub open_conflicts: usize,
    /// Clocks that looked wrong, oldest first.
    pub clock_anomalies: Vec<ClockLine>,
    /// What automatic sync last did.
    pub auto_sync: auto_sync::AutoSyncState,
}

/// A file a sync run did not apply.
#[derive(Debug, Clone, Serialize)]
pub struct SkippedLine {
    /// The file, relative to the target.
    pub file: String,
    /// `rejected` (read again next time), `duplicate` or `waiting` (for
    /// change-sets not in the target yet).
    pub kind: &'static str,
    /// Why.
    pub reason: String,
}

/// A change-set of another device applied.
#[derive(Debug, Clone, Serialize)]
pub struct AppliedLine {
    /// The file, relative to the target.
    pub file: String,
    /// The device's name.
    pub device_name: String,
    /// How many changes it held.
    pub changes: i64,
}

/// What a sync run did.
#[derive(Debug, Clone, Serialize)]
pub struct SyncOutcome {
    /// The target.
    pub target: String,
    /// When it finished (RFC 3339, UTC).
    pub finished_at: String,
    /// Change-set files written, relative to the target.
    pub written: Vec<String>,
    /// Change-sets of other devices applied.
    pub applied: Vec<AppliedLine>,
    /// Files not applied, with the reason.
    pub skipped: Vec<SkippedLine>,
    /// Warnings (a folder flush refused by a network filesystem, …).
    pub warnings: Vec<String>,
    /// Clocks that looked wrong in this run.
    pub clock_anomalies: Vec<String>,
    /// Conflicts waiting for review.
    pub open_conflicts: usize,
    /// Changes made here not yet written (changes made during the run).
    pub pending_changes: i64,
}

/// One side of a conflict.
#[derive(Debug, Clone, Serialize)]
pub struct VersionLine {
    /// The device that made it.
    pub device_id: String,
    /// Its name.
    pub device_name: String,
    /// Made on this device.
    pub is_local: bool,
    /// When (UTC, from the hybrid logical clock).
    pub at: String,
    /// `set` (a value), `deleted` (the row), `restored` (the row), `created`
    /// (a row of a duplicate pair).
    pub action: &'static str,
    /// The value it set (`set` only).
    pub value: Json,
    /// The row it is about.
    pub row_id: String,
}

/// An open conflict, both versions side by side.
#[derive(Debug, Clone, Serialize)]
pub struct ConflictLine {
    /// Key for `resolve_conflict`.
    pub key: String,
    /// `concurrent` (two edits that did not see each other), `deleted` (an
    /// edit against a delete), `duplicate` (two rows with one key), `orphan`
    /// (a row that refers to a deleted one).
    pub kind: &'static str,
    /// Table.
    pub table: String,
    /// Row.
    pub row_id: String,
    /// Field, when the conflict is about one.
    pub field: Option<String>,
    /// The record in people's words (cage, visit, taxon).
    pub record: String,
    /// The version in force.
    pub current: VersionLine,
    /// The other version.
    pub other: VersionLine,
    /// Which side was made on this device (`current` or `other`), when
    /// exactly one was: then `keep_mine` and `take_theirs` apply.
    pub mine: Option<&'static str>,
}

/// What settling a conflict left.
#[derive(Debug, Clone, Serialize)]
pub struct Settled {
    /// The conflict settled.
    pub key: String,
    /// How.
    pub choice: Resolution,
    /// Conflicts still open.
    pub open_conflicts: usize,
}

// ----- operations -----

fn rfc3339(millis: i64) -> String {
    DateTime::from_timestamp_millis(millis)
        .unwrap_or_default()
        .to_rfc3339_opts(chrono::SecondsFormat::Secs, true)
}

fn relative(target: &Path, file: &Path) -> String {
    file.strip_prefix(target)
        .unwrap_or(file)
        .display()
        .to_string()
}

fn no_target() -> Error {
    Error::invalid(
        "device",
        "sync_target",
        "",
        "is not set: choose the sync folder in the settings first",
    )
}

impl Service {
    /// What the header shows: the last successful sync, pending changes,
    /// open conflicts, whether the target is set and reachable, clocks.
    pub fn sync_status(&self, _: NoArgs) -> Result<SyncStatus> {
        let mut status = {
            let store = self.store();
            SyncStatus {
                device_id: store.device_id().to_owned(),
                device_name: store.device_name()?,
                target: sync::saved_target(&store)?.map(|t| t.display().to_string()),
                target_state: TargetState::NotSet,
                target_problem: None,
                last_sync: sync::last_success(&store)?.map(|r| LastSync {
                    finished_at: r.finished_at,
                    target: r.target,
                    written: r.written,
                    applied: r.applied,
                    skipped: r.skipped,
                }),
                pending_changes: sync::pending_changes(&store)?,
                open_conflicts: sync::open_conflict_count(&store)?,
                clock_anomalies: sync::clock_anomalies(&store)?
                    .into_iter()
                    .map(|a| ClockLine {
                        message: a.describe(),
                        noticed_at: a.noticed_at,
                        device_id: a.device_id,
                        kind: match a.kind {
                            AnomalyKind::Ahead => "ahead",
                            AnomalyKind::Behind => "behind",
                        },
                    })
                    .collect(),
                auto_sync: self.auto_sync_state(),
            }
        };
        // Probing the folder can be slow on a share: not under the store lock,
        // and not at all when the running poller has just done it.
        if let Some(target) = &status.target {
            let probe = self
                .recent_probe(Path::new(target))
                .unwrap_or_else(|| sync::target_is_reachable(Path::new(target)));
            match probe {
                TargetStatus::Ready => status.target_state = TargetState::Ready,
                TargetStatus::Unavailable(reason) => {
                    status.target_state = TargetState::Unavailable;
                    status.target_problem = Some(format!("{target} {reason}"));
                }
            }
        }
        Ok(status)
    }

    /// Sync with the saved target now.
    pub fn sync_now(&self, _: NoArgs) -> Result<SyncOutcome> {
        let target = {
            let store = self.store();
            sync::saved_target(&store)?.ok_or_else(no_target)?
        };
        self.sync_with_target(&target)
    }

    /// One sync run against `target`, under the store lock (saves wait for
    /// it; a run with nothing new takes milliseconds).
    pub(super) fn sync_with_target(&self, target: &Path) -> Result<SyncOutcome> {
        let mut store = self.store();
        let report = sync::sync_once(&mut store, target)?;
        drop(store);
        Ok(SyncOutcome {
            target: target.display().to_string(),
            finished_at: report.finished_at,
            written: report
                .written
                .iter()
                .map(|w| relative(target, &w.file))
                .collect(),
            applied: report
                .applied
                .iter()
                .map(|a| AppliedLine {
                    file: relative(target, &a.file),
                    device_name: a.device_name.clone(),
                    changes: a.last_seq - a.first_seq + 1,
                })
                .collect(),
            skipped: report
                .skipped
                .iter()
                .map(|s| SkippedLine {
                    file: relative(target, &s.file),
                    kind: match s.kind {
                        SkipKind::Rejected => "rejected",
                        SkipKind::Duplicate => "duplicate",
                        SkipKind::Waiting => "waiting",
                    },
                    reason: s.reason.clone(),
                })
                .collect(),
            warnings: report.warnings,
            clock_anomalies: report.anomalies.iter().map(|a| a.describe()).collect(),
            open_conflicts: report.open_conflicts,
            pending_changes: report.pending_changes,
        })
    }

    /// Every open conflict with both versions.
    pub fn conflicts(&self, _: NoArgs) -> Result<Vec<ConflictLine>> {
        let store = self.store();
        sync::conflicts(&store)?
            .into_iter()
            .map(|c| {
                let mine = match (c.current.is_local, c.other.is_local) {
                    (true, false) => Some("current"),
                    (false, true) => Some("other"),
                    _ => None,
                };
                Ok(ConflictLine {
                    record: fieldcage_core::sync::describe_record(&*store, &c.table, &c.row_id),
                    kind: c.kind.as_str(),
                    current: version_line(&c.current, c.kind),
                    other: version_line(&c.other, c.kind),
                    key: c.key,
                    table: c.table,
                    row_id: c.row_id,
                    field: c.field,
                    mine,
                })
            })
            .collect()
    }

    /// Settle one conflict: keep mine / take theirs (or keep the current /
    /// take the other version). The choice travels to the other devices as
    /// an ordinary change on their next sync.
    pub fn resolve_conflict(&self, req: ResolveConflict) -> Result<Settled> {
        let mut store = self.store();
        let conflict = sync::conflicts(&store)?
            .into_iter()
            .find(|c| c.key == req.key)
            .ok_or_else(|| Error::NotFound {
                table: "conflict".into(),
                id: req.key.clone(),
            })?;
        let mine_is_current = match (conflict.current.is_local, conflict.other.is_local) {
            (true, false) => Some(true),
            (false, true) => Some(false),
            _ => None,
        };
        let choice = match (req.choice, mine_is_current) {
            (Resolution::KeepCurrent, _) => ConflictChoice::KeepCurrent,
            (Resolution::TakeOther, _) => ConflictChoice::TakeOther,
            (Resolution::KeepMine, Some(true)) | (Resolution::TakeTheirs, Some(false)) => {
                ConflictChoice::KeepCurrent
            }
            (Resolution::KeepMine, Some(false)) | (Resolution::TakeTheirs, Some(true)) => {
                ConflictChoice::TakeOther
            }
            (choice, None) => {
                return Err(Error::invalid(
                    "conflict",
                    "choice",
                    choice.as_str(),
                    "needs one version made on this device and one elsewhere; for this conflict \
                     choose keep_current or take_other",
                ));
            }
        };
        sync::resolve_conflict(&mut store, &req.key, choice)?;
        Ok(Settled {
            key: req.key,
            choice: req.choice,
            open_conflicts: sync::open_conflict_count(&store)?,
        })
    }

    /// The saved target, this device's id and its pending changes (for the
    /// automatic sync, which probes the folder without the lock).
    pub(crate) fn sync_plan(&self) -> Result<Option<(PathBuf, String, i64)>> {
        let store = self.store();
        let Some(target) = sync::saved_target(&store)? else {
            return Ok(None);
        };
        Ok(Some((
            target,
            store.device_id().to_owned(),
            sync::pending_changes(&store)?,
        )))
    }
}

fn version_line(v: &sync::Version, kind: ConflictKind) -> VersionLine {
    let action = match (kind, v.op) {
        (ConflictKind::Duplicate, _) => "created",
        (_, Op::Delete) => "deleted",
        (_, Op::Restore) => "restored",
        (ConflictKind::Orphan, Op::Insert) if v.value == rusqlite::types::Value::Null => "created",
        _ => "set",
    };
    VersionLine {
        device_id: v.device_id.clone(),
        device_name: v.device_name.clone(),
        is_local: v.is_local,
        at: rfc3339(Hlc(v.hlc).millis()),
        action,
        value: if action == "set" {
            json_value(v.value.clone())
        } else {
            Json::Null
        },
        row_id: v.row_id.clone(),
    }
}
