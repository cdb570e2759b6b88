//! Ctrl-C (SIGINT) mid-run: the binary stops with exit code 130 and leaves no partial output;
//! an interrupted `montecarlo` keeps its finished runs in `DIR.checkpoint/`, and rerunning the
//! same command resumes from them to exactly the uninterrupted result.
//!
//! Unix only (signals). The checks are about files and exit codes, not timings: the signal is
//! sent part-way through a run whose length is measured first, so the test holds on a slow
//! debug build as on a fast release one.

#![cfg(unix)]

mod common_cli;

use std::path::Path;
use std::process::{Child, Command, Output, Stdio};
use std::time::{Duration, Instant};

use common_cli::{json, s, sightline};

fn spawn(args: &[&str]) -> Child {
    Command::new(env!("CARGO_BIN_EXE_sightline"))
        .args(args)
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("the sightline binary starts")
}

/// Sends SIGINT to `child` after `delay` and collects its output.
fn interrupt_after(child: Child, delay: Duration) -> Output {
    std::thread::sleep(delay);
    let status = Command::new("kill")
        .args(["-INT", &child.id().to_string()])
        .status()
        .expect("kill runs");
    assert!(status.success(), "kill -INT failed");
    child.wait_with_output().expect("the child exits")
}

/// Names in `dir` that start with `prefix` (temporary outputs are hidden `.NAME.partial-*`).
fn leftovers(dir: &Path, prefix: &str) -> Vec<String> {
    std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .filter(|n| n.starts_with(prefix))
        .collect()
}

/// `partial.json` without the timings, the one part that is not reproducible.
fn without_timings(mut v: serde_json::Value) -> serde_json::Value {
    for f in v["filters"].as_array_mut().unwrap() {
        let f = f.as_object_mut().unwrap();
        f.remove("seconds");
        f.remove("seconds_per_step");
    }
    v
}

#[test]
fn an_interrupted_campaign_leaves_no_output_and_resumes_to_the_same_result() {
    let dir = tempfile::tempdir().unwrap();
    let reference = dir.path().join("reference");
    let target = dir.path().join("mc");
    let campaign = |out: &Path| -> Vec<String> {
        [
            "montecarlo",
            "cv",
            "--runs",
            "2000",
            "--steps",
            "100",
            "-f",
            "kf",
            "-f",
            "ukf:alpha=0.5",
            "--seed",
            "11",
            "-o",
            s(out),
        ]
        .iter()
        .map(|a| a.to_string())
        .collect()
    };
    let args = campaign(&reference);
    let args: Vec<&str> = args.iter().map(String::as_str).collect();
    let started = Instant::now();
    let out = sightline(&args);
    let full = started.elapsed();
    assert_eq!(out.status.code(), Some(0), "{out:?}");

    // Interrupt a third of the way through.
    let args = campaign(&target);
    let args: Vec<&str> = args.iter().map(String::as_str).collect();
    let out = interrupt_after(spawn(&args), full / 3);
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(130), "{stderr}");
    let checkpoint = dir.path().join("mc.checkpoint");
    assert!(
        stderr.contains("interrupted (Ctrl-C)")
            && stderr.contains(s(&checkpoint))
            && stderr.contains("run the same command again to resume"),
        "{stderr}"
    );
    assert!(!target.exists(), "no output directory after an interrupt");
    assert!(
        leftovers(dir.path(), ".mc.").is_empty(),
        "temporary outputs left: {:?}",
        leftovers(dir.path(), ".mc.")
    );
    let saved = json(&checkpoint.join("partial.json"));
    let done: u64 = saved["covered"]
        .as_array()
        .unwrap()
        .iter()
        .map(|r| r[1].as_u64().unwrap() - r[0].as_u64().unwrap())
        .sum();
    assert!(done > 0 && done < 2000, "{done} runs in the checkpoint");

    // The same command resumes and finishes; the checkpoint goes away.
    let out = sightline(&args);
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(0), "{stderr}");
    assert!(stderr.contains("resuming from"), "{stderr}");
    assert!(!checkpoint.exists());
    // Exact sums: the resumed totals are the uninterrupted ones bit for bit (timings aside).
    assert_eq!(
        without_timings(json(&target.join("partial.json"))),
        without_timings(json(&reference.join("partial.json")))
    );
    let (a, b) = (
        json(&target.join("summary.json")),
        json(&reference.join("summary.json")),
    );
    assert_eq!(a["runs"], 2000);
    for (fa, fb) in a["filters"]
        .as_array()
        .unwrap()
        .iter()
        .zip(b["filters"].as_array().unwrap())
    {
        for key in [
            "rmse_all",
            "anees",
            "nees_in_band",
            "anis",
            "log_likelihood",
            "runs",
        ] {
            assert_eq!(fa[key], fb[key], "{key}");
        }
    }
}

#[test]
fn an_interrupted_compare_or_simulate_writes_nothing() {
    let dir = tempfile::tempdir().unwrap();
    // A simulation far too long to finish: interrupted, it leaves no file and no temporary.
    let big = dir.path().join("big.csv");
    let out = interrupt_after(
        spawn(&[
            "simulate",
            "cv",
            "--steps",
            "1000000000",
            "--seed",
            "1",
            "-o",
            s(&big),
        ]),
        Duration::from_millis(800),
    );
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(130), "{stderr}");
    assert!(stderr.contains("was not written"), "{stderr}");
    let names = leftovers(dir.path(), "");
    assert!(names.is_empty(), "left behind: {names:?}");

    // A comparison stopped mid-file leaves neither the directory nor its temporary.
    let data = dir.path().join("data.csv");
    common_cli::expect(
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
    let target = dir.path().join("out");
    let started = Instant::now();
    let out = interrupt_after(
        spawn(&[
            "compare",
            "cv",
            s(&data),
            "-f",
            "pf:particles=4000",
            "-f",
            "kf",
            "-o",
            s(&target),
        ]),
        Duration::from_millis(800),
    );
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(
        out.status.code(),
        Some(130),
        "after {:?}: {stderr}",
        started.elapsed()
    );
    assert!(stderr.contains("nothing was written"), "{stderr}");
    assert!(!target.exists());
    assert!(leftovers(dir.path(), ".out.").is_empty());
}
