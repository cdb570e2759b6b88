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

fn campaign(
    model: &str,
    filters: &[&str],
    runs: u64,
    steps: u64,
    seed: u64,
) -> sightline::eval::summary::Summary {
    use sightline::eval::campaign::{CampaignSpec, run_campaign, summarise};
    let plants = shipped();
    let plant = plants.iter().find(|p| p.name() == model).unwrap();
    let specs: Vec<FilterSpec> = filters
        .iter()
        .map(|s| FilterSpec::parse(s).unwrap())
        .collect();
    let spec = CampaignSpec {
        model: model.into(),
        set: Vec::new(),
        runs,
        steps,
        seed,
        filters: filters.iter().map(|s| s.to_string()).collect(),
        every: 1,
        dropout: 0.0,
        diffuse: Vec::new(),
    };
    summarise(&run_campaign(plant.as_ref(), &specs, &spec, 0..runs).unwrap())
}

/// In a campaign on `cv` the bound is the same for every trajectory (linear-Gaussian, no
/// dropout) and equals the KF's covariance (Tichavský et al. 1998): `pcrlb_rmse_all` is
/// √(mean over steps of tr P(k) / n) of one KF run, and the KF's Monte Carlo RMSE sits at it
/// within its sampling error (the KF is efficient here; 200 runs × 200 steps).
#[test]
fn campaign_bound_equals_kalman_covariance_on_cv() {
    let summary = campaign("cv", &["kf"], 200, 200, 5);
    let bound = summary.pcrlb_rmse_all.flatten().unwrap();
    let plants = shipped();
    let cv = plants.iter().find(|p| p.name() == "cv").unwrap();
    let data = cv.simulate(200, 1, &SimOptions::default()).unwrap();
    let mut kf = cv
        .build_filter(&FilterSpec::parse("kf").unwrap(), 0)
        .unwrap();
    let mut trace_sum = 0.0;
    let mut prev: Option<(f64, Vec<f64>)> = None;
    for r in &data.records {
        if let Some((t0, u0)) = &prev {
            kf.predict(u0, *t0, r.t - t0).unwrap();
        }
        kf.update(&r.y, &r.u, r.t).unwrap();
        trace_sum += kf.covariance()[0] + kf.covariance()[3];
        prev = Some((r.t, r.u.clone()));
    }
    let expected = (trace_sum / (200.0 * 2.0)).sqrt();
    assert!(
        (bound - expected).abs() < 1e-9 * expected,
        "bound {bound} vs KF {expected}"
    );
    let kf_rmse = summary.filters[0].rmse_all.unwrap();
    // 200 runs × 200 steps × 2 states of squared errors: relative sampling error of the RMSE
    // about 1/√(2·N_eff); 5 % leaves room for the strong correlation along a run.
    assert!(
        (kf_rmse - bound).abs() < 0.05 * bound,
        "KF RMSE {kf_rmse} vs bound {bound}"
    );
}

/// On `ungm` the bound lies below every filter's Monte Carlo RMSE — it bounds any estimator
/// (Tichavský et al. 1998); the PF comes closest (Arulampalam et al., IEEE TSP 50(2), 2002).
#[test]
fn ungm_bound_lies_below_every_filter() {
    let summary = campaign(
        "ungm",
        &["ekf", "ukf", "ckf", "pf:particles=1000"],
        40,
        50,
        9,
    );
    let bound = summary.pcrlb_rmse_all.flatten().unwrap();
    assert!(bound > 0.0 && bound.is_finite());
    for f in &summary.filters {
        let rmse = f.rmse_all.unwrap();
        assert!(
            bound < rmse,
            "{}: RMSE {rmse} below the bound {bound}",
            f.label
        );
    }
}
