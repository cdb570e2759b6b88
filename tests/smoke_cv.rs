//! Quick end-to-end check that every Gaussian filter agrees with the Kalman filter on the
//! linear-Gaussian `cv` plant (for a linear-Gaussian plant the KF is exact and every sigma-point
//! rule of degree ≥ 3 and the EKF reproduce it: common practice).

use sightline::eval::simulate::SimOptions;
use sightline::{FilterSpec, shipped};

#[test]
fn gaussian_filters_agree_with_kf_on_cv() {
    let plants = shipped();
    let cv = plants.iter().find(|p| p.name() == "cv").unwrap();
    let data = cv.simulate(500, 3, &SimOptions::default()).unwrap();
    let specs = ["kf", "ekf", "ukf", "ckf", "ghkf", "kf:gain=steady"];
    let mut filters: Vec<_> = specs
        .iter()
        .map(|s| cv.build_filter(&FilterSpec::parse(s).unwrap(), 0).unwrap())
        .collect();
    let mut prev_t = None;
    let mut prev_u: Vec<f64> = Vec::new();
    for r in &data.records {
        for f in filters.iter_mut() {
            if let Some(t0) = prev_t {
                f.predict(&prev_u, t0, r.t - t0).unwrap();
            }
            f.update(&r.y, &r.u, r.t).unwrap();
        }
        let kf_mean = filters[0].mean().to_vec();
        let kf_cov = filters[0].covariance().to_vec();
        for f in &filters[1..5] {
            for (a, b) in f.mean().iter().zip(&kf_mean) {
                assert!(
                    (a - b).abs() <= 1e-7 * (1.0 + b.abs()),
                    "{} mean {a} vs {b}",
                    f.label()
                );
            }
            for (a, b) in f.covariance().iter().zip(&kf_cov) {
                assert!(
                    (a - b).abs() <= 1e-7 * (1.0 + b.abs()),
                    "{} cov {a} vs {b}",
                    f.label()
                );
            }
        }
        prev_t = Some(r.t);
        prev_u = r.u.clone();
    }
    // After 500 steps the optimal gain has converged: the steady-gain filter's covariance equals
    // the KF's.
    for (a, b) in filters[5].covariance().iter().zip(filters[0].covariance()) {
        assert!((a - b).abs() <= 1e-9 * (1.0 + b.abs()), "steady {a} vs {b}");
    }
}
