//! `quadtank`: the quadruple-tank process (K. H. Johansson, "The quadruple-tank process: a
//! multivariable laboratory process with an adjustable zero", IEEE Trans. Control Syst. Technol.
//! 8(3):456–465, 2000).
//!
//! Two pumps feed four tanks: pump i delivers k_i·v_i, a fraction γ_i of it to lower tank i and the
//! rest to the upper tank diagonally opposite; the upper tanks 3 and 4 drain into the lower tanks
//! 1 and 2. With Torricelli outflows a_i·√(2g·h_i) (Johansson 2000, eq. 1):
//!
//! ```text
//! dh1/dt = −a1/A1·√(2g h1) + a3/A1·√(2g h3) + γ1·k1/A1·v1
//! dh2/dt = −a2/A2·√(2g h2) + a4/A2·√(2g h4) + γ2·k2/A2·v2
//! dh3/dt = −a3/A3·√(2g h3) + (1 − γ2)·k2/A3·v2
//! dh4/dt = −a4/A4·√(2g h4) + (1 − γ1)·k1/A4·v1
//! y      = (kc·h1, kc·h2)                                      (the two lower level sensors)
//! ```
//!
//! Defaults, from memory of the paper (Table I for the rig, Table II for the operating point P−):
//! A1 = A3 = 28 cm², A2 = A4 = 32 cm², a1 = a3 = 0.071 cm², a2 = a4 = 0.057 cm², kc = 0.50 V/cm,
//! g = 981 cm/s²; at P− (minimum phase, γ1 + γ2 > 1) v1 = v2 = 3.00 V, k1 = 3.33 and
//! k2 = 3.35 cm³/(V·s), γ1 = 0.70, γ2 = 0.60, with measured levels (h1, h2, h3, h4) =
//! (12.4, 12.7, 1.8, 1.4) cm, used as the prior mean. (The paper's non-minimum-phase point P+ is,
//! from the same memory, v = 3.15 V, k1 = 3.14, k2 = 3.29, γ1 = 0.43, γ2 = 0.34: set those with
//! `--set`.) Noise levels, the 1 s sample time and the prior spread are a scenario of our own.
//!
//! Units are cm, s and V; the dataset's `t` is in seconds, as is `dt`. The flow law is evaluated
//! at a smooth positive part of each level (see [`crate::torricelli`]; smoothing level `h_smooth`),
//! so it never sees h < 0, never returns NaN and stays differentiable at h = 0; in addition
//! [`Model::project`] clamps levels to ≥ 0. Each sample is integrated with classical RK4 substeps
//! short enough to stay inside RK4's stability interval even for an empty tank, and Q comes from
//! Van Loan's method on the dynamics linearised at the current state, with white level noise of
//! spectral density `qc` in every tank.

use sightline_core::prelude::*;

use crate::torricelli::{outflow, outflow_slope};

/// Longest RK4 substep (s) used whatever the stiffness bound allows.
const MAX_SUBSTEP: f64 = 1.0;

