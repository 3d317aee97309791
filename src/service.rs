//! The operation set: everything the tablet UI does, as typed requests and
//! responses. The HTTP server and the Tauri shell both call [`Service::call`]
//! (an operation name and JSON arguments) and nothing else, so the two
//! transports cannot drift apart.
//!
//! A save returns only after its transaction has committed: what the UI shows
//! as saved is on disk.
//!
//! The sync operations (status, sync now, conflicts, settings) are in
//! `service/syncing.rs`; [`auto_sync`] syncs on its own whenever the target is back.

pub mod auto_sync;
mod syncing;

pub use syncing::*;

use std::collections::{BTreeMap, HashMap};
use std::sync::{Mutex, MutexGuard};

use chrono::{DateTime, FixedOffset, NaiveDate, Utc};
use rusqlite::OptionalExtension;
use rusqlite::types::Value;
use serde::de::DeserializeOwned;
use serde::{Deserialize, Serialize};
use serde_json::Value as Json;
use uuid::Uuid;

use crate::model::*;
use crate::record::{self, CoverEntry, CoverTarget, DamageEntry, NewVisit};
use crate::store::{Store, Writer};
use crate::tables::{self, display_value};
use crate::{Error, Result};

/// What went wrong with a call, in the one shape both transports send.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct Problem {
    /// Machine-readable code: `bad_request`, `invalid_value`, `not_found`,
    /// `conflict`, `target_unavailable` (the sync folder cannot be used now),
    /// `device_clash` (another database uses this device's identity),
    /// `unknown_operation`, `internal`.
    pub code: &'static str,
    /// A sentence for the person.
    pub message: String,
    /// The field at fault (`census.alive`, or a request path like `alive`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub field: Option<String>,
    /// The refused value, when there is one.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub value: Option<String>,
}

impl Problem {
    fn bad_request(field: Option<String>, message: String) -> Problem {
        Problem {
            code: "bad_request",
            message,
            field,
            value: None,
        }
    }
}

