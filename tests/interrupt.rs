//! Every signal a terminal or a scheduler sends — SIGINT, SIGTERM, SIGHUP, SIGQUIT — stops each
//! long-running command at a safe point: exit code 128 + the signal's number (the shell
//! convention, common practice), no file left anywhere under the output's parent directory,
//! the earlier output byte for byte as it was. An interrupted `montecarlo` keeps its finished
//! runs in `DIR.checkpoint/` and resumes from them, even after SIGKILL, to exactly the
//! uninterrupted result (timings aside, since the totals are exact sums).
//!
//! Unix only (signals). Each signal is sent once the command has visibly started its work (a
//! temporary output or a checkpoint exists), so the checks hold on a slow machine as on a fast
//! one.

#![cfg(unix)]

mod common_cli;

use std::path::{Path, PathBuf};
use std::process::{Child, Command, Output, Stdio};
use std::time::{Duration, Instant};

use common_cli::{expect, json, names, s, sightline, snapshot, without_timings};

/// The signals and their numbers (POSIX `kill -l` numbering, the same on every Unix).
const SIGNALS: [(&str, i32); 4] = [("INT", 2), ("TERM", 15), ("HUP", 1), ("QUIT", 3)];

fn spawn(args: &[&str]) -> Child {
    Command::new(env!("CARGO_BIN_EXE_sightline"))
        .args(args)
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("the sightline binary starts")
}

fn send(child: &Child, signal: &str) {
    let status = Command::new("kill")
        .args(["-s", signal, &child.id().to_string()])
        .status()
        .expect("kill runs");
    assert!(status.success(), "kill -s {signal} failed");
}

/// Waits (at most a minute) until `ready()`, failing if the child ends first.
fn wait_until(child: &mut Child, mut ready: impl FnMut() -> bool) {
    let started = Instant::now();
    while !ready() {
        if let Some(status) = child.try_wait().unwrap() {
            panic!("the command ended ({status}) before it could be signalled");
        }
        assert!(
            started.elapsed() < Duration::from_secs(60),
            "the command did not start its work within a minute"
        );
        std::thread::sleep(Duration::from_millis(10));
    }
}

/// Waits (at most a minute) until `ready()`, then sends `signal` and collects the output.
fn signal_when(mut child: Child, signal: &str, ready: impl FnMut() -> bool) -> Output {
    wait_until(&mut child, ready);
    send(&child, signal);
    child.wait_with_output().expect("the child exits")
}

/// Whether `dir` holds an entry whose name starts with `prefix`.
fn has_entry(dir: &Path, prefix: &str) -> bool {
    std::fs::read_dir(dir)
        .map(|entries| {
            entries
                .flatten()
                .any(|e| e.file_name().to_string_lossy().starts_with(prefix))
        })
        .unwrap_or(false)
}

fn stderr(out: &Output) -> String {
    String::from_utf8_lossy(&out.stderr).into_owned()
}

/// Asserts a signalled command's exit code and that `dir` is exactly as `before`.
fn stopped_cleanly(out: &Output, number: i32, dir: &Path, before: &[(String, Option<Vec<u8>>)]) {
    assert_eq!(out.status.code(), Some(128 + number), "{}", stderr(out));
    assert!(stderr(out).contains("interrupted ("), "{}", stderr(out));
    let after = snapshot(dir);
    assert_eq!(names(before), names(&after), "entries changed");
    assert!(before == after, "a file's bytes changed");
}

#[test]
fn simulate_stops_on_every_signal_and_keeps_the_earlier_file() {
    let dir = tempfile::tempdir().unwrap();
    let file = dir.path().join("big.csv");
    expect(
        &[
            "simulate",
            "cv",
            "--steps",
            "50",
            "--seed",
            "1",
            "-o",
            s(&file),
        ],
        0,
    );
    let before = snapshot(dir.path());
    for (signal, number) in SIGNALS {
        // Far too long to finish: stopped once its temporary file exists.
        let child = spawn(&[
            "simulate",
            "cv",
            "--steps",
            "1000000000",
            "--seed",
            "1",
            "-o",
            s(&file),
        ]);
        let out = signal_when(child, signal, || has_entry(dir.path(), ".big.csv.partial-"));
        assert!(stderr(&out).contains("was not written"), "{}", stderr(&out));
        stopped_cleanly(&out, number, dir.path(), &before);
    }
}

