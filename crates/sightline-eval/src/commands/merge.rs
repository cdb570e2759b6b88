//! `sightline merge` (in progress).
use std::path::{Path, PathBuf};

use crate::error::{Error, Result};

/// Runs `merge`.
pub fn run(_dirs: &[PathBuf], _output: &Path) -> Result<()> {
    Err(Error::Run("merge is not built yet".into()))
}