impl From<Error> for Problem {
    fn from(e: Error) -> Problem {
        let message = e.to_string();
        match e {
            Error::InvalidValue {
                table,
                field,
                value,
                reason,
            } => Problem {
                code: "invalid_value",
                message: format!("{table}.{field} {reason} (value: {value})"),
                field: Some(format!("{table}.{field}")),
                value: Some(value),
            },
            Error::NotFound { table, id } => Problem {
                code: "not_found",
                message,
                field: Some(format!("{table}.id")),
                value: Some(id),
            },
            Error::State(_) => Problem {
                code: "conflict",
                message,
                field: None,
                value: None,
            },
            Error::Import { file, column, .. } => Problem {
                code: "invalid_value",
                message,
                field: Some(format!("{file}:{column}")),
                value: None,
            },
            Error::TargetUnavailable { target, .. } => Problem {
                code: "target_unavailable",
                message,
                field: Some("device.sync_target".to_owned()),
                value: Some(target.display().to_string()),
            },
            Error::DeviceClash(_) => Problem {
                code: "device_clash",
                message,
                field: None,
                value: None,
            },
            _ => Problem {
                code: "internal",
                message,
                field: None,
                value: None,
            },
        }
    }
}

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
    // Sync (service/syncing.rs).
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
        Problem::bad_request(field, e.into_inner().to_string())
    })?;
    let res = op(service, req)?;
    serde_json::to_value(res).map_err(|e| Problem {
        code: "internal",
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
                code: "unknown_operation",
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

    fn store(&self) -> MutexGuard<'_, Store> {
        // A panic while holding the lock cannot leave a half-written
        // transaction (SQLite rolls it back), so the store stays usable.
        self.store.lock().unwrap_or_else(|p| p.into_inner())
    }

    /// Run a write; the result is returned only after the commit.
    fn write<T>(&self, f: impl FnOnce(&mut Writer<'_>, &Context) -> Result<T>) -> Result<T> {
        let mut store = self.store();
        let ctx = Context::load(&store)?;
        store.write(|w| f(w, &ctx))
    }

    fn field_date(&self, ctx: &Context, date: Option<NaiveDate>) -> NaiveDate {
        date.or(self.today)
            .unwrap_or_else(|| Utc::now().with_timezone(&ctx.offset).date_naive())
    }

    /// The experiment, the field day and what the device knows.
    pub fn overview(&self, req: DayRequest) -> Result<Overview> {
        let store = self.store();
        let ctx = Context::load(&store)?;
        let date = self.field_date(&ctx, req.date);
        let pending: i64 = store.change_count()?;
        Ok(Overview {
            experiment_code: ctx.experiment.code.clone(),
            experiment_title: ctx.experiment.title.clone(),
            site: ctx.site_name.clone(),
            start_date: ctx.experiment.start_date,
            date,
            day: (date - ctx.experiment.start_date).num_days(),
            device_id: store.device_id().to_owned(),
            device_name: store.device_name()?,
            logged_changes: pending,
            operations: OPERATIONS.iter().map(|(n, _)| *n).collect(),
        })
    }

    /// Today's route: every cage with what is due today and overdue, by block.
    pub fn route(&self, req: DayRequest) -> Result<Route> {
        let store = self.store();
        let ctx = Context::load(&store)?;
        let date = self.field_date(&ctx, req.date);
        let day = (date - ctx.experiment.start_date).num_days();
        let schedule = store.list::<ScheduleEntry>()?;
        let visits = store.list::<Visit>()?;
        let mut by_cage: HashMap<EnclosureId, Vec<&Visit>> = HashMap::new();
        for v in &visits {
            by_cage.entry(v.enclosure_id).or_default().push(v);
        }
        let open_flags: HashMap<EnclosureId, i64> = store
            .conn()
            .prepare(
                "SELECT enclosure_id, count(*) FROM flag WHERE status = 'open' AND deleted = 0 \
                 GROUP BY enclosure_id",
            )?
            .query_map([], |r| Ok((r.get(0)?, r.get(1)?)))?
            .collect::<rusqlite::Result<_>>()?;
        let mut blocks: BTreeMap<String, Vec<RouteCage>> = BTreeMap::new();
        for cage in &ctx.cages {
            let visits = by_cage.get(&cage.id).map(Vec::as_slice).unwrap_or_default();
            let due: Vec<VisitKind> = schedule
                .iter()
                .filter(|s| s.day == day)
                .map(|s| s.kind)
                .collect();
            let overdue: Vec<Planned> = schedule
                .iter()
                .filter(|s| s.day + s.grace_days < day)
                .filter(|s| {
                    !visits
                        .iter()
                        .any(|v| v.kind == s.kind && v.day == Some(s.day))
                })
                .map(|s| Planned {
                    kind: s.kind,
                    day: s.day,
                })
                .collect();
            let today: Vec<&&Visit> = visits
                .iter()
                .filter(|v| v.visited_at.date_naive() == date)
                .collect();
            let done = due
                .iter()
                .filter(|k| today.iter().any(|v| v.kind == **k && v.completed))
                .count();
            let started = due
                .iter()
                .filter(|k| today.iter().any(|v| v.kind == **k))
                .count();
            let state = if !due.is_empty() && done == due.len() {
                CageState::Done
            } else if started > 0 {
                CageState::Partial
            } else if !due.is_empty() {
                CageState::NotStarted
            } else if !overdue.is_empty() {
                CageState::Overdue
            } else {
                CageState::NothingDue
            };
            blocks
                .entry(cage.block.clone())
                .or_default()
                .push(RouteCage {
                    enclosure_id: cage.id,
                    label: cage.label.clone(),
                    treatment_code: cage.treatment.code.clone(),
                    treatment_name: cage.treatment.name.clone(),
                    due,
                    overdue,
                    state,
                    open_flags: open_flags.get(&cage.id).copied().unwrap_or(0),
                });
        }
        Ok(Route {
            date,
            day,
            blocks: blocks
                .into_iter()
                .map(|(code, mut cages)| {
                    cages.sort_by(|a, b| a.label.cmp(&b.label));
                    RouteBlock { code, cages }
                })
                .collect(),
        })
    }

    /// Everything the cage sheet shows for one cage on one day.
    pub fn sheet(&self, req: CageRequest) -> Result<Sheet> {
        let store = self.store();
        let ctx = Context::load(&store)?;
        let date = self.field_date(&ctx, req.date);
        let cage = ctx.cage(req.enclosure_id)?;
        let visits: Vec<Visit> = store
            .list::<Visit>()?
            .into_iter()
            .filter(|v| v.enclosure_id == cage.id)
            .collect();
        let today: Vec<Visit> = visits
            .iter()
            .filter(|v| v.visited_at.date_naive() == date)
            .cloned()
            .collect();
        let today_ids: Vec<VisitId> = today.iter().map(|v| v.id).collect();
        let earlier_ids: Vec<VisitId> = visits
            .iter()
            .filter(|v| v.visited_at.date_naive() < date)
            .map(|v| v.id)
            .collect();
        let visit_day: HashMap<VisitId, NaiveDate> = visits
            .iter()
            .map(|v| (v.id, v.visited_at.date_naive()))
            .collect();
        let taxa = store.list::<Taxon>()?;
        let plans: Vec<StockingPlan> = store
            .list::<StockingPlan>()?
            .into_iter()
            .filter(|p| p.treatment_id == cage.treatment.id)
            .collect();
        let events: Vec<StockingEvent> = store
            .list::<StockingEvent>()?
            .into_iter()
            .filter(|e| visit_day.contains_key(&e.visit_id))
            .collect();
        let census: Vec<Census> = store
            .list::<Census>()?
            .into_iter()
            .filter(|c| visit_day.contains_key(&c.visit_id))
            .collect();
        let first_stocking = visits
            .iter()
            .filter(|v| {
                events
                    .iter()
                    .any(|e| e.visit_id == v.id && e.kind == StockingKind::Initial)
            })
            .map(|v| v.visited_at.date_naive())
            .min();
        let animals: Vec<AnimalLine> = taxa
            .iter()
            .filter(|t| t.role != Role::Plant)
            .map(|t| {
                let plan = plans.iter().find(|p| p.taxon_id == t.id);
                let sum = |kind: StockingKind| -> i64 {
                    events
                        .iter()
                        .filter(|e| {
                            e.taxon_id == t.id && e.kind == kind && visit_day[&e.visit_id] <= date
                        })
                        .map(|e| e.count)
                        .sum()
                };
                let last = census
                    .iter()
                    .filter(|c| c.taxon_id == t.id && earlier_ids.contains(&c.visit_id))
                    .max_by_key(|c| visit_day[&c.visit_id]);
                let today_census = census
                    .iter()
                    .find(|c| c.taxon_id == t.id && today_ids.contains(&c.visit_id))
                    .cloned();
                let restock_below = plan.and_then(|p| p.restock_below);
                let restock = match (
                    today_census.as_ref().and_then(|c| c.alive),
                    restock_below,
                    plan,
                ) {
                    (Some(alive), Some(below), Some(p)) if alive < below => {
                        Some(p.initial_count - alive)
                    }
                    _ => None,
                };
                AnimalLine {
                    taxon: TaxonLine::from(t),
                    planned: plan.map(|p| p.initial_count),
                    restock_below,
                    stocked: sum(StockingKind::Initial),
                    restocked: sum(StockingKind::Restock),
                    removed: sum(StockingKind::Removal),
                    last_alive: last.and_then(|c| c.alive),
                    last_date: last.map(|c| visit_day[&c.visit_id]),
                    today: today_census,
                    restock_suggested: restock,
                }
            })
            .collect();
        let plants: Vec<TaxonLine> = taxa
            .iter()
            .filter(|t| t.role == Role::Plant)
            .map(TaxonLine::from)
            .collect();
        let cover_records: Vec<CoverRecord> = store
            .list::<CoverRecord>()?
            .into_iter()
            .filter(|c| today_ids.contains(&c.visit_id))
            .collect();
        let damage_all: Vec<DamageRecord> = store
            .list::<DamageRecord>()?
            .into_iter()
            .filter(|d| visit_day.contains_key(&d.visit_id))
            .collect();
        let leaves: Vec<LeafLine> = store
            .list::<TaggedLeaf>()?
            .into_iter()
            .filter(|l| l.enclosure_id == cage.id)
            .map(|l| {
                let previous = damage_all
                    .iter()
                    .filter(|d| d.leaf_id == l.id && earlier_ids.contains(&d.visit_id))
                    .max_by_key(|d| visit_day[&d.visit_id])
                    .cloned();
                let today = damage_all
                    .iter()
                    .find(|d| d.leaf_id == l.id && today_ids.contains(&d.visit_id))
                    .cloned();
                LeafLine {
                    taxon_code: taxa
                        .iter()
                        .find(|t| t.id == l.taxon_id)
                        .map(|t| t.code.clone())
                        .unwrap_or_default(),
                    leaf: l,
                    previous,
                    today,
                }
            })
            .collect();
        let stocking_today: Vec<StockingEvent> = events
            .into_iter()
            .filter(|e| today_ids.contains(&e.visit_id))
            .collect();
        let schedule = store.list::<ScheduleEntry>()?;
        let day = (date - ctx.experiment.start_date).num_days();
        Ok(Sheet {
            enclosure_id: cage.id,
            label: cage.label.clone(),
            block: cage.block.clone(),
            treatment: cage.treatment.clone(),
            date,
            day,
            days_since_stocking: first_stocking.map(|d| (date - d).num_days()),
            due: schedule
                .iter()
                .filter(|s| s.day == day)
                .map(|s| s.kind)
                .collect(),
            visits: today,
            animals,
            plants,
            cover: ctx.cover.clone(),
            damage: ctx.damage.clone(),
            cover_records,
            leaves,
            stocking_today,
        })
    }

    /// Find today's visit of a kind to a cage, or start one.
    pub fn start_visit(&self, req: VisitRequest) -> Result<Visit> {
        self.write(|w, ctx| {
            self.visit_for(
                w,
                ctx,
                req.enclosure_id,
                req.kind,
                req.date,
                req.observer.as_deref(),
            )
        })
    }

    /// Change a visit's observer, notes or completion.
    pub fn update_visit(&self, req: UpdateVisit) -> Result<Visit> {
        self.write(|w, _| {
            let mut visit: Visit = w
                .get(req.visit_id.0)?
                .ok_or_else(|| not_found("visit", req.visit_id.0))?;
            if let Some(o) = req.observer {
                visit.observer = Some(o).filter(|o| !o.trim().is_empty());
            }
            if let Some(n) = req.notes {
                visit.notes = Some(n).filter(|n| !n.trim().is_empty());
            }
            if let Some(c) = req.completed {
                visit.completed = c;
            }
            w.update(&visit)?;
            Ok(visit)
        })
    }

    /// Save the census of one animal taxon at a cage today.
    pub fn save_census(&self, req: SaveCensus) -> Result<Saved<Census>> {
        self.write(|w, ctx| {
            let visit = self.visit_for(
                w,
                ctx,
                req.enclosure_id,
                VisitKind::Census,
                req.date,
                req.observer.as_deref(),
            )?;
            let row = record::census(w, visit.id, req.taxon_id, req.alive, req.dead, req.missing)?;
            Ok(Saved::new(row, visit.id))
        })
    }

    /// Record animals put in or taken out.
    pub fn save_stocking(&self, req: SaveStocking) -> Result<Saved<StockingEvent>> {
        self.write(|w, ctx| {
            let kind = if req.kind == StockingKind::Initial {
                VisitKind::Stocking
            } else {
                VisitKind::Census
            };
            let visit = self.visit_for(
                w,
                ctx,
                req.enclosure_id,
                kind,
                req.date,
                req.observer.as_deref(),
            )?;
            let row = record::stock(w, visit.id, req.taxon_id, req.kind, req.count, req.stage)?;
            Ok(Saved::new(row, visit.id))
        })
    }

    /// Save the cover of one plant or ground category today.
    pub fn save_cover(&self, req: SaveCover) -> Result<Saved<CoverRecord>> {
        let target = match (req.taxon_id, req.category) {
            (Some(t), None) => CoverTarget::Taxon(t),
            (None, Some(c)) => CoverTarget::Category(c),
            _ => {
                return Err(Error::invalid(
                    "cover_record",
                    "taxon_id",
                    "(both or neither)",
                    "give either taxon_id or category",
                ));
            }
        };
        let entry = match (req.percent, req.class_code, req.pin_hits) {
            (Some(x), None, None) => CoverEntry::Percent(x),
            (None, Some(c), None) => CoverEntry::Class(c),
            (None, None, Some(h)) => CoverEntry::Pins(h),
            (None, None, None) => CoverEntry::NotAssessed,
            _ => {
                return Err(Error::invalid(
                    "cover_record",
                    "value",
                    "(several)",
                    "give one of percent, class_code or pin_hits",
                ));
            }
        };
        self.write(|w, ctx| {
            let visit = self.visit_for(
                w,
                ctx,
                req.enclosure_id,
                VisitKind::Cover,
                req.date,
                req.observer.as_deref(),
            )?;
            let row = record::cover(w, visit.id, target, entry)?;
            Ok(Saved::new(row, visit.id))
        })
    }

    /// Save the damage of one tagged leaf today.
    pub fn save_damage(&self, req: SaveDamage) -> Result<Saved<DamageRecord>> {
        let entry = match (req.class_code, req.percent) {
            (Some(c), None) => DamageEntry::Class(c),
            (None, Some(x)) => DamageEntry::Percent(x),
            _ => {
                return Err(Error::invalid(
                    "damage_record",
                    "value",
                    "(none or both)",
                    "give one of class_code or percent",
                ));
            }
        };
        self.write(|w, ctx| {
            let leaf: TaggedLeaf = w
                .get(req.leaf_id.0)?
                .ok_or_else(|| not_found("tagged_leaf", req.leaf_id.0))?;
            if leaf.fate.is_some() {
                return Err(Error::invalid(
                    "damage_record",
                    "leaf_id",
                    &leaf.tag_label,
                    format!(
                        "the leaf is {}; score its replacement instead",
                        leaf.fate.map(|f| f.as_str()).unwrap_or("gone")
                    ),
                ));
            }
            let visit = self.visit_for(
                w,
                ctx,
                leaf.enclosure_id,
                VisitKind::Damage,
                req.date,
                req.observer.as_deref(),
            )?;
            let row = record::damage(w, visit.id, leaf.id, entry)?;
            Ok(Saved::new(row, visit.id))
        })
    }

    /// Tag a new leaf on a cage's plant.
    pub fn tag_leaf(&self, req: TagLeaf) -> Result<TaggedLeaf> {
        self.write(|w, ctx| {
            let date = self.field_date(ctx, req.date);
            record::tag_leaf(
                w,
                req.enclosure_id,
                req.taxon_id,
                req.tag_label.trim(),
                date,
                req.replaces,
            )
        })
    }

    /// Record that a leaf is lost, or lost and replaced by a newly tagged one.
    pub fn set_leaf_fate(&self, req: LeafFateRequest) -> Result<TaggedLeaf> {
        self.write(|w, ctx| {
            let date = self.field_date(ctx, req.date);
            let leaf: TaggedLeaf = w
                .get(req.leaf_id.0)?
                .ok_or_else(|| not_found("tagged_leaf", req.leaf_id.0))?;
            record::set_leaf_fate(w, leaf.id, req.fate, date)?;
            match (req.fate, req.replacement_label) {
                (LeafFate::Replaced, Some(label)) => record::tag_leaf(
                    w,
                    leaf.enclosure_id,
                    leaf.taxon_id,
                    label.trim(),
                    date,
                    Some(leaf.id),
                ),
                (LeafFate::Replaced, None) => Err(Error::invalid(
                    "tagged_leaf",
                    "replacement_label",
                    "(empty)",
                    "a replaced leaf needs the label of the new tag",
                )),
                (LeafFate::Lost, _) => w
                    .get(leaf.id.0)?
                    .ok_or_else(|| not_found("tagged_leaf", leaf.id.0)),
            }
        })
    }

    /// Delete a field record (a tombstone; the change log keeps it).
    pub fn delete_record(&self, req: RecordRef) -> Result<Deleted> {
        let schema = editable_table(&req.table)?;
        self.write(|w, _| w.delete(schema, &req.id.to_string()))?;
        Ok(Deleted {
            table: req.table,
            id: req.id,
        })
    }

    /// Every change of one record, oldest first.
    pub fn history(&self, req: RecordRef) -> Result<Vec<Change>> {
        tables::get(&req.table)
            .ok_or_else(|| Error::invalid("request", "table", &req.table, "is not a table"))?;
        let store = self.store();
        let mut entries =
            crate::store::log::row_entries(store.conn(), &req.table, &req.id.to_string())?;
        entries.sort_by(|a, b| (a.hlc, &a.device_id, a.seq).cmp(&(b.hlc, &b.device_id, b.seq)));
        Ok(entries
            .into_iter()
            .map(|e| {
                let hlc = crate::store::Hlc(e.hlc);
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
            let mut log = crate::store::log::row_entries(w.conn(), &req.table, &id)?;
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

    /// Run the day's-end checks (the field day, or the whole season), store
    /// the flags and return them with their status.
    pub fn review(&self, req: ReviewRequest) -> Result<crate::checks::Report> {
        let mut store = self.store();
        let ctx = Context::load(&store)?;
        let date = self.field_date(&ctx, req.date);
        let scope = if req.season {
            crate::checks::Scope::Season
        } else {
            crate::checks::Scope::Day(date)
        };
        crate::checks::run(&mut store, &scope, date)
    }

    /// Confirm a flag: the data are right as recorded, for the reason given.
    pub fn confirm_flag(&self, req: ConfirmFlag) -> Result<crate::checks::ReportedFlag> {
        let mut store = self.store();
        crate::checks::confirm(&mut store, &req.flag_id, &req.note)
    }

    /// The season's results for the results screen: the chart data, the
    /// treatments, what each part assumes and how the data were handled.
    /// Reads only; the analysis runs on the stored rows as they are now,
    /// through a connection of its own, so that saves made meanwhile do not
    /// wait for it (about a second on a 200-cage season).
    pub fn results(&self, req: ResultsRequest) -> Result<ResultsView> {
        let options = crate::analysis::Options {
            missing_as: req.missing_as.unwrap_or_default(),
            ..crate::analysis::Options::default()
        };
        let reader = Store::open_reader(&self.path)?;
        let r = reader.read_snapshot(|s| crate::analysis::analyse(s, &options))?;
        Ok(ResultsView {
            title: r
                .experiment
                .as_ref()
                .map(|(code, title)| format!("{title} ({code})")),
            charts: crate::analysis::charts::charts(&r),
            assumptions: crate::analysis::report::assumptions(&r),
            treatments: r.treatments,
            notes: r.notes,
            options: r.options,
        })
    }

    /// Today's visit of `kind` to a cage, started if there is none. A new
    /// visit fulfils the scheduled day of that kind: today's, or an earlier
    /// one not yet visited and still within its grace days; otherwise it is
    /// unscheduled.
    fn visit_for(
        &self,
        w: &mut Writer<'_>,
        ctx: &Context,
        enclosure: EnclosureId,
        kind: VisitKind,
        date: Option<NaiveDate>,
        observer: Option<&str>,
    ) -> Result<Visit> {
        let date = self.field_date(ctx, date);
        ctx.cage(enclosure)?;
        let observer = observer.map(str::trim).filter(|o| !o.is_empty());
        let existing: Option<VisitId> = w
            .conn()
            .query_row(
                "SELECT id FROM visit WHERE enclosure_id = ?1 AND kind = ?2 AND deleted = 0 \
                 AND substr(visited_at, 1, 10) = ?3 ORDER BY id DESC LIMIT 1",
                rusqlite::params![enclosure, kind.as_str(), date.to_string()],
                |r| r.get(0),
            )
            .optional()?;
        if let Some(id) = existing {
            let mut visit: Visit = w.get(id.0)?.ok_or_else(|| not_found("visit", id.0))?;
            if visit.observer.is_none() && observer.is_some() {
                visit.observer = observer.map(str::to_owned);
                w.update(&visit)?;
            }
            return Ok(visit);
        }
        let day = (date - ctx.experiment.start_date).num_days();
        let done: Vec<i64> = w
            .conn()
            .prepare("SELECT day FROM visit WHERE enclosure_id = ?1 AND kind = ?2 AND deleted = 0 AND day IS NOT NULL")?
            .query_map(rusqlite::params![enclosure, kind.as_str()], |r| r.get(0))?
            .collect::<rusqlite::Result<_>>()?;
        // Today's planned day, or an earlier one still within its grace days.
        let planned: Option<i64> = w
            .conn()
            .prepare(
                "SELECT day FROM schedule_entry WHERE kind = ?1 AND deleted = 0 \
                 AND day <= ?2 AND day + grace_days >= ?2 ORDER BY day DESC",
            )?
            .query_map(rusqlite::params![kind.as_str(), day], |r| {
                r.get::<_, i64>(0)
            })?
            .filter_map(|d| d.ok())
            .find(|d| *d == day || !done.contains(d));
        let now = Utc::now().with_timezone(&ctx.offset);
        let at = date
            .and_time(now.time())
            .and_local_timezone(ctx.offset)
            .single()
            .unwrap_or(now);
        record::start_visit(
            w,
            NewVisit {
                enclosure_id: enclosure,
                kind,
                day: planned,
                visited_at: at,
                observer: observer.map(str::to_owned),
                // The device name as set now (the settings screen can change it).
                device: Some(w.conn().query_row(
                    "SELECT name FROM local_device WHERE singleton = 1",
                    [],
                    |r| r.get(0),
                )?),
            },
        )
    }
}

fn not_found(table: &str, id: impl std::fmt::Display) -> Error {
    Error::NotFound {
        table: table.to_owned(),
        id: id.to_string(),
    }
}

/// Tables whose rows the crew may delete or undo from the UI.
fn editable_table(name: &str) -> Result<&'static tables::TableSchema> {
    const EDITABLE: &[&str] = &[
        "visit",
        "stocking_event",
        "census",
        "cover_record",
        "damage_record",
        "tagged_leaf",
    ];
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

fn json_value(v: Value) -> Json {
    match v {
        Value::Null => Json::Null,
        Value::Integer(i) => Json::from(i),
        Value::Real(x) => serde_json::Number::from_f64(x).map_or(Json::Null, Json::Number),
        Value::Text(t) => Json::String(t),
        other => Json::String(display_value(&other)),
    }
}

/// What every operation needs to know about the experiment.
struct Context {
    experiment: Experiment,
    site_name: String,
    offset: FixedOffset,
    cages: Vec<CageInfo>,
    cover: CoverInfo,
    damage: DamageInfo,
}

struct CageInfo {
    id: EnclosureId,
    label: String,
    block: String,
    treatment: Treatment,
}

impl Context {
    fn load(store: &Store) -> Result<Context> {
        let experiment = store
            .list::<Experiment>()?
            .into_iter()
            .next()
            .ok_or_else(|| {
                Error::State("the database holds no experiment yet; run fieldcage init".into())
            })?;
        let offset: FixedOffset = experiment.utc_offset.parse().map_err(|_| {
            Error::invalid(
                "experiment",
                "utc_offset",
                &experiment.utc_offset,
                "is not an offset",
            )
        })?;
        let site_name = store
            .list::<Site>()?
            .into_iter()
            .next()
            .map(|s| s.name)
            .unwrap_or_default();
        let blocks: HashMap<BlockId, String> = store
            .list::<Block>()?
            .into_iter()
            .map(|b| (b.id, b.code))
            .collect();
        let treatments: HashMap<TreatmentId, Treatment> = store
            .list::<Treatment>()?
            .into_iter()
            .map(|t| (t.id, t))
            .collect();
        let assigned: HashMap<EnclosureId, TreatmentId> = store
            .list::<Assignment>()?
            .into_iter()
            .map(|a| (a.enclosure_id, a.treatment_id))
            .collect();
        let cages = store
            .list::<Enclosure>()?
            .into_iter()
            .filter_map(|e| {
                let treatment = treatments.get(assigned.get(&e.id)?)?.clone();
                Some(CageInfo {
                    id: e.id,
                    block: blocks.get(&e.block_id).cloned().unwrap_or_default(),
                    label: e.label,
                    treatment,
                })
            })
            .collect();
        let scales = store.list::<ScaleClass>()?;
        let classes_of = |scale: Option<ScaleId>| -> Vec<ClassLine> {
            let mut v: Vec<ClassLine> = scales
                .iter()
                .filter(|c| Some(c.scale_id) == scale)
                .map(|c| ClassLine {
                    code: c.code.clone(),
                    lower_pct: c.lower_pct,
                    upper_pct: c.upper_pct,
                    midpoint_pct: c.midpoint_pct,
                    description: c.description.clone(),
                    sort_order: c.sort_order,
                })
                .collect();
            v.sort_by_key(|c| c.sort_order);
            v
        };
        let protocol = store
            .list::<CoverProtocol>()?
            .into_iter()
            .next()
            .ok_or_else(|| Error::State("the experiment has no cover protocol".into()))?;
        let ground = store
            .list::<GroundCategory>()?
            .into_iter()
            .filter(|g| g.protocol_id == protocol.id)
            .map(|g| CategoryLine {
                code: g.code,
                name: g.name,
            })
            .collect();
        let cover = CoverInfo {
            method: protocol.method,
            layered: protocol.layered,
            pins_per_frame: protocol.pins_per_frame,
            hit_rule: protocol.hit_rule,
            tolerance_pct: protocol.tolerance_pct,
            classes: classes_of(protocol.scale_id),
            ground,
        };
        let dp = store
            .list::<DamageProtocol>()?
            .into_iter()
            .next()
            .ok_or_else(|| Error::State("the experiment has no damage protocol".into()))?;
        let damage = DamageInfo {
            method: dp.method,
            leaves_per_enclosure: dp.leaves_per_enclosure,
            classes: classes_of(dp.scale_id),
        };
        Ok(Context {
            experiment,
            site_name,
            offset,
            cages,
            cover,
            damage,
        })
    }

    fn cage(&self, id: EnclosureId) -> Result<&CageInfo> {
        self.cages
            .iter()
            .find(|c| c.id == id)
            .ok_or_else(|| not_found("enclosure", id))
    }
}

// ----- requests -----

/// A request about one field day (today when left out).
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct DayRequest {
    /// Local date, YYYY-MM-DD.
    #[serde(default)]
    pub date: Option<NaiveDate>,
}

/// A request about one cage on one day.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CageRequest {
    /// The cage.
    pub enclosure_id: EnclosureId,
    /// Local date (today when left out).
    #[serde(default)]
    pub date: Option<NaiveDate>,
}

/// Start (or find) today's visit of a kind.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct VisitRequest {
    /// The cage.
    pub enclosure_id: EnclosureId,
    /// What for.
    pub kind: VisitKind,
    /// Local date (today when left out).
    #[serde(default)]
    pub date: Option<NaiveDate>,
    /// Who records.
    #[serde(default)]
    pub observer: Option<String>,
}

/// Change a visit.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct UpdateVisit {
    /// The visit.
    pub visit_id: VisitId,
    /// New observer (empty clears).
    #[serde(default)]
    pub observer: Option<String>,
    /// New notes (empty clears).
    #[serde(default)]
    pub notes: Option<String>,
    /// Mark complete or not.
    #[serde(default)]
    pub completed: Option<bool>,
}

/// Save one census line.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SaveCensus {
    /// The cage.
    pub enclosure_id: EnclosureId,
    /// The animal taxon.
    pub taxon_id: TaxonId,
    /// Found alive (null = not assessed).
    pub alive: Option<i64>,
    /// Found dead (null = not assessed).
    pub dead: Option<i64>,
    /// Not found (null = not assessed).
    pub missing: Option<i64>,
    /// Local date (today when left out).
    #[serde(default)]
    pub date: Option<NaiveDate>,
    /// Who records.
    #[serde(default)]
    pub observer: Option<String>,
}

/// Save one stocking event.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SaveStocking {
    /// The cage.
    pub enclosure_id: EnclosureId,
    /// The animal taxon.
    pub taxon_id: TaxonId,
    /// initial / restock / removal.
    pub kind: StockingKind,
    /// How many.
    pub count: i64,
    /// Life stage.
    #[serde(default)]
    pub stage: Option<String>,
    /// Local date (today when left out).
    #[serde(default)]
    pub date: Option<NaiveDate>,
    /// Who records.
    #[serde(default)]
    pub observer: Option<String>,
}