#[test]
fn compare_stops_on_every_signal_and_keeps_the_earlier_output() {
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("data.csv");
    expect(
        &[
            "simulate",
            "cv",
            "--steps",
            "100000",
            "--seed",
            "2",
            "-o",
            s(&data),
        ],
        0,
    );
    let out_dir = dir.path().join("out");
    let small = dir.path().join("small.csv");
    expect(
        &[
            "simulate",
            "cv",
            "--steps",
            "50",
            "--seed",
            "2",
            "-o",
            s(&small),
        ],
        0,
    );
    expect(
        &["compare", "cv", s(&small), "-f", "kf", "-o", s(&out_dir)],
        0,
    );
    let before = snapshot(dir.path());
    for (signal, number) in SIGNALS {
        let child = spawn(&[
            "compare",
            "cv",
            s(&data),
            "-f",
            "pf:particles=4000",
            "-f",
            "kf",
            "-o",
            s(&out_dir),
        ]);
        let out = signal_when(child, signal, || has_entry(dir.path(), ".out.partial-"));
        assert!(
            stderr(&out).contains("nothing was written"),
            "{}",
            stderr(&out)
        );
        stopped_cleanly(&out, number, dir.path(), &before);
    }
}

/// Whether the process `pid` runs a thread named `name` (Linux: `/proc/PID/task/*/comm`).
#[cfg(target_os = "linux")]
fn has_thread(pid: u32, name: &str) -> bool {
    std::fs::read_dir(format!("/proc/{pid}/task"))
        .map(|tasks| {
            tasks.flatten().any(|t| {
                std::fs::read_to_string(t.path().join("comm")).is_ok_and(|c| c.trim() == name)
            })
        })
        .unwrap_or(false)
}

/// [`signal_when`] for a child that might not stop: it must end within `limit` of the signal
/// (else it is killed and the test fails; its output must fit the pipes meanwhile).
fn signal_within(
    mut child: Child,
    signal: &str,
    limit: Duration,
    ready: impl FnMut() -> bool,
) -> Output {
    wait_until(&mut child, ready);
    send(&child, signal);
    let sent = Instant::now();
    while child.try_wait().unwrap().is_none() {
        if sent.elapsed() > limit {
            let _ = child.kill();
            let out = child.wait_with_output().unwrap();
            panic!(
                "still running {limit:?} after SIG{signal}: {}",
                stderr(&out)
            );
        }
        std::thread::sleep(Duration::from_millis(10));
    }
    child.wait_with_output().expect("the child exits")
}

/// Runs `args` reading `head` on standard input from a pipe that stays open (so a read waits
/// for good), sends `signal` once `ready(pid)` and returns the output; the command must stop
/// within half a minute of the signal although neither data nor end of file comes.
fn signal_while_stdin_stays_open(
    args: &[&str],
    head: &[u8],
    signal: &str,
    mut ready: impl FnMut(u32) -> bool,
) -> Output {
    use std::io::Write;
    let mut child = Command::new(env!("CARGO_BIN_EXE_sightline"))
        .args(args)
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("the sightline binary starts");
    // Held until the child has exited.
    let mut pipe = child.stdin.take().unwrap();
    pipe.write_all(head).unwrap();
    pipe.flush().unwrap();
    let id = child.id();
    let out = signal_within(child, signal, Duration::from_secs(30), || ready(id));
    drop(pipe);
    out
}

