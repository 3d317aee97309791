//! The season as every reader sees it, and the domain rules they share.
//!
//! The route, the cage sheet, field entry, the day's-end checks and the
//! analysis all ask the same questions of one season: which experiment, what
//! day of it a date or a visit is, which planned visit a recorded visit
//! fulfils, what is due, late or missed on a day, how many animals a census
//! calls for restocking. Each question has one answer, here:
//!
//! - [`Calendar`]: the experiment's start and UTC offset; `day_of`, `date_of`,
//!   the day a visit was made ([`Calendar::made_on`]) and the day it counts
//!   for in the results ([`Calendar::counts_for`]);
//! - [`schedule`]: the one fulfilment rule ([`schedule::fulfils`]) and what it
//!   says of every planned visit of a cage on a day ([`schedule::status`]);
//! - [`stocking`]: the restock suggestion;
//! - [`Frame`]: the experiment as set up (cages with their block and
//!   treatment, plans, schedule), read in one go;
//! - [`visit_for`] and [`undo`]: the two writes every shell needs (find or
//!   start today's visit of a cage; take back a record's last change).

mod calendar;
mod frame;
pub mod schedule;
pub mod stocking;
mod write;

pub use calendar::Calendar;
pub(crate) use frame::schedule as planned_visits;
pub use frame::{Frame, FrameCage};
pub use schedule::{AsOf, PlanState, PlanStatus};
pub use write::{EDITABLE, UndoAction, Undone, VisitFor, editable_table, undo, visit_for};

use crate::model::Experiment;
use crate::store;
use crate::{Error, Result};

/// The experiment the database records: the first live row by id (a
/// database holds one; `init` refuses a second).
pub fn experiment(source: &impl store::Source) -> Result<Experiment> {
    experiment_if_any(source)?.ok_or_else(no_experiment)
}

/// The experiment the database records, if it holds one yet.
pub fn experiment_if_any(source: &impl store::Source) -> Result<Option<Experiment>> {
    store::first::<Experiment>(store::conn_of(source))
}

/// The error of a database that holds no experiment yet.
pub fn no_experiment() -> Error {
    Error::State("the database holds no experiment yet; run fieldcage init".into())
}