/// Save one cover value: a taxon or a category, and one value by the method.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SaveCover {
    /// The cage.
    pub enclosure_id: EnclosureId,
    /// A plant taxon…
    #[serde(default)]
    pub taxon_id: Option<TaxonId>,
    /// …or a ground category code (or "vegetation").
    #[serde(default)]
    pub category: Option<String>,
    /// Visual percent (method percent).
    #[serde(default)]
    pub percent: Option<f64>,
    /// Class code (method class).
    #[serde(default)]
    pub class_code: Option<String>,
    /// Pin hits (method pins).
    #[serde(default)]
    pub pin_hits: Option<i64>,
    /// Local date (today when left out).
    #[serde(default)]
    pub date: Option<NaiveDate>,
    /// Who records.
    #[serde(default)]
    pub observer: Option<String>,
}

/// Save the damage of one tagged leaf.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SaveDamage {
    /// The leaf.
    pub leaf_id: LeafId,
    /// Class code (method class).
    #[serde(default)]
    pub class_code: Option<String>,
    /// Percent (method percent).
    #[serde(default)]
    pub percent: Option<f64>,
    /// Local date (today when left out).
    #[serde(default)]
    pub date: Option<NaiveDate>,
    /// Who records.
    #[serde(default)]
    pub observer: Option<String>,
}

