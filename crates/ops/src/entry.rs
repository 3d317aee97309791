//! Field entry: starting and editing visits, stocking, census, cover,
//! damage, tagging leaves and their fates, deleting a record. Every save
//! goes through the core's field-entry commands and the one write path.

use chrono::{NaiveDate, Utc};
use rusqlite::OptionalExtension;
use serde::{Deserialize, Serialize};
use uuid::Uuid;

use fieldcage_core::model::*;
use fieldcage_core::record::{self, CoverEntry, CoverTarget, DamageEntry, NewVisit};
use fieldcage_core::store::Writer;
use fieldcage_core::{Error, Result};

use crate::context::Context;
use crate::*;

impl Service {
    /// Find today's visit of a kind to a cage, or start one.
    pub fn start_visit(&self, req: VisitRequest) -> Result<Visit> {
        self.write(|w, ctx| {
            self.visit_for(
                w,
                ctx,
                req.enclosure_id,
                req.kind,
                req.date,
                req.observer.as_deref(),
            )
        })
    }

    /// Change a visit's observer, notes or completion.
    pub fn update_visit(&self, req: UpdateVisit) -> Result<Visit> {
        self.write(|w, _| {
            let mut visit: Visit = w
                .get(req.visit_id.0)?
                .ok_or_else(|| not_found("visit", req.visit_id.0))?;
            if let Some(o) = req.observer {
                visit.observer = Some(o).filter(|o| !o.trim().is_empty());
            }
            if let Some(n) = req.notes {
                visit.notes = Some(n).filter(|n| !n.trim().is_empty());
            }
            if let Some(c) = req.completed {
                visit.completed = c;
            }
            w.update(&visit)?;
            Ok(visit)
        })
    }

    /// Save the census of one animal taxon at a cage today.
    pub fn save_census(&self, req: SaveCensus) -> Result<Saved<Census>> {
        self.write(|w, ctx| {
            let visit = self.visit_for(
                w,
                ctx,
                req.enclosure_id,
                VisitKind::Census,
                req.date,
                req.observer.as_deref(),
            )?;
            let row = record::census(w, visit.id, req.taxon_id, req.alive, req.dead, req.missing)?;
            Ok(Saved::new(row, visit.id))
        })
    }

    /// Record animals put in or taken out.
    pub fn save_stocking(&self, req: SaveStocking) -> Result<Saved<StockingEvent>> {
        self.write(|w, ctx| {
            let kind = if req.kind == StockingKind::Initial {
                VisitKind::Stocking
            } else {
                VisitKind::Census
            };
            let visit = self.visit_for(
                w,
                ctx,
                req.enclosure_id,
                kind,
                req.date,
                req.observer.as_deref(),
            )?;
            let row = record::stock(w, visit.id, req.taxon_id, req.kind, req.count, req.stage)?;
            Ok(Saved::new(row, visit.id))
        })
    }

    /// Save the cover of one plant or ground category today.
    pub fn save_cover(&self, req: SaveCover) -> Result<Saved<CoverRecord>> {
        let target = match (req.taxon_id, req.category) {
            (Some(t), None) => CoverTarget::Taxon(t),
            (None, Some(c)) => CoverTarget::Category(c),
            _ => {
                return Err(Error::invalid(
                    "cover_record",
                    "taxon_id",
                    "(both or neither)",
                    "give either taxon_id or category",
                ));
            }
        };
        let entry = match (req.percent, req.class_code, req.pin_hits) {
            (Some(x), None, None) => CoverEntry::Percent(x),
            (None, Some(c), None) => CoverEntry::Class(c),
            (None, None, Some(h)) => CoverEntry::Pins(h),
            (None, None, None) => CoverEntry::NotAssessed,
            _ => {
                return Err(Error::invalid(
                    "cover_record",
                    "value",
                    "(several)",
                    "give one of percent, class_code or pin_hits",
                ));
            }
        };
        self.write(|w, ctx| {
            let visit = self.visit_for(
                w,
                ctx,
                req.enclosure_id,
                VisitKind::Cover,
                req.date,
                req.observer.as_deref(),
            )?;
            let row = record::cover(w, visit.id, target, entry)?;
            Ok(Saved::new(row, visit.id))
        })
    }

    /// Save the damage of one tagged leaf today.
    pub fn save_damage(&self, req: SaveDamage) -> Result<Saved<DamageRecord>> {
        let entry = match (req.class_code, req.percent) {
            (Some(c), None) => DamageEntry::Class(c),
            (None, Some(x)) => DamageEntry::Percent(x),
            _ => {
                return Err(Error::invalid(
                    "damage_record",
                    "value",
                    "(none or both)",
                    "give one of class_code or percent",
                ));
            }
        };
        self.write(|w, ctx| {
            let leaf: TaggedLeaf = w
                .get(req.leaf_id.0)?
                .ok_or_else(|| not_found("tagged_leaf", req.leaf_id.0))?;
            if leaf.fate.is_some() {
                return Err(Error::invalid(
                    "damage_record",
                    "leaf_id",
                    &leaf.tag_label,
                    format!(
                        "the leaf is {}; score its replacement instead",
                        leaf.fate.map(|f| f.as_str()).unwrap_or("gone")
                    ),
                ));
            }
            let visit = self.visit_for(
                w,
                ctx,
                leaf.enclosure_id,
                VisitKind::Damage,
                req.date,
                req.observer.as_deref(),
            )?;
            let row = record::damage(w, visit.id, leaf.id, entry)?;
            Ok(Saved::new(row, visit.id))
        })
    }

