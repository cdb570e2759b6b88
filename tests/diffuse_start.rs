//! The diffuse initial state (`--diffuse`): the exact diffuse Kalman filter against closed forms
//! and the independent reference of `tests/reference/nile.py`, the large-variance approximation
//! of the other Gaussian filters against it, and the command line's refusals.

mod common;
mod common_cli;

use std::path::{Path, PathBuf};

use common::{fixture, numbers};
use common_cli::{expect, json, s, sightline};
use sightline::eval::campaign::CampaignSpec;
use sightline::eval::partial;
use sightline::filters::Filter;
use sightline::{AnyPlant, FilterSpec, shipped};

fn nile_csv() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data/nile.csv")
}

/// The Nile series (year, flow) of tests/data/nile.csv.
fn nile() -> Vec<(f64, f64)> {
    std::fs::read_to_string(nile_csv())
        .unwrap()
        .lines()
        .filter(|l| !l.starts_with('#'))
        .skip(1)
        .map(|l| {
            let (t, y) = l.split_once(',').unwrap();
            (t.parse().unwrap(), y.parse().unwrap())
        })
        .collect()
}

/// A shipped plant by name with `--set` values and `--diffuse` states applied.
fn plant(name: &str, set: &[(&str, f64)], diffuse: &[&str]) -> Box<dyn AnyPlant> {
    let mut plant = shipped().into_iter().find(|p| p.name() == name).unwrap();
    for (k, v) in set {
        plant.set(k, *v).unwrap();
    }
    let diffuse: Vec<String> = diffuse.iter().map(|d| d.to_string()).collect();
    plant.set_diffuse(&diffuse).unwrap();
    plant
}

fn filter(plant: &dyn AnyPlant, spec: &str) -> Box<dyn Filter> {
    plant
        .build_filter(&FilterSpec::parse(spec).unwrap(), 0)
        .unwrap()
}

/// Runs a scalar-measurement filter over `(t, y)` rows; returns (means, variances, log-lik) of
/// every row.
fn run(f: &mut dyn Filter, rows: &[(f64, f64)]) -> (Vec<f64>, Vec<f64>, f64) {
    let (mut means, mut vars, mut ll) = (Vec::new(), Vec::new(), 0.0);
    for (k, &(t, y)) in rows.iter().enumerate() {
        if k > 0 {
            let t0 = rows[k - 1].0;
            f.predict(&[], t0, t - t0).unwrap();
        }
        f.update(&[y], &[], t).unwrap();
        ll += f.log_likelihood_increment();
        means.push(f.mean()[0]);
        vars.push(f.covariance()[0]);
    }
    (means, vars, ll)
}

/// What a diffuse observation with F∞ = 1 adds to the diffuse log-likelihood: −½(ln 2π + ln F∞)
/// (D&K §7.2.2, eq. 7.4, from memory).
const DIFFUSE_FIRST: f64 = -0.918_938_533_204_672_7;

/// Closed form (Durbin & Koopman, *Time Series Analysis by State Space Methods*, 2nd ed. 2012,
/// §2.9, from memory): on the local-level model the exact diffuse filter after the first
/// observation y₁ has mean y₁ and variance σ²_ε = r whatever the prior; the prediction adds
/// σ²_η = q. The first observation is the diffuse part: in the diffuse log-likelihood (D&K
/// §7.2.2, eq. 7.4, from memory) it adds only the constant −½ ln 2π, its w₁ = ln F∞ being 0
/// (P∞ = 1).
#[test]
fn local_level_after_one_observation_has_mean_y1_and_variance_r() {
    for (q, r, y1) in [
        (2.0, 3.0, 5.0),
        (1469.1, 15099.0, 1120.0),
        (1e-3, 40.0, -7.5),
    ] {
        // A prior mean and spread that would matter if the start were not diffuse.
        let p = plant("local-level", &[("q", q), ("r", r)], &["level"]);
        let mut f = filter(p.as_ref(), "kf");
        f.update(&[y1], &[], 0.0).unwrap();
        assert_eq!(f.mean()[0], y1, "q={q} r={r}");
        assert!((f.covariance()[0] - r).abs() <= 1e-12 * r, "q={q} r={r}");
        assert!((f.log_likelihood_increment() - DIFFUSE_FIRST).abs() < 1e-15);
        assert!(f.innovation().is_none(), "no NIS for a diffuse update");
        f.predict(&[], 0.0, 1.0).unwrap();
        assert!((f.covariance()[0] - (r + q)).abs() <= 1e-12 * (r + q));
        assert_eq!(f.mean()[0], y1);
    }
}

