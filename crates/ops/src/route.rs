//! The overview (experiment, field day, device) and the day's route: every
//! cage with what is due and overdue, by block.

use std::collections::{BTreeMap, HashMap};

use chrono::NaiveDate;
use serde::{Deserialize, Serialize};

use fieldcage_core::Result;
use fieldcage_core::model::*;

use crate::*;
use fieldcage_core::season::Frame;
use fieldcage_core::season::schedule::{self, AsOf, PlanState, PlanStatus};

impl Service {
    /// The experiment, the field day and what the device knows.
    pub fn overview(&self, req: DayRequest) -> Result<Overview> {
        let store = self.store();
        let frame = Frame::load(&*store)?;
        let date = self.field_date(&frame.calendar, req.date);
        let pending: i64 = store.change_count()?;
        Ok(Overview {
            experiment_code: frame.experiment.code.clone(),
            experiment_title: frame.experiment.title.clone(),
            site: frame.site_name.clone(),
            start_date: frame.experiment.start_date,
            date,
            today: self.field_date(&frame.calendar, None),
            day: frame.calendar.day_of(date),
            device_id: store.device_id().to_owned(),
            device_name: store.device_name()?,
            logged_changes: pending,
            operations: OPERATIONS.iter().map(|(n, _)| *n).collect(),
        })
    }

    /// Today's route: every cage with what is due today, late (still within
    /// its grace days) and overdue, by block. A planned visit counts as made
    /// by the one rule of [`fieldcage_core::season::schedule::fulfils`], the
    /// same the day's-end checks use; the route judges the schedule at the
    /// start of the field day, the checks at the end of theirs.
    pub fn route(&self, req: DayRequest) -> Result<Route> {
        let store = self.store();
        let frame = Frame::load(&*store)?;
        let calendar = &frame.calendar;
        let date = self.field_date(calendar, req.date);
        let day = calendar.day_of(date);
        let mut by_cage: HashMap<EnclosureId, Vec<Visit>> = HashMap::new();
        for v in store.list::<Visit>()? {
            by_cage.entry(v.enclosure_id).or_default().push(v);
        }
        for visits in by_cage.values_mut() {
            visits.sort_by_key(|v| (v.visited_at, v.id));
        }
        let open_flags = fieldcage_core::checks::open_by_cage(&*store)?;
        let due = schedule::planned_on(&frame.schedule, day);
        let mut blocks: BTreeMap<String, Vec<RouteCage>> = BTreeMap::new();
        for (cage, treatment) in frame.assigned_cages() {
            let visits = by_cage.get(&cage.id).map(Vec::as_slice).unwrap_or_default();
            let plan = schedule::status(calendar, &frame.schedule, visits, day, AsOf::StartOf);
            let overdue = Planned::those(&plan, PlanState::Missed);
            let late = Planned::those(&plan, PlanState::Late);
            let today: Vec<&PlanState> = plan
                .iter()
                .filter(|p| p.entry.day == day)
                .map(|p| &p.state)
                .collect();
            let made = |s: &&PlanState| matches!(s, PlanState::Made { .. });
            let complete = |s: &&PlanState| {
                matches!(
                    s,
                    PlanState::Made {
                        completed: true,
                        ..
                    }
                )
            };
            let state = if !today.is_empty() && today.iter().all(complete) && late.is_empty() {
                CageState::Done
            } else if today.iter().any(made) {
                CageState::Partial
            } else if !today.is_empty() || !late.is_empty() {
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
                    treatment_code: treatment.code.clone(),
                    treatment_name: treatment.name.clone(),
                    due: due.clone(),
                    late,
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
    /// The field day the server opens on (its fixed day, else the local
    /// date now): a screen on another day says so.
    pub today: NaiveDate,
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

impl Planned {
    /// The planned visits of `plan` in `state` (late, missed), in schedule
    /// order: what the route and the sheet list.
    pub(crate) fn those(plan: &[PlanStatus<'_>], state: PlanState) -> Vec<Planned> {
        plan.iter()
            .filter(|p| p.state == state)
            .map(|p| Planned {
                kind: p.entry.kind,
                day: p.entry.day,
            })
            .collect()
    }
}

/// State of a cage on the route.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum CageState {
    /// Visits to make today (planned today, or late), none started.
    NotStarted,
    /// Some of today's planned visits started.
    Partial,
    /// Every visit planned today is complete and none is late.
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
    /// Kinds planned for today.
    pub due: Vec<VisitKind>,
    /// Planned visits of earlier days not made yet but still within their
    /// grace days: to do today.
    pub late: Vec<Planned>,
    /// Planned visits past their grace days without a visit.
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
