//! The local SQLite store: opening with durable settings, migrations, the one
//! write path (with the change log) and typed reads.
//!
//! Durability: WAL with `synchronous=FULL` (NORMAL can lose acknowledged
//! commits on power loss) and foreign keys on; every setting is read back and
//! a setting that did not take is an error. Every write runs in an IMMEDIATE
//! transaction through [`Store::write`], and every changed field is appended to
//! `change_log` in that same transaction. A save is acknowledged only after
//! the commit returns.

mod hlc;
pub mod log;
pub(crate) mod merge;
pub mod migrations;
mod rows;
mod source;
pub(crate) mod sync_state;
pub mod typed_text;
mod writer;

use std::path::{Path, PathBuf};
use std::sync::Arc;

use rand::{RngCore, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rusqlite::types::Value;
use rusqlite::{Connection, OptionalExtension, TransactionBehavior, params};
use uuid::Uuid;

pub use hlc::Hlc;
pub use rows::{Projection, Record, from_values, to_values};
pub use source::Source;
pub(crate) use source::conn_of;
pub use writer::{Receipt, Writer};

use crate::tables::{self, TableSchema};
use crate::{Error, Result};

/// Source of wall-clock time in milliseconds since the Unix epoch. Injectable
/// so that tests can run devices with wrong clocks.
pub type Clock = Arc<dyn Fn() -> i64 + Send + Sync>;

/// The system clock.
pub fn system_clock() -> Clock {
    Arc::new(|| chrono::Utc::now().timestamp_millis())
}

/// What a change-log entry did.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Op {
    /// A new row: one seq per field that has a value, stored as one entry
    /// ([`log`]).
    Insert,
    /// A changed field.
    Update,
    /// A row tombstoned (no field).
    Delete,
    /// A tombstoned row made live again (no field).
    Restore,
}

impl Op {
    /// The word stored in `change_log.op`.
    pub fn as_str(self) -> &'static str {
        match self {
            Op::Insert => "insert",
            Op::Update => "update",
            Op::Delete => "delete",
            Op::Restore => "restore",
        }
    }

    /// Read the word stored in `change_log.op`.
    pub fn parse(word: &str) -> Option<Op> {
        Some(match word {
            "insert" => Op::Insert,
            "update" => Op::Update,
            "delete" => Op::Delete,
            "restore" => Op::Restore,
            _ => return None,
        })
    }

    /// Whether the entry is about the row's existence rather than a field.
    pub fn is_existence(self) -> bool {
        matches!(self, Op::Delete | Op::Restore)
    }
}

/// How new row ids are made.
#[derive(Debug)]
pub(crate) enum IdMaker {
    /// UUIDv7 from the system clock and the OS random source.
    Clock,
    /// Deterministic UUIDv7s (for the reproducible demo season): a
    /// millisecond counter and seeded random bits.
    Seeded { rng: Box<ChaCha8Rng>, millis: u64 },
}

/// An open fieldcage database.
pub struct Store {
    conn: Connection,
    path: PathBuf,
    device_id: String,
    clock: Clock,
    ids: IdMaker,
}

impl std::fmt::Debug for Store {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Store")
            .field("path", &self.path)
            .field("device_id", &self.device_id)
            .finish_non_exhaustive()
    }
}

impl Store {
    /// Open (or create) the database at `path`, apply durable settings and any
    /// pending migrations, and make this device's identity on first open.
    pub fn open(path: impl AsRef<Path>) -> Result<Store> {
        Self::open_with_clock(path, system_clock())
    }

    /// [`Store::open`] with an injected clock.
    pub fn open_with_clock(path: impl AsRef<Path>, clock: Clock) -> Result<Store> {
        let path = path.as_ref().to_path_buf();
        let mut conn = Connection::open(&path)?;
        configure(&conn)?;
        migrations::migrate(&mut conn)?;
        let device_id = ensure_device(&mut conn, &clock)?;
        drop_old_receipts(&conn, (clock)())?;
        Ok(Store {
            conn,
            path,
            device_id,
            clock,
            ids: IdMaker::Clock,
        })
    }

