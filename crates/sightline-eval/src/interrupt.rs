//! Every signal a terminal or a batch scheduler sends to end a command — SIGINT (Ctrl-C),
//! SIGTERM (`kill`, `scancel`, a job's time limit), SIGHUP (the terminal went away) and SIGQUIT
//! — as a polled flag, so that the command stops at a safe point.
//!
//! The `sightline` binary installs the handler ([`install`], called by
//! [`crate::cli::main_with`]) through the signal-hook crate: a background thread receives the
//! signals and records the first one. The long loops poll it — the runner before every dataset
//! row, the simulator before every row, a Monte Carlo campaign inside every run, `tune` before
//! every evaluation — and stop with [`Error::Interrupted`]; the process then exits with
//! 128 + the signal's number (130 for SIGINT, 143 for SIGTERM, 129 for SIGHUP, 131 for SIGQUIT).
//! Outputs under construction are dropped ([`crate::output`] writes into temporary paths put in
//! place only when complete), so an interrupted command leaves no partial output and the
//! earlier one intact. An interrupted `montecarlo` keeps the runs it finished in its checkpoint
//! and says how to resume ([`crate::checkpoint`]).
//!
//! A second signal while the first is being honoured ends the process at once (exit code 128 +
//! that signal's number), after removing every temporary still under construction
//! ([`crate::output::remove_temporaries`]).

use std::sync::atomic::{AtomicI32, Ordering};

use crate::error::{Error, Result};

/// The signal that asked the command to stop: 0 for none yet, [`REQUESTED`] for [`request`].
static SIGNAL: AtomicI32 = AtomicI32::new(0);

/// Marker of a stop asked for by [`request`] rather than a signal.
const REQUESTED: i32 = -1;

/// SIGINT's number (POSIX's `kill -s` numbering, checked against the platform's at compile time).
pub const SIGINT: i32 = 2;
/// SIGTERM.
pub const SIGTERM: i32 = 15;
/// SIGHUP.
pub const SIGHUP: i32 = 1;
/// SIGQUIT.
pub const SIGQUIT: i32 = 3;

#[cfg(unix)]
const _: () = assert!(
    SIGINT == signal_hook::consts::SIGINT
        && SIGTERM == signal_hook::consts::SIGTERM
        && SIGHUP == signal_hook::consts::SIGHUP
        && SIGQUIT == signal_hook::consts::SIGQUIT
);

/// Exit code of a command stopped by SIGINT (Ctrl-C) or by [`request`]: 128 + 2.
pub const EXIT_CODE: u8 = 130;

/// The name of a signal this module handles.
pub fn signal_name(signal: i32) -> &'static str {
    match signal {
        SIGINT => "SIGINT",
        SIGTERM => "SIGTERM",
        SIGHUP => "SIGHUP",
        SIGQUIT => "SIGQUIT",
        _ => "a signal",
    }
}

/// Installs the handler of SIGINT, SIGTERM, SIGHUP and SIGQUIT (once per process; later calls
/// do nothing). Where signals cannot be caught the command still runs, without a safe stop.
pub fn install() {
    static ONCE: std::sync::Once = std::sync::Once::new();
    ONCE.call_once(|| {
        #[cfg(unix)]
        {
            let handled = [SIGINT, SIGTERM, SIGHUP, SIGQUIT];
            let mut signals = match signal_hook::iterator::Signals::new(handled) {
                Ok(s) => s,
                Err(e) => {
                    eprintln!("warning: signals cannot be caught ({e}); Ctrl-C ends at once");
                    return;
                }
            };
            let spawned = std::thread::Builder::new()
                .name("sightline-signals".into())
                .spawn(move || {
                    for signal in signals.forever() {
                        if SIGNAL
                            .compare_exchange(0, signal, Ordering::SeqCst, Ordering::SeqCst)
                            .is_err()
                        {
                            // A second signal: the user insists. Leave no temporary behind.
                            crate::output::remove_temporaries();
                            std::process::exit(128 + signal);
                        }
                    }
                });
            if let Err(e) = spawned {
                eprintln!("warning: signals cannot be caught ({e}); Ctrl-C ends at once");
            }
        }
    });
}

/// Asks the running command to stop at its next check, as Ctrl-C does (for embedding code that
/// cancels a run from elsewhere, e.g. a GUI button).
pub fn request() {
    let _ = SIGNAL.compare_exchange(0, REQUESTED, Ordering::SeqCst, Ordering::SeqCst);
}

/// Whether a stop was requested.
pub fn requested() -> bool {
    SIGNAL.load(Ordering::Relaxed) != 0
}

/// The signal that asked for the stop, if it was a signal.
pub fn signal() -> Option<i32> {
    Some(SIGNAL.load(Ordering::Relaxed)).filter(|&s| s > 0)
}

/// The exit code of an interrupted command: 128 + the signal's number (130 for [`request`]).
pub fn exit_code() -> u8 {
    match signal() {
        Some(s) => u8::try_from(128 + s).unwrap_or(EXIT_CODE),
        None => EXIT_CODE,
    }
}

/// How the stop came, for messages: `interrupted (SIGTERM)`, `interrupted (SIGINT, Ctrl-C)`.
pub fn describe() -> String {
    match signal() {
        Some(SIGINT) => "interrupted (SIGINT, Ctrl-C)".to_string(),
        Some(s) => format!("interrupted ({})", signal_name(s)),
        None => "interrupted (stop requested)".to_string(),
    }
}

/// `Err(Error::Interrupted)` naming `where_` once a stop was requested.
pub fn check(where_: impl FnOnce() -> String) -> Result<()> {
    if requested() {
        return Err(Error::Interrupted(format!("{} {}", describe(), where_())));
    }
    Ok(())
}
