//! `sightline merge DIR... -o DIR`: adds the exact totals (`partial.json`) of Monte Carlo shards
//! into the result of the unsharded campaign — bit for bit the same summary (see
//! [`crate::campaign`]).
//!
//! Nothing is trusted: every `partial.json` is checked ([`crate::partial`]) before anything is
//! added, and a problem is a usage error (exit code 2) naming the file and the first
//! inconsistency. The output may not be one of the shards or hold one.

use std::path::{Path, PathBuf};

use crate::campaign::{self, Shard, Totals};
use crate::commands::montecarlo::{finish, write_campaign};
use crate::error::{Error, Result};
use crate::output;

/// Reads and checks one shard's `partial.json`.
pub fn read_partial(dir: &Path) -> Result<Totals> {
    crate::partial::read(&dir.join("partial.json"))
}

/// Merges the shard outputs in `dirs`; every run of the campaign must be covered exactly once.
pub fn merge_dirs(dirs: &[PathBuf]) -> Result<Totals> {
    let mut seen: Vec<(PathBuf, &Path)> = Vec::new();
    for d in dirs {
        let real = std::fs::canonicalize(d).unwrap_or_else(|_| d.clone());
        if let Some((_, first)) = seen.iter().find(|(r, _)| *r == real) {
            return Err(Error::Usage(format!(
                "merge: {} and {} are the same directory (a shard given twice)",
                first.display(),
                d.display()
            )));
        }
        seen.push((real, d));
    }
    let parts = dirs
        .iter()
        .map(|d| {
            Ok((
                d.join("partial.json").display().to_string(),
                read_partial(d)?,
            ))
        })
        .collect::<Result<Vec<_>>>()?;
    let shards: Vec<Option<Shard>> = parts.iter().map(|(_, t)| t.shard).collect();
    let merged = campaign::merge_named(parts)?;
    let missing = campaign::missing_runs(&merged);
    if !missing.is_empty() {
        let ranges = missing
            .iter()
            .map(|r| format!("{}..{}", r.start, r.end))
            .collect::<Vec<_>>()
            .join(", ");
        // With every part a shard of one --shard N, name the shards that are missing.
        let count = shards.first().copied().flatten().map(|s| s.count);
        let named = count.filter(|n| shards.iter().all(|s| s.map(|s| s.count) == Some(*n)));
        let which = match named {
            Some(n) => {
                let absent: Vec<String> = (1..=n)
                    .filter(|&k| !shards.iter().any(|s| s.map(|s| s.index) == Some(k)))
                    .filter(|&k| {
                        let r = Shard { index: k, count: n }.range(merged.campaign.runs);
                        !r.is_empty()
                    })
                    .map(|k| format!("{k}/{n}"))
                    .collect();
                if absent.is_empty() {
                    String::new()
                } else {
                    format!(" (shard {} missing)", absent.join(", "))
                }
            }
            None => String::new(),
        };
        return Err(Error::Usage(format!(
            "merge: runs {ranges} of the {}-run campaign are in none of the given directories{which}; \
             add the missing shards (an interrupted shard's finished runs are in its \
             DIR.checkpoint/: rerun its command to complete it)",
            merged.campaign.runs
        )));
    }
    Ok(merged)
}

/// Runs `merge`.
pub fn run(dirs: &[PathBuf], output: &Path) -> Result<()> {
    let inputs: Vec<(&str, &Path)> = dirs.iter().map(|d| ("shard", d.as_path())).collect();
    output::refuse_inputs_inside(output, &inputs)?;
    output::check_dir(output)?;
    let merged = merge_dirs(dirs)?;
    let (summary, dir) = write_campaign(&merged, output)?;
    finish(&summary, &dir)
}