/// Tag a leaf.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TagLeaf {
    /// The cage.
    pub enclosure_id: EnclosureId,
    /// The plant taxon.
    pub taxon_id: TaxonId,
    /// Label on the tag.
    pub tag_label: String,
    /// Leaf this one replaces.
    #[serde(default)]
    pub replaces: Option<LeafId>,
    /// Local date (today when left out).
    #[serde(default)]
    pub date: Option<NaiveDate>,
}

/// Set a leaf's fate.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct LeafFateRequest {
    /// The leaf.
    pub leaf_id: LeafId,
    /// lost / replaced.
    pub fate: LeafFate,
    /// Label of the new tag (replaced).
    #[serde(default)]
    pub replacement_label: Option<String>,
    /// Local date (today when left out).
    #[serde(default)]
    pub date: Option<NaiveDate>,
}

/// Run the checks of the field day, or of the whole season.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ReviewRequest {
    /// Local date (today when left out).
    #[serde(default)]
    pub date: Option<NaiveDate>,
    /// Check the whole season instead of one day.
    #[serde(default)]
    pub season: bool,
}

/// Analyse the season for the results screen.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ResultsRequest {
    /// How animals not found at a census count (`dead`, the default, or
    /// `censored`).
    #[serde(default)]
    pub missing_as: Option<crate::analysis::MissingRule>,
}

