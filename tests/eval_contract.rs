//! The command and file contract of `compare`, `montecarlo` and `merge` (design notes §4):
//! exact column and key names, exit codes, and sharded campaigns merging into exactly the
//! unsharded result.

mod common_cli;
use common_cli::{expect, json, s, sightline, without_truth};
use serde_json::Value;

/// Keys every filter entry of summary.json carries (design notes §4, binding).
const FILTER_KEYS: &[&str] = &[
    "label",
    "kind",
    "status",
    "error",
    "rmse",
    "rmse_all",
    "rmse_all_ci",
    "anees",
    "nees_in_band",
    "anis",
    "nis_in_band",
    "log_likelihood",
    "seconds_per_step",
    "smoothed_rmse_all",
];
const CAMPAIGN_FILTER_KEYS: &[&str] = &["runs", "failures", "rmse_all_spread", "anees_band"];

fn is_number_or_null(v: &Value) -> bool {
    v.is_number() || v.is_null()
}

fn check_filter_entry(f: &Value, states: &[&str], truth: bool) {
    for k in FILTER_KEYS {
        assert!(f.get(k).is_some(), "filter entry lacks '{k}': {f}");
    }
    assert!(f["label"].is_string() && f["kind"].is_string());
    let status = f["status"].as_str().unwrap();
    assert!(status == "ok" || status == "failed" || status == "diverged");
    // rmse_all_ci: [lo, hi] around rmse_all with truth, null without.
    match f["rmse_all_ci"].as_array() {
        Some(ci) => {
            let (lo, hi) = (ci[0].as_f64().unwrap(), ci[1].as_f64().unwrap());
            let r = f["rmse_all"].as_f64().unwrap();
            assert!(lo <= r && r <= hi, "{f}");
        }
        None => assert!(f["rmse_all_ci"].is_null() && (!truth || status == "failed")),
    }
    assert!(f["error"].is_string() || f["error"].is_null());
    for k in [
        "rmse_all",
        "anees",
        "nees_in_band",
        "anis",
        "nis_in_band",
        "log_likelihood",
        "smoothed_rmse_all",
    ] {
        assert!(is_number_or_null(&f[k]), "{k} = {}", f[k]);
    }
    assert!(f["seconds_per_step"].is_number());
    if truth && status == "ok" {
        let rmse = f["rmse"].as_object().unwrap();
        let keys: Vec<&str> = rmse.keys().map(String::as_str).collect();
        let mut expected: Vec<&str> = states.to_vec();
        expected.sort();
        let mut got = keys.clone();
        got.sort();
        assert_eq!(got, expected);
        assert!(f["rmse_all"].is_number() && f["anees"].is_number());
    } else if !truth {
        assert!(f["rmse"].is_null() && f["rmse_all"].is_null() && f["anees"].is_null());
    }
    // No smoother runs without --smooth.
    assert!(f["smoothed_rmse_all"].is_null());
}

