//! Field-entry commands: what the crew records at a cage. Each command checks
//! what it needs (the visit is of the right kind, the taxon has the right
//! role, a class code is on the protocol's scale), derives stored values
//! (cover and damage in percent) and writes through the store's one write
//! path. Cross-record plausibility (totals, repeat visits) is left to the
//! day's-end checks.

use chrono::{DateTime, FixedOffset};
use rusqlite::OptionalExtension;

use rusqlite::types::Value;

use crate::model::*;
use crate::store::merge::same_value;
use crate::store::{Writer, to_values};
use crate::tables::{TableSchema, display_value};
use crate::{Error, Result};

/// Fields of a new visit.
#[derive(Debug, Clone)]
pub struct NewVisit {
    /// Cage visited.
    pub enclosure_id: EnclosureId,
    /// What for.
    pub kind: VisitKind,
    /// Scheduled day this visit fulfils.
    pub day: Option<i64>,
    /// When, local time with offset.
    pub visited_at: DateTime<FixedOffset>,
    /// Who.
    pub observer: Option<String>,
    /// Device name.
    pub device: Option<String>,
}

/// Start a visit.
pub fn start_visit(w: &mut Writer<'_>, v: NewVisit) -> Result<Visit> {
    let visit = Visit {
        id: VisitId(w.new_id()),
        enclosure_id: v.enclosure_id,
        kind: v.kind,
        day: v.day,
        visited_at: v.visited_at,
        observer: v.observer,
        device: v.device,
        completed: false,
        notes: None,
    };
    w.insert(&visit)?;
    Ok(visit)
}

/// Mark a visit complete.
pub fn complete_visit(w: &mut Writer<'_>, visit: VisitId) -> Result<()> {
    let schema =
        crate::tables::get("visit").ok_or_else(|| Error::Invariant("no visit table".into()))?;
    w.update_fields(
        schema,
        &visit.to_string(),
        &[("completed", rusqlite::types::Value::Integer(1))],
    )?;
    Ok(())
}

/// Record animals put in or taken out at a stocking or census visit.
pub fn stock(
    w: &mut Writer<'_>,
    visit: VisitId,
    taxon: TaxonId,
    kind: StockingKind,
    count: i64,
    stage: Option<String>,
) -> Result<StockingEvent> {
    let details = StockDetails {
        stage,
        ..StockDetails::default()
    };
    stock_detailed(w, visit, taxon, kind, count, details)
}

/// What a stocking event may say beyond its count.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct StockDetails {
    /// Life stage.
    pub stage: Option<String>,
    /// Sex of the animals.
    pub sex: Option<Sex>,
    /// A note: for a removal, why the animals were taken out.
    pub notes: Option<String>,
}

/// [`stock`] with the stage, the sex and a note.
pub fn stock_detailed(
    w: &mut Writer<'_>,
    visit: VisitId,
    taxon: TaxonId,
    kind: StockingKind,
    count: i64,
    details: StockDetails,
) -> Result<StockingEvent> {
    expect_visit(
        w,
        visit,
        &[VisitKind::Stocking, VisitKind::Census],
        "stocking_event",
    )?;
    expect_animal(w, taxon, "stocking_event")?;
    let blank = |t: Option<String>| t.map(|t| t.trim().to_owned()).filter(|t| !t.is_empty());
    let event = StockingEvent {
        id: StockingEventId(w.new_id()),
        visit_id: visit,
        taxon_id: taxon,
        kind,
        count,
        stage: blank(details.stage),
        sex: details.sex,
        notes: blank(details.notes),
    };
    w.insert(&event)?;
    Ok(event)
}

/// Record a census of one animal taxon (replacing the values of an earlier
/// entry for the same visit and taxon). `None` = not assessed.
pub fn census(
    w: &mut Writer<'_>,
    visit: VisitId,
    taxon: TaxonId,
    alive: Option<i64>,
    dead: Option<i64>,
    missing: Option<i64>,
) -> Result<Census> {
    let edit = CensusEdit {
        alive: Some(alive),
        dead: Some(dead),
        missing: Some(missing),
        notes: None,
    };
    census_edit(w, visit, taxon, edit, &Seen::default())
}

