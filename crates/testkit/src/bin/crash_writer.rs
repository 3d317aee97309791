//! `fieldcage-crash-writer`: the writer process of the crash test. It saves
//! through the operation set until it is killed, logging each save before
//! and after it commits (see `fieldcage_testkit::crash_writer`).

use std::path::PathBuf;

use clap::Parser;

/// Save through the operation set until killed; log every save.
#[derive(Debug, Parser)]
#[command(name = "fieldcage-crash-writer", version, about)]
struct Args {
    /// The database file (set up already).
    #[arg(long)]
    db: PathBuf,
    /// The side file the saves are logged to (appended).
    #[arg(long)]
    log: PathBuf,
    /// Seed of the saves' cages, days, taxa and values.
    #[arg(long)]
    seed: u64,
    /// Stop after this many saves (default: run until killed).
    #[arg(long)]
    max_saves: Option<u64>,
}

fn main() -> anyhow::Result<()> {
    let args = Args::parse();
    fieldcage_testkit::crash_writer::run(&args.db, &args.log, args.seed, args.max_saves)?;
    Ok(())
}
