//! The recorded season as the analysis reads it: every live row the results
//! need, read once from the store and indexed by cage, visit and taxon.
//!
//! Two rules settle what counts as one observation (both are stated in the
//! report):
//! - A visit's day is the day it counts for
//!   ([`crate::season::Calendar::counts_for`]): its planned `day`, or for an
//!   unplanned visit the day of the experiment of its local date.
//! - When a cage has more than one census, cover or damage visit on the same
//!   day, the one started last (then the larger id) is used and the others
//!   are listed in the data-handling notes. Stocking events count wherever
//!   they were recorded: handling animals is not a repeated measurement.

use std::collections::{BTreeMap, HashMap};

use crate::Result;
use crate::model::*;
use crate::season::Frame;
use crate::store::Store;

/// A cage with the labels the analyst reads.
#[derive(Debug, Clone)]
pub(crate) struct Cage {
    pub id: EnclosureId,
    pub label: String,
    pub block: String,
    /// Index into [`Season::treatments`]; `None` when the cage has no assignment.
    pub treatment: Option<usize>,
}

/// A visit that counts, with its day.
#[derive(Debug, Clone)]
pub(crate) struct DayVisit {
    pub id: VisitId,
    pub cage: usize,
    pub kind: VisitKind,
    pub day: i64,
}

/// Everything the analysis reads.
#[derive(Debug, Default)]
pub(crate) struct Season {
    pub experiment: Option<Experiment>,
    /// Cages ordered by label.
    pub cages: Vec<Cage>,
    /// Treatments ordered by code.
    pub treatments: Vec<Treatment>,
    pub taxa: HashMap<TaxonId, Taxon>,
    pub cover_protocol: Option<CoverProtocol>,
    pub damage_protocol: Option<DamageProtocol>,
    /// Classes of every scale, ordered by `sort_order`.
    pub scale_classes: HashMap<ScaleId, Vec<ScaleClass>>,
    pub scales: HashMap<ScaleId, Scale>,
    /// Visits that count, ordered by cage, day and kind.
    pub visits: Vec<DayVisit>,
    /// Day of every live visit (used for stocking events at any visit).
    pub visit_day: HashMap<VisitId, (usize, i64)>,
    pub cover: HashMap<VisitId, Vec<CoverRecord>>,
    pub damage: HashMap<VisitId, Vec<DamageRecord>>,
    pub census: HashMap<VisitId, Vec<Census>>,
    /// Stocking events by cage, ordered by day (then visit start and id).
    pub stocking: HashMap<usize, Vec<(i64, StockingEvent)>>,
    pub leaves: HashMap<LeafId, TaggedLeaf>,
    /// What the loader set aside, in plain words.
    pub notes: Vec<String>,
}

