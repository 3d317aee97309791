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
use std::time::Duration;

use fieldcage_ops::auto_sync::{self, AutoSync};
use fieldcage_ops::core::{Store, demo};
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

/// Command-line options of the tablet app.
#[derive(Debug, Clone)]
pub struct Options {
    /// Database file (default: `fieldcage.db` in the app data folder).
    pub db: Option<PathBuf>,
    /// Build the demo season when the database holds no experiment.
    pub demo: bool,
    /// Fixed field day.
    pub today: Option<chrono::NaiveDate>,
    /// How often automatic sync looks at the sync folder (none = off).
    pub sync_every: Option<Duration>,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            db: None,
            demo: false,
            today: None,
            sync_every: Some(auto_sync::DEFAULT_EVERY),
        }
    }
}

impl Options {
    /// Read `--db PATH`, `--demo`, `--today DATE` and `--sync-every SECS`
    /// from the arguments.
    pub fn parse(args: impl IntoIterator<Item = String>) -> Result<Options, String> {
        let mut o = Options::default();
        let mut args = args.into_iter();
        while let Some(a) = args.next() {
            match a.as_str() {
                "--db" => o.db = Some(args.next().ok_or("--db needs a path")?.into()),
                "--demo" => o.demo = true,
                "--today" => {
                    let d = args.next().ok_or("--today needs a date")?;
                    o.today = Some(
                        d.parse()
                            .map_err(|_| format!("--today: {d:?} is not a date YYYY-MM-DD"))?,
                    );
                }
                "--sync-every" => {
                    let secs = args
                        .next()
                        .ok_or("--sync-every needs a number of seconds")?;
                    o.sync_every = secs
                        .parse()
                        .map_err(|_| format!("--sync-every: {secs:?} is not a number of seconds"))
                        .and_then(|s| auto_sync::interval(s).map_err(|e| e.to_string()))?;
                }
                other => {
                    return Err(format!(
                        "unknown option {other:?}; use --db PATH, --demo, --today YYYY-MM-DD, \
                         --sync-every SECS"
                    ));
                }
            }
        }
        Ok(o)
    }
}

/// Open the database the options name, building the demo season if asked.
pub fn open_service(
    db: &std::path::Path,
    options: &Options,
) -> fieldcage_ops::core::Result<Service> {
    let store = if options.demo {
        demo::open_or_build(db)?
    } else {
        Store::open(db)?
    };
    let service = Service::new(store);
    Ok(match options.today {
        Some(day) => service.with_today(day),
        None => service,
    })
}

/// Put the operation set into the app's state and start automatic sync on
/// it (kept in the state too, so it runs as long as the app).
pub fn manage_service<R: Runtime, M: Manager<R>>(
    app: &M,
    service: Service,
    options: &Options,
) -> fieldcage_ops::core::Result<()> {
    let service = Arc::new(service);
    if let Some(every) = options.sync_every {
        app.manage(AutoSync::start(Arc::clone(&service), every)?);
    }
    app.manage(service);
    Ok(())
}

/// Start the app.
#[cfg_attr(mobile, tauri::mobile_entry_point)]
pub fn run() {
    let options = match Options::parse(std::env::args().skip(1)) {
        Ok(o) => o,
        Err(e) => {
            eprintln!("fieldcage-tablet: {e}");
            std::process::exit(2);
        }
    };
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
