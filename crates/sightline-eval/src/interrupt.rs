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
//! and says how to resume ([`crate::checkpoint`]). A dataset read from a stream that may wait
//! for data indefinitely (standard input, a pipe) is read through [`StoppableRead`], so that
//! waiting for a row does not keep the command from stopping.
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

/// How often a [`StoppableRead`] waiting for data looks whether a stop was requested.
const READ_POLL: std::time::Duration = std::time::Duration::from_millis(50);

/// Bytes a [`StoppableRead`] reads at a time, and chunks it holds ahead: its memory stays
/// within `READ_CHUNK × (READ_AHEAD + 2)` however long the stream.
const READ_CHUNK: usize = 1 << 16;
const READ_AHEAD: usize = 4;

/// The stop that a [`StoppableRead`] reports as an I/O error (see [`is_stop`]).
#[derive(Debug)]
struct StopWhileReading;

impl std::fmt::Display for StopWhileReading {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str("stop requested while waiting for data")
    }
}

impl std::error::Error for StopWhileReading {}

/// Whether `e` is the stop a [`StoppableRead`] reports: a signal came while it waited for data.
pub fn is_stop(e: &std::io::Error) -> bool {
    e.get_ref()
        .is_some_and(|inner| inner.is::<StopWhileReading>())
}

/// A byte stream that may wait indefinitely — standard input, a pipe or FIFO, a terminal —
/// read so that a stop still stops the command: the polled flag cannot interrupt a `read` that
/// blocks (signal-hook restarts it), so a thread of its own reads the stream in chunks and this
/// end waits for them, looking at the flag every 50 ms. A stop while it waits is an I/O error
/// for which [`is_stop`] holds; the reading thread, blocked or not, ends with the process.
/// Streaming is kept: at most a few 64 KiB chunks are held ahead.
pub struct StoppableRead {
    chunks: std::sync::mpsc::Receiver<std::io::Result<Vec<u8>>>,
    current: Vec<u8>,
    at: usize,
    ended: bool,
}

impl std::fmt::Debug for StoppableRead {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("StoppableRead")
            .field("buffered", &(self.current.len() - self.at))
            .field("ended", &self.ended)
            .finish()
    }
}

impl StoppableRead {
    /// Reads the stream `open` gives (opened in the reading thread too, since opening a FIFO
    /// waits for its writer).
    pub fn spawn<R, F>(open: F) -> std::io::Result<Self>
    where
        R: std::io::Read,
        F: FnOnce() -> std::io::Result<R> + Send + 'static,
    {
        let (sender, chunks) = std::sync::mpsc::sync_channel(READ_AHEAD);
        std::thread::Builder::new()
            .name("sightline-read".into())
            .spawn(move || {
                let mut input = match open() {
                    Ok(input) => input,
                    Err(e) => {
                        let _ = sender.send(Err(e));
                        return;
                    }
                };
                loop {
                    let mut chunk = vec![0; READ_CHUNK];
                    match input.read(&mut chunk) {
                        Ok(n) => {
                            chunk.truncate(n);
                            // An empty chunk is the end; a closed receiver, a reader gone.
                            if sender.send(Ok(chunk)).is_err() || n == 0 {
                                return;
                            }
                        }
                        Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
                        Err(e) => {
                            let _ = sender.send(Err(e));
                            return;
                        }
                    }
                }
            })?;
        Ok(StoppableRead {
            chunks,
            current: Vec::new(),
            at: 0,
            ended: false,
        })
    }

    /// Standard input, read so that a stop still stops the command.
    pub fn stdin() -> std::io::Result<Self> {
        Self::spawn(|| Ok(std::io::stdin()))
    }
}

impl std::io::Read for StoppableRead {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        use std::sync::mpsc::RecvTimeoutError;
        while self.at == self.current.len() {
            if self.ended || buf.is_empty() {
                return Ok(0);
            }
            if requested() {
                return Err(std::io::Error::other(StopWhileReading));
            }
            match self.chunks.recv_timeout(READ_POLL) {
                Ok(Ok(chunk)) => {
                    self.ended = chunk.is_empty();
                    self.current = chunk;
                    self.at = 0;
                }
                Ok(Err(e)) => {
                    self.ended = true;
                    return Err(e);
                }
                Err(RecvTimeoutError::Timeout) => {}
                Err(RecvTimeoutError::Disconnected) => self.ended = true,
            }
        }
        let n = buf.len().min(self.current.len() - self.at);
        buf[..n].copy_from_slice(&self.current[self.at..self.at + n]);
        self.at += n;
        Ok(n)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::io::Read;

    #[test]
    fn a_stoppable_read_hands_over_every_byte_then_the_end_and_errors() {
        // Over three chunks, with a last one that is not full.
        let bytes: Vec<u8> = (0..(2 * READ_CHUNK + 1234))
            .map(|i| (i % 251) as u8)
            .collect();
        let source = bytes.clone();
        let mut read = StoppableRead::spawn(move || Ok(std::io::Cursor::new(source))).unwrap();
        let mut got = Vec::new();
        read.read_to_end(&mut got).unwrap();
        assert_eq!(got, bytes);
        assert_eq!(read.read(&mut [0; 8]).unwrap(), 0, "the end stays the end");
        // An error opening or reading the stream reaches the reader as it was.
        let mut failing = StoppableRead::spawn(|| -> std::io::Result<std::io::Empty> {
            Err(std::io::Error::new(
                std::io::ErrorKind::NotFound,
                "no such log",
            ))
        })
        .unwrap();
        let e = failing.read(&mut [0; 8]).unwrap_err();
        assert_eq!(e.kind(), std::io::ErrorKind::NotFound);
        assert!(!is_stop(&e));
    }
}
