//! A power cut for SQLite, for tests only: a VFS named `powercut` that wraps
//! SQLite's default `unix` VFS and keeps, for every file under a watched
//! folder, the image that fsync has made durable.
//!
//! - Writes and truncations reach the real file at once, so the connection
//!   reads what it wrote, but they stay *unsynced* until `xSync` of that file
//!   moves them into its durable image. `xSync` does not call the real fsync:
//!   what is durable is what this layer says.
//! - A file that did not exist when first opened exists durably only once it
//!   has been synced (the `unix` VFS syncs the directory on a journal's or
//!   WAL's first sync); a deletion is durable only when SQLite asked for a
//!   directory sync, otherwise the file may come back.
//! - [`Power::cut_after`] arms the cut: the n-th write, truncate, sync or
//!   delete from then on fails, and so does every read, write, sync and open
//!   after it — the machine is off, so nothing more can be acknowledged.
//! - [`Power::restore`], once every connection is closed, rebuilds each file
//!   from its durable image plus a seeded random subset of its unsynced
//!   operations: a disk may have written any of them, in any order. This is
//!   the crash model of SQLite's own crash tests ("unsynced writes may be
//!   lost, in any combination"; from memory, SQLite's test VFS `test6.c`).
//!   Torn writes inside one `xWrite` are not modelled.
//!
//! Files that exist when first opened through the VFS are taken as durable:
//! create the database and close it cleanly before watching its folder.

use std::collections::HashMap;
use std::ffi::{CStr, OsStr, c_char, c_int, c_void};
use std::os::unix::ffi::OsStrExt;
use std::path::{Path, PathBuf};
use std::ptr;
use std::sync::{Arc, Mutex, MutexGuard, OnceLock};

use libsqlite3_sys as ffi;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// The name under which the VFS is registered (`?vfs=powercut` in a URI).
pub const VFS_NAME: &str = "powercut";

/// An operation on a file that no sync has made durable yet.
#[derive(Debug, Clone)]
enum Unsynced {
    Write { offset: usize, data: Vec<u8> },
    Truncate(usize),
    Delete,
}

/// One file: what a power cut would certainly leave, and what it might.
#[derive(Debug, Default)]
struct Image {
    /// `None`: the file would not exist.
    durable: Option<Vec<u8>>,
    unsynced: Vec<Unsynced>,
}

fn apply(content: &mut Option<Vec<u8>>, op: &Unsynced) {
    match op {
        Unsynced::Write { offset, data } => {
            let bytes = content.get_or_insert_with(Vec::new);
            let end = offset + data.len();
            if bytes.len() < end {
                bytes.resize(end, 0);
            }
            bytes[*offset..end].copy_from_slice(data);
        }
        Unsynced::Truncate(size) => content.get_or_insert_with(Vec::new).resize(*size, 0),
        Unsynced::Delete => *content = None,
    }
}

impl Image {
    fn sync(&mut self) {
        for op in std::mem::take(&mut self.unsynced) {
            apply(&mut self.durable, &op);
        }
        self.durable.get_or_insert_with(Vec::new);
    }
}

/// The files of one watched folder and the state of its power.
#[derive(Debug, Default)]
struct Domain {
    files: HashMap<PathBuf, Image>,
    /// Writes, truncations, syncs and deletes seen so far.
    ops: u64,
    /// The operation count at which the power goes off.
    cut_at: Option<u64>,
    off: bool,
}

impl Domain {
    /// Count one write, truncate, sync or delete; false when the power is
    /// off or goes off with this operation (which then does not happen).
    fn powered(&mut self) -> bool {
        if self.off {
            return false;
        }
        self.ops += 1;
        if self.cut_at.is_some_and(|n| self.ops >= n) {
            self.off = true;
        }
        !self.off
    }

    fn image(&mut self, path: &Path) -> &mut Image {
        self.files
            .entry(path.to_path_buf())
            .or_insert_with(|| Image {
                durable: std::fs::read(path).ok(),
                unsynced: Vec::new(),
            })
    }
}

type Shared = Arc<Mutex<Domain>>;

static WATCHED: Mutex<Vec<(PathBuf, Shared)>> = Mutex::new(Vec::new());

fn lock<T>(m: &Mutex<T>) -> MutexGuard<'_, T> {
    // A panicking test must not poison the other tests' domains.
    m.lock().unwrap_or_else(|p| p.into_inner())
}

fn domain_of(path: &Path) -> Option<Shared> {
    lock(&WATCHED)
        .iter()
        .find(|(dir, _)| path.starts_with(dir))
        .map(|(_, d)| Arc::clone(d))
}

