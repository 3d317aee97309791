//! The operation set: everything the tablet UI does, as typed requests and
//! responses, one module per screen or concern. The HTTP server and the Tauri
//! shell both call [`Service::call`] (an operation name and JSON arguments)
//! and nothing else, so the two transports cannot drift apart; what goes
//! wrong is a [`Problem`] with a typed [`ProblemCode`].
//!
//! A save returns only after its transaction has committed: what the UI shows
//! as saved is on disk.
//!
//! - [`route`]: the overview and the day's route;
//! - [`sheet`]: a cage's sheet;
//! - [`entry`]: visits, stocking, census, cover, damage, tagged leaves, deletes;
//! - [`history`]: a record's history and undo;
//! - [`review`]: the day's-end checks and confirmations;
//! - [`results`]: the results screen;
//! - [`sync`] and [`settings`]: sync now, its state, conflicts, the device's settings;
//! - [`auto_sync`]: sync on its own whenever the target is back.

pub mod auto_sync;
pub mod entry;
pub mod fields;
pub mod history;
#[cfg(feature = "args")]
pub mod launch;
mod problem;
pub mod results;
pub mod review;
pub mod route;
pub mod settings;
pub mod sheet;
pub mod sync;

pub use entry::*;
pub use history::*;
pub use problem::{Problem, ProblemCode};
pub use results::*;
pub use review::*;
pub use route::*;
pub use settings::*;
pub use sheet::*;
pub use sync::*;

/// The core this operation set stands on, for shells that depend on this
/// crate alone (the tablet app).
pub use fieldcage_core as core;

use std::sync::{Mutex, MutexGuard};

use chrono::NaiveDate;
use rusqlite::types::Value;
use serde::Serialize;
use serde::de::DeserializeOwned;
use serde_json::Value as Json;

use fieldcage_core::season::{Calendar, Frame};
use fieldcage_core::store::{Store, Writer};
use fieldcage_core::tables::display_value;
use fieldcage_core::{Error, Result};

/// The operation set over one database.
pub struct Service {
    store: Mutex<Store>,
    /// Where the database lives (long reads open their own connection).
    path: std::path::PathBuf,
    /// The field day the route opens on; `None` = the local date now.
    today: Option<NaiveDate>,
    /// What automatic sync last did (shown by `sync_status`).
    auto_sync: Mutex<auto_sync::AutoSyncState>,
}

impl std::fmt::Debug for Service {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Service")
            .field("today", &self.today)
            .finish_non_exhaustive()
    }
}

type Handler = fn(&Service, Json) -> std::result::Result<Json, Problem>;

/// Every operation: its name and handler. The list is the API.
pub const OPERATIONS: &[(&str, Handler)] = &[
    ("overview", |s, a| run(s, a, Service::overview)),
    ("route", |s, a| run(s, a, Service::route)),
    ("sheet", |s, a| run(s, a, Service::sheet)),
    ("start_visit", |s, a| run(s, a, Service::start_visit)),
    ("update_visit", |s, a| run(s, a, Service::update_visit)),
    ("save_census", |s, a| run(s, a, Service::save_census)),
    ("save_stocking", |s, a| run(s, a, Service::save_stocking)),
    ("save_cover", |s, a| run(s, a, Service::save_cover)),
    ("save_damage", |s, a| run(s, a, Service::save_damage)),
    ("tag_leaf", |s, a| run(s, a, Service::tag_leaf)),
    ("set_leaf_fate", |s, a| run(s, a, Service::set_leaf_fate)),
    ("delete_record", |s, a| run(s, a, Service::delete_record)),
    ("history", |s, a| run(s, a, Service::history)),
    ("undo", |s, a| run(s, a, Service::undo)),
    ("review", |s, a| run(s, a, Service::review)),
    ("confirm_flag", |s, a| run(s, a, Service::confirm_flag)),
    ("results", |s, a| run(s, a, Service::results)),
    // Sync and settings (sync.rs, settings.rs).
    ("sync_status", |s, a| run(s, a, Service::sync_status)),
    ("sync_now", |s, a| run(s, a, Service::sync_now)),
    ("conflicts", |s, a| run(s, a, Service::conflicts)),
    ("resolve_conflict", |s, a| {
        run(s, a, Service::resolve_conflict)
    }),
    ("settings", |s, a| run(s, a, Service::settings)),
    ("save_settings", |s, a| run(s, a, Service::save_settings)),
];

