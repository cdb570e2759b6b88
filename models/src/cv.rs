//! `cv`: the linear constant-velocity plant with continuous white-noise acceleration.
//!
//! x = (pos, vel), x(k+1) = F x(k) + w, F = [[1, dt], [0, 1]],
//! Q = q·[[dt³/3, dt²/2], [dt²/2, dt]] (Bar-Shalom, Li & Kirubarajan, *Estimation with
//! Applications to Tracking and Navigation*, Wiley 2001, §6.2.2), y = pos + v, v ~ N(0, r).
//! Linear and Gaussian: the Kalman filter is exact, which makes this the reference plant for
//! every linear-Gaussian check. Defaults are a scenario of our own (a cart on a rail, 10 Hz
//! position fixes).

use sightline_core::nalgebra::{Matrix1, Matrix2, SVector, U0, U1, U2, Vector1, Vector2};

/// The empty input vector of an autonomous plant.
type NoInput = SVector<f64, 0>;
use sightline_core::{Domain, Gaussian, Model, Parameter, Real, Variable};

/// Constant-velocity plant; every field is a `--set` parameter.
#[derive(Debug, Clone, PartialEq)]
pub struct Cv {
    /// Sample time (s).
    pub dt: f64,
    /// Spectral density of the white acceleration noise (m²/s³).
    pub q: f64,
    /// Position measurement noise variance (m²).
    pub r: f64,
    /// Prior mean (pos, vel).
    pub x0: Vector2<f64>,
    /// Prior standard deviations (pos, vel).
    pub sd0: Vector2<f64>,
}

impl Default for Cv {
    fn default() -> Self {
        Cv {
            dt: 0.1,
            q: 0.5,
            r: 0.25,
            x0: Vector2::new(0.0, 1.0),
            sd0: Vector2::new(1.0, 1.0),
        }
    }
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
    type Input = U0;

    fn name(&self) -> &str {
        "cv"
    }
    fn description(&self) -> &str {
        "linear constant-velocity plant, white-noise acceleration (Bar-Shalom et al. 2001); position measured"
    }
    fn state_dim(&self) -> U2 {
        U2
    }
    fn meas_dim(&self) -> U1 {
        U1
    }
    fn input_dim(&self) -> U0 {
        U0
    }
    fn states(&self) -> Vec<Variable> {
        vec![Variable::new("pos", "m"), Variable::new("vel", "m/s")]
    }
    fn measurements(&self) -> Vec<Variable> {
        vec![Variable::new("pos", "m")]
    }
    fn inputs(&self) -> Vec<Variable> {
        Vec::new()
    }

    fn transition<S: Real>(&self, x: &Vector2<S>, _u: &NoInput, _t: f64, dt: f64) -> Vector2<S> {
        Vector2::new(x[0] + x[1] * dt, x[1])
    }

    fn measure<S: Real>(&self, x: &Vector2<S>, _u: &NoInput, _t: f64) -> Vector1<S> {
        Vector1::new(x[0])
    }

    fn process_noise(&self, _x: &Vector2<f64>, _u: &NoInput, _t: f64, dt: f64) -> Matrix2<f64> {
        Self::noise_matrix(self.q, dt)
    }

    fn measurement_noise(&self, _t: f64) -> Matrix1<f64> {
        Matrix1::new(self.r)
    }

    fn prior(&self) -> Gaussian<U2> {
        Gaussian::new(
            self.x0,
            Matrix2::from_diagonal(&self.sd0.component_mul(&self.sd0)),
        )
    }

    fn default_input(&self) -> NoInput {
        NoInput::zeros()
    }

    fn dt(&self) -> f64 {
        self.dt
    }

    fn is_linear(&self) -> bool {
        true
    }

    fn parameters(&self) -> Vec<Parameter> {
        vec![
            Parameter::new("dt", self.dt, "s", Domain::Positive, "sample time"),
            Parameter::new(
                "q",
                self.q,
                "m^2/s^3",
                Domain::Positive,
                "spectral density of the white acceleration",
            ),
            Parameter::new(
                "r",
                self.r,
                "m^2",
                Domain::Positive,
                "position measurement noise variance",
            ),
            Parameter::new(
                "sd0.pos",
                self.sd0[0],
                "m",
                Domain::Positive,
                "prior standard deviation of pos",
            ),
            Parameter::new(
                "sd0.vel",
                self.sd0[1],
                "m/s",
                Domain::Positive,
                "prior standard deviation of vel",
            ),
        ]
    }

    fn apply_parameter(&mut self, name: &str, value: f64) {
        match name {
            "dt" => self.dt = value,
            "q" => self.q = value,
            "r" => self.r = value,
            "sd0.pos" => self.sd0[0] = value,
            "sd0.vel" => self.sd0[1] = value,
            _ => {}
        }
    }

    fn transition_jacobian(
        &self,
        _x: &Vector2<f64>,
        _u: &NoInput,
        _t: f64,
        dt: f64,
    ) -> Option<Matrix2<f64>> {
        Some(Self::transition_matrix(dt))
    }
}