/// Missing measurements (empty cells) during the diffuse period leave it open: the level stays
/// unbounded until the first observation, which then gives mean y and variance r exactly (the
/// closed form above, D&K §2.9, with the prediction over the gap adding nothing to an unbounded
/// variance; D&K §2.7 for missing observations). The missing rows add nothing to the likelihood.
#[test]
fn missing_rows_keep_the_diffuse_period_open() {
    let p = plant("local-level", &[("q", 2.0), ("r", 3.0)], &["level"]);
    let mut f = filter(p.as_ref(), "kf");
    for k in 0..3 {
        if k > 0 {
            f.predict(&[], k as f64 - 1.0, 1.0).unwrap();
        }
        f.update(&[f64::NAN], &[], k as f64).unwrap();
        assert_eq!(f.log_likelihood_increment(), 0.0);
        assert!(f.covariance()[0] > 1e8, "still unbounded at row {k}");
    }
    f.predict(&[], 2.0, 1.0).unwrap();
    f.update(&[4.25], &[], 3.0).unwrap();
    assert_eq!(f.mean()[0], 4.25);
    assert!((f.covariance()[0] - 3.0).abs() < 1e-12);
    f.predict(&[], 3.0, 1.0).unwrap();
    f.update(&[5.0], &[], 4.0).unwrap();
    // The ordinary filter from here: F = r + q + r, v = 0.75.
    let (big_f, v) = (3.0 + 2.0 + 3.0, 0.75);
    let want = -0.5 * ((2.0 * std::f64::consts::PI).ln() + f64::ln(big_f) + v * v / big_f);
    assert!((f.log_likelihood_increment() - want).abs() < 1e-12);
    assert!(f.innovation().is_some());
}

/// tests/reference/nile.py (numpy, written from D&K §2.9 and §7.2.2): the filtered means and
/// variances of every year and the diffuse log-likelihood on the Nile at D&K's maximum-likelihood
/// variances σ²_ε = 15099, σ²_η = 1469.1 (D&K 2012 §2.10, from memory). The script also checks its
/// log-likelihood against the exact likelihood of the differenced series (a dense MA(1)
/// computation), so the value is pinned by two independent routes.
#[test]
fn nile_matches_the_reference_script() {
    let reference = fixture("nile_diffuse.json");
    let p = plant("local-level", &[("q", 1469.1), ("r", 15099.0)], &["level"]);
    let mut f = filter(p.as_ref(), "kf");
    let (means, vars, ll) = run(f.as_mut(), &nile());
    let want_means = numbers(&reference["filtered_mean"]);
    let want_vars = numbers(&reference["filtered_variance"]);
    assert_eq!(means.len(), 100);
    for k in 0..100 {
        assert!(
            (means[k] - want_means[k]).abs() <= 1e-9 * want_means[k].abs(),
            "year {}: mean {} vs {}",
            1871 + k,
            means[k],
            want_means[k]
        );
        assert!(
            (vars[k] - want_vars[k]).abs() <= 1e-9 * want_vars[k],
            "year {}: variance {} vs {}",
            1871 + k,
            vars[k],
            want_vars[k]
        );
    }
    let want = reference["diffuse_log_likelihood"].as_f64().unwrap();
    let differences = reference["differences_log_likelihood"].as_f64().unwrap();
    assert!((ll - want).abs() < 1e-9, "{ll} vs {want}");
    // D&K eq. (7.4) counts the constant of every observation, the differences' likelihood
    // one fewer.
    let first_constant = -0.5 * (2.0 * std::f64::consts::PI).ln();
    assert!(
        (ll - (differences + first_constant)).abs() < 1e-9,
        "{ll} vs {differences} + {first_constant}"
    );
}

/// The large-variance approximation (κ = 10⁸ × the declared prior variance) agrees with the exact
/// diffuse filter after the diffuse period to about r/κ relative (1.5·10⁻⁴ here, κ = 10⁸ with
/// the declared sd0 = 1) plus the round-off of the first update's cancellation: checked within
/// 10⁻⁶ relative for the means and 10⁻⁵ for the variances on the Nile (our tolerance), for every
/// Gaussian kind; a constant-gain kf, whose gain ignores the prior, from year 60 on. Its log-likelihood is not the diffuse one (it keeps the
/// first year's ln κ term), which is why `kf` is exact.
#[test]
fn large_variance_agrees_with_the_exact_filter_after_the_diffuse_period() {
    let rows = nile();
    let p = plant("local-level", &[("q", 1469.1), ("r", 15099.0)], &["level"]);
    let (exact_means, exact_vars, exact_ll) = run(filter(p.as_ref(), "kf").as_mut(), &rows);
    for spec in [
        "ekf",
        "iekf",
        "ukf",
        "ckf",
        "ghkf",
        "srukf",
        "kf:gain=steady",
    ] {
        let mut f = filter(p.as_ref(), spec);
        let (means, vars, ll) = run(f.as_mut(), &rows);
        let after = if spec == "kf:gain=steady" { 60 } else { 0 };
        for k in after..rows.len() {
            assert!(
                (means[k] - exact_means[k]).abs() <= 1e-6 * exact_means[k].abs(),
                "{spec} year {}: {} vs {}",
                1871 + k,
                means[k],
                exact_means[k]
            );
            if spec != "kf:gain=steady" {
                assert!(
                    (vars[k] - exact_vars[k]).abs() <= 1e-5 * exact_vars[k],
                    "{spec} year {}: {} vs {}",
                    1871 + k,
                    vars[k],
                    exact_vars[k]
                );
            }
        }
        assert!(
            ll < exact_ll - 5.0,
            "{spec}: the approximation keeps ln κ terms"
        );
    }
}

