//! fieldcage's integration tests: one binary, one module per area, one shared
//! fixture builder (`util`), which builds the demo season with the same code
//! as `fieldcage demo`.

#![allow(clippy::unwrap_used)] // a failed unwrap is a failed test

mod util;

mod analysis;
mod api;
mod architecture;
mod changelog;
mod checks;
mod cli;
mod demo;
mod faults;
mod fuzz_corpus;
mod powerloss;
mod randomise;
mod record;
mod schema;
mod setup;
mod store;
mod sync;
mod sync_api;
mod sync_orders;
mod sync_props;
mod transfer;
