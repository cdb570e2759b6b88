//! `pendulum`: a damped pendulum rig whose bob is seen by a horizontal position sensor.
//!
//! θ̈ = −(g/length)·sin θ − damping·θ̇ + w(t), w white with spectral density `qc` (rad²/s³);
//! states `angle` (rad) and `rate` (rad/s); measurement `length·sin θ` (m), a nonlinear sensor.
//! Discretised with one classical RK4 step per sample ([`sightline_core::rk4`]) and Q by Van
//! Loan's method on the dynamics linearised at the current state. Defaults are a scenario of our
//! own (a 1 m lab pendulum sampled at 100 Hz); g = 9.80665 m/s² is the standard gravity
//! (CGPM 1901).

use sightline_core::nalgebra::{Matrix1, Matrix2, U1, U2, Vector1, Vector2};
use sightline_core::{Domain, Gaussian, Model, Parameter, Real, Variable, rk4, van_loan};

/// Damped pendulum; every field is a `--set` parameter.
#[derive(Debug, Clone, PartialEq)]
pub struct Pendulum {
    /// Gravitational acceleration (m/s²).
    pub g: f64,
    /// Pendulum length (m).
    pub length: f64,
    /// Viscous damping coefficient (1/s).
    pub damping: f64,
    /// Sample time (s).
    pub dt: f64,
    /// Spectral density of the angular-acceleration noise (rad²/s³).
    pub qc: f64,
    /// Position sensor noise variance (m²).
    pub r: f64,
    /// Prior mean (angle, rate).
    pub x0: Vector2<f64>,
    /// Prior standard deviations (angle, rate).
    pub sd0: Vector2<f64>,
}

impl Default for Pendulum {
    fn default() -> Self {
        Pendulum {
            g: 9.80665,
            length: 1.0,
            damping: 0.05,
            dt: 0.01,
            qc: 0.01,
            r: 4e-4,
            x0: Vector2::new(0.6, 0.0),
            sd0: Vector2::new(0.1, 0.2),
        }
    }
}

impl Pendulum {
    /// Continuous-time dynamics dx/dt.
    pub fn derivative<S: Real>(&self, x: &Vector2<S>) -> Vector2<S> {
        Vector2::new(
            x[1],
            x[0].sin() * (-self.g / self.length) - x[1] * self.damping,
        )
    }

    /// Jacobian of the continuous dynamics, ∂(dx/dt)/∂x.
    pub fn derivative_jacobian(&self, x: &Vector2<f64>) -> Matrix2<f64> {
        Matrix2::new(0.0, 1.0, -self.g / self.length * x[0].cos(), -self.damping)
    }
}

impl Model for Pendulum {
    type State = U2;
    type Meas = U1;
    type Input = U1;

    fn name(&self) -> &str {
        "pendulum"
    }
    fn description(&self) -> &str {
        "damped pendulum, RK4 + Van Loan discretisation; bob's horizontal position measured"
    }
    fn state_dim(&self) -> U2 {
        U2
    }
    fn meas_dim(&self) -> U1 {
        U1
    }
    fn input_dim(&self) -> U1 {
        U1
    }
    fn states(&self) -> Vec<Variable> {
        vec![
            Variable::new("angle", "rad"),
            Variable::new("rate", "rad/s"),
        ]
    }
    fn measurements(&self) -> Vec<Variable> {
        vec![Variable::new("position", "m")]
    }
    fn inputs(&self) -> Vec<Variable> {
        vec![Variable::new("torque", "rad/s^2")]
    }

    fn transition<S: Real>(&self, x: &Vector2<S>, u: &Vector1<f64>, t: f64, dt: f64) -> Vector2<S> {
        let torque = u[0];
        rk4(
            |_t, x: &Vector2<S>| {
                let mut d = self.derivative(x);
                d[1] += S::from(torque);
                d
            },
            x,
            t,
            dt,
            1,
        )
    }

    fn measure<S: Real>(&self, x: &Vector2<S>, _u: &Vector1<f64>, _t: f64) -> Vector1<S> {
        Vector1::new(x[0].sin() * self.length)
    }

