//! `compare --smooth`: smoothed accuracy in summary.json (`smoothed_rmse_all`, per state in
//! `smoothed_rmse`), the smoothed tracks in `smoothed.csv` and report.html, and the same numbers
//! as smoothing the filters directly through the library.

mod common;
mod common_cli;

use common_cli::{expect, json, s, without_truth};
use sightline::eval::dataset::Record;
use sightline::eval::dataset::read::{DatasetReader, ReadOptions, Schema};
use sightline::{FilterSpec, shipped};

/// The rows of a dataset file, read as `compare` reads them.
fn read_rows(path: &std::path::Path, plant: &dyn sightline::AnyPlant) -> Vec<Record> {
    let schema = Schema::of(plant, &[]);
    let mut reader = DatasetReader::open(path, &schema, ReadOptions::default()).unwrap();
    let mut rows = Vec::new();
    let mut r = Record::empty();
    while reader.next_into(&mut r).unwrap() {
        rows.push(r.clone());
    }
    rows
}

#[test]
fn compare_smooth_adds_smoothed_accuracy_tracks_and_plots() {
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("cv.csv");
    let out = dir.path().join("out");
    expect(
        &[
            "simulate",
            "cv",
            "--steps",
            "300",
            "--seed",
            "4",
            "-o",
            s(&data),
        ],
        0,
    );
    let specs = [
        "kf",
        "kf:gain=steady",
        "ukf",
        "pf:particles=500,smoother_paths=50",
    ];
    let mut args = vec![
        "compare",
        "cv",
        s(&data),
        "--smooth",
        "--seed",
        "3",
        "-o",
        s(&out),
    ];
    for spec in &specs {
        args.extend(["-f", spec]);
    }
    let stdout = expect(&args, 0);
    assert!(stdout.contains("smoothed"), "{stdout}");
    assert!(
        stdout.contains("kf:gain=steady has no smoother"),
        "{stdout}"
    );

    let summary = json(&out.join("summary.json"));
    let filters = summary["filters"].as_array().unwrap();
    let plants = shipped();
    let cv = plants.iter().find(|p| p.name() == "cv").unwrap();
    let rows = read_rows(&data, cv.as_ref());
    assert_eq!(rows.len(), 300);
    for (f, spec) in filters.iter().zip(specs) {
        assert_eq!(f["label"], spec);
        if spec == "kf:gain=steady" {
            assert!(f["smoothed_rmse_all"].is_null() && f["smoothed_rmse"].is_null());
            assert!(f["smoother"].is_null());
            continue;
        }
        let smoothed = f["smoothed_rmse_all"].as_f64().unwrap();
        let filtered = f["rmse_all"].as_f64().unwrap();
        // A smoother uses the later measurements too (Rauch, Tung & Striebel 1965).
        assert!(smoothed < filtered, "{spec}: {smoothed} vs {filtered}");
        let per_state = f["smoothed_rmse"].as_object().unwrap();
        assert_eq!(per_state.keys().collect::<Vec<_>>(), ["pos", "vel"]);
        // rmse_all = √(mean over steps and components) = √(mean of the per-state squares)
        // (design notes §4).
        let mean_square: f64 = per_state
            .values()
            .map(|v| v.as_f64().unwrap().powi(2))
            .sum::<f64>()
            / 2.0;
        assert!((mean_square.sqrt() - smoothed).abs() <= 1e-12 * smoothed);
        let kind = if spec.starts_with("pf") {
            "ffbsi"
        } else if spec == "kf" {
            "rts"
        } else {
            "sigma-point-rts"
        };
        assert_eq!(f["smoother"], kind, "{spec}");
    }
    // The kf's smoothed RMSE is that of the RTS smoother run directly on the same rows.
    let mut kf = cv
        .build_filter(&FilterSpec::parse("kf").unwrap(), 0)
        .unwrap();
    let (_, track) = common::run_and_smooth(kf.as_mut(), &rows);
    let direct = (common::squared_error(&track.unwrap().means, &rows) / 600.0).sqrt();
    let reported = filters[0]["smoothed_rmse_all"].as_f64().unwrap();
    assert!(
        (direct - reported).abs() <= 1e-12 * direct,
        "{direct} vs {reported}"
    );

    // smoothed.csv: the layout of estimates.csv, one row per smoothed filter per step.
    let mut csv = csv::Reader::from_path(out.join("smoothed.csv")).unwrap();
    let header: Vec<String> = csv.headers().unwrap().iter().map(String::from).collect();
    assert_eq!(
        header,
        ["filter", "t", "x.pos", "x.vel", "sd.pos", "sd.vel"]
    );
    let records: Vec<csv::StringRecord> = csv.records().map(|r| r.unwrap()).collect();
    assert_eq!(records.len(), 3 * 300);
    assert!(records.iter().all(|r| &r[0] != "kf:gain=steady"));
    // Its kf rows give the reported smoothed RMSE again.
    let mut squares = 0.0;
    for (r, row) in records.iter().filter(|r| &r[0] == "kf").zip(&rows) {
        let x = row.x.as_ref().unwrap();
        assert_eq!(r[1].parse::<f64>().unwrap(), row.t);
        for i in 0..2 {
            squares += (r[2 + i].parse::<f64>().unwrap() - x[i]).powi(2);
            assert!(r[4 + i].parse::<f64>().unwrap() > 0.0);
        }
    }
    assert!(((squares / 600.0).sqrt() - reported).abs() <= 1e-9 * reported);

    let html = std::fs::read_to_string(out.join("report.html")).unwrap();
    for id in ["smoothed-pos", "smoothed-vel", "smoothed-rmse"] {
        assert!(
            html.contains(&format!("data-plot=\"{id}\"")),
            "report lacks {id}"
        );
    }
}