/// What [`Power::restore`] did.
#[derive(Debug, Default, Clone, Copy, PartialEq, Eq)]
pub struct Restored {
    /// Files rebuilt (or removed, when they would not exist).
    pub files: usize,
    /// Unsynced operations that the disk happened to keep.
    pub kept: usize,
    /// Unsynced operations lost.
    pub lost: usize,
}

/// The power supply of one folder: every file under it that is opened
/// through the `powercut` VFS is tracked until the value is dropped.
#[derive(Debug)]
pub struct Power {
    dir: PathBuf,
    domain: Shared,
}

impl Power {
    /// Register the VFS (once per process) and watch `dir`.
    pub fn watch(dir: &Path) -> Result<Power, String> {
        register()?;
        let dir = dir
            .canonicalize()
            .map_err(|e| format!("{}: {e}", dir.display()))?;
        let domain = Shared::default();
        lock(&WATCHED).push((dir.clone(), Arc::clone(&domain)));
        Ok(Power { dir, domain })
    }

    /// A URI that opens `file` (a name in the watched folder) through the
    /// VFS. The folder's path must not hold `?`, `#` or `%`.
    pub fn uri(&self, file: &str) -> String {
        format!("file:{}?vfs={VFS_NAME}", self.dir.join(file).display())
    }

    /// The watched folder (canonical).
    pub fn dir(&self) -> &Path {
        &self.dir
    }

    /// Writes, truncations, syncs and deletes seen so far.
    pub fn ops(&self) -> u64 {
        lock(&self.domain).ops
    }

    /// Cut the power at the `n`-th (n ≥ 1) write, truncate, sync or delete
    /// from now: that operation and every one after it fail.
    pub fn cut_after(&self, n: u64) {
        let mut d = lock(&self.domain);
        d.cut_at = Some(d.ops + n.max(1));
    }

    /// Whether the power has gone off.
    pub fn is_off(&self) -> bool {
        lock(&self.domain).off
    }

    /// After the cut, with every connection closed: rebuild each tracked
    /// file from its durable image and the unsynced operations that a seeded
    /// draw keeps (each with probability `keep`, in order), remove the
    /// shared-memory index (`-shm`, which does not survive a reboot), and
    /// turn the power back on.
    pub fn restore(&self, seed: u64, keep: f64) -> std::io::Result<Restored> {
        let mut d = lock(&self.domain);
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let keep = keep.clamp(0.0, 1.0);
        let mut out = Restored::default();
        let mut paths: Vec<PathBuf> = d.files.keys().cloned().collect();
        paths.sort();
        for path in paths {
            let Some(image) = d.files.get_mut(&path) else {
                continue;
            };
            let mut content = image.durable.clone();
            for op in std::mem::take(&mut image.unsynced) {
                if rng.random_bool(keep) {
                    apply(&mut content, &op);
                    out.kept += 1;
                } else {
                    out.lost += 1;
                }
            }
            match &content {
                Some(bytes) => std::fs::write(&path, bytes)?,
                None => remove_if_there(&path)?,
            }
            image.durable = content;
            out.files += 1;
            let mut shm = path.into_os_string();
            shm.push("-shm");
            remove_if_there(Path::new(&shm))?;
        }
        d.off = false;
        d.cut_at = None;
        Ok(out)
    }
}

impl Drop for Power {
    fn drop(&mut self) {
        lock(&WATCHED).retain(|(_, d)| !Arc::ptr_eq(d, &self.domain));
    }
}

fn remove_if_there(path: &Path) -> std::io::Result<()> {
    match std::fs::remove_file(path) {
        Err(e) if e.kind() != std::io::ErrorKind::NotFound => Err(e),
        _ => Ok(()),
    }
}

/// The `unix` VFS that ours wraps.
#[derive(Debug, Clone, Copy)]
struct RealVfs(*mut ffi::sqlite3_vfs);

// SAFETY: the pointer is to SQLite's static `unix` VFS, which lives for the
// whole process and is only read.
unsafe impl Send for RealVfs {}
// SAFETY: as above.
unsafe impl Sync for RealVfs {}

static REAL: OnceLock<Result<RealVfs, String>> = OnceLock::new();

