//! The opt-in remedies of the Gaussian filters (`gate`, `repair`/`floor`) and the runner's
//! containment of filter faults: a filter that collapses, loses positive-definiteness or meets a
//! non-finite value is reported failed at its step with the reason, the others complete, and the
//! remedies' counts reach `summary.json`.

mod common;
mod common_cli;

use sightline::core::nalgebra::{Matrix1, U1, Vector1};
use sightline::filters::{Filter, build};
use sightline::models::Cv;
use sightline::{FilterSpec, Gaussian, Model, Real};

use common_cli::{expect, json, s, sightline};
use sightline::prelude::*;

const GAUSSIAN: [&str; 7] = ["kf", "ekf", "iekf", "ukf", "ckf", "ghkf", "srukf"];

fn filter<M: Model>(model: &M, spec: &str) -> Box<dyn Filter>
where
    M::State: sightline::core::ad::Differentiable,
    sightline::nalgebra::DefaultAllocator: sightline::core::Alloc<M::State, M::Meas>,
{
    build(model, &model.prior(), &FilterSpec::parse(spec).unwrap(), 0).unwrap()
}

#[test]
fn the_gate_skips_exactly_the_updates_beyond_the_chi_square_quantile() {
    // χ²(1) 0.999 quantile = z² with z the standard normal 0.9995 quantile, 3.2905267314919255
    // (Abramowitz & Stegun 26.2, from memory; closed form relation χ²(1) = Z²).
    let limit = 3.290_526_731_491_925_5_f64.powi(2);
    // cv's first update from its prior: P = I (sd0 = 1), H = [1 0], R = 0.25, so S = 1.25 and
    // the NIS of y is y²/1.25 (closed form of the Kalman update).
    let cv = Cv::default();
    let edge = (limit * 1.25).sqrt();
    for kind in GAUSSIAN {
        let spec = format!("{kind}:gate=0.999");
        let mut outside = filter(&cv, &spec);
        outside.update(&[edge * 1.001], &[], 0.0).unwrap();
        assert_eq!(
            outside.mean(),
            &[0.0, 1.0],
            "{spec}: the prior mean must stand"
        );
        assert_eq!(outside.covariance(), &[1.0, 0.0, 0.0, 1.0], "{spec}");
        assert!(
            outside.innovation().is_none(),
            "{spec}: a gated step uses no measurement"
        );
        assert_eq!(outside.log_likelihood_increment(), 0.0);
        assert_eq!(outside.diagnostics().gated, 1, "{spec}");

        let mut inside = filter(&cv, &spec);
        inside.update(&[edge * 0.999], &[], 0.0).unwrap();
        let nis = inside.innovation().unwrap().nis;
        assert!(
            (nis / (limit * 0.999 * 0.999) - 1.0).abs() < 1e-12,
            "{spec}: NIS {nis}"
        );
        // K = P Hᵀ S⁻¹ = 0.8 on the position.
        assert!(
            (inside.mean()[0] - 0.8 * edge * 0.999).abs() < 1e-12,
            "{spec}"
        );
        assert_eq!(inside.diagnostics().gated, 0, "{spec}");
    }
}

#[test]
fn repair_leaves_a_healthy_filter_bit_for_bit_unchanged() {
    let cv = Cv::default();
    let data = sightline::eval::simulate::simulate(
        &cv,
        &cv.prior(),
        cv.declare().default_input(),
        300,
        5,
        &Default::default(),
    )
    .unwrap();
    for kind in GAUSSIAN {
        let mut plain = filter(&cv, kind);
        let mut repaired = filter(&cv, &format!("{kind}:repair=on"));
        let mut floored = filter(&cv, &format!("{kind}:floor=1e-9"));
        for (k, row) in data.records.iter().enumerate() {
            let previous = (k > 0).then(|| (data.records[k - 1].t, &[][..]));
            for f in [&mut plain, &mut repaired, &mut floored] {
                common::step(f.as_mut(), previous, row.t, &row.y, &row.u).unwrap();
            }
            for f in [&repaired, &floored] {
                assert_eq!(f.mean(), plain.mean(), "{kind} at {k}");
                assert_eq!(f.covariance(), plain.covariance(), "{kind} at {k}");
            }
        }
        assert_eq!(repaired.diagnostics().repaired, 0, "{kind}");
        assert_eq!(floored.diagnostics().repaired, 0, "{kind}");
    }
}

/// x ↦ x², noise-free, y = x: with α = 0.1 and β = −1 the unscented centre weight is −99.01 and
/// the predicted variance comes out negative (the case of `tests/numeric_errors.rs`).
#[derive(Debug, Clone, Parameters)]
struct Square;

impl Model for Square {
    type State = U1;
    type Meas = U1;
    fn declare(&self) -> Declaration {
        Declaration::new("square", 1.0)
            .state("x", "-", 0.0, 1.0)
            .measurement("y", "-")
    }
    fn transition<S: Real>(&self, x: &Vector1<S>, _: &[f64], _: f64, _: f64) -> Vector1<S> {
        Vector1::new(x[0] * x[0])
    }
    fn measure<S: Real>(&self, x: &Vector1<S>, _: &[f64], _: f64) -> Vector1<S> {
        *x
    }
    fn process_noise(&self, _: &Vector1<f64>, _: &[f64], _: f64, _: f64) -> Matrix1<f64> {
        Matrix1::new(0.0)
    }
    fn measurement_noise(&self, _: f64) -> Matrix1<f64> {
        Matrix1::new(0.5)
    }
    fn prior(&self) -> Gaussian<U1> {
        Gaussian::new(Vector1::new(0.0), Matrix1::new(1.0))
    }
}

