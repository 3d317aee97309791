//! The benchmark behind `fieldcage bench`: builds a synthetic season of a
//! given size ([`crate::synth`]) and times each stage on it: the build, the
//! day's-end checks over the whole season, the export (which includes the
//! analysis tables), the analysis on its own and the import; then a crew of
//! tablets records the same season between them and a new tablet merges all
//! their change-sets, and syncs again with nothing new. Figures are
//! wall-clock seconds of one run on this machine; run in release mode.

use std::path::Path;
use std::time::Instant;

use crate::Result;
use crate::checks::Scope;
use crate::store::Store;
use crate::sync;
use crate::synth::{self, SeasonSize};

/// One line of the benchmark table.
#[derive(Debug, Clone, PartialEq)]
pub struct Timing {
    /// What was timed.
    pub task: String,
    /// How much work it was (rows, files, …).
    pub work: String,
    /// Wall-clock seconds.
    pub seconds: f64,
}

/// Run every stage on a synthetic season built in `dir` (which must be empty).
pub fn run(size: SeasonSize, dir: &Path) -> Result<Vec<Timing>> {
    let mut out = Vec::new();
    let mut time = |task: &str, work: String, f: &mut dyn FnMut() -> Result<()>| -> Result<()> {
        let t = Instant::now();
        f()?;
        out.push(Timing {
            task: task.to_owned(),
            work,
            seconds: t.elapsed().as_secs_f64(),
        });
        Ok(())
    };
    let db = dir.join("season.db");
    let mut store = Store::open(&db)?;
    time(
        "build season through the write path",
        format!("{} cover rows", size.cover_rows()),
        &mut || synth::build(&mut store, size, 1),
    )?;
    // The checks run as of a day when every planned visit is due.
    let today = chrono::NaiveDate::from_ymd_opt(2026, 4, 1)
        .unwrap_or_default()
        .checked_add_days(chrono::Days::new(size.visits as u64 + 7))
        .unwrap_or_default();
    let mut raised = 0;
    time(
        "day's-end checks, read and rules only (no writes)",
        format!("{} cover rows and every visit", size.cover_rows()),
        &mut || {
            raised = crate::checks::check(store.conn(), &Scope::Season, today)?.len();
            Ok(())
        },
    )?;
    time(
        "day's-end checks, first run (flags stored)",
        format!("{raised} flags raised and stored"),
        &mut || crate::checks::run(&mut store, &Scope::Season, today).map(drop),
    )?;
    time(
        "day's-end checks again (nothing changed)",
        format!("{raised} flags reconciled"),
        &mut || crate::checks::run(&mut store, &Scope::Season, today).map(drop),
    )?;
    let changes = store.change_count()?;
    let export_dir = dir.join("export");
    time(
        "export tidy tables",
        format!("{changes} logged changes"),
        &mut || crate::export::export(&store, &export_dir).map(drop),
    )?;
    time(
        "analysis (all tables, effects, bootstrap)",
        format!(
            "all responses; {} bootstrap resamples per split",
            crate::analysis::Options::default().bootstrap_reps
        ),
        &mut || crate::analysis::analyse(&store, &crate::analysis::Options::default()).map(drop),
    )?;
    let mut copy = Store::open(dir.join("copy.db"))?;
    time("import tidy tables", "all tables".to_owned(), &mut || {
        crate::import::import(&mut copy, &export_dir).map(drop)
    })?;
    drop((store, copy));
    // A crew of tablets records the season between them, each its share of
    // the cages, and syncs into one folder.
    let target = dir.join("target");
    std::fs::create_dir_all(&target).map_err(|e| crate::Error::io(&target, e))?;
    let mut files = 0;
    let mut entries = 0;
    for k in 0..CREW {
        let mut tablet = Store::open(dir.join(format!("tablet-{k}.db")))?;
        synth::build_share(&mut tablet, size, 1, k, CREW)?;
        entries += tablet.change_count()?;
        files += sync::sync_once(&mut tablet, &target)?.written.len();
    }
    let mut joining = Store::open(dir.join("new-tablet.db"))?;
    synth::set_up(&mut joining, size, 1)?;
    time(
        "sync: a new tablet merges the crew's change-sets",
        format!("{CREW} tablets, {files} change-sets, {entries} logged changes"),
        &mut || sync::sync_once(&mut joining, &target).map(drop),
    )?;
    time(
        "sync: repeat sync with nothing new",
        format!("{files} change-sets in the target"),
        &mut || sync::sync_once(&mut joining, &target).map(drop),
    )?;
    Ok(out)
}

/// Tablets in the benchmark's crew.
pub const CREW: usize = 10;

/// The timings as a Markdown table.
pub fn format_table(size: SeasonSize, timings: &[Timing]) -> String {
    let mut s = format!(
        "season: {} cages x {} visits x {} species\n\n| task | work | seconds |\n|---|---|---:|\n",
        size.cages, size.visits, size.species
    );
    for t in timings {
        s.push_str(&format!("| {} | {} | {:.3} |\n", t.task, t.work, t.seconds));
    }
    s
}