/// What the results screen shows.
#[derive(Debug, Clone, Serialize)]
pub struct ResultsView {
    /// Experiment title and code, when the database holds one.
    pub title: Option<String>,
    /// Treatments and the roles the contrasts give them.
    pub treatments: Vec<crate::analysis::TreatmentRole>,
    /// The chart data.
    pub charts: crate::analysis::charts::Charts,
    /// What each part of the results assumes.
    pub assumptions: crate::analysis::report::Assumptions,
    /// How the data were handled (visits set aside, impossible counts, …).
    pub notes: Vec<String>,
    /// The analysis options used.
    pub options: crate::analysis::Options,
}

/// Confirm one flag with a note.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ConfirmFlag {
    /// The flag's id.
    pub flag_id: String,
    /// Why the data are right as recorded.
    pub note: String,
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

// ----- responses -----

/// The experiment and the field day.
#[derive(Debug, Clone, Serialize)]
pub struct Overview {
    /// Experiment code.
    pub experiment_code: String,
    /// Experiment title.
    pub experiment_title: String,
    /// Site name.
    pub site: String,
    /// Day 0.
    pub start_date: NaiveDate,
    /// The field day.
    pub date: NaiveDate,
    /// Day of the experiment.
    pub day: i64,
    /// This device.
    pub device_id: String,
    /// Its name.
    pub device_name: String,
    /// Changes in the log.
    pub logged_changes: i64,
    /// Operation names.
    pub operations: Vec<&'static str>,
}

