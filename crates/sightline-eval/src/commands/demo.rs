//! `sightline demo` (in progress).
use std::path::Path;

use crate::error::{Error, Result};
use crate::plant::AnyPlant;

/// Runs `demo`.
pub fn run(_plants: &[Box<dyn AnyPlant>], _output: &Path) -> Result<()> {
    Err(Error::Run("demo is not built yet".into()))
}