    /// A second, read-only connection to the database at `path` (already
    /// opened and migrated by a [`Store`]), for long reads that must not hold
    /// up the writer: in WAL mode a reader and the writer do not wait for
    /// each other. Writes through it fail. Read inside one transaction
    /// ([`Store::read_snapshot`]) to see one state of the data throughout.
    pub fn open_reader(path: impl AsRef<Path>) -> Result<Store> {
        let path = path.as_ref().to_path_buf();
        let conn = Connection::open_with_flags(
            &path,
            rusqlite::OpenFlags::SQLITE_OPEN_READ_ONLY
                | rusqlite::OpenFlags::SQLITE_OPEN_NO_MUTEX
                | rusqlite::OpenFlags::SQLITE_OPEN_URI,
        )?;
        conn.busy_timeout(std::time::Duration::from_secs(5))?;
        let version = migrations::current_version(&conn)?;
        if version != migrations::latest_version() {
            return Err(Error::State(format!(
                "{} has schema version {version}, not {}: open it for writing first",
                path.display(),
                migrations::latest_version()
            )));
        }
        let device_id = stored_device_id(&conn)?.ok_or_else(|| {
            Error::State(format!("{} has no device identity yet", path.display()))
        })?;
        Ok(Store {
            conn,
            path,
            device_id,
            clock: system_clock(),
            ids: IdMaker::Clock,
        })
    }

    /// Run `f` inside one read transaction, so that every query it makes
    /// sees the same state of the data.
    pub fn read_snapshot<T>(&self, f: impl FnOnce(&Store) -> Result<T>) -> Result<T> {
        self.conn.execute_batch("BEGIN DEFERRED")?;
        let out = f(self);
        self.conn.execute_batch("ROLLBACK")?;
        out
    }

    /// Where the database lives.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// This database's device id.
    pub fn device_id(&self) -> &str {
        &self.device_id
    }

    /// The connection, inside this crate (all writes go through
    /// [`Store::write`]; readers outside take the store as a [`Source`]).
    pub(crate) fn conn(&self) -> &Connection {
        &self.conn
    }

    /// This device's human name (shown to other devices in sync).
    pub fn device_name(&self) -> Result<String> {
        device_name(&self.conn)
    }

    /// Check a device name as typed: 1 to 60 characters without line breaks
    /// (surrounding spaces are dropped). Returns the name to store.
    pub fn check_device_name(name: &str) -> Result<String> {
        let trimmed = name.trim();
        if trimmed.is_empty() || trimmed.chars().count() > 60 {
            return Err(Error::invalid(
                "device",
                "name",
                name,
                "must be 1 to 60 characters",
            ));
        }
        if trimmed.chars().any(char::is_control) {
            return Err(Error::invalid(
                "device",
                "name",
                name,
                "must not hold line breaks or other control characters",
            ));
        }
        Ok(trimmed.to_owned())
    }

    /// Rename this device. The name travels in the change-sets this device
    /// writes from now on; it must pass [`Store::check_device_name`].
    pub fn set_device_name(&mut self, name: &str) -> Result<()> {
        let name = Store::check_device_name(name)?;
        self.conn.execute(
            "UPDATE local_device SET name = ?1 WHERE singleton = 1",
            [name],
        )?;
        Ok(())
    }

    /// Copy the whole database to `dest` with SQLite's online backup API: a
    /// consistent copy even while this store is open. Never copy the file
    /// itself, and never keep the live database in a cloud or network folder.
    /// The copy has the same device id: open it as a second device only
    /// after giving it a new identity (sync refuses a database that shares
    /// its device id with another one).
    pub fn backup_to(&self, dest: impl AsRef<Path>) -> Result<()> {
        let dest = dest.as_ref();
        if dest.exists() {
            return Err(Error::State(format!(
                "{}: already exists; a backup goes to a new file",
                dest.display()
            )));
        }
        let mut out = Connection::open(dest)?;
        let backup = rusqlite::backup::Backup::new(&self.conn, &mut out)?;
        backup.run_to_completion(1024, std::time::Duration::ZERO, None)?;
        Ok(())
    }