/// Quadruple-tank process; every field is a `--set` parameter. The defaults are the rig and
/// operating point P− of Johansson (2000), from memory (module docs).
#[derive(Debug, Clone, PartialEq, Parameters)]
pub struct QuadTank {
    /// Cross-sections A1..A4 of the tanks.
    #[param(
        default = [28.0, 32.0, 28.0, 32.0],
        unit = "cm^2",
        domain = Positive,
        name = "A{}",
        about = "cross-section of tank {} (Johansson 2000, Table I)"
    )]
    pub area: [f64; 4],
    /// Cross-sections a1..a4 of the outlet holes.
    #[param(
        default = [0.071, 0.057, 0.071, 0.057],
        unit = "cm^2",
        domain = Positive,
        name = "a{}",
        about = "outlet hole of tank {} (Johansson 2000, Table I)"
    )]
    pub outlet: [f64; 4],
    /// Pump gains k1, k2.
    #[param(
        default = [3.33, 3.35],
        unit = "cm^3/(V s)",
        domain = Positive,
        name = "k{}",
        about = "gain of pump {} (Johansson 2000, Table II, P-)"
    )]
    pub pump_gain: [f64; 2],
    /// Valve splits γ1, γ2: the fraction of pump i's flow sent to lower tank i.
    #[param(
        default = [0.70, 0.60],
        unit = "-",
        domain = Interval(0.0, 1.0),
        name = "gamma{}",
        about = "fraction of pump {}'s flow into the lower tank below it, the rest into the \
                 upper tank diagonally opposite (Table II, P-)"
    )]
    pub split: [f64; 2],
    /// Level sensor gain (Johansson 2000, Table I).
    #[param(default = 0.50, unit = "V/cm", domain = Positive)]
    pub kc: f64,
    /// Gravitational acceleration (Johansson 2000, Table I).
    #[param(default = 981.0, unit = "cm/s^2", domain = Positive)]
    pub g: f64,
    /// Sample time.
    #[param(default = 1.0, unit = "s", domain = Interval(1e-3, 600.0))]
    pub dt: f64,
    /// Spectral density of the white level noise in each tank.
    #[param(default = 1e-3, unit = "cm^2/s", domain = Positive)]
    pub qc: f64,
    /// Variance of each level sensor's noise.
    #[param(default = 1e-4, unit = "V^2", domain = Positive)]
    pub r: f64,
    /// Level below which the outflow law is smoothed towards zero flow.
    #[param(default = 1e-3, unit = "cm", domain = Interval(1e-6, 1.0))]
    pub h_smooth: f64,
}

/// Levels (h1, h2, h3, h4) measured on the rig at P− (cm), the prior mean.
pub const RIG_LEVELS: [f64; 4] = [12.4, 12.7, 1.8, 1.4];
/// Prior standard deviations of the levels (cm), a scenario of our own.
const PRIOR_SD: [f64; 4] = [1.0, 1.0, 0.5, 0.5];

impl QuadTank {
    /// Jacobian ∂(dh/dt)/∂h of the continuous dynamics (independent of the inputs).
    pub fn derivative_jacobian(&self, h: &Vector4<f64>) -> Matrix4<f64> {
        let [a1, a2, a3, a4] = self.outlet;
        let [big1, big2, big3, big4] = self.area;
        let s = |a: f64, h: f64| outflow_slope(a, self.g, h, self.h_smooth);
        let (s1, s2, s3, s4) = (s(a1, h[0]), s(a2, h[1]), s(a3, h[2]), s(a4, h[3]));
        #[rustfmt::skip]
        let jac = Matrix4::new(
            -s1 / big1, 0.0,        s3 / big1,  0.0,
            0.0,        -s2 / big2, 0.0,        s4 / big2,
            0.0,        0.0,        -s3 / big3, 0.0,
            0.0,        0.0,        0.0,        -s4 / big4,
        );
        jac
    }

    /// Number of RK4 substeps for a sample of `dt` seconds.
    ///
    /// The stiffest the dynamics get is at an empty tank, where |∂(dh/dt)/∂h| ≤
    /// (a/A)·√(2g)·0.403/√ε ([`crate::torricelli`]); a substep of at most 2/that (and at most
    /// 1 s) keeps h·λ inside RK4's real stability interval (−2.78, 0) (Hairer & Wanner, *Solving
    /// ODEs II*, §IV.2).
    pub fn substeps(&self, dt: f64) -> usize {
        let ratio = (0..4)
            .map(|i| self.outlet[i] / self.area[i])
            .fold(0.0, f64::max);
        let stiffest = ratio * (2.0 * self.g).sqrt() * 0.403 / self.h_smooth.sqrt();
        let longest = MAX_SUBSTEP.min(2.0 / stiffest);
        ((dt / longest).ceil() as usize).max(1)
    }

