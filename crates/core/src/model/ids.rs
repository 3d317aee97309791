//! Typed row ids: UUIDv7 (time-ordered) newtypes, one per table, so that a
//! visit id can never be passed where an enclosure id is meant.

use rusqlite::ToSql;
use rusqlite::types::{FromSql, FromSqlError, FromSqlResult, ToSqlOutput, ValueRef};
use serde::{Deserialize, Serialize};
use uuid::Uuid;

macro_rules! id_type {
    ($($(#[$doc:meta])* $name:ident;)*) => {$(
        $(#[$doc])*
        #[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
        #[serde(transparent)]
        pub struct $name(pub Uuid);

        impl $name {
            /// The inner UUID.
            pub fn uuid(self) -> Uuid {
                self.0
            }
        }

        impl From<Uuid> for $name {
            fn from(u: Uuid) -> Self {
                $name(u)
            }
        }

        impl std::fmt::Display for $name {
            fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
                self.0.fmt(f)
            }
        }

        impl std::str::FromStr for $name {
            type Err = uuid::Error;
            fn from_str(s: &str) -> Result<Self, Self::Err> {
                Uuid::parse_str(s).map($name)
            }
        }

        impl ToSql for $name {
            fn to_sql(&self) -> rusqlite::Result<ToSqlOutput<'_>> {
                Ok(ToSqlOutput::from(self.0.to_string()))
            }
        }

        impl super::column::Column for $name {
            const KIND: crate::tables::FieldType = crate::tables::FieldType::String;
            fn decode(value: ValueRef<'_>) -> FromSqlResult<Self> {
                super::column::parsed(value)
            }
        }

        impl FromSql for $name {
            fn column_result(value: ValueRef<'_>) -> FromSqlResult<Self> {
                let text = value.as_str()?;
                Uuid::parse_str(text)
                    .map($name)
                    .map_err(|e| FromSqlError::Other(Box::new(e)))
            }
        }
    )*};
}

id_type! {
    /// Id of an experiment.
    ExperimentId;
    /// Id of a site.
    SiteId;
    /// Id of a block.
    BlockId;
    /// Id of a treatment.
    TreatmentId;
    /// Id of an enclosure (cage).
    EnclosureId;
    /// Id of a taxon.
    TaxonId;
    /// Id of a cover or damage scale.
    ScaleId;
    /// Id of a class of a scale.
    ScaleClassId;
    /// Id of a stocking plan row.
    StockingPlanId;
    /// Id of a treatment assignment.
    AssignmentId;
    /// Id of a cover protocol.
    CoverProtocolId;
    /// Id of a ground category.
    GroundCategoryId;
    /// Id of a damage protocol.
    DamageProtocolId;
    /// Id of a schedule entry.
    ScheduleEntryId;
    /// Id of a tagged leaf.
    LeafId;
    /// Id of a visit.
    VisitId;
    /// Id of a stocking event.
    StockingEventId;
    /// Id of a census row.
    CensusId;
    /// Id of a cover record.
    CoverRecordId;
    /// Id of a damage record.
    DamageRecordId;
    /// Id of a stored check flag.
    FlagId;
}
