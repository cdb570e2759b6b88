//! `tankchain`: a cascade of n gravity-drained tanks, n chosen at run time (`--set n=32`).
//!
//! A pump delivers k·v into tank 1; tank i drains through an outlet of area a into tank i + 1,
//! and the last tank drains away. With Torricelli outflows (as in Johansson, IEEE TCST 8(3), 2000,
//! eq. 1) and one shared cross-section A:
//!
//! ```text
//! dh1/dt = (k·v − a·√(2g h1)) / A
//! dhi/dt = (a·√(2g h(i−1)) − a·√(2g hi)) / A,   i = 2..n
//! y      = hn                                    (only the last tank's level is measured)
//! ```
//!
//! Its state dimension is a run-time value (`type State = Dyn`), so it exercises the dynamic-size
//! path of every filter (the EKF differentiates it column by column with scalar dual numbers) and
//! serves the cost-versus-dimension benchmarks. Tank and pump values default to the lower tank
//! and pump 1 of the quadruple-tank rig (Johansson 2000, Tables I–II, from memory: A = 28 cm²,
//! a = 0.071 cm², k = 3.33 cm³/(V·s), g = 981 cm/s², v = 3 V); the prior mean is the steady state
//! under that voltage, where every tank holds (k·v/a)²/(2g) ≈ 10.1 cm. Noise levels and the prior
//! spread are a scenario of our own.
//!
//! The outflow law uses the smooth guard of [`crate::torricelli`] (never NaN, differentiable at
//! an empty tank), [`Model::project`] clamps levels to ≥ 0, and RK4 substeps are bounded as in
//! [`crate::quadtank`]. Q = qc·dt·I — white level noise integrated over the step, without the
//! O(dt/T) correction from the dynamics — so that the model's own cost stays O(n) per step and the
//! benchmarks measure the filters, not a Van Loan exponential of a 64×64 matrix.

use sightline_core::prelude::*;

use crate::torricelli::outflow;

/// Longest RK4 substep (s) used whatever the stiffness bound allows.
const MAX_SUBSTEP: f64 = 1.0;

/// Largest chain `--set n=...` accepts.
pub const MAX_TANKS: i64 = 512;

/// A chain of gravity-drained tanks; every field is a `--set` parameter.
#[derive(Debug, Clone, PartialEq, Parameters)]
pub struct TankChain {
    /// Number of tanks (the state dimension).
    #[param(default = 8, unit = "-", domain = Integer(1, MAX_TANKS))]
    pub n: usize,
    /// Cross-section of every tank.
    #[param(default = 28.0, unit = "cm^2", domain = Positive)]
    pub area: f64,
    /// Cross-section of every outlet hole.
    #[param(default = 0.071, unit = "cm^2", domain = Positive)]
    pub outlet: f64,
    /// Pump gain k.
    #[param(default = 3.33, unit = "cm^3/(V s)", domain = Positive)]
    pub pump_gain: f64,
    /// Gravitational acceleration.
    #[param(default = 981.0, unit = "cm/s^2", domain = Positive)]
    pub g: f64,
    /// Sample time.
    #[param(default = 1.0, unit = "s", domain = Interval(1e-3, 600.0))]
    pub dt: f64,
    /// Spectral density of the white level noise in each tank.
    #[param(default = 1e-3, unit = "cm^2/s", domain = Positive)]
    pub qc: f64,
    /// Variance of the level sensor noise.
    #[param(default = 1e-2, unit = "cm^2", domain = Positive)]
    pub r: f64,
    /// Level below which the outflow law is smoothed towards zero flow.
    #[param(default = 1e-3, unit = "cm", domain = Interval(1e-6, 1.0))]
    pub h_smooth: f64,
    /// Prior standard deviation of every level (`sd0.<state>` sets one level's).
    #[param(default = 1.0, unit = "cm", domain = Positive)]
    pub sd0: f64,
}

impl TankChain {
    /// A chain of `n` tanks with the default parameters.
    pub fn with_tanks(n: usize) -> Self {
        TankChain {
            n,
            ..TankChain::default()
        }
    }

    /// Pump voltage used when none is set (V).
    pub const DEFAULT_VOLTAGE: f64 = 3.0;

    /// The level every tank settles at under voltage `v`: (k·v/a)²/(2g), from the balance
    /// k·v = a·√(2g·h) tank by tank.
    pub fn steady_level(&self, v: f64) -> f64 {
        (self.pump_gain * v / self.outlet).powi(2) / (2.0 * self.g)
    }

    /// Number of RK4 substeps for a sample of `dt` seconds (the bound of
    /// [`crate::quadtank::QuadTank::substeps`]).
    pub fn substeps(&self, dt: f64) -> usize {
        let stiffest =
            self.outlet / self.area * (2.0 * self.g).sqrt() * 0.403 / self.h_smooth.sqrt();
        let longest = MAX_SUBSTEP.min(2.0 / stiffest);
        ((dt / longest).ceil() as usize).max(1)
    }
}

impl Model for TankChain {
    type State = Dyn;
    type Meas = U1;

    fn declare(&self) -> Declaration {
        let level = self.steady_level(Self::DEFAULT_VOLTAGE);
        let mut d = Declaration::new("tankchain", self.dt).describe(
            "cascade of n gravity-drained tanks (n set at run time); last level measured",
        );
        for i in 1..=self.n {
            d = d.state(format!("h{i}"), "cm", level, self.sd0);
        }
        d.measurement("level", "cm")
            .input("v", "V", Self::DEFAULT_VOLTAGE)
    }

    /// The state dimension without building the declaration (called on every step).
    fn state_dim(&self) -> Dyn {
        Dyn(self.n)
    }

