//! The benchmark command on a tiny season: every figure and ratio of issue 8
//! is printed, the ratios and verdicts follow from the figures, the stages
//! run in child processes that report their peak memory, and the raw dump
//! holds the same rows as the export. No timing is asserted.

#![allow(clippy::unwrap_used)] // a failed unwrap is a failed test

use fieldcage_bench::{self as bench, Options, Stage};
use fieldcage_testkit::synth::{self, SeasonSize};

use fieldcage_testkit::fixture::Temp;

const TINY: SeasonSize = SeasonSize {
    cages: 4,
    visits: 2,
    species: 3,
};

#[test]
fn the_report_prints_every_figure_with_its_ratio_and_verdict() {
    let tmp = Temp::new();
    let options = Options {
        size: TINY,
        scales: vec![1, 2],
        saves: 20,
        stage_exe: Some(env!("CARGO_BIN_EXE_fieldcage-bench").into()),
    };
    let report = bench::run(&options, tmp.dir.path()).unwrap();
    let text = bench::format_report(&report);

    // The stage table of one season is still there.
    for task in [
        "build season through the write path",
        "export tidy tables",
        "import tidy tables",
        "sync: a new tablet merges the crew's change-sets",
    ] {
        assert!(text.contains(task), "{task} missing:\n{text}");
    }
    // Save latency: both sides, and the ratio with the verdict its value gives.
    assert!(report.api.p50 > 0.0 && report.api.p50 <= report.api.p99);
    assert!(report.raw.p50 > 0.0 && report.raw.p50 <= report.raw.p99);
    let ratio = report.api.p50 / report.raw.p50;
    let line = format!(
        "| ratio save p50 / raw commit p50 | {ratio:.2} | ≤ 1.3 | {} |",
        bench::verdict(ratio, bench::SAVE_RATIO_TARGET, false)
    );
    assert!(text.contains(&line), "{line} missing:\n{text}");
    assert!(text.contains("save latency p50 / p99, HTTP API (save_cover, 20 saves)"));
    assert!(text.contains("raw rusqlite single-row durable commit p50 / p99"));

    // Every scale has every stage, timed in a child with its own peak memory.
    assert_eq!(report.scaling.len(), 2);
    for point in &report.scaling {
        assert_eq!(point.cover_rows, TINY.cover_rows() * point.seasons);
        for stage in Stage::ALL {
            let m = point.get(stage).unwrap();
            assert!(m.seconds >= 0.0);
            // A process holding a SQLite database has at least 1 MB resident
            // (common practice).
            assert!(m.peak_bytes.unwrap() > 1_000_000, "{stage:?}: {m:?}");
        }
        let (e, d) = (
            point.get(Stage::Export).unwrap(),
            point.get(Stage::RawDump).unwrap(),
        );
        let ratio = e.seconds / d.seconds;
        let cell = format!("{ratio:.2} (peak");
        let rows = format!(
            "| export of the data tables / raw dump, {} season(s), {} cover rows |",
            point.seasons, point.cover_rows
        );
        let line = text.lines().find(|l| l.starts_with(&rows)).unwrap();
        assert!(line.contains(&cell), "{line}");
        assert!(
            line.ends_with(&format!(
                "| ≤ 2 | {} |",
                bench::verdict(ratio, bench::EXPORT_RATIO_TARGET, false)
            )),
            "{line}"
        );
        let checks = format!("| checks, {} season(s)", point.seasons);
        assert!(text.contains(&checks), "{checks} missing:\n{text}");
    }
    // The 10-season targets are printed only when 10 seasons were measured.
    assert!(
        !text
            .lines()
            .any(|l| l.starts_with("| checks") && l.contains("< 5 s"))
    );

    // Linearity: one verdict per stage, following from the figures.
    for stage in Stage::ALL {
        let points: Vec<(usize, f64)> = report
            .scaling
            .iter()
            .map(|p| (p.seasons, p.get(stage).unwrap().seconds))
            .collect();
        let (growth, linear) = bench::linearity(&points).unwrap();
        let line = format!(
            "| {} grows linearly with seasons | × {growth:.2} per season, largest vs smallest | ≤ × 1.25 | {} |",
            stage.label(),
            if linear { "met" } else { "NOT met" }
        );
        assert!(text.contains(&line), "{line} missing:\n{text}");
    }
    assert!(
        text.contains("| stage | 1 season(s) | 2 season(s) |"),
        "{text}"
    );
    // Sync: the merge and the repeat, each with its target (issue #6) and the
    // verdict its figure gives.
    for (task, label, target) in [
        (
            "sync: a new tablet merges",
            "sync merge of 10 devices",
            bench::SYNC_MERGE_SECONDS_TARGET,
        ),
        (
            "sync: repeat sync",
            "repeat sync with nothing new",
            bench::SYNC_REPEAT_SECONDS_TARGET,
        ),
    ] {
        let t = report
            .timings
            .iter()
            .find(|t| t.task.starts_with(task))
            .unwrap();
        let line = format!(
            "| {label} ({}) | {:.3} s | < {target} s | {} |",
            t.work,
            t.seconds,
            bench::verdict(t.seconds, target, true)
        );
        assert!(text.contains(&line), "{line} missing:\n{text}");
    }
}

#[test]
fn the_raw_dump_holds_the_rows_of_the_export() {
    let tmp = Temp::new();
    let db = tmp.path("season.db");
    let mut store = fieldcage_core::Store::open(&db).unwrap();
    synth::build(&mut store, TINY, 1).unwrap();
    drop(store);
    let today = bench::checks_day(TINY);
    bench::run_stage(Stage::Export, &db, &tmp.path("export"), today).unwrap();
    bench::run_stage(Stage::RawDump, &db, &tmp.path("raw"), today).unwrap();
    let mut tables = 0;
    for schema in fieldcage_core::tables::all() {
        let name = format!("{}.csv", schema.name);
        let read = |dir: &str| -> Vec<csv::StringRecord> {
            csv::Reader::from_path(tmp.path(dir).join(&name))
                .unwrap()
                .records()
                .collect::<Result<_, _>>()
                .unwrap()
        };
        let (export, raw) = (read("export"), read("raw"));
        assert_eq!(export.len(), raw.len(), "{name}");
        // Same rows: the ids (first column) agree as sets.
        let ids = |rows: &[csv::StringRecord]| {
            let mut v: Vec<String> = rows.iter().map(|r| r[0].to_owned()).collect();
            v.sort();
            v
        };
        assert_eq!(ids(&export), ids(&raw), "{name}");
        tables += usize::from(!export.is_empty());
    }
    // The tiny season fills the setup, visit and record tables.
    assert!(tables >= 10, "only {tables} tables had rows");
}
