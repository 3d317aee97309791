//! What the rules read: one snapshot of the season, loaded with one query per
//! table and indexed the way the rules walk it (cage by cage, visit by visit
//! in time order). Every table is read through its generated reader
//! ([`crate::store::Record`]); cover rows through the [`CoverRow`] projection,
//! which leaves out what no rule reads (a season holds 160 000 of them).

use std::collections::HashMap;

use chrono::NaiveDate;
use rusqlite::Connection;

use super::Limits;
use crate::model::*;
use crate::season::Calendar;
use crate::store::{self, Projection, Record};
use crate::{Error, Result};

/// A cage with its treatment.
#[derive(Debug, Clone)]
pub struct Cage {
    /// Enclosure id.
    pub id: EnclosureId,
    /// Label on the cage.
    pub label: String,
    /// Its treatment (`None` when it has no assignment).
    pub treatment: Option<Treatment>,
}

/// The season as the rules see it.
#[derive(Debug)]
pub struct Season {
    /// The experiment's calendar (day 0 and the UTC offset).
    pub calendar: Calendar,
    /// The checks run as of the end of this day.
    pub today: NaiveDate,
    /// Thresholds the protocol rows do not hold.
    pub limits: Limits,
    /// Cages, by label.
    pub cages: Vec<Cage>,
    /// Taxa by id.
    pub taxa: HashMap<TaxonId, Taxon>,
    /// Stocking plans by treatment and taxon.
    pub plans: HashMap<(TreatmentId, TaxonId), StockingPlan>,
    /// The cover protocol.
    pub cover_protocol: Option<CoverProtocol>,
    /// Classes of the cover protocol's scale, by code.
    pub cover_classes: HashMap<String, ScaleClass>,
    /// The damage protocol.
    pub damage_protocol: Option<DamageProtocol>,
    /// Classes of the damage protocol's scale, by code.
    pub damage_classes: HashMap<String, ScaleClass>,
    /// Planned visits.
    pub schedule: Vec<ScheduleEntry>,
    /// Visits of each cage (same order as `cages`), in time order.
    pub visits: Vec<Vec<Visit>>,
    /// Stocking events by visit.
    pub stocking: HashMap<VisitId, Vec<StockingEvent>>,
    /// Census rows by visit.
    pub census: HashMap<VisitId, Vec<Census>>,
    /// Cover rows by visit.
    pub cover: HashMap<VisitId, Vec<CoverRow>>,
    /// Damage rows by visit.
    pub damage: HashMap<VisitId, Vec<DamageRecord>>,
    /// Tagged leaves of each cage (same order as `cages`).
    pub leaves: Vec<Vec<TaggedLeaf>>,
}

impl Season {
    /// Read the season from a connection (a plain read, or inside a write
    /// transaction, the transaction's connection).
    pub fn load(conn: &Connection, today: NaiveDate, limits: Limits) -> Result<Season> {
        let experiment = store::list::<Experiment>(conn)?
            .into_iter()
            .next()
            .ok_or_else(|| {
                Error::State("the database holds no experiment; nothing to check".into())
            })?;
        let treatments: HashMap<TreatmentId, Treatment> = store::list::<Treatment>(conn)?
            .into_iter()
            .map(|t| (t.id, t))
            .collect();
        let assignment: HashMap<EnclosureId, TreatmentId> = store::list::<Assignment>(conn)?
            .into_iter()
            .map(|a| (a.enclosure_id, a.treatment_id))
            .collect();
        let mut cages: Vec<Cage> = store::list::<Enclosure>(conn)?
            .into_iter()
            .map(|e| Cage {
                treatment: assignment
                    .get(&e.id)
                    .and_then(|t| treatments.get(t))
                    .cloned(),
                id: e.id,
                label: e.label,
            })
            .collect();
        cages.sort_by(|a, b| a.label.cmp(&b.label));
        let cage_index: HashMap<EnclosureId, usize> =
            cages.iter().enumerate().map(|(i, c)| (c.id, i)).collect();

        let taxa = store::list::<Taxon>(conn)?
            .into_iter()
            .map(|t| (t.id, t))
            .collect();
        let plans = store::list::<StockingPlan>(conn)?
            .into_iter()
            .map(|p| ((p.treatment_id, p.taxon_id), p))
            .collect();
        let classes = store::list::<ScaleClass>(conn)?;
        let classes_of = |scale: Option<ScaleId>| -> HashMap<String, ScaleClass> {
            classes
                .iter()
                .filter(|c| Some(c.scale_id) == scale)
                .map(|c| (c.code.clone(), c.clone()))
                .collect()
        };
        let cover_protocol = store::list::<CoverProtocol>(conn)?.into_iter().next();
        let damage_protocol = store::list::<DamageProtocol>(conn)?.into_iter().next();
        let cover_classes = classes_of(cover_protocol.as_ref().and_then(|p| p.scale_id));
        let damage_classes = classes_of(damage_protocol.as_ref().and_then(|p| p.scale_id));
        let schedule = crate::season::planned_visits(conn)?;

        let mut visits: Vec<Vec<Visit>> = vec![Vec::new(); cages.len()];
        for v in read_visits(conn)? {
            // A visit of a deleted cage cannot exist (deletes are refused while
            // rows refer to a record); skip rather than fail if one does.
            if let Some(&i) = cage_index.get(&v.enclosure_id) {
                visits[i].push(v);
            }
        }
        for list in &mut visits {
            list.sort_by_key(|a| (a.visited_at, a.id));
        }
        let mut leaves: Vec<Vec<TaggedLeaf>> = vec![Vec::new(); cages.len()];
        for leaf in store::list::<TaggedLeaf>(conn)? {
            if let Some(&i) = cage_index.get(&leaf.enclosure_id) {
                leaves[i].push(leaf);
            }
        }
        for list in &mut leaves {
            list.sort_by(|a, b| a.tag_label.cmp(&b.tag_label));
        }

        Ok(Season {
            calendar: Calendar::of(&experiment)?,
            today,
            limits,
            cages,
            taxa,
            plans,
            cover_protocol,
            cover_classes,
            damage_protocol,
            damage_classes,
            schedule,
            visits,
            stocking: by_visit(conn, |e: &StockingEvent| e.visit_id)?,
            census: by_visit(conn, |c: &Census| c.visit_id)?,
            cover: by_visit_projected::<CoverRow>(conn)?,
            damage: by_visit(conn, |d: &DamageRecord| d.visit_id)?,
            leaves,
        })
    }