/// A scheduled visit.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct Planned {
    /// Kind.
    pub kind: VisitKind,
    /// Day.
    pub day: i64,
}

/// State of a cage on the route.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum CageState {
    /// Visits due today, none started.
    NotStarted,
    /// Some of today's visits started.
    Partial,
    /// Every visit due today is complete.
    Done,
    /// Nothing due today but an earlier visit was missed.
    Overdue,
    /// Nothing due.
    NothingDue,
}

/// One cage on the route.
#[derive(Debug, Clone, Serialize)]
pub struct RouteCage {
    /// Id.
    pub enclosure_id: EnclosureId,
    /// Label.
    pub label: String,
    /// Treatment code.
    pub treatment_code: String,
    /// Treatment name.
    pub treatment_name: String,
    /// Kinds due today.
    pub due: Vec<VisitKind>,
    /// Scheduled visits past their grace days without a visit.
    pub overdue: Vec<Planned>,
    /// Where the cage stands today.
    pub state: CageState,
    /// Open flags of the day's-end checks (as last run).
    pub open_flags: i64,
}

/// One block of the route.
#[derive(Debug, Clone, Serialize)]
pub struct RouteBlock {
    /// Block code.
    pub code: String,
    /// Its cages.
    pub cages: Vec<RouteCage>,
}

