//! Day's-end checks: the rules that relate several records (cover totals,
//! counts against stocking, damage that decreases, missing visits, …), the
//! flags they raise, and the stored flags with their status and notes.
//!
//! Per-value rules (type, range, enum, pattern, required, references) are
//! constraints of the table schemas, enforced on every write and import, so
//! such values are never stored and no rule here looks for them;
//! DEVELOPERS.md lists where each of those protections lives.
//!
//! - Each rule is a [`Rule`] (an id of our own, `family.rule`, a family and a
//!   severity) in the module of its family: [`cover`], [`counts`], [`damage`],
//!   [`visits`]; [`RULES`] lists them all.
//! - [`raise`] reads one snapshot of the season ([`Season`]) and returns every
//!   [`Flag`] the rules raise; [`check`] keeps those of a [`Scope`] (one day,
//!   one cage, or the whole season).
//! - [`run`] raises the flags of a scope and reconciles them with the stored
//!   ones (the `flag` table) through the one write path, so every change is in
//!   the change log and syncs: a flag is identified by its rule, its record and
//!   its related record; a new flag is stored open; a flag no longer raised
//!   becomes fixed; a confirmed flag stays confirmed with its note; a fixed
//!   flag raised again is open again. Running the checks twice changes nothing.
//! - [`confirm`] marks a raised flag as right as recorded, with a note.
//!
//! Thresholds come from the protocol rows (`cover_protocol.tolerance_pct`)
//! or from [`Limits::DEFAULT`].

pub mod counts;
pub mod cover;
pub mod damage;
mod season;
mod stored;
pub mod visits;

use chrono::NaiveDate;
use serde::Serialize;
use uuid::Uuid;

pub use crate::model::CoverRow;
pub use season::{Cage, Season};
pub use stored::{
    Changes, MIN_ID_SUFFIX, Report, ReportedFlag, confirm, format_report, open_by_cage, run,
};

use crate::Result;
use crate::model::*;

/// Band around 100 % that a visual first-layer cover total may depart by
/// when the experiment definition gives none, percentage points. No published
/// tolerance exists for ocular totals (docs/methods.md section 2: common
/// practice); `cover_protocol.tolerance_pct` holds the value in use.
pub const DEFAULT_COVER_TOLERANCE_PCT: f64 = 5.0;

/// Thresholds that the protocol rows do not hold: the defaults, in one place.
/// Both are our own choices (common practice, no published value).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Limits {
    /// Largest change of one species' cover between consecutive surveys of a
    /// cage that passes without a warning, percentage points.
    pub cover_change_points: f64,
    /// Largest damage on a tagged leaf in a treatment without herbivores that
    /// passes without a warning, percent of leaf area.
    pub control_damage_pct: f64,
}

impl Limits {
    /// The defaults: a jump of more than 25 points between two surveys, and
    /// more than 15 % damage where no herbivores were stocked (above class 2
    /// of the herbivory-index scale, 6–12 %).
    pub const DEFAULT: Limits = Limits {
        cover_change_points: 25.0,
        control_damage_pct: 15.0,
    };
}

/// Slack for comparing sums of decimal percents (4.5 + 95.5 must equal 100).
pub(crate) const EPSILON: f64 = 1e-9;

/// One check rule.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Rule {
    /// Our own dotted id, `family.rule`.
    pub id: &'static str,
    /// Family of the rule.
    pub family: CheckFamily,
    /// How serious a flag of this rule is.
    pub severity: Severity,
    /// What the rule looks for, in one line.
    pub looks_for: &'static str,
}

/// Every rule, family by family.
pub const RULES: &[&[Rule]] = &[cover::RULES, counts::RULES, damage::RULES, visits::RULES];

/// Every rule in one list.
pub fn rules() -> impl Iterator<Item = &'static Rule> {
    RULES.iter().flat_map(|family| family.iter())
}

/// A record a flag points at: its table and id.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize)]
pub struct Target {
    /// Table name.
    pub table: &'static str,
    /// Row id.
    pub id: Uuid,
}

macro_rules! target_from {
    ($($id:ty => $table:literal,)*) => {$(
        impl From<$id> for Target {
            fn from(id: $id) -> Target {
                Target { table: $table, id: id.0 }
            }
        }
    )*};
}

