//! Days of the experiment: day 0 is its start date; a date is local to the
//! experiment's UTC offset.

use chrono::{DateTime, Duration, FixedOffset, NaiveDate, Utc};

use crate::model::{Experiment, Visit};
use crate::{Error, Result};

/// The experiment's start and UTC offset: how dates become days.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Calendar {
    /// Day 0.
    pub start: NaiveDate,
    /// The offset of the experiment's local time (`+02:00`).
    pub offset: FixedOffset,
}

impl Calendar {
    /// The calendar of an experiment (its `utc_offset` parsed).
    pub fn of(experiment: &Experiment) -> Result<Calendar> {
        let offset: FixedOffset = experiment.utc_offset.parse().map_err(|_| {
            Error::invalid(
                "experiment",
                "utc_offset",
                &experiment.utc_offset,
                "is not an offset",
            )
        })?;
        Ok(Calendar {
            start: experiment.start_date,
            offset,
        })
    }

    /// The local date at `now`.
    pub fn date_at(&self, now: DateTime<Utc>) -> NaiveDate {
        now.with_timezone(&self.offset).date_naive()
    }

    /// Today's local date.
    pub fn today(&self) -> NaiveDate {
        self.date_at(Utc::now())
    }

    /// The day of the experiment of a local date.
    pub fn day_of(&self, date: NaiveDate) -> i64 {
        (date - self.start).num_days()
    }

    /// The local date of a day of the experiment.
    pub fn date_of(&self, day: i64) -> NaiveDate {
        self.start + Duration::days(day)
    }

    /// The local date of a visit as recorded: the date written in its
    /// `visited_at`, in the offset it was recorded with.
    pub fn visit_date(visit: &Visit) -> NaiveDate {
        visit.visited_at.date_naive()
    }

    /// The day a visit was made. Flags carry it, so that the review of a
    /// day shows what that day's work raised.
    pub fn made_on(&self, visit: &Visit) -> i64 {
        self.day_of(Calendar::visit_date(visit))
    }

    /// The day a visit counts for in the results: the planned day it was
    /// recorded for, or the day it was made when it fulfils none.
    pub fn counts_for(&self, visit: &Visit) -> i64 {
        visit.day.unwrap_or_else(|| self.made_on(visit))
    }

    /// The time stamp of a visit started now on `date`: that date at the
    /// current local time of day.
    pub fn stamp(&self, date: NaiveDate, now: DateTime<Utc>) -> DateTime<FixedOffset> {
        let now = now.with_timezone(&self.offset);
        date.and_time(now.time())
            .and_local_timezone(self.offset)
            .single()
            .unwrap_or(now)
    }
}