fn register() -> Result<RealVfs, String> {
    REAL.get_or_init(|| {
        // SAFETY: sqlite3_vfs_find initialises SQLite and returns a pointer to
        // a registered VFS or null; we copy the struct, point our copy at our
        // own open and delete, leak it (a VFS must outlive every connection)
        // and register it once, not as the default.
        unsafe {
            let unix = ffi::sqlite3_vfs_find(c"unix".as_ptr());
            if unix.is_null() {
                return Err("SQLite has no `unix` VFS on this platform".to_owned());
            }
            let mut ours: ffi::sqlite3_vfs = *unix;
            ours.szOsFile = (HEADER + (*unix).szOsFile as usize) as c_int;
            ours.pNext = ptr::null_mut();
            ours.zName = c"powercut".as_ptr();
            ours.xOpen = Some(x_open);
            ours.xDelete = Some(x_delete);
            let ours: &'static mut ffi::sqlite3_vfs = Box::leak(Box::new(ours));
            let rc = ffi::sqlite3_vfs_register(ours, 0);
            if rc != ffi::SQLITE_OK {
                return Err(format!("sqlite3_vfs_register failed with code {rc}"));
            }
            Ok(RealVfs(unix))
        }
    })
    .clone()
}

fn real_vfs() -> *mut ffi::sqlite3_vfs {
    match REAL.get() {
        Some(Ok(RealVfs(p))) => *p,
        // Our callbacks run only after a successful registration.
        _ => ptr::null_mut(),
    }
}

/// Our file: SQLite's `sqlite3_file` header, then our fields; the `unix`
/// VFS's own file follows at offset [`HEADER`].
#[repr(C)]
struct CutFile {
    base: ffi::sqlite3_file,
    real: *mut ffi::sqlite3_file,
    /// Set for files under a watched folder.
    tracked: Option<(PathBuf, Shared)>,
}

const HEADER: usize = std::mem::size_of::<CutFile>().next_multiple_of(8);

/// # Safety
/// `name` is null or a NUL-terminated string.
unsafe fn path_of(name: *const c_char) -> Option<PathBuf> {
    if name.is_null() {
        return None;
    }
    // SAFETY: non-null and NUL-terminated by the caller's contract.
    let bytes = unsafe { CStr::from_ptr(name) }.to_bytes();
    Some(PathBuf::from(OsStr::from_bytes(bytes)))
}

unsafe extern "C" fn x_open(
    _vfs: *mut ffi::sqlite3_vfs,
    name: *const c_char,
    file: *mut ffi::sqlite3_file,
    flags: c_int,
    out_flags: *mut c_int,
) -> c_int {
    let real = real_vfs();
    // SAFETY: SQLite passes a file buffer of our szOsFile bytes, so the real
    // file fits at HEADER; `name` is null or NUL-terminated.
    unsafe {
        let real_file = file.cast::<u8>().add(HEADER).cast::<ffi::sqlite3_file>();
        let tracked = path_of(name).and_then(|p| domain_of(&p).map(|d| (p, d)));
        if let Some((path, domain)) = &tracked {
            let mut d = lock(domain);
            if d.off {
                (*file).pMethods = ptr::null();
                return ffi::SQLITE_CANTOPEN;
            }
            // Seen before it is created: a new file is not durable yet.
            d.image(path);
        }
        let Some(open) = (*real).xOpen else {
            (*file).pMethods = ptr::null();
            return ffi::SQLITE_CANTOPEN;
        };
        let rc = open(real, name, real_file, flags, out_flags);
        if rc != ffi::SQLITE_OK {
            (*file).pMethods = ptr::null();
            return rc;
        }
        ptr::write(
            file.cast::<CutFile>(),
            CutFile {
                base: ffi::sqlite3_file { pMethods: &METHODS },
                real: real_file,
                tracked,
            },
        );
        ffi::SQLITE_OK
    }
}

unsafe extern "C" fn x_delete(
    _vfs: *mut ffi::sqlite3_vfs,
    name: *const c_char,
    dir_sync: c_int,
) -> c_int {
    let real = real_vfs();
    // SAFETY: `name` is a NUL-terminated path from SQLite; `real` is the
    // registered unix VFS.
    unsafe {
        let Some(delete) = (*real).xDelete else {
            return ffi::SQLITE_IOERR_DELETE;
        };
        let Some((path, domain)) = path_of(name).and_then(|p| domain_of(&p).map(|d| (p, d))) else {
            return delete(real, name, dir_sync);
        };
        let mut d = lock(&domain);
        if !d.powered() {
            return ffi::SQLITE_IOERR_DELETE;
        }
        d.image(&path);
        let rc = delete(real, name, dir_sync);
        if rc == ffi::SQLITE_OK {
            let image = d.image(&path);
            if dir_sync != 0 {
                image.durable = None;
                image.unsynced.clear();
            } else {
                image.unsynced.push(Unsynced::Delete);
            }
        }
        rc
    }
}

