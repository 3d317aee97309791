//! The `fieldcage` command line: glue between the person at the keyboard and
//! the library. Errors are mapped to exit codes here and nowhere else.

use std::path::PathBuf;
use std::process::ExitCode;

use anyhow::Context;
use clap::{Parser, Subcommand};
use fieldcage::{Store, analysis, demo, export, import, setup};

/// Offline-first field recorder for cage experiments on predators, herbivores and plants.
#[derive(Debug, Parser)]
#[command(name = "fieldcage", version, about)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Debug, Subcommand)]
enum Command {
    /// Create a database from an experiment definition and randomise treatments.
    Init {
        /// The database file to create.
        #[arg(long)]
        db: PathBuf,
        /// The experiment definition (TOML; see demo_data/definition.toml).
        definition: PathBuf,
        /// Randomisation seed (recorded); a random one is drawn and printed if left out.
        #[arg(long)]
        seed: Option<u64>,
    },
    /// Print the layout: blocks, cages and their treatments.
    Layout {
        /// The database file.
        #[arg(long)]
        db: PathBuf,
    },
    /// Build the invented demo season into a new database.
    Demo {
        /// The database file to create.
        #[arg(long)]
        db: PathBuf,
    },
    /// Write the tidy tables and datapackage.json to a folder.
    Export {
        /// The database file.
        #[arg(long)]
        db: PathBuf,
        /// Output folder (created if missing).
        #[arg(long)]
        out: PathBuf,
    },
    /// Read exported tables back into a database; a bad file is rejected whole.
    Import {
        /// The database file (created if missing).
        #[arg(long)]
        db: PathBuf,
        /// Folder holding the tables.
        dir: PathBuf,
    },
    /// Print the effect table: log response ratios of each contrast and the
    /// consumptive / non-consumptive split of the predator effect.
    Results {
        /// The database file.
        #[arg(long)]
        db: PathBuf,
        /// Only this response (e.g. cover.total, cover.group.forb, diversity.shannon,
        /// damage.index, survival.SLUG).
        #[arg(long)]
        response: Option<String>,
        /// Only this day of the experiment (default: each response's last day).
        #[arg(long)]
        day: Option<i64>,
        /// Print JSON (effects, splits, options and data-handling notes).
        #[arg(long)]
        json: bool,
    },
    /// Reference-test hook: answers one JSON request on standard input with
    /// the analysis functions (see fieldcage::analysis::probe).
    #[command(hide = true, name = "analysis-probe")]
    AnalysisProbe,
    /// Time each stage on a synthetic season (run with --release).
    Bench {
        /// Cages (rounded up to a multiple of 4).
        #[arg(long, default_value_t = 200)]
        cages: usize,
        /// Visits of each kind per cage.
        #[arg(long, default_value_t = 20)]
        visits: usize,
        /// Plant species per cover visit.
        #[arg(long, default_value_t = 40)]
        species: usize,
    },
}

fn main() -> ExitCode {
    match run(Cli::parse()) {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("fieldcage: {e:#}");
            ExitCode::from(2)
        }
    }
}

/// Refuse to build into a file that already exists: init and demo make new databases.
fn new_database(db: &PathBuf) -> anyhow::Result<Store> {
    if db.exists() {
        anyhow::bail!("{} already exists; give a new file name", db.display());
    }
    Store::open(db).with_context(|| format!("opening {}", db.display()))
}

fn existing_database(db: &PathBuf) -> anyhow::Result<Store> {
    if !db.exists() {
        anyhow::bail!("{} does not exist", db.display());
    }
    Store::open(db).with_context(|| format!("opening {}", db.display()))
}

fn run(cli: Cli) -> anyhow::Result<()> {
    match cli.command {
        Command::Init {
            db,
            definition,
            seed,
        } => {
            let def = setup::definition::read(&definition)?;
            let mut store = new_database(&db)?;
            let seed = seed.unwrap_or_else(setup::fresh_seed);
            let result = setup::init(&mut store, &def, seed);
            if result.is_err() {
                drop(store);
                remove_database(&db);
            }
            let summary = result?;
            println!(
                "created {}: {} cages, {} treatments, randomisation seed {}",
                db.display(),
                summary.enclosures,
                summary.treatments,
                summary.seed
            );
        }
        Command::Layout { db } => {
            let store = existing_database(&db)?;
            print!("{}", setup::format_layout(&setup::layout(&store)?));
        }
        Command::Demo { db } => {
            let mut store = new_database(&db)?;
            let problems = demo::build(&mut store)?;
            println!(
                "built the demo season in {} ({} changes logged; {} deliberate problems planted for the checks)",
                db.display(),
                store.change_count()?,
                problems.len()
            );
        }
        Command::Export { db, out } => {
            let store = existing_database(&db)?;
            let summary = export::export(&store, &out)?;
            let rows: usize = summary.tables.iter().map(|(_, n)| n).sum();
            println!(
                "wrote {} data tables ({rows} rows), {} analysis tables, {}, and datapackage.json to {}",
                summary.tables.len(),
                summary.analysis.len(),
                analysis::report::FILE,
                out.display()
            );
        }
        Command::Import { db, dir } => {
            let mut store =
                Store::open(&db).with_context(|| format!("opening {}", db.display()))?;
            let summary = import::import(&mut store, &dir)?;
            let rows: usize = summary.tables.iter().map(|(_, n)| n).sum();
            println!(
                "imported {rows} rows from {} tables into {}",
                summary.tables.len(),
                db.display()
            );
        }
        Command::Results {
            db,
            response,
            day,
            json,
        } => {
            let store = existing_database(&db)?;
            let results = analysis::analyse(&store, &analysis::Options::default())?;
            let (effects, splits) = results.select(response.as_deref(), day)?;
            if json {
                let out = serde_json::json!({
                    "effects": effects,
                    "splits": splits,
                    "options": results.options,
                    "notes": results.notes,
                });
                println!("{}", serde_json::to_string_pretty(&out)?);
            } else {
                print!(
                    "{}",
                    analysis::report::effect_table(&results, &effects, &splits)
                );
            }
        }
        Command::AnalysisProbe => {
            let mut input = String::new();
            std::io::Read::read_to_string(&mut std::io::stdin(), &mut input)
                .context("reading the request on standard input")?;
            println!("{}", analysis::probe::run(&input)?);
        }
        Command::Bench {
            cages,
            visits,
            species,
        } => {
            let size = fieldcage::synth::SeasonSize {
                cages,
                visits,
                species,
            };
            let dir = tempfile::tempdir().context("making a scratch folder")?;
            let timings = fieldcage::bench::run(size, dir.path())?;
            print!("{}", fieldcage::bench::format_table(size, &timings));
        }
    }
    Ok(())
}

/// Remove a database that `init` created but could not fill.
fn remove_database(db: &std::path::Path) {
    for suffix in ["", "-wal", "-shm"] {
        let mut path = db.as_os_str().to_owned();
        path.push(suffix);
        let _ = std::fs::remove_file(path);
    }
}