target_from! {
    EnclosureId => "enclosure",
    ScheduleEntryId => "schedule_entry",
    LeafId => "tagged_leaf",
    VisitId => "visit",
    StockingEventId => "stocking_event",
    CensusId => "census",
    CoverRecordId => "cover_record",
    DamageRecordId => "damage_record",
}

/// A problem a rule raised.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Flag {
    /// Id of the rule.
    pub rule_id: &'static str,
    /// Family of the rule.
    pub family: CheckFamily,
    /// Severity of the rule.
    pub severity: Severity,
    /// The cage.
    pub enclosure_id: EnclosureId,
    /// Its label.
    pub cage: String,
    /// Day of the experiment the flag belongs to (0 = start date): the day the
    /// record was made, or for a missing visit the last day it was on time.
    pub day: i64,
    /// The record to open and fix.
    pub record: Target,
    /// A second record the flag concerns (the earlier record compared with,
    /// the visit a leaf was missed at, the planned visit that is missing).
    pub related: Option<Target>,
    /// What is wrong, with the numbers.
    pub message: String,
    /// Suggested fix.
    pub fix: String,
}

impl Flag {
    /// The identity of a flag across check runs: rule, record, related record.
    pub fn key(&self) -> (String, Uuid, Option<Uuid>) {
        (
            self.rule_id.to_owned(),
            self.record.id,
            self.related.map(|r| r.id),
        )
    }

    /// The same flag with a related record.
    pub fn related_to(mut self, related: impl Into<Target>) -> Flag {
        self.related = Some(related.into());
        self
    }
}

impl Rule {
    /// A flag of this rule.
    pub fn flag(
        &self,
        cage: &Cage,
        day: i64,
        record: impl Into<Target>,
        message: String,
        fix: String,
    ) -> Flag {
        Flag {
            rule_id: self.id,
            family: self.family,
            severity: self.severity,
            enclosure_id: cage.id,
            cage: cage.label.clone(),
            day,
            record: record.into(),
            related: None,
            message,
            fix,
        }
    }
}

/// Which flags a check run looks at.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Scope {
    /// The whole season.
    Season,
    /// The flags of one day (by local date).
    Day(NaiveDate),
    /// The flags of one cage (by label).
    Cage(String),
}

impl Scope {
    /// Whether a flag of `cage` on experiment `day` is in the scope.
    pub fn contains(&self, start: NaiveDate, day: i64, cage: &str) -> bool {
        match self {
            Scope::Season => true,
            Scope::Day(date) => (*date - start).num_days() == day,
            Scope::Cage(label) => label == cage,
        }
    }

    /// The scope in words.
    pub fn describe(&self, start: NaiveDate) -> String {
        match self {
            Scope::Season => "the whole season".to_owned(),
            Scope::Day(date) => format!("day {} ({date})", (*date - start).num_days()),
            Scope::Cage(label) => format!("cage {label}"),
        }
    }
}

/// Every flag the rules raise on the season, as of the end of `today`
/// (visits due by then and not made are missing; visits dated after it are
/// in the future). Sorted by cage, day, severity and rule.
pub fn raise(season: &Season) -> Vec<Flag> {
    let mut out = Vec::new();
    cover::check(season, &mut out);
    counts::check(season, &mut out);
    damage::check(season, &mut out);
    visits::check(season, &mut out);
    out.sort_by(|a, b| {
        (&a.cage, a.day, a.severity, a.rule_id, a.record.id).cmp(&(
            &b.cage,
            b.day,
            b.severity,
            b.rule_id,
            b.record.id,
        ))
    });
    out
}

/// The flags of a scope, as of the end of `today`, without storing anything.
pub fn check(
    source: &impl crate::store::Source,
    scope: &Scope,
    today: NaiveDate,
) -> Result<Vec<Flag>> {
    let season = Season::load(crate::store::conn_of(source), today, Limits::DEFAULT)?;
    let mut flags = raise(&season);
    flags.retain(|f| scope.contains(season.calendar.start, f.day, &f.cage));
    Ok(flags)
}

/// Today's local date in the experiment's UTC offset.
pub fn today(source: &impl crate::store::Source) -> Result<NaiveDate> {
    let experiment = crate::season::experiment(source)?;
    Ok(crate::season::Calendar::of(&experiment)?.today())
}

/// Shortest text of a number of percent or points (`4.5`, `45`).
pub(crate) fn num(x: f64) -> String {
    let rounded = (x * 1000.0).round() / 1000.0;
    crate::tables::format_number(if rounded == 0.0 { 0.0 } else { rounded })
}