/// Parse the arguments (naming the field at fault), run, serialise.
fn run<Req: DeserializeOwned, Res: Serialize>(
    service: &Service,
    args: Json,
    op: fn(&Service, Req) -> Result<Res>,
) -> std::result::Result<Json, Problem> {
    let req: Req = serde_path_to_error::deserialize(args).map_err(|e| {
        let path = e.path().to_string();
        let field = (path != ".").then_some(path);
        let inner = e.into_inner().to_string();
        // In the sheet's words where the field is one the crew fills in.
        let message = match field.as_deref().and_then(fields::label) {
            Some(label) => format!("{label}: {inner}"),
            None => inner,
        };
        Problem::bad_request(field, message)
    })?;
    let res = op(service, req)?;
    serde_json::to_value(res).map_err(|e| Problem {
        code: ProblemCode::Internal,
        message: e.to_string(),
        field: None,
        value: None,
    })
}

impl Service {
    /// Serve `store`.
    pub fn new(store: Store) -> Service {
        Service {
            path: store.path().to_owned(),
            store: Mutex::new(store),
            today: None,
            auto_sync: Mutex::new(auto_sync::AutoSyncState::default()),
        }
    }

    /// Open the route on a fixed field day (the demo, tests).
    pub fn with_today(mut self, today: NaiveDate) -> Service {
        self.today = Some(today);
        self
    }

    /// Run one operation by name with JSON arguments.
    pub fn call(&self, op: &str, args: Json) -> std::result::Result<Json, Problem> {
        let handler = OPERATIONS
            .iter()
            .find(|(name, _)| *name == op)
            .map(|(_, h)| *h)
            .ok_or_else(|| Problem {
                code: ProblemCode::UnknownOperation,
                message: format!(
                    "there is no operation {op:?}; the operations are {}",
                    OPERATIONS
                        .iter()
                        .map(|(n, _)| *n)
                        .collect::<Vec<_>>()
                        .join(", ")
                ),
                field: None,
                value: Some(op.to_owned()),
            })?;
        handler(self, args)
    }

    pub(crate) fn store(&self) -> MutexGuard<'_, Store> {
        // A panic while holding the lock cannot leave a half-written
        // transaction (SQLite rolls it back), so the store stays usable.
        self.store.lock().unwrap_or_else(|p| p.into_inner())
    }

    /// Run a write with the season's frame as the transaction sees it; the
    /// result is returned only after the commit.
    pub(crate) fn write<T>(
        &self,
        f: impl FnOnce(&mut Writer<'_>, &Frame) -> Result<T>,
    ) -> Result<T> {
        self.store().write(|w| {
            let frame = Frame::load(w)?;
            f(w, &frame)
        })
    }

    /// [`Service::write`] for a save that may be sent more than once (a
    /// double tap, a retry after the connection dropped): with an operation
    /// id, the answer is kept in the same transaction, and a request whose
    /// id already has one is answered with it and writes nothing. The check
    /// runs inside the write transaction, so two copies arriving together
    /// (two processes, two threads) still write once.
    pub(crate) fn write_once<T: Serialize + DeserializeOwned>(
        &self,
        op_id: Option<uuid::Uuid>,
        operation: &'static str,
        f: impl FnOnce(&mut Writer<'_>, &Frame) -> Result<T>,
    ) -> Result<T> {
        let Some(op_id) = op_id else {
            return self.write(f);
        };
        let key = op_id.to_string();
        self.store().write(|w| {
            if let Some(receipt) = w.receipt(&key)? {
                if receipt.operation != operation {
                    return Err(Error::State(format!(
                        "operation id {key} was already used for {}; a new entry needs a new id",
                        receipt.operation
                    )));
                }
                return serde_json::from_str(&receipt.response).map_err(|e| {
                    Error::Invariant(format!("the kept answer of {key} does not read back: {e}"))
                });
            }
            let frame = Frame::load(w)?;
            let out = f(w, &frame)?;
            let response = serde_json::to_string(&out)
                .map_err(|e| Error::Invariant(format!("an answer that is not JSON: {e}")))?;
            w.keep_receipt(&key, operation, &response)?;
            Ok(out)
        })
    }

    /// The field day: the one asked for, else the server's fixed day, else
    /// today in the experiment's local time.
    pub(crate) fn field_date(&self, calendar: &Calendar, date: Option<NaiveDate>) -> NaiveDate {
        date.or(self.today).unwrap_or_else(|| calendar.today())
    }
}

pub(crate) fn not_found(table: &str, id: impl std::fmt::Display) -> Error {
    Error::NotFound {
        table: table.to_owned(),
        id: id.to_string(),
    }
}

/// A stored value as JSON (numbers stay numbers).
pub(crate) fn json_value(v: Value) -> Json {
    match v {
        Value::Null => Json::Null,
        Value::Integer(i) => Json::from(i),
        Value::Real(x) => serde_json::Number::from_f64(x).map_or(Json::Null, Json::Number),
        Value::Text(t) => Json::String(t),
        other => Json::String(display_value(&other)),
    }
}
