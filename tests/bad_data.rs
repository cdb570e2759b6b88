//! Bad input never crashes the binary and always gets a located message.
//!
//! - The corpus `tests/data/bad/*.csv` holds one malformed dataset per problem (empty file,
//!   header without rows, missing `t`, non-numeric cell, ragged row, non-finite or
//!   non-increasing time, duplicate or unknown columns, missing input, non-finite measurement,
//!   invalid UTF-8, UTF-16, wrong separator, mis-mapped column, naive or mixed date-times, a
//!   time base the plant cannot have, ...); `NAME.expected` beside each is the exact message
//!   `sightline compare pendulum NAME.csv -f ekf` (plus the flags in `NAME.args`, if any) must
//!   print (exit code 2).
//! - Seeded random bytes and seeded mutations of a valid file: never a panic (exit code 101),
//!   only 0, 1 or 2, and every exit 2 carries a `file:line:column:` location.
//! - Valid but odd files (CRLF, byte-order mark, blanks around cells, reordered columns, blank
//!   lines, quoted numbers) give exactly the estimates of the plain file.

mod common_cli;

use std::path::{Path, PathBuf};
use std::process::Command;

use rand::RngExt;
use sightline::core::rng::stream;

use common_cli::{expect, s};

fn corpus() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data/bad")
}

/// Runs `sightline compare pendulum FILE -f ekf [EXTRA...]` in `cwd` (so messages name the
/// bare file).
fn compare_in(cwd: &Path, file: &str, out: &Path, extra: &[&str]) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_sightline"))
        .current_dir(cwd)
        .args(["compare", "pendulum", file, "-f", "ekf", "-o", s(out)])
        .args(extra)
        .output()
        .expect("the sightline binary runs")
}

#[test]
fn every_malformed_dataset_gets_its_exact_located_message() {
    let out = tempfile::tempdir().unwrap();
    let mut files: Vec<PathBuf> = std::fs::read_dir(corpus())
        .unwrap()
        .map(|e| e.unwrap().path())
        .filter(|p| p.extension().is_some_and(|e| e == "csv"))
        .collect();
    files.sort();
    assert!(
        files.len() >= 40,
        "the corpus has only {} files",
        files.len()
    );
    for path in files {
        let name = path.file_name().unwrap().to_str().unwrap();
        let expected = std::fs::read_to_string(path.with_extension("expected"))
            .unwrap_or_else(|_| panic!("{name} has no .expected file"));
        // NAME.args, when present, holds the case's extra flags (one per whitespace-separated
        // word), e.g. `--strict-columns` or `--map sensor=y.height`.
        let extra = std::fs::read_to_string(path.with_extension("args")).unwrap_or_default();
        let extra: Vec<&str> = extra.split_whitespace().collect();
        let target = out.path().join("out");
        let result = compare_in(&corpus(), name, &target, &extra);
        let stderr = String::from_utf8_lossy(&result.stderr);
        assert_eq!(result.status.code(), Some(2), "{name}: {stderr}");
        assert_eq!(stderr, expected, "{name}");
        // Located at the file, a line and a column.
        let located = format!("error: {name}:");
        assert!(stderr.starts_with(&located), "{name}: {stderr}");
        assert!(!target.exists(), "{name}: an output was written");
    }
}

/// Exit code and stderr of the binary on `bytes`, checked for the crash-free guarantee.
fn check_no_crash(dir: &Path, bytes: &[u8], what: &str) -> i32 {
    let file = dir.join("input.csv");
    std::fs::write(&file, bytes).unwrap();
    let result = compare_in(dir, "input.csv", &dir.join("out"), &[]);
    let stderr = String::from_utf8_lossy(&result.stderr);
    let code = result.status.code();
    assert!(
        matches!(code, Some(0..=2)),
        "{what}: exit {code:?} (a panic is 101)\n{stderr}\ninput: {:?}",
        String::from_utf8_lossy(bytes)
    );
    assert!(!stderr.contains("panicked"), "{what}: {stderr}");
    if code == Some(2) {
        assert!(
            stderr.starts_with("error: input.csv:"),
            "{what}: unlocated error: {stderr}"
        );
    }
    code.unwrap_or(-1)
}

#[test]
fn random_bytes_are_rejected_with_a_message_never_a_crash() {
    let dir = tempfile::tempdir().unwrap();
    let mut rng = stream(0x0BAD_DA7A, &[1]);
    for case in 0..60 {
        let len = rng.random_range(0..1500usize);
        let bytes: Vec<u8> = (0..len).map(|_| rng.random::<u8>()).collect();
        let code = check_no_crash(dir.path(), &bytes, &format!("random case {case}"));
        assert_eq!(code, 2, "random case {case} was accepted");
    }
}