    /// Tag a new leaf on a cage's plant.
    pub fn tag_leaf(&self, req: TagLeaf) -> Result<TaggedLeaf> {
        self.write(|w, ctx| {
            let date = self.field_date(ctx, req.date);
            record::tag_leaf(
                w,
                req.enclosure_id,
                req.taxon_id,
                req.tag_label.trim(),
                date,
                req.replaces,
            )
        })
    }

    /// Record that a leaf is lost, or lost and replaced by a newly tagged one.
    pub fn set_leaf_fate(&self, req: LeafFateRequest) -> Result<TaggedLeaf> {
        self.write(|w, ctx| {
            let date = self.field_date(ctx, req.date);
            let leaf: TaggedLeaf = w
                .get(req.leaf_id.0)?
                .ok_or_else(|| not_found("tagged_leaf", req.leaf_id.0))?;
            record::set_leaf_fate(w, leaf.id, req.fate, date)?;
            match (req.fate, req.replacement_label) {
                (LeafFate::Replaced, Some(label)) => record::tag_leaf(
                    w,
                    leaf.enclosure_id,
                    leaf.taxon_id,
                    label.trim(),
                    date,
                    Some(leaf.id),
                ),
                (LeafFate::Replaced, None) => Err(Error::invalid(
                    "tagged_leaf",
                    "replacement_label",
                    "(empty)",
                    "a replaced leaf needs the label of the new tag",
                )),
                (LeafFate::Lost, _) => w
                    .get(leaf.id.0)?
                    .ok_or_else(|| not_found("tagged_leaf", leaf.id.0)),
            }
        })
    }

    /// Delete a field record (a tombstone; the change log keeps it).
    pub fn delete_record(&self, req: RecordRef) -> Result<Deleted> {
        let schema = editable_table(&req.table)?;
        self.write(|w, _| w.delete(schema, &req.id.to_string()))?;
        Ok(Deleted {
            table: req.table,
            id: req.id,
        })
    }

    /// Today's visit of `kind` to a cage, started if there is none. A new
    /// visit fulfils the scheduled day of that kind: today's, or an earlier
    /// one not yet visited and still within its grace days; otherwise it is
    /// unscheduled.
    fn visit_for(
        &self,
        w: &mut Writer<'_>,
        ctx: &Context,
        enclosure: EnclosureId,
        kind: VisitKind,
        date: Option<NaiveDate>,
        observer: Option<&str>,
    ) -> Result<Visit> {
        let date = self.field_date(ctx, date);
        ctx.cage(enclosure)?;
        let observer = observer.map(str::trim).filter(|o| !o.is_empty());
        let existing: Option<VisitId> = w
            .conn()
            .query_row(
                "SELECT id FROM visit WHERE enclosure_id = ?1 AND kind = ?2 AND deleted = 0 \
                 AND substr(visited_at, 1, 10) = ?3 ORDER BY id DESC LIMIT 1",
                rusqlite::params![enclosure, kind.as_str(), date.to_string()],
                |r| r.get(0),
            )
            .optional()?;
        if let Some(id) = existing {
            let mut visit: Visit = w.get(id.0)?.ok_or_else(|| not_found("visit", id.0))?;
            if visit.observer.is_none() && observer.is_some() {
                visit.observer = observer.map(str::to_owned);
                w.update(&visit)?;
            }
            return Ok(visit);
        }
        let day = (date - ctx.experiment.start_date).num_days();
        let done: Vec<i64> = w
            .conn()
            .prepare("SELECT day FROM visit WHERE enclosure_id = ?1 AND kind = ?2 AND deleted = 0 AND day IS NOT NULL")?
            .query_map(rusqlite::params![enclosure, kind.as_str()], |r| r.get(0))?
            .collect::<rusqlite::Result<_>>()?;
        // Today's planned day, or an earlier one still within its grace days.
        let planned: Option<i64> = w
            .conn()
            .prepare(
                "SELECT day FROM schedule_entry WHERE kind = ?1 AND deleted = 0 \
                 AND day <= ?2 AND day + grace_days >= ?2 ORDER BY day DESC",
            )?
            .query_map(rusqlite::params![kind.as_str(), day], |r| {
                r.get::<_, i64>(0)
            })?
            .filter_map(|d| d.ok())
            .find(|d| *d == day || !done.contains(d));
        let now = Utc::now().with_timezone(&ctx.offset);
        let at = date
            .and_time(now.time())
            .and_local_timezone(ctx.offset)
            .single()
            .unwrap_or(now);
        record::start_visit(
            w,
            NewVisit {
                enclosure_id: enclosure,
                kind,
                day: planned,
                visited_at: at,
                observer: observer.map(str::to_owned),
                // The device name as set now (the settings screen can change it).
                device: Some(w.conn().query_row(
                    "SELECT name FROM local_device WHERE singleton = 1",
                    [],
                    |r| r.get(0),
                )?),
            },
        )
    }
}

