//! What the rules read: one snapshot of the season, loaded with one query per
//! table and indexed the way the rules walk it (cage by cage, visit by visit
//! in time order). The large record tables are read with typed queries rather
//! than through the schema-driven record conversion, which costs more than the
//! rules themselves on a season of 160 000 cover rows.

use std::collections::HashMap;

use chrono::{DateTime, FixedOffset, NaiveDate};
use rusqlite::{Connection, Row};

use super::Limits;
use crate::model::*;
use crate::season::Calendar;
use crate::store;
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

/// A cover record as the rules read it: the stored row without its visit
/// (the key it is filed under) and its notes, which no rule reads, and with
/// its codes in boxed strings. On 10 seasons (1.6 M rows) this takes about
/// 120 bytes a row where the full record takes 176.
#[derive(Debug, Clone, PartialEq)]
pub struct CoverRow {
    /// The record's id.
    pub id: CoverRecordId,
    /// A plant taxon…
    pub taxon_id: Option<TaxonId>,
    /// …or a ground category code (or overall vegetation).
    pub category: Option<Box<str>>,
    /// Visual percent as entered.
    pub value_pct: Option<f64>,
    /// Class code as entered.
    pub class_code: Option<Box<str>>,
    /// Pin hits as entered.
    pub pin_hits: Option<i64>,
    /// Percent cover derived from the entry.
    pub cover_pct: Option<f64>,
}

/// The season as the rules see it.
#[derive(Debug)]
pub struct Season {
    /// Start date of the experiment (day 0).
    pub start: NaiveDate,
    /// The experiment's calendar (start and offset).
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
    /// transaction through [`crate::store::Writer::conn`]).
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
        let schedule = store::list::<ScheduleEntry>(conn)?;

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
            start: experiment.start_date,
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
            stocking: read_stocking(conn)?,
            census: read_census(conn)?,
            cover: read_cover(conn)?,
            damage: read_damage(conn)?,
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
/// the map): on 10 seasons this is most of the checks' memory.
fn by_visit<T>(
    conn: &Connection,
    table: &str,
    columns: &str,
    mut f: impl FnMut(&Row<'_>) -> rusqlite::Result<T>,
    visit: impl Fn(&T) -> VisitId,
) -> Result<HashMap<VisitId, Vec<T>>> {
    by_visit_keyed(conn, table, columns, |r| {
        let row = f(r)?;
        Ok((visit(&row), row))
    })
}

/// [`by_visit`] for rows that do not hold their visit: `f` gives the visit
/// and the row.
fn by_visit_keyed<T>(
    conn: &Connection,
    table: &str,
    columns: &str,
    mut f: impl FnMut(&Row<'_>) -> rusqlite::Result<(VisitId, T)>,
) -> Result<HashMap<VisitId, Vec<T>>> {
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
    let mut stmt =
        conn.prepare_cached(&format!("SELECT {columns} FROM {table} WHERE deleted = 0"))?;
    let mut rows = stmt.query([])?;
    while let Some(r) = rows.next()? {
        let (visit, row) = f(r)?;
        map.entry(visit).or_default().push(row);
    }
    Ok(map)
}

fn query<T>(
    conn: &Connection,
    sql: &str,
    f: impl FnMut(&Row<'_>) -> rusqlite::Result<T>,
) -> Result<Vec<T>> {
    let mut stmt = conn.prepare_cached(sql)?;
    let rows = stmt.query_map([], f)?;
    Ok(rows.collect::<rusqlite::Result<_>>()?)
}

fn timestamp(row: &Row<'_>, i: usize) -> rusqlite::Result<DateTime<FixedOffset>> {
    let text: String = row.get(i)?;
    DateTime::parse_from_rfc3339(&text).map_err(|e| {
        rusqlite::Error::FromSqlConversionFailure(i, rusqlite::types::Type::Text, Box::new(e))
    })
}

fn read_visits(conn: &Connection) -> Result<Vec<Visit>> {
    query(
        conn,
        "SELECT id, enclosure_id, kind, day, visited_at, observer, device, completed, notes \
         FROM visit WHERE deleted = 0",
        |r| {
            Ok(Visit {
                id: r.get(0)?,
                enclosure_id: r.get(1)?,
                kind: r.get(2)?,
                day: r.get(3)?,
                visited_at: timestamp(r, 4)?,
                observer: r.get(5)?,
                device: r.get(6)?,
                completed: r.get(7)?,
                notes: r.get(8)?,
            })
        },
    )
}

fn read_stocking(conn: &Connection) -> Result<HashMap<VisitId, Vec<StockingEvent>>> {
    by_visit(
        conn,
        "stocking_event",
        "id, visit_id, taxon_id, kind, count, stage, sex, notes",
        |r| {
            Ok(StockingEvent {
                id: r.get(0)?,
                visit_id: r.get(1)?,
                taxon_id: r.get(2)?,
                kind: r.get(3)?,
                count: r.get(4)?,
                stage: r.get(5)?,
                sex: r.get(6)?,
                notes: r.get(7)?,
            })
        },
        |e| e.visit_id,
    )
}

fn read_census(conn: &Connection) -> Result<HashMap<VisitId, Vec<Census>>> {
    by_visit(
        conn,
        "census",
        "id, visit_id, taxon_id, alive, dead, missing, notes",
        |r| {
            Ok(Census {
                id: r.get(0)?,
                visit_id: r.get(1)?,
                taxon_id: r.get(2)?,
                alive: r.get(3)?,
                dead: r.get(4)?,
                missing: r.get(5)?,
                notes: r.get(6)?,
            })
        },
        |c| c.visit_id,
    )
}

fn read_cover(conn: &Connection) -> Result<HashMap<VisitId, Vec<CoverRow>>> {
    by_visit_keyed(
        conn,
        "cover_record",
        "id, visit_id, taxon_id, category, value_pct, class_code, pin_hits, cover_pct",
        |r| {
            Ok((
                r.get(1)?,
                CoverRow {
                    id: r.get(0)?,
                    taxon_id: r.get(2)?,
                    category: r.get::<_, Option<String>>(3)?.map(String::into_boxed_str),
                    value_pct: r.get(4)?,
                    class_code: r.get::<_, Option<String>>(5)?.map(String::into_boxed_str),
                    pin_hits: r.get(6)?,
                    cover_pct: r.get(7)?,
                },
            ))
        },
    )
}

fn read_damage(conn: &Connection) -> Result<HashMap<VisitId, Vec<DamageRecord>>> {
    by_visit(
        conn,
        "damage_record",
        "id, visit_id, leaf_id, class_code, value_pct, damage_pct, notes",
        |r| {
            Ok(DamageRecord {
                id: r.get(0)?,
                visit_id: r.get(1)?,
                leaf_id: r.get(2)?,
                class_code: r.get(3)?,
                value_pct: r.get(4)?,
                damage_pct: r.get(5)?,
                notes: r.get(6)?,
            })
        },
        |d| d.visit_id,
    )
}
