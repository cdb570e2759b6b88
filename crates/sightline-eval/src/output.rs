//! Safe outputs: nothing a user owns is ever deleted or replaced, and a failed or interrupted
//! command leaves the disk as it found it.
//!
//! **Output directories** ([`OutputDir`]) are built in a hidden temporary directory beside the
//! target (`.NAME.partial-*`) and moved onto it in one step when complete, with a
//! [`MANIFEST`] listing every file Sightline wrote there (name, size, SHA-256). An existing
//! target is replaced only when it is empty or holds exactly the files of its manifest, unchanged;
//! anything else (a file the user added, an edited report, a directory without a manifest, a
//! read-only directory) is refused before any work with a message naming the first foreign
//! entry ([`check_dir`]). On Linux the new directory and the old one are exchanged atomically
//! (`renameat2(RENAME_EXCHANGE)`), so the target always holds a complete output, and the old
//! files are then removed one by one — only those the manifest lists. Input files that lie
//! inside an output directory are refused too ([`refuse_inputs_inside`]).
//!
//! **Single files** ([`FileTarget`], [`write_file`]): a regular file is replaced atomically
//! (written beside it, flushed to disk with fsync, renamed onto it; its permission bits kept);
//! a symbolic link is followed and its target replaced; `-`, `/dev/stdout`, a FIFO or a character
//! device are streamed into directly; a directory, block device or socket is refused.
//!
//! New files and directories get the mode the umask gives (0644 and 0755 under umask 022). Every
//! temporary is registered ([`remove_temporaries`]), so that even a second signal, which ends the
//! process at once, leaves nothing behind; missing parent directories created for an output are
//! removed again if it is not completed.

use std::collections::BTreeMap;
use std::fs::{self, File};
use std::io::{BufWriter, Read, Write};
use std::path::{Component, Path, PathBuf};
use std::sync::Mutex;
use std::sync::atomic::{AtomicU64, Ordering};
use std::time::SystemTime;

use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};

use crate::error::{Error, Result};

/// Name of the manifest every output directory carries.
pub const MANIFEST: &str = "manifest.json";

/// Identifier of the manifest format.
pub const MANIFEST_FORMAT: &str = "sightline-output-manifest/1";

/// What an output directory's [`MANIFEST`] says: every file Sightline wrote there.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Manifest {
    /// Always [`MANIFEST_FORMAT`].
    pub format: String,
    /// The program and version that wrote the directory.
    pub written_by: String,
    /// The files, sorted by name (the manifest itself not included).
    pub files: Vec<ManifestEntry>,
}

/// One file of a [`Manifest`].
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct ManifestEntry {
    /// File name (no directory part).
    pub name: String,
    /// Size in bytes.
    pub bytes: u64,
    /// SHA-256 of the content, lower-case hex.
    pub sha256: String,
}

fn write_err(path: &Path) -> impl Fn(std::io::Error) -> Error + '_ {
    move |source| Error::Write {
        path: path.to_path_buf(),
        source,
    }
}

fn parent_of(path: &Path) -> PathBuf {
    match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    }
}

fn file_name(path: &Path) -> String {
    path.file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "output".into())
}

/// SHA-256 of `bytes` as lower-case hex.
///
/// ```
/// // FIPS 180-2, appendix B.1: SHA-256("abc").
/// assert_eq!(
///     sightline_eval::output::sha256_hex(b"abc"),
///     "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
/// );
/// ```
pub fn sha256_hex(bytes: &[u8]) -> String {
    hex(&Sha256::digest(bytes))
}

fn hex(digest: &[u8]) -> String {
    digest.iter().map(|b| format!("{b:02x}")).collect()
}

/// Size and SHA-256 of a file's content.
fn hash_file(path: &Path) -> std::io::Result<(u64, String)> {
    let mut file = File::open(path)?;
    let mut hasher = Sha256::new();
    let mut buf = vec![0u8; 1 << 20];
    let mut bytes = 0u64;
    loop {
        let n = file.read(&mut buf)?;
        if n == 0 {
            break;
        }
        hasher.update(&buf[..n]);
        bytes += n as u64;
    }
    Ok((bytes, hex(&hasher.finalize())))
}

/// Flushes a file or directory to disk (so a power cut cannot leave a renamed but empty file).
fn sync_path(path: &Path) -> std::io::Result<()> {
    File::open(path)?.sync_all()
}

/// A writer that remembers the first I/O error of the writer under it, so that an error which
/// a formatter (CSV, JSON) reports in its own words can still be told as what it is: a
/// permission or I/O problem of the output, named by its path (exit code 2).
#[derive(Debug)]
pub struct Catching<W: Write> {
    inner: W,
    error: Option<std::io::Error>,
}

