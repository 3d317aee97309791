//! The fuzz targets' corpora, replayed in every `cargo test`: the committed
//! seeds (`fuzz/seeds/`, real demo output made by `fuzz/make_seeds.py`) and
//! every input a fuzz run found to crash (`fuzz/regressions/`) go through the
//! same checks as the targets (`fieldcage_testkit::fuzz_checks`). The seeds must also
//! stay what they are meant to be — valid files — or the fuzzer starts from
//! nothing.

use std::path::PathBuf;

use fieldcage_core::sync::changeset;
use fieldcage_testkit::fuzz_checks;

use crate::util::Temp;

fn corpus(kind: &str, target: &str) -> Vec<PathBuf> {
    let dir = crate::util::repo_root()
        .join("fuzz")
        .join(kind)
        .join(target);
    let mut files: Vec<PathBuf> = std::fs::read_dir(&dir)
        .map(|d| d.map(|e| e.unwrap().path()).collect())
        .unwrap_or_default();
    files.retain(|p| {
        p.file_name()
            .is_some_and(|n| !n.to_string_lossy().starts_with('.'))
    });
    files.sort();
    files
}

#[test]
fn change_set_seeds_are_valid_change_sets_and_pass_the_checks() {
    let seeds = corpus("seeds", "changeset_reader");
    assert!(seeds.len() >= 5, "the seed corpus is missing");
    for path in seeds {
        let cs = changeset::read(&path).unwrap_or_else(|e| panic!("seed {}: {e}", path.display()));
        assert!(!cs.changes.is_empty());
        fuzz_checks::changeset_bytes(&std::fs::read(&path).unwrap());
    }
}

#[test]
fn import_seeds_pass_the_checks_and_the_setup_seed_imports() {
    let seeds = corpus("seeds", "import_tables");
    assert!(seeds.len() >= 3, "the seed corpus is missing");
    for path in &seeds {
        fuzz_checks::import_file_set(&std::fs::read(path).unwrap());
    }
    // The setup seed is a whole, valid import: the fuzzer starts from the
    // accepting path, not only from errors.
    let setup = seeds
        .iter()
        .find(|p| p.ends_with("setup"))
        .expect("the setup seed");
    let tmp = Temp::new();
    let folder = tmp.path("tables");
    std::fs::create_dir(&folder).unwrap();
    for chunk in std::fs::read(setup).unwrap().split(|b| *b == 0) {
        let end = chunk.iter().position(|b| *b == b'\n').unwrap();
        let name = std::str::from_utf8(&chunk[..end]).unwrap();
        std::fs::write(folder.join(name), &chunk[end + 1..]).unwrap();
    }
    let mut store = tmp.store("setup.db");
    let summary = fieldcage_core::import::import(&mut store, &folder).unwrap();
    assert!(summary.tables.iter().map(|(_, n)| n).sum::<usize>() > 100);
}

/// Every input a fuzz run found to break a check, kept as a regression.
#[test]
fn inputs_that_once_broke_a_fuzz_target_pass_now() {
    for path in corpus("regressions", "changeset_reader") {
        fuzz_checks::changeset_bytes(&std::fs::read(&path).unwrap());
    }
    for path in corpus("regressions", "import_tables") {
        fuzz_checks::import_file_set(&std::fs::read(&path).unwrap());
    }
}