impl Season {
    /// Read the season from the store: the experiment, its calendar and its
    /// cages from the one [`Frame`] every reader shares.
    pub fn load(store: &Store) -> Result<Season> {
        let mut s = Season::default();
        let Some(frame) = Frame::load_if_any(store)? else {
            s.notes
                .push("the database holds no experiment yet: there is nothing to analyse".into());
            return Ok(s);
        };
        let experiments = store.list::<Experiment>()?.len();
        if experiments > 1 {
            s.notes.push(format!(
                "the database holds {experiments} experiments; days count from the first one's start date"
            ));
        }
        let calendar = frame.calendar;

        let mut treatments = store.list::<Treatment>()?;
        treatments.sort_by(|a, b| a.code.cmp(&b.code));
        let treatment_index: HashMap<TreatmentId, usize> = treatments
            .iter()
            .enumerate()
            .map(|(i, t)| (t.id, i))
            .collect();
        s.treatments = treatments;
        // The frame's cages are ordered by label.
        let cages: Vec<Cage> = frame
            .cages
            .into_iter()
            .map(|c| Cage {
                treatment: c
                    .treatment
                    .and_then(|t| treatment_index.get(&t.id).copied()),
                id: c.id,
                label: c.label,
                block: c.block,
            })
            .collect();
        for c in cages.iter().filter(|c| c.treatment.is_none()) {
            s.notes.push(format!(
                "cage {} has no treatment assignment; it is left out of treatment summaries and effects",
                c.label
            ));
        }
        let cage_index: HashMap<EnclosureId, usize> =
            cages.iter().enumerate().map(|(i, c)| (c.id, i)).collect();
        s.cages = cages;
        s.experiment = Some(frame.experiment);

        s.taxa = store
            .list::<Taxon>()?
            .into_iter()
            .map(|t| (t.id, t))
            .collect();
        s.scales = store
            .list::<Scale>()?
            .into_iter()
            .map(|x| (x.id, x))
            .collect();
        for class in store.list::<ScaleClass>()? {
            s.scale_classes
                .entry(class.scale_id)
                .or_default()
                .push(class);
        }
        for classes in s.scale_classes.values_mut() {
            classes.sort_by(|a, b| a.sort_order.cmp(&b.sort_order).then(a.code.cmp(&b.code)));
        }
        // The record commands use the first protocol by id; so does the analysis.
        s.cover_protocol = store.list::<CoverProtocol>()?.into_iter().next();
        s.damage_protocol = store.list::<DamageProtocol>()?.into_iter().next();
        s.leaves = store
            .list::<TaggedLeaf>()?
            .into_iter()
            .map(|l| (l.id, l))
            .collect();

        // Visits: the day of each, then one per cage, kind and day.
        let mut chosen: BTreeMap<(usize, i64, VisitKind), Visit> = BTreeMap::new();
        let mut set_aside: Vec<(usize, i64, VisitKind)> = Vec::new();
        let mut starts: HashMap<VisitId, chrono::DateTime<chrono::FixedOffset>> = HashMap::new();
        for v in store.list::<Visit>()? {
            let Some(&cage) = cage_index.get(&v.enclosure_id) else {
                continue;
            };
            let day = calendar.counts_for(&v);
            s.visit_day.insert(v.id, (cage, day));
            starts.insert(v.id, v.visited_at);
            if v.kind == VisitKind::Stocking {
                continue;
            }
            let key = (cage, day, v.kind);
            match chosen.get(&key) {
                Some(old) if (old.visited_at, old.id) > (v.visited_at, v.id) => {
                    set_aside.push(key);
                }
                Some(_) => {
                    set_aside.push(key);
                    chosen.insert(key, v);
                }
                None => {
                    chosen.insert(key, v);
                }
            }
        }
        for (cage, day, kind) in set_aside {
            s.notes.push(format!(
                "cage {} has more than one {kind} visit on day {day}; the one started last is used",
                s.cages[cage].label
            ));
        }
        s.visits = chosen
            .into_iter()
            .map(|((cage, day, kind), v)| DayVisit {
                id: v.id,
                cage,
                kind,
                day,
            })
            .collect();
        let counted: std::collections::HashSet<VisitId> = s.visits.iter().map(|v| v.id).collect();

        for r in store.list::<CoverRecord>()? {
            if counted.contains(&r.visit_id) {
                s.cover.entry(r.visit_id).or_default().push(r);
            }
        }
        for r in store.list::<DamageRecord>()? {
            if counted.contains(&r.visit_id) {
                s.damage.entry(r.visit_id).or_default().push(r);
            }
        }
        for r in store.list::<Census>()? {
            if counted.contains(&r.visit_id) {
                s.census.entry(r.visit_id).or_default().push(r);
            }
        }
        let mut stocking: Vec<(
            usize,
            i64,
            chrono::DateTime<chrono::FixedOffset>,
            StockingEvent,
        )> = Vec::new();
        for e in store.list::<StockingEvent>()? {
            if let (Some(&(cage, day)), Some(&at)) =
                (s.visit_day.get(&e.visit_id), starts.get(&e.visit_id))
            {
                stocking.push((cage, day, at, e));
            }
        }
        stocking.sort_by_key(|a| (a.0, a.1, a.2, a.3.id));
        for (cage, day, _, e) in stocking {
            s.stocking.entry(cage).or_default().push((day, e));
        }
        Ok(s)
    }

    /// The treatment of a cage.
    pub fn treatment_of(&self, cage: usize) -> Option<&Treatment> {
        self.cages[cage].treatment.map(|t| &self.treatments[t])
    }

    /// The code of a taxon (its id when the taxon row is gone).
    pub fn taxon_code(&self, id: TaxonId) -> String {
        self.taxa
            .get(&id)
            .map_or_else(|| id.to_string(), |t| t.code.clone())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_cover_rows_read_are_what_the_schema_driven_path_reads() {
        let dir = tempfile::tempdir().unwrap();
        let mut store = Store::open(dir.path().join("demo.db")).unwrap();
        crate::demo::build(&mut store).unwrap();
        let listed = store.list::<CoverRecord>().unwrap();
        assert!(listed.len() > 500);
        let schema = crate::tables::get("cover_record").unwrap();
        let by_schema: Vec<CoverRecord> = store
            .rows(schema)
            .unwrap()
            .into_iter()
            .map(|v| crate::store::from_values(schema, v).unwrap())
            .collect();
        assert_eq!(listed, by_schema);
    }
}
