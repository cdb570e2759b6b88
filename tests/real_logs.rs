//! Real logs go in as they are: one simulated dataset rewritten in every shape loggers,
//! spreadsheets and pandas write gives the plain file's estimates; a time base the plant cannot
//! have is refused; every result records the settings that rerun it, byte for byte.
//!
//! The reference for "the same estimates" is the plain file itself (the shapes carry the same
//! numbers; only the time arithmetic may differ by rounding, hence ≤ 1e-9 relative). The
//! date-time shapes use instants whose offsets follow RFC 3339 §4.2 (local time = UTC + offset).

mod common_cli;

use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};

use common_cli::{expect, json, s, sightline};
use sightline::eval::settings::Settings;

const FILTERS: [&str; 6] = ["-f", "ekf", "-f", "ukf", "-f", "ckf"];

/// A plain pendulum dataset (t = k·0.01 s from 0, 10 % dropout) as rows of cells.
fn plain(dir: &Path) -> (PathBuf, Vec<String>, Vec<Vec<String>>) {
    let path = dir.join("plain.csv");
    expect(
        &[
            "simulate",
            "pendulum",
            "--steps",
            "300",
            "--seed",
            "5",
            "--dropout",
            "0.1",
            "-o",
            s(&path),
        ],
        0,
    );
    let mut reader = csv::Reader::from_path(&path).unwrap();
    let header = reader.headers().unwrap().iter().map(String::from).collect();
    let rows = reader
        .records()
        .map(|r| r.unwrap().iter().map(String::from).collect())
        .collect();
    (path, header, rows)
}

/// Writes rows as CSV text, with `comment` lines before the header and every 25 rows if given.
fn write_rows(path: &Path, header: &[String], rows: &[Vec<String>], comment: bool) {
    let mut out = String::new();
    if comment {
        out.push_str("# logger: bench rig 3, firmware 1.2\n# site: hall B\n");
    }
    let mut w = csv::Writer::from_writer(Vec::new());
    w.write_record(header).unwrap();
    let header_text = String::from_utf8(w.into_inner().unwrap()).unwrap();
    out.push_str(&header_text);
    for (k, row) in rows.iter().enumerate() {
        if comment && k % 25 == 24 {
            out.push_str("# operator note: valve checked\n");
        }
        let mut w = csv::Writer::from_writer(Vec::new());
        w.write_record(row).unwrap();
        out.push_str(&String::from_utf8(w.into_inner().unwrap()).unwrap());
    }
    std::fs::write(path, out).unwrap();
}

/// The rows with the cell of `column` replaced by `time(k)` on row k.
fn retimed(
    rows: &[Vec<String>],
    column: usize,
    time: impl Fn(usize) -> String,
) -> Vec<Vec<String>> {
    rows.iter()
        .enumerate()
        .map(|(k, r)| {
            let mut r = r.clone();
            r[column] = time(k);
            r
        })
        .collect()
}

/// Time of row k (10 ms apart) as a date-time from 2026-03-01T10:00:00Z, written with the
/// UTC offset `hours` (RFC 3339 §4.2: the local time is UTC + offset).
fn date_time(k: usize, hours: i64) -> String {
    let ms = 10 * k as i64 + (10 * 3600 + hours * 3600) * 1000;
    let (h, rest) = (ms / 3_600_000, ms % 3_600_000);
    let (m, rest) = (rest / 60_000, rest % 60_000);
    let (sec, milli) = (rest / 1000, rest % 1000);
    let offset = if hours == 0 {
        "Z".to_string()
    } else {
        format!("{}{:02}:00", if hours < 0 { '-' } else { '+' }, hours.abs())
    };
    format!("2026-03-01T{h:02}:{m:02}:{sec:02}.{milli:03}{offset}")
}

/// Epoch seconds of row k: 1772359200 s (2026-03-01T10:00:00Z) plus 10 ms steps.
fn epoch_seconds(k: usize) -> String {
    let ms = 10 * k;
    format!("{}.{:03}", 1_772_359_200 + ms / 1000, ms % 1000)
}