    /// The store's clock, milliseconds since the Unix epoch.
    pub fn now_millis(&self) -> i64 {
        (self.clock)()
    }

    /// The connection for the sync apply path, which writes in its own
    /// IMMEDIATE transactions.
    pub(crate) fn conn_mut(&mut self) -> &mut Connection {
        &mut self.conn
    }

    /// Make ids deterministic from now on (the demo season uses this so that
    /// its tables are the same on every build).
    pub fn use_seeded_ids(&mut self, seed: u64, start_millis: u64) {
        self.ids = IdMaker::Seeded {
            rng: Box::new(ChaCha8Rng::seed_from_u64(seed)),
            millis: start_millis,
        };
    }

    /// Run `f` in one IMMEDIATE transaction. Every change made through the
    /// [`Writer`] is logged; if `f` or the commit fails nothing is written.
    pub fn write<T>(&mut self, f: impl FnOnce(&mut Writer<'_>) -> Result<T>) -> Result<T> {
        let now = (self.clock)();
        let tx = self
            .conn
            .transaction_with_behavior(TransactionBehavior::Immediate)?;
        let (next_seq, last_hlc): (i64, i64) = tx.query_row(
            "SELECT next_seq, hlc FROM local_device WHERE singleton = 1",
            [],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )?;
        let hlc = Hlc(last_hlc).tick(now);
        let mut writer = Writer::new(tx, &self.device_id, next_seq, hlc, &mut self.ids, now);
        let out = f(&mut writer)?;
        writer.commit()?;
        Ok(out)
    }

    /// One live row of `R` by id.
    pub fn get<R: Record>(&self, id: Uuid) -> Result<Option<R>> {
        get(&self.conn, id)
    }

    /// Every live row of `R`, ordered by id (creation order for UUIDv7).
    pub fn list<R: Record>(&self) -> Result<Vec<R>> {
        list(&self.conn)
    }

    /// Every live row of a table as stored values, ordered by id.
    pub fn rows(&self, schema: &TableSchema) -> Result<Vec<Vec<Value>>> {
        rows(&self.conn, schema)
    }

    /// Number of change-log entries (each field of an insert counted).
    pub fn change_count(&self) -> Result<i64> {
        log::count(&self.conn, None, 0)
    }

    /// The connection's durability settings as SQLite reports them now.
    pub fn settings(&self) -> Result<Settings> {
        let read = |pragma: &str| -> Result<rusqlite::types::Value> {
            Ok(self
                .conn
                .query_row(&format!("PRAGMA {pragma}"), [], |r| r.get(0))?)
        };
        let int = |v: rusqlite::types::Value| match v {
            Value::Integer(i) => i,
            _ => -1,
        };
        Ok(Settings {
            journal_mode: match read("journal_mode")? {
                Value::Text(t) => t.to_ascii_lowercase(),
                other => format!("{other:?}"),
            },
            synchronous: int(read("synchronous")?),
            foreign_keys: int(read("foreign_keys")?) == 1,
        })
    }

    /// Test builds only (the `test-hooks` feature, which no shipped binary
    /// turns on): set one setting of the store's own connection, to show
    /// what the durable settings guard against (`synchronous = NORMAL`).
    #[cfg(feature = "test-hooks")]
    pub fn set_pragma_for_test(&self, name: &str, value: &str) -> Result<()> {
        self.conn
            .execute_batch(&format!("PRAGMA {name} = {value};"))?;
        Ok(())
    }

    /// Rows stored in a table, tombstones included.
    pub fn row_count(&self, schema: &TableSchema) -> Result<i64> {
        Ok(self
            .conn
            .query_row(&format!("SELECT count(*) FROM {}", schema.name), [], |r| {
                r.get(0)
            })?)
    }
}

/// One live row of `R` by id, from any [`Source`] (a [`Writer`] sees its
/// own transaction's writes).
pub fn get<R: Record>(source: &impl Source, id: Uuid) -> Result<Option<R>> {
    let conn = conn_of(source);
    let sql = format!("{} WHERE id = ?1 AND deleted = 0", R::SELECT);
    conn.prepare_cached(&sql)?
        .query_row([id.to_string()], R::from_row)
        .optional()
        .map_err(|e| rows::read_error(R::TABLE, e))
}

/// Every live row of `R`, ordered by id, from any [`Source`].
pub fn list<R: Record>(source: &impl Source) -> Result<Vec<R>> {
    let conn = conn_of(source);
    let sql = format!("{} WHERE deleted = 0 ORDER BY id", R::SELECT);
    let mut stmt = conn.prepare_cached(&sql)?;
    let records = stmt.query_map([], R::from_row)?;
    records
        .collect::<rusqlite::Result<_>>()
        .map_err(|e| rows::read_error(R::TABLE, e))
}

/// The first live row of `R` by id, if there is one.
pub fn first<R: Record>(source: &impl Source) -> Result<Option<R>> {
    let conn = conn_of(source);
    let sql = format!("{} WHERE deleted = 0 ORDER BY id LIMIT 1", R::SELECT);
    conn.prepare_cached(&sql)?
        .query_row([], R::from_row)
        .optional()
        .map_err(|e| rows::read_error(R::TABLE, e))
}

/// Every live row of `R`, handed to `f` in the order the table stores them
/// (no sort: for readers that index the rows themselves).
pub fn each<R: Record>(source: &impl Source, mut f: impl FnMut(R)) -> Result<()> {
    let conn = conn_of(source);
    let sql = format!("{} WHERE deleted = 0", R::SELECT);
    let mut stmt = conn.prepare_cached(&sql)?;
    let mut found = stmt.query([])?;
    while let Some(r) = found.next()? {
        f(R::from_row(r).map_err(|e| rows::read_error(R::TABLE, e))?);
    }
    Ok(())
}

/// [`each`] for a projection: its key and its columns of every live row.
pub fn each_projected<P: Projection>(
    source: &impl Source,
    mut f: impl FnMut(P::Key, P),
) -> Result<()> {
    let conn = conn_of(source);
    let table = <P::Of as Record>::TABLE;
    let sql = format!("{} WHERE deleted = 0", P::select());
    let mut stmt = conn.prepare_cached(&sql)?;
    let mut found = stmt.query([])?;
    while let Some(r) = found.next()? {
        let (key, row) = P::from_row(r).map_err(|e| rows::read_error(table, e))?;
        f(key, row);
    }
    Ok(())
}

/// The live rows of `R` that match a condition on its columns (`filter`, a
/// parameterised SQL expression such as `enclosure_id = ?1`), ordered by id.
pub fn live_where<R: Record>(
    source: &impl Source,
    filter: &str,
    params: impl rusqlite::Params,
) -> Result<Vec<R>> {
    let conn = conn_of(source);
    let sql = format!("{} WHERE deleted = 0 AND ({filter}) ORDER BY id", R::SELECT);
    let mut stmt = conn.prepare_cached(&sql)?;
    let records = stmt.query_map(params, R::from_row)?;
    records
        .collect::<rusqlite::Result<_>>()
        .map_err(|e| rows::read_error(R::TABLE, e))
}

/// This device's human name, on a connection.
pub(crate) fn device_name(conn: &Connection) -> Result<String> {
    Ok(conn.query_row(
        "SELECT name FROM local_device WHERE singleton = 1",
        [],
        |r| r.get(0),
    )?)
}

/// Every live row of a table on a connection as stored values, ordered by id.
pub fn rows(source: &impl Source, schema: &TableSchema) -> Result<Vec<Vec<Value>>> {
    let conn = conn_of(source);
    let sql = format!(
        "SELECT {} FROM {} WHERE deleted = 0 ORDER BY id",
        schema.column_list(),
        schema.name
    );
    let mut stmt = conn.prepare_cached(&sql)?;
    let rows = stmt.query_map([], |r| read_values(r, schema.fields.len()))?;
    Ok(rows.collect::<rusqlite::Result<_>>()?)
}

/// The schema of a record type's table.
pub(crate) fn table_of<R: Record>() -> &'static TableSchema {
    tables::get(R::TABLE).unwrap_or_else(|| panic!("no table schema for {}", R::TABLE))
}