#[test]
fn repair_turns_an_indefinite_covariance_into_a_usable_one_and_counts_it() {
    for kind in ["ukf", "srukf"] {
        let bare = format!("{kind}:alpha=0.1,beta=-1");
        let mut f = filter(&Square, &bare);
        let mut failed = None;
        for k in 0..10usize {
            let previous = (k > 0).then(|| ((k - 1) as f64, &[][..]));
            if let Err(e) = common::step(f.as_mut(), previous, k as f64, &[0.0], &[]) {
                failed = Some(e.to_string());
                break;
            }
        }
        let failed = failed.unwrap_or_else(|| panic!("{bare} should fail without repair"));
        assert!(failed.contains("not positive-definite"), "{failed}");

        let spec = format!("{bare},repair=on");
        let mut f = filter(&Square, &spec);
        for k in 0..10usize {
            let previous = (k > 0).then(|| ((k - 1) as f64, &[][..]));
            common::step(f.as_mut(), previous, k as f64, &[0.0], &[])
                .unwrap_or_else(|e| panic!("{spec}: {e}"));
            let p = f.covariance()[0];
            assert!(p > 0.0 && p.is_finite(), "{spec} at {k}: P = {p}");
        }
        assert!(
            f.diagnostics().repaired >= 1,
            "{spec}: {:?}",
            f.diagnostics()
        );
    }
}

#[test]
fn faults_stay_contained_and_remedy_counts_reach_the_summary() {
    // A measurement 1e200 away at row 100: the particle filter's weights all vanish, and the
    // plain Kalman filter's log-likelihood increment overflows — both fail at step 100 with the
    // reason; with re-draw or χ² gating the same filters run to the end.
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("cv.csv");
    expect(
        &[
            "simulate",
            "cv",
            "--steps",
            "200",
            "--seed",
            "9",
            "-o",
            s(&data),
        ],
        0,
    );
    let text = std::fs::read_to_string(&data).unwrap();
    let header: Vec<&str> = text.lines().next().unwrap().split(',').collect();
    let y = header.iter().position(|h| *h == "y.pos").unwrap();
    let spiked: Vec<String> = text
        .lines()
        .enumerate()
        .map(|(i, line)| {
            let mut cells: Vec<String> = line.split(',').map(str::to_string).collect();
            if i == 101 {
                cells[y] = "1e200".into();
            }
            cells.join(",")
        })
        .collect();
    std::fs::write(&data, spiked.join("\n") + "\n").unwrap();
    let out = dir.path().join("out");
    let specs = [
        "pf:particles=500",
        "pf:particles=500,redraw=on",
        "kf",
        "kf:gate=0.999",
        "ukf:gate=0.999,repair=on",
        "srukf:gate=0.9999",
    ];
    let mut args = vec!["compare", "cv", s(&data)];
    for spec in &specs {
        args.extend(["-f", spec]);
    }
    args.extend(["-o", s(&out)]);
    let result = sightline(&args);
    let stderr = String::from_utf8_lossy(&result.stderr);
    assert_eq!(result.status.code(), Some(1), "{stderr}");
    assert!(stderr.contains("2 of 6 filters failed"), "{stderr}");
    let summary = json(&out.join("summary.json"));
    let filters = summary["filters"].as_array().unwrap();
    let by_label = |label: &str| {
        filters
            .iter()
            .find(|f| f["label"] == label)
            .unwrap_or_else(|| panic!("{label} missing"))
    };
    let pf = by_label("pf:particles=500");
    assert_eq!(pf["status"], "failed");
    let error = pf["error"].as_str().unwrap();
    assert!(
        error.contains("step 100") && error.contains("particle collapse"),
        "{error}"
    );
    let kf = by_label("kf");
    assert_eq!(kf["status"], "failed");
    let error = kf["error"].as_str().unwrap();
    assert!(
        error.contains("step 100") && error.contains("not finite"),
        "{error}"
    );
    assert_eq!(
        by_label("pf:particles=500,redraw=on")["diagnostics"]["redraws"],
        1
    );
    for label in [
        "kf:gate=0.999",
        "ukf:gate=0.999,repair=on",
        "srukf:gate=0.9999",
    ] {
        let f = by_label(label);
        assert_eq!(f["status"], "ok", "{label}");
        let gated = f["diagnostics"]["gated"].as_u64().unwrap();
        assert!((1..=5).contains(&gated), "{label}: gated {gated}");
        assert_eq!(f["diagnostics"]["repaired"], 0, "{label}");
        assert!(f["rmse_all"].as_f64().unwrap() < 1.0, "{label}");
    }
    // The finished filters' estimates are complete: one row per data row.
    let estimates = std::fs::read_to_string(out.join("estimates.csv")).unwrap();
    for label in ["kf:gate=0.999", "pf:particles=500,redraw=on"] {
        let rows = estimates
            .lines()
            .filter(|l| {
                l.starts_with(&format!("\"{label}\",")) || l.starts_with(&format!("{label},"))
            })
            .count();
        assert_eq!(rows, 200, "{label}");
    }
    assert!(out.join("report.html").exists());
}
