//! Shared fixtures.

use std::cell::RefCell;
use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::rc::Rc;

use fieldcage_core::Store;
use rusqlite::types::Value;

pub use fieldcage_testkit::fixture::{
    Temp, demo_definition_with, demo_store, fast_temp, store_with,
};

/// The test's own connection to a store's database file: the store's own
/// connection stays inside the core, so a test reads (and, to stage a fault,
/// writes) through a connection of its own, as another program on the
/// tablet would. One per file and thread, kept for the test's life, so that
/// a TEMP table made through it is there for the test's later queries.
pub trait Raw {
    /// This store's file, through the test's connection.
    fn raw(&self) -> Rc<rusqlite::Connection>;
}

impl Raw for Store {
    fn raw(&self) -> Rc<rusqlite::Connection> {
        type Open = HashMap<PathBuf, (FileId, Rc<rusqlite::Connection>)>;
        thread_local! {
            static OPEN: RefCell<Open> = RefCell::new(HashMap::new());
        }
        OPEN.with(|open| {
            let mut open = open.borrow_mut();
            // A file removed (its temp folder dropped) or made anew at the
            // same path is no longer the one the connection holds: close it,
            // so a long property test does not run out of file handles.
            open.retain(|path, (id, _)| file_id(path) == Some(*id));
            if let Some((_, conn)) = open.get(self.path()) {
                return Rc::clone(conn);
            }
            let conn = rusqlite::Connection::open(self.path()).expect("the test's connection");
            conn.busy_timeout(std::time::Duration::from_secs(10))
                .expect("a busy timeout");
            let conn = Rc::new(conn);
            if let Some(id) = file_id(self.path()) {
                open.insert(self.path().to_path_buf(), (id, Rc::clone(&conn)));
            }
            conn
        })
    }
}

/// A file's device and inode: which file a path names now.
type FileId = (u64, u64);

fn file_id(path: &Path) -> Option<FileId> {
    use std::os::unix::fs::MetadataExt;
    std::fs::metadata(path).ok().map(|m| (m.dev(), m.ino()))
}

/// The repository's top folder (the tests belong to `crates/cli`).
pub fn repo_root() -> &'static Path {
    static ROOT: std::sync::OnceLock<PathBuf> = std::sync::OnceLock::new();
    ROOT.get_or_init(|| Path::new(env!("CARGO_MANIFEST_DIR")).join("../.."))
}

/// The first column of every row a query returns.
pub fn column<T: rusqlite::types::FromSql>(store: &Store, sql: &str) -> Vec<T> {
    store
        .raw()
        .prepare(sql)
        .unwrap()
        .query_map([], |r| r.get(0))
        .unwrap()
        .collect::<Result<_, _>>()
        .unwrap()
}

/// Make (afresh) the TEMP table `log_entry`: the change log with one row
/// per entry as readers see it (each field of an insert its own row, with
/// its own seq), in the stored columns, for tests to query with SQL. (STRICT,
/// so that ANY keeps each value's type: 5.0 stays a real.)
pub fn log_entries(store: &Store) {
    let conn = store.raw();
    conn.execute_batch(
        "DROP TABLE IF EXISTS temp.log_entry; \
         CREATE TEMP TABLE log_entry (device_id TEXT, seq INTEGER, hlc INTEGER, table_name TEXT, \
         row_id TEXT, op TEXT, field TEXT, old_value ANY, new_value ANY) STRICT",
    )
    .unwrap();
    let mut insert = conn
        .prepare("INSERT INTO temp.log_entry VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9)")
        .unwrap();
    for c in fieldcage_core::store::log::all_entries(&conn).unwrap() {
        let e = c.entry;
        insert
            .execute(rusqlite::params![
                e.device_id,
                e.seq,
                e.hlc,
                c.table,
                c.row_id,
                e.op.as_str(),
                e.field,
                e.old_value,
                e.new_value
            ])
            .unwrap();
    }
}

/// The names of every table in the database, in name order.
pub fn table_names(store: &Store) -> Vec<String> {
    column(
        store,
        "SELECT name FROM sqlite_schema WHERE type = 'table' ORDER BY name",
    )
}

