//! `cv`: the linear constant-velocity plant with continuous white-noise acceleration.
//!
//! x = (pos, vel), x(k+1) = F x(k) + w, F = [[1, dt], [0, 1]],
//! Q = q·[[dt³/3, dt²/2], [dt²/2, dt]] (Bar-Shalom, Li & Kirubarajan, *Estimation with
//! Applications to Tracking and Navigation*, Wiley 2001, §6.2.2), y = pos + v, v ~ N(0, r).
//! Linear and Gaussian: the Kalman filter is exact, which makes this the reference plant for
//! every linear-Gaussian check. Defaults are a scenario of our own (a cart on a rail, 10 Hz
//! position fixes).

use sightline_core::prelude::*;

/// Constant-velocity plant; every field is a `--set` parameter.
#[derive(Debug, Clone, PartialEq, Parameters)]
pub struct Cv {
    /// Sample time.
    #[param(default = 0.1, unit = "s", domain = Positive)]
    pub dt: f64,
    /// Spectral density of the white acceleration.
    #[param(default = 0.5, unit = "m^2/s^3", domain = Positive)]
    pub q: f64,
    /// Position measurement noise variance.
    #[param(default = 0.25, unit = "m^2", domain = Positive)]
    pub r: f64,
}

impl Cv {
    /// Transition matrix F for step `dt`.
    pub fn transition_matrix(dt: f64) -> Matrix2<f64> {
        Matrix2::new(1.0, dt, 0.0, 1.0)
    }

    /// Discrete process-noise covariance Q for step `dt` (closed form above).
    pub fn noise_matrix(q: f64, dt: f64) -> Matrix2<f64> {
        q * Matrix2::new(dt.powi(3) / 3.0, dt.powi(2) / 2.0, dt.powi(2) / 2.0, dt)
    }
}

impl Model for Cv {
    type State = U2;
    type Meas = U1;

    fn declare(&self) -> Declaration {
        Declaration::new("cv", self.dt)
            .describe("linear constant-velocity plant, white-noise acceleration (Bar-Shalom et al. 2001); position measured")
            .state("pos", "m", 0.0, 1.0)
            .state("vel", "m/s", 1.0, 1.0)
            .measurement("pos", "m")
    }

    fn transition<S: Real>(&self, x: &Vector2<S>, _u: &[f64], _t: f64, dt: f64) -> Vector2<S> {
        Vector2::new(x[0] + x[1] * dt, x[1])
    }

    fn process_noise(&self, _x: &Vector2<f64>, _u: &[f64], _t: f64, dt: f64) -> Matrix2<f64> {
        Self::noise_matrix(self.q, dt)
    }

    fn measure<S: Real>(&self, x: &Vector2<S>, _u: &[f64], _t: f64) -> Vector1<S> {
        Vector1::new(x[0])
    }

    fn measurement_noise(&self, _t: f64) -> Matrix1<f64> {
        Matrix1::new(self.r)
    }

    fn is_linear(&self) -> bool {
        true
    }

    fn transition_jacobian(
        &self,
        _x: &Vector2<f64>,
        _u: &[f64],
        _t: f64,
        dt: f64,
    ) -> Option<Matrix2<f64>> {
        Some(Self::transition_matrix(dt))
    }
}