#[test]
fn compare_outputs_follow_the_contract() {
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("pend.csv");
    let out = dir.path().join("out");
    expect(
        &[
            "simulate",
            "pendulum",
            "--steps",
            "120",
            "--seed",
            "5",
            "-o",
            s(&data),
        ],
        0,
    );
    let stdout = expect(
        &[
            "compare",
            "pendulum",
            s(&data),
            "-f",
            "ekf",
            "-f",
            "ukf:alpha=0.5,beta=2",
            "-o",
            s(&out),
        ],
        0,
    );
    assert!(stdout.contains("report: ") && stdout.contains("not a universal ranking"));
    // estimates.csv: filter,t,x.<state>...,sd.<state>..., one row per filter per step.
    let mut csv = csv::Reader::from_path(out.join("estimates.csv")).unwrap();
    let header: Vec<String> = csv.headers().unwrap().iter().map(String::from).collect();
    assert_eq!(
        header,
        ["filter", "t", "x.angle", "x.rate", "sd.angle", "sd.rate"]
    );
    let rows: Vec<csv::StringRecord> = csv.records().map(|r| r.unwrap()).collect();
    assert_eq!(rows.len(), 2 * 120);
    assert_eq!(&rows[0][0], "ekf");
    // The label is the spec string as given, quoted because it holds a comma.
    assert_eq!(&rows[1][0], "ukf:alpha=0.5,beta=2");
    for r in &rows {
        for c in 1..6 {
            assert!(r[c].parse::<f64>().unwrap().is_finite());
        }
    }
    let summary = json(&out.join("summary.json"));
    assert_eq!(summary["model"], "pendulum");
    assert_eq!(summary["steps"], 120);
    assert!(summary["verdict"].is_string());
    // best: labels of the filters indistinguishable from the most accurate, that one first.
    let best = summary["best"].as_array().unwrap();
    assert!(
        !best.is_empty() && best.iter().all(|b| b.is_string()),
        "{best:?}"
    );
    assert_eq!(summary["best_by"], "rmse_all");
    let filters = summary["filters"].as_array().unwrap();
    assert_eq!(filters.len(), 2);
    assert_eq!(filters[1]["label"], "ukf:alpha=0.5,beta=2");
    assert_eq!(filters[1]["kind"], "ukf");
    for f in filters {
        check_filter_entry(f, &["angle", "rate"], true);
    }
    // rmse keeps model order.
    let text = std::fs::read_to_string(out.join("summary.json")).unwrap();
    assert!(text.find("\"angle\"").unwrap() < text.find("\"rate\"").unwrap());
    assert!(out.join("report.html").exists());
}

#[test]
fn compare_without_truth_judges_by_nis_whiteness_and_likelihood() {
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("pend.csv");
    expect(
        &[
            "simulate",
            "pendulum",
            "--steps",
            "300",
            "--seed",
            "9",
            "-o",
            s(&data),
        ],
        0,
    );
    // Drop the x. columns, as in a real plant log.
    let log = dir.path().join("log.csv");
    without_truth(&data, &log);
    let out = dir.path().join("out");
    expect(
        &[
            "compare",
            "pendulum",
            s(&log),
            "-f",
            "ekf",
            "-f",
            "ckf",
            "-o",
            s(&out),
        ],
        0,
    );
    let summary = json(&out.join("summary.json"));
    assert_eq!(summary["truth"], false);
    let criteria = summary["criteria"].to_string();
    assert!(criteria.contains("NIS") && criteria.contains("whiteness"));
    assert!(criteria.contains("log-likelihood") && !criteria.contains("RMSE"));
    for f in summary["filters"].as_array().unwrap() {
        check_filter_entry(f, &["angle", "rate"], false);
        assert!(f["anis"].is_number() && f["nis_in_band"].is_number());
        assert!(f["whiteness"]["white"].is_boolean());
    }
    let html = std::fs::read_to_string(out.join("report.html")).unwrap();
    assert!(html.contains("no true state"));
    assert!(html.contains("data-plot=\"whiteness-position\""));
    assert!(html.contains("data-plot=\"nis\"") && !html.contains("data-plot=\"nees\""));
}

#[test]
fn bad_input_exits_2_with_a_located_message() {
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("bad.csv");
    std::fs::write(&data, "t,u.torque,y.position\n0,0,0.1\n0.01,0,oops\n").unwrap();
    let out = sightline(&[
        "compare",
        "pendulum",
        s(&data),
        "-o",
        s(&dir.path().join("o")),
    ]);
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("bad.csv:3:3:") && err.contains("oops"),
        "{err}"
    );
    assert!(
        !dir.path().join("o").exists(),
        "no partial output is left behind"
    );
    let out = sightline(&["compare", "nosuch", s(&data), "-o", "x"]);
    assert_eq!(out.status.code(), Some(2));
    let out = sightline(&[
        "compare",
        "pendulum",
        s(&data),
        "-f",
        "ukf:bogus=1",
        "-o",
        "x",
    ]);
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("bogus"));
    let out = sightline(&[
        "montecarlo",
        "cv",
        "--runs",
        "4",
        "--steps",
        "5",
        "--shard",
        "5/4",
        "-o",
        "x",
    ]);
    assert_eq!(out.status.code(), Some(2));
}

