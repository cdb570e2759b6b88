//! `sightline observe`: rank, per-state bounds and unobservable directions against closed forms
//! and the plants' own structure.

mod common_cli;

use std::path::Path;

use common_cli::{expect, json, s, sightline};
use serde_json::Value;

/// Runs `observe` with `args` into `dir/name` and returns its `observability.json`.
fn observe(dir: &Path, name: &str, args: &[&str]) -> Value {
    let out = dir.join(name);
    let mut all = vec!["observe"];
    all.extend_from_slice(args);
    all.extend_from_slice(&["-o", s(&out)]);
    expect(&all, 0);
    json(&out.join("observability.json"))
}

fn states(v: &Value) -> &Vec<Value> {
    v["states"].as_array().unwrap()
}

fn observable(v: &Value) -> Vec<bool> {
    states(v)
        .iter()
        .map(|s| s["observable"].as_bool().unwrap())
        .collect()
}

fn directions(v: &Value) -> Vec<String> {
    v["unobservable_directions"]
        .as_array()
        .unwrap()
        .iter()
        .map(|d| d["combination"].as_str().unwrap().to_string())
        .collect()
}

fn rel(a: f64, b: f64) -> f64 {
    (a - b).abs() / b.abs()
}

/// Linear plant with its position measured: `sd_bound` = √diag((Σ (C Aᵏ)ᵀ R⁻¹ C Aᵏ)⁻¹) and the
/// singular values of S J S from a committed numpy script (tests/reference/observability_cv.py,
/// closed form built from matrix powers), to 1e-9 relative.
#[test]
fn cv_bounds_equal_the_closed_form_from_numpy() {
    let fixture: Value =
        serde_json::from_str(include_str!("reference/observability_cv.json")).unwrap();
    let dir = tempfile::tempdir().unwrap();
    for (c, case) in fixture["cases"].as_array().unwrap().iter().enumerate() {
        let set = |k: &str| format!("{k}={}", case[k].as_f64().unwrap());
        let sd0 = case["sd0"].as_array().unwrap();
        let (dt, r) = (set("dt"), set("r"));
        let sd_pos = format!("sd0.pos={}", sd0[0]);
        let sd_vel = format!("sd0.vel={}", sd0[1]);
        let steps = case["steps"].to_string();
        let v = observe(
            dir.path(),
            &format!("case{c}"),
            &[
                "cv", "--set", &dt, "--set", &r, "--set", &sd_pos, "--set", &sd_vel, "--steps",
                &steps,
            ],
        );
        assert_eq!(v["rank"], 2, "case {c}");
        assert_eq!(v["steps"].as_u64(), case["steps"].as_u64());
        assert_eq!(v["trajectory"], "simulation");
        for (i, want) in case["sd_bound"].as_array().unwrap().iter().enumerate() {
            let got = states(&v)[i]["sd_bound"].as_f64().unwrap();
            let want = want.as_f64().unwrap();
            assert!(rel(got, want) < 1e-9, "case {c} state {i}: {got} vs {want}");
        }
        let sv = v["singular_values"].as_array().unwrap();
        for (i, want) in case["singular_values"]
            .as_array()
            .unwrap()
            .iter()
            .enumerate()
        {
            let (got, want) = (sv[i].as_f64().unwrap(), want.as_f64().unwrap());
            assert!(rel(got, want) < 1e-9, "case {c} σ{i}: {got} vs {want}");
        }
        let want_cond = case["singular_values"][0].as_f64().unwrap()
            / case["singular_values"][1].as_f64().unwrap();
        assert!(rel(v["conditioning"].as_f64().unwrap(), want_cond) < 1e-9);
        assert!(directions(&v).is_empty());
    }
}

/// The contract's keys (design.md §4) are all there, with the types it names.
#[test]
fn observability_json_has_the_contract_keys() {
    let dir = tempfile::tempdir().unwrap();
    let v = observe(dir.path(), "a", &["quadtank", "--sensors", "level1"]);
    assert!(v["rank"].is_u64());
    assert!(
        v["singular_values"]
            .as_array()
            .unwrap()
            .iter()
            .all(Value::is_f64)
    );
    // Numerically singular: no meaningful ratio.
    assert!(v["conditioning"].is_null());
    for st in states(&v) {
        assert!(st["name"].is_string());
        assert!(st["observable"].is_boolean());
        assert!(st["sd_bound"].is_f64() || st["sd_bound"].is_null());
    }
    assert!(v["unobservable_directions"].is_array());
    assert_eq!(v["settings"]["command"], "observe");
    assert_eq!(v["settings"]["sensors"], "level1");
    assert!(dir.path().join("a/manifest.json").exists());
    let html = std::fs::read_to_string(dir.path().join("a/report.html")).unwrap();
    assert!(html.contains("<svg") && html.contains("not observable"));
    // The rerun line of the report is the command itself (no seed: observe draws none).
    assert!(
        html.contains("sightline observe quadtank --sensors level1 -o DIR"),
        "{html}"
    );
}

