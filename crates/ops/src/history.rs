//! A record's history (every change of its fields, from the change log) and
//! undo of its last change.

use chrono::DateTime;
use serde::{Deserialize, Serialize};
use serde_json::Value as Json;
use uuid::Uuid;

use fieldcage_core::tables::{self};
use fieldcage_core::{Error, Result};

use fieldcage_core::season;
pub use fieldcage_core::season::{UndoAction, Undone};

use crate::*;

impl Service {
    /// Every change of one record, oldest first.
    pub fn history(&self, req: RecordRef) -> Result<Vec<Change>> {
        tables::get(&req.table)
            .ok_or_else(|| Error::invalid("request", "table", &req.table, "is not a table"))?;
        let store = self.store();
        let mut entries =
            fieldcage_core::store::log::row_entries(&*store, &req.table, &req.id.to_string())?;
        entries.sort_by(|a, b| (a.hlc, &a.device_id, a.seq).cmp(&(b.hlc, &b.device_id, b.seq)));
        let mut names: std::collections::HashMap<String, String> = Default::default();
        for e in &entries {
            if !names.contains_key(&e.device_id) {
                let name = fieldcage_core::sync::device_label(&*store, &e.device_id)?;
                names.insert(e.device_id.clone(), name);
            }
        }
        Ok(entries
            .into_iter()
            .map(|e| {
                let hlc = fieldcage_core::store::Hlc(e.hlc);
                Change {
                    device: names.get(&e.device_id).cloned().unwrap_or_default(),
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

    /// Undo the latest change of a record made on this device
    /// ([`fieldcage_core::season::undo`]).
    pub fn undo(&self, req: RecordRef) -> Result<Undone> {
        let schema = season::editable_table(&req.table)?;
        self.write_once(req.op_id, "undo", |w, _| season::undo(w, schema, req.id))
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
    /// For undo and delete: the request's own id (a second tap on Undo with
    /// the same id undoes once).
    #[serde(default)]
    pub op_id: Option<Uuid>,
}

/// One change-log entry of a record.
#[derive(Debug, Clone, Serialize)]
pub struct Change {
    /// Device that made it.
    pub device_id: String,
    /// That device's name (who made the change: each tablet is named for
    /// its crew in the settings).
    pub device: String,
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