pub(crate) fn read_values(row: &rusqlite::Row<'_>, n: usize) -> rusqlite::Result<Vec<Value>> {
    (0..n).map(|i| row.get::<_, Value>(i)).collect()
}

/// The durability settings of a store's connection ([`Store::settings`]).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Settings {
    /// `wal` for a store.
    pub journal_mode: String,
    /// 2 (FULL) for a store.
    pub synchronous: i64,
    /// On for a store.
    pub foreign_keys: bool,
}

/// Apply the durable settings and read each one back.
fn configure(conn: &Connection) -> Result<()> {
    conn.busy_timeout(std::time::Duration::from_secs(5))?;
    // The write path prepares a few statements per table; keep them all.
    conn.set_prepared_statement_cache_capacity(256);
    let mode: String = conn.query_row("PRAGMA journal_mode = WAL", [], |r| r.get(0))?;
    expect_pragma("journal_mode", "wal", &mode.to_ascii_lowercase())?;
    conn.execute_batch("PRAGMA synchronous = FULL; PRAGMA foreign_keys = ON;")?;
    let sync: i64 = conn.query_row("PRAGMA synchronous", [], |r| r.get(0))?;
    expect_pragma(
        "synchronous",
        "2 (FULL)",
        &format!("{sync}{}", if sync == 2 { " (FULL)" } else { "" }),
    )?;
    let fk: i64 = conn.query_row("PRAGMA foreign_keys", [], |r| r.get(0))?;
    expect_pragma("foreign_keys", "1", &fk.to_string())?;
    Ok(())
}