/// Runs `compare` on `data` (a path, or `-` with `stdin`) and returns estimates.csv.
fn estimates(dir: &Path, name: &str, data: &str, extra: &[&str], stdin: Option<&Path>) -> String {
    let out = dir.join(format!("out_{name}"));
    let mut args = vec!["compare", "pendulum", data];
    args.extend_from_slice(&FILTERS);
    args.extend_from_slice(extra);
    args.extend_from_slice(&["-o", s(&out)]);
    let mut command = Command::new(env!("CARGO_BIN_EXE_sightline"));
    command
        .args(&args)
        .stdout(Stdio::piped())
        .stderr(Stdio::piped());
    if stdin.is_some() {
        command.stdin(Stdio::piped());
    }
    let mut child = command.spawn().unwrap();
    if let Some(file) = stdin {
        let bytes = std::fs::read(file).unwrap();
        let mut pipe = child.stdin.take().unwrap();
        // Written from a thread: the binary streams, so it may read while we write.
        let writer = std::thread::spawn(move || pipe.write_all(&bytes));
        writer.join().unwrap().unwrap();
    }
    let result = child.wait_with_output().unwrap();
    assert_eq!(
        result.status.code(),
        Some(0),
        "{name}: {}",
        String::from_utf8_lossy(&result.stderr)
    );
    std::fs::read_to_string(out.join("estimates.csv")).unwrap()
}

/// The estimates agree with the reference: same filters and rows, every number within 1e-9
/// relative. Returns the `t` column.
fn assert_same_estimates(name: &str, got: &str, reference: &str) -> Vec<String> {
    let rows = |text: &str| -> Vec<Vec<String>> {
        text.lines()
            .skip(1)
            .map(|l| {
                csv::ReaderBuilder::new()
                    .has_headers(false)
                    .from_reader(l.as_bytes())
                    .records()
                    .next()
                    .unwrap()
                    .unwrap()
                    .iter()
                    .map(String::from)
                    .collect()
            })
            .collect()
    };
    let (a, b) = (rows(got), rows(reference));
    assert_eq!(a.len(), b.len(), "{name}: rows");
    assert_eq!(
        got.lines().next(),
        reference.lines().next(),
        "{name}: header"
    );
    let mut times = Vec::new();
    for (i, (x, y)) in a.iter().zip(&b).enumerate() {
        assert_eq!(x[0], y[0], "{name}: filter of row {i}");
        times.push(x[1].clone());
        for (c, (p, q)) in x.iter().zip(y).enumerate().skip(2) {
            let (p, q): (f64, f64) = (p.parse().unwrap(), q.parse().unwrap());
            let scale = p.abs().max(q.abs()).max(f64::MIN_POSITIVE);
            assert!(
                (p - q).abs() <= 1e-9 * scale,
                "{name}: row {i} column {c}: {p} vs {q}"
            );
        }
    }
    times
}

