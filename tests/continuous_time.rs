//! Continuous-time plants written as a right-hand side: the library's derived process noise
//! against scipy, and the derived path against the hand-written one it replaced on `pendulum`.

mod common;

#[allow(dead_code)]
#[path = "../examples/van_der_pol.rs"]
mod van_der_pol;

use sightline::FilterSpec;
use sightline::eval::simulate::SimOptions;
use sightline::models::Pendulum;
use sightline::prelude::*;
use van_der_pol::Vdp;

/// Q derived from `derivative` and `noise_density` (AD Jacobian, then Van Loan) equals
/// scipy.linalg.expm's Van Loan block exponential on the closed-form Jacobian of the Van der Pol
/// oscillator, at several states, damping levels and step lengths (fixture from
/// tests/reference/continuous_noise.py; C. F. Van Loan, IEEE TAC 23(3), 1978).
#[test]
fn derived_process_noise_matches_scipy_for_a_nonlinear_plant() {
    let fixture = common::fixture("continuous_noise.json");
    let cases = fixture["cases"].as_array().unwrap();
    assert_eq!(cases.len(), 20);
    let mut worst: f64 = 0.0;
    for case in cases {
        let plant = Vdp {
            mu: case["mu"].as_f64().unwrap(),
            q: case["q"].as_f64().unwrap(),
            ..Vdp::default()
        };
        let dt = case["dt"].as_f64().unwrap();
        let state = common::numbers(&case["state"]);
        let expected = common::matrix(&case["Qd"]);
        let q = plant.process_noise(&Vector2::new(state[0], state[1]), &[], 0.0, dt);
        let q = DMatrix::from_column_slice(2, 2, q.as_slice());
        let error = (&q - &expected).abs().max() / expected.abs().max();
        assert!(
            error <= 1e-10,
            "{case}: {q} vs scipy {expected} ({error:e})"
        );
        worst = worst.max(error);
    }
    eprintln!("worst relative error of the derived Q: {worst:.1e}");
}

/// The declaration, sensor and hand-written transition Jacobian of the wrapped pendulum, for
/// the two wrappers below, which differ only in how they write the dynamics.
macro_rules! same_sensor_as_the_pendulum {
    () => {
        fn declare(&self) -> Declaration {
            self.0.declare()
        }
        fn measure<S: Real>(&self, x: &Vector2<S>, u: &[f64], t: f64) -> Vector1<S> {
            self.0.measure(x, u, t)
        }
        fn measurement_noise(&self, t: f64) -> Matrix1<f64> {
            self.0.measurement_noise(t)
        }
        fn transition_jacobian(
            &self,
            x: &Vector2<f64>,
            u: &[f64],
            t: f64,
            dt: f64,
        ) -> Option<Matrix2<f64>> {
            self.0.transition_jacobian(x, u, t, dt)
        }
    };
}

/// The pendulum as it was written before the continuous-time path: its own RK4 step with the
/// torque added to the acceleration, and Van Loan on the hand-written linearisation.
#[derive(Clone, Parameters)]
struct HandWritten(Pendulum);

impl Model for HandWritten {
    type State = U2;
    type Meas = U1;
    fn transition<S: Real>(&self, x: &Vector2<S>, u: &[f64], t: f64, dt: f64) -> Vector2<S> {
        let p = &self.0;
        let torque = u[0];
        rk4(
            |_t, x: &Vector2<S>| {
                let mut d = Vector2::new(x[1], x[0].sin() * (-p.g / p.length) - x[1] * p.damping);
                d[1] += S::from(torque);
                d
            },
            x,
            t,
            dt,
            1,
        )
    }
    fn process_noise(&self, x: &Vector2<f64>, _u: &[f64], _t: f64, dt: f64) -> Matrix2<f64> {
        let qc = Matrix2::new(0.0, 0.0, 0.0, self.0.qc);
        van_loan(&self.0.derivative_jacobian(x), &qc, dt).1
    }
    same_sensor_as_the_pendulum!();
}