    /// dh/dt (cm/s) under pump voltage `u[0]`.
    // Inlined into the RK4 stages as the transition written around it was before the
    // continuous-time contract (`benches/callgrind.py` counts the difference).
    #[inline]
    fn derivative<S: Real>(&self, h: &DVector<S>, u: &[f64], _t: f64) -> DVector<S> {
        let q = |h: S| outflow(self.outlet, self.g, h, self.h_smooth);
        let mut inflow = S::from(self.pump_gain * u[0]);
        let mut d = DVector::from_element(h.len(), S::from(0.0));
        for (di, &hi) in d.iter_mut().zip(h.iter()) {
            let out = q(hi);
            *di = (inflow - out) / self.area;
            inflow = out;
        }
        d
    }

    /// RK4 with substeps bounded as in [`crate::quadtank`].
    fn integrator(&self, dt: f64) -> Integrator {
        Integrator::Rk4 {
            substeps: self.substeps(dt),
        }
    }

    /// Q = qc·dt·I (module docs: the model's own cost stays O(n) per step).
    fn process_noise(&self, x: &DVector<f64>, _u: &[f64], _t: f64, dt: f64) -> DMatrix<f64> {
        DMatrix::from_diagonal_element(x.len(), x.len(), self.qc * dt)
    }

    fn measure<S: Real>(&self, x: &DVector<S>, _u: &[f64], _t: f64) -> Vector1<S> {
        Vector1::new(x.as_slice().last().copied().unwrap_or(S::from(0.0)))
    }

    fn measurement_noise(&self, _t: f64) -> Matrix1<f64> {
        Matrix1::new(self.r)
    }

    /// Levels cannot be negative: clamps each to ≥ 0.
    fn project(&self, x: &mut DVector<f64>) {
        for h in x.iter_mut() {
            *h = h.max(0.0);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use sightline_core::ad::{Differentiable, VectorFunction};

    struct Step<'a>(&'a TankChain, f64);
    impl VectorFunction<Dyn, Dyn> for Step<'_> {
        fn eval<S: Real>(&self, x: &DVector<S>) -> DVector<S> {
            self.0.transition(x, &[self.1], 0.0, self.0.dt)
        }
    }

    #[test]
    fn settles_at_the_balance_level_in_every_tank() {
        // Balance k·v = a·√(2g·h) in every tank (Torricelli, closed form); a long noise-free
        // run from empty tanks matches it to 0.1 %.
        let plant = TankChain::with_tanks(8);
        let v = 2.0;
        let u = [v];
        let level = plant.steady_level(v);
        let mut x = DVector::zeros(8);
        for k in 0..40_000 {
            x = plant.transition(&x, &u, k as f64, plant.dt);
            plant.project(&mut x);
        }
        for (i, h) in x.iter().enumerate() {
            assert!(
                (h / level - 1.0).abs() < 1e-3,
                "h{} = {h} vs {level}",
                i + 1
            );
        }
    }

    #[test]
    fn mass_is_conserved_along_the_chain() {
        // A·Σ dhᵢ/dt = k·v − a√(2g·hₙ): internal flows cancel (conservation of volume).
        let plant = TankChain::with_tanks(6);
        let h = DVector::from_vec(vec![3.0, 0.0, 12.0, 7.5, 1e-4, 9.0]);
        let d = plant.derivative(&h, &[2.5], 0.0);
        let total = d.sum() * plant.area;
        let expected = plant.pump_gain * 2.5 - outflow(plant.outlet, plant.g, 9.0, plant.h_smooth);
        assert!((total - expected).abs() < 1e-12, "{total} vs {expected}");
    }

    #[test]
    fn dynamic_jacobian_matches_central_differences() {
        let plant = TankChain::with_tanks(5);
        let x = DVector::from_vec(vec![12.0, 3.0, 8.0, 0.5, 20.0]);
        let (value, ad) = Dyn::jacobian(&Step(&plant, 3.0), &x);
        assert_eq!(value, plant.transition(&x, &[3.0], 0.0, plant.dt));
        assert_eq!(ad.shape(), (5, 5));
        let delta = 1e-5;
        for j in 0..5 {
            let mut e = DVector::zeros(5);
            e[j] = delta;
            let u = [3.0];
            let fd = (plant.transition(&(&x + &e), &u, 0.0, plant.dt)
                - plant.transition(&(&x - &e), &u, 0.0, plant.dt))
                / (2.0 * delta);
            for i in 0..5 {
                assert!((fd[i] - ad[(i, j)]).abs() < 1e-8, "({i}, {j})");
            }
            // Lower bidiagonal in continuous time; RK4 fills the band below (tank j affects
            // only tanks ≥ j, causality of the cascade).
            for i in 0..j {
                assert_eq!(ad[(i, j)], 0.0);
            }
        }
    }

    #[test]
    fn dimension_follows_n() {
        let mut plant = TankChain::default();
        plant.set_parameter("n", 33.0).unwrap();
        assert_eq!(plant.state_dim(), Dyn(33));
        assert_eq!(plant.declare().states().len(), 33);
        assert_eq!(plant.declare().states()[32].name, "h33");
        assert_eq!(plant.prior().mean.len(), 33);
        let x = plant.prior().mean;
        let u = plant.declare().default_input().to_vec();
        assert_eq!(plant.transition(&x, &u, 0.0, 1.0).len(), 33);
        assert_eq!(plant.process_noise(&x, &u, 0.0, 1.0).shape(), (33, 33));
        assert_eq!(plant.measure(&x, &u, 0.0)[0], x[32]);
    }
}