    /// The steady state under constant pump voltages `v`, solved from the mass balances with the
    /// unsmoothed law (upper tanks first): a3√(2g h3) = (1−γ2)k2v2, a4√(2g h4) = (1−γ1)k1v1,
    /// a1√(2g h1) = a3√(2g h3) + γ1k1v1, a2√(2g h2) = a4√(2g h4) + γ2k2v2.
    pub fn steady_state(&self, v: &Vector2<f64>) -> Vector4<f64> {
        let [a1, a2, a3, a4] = self.outlet;
        let [k1, k2] = self.pump_gain;
        let [g1, g2] = self.split;
        let level = |flow: f64, a: f64| (flow / a).powi(2) / (2.0 * self.g);
        let q3 = (1.0 - g2) * k2 * v[1];
        let q4 = (1.0 - g1) * k1 * v[0];
        Vector4::new(
            level(q3 + g1 * k1 * v[0], a1),
            level(q4 + g2 * k2 * v[1], a2),
            level(q3, a3),
            level(q4, a4),
        )
    }
}

impl Model for QuadTank {
    type State = U4;
    type Meas = U2;

    fn declare(&self) -> Declaration {
        let mut d = Declaration::new("quadtank", self.dt).describe(
            "quadruple-tank process (Johansson 2000) at operating point P-; the two lower levels measured",
        );
        for i in 0..4 {
            d = d.state(format!("h{}", i + 1), "cm", RIG_LEVELS[i], PRIOR_SD[i]);
        }
        d.measurement("level1", "V")
            .measurement("level2", "V")
            .input("v1", "V", 3.0)
            .input("v2", "V", 3.0)
    }

    /// dh/dt (cm/s) at levels `h` under pump voltages `v` (eqs. above).
    // Inlined into the RK4 stages as the transition written around it was before the
    // continuous-time contract (`benches/callgrind.py` counts the difference).
    #[inline]
    fn derivative<S: Real>(&self, h: &Vector4<S>, v: &[f64], _t: f64) -> Vector4<S> {
        let [a1, a2, a3, a4] = self.outlet;
        let [big1, big2, big3, big4] = self.area;
        let [k1, k2] = self.pump_gain;
        let [g1, g2] = self.split;
        let q = |a: f64, h: S| outflow(a, self.g, h, self.h_smooth);
        let (q1, q2, q3, q4) = (q(a1, h[0]), q(a2, h[1]), q(a3, h[2]), q(a4, h[3]));
        Vector4::new(
            (q3 - q1 + g1 * k1 * v[0]) / big1,
            (q4 - q2 + g2 * k2 * v[1]) / big2,
            (-q3 + (1.0 - g2) * k2 * v[1]) / big3,
            (-q4 + (1.0 - g1) * k1 * v[0]) / big4,
        )
    }

    /// RK4 with substeps short enough for an empty tank ([`QuadTank::substeps`]).
    fn integrator(&self, dt: f64) -> Integrator {
        Integrator::Rk4 {
            substeps: self.substeps(dt),
        }
    }

    /// Van Loan on the hand-written linearisation (the derived default differentiates the
    /// smoothed outflow law in another order of operations, which rounds differently; this
    /// keeps the published results bit for bit).
    fn process_noise(&self, x: &Vector4<f64>, _u: &[f64], _t: f64, dt: f64) -> Matrix4<f64> {
        let qc = Matrix4::from_diagonal_element(self.qc);
        van_loan(&self.derivative_jacobian(x), &qc, dt).1
    }

    fn measure<S: Real>(&self, x: &Vector4<S>, _u: &[f64], _t: f64) -> Vector2<S> {
        Vector2::new(x[0] * self.kc, x[1] * self.kc)
    }

    fn measurement_noise(&self, _t: f64) -> Matrix2<f64> {
        Matrix2::from_diagonal_element(self.r)
    }

    /// Levels cannot be negative: clamps each to ≥ 0.
    fn project(&self, x: &mut Vector4<f64>) {
        for h in x.iter_mut() {
            *h = h.max(0.0);
        }
    }

