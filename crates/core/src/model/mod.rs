//! Domain types: one record struct per table (its fields are the columns of
//! `schemas/tables/<table>.json`, in the same order; a test keeps them in step)
//! and the enums of the trade.
//!
//! `Option` is "not given": for a measurement, `None` means "not assessed"
//! while `Some(0)` means "looked, absent". The two are never conflated.

mod ids;

use chrono::{DateTime, FixedOffset, NaiveDate};
use serde::{Deserialize, Serialize};
use uuid::Uuid;

pub use ids::*;

use crate::store::Record;

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

macro_rules! record {
    ($name:ident, $table:literal) => {
        impl Record for $name {
            const TABLE: &'static str = $table;
            fn id(&self) -> Uuid {
                self.id.0
            }
        }
    };
}

/// The experiment this database records (one per database).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Experiment {
    pub id: ExperimentId,
    pub code: String,
    pub title: String,
    pub start_date: NaiveDate,
    pub end_date: Option<NaiveDate>,
    pub utc_offset: String,
    pub design: Design,
    pub randomisation_seed: Option<i64>,
    pub notes: Option<String>,
}
record!(Experiment, "experiment");

/// A field site.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Site {
    pub id: SiteId,
    pub experiment_id: ExperimentId,
    pub code: String,
    pub name: String,
    pub latitude: Option<f64>,
    pub longitude: Option<f64>,
    pub notes: Option<String>,
}
record!(Site, "site");

/// A block of enclosures.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Block {
    pub id: BlockId,
    pub site_id: SiteId,
    pub code: String,
    pub notes: Option<String>,
}
record!(Block, "block");

/// An experimental treatment.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Treatment {
    pub id: TreatmentId,
    pub experiment_id: ExperimentId,
    pub code: String,
    pub name: String,
    pub herbivores: bool,
    pub predator_mode: PredatorMode,
    pub notes: Option<String>,
}
record!(Treatment, "treatment");

/// A cage: the experimental unit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Enclosure {
    pub id: EnclosureId,
    pub block_id: BlockId,
    pub label: String,
    pub area_m2: f64,
    pub height_m: Option<f64>,
    pub mesh_mm: Option<f64>,
    pub x_m: Option<f64>,
    pub y_m: Option<f64>,
    pub notes: Option<String>,
}
record!(Enclosure, "enclosure");

/// A plant or animal taxon.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Taxon {
    pub id: TaxonId,
    pub experiment_id: ExperimentId,
    pub code: String,
    pub scientific_name: String,
    pub common_name: Option<String>,
    pub role: Role,
    pub plant_group: Option<PlantGroup>,
    pub notes: Option<String>,
}
record!(Taxon, "taxon");

/// A cover or damage class scale.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Scale {
    pub id: ScaleId,
    pub code: String,
    pub name: String,
    pub kind: ScaleKind,
    pub source: Option<String>,
}
record!(Scale, "scale");

/// One class of a scale.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ScaleClass {
    pub id: ScaleClassId,
    pub scale_id: ScaleId,
    pub code: String,
    pub sort_order: i64,
    pub lower_pct: Option<f64>,
    pub upper_pct: Option<f64>,
    pub midpoint_pct: f64,
    pub ordinal: Option<i64>,
    pub description: Option<String>,
}
record!(ScaleClass, "scale_class");

/// Animals each enclosure of a treatment receives.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StockingPlan {
    pub id: StockingPlanId,
    pub treatment_id: TreatmentId,
    pub taxon_id: TaxonId,
    pub initial_count: i64,
    pub restock_below: Option<i64>,
    pub stage: Option<String>,
    pub notes: Option<String>,
}
record!(StockingPlan, "stocking_plan");

/// The treatment of an enclosure.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Assignment {
    pub id: AssignmentId,
    pub enclosure_id: EnclosureId,
    pub treatment_id: TreatmentId,
    pub method: AssignmentMethod,
    pub seed: Option<i64>,
}
record!(Assignment, "assignment");

/// How cover is estimated.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CoverProtocol {
    pub id: CoverProtocolId,
    pub experiment_id: ExperimentId,
    pub code: String,
    pub method: CoverMethod,
    pub scale_id: Option<ScaleId>,
    pub layered: bool,
    pub pins_per_frame: Option<i64>,
    pub hit_rule: Option<HitRule>,
    pub tolerance_pct: f64,
    pub notes: Option<String>,
}
record!(CoverProtocol, "cover_protocol");