/// The fields of a census row a person changed: `None` = not touched (the
/// stored value stays), `Some(None)` = cleared (not assessed).
#[derive(Debug, Clone, Default, PartialEq)]
pub struct CensusEdit {
    /// Found alive.
    pub alive: Option<Option<i64>>,
    /// Found dead.
    pub dead: Option<Option<i64>>,
    /// Not found.
    pub missing: Option<Option<i64>>,
    /// The row's note.
    pub notes: Option<Option<String>>,
}

/// Change the census of one animal taxon at a visit, field by field: only
/// the fields in `edit` are written, so a save never puts back a value the
/// person did not touch. With `seen`, a field that moved since the person
/// saw it is refused ([`Error::Stale`]).
pub fn census_edit(
    w: &mut Writer<'_>,
    visit: VisitId,
    taxon: TaxonId,
    edit: CensusEdit,
    seen: &Seen,
) -> Result<Census> {
    expect_visit(w, visit, &[VisitKind::Census], "census")?;
    expect_animal(w, taxon, "census")?;
    let existing: Option<CensusId> = w
        .conn()
        .query_row(
            "SELECT id FROM census WHERE visit_id = ?1 AND taxon_id = ?2 AND deleted = 0",
            rusqlite::params![visit, taxon],
            |r| r.get(0),
        )
        .optional()?;
    let fresh = Census {
        id: CensusId(w.new_id()),
        visit_id: visit,
        taxon_id: taxon,
        alive: edit.alive.flatten(),
        dead: edit.dead.flatten(),
        missing: edit.missing.flatten(),
        notes: edit
            .notes
            .clone()
            .flatten()
            .filter(|n| !n.trim().is_empty()),
    };
    save(w, existing.map(|id| id.0), fresh, seen, |old, new| Census {
        id: old.id,
        alive: if edit.alive.is_some() {
            new.alive
        } else {
            old.alive
        },
        dead: if edit.dead.is_some() {
            new.dead
        } else {
            old.dead
        },
        missing: if edit.missing.is_some() {
            new.missing
        } else {
            old.missing
        },
        notes: if edit.notes.is_some() {
            new.notes
        } else {
            old.notes
        },
        ..old
    })
}

/// What a person saw of a row before changing it: stored values by field
/// name (a null where nothing was stored). A save that carries them is
/// refused with [`Error::Stale`] when a field moved meanwhile to a value
/// that is neither what was seen nor what is being saved.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Seen(pub Vec<(String, Value)>);

impl Seen {
    /// Check `seen` against the stored row (`None`: no row yet) and the row
    /// about to be stored.
    fn check(&self, table: &TableSchema, stored: Option<&[Value]>, next: &[Value]) -> Result<()> {
        for (field, saw) in &self.0 {
            let Some(i) = table.fields.iter().position(|f| f.name == *field) else {
                return Err(Error::invalid(
                    &table.name,
                    field,
                    display_value(saw),
                    "is not a field of the table",
                ));
            };
            let now = stored.map_or(&Value::Null, |row| &row[i]);
            if !same_value(now, saw) && !same_value(now, &next[i]) {
                return Err(Error::Stale {
                    table: table.name.clone(),
                    field: field.clone(),
                    stored: shown(now),
                    seen: shown(saw),
                    value: shown(&next[i]),
                });
            }
        }
        Ok(())
    }
}

/// A stored value as a person reads it ("empty" for not assessed).
fn shown(v: &Value) -> String {
    match v {
        Value::Null => "empty".to_owned(),
        other => display_value(other),
    }
}

/// What a cover row is about.
#[derive(Debug, Clone, PartialEq)]
pub enum CoverTarget {
    /// A plant taxon.
    Taxon(TaxonId),
    /// A ground category code of the protocol, or [`VEGETATION_CATEGORY`].
    Category(String),
}

/// A cover entry as made in the field, by the protocol's method.
#[derive(Debug, Clone, PartialEq)]
pub enum CoverEntry {
    /// Visual percent.
    Percent(f64),
    /// A class code of the protocol's scale.
    Class(String),
    /// Pin hits in the frame.
    Pins(i64),
    /// Looked at but not assessed (kept so the survey shows it was skipped).
    NotAssessed,
}

