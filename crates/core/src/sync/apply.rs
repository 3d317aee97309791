//! Applying verified change-sets of other devices: each one whole or not at
//! all, in ONE IMMEDIATE transaction of its own ([`apply`]) or shared with
//! others that are ready at the same time ([`Batch`]).
//!
//! A change-set is applied only when it is next in its device's sequence and
//! every change-set its header's `seen` list names is applied already
//! (causal order). Then every row it refers to exists (a reference can only
//! name a row its author held), so the local write path's live-reference
//! check is not repeated: a row may refer to a row that another device has
//! deleted meanwhile, which is a conflict to show, not a reason to refuse.
//! Foreign keys are still checked by SQLite, at commit.
//!
//! The entries go into the change log under their own device id and seq (so
//! they are never sent again as this device's), then every row they touch is
//! recomputed from all its entries ([`crate::store::merge`]).

use std::collections::HashMap;

use rusqlite::types::Value;
use rusqlite::{OptionalExtension, TransactionBehavior, params};

use super::SyncOptions;
use super::changeset::ChangeSet;
use crate::store::merge::{self, Entry, Knowledge, Settler};
use crate::store::{Hlc, Op, Store, log, sync_state};
use crate::tables;
use crate::{Error, Result};

/// What happened to a change-set offered for applying.
#[derive(Debug, Clone, PartialEq)]
pub(crate) enum Outcome {
    /// Applied; `ahead` is set when its clock was far ahead of ours.
    Applied { ahead: Option<ClockAhead> },
    /// Applied before, from the file named.
    AlreadyApplied { file: String },
    /// Cannot be applied yet; the reason says what it waits for.
    Waiting(String),
}

/// A remote clock far ahead of this device's clock.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct ClockAhead {
    pub hlc: i64,
    pub local_millis: i64,
}

/// The last seq of `device` applied here (0 when none).
pub(crate) fn applied_upto(conn: &rusqlite::Connection, device: &str) -> Result<i64> {
    Ok(conn
        .prepare_cached("SELECT coalesce(max(last_seq), 0) FROM sync_applied WHERE device_id = ?1")?
        .query_row([device], |r| r.get(0))?)
}

/// Apply `cs` (read from `file`, `size` bytes) if it is ready, in a
/// transaction of its own.
pub(crate) fn apply(
    store: &mut Store,
    cs: &ChangeSet,
    file: &str,
    size: u64,
    options: &SyncOptions,
) -> Result<Outcome> {
    let mut batch = Batch::begin(store)?;
    let outcome = batch.offer(cs, file, size, options)?;
    batch.commit().map_err(|e| Error::ChangeSet {
        file: file.into(),
        reason: format!("could not be committed: {e}"),
    })?;
    Ok(outcome)
}

/// Several change-sets applied in ONE IMMEDIATE transaction, all durable at
/// [`Batch::commit`] or none. Storing the entries of many change-sets costs
/// far less in one commit than in one commit each (every commit writes
/// again the pages of the change log's row index that its change-set
/// touched). A batch that meets an error is dropped whole (rolled back):
/// the caller applies its change-sets again one by one, so that only the
/// one at fault is refused.
pub(crate) struct Batch<'s> {
    tx: rusqlite::Transaction<'s>,
    me: String,
    now: i64,
    changes: usize,
}

