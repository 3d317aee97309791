//! fieldcage: an offline-first field recorder for enclosure (cage) experiments
//! that test how predators shape plant communities.
//!
//! Data flows one way: input → validated command → [`store`] (with the change
//! log) → export, checks and analysis read from the store. The table
//! definitions in `schemas/tables/` ([`tables`]) are the single description of
//! every stored and exported column.

pub mod analysis;
pub mod bench;
pub mod checks;
pub mod crash_writer;
pub mod demo;
pub mod disk;
pub mod error;
pub mod export;
pub mod fuzz_checks;
pub mod import;
pub mod model;
pub mod record;
pub mod server;
pub mod service;
pub mod setup;
pub mod store;
pub mod sync;
pub mod synth;
pub mod tables;

pub use error::{Error, Result};
pub use store::Store;