fn expect_pragma(name: &'static str, expected: &str, actual: &str) -> Result<()> {
    if expected == actual {
        Ok(())
    } else {
        Err(Error::Pragma {
            name,
            expected: expected.to_owned(),
            actual: actual.to_owned(),
        })
    }
}

/// How long the answer to a save with an operation id is kept: longer than
/// any page keeps an entry waiting to be sent again.
const RECEIPT_DAYS: i64 = 90;

/// Drop the receipts of saves older than [`RECEIPT_DAYS`].
fn drop_old_receipts(conn: &Connection, now_millis: i64) -> Result<()> {
    conn.execute(
        "DELETE FROM operation_receipt WHERE recorded_at < ?1",
        [now_millis - RECEIPT_DAYS * 86_400_000],
    )?;
    Ok(())
}

/// Make this database's device identity once; return its id.
/// This database's device id, once made.
fn stored_device_id(conn: &Connection) -> Result<Option<String>> {
    Ok(conn
        .query_row(
            "SELECT device_id FROM local_device WHERE singleton = 1",
            [],
            |r| r.get(0),
        )
        .optional()?)
}

fn ensure_device(conn: &mut Connection, clock: &Clock) -> Result<String> {
    if let Some(id) = stored_device_id(conn)? {
        return Ok(id);
    }
    let id = Uuid::now_v7().to_string();
    let name = format!("device-{}", &id[id.len() - 6..]);
    let created = chrono::Utc::now().to_rfc3339_opts(chrono::SecondsFormat::Secs, true);
    let start = Hlc::new((clock)(), 0).0;
    let tx = conn.transaction_with_behavior(TransactionBehavior::Immediate)?;
    tx.execute(
        "INSERT INTO local_device (singleton, device_id, name, next_seq, hlc, created_at) \
         VALUES (1, ?1, ?2, 1, ?3, ?4)",
        params![id, name, start, created],
    )?;
    tx.commit()?;
    Ok(id)
}

impl IdMaker {
    fn next(&mut self) -> Uuid {
        match self {
            IdMaker::Clock => Uuid::now_v7(),
            IdMaker::Seeded { rng, millis } => {
                let mut random = [0u8; 10];
                rng.fill_bytes(&mut random);
                *millis += 1;
                uuid::Builder::from_unix_timestamp_millis(*millis, &random).into_uuid()
            }
        }
    }
}
