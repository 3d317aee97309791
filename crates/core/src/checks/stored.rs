//! Stored flags: reconciling what a check run raises with the `flag` table,
//! confirming a flag with a note, and the report of a run.
//!
//! Every change goes through the one write path, so flags are in the change
//! log, sync like any other data and are exported with every note.

use std::collections::{HashMap, HashSet};

use chrono::NaiveDate;
use rusqlite::Connection;
use rusqlite::types::Value;
use serde::Serialize;
use uuid::Uuid;

use super::{Flag, Limits, Scope, Season, raise};
use crate::model::*;
use crate::store::{self, Store, Writer};
use crate::{Error, Result};

/// The identity of a flag across runs: rule, record, related record.
type Key = (String, Uuid, Option<Uuid>);

fn key_of(f: &StoredFlag) -> Key {
    (f.rule_id.clone(), f.record_id, f.related_id)
}

/// A stored flag as reported: the `flag` row with its cage label and date.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ReportedFlag {
    /// Flag id (give it, or its last characters, to confirm the flag).
    pub id: FlagId,
    /// Rule that raised it.
    pub rule_id: String,
    /// Family of the rule.
    pub family: CheckFamily,
    /// Severity.
    pub severity: Severity,
    /// open, fixed or confirmed.
    pub status: FlagStatus,
    /// Cage label.
    pub cage: String,
    /// Day of the experiment.
    pub day: i64,
    /// Its local date.
    pub date: NaiveDate,
    /// Table of the record the flag points at.
    pub record_table: String,
    /// Id of that record.
    pub record_id: Uuid,
    /// Table of the related record, if any.
    pub related_table: Option<String>,
    /// Id of the related record.
    pub related_id: Option<Uuid>,
    /// What is wrong, with the numbers.
    pub message: String,
    /// Suggested fix.
    pub fix: String,
    /// Confirmation note.
    pub note: Option<String>,
}

/// What one check run changed in the stored flags.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Serialize)]
pub struct Changes {
    /// Flags raised for the first time.
    pub new: usize,
    /// Fixed flags raised again (open again).
    pub reopened: usize,
    /// Flags no longer raised (now fixed).
    pub fixed: usize,
    /// Flags still raised whose message, severity or day changed.
    pub updated: usize,
}

/// The result of a check run: the stored flags of the scope after it.
#[derive(Debug, Clone, Serialize)]
pub struct Report {
    /// The scope in words.
    pub scope: String,
    /// The checks ran as of the end of this day.
    pub today: NaiveDate,
    /// Flags open (not fixed, not confirmed).
    pub open: usize,
    /// Open flags of severity error: the run fails while there are any.
    pub open_errors: usize,
    /// Confirmed flags.
    pub confirmed: usize,
    /// Fixed flags.
    pub fixed: usize,
    /// What this run changed.
    pub changes: Changes,
    /// The flags, by cage, day, severity and rule.
    pub flags: Vec<ReportedFlag>,
}

impl Report {
    /// Whether an error is still open: the data are not ready.
    pub fn has_open_errors(&self) -> bool {
        self.open_errors > 0
    }
}

/// Run the checks over a scope as of the end of `today`, store what they
/// raise and mark what they no longer raise as fixed; return the stored flags
/// of the scope. Everything happens in one write transaction, so the flags
/// match one state of the data.
pub fn run(store: &mut Store, scope: &Scope, today: NaiveDate) -> Result<Report> {
    store.write(|w| {
        let season = Season::load(w.conn(), today, Limits::DEFAULT)?;
        if let Scope::Cage(label) = scope
            && !season.cages.iter().any(|c| &c.label == label)
        {
            return Err(Error::NotFound {
                table: "enclosure".into(),
                id: label.clone(),
            });
        }
        let raised = raise(&season);
        let changes = reconcile(w, &season, scope, &raised)?;
        let flags: Vec<ReportedFlag> = reported(w.conn(), &season)?
            .into_iter()
            .filter(|f| scope.contains(season.calendar.start, f.day, &f.cage))
            .collect();
        let count = |status| flags.iter().filter(|f| f.status == status).count();
        Ok(Report {
            scope: scope.describe(season.calendar.start),
            today,
            open: count(FlagStatus::Open),
            open_errors: flags
                .iter()
                .filter(|f| f.status == FlagStatus::Open && f.severity == Severity::Error)
                .count(),
            confirmed: count(FlagStatus::Confirmed),
            fixed: count(FlagStatus::Fixed),
            changes,
            flags,
        })
    })
}

