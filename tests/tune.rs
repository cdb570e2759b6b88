//! Maximum-likelihood noise tuning against the generating values and an independent
//! implementation of the likelihood.

use sightline::FilterSpec;
use sightline::eval::simulate::SimOptions;
use sightline::eval::tune::tune;
use sightline::shipped;

/// Log-likelihood of the `cv` plant (F = [[1, dt], [0, 1]], Q = q[[dt³/3, dt²/2], [dt²/2, dt]],
/// H = [1, 0]; Bar-Shalom, Li & Kirubarajan 2001, §6.2.2) by the prediction-error decomposition
/// (Schweppe 1965), written out with plain arrays — independent of Sightline's filters.
fn cv_log_likelihood(ys: &[f64], dt: f64, q: f64, r: f64, x0: [f64; 2], p0: [f64; 2]) -> f64 {
    let (mut x, mut p) = (x0, [[p0[0], 0.0], [0.0, p0[1]]]);
    let qm = [
        [q * dt.powi(3) / 3.0, q * dt.powi(2) / 2.0],
        [q * dt.powi(2) / 2.0, q * dt],
    ];
    let mut ll = 0.0;
    for (k, &y) in ys.iter().enumerate() {
        if k > 0 {
            x = [x[0] + dt * x[1], x[1]];
            let fp = [
                [p[0][0] + dt * p[1][0], p[0][1] + dt * p[1][1]],
                [p[1][0], p[1][1]],
            ];
            p = [
                [fp[0][0] + dt * fp[0][1] + qm[0][0], fp[0][1] + qm[0][1]],
                [fp[1][0] + dt * fp[1][1] + qm[1][0], fp[1][1] + qm[1][1]],
            ];
        }
        let s = p[0][0] + r;
        let nu = y - x[0];
        ll += -0.5 * (nu * nu / s + s.ln() + (2.0 * std::f64::consts::PI).ln());
        let k0 = p[0][0] / s;
        let k1 = p[1][0] / s;
        x = [x[0] + k0 * nu, x[1] + k1 * nu];
        p = [
            [p[0][0] - k0 * p[0][0], p[0][1] - k0 * p[0][1]],
            [p[1][0] - k1 * p[0][0], p[1][1] - k1 * p[0][1]],
        ];
    }
    ll
}

/// Golden-section search for the maximum of a unimodal `f` on [a, b].
fn golden_max(f: impl Fn(f64) -> f64, mut a: f64, mut b: f64) -> f64 {
    let g = (5f64.sqrt() - 1.0) / 2.0;
    for _ in 0..200 {
        let c = b - g * (b - a);
        let d = a + g * (b - a);
        if f(c) > f(d) { b = d } else { a = c }
    }
    0.5 * (a + b)
}

