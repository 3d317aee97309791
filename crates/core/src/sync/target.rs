//! The sync target this database syncs with on its own (the settings screen,
//! `fieldcage device --target`). It is a local setting of the database, kept
//! in `local_device` (migration 0004) beside the device name: never exported,
//! never logged, never sent in a change-set.
//!
//! A target must be an absolute path to a folder, or to a folder that can be
//! made in an existing one (a sub-folder of a mounted stick or share); it must
//! not hold the live database (docs/methods.md §10.2: the live database never
//! lives in a shared or synced folder).

use std::fs;
use std::path::{Path, PathBuf};

use crate::store::sync_state;
use crate::{Error, Result, Store};

fn invalid(value: &str, reason: impl Into<String>) -> Error {
    Error::invalid("device", "sync_target", value, reason)
}

/// The saved target, if one is set.
pub fn saved_target(store: &Store) -> Result<Option<PathBuf>> {
    let text: Option<String> = store.conn().query_row(
        "SELECT sync_target FROM local_device WHERE singleton = 1",
        [],
        |r| r.get(0),
    )?;
    Ok(text.map(PathBuf::from))
}

/// Check a target as typed: `Ok(None)` for an empty text (no target), the
/// path when it is absolute, is a folder (or can be made in an existing
/// folder), does not hold this database and, when it exists, takes a new
/// file. Nothing is kept (the writability probe is removed at once).
pub fn check_target(store: &Store, text: &str) -> Result<Option<PathBuf>> {
    let trimmed = text.trim();
    if trimmed.is_empty() {
        return Ok(None);
    }
    if trimmed.chars().any(char::is_control) {
        return Err(invalid(
            text,
            "must not hold line breaks or other control characters",
        ));
    }
    let path = PathBuf::from(trimmed);
    if !path.is_absolute() {
        return Err(invalid(
            text,
            "must be an absolute folder path, starting at the root of a drive (for example \
             /media/stick/fieldcage-sync)",
        ));
    }
    match fs::metadata(&path) {
        Ok(m) if m.is_dir() => {}
        Ok(_) => return Err(invalid(text, "is a file, not a folder")),
        Err(_) => {
            path.parent().filter(|p| p.is_dir()).ok_or_else(|| {
                invalid(
                    text,
                    "does not exist, and neither does the folder it would be made in; plug in \
                     the stick or mount the share first, or make the folder",
                )
            })?;
            // A folder still to be made cannot hold the database.
            return Ok(Some(path));
        }
    }
    refuse_database_inside(store, text, &path)?;
    if let super::TargetStatus::Unavailable(reason) = super::target_is_reachable(&path) {
        return Err(invalid(text, reason));
    }
    Ok(Some(path))
}

/// Refuse a target folder that is, or contains, the folder of the live
/// database: sync would write next to it, and people would copy the
/// database along with the change-sets.
fn refuse_database_inside(store: &Store, text: &str, folder: &Path) -> Result<()> {
    let Ok(folder) = folder.canonicalize() else {
        return Ok(());
    };
    let Some(db_dir) = store
        .path()
        .canonicalize()
        .ok()
        .and_then(|p| p.parent().map(Path::to_path_buf))
    else {
        return Ok(());
    };
    if db_dir.starts_with(&folder) {
        return Err(invalid(
            text,
            format!(
                "holds this device's live database ({}); the live database must never be inside \
                 the sync target — choose another folder, for example one on the stick or share",
                store.path().display()
            ),
        ));
    }
    Ok(())
}

/// Check and save the target (`""` clears it). A missing last folder is
/// made. Returns the target now in force.
pub fn save_target(store: &mut Store, text: &str) -> Result<Option<PathBuf>> {
    let target = check_target(store, text)?;
    if let Some(path) = &target
        && !path.is_dir()
    {
        fs::create_dir(path).map_err(|e| invalid(text, format!("cannot be made ({e})")))?;
    }
    let stored = match &target {
        Some(path) => Some(
            path.to_str()
                .ok_or_else(|| invalid(text, "must be valid text"))?
                .to_owned(),
        ),
        None => None,
    };
    sync_state::set_sync_target(store.conn(), stored.as_deref())?;
    Ok(target)
}