#[test]
fn compare_without_smooth_writes_no_smoothed_outputs() {
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("cv.csv");
    let out = dir.path().join("out");
    expect(
        &[
            "simulate",
            "cv",
            "--steps",
            "50",
            "--seed",
            "4",
            "-o",
            s(&data),
        ],
        0,
    );
    expect(&["compare", "cv", s(&data), "-f", "kf", "-o", s(&out)], 0);
    assert!(!out.join("smoothed.csv").exists());
    let summary = json(&out.join("summary.json"));
    let f = &summary["filters"][0];
    assert!(f["smoothed_rmse_all"].is_null() && f["smoother"].is_null());
    let html = std::fs::read_to_string(out.join("report.html")).unwrap();
    assert!(!html.contains("data-plot=\"smoothed-pos\""));
}

#[test]
fn compare_smooth_without_truth_writes_tracks_but_no_accuracy() {
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("pend.csv");
    expect(
        &[
            "simulate",
            "pendulum",
            "--steps",
            "100",
            "--seed",
            "2",
            "-o",
            s(&data),
        ],
        0,
    );
    // Drop the x. columns, as in a real plant log.
    let log = dir.path().join("log.csv");
    without_truth(&data, &log);
    let out = dir.path().join("out");
    let stdout = expect(
        &[
            "compare",
            "pendulum",
            s(&log),
            "-f",
            "ekf",
            "--smooth",
            "-o",
            s(&out),
        ],
        0,
    );
    assert!(stdout.contains("no truth"), "{stdout}");
    let summary = json(&out.join("summary.json"));
    let f = &summary["filters"][0];
    assert!(f["smoothed_rmse_all"].is_null());
    assert_eq!(f["smoother"], "rts");
    let smoothed = csv::Reader::from_path(out.join("smoothed.csv"))
        .unwrap()
        .records()
        .count();
    assert_eq!(smoothed, 100);
    let html = std::fs::read_to_string(out.join("report.html")).unwrap();
    assert!(html.contains("data-plot=\"smoothed-angle\""));
}