impl<W: Write> Catching<W> {
    /// Wraps `inner`.
    pub fn new(inner: W) -> Self {
        Catching { inner, error: None }
    }

    fn note(&mut self, e: &std::io::Error) {
        if self.error.is_none() {
            self.error = Some(std::io::Error::new(e.kind(), e.to_string()));
        }
    }

    /// `error`, or — if the writer saw an I/O error — that error as an [`Error::Write`] of
    /// `path`.
    pub fn explain(&mut self, error: Error, path: &Path) -> Error {
        match (self.error.take(), error) {
            (_, e @ Error::Interrupted(_)) => e,
            (Some(source), _) => Error::Write {
                path: path.to_path_buf(),
                source,
            },
            (None, e) => e,
        }
    }

    /// Flushes and returns the writer under it.
    pub fn finish(mut self, path: &Path) -> Result<W> {
        self.flush().map_err(write_err(path))?;
        Ok(self.inner)
    }
}

impl<W: Write> Write for Catching<W> {
    fn write(&mut self, buf: &[u8]) -> std::io::Result<usize> {
        let r = self.inner.write(buf);
        if let Err(e) = &r {
            self.note(e);
        }
        r
    }
    fn flush(&mut self) -> std::io::Result<()> {
        let r = self.inner.flush();
        if let Err(e) = &r {
            self.note(e);
        }
        r
    }
}

/// Runs `fill` on `inner` (buffered) and returns `inner`, flushed; an I/O error is reported as
/// a write error of `path` however `fill` worded it.
fn fill_into<W: Write>(
    inner: W,
    path: &Path,
    fill: impl FnOnce(&mut dyn Write) -> Result<()>,
) -> Result<W> {
    let mut w = Catching::new(BufWriter::with_capacity(1 << 16, inner));
    if let Err(e) = fill(&mut w) {
        return Err(w.explain(e, path));
    }
    w.finish(path)?
        .into_inner()
        .map_err(|e| write_err(path)(e.into_error()))
}

// ---------------------------------------------------------------------------------------------
// Temporaries: registered while they exist, so that nothing is left behind.

#[derive(Debug, Clone, PartialEq, Eq)]
enum Temporary {
    /// A staging directory of Sightline's own files (removed with everything in it).
    Tree(PathBuf),
    /// A temporary file.
    File(PathBuf),
    /// A directory created for an output (removed only if empty).
    CreatedDir(PathBuf),
}

static TEMPORARIES: Mutex<Vec<Temporary>> = Mutex::new(Vec::new());

fn register(t: Temporary) {
    if let Ok(mut list) = TEMPORARIES.lock() {
        list.push(t);
    }
}

fn forget(t: &Temporary) {
    if let Ok(mut list) = TEMPORARIES.lock() {
        if let Some(i) = list.iter().rposition(|x| x == t) {
            list.remove(i);
        }
    }
}

fn remove_temporary(t: &Temporary) {
    let _ = match t {
        Temporary::Tree(p) => fs::remove_dir_all(p),
        Temporary::File(p) => fs::remove_file(p),
        Temporary::CreatedDir(p) => fs::remove_dir(p),
    };
}

/// Removes every temporary output still under construction, newest first (called when a second
/// signal ends the process at once; see [`crate::interrupt`]).
pub fn remove_temporaries() {
    if let Ok(mut list) = TEMPORARIES.lock() {
        while let Some(t) = list.pop() {
            remove_temporary(&t);
        }
    }
}

/// A registered temporary, removed on drop unless kept.
#[derive(Debug)]
struct Guard(Option<Temporary>);

impl Guard {
    fn new(t: Temporary) -> Self {
        register(t.clone());
        Guard(Some(t))
    }
    /// The temporary became (part of) the finished output: no longer remove it.
    fn keep(&mut self) {
        if let Some(t) = self.0.take() {
            forget(&t);
        }
    }
}

impl Drop for Guard {
    fn drop(&mut self) {
        if let Some(t) = self.0.take() {
            remove_temporary(&t);
            forget(&t);
        }
    }
}

/// The directories created (outermost first) to hold an output; removed again, if still
/// empty, when the output is not completed.
#[derive(Debug, Default)]
struct CreatedDirs(Vec<Guard>);

