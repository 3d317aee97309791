//! The benchmark behind `fieldcage-bench`, in four parts, all in one run on
//! one disk (the scratch folder):
//!
//! 1. **Stages** of one synthetic season ([`fieldcage_testkit::synth`]): the build
//!    through the write path, the day's-end checks, the export (analysis
//!    included), the analysis on its own, the import; then a crew of tablets
//!    records the season between them and a new tablet merges all their
//!    change-sets, and syncs again with nothing new.
//! 2. **Save latency**: cover values saved through the HTTP API (the
//!    `fieldcage serve` router on loopback, one keep-alive connection,
//!    each save answered only after its commit) against a raw rusqlite
//!    single-row commit with the same durable settings (WAL,
//!    `synchronous=FULL`) in the same folder, the two interleaved.
//! 3. **Scaling**: databases of 1, 2, 5 and 10 seasons (a season is the
//!    given size; *n* seasons have *n* times its cages); at each, the checks,
//!    the analysis, the export of the data tables and a raw SQLite-to-CSV dump
//!    of the same rows, each in a child process so that its peak memory
//!    (`VmHWM`) is its own.
//! 4. **Targets**: each figure beside its target, met or not.
//!
//! Figures are wall-clock seconds of one run on this machine; run in release
//! mode. Percentiles are nearest-rank order statistics.

use std::fs::File;
use std::io::BufWriter;
use std::path::{Path, PathBuf};
use std::time::Instant;

use fieldcage_core::checks::Scope;
use fieldcage_core::store::Store;
use fieldcage_core::sync;
use fieldcage_core::{Error, Result};
use fieldcage_testkit::synth::{self, SeasonSize};

/// One line of the stage table.
#[derive(Debug, Clone, PartialEq)]
pub struct Timing {
    /// What was timed.
    pub task: String,
    /// How much work it was (rows, files, …).
    pub work: String,
    /// Wall-clock seconds.
    pub seconds: f64,
}

/// What `fieldcage-bench` measures.
#[derive(Debug, Clone, PartialEq)]
pub struct Options {
    /// One season.
    pub size: SeasonSize,
    /// Season counts of the scaling table (the largest also gives the
    /// 10-season targets when it is 10).
    pub scales: Vec<usize>,
    /// Saves timed through the API (and raw commits).
    pub saves: usize,
    /// Run each scaling stage in a child process of this executable
    /// (`fieldcage-bench stage …`), which gives each stage its own peak
    /// memory; `None` runs them in this process and reports no peak.
    pub stage_exe: Option<PathBuf>,
}

impl Options {
    /// The full benchmark for one season of `size`.
    pub fn full(size: SeasonSize) -> Options {
        Options {
            size,
            scales: vec![1, 2, 5, 10],
            saves: 1000,
            stage_exe: None,
        }
    }
}

/// A stage measured on one database.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Stage {
    /// `checks::check` over the whole season (read and rules, no writes).
    Checks,
    /// `analysis::analyse` with the default options.
    Analysis,
    /// `export::write_data_tables`: the tidy CSV of every stored table.
    Export,
    /// The same rows straight from SQLite to CSV, no validation or formatting.
    RawDump,
}

impl Stage {
    /// Every stage, in the order of the scaling table.
    pub const ALL: [Stage; 4] = [
        Stage::Checks,
        Stage::Analysis,
        Stage::Export,
        Stage::RawDump,
    ];

    /// The stage's name on the command line.
    pub fn name(self) -> &'static str {
        match self {
            Stage::Checks => "checks",
            Stage::Analysis => "analysis",
            Stage::Export => "export",
            Stage::RawDump => "raw-dump",
        }
    }

    /// What the stage does, for the tables.
    pub fn label(self) -> &'static str {
        match self {
            Stage::Checks => "day's-end checks (read and rules)",
            Stage::Analysis => "analysis (all tables, effects, bootstrap)",
            Stage::Export => "export of the data tables (tidy CSV)",
            Stage::RawDump => "raw SQLite-to-CSV dump of the same rows",
        }
    }

    /// The stage named `name`.
    pub fn parse(name: &str) -> Option<Stage> {
        Stage::ALL.into_iter().find(|s| s.name() == name)
    }
}