#[test]
fn one_dataset_in_every_shape_gives_the_plain_files_estimates() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let (plain_path, header, rows) = plain(dir);
    let reference = estimates(dir, "plain", s(&plain_path), &[], None);
    let col = |name: &str| header.iter().position(|h| h == name).unwrap();
    let (t, y) = (col("t"), col("y.position"));
    let with_time = |f: &dyn Fn(usize) -> String| retimed(&rows, t, f);
    struct Shape {
        name: &'static str,
        header: Vec<String>,
        rows: Vec<Vec<String>>,
        comments: bool,
        flags: Vec<&'static str>,
        stdin: bool,
    }
    let shape = |name, rows, flags: &[&'static str]| Shape {
        name,
        header: header.clone(),
        rows,
        comments: false,
        flags: flags.to_vec(),
        stdin: false,
    };
    let mut shapes = vec![
        shape("iso_z", with_time(&|k| date_time(k, 0)), &[]),
        // The same instants written with offsets that change from row to row.
        shape(
            "iso_offsets",
            with_time(&|k| date_time(k, [2, -5, 0, 9][k % 4])),
            &[],
        ),
        // pandas writes a space instead of 'T' and a numeric +00:00.
        shape(
            "iso_space",
            with_time(&|k| date_time(k, 0).replace('T', " ").replace('Z', "+00:00")),
            &[],
        ),
        shape("epoch_seconds", with_time(&epoch_seconds), &[]),
        shape(
            "epoch_ms",
            with_time(&|k| (1_772_359_200_000u64 + 10 * k as u64).to_string()),
            &["--time-unit", "ms"],
        ),
        shape(
            "naive_with_timezone",
            with_time(&|k| date_time(k, 1).trim_end_matches("+01:00").to_string()),
            &["--timezone", "Europe/Berlin"],
        ),
    ];
    // A pandas index: an unnamed first column 0, 1, 2, ...
    let mut indexed = shape(
        "pandas_index",
        rows.iter()
            .enumerate()
            .map(|(k, r)| std::iter::once(k.to_string()).chain(r.clone()).collect())
            .collect(),
        &[],
    );
    indexed.header.insert(0, String::new());
    shapes.push(indexed);
    // Extra columns the model does not read.
    let mut extra = shape(
        "extra_columns",
        rows.iter()
            .map(|r| {
                let mut r = r.clone();
                r.push("ok".into());
                r.push("ann".into());
                r
            })
            .collect(),
        &[],
    );
    extra
        .header
        .extend(["notes".to_string(), "operator".to_string()]);
    shapes.push(extra);
    // A log's own column names, mapped.
    let mut renamed = shape(
        "renamed_with_map",
        rows.clone(),
        &[
            "--map",
            "sensor_a=y.position",
            "--map",
            "drive=u.torque",
            "--time",
            "stamp",
        ],
    );
    for h in renamed.header.iter_mut() {
        match h.as_str() {
            "y.position" => *h = "sensor_a".into(),
            "u.torque" => *h = "drive".into(),
            "t" => *h = "stamp".into(),
            _ => {}
        }
    }
    shapes.push(renamed);
    let na_rows: Vec<Vec<String>> = rows
        .iter()
        .map(|r| {
            let mut r = r.clone();
            if r[y].is_empty() {
                r[y] = "NA".into();
            }
            r
        })
        .collect();
    assert!(
        na_rows.iter().any(|r| r[y] == "NA"),
        "the dropout left no gap"
    );
    shapes.push(shape("na_tokens", na_rows.clone(), &["--missing", "NA"]));
    let mut commented = shape("comment_lines", rows.clone(), &[]);
    commented.comments = true;
    shapes.push(commented);
    let mut piped = shape("stdin", rows.clone(), &[]);
    piped.stdin = true;
    shapes.push(piped);
    // Everything at once, through standard input.
    let mut all = shape(
        "all_at_once",
        na_rows
            .iter()
            .enumerate()
            .map(|(k, r)| {
                let mut r = r.clone();
                r[t] = date_time(k, [2, 0][k % 2]);
                std::iter::once(k.to_string())
                    .chain(r)
                    .chain(["spare".to_string()])
                    .collect()
            })
            .collect(),
        &["--missing", "NA", "--map", "level=y.position"],
    );
    all.header = std::iter::once(String::new())
        .chain(header.iter().map(|h| {
            if h == "y.position" {
                "level".to_string()
            } else {
                h.clone()
            }
        }))
        .chain(["spare_sensor".to_string()])
        .collect();
    all.comments = true;
    all.stdin = true;
    shapes.push(all);

    for shape in shapes {
        let file = dir.join(format!("{}.csv", shape.name));
        write_rows(&file, &shape.header, &shape.rows, shape.comments);
        let got = if shape.stdin {
            estimates(dir, shape.name, "-", &shape.flags, Some(&file))
        } else {
            estimates(dir, shape.name, s(&file), &shape.flags, None)
        };
        let times = assert_same_estimates(shape.name, &got, &reference);
        // estimates.csv keeps the data's own time text.
        let first = &shape.rows[0][shape
            .header
            .iter()
            .position(|h| h == "t" || h == "stamp")
            .unwrap()];
        assert_eq!(&times[0], first, "{}: t as written", shape.name);
    }
}

#[test]
fn a_millisecond_log_is_refused_as_seconds_and_read_with_its_unit() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let (plain_path, header, rows) = plain(dir);
    let t = header.iter().position(|h| h == "t").unwrap();
    let ms = retimed(&rows, t, |k| (10 * k).to_string());
    let file = dir.join("ms.csv");
    write_rows(&file, &header, &ms, false);
    let out = dir.join("refused");
    let mut args = vec!["compare", "pendulum", s(&file)];
    args.extend_from_slice(&FILTERS);
    args.extend_from_slice(&["-o", s(&out)]);
    let result = sightline(&args);
    let stderr = String::from_utf8_lossy(&result.stderr);
    // Pendulum dt = 0.01 s; a 10 ms log read as seconds has 10 s intervals: 1000×.
    assert_eq!(result.status.code(), Some(2), "{stderr}");
    assert!(
        stderr.contains("ms.csv:1:")
            && stderr.contains("1000×")
            && stderr.contains("--time-unit ms"),
        "{stderr}"
    );
    assert!(!out.exists(), "nothing is written when refused");
    let reference = estimates(dir, "plain", s(&plain_path), &[], None);
    let got = estimates(dir, "ms", s(&file), &["--time-unit", "ms"], None);
    assert_same_estimates("ms", &got, &reference);
    // --accept-dt runs it anyway (10 s steps may well make filters fail: exit 1), with a note.
    let out = dir.join("accepted");
    args.pop();
    args.push(s(&out));
    args.push("--accept-dt");
    let result = sightline(&args);
    assert!(matches!(result.status.code(), Some(0 | 1)), "{result:?}");
    assert!(String::from_utf8_lossy(&result.stderr).contains("note: --accept-dt"));
    assert!(json(&out.join("summary.json"))["settings"]["dataset"]["accept_dt"] == true);
}

