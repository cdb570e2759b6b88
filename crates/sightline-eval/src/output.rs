//! Atomic outputs: everything is written to a temporary path beside the target and renamed into
//! place only when complete, so a failed or interrupted run never leaves a half-written file.

use std::fs;
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};

use crate::error::{Error, Result};

fn parent_of(path: &Path) -> PathBuf {
    match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    }
}

fn write_err(path: &Path) -> impl Fn(std::io::Error) -> Error + '_ {
    move |source| Error::Write {
        path: path.to_path_buf(),
        source,
    }
}

/// Writes one file atomically: `fill` writes into a buffered temporary file beside `path`, which
/// is renamed onto `path` only if `fill` succeeds.
pub fn write_file<F>(path: &Path, fill: F) -> Result<()>
where
    F: FnOnce(&mut dyn Write) -> Result<()>,
{
    if path.is_dir() {
        return Err(Error::Usage(format!(
            "-o {}: it is a directory; expected a file name",
            path.display()
        )));
    }
    let dir = parent_of(path);
    fs::create_dir_all(&dir).map_err(write_err(&dir))?;
    let tmp = tempfile::NamedTempFile::new_in(&dir).map_err(write_err(&dir))?;
    {
        let mut w = BufWriter::new(tmp.as_file());
        fill(&mut w)?;
        w.flush().map_err(write_err(path))?;
    }
    tmp.persist(path).map_err(|e| Error::Write {
        path: path.to_path_buf(),
        source: e.error,
    })?;
    Ok(())
}

/// Files whose presence marks a directory as an earlier Sightline output that a new run may
/// replace.
pub const OUTPUT_MARKERS: &[&str] = &["summary.json", "partial.json", "tuned.json"];

/// An output directory under construction: files go into a hidden temporary directory beside
/// the target; [`OutputDir::commit`] replaces the target with it in one rename. Dropped without
/// commit (error, panic or interrupt), the temporary directory is removed.
#[derive(Debug)]
pub struct OutputDir {
    target: PathBuf,
    tmp: Option<tempfile::TempDir>,
}

impl OutputDir {
    /// Starts an output directory that will become `target`. An existing `target` is replaced
    /// on commit only if it is a directory that is empty or holds an earlier Sightline output
    /// (one of [`OUTPUT_MARKERS`]): a file, or a directory of something else, is a usage error
    /// rather than something to delete.
    pub fn new(target: &Path) -> Result<Self> {
        if target.exists() {
            let refuse = |what: &str| {
                Err(Error::Usage(format!(
                    "-o {}: {what}; give a new directory (or an earlier Sightline output to \
                     replace)",
                    target.display()
                )))
            };
            if !target.is_dir() {
                return refuse("it exists and is not a directory");
            }
            let entries: Vec<String> = fs::read_dir(target)
                .map_err(write_err(target))?
                .filter_map(|e| e.ok())
                .map(|e| e.file_name().to_string_lossy().into_owned())
                .collect();
            let ours = entries.is_empty()
                || entries
                    .iter()
                    .any(|name| OUTPUT_MARKERS.contains(&name.as_str()));
            if !ours {
                return refuse(
                    "it is a directory that does not hold a Sightline output, and it would be \
                     replaced",
                );
            }
        }
        let parent = parent_of(target);
        fs::create_dir_all(&parent).map_err(write_err(&parent))?;
        let name = target
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_else(|| "out".into());
        let tmp = tempfile::Builder::new()
            .prefix(&format!(".{name}.partial-"))
            .tempdir_in(&parent)
            .map_err(write_err(&parent))?;
        Ok(OutputDir {
            target: target.to_path_buf(),
            tmp: Some(tmp),
        })
    }

    /// Path of `name` inside the directory under construction.
    pub fn path(&self, name: &str) -> PathBuf {
        match &self.tmp {
            Some(t) => t.path().join(name),
            None => self.target.join(name),
        }
    }

    /// Where the directory will end up.
    pub fn target(&self) -> &Path {
        &self.target
    }

    /// Writes one file into the directory.
    pub fn write<F>(&self, name: &str, fill: F) -> Result<()>
    where
        F: FnOnce(&mut dyn Write) -> Result<()>,
    {
        let path = self.path(name);
        let file = fs::File::create(&path).map_err(write_err(&path))?;
        let mut w = BufWriter::new(file);
        fill(&mut w)?;
        w.flush().map_err(write_err(&path))?;
        Ok(())
    }

    /// Moves the finished directory onto the target, replacing an earlier output there.
    pub fn commit(mut self) -> Result<PathBuf> {
        let Some(tmp) = self.tmp.take() else {
            return Ok(self.target.clone());
        };
        let staged = tmp.keep();
        if self.target.exists() {
            // Move the old output aside first so the target is never missing a complete result.
            let old = parent_of(&self.target).join(format!(
                ".{}.old-{}",
                self.target
                    .file_name()
                    .map(|n| n.to_string_lossy().into_owned())
                    .unwrap_or_default(),
                std::process::id()
            ));
            fs::rename(&self.target, &old).map_err(write_err(&self.target))?;
            fs::rename(&staged, &self.target).map_err(write_err(&self.target))?;
            let _ = fs::remove_dir_all(&old);
        } else {
            fs::rename(&staged, &self.target).map_err(write_err(&self.target))?;
        }
        Ok(self.target.clone())
    }
}