/// One stage's figures.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Measured {
    /// Wall-clock seconds of the stage alone (not the process start).
    pub seconds: f64,
    /// Peak resident memory of the process that ran it, in bytes.
    pub peak_bytes: Option<u64>,
}

/// The stages at one scale.
#[derive(Debug, Clone, PartialEq)]
pub struct ScalePoint {
    /// Seasons.
    pub seasons: usize,
    /// Cover rows in the database.
    pub cover_rows: usize,
    /// Seconds to build it through the write path.
    pub build_seconds: f64,
    /// Each stage, in [`Stage::ALL`] order.
    pub stages: Vec<(Stage, Measured)>,
}

impl ScalePoint {
    /// The figures of `stage`.
    pub fn get(&self, stage: Stage) -> Option<Measured> {
        self.stages
            .iter()
            .find(|(s, _)| *s == stage)
            .map(|(_, m)| *m)
    }
}

/// Nearest-rank percentiles of a set of latencies, in seconds.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Latency {
    /// Median.
    pub p50: f64,
    /// 99th percentile.
    pub p99: f64,
}

impl Latency {
    /// Nearest-rank percentiles of `samples` (seconds); `None` when empty.
    pub fn of(samples: &[f64]) -> Option<Latency> {
        if samples.is_empty() {
            return None;
        }
        let mut sorted = samples.to_vec();
        sorted.sort_by(f64::total_cmp);
        let rank = |p: f64| {
            // Nearest rank: the smallest value with at least p % of the
            // samples at or below it.
            let r = (p / 100.0 * sorted.len() as f64).ceil() as usize;
            sorted[r.clamp(1, sorted.len()) - 1]
        };
        Some(Latency {
            p50: rank(50.0),
            p99: rank(99.0),
        })
    }
}

/// Everything one run measured.
#[derive(Debug, Clone, PartialEq)]
pub struct Report {
    /// One season.
    pub size: SeasonSize,
    /// The stage table of one season.
    pub timings: Vec<Timing>,
    /// Saves timed.
    pub saves: usize,
    /// Save latency through the HTTP API.
    pub api: Latency,
    /// Raw single-row durable commit latency.
    pub raw: Latency,
    /// The scaling table.
    pub scaling: Vec<ScalePoint>,
}

/// Tablets in the benchmark's crew.
pub const CREW: usize = 10;

/// Target: save p50 at most this many times the raw commit's p50.
pub const SAVE_RATIO_TARGET: f64 = 1.3;
/// Target: export at most this many times the raw dump.
pub const EXPORT_RATIO_TARGET: f64 = 2.0;
/// Target: checks of 10 seasons under this many seconds…
pub const CHECKS_SECONDS_TARGET: f64 = 5.0;
/// …with peak memory under this many bytes (300 MB).
pub const CHECKS_PEAK_TARGET: u64 = 300_000_000;
/// Target (sync): a new tablet merges the change-sets of [`CREW`] devices
/// that recorded a 200-cage season between them in under this many seconds…
pub const SYNC_MERGE_SECONDS_TARGET: f64 = 5.0;
/// …and a repeat sync with nothing new takes under this many seconds.
pub const SYNC_REPEAT_SECONDS_TARGET: f64 = 0.2;
/// Scaling is called linear when the seconds per season at the largest
/// scale are at most this many times those at the smallest.
pub const LINEAR_TOLERANCE: f64 = 1.25;

