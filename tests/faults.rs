//! I/O failures on export and sync: the Nth file-system step fails, for
//! N = 1, 2, … until the operation no longer reaches step N. Each failure must
//! come back as an error naming the file, leave the database as it was (sync:
//! record only what is really written), and never show a reader part of a
//! file under its final name. The failing steps go through the same seam as
//! production (`fieldcage_core::disk::Disk`), delegating to the real file system.

use crate::util::Raw;
use std::cell::{Cell, RefCell};
use std::collections::BTreeMap;
use std::fs::File;
use std::io;
use std::path::{Path, PathBuf};

use fieldcage_core::disk::{Disk, OsDisk};
use fieldcage_core::export;
use fieldcage_core::model::{Enclosure, Role, Taxon};
use fieldcage_core::sync::{self, SyncOptions, changeset};
use fieldcage_core::{Error, Store};
use fieldcage_ops::Service;
use serde_json::json;

use crate::util::{Temp, data_snapshot, fast_temp, snapshot, store_with};

/// A check run before every step and after the operation: it panics when a
/// reader could see something it must not.
type Watch<'a> = Box<dyn Fn() + 'a>;

/// A disk that fails its `fail_at`-th step (create, write, flush, rename or link,
/// folder flush; 1-based). A failing write first writes half of its bytes,
/// as a disk that fills up does.
struct FailingDisk<'a> {
    fail_at: usize,
    steps: Cell<usize>,
    failed: RefCell<Option<String>>,
    watch: Watch<'a>,
}

impl std::fmt::Debug for FailingDisk<'_> {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("FailingDisk")
            .field("fail_at", &self.fail_at)
            .field("steps", &self.steps.get())
            .finish()
    }
}

impl<'a> FailingDisk<'a> {
    fn new(fail_at: usize, watch: Watch<'a>) -> FailingDisk<'a> {
        FailingDisk {
            fail_at,
            steps: Cell::new(0),
            failed: RefCell::new(None),
            watch,
        }
    }

    /// Count a step; `Err` when it is the one to fail.
    fn step(&self, what: &str) -> io::Result<()> {
        (self.watch)();
        let n = self.steps.get() + 1;
        self.steps.set(n);
        if n == self.fail_at {
            *self.failed.borrow_mut() = Some(what.to_owned());
            return Err(io::Error::new(
                io::ErrorKind::StorageFull,
                format!("injected failure of step {n} ({what})"),
            ));
        }
        Ok(())
    }

    /// The step that failed, if the operation reached it.
    fn failed_step(&self) -> Option<String> {
        self.failed.borrow().clone()
    }
}

impl Disk for FailingDisk<'_> {
    fn create(&self, path: &Path) -> io::Result<File> {
        self.step("create")?;
        OsDisk.create(path)
    }

    fn write(&self, file: &mut File, bytes: &[u8]) -> io::Result<()> {
        if let Err(e) = self.step("write") {
            OsDisk.write(file, &bytes[..bytes.len() / 2])?;
            return Err(e);
        }
        OsDisk.write(file, bytes)
    }

    fn sync_file(&self, file: &File) -> io::Result<()> {
        self.step("flush")?;
        OsDisk.sync_file(file)
    }

    fn rename(&self, from: &Path, to: &Path) -> io::Result<()> {
        self.step("rename")?;
        OsDisk.rename(from, to)
    }

    fn link_new(&self, from: &Path, to: &Path) -> io::Result<()> {
        self.step("link")?;
        OsDisk.link_new(from, to)
    }

    fn sync_dir(&self, dir: &Path) -> io::Result<()> {
        self.step("folder flush")?;
        OsDisk.sync_dir(dir)
    }
}

/// The files a reader of `dir` sees: every name not starting with '.'.
fn visible_files(dir: &Path) -> BTreeMap<String, Vec<u8>> {
    let Ok(entries) = std::fs::read_dir(dir) else {
        return BTreeMap::new();
    };
    entries
        .map(|e| e.unwrap())
        .filter(|e| e.file_type().unwrap().is_file())
        .map(|e| e.file_name().to_string_lossy().into_owned())
        .filter(|n| !n.starts_with('.'))
        .map(|n| {
            let bytes = std::fs::read(dir.join(&n)).unwrap();
            (n, bytes)
        })
        .collect()
}

/// Names starting with '.' left in `dir` (temporary files).
fn hidden_files(dir: &Path) -> Vec<String> {
    let Ok(entries) = std::fs::read_dir(dir) else {
        return Vec::new();
    };
    entries
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .filter(|n| n.starts_with('.'))
        .collect()
}

/// The cages, an animal and a plant of a season.
fn cages_and_taxa(store: &Store) -> (Vec<String>, String, String) {
    let cages = store
        .list::<Enclosure>()
        .unwrap()
        .into_iter()
        .map(|c| c.id.0.to_string())
        .collect();
    let taxa = store.list::<Taxon>().unwrap();
    let first = |role: Role| {
        taxa.iter()
            .find(|t| t.role == role)
            .unwrap()
            .id
            .0
            .to_string()
    };
    (cages, first(Role::Herbivore), first(Role::Plant))
}

