//! The evaluation crate's error type and its exit codes (0 success, 1 a run failed, 2 bad input
//! or an output that cannot be written, 128 + n stopped by signal n; a stream whose reader went
//! away counts as stopped by SIGPIPE, 141).

use std::path::PathBuf;

use sightline_core::ParamError;
use sightline_filters::SpecError;
use thiserror::Error;

/// Everything that can stop a Sightline command.
#[derive(Debug, Error)]
pub enum Error {
    /// A malformed command line or an unknown name (exit code 2).
    #[error("{0}")]
    Usage(String),
    /// A parameter that does not exist or is out of range (exit code 2).
    #[error(transparent)]
    Param(#[from] ParamError),
    /// A filter spec that cannot be parsed or built (exit code 2).
    #[error(transparent)]
    Spec(#[from] SpecError),
    /// A dataset problem, located in the file (exit code 2).
    #[error("{}:{line}:{column}: {message}", path.display())]
    Data {
        /// File.
        path: PathBuf,
        /// 1-based line.
        line: u64,
        /// 1-based column (field number).
        column: u64,
        /// What is wrong and what was expected.
        message: String,
    },
    /// A file that cannot be read (exit code 2: the input is missing or unreadable).
    #[error("cannot read {}: {source}", path.display())]
    Read {
        /// File.
        path: PathBuf,
        /// Cause.
        source: std::io::Error,
    },
    /// A file or directory that cannot be written (exit code 2: a permission or I/O problem
    /// of the output, named by its path).
    #[error("cannot write {}: {source}", path.display())]
    Write {
        /// File or directory.
        path: PathBuf,
        /// Cause.
        source: std::io::Error,
    },
    /// A run that failed (exit code 1).
    #[error("{0}")]
    Run(String),
    /// Stopped by a signal (SIGINT, SIGTERM, SIGHUP, SIGQUIT) before it finished (exit code
    /// 128 + the signal's number); the message says what was kept (see [`crate::interrupt`]).
    #[error("{0}")]
    Interrupted(String),
}

impl Error {
    /// Process exit code for this error: 2 for bad input, usage or an unwritable output, 1 for
    /// a failed run, 128 + n for one stopped by signal n.
    ///
    /// A write into a pipe or FIFO whose reader has gone (`sightline simulate -o - | head`)
    /// exits 141 = 128 + SIGPIPE, the code a program stopped by that signal has (common
    /// practice: the Rust runtime ignores SIGPIPE, so the write fails with EPIPE instead).
    pub fn exit_code(&self) -> u8 {
        if self.is_broken_pipe() {
            return 128 + 13;
        }
        match self {
            Error::Usage(_)
            | Error::Param(_)
            | Error::Spec(_)
            | Error::Data { .. }
            | Error::Read { .. }
            | Error::Write { .. } => 2,
            Error::Run(_) => 1,
            Error::Interrupted(_) => crate::interrupt::exit_code(),
        }
    }

    /// Whether this is a write into a pipe whose reader has closed it: the reader chose to stop
    /// (`| head`), so the command stops quietly, like a program ended by SIGPIPE.
    pub fn is_broken_pipe(&self) -> bool {
        matches!(self, Error::Write { source, .. } if source.kind() == std::io::ErrorKind::BrokenPipe)
    }

    /// A located dataset error.
    pub fn data(
        path: impl Into<PathBuf>,
        line: u64,
        column: u64,
        message: impl Into<String>,
    ) -> Self {
        Error::Data {
            path: path.into(),
            line,
            column,
            message: message.into(),
        }
    }
}

/// Result with the crate's error.
pub type Result<T, E = Error> = std::result::Result<T, E>;