/// Record the cover of one taxon or category at a cover visit; the percent
/// is derived by the protocol (class midpoint; 100 × hits / pins, after
/// Elzinga, Salzer & Willoughby 1998).
pub fn cover(
    w: &mut Writer<'_>,
    visit: VisitId,
    target: CoverTarget,
    entry: CoverEntry,
) -> Result<CoverRecord> {
    cover_seen(w, visit, target, entry, &Seen::default())
}

/// [`cover`], refused with [`Error::Stale`] when the stored row moved since
/// the person saw it (`seen`).
pub fn cover_seen(
    w: &mut Writer<'_>,
    visit: VisitId,
    target: CoverTarget,
    entry: CoverEntry,
    seen: &Seen,
) -> Result<CoverRecord> {
    expect_visit(w, visit, &[VisitKind::Cover], "cover_record")?;
    let protocol = cover_protocol(w)?;
    let (taxon_id, category) = match target {
        CoverTarget::Taxon(t) => {
            let role: Option<String> = w
                .conn()
                .query_row(
                    "SELECT role FROM taxon WHERE id = ?1 AND deleted = 0",
                    [t],
                    |r| r.get(0),
                )
                .optional()?;
            match role.as_deref() {
                Some("plant") => {}
                Some(other) => {
                    return Err(Error::invalid(
                        "cover_record",
                        "taxon_id",
                        t,
                        format!("is a {other}, not a plant"),
                    ));
                }
                None => {
                    return Err(Error::invalid(
                        "cover_record",
                        "taxon_id",
                        t,
                        "refers to no taxon row",
                    ));
                }
            }
            (Some(t), None)
        }
        CoverTarget::Category(code) => {
            let known = code == VEGETATION_CATEGORY
                || w.conn()
                    .query_row(
                        "SELECT EXISTS (SELECT 1 FROM ground_category WHERE protocol_id = ?1 AND code = ?2 AND deleted = 0)",
                        rusqlite::params![protocol.id, code],
                        |r| r.get::<_, bool>(0),
                    )?;
            if !known {
                return Err(Error::invalid(
                    "cover_record",
                    "category",
                    &code,
                    format!(
                        "is not a ground category of protocol {} (nor \"{VEGETATION_CATEGORY}\")",
                        protocol.code
                    ),
                ));
            }
            if code == VEGETATION_CATEGORY && !protocol.layered {
                return Err(Error::invalid(
                    "cover_record",
                    "category",
                    &code,
                    "overall vegetation cover is recorded only with a layered protocol",
                ));
            }
            (None, Some(code))
        }
    };
    let mut row = CoverRecord {
        id: CoverRecordId(w.new_id()),
        visit_id: visit,
        taxon_id,
        category,
        value_pct: None,
        class_code: None,
        pin_hits: None,
        cover_pct: None,
        notes: None,
    };
    match (protocol.method, entry) {
        (_, CoverEntry::NotAssessed) => {}
        (CoverMethod::Percent, CoverEntry::Percent(x)) => {
            row.value_pct = Some(x);
            row.cover_pct = Some(x);
        }
        (CoverMethod::Class, CoverEntry::Class(code)) => {
            let scale = protocol
                .scale_id
                .ok_or_else(|| Error::Invariant("the class protocol has no scale".into()))?;
            row.cover_pct = Some(class_midpoint(w, scale, &code, "cover_record")?);
            row.class_code = Some(code);
        }
        (CoverMethod::Pins, CoverEntry::Pins(hits)) => {
            let pins = protocol.pins_per_frame.unwrap_or(0);
            row.cover_pct = Some(crate::analysis::cover::pins_to_percent(hits, pins)?);
            row.pin_hits = Some(hits);
        }
        (method, entry) => {
            return Err(Error::invalid(
                "cover_record",
                "entry",
                format!("{entry:?}"),
                format!("the cover protocol uses the {method} method"),
            ));
        }
    }
    let existing: Option<CoverRecordId> = w
        .conn()
        .query_row(
            "SELECT id FROM cover_record WHERE visit_id = ?1 AND coalesce(taxon_id, '') = coalesce(?2, '') \
             AND coalesce(category, '') = coalesce(?3, '') AND deleted = 0",
            rusqlite::params![visit, row.taxon_id, row.category],
            |r| r.get(0),
        )
        .optional()?;
    save(w, existing.map(|id| id.0), row, seen, |old, new| {
        CoverRecord {
            id: old.id,
            notes: old.notes,
            ..new
        }
    })
}

