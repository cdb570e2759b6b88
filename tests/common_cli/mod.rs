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