/// Removes what is a wall-clock measurement (and the text that quotes it) before comparing.
fn without_timing(mut v: Value) -> Value {
    match &mut v {
        Value::Object(map) => {
            // `content_sha256` of partial.json covers the timings too.
            for k in ["seconds_per_step", "seconds", "verdict", "content_sha256"] {
                map.remove(k);
            }
            for (_, x) in map.iter_mut() {
                *x = without_timing(x.take());
            }
        }
        Value::Array(items) => {
            for x in items.iter_mut() {
                *x = without_timing(x.take());
            }
        }
        _ => {}
    }
    v
}

#[test]
fn merged_shards_equal_the_unsharded_campaign_exactly() {
    let dir = tempfile::tempdir().unwrap();
    let common = [
        "montecarlo",
        "cv",
        "--runs",
        "23",
        "--steps",
        "40",
        "-f",
        "kf",
        "-f",
        "ukf",
        "-f",
        "pf:particles=200",
        "--seed",
        "17",
    ];
    let whole = dir.path().join("whole");
    let mut args = common.to_vec();
    args.extend(["-o", s(&whole)]);
    expect(&args, 0);
    let mut shards = Vec::new();
    for k in 1..=3 {
        let d = dir.path().join(format!("shard{k}"));
        let spec = format!("{k}/3");
        let mut args = common.to_vec();
        args.extend(["--shard", &spec, "-o", s(&d)]);
        expect(&args, 0);
        shards.push(d);
    }
    let shard1 = json(&shards[0].join("summary.json"));
    assert_eq!(shard1["runs"], 7, "shard 1/3 of 23 runs holds runs 0..7");
    let merged = dir.path().join("merged");
    let mut args = vec!["merge"];
    // Any order of the shard directories gives the same result.
    args.extend([s(&shards[2]), s(&shards[0]), s(&shards[1])]);
    args.extend(["-o", s(&merged)]);
    expect(&args, 0);
    let a = json(&whole.join("summary.json"));
    let b = json(&merged.join("summary.json"));
    assert_eq!(a["runs"], 23);
    // The Cramér–Rao bound is computed from exact sums too: merged equals unsharded.
    assert!(
        a["pcrlb_rmse_all"].is_f64(),
        "campaign on cv carries its PCRLB"
    );
    assert_eq!(a["pcrlb_rmse_all"], b["pcrlb_rmse_all"]);
    assert_eq!(a["pcrlb_rmse"], b["pcrlb_rmse"]);
    for f in a["filters"].as_array().unwrap() {
        check_filter_entry(f, &["pos", "vel"], true);
        for k in CAMPAIGN_FILTER_KEYS {
            assert!(f.get(k).is_some(), "campaign entry lacks '{k}'");
        }
        assert_eq!(
            f["runs"].as_u64().unwrap() + f["failures"].as_u64().unwrap(),
            23
        );
        let band = f["anees_band"].as_array().unwrap();
        assert!(band[0].as_f64().unwrap() < 2.0 && band[1].as_f64().unwrap() > 2.0);
    }
    // Bit-identical floats: serde_json reads them back exactly (float_roundtrip), so Value
    // equality is equality of every bit.
    assert_eq!(without_timing(a), without_timing(b));
    let pa = json(&whole.join("partial.json"));
    let pb = json(&merged.join("partial.json"));
    assert_eq!(without_timing(pa), without_timing(pb));
    // Incomplete or overlapping shard sets are refused.
    let out = sightline(&[
        "merge",
        s(&shards[0]),
        s(&shards[1]),
        "-o",
        s(&dir.path().join("m2")),
    ]);
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("15..23"));
    let out = sightline(&[
        "merge",
        s(&shards[0]),
        s(&whole),
        "-o",
        s(&dir.path().join("m3")),
    ]);
    assert_eq!(out.status.code(), Some(2));
}