impl CreatedDirs {
    /// Creates `dir` and its missing ancestors, remembering which were created.
    fn create(dir: &Path) -> Result<Self> {
        let mut missing = Vec::new();
        let mut at = dir.to_path_buf();
        while !at.as_os_str().is_empty() && fs::symlink_metadata(&at).is_err() {
            missing.push(at.clone());
            match at.parent() {
                Some(p) => at = p.to_path_buf(),
                None => break,
            }
        }
        let mut created = CreatedDirs::default();
        for d in missing.into_iter().rev() {
            match fs::create_dir(&d) {
                Ok(()) => created.0.push(Guard::new(Temporary::CreatedDir(d))),
                Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists => {}
                Err(e) => return Err(write_err(&d)(e)),
            }
        }
        Ok(created)
    }

    fn keep(&mut self) {
        self.0.iter_mut().for_each(Guard::keep);
    }
}

impl Drop for CreatedDirs {
    fn drop(&mut self) {
        // Innermost first, so that each is empty when its turn comes.
        while let Some(g) = self.0.pop() {
            drop(g);
        }
    }
}

/// A fresh hidden name beside `target`: `.NAME.partial-XXXXXXXX`.
fn temporary_name(target: &Path, attempt: u64) -> PathBuf {
    static COUNTER: AtomicU64 = AtomicU64::new(0);
    let nanos = SystemTime::now()
        .duration_since(SystemTime::UNIX_EPOCH)
        .map_or(0, |d| d.subsec_nanos() as u64);
    let n = COUNTER.fetch_add(1, Ordering::Relaxed);
    let tag = (u64::from(std::process::id()) << 32) ^ (n << 20) ^ nanos ^ (attempt << 40);
    parent_of(target).join(format!(".{}.partial-{tag:x}", file_name(target)))
}

/// Creates a temporary beside `target` with `make` (which must fail with `AlreadyExists` if the
/// name is taken).
fn create_beside<T>(
    target: &Path,
    mut make: impl FnMut(&Path) -> std::io::Result<T>,
) -> Result<(PathBuf, T)> {
    let mut attempt = 0;
    loop {
        let path = temporary_name(target, attempt);
        match make(&path) {
            Ok(t) => return Ok((path, t)),
            Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists && attempt < 100 => {
                attempt += 1;
            }
            Err(e) => return Err(write_err(&parent_of(target))(e)),
        }
    }
}

// ---------------------------------------------------------------------------------------------
// Checks.

/// Follows symbolic links (up to 40) from `path` to the final name, which need not exist.
fn follow_links(path: &Path) -> Result<PathBuf> {
    let mut at = path.to_path_buf();
    for _ in 0..40 {
        match fs::symlink_metadata(&at) {
            Ok(m) if m.file_type().is_symlink() => {
                let to = fs::read_link(&at).map_err(|source| Error::Read {
                    path: at.clone(),
                    source,
                })?;
                at = if to.is_absolute() {
                    to
                } else {
                    parent_of(&at).join(to)
                };
            }
            _ => return Ok(at),
        }
    }
    Err(Error::Usage(format!(
        "-o {}: too many levels of symbolic links",
        path.display()
    )))
}

/// Whether the mode bits say nobody may write (`chmod a-w`), or this process may not.
fn read_only(path: &Path, meta: &fs::Metadata) -> bool {
    if meta.permissions().readonly() {
        return true;
    }
    #[cfg(unix)]
    {
        rustix::fs::access(path, rustix::fs::Access::WRITE_OK).is_err()
    }
    #[cfg(not(unix))]
    {
        let _ = path;
        false
    }
}

fn mode_text(meta: &fs::Metadata) -> String {
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        format!(" (mode {:04o})", meta.permissions().mode() & 0o7777)
    }
    #[cfg(not(unix))]
    {
        let _ = meta;
        String::new()
    }
}

/// Refuses an output whose parent directory is read-only (or not a directory).
fn check_parent(target: &Path) -> Result<()> {
    let parent = parent_of(target);
    // The nearest existing ancestor is where the first new entry would be made.
    let mut at = parent.as_path();
    loop {
        match fs::metadata(at) {
            Ok(meta) if !meta.is_dir() => {
                return Err(Error::Usage(format!(
                    "-o {}: {} is not a directory; nothing was changed",
                    target.display(),
                    at.display()
                )));
            }
            Ok(meta) => {
                if read_only(at, &meta) {
                    return Err(Error::Usage(format!(
                        "-o {}: the directory {} is read-only{}, so the output cannot be \
                         written there; nothing was changed. Choose another -o",
                        target.display(),
                        at.display(),
                        mode_text(&meta)
                    )));
                }
                return Ok(());
            }
            Err(_) => match at.parent() {
                Some(p) if !p.as_os_str().is_empty() => at = p,
                _ => return Ok(()),
            },
        }
    }
}

