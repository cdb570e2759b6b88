//! The scalar random constant x(k+1) = x(k), y(k) = x(k) + v(k), v ~ N(0, R): the Kalman filter
//! in closed form, and fixed-gain observers against it. The plant is defined here, so this also
//! exercises the path a user's own model takes (`sightline::plant`).

mod common;

use rand_distr::{Distribution, StandardNormal};
use sightline::core::nalgebra::{Matrix1, U1, Vector1};
use sightline::core::rng::stream;
use sightline::prelude::*;
use sightline::{FilterSpec, Gaussian, Model, Real};

/// x(k+1) = x(k) (no process noise), y = x + v.
#[derive(Debug, Clone, Parameters)]
struct RandomConstant {
    r: f64,
    x0: f64,
    p0: f64,
}

impl Model for RandomConstant {
    type State = U1;
    type Meas = U1;
    fn declare(&self) -> Declaration {
        Declaration::new("random-constant", 1.0)
            .state("x", "-", 0.0, 1.0)
            .measurement("y", "-")
    }
    fn transition<S: Real>(&self, x: &Vector1<S>, _u: &[f64], _t: f64, _dt: f64) -> Vector1<S> {
        *x
    }
    fn measure<S: Real>(&self, x: &Vector1<S>, _u: &[f64], _t: f64) -> Vector1<S> {
        *x
    }
    fn process_noise(&self, _x: &Vector1<f64>, _u: &[f64], _t: f64, _dt: f64) -> Matrix1<f64> {
        Matrix1::new(0.0)
    }
    fn measurement_noise(&self, _t: f64) -> Matrix1<f64> {
        Matrix1::new(self.r)
    }
    fn prior(&self) -> Gaussian<U1> {
        Gaussian::new(Vector1::new(self.x0), Matrix1::new(self.p0))
    }
    fn is_linear(&self) -> bool {
        true
    }
}

/// A true constant drawn from the prior and `steps` noisy measurements of it.
fn measurements(model: &RandomConstant, steps: usize, seed: u64) -> (f64, Vec<f64>) {
    let mut rng = stream(seed, &[0]);
    let z: f64 = StandardNormal.sample(&mut rng);
    let truth = model.x0 + model.p0.sqrt() * z;
    let ys = (0..steps)
        .map(|_| {
            let v: f64 = StandardNormal.sample(&mut rng);
            truth + model.r.sqrt() * v
        })
        .collect();
    (truth, ys)
}

#[test]
fn kalman_filter_matches_the_closed_form() {
    let model = RandomConstant {
        r: 0.7,
        x0: 3.0,
        p0: 2.0,
    };
    let plant = sightline::plant(model.clone());
    let (_, ys) = measurements(&model, 300, 11);
    // Every Gaussian filter is exact on this linear-Gaussian plant; Q = 0 also exercises the
    // semi-definite noise factor of the square-root filter.
    for spec in ["kf", "ekf", "iekf", "ukf", "ckf", "ghkf", "srukf"] {
        let mut f = plant
            .build_filter(&FilterSpec::parse(spec).unwrap(), 0)
            .unwrap();
        let mut sum_y = 0.0;
        for (k, &y) in ys.iter().enumerate() {
            let previous = (k > 0).then(|| ((k - 1) as f64, &[][..]));
            common::step(f.as_mut(), previous, k as f64, &[y], &[]).unwrap();
            let count = (k + 1) as f64;
            sum_y += y;
            // Closed form (D. Simon, Optimal State Estimation, Wiley 2006, the scalar-constant
            // worked example of the discrete Kalman filter; chapter from memory): after k
            // measurements of a constant,
            // P_k = P0·R/(R + k·P0), and the estimate is the prior-weighted running mean
            // (x0/P0 + Σy/R)/(1/P0 + k/R).
            let p = model.p0 * model.r / (model.r + count * model.p0);
            let mean = (model.x0 / model.p0 + sum_y / model.r) / (1.0 / model.p0 + count / model.r);
            let (got_p, got_mean) = (f.covariance()[0], f.mean()[0]);
            assert!(
                (got_p - p).abs() <= 1e-12 * p,
                "{spec} step {k}: P {got_p} vs closed form {p}"
            );
            assert!(
                (got_mean - mean).abs() <= 1e-12 * (1.0 + mean.abs()),
                "{spec} step {k}: mean {got_mean} vs closed form {mean}"
            );
        }
    }
}

/// Mean squared estimation error over the steps after `burn_in`, with the last reported variance.
fn long_run(
    spec: &str,
    model: &RandomConstant,
    truth: f64,
    ys: &[f64],
    burn_in: usize,
) -> (f64, f64) {
    let plant = sightline::plant(model.clone());
    let mut f = plant
        .build_filter(&FilterSpec::parse(spec).unwrap(), 0)
        .unwrap();
    let mut sum = 0.0;
    for (k, &y) in ys.iter().enumerate() {
        let previous = (k > 0).then(|| ((k - 1) as f64, &[][..]));
        common::step(f.as_mut(), previous, k as f64, &[y], &[]).unwrap();
        if k >= burn_in {
            sum += (f.mean()[0] - truth).powi(2);
        }
    }
    (sum / (ys.len() - burn_in) as f64, f.covariance()[0])
}

#[test]
fn fixed_gain_observer_has_the_closed_form_steady_error() {
    let r = 1.0;
    let model = RandomConstant {
        r,
        x0: 0.0,
        p0: 1.0,
    };
    let steps = 400_000;
    let burn_in = 2_000;
    let (truth, ys) = measurements(&model, steps, 29);
    let mut mse = Vec::new();
    for gain in [0.2, 0.8] {
        let (measured, reported) =
            long_run(&format!("kf:gain={gain}"), &model, truth, &ys, burn_in);
        // Closed form (common practice): e(k) = (1−L)e(k−1) + L v(k), so the steady error
        // variance is L²R/(1 − (1−L)²) = L·R/(2 − L): 0.111·R for L = 0.2, 0.667·R for L = 0.8.
        let expected = gain * r / (2.0 - gain);
        // The Joseph form propagates that gain's actual error variance exactly.
        assert!(
            (reported - expected).abs() <= 1e-12 * expected,
            "gain {gain}: reported variance {reported} vs {expected}"
        );
        // Sampling error of a mean of e² over an AR(1) error with φ = 1−L (common practice):
        // Var(mean) ≈ 2σ⁴(1+φ²)/((1−φ²)N). Four standard errors.
        let phi2 = (1.0 - gain).powi(2);
        let n = (steps - burn_in) as f64;
        let se = expected * (2.0 * (1.0 + phi2) / ((1.0 - phi2) * n)).sqrt();
        assert!(
            (measured - expected).abs() <= 4.0 * se,
            "gain {gain}: measured MSE {measured} vs L·R/(2−L) = {expected} (se {se})"
        );
        eprintln!("gain {gain}: MSE {measured:.5} R, closed form {expected:.5} R, se {se:.5}");
        mse.push(measured);
    }
    assert!(
        mse[0] < mse[1],
        "gain 0.2 ({}) should beat 0.8 ({})",
        mse[0],
        mse[1]
    );
    // The optimal filter's error variance keeps shrinking like R/k: it beats both.
    let (kf, _) = long_run("kf", &model, truth, &ys, burn_in);
    eprintln!("kf: MSE {kf:.3e} R");
    assert!(kf < mse[0] && kf < mse[1], "kf {kf} vs fixed gains {mse:?}");
}