/// Insert `fresh`, or, when a row for the same visit and target exists,
/// store `merge(existing, fresh)` over it, keeping the stored id (only
/// changed fields are logged). `seen` is checked against the stored row
/// first.
fn save<R: crate::store::Record>(
    w: &mut Writer<'_>,
    existing: Option<uuid::Uuid>,
    fresh: R,
    seen: &Seen,
    merge: impl FnOnce(R, R) -> R,
) -> Result<R> {
    let table = crate::store::table_of::<R>();
    let Some(id) = existing else {
        if !seen.0.is_empty() {
            seen.check(table, None, &to_values(table, &fresh)?)?;
        }
        w.insert(&fresh)?;
        return Ok(fresh);
    };
    let old: R = w.get(id)?.ok_or_else(|| Error::NotFound {
        table: R::TABLE.to_owned(),
        id: id.to_string(),
    })?;
    let stored = if seen.0.is_empty() {
        None
    } else {
        Some(to_values(table, &old)?)
    };
    let merged = merge(old, fresh);
    debug_assert_eq!(merged.id(), id, "merge keeps the stored row's id");
    if let Some(stored) = stored {
        seen.check(table, Some(&stored), &to_values(table, &merged)?)?;
    }
    w.update(&merged)?;
    Ok(merged)
}

/// Tag a leaf for damage scoring.
pub fn tag_leaf(
    w: &mut Writer<'_>,
    enclosure: EnclosureId,
    taxon: TaxonId,
    tag_label: &str,
    tagged_on: chrono::NaiveDate,
    replaces: Option<LeafId>,
) -> Result<TaggedLeaf> {
    let leaf = TaggedLeaf {
        id: LeafId(w.new_id()),
        enclosure_id: enclosure,
        taxon_id: taxon,
        tag_label: tag_label.to_owned(),
        plant_label: None,
        tagged_on,
        fate: None,
        fate_on: None,
        replaces_leaf_id: replaces,
        notes: None,
    };
    w.insert(&leaf)?;
    Ok(leaf)
}

/// Record that a tagged leaf is gone (lost) or gone and replaced.
pub fn set_leaf_fate(
    w: &mut Writer<'_>,
    leaf: LeafId,
    fate: LeafFate,
    on: chrono::NaiveDate,
) -> Result<()> {
    let schema = crate::tables::get("tagged_leaf")
        .ok_or_else(|| Error::Invariant("no tagged_leaf table".into()))?;
    w.update_fields(
        schema,
        &leaf.to_string(),
        &[
            ("fate", Value::Text(fate.as_str().to_owned())),
            ("fate_on", Value::Text(on.to_string())),
        ],
    )?;
    Ok(())
}

/// A damage entry by the damage protocol's method.
#[derive(Debug, Clone, PartialEq)]
pub enum DamageEntry {
    /// A class code of the damage scale.
    Class(String),
    /// Percent leaf area removed.
    Percent(f64),
    /// Looked at but not assessed (a cleared field): never 0 %, which says
    /// "looked, no damage".
    NotAssessed,
}

/// Score damage on a tagged leaf at a damage visit.
pub fn damage(
    w: &mut Writer<'_>,
    visit: VisitId,
    leaf: LeafId,
    entry: DamageEntry,
) -> Result<DamageRecord> {
    damage_seen(w, visit, leaf, entry, &Seen::default())
}

