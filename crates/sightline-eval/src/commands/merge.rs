//! `sightline merge DIR... -o DIR`: adds the exact totals (`partial.json`) of Monte Carlo shards
//! into the result of the unsharded campaign — bit for bit the same summary (see
//! [`crate::campaign`]).

use std::path::{Path, PathBuf};

use crate::campaign::{self, PARTIAL_FORMAT, Totals};
use crate::commands::montecarlo::{finish, write_campaign};
use crate::error::{Error, Result};

/// Reads one shard's `partial.json`.
pub fn read_partial(dir: &Path) -> Result<Totals> {
    let path = dir.join("partial.json");
    let text = std::fs::read_to_string(&path).map_err(|source| Error::Read {
        path: path.clone(),
        source,
    })?;
    let totals: Totals = serde_json::from_str(&text).map_err(|e| {
        Error::data(
            &path,
            e.line() as u64,
            e.column() as u64,
            format!("not a Monte Carlo partial result: {e}"),
        )
    })?;
    if totals.format != PARTIAL_FORMAT {
        return Err(Error::data(
            &path,
            1,
            1,
            format!(
                "format '{}' is not '{PARTIAL_FORMAT}' (written by another version?)",
                totals.format
            ),
        ));
    }
    Ok(totals)
}

/// Merges the shard outputs in `dirs`; every run of the campaign must be covered exactly once.
pub fn merge_dirs(dirs: &[PathBuf]) -> Result<Totals> {
    let parts = dirs
        .iter()
        .map(|d| read_partial(d))
        .collect::<Result<Vec<_>>>()?;
    let merged = campaign::merge(parts)?;
    let missing = campaign::missing_runs(&merged);
    if !missing.is_empty() {
        return Err(Error::Usage(format!(
            "merge: runs {} of the {}-run campaign are in none of the given directories; add \
             the missing shards",
            missing
                .iter()
                .map(|r| format!("{}..{}", r.start, r.end))
                .collect::<Vec<_>>()
                .join(", "),
            merged.campaign.runs
        )));
    }
    Ok(merged)
}

/// Runs `merge`.
pub fn run(dirs: &[PathBuf], output: &Path) -> Result<()> {
    let merged = merge_dirs(dirs)?;
    let (summary, dir) = write_campaign(&merged, output)?;
    finish(&summary, &dir)
}
