//! The `fieldcage` command line: glue between the person at the keyboard and
//! the library. Errors are mapped to exit codes here and nowhere else.

use std::path::{Path, PathBuf};
use std::process::ExitCode;

use anyhow::Context;
use clap::{Parser, Subcommand};
use fieldcage_core::{Store, analysis, checks, demo, export, import, setup, sync};
use fieldcage_ops::auto_sync;

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
        /// Randomisation seed (recorded). Left out: the definition's
        /// `[experiment] seed`, else a random one, drawn and printed.
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
    /// Serve the tablet UI and the JSON API for a database.
    Serve {
        /// The database file (with --demo: the demo season is built into it if it holds no experiment).
        #[arg(long)]
        db: PathBuf,
        /// Port to listen on.
        #[arg(long, default_value_t = 8088)]
        port: u16,
        /// Listen on every network interface, protected by a random token
        /// (only on a network you trust).
        #[arg(long)]
        lan: bool,
        /// The options the tablet app takes too.
        #[command(flatten)]
        launch: fieldcage_ops::launch::Launch,
    },
    /// Day's-end checks: raise, store and list the flags (exit 1 while an
    /// error is open); or confirm a flag with a note.
    #[command(group(clap::ArgGroup::new("scope").args(["day", "all", "cage"])))]
    Check {
        /// The database file.
        #[arg(long)]
        db: PathBuf,
        /// Check one day (local date YYYY-MM-DD); the default is today.
        #[arg(long, value_name = "YYYY-MM-DD")]
        day: Option<chrono::NaiveDate>,
        /// Check the whole season.
        #[arg(long)]
        all: bool,
        /// Check one cage over the whole season (its label).
        #[arg(long, value_name = "LABEL")]
        cage: Option<String>,
        /// Print the flags as JSON.
        #[arg(long)]
        json: bool,
        /// Confirm this flag (its id, or the last characters printed) instead of checking.
        #[arg(long, value_name = "FLAG_ID", requires = "note", conflicts_with_all = ["scope", "json"])]
        confirm: Option<String>,
        /// Why the confirmed flag's data are right as recorded.
        #[arg(long, value_name = "TEXT", requires = "confirm")]
        note: Option<String>,
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
    /// Write this device's new changes into a shared folder and apply every
    /// other device's changes found there.
    Sync {
        /// The database file.
        #[arg(long)]
        db: PathBuf,
        /// The shared folder (USB stick, station laptop share, network
        /// folder); default: the target saved with `device --target`.
        #[arg(long)]
        target: Option<PathBuf>,
    },
    /// Join a crew: make a new database with its own device identity, save
    /// the shared folder as its sync target and bring the experiment and
    /// every change from it.
    Join {
        /// The new database file (must not exist).
        #[arg(long)]
        db: PathBuf,
        /// The crew's shared folder (a missing last folder is made).
        #[arg(long)]
        target: PathBuf,
        /// This tablet's name, shown to the other devices.
        #[arg(long)]
        name: Option<String>,
    },
    /// Show this device's identity and sync state; --name renames the device.
    Device {
        /// The database file.
        #[arg(long)]
        db: PathBuf,
        /// A new human name for this device (shown to the other devices).
        #[arg(long)]
        name: Option<String>,
        /// Save the sync target folder (absolute path; "" clears it); `serve`
        /// and the tablet app sync with it on their own.
        #[arg(long, value_name = "DIR")]
        target: Option<String>,
    },
    /// List the conflicts left by sync; --keep or --take settles one.
    Conflicts {
        /// The database file.
        #[arg(long)]
        db: PathBuf,
        /// Keep the version in force for the conflict with this key.
        #[arg(long, conflicts_with = "take")]
        keep: Option<String>,
        /// Take the other version for the conflict with this key.
        #[arg(long)]
        take: Option<String>,
    },
    /// Copy the database with SQLite's backup API (safe while it is in use).
    Backup {
        /// The database file.
        #[arg(long)]
        db: PathBuf,
        /// The new copy (must not exist).
        #[arg(long)]
        to: PathBuf,
    },
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    // A command's output piped into `head` (or any reader that stops early)
    // ends it quietly, as it does other command-line tools, instead of a
    // panic from the next line printed. Not for the server, which must
    // outlive whatever it writes to.
    if !matches!(cli.command, Command::Serve { .. }) {
        sigpipe::reset();
    }
    match run(cli) {
        Ok(code) => code,
        Err(e) => {
            eprintln!("fieldcage: {e:#}");
            ExitCode::from(2)
        }
    }
}

