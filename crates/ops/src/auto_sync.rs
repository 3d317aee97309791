//! Automatic sync, "back online" (docs/methods.md §10.1): every few seconds look
//! whether the saved sync target is reachable and writable, and sync on its
//! own when it is and something is new — changes made here not yet written,
//! or other devices' files that changed since the last sync. A look with
//! nothing new takes no store lock beyond two short reads, so saves from the
//! UI never wait for it; a sync holds the lock for the run (milliseconds
//! when little is new).
//!
//! The local server (`fieldcage serve --sync-every SECS`) and the tablet app
//! both start it with [`AutoSync::start`] on their [`Service`].

use std::fs;
use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::sync::mpsc::{self, RecvTimeoutError};
use std::thread::JoinHandle;
use std::time::{Duration, Instant, SystemTime};

use chrono::Utc;
use serde::Serialize;
use uuid::Uuid;

use super::Service;
use fieldcage_core::sync::{self, TargetStatus};
use fieldcage_core::{Error, Result};

/// How often automatic sync looks at the target unless told otherwise.
pub const DEFAULT_EVERY: Duration = Duration::from_secs(5);

/// How long the running poller's look at the target stands in for a new
/// probe in `sync_status` (at most twice its interval, and never longer than
/// this): the status the UI asks for after every save and every few seconds
/// then costs no file written and removed in the target.
pub const LOOK_STANDS_FOR: Duration = Duration::from_secs(15);

/// The interval of `--sync-every SECS`: `None` for 0 (automatic sync off).
pub fn interval(secs: f64) -> Result<Option<Duration>> {
    let every = Duration::try_from_secs_f64(secs).map_err(|_| {
        Error::invalid(
            "option",
            "sync-every",
            secs,
            "must be a number of seconds, 0 or more",
        )
    })?;
    Ok((!every.is_zero()).then_some(every))
}

/// What automatic sync last did, as `sync_status` shows it.
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct AutoSyncState {
    /// How often it looks, seconds; none when it is not running.
    pub every_secs: Option<f64>,
    /// When it last looked (RFC 3339, UTC).
    pub last_check_at: Option<String>,
    /// When it last synced on its own.
    pub last_run_at: Option<String>,
    /// Why the last look did not sync (target unavailable, a failed run);
    /// none when it synced or nothing was new.
    pub last_problem: Option<String>,
    /// The last look's probe of the target (not shown: `sync_status` shows
    /// the target's state in its own fields).
    #[serde(skip)]
    pub(crate) probe: Option<Probe>,
}

/// One probe of a target by the poller.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct Probe {
    at: Instant,
    target: PathBuf,
    status: TargetStatus,
}

/// What one look did.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Look {
    /// No target is set.
    NoTarget,
    /// The target cannot be used now; the reason says why.
    Unavailable(String),
    /// Nothing pending here and no other device's file changed.
    NothingNew,
    /// Synced.
    Synced,
    /// The sync run failed; it is tried again on the next look.
    Failed(String),
}

/// Other devices' change-set files in a target: name, size, modification time.
type Listing = Vec<(String, u64, Option<SystemTime>)>;

/// What automatic sync remembers between looks: the target of the last
/// successful sync, the other devices' files as they were before it (a file
/// that arrived during the run is new at the next look) and this device's
/// files as they were after it (a stick swapped for an empty one gets them
/// written again).
#[derive(Debug, Default)]
pub struct Watch {
    seen: Option<Seen>,
}

#[derive(Debug, PartialEq)]
struct Seen {
    target: PathBuf,
    others: Listing,
    own: Listing,
}

impl Watch {
    /// Look once, sync if the target is ready and something is new, and
    /// record what happened on the service.
    pub fn look(&mut self, service: &Service) -> Look {
        let look = self.look_inner(service);
        let now = Utc::now().to_rfc3339_opts(chrono::SecondsFormat::Secs, true);
        service.update_auto_sync(|s| {
            s.last_check_at = Some(now.clone());
            s.last_problem = match &look {
                Look::Unavailable(reason) | Look::Failed(reason) => Some(reason.clone()),
                Look::NoTarget | Look::NothingNew | Look::Synced => None,
            };
            if look == Look::Synced {
                s.last_run_at = Some(now.clone());
            }
        });
        look
    }

