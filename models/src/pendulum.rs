//! `pendulum`: a damped pendulum rig whose bob is seen by a horizontal position sensor.
//!
//! θ̈ = −(g/length)·sin θ − damping·θ̇ + w(t), w white with spectral density `qc` (rad²/s³);
//! states `angle` (rad) and `rate` (rad/s); measurement `length·sin θ` (m), a nonlinear sensor.
//! Written in continuous time (`derivative` and `noise_density`): the library integrates one
//! classical RK4 step per sample; Q is Van Loan's discretisation of the dynamics linearised at
//! the current state, with the hand-written linearisation for speed (the derived one gives the
//! same numbers). Defaults are a scenario of our
//! own (a 1 m lab pendulum sampled at 100 Hz); g = 9.80665 m/s² is the standard gravity
//! (CGPM 1901).

use sightline_core::prelude::*;

/// Damped pendulum; every field is a `--set` parameter.
#[derive(Debug, Clone, PartialEq, Parameters)]
pub struct Pendulum {
    /// Gravitational acceleration (standard gravity).
    #[param(default = 9.80665, unit = "m/s^2", domain = Positive)]
    pub g: f64,
    /// Pendulum length.
    #[param(default = 1.0, unit = "m", domain = Positive)]
    pub length: f64,
    /// Viscous damping coefficient.
    #[param(default = 0.05, unit = "1/s", domain = NonNegative)]
    pub damping: f64,
    /// Sample time.
    #[param(default = 0.01, unit = "s", domain = Positive)]
    pub dt: f64,
    /// Spectral density of the angular-acceleration noise.
    #[param(default = 0.01, unit = "rad^2/s^3", domain = Positive)]
    pub qc: f64,
    /// Position sensor noise variance.
    #[param(default = 4e-4, unit = "m^2", domain = Positive)]
    pub r: f64,
}

impl Pendulum {
    /// Jacobian of the continuous dynamics, ∂(dx/dt)/∂x, written by hand: the hand-written EKF
    /// Jacobian below is built on it (the benchmarks time it against automatic differentiation).
    pub fn derivative_jacobian(&self, x: &Vector2<f64>) -> Matrix2<f64> {
        Matrix2::new(0.0, 1.0, -self.g / self.length * x[0].cos(), -self.damping)
    }
}

impl Model for Pendulum {
    type State = U2;
    type Meas = U1;

    fn declare(&self) -> Declaration {
        Declaration::new("pendulum", self.dt)
            .describe("damped pendulum, RK4 + Van Loan discretisation; bob's horizontal position measured")
            .state("angle", "rad", 0.6, 0.1)
            .state("rate", "rad/s", 0.0, 0.2)
            .measurement("position", "m")
            .input("torque", "rad/s^2", 0.0)
    }

    /// θ̈ = −(g/L) sin θ − damping·θ̇ + torque.
    // Inlined into the RK4 stages: out of line, the dual sin θ loses its fused sincos (num-dual
    // computes cos θ only where the derivative part is present, and LLVM fuses the two libm
    // calls only in one basic block), measured +5 % instructions on the AD step.
    #[inline]
    fn derivative<S: Real>(&self, x: &Vector2<S>, u: &[f64], _t: f64) -> Vector2<S> {
        let torque = u[0];
        Vector2::new(
            x[1],
            x[0].sin() * (-self.g / self.length) - x[1] * self.damping + torque,
        )
    }

    /// White angular acceleration: Qc = diag(0, qc).
    fn noise_density(&self, _x: &Vector2<f64>, _u: &[f64], _t: f64) -> Matrix2<f64> {
        Matrix2::new(0.0, 0.0, 0.0, self.qc)
    }

    /// Van Loan on the hand-written linearisation: the same numbers as the derived default
    /// (`tests/continuous_time.rs` checks it bit for bit) at a lower cost — on this two-state
    /// plant the automatic linearisation is about 7 % of an EKF step (`benches/filter_step`).
    fn process_noise(&self, x: &Vector2<f64>, u: &[f64], t: f64, dt: f64) -> Matrix2<f64> {
        van_loan(
            &self.derivative_jacobian(x),
            &self.noise_density(x, u, t),
            dt,
        )
        .1
    }

    fn measure<S: Real>(&self, x: &Vector2<S>, _u: &[f64], _t: f64) -> Vector1<S> {
        Vector1::new(x[0].sin() * self.length)
    }

    fn measurement_noise(&self, _t: f64) -> Matrix1<f64> {
        Matrix1::new(self.r)
    }

    /// Hand-derived Jacobian of the RK4 step by the chain rule through its stages:
    /// kᵢ = f(x + cᵢ h kᵢ₋₁) gives ∂kᵢ/∂x = A(x + cᵢ h kᵢ₋₁)(I + cᵢ h ∂kᵢ₋₁/∂x), and
    /// ∂x⁺/∂x = I + h/6 (∂k₁ + 2∂k₂ + 2∂k₃ + ∂k₄). (A constant torque does not change A.)
    fn transition_jacobian(
        &self,
        x: &Vector2<f64>,
        u: &[f64],
        t: f64,
        dt: f64,
    ) -> Option<Matrix2<f64>> {
        let h = dt;
        let f = |x: &Vector2<f64>| self.derivative(x, u, t);
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
            let u = [0.0];
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
        let u = [0.0];
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
                self.0.transition(x, &[0.3], 0.0, self.0.dt)
            }
        }
        let p = Pendulum::default();
        for x in [
            Vector2::new(0.6, 0.0),
            Vector2::new(-2.0, 3.0),
            Vector2::new(3.1, -1.0),
        ] {
            let (_, ad) = U2::jacobian(&Step(&p), &x);
            let hand = p.transition_jacobian(&x, &[0.3], 0.0, p.dt).unwrap();
            assert!((hand - ad).abs().max() < 1e-14, "{hand} vs {ad}");
        }
    }
}