    /// Day of the experiment of a local date.
    pub fn day_of(&self, date: NaiveDate) -> i64 {
        self.calendar.day_of(date)
    }

    /// Date of a day of the experiment.
    pub fn date_of(&self, day: i64) -> NaiveDate {
        self.calendar.date_of(day)
    }

    /// Day of the experiment on which a visit was made (its local date).
    pub fn visit_day(&self, visit: &Visit) -> i64 {
        self.calendar.made_on(visit)
    }

    /// The code of a taxon, or its id when it is unknown.
    pub fn taxon_code(&self, taxon: TaxonId) -> String {
        self.taxa
            .get(&taxon)
            .map_or_else(|| taxon.to_string(), |t| t.code.clone())
    }

    /// Each cage with its visits (time order) and tagged leaves.
    pub fn each_cage(&self) -> impl Iterator<Item = (&Cage, &[Visit], &[TaggedLeaf])> {
        self.cages
            .iter()
            .zip(&self.visits)
            .zip(&self.leaves)
            .map(|((c, v), l)| (c, v.as_slice(), l.as_slice()))
    }

    /// Rows of a visit in one of the by-visit maps.
    pub fn rows_of<T>(map: &HashMap<VisitId, Vec<T>>, visit: VisitId) -> &[T] {
        map.get(&visit).map_or(&[], Vec::as_slice)
    }
}

/// The live rows of a record table grouped by visit. The rows of each visit
/// are counted first so that each visit's vector is allocated once at its
/// exact length, and the rows go straight into it (no list of every row beside
/// the map): on 10 seasons this is most of the checks' memory. Rows are read
/// by the table's generated reader, in the order the table stores them.
fn by_visit<R: Record>(
    conn: &Connection,
    visit: impl Fn(&R) -> VisitId,
) -> Result<HashMap<VisitId, Vec<R>>> {
    let mut map = counted(conn, R::TABLE)?;
    store::each::<R>(conn, |row| map.entry(visit(&row)).or_default().push(row))?;
    Ok(map)
}

/// [`by_visit`] for a projection keyed by its visit.
fn by_visit_projected<P: Projection<Key = VisitId>>(
    conn: &Connection,
) -> Result<HashMap<VisitId, Vec<P>>> {
    let mut map = counted(conn, <P::Of as Record>::TABLE)?;
    store::each_projected::<P>(conn, |visit, row| map.entry(visit).or_default().push(row))?;
    Ok(map)
}

/// An empty vector for every visit with live rows in `table`, sized to hold them.
fn counted<T>(conn: &Connection, table: &str) -> Result<HashMap<VisitId, Vec<T>>> {
    let mut map: HashMap<VisitId, Vec<T>> = HashMap::new();
    let mut counts = conn.prepare_cached(&format!(
        "SELECT visit_id, count(*) FROM {table} WHERE deleted = 0 GROUP BY visit_id"
    ))?;
    let mut rows = counts.query([])?;
    while let Some(r) = rows.next()? {
        let n: i64 = r.get(1)?;
        map.insert(
            r.get(0)?,
            Vec::with_capacity(usize::try_from(n).unwrap_or(0)),
        );
    }
    Ok(map)
}

fn read_visits(conn: &Connection) -> Result<Vec<Visit>> {
    let mut visits = Vec::new();
    store::each::<Visit>(conn, |v| visits.push(v))?;
    Ok(visits)
}