/// Two diffuse states (`cv --diffuse all`: position and velocity, position measured) need two
/// observations: P∞ has rank 2 and each scalar observation removes one (D&K §5.2). The exact
/// filter and the large-variance EKF agree from the second row on; after the first row the
/// position is known to σ² = r and the velocity is still unbounded.
#[test]
fn two_diffuse_states_take_two_observations() {
    let p = plant("cv", &[("r", 0.04), ("q", 0.5)], &["all"]);
    let rows: Vec<(f64, f64)> = (0..40)
        .map(|k| {
            let t = 0.1 * k as f64;
            (t, 2.0 + 1.5 * t + 0.3 * (7.0 * t).sin())
        })
        .collect();
    let mut exact = filter(p.as_ref(), "kf");
    let mut approx = filter(p.as_ref(), "ekf");
    for (k, &(t, y)) in rows.iter().enumerate() {
        if k > 0 {
            let t0 = rows[k - 1].0;
            exact.predict(&[], t0, t - t0).unwrap();
            approx.predict(&[], t0, t - t0).unwrap();
        }
        exact.update(&[y], &[], t).unwrap();
        approx.update(&[y], &[], t).unwrap();
        if k == 0 {
            assert_eq!(exact.mean()[0], y);
            assert!((exact.covariance()[0] - 0.04).abs() < 1e-12);
            // The velocity's reported variance stands for "unbounded": κ = 10⁸ × sd0² = 10⁸.
            assert!(exact.covariance()[3] >= 1e8);
            // The position's F∞ = 1 (P∞ = I): only the constant (D&K eq. 7.4).
            assert!((exact.log_likelihood_increment() - DIFFUSE_FIRST).abs() < 1e-15);
            continue;
        }
        if k == 1 {
            // Closed form: two exact positions 0.1 s apart give the velocity (y₁ − y₀)/dt.
            let v = (y - rows[0].1) / 0.1;
            assert!((exact.mean()[1] - v).abs() < 0.2 * v.abs());
        }
        for i in 0..2 {
            let (a, b) = (exact.mean()[i], approx.mean()[i]);
            assert!(
                (a - b).abs() <= 1e-5 * a.abs().max(1.0),
                "row {k} x{i}: {a} vs {b}"
            );
        }
        for i in 0..4 {
            let (a, b) = (exact.covariance()[i], approx.covariance()[i]);
            assert!(
                (a - b).abs() <= 1e-4 * a.abs().max(1e-3),
                "row {k} P{i}: {a} vs {b}"
            );
        }
    }
}

