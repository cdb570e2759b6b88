//! `local-level`: a level that wanders as a random walk, seen through white noise — the
//! simplest structural time-series model (Durbin & Koopman, *Time Series Analysis by State
//! Space Methods*, 2nd ed., 2012, ch. 2; Harvey, *Forecasting, Structural Time Series Models and
//! the Kalman Filter*, 1989).
//!
//! x = level, x(k+1) = x(k) + η, η ~ N(0, q·dt); y = x + ε, ε ~ N(0, r). Linear and Gaussian,
//! scalar. Its level is usually unknown a priori: run it with `--diffuse level` (the exact
//! diffuse start, see `sightline_filters::diffuse`); D&K's standard example is the Nile's annual
//! flow (tests/data/nile.csv). The defaults are unit scales of our own: set or tune `q` and `r`.

use sightline_core::prelude::*;

/// Local-level plant; every field is a `--set` parameter.
#[derive(Debug, Clone, PartialEq, Parameters)]
pub struct LocalLevel {
    /// Sample time (one row per unit of time, as in yearly or daily series).
    #[param(default = 1.0, unit = "s", domain = Positive)]
    pub dt: f64,
    /// Variance of the level's change per unit of time (σ²_η of D&K at dt = 1).
    #[param(default = 1.0, unit = "1/s", domain = Positive)]
    pub q: f64,
    /// Measurement noise variance (σ²_ε of D&K).
    #[param(default = 1.0, unit = "", domain = Positive)]
    pub r: f64,
}

impl Model for LocalLevel {
    type State = U1;
    type Meas = U1;

    fn declare(&self) -> Declaration {
        Declaration::new("local-level", self.dt)
            .describe("random-walk level seen through white noise (Durbin & Koopman 2012, ch. 2); level measured")
            .state("level", "", 0.0, 1.0)
            .measurement("level", "")
    }

    fn transition<S: Real>(&self, x: &Vector1<S>, _u: &[f64], _t: f64, _dt: f64) -> Vector1<S> {
        *x
    }

    fn process_noise(&self, _x: &Vector1<f64>, _u: &[f64], _t: f64, dt: f64) -> Matrix1<f64> {
        Matrix1::new(self.q * dt)
    }

    fn measure<S: Real>(&self, x: &Vector1<S>, _u: &[f64], _t: f64) -> Vector1<S> {
        *x
    }

    fn measurement_noise(&self, _t: f64) -> Matrix1<f64> {
        Matrix1::new(self.r)
    }

    fn is_linear(&self) -> bool {
        true
    }
}
