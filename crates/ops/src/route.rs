//! The overview (experiment, field day, device) and the day's route: every
//! cage with what is due and overdue, by block.

use std::collections::{BTreeMap, HashMap};

use chrono::NaiveDate;
use serde::{Deserialize, Serialize};

use fieldcage_core::Result;
use fieldcage_core::model::*;

use crate::context::Context;
use crate::*;

impl Service {
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
}

/// A request about one field day (today when left out).
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct DayRequest {
    /// Local date, YYYY-MM-DD.
    #[serde(default)]
    pub date: Option<NaiveDate>,
}

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
