//! `sightline montecarlo` (in progress).
use std::path::PathBuf;

use crate::cli::PlantArgs;
use crate::error::{Error, Result};
use crate::plant::AnyPlant;

/// Arguments of `montecarlo`.
#[derive(Debug, Clone)]
pub struct CampaignArgs {
    /// Plant and overrides.
    pub plant: PlantArgs,
    /// Runs.
    pub runs: usize,
    /// Steps per run.
    pub steps: usize,
    /// Filter specs.
    pub filters: Vec<String>,
    /// Seed.
    pub seed: u64,
    /// Shard K/N.
    pub shard: Option<String>,
    /// Output directory.
    pub output: PathBuf,
}

/// Runs `montecarlo`.
pub fn run(_plants: &[Box<dyn AnyPlant>], _args: &CampaignArgs) -> Result<()> {
    Err(Error::Run("montecarlo is not built yet".into()))
}