/// Bring the stored flags of the scope in line with the raised ones.
fn reconcile(
    w: &mut Writer<'_>,
    season: &Season,
    scope: &Scope,
    raised: &[Flag],
) -> Result<Changes> {
    let labels: HashMap<EnclosureId, &str> = season
        .cages
        .iter()
        .map(|c| (c.id, c.label.as_str()))
        .collect();
    let stored_in_scope = |s: &StoredFlag| {
        scope.contains(
            season.calendar.start,
            s.day,
            labels.get(&s.enclosure_id).copied().unwrap_or_default(),
        )
    };
    let mut stored: HashMap<Key, StoredFlag> = store::list::<StoredFlag>(w.conn())?
        .into_iter()
        .map(|s| (key_of(&s), s))
        .collect();
    let mut changes = Changes::default();
    let mut seen: HashSet<Key> = HashSet::new();
    for flag in raised {
        let key = flag.key();
        if !seen.insert(key.clone()) {
            return Err(Error::Invariant(format!(
                "check rule {} raised two flags for record {}; this is a bug in the rule",
                flag.rule_id, flag.record.id
            )));
        }
        let existing = stored.remove(&key);
        let in_scope = scope.contains(season.calendar.start, flag.day, &flag.cage)
            || existing.as_ref().is_some_and(stored_in_scope);
        if !in_scope {
            continue;
        }
        let (id, status, note) = match &existing {
            Some(s) if s.status == FlagStatus::Fixed => (s.id, FlagStatus::Open, s.note.clone()),
            Some(s) => (s.id, s.status, s.note.clone()),
            None => (FlagId(w.new_id()), FlagStatus::Open, None),
        };
        let row = StoredFlag {
            id,
            rule_id: flag.rule_id.to_owned(),
            family: flag.family,
            severity: flag.severity,
            enclosure_id: flag.enclosure_id,
            day: flag.day,
            record_table: flag.record.table.to_owned(),
            record_id: flag.record.id,
            related_table: flag.related.map(|r| r.table.to_owned()),
            related_id: flag.related.map(|r| r.id),
            message: flag.message.clone(),
            fix: flag.fix.clone(),
            status,
            note,
        };
        match existing {
            None => {
                w.insert(&row)?;
                changes.new += 1;
            }
            Some(old) if old != row => {
                w.update(&row)?;
                if old.status == FlagStatus::Fixed {
                    changes.reopened += 1;
                } else {
                    changes.updated += 1;
                }
            }
            Some(_) => {}
        }
    }
    // What is left was not raised: fixed, if it is in the scope.
    let mut gone: Vec<StoredFlag> = stored
        .into_values()
        .filter(|s| s.status != FlagStatus::Fixed && stored_in_scope(s))
        .collect();
    gone.sort_by_key(|s| s.id);
    let schema = store::table_of::<StoredFlag>();
    for s in gone {
        w.update_fields(
            schema,
            &s.id.to_string(),
            &[("status", Value::Text(FlagStatus::Fixed.as_str().to_owned()))],
        )?;
        changes.fixed += 1;
    }
    Ok(changes)
}

/// Every stored flag with its cage label and date, sorted for reading.
fn reported(conn: &Connection, season: &Season) -> Result<Vec<ReportedFlag>> {
    let labels: HashMap<EnclosureId, &str> = season
        .cages
        .iter()
        .map(|c| (c.id, c.label.as_str()))
        .collect();
    let mut out: Vec<ReportedFlag> = store::list::<StoredFlag>(conn)?
        .into_iter()
        .map(|f| {
            let cage = labels
                .get(&f.enclosure_id)
                .map_or_else(|| f.enclosure_id.to_string(), |l| (*l).to_owned());
            as_reported(f, cage, season.calendar.start)
        })
        .collect();
    out.sort_by(|a, b| {
        (&a.cage, a.day, a.severity, &a.rule_id, a.record_id).cmp(&(
            &b.cage,
            b.day,
            b.severity,
            &b.rule_id,
            b.record_id,
        ))
    });
    Ok(out)
}

fn as_reported(f: StoredFlag, cage: String, start: NaiveDate) -> ReportedFlag {
    ReportedFlag {
        id: f.id,
        rule_id: f.rule_id,
        family: f.family,
        severity: f.severity,
        status: f.status,
        cage,
        day: f.day,
        date: start + chrono::Duration::days(f.day),
        record_table: f.record_table,
        record_id: f.record_id,
        related_table: f.related_table,
        related_id: f.related_id,
        message: f.message,
        fix: f.fix,
        note: f.note,
    }
}

/// Shortest end of a flag id accepted in place of the whole id.
pub const MIN_ID_SUFFIX: usize = 6;

/// The number of open flags of each cage that has any.
pub fn open_by_cage(source: &impl store::Source) -> Result<HashMap<EnclosureId, i64>> {
    Ok(store::conn_of(source)
        .prepare(
            "SELECT enclosure_id, count(*) FROM flag WHERE status = 'open' AND deleted = 0 \
             GROUP BY enclosure_id",
        )?
        .query_map([], |r| Ok((r.get(0)?, r.get(1)?)))?
        .collect::<rusqlite::Result<_>>()?)
}

