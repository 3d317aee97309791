//! Files written whole, and the seam through which they reach the disk.
//!
//! Every file fieldcage writes outside its database — an export's tables and
//! `datapackage.json`, a sync change-set — goes through [`write_atomically`]:
//! the bytes are written to a temporary name that starts with `.` (which
//! every reader of fieldcage's folders skips), flushed to disk, then renamed
//! onto the final name; the folder is flushed afterwards with [`sync_dir`]. A
//! reader therefore sees either no file or the whole file, never part of one
//! (POSIX `rename` replaces the name in one step; common practice for
//! crash-safe files).
//!
//! Each step is a method of [`Disk`]. Production code passes [`OsDisk`], whose
//! methods are the trait's default ones and call the operating system; a test
//! passes its own `Disk` that delegates to [`OsDisk`] and fails one chosen
//! step, to show that every failure is reported and leaves no half-written
//! file under a final name (`tests/faults.rs`).

use std::fs::{self, File};
use std::io::{self, Write};
use std::path::{Path, PathBuf};

use crate::{Error, Result};

/// The file-system steps of an atomic write. The default methods do the
/// real thing; see the module documentation.
pub trait Disk: std::fmt::Debug {
    /// Create (or truncate) a file for writing.
    fn create(&self, path: &Path) -> io::Result<File> {
        File::create(path)
    }

    /// Write all of `bytes` to `file`.
    fn write(&self, file: &mut File, bytes: &[u8]) -> io::Result<()> {
        file.write_all(bytes)
    }

    /// Flush a file's content to the disk.
    fn sync_file(&self, file: &File) -> io::Result<()> {
        file.sync_all()
    }

    /// Give `from` the name `to`, replacing a file of that name.
    fn rename(&self, from: &Path, to: &Path) -> io::Result<()> {
        fs::rename(from, to)
    }

    /// Give `from` also the name `to`, failing with `AlreadyExists` when
    /// that name exists: the no-replace step of [`Existing::Refuse`] (a hard
    /// link is made or refused in one step, so two writers cannot both win).
    fn link_new(&self, from: &Path, to: &Path) -> io::Result<()> {
        fs::hard_link(from, to)
    }

    /// Flush a folder's entries (the renames in it) to the disk. On systems
    /// other than Unix the rename is all there is.
    fn sync_dir(&self, dir: &Path) -> io::Result<()> {
        #[cfg(unix)]
        return File::open(dir).and_then(|d| d.sync_all());
        #[cfg(not(unix))]
        {
            let _ = dir;
            Ok(())
        }
    }

    /// Remove a file (used to clean up after a failed write).
    fn remove_file(&self, path: &Path) -> io::Result<()> {
        fs::remove_file(path)
    }
}

/// The operating system's file system: what fieldcage uses outside tests.
#[derive(Debug, Clone, Copy, Default)]
pub struct OsDisk;

impl Disk for OsDisk {}

/// What [`write_atomically`] does when the final name exists already.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Existing {
    /// Replace it (a new export over an old one, a damaged copy).
    Replace,
    /// Refuse: the file is never overwritten (a change-set).
    Refuse,
}

/// Write `bytes` to `dir/name` through a temporary name: created, written,
/// flushed, renamed. The folder is not flushed (call [`sync_dir`] once after a
/// batch of files). On failure the temporary file is removed where possible
/// and the error names the final file and the step that failed; the final
/// name is untouched.
pub fn write_atomically(
    disk: &dyn Disk,
    dir: &Path,
    name: &str,
    bytes: &[u8],
    existing: Existing,
) -> Result<PathBuf> {
    let path = dir.join(name);
    if existing == Existing::Refuse && path.exists() {
        return Err(Error::State(format!(
            "{}: already exists and is never overwritten",
            path.display()
        )));
    }
    // A unique temporary name: two writers (two processes, a retry after a
    // crash) never share one.
    let temp = dir.join(format!(
        ".{name}.{}-{}.tmp",
        std::process::id(),
        uuid::Uuid::now_v7().simple()
    ));
    let step = |what: &'static str| {
        let path = path.clone();
        move |e: io::Error| failed(&path, what, e)
    };
    let result = disk
        .create(&temp)
        .map_err(step("cannot create its temporary file"))
        .and_then(|mut file| {
            disk.write(&mut file, bytes)
                .map_err(step("cannot write its temporary file"))?;
            disk.sync_file(&file)
                .map_err(step("cannot flush its temporary file to disk"))
        })
        .and_then(|()| match existing {
            Existing::Replace => disk
                .rename(&temp, &path)
                .map_err(step("cannot rename its temporary file into place")),
            Existing::Refuse => place_new(disk, &temp, &path),
        });
    if result.is_err() {
        // Best effort: the temporary name is skipped by every reader; the
        // error that matters is the one returned.
        let _ = disk.remove_file(&temp);
    }
    result.map(|()| path)
}

/// Put the written temporary file at `path` only if no file has that name:
/// a hard link (made or refused in one step), then the temporary name goes.
/// Where the file system has no hard links (a FAT-formatted stick), the
/// name is checked and the file renamed: two writers racing there are kept
/// apart by the sync lock of their database.
fn place_new(disk: &dyn Disk, temp: &Path, path: &Path) -> Result<()> {
    match disk.link_new(temp, path) {
        Ok(()) => {
            // The file stands under its name; the extra name is only clutter
            // (readers skip names starting with `.`).
            let _ = disk.remove_file(temp);
            Ok(())
        }
        Err(e) if e.kind() == io::ErrorKind::AlreadyExists => Err(Error::State(format!(
            "{}: already exists and is never overwritten",
            path.display()
        ))),
        Err(e) if no_hard_links(&e) => {
            if path.exists() {
                return Err(Error::State(format!(
                    "{}: already exists and is never overwritten",
                    path.display()
                )));
            }
            disk.rename(temp, path)
                .map_err(|e| failed(path, "cannot rename its temporary file into place", e))
        }
        Err(e) => Err(failed(path, "cannot link its temporary file into place", e)),
    }
}

/// The file system has no hard links (FAT and exFAT answer EPERM, others
/// "not supported").
fn no_hard_links(e: &io::Error) -> bool {
    matches!(
        e.kind(),
        io::ErrorKind::Unsupported | io::ErrorKind::PermissionDenied
    ) || matches!(e.raw_os_error(), Some(1 | 38 | 95))
}

/// Flush a folder's entries to the disk; the error names the folder.
pub fn sync_dir(disk: &dyn Disk, dir: &Path) -> Result<()> {
    disk.sync_dir(dir)
        .map_err(|e| failed(dir, "cannot flush the folder to disk", e))
}

fn failed(path: &Path, what: &str, e: io::Error) -> Error {
    Error::io(path, io::Error::new(e.kind(), format!("{what}: {e}")))
}
