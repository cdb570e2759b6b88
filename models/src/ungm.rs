//! `ungm`: the univariate nonstationary growth model, the standard stress test for Gaussian
//! filters (Kitagawa, J. Comput. Graph. Stat. 5(1), 1996; Gordon, Salmond & Smith, IEE Proc. F
//! 140(2), 1993; Arulampalam, Maskell, Gordon & Clapp, IEEE TSP 50(2), 2002, §VI.A):
//!
//! x(k) = x(k−1)/2 + 25·x(k−1)/(1 + x(k−1)²) + 8·cos(1.2·k) + w(k),  w ~ N(0, Q = 10)
//! y(k) = x(k)²/20 + v(k),                                          v ~ N(0, R = 1)
//!
//! The measurement's square makes the sign of x unobservable from one
//! sample, so the posterior is bimodal. Time is the step index (dt = 1); the cosine term uses the
//! index of the state being predicted, k = t + dt. The plant is autonomous: it has no inputs.

use sightline_core::nalgebra::{Matrix1, SVector, U0, U1, Vector1};

/// The empty input vector of an autonomous plant.
type NoInput = SVector<f64, 0>;
use sightline_core::{Domain, Gaussian, Model, Parameter, Real, Variable};

/// The growth model; every field is a `--set` parameter.
#[derive(Debug, Clone, PartialEq)]
pub struct Ungm {
    /// Process noise variance Q.
    pub q: f64,
    /// Measurement noise variance R.
    pub r: f64,
    /// Prior mean of x(0).
    pub x0: f64,
    /// Prior variance of x(0).
    pub p0: f64,
}

impl Default for Ungm {
    /// Q = 10, R = 1, x(0) ~ N(0.1, 2) (Arulampalam et al. 2002, §VI.A, as we recall it:
    /// "x₀ = 0.1, P₀ = 2"; from memory).
    fn default() -> Self {
        Ungm {
            q: 10.0,
            r: 1.0,
            x0: 0.1,
            p0: 2.0,
        }
    }
}

impl Model for Ungm {
    type State = U1;
    type Meas = U1;
    type Input = U0;

    fn name(&self) -> &str {
        "ungm"
    }
    fn description(&self) -> &str {
        "univariate nonstationary growth model (Kitagawa 1996; Gordon et al. 1993); bimodal posterior"
    }
    fn state_dim(&self) -> U1 {
        U1
    }
    fn meas_dim(&self) -> U1 {
        U1
    }
    fn input_dim(&self) -> U0 {
        U0
    }
    fn states(&self) -> Vec<Variable> {
        vec![Variable::new("x", "-")]
    }
    fn measurements(&self) -> Vec<Variable> {
        vec![Variable::new("y", "-")]
    }
    fn inputs(&self) -> Vec<Variable> {
        Vec::new()
    }

    fn transition<S: Real>(&self, x: &Vector1<S>, _u: &NoInput, t: f64, dt: f64) -> Vector1<S> {
        let x = x[0];
        let k = t + dt;
        Vector1::new(x * 0.5 + x * 25.0 / (x * x + 1.0) + 8.0 * (1.2 * k).cos())
    }

    fn measure<S: Real>(&self, x: &Vector1<S>, _u: &NoInput, _t: f64) -> Vector1<S> {
        Vector1::new(x[0] * x[0] / 20.0)
    }

    fn process_noise(&self, _x: &Vector1<f64>, _u: &NoInput, _t: f64, _dt: f64) -> Matrix1<f64> {
        Matrix1::new(self.q)
    }

    fn measurement_noise(&self, _t: f64) -> Matrix1<f64> {
        Matrix1::new(self.r)
    }

    fn prior(&self) -> Gaussian<U1> {
        Gaussian::new(Vector1::new(self.x0), Matrix1::new(self.p0))
    }

    fn default_input(&self) -> NoInput {
        NoInput::zeros()
    }

    fn dt(&self) -> f64 {
        1.0
    }

    fn parameters(&self) -> Vec<Parameter> {
        vec![
            Parameter::new(
                "q",
                self.q,
                "-",
                Domain::Positive,
                "process noise variance Q (published: 10)",
            ),
            Parameter::new(
                "r",
                self.r,
                "-",
                Domain::Positive,
                "measurement noise variance R (published: 1)",
            ),
            Parameter::new(
                "p0",
                self.p0,
                "-",
                Domain::Positive,
                "prior variance of x(0)",
            ),
        ]
    }

    fn apply_parameter(&mut self, name: &str, value: f64) {
        match name {
            "q" => self.q = value,
            "r" => self.r = value,
            "p0" => self.p0 = value,
            _ => {}
        }
    }
}
