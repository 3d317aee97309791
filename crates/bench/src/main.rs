//! `fieldcage-bench`: times every stage of fieldcage on a synthetic season
//! (run it with --release; `scripts/bench.sh` does). Glue over
//! `fieldcage_bench`; the hidden `stage` command is how the scaling table runs
//! each stage in a child process of its own, so that its peak memory is its own.

use std::path::PathBuf;

use anyhow::Context;
use clap::{Parser, Subcommand};
use fieldcage_bench as bench;
use fieldcage_testkit::synth::SeasonSize;

/// Time each stage of fieldcage on a synthetic season.
#[derive(Debug, Parser)]
#[command(name = "fieldcage-bench", version, about)]
struct Cli {
    #[command(subcommand)]
    stage: Option<StageCommand>,
    /// Cages (rounded up to a multiple of 4).
    #[arg(long, default_value_t = 200)]
    cages: usize,
    /// Visits of each kind per cage.
    #[arg(long, default_value_t = 20)]
    visits: usize,
    /// Plant species per cover visit.
    #[arg(long, default_value_t = 40)]
    species: usize,
    /// Largest database of the scaling table, in seasons (of 1, 2, 5
    /// and 10); 0 leaves the scaling table out (a quick run).
    #[arg(long, default_value_t = 10)]
    max_seasons: usize,
    /// Saves timed through the HTTP API (and raw commits).
    #[arg(long, default_value_t = 1000)]
    saves: usize,
    /// Where the scratch databases go (default: a new temporary folder);
    /// the disk to measure. 10 seasons take several GB.
    #[arg(long)]
    dir: Option<PathBuf>,
}

#[derive(Debug, Subcommand)]
enum StageCommand {
    /// Run one stage on a database and print its seconds and this process's
    /// peak memory (what the scaling table runs in a child process).
    #[command(hide = true)]
    Stage {
        /// checks, analysis, export or raw-dump.
        stage: String,
        /// The database file.
        #[arg(long)]
        db: PathBuf,
        /// Where the stage writes.
        #[arg(long)]
        out: PathBuf,
        /// The day the checks run as of.
        #[arg(long)]
        today: chrono::NaiveDate,
    },
}

fn main() -> anyhow::Result<()> {
    let cli = Cli::parse();
    if let Some(StageCommand::Stage {
        stage,
        db,
        out,
        today,
    }) = cli.stage
    {
        let stage = bench::Stage::parse(&stage).with_context(|| {
            format!("stage: no stage {stage:?} (checks, analysis, export, raw-dump)")
        })?;
        let seconds = bench::run_stage(stage, &db, &out, today)?;
        println!("{}", bench::stage_line(seconds, bench::peak_memory()));
        return Ok(());
    }
    let size = SeasonSize {
        cages: cli.cages,
        visits: cli.visits,
        species: cli.species,
    };
    let mut options = bench::Options::full(size);
    options.scales.retain(|n| *n <= cli.max_seasons);
    options.saves = cli.saves;
    options.stage_exe =
        Some(std::env::current_exe().context("finding this program to run stages")?);
    let scratch = match cli.dir {
        Some(d) => {
            std::fs::create_dir_all(&d).with_context(|| format!("making {}", d.display()))?;
            tempfile::tempdir_in(&d)
        }
        None => tempfile::tempdir(),
    }
    .context("making a scratch folder")?;
    let report = bench::run(&options, scratch.path())?;
    print!("{}", bench::format_report(&report));
    Ok(())
}
