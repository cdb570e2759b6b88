//! The template for a plant of your own: a Van der Pol oscillator, written in continuous time,
//! seen through a range sensor at a fixed point off its line of motion (a scenario of our own).
//!
//! ```text
//! ẍ = μ(1 − x²)ẋ − x + w,   w white with spectral density q      (Van der Pol's equation)
//! y = √((x − sx)² + sy²) + v,   v ~ N(0, r)                       (range to the sensor)
//! ```
//!
//! The library integrates the right-hand side (RK4) and derives the process noise by Van Loan's
//! method from its automatic linearisation: no Jacobian and no discretisation are written here.
//! Every command of `sightline` runs on it, e.g.
//! `cargo run --release --example van_der_pol -- simulate vdp --steps 400 --seed 1 -o vdp.csv`,
//! then `... -- compare vdp vdp.csv -o out/` or `... -- tune vdp vdp.csv -f ukf --param q -o t/`.

use sightline::prelude::*;

/// The oscillator and its sensor; every field is a `--set` parameter.
#[derive(Clone, Parameters)]
pub struct Vdp {
    /// Nonlinear damping μ.
    #[param(default = 1.0, unit = "1/s", domain = NonNegative)]
    pub mu: f64,
    /// Spectral density of the random forcing.
    #[param(default = 0.05, unit = "m^2/s^3", domain = Positive)]
    pub q: f64,
    /// Range noise variance.
    #[param(default = 0.01, unit = "m^2", domain = Positive)]
    pub r: f64,
    /// Sensor position along the line of motion.
    #[param(default = 0.5, unit = "m", domain = Finite)]
    pub sx: f64,
    /// Sensor distance from the line of motion.
    #[param(default = 1.5, unit = "m", domain = Finite)]
    pub sy: f64,
}

impl Model for Vdp {
    type State = U2;
    type Meas = U1;

    fn declare(&self) -> Declaration {
        Declaration::new("vdp", 0.05)
            .describe("Van der Pol oscillator seen by a range sensor (example plant)")
            .state("x", "m", 2.0, 0.5)
            .state("v", "m/s", 0.0, 0.5)
            .measurement("range", "m")
    }

    fn derivative<S: Real>(&self, x: &Vector2<S>, _u: &[f64], _t: f64) -> Vector2<S> {
        Vector2::new(x[1], c(self.mu) * (c(1.0) - x[0] * x[0]) * x[1] - x[0])
    }

    fn noise_density(&self, _x: &Vector2<f64>, _u: &[f64], _t: f64) -> Matrix2<f64> {
        Matrix2::new(0.0, 0.0, 0.0, self.q)
    }

    fn measure<S: Real>(&self, x: &Vector2<S>, _u: &[f64], _t: f64) -> Vector1<S> {
        Vector1::new((x[0] - self.sx).hypot(S::from(self.sy)))
    }

    fn measurement_noise(&self, _t: f64) -> Matrix1<f64> {
        Matrix1::new(self.r)
    }
}

fn main() -> std::process::ExitCode {
    sightline::cli::main_with(vec![sightline::plant(Vdp::default())])
}
