//! Crash-consistent Monte Carlo campaigns: the runs a `montecarlo` finished are kept beside its
//! output as they finish, so that neither a signal, nor SIGKILL, an out-of-memory kill or a
//! power cut loses more than the runs since the last save, and the same command resumes.
//!
//! The checkpoint of `-o DIR` is the directory `DIR.checkpoint/`. It is Sightline's own when it
//! holds nothing but `partial.json` — the exact totals ([`crate::campaign::Totals`]) of the
//! finished runs, sealed with a content hash like a shard's ([`crate::partial`]) — and perhaps a
//! hidden `.partial.json.partial-*` temporary that a kill in the middle of a save left (removed
//! on the next load). Anything else there is the user's: the campaign is refused (exit code 2)
//! before any work, naming it.
//!
//! `partial.json` is written atomically (temporary file, fsync, rename, fsync of the directory)
//! while the campaign runs — after a run finishes, once [`SAVE_INTERVAL`] has passed or another
//! [`SAVE_SHARE`] of the runs has finished since the last save, whichever comes first — and
//! when the campaign stops early (a signal or a failure). Rerunning the same command (same
//! model, `--set`, `--runs`, `--steps`, `--seed`, `-f`, `--every`, `--dropout` and `--shard`)
//! loads it, runs only the runs it does not cover and removes it once `DIR` is complete. A
//! command that differs is refused with the differences named and the command that resumes; a
//! larger `--runs` extends the campaign (run i uses its own seed whatever the number of runs),
//! from a checkpoint or from a finished output ([`adopt`]). Because the totals are exact sums,
//! the resumed result is bit for bit the uninterrupted one (timings aside), and the checkpoint
//! itself can be handed to `sightline merge` like any shard.

use std::ops::Range;
use std::path::{Path, PathBuf};
use std::time::{Duration, Instant};

use crate::campaign::Totals;
use crate::error::{Error, Result};
use crate::output::write_file;
use crate::partial;

/// The longest wall time between two saves of a running campaign's checkpoint.
pub const SAVE_INTERVAL: Duration = Duration::from_secs(10);

/// The largest share of the campaign's runs that may finish between two saves.
pub const SAVE_SHARE: f64 = 0.02;

/// Name of the one file of a checkpoint directory.
const FILE: &str = "partial.json";

/// The checkpoint of one campaign output directory.
#[derive(Debug)]
pub struct Checkpoint {
    dir: PathBuf,
    last_save: Instant,
    save_took: Duration,
    runs_at_last_save: u64,
    every_runs: u64,
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
            save_took: Duration::ZERO,
            runs_at_last_save: 0,
            every_runs: 1,
        }
    }

    /// The checkpoint directory.
    pub fn dir(&self) -> &Path {
        &self.dir
    }

    fn file(&self) -> PathBuf {
        self.dir.join(FILE)
    }

    /// Whether `name` is a temporary that an interrupted save of `partial.json` left.
    fn is_temporary(name: &str) -> bool {
        name.starts_with(&format!(".{FILE}.partial-"))
    }

    /// Checks that the checkpoint directory is absent or Sightline's own (see the module docs),
    /// touching nothing; otherwise a usage error naming the first foreign entry.
    pub fn check(&self) -> Result<()> {
        let refuse = |what: String| {
            Error::Usage(format!(
                "{what}; it is not a checkpoint Sightline keeps, so the campaign does not run and \
                 nothing was changed. Choose another -o, or move or remove it yourself"
            ))
        };
        let meta = match std::fs::symlink_metadata(&self.dir) {
            Ok(m) => m,
            Err(_) => return Ok(()),
        };
        if !meta.is_dir() {
            return Err(refuse(format!(
                "{} exists and is not a directory",
                self.dir.display()
            )));
        }
        let read = |source| Error::Read {
            path: self.dir.clone(),
            source,
        };
        let mut names: Vec<(String, std::fs::FileType)> = Vec::new();
        for e in std::fs::read_dir(&self.dir).map_err(read)? {
            let e = e.map_err(read)?;
            let kind = e.file_type().map_err(read)?;
            names.push((e.file_name().to_string_lossy().into_owned(), kind));
        }
        names.sort_by(|a, b| a.0.cmp(&b.0));
        for (name, kind) in names {
            let ours = (name == FILE || Self::is_temporary(&name)) && kind.is_file();
            if !ours {
                return Err(refuse(format!(
                    "{} holds {}",
                    self.dir.display(),
                    self.dir.join(&name).display()
                )));
            }
        }
        Ok(())
    }

    /// The finished runs of an earlier attempt at the campaign whose empty totals are `fresh`
    /// and whose runs are `range`, or `None` without a checkpoint (see [`adopt`] for what must
    /// agree). A damaged checkpoint, or one of another campaign, is a usage error that names
    /// the problem.
    pub fn load(&self, fresh: &Totals, range: &Range<u64>) -> Result<Option<Totals>> {
        self.check()?;
        if !self.file().exists() {
            return Ok(None);
        }
        let saved = partial::read(&self.file()).map_err(|e| {
            Error::Usage(format!(
                "the checkpoint cannot be used: {e}. Remove {} yourself to start the campaign \
                 afresh",
                self.dir.display()
            ))
        })?;
        self.remove_temporaries();
        adopt(saved, fresh, range, &self.file(), &self.dir).map(Some)
    }

    fn remove_temporaries(&self) {
        if let Ok(entries) = std::fs::read_dir(&self.dir) {
            for e in entries.flatten() {
                if Self::is_temporary(&e.file_name().to_string_lossy()) {
                    let _ = std::fs::remove_file(e.path());
                }
            }
        }
    }

    /// Sets how many finished runs make a save due: [`SAVE_SHARE`] of the `runs` the command
    /// covers (at least one), counted from the `done` already covered.
    pub fn pace(&mut self, runs: u64, done: u64) {
        self.every_runs = ((runs as f64 * SAVE_SHARE).ceil() as u64).max(1);
        self.runs_at_last_save = done;
        self.last_save = Instant::now();
    }

    /// Writes `totals` as the checkpoint (atomically, flushed to disk).
    pub fn save(&mut self, totals: &Totals) -> Result<()> {
        let started = Instant::now();
        let text = partial::to_json(totals)?;
        let file = self.file();
        write_file(&file, |w| {
            w.write_all(text.as_bytes())
                .and_then(|()| w.write_all(b"\n"))
                .map_err(|source| Error::Write {
                    path: file.clone(),
                    source,
                })
        })?;
        self.last_save = Instant::now();
        self.save_took = started.elapsed();
        self.runs_at_last_save = totals.runs_covered();
        Ok(())
    }

    /// Writes `totals` as the checkpoint if a save is due: [`SAVE_INTERVAL`] has passed or
    /// another [`SAVE_SHARE`] of the runs finished since the last save. So that saving never
    /// takes more than about a tenth of the time, a save also waits ten times as long as the
    /// last one took (which matters only when a save takes over a second: huge `--steps`).
    pub fn save_if_due(&mut self, totals: &Totals) -> Result<()> {
        let done = totals.runs_covered();
        if done <= self.runs_at_last_save {
            return Ok(());
        }
        let since = self.last_save.elapsed();
        let due = since >= SAVE_INTERVAL || done - self.runs_at_last_save >= self.every_runs;
        if due && since >= self.save_took * 10 {
            self.save(totals)?;
        }
        Ok(())
    }

    /// Removes the checkpoint once the campaign's output is complete: `partial.json`, any
    /// temporary of it, and the directory if that leaves it empty.
    pub fn remove(&self) {
        let _ = std::fs::remove_file(self.file());
        self.remove_temporaries();
        let _ = std::fs::remove_dir(&self.dir);
    }
}