/// One entry of a directory listing, enough to tell whether it changed.
#[derive(Debug, Clone, PartialEq, Eq)]
struct Seen {
    name: String,
    bytes: u64,
    modified: Option<SystemTime>,
    inode: u64,
}

fn inode(meta: &fs::Metadata) -> u64 {
    #[cfg(unix)]
    {
        std::os::unix::fs::MetadataExt::ino(meta)
    }
    #[cfg(not(unix))]
    {
        let _ = meta;
        0
    }
}

fn listing(dir: &Path) -> Result<Vec<(String, fs::Metadata)>> {
    let read = |source| Error::Read {
        path: dir.to_path_buf(),
        source,
    };
    let mut entries = Vec::new();
    for e in fs::read_dir(dir).map_err(read)? {
        let e = e.map_err(read)?;
        let meta = fs::symlink_metadata(e.path()).map_err(read)?;
        entries.push((e.file_name().to_string_lossy().into_owned(), meta));
    }
    entries.sort_by(|a, b| a.0.cmp(&b.0));
    Ok(entries)
}

fn seen(entries: &[(String, fs::Metadata)]) -> Vec<Seen> {
    entries
        .iter()
        .map(|(name, m)| Seen {
            name: name.clone(),
            bytes: m.len(),
            modified: m.modified().ok(),
            inode: inode(m),
        })
        .collect()
}

/// What an existing output target held when it was checked.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Found {
    /// Nothing there yet.
    Absent,
    /// An empty directory.
    Empty,
    /// An earlier Sightline output: exactly its manifest's files.
    Output(Manifest),
}

/// The result of [`check_dir`]: where the output goes and what is there now.
#[derive(Debug, Clone)]
pub struct Checked {
    /// The target, symbolic links followed.
    pub target: PathBuf,
    /// What the target holds.
    pub found: Found,
    seen: Vec<Seen>,
}

fn refuse(target: &Path, entry: &Path, problem: &str) -> Error {
    Error::Usage(format!(
        "-o {}: {} {problem}, so {} is not replaced; nothing was changed. Choose another -o, or \
         move or remove {} yourself",
        target.display(),
        entry.display(),
        target.display(),
        entry.display()
    ))
}

/// Checks that `target` may become an output directory, touching nothing: it is absent, an
/// empty directory, or an earlier Sightline output holding exactly its manifest's files (each
/// of the listed size and SHA-256); it is not read-only; its parent can take a new entry.
/// Anything else is a usage error (exit code 2) naming the first foreign entry.
pub fn check_dir(target: &Path) -> Result<Checked> {
    if !matches!(target.components().next_back(), Some(Component::Normal(_))) {
        return Err(Error::Usage(format!(
            "-o {}: name the output directory itself (e.g. -o out), not `.`, `..` or `/`; \
             nothing was changed",
            target.display()
        )));
    }
    let resolved = follow_links(target)?;
    let meta = match fs::metadata(&resolved) {
        Ok(m) => m,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => {
            check_parent(&resolved)?;
            return Ok(Checked {
                target: resolved,
                found: Found::Absent,
                seen: Vec::new(),
            });
        }
        Err(source) => {
            return Err(Error::Read {
                path: resolved,
                source,
            });
        }
    };
    if !meta.is_dir() {
        return Err(Error::Usage(format!(
            "-o {}: it exists and is not a directory; nothing was changed. Choose another -o \
             (an output directory)",
            target.display()
        )));
    }
    if read_only(&resolved, &meta) {
        return Err(Error::Usage(format!(
            "-o {}: the directory is read-only{}; Sightline does not replace it behind your \
             back, and nothing was changed. Choose another -o, or make it writable yourself",
            target.display(),
            mode_text(&meta)
        )));
    }
    check_parent(&resolved)?;
    let entries = listing(&resolved)?;
    let found = verify_entries(target, &resolved, &entries)?;
    Ok(Checked {
        target: resolved,
        found,
        seen: seen(&entries),
    })
}

