//! What the fuzz targets (`fuzz/`, cargo-fuzz and libFuzzer, coverage-guided
//! fuzzing) hold the readers of outside files to. Each check takes arbitrary
//! bytes and panics only when an invariant breaks; the same functions replay
//! the committed seed corpus and every crash found (`fuzz/seeds/`,
//! `fuzz/regressions/`) in `cargo test` (`tests/fuzz_corpus.rs`).
//!
//! - [`changeset_bytes`]: the change-set reader never panics; a file it
//!   accepts is consistent (its header's range and row count match its rows)
//!   and reads back the same after writing it again. The bytes are also read
//!   with a correct SHA-256 trailer appended, so that the fuzzer reaches the
//!   parser behind the hash check.
//! - [`import_file_set`]: the table importer never panics, and an import that
//!   fails leaves the database as it was (nothing imported); one that
//!   succeeds stored exactly the rows it reports.
//!
//! Hangs are caught by libFuzzer's `-timeout`.

use std::path::{Path, PathBuf};
use std::sync::Mutex;

use fieldcage_core::sync::changeset;
use fieldcage_core::{Store, export, import, tables};

/// Read `bytes` as a change-set, as they are and with a correct trailer.
pub fn changeset_bytes(bytes: &[u8]) {
    check_decoded(changeset::decode(bytes));
    let mut sealed = bytes.to_vec();
    sealed.extend_from_slice(format!("sha256,{}\n", changeset::sha256_hex(bytes)).as_bytes());
    check_decoded(changeset::decode(&sealed));
}

fn check_decoded(decoded: std::result::Result<changeset::ChangeSet, String>) {
    let Ok(cs) = decoded else {
        return;
    };
    assert!(cs.first_seq >= 1 && cs.last_seq >= cs.first_seq);
    assert_eq!(cs.changes.len() as i64, cs.last_seq - cs.first_seq + 1);
    for (i, change) in cs.changes.iter().enumerate() {
        assert_eq!(change.seq, cs.first_seq + i as i64);
    }
    let (bytes, _) = changeset::encode_for(
        cs.experiment.as_ref(),
        &cs.device_id,
        &cs.device_name,
        &cs.seen,
        &cs.changes,
    )
    .expect("an accepted change-set can be written again");
    let again = changeset::decode(&bytes).expect("a written change-set reads back");
    assert_eq!(
        changeset::ChangeSet {
            sha256: cs.sha256.clone(),
            ..again
        },
        cs,
        "a change-set read, written and read again changed"
    );
}

/// An empty database and a folder to import from, kept between runs.
struct ImportRig {
    _dir: tempfile::TempDir,
    db: PathBuf,
    files: PathBuf,
    store: Option<Store>,
}

static RIG: Mutex<Option<ImportRig>> = Mutex::new(None);

/// Split `bytes` into table files — chunks separated by a NUL byte, each a
/// file name (`census.csv`), a line break and the file's content — put them
/// in a folder and import it into an empty database.
pub fn import_file_set(bytes: &[u8]) {
    let mut guard = RIG.lock().unwrap_or_else(|p| p.into_inner());
    let rig = guard.get_or_insert_with(|| {
        // A RAM disk where there is one: every run writes files and commits.
        let shm = Path::new("/dev/shm");
        let dir = if shm.is_dir() {
            tempfile::tempdir_in(shm)
        } else {
            tempfile::tempdir()
        }
        .expect("a temporary folder");
        let files = dir.path().join("tables");
        ImportRig {
            db: dir.path().join("fuzz.db"),
            files,
            _dir: dir,
            store: None,
        }
    });
    let _ = std::fs::remove_dir_all(&rig.files);
    std::fs::create_dir_all(&rig.files).expect("the import folder");
    let names: Vec<String> = tables::all().iter().map(export::file_name).collect();
    for chunk in bytes.split(|b| *b == 0) {
        let Some(end) = chunk.iter().position(|b| *b == b'\n') else {
            continue;
        };
        let Ok(name) = std::str::from_utf8(&chunk[..end]) else {
            continue;
        };
        // Only table file names: never a path of the fuzzer's making.
        if names.iter().any(|n| n == name) {
            std::fs::write(rig.files.join(name), &chunk[end + 1..]).expect("a table file");
        }
    }
    if rig.store.is_none() {
        rig.store = Some(fresh_store(&rig.db));
    }
    let Some(store) = rig.store.as_mut() else {
        return;
    };
    match import::import(store, &rig.files) {
        Err(_) => assert_eq!(
            stored_rows(store),
            (0, 0),
            "a failed import left rows or change-log entries in the database"
        ),
        Ok(summary) => {
            let reported: usize = summary.tables.iter().map(|(_, n)| n).sum();
            assert_eq!(stored_rows(store).0, reported as i64);
            // Start the next run from an empty database again.
            rig.store = None;
        }
    }
}

fn fresh_store(db: &Path) -> Store {
    for suffix in ["", "-wal", "-shm"] {
        let mut path = db.as_os_str().to_owned();
        path.push(suffix);
        let _ = std::fs::remove_file(path);
    }
    Store::open(db).expect("an empty database")
}

/// Rows in every data table, and entries in the change log.
fn stored_rows(store: &Store) -> (i64, i64) {
    let data = tables::all()
        .iter()
        .map(|t| store.row_count(t).expect("a count"))
        .sum();
    (data, store.change_count().expect("a count"))
}