/// A season set up from the demo definition with a few field records saved
/// through the operation set, each in its own transaction.
fn small_season(tmp: &Temp) -> PathBuf {
    let store = store_with(tmp, &[], 11);
    let db = store.path().to_path_buf();
    let (cages, slug, plant) = cages_and_taxa(&store);
    let service =
        Service::new(store).with_today(chrono::NaiveDate::from_ymd_opt(2026, 5, 25).unwrap());
    for (i, cage) in cages.iter().take(3).enumerate() {
        service
            .call(
                "save_census",
                json!({ "enclosure_id": cage, "taxon_id": slug, "alive": i + 2, "dead": 0, "missing": 1 }),
            )
            .unwrap();
        service
            .call(
                "save_cover",
                json!({ "enclosure_id": cage, "taxon_id": plant, "percent": 10.5 * (i as f64 + 1.0) }),
            )
            .unwrap();
    }
    db
}

/// Export with step N failing, for every N: the error names the file (or the
/// folder, for the final folder flush), nothing in the database changes, a
/// reader of the folder sees only whole files — at every step, not only at
/// the end — and no temporary file is left behind. The run that reaches no
/// failing step writes exactly what a plain export writes.
#[test]
fn export_survives_a_failure_at_every_write_step() {
    let tmp = Temp::new();
    let db = small_season(&tmp);
    let store = Store::open(&db).unwrap();
    let reference = tmp.path("reference");
    export::export(&store, &reference).unwrap();
    let whole = visible_files(&reference);
    assert!(whole.len() > 30, "an export has every table");
    let before = snapshot(&store);
    let mut failures = 0;
    for n in 1.. {
        let out = tmp.path(&format!("out-{n}"));
        let only_whole_files = || {
            for (name, bytes) in visible_files(&out) {
                assert!(
                    whole.get(&name) == Some(&bytes),
                    "step {n}: {name} is visible but not whole"
                );
            }
        };
        let disk = FailingDisk::new(n, Box::new(only_whole_files));
        let result = export::export_with(&store, &out, &disk);
        (disk.watch)();
        assert_eq!(
            snapshot(&store),
            before,
            "step {n}: the export changed the database"
        );
        assert!(
            hidden_files(&out).is_empty(),
            "step {n}: temporary files left: {:?}",
            hidden_files(&out)
        );
        match (result, disk.failed_step()) {
            (Ok(_), None) => {
                assert_eq!(
                    visible_files(&out),
                    whole,
                    "the export after {n} steps differs"
                );
                break;
            }
            (Err(Error::Io { path, source }), Some(step)) => {
                failures += 1;
                let message = source.to_string();
                assert!(message.contains("injected failure"), "step {n}: {message}");
                let names_a_file = path.parent() == Some(out.as_path())
                    && whole
                        .contains_key(&path.file_name().unwrap().to_string_lossy().into_owned());
                let names_the_folder = step == "folder flush" && path == out;
                assert!(
                    names_a_file || names_the_folder,
                    "step {n} ({step}): the error names {}",
                    path.display()
                );
            }
            (result, step) => panic!("step {n}: {result:?} although the failing step was {step:?}"),
        }
    }
    // Create, write, flush and rename of every file, then the folder flush.
    assert_eq!(failures, whole.len() * 4 + 1);
}

/// An export that fails over an earlier export leaves every file whole: each
/// is the earlier version or the new one, and exporting again gives the new
/// export exactly.
#[test]
fn a_failed_export_over_an_earlier_one_leaves_each_file_old_or_new() {
    let tmp = Temp::new();
    let db = small_season(&tmp);
    let old_dir = tmp.path("old");
    export::export(&Store::open(&db).unwrap(), &old_dir).unwrap();
    let old = visible_files(&old_dir);
    {
        let store = Store::open(&db).unwrap();
        let (cages, slug, _) = cages_and_taxa(&store);
        let cage = &cages[0];
        let service =
            Service::new(store).with_today(chrono::NaiveDate::from_ymd_opt(2026, 5, 26).unwrap());
        service
            .call(
                "save_census",
                json!({ "enclosure_id": cage, "taxon_id": slug, "alive": 9 }),
            )
            .unwrap();
    }
    let store = Store::open(&db).unwrap();
    let new_dir = tmp.path("new");
    export::export(&store, &new_dir).unwrap();
    let new = visible_files(&new_dir);
    assert_ne!(old, new, "the new records change the export");
    // Every fourth step is a rename: failing just before and just after the
    // renames covers every mixture of old and new files.
    for n in (1..=new.len() * 4 + 1).step_by(3) {
        let out = tmp.path(&format!("over-{n}"));
        std::fs::create_dir(&out).unwrap();
        for (name, bytes) in &old {
            std::fs::write(out.join(name), bytes).unwrap();
        }
        let old_or_new = || {
            let seen = visible_files(&out);
            assert_eq!(seen.len(), old.len(), "step {n}: a file disappeared");
            for (name, bytes) in seen {
                assert!(
                    old.get(&name) == Some(&bytes) || new.get(&name) == Some(&bytes),
                    "step {n}: {name} is neither the old nor the new version"
                );
            }
        };
        let disk = FailingDisk::new(n, Box::new(old_or_new));
        let err = export::export_with(&store, &out, &disk).unwrap_err();
        (disk.watch)();
        assert!(
            err.to_string().contains(&out.display().to_string()),
            "{err}"
        );
        export::export(&store, &out).unwrap();
        assert_eq!(
            visible_files(&out),
            new,
            "step {n}: exporting again does not repair the folder"
        );
    }
}

