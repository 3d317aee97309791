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
        fieldcage_core::tables::all().len() + fieldcage_core::tables::analysis().len() + 2,
        "a CSV per data and analysis table, datapackage.json and report.md"
    );
    assert_eq!(x, y);
}

#[test]
fn init_and_layout_from_the_shipped_definition() {
    let tmp = Temp::new();
    let cwd = tmp.dir.path();
    let def = crate::util::repo_root().join("demo_data/definition.toml");
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

/// `serve` takes the options the tablet app takes, from the one shared type:
/// a bad value is refused before anything opens, naming the option and the
/// value, and no database is made.
#[test]
fn serve_refuses_a_bad_shared_option_naming_it() {
    let tmp = Temp::new();
    let cwd = tmp.dir.path();
    for (args, wanted) in [
        (&["--sync-every", "-2"][..], ["--sync-every", "0 or more"]),
        (&["--sync-every", "often"][..], ["--sync-every", "often"]),
        (&["--today", "soon"][..], ["--today", "soon"]),
    ] {
        let mut all = vec!["serve", "--db", "s.db", "--demo"];
        all.extend_from_slice(args);
        let out = fieldcage(&all, cwd);
        assert_eq!(out.status.code(), Some(2), "{args:?}");
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(wanted.iter().all(|w| err.contains(w)), "{args:?}: {err}");
        assert!(!cwd.join("s.db").exists(), "{args:?}: no database made");
    }
    let help = ok(&fieldcage(&["serve", "--help"], cwd));
    for option in [
        "--db",
        "--demo",
        "--today",
        "--sync-every",
        "--port",
        "--lan",
    ] {
        assert!(help.contains(option), "serve --help lists {option}: {help}");
    }
}

fn exit_code(out: &Output) -> Option<i32> {
    out.status.code()
}

/// Day's-end checks from the command line: exit 1 while errors are open, JSON
/// with every field the review needs, text grouped by cage, and a flag
/// confirmed with a note from the command line.
#[test]
fn check_lists_flags_and_fails_while_errors_are_open() {
    let tmp = Temp::new();
    let cwd = tmp.dir.path();
    ok(&fieldcage(&["demo", "--db", "d.db"], cwd));

    let out = fieldcage(&["check", "--db", "d.db", "--all", "--json"], cwd);
    assert_eq!(exit_code(&out), Some(1), "errors are open");
    let json: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let flags = json["flags"].as_array().unwrap();
    assert_eq!(flags.len(), 10);
    for f in flags {
        for key in [
            "id",
            "rule_id",
            "severity",
            "status",
            "cage",
            "day",
            "record_table",
            "record_id",
            "message",
            "fix",
        ] {
            assert!(!f[key].is_null(), "{key} in {f}");
        }
    }
    let too_many = flags
        .iter()
        .find(|f| f["rule_id"] == "counts.too_many")
        .unwrap();
    assert_eq!(
        (too_many["cage"].as_str(), too_many["severity"].as_str()),
        (Some("C-08"), Some("error"))
    );
    assert!(
        too_many["message"]
            .as_str()
            .unwrap()
            .contains("12 SLUG found alive")
    );
    let confirmed = flags.iter().find(|f| f["status"] == "confirmed").unwrap();
    assert!(!confirmed["note"].as_str().unwrap().is_empty());

    let text = fieldcage(&["check", "--db", "d.db", "--all"], cwd);
    assert_eq!(exit_code(&text), Some(1));
    let text = String::from_utf8_lossy(&text.stdout);
    assert!(
        text.contains("10 flags: 9 open (6 errors, 3 warnings, 0 notices), 1 confirmed"),
        "{text}"
    );
    assert!(
        text.contains("\nC-12: 3 open\n  [error] cover.total · day 14"),
        "{text}"
    );
    assert!(text.contains("--confirm FLAG_ID --note"), "{text}");

    // One cage whose only flag is confirmed: nothing open, exit 0.
    let out = fieldcage(&["check", "--db", "d.db", "--cage", "C-16"], cwd);
    assert_eq!(
        exit_code(&out),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );

    // Confirm C-08's flag by the end of its id, as the text report prints it.
    let id = too_many["id"].as_str().unwrap();
    let short = &id[id.len() - 8..];
    assert!(text.contains(&format!("flag {short}")), "{text}");
    let empty = fieldcage(
        &["check", "--db", "d.db", "--confirm", short, "--note", " "],
        cwd,
    );
    assert_eq!(exit_code(&empty), Some(2));
    assert!(String::from_utf8_lossy(&empty.stderr).contains("flag.note"));
    let done = ok(&fieldcage(
        &[
            "check",
            "--db",
            "d.db",
            "--confirm",
            short,
            "--note",
            "Recounted: 12 is right; two slugs came in with the turf.",
        ],
        cwd,
    ));
    assert!(done.contains(&format!("confirmed flag {id}")), "{done}");
    let out = fieldcage(&["check", "--db", "d.db", "--cage", "C-08"], cwd);
    assert_eq!(exit_code(&out), Some(0));
    assert!(String::from_utf8_lossy(&out.stdout).contains("note: Recounted: 12 is right"));

    // Usage errors keep exit code 2.
    let no_note = fieldcage(&["check", "--db", "d.db", "--confirm", short], cwd);
    assert_eq!(exit_code(&no_note), Some(2));
    let unknown = fieldcage(&["check", "--db", "d.db", "--cage", "C-99"], cwd);
    assert_eq!(exit_code(&unknown), Some(2));
    assert!(String::from_utf8_lossy(&unknown.stderr).contains("C-99"));
}

/// Two tablets set up from the shipped definition with the same seed sync
/// through a folder; a concurrent edit shows as a conflict and is settled
/// from the command line; a backup copy is refused as a second device.
#[test]
fn two_tablets_sync_through_a_folder_from_the_command_line() {
    let tmp = Temp::new();
    let cwd = tmp.dir.path();
    let def = crate::util::repo_root().join("demo_data/definition.toml");
    std::fs::create_dir(cwd.join("share")).unwrap();
    for db in ["a.db", "b.db"] {
        ok(&fieldcage(
            &["init", "--db", db, def.to_str().unwrap(), "--seed", "5"],
            cwd,
        ));
    }
    let out = ok(&fieldcage(
        &["device", "--db", "a.db", "--name", "Tablet at the gate"],
        cwd,
    ));
    assert!(out.contains("device name: Tablet at the gate"), "{out}");
    assert!(out.contains("last sync:   never"), "{out}");
    // Both edit one treatment's notes before they have synced.
    for (db, note) in [("a.db", "mesh torn"), ("b.db", "mesh mended")] {
        let store = fieldcage_core::Store::open(cwd.join(db)).unwrap();
        let mut t = store.list::<fieldcage_core::model::Treatment>().unwrap()[0].clone();
        drop(store);
        t.notes = Some(note.into());
        let mut store = fieldcage_core::Store::open(cwd.join(db)).unwrap();
        store.write(|w| w.update(&t)).unwrap();
    }
    let out = ok(&fieldcage(
        &["sync", "--db", "a.db", "--target", "share"],
        cwd,
    ));
    assert!(out.contains("1 written, 0 applied"), "{out}");
    let out = ok(&fieldcage(
        &["sync", "--db", "b.db", "--target", "share"],
        cwd,
    ));
    assert!(
        out.contains("applied") && out.contains("Tablet at the gate"),
        "{out}"
    );
    assert!(out.contains("1 conflict(s) open"), "{out}");
    let list = ok(&fieldcage(&["conflicts", "--db", "b.db"], cwd));
    assert!(list.contains("edited on two devices"), "{list}");
    let key = list.lines().next().unwrap().to_owned();
    let out = ok(&fieldcage(
        &["conflicts", "--db", "b.db", "--keep", &key],
        cwd,
    ));
    assert!(out.contains("no open conflicts"), "{out}");
    ok(&fieldcage(
        &["sync", "--db", "b.db", "--target", "share"],
        cwd,
    ));
    let out = ok(&fieldcage(
        &["sync", "--db", "a.db", "--target", "share"],
        cwd,
    ));
    assert!(out.contains("0 conflict(s) open"), "{out}");
    // A copy made for safekeeping must never sync as a second device.
    ok(&fieldcage(
        &["backup", "--db", "a.db", "--to", "copy.db"],
        cwd,
    ));
    let store = fieldcage_core::Store::open(cwd.join("copy.db")).unwrap();
    let mut t = store.list::<fieldcage_core::model::Treatment>().unwrap()[1].clone();
    drop(store);
    t.notes = Some("written on the copy".into());
    let mut store = fieldcage_core::Store::open(cwd.join("copy.db")).unwrap();
    store.write(|w| w.update(&t)).unwrap();
    drop(store);
    let store = fieldcage_core::Store::open(cwd.join("a.db")).unwrap();
    let mut t = store.list::<fieldcage_core::model::Treatment>().unwrap()[2].clone();
    drop(store);
    t.notes = Some("written on the original".into());
    let mut store = fieldcage_core::Store::open(cwd.join("a.db")).unwrap();
    store.write(|w| w.update(&t)).unwrap();
    drop(store);
    ok(&fieldcage(
        &["sync", "--db", "a.db", "--target", "share"],
        cwd,
    ));
    let out = fieldcage(&["sync", "--db", "copy.db", "--target", "share"], cwd);
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("identity") && err.contains("backup"), "{err}");
    let out = fieldcage(&["sync", "--db", "a.db", "--target", "missing"], cwd);
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("missing"));
}

