//! A record's history (every change of its fields, from the change log) and
//! undo of its last change.

use chrono::DateTime;
use rusqlite::types::Value;
use serde::{Deserialize, Serialize};
use serde_json::Value as Json;
use uuid::Uuid;

use fieldcage_core::tables::{self};
use fieldcage_core::{Error, Result};

use crate::*;

impl Service {
    /// Every change of one record, oldest first.
    pub fn history(&self, req: RecordRef) -> Result<Vec<Change>> {
        tables::get(&req.table)
            .ok_or_else(|| Error::invalid("request", "table", &req.table, "is not a table"))?;
        let store = self.store();
        let mut entries =
            fieldcage_core::store::log::row_entries(store.conn(), &req.table, &req.id.to_string())?;
        entries.sort_by(|a, b| (a.hlc, &a.device_id, a.seq).cmp(&(b.hlc, &b.device_id, b.seq)));
        Ok(entries
            .into_iter()
            .map(|e| {
                let hlc = fieldcage_core::store::Hlc(e.hlc);
                Change {
                    device_id: e.device_id,
                    seq: e.seq,
                    at: DateTime::from_timestamp_millis(hlc.millis())
                        .unwrap_or_default()
                        .to_rfc3339_opts(chrono::SecondsFormat::Secs, true),
                    group: hlc.0,
                    op: e.op.as_str().to_owned(),
                    field: e.field,
                    old: json_value(e.old_value),
                    new: json_value(e.new_value),
                }
            })
            .collect())
    }

    /// Undo the latest change of a record made on this device: an insert is
    /// deleted, an update has its fields set back. Refused when the record
    /// changed since on another device.
    pub fn undo(&self, req: RecordRef) -> Result<Undone> {
        let schema = editable_table(&req.table)?;
        self.write(|w, _| {
            let id = req.id.to_string();
            let mut log = fieldcage_core::store::log::row_entries(w.conn(), &req.table, &id)?;
            log.sort_by_key(|e| std::cmp::Reverse((e.hlc, e.seq)));
            let entries: Vec<(String, i64, String, Option<String>, Value)> = log
                .into_iter()
                .map(|e| {
                    (
                        e.device_id,
                        e.hlc,
                        e.op.as_str().to_owned(),
                        e.field,
                        e.old_value,
                    )
                })
                .collect();
            let Some((device, hlc, op, _, _)) = entries.first().cloned() else {
                return Err(not_found(&req.table, req.id));
            };
            if device != w.device_id() {
                return Err(Error::State(format!(
                    "the latest change of this {} was made on another device; edit it instead",
                    req.table
                )));
            }
            let group: Vec<&(String, i64, String, Option<String>, Value)> = entries
                .iter()
                .filter(|e| e.1 == hlc && e.0 == device)
                .collect();
            match op.as_str() {
                "insert" => {
                    w.delete(schema, &id)?;
                    Ok(Undone {
                        table: req.table.clone(),
                        id: req.id,
                        action: "deleted".into(),
                        fields: vec![],
                    })
                }
                "update" => {
                    let changes: Vec<(&str, Value)> = group
                        .iter()
                        .filter_map(|e| e.3.as_deref().map(|f| (f, e.4.clone())))
                        .collect();
                    w.update_fields(schema, &id, &changes)?;
                    Ok(Undone {
                        table: req.table.clone(),
                        id: req.id,
                        action: "restored".into(),
                        fields: changes.iter().map(|(f, _)| (*f).to_owned()).collect(),
                    })
                }
                _ => Err(Error::State(format!(
                    "this {} was deleted; enter it again instead",
                    req.table
                ))),
            }
        })
    }
}

/// A record by table and id.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RecordRef {
    /// Table name.
    pub table: String,
    /// Row id.
    pub id: Uuid,
}

/// What an undo did.
#[derive(Debug, Clone, Serialize)]
pub struct Undone {
    /// Table.
    pub table: String,
    /// Id.
    pub id: Uuid,
    /// deleted (an insert undone) or restored (an update undone).
    pub action: String,
    /// Fields set back.
    pub fields: Vec<String>,
}

/// One change-log entry of a record.
#[derive(Debug, Clone, Serialize)]
pub struct Change {
    /// Device that made it.
    pub device_id: String,
    /// Its sequence number there.
    pub seq: i64,
    /// When (UTC, from the hybrid logical clock).
    pub at: String,
    /// Changes with the same group were saved together.
    pub group: i64,
    /// insert / update / delete.
    pub op: String,
    /// Field changed.
    pub field: Option<String>,
    /// Value before.
    pub old: Json,
    /// Value after.
    pub new: Json,
}
