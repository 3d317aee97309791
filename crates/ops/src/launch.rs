//! How an app opens its season: the options `fieldcage serve` and the tablet
//! app share (one `clap` type, flattened into each; behind the `args`
//! feature, so the operation set itself parses nothing).

use std::str::FromStr;
use std::time::Duration;

use fieldcage_core::store::Store;

use crate::{Service, auto_sync};

/// The options of an app that serves a season.
#[derive(Debug, Clone, PartialEq, clap::Args)]
pub struct Launch {
    /// Build the invented demo season into the database if it holds no
    /// experiment yet.
    #[arg(long)]
    pub demo: bool,
    /// Open the route on this field day instead of today (YYYY-MM-DD).
    #[arg(long, value_name = "DATE")]
    pub today: Option<chrono::NaiveDate>,
    /// Seconds between looks at the sync target (set in the settings screen
    /// or with `device --target`); sync runs on its own when the target is
    /// reachable and something is new. 0 turns it off.
    #[arg(
        long,
        value_name = "SECS",
        default_value = "5",
        allow_negative_numbers = true
    )]
    pub sync_every: SyncEvery,
}

impl Launch {
    /// Open the database at `path` for `--demo`: the demo season is built
    /// into it when it holds none, as it stood on the field day the app opens
    /// on (`--today`; [`fieldcage_core::demo::build_as_of`]), so that day has
    /// cages still due and nothing dated after it.
    pub fn open_demo(
        &self,
        path: &std::path::Path,
    ) -> fieldcage_core::Result<fieldcage_core::Store> {
        fieldcage_core::demo::open_or_build(path, self.today)
    }
}

impl Default for Launch {
    fn default() -> Self {
        Launch {
            demo: false,
            today: None,
            sync_every: SyncEvery(Some(auto_sync::DEFAULT_EVERY)),
        }
    }
}

impl Launch {
    /// The operation set over `store`, on the fixed field day if one is set.
    pub fn service(&self, store: Store) -> Service {
        let service = Service::new(store);
        match self.today {
            Some(day) => service.with_today(day),
            None => service,
        }
    }
}

/// How often automatic sync looks at the sync target: `None` is off
/// (`--sync-every 0`).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct SyncEvery(pub Option<Duration>);

impl FromStr for SyncEvery {
    type Err = String;

    fn from_str(text: &str) -> std::result::Result<SyncEvery, String> {
        let secs: f64 = text
            .trim()
            .parse()
            .map_err(|_| format!("{text:?} is not a number of seconds"))?;
        auto_sync::interval(secs)
            .map(SyncEvery)
            .map_err(|e| e.to_string())
    }
}
