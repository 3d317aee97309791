//! The `fieldcage` command line, run as a person would.

use std::path::Path;
use std::process::{Command, Output};

use crate::util::Temp;

fn fieldcage(args: &[&str], cwd: &Path) -> Output {
    Command::new(env!("CARGO_BIN_EXE_fieldcage"))
        .args(args)
        .current_dir(cwd)
        .output()
        .expect("run fieldcage")
}

fn ok(out: &Output) -> String {
    assert!(
        out.status.success(),
        "stderr: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8_lossy(&out.stdout).into_owned()
}

fn files(dir: &Path) -> Vec<(String, Vec<u8>)> {
    let mut v: Vec<(String, Vec<u8>)> = std::fs::read_dir(dir)
        .unwrap()
        .map(|e| {
            let e = e.unwrap();
            (
                e.file_name().to_string_lossy().into_owned(),
                std::fs::read(e.path()).unwrap(),
            )
        })
        .collect();
    v.sort();
    v
}

/// The acceptance chain: demo → export → import → export, and the two
/// exports are identical (the round trip is lossless).
#[test]
fn demo_export_import_export_round_trips_byte_for_byte() {
    let tmp = Temp::new();
    let cwd = tmp.dir.path();
    ok(&fieldcage(&["demo", "--db", "d.db"], cwd));
    ok(&fieldcage(&["export", "--db", "d.db", "--out", "x"], cwd));
    ok(&fieldcage(&["import", "--db", "e.db", "x"], cwd));
    ok(&fieldcage(&["export", "--db", "e.db", "--out", "y"], cwd));
    let x = files(&cwd.join("x"));
    let y = files(&cwd.join("y"));
    assert_eq!(
        x.len(),
        fieldcage::tables::all().len() + fieldcage::tables::analysis().len() + 2,
        "a CSV per data and analysis table, datapackage.json and report.md"
    );
    assert_eq!(x, y);
}

#[test]
fn init_and_layout_from_the_shipped_definition() {
    let tmp = Temp::new();
    let cwd = tmp.dir.path();
    let def = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo_data/definition.toml");
    let out = ok(&fieldcage(
        &[
            "init",
            "--db",
            "s.db",
            def.to_str().unwrap(),
            "--seed",
            "77",
        ],
        cwd,
    ));
    assert!(
        out.contains("24 cages, 4 treatments, randomisation seed 77"),
        "{out}"
    );
    let layout = ok(&fieldcage(&["layout", "--db", "s.db"], cwd));
    assert_eq!(
        layout.lines().filter(|l| l.starts_with('B')).count(),
        6,
        "{layout}"
    );
    ok(&fieldcage(
        &[
            "init",
            "--db",
            "t.db",
            def.to_str().unwrap(),
            "--seed",
            "77",
        ],
        cwd,
    ));
    assert_eq!(
        ok(&fieldcage(&["layout", "--db", "t.db"], cwd)),
        layout,
        "same seed, same layout"
    );
}

#[test]
fn errors_go_to_stderr_with_a_failing_exit_code() {
    let tmp = Temp::new();
    let cwd = tmp.dir.path();
    std::fs::write(cwd.join("bad.toml"), "[experiment]\ncode = 1\n").unwrap();
    let out = fieldcage(&["init", "--db", "s.db", "bad.toml"], cwd);
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("bad.toml") && err.contains("line 2"), "{err}");
    assert!(!cwd.join("s.db").exists(), "no database left behind");
    ok(&fieldcage(&["demo", "--db", "d.db"], cwd));
    let again = fieldcage(&["demo", "--db", "d.db"], cwd);
    assert_eq!(again.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&again.stderr).contains("already exists"));
}