fn verify_entries(target: &Path, dir: &Path, entries: &[(String, fs::Metadata)]) -> Result<Found> {
    if entries.is_empty() {
        return Ok(Found::Empty);
    }
    let manifest_path = dir.join(MANIFEST);
    let Some((_, manifest_meta)) = entries.iter().find(|(n, _)| n == MANIFEST) else {
        let (first, _) = &entries[0];
        return Err(refuse(
            target,
            &dir.join(first),
            &format!(
                "is there and the directory has no {MANIFEST} (it is not an output Sightline \
                 wrote, or one written by a version without manifests)"
            ),
        ));
    };
    let not_ours = |why: &str| refuse(target, &manifest_path, why);
    if !manifest_meta.is_file() {
        return Err(not_ours("is not a file"));
    }
    let text = fs::read_to_string(&manifest_path).map_err(|source| Error::Read {
        path: manifest_path.clone(),
        source,
    })?;
    let manifest: Manifest = match serde_json::from_str(&text) {
        Ok(m) => m,
        Err(_) => return Err(not_ours("is not a Sightline manifest")),
    };
    if manifest.format != MANIFEST_FORMAT {
        return Err(not_ours(&format!(
            "has format '{}', not '{MANIFEST_FORMAT}'",
            manifest.format
        )));
    }
    let listed: BTreeMap<&str, &ManifestEntry> = manifest
        .files
        .iter()
        .map(|f| (f.name.as_str(), f))
        .collect();
    for (name, meta) in entries {
        if name == MANIFEST {
            continue;
        }
        let path = dir.join(name);
        let Some(entry) = listed.get(name.as_str()) else {
            return Err(refuse(
                target,
                &path,
                &format!("is not a file Sightline wrote there (it is not in {MANIFEST})"),
            ));
        };
        if !meta.is_file() {
            return Err(refuse(
                target,
                &path,
                "is not the regular file Sightline wrote there",
            ));
        }
        if meta.len() != entry.bytes {
            return Err(refuse(
                target,
                &path,
                &format!(
                    "was changed since Sightline wrote it ({} bytes, the manifest says {})",
                    meta.len(),
                    entry.bytes
                ),
            ));
        }
    }
    for entry in &manifest.files {
        let path = dir.join(&entry.name);
        if !entries.iter().any(|(n, _)| *n == entry.name) {
            return Err(refuse(
                target,
                &path,
                &format!("is listed in {MANIFEST} but missing (the directory was changed)"),
            ));
        }
    }
    for entry in &manifest.files {
        let path = dir.join(&entry.name);
        let (_, sha) = hash_file(&path).map_err(|source| Error::Read {
            path: path.clone(),
            source,
        })?;
        if sha != entry.sha256 {
            return Err(refuse(
                target,
                &path,
                "was changed since Sightline wrote it (its content differs from the manifest's \
                 SHA-256)",
            ));
        }
    }
    Ok(Found::Output(manifest))
}

/// Lexically normalised absolute form of `path` (symbolic links of its existing part resolved).
fn absolute(path: &Path) -> PathBuf {
    if let Ok(p) = fs::canonicalize(path) {
        return p;
    }
    let base = match (path.parent(), path.file_name()) {
        (Some(parent), Some(name)) => absolute(&parent_of_or_dot(parent)).join(name),
        _ => std::env::current_dir().unwrap_or_default().join(path),
    };
    let mut out = PathBuf::new();
    for c in base.components() {
        match c {
            Component::ParentDir => {
                out.pop();
            }
            Component::CurDir => {}
            other => out.push(other),
        }
    }
    out
}

fn parent_of_or_dot(p: &Path) -> PathBuf {
    if p.as_os_str().is_empty() {
        PathBuf::from(".")
    } else {
        p.to_path_buf()
    }
}

/// Refuses (exit code 2) an output directory `target` that holds one of the command's inputs —
/// a dataset, a shard, a checkpoint — or is one of them, since a new output would replace it.
/// `inputs` pairs a description with each path; `-` (stdin) is never inside anything.
pub fn refuse_inputs_inside(target: &Path, inputs: &[(&str, &Path)]) -> Result<()> {
    let out = absolute(target);
    for (what, input) in inputs {
        if input.as_os_str() == "-" {
            continue;
        }
        let abs = absolute(input);
        if abs.starts_with(&out) {
            let relation = if abs == out {
                "is the output directory itself"
            } else {
                "lies inside the output directory"
            };
            return Err(Error::Usage(format!(
                "-o {}: the {what} {} {relation}, and a new output would replace it; nothing \
                 was changed. Choose another -o (e.g. a new directory beside it)",
                target.display(),
                input.display()
            )));
        }
    }
    Ok(())
}

// ---------------------------------------------------------------------------------------------
// Output directories.

/// An output directory under construction: files go into a hidden temporary directory beside
/// the target; [`OutputDir::commit`] writes the manifest and puts it in place in one step.
/// Dropped without commit (error, panic or interrupt), the temporary directory — and any parent
/// directory created for it — is removed.
#[derive(Debug)]
pub struct OutputDir {
    given: PathBuf,
    checked: Checked,
    staging: PathBuf,
    guard: Guard,
    created: CreatedDirs,
}