    fn look_inner(&mut self, service: &Service) -> Look {
        let (target, me, pending) = match service.sync_plan() {
            Ok(Some(plan)) => plan,
            Ok(None) => {
                self.seen = None;
                return Look::NoTarget;
            }
            Err(e) => return Look::Failed(e.to_string()),
        };
        let status = sync::target_is_reachable(&target);
        service.update_auto_sync(|s| {
            s.probe = Some(Probe {
                at: Instant::now(),
                target: target.clone(),
                status: status.clone(),
            })
        });
        if let TargetStatus::Unavailable(reason) = status {
            return Look::Unavailable(format!("sync target {} {reason}", target.display()));
        }
        let now = match listing(&target, &me) {
            Ok((others, own)) => Seen {
                target,
                others,
                own,
            },
            Err(e) => return Look::Failed(e.to_string()),
        };
        if pending == 0 && self.seen.as_ref() == Some(&now) {
            return Look::NothingNew;
        }
        self.seen = None;
        if let Err(e) = service.sync_with_target(&now.target) {
            return Look::Failed(e.to_string());
        }
        match listing(&now.target, &me) {
            Ok((_, own)) => {
                self.seen = Some(Seen { own, ..now });
                Look::Synced
            }
            Err(e) => Look::Failed(e.to_string()),
        }
    }
}

/// The files in `target`: every other device's, and this device's own.
fn listing(target: &Path, me: &str) -> Result<(Listing, Listing)> {
    let (mut others, mut own) = (Vec::new(), Vec::new());
    for entry in fs::read_dir(target).map_err(|e| Error::io(target, e))? {
        let entry = entry.map_err(|e| Error::io(target, e))?;
        let name = entry.file_name().to_string_lossy().into_owned();
        if Uuid::parse_str(&name).is_err() || !entry.path().is_dir() {
            continue;
        }
        let into = if name == me { &mut own } else { &mut others };
        let folder = entry.path();
        for file in fs::read_dir(&folder).map_err(|e| Error::io(&folder, e))? {
            let file = file.map_err(|e| Error::io(&folder, e))?;
            let Ok(meta) = file.metadata() else { continue };
            if meta.is_file() {
                into.push((
                    format!("{name}/{}", file.file_name().to_string_lossy()),
                    meta.len(),
                    meta.modified().ok(),
                ));
            }
        }
    }
    others.sort();
    own.sort();
    Ok((others, own))
}

/// Automatic sync running on its own thread; stops when dropped.
#[derive(Debug)]
pub struct AutoSync {
    stop: Option<mpsc::Sender<()>>,
    thread: Option<JoinHandle<()>>,
    service: Arc<Service>,
}

impl AutoSync {
    /// Look at once, then every `every` (at least 0.1 s), until stopped.
    pub fn start(service: Arc<Service>, every: Duration) -> Result<AutoSync> {
        let every = every.max(Duration::from_millis(100));
        let (stop, stopped) = mpsc::channel::<()>();
        service.update_auto_sync(|s| s.every_secs = Some(every.as_secs_f64()));
        let watched = Arc::clone(&service);
        let thread = std::thread::Builder::new()
            .name("fieldcage-auto-sync".into())
            .spawn(move || {
                let mut watch = Watch::default();
                loop {
                    watch.look(&watched);
                    match stopped.recv_timeout(every) {
                        Err(RecvTimeoutError::Timeout) => {}
                        Ok(()) | Err(RecvTimeoutError::Disconnected) => break,
                    }
                }
            })
            .map_err(|e| Error::Invariant(format!("cannot start automatic sync: {e}")))?;
        Ok(AutoSync {
            stop: Some(stop),
            thread: Some(thread),
            service,
        })
    }

    /// Stop after the current look (a sync in progress finishes).
    pub fn stop(self) {
        drop(self);
    }
}

impl Drop for AutoSync {
    fn drop(&mut self) {
        if let Some(stop) = self.stop.take() {
            let _ = stop.send(());
        }
        if let Some(thread) = self.thread.take() {
            let _ = thread.join();
        }
        self.service.update_auto_sync(|s| {
            s.every_secs = None;
            s.probe = None;
        });
    }
}

impl Service {
    /// What automatic sync last did.
    pub fn auto_sync_state(&self) -> AutoSyncState {
        self.auto_sync
            .lock()
            .unwrap_or_else(|p| p.into_inner())
            .clone()
    }

    /// The running poller's probe of `target`, when it is recent enough to
    /// stand for a new one (see [`LOOK_STANDS_FOR`]).
    pub(crate) fn recent_probe(&self, target: &Path) -> Option<TargetStatus> {
        let state = self.auto_sync_state();
        let every = Duration::from_secs_f64(state.every_secs?);
        let probe = state.probe?;
        let fresh = (every * 2).min(LOOK_STANDS_FOR);
        (probe.target == target && probe.at.elapsed() <= fresh).then_some(probe.status)
    }

    fn update_auto_sync(&self, f: impl FnOnce(&mut AutoSyncState)) {
        f(&mut self.auto_sync.lock().unwrap_or_else(|p| p.into_inner()));
    }
}
