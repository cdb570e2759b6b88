//! On the linear-Gaussian constant-velocity plant every Gaussian filter is exact, so all of them
//! must produce the Kalman filter's means and covariances, and the covariance must converge to the
//! solution of the discrete algebraic Riccati equation computed by scipy.

mod common;

use sightline::eval::simulate::SimOptions;
use sightline::nalgebra::DMatrix;
use sightline::{FilterSpec, shipped};

const KINDS: [&str; 7] = ["kf", "ekf", "iekf", "ukf", "ckf", "ghkf", "srukf"];

#[test]
fn every_gaussian_filter_reproduces_the_kalman_filter_and_the_dare() {
    let plants = shipped();
    let cv = plants.iter().find(|p| p.name() == "cv").unwrap();
    let mut data = cv.simulate(3_000, 5, &SimOptions::default()).unwrap();
    // Every 13th measurement missing (before the last 500 steps, over which the covariance
    // settles to the DARE solution): the predict-only path must agree too.
    for (k, r) in data.records.iter_mut().enumerate() {
        if k % 13 == 7 && k < 2_500 {
            r.y[0] = f64::NAN;
        }
    }
    let mut filters: Vec<_> = KINDS
        .iter()
        .map(|s| cv.build_filter(&FilterSpec::parse(s).unwrap(), 0).unwrap())
        .collect();
    let mut previous: Option<(f64, Vec<f64>)> = None;
    let (mut worst_mean, mut worst_cov) = (0.0f64, 0.0f64);
    let mut last_predicted = Vec::new();
    for r in &data.records {
        for f in filters.iter_mut() {
            if let Some((t0, u0)) = &previous {
                f.predict(u0, *t0, r.t - t0).unwrap();
            }
        }
        last_predicted = filters[0].covariance().to_vec();
        for f in filters.iter_mut() {
            f.update(&r.y, &r.u, r.t).unwrap();
        }
        let kf_mean = filters[0].mean().to_vec();
        let kf_cov = filters[0].covariance().to_vec();
        let n = kf_mean.len();
        for f in &filters[1..] {
            // Relative difference: means against |mean| + its standard deviation, covariances
            // against √(PᵢᵢPⱼⱼ) (scale-free, and defined when a mean crosses zero).
            for (i, (a, b)) in f.mean().iter().zip(&kf_mean).enumerate() {
                let scale = b.abs() + kf_cov[i * n + i].sqrt();
                let rel = (a - b).abs() / scale;
                worst_mean = worst_mean.max(rel);
                assert!(
                    rel <= 1e-7,
                    "{} at t={}: mean {a} vs kf {b}",
                    f.label(),
                    r.t
                );
            }
            for (idx, (a, b)) in f.covariance().iter().zip(&kf_cov).enumerate() {
                let (i, j) = (idx % n, idx / n);
                let rel = (a - b).abs() / (kf_cov[i * n + i] * kf_cov[j * n + j]).sqrt();
                worst_cov = worst_cov.max(rel);
                assert!(rel <= 1e-7, "{} at t={}: cov {a} vs kf {b}", f.label(), r.t);
            }
            if let (Some(a), Some(b)) = (f.innovation(), filters[0].innovation()) {
                assert!(
                    (a.nis - b.nis).abs() <= 1e-7 * (1.0 + b.nis),
                    "{} NIS",
                    f.label()
                );
            }
            let (a, b) = (
                f.log_likelihood_increment(),
                filters[0].log_likelihood_increment(),
            );
            assert!(
                (a - b).abs() <= 1e-7 * (1.0 + b.abs()),
                "{} log-lik {a} vs {b}",
                f.label()
            );
        }
        previous = Some((r.t, r.u.clone()));
    }
    eprintln!("worst relative difference to kf: mean {worst_mean:.2e}, covariance {worst_cov:.2e}");

    // Reference: scipy.linalg.solve_discrete_are(Fᵀ, Hᵀ, Q, R) for the filtering Riccati
    // equation at cv's default parameters (fixture from tests/reference/make_fixtures.py).
    let dare = common::fixture("dare_cv.json");
    assert_eq!(
        dare["dt"].as_f64(),
        Some(cv.dt()),
        "fixture scenario is cv's default"
    );
    let p_pred = common::matrix(&dare["P_pred"]);
    let p_filt = common::matrix(&dare["P_filt"]);
    let last = data.records.last().unwrap();
    assert!(!last.y[0].is_nan(), "the last step must be an update");
    let got_pred = DMatrix::from_column_slice(2, 2, &last_predicted);
    for f in &filters {
        let got = DMatrix::from_column_slice(2, 2, f.covariance());
        let rel = (&got - &p_filt).abs().max() / p_filt.abs().max();
        assert!(
            rel <= 1e-9,
            "{}: filtered covariance {got} vs DARE {p_filt}",
            f.label()
        );
    }
    let rel = (&got_pred - &p_pred).abs().max() / p_pred.abs().max();
    assert!(
        rel <= 1e-9,
        "predicted covariance {got_pred} vs DARE {p_pred}"
    );
}