impl OutputDir {
    /// Starts an output directory that will become `target`, after [`check_dir`] (a target that
    /// is not absent, empty or an unchanged earlier Sightline output is refused, exit code 2).
    pub fn new(target: &Path) -> Result<Self> {
        let checked = check_dir(target)?;
        let parent = parent_of(&checked.target);
        let created = CreatedDirs::create(&parent)?;
        let (staging, ()) = create_beside(&checked.target, |p| fs::create_dir(p))?;
        let guard = Guard::new(Temporary::Tree(staging.clone()));
        Ok(OutputDir {
            given: target.to_path_buf(),
            checked,
            staging,
            guard,
            created,
        })
    }

    /// Path of `name` inside the directory under construction.
    pub fn path(&self, name: &str) -> PathBuf {
        self.staging.join(name)
    }

    /// Where the directory will end up (the `-o` given, symbolic links followed).
    pub fn target(&self) -> &Path {
        &self.checked.target
    }

    /// Writes one file into the directory.
    pub fn write<F>(&self, name: &str, fill: F) -> Result<()>
    where
        F: FnOnce(&mut dyn Write) -> Result<()>,
    {
        let shown = self.checked.target.join(name);
        let file = File::create(self.path(name)).map_err(write_err(&shown))?;
        fill_into(file, &shown, fill)?;
        Ok(())
    }

    /// The manifest of the files written so far (each hashed and flushed to disk).
    fn seal(&self) -> Result<Manifest> {
        let mut files = Vec::new();
        for (name, meta) in listing(&self.staging)? {
            if !meta.is_file() || name == MANIFEST {
                continue;
            }
            let path = self.staging.join(&name);
            let (bytes, sha256) = hash_file(&path).map_err(write_err(&path))?;
            sync_path(&path).map_err(write_err(&path))?;
            files.push(ManifestEntry {
                name,
                bytes,
                sha256,
            });
        }
        Ok(Manifest {
            format: MANIFEST_FORMAT.into(),
            written_by: format!("sightline {}", env!("CARGO_PKG_VERSION")),
            files,
        })
    }

    /// Writes the manifest and moves the finished directory onto the target, replacing an
    /// earlier output there (checked again first: a file added meanwhile is refused).
    pub fn commit(mut self) -> Result<PathBuf> {
        let manifest = self.seal()?;
        let text = serde_json::to_string_pretty(&manifest)
            .map_err(|e| Error::Run(format!("encoding {MANIFEST}: {e}")))?;
        let manifest_path = self.staging.join(MANIFEST);
        let mut f = File::create(&manifest_path).map_err(write_err(&manifest_path))?;
        f.write_all(text.as_bytes())
            .and_then(|()| f.write_all(b"\n"))
            .and_then(|()| f.sync_all())
            .map_err(write_err(&manifest_path))?;
        drop(f);
        let target = self.checked.target.clone();
        // The target may have changed during a long run: look again (cheaply if it did not).
        let now = match fs::symlink_metadata(&target) {
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => Found::Absent,
            _ => {
                let entries = listing(&target)?;
                if seen(&entries) == self.checked.seen && self.checked.found != Found::Absent {
                    self.checked.found.clone()
                } else {
                    check_dir(&self.given)?.found
                }
            }
        };
        if let Ok(meta) = fs::metadata(&target) {
            // The replacement keeps the permissions the user gave the directory.
            let _ = fs::set_permissions(&self.staging, meta.permissions());
        }
        sync_path(&self.staging).map_err(write_err(&self.staging))?;
        match now {
            Found::Absent => place_new(&self.staging, &target)?,
            Found::Empty | Found::Output(_) => {
                exchange(&self.staging, &target)?;
                // The old output now sits at the staging path: remove exactly its files.
                if let Found::Output(old) = &now {
                    for f in &old.files {
                        let _ = fs::remove_file(self.staging.join(&f.name));
                    }
                    let _ = fs::remove_file(self.staging.join(MANIFEST));
                }
                if let Err(e) = fs::remove_dir(&self.staging) {
                    // Something appeared in the old output in the last instant: keep it.
                    self.guard.keep();
                    eprintln!(
                        "warning: the replaced output's directory {} was kept because it is not \
                         empty ({e}); look at its content and remove it yourself",
                        self.staging.display()
                    );
                }
            }
        }
        self.guard.keep();
        self.created.keep();
        let _ = sync_path(&parent_of(&target));
        Ok(target)
    }
}