/// The quadruple-tank process (Johansson, IEEE TCST 8(3), 2000, eq. 1; as written in
/// models/src/quadtank.rs): dh1/dt depends on h1 and h3 only (tank 3 drains into tank 1), dh3/dt
/// on h3 only, and level1 = kc·h1. So with `--sensors level1` the measurements depend on h1 and
/// h3 alone: rank 2, null space spanned exactly by h2 and h4. Symmetrically level2 sees h2 and
/// h4. With both sensors all four are observable.
#[test]
fn quadtank_level1_sees_tanks_1_and_3_only() {
    let dir = tempfile::tempdir().unwrap();
    let one = observe(dir.path(), "one", &["quadtank", "--sensors", "level1"]);
    assert_eq!(one["rank"], 2);
    assert_eq!(observable(&one), [true, false, true, false]);
    assert_eq!(directions(&one), ["h2", "h4"]);
    let coefficients: Vec<Vec<f64>> = one["unobservable_directions"]
        .as_array()
        .unwrap()
        .iter()
        .map(|d| serde_json::from_value(d["coefficients"].clone()).unwrap())
        .collect();
    assert_eq!(coefficients, [[0.0, 1.0, 0.0, 0.0], [0.0, 0.0, 0.0, 1.0]]);
    assert!(states(&one)[1]["sd_bound"].is_null());
    assert_eq!(one["reading"], "not observable");

    let both = observe(dir.path(), "both", &["quadtank"]);
    assert_eq!(both["rank"], 4);
    assert_eq!(observable(&both), [true; 4]);
    assert!(directions(&both).is_empty());
    // Adding a sensor can only add information: every bound of level1 alone is matched or
    // beaten (common practice: information adds).
    for i in [0, 2] {
        let b1 = states(&one)[i]["sd_bound"].as_f64().unwrap();
        let b2 = states(&both)[i]["sd_bound"].as_f64().unwrap();
        assert!(b2 <= b1 * (1.0 + 1e-12), "state {i}: {b2} > {b1}");
    }

    // The same answer side by side, and along a noisy dataset's truth.
    let sets = observe(
        dir.path(),
        "sets",
        &[
            "quadtank",
            "--compare-sensors",
            "level1|level2|level1,level2",
        ],
    );
    let ranks: Vec<u64> = sets["sensor_sets"]
        .as_array()
        .unwrap()
        .iter()
        .map(|s| s["rank"].as_u64().unwrap())
        .collect();
    assert_eq!(ranks, [2, 2, 4]);
    assert_eq!(directions(&sets["sensor_sets"][1]), ["h1", "h3"]);
    for set in sets["sensor_sets"].as_array().unwrap() {
        // quadtank has process noise in every tank: a PCRLB for every state of every set.
        assert!(
            states(set)
                .iter()
                .all(|s| s["pcrlb_sd"].as_f64().unwrap() > 0.0)
        );
    }
    let data = dir.path().join("quad.csv");
    expect(
        &[
            "simulate",
            "quadtank",
            "--steps",
            "200",
            "--seed",
            "4",
            "-o",
            s(&data),
        ],
        0,
    );
    let along = observe(
        dir.path(),
        "data",
        &["quadtank", s(&data), "--sensors", "level1"],
    );
    assert_eq!(along["trajectory"], "truth");
    assert_eq!(along["steps"], 200);
    assert_eq!(along["rank"], 2);
    assert_eq!(directions(&along), ["h2", "h4"]);
}