/// `device --target` saves the sync folder (checked like the settings
/// screen); `sync` without `--target` then uses it.
#[test]
fn a_saved_sync_target_is_used_when_sync_names_none() {
    let tmp = Temp::new();
    let cwd = tmp.dir.path();
    let def = crate::util::repo_root().join("demo_data/definition.toml");
    ok(&fieldcage(
        &["init", "--db", "a.db", def.to_str().unwrap(), "--seed", "5"],
        cwd,
    ));
    let out = fieldcage(&["sync", "--db", "a.db"], cwd);
    assert_eq!(out.status.code(), Some(2));
    assert!(
        String::from_utf8_lossy(&out.stderr).contains("--target"),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    // A relative path is refused, naming the field and the value.
    let out = fieldcage(&["device", "--db", "a.db", "--target", "share"], cwd);
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("device.sync_target") && err.contains("\"share\""),
        "{err}"
    );
    let share = cwd.join("share");
    let out = ok(&fieldcage(
        &[
            "device",
            "--db",
            "a.db",
            "--target",
            share.to_str().unwrap(),
        ],
        cwd,
    ));
    assert!(
        out.contains(&format!("sync target: {}", share.display())),
        "{out}"
    );
    let out = ok(&fieldcage(&["sync", "--db", "a.db"], cwd));
    assert!(out.contains("1 written"), "{out}");
    assert!(share.is_dir());
}