/// The day's route.
#[derive(Debug, Clone, Serialize)]
pub struct Route {
    /// Field day.
    pub date: NaiveDate,
    /// Day of the experiment.
    pub day: i64,
    /// Blocks in order.
    pub blocks: Vec<RouteBlock>,
}

/// A taxon as the sheet shows it.
#[derive(Debug, Clone, Serialize)]
pub struct TaxonLine {
    /// Id.
    pub id: TaxonId,
    /// Code.
    pub code: String,
    /// Scientific name.
    pub scientific_name: String,
    /// Common name.
    pub common_name: Option<String>,
    /// Role.
    pub role: Role,
    /// Plant group.
    pub plant_group: Option<PlantGroup>,
}

impl From<&Taxon> for TaxonLine {
    fn from(t: &Taxon) -> TaxonLine {
        TaxonLine {
            id: t.id,
            code: t.code.clone(),
            scientific_name: t.scientific_name.clone(),
            common_name: t.common_name.clone(),
            role: t.role,
            plant_group: t.plant_group,
        }
    }
}

/// An animal taxon on the sheet, with its stocking summary.
#[derive(Debug, Clone, Serialize)]
pub struct AnimalLine {
    /// The taxon.
    pub taxon: TaxonLine,
    /// Planned per cage by the treatment (none = should not be here).
    pub planned: Option<i64>,
    /// Restock threshold.
    pub restock_below: Option<i64>,
    /// Stocked initially.
    pub stocked: i64,
    /// Added since.
    pub restocked: i64,
    /// Taken out.
    pub removed: i64,
    /// Alive at the previous census.
    pub last_alive: Option<i64>,
    /// Date of the previous census.
    pub last_date: Option<NaiveDate>,
    /// Today's census, if entered.
    pub today: Option<Census>,
    /// How many to add to reach the planned count, when below the threshold.
    pub restock_suggested: Option<i64>,
}