/// `compare` and `tune` with `--diffuse level` on the Nile: the summary's log-likelihood is the
/// reference's; `tune` recovers D&K's published maximum-likelihood variances σ²_ε = 15099,
/// σ²_η = 1469.1 (D&K 2012 §2.10, from memory, given to 5 significant digits: checked to 10⁻⁴
/// relative) from a start two orders of magnitude off; the settings record `--diffuse` and the
/// rerun line reproduces it.
#[test]
fn compare_and_tune_on_the_nile() {
    let tmp = tempfile::tempdir().unwrap();
    let out = tmp.path().join("cmp");
    let data = nile_csv();
    expect(
        &[
            "compare",
            "local-level",
            s(&data),
            "-f",
            "kf",
            "-f",
            "ukf",
            "--set",
            "r=15099",
            "--set",
            "q=1469.1",
            "--diffuse",
            "level",
            "-o",
            s(&out),
        ],
        0,
    );
    let summary = json(&out.join("summary.json"));
    let want = fixture("nile_diffuse.json")["diffuse_log_likelihood"]
        .as_f64()
        .unwrap();
    let kf = &summary["filters"][0];
    assert_eq!(kf["label"], "kf");
    assert!((kf["log_likelihood"].as_f64().unwrap() - want).abs() < 1e-9);
    assert_eq!(summary["settings"]["diffuse"], serde_json::json!(["level"]));

    let tuned_dir = tmp.path().join("tune");
    expect(
        &[
            "tune",
            "local-level",
            s(&data),
            "-f",
            "kf",
            "--param",
            "r",
            "--param",
            "q",
            "--set",
            "r=100",
            "--set",
            "q=100",
            "--diffuse",
            "level",
            "-o",
            s(&tuned_dir),
        ],
        0,
    );
    let tuned = json(&tuned_dir.join("tuned.json"));
    let r = tuned["params"]["r"].as_f64().unwrap();
    let q = tuned["params"]["q"].as_f64().unwrap();
    assert!((r - 15099.0).abs() <= 1e-4 * 15099.0, "r = {r}");
    assert!((q - 1469.1).abs() <= 1e-4 * 1469.1, "q = {q}");
    assert_eq!(tuned["settings"]["diffuse"], serde_json::json!(["level"]));
    let settings: sightline::eval::settings::Settings =
        serde_json::from_value(tuned["settings"].clone()).unwrap();
    assert!(
        settings.command_line().ends_with("--diffuse level"),
        "{}",
        settings.command_line()
    );
}

/// Refusals with exit 2, each saying why (common practice: an option that cannot hold is a usage
/// error): a sampling filter, an unknown state (the states are listed), a state named twice, a
/// diffuse state whose prior is also set.
#[test]
fn contradictions_and_sampling_filters_are_refused() {
    let tmp = tempfile::tempdir().unwrap();
    let data = nile_csv();
    let out = tmp.path().join("o");
    let base = ["compare", "local-level", s(&data), "-o", s(&out)];
    let cases: &[(&[&str], &str)] = &[
        (&["-f", "pf", "--diffuse", "level"], "draws its samples"),
        (&["-f", "enkf", "--diffuse", "level"], "draws its samples"),
        (&["--diffuse", "height"], "its states are: level"),
        (&["--diffuse", "level", "--diffuse", "level"], "given twice"),
        (
            &["--diffuse", "level", "--set", "x0.level=1000"],
            "contradict",
        ),
        (
            &["--diffuse", "all", "--set", "sd0.level=300"],
            "contradict",
        ),
    ];
    for (extra, says) in cases {
        let mut args: Vec<&str> = base.to_vec();
        args.extend_from_slice(extra);
        let output = sightline(&args);
        let stderr = String::from_utf8_lossy(&output.stderr);
        assert_eq!(output.status.code(), Some(2), "{extra:?}: {stderr}");
        assert!(stderr.contains(says), "{extra:?}: {stderr}");
        assert!(!out.exists(), "{extra:?} wrote output");
    }
    let tune = sightline(&[
        "tune",
        "local-level",
        s(&data),
        "-f",
        "kf",
        "--param",
        "sd0.level",
        "--diffuse",
        "level",
        "-o",
        s(&out),
    ]);
    let stderr = String::from_utf8_lossy(&tune.stderr);
    assert_eq!(tune.status.code(), Some(2), "{stderr}");
    assert!(stderr.contains("diffuse"), "{stderr}");
}

/// A campaign records `--diffuse`: its settings, its rerun line, and shards that differ in it
/// do not merge (`partial::differences` names it).
#[test]
fn campaigns_record_diffuse() {
    let tmp = tempfile::tempdir().unwrap();
    let out = tmp.path().join("mc");
    expect(
        &[
            "montecarlo",
            "cv",
            "--runs",
            "4",
            "--steps",
            "30",
            "-f",
            "kf",
            "-f",
            "ekf",
            "--diffuse",
            "vel",
            "-o",
            s(&out),
        ],
        0,
    );
    let summary = json(&out.join("summary.json"));
    assert_eq!(summary["settings"]["diffuse"], serde_json::json!(["vel"]));
    let settings: sightline::eval::settings::Settings =
        serde_json::from_value(summary["settings"].clone()).unwrap();
    assert!(settings.command_line().contains("--diffuse vel"));
    let spec = CampaignSpec {
        model: "cv".into(),
        set: vec![],
        runs: 4,
        steps: 30,
        seed: 0,
        filters: vec!["kf".into()],
        every: 1,
        dropout: 0.0,
        diffuse: vec!["vel".into()],
    };
    let plain = CampaignSpec {
        diffuse: vec![],
        ..spec.clone()
    };
    assert_eq!(
        partial::differences(&spec, &plain, true),
        vec!["--diffuse (vel there, none here)".to_string()]
    );
}
