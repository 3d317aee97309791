//! A cage's sheet: everything it shows for one cage on one day.

use std::collections::HashMap;

use chrono::NaiveDate;
use serde::{Deserialize, Serialize};

use fieldcage_core::Result;
use fieldcage_core::model::*;

use fieldcage_core::season::schedule::{AsOf, PlanState};
use fieldcage_core::season::{Frame, schedule, stocking};
use fieldcage_core::store::Store;

use crate::*;

impl Service {
    /// Everything the cage sheet shows for one cage on one day.
    pub fn sheet(&self, req: CageRequest) -> Result<Sheet> {
        let store = self.store();
        let frame = Frame::load(&*store)?;
        let calendar = &frame.calendar;
        let date = self.field_date(calendar, req.date);
        let (cage, treatment) = frame.assigned_cage(req.enclosure_id)?;
        let mut visits: Vec<Visit> = store
            .list::<Visit>()?
            .into_iter()
            .filter(|v| v.enclosure_id == cage.id)
            .collect();
        visits.sort_by_key(|v| (v.visited_at, v.id));
        let today: Vec<Visit> = visits
            .iter()
            .filter(|v| v.visited_at.date_naive() == date)
            .cloned()
            .collect();
        let today_ids: Vec<VisitId> = today.iter().map(|v| v.id).collect();
        let earlier_ids: Vec<VisitId> = visits
            .iter()
            .filter(|v| v.visited_at.date_naive() < date)
            .map(|v| v.id)
            .collect();
        let visit_day: HashMap<VisitId, NaiveDate> = visits
            .iter()
            .map(|v| (v.id, v.visited_at.date_naive()))
            .collect();
        let taxa = store.list::<Taxon>()?;
        let events: Vec<StockingEvent> = store
            .list::<StockingEvent>()?
            .into_iter()
            .filter(|e| visit_day.contains_key(&e.visit_id))
            .collect();
        let census: Vec<Census> = store
            .list::<Census>()?
            .into_iter()
            .filter(|c| visit_day.contains_key(&c.visit_id))
            .collect();
        let first_stocking = visits
            .iter()
            .filter(|v| {
                events
                    .iter()
                    .any(|e| e.visit_id == v.id && e.kind == StockingKind::Initial)
            })
            .map(|v| v.visited_at.date_naive())
            .min();
        let animals: Vec<AnimalLine> = taxa
            .iter()
            .filter(|t| t.role != Role::Plant)
            .map(|t| {
                let plan = frame.plan(treatment.id, t.id);
                let sum = |kind: StockingKind| -> i64 {
                    events
                        .iter()
                        .filter(|e| {
                            e.taxon_id == t.id && e.kind == kind && visit_day[&e.visit_id] <= date
                        })
                        .map(|e| e.count)
                        .sum()
                };
                let last = census
                    .iter()
                    .filter(|c| c.taxon_id == t.id && earlier_ids.contains(&c.visit_id))
                    .max_by_key(|c| visit_day[&c.visit_id]);
                let today_census = census
                    .iter()
                    .find(|c| c.taxon_id == t.id && today_ids.contains(&c.visit_id))
                    .cloned();
                let restock_below = plan.and_then(|p| p.restock_below);
                // The rule of counts.restock_due: none once a restock of
                // the taxon is recorded in the cage that day.
                let restocked_today = events.iter().any(|e| {
                    e.taxon_id == t.id
                        && e.kind == StockingKind::Restock
                        && e.count > 0
                        && today_ids.contains(&e.visit_id)
                });
                let restock = match (today_census.as_ref().and_then(|c| c.alive), plan) {
                    (Some(alive), Some(p)) => stocking::restock_due(p, alive, restocked_today),
                    _ => None,
                };
                let puts: Vec<stocking::Put> = events
                    .iter()
                    .filter(|e| e.taxon_id == t.id)
                    .map(|e| stocking::Put {
                        date: visit_day[&e.visit_id],
                        kind: e.kind,
                        count: e.count,
                    })
                    .collect();
                let last_census = last.and_then(|c| Some((visit_day[&c.visit_id], c.alive?)));
                AnimalLine {
                    at_risk: stocking::at_risk(&puts, last_census, date),
                    taxon: TaxonLine::from(t),
                    planned: plan.map(|p| p.initial_count),
                    restock_below,
                    stocked: sum(StockingKind::Initial),
                    restocked: sum(StockingKind::Restock),
                    removed: sum(StockingKind::Removal),
                    last_alive: last.and_then(|c| c.alive),
                    last_date: last.map(|c| visit_day[&c.visit_id]),
                    today: today_census,
                    restock_suggested: restock,
                }
            })
            .collect();
        let plants: Vec<TaxonLine> = taxa
            .iter()
            .filter(|t| t.role == Role::Plant)
            .map(TaxonLine::from)
            .collect();
        let cover_records: Vec<CoverRecord> = store
            .list::<CoverRecord>()?
            .into_iter()
            .filter(|c| today_ids.contains(&c.visit_id))
            .collect();
        let damage_all: Vec<DamageRecord> = store
            .list::<DamageRecord>()?
            .into_iter()
            .filter(|d| visit_day.contains_key(&d.visit_id))
            .collect();
        let leaves: Vec<LeafLine> = store
            .list::<TaggedLeaf>()?
            .into_iter()
            .filter(|l| l.enclosure_id == cage.id)
            .map(|l| {
                let previous = damage_all
                    .iter()
                    .filter(|d| d.leaf_id == l.id && earlier_ids.contains(&d.visit_id))
                    .max_by_key(|d| visit_day[&d.visit_id])
                    .cloned();
                let today = damage_all
                    .iter()
                    .find(|d| d.leaf_id == l.id && today_ids.contains(&d.visit_id))
                    .cloned();
                LeafLine {
                    taxon_code: taxa
                        .iter()
                        .find(|t| t.id == l.taxon_id)
                        .map(|t| t.code.clone())
                        .unwrap_or_default(),
                    leaf: l,
                    previous,
                    today,
                }
            })
            .collect();
        let stocking_today: Vec<StockingEvent> = events
            .into_iter()
            .filter(|e| today_ids.contains(&e.visit_id))
            .collect();
        let day = calendar.day_of(date);
        // The route's rule: judged at the start of the field day.
        let plan = schedule::status(calendar, &frame.schedule, &visits, day, AsOf::StartOf);
        let (cover, damage) = protocols(&store)?;
        Ok(Sheet {
            enclosure_id: cage.id,
            label: cage.label.clone(),
            block: cage.block.clone(),
            treatment: treatment.clone(),
            date,
            day,
            days_since_stocking: first_stocking.map(|d| (date - d).num_days()),
            due: schedule::planned_on(&frame.schedule, day),
            late: Planned::those(&plan, PlanState::Late),
            visits: today,
            animals,
            plants,
            cover,
            damage,
            cover_records,
            leaves,
            stocking_today,
        })
    }
}

