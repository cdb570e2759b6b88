//! Resumable Monte Carlo campaigns: the runs a `montecarlo` finished before it was interrupted
//! (Ctrl-C) or failed are kept beside its output and picked up when the same command runs again.
//!
//! The checkpoint of `-o DIR` is the directory `DIR.checkpoint/` holding one `partial.json` —
//! the exact totals ([`crate::campaign::Totals`]) of the finished runs, in the same format as a
//! shard's `partial.json`. It is written atomically (temporary file + rename) when a campaign
//! stops early and every [`SAVE_INTERVAL`] while it runs, so it is never half-written and even a
//! killed process loses at most that much work. Rerunning the same command (same model,
//! `--set`, `--runs`, `--steps`, `--seed`, `-f` and shard) loads it, runs only the runs it does
//! not cover and removes it once `DIR` is complete. Because the totals are exact sums, the
//! resumed result is bit for bit the uninterrupted one (timings aside), and the checkpoint
//! itself can be handed to `sightline merge` like any shard.

use std::ops::Range;
use std::path::{Path, PathBuf};
use std::time::{Duration, Instant};

use crate::campaign::Totals;
use crate::commands::merge::read_partial;
use crate::error::{Error, Result};
use crate::output::write_file;

/// How often a running campaign refreshes its checkpoint.
pub const SAVE_INTERVAL: Duration = Duration::from_secs(30);

/// The checkpoint of one campaign output directory.
#[derive(Debug)]
pub struct Checkpoint {
    dir: PathBuf,
    last_save: Instant,
}

impl Checkpoint {
    /// The checkpoint of the output directory `output`: `output` with `.checkpoint` appended.
    ///
    /// ```
    /// use sightline_eval::checkpoint::Checkpoint;
    /// use std::path::Path;
    /// assert_eq!(Checkpoint::beside(Path::new("runs/mc/")).dir(), Path::new("runs/mc.checkpoint"));
    /// ```
    pub fn beside(output: &Path) -> Self {
        let name = output
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_else(|| "montecarlo".into());
        let dir = match output.parent() {
            Some(p) => p.join(format!("{name}.checkpoint")),
            None => PathBuf::from(format!("{name}.checkpoint")),
        };
        Checkpoint {
            dir,
            last_save: Instant::now(),
        }
    }

    /// The checkpoint directory.
    pub fn dir(&self) -> &Path {
        &self.dir
    }

    /// The finished runs of an earlier attempt at the campaign whose empty totals are `fresh`
    /// and whose runs are `range`, or `None` without a checkpoint. A checkpoint of a different
    /// campaign, plant shape, filter list or shard is a usage error naming the directory.
    pub fn load(&self, fresh: &Totals, range: &Range<u64>) -> Result<Option<Totals>> {
        if !self.dir.join("partial.json").exists() {
            return Ok(None);
        }
        let saved = read_partial(&self.dir)?;
        let stale = |what: &str| {
            Error::Usage(format!(
                "{} holds the finished runs of an interrupted campaign with a different {what}; \
                 rerun that campaign's command to resume it, or delete {} to start afresh",
                self.dir.display(),
                self.dir.display()
            ))
        };
        if saved.campaign != fresh.campaign {
            return Err(stale(
                "model, --set, --runs, --steps, --seed or -f (they must all be the same to resume)",
            ));
        }
        if saved.states != fresh.states || saved.measurements != fresh.measurements {
            return Err(stale("plant shape"));
        }
        let labels = |t: &Totals| -> Vec<(String, String, usize)> {
            t.filters
                .iter()
                .map(|f| (f.label.clone(), f.kind.clone(), f.nees_step.len()))
                .collect()
        };
        if labels(&saved) != labels(fresh) {
            return Err(stale("filter list"));
        }
        if saved
            .covered
            .iter()
            .any(|&[a, b]| a < range.start || b > range.end)
        {
            return Err(stale("--shard"));
        }
        Ok(Some(saved))
    }

    /// Writes `totals` as the checkpoint (atomically).
    pub fn save(&mut self, totals: &Totals) -> Result<()> {
        let text = serde_json::to_string(totals)
            .map_err(|e| Error::Run(format!("encoding the checkpoint: {e}")))?;
        write_file(&self.dir.join("partial.json"), |w| {
            w.write_all(text.as_bytes())
                .and_then(|()| w.write_all(b"\n"))
                .map_err(|source| Error::Write {
                    path: self.dir.join("partial.json"),
                    source,
                })
        })?;
        self.last_save = Instant::now();
        Ok(())
    }

    /// Writes `totals` as the checkpoint if [`SAVE_INTERVAL`] has passed since the last save.
    pub fn save_if_due(&mut self, totals: &Totals) -> Result<()> {
        if self.last_save.elapsed() >= SAVE_INTERVAL && totals.runs_covered() > 0 {
            self.save(totals)?;
        }
        Ok(())
    }

    /// Removes the checkpoint (once the campaign's output is complete).
    pub fn remove(&self) {
        let _ = std::fs::remove_dir_all(&self.dir);
    }
}
