//! Redesigns keep results byte-identical: the outputs of today's commands, frozen as fixtures.
//!
//! This is a regression check, not a reference against the world: `tests/golden/` holds what
//! the `sightline` binary wrote at commit f7b0512 (before the plant-contract, command-line and
//! library-split redesigns) for every shipped plant — simulated datasets, every default filter's
//! `estimates.csv`, smoothed tracks, a Monte Carlo campaign, the demo and a tuning run. Each case
//! reruns the same command today and requires
//! - datasets, `estimates.csv` and `smoothed.csv` byte for byte (large files by SHA-256);
//! - every field of `summary.json` / `tuned.json` that existed then to hold the same value
//!   (numbers bit for bit), apart from wall-clock timings, which no run reproduces. Fields added
//!   since are allowed; a field whose meaning an issue changes on purpose is listed in
//!   [`CHANGED_ON_PURPOSE`] with the reason, never silently dropped.
//!
//! To regenerate after a deliberate, documented change of results:
//! `SIGHTLINE_GOLDEN_UPDATE=1 cargo test --release --test golden_outputs`, then review the diff.

mod common_cli;

use std::path::{Path, PathBuf};

use serde_json::Value;
use sha2::{Digest, Sha256};

/// Keys that hold wall-clock timings (or text that quotes them), skipped wherever they appear.
const TIMING_KEYS: &[&str] = &["seconds_per_step", "verdict", "trace", "seconds"];

/// Fields whose value an issue changed on purpose: (JSON pointer suffix, why). Empty at the
/// fixtures' commit.
const CHANGED_ON_PURPOSE: &[(&str, &str)] = &[];

/// Files above this size are compared by SHA-256 instead of being committed.
const HASH_ABOVE: usize = 200_000;

fn golden_dir() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/golden")
}

fn updating() -> bool {
    std::env::var_os("SIGHTLINE_GOLDEN_UPDATE").is_some()
}

fn sha256(bytes: &[u8]) -> String {
    Sha256::digest(bytes)
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect()
}

/// Runs sightline in `dir` and asserts success.
fn run_in(dir: &Path, args: &[&str]) {
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_sightline"))
        .args(args)
        .current_dir(dir)
        .output()
        .expect("the sightline binary runs");
    assert_eq!(
        out.status.code(),
        Some(0),
        "sightline {args:?}\nstderr:\n{}",
        String::from_utf8_lossy(&out.stderr)
    );
}

/// Compares (or, when updating, stores) one output file byte for byte.
fn check_bytes(case: &str, produced: &Path, name: &str) {
    let bytes = std::fs::read(produced)
        .unwrap_or_else(|e| panic!("{case}: cannot read {}: {e}", produced.display()));
    let dir = golden_dir().join(case);
    let whole = dir.join(name);
    let hashed = dir.join(format!("{name}.sha256"));
    if updating() {
        std::fs::create_dir_all(&dir).unwrap();
        if bytes.len() > HASH_ABOVE {
            std::fs::write(&hashed, format!("{}\n", sha256(&bytes))).unwrap();
        } else {
            std::fs::write(&whole, &bytes).unwrap();
        }
        return;
    }
    if whole.exists() {
        let expected = std::fs::read(&whole).unwrap();
        if expected != bytes {
            let (e, p) = (
                String::from_utf8_lossy(&expected),
                String::from_utf8_lossy(&bytes),
            );
            let first = e
                .lines()
                .zip(p.lines())
                .enumerate()
                .find(|(_, (a, b))| a != b)
                .map(|(i, (a, b))| format!("line {}:\n  then: {a}\n  now:  {b}", i + 1))
                .unwrap_or_else(|| format!("lengths {} then, {} now", expected.len(), bytes.len()));
            panic!("{case}/{name} differs from the fixture; first difference at {first}");
        }
    } else {
        let expected = std::fs::read_to_string(&hashed)
            .unwrap_or_else(|e| panic!("{case}: no fixture for {name}: {e}"));
        assert_eq!(
            sha256(&bytes),
            expected.trim(),
            "{case}/{name}: SHA-256 differs from the fixture"
        );
    }
}