/// Confirm a flag: the data are right as recorded, for the reason in `note`.
/// `flag` is the flag's id or its last characters (at least
/// [`MIN_ID_SUFFIX`], as printed by `fieldcage check`). A fixed flag is no
/// longer raised and cannot be confirmed; a confirmed one gets the new note.
pub fn confirm(store: &mut Store, flag: &str, note: &str) -> Result<ReportedFlag> {
    let note = note.trim();
    if note.is_empty() {
        return Err(Error::invalid(
            "flag",
            "note",
            note,
            "is required to confirm a flag: say why the data are right as recorded",
        ));
    }
    store.write(|w| {
        let id = find_flag(w.conn(), flag)?;
        let mut row: StoredFlag = store::get(w.conn(), id.0)?.ok_or_else(|| Error::NotFound {
            table: "flag".into(),
            id: flag.to_owned(),
        })?;
        if row.status == FlagStatus::Fixed {
            return Err(Error::State(format!(
                "flag {} ({}) is fixed: the rule no longer raises it, so there is nothing to confirm",
                row.id, row.rule_id
            )));
        }
        row.status = FlagStatus::Confirmed;
        row.note = Some(note.to_owned());
        w.update(&row)?;
        let (cage, start): (String, String) = w.conn().query_row(
            "SELECT e.label, (SELECT start_date FROM experiment WHERE deleted = 0 ORDER BY id LIMIT 1) \
             FROM enclosure e WHERE e.id = ?1",
            [row.enclosure_id],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )?;
        let start = NaiveDate::parse_from_str(&start, "%Y-%m-%d")
            .map_err(|_| Error::invalid("experiment", "start_date", &start, "is not a date"))?;
        Ok(as_reported(row, cage, start))
    })
}

/// The id of the one live flag whose id is `text` or ends with it.
fn find_flag(conn: &Connection, text: &str) -> Result<FlagId> {
    let text = text.trim().to_ascii_lowercase();
    let valid = text.len() >= MIN_ID_SUFFIX
        && text.len() <= 36
        && text.bytes().all(|b| b.is_ascii_hexdigit() || b == b'-');
    if !valid {
        return Err(Error::invalid(
            "flag",
            "id",
            &text,
            format!(
                "is not a flag id: give the id, or at least its last {MIN_ID_SUFFIX} characters, as printed by fieldcage check"
            ),
        ));
    }
    let mut stmt = conn.prepare(
        "SELECT id FROM flag WHERE deleted = 0 AND (id = ?1 OR substr(id, -length(?1)) = ?1) ORDER BY id",
    )?;
    let ids: Vec<FlagId> = stmt
        .query_map([&text], |r| r.get(0))?
        .collect::<rusqlite::Result<_>>()?;
    match ids.as_slice() {
        [id] => Ok(*id),
        [] => Err(Error::NotFound {
            table: "flag".into(),
            id: text,
        }),
        many => Err(Error::invalid(
            "flag",
            "id",
            &text,
            format!("matches {} flags; give more characters", many.len()),
        )),
    }
}

/// Characters of a flag id shown in the text report (its end; UUIDv7 ids
/// begin with their creation time, so the end is what tells flags apart).
const SHORT_ID: usize = 8;

/// The report as text: a summary line, then the open and confirmed flags
/// grouped by cage (fixed flags are counted, not listed).
pub fn format_report(report: &Report) -> String {
    let mut out = format!(
        "Checks of {}, as of the end of {}\n",
        report.scope, report.today
    );
    let open: Vec<&ReportedFlag> = report
        .flags
        .iter()
        .filter(|f| f.status == FlagStatus::Open)
        .collect();
    let by_severity = |s| open.iter().filter(|f| f.severity == s).count();
    let plural = |n: usize, word: &str| format!("{n} {word}{}", if n == 1 { "" } else { "s" });
    let total = report.flags.len();
    out.push_str(&format!(
        "{}: {} open ({}, {}, {}), {} confirmed, {} fixed; {} of {total} resolved\n",
        plural(total, "flag"),
        report.open,
        plural(by_severity(Severity::Error), "error"),
        plural(by_severity(Severity::Warning), "warning"),
        plural(by_severity(Severity::Notice), "notice"),
        report.confirmed,
        report.fixed,
        report.confirmed + report.fixed,
    ));
    let mut cage: Option<&str> = None;
    for f in report
        .flags
        .iter()
        .filter(|f| f.status != FlagStatus::Fixed)
    {
        if cage != Some(f.cage.as_str()) {
            let n = report
                .flags
                .iter()
                .filter(|g| g.cage == f.cage && g.status == FlagStatus::Open)
                .count();
            out.push_str(&format!("\n{}: {n} open\n", f.cage));
            cage = Some(&f.cage);
        }
        let id = f.id.to_string();
        let status = match f.status {
            FlagStatus::Open => String::new(),
            other => format!(", {other}"),
        };
        out.push_str(&format!(
            "  [{}{status}] {} · day {} · flag {}\n      {}\n      fix: {}\n",
            f.severity,
            f.rule_id,
            f.day,
            &id[id.len() - SHORT_ID..],
            f.message,
            f.fix
        ));
        if let Some(note) = &f.note {
            out.push_str(&format!("      note: {note}\n"));
        }
    }
    out
}