/// The pendulum through the library's continuous-time path only: its right-hand side and
/// noise density, with Q derived (AD linearisation, then Van Loan) and the transition
/// integrated by the library.
#[derive(Clone, Parameters)]
struct Derived(Pendulum);

impl Model for Derived {
    type State = U2;
    type Meas = U1;
    fn derivative<S: Real>(&self, x: &Vector2<S>, u: &[f64], t: f64) -> Vector2<S> {
        self.0.derivative(x, u, t)
    }
    fn noise_density(&self, x: &Vector2<f64>, u: &[f64], t: f64) -> Matrix2<f64> {
        self.0.noise_density(x, u, t)
    }
    same_sensor_as_the_pendulum!();
}

fn bits(values: &[f64]) -> Vec<u64> {
    values.iter().map(|v| v.to_bits()).collect()
}

/// On `pendulum`, the library's derived Q and transition give the hand-written path's numbers
/// bit for bit, and so does every EKF step (hand-written and AD Jacobians) over a simulated run
/// with a torque input: the continuous-time path is exact where the old code was written by
/// hand (a regression check against the old code path).
#[test]
fn derived_pendulum_equals_the_hand_written_path() {
    let derived = Derived(Pendulum::default());
    let hand = HandWritten(Pendulum::default());
    for (x, torque) in [
        (Vector2::new(0.6, 0.0), 0.0),
        (Vector2::new(-2.0, 3.0), 0.4),
        (Vector2::new(3.1, -1.0), -1.5),
    ] {
        for dt in [0.01, 0.2] {
            let (a, b) = (
                derived.process_noise(&x, &[torque], 0.0, dt),
                hand.process_noise(&x, &[torque], 0.0, dt),
            );
            assert_eq!(
                bits(a.as_slice()),
                bits(b.as_slice()),
                "Q at {x}, dt = {dt}"
            );
            let (a, b) = (
                derived.transition(&x, &[torque], 0.0, dt),
                hand.transition(&x, &[torque], 0.0, dt),
            );
            assert_eq!(
                bits(a.as_slice()),
                bits(b.as_slice()),
                "f at {x}, dt = {dt}"
            );
        }
    }
    let plant = sightline::plant(Pendulum::default());
    let mut data = plant.simulate(300, 21, &SimOptions::default()).unwrap();
    // The shipped pendulum (hand-written Q for speed) gives the same numbers too.
    let shipped = Pendulum::default();
    for x in [Vector2::new(0.6, 0.0), Vector2::new(-2.0, 3.0)] {
        let (a, b) = (
            shipped.process_noise(&x, &[0.2], 0.0, 0.01),
            derived.process_noise(&x, &[0.2], 0.0, 0.01),
        );
        assert_eq!(bits(a.as_slice()), bits(b.as_slice()), "shipped Q at {x}");
    }
    for (k, row) in data.records.iter_mut().enumerate() {
        row.u[0] = (k as f64 * 0.05).sin();
    }
    for spec in ["ekf", "ekf:jacobian=ad"] {
        let spec = FilterSpec::parse(spec).unwrap();
        let mut a = sightline::filters::build(&derived, &derived.prior(), &spec, 0).unwrap();
        let mut b = sightline::filters::build(&hand, &hand.prior(), &spec, 0).unwrap();
        let mut previous: Option<(f64, &[f64])> = None;
        for row in &data.records {
            common::step(a.as_mut(), previous, row.t, &row.y, &row.u).unwrap();
            common::step(b.as_mut(), previous, row.t, &row.y, &row.u).unwrap();
            assert_eq!(
                bits(a.mean()),
                bits(b.mean()),
                "{} at t = {}",
                spec.label,
                row.t
            );
            assert_eq!(bits(a.covariance()), bits(b.covariance()));
            previous = Some((row.t, &row.u));
        }
    }
}