/// A request about one cage on one day.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CageRequest {
    /// The cage.
    pub enclosure_id: EnclosureId,
    /// Local date (today when left out).
    #[serde(default)]
    pub date: Option<NaiveDate>,
}

/// A taxon as the sheet shows it.
#[derive(Debug, Clone, Serialize)]
pub struct TaxonLine {
    /// Id.
    pub id: TaxonId,
    /// Code.
    pub code: String,
    /// Scientific name.
    pub scientific_name: String,
    /// Common name.
    pub common_name: Option<String>,
    /// Role.
    pub role: Role,
    /// Plant group.
    pub plant_group: Option<PlantGroup>,
}

impl From<&Taxon> for TaxonLine {
    fn from(t: &Taxon) -> TaxonLine {
        TaxonLine {
            id: t.id,
            code: t.code.clone(),
            scientific_name: t.scientific_name.clone(),
            common_name: t.common_name.clone(),
            role: t.role,
            plant_group: t.plant_group,
        }
    }
}

/// An animal taxon on the sheet, with its stocking summary.
#[derive(Debug, Clone, Serialize)]
pub struct AnimalLine {
    /// The taxon.
    pub taxon: TaxonLine,
    /// Planned per cage by the treatment (none = should not be here).
    pub planned: Option<i64>,
    /// Restock threshold.
    pub restock_below: Option<i64>,
    /// Stocked initially.
    pub stocked: i64,
    /// Added since.
    pub restocked: i64,
    /// Taken out.
    pub removed: i64,
    /// Alive at the previous census.
    pub last_alive: Option<i64>,
    /// Date of the previous census.
    pub last_date: Option<NaiveDate>,
    /// Today's census, if entered.
    pub today: Option<Census>,
    /// How many to add to reach the planned count, when below the threshold.
    pub restock_suggested: Option<i64>,
    /// How many today's census must account for (alive + dead + missing):
    /// [`fieldcage_core::season::stocking::at_risk`]; none before stocking.
    pub at_risk: Option<i64>,
}

/// A class of a scale.
#[derive(Debug, Clone, Serialize)]
pub struct ClassLine {
    /// Code.
    pub code: String,
    /// Lower limit, %.
    pub lower_pct: Option<f64>,
    /// Upper limit, %.
    pub upper_pct: Option<f64>,
    /// Midpoint, %.
    pub midpoint_pct: f64,
    /// Meaning.
    pub description: Option<String>,
    /// Position.
    pub sort_order: i64,
}