/// Drops timing keys everywhere.
fn without_timings(v: &Value) -> Value {
    match v {
        Value::Object(map) => Value::Object(
            map.iter()
                .filter(|(k, _)| !TIMING_KEYS.contains(&k.as_str()))
                .map(|(k, v)| (k.clone(), without_timings(v)))
                .collect(),
        ),
        Value::Array(items) => Value::Array(items.iter().map(without_timings).collect()),
        other => other.clone(),
    }
}

/// Every field of `then` must be in `now` with the same value (`now` may have more).
fn contained(then: &Value, now: &Value, at: &str, problems: &mut Vec<String>) {
    if CHANGED_ON_PURPOSE.iter().any(|(k, _)| at.ends_with(k)) {
        return;
    }
    match (then, now) {
        (Value::Object(a), Value::Object(b)) => {
            for (k, va) in a {
                match b.get(k) {
                    Some(vb) => contained(va, vb, &format!("{at}/{k}"), problems),
                    None => problems.push(format!("{at}/{k}: missing now")),
                }
            }
        }
        (Value::Array(a), Value::Array(b)) if a.len() == b.len() => {
            for (i, (va, vb)) in a.iter().zip(b).enumerate() {
                contained(va, vb, &format!("{at}/{i}"), problems);
            }
        }
        (a, b) if a == b => {}
        (a, b) => problems.push(format!("{at}: then {a}, now {b}")),
    }
}

fn check_json(case: &str, produced: &Path, name: &str) {
    let now: Value = serde_json::from_str(&std::fs::read_to_string(produced).unwrap())
        .unwrap_or_else(|e| panic!("{case}/{name}: {e}"));
    let now = without_timings(&now);
    let path = golden_dir().join(case).join(name);
    if updating() {
        std::fs::create_dir_all(path.parent().unwrap()).unwrap();
        std::fs::write(&path, serde_json::to_string_pretty(&now).unwrap() + "\n").unwrap();
        return;
    }
    let then: Value = serde_json::from_str(&std::fs::read_to_string(&path).unwrap()).unwrap();
    let mut problems = Vec::new();
    contained(&then, &now, "", &mut problems);
    assert!(
        problems.is_empty(),
        "{case}/{name} no longer holds its fixture's values:\n{}",
        problems.join("\n")
    );
}

const PLANTS: &[&str] = &[
    "pendulum",
    "cv",
    "ungm",
    "quadtank",
    "cstr",
    "tracking",
    "tankchain",
];

#[test]
fn every_plant_simulates_and_filters_as_it_did() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    for plant in PLANTS {
        let case = format!("plant_{plant}");
        let data = format!("sim_{plant}.csv");
        run_in(
            dir,
            &[
                "simulate", plant, "--steps", "120", "--seed", "11", "-o", &data,
            ],
        );
        check_bytes(&case, &dir.join(&data), "data.csv");
        let out = format!("cmp_{plant}");
        run_in(dir, &["compare", plant, &data, "--seed", "3", "-o", &out]);
        check_bytes(
            &case,
            &dir.join(&out).join("estimates.csv"),
            "estimates.csv",
        );
        check_json(&case, &dir.join(&out).join("summary.json"), "summary.json");
    }
}

