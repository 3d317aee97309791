//! What fieldcage's tests, fuzz targets and benchmark share. Nothing here
//! ships in the user's `fieldcage` binary or the tablet app:
//!
//! - [`fixture`]: temporary folders and the demo season as test databases;
//! - [`synth`]: synthetic seasons of any size (the benchmark, the scaling tests);
//! - [`fuzz_checks`]: the invariants the fuzz targets check, also replayed by `cargo test`;
//! - [`crash_writer`]: the writer process of the crash test (`fieldcage-crash-writer`);
//! - [`probe`]: JSON in, JSON out over the analysis functions, for the
//!   reference tests in Python (`fieldcage-probe`).

pub mod crash_writer;
pub mod fixture;
pub mod fuzz_checks;
pub mod probe;
pub mod synth;
