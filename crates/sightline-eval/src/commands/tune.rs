//! `sightline tune` (in progress).
use std::path::Path;

use crate::cli::PlantArgs;
use crate::error::{Error, Result};
use crate::plant::AnyPlant;

/// Runs `tune`.
pub fn run(
    _plants: &[Box<dyn AnyPlant>],
    _plant: &PlantArgs,
    _data: &Path,
    _filter: &str,
    _params: &[String],
    _output: &Path,
) -> Result<()> {
    Err(Error::Run("tune is not built yet".into()))
}
