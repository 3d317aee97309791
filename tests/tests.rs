//! fieldcage's integration tests: one binary, one module per area, one shared
//! fixture builder (`util`), which builds the demo season with the same code
//! as `fieldcage demo`.

mod util;

mod changelog;
mod cli;
mod demo;
mod randomise;
mod record;
mod schema;
mod setup;
mod store;