/// Renames `from` onto the absent `to` (never over something that appeared meanwhile).
fn place_new(from: &Path, to: &Path) -> Result<()> {
    #[cfg(target_os = "linux")]
    {
        use rustix::fs::{CWD, RenameFlags, renameat_with};
        match renameat_with(CWD, from, CWD, to, RenameFlags::NOREPLACE) {
            Ok(()) => return Ok(()),
            Err(rustix::io::Errno::EXIST) | Err(rustix::io::Errno::NOTEMPTY) => {
                return Err(Error::Usage(format!(
                    "-o {}: it appeared while the command ran; nothing was changed. Run again",
                    to.display()
                )));
            }
            // Filesystems without renameat2 flags fall back to a plain rename.
            Err(rustix::io::Errno::INVAL) | Err(rustix::io::Errno::NOSYS) => {}
            Err(e) => return Err(write_err(to)(e.into())),
        }
    }
    if fs::symlink_metadata(to).is_ok() {
        return Err(Error::Usage(format!(
            "-o {}: it appeared while the command ran; nothing was changed. Run again",
            to.display()
        )));
    }
    fs::rename(from, to).map_err(write_err(to))
}

/// Swaps the directories `a` and `b` (atomically where the platform can).
fn exchange(a: &Path, b: &Path) -> Result<()> {
    #[cfg(target_os = "linux")]
    {
        use rustix::fs::{CWD, RenameFlags, renameat_with};
        match renameat_with(CWD, a, CWD, b, RenameFlags::EXCHANGE) {
            Ok(()) => return Ok(()),
            Err(rustix::io::Errno::INVAL) | Err(rustix::io::Errno::NOSYS) => {}
            Err(e) => return Err(write_err(b)(e.into())),
        }
    }
    // Fallback: three renames through a hidden name; the target is missing for an instant.
    let (aside, ()) = create_beside(b, |p| {
        if fs::symlink_metadata(p).is_ok() {
            Err(std::io::ErrorKind::AlreadyExists.into())
        } else {
            Ok(())
        }
    })?;
    fs::rename(b, &aside).map_err(write_err(b))?;
    if let Err(e) = fs::rename(a, b) {
        let _ = fs::rename(&aside, b);
        return Err(write_err(b)(e));
    }
    fs::rename(&aside, a).map_err(write_err(a))
}

// ---------------------------------------------------------------------------------------------
// Single files.

/// Where a single-file output (`simulate -o FILE`) goes, decided before any work.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum FileTarget {
    /// `-` or `/dev/stdout`: standard output.
    Stdout,
    /// A FIFO or character device: written straight into, no temporary file.
    Stream(PathBuf),
    /// A regular file (existing or new, symbolic links followed), replaced atomically.
    Replace {
        /// The final path.
        path: PathBuf,
        /// Whether a file is there now (its permission bits are kept).
        exists: bool,
    },
}

impl FileTarget {
    /// Checks `path` as a single-file output, touching nothing: a directory, a block device, a
    /// socket, a read-only file or a file in a read-only directory is refused (exit code 2).
    pub fn check(path: &Path) -> Result<Self> {
        let text = path.as_os_str();
        if text == "-" || text == "/dev/stdout" || text == "/dev/fd/1" || text == "/proc/self/fd/1"
        {
            return Ok(FileTarget::Stdout);
        }
        let refuse = |what: &str| {
            Err(Error::Usage(format!(
                "-o {}: {what}; nothing was changed. Expected a file name, `-` (standard \
                 output), a FIFO or a character device",
                path.display()
            )))
        };
        match fs::metadata(path) {
            Ok(meta) => {
                let kind = meta.file_type();
                if kind.is_dir() {
                    return refuse("it is a directory");
                }
                #[cfg(unix)]
                {
                    use std::os::unix::fs::FileTypeExt;
                    if kind.is_fifo() || kind.is_char_device() {
                        return Ok(FileTarget::Stream(path.to_path_buf()));
                    }
                    if kind.is_block_device() {
                        return refuse("it is a block device, which Sightline does not write to");
                    }
                    if kind.is_socket() {
                        return refuse("it is a socket");
                    }
                }
                if !kind.is_file() {
                    return refuse("it is not a regular file");
                }
                let final_path = fs::canonicalize(path).map_err(|source| Error::Read {
                    path: path.to_path_buf(),
                    source,
                })?;
                if read_only(&final_path, &meta) {
                    return Err(Error::Usage(format!(
                        "-o {}: the file is read-only{}; Sightline does not replace it behind \
                         your back, and nothing was changed. Choose another -o, or make it \
                         writable yourself",
                        path.display(),
                        mode_text(&meta)
                    )));
                }
                check_parent(&final_path)?;
                Ok(FileTarget::Replace {
                    path: final_path,
                    exists: true,
                })
            }
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => {
                // A new file, or the missing target of a symbolic link.
                let final_path = follow_links(path)?;
                check_parent(&final_path)?;
                Ok(FileTarget::Replace {
                    path: final_path,
                    exists: false,
                })
            }
            Err(source) => Err(Error::Write {
                path: path.to_path_buf(),
                source,
            }),
        }
    }