/// A ground category.
#[derive(Debug, Clone, Serialize)]
pub struct CategoryLine {
    /// Code.
    pub code: String,
    /// Name.
    pub name: String,
}

/// The cover protocol as the sheet needs it.
#[derive(Debug, Clone, Serialize)]
pub struct CoverInfo {
    /// Method.
    pub method: CoverMethod,
    /// Layered?
    pub layered: bool,
    /// Pins per frame.
    pub pins_per_frame: Option<i64>,
    /// Hit rule.
    pub hit_rule: Option<HitRule>,
    /// Band around 100, points.
    pub tolerance_pct: f64,
    /// Scale classes (method class).
    pub classes: Vec<ClassLine>,
    /// Ground categories.
    pub ground: Vec<CategoryLine>,
}

/// The damage protocol as the sheet needs it.
#[derive(Debug, Clone, Serialize)]
pub struct DamageInfo {
    /// Method.
    pub method: DamageMethod,
    /// Tagged leaves per cage.
    pub leaves_per_enclosure: i64,
    /// Scale classes (method class).
    pub classes: Vec<ClassLine>,
}

/// A tagged leaf on the sheet.
#[derive(Debug, Clone, Serialize)]
pub struct LeafLine {
    /// The leaf.
    pub leaf: TaggedLeaf,
    /// Its plant's code.
    pub taxon_code: String,
    /// The latest earlier score.
    pub previous: Option<DamageRecord>,
    /// Today's score.
    pub today: Option<DamageRecord>,
}

/// The cage sheet.
#[derive(Debug, Clone, Serialize)]
pub struct Sheet {
    /// Cage id.
    pub enclosure_id: EnclosureId,
    /// Label.
    pub label: String,
    /// Block code.
    pub block: String,
    /// Treatment.
    pub treatment: Treatment,
    /// Field day.
    pub date: NaiveDate,
    /// Day of the experiment.
    pub day: i64,
    /// Days since the first stocking.
    pub days_since_stocking: Option<i64>,
    /// Kinds due today by the schedule.
    pub due: Vec<VisitKind>,
    /// Planned visits of earlier days not made yet but still within their
    /// grace days: to do today, as the route lists them.
    pub late: Vec<Planned>,
    /// Today's visits.
    pub visits: Vec<Visit>,
    /// Animals: stocking summary and census.
    pub animals: Vec<AnimalLine>,
    /// Plants for cover.
    pub plants: Vec<TaxonLine>,
    /// Cover protocol.
    pub cover: CoverInfo,
    /// Damage protocol.
    pub damage: DamageInfo,
    /// Today's cover records.
    pub cover_records: Vec<CoverRecord>,
    /// Tagged leaves with scores.
    pub leaves: Vec<LeafLine>,
    /// Today's stocking events.
    pub stocking_today: Vec<StockingEvent>,
}

/// The cover and damage protocols as the sheet shows them.
fn protocols(store: &Store) -> Result<(CoverInfo, DamageInfo)> {
    let scales = store.list::<ScaleClass>()?;
    let classes_of = |scale: Option<ScaleId>| -> Vec<ClassLine> {
        let mut v: Vec<ClassLine> = scales
            .iter()
            .filter(|c| Some(c.scale_id) == scale)
            .map(|c| ClassLine {
                code: c.code.clone(),
                lower_pct: c.lower_pct,
                upper_pct: c.upper_pct,
                midpoint_pct: c.midpoint_pct,
                description: c.description.clone(),
                sort_order: c.sort_order,
            })
            .collect();
        v.sort_by_key(|c| c.sort_order);
        v
    };
    let protocol = store
        .list::<CoverProtocol>()?
        .into_iter()
        .next()
        .ok_or_else(|| Error::State("the experiment has no cover protocol".into()))?;
    let ground = store
        .list::<GroundCategory>()?
        .into_iter()
        .filter(|g| g.protocol_id == protocol.id)
        .map(|g| CategoryLine {
            code: g.code,
            name: g.name,
        })
        .collect();
    let cover = CoverInfo {
        method: protocol.method,
        layered: protocol.layered,
        pins_per_frame: protocol.pins_per_frame,
        hit_rule: protocol.hit_rule,
        tolerance_pct: protocol.tolerance_pct,
        classes: classes_of(protocol.scale_id),
        ground,
    };
    let dp = store
        .list::<DamageProtocol>()?
        .into_iter()
        .next()
        .ok_or_else(|| Error::State("the experiment has no damage protocol".into()))?;
    let damage = DamageInfo {
        method: dp.method,
        leaves_per_enclosure: dp.leaves_per_enclosure,
        classes: classes_of(dp.scale_id),
    };
    Ok((cover, damage))
}
