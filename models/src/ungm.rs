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

use sightline_core::prelude::*;

/// The growth model; every field is a `--set` parameter.
#[derive(Debug, Clone, PartialEq, Parameters)]
pub struct Ungm {
    /// Process noise variance Q (published: 10).
    #[param(default = 10.0, unit = "-", domain = Positive)]
    pub q: f64,
    /// Measurement noise variance R (published: 1).
    #[param(default = 1.0, unit = "-", domain = Positive)]
    pub r: f64,
    /// Prior variance of x(0) (published: 2; `sd0.x` sets its square root instead).
    #[param(default = 2.0, unit = "-", domain = Positive)]
    pub p0: f64,
}

/// Prior mean of x(0) (published: 0.1).
const X0: f64 = 0.1;

impl Model for Ungm {
    type State = U1;
    type Meas = U1;

    /// Q = 10, R = 1, x(0) ~ N(0.1, 2) (Arulampalam et al. 2002, §VI.A, as we recall it:
    /// "x₀ = 0.1, P₀ = 2"; from memory).
    fn declare(&self) -> Declaration {
        Declaration::new("ungm", 1.0)
            .describe("univariate nonstationary growth model (Kitagawa 1996; Gordon et al. 1993); bimodal posterior")
            .state("x", "-", X0, self.p0.sqrt())
            .measurement("y", "-")
    }

    fn transition<S: Real>(&self, x: &Vector1<S>, _u: &[f64], t: f64, dt: f64) -> Vector1<S> {
        let x = x[0];
        let k = t + dt;
        Vector1::new(x * 0.5 + x * 25.0 / (x * x + 1.0) + 8.0 * (1.2 * k).cos())
    }

    fn process_noise(&self, _x: &Vector1<f64>, _u: &[f64], _t: f64, _dt: f64) -> Matrix1<f64> {
        Matrix1::new(self.q)
    }

    fn measure<S: Real>(&self, x: &Vector1<S>, _u: &[f64], _t: f64) -> Vector1<S> {
        Vector1::new(x[0] * x[0] / 20.0)
    }

    fn measurement_noise(&self, _t: f64) -> Matrix1<f64> {
        Matrix1::new(self.r)
    }

    /// The published prior is stated as a variance, so it is kept exactly (√p0 squared would
    /// round).
    fn prior(&self) -> Gaussian<U1> {
        Gaussian::new(Vector1::new(X0), Matrix1::new(self.p0))
    }
}