    fn process_noise(&self, x: &Vector2<f64>, _u: &Vector1<f64>, _t: f64, dt: f64) -> Matrix2<f64> {
        let qc = Matrix2::new(0.0, 0.0, 0.0, self.qc);
        van_loan(&self.derivative_jacobian(x), &qc, dt).1
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

    fn default_input(&self) -> Vector1<f64> {
        Vector1::new(0.0)
    }

    fn dt(&self) -> f64 {
        self.dt
    }

    fn parameters(&self) -> Vec<Parameter> {
        vec![
            Parameter::new(
                "g",
                self.g,
                "m/s^2",
                Domain::Positive,
                "gravitational acceleration (standard gravity)",
            ),
            Parameter::new(
                "length",
                self.length,
                "m",
                Domain::Positive,
                "pendulum length",
            ),
            Parameter::new(
                "damping",
                self.damping,
                "1/s",
                Domain::NonNegative,
                "viscous damping coefficient",
            ),
            Parameter::new("dt", self.dt, "s", Domain::Positive, "sample time"),
            Parameter::new(
                "qc",
                self.qc,
                "rad^2/s^3",
                Domain::Positive,
                "spectral density of the angular-acceleration noise",
            ),
            Parameter::new(
                "r",
                self.r,
                "m^2",
                Domain::Positive,
                "position sensor noise variance",
            ),
            Parameter::new(
                "sd0.angle",
                self.sd0[0],
                "rad",
                Domain::Positive,
                "prior standard deviation of angle",
            ),
            Parameter::new(
                "sd0.rate",
                self.sd0[1],
                "rad/s",
                Domain::Positive,
                "prior standard deviation of rate",
            ),
        ]
    }

    fn apply_parameter(&mut self, name: &str, value: f64) {
        match name {
            "g" => self.g = value,
            "length" => self.length = value,
            "damping" => self.damping = value,
            "dt" => self.dt = value,
            "qc" => self.qc = value,
            "r" => self.r = value,
            "sd0.angle" => self.sd0[0] = value,
            "sd0.rate" => self.sd0[1] = value,
            _ => {}
        }
    }

    /// Hand-derived Jacobian of the RK4 step by the chain rule through its stages:
    /// kᵢ = f(x + cᵢ h kᵢ₋₁) gives ∂kᵢ/∂x = A(x + cᵢ h kᵢ₋₁)(I + cᵢ h ∂kᵢ₋₁/∂x), and
    /// ∂x⁺/∂x = I + h/6 (∂k₁ + 2∂k₂ + 2∂k₃ + ∂k₄). (A constant torque does not change A.)
    fn transition_jacobian(
        &self,
        x: &Vector2<f64>,
        u: &Vector1<f64>,
        _t: f64,
        dt: f64,
    ) -> Option<Matrix2<f64>> {
        let h = dt;
        let f = |x: &Vector2<f64>| {
            let mut d = self.derivative(x);
            d[1] += u[0];
            d
        };
        let i = Matrix2::identity();
        let k1 = f(x);
        let j1 = self.derivative_jacobian(x);
        let x2 = x + k1 * (h / 2.0);
        let k2 = f(&x2);
        let j2 = self.derivative_jacobian(&x2) * (i + j1 * (h / 2.0));
        let x3 = x + k2 * (h / 2.0);
        let k3 = f(&x3);
        let j3 = self.derivative_jacobian(&x3) * (i + j2 * (h / 2.0));
        let x4 = x + k3 * h;
        let j4 = self.derivative_jacobian(&x4) * (i + j3 * h);
        Some(i + (j1 + (j2 + j3) * 2.0 + j4) * (h / 6.0))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn undamped() -> Pendulum {
        Pendulum {
            damping: 0.0,
            ..Pendulum::default()
        }
    }

    /// Energy per unit mass and squared length: ½θ̇² + (g/L)(1 − cos θ).
    fn energy(p: &Pendulum, x: &Vector2<f64>) -> f64 {
        0.5 * x[1] * x[1] + p.g / p.length * (1.0 - x[0].cos())
    }

    #[test]
    fn small_angle_period_is_two_pi_root_l_over_g() {
        // Small-angle period T = 2π√(L/g) (closed form). The finite-amplitude correction,
        // T/T₀ − 1 ≈ θ₀²/16 ≈ 6e-8 at θ₀ = 1e-3 rad, follows from the series of the complete
        // elliptic integral of the first kind (Abramowitz & Stegun §17.3).
        for length in [1.0, 0.25] {
            let p = Pendulum {
                length,
                ..undamped()
            };
            let u = Vector1::new(0.0);
            let mut x = Vector2::new(1e-3, 0.0);
            let mut crossings = Vec::new();
            for k in 0..5_000 {
                let t = k as f64 * p.dt;
                let next = p.transition(&x, &u, t, p.dt);
                // Upward zero crossings of the angle, located by linear interpolation.
                if x[0] < 0.0 && next[0] >= 0.0 {
                    crossings.push(t + p.dt * x[0] / (x[0] - next[0]));
                }
                x = next;
            }
            let n = crossings.len() - 1;
            let period = (crossings[n] - crossings[0]) / n as f64;
            let expected = 2.0 * std::f64::consts::PI * (length / p.g).sqrt();
            assert!(n >= 20, "{n} periods");
            assert!(
                (period / expected - 1.0).abs() < 1e-3,
                "L = {length}: period {period} vs {expected}"
            );
        }
    }

    #[test]
    fn undamped_rk4_energy_drift_stays_below_the_linear_bound() {
        // RK4 applied to an oscillator of frequency ω multiplies the energy by |R(iωh)|² per
        // step, R(z) = 1 + z + z²/2 + z³/6 + z⁴/24 its stability function (Hairer & Wanner,
        // *Solving ODEs II*, §IV.2), i.e. 1 − (ωh)⁶/72 + (ωh)⁸/576 < 1: a slow loss. For the
        // pendulum, ω ≤ √(g/L), so over N steps the relative loss is at most
        // 1 − |R(i√(g/L)·h)|^(2N) (about 1.3e-7 for N = 10⁴, h = 0.01 s, L = 1 m); at small
        // amplitude it equals that value.
        let p = undamped();
        let u = Vector1::new(0.0);
        let steps: i32 = 10_000;
        let y = (p.g / p.length).sqrt() * p.dt;
        let gain = (1.0 - y * y / 2.0 + y.powi(4) / 24.0).powi(2) + (y - y.powi(3) / 6.0).powi(2);
        let bound = 1.0 - gain.powi(steps);
        assert!(bound > 1e-7 && bound < 2e-7, "{bound}");
        for amplitude in [0.01, 0.1, 0.6, 1.5] {
            let mut x = Vector2::new(amplitude, 0.0);
            let e0 = energy(&p, &x);
            for k in 0..steps {
                x = p.transition(&x, &u, k as f64 * p.dt, p.dt);
            }
            let loss = 1.0 - energy(&p, &x) / e0;
            assert!(
                loss > 0.0 && loss <= bound,
                "θ₀ = {amplitude}: loss {loss} vs {bound}"
            );
            if amplitude == 0.01 {
                assert!((loss / bound - 1.0).abs() < 1e-2, "loss {loss} vs {bound}");
            }
        }
    }

    #[test]
    fn hand_jacobian_equals_automatic_differentiation() {
        use sightline_core::ad::{Differentiable, VectorFunction};
        struct Step<'a>(&'a Pendulum);
        impl VectorFunction<U2, U2> for Step<'_> {
            fn eval<S: Real>(&self, x: &Vector2<S>) -> Vector2<S> {
                self.0.transition(x, &Vector1::new(0.3), 0.0, self.0.dt)
            }
        }
        let p = Pendulum::default();
        for x in [
            Vector2::new(0.6, 0.0),
            Vector2::new(-2.0, 3.0),
            Vector2::new(3.1, -1.0),
        ] {
            let (_, ad) = U2::jacobian(&Step(&p), &x);
            let hand = p
                .transition_jacobian(&x, &Vector1::new(0.3), 0.0, p.dt)
                .unwrap();
            assert!((hand - ad).abs().max() < 1e-14, "{hand} vs {ad}");
        }
    }
}