/// The totals `saved` (in the file `file`) as the start of the campaign whose empty totals are
/// `fresh` and whose runs are `range`: the model, `--set`, `--steps`, `--seed`, `-f`,
/// `--every`, `--dropout`, the plant's shape and prior and the `--shard` must agree, and the
/// runs `saved` covers must lie in `range`. A larger `--runs` than `saved`'s extends it. The
/// result carries `fresh`'s settings (this command's, its `--runs` included). Otherwise a usage
/// error names what changed and gives the command that resumes `saved` (`to_remove` is what to
/// delete to start afresh).
pub fn adopt(
    mut saved: Totals,
    fresh: &Totals,
    range: &Range<u64>,
    file: &Path,
    to_remove: &Path,
) -> Result<Totals> {
    let done = saved.runs_covered();
    let mut changed = partial::differences(&saved.campaign, &fresh.campaign, false);
    let grows = saved.campaign.runs < fresh.campaign.runs;
    if saved.campaign.runs != fresh.campaign.runs && !grows {
        changed.push(format!(
            "--runs ({} there, {} here; a campaign can grow, not shrink)",
            saved.campaign.runs, fresh.campaign.runs
        ));
    }
    if changed.is_empty() {
        if saved.states != fresh.states || saved.measurements != fresh.measurements {
            changed.push("the plant's states or measurements (the model was changed)".into());
        } else if saved.pcrlb.as_ref().map(|p| &p.prior_cov)
            != fresh.pcrlb.as_ref().map(|p| &p.prior_cov)
        {
            changed.push("the plant's prior (the model was changed)".into());
        }
    }
    let shard = |t: &Totals| t.shard.map(|s| (s.index, s.count));
    if changed.is_empty() && shard(&saved) != shard(fresh) {
        let text = |t: &Totals| t.shard.map_or("none".to_string(), |s| s.to_string());
        changed.push(format!(
            "--shard ({} there, {} here)",
            text(&saved),
            text(fresh)
        ));
    }
    if changed.is_empty()
        && saved
            .covered
            .iter()
            .any(|&[a, b]| a < range.start || b > range.end)
    {
        changed.push(format!(
            "the runs of the shard (this command runs {}..{}; the file has runs outside them)",
            range.start, range.end
        ));
    }
    if !changed.is_empty() {
        return Err(Error::Usage(format!(
            "{} holds {done} finished runs of a campaign that differs from this command in {}. \
             To resume that campaign, run its command again: {} -o ...; to start this one \
             afresh, remove {} yourself (or choose another -o). Nothing was changed",
            file.display(),
            changed.join(", "),
            partial::command_line(&saved.campaign, saved.shard),
            to_remove.display()
        )));
    }
    saved.campaign.runs = fresh.campaign.runs;
    saved.settings = fresh.settings.clone();
    Ok(saved)
}
