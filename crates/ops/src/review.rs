//! The day's-end review: the checks of a day, a cage or the season, and
//! confirming a flag with a note.

use chrono::NaiveDate;
use serde::Deserialize;

use fieldcage_core::Result;

use crate::*;
use fieldcage_core::season::Frame;

impl Service {
    /// Run the day's-end checks (the field day, or the whole season), store
    /// the flags and return them with their status.
    pub fn review(&self, req: ReviewRequest) -> Result<fieldcage_core::checks::Report> {
        let mut store = self.store();
        let frame = Frame::load(&*store)?;
        let date = self.field_date(&frame.calendar, req.date);
        let scope = if req.season {
            fieldcage_core::checks::Scope::Season
        } else {
            fieldcage_core::checks::Scope::Day(date)
        };
        fieldcage_core::checks::run(&mut store, &scope, date)
    }

    /// Confirm a flag: the data are right as recorded, for the reason given.
    pub fn confirm_flag(&self, req: ConfirmFlag) -> Result<fieldcage_core::checks::ReportedFlag> {
        let mut store = self.store();
        fieldcage_core::checks::confirm(&mut store, &req.flag_id, &req.note)
    }
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

/// Confirm one flag with a note.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ConfirmFlag {
    /// The flag's id.
    pub flag_id: String,
    /// Why the data are right as recorded.
    pub note: String,
}