/// Output piped into a reader that stops early (`fieldcage check … | head`)
/// ends the command the way it ends other command-line tools: killed by
/// SIGPIPE, quietly, not with a panic about printing.
#[cfg(unix)]
#[test]
fn output_into_a_closed_pipe_ends_the_command_quietly() {
    use std::os::unix::process::ExitStatusExt;
    use std::process::Stdio;
    let tmp = Temp::new();
    let cwd = tmp.dir.path();
    ok(&fieldcage(&["demo", "--db", "d.db"], cwd));
    let mut child = Command::new(env!("CARGO_BIN_EXE_fieldcage"))
        .args(["results", "--db", "d.db"])
        .current_dir(cwd)
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("run fieldcage");
    // Close the reading end before the analysis has printed anything.
    drop(child.stdout.take());
    let out = child.wait_with_output().expect("wait for fieldcage");
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(!stderr.contains("panicked"), "{stderr}");
    assert_eq!(
        out.status.signal(),
        Some(13),
        "SIGPIPE: {:?} {stderr}",
        out.status
    );
}

/// Issue 16: a tablet joins a crew in one step. `sync`, `device` and `serve`
/// refuse a database that does not exist, so "start a tablet empty and let
/// its first sync bring everything" had no command.
#[test]
fn regression_16_a_tablet_joins_a_crew_in_one_step() {
    let tmp = Temp::new();
    let dir = tmp.path("");
    let def = crate::util::repo_root().join("demo_data/definition.toml");
    let def = def.to_str().unwrap();
    // On an empty folder: a database with its own identity, the folder
    // saved, and a plain word that there is nothing to join yet.
    let out = ok(&fieldcage(
        &[
            "join", "--db", "early.db", "--target", "crew", "--name", "Tablet 9",
        ],
        &dir,
    ));
    assert!(out.contains("holds no experiment yet"), "{out}");
    let device = ok(&fieldcage(&["device", "--db", "early.db"], &dir));
    assert!(device.contains("Tablet 9"), "{device}");
    assert!(device.contains("sync target:"), "{device}");
    assert!(
        device.contains(&dir.join("crew").display().to_string()),
        "{device}"
    );
    // A crew's folder: the first tablet sets up and syncs; the new one joins
    // and holds the same layout, under its own identity.
    ok(&fieldcage(
        &["init", "--db", "first.db", def, "--seed", "5"],
        &dir,
    ));
    ok(&fieldcage(
        &["sync", "--db", "first.db", "--target", "crew"],
        &dir,
    ));
    let out = ok(&fieldcage(
        &[
            "join", "--db", "third.db", "--target", "crew", "--name", "Tablet 3",
        ],
        &dir,
    ));
    assert!(out.contains("joined demo-meadow-2026 (24 cages)"), "{out}");
    let layout = |db: &str| ok(&fieldcage(&["layout", "--db", db], &dir));
    assert_eq!(layout("third.db"), layout("first.db"));
    let id = |db: &str| {
        let d = ok(&fieldcage(&["device", "--db", db], &dir));
        d.lines()
            .find(|l| l.starts_with("device id:"))
            .unwrap()
            .to_owned()
    };
    assert_ne!(id("third.db"), id("first.db"), "its own identity");
    // The early tablet's next sync brings the experiment too.
    ok(&fieldcage(&["sync", "--db", "early.db"], &dir));
    assert_eq!(layout("early.db"), layout("first.db"));
    // Joining into an existing file is refused and changes nothing.
    let again = fieldcage(&["join", "--db", "third.db", "--target", "crew"], &dir);
    assert!(!again.status.success());
    assert!(String::from_utf8_lossy(&again.stderr).contains("already exists"));
}

