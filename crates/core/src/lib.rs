//! fieldcage's core: everything an offline-first field recorder for
//! enclosure (cage) experiments knows and does, with no transport around it.
//! The operation set (`fieldcage-ops`), the HTTP server, the command line and
//! the tablet app are shells over this crate.
//!
//! Data flows one way: input → validated command → [`store`] (with the change
//! log) → export, checks and analysis read from the store. The table
//! definitions in `schemas/tables/` ([`tables`]) are the single description of
//! every stored and exported column.

pub mod analysis;
pub mod checks;
pub mod demo;
pub mod disk;
pub mod error;
pub mod export;
pub mod import;
pub mod model;
pub mod record;
pub mod season;
pub mod setup;
pub mod store;
pub mod sync;
pub mod tables;

pub use error::{Error, Result};
pub use store::Store;