/// Every row of every table (tombstones, device and change log included), as
/// text: two equal snapshots mean nothing at all changed.
pub fn snapshot(store: &Store) -> String {
    let conn = store.raw();
    let mut names = table_names(store);
    names.retain(|n| !n.starts_with("sqlite_"));
    let mut out = String::new();
    for name in names {
        out.push_str(&format!("== {name}\n"));
        let mut stmt = conn
            .prepare(&format!("SELECT * FROM {name} ORDER BY 1, 2"))
            .unwrap();
        let n = stmt.column_count();
        let rows = stmt
            .query_map([], |r| {
                (0..n)
                    .map(|i| r.get::<_, Value>(i))
                    .collect::<Result<Vec<_>, _>>()
            })
            .unwrap();
        for row in rows {
            out.push_str(&format!("{:?}\n", row.unwrap()));
        }
    }
    out
}

/// Count of live rows in a table.
pub fn count(store: &Store, table: &str) -> i64 {
    store
        .raw()
        .query_row(
            &format!("SELECT count(*) FROM {table} WHERE deleted = 0"),
            [],
            |r| r.get(0),
        )
        .unwrap()
}

/// Every row (tombstones included) of the data tables only: what two devices
/// holding the same data agree on.
pub fn data_snapshot(store: &Store) -> String {
    let mut out = String::new();
    for schema in fieldcage_core::tables::all() {
        out.push_str(&format!("== {}\n", schema.name));
        let conn = store.raw();
        let mut stmt = conn
            .prepare(&format!("SELECT * FROM {} ORDER BY id", schema.name))
            .unwrap();
        let n = stmt.column_count();
        let rows = stmt
            .query_map([], |r| {
                (0..n)
                    .map(|i| r.get::<_, Value>(i))
                    .collect::<Result<Vec<_>, _>>()
            })
            .unwrap();
        for row in rows {
            out.push_str(&format!("{:?}\n", row.unwrap()));
        }
    }
    out
}

/// A clock a test can set: milliseconds since the Unix epoch.
#[derive(Clone)]
pub struct TestClock(pub std::sync::Arc<std::sync::atomic::AtomicI64>);

impl TestClock {
    pub fn at(millis: i64) -> TestClock {
        TestClock(std::sync::Arc::new(std::sync::atomic::AtomicI64::new(
            millis,
        )))
    }

    pub fn advance(&self, millis: i64) {
        self.0
            .fetch_add(millis, std::sync::atomic::Ordering::SeqCst);
    }

    pub fn clock(&self) -> fieldcage_core::store::Clock {
        let c = self.0.clone();
        std::sync::Arc::new(move || c.load(std::sync::atomic::Ordering::SeqCst))
    }
}

/// 2026-05-11T08:00:00Z, a date inside the invented demo season.
pub const SEASON_MILLIS: i64 = 1_778_486_400_000;

/// A fixed UUIDv7 for test rows: `n` in the random part.
pub fn fixed_id(n: u64) -> uuid::Uuid {
    let mut bytes = [0u8; 10];
    bytes[2..].copy_from_slice(&n.to_be_bytes());
    uuid::Builder::from_unix_timestamp_millis(1_778_400_000_000, &bytes).into_uuid()
}

/// The rows of a tiny experiment with fixed ids: 1 site, 1 block, 2
/// treatments, 2 cages, an herbivore and a predator, and one census visit
/// per cage. Every device that writes it holds the same rows (as tablets set
/// up from one definition do).
pub struct Tiny;

impl Tiny {
    pub fn experiment() -> fieldcage_core::model::ExperimentId {
        fieldcage_core::model::ExperimentId(fixed_id(1))
    }
    pub fn treatments() -> [fieldcage_core::model::TreatmentId; 2] {
        [
            fieldcage_core::model::TreatmentId(fixed_id(4)),
            fieldcage_core::model::TreatmentId(fixed_id(5)),
        ]
    }
    pub fn cages() -> [fieldcage_core::model::EnclosureId; 2] {
        [
            fieldcage_core::model::EnclosureId(fixed_id(6)),
            fieldcage_core::model::EnclosureId(fixed_id(7)),
        ]
    }
    pub fn taxa() -> [fieldcage_core::model::TaxonId; 2] {
        [
            fieldcage_core::model::TaxonId(fixed_id(8)),
            fieldcage_core::model::TaxonId(fixed_id(9)),
        ]
    }
    pub fn visits() -> [fieldcage_core::model::VisitId; 2] {
        [
            fieldcage_core::model::VisitId(fixed_id(10)),
            fieldcage_core::model::VisitId(fixed_id(11)),
        ]
    }

