//! The fieldcage tablet app: a Tauri 2 window showing the same `ui/` as the
//! local server, with one command, `call`, that hands an operation name and
//! its JSON arguments to the same operation set ([`Service::call`]). There is
//! no logic here of its own.
//!
//! The database lives in the app's data folder (`fieldcage.db`), or where
//! `--db PATH` says. `--demo` builds the invented demo season into a new
//! database; `--today YYYY-MM-DD` opens the route on a fixed field day.
//! On launch the app starts the core's automatic sync
//! ([`fieldcage_ops::auto_sync`]) on the same operation set: it syncs
//! with the folder chosen in Settings whenever it is in reach;
//! `--sync-every SECS` sets how often it looks (0 = never).

use std::path::PathBuf;
use std::sync::Arc;

use fieldcage_ops::auto_sync::AutoSync;
use fieldcage_ops::core::Store;
use fieldcage_ops::launch::Launch;
use fieldcage_ops::{Problem, ProblemCode, Service};
use serde_json::Value;
use tauri::{Manager, Runtime};

/// The one command: run an operation of the operation set.
#[tauri::command]
async fn call(
    service: tauri::State<'_, Arc<Service>>,
    op: String,
    args: Value,
) -> Result<Value, Problem> {
    let service = Arc::clone(&service);
    // The store blocks on disk I/O; keep it off the UI thread.
    tauri::async_runtime::spawn_blocking(move || service.call(&op, args))
        .await
        .map_err(|e| Problem::new(ProblemCode::Internal, format!("the operation failed: {e}")))?
}

/// Register the command surface on any runtime (the tests use the mock one).
pub fn app<R: Runtime>(builder: tauri::Builder<R>) -> tauri::Builder<R> {
    builder.invoke_handler(tauri::generate_handler![call])
}

/// Command-line options of the tablet app: its database and the options it
/// shares with `fieldcage serve` ([`Launch`]).
#[derive(Debug, Clone, Default, PartialEq, clap::Parser)]
#[command(name = "fieldcage-tablet", about = "The fieldcage tablet app", version)]
pub struct Options {
    /// Database file (default: `fieldcage.db` in the app data folder).
    #[arg(long)]
    pub db: Option<PathBuf>,
    /// The options `fieldcage serve` takes too.
    #[command(flatten)]
    pub launch: Launch,
}

impl Options {
    /// Read the options from `args` (without the program name).
    pub fn parse_from_args(args: impl IntoIterator<Item = String>) -> Result<Options, clap::Error> {
        use clap::Parser;
        Options::try_parse_from(std::iter::once("fieldcage-tablet".to_owned()).chain(args))
    }
}

/// Open the database the options name, building the demo season if asked.
pub fn open_service(
    db: &std::path::Path,
    options: &Options,
) -> fieldcage_ops::core::Result<Service> {
    let store = if options.launch.demo {
        options.launch.open_demo(db)?
    } else {
        Store::open(db)?
    };
    Ok(options.launch.service(store))
}

/// Put the operation set into the app's state and start automatic sync on
/// it (kept in the state too, so it runs as long as the app).
pub fn manage_service<R: Runtime, M: Manager<R>>(
    app: &M,
    service: Service,
    options: &Options,
) -> fieldcage_ops::core::Result<()> {
    let service = Arc::new(service);
    if let Some(every) = options.launch.sync_every.0 {
        app.manage(AutoSync::start(Arc::clone(&service), every)?);
    }
    app.manage(service);
    Ok(())
}

/// Start the app.
#[cfg_attr(mobile, tauri::mobile_entry_point)]
pub fn run() {
    // Prints help, version or a clear error naming the option, and exits
    // (2 for a wrong option).
    let options = <Options as clap::Parser>::parse();
    app(tauri::Builder::default())
        .setup(move |app| {
            let db = match &options.db {
                Some(db) => db.clone(),
                None => {
                    let dir = app.path().app_data_dir()?;
                    std::fs::create_dir_all(&dir)?;
                    dir.join("fieldcage.db")
                }
            };
            let service = open_service(&db, &options)?;
            manage_service(app, service, &options)?;
            Ok(())
        })
        .run(tauri::generate_context!())
        .unwrap_or_else(|e| {
            eprintln!("fieldcage-tablet: {e}");
            std::process::exit(1);
        });
}