    /// Hand-derived Jacobian of the RK4 map by the chain rule through its stages and substeps:
    /// kᵢ = f(x + cᵢ h kᵢ₋₁) gives ∂kᵢ/∂x = A(x + cᵢ h kᵢ₋₁)(I + cᵢ h ∂kᵢ₋₁/∂x), one substep has
    /// ∂x⁺/∂x = I + h/6 (∂k₁ + 2∂k₂ + 2∂k₃ + ∂k₄), and substeps compose by matrix product.
    /// (Constant pump voltages do not enter A.)
    fn transition_jacobian(
        &self,
        x: &Vector4<f64>,
        u: &[f64],
        t: f64,
        dt: f64,
    ) -> Option<Matrix4<f64>> {
        let steps = self.substeps(dt);
        let h = dt / steps as f64;
        let f = |x: &Vector4<f64>| self.derivative(x, u, t);
        let a = |x: &Vector4<f64>| self.derivative_jacobian(x);
        let i = Matrix4::identity();
        let mut x = *x;
        let mut jac = i;
        for _ in 0..steps {
            let k1 = f(&x);
            let j1 = a(&x);
            let x2 = x + k1 * (h / 2.0);
            let k2 = f(&x2);
            let j2 = a(&x2) * (i + j1 * (h / 2.0));
            let x3 = x + k2 * (h / 2.0);
            let k3 = f(&x3);
            let j3 = a(&x3) * (i + j2 * (h / 2.0));
            let x4 = x + k3 * h;
            let k4 = f(&x4);
            let j4 = a(&x4) * (i + j3 * h);
            x += (k1 + (k2 + k3) * 2.0 + k4) * (h / 6.0);
            jac = (i + (j1 + (j2 + j3) * 2.0 + j4) * (h / 6.0)) * jac;
        }
        Some(jac)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::RngExt;
    use sightline_core::ad::{Differentiable, VectorFunction};
    use sightline_core::rng::stream;

    struct Step<'a> {
        plant: &'a QuadTank,
        u: [f64; 2],
        dt: f64,
    }
    impl VectorFunction<U4, U4> for Step<'_> {
        fn eval<S: Real>(&self, x: &Vector4<S>) -> Vector4<S> {
            self.plant.transition(x, &self.u, 0.0, self.dt)
        }
    }

    /// Noise-free run of `steps` samples from `x`, exactly as `sightline simulate --noise-free`
    /// advances the truth (transition, then projection).
    fn run(plant: &QuadTank, mut x: Vector4<f64>, u: &[f64], steps: usize) -> Vector4<f64> {
        for k in 0..steps {
            x = plant.transition(&x, u, k as f64 * plant.dt, plant.dt);
            plant.project(&mut x);
        }
        x
    }

    #[test]
    fn steady_state_at_p_minus_matches_balance_equations_and_the_paper() {
        let plant = QuadTank::default();
        let u = Vector2::new(3.0, 3.0);
        // Mass balances solved in closed form with the published parameters (Johansson 2000,
        // eq. 1 with dh/dt = 0).
        let balance = plant.steady_state(&u);
        // A long noise-free run from the paper's levels: 20 000 s is over 200 of the slowest
        // time constant (T2 ≈ 90 s at P−, Johansson 2000, Table II, from memory).
        let simulated = run(&plant, Vector4::from(RIG_LEVELS), u.as_slice(), 20_000);
        for i in 0..4 {
            let rel = (simulated[i] / balance[i] - 1.0).abs();
            assert!(
                rel < 1e-3,
                "h{}: simulated {} vs balance {}",
                i + 1,
                simulated[i],
                balance[i]
            );
        }
        // Levels reported for the physical rig at P− (Johansson 2000, Table II; from memory):
        // the model is not expected to hit them exactly, but within about 10 %.
        let rig = [12.4, 12.7, 1.8, 1.4];
        for i in 0..4 {
            let rel = (balance[i] / rig[i] - 1.0).abs();
            assert!(
                rel < 0.10,
                "h{}: model {} vs rig {}",
                i + 1,
                balance[i],
                rig[i]
            );
        }
    }

    #[test]
    fn steady_state_time_constants_match_the_paper() {
        // T_i = (A_i/a_i)·√(2h_i/g) at P− (Johansson 2000, eq. 3): the paper lists
        // T = (62, 90, 23, 30) s (Table II; from memory). The linearisation's diagonal is −1/T_i.
        let plant = QuadTank::default();
        let h = plant.steady_state(&Vector2::new(3.0, 3.0));
        let a = plant.derivative_jacobian(&h);
        let published = [62.0, 90.0, 23.0, 30.0];
        for i in 0..4 {
            let closed_form = plant.area[i] / plant.outlet[i] * (2.0 * h[i] / plant.g).sqrt();
            assert!((-1.0 / a[(i, i)] / closed_form - 1.0).abs() < 1e-6);
            assert!(
                (closed_form / published[i] - 1.0).abs() < 0.10,
                "T{} = {closed_form}",
                i + 1
            );
        }
    }

    #[test]
    fn hand_jacobian_equals_automatic_differentiation_and_central_differences() {
        let plant = QuadTank::default();
        let mut rng = stream(3, &[]);
        // Random physical levels, plus points at and below the outlet where the guard acts.
        let mut points: Vec<Vector4<f64>> = (0..50)
            .map(|_| Vector4::from_fn(|_, _| rng.random_range(0.2..30.0)))
            .collect();
        points.push(Vector4::new(0.0, 1e-4, -0.5, 2e-3));
        points.push(Vector4::new(-3.0, 0.0, 0.0, 0.0));
        for dt in [1.0, 5.0] {
            for x in &points {
                let u = [rng.random_range(0.0..6.0), rng.random_range(0.0..6.0)];
                let step = Step {
                    plant: &plant,
                    u,
                    dt,
                };
                let (value, ad) = U4::jacobian(&step, x);
                let hand = plant.transition_jacobian(x, &u, 0.0, dt).unwrap();
                assert_eq!(value, plant.transition(x, &u, 0.0, dt));
                assert!(
                    (hand - ad).abs().max() < 1e-12,
                    "x = {x:?}: hand {hand} vs AD {ad}"
                );
                // Central differences (truncation O(δ²), rounding O(ε/δ)) on the physical
                // points, where the map is smooth on the scale of δ.
                if x.iter().all(|h| *h > 0.1) {
                    let delta = 1e-5;
                    for j in 0..4 {
                        let mut e = Vector4::zeros();
                        e[j] = delta;
                        let fd = (plant.transition(&(x + e), &u, 0.0, dt)
                            - plant.transition(&(x - e), &u, 0.0, dt))
                            / (2.0 * delta);
                        for i in 0..4 {
                            assert!(
                                (fd[i] - ad[(i, j)]).abs() < 1e-7,
                                "x = {x:?}, ({i}, {j}): fd {} vs AD {}",
                                fd[i],
                                ad[(i, j)]
                            );
                        }
                    }
                }
            }
        }
    }

    #[test]
    fn empty_tanks_stay_finite_and_non_negative() {
        // Pumps off: every tank drains towards zero; the guard and the projection must keep the
        // levels finite, non-negative and differentiable all the way (common practice).
        let plant = QuadTank::default();
        let u = [0.0, 0.0];
        let x = run(&plant, Vector4::from(RIG_LEVELS), &u, 5_000);
        assert!(
            x.iter().all(|h| h.is_finite() && *h >= 0.0 && *h < 1e-2),
            "{x:?}"
        );
        let jac = plant.transition_jacobian(&x, &u, 0.0, plant.dt).unwrap();
        assert!(jac.iter().all(|v| v.is_finite()));
        let q = plant.process_noise(&x, &u, 0.0, plant.dt);
        assert!(q.iter().all(|v| v.is_finite()));
        let mut below = Vector4::new(-1.0, 2.0, -0.1, 0.0);
        plant.project(&mut below);
        assert_eq!(below, Vector4::new(0.0, 2.0, 0.0, 0.0));
    }

    #[test]
    fn parameters_round_trip_through_set() {
        let mut plant = QuadTank::default();
        for (k, p) in plant.clone().parameters().iter().enumerate() {
            plant.set_parameter(&p.name, 0.5 + k as f64 * 1e-3).unwrap();
        }
        for (k, p) in plant.parameters().iter().enumerate() {
            assert_eq!(p.value, 0.5 + k as f64 * 1e-3, "{}", p.name);
        }
    }
}
