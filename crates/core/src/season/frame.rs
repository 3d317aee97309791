//! The experiment as set up: what every reader of the season needs before it
//! looks at a single record.

use std::collections::HashMap;

use crate::model::*;
use crate::store;
use crate::{Error, Result};

use super::Calendar;

/// A cage with its block and treatment.
#[derive(Debug, Clone, PartialEq)]
pub struct FrameCage {
    /// Enclosure id.
    pub id: EnclosureId,
    /// Label on the cage.
    pub label: String,
    /// Its block's code ("" if the block row is gone).
    pub block: String,
    /// Its treatment (`None` when it has no assignment).
    pub treatment: Option<Treatment>,
}

/// The experiment, its calendar and layout, its stocking plans and schedule.
#[derive(Debug, Clone)]
pub struct Frame {
    /// The experiment ([`super::experiment`]).
    pub experiment: Experiment,
    /// Its start and UTC offset.
    pub calendar: Calendar,
    /// The first site's name ("" when there is none).
    pub site_name: String,
    /// Every live cage, by label.
    pub cages: Vec<FrameCage>,
    /// Stocking plans by treatment and taxon.
    pub plans: HashMap<(TreatmentId, TaxonId), StockingPlan>,
    /// Planned visits, in schedule order (the order set-up wrote them).
    pub schedule: Vec<ScheduleEntry>,
}

impl Frame {
    /// Read the frame (from the store, or inside a write transaction from
    /// its [`crate::store::Writer`]).
    pub fn load(source: &impl store::Source) -> Result<Frame> {
        Frame::load_if_any(source)?.ok_or_else(super::no_experiment)
    }

    /// Read the frame of a database that may hold no experiment yet (the
    /// analysis of an empty file): `None` then.
    pub fn load_if_any(source: &impl store::Source) -> Result<Option<Frame>> {
        let conn = store::conn_of(source);
        let Some(experiment) = super::experiment_if_any(conn)? else {
            return Ok(None);
        };
        let calendar = Calendar::of(&experiment)?;
        let site_name = store::list::<Site>(conn)?
            .into_iter()
            .next()
            .map(|s| s.name)
            .unwrap_or_default();
        let blocks: HashMap<BlockId, String> = store::list::<Block>(conn)?
            .into_iter()
            .map(|b| (b.id, b.code))
            .collect();
        let treatments: HashMap<TreatmentId, Treatment> = store::list::<Treatment>(conn)?
            .into_iter()
            .map(|t| (t.id, t))
            .collect();
        let assigned: HashMap<EnclosureId, TreatmentId> = store::list::<Assignment>(conn)?
            .into_iter()
            .map(|a| (a.enclosure_id, a.treatment_id))
            .collect();
        let mut cages: Vec<FrameCage> = store::list::<Enclosure>(conn)?
            .into_iter()
            .map(|e| FrameCage {
                treatment: assigned.get(&e.id).and_then(|t| treatments.get(t)).cloned(),
                block: blocks.get(&e.block_id).cloned().unwrap_or_default(),
                id: e.id,
                label: e.label,
            })
            .collect();
        cages.sort_by(|a, b| a.label.cmp(&b.label));
        let plans = store::list::<StockingPlan>(conn)?
            .into_iter()
            .map(|p| ((p.treatment_id, p.taxon_id), p))
            .collect();
        Ok(Some(Frame {
            experiment,
            calendar,
            site_name,
            cages,
            plans,
            schedule: schedule(conn)?,
        }))
    }

    /// A cage by id.
    pub fn cage(&self, id: EnclosureId) -> Result<&FrameCage> {
        self.cages
            .iter()
            .find(|c| c.id == id)
            .ok_or_else(|| Error::NotFound {
                table: "enclosure".into(),
                id: id.to_string(),
            })
    }

    /// A cage that has a treatment (the crew works only on those), by id.
    pub fn assigned_cage(&self, id: EnclosureId) -> Result<(&FrameCage, &Treatment)> {
        let cage = self.cage(id)?;
        let treatment = cage.treatment.as_ref().ok_or_else(|| Error::NotFound {
            table: "enclosure".into(),
            id: id.to_string(),
        })?;
        Ok((cage, treatment))
    }

    /// The cages that have a treatment, by label.
    pub fn assigned_cages(&self) -> impl Iterator<Item = (&FrameCage, &Treatment)> {
        self.cages
            .iter()
            .filter_map(|c| c.treatment.as_ref().map(|t| (c, t)))
    }

    /// The stocking plan of a treatment for a taxon.
    pub fn plan(&self, treatment: TreatmentId, taxon: TaxonId) -> Option<&StockingPlan> {
        self.plans.get(&(treatment, taxon))
    }
}

/// The planned visits by kind, then day: the order of the definition's
/// schedule, whatever the ids (a season imported or set up by an older
/// version has ids of another order).
pub(crate) fn schedule(conn: &rusqlite::Connection) -> Result<Vec<ScheduleEntry>> {
    let mut schedule = store::list::<ScheduleEntry>(conn)?;
    schedule.sort_by_key(|e| (e.kind, e.day));
    Ok(schedule)
}