static METHODS: ffi::sqlite3_io_methods = ffi::sqlite3_io_methods {
    // Version 2: shared memory (WAL) but no memory-mapped reads, so every
    // read goes through xRead.
    iVersion: 2,
    xClose: Some(x_close),
    xRead: Some(x_read),
    xWrite: Some(x_write),
    xTruncate: Some(x_truncate),
    xSync: Some(x_sync),
    xFileSize: Some(x_file_size),
    xLock: Some(x_lock),
    xUnlock: Some(x_unlock),
    xCheckReservedLock: Some(x_check_reserved_lock),
    xFileControl: Some(x_file_control),
    xSectorSize: Some(x_sector_size),
    xDeviceCharacteristics: Some(x_device_characteristics),
    xShmMap: Some(x_shm_map),
    xShmLock: Some(x_shm_lock),
    xShmBarrier: Some(x_shm_barrier),
    xShmUnmap: Some(x_shm_unmap),
    xFetch: None,
    xUnfetch: None,
};

/// # Safety
/// `file` was opened by [`x_open`] and not closed.
unsafe fn cut<'a>(file: *mut ffi::sqlite3_file) -> &'a CutFile {
    // SAFETY: by the caller's contract the buffer holds a CutFile.
    unsafe { &*file.cast::<CutFile>() }
}

/// # Safety
/// `file` was opened by [`x_open`] and not closed.
unsafe fn real_methods<'a>(
    file: *mut ffi::sqlite3_file,
) -> (*mut ffi::sqlite3_file, &'a ffi::sqlite3_io_methods) {
    // SAFETY: the real file was opened successfully, so its methods are set.
    unsafe {
        let real = cut(file).real;
        (real, &*(*real).pMethods)
    }
}

/// Forward a call to the real file's method, or fail when it has none.
macro_rules! forward {
    ($file:expr, $method:ident $(, $arg:expr)*) => {{
        // SAFETY: the file is open (SQLite calls methods only between open
        // and close) and the real method gets the real file.
        let (real, methods) = unsafe { real_methods($file) };
        match methods.$method {
            // SAFETY: as above.
            Some(f) => unsafe { f(real $(, $arg)*) },
            None => ffi::SQLITE_IOERR,
        }
    }};
}

unsafe extern "C" fn x_close(file: *mut ffi::sqlite3_file) -> c_int {
    let rc = forward!(file, xClose);
    // SAFETY: x_open wrote a CutFile here; SQLite calls xClose once.
    unsafe { ptr::drop_in_place(file.cast::<CutFile>()) };
    rc
}

/// The path and domain of a tracked file.
///
/// # Safety
/// `file` was opened by [`x_open`] and not closed; the reference must not
/// outlive the method call that asks for it.
unsafe fn tracked<'a>(file: *mut ffi::sqlite3_file) -> Option<&'a (PathBuf, Shared)> {
    // SAFETY: by the caller's contract.
    unsafe { cut(file) }.tracked.as_ref()
}

unsafe extern "C" fn x_read(
    file: *mut ffi::sqlite3_file,
    buf: *mut c_void,
    amount: c_int,
    offset: ffi::sqlite3_int64,
) -> c_int {
    // SAFETY: SQLite calls methods only on an open file.
    if let Some((_, domain)) = unsafe { tracked(file) }
        && lock(domain).off
    {
        return ffi::SQLITE_IOERR_READ;
    }
    forward!(file, xRead, buf, amount, offset)
}

unsafe extern "C" fn x_write(
    file: *mut ffi::sqlite3_file,
    buf: *const c_void,
    amount: c_int,
    offset: ffi::sqlite3_int64,
) -> c_int {
    // SAFETY: SQLite calls methods only on an open file.
    let Some((path, domain)) = (unsafe { tracked(file) }) else {
        return forward!(file, xWrite, buf, amount, offset);
    };
    let mut d = lock(domain);
    if !d.powered() {
        return ffi::SQLITE_IOERR_WRITE;
    }
    let rc = forward!(file, xWrite, buf, amount, offset);
    if rc == ffi::SQLITE_OK {
        // SAFETY: SQLite hands `amount` readable bytes at `buf`.
        let data = unsafe { std::slice::from_raw_parts(buf.cast::<u8>(), amount as usize) };
        d.image(path).unsynced.push(Unsynced::Write {
            offset: offset as usize,
            data: data.to_vec(),
        });
    }
    rc
}

