//! The library's error type. A variant exists wherever a caller must act
//! differently: bad input (show it to the person, with the field and value),
//! not found, a file problem, or a storage failure.

use std::path::PathBuf;

/// Result alias used across the library.
pub type Result<T, E = Error> = std::result::Result<T, E>;

/// Everything that can go wrong in fieldcage's core.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum Error {
    /// A value was refused before anything was written.
    #[error("{table}.{field}: {reason} (value: {value:?})")]
    InvalidValue {
        /// Table (or definition section) the value belongs to.
        table: String,
        /// Field at fault.
        field: String,
        /// The value as given.
        value: String,
        /// Why it was refused.
        reason: String,
    },
    /// A change was refused because the stored value moved after the person
    /// saw it (another tab, another tablet's sync): applying it would put
    /// back or overwrite a value they never saw. Nothing was written; show
    /// both values and let the person enter it again.
    #[error(
        "{table}.{field} was changed meanwhile: it is now {stored}; the change from {seen} to {value} was not saved"
    )]
    Stale {
        /// Table.
        table: String,
        /// Field.
        field: String,
        /// What is stored now.
        stored: String,
        /// What the person saw before changing it.
        seen: String,
        /// What the person entered.
        value: String,
    },
    /// A record the request refers to does not exist (or was deleted).
    #[error("{table} {id} not found")]
    NotFound {
        /// Table searched.
        table: String,
        /// Id or label looked for.
        id: String,
    },
    /// The experiment definition file is wrong; `location` names the entry.
    #[error("{path}: {location}: {reason}")]
    Definition {
        /// The definition file.
        path: PathBuf,
        /// Where in the file (section, key or entry label).
        location: String,
        /// What is wrong.
        reason: String,
    },
    /// A file being imported is wrong; nothing was imported.
    #[error("{file}:{line}:{column}: {reason}")]
    Import {
        /// File name, relative to the import folder.
        file: String,
        /// 1-based line number (1 = the header).
        line: u64,
        /// Column name, or the 1-based column number when no name applies.
        column: String,
        /// What is wrong, with the value.
        reason: String,
    },
    /// The database is not in the state this operation needs, and the
    /// person can change that (delete the rows that refer to it first, open
    /// it with a newer fieldcage, use a new file); the message says how.
    #[error("{0}")]
    State(String),
    /// Something that always holds did not: a bug in fieldcage or a damaged
    /// database, nothing the person did or can fix by trying again. What
    /// was being written was rolled back; the message is for a bug report.
    #[error("{0}")]
    Invariant(String),
    /// A SQLite setting did not take effect; durability cannot be promised.
    #[error("PRAGMA {name} is {actual:?}, expected {expected:?}")]
    Pragma {
        /// Pragma name.
        name: &'static str,
        /// What fieldcage needs.
        expected: String,
        /// What SQLite reported.
        actual: String,
    },
    /// A file could not be read or written.
    #[error("{path}: {source}")]
    Io {
        /// The file or folder.
        path: PathBuf,
        /// The underlying error.
        source: std::io::Error,
    },
    /// A change-set file is not one that may be applied; nothing of it was.
    #[error("{file}: {reason}")]
    ChangeSet {
        /// The file, as found in the sync target.
        file: PathBuf,
        /// What is wrong (with the line and field where one applies).
        reason: String,
    },
    /// The sync target cannot be used now (missing, unmounted, read-only);
    /// try again later.
    #[error("sync target {target}: {reason}")]
    TargetUnavailable {
        /// The target folder.
        target: PathBuf,
        /// Why it cannot be used.
        reason: String,
    },
    /// Sync was refused because another database uses this device's
    /// identity (a copy or a restored backup); retrying will not help.
    #[error("{0}")]
    DeviceClash(String),
    /// A sync run wrote and applied its change-sets, but the record of the
    /// run could not be stored: what it did is saved, the last sync shown is
    /// still the one before. The cause is the database's (a full disk, a
    /// read-only file); the next run records itself when it is gone.
    #[error(
        "the sync run finished (its changes are written and applied), but it could not be \
         recorded, so the last sync shown is still the one before: {0}"
    )]
    RunNotRecorded(#[source] Box<Error>),
    /// SQLite reported an error.
    #[error("database: {0}")]
    Sqlite(#[from] rusqlite::Error),
}

impl Error {
    /// Shorthand for [`Error::InvalidValue`].
    pub fn invalid(
        table: impl Into<String>,
        field: impl Into<String>,
        value: impl std::fmt::Display,
        reason: impl Into<String>,
    ) -> Self {
        Error::InvalidValue {
            table: table.into(),
            field: field.into(),
            value: value.to_string(),
            reason: reason.into(),
        }
    }

    /// Shorthand for [`Error::Io`].
    pub fn io(path: impl Into<PathBuf>, source: std::io::Error) -> Self {
        Error::Io {
            path: path.into(),
            source,
        }
    }
}