    /// Whether the output goes straight into a stream (nothing to undo if it stops early).
    pub fn streams(&self) -> bool {
        !matches!(self, FileTarget::Replace { .. })
    }

    /// Writes the output: `fill` writes into a buffer over the stream, or into a temporary
    /// file beside the final path that is flushed to disk and renamed onto it only if `fill`
    /// succeeds. `shown` is the path as the user gave it, for messages.
    pub fn write<F>(&self, shown: &Path, fill: F) -> Result<()>
    where
        F: FnOnce(&mut dyn Write) -> Result<()>,
    {
        match self {
            FileTarget::Stdout => {
                drop(fill_into(std::io::stdout().lock(), shown, fill)?);
                Ok(())
            }
            FileTarget::Stream(path) => {
                let file = fs::OpenOptions::new()
                    .write(true)
                    .open(path)
                    .map_err(write_err(shown))?;
                fill_into(file, shown, fill)?;
                Ok(())
            }
            FileTarget::Replace { path, exists } => {
                let mut created = CreatedDirs::create(&parent_of(path))?;
                let (tmp, file) = create_beside(path, |p| {
                    fs::OpenOptions::new().write(true).create_new(true).open(p)
                })?;
                let mut guard = Guard::new(Temporary::File(tmp.clone()));
                let file = fill_into(file, shown, fill)?;
                if *exists {
                    if let Ok(meta) = fs::metadata(path) {
                        let _ = file.set_permissions(meta.permissions());
                    }
                }
                file.sync_all().map_err(write_err(shown))?;
                drop(file);
                fs::rename(&tmp, path).map_err(write_err(shown))?;
                guard.keep();
                created.keep();
                let _ = sync_path(&parent_of(path));
                Ok(())
            }
        }
    }
}

/// Writes one file safely (see [`FileTarget`]).
pub fn write_file<F>(path: &Path, fill: F) -> Result<()>
where
    F: FnOnce(&mut dyn Write) -> Result<()>,
{
    FileTarget::check(path)?.write(path, fill)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn inputs_inside_the_output_are_found_through_dot_dot_and_missing_parts() {
        let dir = tempfile::tempdir().unwrap();
        let out = dir.path().join("out");
        fs::create_dir(&out).unwrap();
        let data = out.join("data.csv");
        fs::write(&data, "t\n").unwrap();
        let roundabout = out.join("..").join("out").join("data.csv");
        assert!(refuse_inputs_inside(&out, &[("dataset", &roundabout)]).is_err());
        assert!(refuse_inputs_inside(&out, &[("shard", &out)]).is_err());
        assert!(refuse_inputs_inside(&dir.path().join("other"), &[("dataset", &data)]).is_ok());
        // A sibling whose name starts like the output is not inside it.
        let sibling = dir.path().join("out-2");
        fs::create_dir(&sibling).unwrap();
        assert!(refuse_inputs_inside(&out, &[("shard", &sibling)]).is_ok());
        assert!(refuse_inputs_inside(&out, &[("dataset", Path::new("-"))]).is_ok());
    }

    #[test]
    fn created_parents_go_away_when_the_output_is_not_completed() {
        let dir = tempfile::tempdir().unwrap();
        let deep = dir.path().join("a").join("b");
        let started = || {
            let out = OutputDir::new(&deep.join("out")).unwrap();
            out.write("x.txt", |w| {
                w.write_all(b"x").map_err(|source| Error::Write {
                    path: "x".into(),
                    source,
                })
            })
            .unwrap();
            out
        };
        drop(started());
        assert!(!dir.path().join("a").exists(), "created parents removed");
        let done = started().commit().unwrap();
        let manifest: Manifest =
            serde_json::from_str(&fs::read_to_string(done.join(MANIFEST)).unwrap()).unwrap();
        // SHA-256("x") as `printf x | sha256sum` (GNU coreutils) gives it.
        assert_eq!(
            manifest.files,
            vec![ManifestEntry {
                name: "x.txt".into(),
                bytes: 1,
                sha256: "2d711642b726b04401627ca9fbac32f5c8530fb1903cc4db02258717921a4881".into()
            }]
        );
        assert!(check_dir(&done).is_ok());
    }
}