/// A non-plant cover category of a protocol.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct GroundCategory {
    pub id: GroundCategoryId,
    pub protocol_id: CoverProtocolId,
    pub code: String,
    pub name: String,
}
record!(GroundCategory, "ground_category");

/// How leaf damage is scored.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DamageProtocol {
    pub id: DamageProtocolId,
    pub experiment_id: ExperimentId,
    pub code: String,
    pub method: DamageMethod,
    pub scale_id: Option<ScaleId>,
    pub leaves_per_enclosure: i64,
    pub notes: Option<String>,
}
record!(DamageProtocol, "damage_protocol");

/// A planned visit of one kind on one day, for every enclosure.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ScheduleEntry {
    pub id: ScheduleEntryId,
    pub experiment_id: ExperimentId,
    pub kind: VisitKind,
    pub day: i64,
    pub grace_days: i64,
}
record!(ScheduleEntry, "schedule_entry");

/// A marked leaf scored at every damage visit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TaggedLeaf {
    pub id: LeafId,
    pub enclosure_id: EnclosureId,
    pub taxon_id: TaxonId,
    pub tag_label: String,
    pub plant_label: Option<String>,
    pub tagged_on: NaiveDate,
    pub fate: Option<LeafFate>,
    pub fate_on: Option<NaiveDate>,
    pub replaces_leaf_id: Option<LeafId>,
    pub notes: Option<String>,
}
record!(TaggedLeaf, "tagged_leaf");

/// One visit of one kind to one enclosure.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Visit {
    pub id: VisitId,
    pub enclosure_id: EnclosureId,
    pub kind: VisitKind,
    pub day: Option<i64>,
    pub visited_at: DateTime<FixedOffset>,
    pub observer: Option<String>,
    pub device: Option<String>,
    pub completed: bool,
    pub notes: Option<String>,
}
record!(Visit, "visit");

/// Animals put into or taken out of an enclosure.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StockingEvent {
    pub id: StockingEventId,
    pub visit_id: VisitId,
    pub taxon_id: TaxonId,
    pub kind: StockingKind,
    pub count: i64,
    pub stage: Option<String>,
    pub sex: Option<Sex>,
    pub notes: Option<String>,
}
record!(StockingEvent, "stocking_event");

/// Animals of one taxon found at a census.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Census {
    pub id: CensusId,
    pub visit_id: VisitId,
    pub taxon_id: TaxonId,
    pub alive: Option<i64>,
    pub dead: Option<i64>,
    pub missing: Option<i64>,
    pub notes: Option<String>,
}
record!(Census, "census");

/// Cover of one plant taxon or ground category at a cover visit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CoverRecord {
    pub id: CoverRecordId,
    pub visit_id: VisitId,
    pub taxon_id: Option<TaxonId>,
    pub category: Option<String>,
    pub value_pct: Option<f64>,
    pub class_code: Option<String>,
    pub pin_hits: Option<i64>,
    pub cover_pct: Option<f64>,
    pub notes: Option<String>,
}
record!(CoverRecord, "cover_record");

/// Damage on one tagged leaf at a damage visit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DamageRecord {
    pub id: DamageRecordId,
    pub visit_id: VisitId,
    pub leaf_id: LeafId,
    pub class_code: Option<String>,
    pub value_pct: Option<f64>,
    pub damage_pct: Option<f64>,
    pub notes: Option<String>,
}
record!(DamageRecord, "damage_record");

/// A flag raised by a day's-end check, as stored (the `flag` table). The
/// flag as a rule raises it is [`crate::checks::Flag`].
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StoredFlag {
    pub id: FlagId,
    pub rule_id: String,
    pub family: CheckFamily,
    pub severity: Severity,
    pub enclosure_id: EnclosureId,
    pub day: i64,
    pub record_table: String,
    pub record_id: Uuid,
    pub related_table: Option<String>,
    pub related_id: Option<Uuid>,
    pub message: String,
    pub fix: String,
    pub note: Option<String>,
    pub status: FlagStatus,
}
record!(StoredFlag, "flag");

/// The category code of a cover row that gives overall vegetation cover
/// (layered protocols).
pub const VEGETATION_CATEGORY: &str = "vegetation";