/// A pendulum seen through its horizontal position y = L·sin θ: ∂y/∂θ = L·cos θ, ∂y/∂θ̇ = 0.
/// Swinging, the angle shows in every position and the rate in how it changes: rank 2. Held
/// horizontal (θ = π/2, rate 0) by the constant torque g/L that balances gravity, it stays there
/// and every row has ∂y/∂x = (L·cos(π/2), 0) = 0 (to rounding, cos(fl(π/2)) ≈ 6·10⁻¹⁷), so no
/// measurement says anything about either state: rank 0. Held at θ = 1.2 by the torque
/// (g/L)·sin 1.2 the slope L·cos 1.2 is not zero and the linearised dynamics carry the rate into
/// the angle: rank 2 again (closed form of the Kalman rank test, common practice).
#[test]
fn pendulum_loses_rank_where_the_position_does_not_depend_on_the_angle() {
    let dir = tempfile::tempdir().unwrap();
    let swinging = observe(dir.path(), "swing", &["pendulum"]);
    assert_eq!(swinging["rank"], 2);
    assert_eq!(swinging["reading"], "well observable");

    let g_over_l = 9.80665_f64 / 1.0; // the plant's defaults (sightline models)
    let torque = format!("u.torque={g_over_l}");
    let horizontal = format!("x0.angle={}", std::f64::consts::FRAC_PI_2);
    let held = observe(
        dir.path(),
        "held",
        &[
            "pendulum",
            "--set",
            &horizontal,
            "--set",
            "x0.rate=0",
            "--set",
            &torque,
        ],
    );
    assert_eq!(held["rank"], 0);
    assert_eq!(observable(&held), [false, false]);
    assert_eq!(directions(&held), ["angle", "rate"]);

    let tilted_torque = format!("u.torque={}", g_over_l * 1.2_f64.sin());
    let tilted = observe(
        dir.path(),
        "tilted",
        &[
            "pendulum",
            "--set",
            "x0.angle=1.2",
            "--set",
            "x0.rate=0",
            "--set",
            &tilted_torque,
        ],
    );
    assert_eq!(tilted["rank"], 2);
    assert_eq!(observable(&tilted), [true, true]);
}

/// `tankchain`, the runtime-sized cascade (models/src/tankchain.rs): tank i drains into tank
/// i + 1 and only the last level is measured. Linearised, A is lower bidiagonal with non-zero
/// sub-diagonal (each tank feeds the next) and C = e_nᵀ, so C Aᵏ first reaches tank n − k at
/// power k: the Kalman rank test gives rank n (common practice). Numerically the first tanks
/// fade: over 100 s the last level's sensitivity to h1 of a 64-tank chain is of order
/// (100/T)⁶³/63! with T ≈ 56 s, far below rounding, so h1 is not observable there while h64 is.
#[test]
fn tankchain_last_tank_only_has_full_structural_rank() {
    let dir = tempfile::tempdir().unwrap();
    let four = observe(
        dir.path(),
        "four",
        &["tankchain", "--set", "n=4", "--steps", "300"],
    );
    assert_eq!(four["rank"], 4);
    assert_eq!(observable(&four), [true; 4]);
    let eight = observe(dir.path(), "eight", &["tankchain"]);
    assert_eq!(eight["rank"], 8);
    assert_eq!(observable(&eight), [true; 8]);

    let long = observe(dir.path(), "long", &["tankchain", "--set", "n=64"]);
    assert_eq!(states(&long).len(), 64);
    let seen = observable(&long);
    assert!(!seen[0] && seen[63], "{seen:?}");
    assert!(long["rank"].as_u64().unwrap() < 64);
}

/// A dataset without truth is followed by the noise-free prediction from the prior mean
/// through its own inputs; `--steps` keeps its first rows and may not exceed them.
#[test]
fn data_without_truth_is_followed_by_prediction() {
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("cv.csv");
    let log = dir.path().join("log.csv");
    expect(
        &[
            "simulate",
            "cv",
            "--steps",
            "50",
            "--seed",
            "1",
            "-o",
            s(&data),
        ],
        0,
    );
    common_cli::without_truth(&data, &log);
    let v = observe(dir.path(), "log", &["cv", s(&log), "--steps", "20"]);
    assert_eq!(v["trajectory"], "prediction");
    assert_eq!(v["steps"], 20);
    // Linear: J does not depend on the trajectory, so the prediction through the data gives
    // the simulated window's bounds (common practice: the Gramian of an LTI system).
    let simulated = observe(dir.path(), "sim", &["cv", "--steps", "20"]);
    assert_eq!(v["rank"], 2);
    for i in 0..2 {
        let a = states(&v)[i]["sd_bound"].as_f64().unwrap();
        let b = states(&simulated)[i]["sd_bound"].as_f64().unwrap();
        assert!(rel(a, b) < 1e-12, "{a} vs {b}");
    }
    let out = sightline(&[
        "observe",
        "cv",
        s(&log),
        "--steps",
        "51",
        "-o",
        s(&dir.path().join("x")),
    ]);
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("has only 50 rows"));
}

/// Bad sensor names and an empty window are usage errors that name the option and the choices.
#[test]
fn bad_sensor_lists_are_refused() {
    let dir = tempfile::tempdir().unwrap();
    let o = dir.path().join("o");
    for (args, needle) in [
        (
            vec!["quadtank", "--sensors", "level3"],
            "valid: level1, level2",
        ),
        (
            vec!["quadtank", "--sensors", "level1,level1"],
            "named twice",
        ),
        (
            vec!["quadtank", "--compare-sensors", "level1|"],
            "empty sensor name",
        ),
        (vec!["cv", "--steps", "0"], "--steps must be at least 1"),
    ] {
        let mut all = vec!["observe"];
        all.extend(&args);
        all.extend(["-o", s(&o)]);
        let out = sightline(&all);
        assert_eq!(out.status.code(), Some(2), "{args:?}");
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(err.contains(needle), "{args:?}: {err}");
        assert!(!o.exists());
    }
}