/// The settings of a result, parsed back.
fn settings_of(path: &Path) -> Settings {
    let text = std::fs::read_to_string(path).unwrap();
    let value: serde_json::Value = serde_json::from_str(&text).unwrap();
    serde_json::from_value(value["settings"].clone()).unwrap()
}

fn run_args(args: &[String]) {
    let refs: Vec<&str> = args.iter().map(String::as_str).collect();
    expect(&refs, 0);
}

#[test]
fn rerunning_from_a_results_settings_reproduces_it() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let (_, header, rows) = plain(dir);
    // A log with its own names, a ms clock from an epoch, NA gaps and a note column.
    let renamed: Vec<String> = header
        .iter()
        .map(|h| match h.as_str() {
            "t" => "time_ms".to_string(),
            "y.position" => "encoder".to_string(),
            h => h.to_string(),
        })
        .chain(["note".to_string()])
        .collect();
    let t = header.iter().position(|h| h == "t").unwrap();
    let y = header.iter().position(|h| h == "y.position").unwrap();
    let log_rows: Vec<Vec<String>> = rows
        .iter()
        .enumerate()
        .map(|(k, r)| {
            let mut r = r.clone();
            r[t] = (1_772_359_200_000u64 + 10 * k as u64).to_string();
            if r[y].is_empty() {
                r[y] = "null".into();
            }
            r.push("-".into());
            r
        })
        .collect();
    let log = dir.join("log.csv");
    write_rows(&log, &renamed, &log_rows, true);
    let first = dir.join("first");
    expect(
        &[
            "compare",
            "pendulum",
            s(&log),
            "-f",
            "ukf:alpha=0.5",
            "-f",
            "pf:particles=300",
            "--set",
            "qc=0.02",
            "--set",
            "x0.angle=0.55",
            "--seed",
            "7",
            "--time",
            "time_ms",
            "--time-unit",
            "ms",
            "--map",
            "encoder=y.position",
            "--missing",
            "null",
            "--smooth",
            "-o",
            s(&first),
        ],
        0,
    );
    let summary = json(&first.join("summary.json"));
    assert_eq!(summary["ignored_columns"], serde_json::json!(["note"]));
    let settings = settings_of(&first.join("summary.json"));
    assert_eq!(settings.command, "compare");
    assert_eq!(settings.set, vec!["qc=0.02", "x0.angle=0.55"]);
    assert_eq!(settings.seed, 7);
    assert!(!settings.model_description.is_empty());
    assert_eq!(settings.sightline_version, env!("CARGO_PKG_VERSION"));
    let dataset = settings.dataset.clone().unwrap();
    assert_eq!(
        (dataset.time.as_str(), dataset.time_unit.as_str()),
        ("time_ms", "ms")
    );
    assert_eq!(dataset.map, vec!["encoder=y.position"]);
    let again = dir.join("again");
    let mut args = settings.rerun_args(Some(s(&log)));
    args.extend(["-o".to_string(), s(&again).to_string()]);
    run_args(&args);
    for file in ["estimates.csv", "smoothed.csv"] {
        assert_eq!(
            std::fs::read(first.join(file)).unwrap(),
            std::fs::read(again.join(file)).unwrap(),
            "{file} reproduced byte for byte from the settings"
        );
    }
    assert_eq!(settings_of(&again.join("summary.json")), settings);
    let report = std::fs::read_to_string(first.join("report.html")).unwrap();
    assert!(report.contains("id=\"settings\"") && report.contains("--time-unit ms"));

    // A Monte Carlo campaign with sparse sensors, and its merge, carry their settings too.
    let mc = dir.join("mc");
    let campaign = [
        "montecarlo",
        "cv",
        "--runs",
        "6",
        "--steps",
        "40",
        "--seed",
        "3",
        "-f",
        "kf",
        "--every",
        "2",
        "--dropout",
        "0.25",
        "--set",
        "q=0.2",
    ];
    let mut args: Vec<&str> = campaign.to_vec();
    args.extend_from_slice(&["-o", s(&mc)]);
    expect(&args, 0);
    let mc_settings = settings_of(&mc.join("summary.json"));
    assert_eq!(
        (mc_settings.every, mc_settings.dropout),
        (Some(2), Some(0.25))
    );
    let rerun = dir.join("mc_again");
    let mut args = mc_settings.rerun_args(None);
    args.extend(["-o".to_string(), s(&rerun).to_string()]);
    run_args(&args);
    let strip = |p: &Path| {
        let mut v = json(p);
        for f in v["filters"].as_array_mut().unwrap() {
            f["seconds_per_step"] = serde_json::Value::Null;
        }
        v["verdict"] = serde_json::Value::Null;
        v
    };
    assert_eq!(
        strip(&mc.join("summary.json")),
        strip(&rerun.join("summary.json"))
    );
    for shard in ["1/2", "2/2"] {
        let mut args: Vec<&str> = campaign.to_vec();
        let out = dir.join(format!("shard{}", &shard[..1]));
        args.extend_from_slice(&["--shard", shard, "-o", s(&out)]);
        expect(&args, 0);
    }
    let merged = dir.join("merged");
    expect(
        &[
            "merge",
            s(&dir.join("shard1")),
            s(&dir.join("shard2")),
            "-o",
            s(&merged),
        ],
        0,
    );
    assert_eq!(settings_of(&merged.join("summary.json")), mc_settings);
    // Sparse sensors change the campaign (the NIS sees fewer components), as in simulate.
    let dense = dir.join("dense");
    expect(
        &[
            "montecarlo",
            "cv",
            "--runs",
            "6",
            "--steps",
            "40",
            "--seed",
            "3",
            "-f",
            "kf",
            "--set",
            "q=0.2",
            "-o",
            s(&dense),
        ],
        0,
    );
    assert_ne!(
        json(&dense.join("summary.json"))["filters"][0]["rmse_all"],
        json(&mc.join("summary.json"))["filters"][0]["rmse_all"]
    );

    // tune records its settings and reruns to the same maximum.
    let tuned = dir.join("tuned");
    expect(
        &[
            "tune",
            "pendulum",
            s(&log),
            "-f",
            "ukf",
            "--param",
            "qc",
            "--time",
            "time_ms",
            "--time-unit",
            "ms",
            "--map",
            "encoder=y.position",
            "--missing",
            "null",
            "-o",
            s(&tuned),
        ],
        0,
    );
    let tune_settings = settings_of(&tuned.join("tuned.json"));
    let again = dir.join("tuned_again");
    let mut args = tune_settings.rerun_args(Some(s(&log)));
    args.extend(["-o".to_string(), s(&again).to_string()]);
    run_args(&args);
    assert_eq!(
        json(&tuned.join("tuned.json"))["params"],
        json(&again.join("tuned.json"))["params"]
    );
}