/// Start (or find) today's visit of a kind.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct VisitRequest {
    /// The cage.
    pub enclosure_id: EnclosureId,
    /// What for.
    pub kind: VisitKind,
    /// Local date (today when left out).
    #[serde(default)]
    pub date: Option<NaiveDate>,
    /// Who records.
    #[serde(default)]
    pub observer: Option<String>,
}

/// Change a visit.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct UpdateVisit {
    /// The visit.
    pub visit_id: VisitId,
    /// New observer (empty clears).
    #[serde(default)]
    pub observer: Option<String>,
    /// New notes (empty clears).
    #[serde(default)]
    pub notes: Option<String>,
    /// Mark complete or not.
    #[serde(default)]
    pub completed: Option<bool>,
}

/// Save one census line.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SaveCensus {
    /// The cage.
    pub enclosure_id: EnclosureId,
    /// The animal taxon.
    pub taxon_id: TaxonId,
    /// Found alive (null = not assessed).
    pub alive: Option<i64>,
    /// Found dead (null = not assessed).
    pub dead: Option<i64>,
    /// Not found (null = not assessed).
    pub missing: Option<i64>,
    /// Local date (today when left out).
    #[serde(default)]
    pub date: Option<NaiveDate>,
    /// Who records.
    #[serde(default)]
    pub observer: Option<String>,
}

/// Save one stocking event.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SaveStocking {
    /// The cage.
    pub enclosure_id: EnclosureId,
    /// The animal taxon.
    pub taxon_id: TaxonId,
    /// initial / restock / removal.
    pub kind: StockingKind,
    /// How many.
    pub count: i64,
    /// Life stage.
    #[serde(default)]
    pub stage: Option<String>,
    /// Local date (today when left out).
    #[serde(default)]
    pub date: Option<NaiveDate>,
    /// Who records.
    #[serde(default)]
    pub observer: Option<String>,
}

/// Save one cover value: a taxon or a category, and one value by the method.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SaveCover {
    /// The cage.
    pub enclosure_id: EnclosureId,
    /// A plant taxon…
    #[serde(default)]
    pub taxon_id: Option<TaxonId>,
    /// …or a ground category code (or "vegetation").
    #[serde(default)]
    pub category: Option<String>,
    /// Visual percent (method percent).
    #[serde(default)]
    pub percent: Option<f64>,
    /// Class code (method class).
    #[serde(default)]
    pub class_code: Option<String>,
    /// Pin hits (method pins).
    #[serde(default)]
    pub pin_hits: Option<i64>,
    /// Local date (today when left out).
    #[serde(default)]
    pub date: Option<NaiveDate>,
    /// Who records.
    #[serde(default)]
    pub observer: Option<String>,
}

/// Save the damage of one tagged leaf.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SaveDamage {
    /// The leaf.
    pub leaf_id: LeafId,
    /// Class code (method class).
    #[serde(default)]
    pub class_code: Option<String>,
    /// Percent (method percent).
    #[serde(default)]
    pub percent: Option<f64>,
    /// Local date (today when left out).
    #[serde(default)]
    pub date: Option<NaiveDate>,
    /// Who records.
    #[serde(default)]
    pub observer: Option<String>,
}

/// Tag a leaf.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TagLeaf {
    /// The cage.
    pub enclosure_id: EnclosureId,
    /// The plant taxon.
    pub taxon_id: TaxonId,
    /// Label on the tag.
    pub tag_label: String,
    /// Leaf this one replaces.
    #[serde(default)]
    pub replaces: Option<LeafId>,
    /// Local date (today when left out).
    #[serde(default)]
    pub date: Option<NaiveDate>,
}

/// Set a leaf's fate.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct LeafFateRequest {
    /// The leaf.
    pub leaf_id: LeafId,
    /// lost / replaced.
    pub fate: LeafFate,
    /// Label of the new tag (replaced).
    #[serde(default)]
    pub replacement_label: Option<String>,
    /// Local date (today when left out).
    #[serde(default)]
    pub date: Option<NaiveDate>,
}

/// A saved record and the visit it belongs to.
#[derive(Debug, Clone, Serialize)]
pub struct Saved<T> {
    /// The record as stored.
    pub record: T,
    /// Its visit.
    pub visit_id: VisitId,
    /// Saved (committed) at, UTC.
    pub saved_at: String,
}

impl<T> Saved<T> {
    fn new(record: T, visit_id: VisitId) -> Saved<T> {
        Saved {
            record,
            visit_id,
            saved_at: Utc::now().to_rfc3339_opts(chrono::SecondsFormat::Millis, true),
        }
    }
}

/// A deleted record.
#[derive(Debug, Clone, Serialize)]
pub struct Deleted {
    /// Table.
    pub table: String,
    /// Id.
    pub id: Uuid,
}
