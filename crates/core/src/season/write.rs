//! The two writes every shell needs besides the field-entry commands: the
//! visit a record is saved under, and undo of a record's last change.

use chrono::{DateTime, NaiveDate, Utc};
use rusqlite::types::Value;
use serde::{Deserialize, Serialize};
use uuid::Uuid;

use crate::model::{EnclosureId, Visit, VisitKind};
use crate::record::{self, NewVisit};
use crate::store::{self, Op, Writer};
use crate::tables::{self, TableSchema};
use crate::{Error, Result};

use super::{Frame, schedule};

/// Which visit to find or start.
#[derive(Debug, Clone, Copy)]
pub struct VisitFor<'a> {
    /// The cage (it must have a treatment).
    pub cage: EnclosureId,
    /// What the visit is for.
    pub kind: VisitKind,
    /// The field day (local date).
    pub date: NaiveDate,
    /// Who is entering it (blank is none).
    pub observer: Option<&'a str>,
}

/// The visit of `kind` to a cage on a field day: the latest one recorded
/// that day (its observer filled in if it had none), or a new one, recorded
/// for the planned visit it fulfils ([`schedule::planned_day_for_new_visit`];
/// none when it is unplanned) and stamped with the current time of day.
pub fn visit_for(
    w: &mut Writer<'_>,
    frame: &Frame,
    want: VisitFor<'_>,
    now: DateTime<Utc>,
) -> Result<Visit> {
    frame.assigned_cage(want.cage)?;
    let observer = want.observer.map(str::trim).filter(|o| !o.is_empty());
    let mut visits: Vec<Visit> = store::live_where(
        w.conn(),
        "enclosure_id = ?1 AND kind = ?2",
        rusqlite::params![want.cage, want.kind.as_str()],
    )?;
    visits.sort_by_key(|v| (v.visited_at, v.id));
    if let Some(visit) = visits
        .iter()
        .filter(|v| super::Calendar::visit_date(v) == want.date)
        .max_by_key(|v| v.id)
    {
        let mut visit = visit.clone();
        if visit.observer.is_none() && observer.is_some() {
            visit.observer = observer.map(str::to_owned);
            w.update(&visit)?;
        }
        return Ok(visit);
    }
    let calendar = &frame.calendar;
    let day = calendar.day_of(want.date);
    let planned =
        schedule::planned_day_for_new_visit(calendar, &frame.schedule, want.kind, day, &visits);
    let device = w.device_name()?;
    record::start_visit(
        w,
        NewVisit {
            enclosure_id: want.cage,
            kind: want.kind,
            day: planned,
            visited_at: calendar.stamp(want.date, now),
            observer: observer.map(str::to_owned),
            // The device name as set now (the settings screen can change it).
            device: Some(device),
        },
    )
}

/// Tables whose rows the crew may delete or undo.
pub const EDITABLE: &[&str] = &[
    "visit",
    "stocking_event",
    "census",
    "cover_record",
    "damage_record",
    "tagged_leaf",
];

/// The schema of a table whose rows the crew may delete or undo.
pub fn editable_table(name: &str) -> Result<&'static TableSchema> {
    if !EDITABLE.contains(&name) {
        return Err(Error::invalid(
            "request",
            "table",
            name,
            format!("field records only: {}", EDITABLE.join(", ")),
        ));
    }
    tables::get(name).ok_or_else(|| Error::invalid("request", "table", name, "is not a table"))
}

/// What an undo did to the record.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum UndoAction {
    /// A new record was taken back: it is deleted.
    Deleted,
    /// An edit was taken back: its fields hold their earlier values.
    Restored,
}

/// What an undo did.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct Undone {
    /// Table.
    pub table: String,
    /// Id.
    pub id: Uuid,
    /// Deleted (an insert undone) or restored (an update undone).
    pub action: UndoAction,
    /// Fields set back.
    pub fields: Vec<String>,
}

/// Undo the latest change of a record made on this device: an insert is
/// deleted, an update has its fields set back. Refused when the latest change
/// was made on another device, or was a delete or a restore.
pub fn undo(w: &mut Writer<'_>, schema: &'static TableSchema, id: Uuid) -> Result<Undone> {
    let row_id = id.to_string();
    let mut log = store::log::row_entries(w.conn(), &schema.name, &row_id)?;
    // The same order as the record's history: clock, then device, then seq.
    log.sort_by(|a, b| (b.hlc, &b.device_id, b.seq).cmp(&(a.hlc, &a.device_id, a.seq)));
    let Some(latest) = log.first() else {
        return Err(Error::NotFound {
            table: schema.name.clone(),
            id: row_id,
        });
    };
    if latest.device_id != w.device_id() {
        return Err(Error::State(format!(
            "the latest change of this {} was made on another device; edit it instead",
            schema.name
        )));
    }
    let (hlc, device, op) = (latest.hlc, latest.device_id.clone(), latest.op);
    let done = |action, fields| Undone {
        table: schema.name.clone(),
        id,
        action,
        fields,
    };
    match op {
        Op::Insert => {
            w.delete(schema, &row_id)?;
            Ok(done(UndoAction::Deleted, vec![]))
        }
        Op::Update => {
            let changes: Vec<(&str, Value)> = log
                .iter()
                .filter(|e| e.hlc == hlc && e.device_id == device)
                .filter_map(|e| e.field.as_deref().map(|f| (f, e.old_value.clone())))
                .collect();
            w.update_fields(schema, &row_id, &changes)?;
            let fields = changes.iter().map(|(f, _)| (*f).to_owned()).collect();
            Ok(done(UndoAction::Restored, fields))
        }
        Op::Delete => Err(Error::State(format!(
            "this {} was deleted; enter it again instead",
            schema.name
        ))),
        Op::Restore => Err(Error::State(format!(
            "this {} was restored after a delete; delete it again instead",
            schema.name
        ))),
    }
}