/// Run the whole benchmark in `dir` (which must be empty).
pub fn run(options: &Options, dir: &Path) -> Result<Report> {
    let size = options.size;
    let timings = stages(size, &dir.join("stages"))?;
    let (api, raw) = save_latency(size, options.saves, &dir.join("latency"))?;
    let mut scaling = Vec::new();
    for &n in &options.scales {
        scaling.push(scale_point(options, n, &dir.join(format!("seasons-{n}")))?);
    }
    Ok(Report {
        size,
        timings,
        saves: options.saves,
        api,
        raw,
        scaling,
    })
}

fn mkdir(dir: &Path) -> Result<()> {
    std::fs::create_dir_all(dir).map_err(|e| Error::io(dir, e))
}

/// The day the checks run as of: every planned visit is due by then.
pub fn checks_day(size: SeasonSize) -> chrono::NaiveDate {
    chrono::NaiveDate::from_ymd_opt(2026, 4, 1)
        .unwrap_or_default()
        .checked_add_days(chrono::Days::new(size.visits as u64 + 7))
        .unwrap_or_default()
}

/// Time each stage on one synthetic season built in `dir`.
pub fn stages(size: SeasonSize, dir: &Path) -> Result<Vec<Timing>> {
    mkdir(dir)?;
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
    let today = checks_day(size);
    let mut raised = 0;
    time(
        "day's-end checks, read and rules only (no writes)",
        format!("{} cover rows and every visit", size.cover_rows()),
        &mut || {
            raised = fieldcage_core::checks::check(&store, &Scope::Season, today)?.len();
            Ok(())
        },
    )?;
    time(
        "day's-end checks, first run (flags stored)",
        format!("{raised} flags raised and stored"),
        &mut || fieldcage_core::checks::run(&mut store, &Scope::Season, today).map(drop),
    )?;
    time(
        "day's-end checks again (nothing changed)",
        format!("{raised} flags reconciled"),
        &mut || fieldcage_core::checks::run(&mut store, &Scope::Season, today).map(drop),
    )?;
    let changes = store.change_count()?;
    let export_dir = dir.join("export");
    time(
        "export tidy tables",
        format!("{changes} logged changes; data tables, analysis tables, report"),
        &mut || fieldcage_core::export::export(&store, &export_dir).map(drop),
    )?;
    time(
        "analysis (all tables, effects, bootstrap)",
        format!(
            "all responses; {} bootstrap resamples per split",
            fieldcage_core::analysis::Options::default().bootstrap_reps
        ),
        &mut || {
            fieldcage_core::analysis::analyse(&store, &fieldcage_core::analysis::Options::default())
                .map(drop)
        },
    )?;
    let mut copy = Store::open(dir.join("copy.db"))?;
    time("import tidy tables", "all tables".to_owned(), &mut || {
        fieldcage_core::import::import(&mut copy, &export_dir).map(drop)
    })?;
    drop((store, copy));
    // A crew of tablets records the season between them, each its share of
    // the cages, and syncs into one folder.
    let target = dir.join("target");
    mkdir(&target)?;
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

/// Save `saves` cover values through the HTTP API of a set-up season and
/// make as many raw single-row durable commits, interleaved; the latencies
/// in seconds.
pub fn save_latency(size: SeasonSize, saves: usize, dir: &Path) -> Result<(Latency, Latency)> {
    use http_body_util::{BodyExt, Full};
    use hyper::body::Bytes;

    mkdir(dir)?;
    let mut store = Store::open(dir.join("api.db"))?;
    synth::set_up(&mut store, size, 1)?;
    let cages: Vec<String> = store
        .list::<fieldcage_core::model::Enclosure>()?
        .iter()
        .map(|e| e.id.0.to_string())
        .collect();
    let plants: Vec<String> = store
        .list::<fieldcage_core::model::Taxon>()?
        .iter()
        .filter(|t| t.role == fieldcage_core::model::Role::Plant)
        .map(|t| t.id.0.to_string())
        .collect();
    let start = chrono::NaiveDate::from_ymd_opt(2026, 4, 1).unwrap_or_default();
    let service =
        std::sync::Arc::new(fieldcage_ops::Service::new(store).with_today(checks_day(size)));
    let raw = raw_store(&dir.join("raw.db"))?;
    let failed =
        |what: &str, e: &dyn std::fmt::Display| Error::State(format!("bench: {what}: {e}"));
    let runtime = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()
        .map_err(|e| failed("starting the HTTP runtime", &e))?;
    runtime.block_on(async {
        let listener = tokio::net::TcpListener::bind(("127.0.0.1", 0))
            .await
            .map_err(|e| failed("binding 127.0.0.1", &e))?;
        let port = listener
            .local_addr()
            .map_err(|e| failed("reading the port", &e))?
            .port();
        let app = fieldcage_server::router(service, fieldcage_server::Guard::loopback(port));
        tokio::spawn(async move { axum::serve(listener, app).await });
        let stream = tokio::net::TcpStream::connect(("127.0.0.1", port))
            .await
            .map_err(|e| failed("connecting", &e))?;
        let (mut sender, connection) =
            hyper::client::conn::http1::handshake(hyper_util::rt::TokioIo::new(stream))
                .await
                .map_err(|e| failed("HTTP handshake", &e))?;
        tokio::spawn(connection);
        let mut api = Vec::with_capacity(saves);
        let mut direct = Vec::with_capacity(saves);
        let days = size.visits.max(1);
        for i in 0..saves {
            // A new cover row each time: plant, then cage, then day.
            let plant = &plants[i % plants.len().max(1)];
            let cage = &cages[(i / plants.len().max(1)) % cages.len().max(1)];
            let day = 1 + (i / (plants.len() * cages.len()).max(1)) % days;
            let body = serde_json::json!({
                "enclosure_id": cage,
                "taxon_id": plant,
                "percent": (i % 40) as f64,
                "date": (start + chrono::Days::new(day as u64)).to_string(),
            })
            .to_string();
            let request = hyper::Request::post("/api/save_cover")
                .header(hyper::header::HOST, format!("127.0.0.1:{port}"))
                .header(hyper::header::CONTENT_TYPE, "application/json")
                .body(Full::new(Bytes::from(body)))
                .map_err(|e| failed("building a request", &e))?;
            let t = Instant::now();
            let response = sender
                .send_request(request)
                .await
                .map_err(|e| failed("save_cover", &e))?;
            let status = response.status();
            let answer = response
                .into_body()
                .collect()
                .await
                .map_err(|e| failed("reading the answer", &e))?
                .to_bytes();
            api.push(t.elapsed().as_secs_f64());
            if !status.is_success() {
                return Err(failed(
                    "save_cover",
                    &format!("{status}: {}", String::from_utf8_lossy(&answer)),
                ));
            }
            let t = Instant::now();
            raw_commit(&raw, i)?;
            direct.push(t.elapsed().as_secs_f64());
        }
        let none = || Error::State("bench: no saves timed (--saves 0)".into());
        Ok((
            Latency::of(&api).ok_or_else(none)?,
            Latency::of(&direct).ok_or_else(none)?,
        ))
    })
}

/// A bare database with the store's durable settings and one table.
fn raw_store(path: &Path) -> Result<rusqlite::Connection> {
    let conn = rusqlite::Connection::open(path)?;
    let mode: String = conn.query_row("PRAGMA journal_mode = WAL", [], |r| r.get(0))?;
    if !mode.eq_ignore_ascii_case("wal") {
        return Err(Error::State(format!(
            "bench: raw database journal_mode is {mode}"
        )));
    }
    conn.execute_batch(
        "PRAGMA synchronous = FULL; PRAGMA foreign_keys = ON;
         CREATE TABLE raw_cover (id INTEGER PRIMARY KEY, value_pct REAL NOT NULL) STRICT;",
    )?;
    Ok(conn)
}

/// One single-row durable commit.
fn raw_commit(conn: &rusqlite::Connection, i: usize) -> Result<()> {
    conn.execute_batch("BEGIN IMMEDIATE")?;
    conn.execute(
        "INSERT INTO raw_cover (id, value_pct) VALUES (?1, ?2)",
        rusqlite::params![i as i64, (i % 40) as f64],
    )?;
    conn.execute_batch("COMMIT")?;
    Ok(())
}

/// Build `seasons` seasons in `dir` and measure every stage on them.
fn scale_point(options: &Options, seasons: usize, dir: &Path) -> Result<ScalePoint> {
    mkdir(dir)?;
    let size = SeasonSize {
        cages: options.size.cages * seasons,
        ..options.size
    };
    let db = dir.join("season.db");
    let t = Instant::now();
    {
        let mut store = Store::open(&db)?;
        synth::build(&mut store, size, 1)?;
    }
    let build_seconds = t.elapsed().as_secs_f64();
    let today = checks_day(size);
    let mut stages = Vec::new();
    for stage in Stage::ALL {
        let out = dir.join(stage.name());
        let measured = match &options.stage_exe {
            Some(exe) => run_child(exe, stage, &db, &out, today)?,
            None => Measured {
                seconds: run_stage(stage, &db, &out, today)?,
                peak_bytes: None,
            },
        };
        stages.push((stage, measured));
    }
    // The scratch databases are large; keep the disk free for the next scale.
    std::fs::remove_dir_all(dir).map_err(|e| Error::io(dir, e))?;
    Ok(ScalePoint {
        seasons,
        cover_rows: size.cover_rows(),
        build_seconds,
        stages,
    })
}

/// Run `stage` on the database at `db` (writing into `out` where it
/// writes); the seconds it took.
pub fn run_stage(stage: Stage, db: &Path, out: &Path, today: chrono::NaiveDate) -> Result<f64> {
    let store = Store::open(db)?;
    let t = Instant::now();
    match stage {
        Stage::Checks => {
            fieldcage_core::checks::check(&store, &Scope::Season, today)?;
        }
        Stage::Analysis => {
            fieldcage_core::analysis::analyse(
                &store,
                &fieldcage_core::analysis::Options::default(),
            )?;
        }
        Stage::Export => {
            store.read_snapshot(|s| fieldcage_core::export::write_data_tables(s, out))?;
        }
        Stage::RawDump => raw_dump(&store, out)?,
    }
    Ok(t.elapsed().as_secs_f64())
}

/// The rows the export writes, straight from SQLite to CSV files (values as
/// SQLite gives them, no schema checks, no cell formatting), each file
/// flushed to disk like the export's. It reads through a read-only
/// connection of its own to the store's file (the store's connection stays
/// inside the core).
fn raw_dump(store: &Store, out: &Path) -> Result<()> {
    mkdir(out)?;
    let conn = rusqlite::Connection::open_with_flags(
        store.path(),
        rusqlite::OpenFlags::SQLITE_OPEN_READ_ONLY | rusqlite::OpenFlags::SQLITE_OPEN_NO_MUTEX,
    )?;
    let snapshot = conn.unchecked_transaction()?;
    for schema in fieldcage_core::tables::all() {
        let path = out.join(format!("{}.csv", schema.name));
        let file = File::create(&path).map_err(|e| Error::io(&path, e))?;
        let mut csv = csv::Writer::from_writer(BufWriter::new(file));
        let failed = |e: csv::Error| Error::State(format!("{}: {e}", path.display()));
        let names: Vec<&str> = schema.fields.iter().map(|f| f.name.as_str()).collect();
        csv.write_record(&names).map_err(failed)?;
        let mut stmt = snapshot.prepare(&format!(
            "SELECT {} FROM {} ORDER BY rowid",
            names.join(", "),
            schema.name
        ))?;
        let mut rows = stmt.query([])?;
        let mut cell = String::new();
        while let Some(row) = rows.next()? {
            for i in 0..names.len() {
                cell.clear();
                match row.get_ref(i)? {
                    rusqlite::types::ValueRef::Null => {}
                    rusqlite::types::ValueRef::Integer(v) => cell.push_str(&v.to_string()),
                    rusqlite::types::ValueRef::Real(v) => cell.push_str(&v.to_string()),
                    rusqlite::types::ValueRef::Text(t) | rusqlite::types::ValueRef::Blob(t) => {
                        cell.push_str(&String::from_utf8_lossy(t));
                    }
                }
                csv.write_field(&cell).map_err(failed)?;
            }
            csv.write_record(None::<&[u8]>).map_err(failed)?;
        }
        let file = csv
            .into_inner()
            .map_err(|e| Error::State(format!("{}: {e}", path.display())))?
            .into_inner()
            .map_err(|e| Error::io(&path, e.into_error()))?;
        file.sync_all().map_err(|e| Error::io(&path, e))?;
    }
    Ok(())
}

/// Run `stage` in a child process (`exe stage …`) and read its figures.
fn run_child(
    exe: &Path,
    stage: Stage,
    db: &Path,
    out: &Path,
    today: chrono::NaiveDate,
) -> Result<Measured> {
    let output = std::process::Command::new(exe)
        .arg("stage")
        .arg(stage.name())
        .arg("--db")
        .arg(db)
        .arg("--out")
        .arg(out)
        .arg("--today")
        .arg(today.to_string())
        .output()
        .map_err(|e| Error::io(exe, e))?;
    let text = String::from_utf8_lossy(&output.stdout);
    if !output.status.success() {
        return Err(Error::State(format!(
            "bench: stage {} failed: {}{}",
            stage.name(),
            text,
            String::from_utf8_lossy(&output.stderr)
        )));
    }
    parse_stage_line(&text)
        .ok_or_else(|| Error::State(format!("bench: stage {} printed {text:?}", stage.name())))
}

/// The line a `stage` child prints: `seconds=… peak_bytes=…`.
pub fn stage_line(seconds: f64, peak_bytes: Option<u64>) -> String {
    match peak_bytes {
        Some(p) => format!("seconds={seconds} peak_bytes={p}"),
        None => format!("seconds={seconds}"),
    }
}

/// Read a [`stage_line`].
pub fn parse_stage_line(text: &str) -> Option<Measured> {
    let mut seconds = None;
    let mut peak_bytes = None;
    for part in text.split_whitespace() {
        match part.split_once('=') {
            Some(("seconds", v)) => seconds = v.parse().ok(),
            Some(("peak_bytes", v)) => peak_bytes = v.parse().ok(),
            _ => {}
        }
    }
    Some(Measured {
        seconds: seconds?,
        peak_bytes,
    })
}

/// This process's peak resident memory (`VmHWM` of `/proc/self/status`,
/// Linux), in bytes.
pub fn peak_memory() -> Option<u64> {
    let status = std::fs::read_to_string("/proc/self/status").ok()?;
    let line = status.lines().find(|l| l.starts_with("VmHWM:"))?;
    let kb: u64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kb * 1024)
}