/// A new database joins the crew at `target`: named, the folder saved as its
/// sync target, then the first sync.
fn join(store: &mut Store, target: &Path, name: Option<&str>) -> anyhow::Result<sync::SyncReport> {
    if let Some(name) = name {
        store.set_device_name(name)?;
    }
    sync::save_target(store, &target.display().to_string())?;
    Ok(sync::sync_once(store, target)?)
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

/// Run a command; `Ok` carries the exit code of a command that ran (1 when
/// `check` leaves errors open).
fn run(cli: Cli) -> anyhow::Result<ExitCode> {
    match cli.command {
        Command::Init {
            db,
            definition,
            seed,
        } => {
            let def = setup::definition::read(&definition)?;
            let (seed, source) = setup::choose_seed(&def, seed)?;
            let mut store = new_database(&db)?;
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
            if source == setup::SeedSource::Drawn {
                println!(
                    "the seed was drawn now; to give other tablets this layout, add `seed = {seed}` \
                     to [experiment] in {def_path}, or set them up with:\n  fieldcage init --db \
                     TABLET.db {def_path} --seed {seed}\n(or let them join this tablet's sync \
                     folder: fieldcage join --db TABLET.db --target FOLDER)",
                    def_path = definition.display()
                );
            }
        }
        Command::Layout { db } => {
            let store = existing_database(&db)?;
            print!("{}", setup::format_layout(&setup::layout(&store)?));
        }
        Command::Demo { db } => {
            let mut store = new_database(&db)?;
            let problems = demo::build(&mut store)?;
            let flags = store.list::<fieldcage_core::model::StoredFlag>()?;
            let confirmed = flags
                .iter()
                .filter(|f| f.status == fieldcage_core::model::FlagStatus::Confirmed)
                .count();
            println!(
                "built the demo season in {} ({} changes logged; {} deliberate problems planted for the checks, which raised {} flags, {confirmed} of them confirmed)",
                db.display(),
                store.change_count()?,
                problems.len(),
                flags.len()
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
        Command::Serve {
            db,
            port,
            lan,
            launch,
        } => {
            let store = if launch.demo {
                launch
                    .open_demo(&db)
                    .with_context(|| format!("opening {}", db.display()))?
            } else {
                existing_database(&db)?
            };
            let service = launch.service(store);
            let (ip, guard) = if lan {
                (
                    std::net::IpAddr::from([0, 0, 0, 0]),
                    fieldcage_server::Guard::lan(),
                )
            } else {
                (
                    std::net::IpAddr::from([127, 0, 0, 1]),
                    fieldcage_server::Guard::loopback(port),
                )
            };
            let addr = std::net::SocketAddr::new(ip, port);
            match &guard.token {
                Some(token) => println!(
                    "fieldcage is serving {} on every interface, port {port}.\n\
                     Open http://<this-device-address>:{port}/#token={token} on a device you trust.",
                    db.display()
                ),
                None => println!(
                    "fieldcage is serving {}.\nOpen http://127.0.0.1:{port}/ (Ctrl-C to stop)",
                    db.display()
                ),
            }
            let service = std::sync::Arc::new(service);
            // Kept alive while serving; dropping it stops automatic sync.
            let _auto_sync = match launch.sync_every.0 {
                Some(every) => Some(auto_sync::AutoSync::start(
                    std::sync::Arc::clone(&service),
                    every,
                )?),
                None => None,
            };
            let runtime = tokio::runtime::Runtime::new().context("starting the server runtime")?;
            runtime
                .block_on(fieldcage_server::serve(service, addr, guard))
                .with_context(|| format!("serving on {addr}"))?;
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
        Command::Sync { db, target } => {
            let mut store = existing_database(&db)?;
            let target = match target {
                Some(t) => t,
                None => sync::saved_target(&store)?.ok_or_else(|| {
                    anyhow::anyhow!(
                        "no --target given and none saved: use --target DIR, or save one with \
                         fieldcage device --db {} --target DIR",
                        db.display()
                    )
                })?,
            };
            let report = sync::sync_once(&mut store, &target)?;
            print!("{report}");
        }
        Command::Join { db, target, name } => {
            let name = name.as_deref().map(Store::check_device_name).transpose()?;
            let target = std::path::absolute(&target)
                .with_context(|| format!("the folder {}", target.display()))?;
            let mut store = new_database(&db)?;
            let report = match join(&mut store, &target, name.as_deref()) {
                Ok(report) => report,
                Err(e) => {
                    // Nothing half made: a new attempt starts from no file.
                    drop(store);
                    remove_database(&db);
                    return Err(e);
                }
            };
            print!("{report}");
            match fieldcage_core::season::Frame::load_if_any(&store)? {
                Some(frame) => println!(
                    "joined {} ({} cages): {} is device {} ({}), syncing with {}",
                    frame.experiment.code,
                    frame.cages.len(),
                    db.display(),
                    store.device_id(),
                    store.device_name()?,
                    target.display()
                ),
                None => println!(
                    "joined, but {} holds no experiment yet: set one up on the first tablet \
                     (fieldcage init), sync it, then sync here again",
                    target.display()
                ),
            }
        }
        Command::Device { db, name, target } => {
            let mut store = existing_database(&db)?;
            let name = name.as_deref().map(Store::check_device_name).transpose()?;
            if let Some(target) = target {
                sync::save_target(&mut store, &target)?;
            }
            if let Some(name) = name {
                store.set_device_name(&name)?;
            }
            println!("device id:   {}", store.device_id());
            println!("device name: {}", store.device_name()?);
            match sync::saved_target(&store)? {
                Some(t) => println!("sync target: {}", t.display()),
                None => println!("sync target: not set"),
            }
            println!(
                "changes not yet written for sync: {}",
                sync::pending_changes(&store)?
            );
            match sync::last_success(&store)? {
                Some(run) => println!("last sync:   {} with {}", run.finished_at, run.target),
                None => println!("last sync:   never"),
            }
            println!("open conflicts: {}", sync::conflicts(&store)?.len());
            for a in sync::clock_anomalies(&store)? {
                println!("clock ({}): {}", a.noticed_at, a.describe());
            }
        }
        Command::Conflicts { db, keep, take } => {
            let mut store = existing_database(&db)?;
            let choice = match (keep, take) {
                (Some(key), _) => Some((key, sync::ConflictChoice::KeepCurrent)),
                (_, Some(key)) => Some((key, sync::ConflictChoice::TakeOther)),
                _ => None,
            };
            if let Some((key, choice)) = choice {
                sync::resolve_conflict(&mut store, &key, choice)?;
                println!("settled {key}");
            }
            let open = sync::conflicts(&store)?;
            if open.is_empty() {
                println!("no open conflicts");
            }
            for c in open {
                println!("{}", format_conflict(&c));
            }
        }
        Command::Backup { db, to } => {
            let store = existing_database(&db)?;
            store.backup_to(&to)?;
            println!(
                "copied {} to {} (a copy for safekeeping: never sync it as a second device)",
                db.display(),
                to.display()
            );
        }
        Command::Check {
            db,
            day,
            all,
            cage,
            json,
            confirm,
            note,
        } => {
            let mut store = existing_database(&db)?;
            if let Some(flag) = confirm {
                let f = checks::confirm(&mut store, &flag, note.as_deref().unwrap_or_default())?;
                println!(
                    "confirmed flag {} ({}, {}, day {}): {}\nnote: {}",
                    f.id,
                    f.rule_id,
                    f.cage,
                    f.day,
                    f.message,
                    f.note.unwrap_or_default()
                );
                return Ok(ExitCode::SUCCESS);
            }
            let today = checks::today(&store)?;
            let scope = match (day, all, cage) {
                (Some(day), _, _) => checks::Scope::Day(day),
                (_, true, _) => checks::Scope::Season,
                (_, _, Some(label)) => checks::Scope::Cage(label),
                _ => checks::Scope::Day(today),
            };
            let report = checks::run(&mut store, &scope, today)?;
            if json {
                println!("{}", serde_json::to_string_pretty(&report)?);
            } else {
                print!("{}", checks::format_report(&report));
                if report.has_open_errors() {
                    println!(
                        "\n{} open error(s): fix the data and check again, or confirm a flag that is right as recorded:\n  fieldcage check --db {} --confirm FLAG_ID --note \"why it is right\"",
                        report.open_errors,
                        db.display()
                    );
                }
            }
            if report.has_open_errors() {
                return Ok(ExitCode::from(1));
            }
        }
    }
    Ok(ExitCode::SUCCESS)
}

/// One conflict as text for the terminal.
fn format_conflict(c: &sync::Conflict) -> String {
    use fieldcage_core::tables::display_value;
    let side = |v: &sync::Version| {
        let what = match (c.kind, v.op) {
            (sync::ConflictKind::Duplicate, _) => format!("row {}", v.row_id),
            (_, fieldcage_core::store::Op::Delete) => "deleted the row".to_owned(),
            (_, fieldcage_core::store::Op::Restore) => "restored the row".to_owned(),
            _ => display_value(&v.value),
        };
        format!(
            "{what} ({}{})",
            v.device_name,
            if v.is_local { ", this device" } else { "" }
        )
    };
    let kind = match c.kind {
        sync::ConflictKind::Concurrent => "edited on two devices",
        sync::ConflictKind::Deleted => "edited after a delete it did not see",
        sync::ConflictKind::Duplicate => "recorded twice",
        sync::ConflictKind::Orphan => "refers to a row that is deleted or hidden",
        _ => "in conflict",
    };
    format!(
        "{}\n  {} {}{}: {kind}\n  in force: {}\n  other:    {}",
        c.key,
        c.table,
        c.row_id,
        c.field
            .as_deref()
            .map(|f| format!(".{f}"))
            .unwrap_or_default(),
        side(&c.current),
        side(&c.other)
    )
}

/// Remove a database that `init` created but could not fill.
fn remove_database(db: &std::path::Path) {
    for suffix in ["", "-wal", "-shm"] {
        let mut path = db.as_os_str().to_owned();
        path.push(suffix);
        let _ = std::fs::remove_file(path);
    }
}