/// A class of a scale.
#[derive(Debug, Clone, Serialize)]
pub struct ClassLine {
    /// Code.
    pub code: String,
    /// Lower limit, %.
    pub lower_pct: Option<f64>,
    /// Upper limit, %.
    pub upper_pct: Option<f64>,
    /// Midpoint, %.
    pub midpoint_pct: f64,
    /// Meaning.
    pub description: Option<String>,
    /// Position.
    pub sort_order: i64,
}

/// A ground category.
#[derive(Debug, Clone, Serialize)]
pub struct CategoryLine {
    /// Code.
    pub code: String,
    /// Name.
    pub name: String,
}

/// The cover protocol as the sheet needs it.
#[derive(Debug, Clone, Serialize)]
pub struct CoverInfo {
    /// Method.
    pub method: CoverMethod,
    /// Layered?
    pub layered: bool,
    /// Pins per frame.
    pub pins_per_frame: Option<i64>,
    /// Hit rule.
    pub hit_rule: Option<HitRule>,
    /// Band around 100, points.
    pub tolerance_pct: f64,
    /// Scale classes (method class).
    pub classes: Vec<ClassLine>,
    /// Ground categories.
    pub ground: Vec<CategoryLine>,
}

/// The damage protocol as the sheet needs it.
#[derive(Debug, Clone, Serialize)]
pub struct DamageInfo {
    /// Method.
    pub method: DamageMethod,
    /// Tagged leaves per cage.
    pub leaves_per_enclosure: i64,
    /// Scale classes (method class).
    pub classes: Vec<ClassLine>,
}

/// A tagged leaf on the sheet.
#[derive(Debug, Clone, Serialize)]
pub struct LeafLine {
    /// The leaf.
    pub leaf: TaggedLeaf,
    /// Its plant's code.
    pub taxon_code: String,
    /// The latest earlier score.
    pub previous: Option<DamageRecord>,
    /// Today's score.
    pub today: Option<DamageRecord>,
}

/// The cage sheet.
#[derive(Debug, Clone, Serialize)]
pub struct Sheet {
    /// Cage id.
    pub enclosure_id: EnclosureId,
    /// Label.
    pub label: String,
    /// Block code.
    pub block: String,
    /// Treatment.
    pub treatment: Treatment,
    /// Field day.
    pub date: NaiveDate,
    /// Day of the experiment.
    pub day: i64,
    /// Days since the first stocking.
    pub days_since_stocking: Option<i64>,
    /// Kinds due today by the schedule.
    pub due: Vec<VisitKind>,
    /// Today's visits.
    pub visits: Vec<Visit>,
    /// Animals: stocking summary and census.
    pub animals: Vec<AnimalLine>,
    /// Plants for cover.
    pub plants: Vec<TaxonLine>,
    /// Cover protocol.
    pub cover: CoverInfo,
    /// Damage protocol.
    pub damage: DamageInfo,
    /// Today's cover records.
    pub cover_records: Vec<CoverRecord>,
    /// Tagged leaves with scores.
    pub leaves: Vec<LeafLine>,
    /// Today's stocking events.
    pub stocking_today: Vec<StockingEvent>,
}

/// A saved record and the visit it belongs to.
#[derive(Debug, Clone, Serialize)]
pub struct Saved<T> {
    /// The record as stored.
    pub record: T,
    /// Its visit.
    pub visit_id: VisitId,
    /// Saved (committed) at, UTC.
    pub saved_at: String,
}

impl<T> Saved<T> {
    fn new(record: T, visit_id: VisitId) -> Saved<T> {
        Saved {
            record,
            visit_id,
            saved_at: Utc::now().to_rfc3339_opts(chrono::SecondsFormat::Millis, true),
        }
    }
}

/// A deleted record.
#[derive(Debug, Clone, Serialize)]
pub struct Deleted {
    /// Table.
    pub table: String,
    /// Id.
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

#[cfg(test)]
mod tests {
    use super::*;

    /// The results screen's analysis reads through a connection of its own:
    /// it finishes while another request holds the store (as a save or a
    /// sync does), so saves never queue behind it.
    #[test]
    fn results_do_not_wait_for_the_store() {
        let tmp = tempfile::tempdir().expect("temp dir");
        let mut store = Store::open(tmp.path().join("d.db")).expect("store");
        crate::demo::build(&mut store).expect("demo");
        let service = Service::new(store);
        let held = service.store();
        let (tx, rx) = std::sync::mpsc::channel();
        std::thread::scope(|s| {
            s.spawn(|| {
                let _ = tx.send(service.results(ResultsRequest::default()));
            });
            // A bounded wait for the answer, not a measure of speed.
            let answer = rx.recv_timeout(std::time::Duration::from_secs(120));
            drop(held);
            let view = answer.expect("results answered while the store was held");
            assert!(!view.expect("results").charts.effect_sizes.is_empty());
        });
    }
}