#[test]
fn compare_reading_a_silent_pipe_still_stops_on_every_signal() {
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("data.csv");
    // More rows than the time-base check reads ahead (1000), so that the run itself waits.
    expect(
        &[
            "simulate",
            "cv",
            "--steps",
            "1100",
            "--seed",
            "3",
            "-o",
            s(&data),
        ],
        0,
    );
    let rows = std::fs::read(&data).unwrap();
    let out_dir = dir.path().join("out");
    expect(
        &["compare", "cv", s(&data), "-f", "kf", "-o", s(&out_dir)],
        0,
    );
    let before = snapshot(dir.path());
    let args = ["compare", "cv", "-", "-f", "kf", "-o", s(&out_dir)];
    for (signal, number) in SIGNALS {
        // Inside the run (its temporary output exists): in its last rows or, soon after,
        // waiting for the next one.
        let out = signal_while_stdin_stays_open(&args, &rows, signal, |_| {
            has_entry(dir.path(), ".out.partial-")
        });
        assert!(
            stderr(&out).contains("nothing was written"),
            "{}",
            stderr(&out)
        );
        stopped_cleanly(&out, number, dir.path(), &before);
        // Before the run, with the header and three rows: nothing but a read can wait there,
        // so the reading thread (started after the signal handler) must hand over the stop.
        #[cfg(target_os = "linux")]
        {
            let mut head = rows
                .split(|&b| b == b'\n')
                .take(4)
                .collect::<Vec<_>>()
                .join(&b'\n');
            head.push(b'\n');
            let out = signal_while_stdin_stays_open(&args, &head, signal, |id| {
                has_thread(id, "sightline-read")
            });
            assert!(
                stderr(&out).contains("while waiting for data from <stdin>"),
                "{}",
                stderr(&out)
            );
            stopped_cleanly(&out, number, dir.path(), &before);
        }
    }
}

#[test]
fn tune_stops_on_every_signal_and_keeps_the_earlier_output() {
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("data.csv");
    expect(
        &[
            "simulate",
            "cv",
            "--steps",
            "200000",
            "--seed",
            "4",
            "-o",
            s(&data),
        ],
        0,
    );
    let small = dir.path().join("small.csv");
    expect(
        &[
            "simulate",
            "cv",
            "--steps",
            "50",
            "--seed",
            "4",
            "-o",
            s(&small),
        ],
        0,
    );
    let out_dir = dir.path().join("tuned");
    expect(
        &[
            "tune",
            "cv",
            s(&small),
            "-f",
            "kf",
            "--param",
            "q",
            "-o",
            s(&out_dir),
        ],
        0,
    );
    let before = snapshot(dir.path());
    for (signal, number) in SIGNALS {
        let child = spawn(&[
            "tune",
            "cv",
            s(&data),
            "-f",
            "ukf",
            "--param",
            "q",
            "--param",
            "r",
            "-o",
            s(&out_dir),
        ]);
        // The search starts once the data is read: give it that long (it runs for seconds).
        let started = Instant::now();
        let out = signal_when(child, signal, || {
            started.elapsed() > Duration::from_millis(700)
        });
        assert!(
            stderr(&out).contains("nothing was written"),
            "{}",
            stderr(&out)
        );
        stopped_cleanly(&out, number, dir.path(), &before);
    }
}

fn campaign(out: &Path, runs: &str) -> Vec<String> {
    [
        "montecarlo",
        "cv",
        "--runs",
        runs,
        "--steps",
        "100",
        "-f",
        "kf",
        "-f",
        "pf:particles=600",
        "--seed",
        "11",
        "-o",
        s(out),
    ]
    .iter()
    .map(|a| a.to_string())
    .collect()
}

/// Asserts that the campaign outputs `a` and `b` hold the same results (timings aside).
fn assert_same_campaign(a: &Path, b: &Path) {
    for name in ["summary.json", "partial.json"] {
        assert_eq!(
            without_timings(&json(&a.join(name))),
            without_timings(&json(&b.join(name))),
            "{name}"
        );
    }
}

fn strs(v: &[String]) -> Vec<&str> {
    v.iter().map(String::as_str).collect()
}

fn covered(partial: &Path) -> u64 {
    json(partial)["covered"]
        .as_array()
        .unwrap()
        .iter()
        .map(|r| r[1].as_u64().unwrap() - r[0].as_u64().unwrap())
        .sum()
}

