//! Ctrl-C (SIGINT) as a polled flag, so that an interrupted command stops cleanly.
//!
//! The `sightline` binary installs the handler ([`install`], called by
//! [`crate::cli::main_with`]); the handler only sets a flag. The long loops poll it — the runner
//! before every dataset row, the simulator before every row, a Monte Carlo campaign inside every
//! run — and stop with [`Error::Interrupted`] (exit code 130, the shell convention 128 + SIGINT).
//! Outputs under construction are then dropped: [`crate::output`] writes into temporary paths
//! renamed into place only when complete, so an interrupted command leaves no partial
//! `summary.json`, `report.html`, `estimates.csv` or dataset. An interrupted `montecarlo` keeps
//! the runs it finished in a checkpoint and says how to resume ([`crate::checkpoint`]).
//!
//! A second Ctrl-C while the first is being honoured exits at once (code 130); temporary
//! directories (`.NAME.partial-*`) may then be left beside the target.

use std::sync::atomic::{AtomicBool, Ordering};

use crate::error::{Error, Result};

static REQUESTED: AtomicBool = AtomicBool::new(false);

/// Exit code of an interrupted command: 128 + SIGINT (2).
pub const EXIT_CODE: u8 = 130;

/// Installs the Ctrl-C handler (once per process; later calls do nothing).
pub fn install() {
    let _ = ctrlc::set_handler(|| {
        if REQUESTED.swap(true, Ordering::SeqCst) {
            std::process::exit(i32::from(EXIT_CODE));
        }
    });
}

/// Asks the running command to stop at its next check, as Ctrl-C does (for embedding code that
/// cancels a run from elsewhere, e.g. a GUI button).
pub fn request() {
    REQUESTED.store(true, Ordering::SeqCst);
}

/// Whether a stop was requested.
pub fn requested() -> bool {
    REQUESTED.load(Ordering::Relaxed)
}

/// `Err(Error::Interrupted)` naming `where_` once a stop was requested.
pub fn check(where_: impl FnOnce() -> String) -> Result<()> {
    if requested() {
        return Err(Error::Interrupted(format!(
            "interrupted (Ctrl-C) {}",
            where_()
        )));
    }
    Ok(())
}
