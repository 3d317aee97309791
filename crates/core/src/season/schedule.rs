//! Planned visits and the one rule of which recorded visit fulfils which.
//!
//! A planned visit (a schedule entry: a kind and a day, with grace days after
//! it) is fulfilled by a visit of its kind to the cage that was recorded for
//! that planned day, or that was recorded for none and made within the
//! entry's window (its day to its last day). The route, the sheet, field
//! entry ([`super::visit_for`]) and the checks (`visits.missing`,
//! `damage.leaf_unscored`) all use this rule and nothing else.

use crate::model::{ScheduleEntry, Visit, VisitId, VisitKind};

use super::Calendar;

/// The last day a planned visit is on time: its day plus its grace days.
pub fn last_day(entry: &ScheduleEntry) -> i64 {
    entry.day + entry.grace_days
}

/// Whether `visit` fulfils the planned visit `entry` (same cage assumed).
pub fn fulfils(calendar: &Calendar, entry: &ScheduleEntry, visit: &Visit) -> bool {
    visit.kind == entry.kind
        && match visit.day {
            Some(day) => day == entry.day,
            None => (entry.day..=last_day(entry)).contains(&calendar.made_on(visit)),
        }
}

/// The first of a cage's visits (in the order given) that fulfils `entry`.
pub fn fulfilment<'v>(
    calendar: &Calendar,
    entry: &ScheduleEntry,
    cage_visits: &'v [Visit],
) -> Option<&'v Visit> {
    cage_visits.iter().find(|v| fulfils(calendar, entry, v))
}

/// Whether a visit fulfils any planned visit (an unplanned visit fulfils none).
pub fn fulfils_any(calendar: &Calendar, schedule: &[ScheduleEntry], visit: &Visit) -> bool {
    schedule.iter().any(|e| fulfils(calendar, e, visit))
}

/// When in the day the schedule is judged: the route at the start of the
/// field day (the day's own work is still to do), the checks at its end.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum AsOf {
    /// Before the day's work: a visit is missed once its last day has passed.
    StartOf,
    /// After the day's work: a visit is missed once its last day has ended.
    EndOf,
}

/// What a planned visit is on a day, for one cage.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum PlanState {
    /// Its day has not come.
    Upcoming,
    /// Planned for this day and not yet made.
    Due,
    /// Its day has passed but it is still within its grace days.
    Late,
    /// Not made, and its last day is over.
    Missed,
    /// Fulfilled by a recorded visit (`completed`: by one marked complete).
    Made {
        /// The visit that fulfils it (the first in time).
        visit: VisitId,
        /// Whether any fulfilling visit is marked complete.
        completed: bool,
    },
}

/// A planned visit and its state.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PlanStatus<'a> {
    /// The planned visit.
    pub entry: &'a ScheduleEntry,
    /// Its state on the day asked about.
    pub state: PlanState,
}

/// The state of every planned visit of a cage on `day`, in schedule order.
pub fn status<'a>(
    calendar: &Calendar,
    schedule: &'a [ScheduleEntry],
    cage_visits: &[Visit],
    day: i64,
    as_of: AsOf,
) -> Vec<PlanStatus<'a>> {
    schedule
        .iter()
        .map(|entry| {
            let mut fulfilling = cage_visits.iter().filter(|v| fulfils(calendar, entry, v));
            let state = match fulfilling.next() {
                Some(first) => PlanState::Made {
                    visit: first.id,
                    completed: first.completed || fulfilling.any(|v| v.completed),
                },
                None => {
                    let over = match as_of {
                        AsOf::StartOf => last_day(entry) < day,
                        AsOf::EndOf => last_day(entry) <= day,
                    };
                    if over {
                        PlanState::Missed
                    } else if entry.day == day {
                        PlanState::Due
                    } else if entry.day < day {
                        PlanState::Late
                    } else {
                        PlanState::Upcoming
                    }
                }
            };
            PlanStatus { entry, state }
        })
        .collect()
}

/// The kinds of visit planned for `day` itself, in schedule order.
pub fn planned_on(schedule: &[ScheduleEntry], day: i64) -> Vec<VisitKind> {
    schedule
        .iter()
        .filter(|e| e.day == day)
        .map(|e| e.kind)
        .collect()
}

/// The planned day a new visit of `kind` made on `day` is recorded for: the
/// latest planned visit of that kind whose window holds the day and that is
/// the day's own or not yet fulfilled. `None`: the visit is unplanned.
pub fn planned_day_for_new_visit(
    calendar: &Calendar,
    schedule: &[ScheduleEntry],
    kind: VisitKind,
    day: i64,
    cage_visits: &[Visit],
) -> Option<i64> {
    let mut open: Vec<&ScheduleEntry> = schedule
        .iter()
        .filter(|e| e.kind == kind && e.day <= day && day <= last_day(e))
        .collect();
    open.sort_by_key(|e| std::cmp::Reverse(e.day));
    open.into_iter()
        .find(|e| e.day == day || fulfilment(calendar, e, cage_visits).is_none())
        .map(|e| e.day)
}