#[test]
fn sparse_sensors_and_smoothing_give_what_they_gave() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let case = "sparse_quadtank_smoothed";
    run_in(
        dir,
        &[
            "simulate",
            "quadtank",
            "--steps",
            "120",
            "--seed",
            "12",
            "--every",
            "3",
            "--dropout",
            "0.2",
            "-o",
            "sparse.csv",
        ],
    );
    check_bytes(case, &dir.join("sparse.csv"), "data.csv");
    run_in(
        dir,
        &[
            "compare",
            "quadtank",
            "sparse.csv",
            "-f",
            "ekf",
            "-f",
            "ukf",
            "-f",
            "srukf",
            "-f",
            "enkf:members=100",
            "-f",
            "pf:particles=500",
            "--seed",
            "9",
            "--smooth",
            "-o",
            "out",
        ],
    );
    check_bytes(case, &dir.join("out/estimates.csv"), "estimates.csv");
    check_bytes(case, &dir.join("out/smoothed.csv"), "smoothed.csv");
    check_json(case, &dir.join("out/summary.json"), "summary.json");

    let case = "cv_smoothed";
    run_in(
        dir,
        &[
            "simulate", "cv", "--steps", "120", "--seed", "11", "-o", "cv.csv",
        ],
    );
    run_in(
        dir,
        &[
            "compare",
            "cv",
            "cv.csv",
            "-f",
            "kf",
            "-f",
            "ekf",
            "-f",
            "iekf",
            "-f",
            "ckf",
            "-f",
            "ghkf",
            "-f",
            "pf:particles=400,smoother_paths=20",
            "--smooth",
            "-o",
            "cvs",
        ],
    );
    check_bytes(case, &dir.join("cvs/estimates.csv"), "estimates.csv");
    check_bytes(case, &dir.join("cvs/smoothed.csv"), "smoothed.csv");
    check_json(case, &dir.join("cvs/summary.json"), "summary.json");
}

#[test]
fn campaigns_and_their_merge_total_what_they_totalled() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let case = "montecarlo_cv";
    let common = [
        "montecarlo",
        "cv",
        "--runs",
        "16",
        "--steps",
        "60",
        "--seed",
        "5",
        "-f",
        "kf",
        "-f",
        "ukf",
        "-f",
        "pf:particles=300",
    ];
    let args = |extra: &[&'static str]| -> Vec<&str> {
        common
            .iter()
            .copied()
            .chain(extra.iter().copied())
            .collect()
    };
    run_in(dir, &args(&["-o", "mc"]));
    check_json(case, &dir.join("mc/summary.json"), "summary.json");
    // The sharded campaign merges to the same totals.
    run_in(dir, &args(&["--shard", "1/2", "-o", "s1"]));
    run_in(dir, &args(&["--shard", "2/2", "-o", "s2"]));
    run_in(dir, &["merge", "s1", "s2", "-o", "merged"]);
    check_json(case, &dir.join("merged/summary.json"), "summary.json");

    let case = "montecarlo_pendulum";
    run_in(
        dir,
        &[
            "montecarlo",
            "pendulum",
            "--runs",
            "6",
            "--steps",
            "40",
            "--seed",
            "2",
            "-o",
            "mcp",
        ],
    );
    check_json(case, &dir.join("mcp/summary.json"), "summary.json");
}

#[test]
fn the_demo_and_tuning_give_what_they_gave() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let case = "demo";
    run_in(dir, &["demo", "-o", "demo"]);
    check_bytes(case, &dir.join("demo/data.csv"), "data.csv");
    check_bytes(case, &dir.join("demo/estimates.csv"), "estimates.csv");
    check_json(case, &dir.join("demo/summary.json"), "summary.json");

    let case = "tune_cv";
    run_in(
        dir,
        &[
            "simulate", "cv", "--steps", "120", "--seed", "11", "-o", "cv.csv",
        ],
    );
    run_in(
        dir,
        &[
            "tune", "cv", "cv.csv", "-f", "kf", "--param", "q", "--param", "r", "-o", "tuned",
        ],
    );
    check_json(case, &dir.join("tuned/tuned.json"), "tuned.json");

    let case = "tune_pendulum";
    run_in(
        dir,
        &[
            "simulate", "pendulum", "--steps", "150", "--seed", "4", "-o", "p.csv",
        ],
    );
    run_in(
        dir,
        &[
            "tune",
            "pendulum",
            "p.csv",
            "-f",
            "ukf",
            "--param",
            "qc",
            "--param",
            "sd0.angle",
            "-o",
            "tp",
        ],
    );
    check_json(case, &dir.join("tp/tuned.json"), "tuned.json");
}
