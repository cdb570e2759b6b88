//! The posterior Cramér–Rao bound against closed forms.

use sightline::FilterSpec;
use sightline::eval::simulate::SimOptions;
use sightline::shipped;

/// For a linear-Gaussian plant the PCRLB recursion reduces to the Kalman filter's information
/// recursion, so J(k)⁻¹ equals the KF's posterior covariance at every step (Tichavský, Muravchik &
/// Nehorai, IEEE TSP 46(5), 1998, §IV.A). Checked on `cv`, including rows with a missing
/// measurement (dropout), where both carry no measurement information.
#[test]
fn pcrlb_equals_kalman_covariance_on_cv() {
    let plants = shipped();
    let cv = plants.iter().find(|p| p.name() == "cv").unwrap();
    let options = SimOptions {
        dropout: 0.2,
        ..SimOptions::default()
    };
    let data = cv.simulate(400, 11, &options).unwrap();
    let bound = cv.pcrlb(std::slice::from_ref(&data)).unwrap();
    let mut kf = cv
        .build_filter(&FilterSpec::parse("kf").unwrap(), 0)
        .unwrap();
    let mut prev: Option<(f64, Vec<f64>)> = None;
    let mut compared = 0;
    for (k, r) in data.records.iter().enumerate() {
        if let Some((t0, u0)) = &prev {
            kf.predict(u0, *t0, r.t - t0).unwrap();
        }
        kf.update(&r.y, &r.u, r.t).unwrap();
        let p = kf.covariance();
        for i in 0..2 {
            let kf_var = p[i * 2 + i];
            let b = bound.variance[k][i];
            assert!(
                (b - kf_var).abs() <= 1e-9 * kf_var,
                "step {k} state {i}: bound {b} vs KF {kf_var}"
            );
            compared += 1;
        }
        prev = Some((r.t, r.u.clone()));
    }
    assert_eq!(compared, 800);
    // The summary figures are the root-mean of the per-step bounds.
    let mean_pos: f64 = bound.variance.iter().map(|v| v[0]).sum::<f64>() / 400.0;
    assert!((bound.rmse[0] - mean_pos.sqrt()).abs() < 1e-12);
}

/// More information can only lower the bound (a property of the Fisher information: common
/// practice): halving R lowers every step's bound on `pendulum`.
#[test]
fn pcrlb_decreases_with_better_sensors() {
    let plants = shipped();
    let mut p = plants
        .iter()
        .find(|p| p.name() == "pendulum")
        .unwrap()
        .clone_box();
    let truths: Vec<_> = (0..20)
        .map(|s| p.simulate(300, s, &SimOptions::default()).unwrap())
        .collect();
    let loose = p.pcrlb(&truths).unwrap();
    let r = p.parameters().iter().find(|q| q.name == "r").unwrap().value;
    p.set("r", r / 2.0).unwrap();
    let tight = p.pcrlb(&truths).unwrap();
    for (a, b) in tight.variance.iter().zip(&loose.variance) {
        for (x, y) in a.iter().zip(b) {
            assert!(x <= y, "bound rose with a better sensor: {x} > {y}");
        }
    }
    assert!(tight.rmse_all < loose.rmse_all);
}