#[test]
fn ambiguous_settings_are_refused() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let (plain_path, _, _) = plain(dir);
    let out = dir.join("out");
    let run = |extra: &[&str]| {
        let mut args = vec!["compare", "pendulum", s(&plain_path), "-f", "ekf"];
        args.extend_from_slice(extra);
        args.extend_from_slice(&["-o", s(&out)]);
        sightline(&args)
    };
    let twice = run(&["--set", "qc=0.01", "--set", "qc=0.02"]);
    let stderr = String::from_utf8_lossy(&twice.stderr);
    assert_eq!(twice.status.code(), Some(2), "{stderr}");
    assert!(stderr.contains("--set qc is given twice"), "{stderr}");
    let both = run(&["--set", "u.torque=0.5"]);
    let stderr = String::from_utf8_lossy(&both.stderr);
    assert_eq!(both.status.code(), Some(2), "{stderr}");
    assert!(stderr.contains("which one did you mean"), "{stderr}");
    // Two columns for one quantity (the truth x.rate mapped onto the measured y.position).
    let taken = run(&["--map", "x.rate=y.position"]);
    let stderr = String::from_utf8_lossy(&taken.stderr);
    assert_eq!(taken.status.code(), Some(2), "{stderr}");
    assert!(stderr.contains("both give y.position"), "{stderr}");
    assert!(!out.exists());
}