#[test]
fn montecarlo_stops_on_every_signal_keeps_its_runs_and_resumes_to_the_same_result() {
    let dir = tempfile::tempdir().unwrap();
    let reference = dir.path().join("reference");
    expect(&strs(&campaign(&reference, "1500")), 0);
    let target = dir.path().join("mc");
    // An earlier output at the target (a smaller campaign) must come through unchanged.
    expect(&strs(&campaign(&target, "20")), 0);
    let checkpoint: PathBuf = dir.path().join("mc.checkpoint");
    let args = campaign(&target, "1500");
    for (signal, number) in SIGNALS {
        let before = snapshot(dir.path());
        // From the second signal on the campaign resumes: wait for a save of new runs.
        let file = checkpoint.join("partial.json");
        let had = if file.exists() { covered(&file) } else { 0 };
        let child = spawn(&strs(&args));
        let out = signal_when(child, signal, || file.exists() && covered(&file) > had);
        let err = stderr(&out);
        assert_eq!(out.status.code(), Some(128 + number), "{err}");
        assert!(
            err.contains(&format!("interrupted (SIG{signal}"))
                && err.contains(s(&checkpoint))
                && err.contains("run the same command again to resume"),
            "{err}"
        );
        // Exactly one change: the checkpoint, which holds the finished runs.
        let mut after = snapshot(dir.path());
        let ours: Vec<_> = after
            .iter()
            .filter(|(n, _)| n.starts_with("mc.checkpoint"))
            .map(|(n, _)| n.clone())
            .collect();
        assert_eq!(ours, ["mc.checkpoint/", "mc.checkpoint/partial.json"]);
        let done = covered(&checkpoint.join("partial.json"));
        assert!(done > 0 && done < 1500, "{done} runs in the checkpoint");
        after.retain(|(n, _)| !n.starts_with("mc.checkpoint"));
        let mut earlier = before.clone();
        earlier.retain(|(n, _)| !n.starts_with("mc.checkpoint"));
        assert!(
            after == earlier,
            "the earlier output or another file changed"
        );
    }
    // The same command resumes and finishes; the checkpoint goes away.
    let out = sightline(&strs(&args));
    let err = stderr(&out);
    assert_eq!(out.status.code(), Some(0), "{err}");
    assert!(err.contains("resuming from"), "{err}");
    assert!(!checkpoint.exists());
    assert_same_campaign(&target, &reference);
}

#[test]
fn montecarlo_killed_outright_resumes_from_its_last_save() {
    let dir = tempfile::tempdir().unwrap();
    let reference = dir.path().join("reference");
    expect(&strs(&campaign(&reference, "3000")), 0);
    let target = dir.path().join("mc");
    let checkpoint = dir.path().join("mc.checkpoint");
    let args = campaign(&target, "3000");
    // SIGKILL cannot be caught: only what was saved survives. Wait for a few saves.
    let child = spawn(&strs(&args));
    let out = signal_when(child, "KILL", || {
        let p = checkpoint.join("partial.json");
        p.exists() && std::fs::read(&p).is_ok_and(|_| covered(&p) >= 180)
    });
    assert_eq!(
        out.status.code(),
        None,
        "SIGKILL ends the process by the signal"
    );
    assert!(!target.exists());
    let saved = covered(&checkpoint.join("partial.json"));
    assert!(saved < 3000, "the campaign finished before the kill");
    let out = sightline(&strs(&args));
    let err = stderr(&out);
    assert_eq!(out.status.code(), Some(0), "{err}");
    assert!(
        err.contains(&format!(
            "resuming from {}: {saved} of 3000 runs already done",
            s(&checkpoint)
        )),
        "{err}"
    );
    assert_eq!(
        names(&snapshot(dir.path()))
            .iter()
            .filter(|n| !n.starts_with("reference"))
            .copied()
            .collect::<Vec<_>>(),
        [
            "mc/",
            "mc/manifest.json",
            "mc/partial.json",
            "mc/report.html",
            "mc/summary.json"
        ],
        "nothing but the output is left"
    );
    assert_same_campaign(&target, &reference);
}