impl<'s> Batch<'s> {
    /// Open the transaction.
    pub fn begin(store: &'s mut Store) -> Result<Batch<'s>> {
        let me = store.device_id().to_owned();
        let now = store.now_millis();
        let tx = store
            .conn_mut()
            .transaction_with_behavior(TransactionBehavior::Immediate)?;
        // References are checked when the transaction commits, so that rows
        // can be settled in any order within it.
        tx.execute_batch("PRAGMA defer_foreign_keys = ON")?;
        Ok(Batch {
            tx,
            me,
            now,
            changes: 0,
        })
    }

    /// Entries applied in this batch so far.
    pub fn changes(&self) -> usize {
        self.changes
    }

    /// Apply `cs` if it is ready. After an error the batch must be dropped.
    pub fn offer(
        &mut self,
        cs: &ChangeSet,
        file: &str,
        size: u64,
        options: &SyncOptions,
    ) -> Result<Outcome> {
        let outcome = apply_within(&self.tx, &self.me, self.now, cs, file, size, options)?;
        if matches!(outcome, Outcome::Applied { .. }) {
            self.changes += cs.changes.len();
        }
        Ok(outcome)
    }

    /// Commit everything applied (foreign keys are checked here).
    pub fn commit(self) -> Result<()> {
        Ok(self.tx.commit()?)
    }
}

/// How far past the newest clock this device knows a change-set's clock may
/// lie: five years. A tablet whose clock is a year or two off is merged (and
/// its clock flagged); further is a wrong clock or a crafted file, refused
/// whole before it can carry every later save towards the end of the clock's
/// range.
pub const CLOCK_WINDOW_MILLIS: i64 = 5 * 365 * 86_400_000;

/// No fieldcage change-set is older than this (2026-01-01T00:00:00Z, before
/// its first release): the newest clock a device knows is at least this,
/// even on a tablet whose clock was reset to 1970.
pub const NOT_BEFORE_MILLIS: i64 = 1_767_225_600_000;

/// Apply `cs` inside the open transaction `tx` if it is ready.
fn apply_within(
    tx: &rusqlite::Connection,
    me: &str,
    now: i64,
    cs: &ChangeSet,
    file: &str,
    size: u64,
    options: &SyncOptions,
) -> Result<Outcome> {
    let refuse = |reason: String| Error::ChangeSet {
        file: file.into(),
        reason,
    };
    if cs.device_id == me {
        return Err(refuse(
            "holds this device's own changes; they are never applied again".into(),
        ));
    }
    // One experiment per sync folder: a file of another experiment (or of
    // another randomisation of this one) is refused whole.
    if let Some(theirs) = &cs.experiment {
        let mine = crate::store::first::<crate::model::Experiment>(tx)?
            .map(|e| (e.id.to_string(), e.code, e.randomisation_seed));
        if let Some((id, code, seed)) = mine
            && (id != theirs.id || (seed.is_some() && theirs.seed.is_some() && seed != theirs.seed))
        {
            let seed_text =
                |s: Option<i64>| s.map_or("an unknown seed".to_owned(), |s| format!("seed {s}"));
            return Err(refuse(if code == theirs.code {
                format!(
                    "belongs to experiment {code} set up with {}, but this database holds {code} \
                     set up with {}: two randomisations of one experiment cannot be merged. Set \
                     the other tablet up again with --seed {} (or let it join this crew with \
                     fieldcage join)",
                    seed_text(theirs.seed),
                    seed_text(seed),
                    seed.map_or("<the first tablet's seed>".to_owned(), |s| s.to_string()),
                )
            } else {
                format!(
                    "belongs to experiment {} ({}), but this database holds experiment {code} \
                     ({id}): a sync folder serves one experiment; give each its own folder",
                    theirs.code, theirs.id
                )
            }));
        }
    }
    let upto = applied_upto(tx, &cs.device_id)?;
    if cs.first_seq <= upto {
        let recorded: Option<(i64, String, String)> = tx
            .prepare_cached(
                "SELECT last_seq, sha256, file_name FROM sync_applied WHERE device_id = ?1 AND first_seq = ?2",
            )?
            .query_row(params![cs.device_id, cs.first_seq], |r| {
                Ok((r.get(0)?, r.get(1)?, r.get(2)?))
            })
            .optional()?;
        return match recorded {
            Some((last, sha, name)) if last == cs.last_seq && sha == cs.sha256 => {
                Ok(Outcome::AlreadyApplied { file: name })
            }
            _ => Err(refuse(format!(
                "device {} seq {}-{} was applied here already from a file with other content. \
                 Two databases are using that device's identity (a copy or a restored backup); \
                 this file is refused so that nothing is applied twice or mixed",
                cs.device_id, cs.first_seq, cs.last_seq
            ))),
        };
    }
    if cs.first_seq > upto + 1 {
        return Ok(Outcome::Waiting(format!(
            "waits for device {}'s changes {}-{}, not applied yet",
            cs.device_id,
            upto + 1,
            cs.first_seq - 1
        )));
    }
    let (next_seq, local_hlc): (i64, i64) = tx.query_row(
        "SELECT next_seq, hlc FROM local_device WHERE singleton = 1",
        [],
        |r| Ok((r.get(0)?, r.get(1)?)),
    )?;
    // A clock far beyond anything held would push this device's clock with
    // it, towards the end of its range: refused before anything is written.
    let max_remote = cs.changes.iter().map(|c| c.hlc).max().unwrap_or(0);
    let newest = now.max(Hlc(local_hlc).millis()).max(NOT_BEFORE_MILLIS);
    if Hlc(max_remote).millis() > newest.saturating_add(CLOCK_WINDOW_MILLIS) {
        return Err(refuse(format!(
            "device {} stamped its changes with clock value {max_remote} ({}), more than \
             five years after the newest clock here ({}): a clock that far ahead is a wrong clock \
             or a crafted file, and would carry every later save with it, so nothing of the \
             file is applied. Set that tablet's date and time right; its later changes wait \
             for this one",
            cs.device_id,
            super::timestamp(Hlc(max_remote).millis()),
            super::timestamp(newest),
        )));
    }
    for (device, seq) in &cs.seen {
        if *device == me {
            if *seq >= next_seq {
                return Err(refuse(format!(
                    "its device had seen this device's changes up to seq {seq}, but this database \
                     holds only up to {}: this database is an older copy of this device (restored \
                     from a backup?) and must not be used for sync",
                    next_seq - 1
                )));
            }
        } else {
            let have = applied_upto(tx, device)?;
            if have < *seq {
                return Ok(Outcome::Waiting(format!(
                    "waits for device {device}'s changes {}-{seq}, which its author had applied",
                    have + 1
                )));
            }
        }
    }
    {
        // An insert's run of entries (its `id` entry first, then the other
        // fields, consecutive: the change-set reader refuses anything else)
        // is stored as one packed entry.
        let mut rest = cs.changes.as_slice();
        let entries = std::iter::from_fn(|| {
            let c = rest.first()?;
            let run = if c.op == Op::Insert {
                1 + rest[1..]
                    .iter()
                    .take_while(|n| {
                        n.op == Op::Insert && n.row_id == c.row_id && n.field != Some("id")
                    })
                    .count()
            } else {
                1
            };
            let (field, value) = if c.op == Op::Insert {
                let fields = rest[..run]
                    .iter()
                    .map(|e| (e.field.unwrap_or_default(), &e.new_value));
                (None, Value::Text(log::pack_insert(fields)))
            } else {
                (c.field, c.new_value.clone())
            };
            rest = &rest[run..];
            Some(log::Received {
                seq: c.seq,
                hlc: c.hlc,
                table: c.table,
                row_id: &c.row_id,
                op: c.op,
                field,
                old_value: &c.old_value,
                new_value: value,
            })
        });
        log::store_received(tx, &cs.device_id, entries)?;
    }
    for (device, seq) in &cs.seen {
        sync_state::record_knowledge(tx, &cs.device_id, cs.first_seq, device, *seq)?;
    }
    let knowledge = Knowledge::load(tx)?;
    // Each row once, in the order its first entry arrived: the author's
    // order, parents before children. (Not sorted: a child stored before its
    // parent leaves a deferred foreign-key violation outstanding, and while
    // one is, SQLite looks for children at every parent row stored, which
    // made a season's merge more than ten times slower.)
    let mut rows: Vec<(&str, &str, Vec<usize>)> = Vec::new();
    let mut index: HashMap<(&str, &str), usize> = HashMap::new();
    for (n, c) in cs.changes.iter().enumerate() {
        let key = (c.table, c.row_id.as_str());
        let i = match rows.last() {
            // the entries of a row mostly come together
            Some((t, r, _)) if (*t, *r) == key => rows.len() - 1,
            _ => *index.entry(key).or_insert_with(|| {
                rows.push((key.0, key.1, Vec::new()));
                rows.len() - 1
            }),
        };
        rows[i].2.push(n);
    }
    let mut settler = Settler::default();
    for (table, row_id, at) in &rows {
        let schema = tables::get(table)
            .ok_or_else(|| refuse(format!("table_name: {table:?} is not a table")))?;
        let arrived = at.iter().map(|n| &cs.changes[*n]);
        let fields = arrived.clone().map(|c| (c.op, c.field, &c.new_value));
        let stored = merge::insert_new(tx, schema, row_id, fields)
            .map_err(|e| refuse(format!("{table} {row_id}: {e}")))?;
        if stored {
            continue;
        }
        let entries: Vec<Entry> = arrived
            .map(|c| Entry {
                device: cs.device_id.clone(),
                seq: c.seq,
                hlc: c.hlc,
                op: c.op,
                field: c.field.map(str::to_owned),
                value: c.new_value.clone(),
            })
            .collect();
        settler
            .settle(tx, schema, row_id, &entries, &knowledge)
            .map_err(|e| refuse(format!("{table} {row_id}: {e}")))?;
    }
    settler
        .finish(tx)
        .map_err(|e| refuse(format!("settling unique keys: {e}")))?;
    // The clock: never behind anything applied, so that a later local edit
    // always wins over what its author had seen.
    let hlc = Hlc(local_hlc).receive(Hlc(max_remote), now);
    sync_state::set_hlc(tx, hlc.0)?;
    let ahead =
        (Hlc(max_remote).millis() - now > options.clock_ahead_limit_millis).then_some(ClockAhead {
            hlc: max_remote,
            local_millis: now,
        });
    let noticed = super::timestamp(now);
    if let Some(a) = &ahead {
        sync_state::record_clock_anomaly(
            tx,
            &sync_state::Anomaly {
                noticed_at: &noticed,
                device_id: &cs.device_id,
                kind: sync_state::ClockSide::Ahead,
                hlc: a.hlc,
                local_millis: a.local_millis,
                file_name: Some(file),
            },
        )?;
    }
    sync_state::record_applied(
        tx,
        &sync_state::Applied {
            device_id: &cs.device_id,
            first_seq: cs.first_seq,
            last_seq: cs.last_seq,
            sha256: &cs.sha256,
            file_name: file,
            size_bytes: size,
            applied_at: &noticed,
        },
    )?;
    sync_state::record_device_name(tx, &cs.device_id, &cs.device_name)?;
    // What this device knows from now on: its next entries saw all of it.
    sync_state::record_own_knowledge(tx, me, next_seq)?;
    Ok(Outcome::Applied { ahead })
}