/// Sync with step N failing, for every N, on a device whose changes fill
/// several change-set files: the error names the file, the data do not
/// change, every change-set recorded as written is in the target whole, a
/// reader of the device's folder sees only complete change-sets at every
/// step, and a later sync without failures hands every change to a second
/// device.
#[test]
fn sync_survives_a_failure_at_every_write_step() {
    let tmp = fast_temp();
    let db = small_season(&tmp);
    let original = Store::open(&db).unwrap();
    let me = original.device_id().to_owned();
    let data = data_snapshot(&original);
    let changes = original.change_count().unwrap();
    // One transaction per file: the setup, then each save.
    let options = SyncOptions {
        max_rows_per_file: 1,
        ..SyncOptions::default()
    };
    let mut failures = 0;
    for n in 1.. {
        let copy_db = tmp.path(&format!("copy-{n}.db"));
        original.backup_to(&copy_db).unwrap();
        let mut store = Store::open(&copy_db).unwrap();
        let target = tmp.path(&format!("target-{n}"));
        std::fs::create_dir(&target).unwrap();
        let folder = target.join(&me);
        let only_whole_change_sets = || {
            for name in visible_files(&folder).keys() {
                if let Err(e) = changeset::read(&folder.join(name)) {
                    panic!("step {n}: {name} is visible but not a whole change-set: {e}");
                }
            }
        };
        let disk = FailingDisk::new(n, Box::new(only_whole_change_sets));
        let result = sync::sync_with_disk(&mut store, &target, &options, &disk);
        (disk.watch)();
        assert_eq!(
            data_snapshot(&store),
            data,
            "step {n}: sync changed the data"
        );
        assert_eq!(store.change_count().unwrap(), changes);
        assert!(
            hidden_files(&folder).is_empty(),
            "step {n}: temporary files left"
        );
        // What the database records as written is in the target, whole.
        let mut recorded = 0;
        let conn = store.raw();
        let mut stmt = conn
            .prepare("SELECT first_seq, last_seq, sha256 FROM sync_written")
            .unwrap();
        let rows = stmt
            .query_map([], |r| {
                Ok((
                    r.get::<_, i64>(0)?,
                    r.get::<_, i64>(1)?,
                    r.get::<_, String>(2)?,
                ))
            })
            .unwrap();
        for row in rows {
            let (first, last, sha) = row.unwrap();
            let cs = changeset::read(&folder.join(changeset::file_name(first))).unwrap();
            assert_eq!((cs.first_seq, cs.last_seq, cs.sha256), (first, last, sha));
            recorded += last - first + 1;
        }
        drop(stmt);
        assert_eq!(recorded + sync::pending_changes(&store).unwrap(), changes);
        match (result, disk.failed_step()) {
            (Ok(report), None) => {
                assert!(report.warnings.is_empty(), "{:?}", report.warnings);
                assert_eq!(sync::pending_changes(&store).unwrap(), 0);
                break;
            }
            (Ok(report), Some(step)) => {
                // A folder flush refused is a warning (network file
                // systems refuse it), reported to the person.
                assert_eq!(step, "folder flush", "step {n}");
                assert!(
                    report
                        .warnings
                        .iter()
                        .any(|w| w.contains(&folder.display().to_string())
                            && w.contains("injected failure")),
                    "step {n}: {:?}",
                    report.warnings
                );
            }
            (Err(e), Some(step)) => {
                failures += 1;
                let message = e.to_string();
                assert!(message.contains("injected failure"), "step {n}: {message}");
                assert!(
                    message.contains(&target.display().to_string()),
                    "step {n} ({step}): the error does not name the file: {message}"
                );
                assert!(
                    sync::last_success(&store).unwrap().is_none(),
                    "step {n}: a failed sync counts as done"
                );
            }
            (Err(e), None) => panic!("step {n}: {e} without an injected failure"),
        }
        // Syncing again without failures completes the target, and a second
        // device receives every change.
        sync::sync_with(&mut store, &target, &options).unwrap();
        assert_eq!(sync::pending_changes(&store).unwrap(), 0);
        let mut other = Store::open(tmp.path(&format!("other-{n}.db"))).unwrap();
        let report = sync::sync_once(&mut other, &target).unwrap();
        assert!(report.skipped.is_empty(), "step {n}: {:?}", report.skipped);
        assert_eq!(
            data_snapshot(&other),
            data,
            "step {n}: the second device misses changes"
        );
    }
    assert!(failures >= 20, "only {failures} steps failed");
}
