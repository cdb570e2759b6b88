//! A failing filter is marked failed with its error and step, and the others go on (the
//! runner's contract); the command then exits 1 after writing every output.
//!
//! The plant (our own, for this check) is a random walk seen through √x. The cubature filter's
//! points sit at mean ± √n·σ (Arasaratnam & Haykin, IEEE TAC 54(6), 2009), so with prior mean 1
//! and σ = 2 one point is negative and its √ is NaN at the first update, while the EKF linearises
//! at the mean and stays at x > 0.

use sightline::nalgebra::{Matrix1, U1, Vector1};
use sightline::prelude::*;
use sightline::{Gaussian, Model, Real};

#[derive(Debug, Clone, Parameters)]
struct RootWalk;

impl Model for RootWalk {
    type State = U1;
    type Meas = U1;
    fn declare(&self) -> Declaration {
        Declaration::new("root-walk", 1.0)
            .state("level", "m", 0.0, 1.0)
            .measurement("root", "m^0.5")
    }
    fn transition<S: Real>(&self, x: &Vector1<S>, _: &[f64], _: f64, _: f64) -> Vector1<S> {
        *x
    }
    fn measure<S: Real>(&self, x: &Vector1<S>, _: &[f64], _: f64) -> Vector1<S> {
        Vector1::new(x[0].sqrt())
    }
    fn process_noise(&self, _: &Vector1<f64>, _: &[f64], _: f64, dt: f64) -> Matrix1<f64> {
        Matrix1::new(1e-4 * dt)
    }
    fn measurement_noise(&self, _: f64) -> Matrix1<f64> {
        Matrix1::new(1e-2)
    }
    fn prior(&self) -> Gaussian<U1> {
        Gaussian::new(Vector1::new(1.0), Matrix1::new(4.0))
    }
}

#[test]
fn a_failing_filter_is_marked_and_the_others_continue() {
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("walk.csv");
    let mut text = String::from("t,y.root,x.level\n");
    for k in 0..50 {
        text.push_str(&format!("{k},1.0,1.0\n"));
    }
    std::fs::write(&data, text).unwrap();
    let out = dir.path().join("out");
    let plants = vec![sightline::plant(RootWalk)];
    let args = [
        "sightline",
        "compare",
        "root-walk",
        data.to_str().unwrap(),
        "-f",
        "ckf",
        "-f",
        "ekf",
        "-o",
        out.to_str().unwrap(),
    ];
    let err = sightline::cli::run(args, &plants).unwrap_err();
    assert_eq!(err.exit_code(), 1, "{err}");
    assert!(
        err.to_string().contains("1 of 2 filters failed (ckf)"),
        "{err}"
    );
    let summary: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("summary.json")).unwrap()).unwrap();
    let ckf = &summary["filters"][0];
    assert_eq!(ckf["status"], "failed");
    let error = ckf["error"].as_str().unwrap();
    assert!(error.contains("ckf") && error.contains("step 0"), "{error}");
    assert!(ckf["rmse_all"].is_null());
    let ekf = &summary["filters"][1];
    assert_eq!(ekf["status"], "ok");
    assert!(ekf["error"].is_null());
    // The EKF converges onto x = 1 (√1 = 1 measured fifty times).
    assert!(ekf["rmse"]["level"].as_f64().unwrap() < 0.5);
    let estimates = std::fs::read_to_string(out.join("estimates.csv")).unwrap();
    assert_eq!(
        estimates.lines().filter(|l| l.starts_with("ekf,")).count(),
        50
    );
    assert_eq!(
        estimates.lines().filter(|l| l.starts_with("ckf,")).count(),
        0
    );
    assert!(out.join("report.html").exists());
    assert!(summary["verdict"].as_str().unwrap().contains("ckf failed"));
}
