//! The settings screen: the device's name and its sync target.

use fieldcage_core::store::Store;
use fieldcage_core::{Result, sync};
use serde::{Deserialize, Serialize};

use crate::{NoArgs, Service};

/// Change the settings; a field left out stays as it is.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SaveSettings {
    /// This device's name, shown to the other devices (1 to 60 characters).
    #[serde(default)]
    pub device_name: Option<String>,
    /// The sync target folder: an absolute path; `""` clears it (no
    /// automatic sync).
    #[serde(default)]
    pub sync_target: Option<String>,
}

/// The device settings.
#[derive(Debug, Clone, Serialize)]
pub struct Settings {
    /// This device's id (made once per database).
    pub device_id: String,
    /// Its name.
    pub device_name: String,
    /// The sync target folder, if set.
    pub sync_target: Option<String>,
    /// How often automatic sync looks at the target, seconds (none when it
    /// is not running).
    pub sync_every_secs: Option<f64>,
}

impl Service {
    /// The device settings.
    pub fn settings(&self, _: NoArgs) -> Result<Settings> {
        let store = self.store();
        self.settings_of(&store)
    }

    fn settings_of(&self, store: &Store) -> Result<Settings> {
        Ok(Settings {
            device_id: store.device_id().to_owned(),
            device_name: store.device_name()?,
            sync_target: sync::saved_target(store)?.map(|t| t.display().to_string()),
            sync_every_secs: self.auto_sync_state().every_secs,
        })
    }

    /// Change the device name and the sync target. Both are checked before
    /// either is written; a missing target folder is made.
    pub fn save_settings(&self, req: SaveSettings) -> Result<Settings> {
        let mut store = self.store();
        let name = req
            .device_name
            .as_deref()
            .map(Store::check_device_name)
            .transpose()?;
        if let Some(target) = &req.sync_target {
            sync::check_target(&store, target)?;
        }
        if let Some(target) = &req.sync_target {
            sync::save_target(&mut store, target)?;
        }
        if let Some(name) = name {
            store.set_device_name(&name)?;
        }
        self.settings_of(&store)
    }
}
