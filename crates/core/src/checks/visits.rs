//! Visit rules: planned visits not made, dates out of the season, visits
//! entered twice, surveys without a row for every taxon, and visits without an
//! observer.
//!
//! A planned visit is on time from its planned day to the planned day plus its
//! grace days; it is missing when the end of that last day has passed with no
//! visit of its kind that fulfils it (a visit whose `day` is the planned day,
//! or an unscheduled visit made within the window).

use std::collections::HashMap;

use chrono::NaiveDate;

use super::{Flag, Rule, Season};
use crate::model::*;
use crate::season::schedule::{self, AsOf, PlanState};

/// A planned visit not made.
pub const MISSING: Rule = Rule {
    id: "visits.missing",
    family: CheckFamily::Visits,
    severity: Severity::Error,
    looks_for: "a planned visit with no visit of its kind recorded by the planned day plus the grace days",
};
/// A visit dated after today.
pub const FUTURE: Rule = Rule {
    id: "visits.future",
    family: CheckFamily::Visits,
    severity: Severity::Error,
    looks_for: "a visit dated after today (the day the checks run as of)",
};
/// A visit dated before the start.
pub const BEFORE_START: Rule = Rule {
    id: "visits.before_start",
    family: CheckFamily::Visits,
    severity: Severity::Error,
    looks_for: "a visit dated before the experiment's start date",
};
/// Two visits of one kind to one cage on one day.
pub const DUPLICATE: Rule = Rule {
    id: "visits.duplicate",
    family: CheckFamily::Visits,
    severity: Severity::Error,
    looks_for: "two visits of the same kind to one cage on one day (the later one is flagged)",
};
/// A survey without a row for every taxon.
pub const INCOMPLETE: Rule = Rule {
    id: "visits.incomplete",
    family: CheckFamily::Visits,
    severity: Severity::Error,
    looks_for: "a census without a row for every animal taxon, or a cover survey without a row for every plant taxon (a blank row records \"not assessed\")",
};
/// A visit without an observer.
pub const NO_OBSERVER: Rule = Rule {
    id: "visits.no_observer",
    family: CheckFamily::Visits,
    severity: Severity::Warning,
    looks_for: "a visit without an observer",
};

/// The visit rules.
pub const RULES: &[Rule] = &[
    MISSING,
    FUTURE,
    BEFORE_START,
    DUPLICATE,
    INCOMPLETE,
    NO_OBSERVER,
];

/// Raise the visit flags of the season.
pub fn check(season: &Season, out: &mut Vec<Flag>) {
    let today = season.day_of(season.today);
    let mut animals: Vec<&Taxon> = season
        .taxa
        .values()
        .filter(|t| t.role != Role::Plant)
        .collect();
    let mut plants: Vec<&Taxon> = season
        .taxa
        .values()
        .filter(|t| t.role == Role::Plant)
        .collect();
    animals.sort_by(|a, b| a.code.cmp(&b.code));
    plants.sort_by(|a, b| a.code.cmp(&b.code));
    for (cage, visits, _) in season.each_cage() {
        let plan = schedule::status(
            &season.calendar,
            &season.schedule,
            visits,
            today,
            AsOf::EndOf,
        );
        for status in plan {
            let entry = status.entry;
            let last_day = schedule::last_day(entry);
            if status.state == PlanState::Missed {
                out.push(
                    MISSING
                        .flag(
                            cage,
                            last_day,
                            cage.id,
                            format!(
                                "No {} visit is recorded for the {} planned on day {} ({}); it was due by day {last_day} ({} grace day{}).",
                                entry.kind,
                                entry.kind,
                                entry.day,
                                season.date_of(entry.day),
                                entry.grace_days,
                                if entry.grace_days == 1 { "" } else { "s" }
                            ),
                            format!(
                                "Visit {} and record the {} as soon as possible (set its day to {}); if the visit was made, enter it.",
                                cage.label, entry.kind, entry.day
                            ),
                        )
                        .related_to(entry.id),
                );
            }
        }

        let mut first_of_day: HashMap<(VisitKind, NaiveDate), &Visit> = HashMap::new();
        for visit in visits {
            let date = visit.visited_at.date_naive();
            let day = season.visit_day(visit);
            let when = visit.visited_at.format("%Y-%m-%d %H:%M");
            if date > season.today {
                out.push(FUTURE.flag(
                    cage,
                    day,
                    visit.id,
                    format!(
                        "The {} visit is dated {when}, after today ({}).",
                        visit.kind, season.today
                    ),
                    "Correct the visit's date and time (check the tablet's clock).".to_owned(),
                ));
            } else if date < season.calendar.start {
                out.push(BEFORE_START.flag(
                    cage,
                    day,
                    visit.id,
                    format!(
                        "The {} visit is dated {when}, before the experiment started ({}).",
                        visit.kind, season.calendar.start
                    ),
                    "Correct the visit's date and time (check the tablet's clock).".to_owned(),
                ));
            }
            match first_of_day.get(&(visit.kind, date)) {
                Some(first) => out.push(
                    DUPLICATE
                        .flag(
                            cage,
                            day,
                            visit.id,
                            format!(
                                "Two {} visits to {} on day {day} ({date}): at {} and at {}.",
                                visit.kind,
                                cage.label,
                                first.visited_at.format("%H:%M"),
                                visit.visited_at.format("%H:%M")
                            ),
                            "If one visit was entered twice, delete the copy and keep the one with the right values; if the cage was visited twice on purpose, confirm the flag with a note.".to_owned(),
                        )
                        .related_to(first.id),
                ),
                None => {
                    first_of_day.insert((visit.kind, date), visit);
                }
            }
            if visit
                .observer
                .as_deref()
                .is_none_or(|o| o.trim().is_empty())
            {
                out.push(NO_OBSERVER.flag(
                    cage,
                    day,
                    visit.id,
                    format!(
                        "The {} visit of day {day} ({when}) has no observer.",
                        visit.kind
                    ),
                    "Enter who made the visit.".to_owned(),
                ));
            }
            let (expected, present): (&[&Taxon], Vec<TaxonId>) = match visit.kind {
                VisitKind::Census => (
                    &animals,
                    Season::rows_of(&season.census, visit.id)
                        .iter()
                        .map(|c| c.taxon_id)
                        .collect(),
                ),
                VisitKind::Cover => {
                    let rows = Season::rows_of(&season.cover, visit.id);
                    // A survey with no value at all is cover.blank_survey.
                    if super::cover::is_blank(rows) {
                        continue;
                    }
                    (&plants, rows.iter().filter_map(|r| r.taxon_id).collect())
                }
                _ => continue,
            };
            let missing: Vec<&str> = expected
                .iter()
                .filter(|t| !present.contains(&t.id))
                .map(|t| t.code.as_str())
                .collect();
            if !missing.is_empty() {
                let what = if visit.kind == VisitKind::Census {
                    "animal"
                } else {
                    "plant"
                };
                out.push(INCOMPLETE.flag(
                    cage,
                    day,
                    visit.id,
                    format!(
                        "The {} of day {day} has no row for {} of the {} {what} taxa: {}.",
                        visit.kind,
                        missing.len(),
                        expected.len(),
                        missing.join(", ")
                    ),
                    "Enter the missing rows: 0 when looked for and not found, blank when not assessed.".to_owned(),
                ));
            }
        }
    }
}
