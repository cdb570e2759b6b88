//! Helpers shared by the command-line tests (included with `mod common_cli;`).
#![allow(dead_code)]

use std::path::Path;
use std::process::{Command, Output};

/// Runs the `sightline` binary with `args`.
pub fn sightline(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_sightline"))
        .args(args)
        .output()
        .expect("the sightline binary runs")
}

/// Runs and asserts the exit code, returning stdout.
pub fn expect(args: &[&str], code: i32) -> String {
    let out = sightline(args);
    assert_eq!(
        out.status.code(),
        Some(code),
        "sightline {args:?}\nstdout:\n{}\nstderr:\n{}",
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8_lossy(&out.stdout).into_owned()
}

/// Simulates `steps` rows of `model` with `seed` into `file` (asserting success) and returns it.
pub fn simulated(file: &Path, model: &str, steps: u64, seed: u64) -> std::path::PathBuf {
    let (steps, seed) = (steps.to_string(), seed.to_string());
    expect(
        &[
            "simulate",
            model,
            "--steps",
            &steps,
            "--seed",
            &seed,
            "-o",
            s(file),
        ],
        0,
    );
    file.to_path_buf()
}

/// Path as &str.
pub fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

/// Reads a JSON file.
pub fn json(p: &Path) -> serde_json::Value {
    serde_json::from_str(&std::fs::read_to_string(p).unwrap()).unwrap()
}

/// Copies the dataset `data` to `log` without its `x.` (truth) columns, as a real plant log.
pub fn without_truth(data: &Path, log: &Path) {
    let mut reader = csv::Reader::from_path(data).unwrap();
    let header = reader.headers().unwrap().clone();
    let keep: Vec<usize> = (0..header.len())
        .filter(|&i| !header[i].starts_with("x."))
        .collect();
    let mut w = csv::Writer::from_path(log).unwrap();
    w.write_record(keep.iter().map(|&i| &header[i])).unwrap();
    for r in reader.records() {
        let r = r.unwrap();
        w.write_record(keep.iter().map(|&i| &r[i])).unwrap();
    }
    w.flush().unwrap();
}

/// A JSON output without what no run reproduces: wall-clock timings (`seconds`,
/// `seconds_per_step`, the verdict's cost line) and the content hash that covers them.
pub fn without_timings(v: &serde_json::Value) -> serde_json::Value {
    use serde_json::Value;
    match v {
        Value::Object(map) => Value::Object(
            map.iter()
                .filter(|(k, _)| {
                    !matches!(
                        k.as_str(),
                        "seconds" | "seconds_per_step" | "content_sha256"
                    )
                })
                .map(|(k, v)| {
                    let v = match (k.as_str(), v) {
                        ("verdict", Value::String(text)) => Value::String(
                            text.lines()
                                .filter(|l| !l.starts_with("Cost per step"))
                                .collect::<Vec<_>>()
                                .join("\n"),
                        ),
                        _ => without_timings(v),
                    };
                    (k.clone(), v)
                })
                .collect(),
        ),
        Value::Array(items) => Value::Array(items.iter().map(without_timings).collect()),
        other => other.clone(),
    }
}

/// Every file and directory under `dir` (relative paths, sorted) with the bytes of each file:
/// a snapshot to compare before and after a command.
pub fn snapshot(dir: &Path) -> Vec<(String, Option<Vec<u8>>)> {
    fn walk(root: &Path, at: &Path, out: &mut Vec<(String, Option<Vec<u8>>)>) {
        let mut entries: Vec<_> = std::fs::read_dir(at).unwrap().map(|e| e.unwrap()).collect();
        entries.sort_by_key(|e| e.file_name());
        for e in entries {
            let path = e.path();
            let rel = path.strip_prefix(root).unwrap().display().to_string();
            let meta = std::fs::symlink_metadata(&path).unwrap();
            if meta.is_dir() {
                out.push((format!("{rel}/"), None));
                walk(root, &path, out);
            } else if meta.is_file() {
                out.push((rel, Some(std::fs::read(&path).unwrap())));
            } else if meta.file_type().is_symlink() {
                let to = std::fs::read_link(&path).unwrap();
                out.push((format!("{rel} -> {}", to.display()), None));
            } else {
                out.push((format!("{rel} (special)"), None));
            }
        }
    }
    let mut out = Vec::new();
    walk(dir, dir, &mut out);
    out
}

/// Names of the snapshot entries, for messages.
pub fn names(snapshot: &[(String, Option<Vec<u8>>)]) -> Vec<&str> {
    snapshot.iter().map(|(n, _)| n.as_str()).collect()
}