unsafe extern "C" fn x_truncate(file: *mut ffi::sqlite3_file, size: ffi::sqlite3_int64) -> c_int {
    // SAFETY: SQLite calls methods only on an open file.
    let Some((path, domain)) = (unsafe { tracked(file) }) else {
        return forward!(file, xTruncate, size);
    };
    let mut d = lock(domain);
    if !d.powered() {
        return ffi::SQLITE_IOERR_TRUNCATE;
    }
    let rc = forward!(file, xTruncate, size);
    if rc == ffi::SQLITE_OK {
        d.image(path)
            .unsynced
            .push(Unsynced::Truncate(size as usize));
    }
    rc
}

unsafe extern "C" fn x_sync(file: *mut ffi::sqlite3_file, flags: c_int) -> c_int {
    // SAFETY: SQLite calls methods only on an open file.
    let Some((path, domain)) = (unsafe { tracked(file) }) else {
        return forward!(file, xSync, flags);
    };
    let mut d = lock(domain);
    if !d.powered() {
        return ffi::SQLITE_IOERR_FSYNC;
    }
    // No real fsync: durability is this layer's image.
    d.image(path).sync();
    ffi::SQLITE_OK
}

unsafe extern "C" fn x_file_size(
    file: *mut ffi::sqlite3_file,
    size: *mut ffi::sqlite3_int64,
) -> c_int {
    forward!(file, xFileSize, size)
}

unsafe extern "C" fn x_lock(file: *mut ffi::sqlite3_file, level: c_int) -> c_int {
    forward!(file, xLock, level)
}

unsafe extern "C" fn x_unlock(file: *mut ffi::sqlite3_file, level: c_int) -> c_int {
    forward!(file, xUnlock, level)
}

unsafe extern "C" fn x_check_reserved_lock(file: *mut ffi::sqlite3_file, out: *mut c_int) -> c_int {
    forward!(file, xCheckReservedLock, out)
}

unsafe extern "C" fn x_file_control(
    file: *mut ffi::sqlite3_file,
    op: c_int,
    arg: *mut c_void,
) -> c_int {
    forward!(file, xFileControl, op, arg)
}

unsafe extern "C" fn x_sector_size(file: *mut ffi::sqlite3_file) -> c_int {
    forward!(file, xSectorSize)
}

unsafe extern "C" fn x_device_characteristics(file: *mut ffi::sqlite3_file) -> c_int {
    // Claim no ordering or atomicity the model does not give: unsynced
    // writes may survive in any combination. Powersafe overwrite holds (a
    // lost write never damages bytes it did not cover).
    forward!(file, xDeviceCharacteristics) & ffi::SQLITE_IOCAP_POWERSAFE_OVERWRITE
}

unsafe extern "C" fn x_shm_map(
    file: *mut ffi::sqlite3_file,
    page: c_int,
    size: c_int,
    extend: c_int,
    out: *mut *mut c_void,
) -> c_int {
    forward!(file, xShmMap, page, size, extend, out)
}

unsafe extern "C" fn x_shm_lock(
    file: *mut ffi::sqlite3_file,
    offset: c_int,
    n: c_int,
    flags: c_int,
) -> c_int {
    forward!(file, xShmLock, offset, n, flags)
}

unsafe extern "C" fn x_shm_barrier(file: *mut ffi::sqlite3_file) {
    // SAFETY: as in `forward!`.
    let (real, methods) = unsafe { real_methods(file) };
    if let Some(f) = methods.xShmBarrier {
        // SAFETY: as above.
        unsafe { f(real) }
    }
}

unsafe extern "C" fn x_shm_unmap(file: *mut ffi::sqlite3_file, delete: c_int) -> c_int {
    forward!(file, xShmUnmap, delete)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn unsynced_operations_replay_in_order() {
        let mut content = None;
        apply(
            &mut content,
            &Unsynced::Write {
                offset: 2,
                data: vec![7, 8],
            },
        );
        assert_eq!(content, Some(vec![0, 0, 7, 8]));
        apply(&mut content, &Unsynced::Truncate(3));
        assert_eq!(content, Some(vec![0, 0, 7]));
        apply(&mut content, &Unsynced::Delete);
        assert_eq!(content, None);
    }

    #[test]
    fn a_sync_makes_a_new_file_exist() {
        let mut image = Image::default();
        image.sync();
        assert_eq!(image.durable, Some(Vec::new()));
    }
}