/// Issue 16: `init` without `--seed` on a second tablet drew another layout
/// (792 conflicts at the first sync). `init` now prints the seed it drew and
/// the line for the other tablets; running that line gives a tablet that
/// syncs with no conflict, and a `--seed` against the definition's own seed
/// is refused before any file is made.
#[test]
fn regression_16_init_prints_the_line_that_sets_up_the_other_tablets() {
    let tmp = Temp::new();
    let dir = tmp.path("");
    let def = crate::util::repo_root().join("demo_data/definition.toml");
    let def = def.to_str().unwrap();
    let out = ok(&fieldcage(&["init", "--db", "first.db", def], &dir));
    let line = out
        .lines()
        .map(str::trim)
        .find(|l| l.starts_with("fieldcage init --db TABLET.db"))
        .unwrap_or_else(|| panic!("no line for the other tablets in {out}"));
    let args: Vec<String> = line
        .split_whitespace()
        .skip(1)
        .map(|a| {
            if a == "TABLET.db" {
                "second.db".into()
            } else {
                a.into()
            }
        })
        .collect();
    let args: Vec<&str> = args.iter().map(String::as_str).collect();
    ok(&fieldcage(&args, &dir));
    std::fs::create_dir(dir.join("crew")).unwrap();
    for db in ["first.db", "second.db", "first.db"] {
        let out = ok(&fieldcage(&["sync", "--db", db, "--target", "crew"], &dir));
        assert!(out.contains("0 not applied; 0 conflict(s) open"), "{out}");
    }
    assert_eq!(
        ok(&fieldcage(&["layout", "--db", "first.db"], &dir)),
        ok(&fieldcage(&["layout", "--db", "second.db"], &dir))
    );

    // A definition with its own seed and another one given: refused, no file.
    let text = std::fs::read_to_string(def)
        .unwrap()
        .replace("\n[experiment]\n", "\n[experiment]\nseed = 31\n");
    std::fs::write(dir.join("seeded.toml"), text).unwrap();
    let out = fieldcage(
        &["init", "--db", "third.db", "seeded.toml", "--seed", "32"],
        &dir,
    );
    assert_eq!(exit_code(&out), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("seed = 31") && err.contains("32"), "{err}");
    assert!(!dir.join("third.db").exists());
    let out = ok(&fieldcage(
        &["init", "--db", "third.db", "seeded.toml"],
        &dir,
    ));
    assert!(out.contains("randomisation seed 31"), "{out}");
    assert!(
        !out.contains("TABLET.db"),
        "a seed from the file needs no line: {out}"
    );
}