    /// Write the tiny experiment through the write path.
    pub fn write(store: &mut Store) {
        use fieldcage_core::model::*;
        store
            .write(|w| {
                let eid = Tiny::experiment();
                w.insert(&Experiment {
                    id: eid,
                    code: "tiny".into(),
                    title: "Tiny test experiment (invented)".into(),
                    start_date: chrono::NaiveDate::from_ymd_opt(2026, 5, 11).unwrap(),
                    end_date: None,
                    utc_offset: "+00:00".into(),
                    design: Design::Rcbd,
                    randomisation_seed: Some(1),
                    notes: None,
                })?;
                let site = SiteId(fixed_id(2));
                w.insert(&Site {
                    id: site,
                    experiment_id: eid,
                    code: "S".into(),
                    name: "Test site".into(),
                    latitude: None,
                    longitude: None,
                    notes: None,
                })?;
                let block = BlockId(fixed_id(3));
                w.insert(&Block {
                    id: block,
                    site_id: site,
                    code: "B1".into(),
                    notes: None,
                })?;
                for (i, t) in Tiny::treatments().into_iter().enumerate() {
                    w.insert(&Treatment {
                        id: t,
                        experiment_id: eid,
                        code: format!("T{i}"),
                        name: format!("Treatment {i}"),
                        herbivores: true,
                        predator_mode: PredatorMode::None,
                        notes: None,
                    })?;
                }
                for (i, c) in Tiny::cages().into_iter().enumerate() {
                    w.insert(&Enclosure {
                        id: c,
                        block_id: block,
                        label: format!("C-{i}"),
                        area_m2: 0.5,
                        height_m: Some(1.0),
                        mesh_mm: None,
                        x_m: None,
                        y_m: None,
                        notes: None,
                    })?;
                }
                for (i, t) in Tiny::taxa().into_iter().enumerate() {
                    w.insert(&Taxon {
                        id: t,
                        experiment_id: eid,
                        code: format!("A{i}"),
                        scientific_name: format!("Animalia testis {i}"),
                        common_name: None,
                        role: if i == 0 {
                            Role::Herbivore
                        } else {
                            Role::Predator
                        },
                        plant_group: None,
                        notes: None,
                    })?;
                }
                for (c, v) in Tiny::cages().into_iter().zip(Tiny::visits()) {
                    w.insert(&Visit {
                        id: v,
                        enclosure_id: c,
                        kind: VisitKind::Census,
                        day: Some(3),
                        visited_at: chrono::DateTime::parse_from_rfc3339(
                            "2026-05-14T09:00:00+00:00",
                        )
                        .unwrap(),
                        observer: None,
                        device: None,
                        completed: true,
                        notes: None,
                    })?;
                }
                Ok(())
            })
            .expect("tiny experiment");
    }
}

/// A device (tablet) of a sync test: its own database and its own clock.
pub struct Device {
    pub store: Store,
    pub clock: TestClock,
}

impl Device {
    /// A new device in `tmp` with the tiny experiment written, its clock at
    /// `millis`.
    pub fn tiny(tmp: &Temp, name: &str, millis: i64) -> Device {
        let mut d = Device::empty(tmp, name, millis);
        Tiny::write(&mut d.store);
        d
    }

    /// A new device with an empty database (copied from a migrated template
    /// with the backup API: creating the schema is most of the cost of a new
    /// database, and the sync tests make thousands). It gets its own identity
    /// when first opened.
    pub fn empty(tmp: &Temp, name: &str, millis: i64) -> Device {
        let clock = TestClock::at(millis);
        let path = tmp.path(&format!("{name}.db"));
        {
            let template = template();
            let mut copy = rusqlite::Connection::open(&path).unwrap();
            rusqlite::backup::Backup::new(&template, &mut copy)
                .unwrap()
                .run_to_completion(1 << 20, std::time::Duration::ZERO, None)
                .unwrap();
        }
        let mut store = Store::open_with_clock(&path, clock.clock()).unwrap();
        store.set_device_name(name).unwrap();
        Device { store, clock }
    }

    /// One sync run against `target`.
    pub fn sync(&mut self, target: &std::path::Path) -> fieldcage_core::sync::SyncReport {
        fieldcage_core::sync::sync_once(&mut self.store, target).unwrap()
    }
}

/// A database with every migration applied and no device identity yet.
fn template() -> std::sync::MutexGuard<'static, rusqlite::Connection> {
    static TEMPLATE: std::sync::OnceLock<std::sync::Mutex<rusqlite::Connection>> =
        std::sync::OnceLock::new();
    TEMPLATE
        .get_or_init(|| {
            let mut conn = rusqlite::Connection::open_in_memory().unwrap();
            fieldcage_core::store::migrations::migrate(&mut conn).unwrap();
            std::sync::Mutex::new(conn)
        })
        .lock()
        .unwrap_or_else(|e| e.into_inner())
}