/// [`damage`], refused with [`Error::Stale`] when the stored row moved since
/// the person saw it (`seen`).
pub fn damage_seen(
    w: &mut Writer<'_>,
    visit: VisitId,
    leaf: LeafId,
    entry: DamageEntry,
    seen: &Seen,
) -> Result<DamageRecord> {
    expect_visit(w, visit, &[VisitKind::Damage], "damage_record")?;
    let (method, scale): (String, Option<ScaleId>) = w
        .conn()
        .query_row(
            "SELECT method, scale_id FROM damage_protocol WHERE deleted = 0 LIMIT 1",
            [],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .optional()?
        .ok_or_else(|| Error::State("the experiment has no damage protocol".into()))?;
    let mut row = DamageRecord {
        id: DamageRecordId(w.new_id()),
        visit_id: visit,
        leaf_id: leaf,
        class_code: None,
        value_pct: None,
        damage_pct: None,
        notes: None,
    };
    match (method.as_str(), entry, scale) {
        (_, DamageEntry::NotAssessed, _) => {}
        ("class", DamageEntry::Class(code), Some(scale)) => {
            row.damage_pct = Some(class_midpoint(w, scale, &code, "damage_record")?);
            row.class_code = Some(code);
        }
        ("percent", DamageEntry::Percent(x), _) => {
            row.value_pct = Some(x);
            row.damage_pct = Some(x);
        }
        (method, entry, _) => {
            return Err(Error::invalid(
                "damage_record",
                "entry",
                format!("{entry:?}"),
                format!("the damage protocol uses the {method} method"),
            ));
        }
    }
    let existing: Option<DamageRecordId> = w
        .conn()
        .query_row(
            "SELECT id FROM damage_record WHERE visit_id = ?1 AND leaf_id = ?2 AND deleted = 0",
            rusqlite::params![visit, leaf],
            |r| r.get(0),
        )
        .optional()?;
    save(w, existing.map(|id| id.0), row, seen, |old, new| {
        DamageRecord {
            id: old.id,
            notes: old.notes,
            ..new
        }
    })
}

/// The experiment's cover protocol.
pub fn cover_protocol(w: &Writer<'_>) -> Result<CoverProtocol> {
    crate::store::first::<CoverProtocol>(w.conn())?
        .ok_or_else(|| Error::State("the experiment has no cover protocol".into()))
}

fn class_midpoint(w: &Writer<'_>, scale: ScaleId, code: &str, table: &str) -> Result<f64> {
    let midpoint: Option<f64> = w
        .conn()
        .query_row(
            "SELECT midpoint_pct FROM scale_class WHERE scale_id = ?1 AND code = ?2 AND deleted = 0",
            rusqlite::params![scale, code],
            |r| r.get(0),
        )
        .optional()?;
    midpoint.ok_or_else(|| {
        let codes: Vec<String> = w
            .conn()
            .prepare("SELECT code FROM scale_class WHERE scale_id = ?1 AND deleted = 0 ORDER BY sort_order")
            .and_then(|mut s| s.query_map([scale], |r| r.get(0))?.collect())
            .unwrap_or_default();
        Error::invalid(table, "class_code", code, format!("is not a class of the scale ({})", codes.join(", ")))
    })
}

fn expect_visit(w: &Writer<'_>, visit: VisitId, kinds: &[VisitKind], table: &str) -> Result<()> {
    let kind: Option<String> = w
        .conn()
        .query_row(
            "SELECT kind FROM visit WHERE id = ?1 AND deleted = 0",
            [visit],
            |r| r.get(0),
        )
        .optional()?;
    let Some(kind) = kind else {
        return Err(Error::invalid(
            table,
            "visit_id",
            visit,
            "refers to no visit row",
        ));
    };
    if kinds.iter().any(|k| k.as_str() == kind) {
        Ok(())
    } else {
        let wanted: Vec<&str> = kinds.iter().map(|k| k.as_str()).collect();
        Err(Error::invalid(
            table,
            "visit_id",
            visit,
            format!(
                "is a {kind} visit; this entry belongs to a {} visit",
                wanted.join(" or ")
            ),
        ))
    }
}

fn expect_animal(w: &Writer<'_>, taxon: TaxonId, table: &str) -> Result<()> {
    let role: Option<String> = w
        .conn()
        .query_row(
            "SELECT role FROM taxon WHERE id = ?1 AND deleted = 0",
            [taxon],
            |r| r.get(0),
        )
        .optional()?;
    match role.as_deref() {
        Some("herbivore" | "predator") => Ok(()),
        Some(other) => Err(Error::invalid(
            table,
            "taxon_id",
            taxon,
            format!("is a {other}; only animals are counted"),
        )),
        None => Err(Error::invalid(
            table,
            "taxon_id",
            taxon,
            "refers to no taxon row",
        )),
    }
}