/// Copies the dataset `data` to `out` with the column `column` left empty on every row (a
/// sensor that was never connected).
fn blank_column(data: &Path, out: &Path, column: &str) {
    let mut reader = csv::Reader::from_path(data).unwrap();
    let header = reader.headers().unwrap().clone();
    let at = header.iter().position(|h| h == column).unwrap();
    let mut w = csv::Writer::from_path(out).unwrap();
    w.write_record(&header).unwrap();
    for r in reader.records() {
        let r = r.unwrap();
        let row: Vec<&str> = (0..r.len())
            .map(|i| if i == at { "" } else { &r[i] })
            .collect();
        w.write_record(&row).unwrap();
    }
    w.flush().unwrap();
}

/// `compare` on quadtank data whose level2 sensor is empty: h2 and h4 are not observable
/// (Johansson 2000's flow structure, as above), so the report gains its "Observability"
/// section. A five-member ensemble Kalman filter shrinks its spread on them through the
/// sampling error of its gain (spurious correlations of a small ensemble; Houtekamer & Mitchell,
/// Mon. Weather Rev. 126, 1998, from memory) and the verdict warns about it; the EKF, whose
/// covariance follows the same prior and process noise the bound uses, gets no warning. With
/// both sensors there is neither section nor warning.
#[test]
fn compare_reports_unobservable_states_and_unearned_confidence() {
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("quad.csv");
    let blind = dir.path().join("blind.csv");
    expect(
        &[
            "simulate",
            "quadtank",
            "--steps",
            "300",
            "--seed",
            "2",
            "-o",
            s(&data),
        ],
        0,
    );
    blank_column(&data, &blind, "y.level2");
    let out = dir.path().join("blind");
    let stdout = expect(
        &[
            "compare",
            "quadtank",
            s(&blind),
            "-f",
            "ekf",
            "-f",
            "enkf:members=5",
            "-o",
            s(&out),
        ],
        0,
    );
    let summary = json(&out.join("summary.json"));
    let verdict = summary["verdict"].as_str().unwrap();
    for state in ["h2", "h4"] {
        assert!(
            verdict.contains("Warning: enkf:members=5 reports sd")
                && verdict.contains(&format!(" on {state} at t = ")),
            "{verdict}"
        );
    }
    assert!(!verdict.contains("Warning: ekf "), "{verdict}");
    assert!(stdout.contains("a state the sensors cannot see"));
    let html = std::fs::read_to_string(out.join("report.html")).unwrap();
    assert!(html.contains("<h2 id=\"observability\">Observability</h2>"));
    assert!(html.contains("Sensors level1: rank 2 of 4"), "{html}");
    assert!(html.contains("h2; h4"));

    let seen = dir.path().join("seen");
    expect(
        &[
            "compare",
            "quadtank",
            s(&data),
            "-f",
            "ekf",
            "-f",
            "enkf:members=5",
            "-o",
            s(&seen),
        ],
        0,
    );
    let verdict = json(&seen.join("summary.json"))["verdict"]
        .as_str()
        .unwrap()
        .to_string();
    assert!(!verdict.contains("cannot see"), "{verdict}");
    let html = std::fs::read_to_string(seen.join("report.html")).unwrap();
    assert!(!html.contains("id=\"observability\""));
}

/// `montecarlo` follows the nominal run: the tank chain's first tanks are known no better from
/// the last level than from the prior over 50 s (weakly observable), so its report has the
/// section; the cv plant's does not.
#[test]
fn montecarlo_reports_weakly_observable_states() {
    let dir = tempfile::tempdir().unwrap();
    let chain = dir.path().join("chain");
    expect(
        &[
            "montecarlo",
            "tankchain",
            "--set",
            "n=4",
            "--runs",
            "2",
            "--steps",
            "50",
            "-f",
            "ekf",
            "-o",
            s(&chain),
        ],
        0,
    );
    let html = std::fs::read_to_string(chain.join("report.html")).unwrap();
    assert!(html.contains("id=\"observability\""));
    assert!(html.contains("weakly observable"));
    let cv = dir.path().join("cv");
    expect(
        &[
            "montecarlo",
            "cv",
            "--runs",
            "2",
            "--steps",
            "50",
            "-f",
            "kf",
            "-o",
            s(&cv),
        ],
        0,
    );
    let html = std::fs::read_to_string(cv.join("report.html")).unwrap();
    assert!(!html.contains("id=\"observability\""));
}
