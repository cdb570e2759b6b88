//! The iterated EKF update is Gauss–Newton on the MAP cost (Bell & Cathey, IEEE TAC 38(2), 1993):
//! at convergence its mean is a stationary point of
//! J(x) = ½(x − x̄)²/P + ½(y − h(x))²/R, and with one iteration it is the EKF.

use sightline::core::nalgebra::{Matrix1, U1, Vector1};
use sightline::filters::{Filter, build};
use sightline::prelude::*;
use sightline::{FilterSpec, Gaussian, Model, Real};

const PRIOR_MEAN: f64 = 1.0;
const PRIOR_VAR: f64 = 0.5;
const R: f64 = 0.1;

/// x ~ N(1, 0.5), y = x³ + v: a strongly nonlinear measurement.
#[derive(Debug, Clone, Parameters)]
struct Cubic;

impl Model for Cubic {
    type State = U1;
    type Meas = U1;
    fn declare(&self) -> Declaration {
        Declaration::new("cubic-sensor", 1.0)
            .state("x", "-", 0.0, 1.0)
            .measurement("y", "-")
    }
    fn transition<S: Real>(&self, x: &Vector1<S>, _u: &[f64], _t: f64, _dt: f64) -> Vector1<S> {
        *x
    }
    fn measure<S: Real>(&self, x: &Vector1<S>, _u: &[f64], _t: f64) -> Vector1<S> {
        Vector1::new(x[0] * x[0] * x[0])
    }
    fn process_noise(&self, _x: &Vector1<f64>, _u: &[f64], _t: f64, _dt: f64) -> Matrix1<f64> {
        Matrix1::new(0.0)
    }
    fn measurement_noise(&self, _t: f64) -> Matrix1<f64> {
        Matrix1::new(R)
    }
    fn prior(&self) -> Gaussian<U1> {
        Gaussian::new(Vector1::new(PRIOR_MEAN), Matrix1::new(PRIOR_VAR))
    }
}

fn updated(spec: &str, y: f64) -> Box<dyn Filter> {
    let mut f = build(&Cubic, &Cubic.prior(), &FilterSpec::parse(spec).unwrap(), 0).unwrap();
    f.update(&[y], &[], 0.0).unwrap();
    f
}

/// dJ/dx of the MAP cost (closed form).
fn cost_gradient(x: f64, y: f64) -> f64 {
    (x - PRIOR_MEAN) / PRIOR_VAR - 3.0 * x * x * (y - x.powi(3)) / R
}

#[test]
fn iterated_update_converges_to_the_map_estimate() {
    let y = 2.0;
    let iekf = updated("iekf:iterations=50,tol=1e-12", y);
    let x = iekf.mean()[0];
    // Stationary point of J, relative to the scale of its terms.
    let scale = 3.0 * x * x * y.abs() / R;
    assert!(
        cost_gradient(x, y).abs() <= 1e-9 * scale,
        "dJ/dx({x}) = {}",
        cost_gradient(x, y)
    );
    let used = iekf.diagnostics().iterations;
    assert!(used > 2 && used < 50, "{used} iterations");
    // The EKF stops after the first Gauss–Newton step, away from the stationary point.
    let ekf = updated("ekf", y);
    assert!(cost_gradient(ekf.mean()[0], y).abs() > 1e-3 * scale);
}

#[test]
fn one_iteration_is_the_ekf() {
    for y in [0.3, 1.0, 2.0, 4.0] {
        let (a, b) = (updated("iekf:iterations=1", y), updated("ekf", y));
        assert_eq!(a.mean(), b.mean());
        assert_eq!(a.covariance(), b.covariance());
        assert_eq!(a.log_likelihood_increment(), b.log_likelihood_increment());
        assert_eq!(a.diagnostics().iterations, 1);
    }
}

#[test]
fn options_are_checked() {
    for bad in [
        "iekf:iterations=0",
        "iekf:tol=-1",
        "iekf:tol=abc",
        "iekf:steps=3",
    ] {
        let spec = FilterSpec::parse(bad).unwrap();
        let err = build(&Cubic, &Cubic.prior(), &spec, 0)
            .err()
            .map(|e| e.to_string());
        assert!(
            err.as_deref().is_some_and(|e| e.contains(bad)),
            "{bad}: {err:?}"
        );
    }
}
