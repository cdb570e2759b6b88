//! `sightline compare` (in progress).
use std::path::PathBuf;

use crate::cli::PlantArgs;
use crate::error::{Error, Result};
use crate::plant::AnyPlant;

/// Arguments of `compare`.
#[derive(Debug, Clone)]
pub struct CompareArgs {
    /// Plant and overrides.
    pub plant: PlantArgs,
    /// Dataset.
    pub data: PathBuf,
    /// Filter specs.
    pub filters: Vec<String>,
    /// Seed.
    pub seed: u64,
    /// Run smoothers.
    pub smooth: bool,
    /// Treat non-finite cells as missing.
    pub nonfinite_as_missing: bool,
    /// Output directory.
    pub output: PathBuf,
}

/// Runs `compare`.
pub fn run(_plants: &[Box<dyn AnyPlant>], _args: &CompareArgs) -> Result<()> {
    Err(Error::Run("compare is not built yet".into()))
}
