//! Test databases: temporary folders that clean up after themselves, and the
//! demo season (or a variant of its definition) built by the same code as
//! `fieldcage demo` and `fieldcage init`.

use std::path::PathBuf;

use fieldcage_core::Store;
use fieldcage_core::setup::{self, Definition};

/// A temporary folder that lives as long as the value.
#[derive(Debug)]
pub struct Temp {
    pub dir: tempfile::TempDir,
}

impl Temp {
    #[allow(clippy::new_without_default)]
    pub fn new() -> Temp {
        Temp {
            dir: tempfile::tempdir().expect("temp dir"),
        }
    }

    pub fn path(&self, name: &str) -> PathBuf {
        self.dir.path().join(name)
    }

    /// A new empty store in this folder.
    pub fn store(&self, name: &str) -> Store {
        Store::open(self.path(name)).expect("open store")
    }
}

/// A temporary folder on a RAM disk when the system has one (`/dev/shm`):
/// sync tests flush files and databases thousands of times, which costs
/// nothing there.
pub fn fast_temp() -> Temp {
    let shm = std::path::Path::new("/dev/shm");
    let dir = if shm.is_dir() {
        tempfile::tempdir_in(shm).expect("temp dir in /dev/shm")
    } else {
        tempfile::tempdir().expect("temp dir")
    };
    Temp { dir }
}

/// The demo season, built by the same code as `fieldcage demo`.
pub fn demo_store(tmp: &Temp) -> Store {
    let mut store = tmp.store("demo.db");
    fieldcage_core::demo::build(&mut store).expect("demo builds");
    store
}

/// The demo definition with parts of its text replaced.
pub fn demo_definition_with(
    replacements: &[(&str, &str)],
) -> Result<Definition, fieldcage_core::Error> {
    let mut text = fieldcage_core::demo::DEFINITION.to_owned();
    for (from, to) in replacements {
        assert!(text.contains(from), "the demo definition has no {from:?}");
        text = text.replacen(from, to, 1);
    }
    setup::definition::parse(std::path::Path::new("test.toml"), &text)
}

/// A store initialised from the demo definition with some text replaced.
pub fn store_with(tmp: &Temp, replacements: &[(&str, &str)], seed: u64) -> Store {
    let def = demo_definition_with(replacements).expect("definition is valid");
    let mut store = tmp.store("variant.db");
    setup::init(&mut store, &def, seed).expect("init");
    store
}