/// On `cv`, `tune` recovers the generating q and r from 3,000 steps (the ML estimator is
/// consistent and asymptotically normal with covariance from the observed information), and its
/// optimum is the maximum of the independent likelihood above.
///
/// The recovery check uses two standard errors: the estimate is a random variable, and a band of
/// one standard error would miss a correct estimate about a third of the time per parameter.
#[test]
fn tune_recovers_generating_noise_on_cv() {
    let plants = shipped();
    let mut cv = plants
        .iter()
        .find(|p| p.name() == "cv")
        .unwrap()
        .clone_box();
    let (q_true, r_true) = (0.5, 0.25);
    cv.set("q", q_true).unwrap();
    cv.set("r", r_true).unwrap();
    let data = cv.simulate(3000, 2024, &SimOptions::default()).unwrap();
    // Start far from the truth.
    cv.set("q", 2.0).unwrap();
    cv.set("r", 1.0).unwrap();
    let spec = FilterSpec::parse("kf").unwrap();
    let tuned = tune(cv.as_ref(), &data, &spec, &["q".into(), "r".into()], 0).unwrap();
    let (q, r) = (tuned.params["q"], tuned.params["r"]);
    let se_q = tuned.std_errors["q"].unwrap();
    let se_r = tuned.std_errors["r"].unwrap();
    eprintln!(
        "tuned q = {q} ± {se_q}, r = {r} ± {se_r} ({} evaluations)",
        tuned.trace.len()
    );
    assert!(
        (q - q_true).abs() < 2.0 * se_q,
        "q = {q} ± {se_q}, true {q_true}"
    );
    assert!(
        (r - r_true).abs() < 2.0 * se_r,
        "r = {r} ± {se_r}, true {r_true}"
    );
    // Standard errors of the right size: a few percent from 3,000 samples, not zero.
    assert!(se_q > 0.005 * q && se_q < 0.5 * q, "se_q = {se_q}");
    assert!(se_r > 0.005 * r && se_r < 0.5 * r, "se_r = {se_r}");
    assert!(tuned.log_likelihood > tuned.start_log_likelihood.unwrap());
    assert!(!tuned.trace.is_empty());

    // The independent likelihood agrees at the tuned point and is maximal there.
    let ys: Vec<f64> = data.records.iter().map(|r| r.y[0]).collect();
    let (x0, sd0) = ([0.0, 1.0], [1.0f64, 1.0f64]);
    let p0 = [sd0[0] * sd0[0], sd0[1] * sd0[1]];
    let ll = |lq: f64, lr: f64| cv_log_likelihood(&ys, 0.1, lq.exp(), lr.exp(), x0, p0);
    let independent = ll(q.ln(), r.ln());
    assert!(
        (independent - tuned.log_likelihood).abs() < 1e-6 * independent.abs(),
        "independent {independent} vs tuned {}",
        tuned.log_likelihood
    );
    let (mut lq, mut lr) = (0.0f64, 0.0f64);
    for _ in 0..40 {
        lq = golden_max(|a| ll(a, lr), -8.0, 4.0);
        lr = golden_max(|b| ll(lq, b), -8.0, 4.0);
    }
    assert!(
        (lq.exp() - q).abs() < 0.05 * se_q,
        "independent optimum q {} vs {q}",
        lq.exp()
    );
    assert!(
        (lr.exp() - r).abs() < 0.05 * se_r,
        "independent optimum r {} vs {r}",
        lr.exp()
    );
    assert!(
        ll(lq, lr) - tuned.log_likelihood < 1e-6,
        "tuned point is not the maximum"
    );
}

/// `sightline tune` writes `DIR/tuned.json` with the contract's keys (../shared/design.md §4:
/// params, log_likelihood, start, std_errors) and the optimiser's trace; a bad `--param` is a
/// usage error (exit code 2) naming the valid parameters.
#[test]
fn tune_command_writes_the_contract_file() {
    let bin = env!("CARGO_BIN_EXE_sightline");
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("cv.csv");
    let out = dir.path().join("tuned");
    let run = |args: &[&str]| std::process::Command::new(bin).args(args).output().unwrap();
    let s = run(&[
        "simulate",
        "cv",
        "--steps",
        "1500",
        "--seed",
        "8",
        "-o",
        data.to_str().unwrap(),
    ]);
    assert!(s.status.success());
    let s = run(&[
        "tune",
        "cv",
        data.to_str().unwrap(),
        "-f",
        "kf",
        "--param",
        "q",
        "--param",
        "r",
        "--set",
        "q=2",
        "-o",
        out.to_str().unwrap(),
    ]);
    assert!(s.status.success(), "{}", String::from_utf8_lossy(&s.stderr));
    let json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("tuned.json")).unwrap()).unwrap();
    for key in ["params", "log_likelihood", "start", "std_errors", "trace"] {
        assert!(json.get(key).is_some(), "tuned.json lacks '{key}'");
    }
    assert_eq!(json["start"]["q"], 2.0);
    let q = json["params"]["q"].as_f64().unwrap();
    assert!(
        q > 0.0 && q < 2.0,
        "q = {q}: the likelihood pulls it towards the generating 0.5"
    );
    assert!(
        json["log_likelihood"].as_f64().unwrap() > json["start_log_likelihood"].as_f64().unwrap()
    );
    let bad = run(&[
        "tune",
        "cv",
        data.to_str().unwrap(),
        "-f",
        "kf",
        "--param",
        "qq",
        "-o",
        out.to_str().unwrap(),
    ]);
    assert_eq!(bad.status.code(), Some(2));
    let err = String::from_utf8_lossy(&bad.stderr);
    assert!(err.contains("qq") && err.contains("sd0.pos"), "{err}");
}