#[test]
fn a_changed_command_is_told_what_changed_and_a_larger_runs_extends_the_campaign() {
    let dir = tempfile::tempdir().unwrap();
    let target = dir.path().join("mc");
    let checkpoint = dir.path().join("mc.checkpoint");
    let child = spawn(&strs(&campaign(&target, "1500")));
    let out = signal_when(child, "TERM", || checkpoint.join("partial.json").exists());
    assert_eq!(out.status.code(), Some(143), "{}", stderr(&out));
    let before = snapshot(dir.path());
    // Another seed and another filter list: refused, naming both, with the resuming command.
    let mut changed = campaign(&target, "1500");
    changed[11] = "12".into();
    changed[9] = "ukf".into();
    let out = sightline(&strs(&changed));
    let err = stderr(&out);
    assert_eq!(out.status.code(), Some(2), "{err}");
    for needle in [
        "differs from this command in",
        "--seed (11 there, 12 here)",
        "-f (kf, pf:particles=600 there, kf, ukf here)",
        "sightline montecarlo cv --runs 1500 --steps 100 --seed 11 -f kf -f pf:particles=600",
        "Nothing was changed",
    ] {
        assert!(err.contains(needle), "lacks {needle:?}: {err}");
    }
    // Fewer runs: a campaign grows, it does not shrink.
    let out = sightline(&strs(&campaign(&target, "100")));
    assert_eq!(out.status.code(), Some(2));
    assert!(
        stderr(&out).contains("--runs (1500 there, 100 here"),
        "{}",
        stderr(&out)
    );
    assert!(
        before == snapshot(dir.path()),
        "a refused resume changed something"
    );
    // More runs: the interrupted campaign is extended from its checkpoint ...
    let out = sightline(&strs(&campaign(&target, "1550")));
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    assert!(stderr(&out).contains("resuming from"), "{}", stderr(&out));
    // ... and a finished one from its output; either way equal to a campaign run at once.
    let out = sightline(&strs(&campaign(&target, "1600")));
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    assert!(
        stderr(&out).contains("extending") && stderr(&out).contains("1550 of 1600 runs"),
        "{}",
        stderr(&out)
    );
    let reference = dir.path().join("reference");
    expect(&strs(&campaign(&reference, "1600")), 0);
    assert_same_campaign(&target, &reference);
}

#[test]
fn a_checkpoint_of_other_sensors_names_every_and_dropout_and_resumes_only_its_own_campaign() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let sparse = |out: &Path, every: &str, dropout: &str| -> Vec<String> {
        [
            "montecarlo",
            "cv",
            "--runs",
            "12",
            "--steps",
            "30",
            "-f",
            "kf",
            "--set",
            "q=0.5",
            "--seed",
            "4",
            "--every",
            every,
            "--dropout",
            dropout,
            "-o",
            s(out),
        ]
        .map(String::from)
        .to_vec()
    };
    // A checkpoint holding every run of a --every 3 --dropout 0.2 campaign (a shard's
    // partial.json is one: the same format, sealed the same way).
    let done = d.join("done");
    expect(&strs(&sparse(&done, "3", "0.2")), 0);
    let target = d.join("mc");
    std::fs::create_dir(d.join("mc.checkpoint")).unwrap();
    std::fs::copy(
        done.join("partial.json"),
        d.join("mc.checkpoint/partial.json"),
    )
    .unwrap();
    let before = snapshot(d);
    let out = sightline(&strs(&sparse(&target, "2", "0.1")));
    let err = stderr(&out);
    assert_eq!(out.status.code(), Some(2), "{err}");
    for needle in [
        "differs from this command in --every (3 there, 2 here), --dropout (0.2 there, 0.1 here)",
        // The command that resumes it has all that makes the campaign, --set included.
        "run its command again: sightline montecarlo cv --runs 12 --steps 30 --seed 4 -f kf \
         --set q=0.5 --every 3 --dropout 0.2 -o ...",
    ] {
        assert!(err.contains(needle), "lacks {needle:?}: {err}");
    }
    assert!(before == snapshot(d), "a refused resume changed something");
    // That command resumes it (nothing left to run) to the campaign's own result, settings
    // included.
    let out = sightline(&strs(&sparse(&target, "3", "0.2")));
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    assert!(
        stderr(&out).contains("resuming from") && stderr(&out).contains("12 of 12 runs"),
        "{}",
        stderr(&out)
    );
    let summary = json(&target.join("summary.json"));
    assert_eq!(summary["settings"]["every"], 3, "{summary}");
    assert_eq!(summary["settings"]["dropout"], 0.2, "{summary}");
    assert_same_campaign(&target, &done);
}
