//! Reading feeder folders and study.toml from disk.

use std::path::{Path, PathBuf};

use crate::diagnostic::ModelErrors;
use crate::feeder::Feeder;
use crate::study::Study;

/// The feeder folders under `path`: `path` itself when it holds a feeder.toml, otherwise every
/// sub-folder holding one, sorted by name.
pub fn discover_feeders(path: &Path) -> Result<Vec<PathBuf>, ModelErrors> {
    let _ = path;
    todo!("reader")
}

/// Reads one feeder folder (with the shared conductors.csv of its parent folder and its own
/// overrides) and validates it.
pub fn load_feeder(folder: &Path) -> Result<Feeder, ModelErrors> {
    let _ = folder;
    todo!("reader")
}

/// Reads every feeder under `path` (see [`discover_feeders`]); errors of all feeders are reported
/// together.
pub fn load_feeders(path: &Path) -> Result<Vec<Feeder>, ModelErrors> {
    let _ = path;
    todo!("reader")
}

pub(crate) fn read_study(path: &Path) -> Result<Study, ModelErrors> {
    let _ = path;
    todo!("reader")
}