#[test]
fn extra_columns_are_ignored_with_one_warning_and_recorded() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let (_, mut header, rows) = plain(dir);
    header.extend(["notes".to_string(), "y.temperature".to_string()]);
    let rows: Vec<Vec<String>> = rows
        .into_iter()
        .map(|mut r| {
            r.extend(["fine".to_string(), "21.5".to_string()]);
            r
        })
        .collect();
    let file = dir.join("extra.csv");
    write_rows(&file, &header, &rows, false);
    let out = dir.join("out");
    let result = sightline(&["compare", "pendulum", s(&file), "-f", "ekf", "-o", s(&out)]);
    let stderr = String::from_utf8_lossy(&result.stderr);
    assert_eq!(result.status.code(), Some(0), "{stderr}");
    assert_eq!(stderr.matches("warning:").count(), 1, "{stderr}");
    assert!(stderr.contains("'notes', 'y.temperature'"), "{stderr}");
    assert_eq!(
        json(&out.join("summary.json"))["ignored_columns"],
        serde_json::json!(["notes", "y.temperature"])
    );
    let strict = sightline(&[
        "compare",
        "pendulum",
        s(&file),
        "-f",
        "ekf",
        "--strict-columns",
        "-o",
        s(&dir.join("strict")),
    ]);
    assert_eq!(strict.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&strict.stderr).contains("extra.csv:1:"));
}

#[test]
fn clock_times_reach_the_report() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let (_, header, rows) = plain(dir);
    let t = header.iter().position(|h| h == "t").unwrap();
    let rows = retimed(&rows, t, |k| date_time(k, 1));
    let file = dir.join("clock.csv");
    write_rows(&file, &header, &rows, false);
    let out = dir.join("out");
    expect(
        &["compare", "pendulum", s(&file), "-f", "ekf", "-o", s(&out)],
        0,
    );
    let report = std::fs::read_to_string(out.join("report.html")).unwrap();
    // 300 rows of 10 ms from 11:00:00+01:00: the axis reads in clock time at that offset.
    assert!(report.contains("clock time, UTC+01"), "axis label");
    assert!(report.contains("11:00:01"), "a clock tick");
    // Date-time data reruns from its settings too.
    let again = dir.join("again");
    let mut args = settings_of(&out.join("summary.json")).rerun_args(Some(s(&file)));
    args.extend(["-o".to_string(), s(&again).to_string()]);
    run_args(&args);
    assert_eq!(
        std::fs::read(out.join("estimates.csv")).unwrap(),
        std::fs::read(again.join("estimates.csv")).unwrap()
    );
}

#[test]
fn the_default_filter_set_fits_the_plant_and_degenerate_rules_are_refused() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let data = dir.join("chain.csv");
    expect(
        &[
            "simulate",
            "tankchain",
            "--set",
            "n=64",
            "--steps",
            "4",
            "--seed",
            "1",
            "-o",
            s(&data),
        ],
        0,
    );
    let out = dir.join("out");
    let result = sightline(&[
        "compare",
        "tankchain",
        s(&data),
        "--set",
        "n=64",
        "-o",
        s(&out),
    ]);
    let stderr = String::from_utf8_lossy(&result.stderr);
    assert_eq!(result.status.code(), Some(0), "{stderr}");
    // 3^64 Gauss–Hermite points exceed the 10^6 cap: ghkf is skipped, with one note.
    assert_eq!(stderr.matches("note:").count(), 1, "{stderr}");
    assert!(
        stderr.contains("skips") && stderr.contains("ghkf"),
        "{stderr}"
    );
    let labels: Vec<String> = json(&out.join("summary.json"))["filters"]
        .as_array()
        .unwrap()
        .iter()
        .map(|f| f["label"].as_str().unwrap().to_string())
        .collect();
    assert!(!labels.contains(&"ghkf".to_string()) && labels.contains(&"ukf".to_string()));
    let one_point = sightline(&[
        "compare",
        "tankchain",
        s(&data),
        "--set",
        "n=64",
        "-f",
        "ghkf:order=1",
        "-o",
        s(&dir.join("o1")),
    ]);
    let stderr = String::from_utf8_lossy(&one_point.stderr);
    assert_eq!(one_point.status.code(), Some(2), "{stderr}");
    assert!(stderr.contains("one-point rule"), "{stderr}");
}
