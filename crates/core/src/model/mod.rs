//! Domain types: one record struct per table (its fields are the columns of
//! `schemas/tables/<table>.json`, in the same order; a test keeps them in step),
//! declared once with `records!`, which also makes each table's typed reader;
//! projections of records (`projection!`); and the enums of the trade.
//!
//! `Option` is "not given": for a measurement, `None` means "not assessed"
//! while `Some(0)` means "looked, absent". The two are never conflated.

pub mod column;
mod ids;

use chrono::{DateTime, FixedOffset, NaiveDate};
use rusqlite::Row;
use serde::{Deserialize, Serialize};
use uuid::Uuid;

pub use ids::*;

use crate::store::{Projection, Record};
use crate::tables::FieldType;
use column::Column;

macro_rules! string_enum {
    ($(#[$doc:meta])* $name:ident { $($(#[$vdoc:meta])* $variant:ident = $text:literal,)* }) => {
        $(#[$doc])*
        #[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
        pub enum $name {
            $($(#[$vdoc])* #[serde(rename = $text)] $variant,)*
        }

        impl $name {
            /// Every value, in order.
            pub const ALL: &'static [$name] = &[$($name::$variant),*];

            /// The stored text of the value.
            pub fn as_str(self) -> &'static str {
                match self { $($name::$variant => $text,)* }
            }
        }

        impl std::fmt::Display for $name {
            fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
                f.write_str(self.as_str())
            }
        }

        impl rusqlite::types::FromSql for $name {
            fn column_result(
                value: rusqlite::types::ValueRef<'_>,
            ) -> rusqlite::types::FromSqlResult<Self> {
                value.as_str()?.parse().map_err(|e: String| {
                    rusqlite::types::FromSqlError::Other(e.into())
                })
            }
        }

        impl column::Column for $name {
            const KIND: crate::tables::FieldType = crate::tables::FieldType::String;
            fn decode(
                value: rusqlite::types::ValueRef<'_>,
            ) -> rusqlite::types::FromSqlResult<Self> {
                column::parsed(value)
            }
        }

        impl std::str::FromStr for $name {
            type Err = String;
            fn from_str(s: &str) -> Result<Self, String> {
                match s {
                    $($text => Ok($name::$variant),)*
                    _ => Err(format!(
                        "must be one of {}",
                        [$($text),*].join(", ")
                    )),
                }
            }
        }
    };
}

string_enum! {
    /// Treatment allocation design.
    Design { /// Randomised complete block design.
        Rcbd = "rcbd", }
}
string_enum! {
    /// What predators in a treatment can do.
    PredatorMode {
        /// No predators.
        None = "none",
        /// Predators that can kill (consumptive and non-consumptive effects).
        Lethal = "lethal",
        /// Predators that cannot kill: only the risk they pose acts.
        Risk = "risk",
    }
}
string_enum! {
    /// Role of a taxon in the experiment.
    Role { /// A plant whose cover and damage are recorded.
        Plant = "plant", /// An animal that eats the plants.
        Herbivore = "herbivore", /// An animal that eats or frightens the herbivores.
        Predator = "predator", }
}
string_enum! {
    /// Functional group of a plant.
    PlantGroup { /// Grasses.
        Grass = "grass", /// Non-legume forbs.
        Forb = "forb", /// Legumes.
        Legume = "legume", /// Sedges and rushes.
        Sedge = "sedge", /// Shrubs and trees.
        Woody = "woody", /// Anything else.
        Other = "other", }
}
string_enum! {
    /// What a scale measures.
    ScaleKind { /// Plant cover.
        Cover = "cover", /// Leaf damage.
        Damage = "damage", }
}
string_enum! {
    /// How cover is estimated.
    CoverMethod { /// Visual estimate in percent.
        Percent = "percent", /// Classes of a cover scale.
        Class = "class", /// Point-intercept pin frame.
        Pins = "pins", }
}
string_enum! {
    /// How pin hits are counted.
    HitRule { /// One category per pin: the top hit, or the ground category.
        First = "first", /// Every species touched by a pin counts.
        Any = "any", }
}
string_enum! {
    /// How leaf damage is scored.
    DamageMethod { /// Classes of a damage scale.
        Class = "class", /// Percent leaf area removed.
        Percent = "percent", }
}
string_enum! {
    /// What a visit is for.
    VisitKind { /// Stocking animals (day 0).
        Stocking = "stocking", /// Counting animals (and restocking).
        Census = "census", /// Estimating plant cover.
        Cover = "cover", /// Scoring damage on tagged leaves.
        Damage = "damage", }
}
string_enum! {
    /// Kind of a stocking event.
    StockingKind { /// First stocking.
        Initial = "initial", /// Animals added to replace losses.
        Restock = "restock", /// Animals taken out.
        Removal = "removal", }
}
string_enum! {
    /// Sex of stocked animals.
    Sex { /// Females.
        Female = "female", /// Males.
        Male = "male", /// Both.
        Mixed = "mixed", /// Not known.
        Unknown = "unknown", }
}
string_enum! {
    /// Fate of a tagged leaf that is no longer scored.
    LeafFate { /// The leaf is gone.
        Lost = "lost", /// The leaf is gone and a new one was tagged in its place.
        Replaced = "replaced", }
}
string_enum! {
    /// How a treatment came to an enclosure.
    AssignmentMethod { /// Seeded randomised complete block design.
        Rcbd = "rcbd", /// Set by hand.
        Manual = "manual", }
}

string_enum! {
    /// Family of a day's-end check rule.
    CheckFamily { /// Plant cover surveys.
        Cover = "cover", /// Animal counts and stocking.
        Counts = "counts", /// Leaf damage on tagged leaves.
        Damage = "damage", /// Visits and their schedule.
        Visits = "visits", }
}
string_enum! {
    /// How serious a flag is (most serious first, so that sorting puts errors first).
    Severity { /// Cannot be right as recorded: fix it, or confirm it with a note.
        Error = "error", /// Unusual: worth a look.
        Warning = "warning", /// Something to do (such as restocking), not a data problem.
        Notice = "notice", }
}
string_enum! {
    /// What became of a flag.
    FlagStatus { /// Raised and not yet dealt with.
        Open = "open", /// No longer raised: the data were corrected.
        Fixed = "fixed", /// Still raised, but confirmed right as recorded, with a note.
        Confirmed = "confirmed", }
}

/// Declares the record structs, one per stored table, each with its fields
/// in the schema's column order: the one column list of the table in the
/// code. For each it makes the struct and its [`Record`] impl (column names
/// and kinds, the `SELECT` text, the typed reader: column `i` into field
/// `i`), and [`RECORDS`] lists them all. `tests/schema.rs` holds every list
/// against `schemas/tables/<table>.json`.
macro_rules! records {
    ($(
        $(#[$doc:meta])*
        $table:literal => $name:ident {
            id: $idty:ty,
            $($field:ident: $ty:ty,)*
        }
    )*) => {
        $(
            $(#[$doc])*
            #[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
            pub struct $name {
                pub id: $idty,
                $(pub $field: $ty,)*
            }

            impl Record for $name {
                const TABLE: &'static str = $table;
                const COLUMNS: &'static [&'static str] = &["id", $(stringify!($field)),*];
                const KINDS: &'static [FieldType] =
                    &[<$idty as Column>::KIND, $(<$ty as Column>::KIND),*];
                const SELECT: &'static str =
                    concat!("SELECT id", $(", ", stringify!($field),)* " FROM ", $table);

                fn id(&self) -> Uuid {
                    self.id.0
                }

                fn from_row(row: &Row<'_>) -> rusqlite::Result<Self> {
                    let mut i = 0;
                    let mut next = || {
                        i += 1;
                        i
                    };
                    // Field expressions run in the order written: column i, field i.
                    Ok($name {
                        id: column::read(row, 0)?,
                        $($field: column::read(row, next())?,)*
                    })
                }
            }
        )*

        /// Every record type's table, column names and column kinds, in the
        /// order they are declared.
        pub const RECORDS: &[(&str, &[&str], &[FieldType])] =
            &[$(($table, <$name as Record>::COLUMNS, <$name as Record>::KINDS)),*];
    };
}

/// Declares a [`Projection`]: some columns of a record, read keyed by
/// another of its columns. Each name must be a column of the record, with
/// the same kind; the build fails otherwise.
macro_rules! projection {
    (
        $(#[$doc:meta])*
        $name:ident of $of:ident by $key:ident: $kty:ty {
            $($(#[$fdoc:meta])* $field:ident: $ty:ty,)*
        }
    ) => {
        $(#[$doc])*
        #[derive(Debug, Clone, PartialEq)]
        pub struct $name {
            $($(#[$fdoc])* pub $field: $ty,)*
        }

        impl Projection for $name {
            type Of = $of;
            type Key = $kty;
            const COLUMNS: &'static [&'static str] = &[stringify!($key), $(stringify!($field)),*];

            fn from_row(row: &Row<'_>) -> rusqlite::Result<($kty, Self)> {
                let mut i = 0;
                let mut next = || {
                    i += 1;
                    i
                };
                Ok((
                    column::read(row, 0)?,
                    $name {
                        $($field: column::read(row, next())?,)*
                    },
                ))
            }
        }

        const _: () = assert!(
            column::has_columns(
                <$of as Record>::COLUMNS,
                <$of as Record>::KINDS,
                <$name as Projection>::COLUMNS,
                &[<$kty as Column>::KIND, $(<$ty as Column>::KIND),*],
            ),
            concat!(
                stringify!($name),
                " names a column that ",
                stringify!($of),
                " does not have (or has with another type)"
            )
        );
    };
}

records! {
    /// The experiment this database records (one per database).
    "experiment" => Experiment {
        id: ExperimentId,
        code: String,
        title: String,
        start_date: NaiveDate,
        end_date: Option<NaiveDate>,
        utc_offset: String,
        design: Design,
        randomisation_seed: Option<i64>,
        notes: Option<String>,
    }

    /// A field site.
    "site" => Site {
        id: SiteId,
        experiment_id: ExperimentId,
        code: String,
        name: String,
        latitude: Option<f64>,
        longitude: Option<f64>,
        notes: Option<String>,
    }

    /// A block of enclosures.
    "block" => Block {
        id: BlockId,
        site_id: SiteId,
        code: String,
        notes: Option<String>,
    }

    /// An experimental treatment.
    "treatment" => Treatment {
        id: TreatmentId,
        experiment_id: ExperimentId,
        code: String,
        name: String,
        herbivores: bool,
        predator_mode: PredatorMode,
        notes: Option<String>,
    }

    /// A cage: the experimental unit.
    "enclosure" => Enclosure {
        id: EnclosureId,
        block_id: BlockId,
        label: String,
        area_m2: f64,
        height_m: Option<f64>,
        mesh_mm: Option<f64>,
        x_m: Option<f64>,
        y_m: Option<f64>,
        notes: Option<String>,
    }

    /// A plant or animal taxon.
    "taxon" => Taxon {
        id: TaxonId,
        experiment_id: ExperimentId,
        code: String,
        scientific_name: String,
        common_name: Option<String>,
        role: Role,
        plant_group: Option<PlantGroup>,
        notes: Option<String>,
    }

    /// A cover or damage class scale.
    "scale" => Scale {
        id: ScaleId,
        code: String,
        name: String,
        kind: ScaleKind,
        source: Option<String>,
    }

    /// One class of a scale.
    "scale_class" => ScaleClass {
        id: ScaleClassId,
        scale_id: ScaleId,
        code: String,
        sort_order: i64,
        lower_pct: Option<f64>,
        upper_pct: Option<f64>,
        midpoint_pct: f64,
        ordinal: Option<i64>,
        description: Option<String>,
    }

    /// Animals each enclosure of a treatment receives.
    "stocking_plan" => StockingPlan {
        id: StockingPlanId,
        treatment_id: TreatmentId,
        taxon_id: TaxonId,
        initial_count: i64,
        restock_below: Option<i64>,
        stage: Option<String>,
        notes: Option<String>,
    }

    /// The treatment of an enclosure.
    "assignment" => Assignment {
        id: AssignmentId,
        enclosure_id: EnclosureId,
        treatment_id: TreatmentId,
        method: AssignmentMethod,
        seed: Option<i64>,
    }

    /// How cover is estimated.
    "cover_protocol" => CoverProtocol {
        id: CoverProtocolId,
        experiment_id: ExperimentId,
        code: String,
        method: CoverMethod,
        scale_id: Option<ScaleId>,
        layered: bool,
        pins_per_frame: Option<i64>,
        hit_rule: Option<HitRule>,
        tolerance_pct: f64,
        notes: Option<String>,
    }

    /// A non-plant cover category of a protocol.
    "ground_category" => GroundCategory {
        id: GroundCategoryId,
        protocol_id: CoverProtocolId,
        code: String,
        name: String,
    }

    /// How leaf damage is scored.
    "damage_protocol" => DamageProtocol {
        id: DamageProtocolId,
        experiment_id: ExperimentId,
        code: String,
        method: DamageMethod,
        scale_id: Option<ScaleId>,
        leaves_per_enclosure: i64,
        notes: Option<String>,
    }

    /// A planned visit of one kind on one day, for every enclosure.
    "schedule_entry" => ScheduleEntry {
        id: ScheduleEntryId,
        experiment_id: ExperimentId,
        kind: VisitKind,
        day: i64,
        grace_days: i64,
    }

    /// A marked leaf scored at every damage visit.
    "tagged_leaf" => TaggedLeaf {
        id: LeafId,
        enclosure_id: EnclosureId,
        taxon_id: TaxonId,
        tag_label: String,
        plant_label: Option<String>,
        tagged_on: NaiveDate,
        fate: Option<LeafFate>,
        fate_on: Option<NaiveDate>,
        replaces_leaf_id: Option<LeafId>,
        notes: Option<String>,
    }

    /// One visit of one kind to one enclosure.
    "visit" => Visit {
        id: VisitId,
        enclosure_id: EnclosureId,
        kind: VisitKind,
        day: Option<i64>,
        visited_at: DateTime<FixedOffset>,
        observer: Option<String>,
        device: Option<String>,
        completed: bool,
        notes: Option<String>,
    }

    /// Animals put into or taken out of an enclosure.
    "stocking_event" => StockingEvent {
        id: StockingEventId,
        visit_id: VisitId,
        taxon_id: TaxonId,
        kind: StockingKind,
        count: i64,
        stage: Option<String>,
        sex: Option<Sex>,
        notes: Option<String>,
    }

    /// Animals of one taxon found at a census.
    "census" => Census {
        id: CensusId,
        visit_id: VisitId,
        taxon_id: TaxonId,
        alive: Option<i64>,
        dead: Option<i64>,
        missing: Option<i64>,
        notes: Option<String>,
    }

    /// Cover of one plant taxon or ground category at a cover visit.
    "cover_record" => CoverRecord {
        id: CoverRecordId,
        visit_id: VisitId,
        taxon_id: Option<TaxonId>,
        category: Option<String>,
        value_pct: Option<f64>,
        class_code: Option<String>,
        pin_hits: Option<i64>,
        cover_pct: Option<f64>,
        notes: Option<String>,
    }

    /// Damage on one tagged leaf at a damage visit.
    "damage_record" => DamageRecord {
        id: DamageRecordId,
        visit_id: VisitId,
        leaf_id: LeafId,
        class_code: Option<String>,
        value_pct: Option<f64>,
        damage_pct: Option<f64>,
        notes: Option<String>,
    }

    /// A flag raised by a day's-end check, as stored (the `flag` table). The
    /// flag as a rule raises it is [`crate::checks::Flag`].
    "flag" => StoredFlag {
        id: FlagId,
        rule_id: String,
        family: CheckFamily,
        severity: Severity,
        enclosure_id: EnclosureId,
        day: i64,
        record_table: String,
        record_id: Uuid,
        related_table: Option<String>,
        related_id: Option<Uuid>,
        message: String,
        fix: String,
        note: Option<String>,
        status: FlagStatus,
    }
}

projection! {
    /// A cover record as the rules read it: the stored row without its visit
    /// (the key it is filed under) and its notes, which no rule reads, and with
    /// its codes in boxed strings. On 10 seasons (1.6 M rows) this takes about
    /// 120 bytes a row where the full record takes 176.
    CoverRow of CoverRecord by visit_id: VisitId {
        /// The record's id.
        id: CoverRecordId,
        /// A plant taxon…
        taxon_id: Option<TaxonId>,
        /// …or a ground category code (or overall vegetation).
        category: Option<Box<str>>,
        /// Visual percent as entered.
        value_pct: Option<f64>,
        /// Class code as entered.
        class_code: Option<Box<str>>,
        /// Pin hits as entered.
        pin_hits: Option<i64>,
        /// Percent cover derived from the entry.
        cover_pct: Option<f64>,
    }
}

/// The category code of a cover row that gives overall vegetation cover
/// (layered protocols).
pub const VEGETATION_CATEGORY: &str = "vegetation";