/// Met or not: `value` within `limit` (at most, or under when `strict`).
pub fn verdict(value: f64, limit: f64, strict: bool) -> &'static str {
    let met = if strict {
        value < limit
    } else {
        value <= limit
    };
    if met { "met" } else { "NOT met" }
}

/// Seconds per season at each scale, and whether they stay within
/// [`LINEAR_TOLERANCE`] of the smallest scale's (`None` with fewer than two
/// scales).
pub fn linearity(points: &[(usize, f64)]) -> Option<(f64, bool)> {
    let per = |(n, s): &(usize, f64)| s / (*n).max(1) as f64;
    let first = points.iter().min_by_key(|(n, _)| *n)?;
    let last = points.iter().max_by_key(|(n, _)| *n)?;
    if first.0 == last.0 || per(first) <= 0.0 {
        return None;
    }
    let growth = per(last) / per(first);
    Some((growth, growth <= LINEAR_TOLERANCE))
}

fn megabytes(bytes: Option<u64>) -> String {
    bytes.map_or("–".to_owned(), |b| format!("{:.0} MB", b as f64 / 1e6))
}

fn millis(seconds: f64) -> String {
    format!("{:.2} ms", seconds * 1000.0)
}

/// The stage table as Markdown.
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

/// The whole report as Markdown: the stage table, the figures with their
/// targets, and the scaling table.
pub fn format_report(r: &Report) -> String {
    let mut s = format_table(r.size, &r.timings);
    s.push_str("\n| figure | value | target | verdict |\n|---|---:|---|---|\n");
    let mut line = |figure: String, value: String, target: String, verdict: &str| {
        s.push_str(&format!("| {figure} | {value} | {target} | {verdict} |\n"));
    };
    let save_ratio = r.api.p50 / r.raw.p50;
    line(
        format!(
            "save latency p50 / p99, HTTP API (save_cover, {} saves)",
            r.saves
        ),
        format!("{} / {}", millis(r.api.p50), millis(r.api.p99)),
        String::new(),
        "",
    );
    line(
        "raw rusqlite single-row durable commit p50 / p99 (WAL, FULL)".to_owned(),
        format!("{} / {}", millis(r.raw.p50), millis(r.raw.p99)),
        String::new(),
        "",
    );
    line(
        "ratio save p50 / raw commit p50".to_owned(),
        format!("{save_ratio:.2}"),
        format!("≤ {SAVE_RATIO_TARGET}"),
        verdict(save_ratio, SAVE_RATIO_TARGET, false),
    );
    for p in &r.scaling {
        let rows = format!("{} season(s), {} cover rows", p.seasons, p.cover_rows);
        if let Some(m) = p.get(Stage::Checks) {
            let ten = p.seasons == 10;
            line(
                format!("checks, {rows}"),
                format!("{:.3} s", m.seconds),
                if ten {
                    format!("< {CHECKS_SECONDS_TARGET} s")
                } else {
                    String::new()
                },
                if ten {
                    verdict(m.seconds, CHECKS_SECONDS_TARGET, true)
                } else {
                    ""
                },
            );
            line(
                format!("checks peak memory, {rows}"),
                megabytes(m.peak_bytes),
                if ten {
                    format!("< {:.0} MB", CHECKS_PEAK_TARGET as f64 / 1e6)
                } else {
                    String::new()
                },
                match (ten, m.peak_bytes) {
                    (true, Some(b)) => verdict(b as f64, CHECKS_PEAK_TARGET as f64, true),
                    (true, None) => "not measured",
                    _ => "",
                },
            );
        }
        if let Some(m) = p.get(Stage::Analysis) {
            line(
                format!("analysis, {rows}"),
                format!("{:.3} s, peak {}", m.seconds, megabytes(m.peak_bytes)),
                String::new(),
                "",
            );
        }
        if let (Some(e), Some(d)) = (p.get(Stage::Export), p.get(Stage::RawDump)) {
            let ratio = e.seconds / d.seconds;
            line(
                format!("export of the data tables / raw dump, {rows}"),
                format!(
                    "{:.3} s / {:.3} s = {ratio:.2} (peak {} / {})",
                    e.seconds,
                    d.seconds,
                    megabytes(e.peak_bytes),
                    megabytes(d.peak_bytes)
                ),
                format!("≤ {EXPORT_RATIO_TARGET}"),
                verdict(ratio, EXPORT_RATIO_TARGET, false),
            );
        }
    }
    for (task, figure, target) in [
        (
            "sync: a new tablet",
            format!("sync merge of {CREW} devices"),
            SYNC_MERGE_SECONDS_TARGET,
        ),
        (
            "sync: repeat sync",
            "repeat sync with nothing new".to_owned(),
            SYNC_REPEAT_SECONDS_TARGET,
        ),
    ] {
        if let Some(t) = r.timings.iter().find(|t| t.task.starts_with(task)) {
            line(
                format!("{figure} ({})", t.work),
                format!("{:.3} s", t.seconds),
                format!("< {target} s"),
                verdict(t.seconds, target, true),
            );
        }
    }
    for stage in Stage::ALL {
        let points: Vec<(usize, f64)> = r
            .scaling
            .iter()
            .filter_map(|p| p.get(stage).map(|m| (p.seasons, m.seconds)))
            .collect();
        if let Some((growth, linear)) = linearity(&points) {
            line(
                format!("{} grows linearly with seasons", stage.label()),
                format!("× {growth:.2} per season, largest vs smallest"),
                format!("≤ × {LINEAR_TOLERANCE}"),
                if linear { "met" } else { "NOT met" },
            );
        }
    }
    if !r.scaling.is_empty() {
        s.push_str("\nscaling: seconds (seconds per season)\n\n| stage |");
        for p in &r.scaling {
            s.push_str(&format!(" {} season(s) |", p.seasons));
        }
        s.push_str("\n|---|");
        s.push_str(&"---:|".repeat(r.scaling.len()));
        s.push('\n');
        let mut row = |label: &str, cell: &dyn Fn(&ScalePoint) -> String| {
            s.push_str(&format!("| {label} |"));
            for p in &r.scaling {
                s.push_str(&format!(" {} |", cell(p)));
            }
            s.push('\n');
        };
        row("cover rows", &|p| p.cover_rows.to_string());
        row("build through the write path", &|p| {
            format!(
                "{:.1} ({:.1})",
                p.build_seconds,
                p.build_seconds / p.seasons.max(1) as f64
            )
        });
        for stage in Stage::ALL {
            row(stage.label(), &|p| {
                p.get(stage).map_or("–".to_owned(), |m| {
                    format!(
                        "{:.3} ({:.3}), {}",
                        m.seconds,
                        m.seconds / p.seasons.max(1) as f64,
                        megabytes(m.peak_bytes)
                    )
                })
            });
        }
        s.push_str(&format!(
            "\nlinear: seconds per season at the largest scale within × {LINEAR_TOLERANCE} of the smallest's.\n"
        ));
    }
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn nearest_rank_percentiles() {
        // Nearest-rank definition (common practice): p50 of 1..=10 is 5, p99 is 10.
        let samples: Vec<f64> = (1..=10).map(f64::from).collect();
        assert_eq!(
            Latency::of(&samples),
            Some(Latency {
                p50: 5.0,
                p99: 10.0
            })
        );
        assert_eq!(Latency::of(&[]), None);
    }

    #[test]
    fn verdicts_and_linearity() {
        assert_eq!(verdict(1.3, 1.3, false), "met");
        assert_eq!(verdict(1.31, 1.3, false), "NOT met");
        assert_eq!(verdict(5.0, 5.0, true), "NOT met");
        // 1 s per season at 1 and 10 seasons: linear; 1 s then 2 s per season: not.
        assert_eq!(linearity(&[(1, 1.0), (10, 10.0)]), Some((1.0, true)));
        assert_eq!(linearity(&[(1, 1.0), (10, 20.0)]), Some((2.0, false)));
        assert_eq!(linearity(&[(1, 1.0)]), None);
    }

    #[test]
    fn stage_lines_round_trip() {
        let m = parse_stage_line(&stage_line(1.5, Some(42))).unwrap_or(Measured {
            seconds: 0.0,
            peak_bytes: None,
        });
        assert_eq!(
            m,
            Measured {
                seconds: 1.5,
                peak_bytes: Some(42)
            }
        );
        assert_eq!(parse_stage_line("nothing"), None);
    }
}
