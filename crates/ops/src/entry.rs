//! Field entry: starting and editing visits, stocking, census, cover,
//! damage, tagging leaves and their fates, deleting a record. Every save
//! goes through the core's field-entry commands and the one write path.

use chrono::{NaiveDate, Utc};
use serde::{Deserialize, Serialize};
use uuid::Uuid;

use fieldcage_core::model::*;
use fieldcage_core::record::{self, CensusEdit, CoverEntry, CoverTarget, DamageEntry};
use fieldcage_core::store::Writer;
use fieldcage_core::{Error, Result};

use crate::fields::{self, FieldChange, change, count, count_change};
use crate::*;
use fieldcage_core::season::{self, Frame, VisitFor};

impl Service {
    /// Find today's visit of a kind to a cage, or start one.
    pub fn start_visit(&self, req: VisitRequest) -> Result<Visit> {
        self.write_once(req.op_id, "start_visit", |w, frame| {
            self.visit_for(
                w,
                frame,
                req.enclosure_id,
                req.kind,
                req.date,
                req.observer.as_deref(),
            )
        })
    }

    /// Change a visit's observer, notes or completion.
    pub fn update_visit(&self, req: UpdateVisit) -> Result<Visit> {
        self.write_once(req.op_id, "update_visit", |w, _| {
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

    /// Save the census of one animal taxon at a cage today: only the fields
    /// sent are written; with `base`, a field that moved since the person saw
    /// it is refused with both values.
    pub fn save_census(&self, req: SaveCensus) -> Result<Saved<Census>> {
        let seen = fields::seen("census", req.base.as_ref())?;
        let edit = CensusEdit {
            alive: req.alive,
            dead: req.dead,
            missing: req.missing,
            notes: req.notes,
        };
        self.write_once(req.op_id, "save_census", |w, frame| {
            let visit = self.visit_for(
                w,
                frame,
                req.enclosure_id,
                VisitKind::Census,
                req.date,
                req.observer.as_deref(),
            )?;
            let row = record::census_edit(w, visit.id, req.taxon_id, edit, &seen)?;
            Ok(Saved::new(row, visit.id))
        })
    }

    /// Record animals put in or taken out.
    pub fn save_stocking(&self, req: SaveStocking) -> Result<Saved<StockingEvent>> {
        self.write_once(req.op_id, "save_stocking", |w, frame| {
            let kind = if req.kind == StockingKind::Initial {
                VisitKind::Stocking
            } else {
                VisitKind::Census
            };
            let visit = self.visit_for(
                w,
                frame,
                req.enclosure_id,
                kind,
                req.date,
                req.observer.as_deref(),
            )?;
            let details = record::StockDetails {
                stage: req.stage,
                sex: req.sex,
                notes: req.notes,
            };
            let row =
                record::stock_detailed(w, visit.id, req.taxon_id, req.kind, req.count, details)?;
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
        let seen = fields::seen("cover_record", req.base.as_ref())?;
        self.write_once(req.op_id, "save_cover", |w, frame| {
            let visit = self.visit_for(
                w,
                frame,
                req.enclosure_id,
                VisitKind::Cover,
                req.date,
                req.observer.as_deref(),
            )?;
            let row = record::cover_seen(w, visit.id, target, entry, &seen)?;
            Ok(Saved::new(row, visit.id))
        })
    }

    /// Save the damage of one tagged leaf today.
    pub fn save_damage(&self, req: SaveDamage) -> Result<Saved<DamageRecord>> {
        let entry = match (req.class_code, req.percent) {
            (Some(c), None) => DamageEntry::Class(c),
            (None, Some(x)) => DamageEntry::Percent(x),
            // Neither: the field was cleared, "not assessed" (never 0 %).
            (None, None) => DamageEntry::NotAssessed,
            (Some(_), Some(_)) => {
                return Err(Error::invalid(
                    "damage_record",
                    "value",
                    "(both)",
                    "give one of class_code or percent, or neither for not assessed",
                ));
            }
        };
        let seen = fields::seen("damage_record", req.base.as_ref())?;
        self.write_once(req.op_id, "save_damage", |w, frame| {
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
                frame,
                leaf.enclosure_id,
                VisitKind::Damage,
                req.date,
                req.observer.as_deref(),
            )?;
            let row = record::damage_seen(w, visit.id, leaf.id, entry, &seen)?;
            Ok(Saved::new(row, visit.id))
        })
    }

    /// Tag a new leaf on a cage's plant.
    pub fn tag_leaf(&self, req: TagLeaf) -> Result<TaggedLeaf> {
        self.write_once(req.op_id, "tag_leaf", |w, frame| {
            let date = self.field_date(&frame.calendar, req.date);
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
        self.write_once(req.op_id, "set_leaf_fate", |w, frame| {
            let date = self.field_date(&frame.calendar, req.date);
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
        let schema = season::editable_table(&req.table)?;
        self.write_once(req.op_id, "delete_record", |w, _| {
            w.delete(schema, &req.id.to_string())?;
            Ok(Deleted {
                table: req.table,
                id: req.id,
            })
        })
    }

    /// Today's visit of a kind to a cage, or a new one
    /// ([`fieldcage_core::season::visit_for`]).
    fn visit_for(
        &self,
        w: &mut Writer<'_>,
        frame: &Frame,
        enclosure: EnclosureId,
        kind: VisitKind,
        date: Option<NaiveDate>,
        observer: Option<&str>,
    ) -> Result<Visit> {
        let want = VisitFor {
            cage: enclosure,
            kind,
            date: self.field_date(&frame.calendar, date),
            observer,
        };
        season::visit_for(w, frame, want, Utc::now())
    }
}

/// Start (or find) today's visit of a kind.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct VisitRequest {
    /// The save's own id (UUIDv7, made by the client): the same request sent
    /// again with it is answered with the first answer and writes nothing.
    #[serde(default)]
    pub op_id: Option<Uuid>,
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
    /// The save's own id (UUIDv7, made by the client): the same request sent
    /// again with it is answered with the first answer and writes nothing.
    #[serde(default)]
    pub op_id: Option<Uuid>,
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

/// Save one census line: the fields the person changed, and what they saw.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SaveCensus {
    /// The save's own id (UUIDv7, made by the client): the same request sent
    /// again with it is answered with the first answer and writes nothing.
    #[serde(default)]
    pub op_id: Option<Uuid>,
    /// The cage.
    pub enclosure_id: EnclosureId,
    /// The animal taxon.
    pub taxon_id: TaxonId,
    /// Found alive (left out = unchanged, null = not assessed).
    #[serde(default, deserialize_with = "count_change")]
    pub alive: FieldChange<i64>,
    /// Found dead (left out = unchanged, null = not assessed).
    #[serde(default, deserialize_with = "count_change")]
    pub dead: FieldChange<i64>,
    /// Not found (left out = unchanged, null = not assessed).
    #[serde(default, deserialize_with = "count_change")]
    pub missing: FieldChange<i64>,
    /// The row's note (left out = unchanged, null or empty = none).
    #[serde(default, deserialize_with = "change")]
    pub notes: FieldChange<String>,
    /// What the person saw of the changed fields before changing them (field
    /// → value, null for empty): a field stored otherwise meanwhile is
    /// refused, never overwritten.
    #[serde(default)]
    pub base: Option<serde_json::Map<String, serde_json::Value>>,
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
    /// The save's own id (UUIDv7, made by the client): the same request sent
    /// again with it is answered with the first answer and writes nothing.
    #[serde(default)]
    pub op_id: Option<Uuid>,
    /// The cage.
    pub enclosure_id: EnclosureId,
    /// The animal taxon.
    pub taxon_id: TaxonId,
    /// initial / restock / removal.
    pub kind: StockingKind,
    /// How many (a whole number of 0 or more).
    #[serde(deserialize_with = "count")]
    pub count: i64,
    /// Life stage.
    #[serde(default)]
    pub stage: Option<String>,
    /// Sex of the animals.
    #[serde(default)]
    pub sex: Option<Sex>,
    /// A note (for a removal: why the animals were taken out).
    #[serde(default)]
    pub notes: Option<String>,
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
    /// What the person saw of the row before changing it (field → value as
    /// stored, null for empty): a row stored otherwise meanwhile is refused.
    #[serde(default)]
    pub base: Option<serde_json::Map<String, serde_json::Value>>,
    /// The save's own id (UUIDv7, made by the client): the same request sent
    /// again with it is answered with the first answer and writes nothing.
    #[serde(default)]
    pub op_id: Option<Uuid>,
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
    #[serde(default, deserialize_with = "fields::count_opt")]
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
    /// What the person saw of the row before changing it (field → value as
    /// stored, null for empty): a row stored otherwise meanwhile is refused.
    #[serde(default)]
    pub base: Option<serde_json::Map<String, serde_json::Value>>,
    /// The save's own id (UUIDv7, made by the client): the same request sent
    /// again with it is answered with the first answer and writes nothing.
    #[serde(default)]
    pub op_id: Option<Uuid>,
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
    /// The save's own id (UUIDv7, made by the client): the same request sent
    /// again with it is answered with the first answer and writes nothing.
    #[serde(default)]
    pub op_id: Option<Uuid>,
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
    /// The save's own id (UUIDv7, made by the client): the same request sent
    /// again with it is answered with the first answer and writes nothing.
    #[serde(default)]
    pub op_id: Option<Uuid>,
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
#[derive(Debug, Clone, Serialize, Deserialize)]
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
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct Deleted {
    /// Table.
    pub table: String,
    /// Id.
    pub id: Uuid,
}