#[test]
fn mutated_valid_files_never_crash_and_errors_are_located() {
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("plain.csv");
    expect(
        &[
            "simulate",
            "pendulum",
            "--steps",
            "40",
            "--seed",
            "4",
            "-o",
            s(&data),
        ],
        0,
    );
    let plain = std::fs::read(&data).unwrap();
    let tokens: [&[u8]; 12] = [
        b",", b"\"", b"\n", b"\r", b"\0", b"nan", b"inf", b"-", b"e999", b" ", b"\xff", b"1e-320",
    ];
    let mut rng = stream(0x0BAD_DA7A, &[2]);
    let mut rejected = 0;
    for case in 0..80 {
        let mut bytes = plain.clone();
        for _ in 0..rng.random_range(1..4usize) {
            let at = rng.random_range(0..bytes.len());
            match rng.random_range(0..4u8) {
                0 => {
                    bytes.remove(at);
                }
                1 => {
                    let t = tokens[rng.random_range(0..tokens.len())];
                    bytes.splice(at..at, t.iter().copied());
                }
                2 => bytes[at] = rng.random::<u8>(),
                _ => bytes.truncate(at.max(1)),
            }
        }
        if check_no_crash(dir.path(), &bytes, &format!("mutation {case}")) == 2 {
            rejected += 1;
        }
    }
    // Most single-byte damage to a CSV is detectable; the property above is the point.
    assert!(
        rejected > 20,
        "only {rejected} of 80 mutations were rejected"
    );
}

/// Rewrites a plain simulated file cell by cell.
fn rewrite(plain: &str, cell: impl Fn(usize, &str) -> String, line_end: &str) -> String {
    plain
        .lines()
        .map(|l| {
            l.split(',')
                .enumerate()
                .map(|(i, c)| cell(i, c))
                .collect::<Vec<_>>()
                .join(",")
        })
        .collect::<Vec<_>>()
        .join(line_end)
        + line_end
}

#[test]
fn valid_but_odd_files_give_the_estimates_of_the_plain_file() {
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("plain.csv");
    expect(
        &[
            "simulate",
            "pendulum",
            "--steps",
            "60",
            "--seed",
            "3",
            "--dropout",
            "0.2",
            "-o",
            s(&data),
        ],
        0,
    );
    let plain = std::fs::read_to_string(&data).unwrap();
    let estimates = |file: &Path, extra: &[&str]| -> String {
        let out = dir.path().join("out");
        let mut args = vec!["compare", "pendulum", s(file), "-f", "ekf", "-f", "ukf"];
        args.extend_from_slice(extra);
        args.extend_from_slice(&["-o", s(&out)]);
        expect(&args, 0);
        std::fs::read_to_string(out.join("estimates.csv")).unwrap()
    };
    let reference = estimates(&data, &[]);
    let header: Vec<&str> = plain.lines().next().unwrap().split(',').collect();
    // Columns reversed: t last.
    let reversed = {
        let order: Vec<usize> = (0..header.len()).rev().collect();
        plain
            .lines()
            .map(|l| {
                let cells: Vec<&str> = l.split(',').collect();
                order
                    .iter()
                    .map(|&i| cells[i])
                    .collect::<Vec<_>>()
                    .join(",")
            })
            .collect::<Vec<_>>()
            .join("\n")
            + "\n"
    };
    let with_blank_lines = plain.replace('\n', "\n\n");
    let variants: Vec<(&str, String)> = vec![
        ("crlf", rewrite(&plain, |_, c| c.to_string(), "\r\n")),
        ("bom", format!("\u{feff}{plain}")),
        (
            "bom_crlf",
            format!("\u{feff}{}", rewrite(&plain, |_, c| c.to_string(), "\r\n")),
        ),
        ("blanks", rewrite(&plain, |_, c| format!("  {c}\t "), "\n")),
        ("quoted", rewrite(&plain, |_, c| format!("\"{c}\""), "\n")),
        ("reversed", reversed),
        ("blank_lines", with_blank_lines),
    ];
    for (name, text) in variants {
        let file = dir.path().join(format!("{name}.csv"));
        std::fs::write(&file, text).unwrap();
        assert_eq!(estimates(&file, &[]), reference, "{name}");
    }
    // Non-finite measurements are missing with --nonfinite-as-missing: the same as empty cells.
    let y = header.iter().position(|h| *h == "y.position").unwrap();
    let nonfinite = rewrite(
        &plain,
        |i, c| {
            if i == y && c.is_empty() {
                "NaN".into()
            } else {
                c.to_string()
            }
        },
        "\n",
    );
    assert!(nonfinite.contains("NaN"), "the dropout left no gap");
    let file = dir.path().join("nonfinite.csv");
    std::fs::write(&file, nonfinite).unwrap();
    assert_eq!(
        estimates(&file, &["--nonfinite-as-missing"]),
        reference,
        "nan cells as missing"
    );
}
