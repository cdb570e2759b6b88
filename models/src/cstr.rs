//! `cstr`: a jacketed continuous stirred-tank reactor with the exothermic first-order reaction
//! A → B, the classic nonlinear process-control benchmark.
//!
//! Component and energy balances with an Arrhenius rate (e.g. Seborg, Edgar & Mellichamp,
//! *Process Dynamics and Control*, Wiley, Ch. 2; also Pottmann & Seborg, Comput. Chem. Eng.
//! 16(3), 1992), in minutes:
//!
//! ```text
//! dCA/dt = q/V·(CAf − CA) − k0·exp(−E/(R·T))·CA
//! dT/dt  = q/V·(Tf − T) + (−ΔH)/(ρ·Cp)·k0·exp(−E/(R·T))·CA + UA/(V·ρ·Cp)·(Tc − T)
//! y      = T                                   (the reactor temperature is measured)
//! ```
//!
//! Defaults are the textbook benchmark set: q = 100 L/min, V = 100 L, ρ = 1000 g/L,
//! Cp = 0.239 J/(g·K), ΔH = −5·10⁴ J/mol, E/R = 8750 K, k0 = 7.2·10¹⁰ 1/min, UA = 5·10⁴ J/(min·K),
//! Tf = 350 K, CAf = 1 mol/L, coolant Tc = 300 K, for which (CA, T) = (0.5 mol/L, 350 K) is the
//! textbook operating point (values from memory). That point is an open-loop saddle (one
//! unstable eigenvalue). Solving the balances at Tc = 300 K gives two more steady states: a
//! stable cold one (CA ≈ 0.877 mol/L, T ≈ 324.5 K) and an unstable hot focus (≈ 0.209 mol/L,
//! 369.7 K), so without feedback a run leaves the operating point within minutes and settles
//! at the cold state. The prior mean is the operating point; noise levels and the prior spread
//! are a scenario of our own.
//!
//! **Time units.** The balances are written per minute, as published, and so are the process
//! noise spectral densities `qc_ca` and `qc_temp`. The sample time `dt` and the dataset's `t`
//! column are in seconds, as everywhere in Sightline: a step of `dt` seconds integrates the
//! balances over dt/60 minutes. Each step uses RK4 substeps of at most 0.5 s, which resolves
//! every rate of the benchmark (k(T) ≈ 3.8/min at the hot steady state), and Q comes from Van
//! Loan's method on the balances linearised at the current state.
//!
//! The Arrhenius factor is undefined at T ≤ 0 K; such states are unphysical, and the simulator
//! reports them as leaving the finite range. [`Model::project`] keeps concentrations ≥ 0.

use sightline_core::prelude::*;

/// Longest RK4 substep, in seconds.
const MAX_SUBSTEP_SECONDS: f64 = 0.5;

/// Jacketed exothermic CSTR; every field is a `--set` parameter. The defaults are the textbook
/// benchmark parameters (module docs).
#[derive(Debug, Clone, PartialEq, Parameters)]
pub struct Cstr {
    /// Feed flow q.
    #[param(default = 100.0, unit = "L/min", domain = Positive)]
    pub flow: f64,
    /// Reactor volume V.
    #[param(default = 100.0, unit = "L", domain = Positive)]
    pub volume: f64,
    /// Density rho.
    #[param(default = 1000.0, unit = "g/L", domain = Positive)]
    pub density: f64,
    /// Heat capacity Cp.
    #[param(default = 0.239, unit = "J/(g K)", domain = Positive)]
    pub heat_capacity: f64,
    /// Heat of reaction dH (negative: exothermic).
    #[param(default = -5e4, unit = "J/mol", domain = Finite)]
    pub dh: f64,
    /// Activation temperature E/R.
    #[param(default = 8750.0, unit = "K", domain = Positive)]
    pub e_over_r: f64,
    /// Pre-exponential factor.
    #[param(default = 7.2e10, unit = "1/min", domain = Positive)]
    pub k0: f64,
    /// Jacket heat-transfer coefficient times area UA.
    #[param(default = 5e4, unit = "J/(min K)", domain = NonNegative)]
    pub ua: f64,
    /// Feed temperature Tf.
    #[param(default = 350.0, unit = "K", domain = Positive)]
    pub t_feed: f64,
    /// Feed concentration CAf.
    #[param(default = 1.0, unit = "mol/L", domain = NonNegative)]
    pub ca_feed: f64,
    /// Sample time (the balances run in minutes: a step is dt/60 min).
    #[param(default = 3.0, unit = "s", domain = Interval(1e-3, 3600.0))]
    pub dt: f64,
    /// Spectral density of the concentration noise.
    #[param(default = 1e-05, unit = "(mol/L)^2/min", domain = Positive)]
    pub qc_ca: f64,
    /// Spectral density of the temperature noise.
    #[param(default = 0.1, unit = "K^2/min", domain = Positive)]
    pub qc_temp: f64,
    /// Temperature sensor noise variance.
    #[param(default = 0.1, unit = "K^2", domain = Positive)]
    pub r: f64,
}

impl Cstr {
    /// Reaction rate constant k0·exp(−E/(R·T)) (1/min).
    pub fn rate<S: Real>(&self, temp: S) -> S {
        (temp.recip() * (-self.e_over_r)).exp() * self.k0
    }

    /// Right-hand side of the balances, d(CA, T)/dt per minute, at coolant temperature `tc`.
    pub fn balances<S: Real>(&self, x: &Vector2<S>, tc: f64) -> Vector2<S> {
        let (ca, temp) = (x[0], x[1]);
        let dilution = self.flow / self.volume;
        let reaction = self.rate(temp) * ca;
        let heating = -self.dh / (self.density * self.heat_capacity);
        let cooling = self.ua / (self.volume * self.density * self.heat_capacity);
        Vector2::new(
            (-ca + self.ca_feed) * dilution - reaction,
            (-temp + self.t_feed) * dilution + reaction * heating + (-temp + tc) * cooling,
        )
    }

    /// Jacobian of the balances ∂(dx/dt)/∂x (1/min).
    pub fn derivative_jacobian(&self, x: &Vector2<f64>) -> Matrix2<f64> {
        let (ca, temp) = (x[0], x[1]);
        let dilution = self.flow / self.volume;
        let k = self.rate(temp);
        let dk = k * self.e_over_r / (temp * temp);
        let heating = -self.dh / (self.density * self.heat_capacity);
        let cooling = self.ua / (self.volume * self.density * self.heat_capacity);
        Matrix2::new(
            -dilution - k,
            -dk * ca,
            heating * k,
            -dilution + heating * dk * ca - cooling,
        )
    }

    fn substeps(dt: f64) -> usize {
        ((dt / MAX_SUBSTEP_SECONDS).ceil() as usize).max(1)
    }
}

impl Model for Cstr {
    type State = U2;
    type Meas = U1;

    fn declare(&self) -> Declaration {
        Declaration::new("cstr", self.dt)
            .describe("jacketed exothermic CSTR A->B, textbook benchmark parameters; temperature measured")
            .state("ca", "mol/L", 0.5, 0.01)
            .state("temp", "K", 350.0, 1.0)
            .measurement("temp", "K")
            .input("tc", "K", 300.0)
    }

    /// One sample of `dt` seconds = dt/60 minutes of the balances (written per minute, as
    /// published, so the transition is integrated here rather than from a per-second
    /// `derivative`).
    fn transition<S: Real>(&self, x: &Vector2<S>, u: &[f64], t: f64, dt: f64) -> Vector2<S> {
        let tc = u[0];
        rk4(
            |_t, x: &Vector2<S>| self.balances(x, tc),
            x,
            t / 60.0,
            dt / 60.0,
            Self::substeps(dt),
        )
    }

    /// Van Loan on the balances linearised at `x`, over dt/60 minutes.
    fn process_noise(&self, x: &Vector2<f64>, _u: &[f64], _t: f64, dt: f64) -> Matrix2<f64> {
        let qc = Matrix2::new(self.qc_ca, 0.0, 0.0, self.qc_temp);
        van_loan(&self.derivative_jacobian(x), &qc, dt / 60.0).1
    }

    fn measure<S: Real>(&self, x: &Vector2<S>, _u: &[f64], _t: f64) -> Vector1<S> {
        Vector1::new(x[1])
    }

    fn measurement_noise(&self, _t: f64) -> Matrix1<f64> {
        Matrix1::new(self.r)
    }

    /// A concentration cannot be negative: clamps `ca` to ≥ 0.
    fn project(&self, x: &mut Vector2<f64>) {
        x[0] = x[0].max(0.0);
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use sightline_core::ad::{Differentiable, VectorFunction};

    struct Balances<'a>(&'a Cstr, f64);
    impl VectorFunction<U2, U2> for Balances<'_> {
        fn eval<S: Real>(&self, x: &Vector2<S>) -> Vector2<S> {
            self.0.balances(x, self.1)
        }
    }

    #[test]
    fn textbook_operating_point_is_an_unstable_equilibrium() {
        let plant = Cstr::default();
        let tc = plant.declare().default_input()[0];
        assert_eq!(tc, 300.0);
        // Newton's method on the balances from the textbook point (CA, T) = (0.5 mol/L, 350 K)
        // at Tc = 300 K (textbook value, from memory).
        let mut x = Vector2::new(0.5, 350.0);
        for _ in 0..20 {
            let (f, jac) = U2::jacobian(&Balances(&plant, tc), &x);
            x -= jac.lu().solve(&f).unwrap();
        }
        assert!(plant.balances(&x, tc).norm() < 1e-10);
        // The textbook values are rounded to the digits shown.
        assert!((x[0] - 0.5).abs() < 5e-4, "CA = {}", x[0]);
        assert!((x[1] - 350.0).abs() < 0.05, "T = {}", x[1]);
        // Multiple steady states are a known property of this benchmark: the middle one is a
        // saddle — one eigenvalue of the Jacobian in the right half-plane, one in the left.
        let jac = plant.derivative_jacobian(&x);
        let (_, ad) = U2::jacobian(&Balances(&plant, tc), &x);
        assert!((jac - ad).abs().max() < 1e-9 * ad.abs().max());
        let eig = jac.complex_eigenvalues();
        let unstable = eig.iter().filter(|l| l.re > 0.0).count();
        assert_eq!(unstable, 1, "eigenvalues {eig:?}");
        assert!(
            eig.iter().all(|l| l.im == 0.0 && l.re.abs() > 0.1),
            "{eig:?}"
        );
        // The discrete map inherits it: one eigenvalue of ∂f/∂x outside the unit circle.
        let step = transition_jacobian_ad(&plant, &x, tc);
        let outside = step
            .complex_eigenvalues()
            .iter()
            .filter(|l| l.norm() > 1.0)
            .count();
        assert_eq!(outside, 1);
    }

    /// ∂f/∂x of one sample, by automatic differentiation.
    fn transition_jacobian_ad(plant: &Cstr, x: &Vector2<f64>, tc: f64) -> Matrix2<f64> {
        struct Step<'a>(&'a Cstr, f64);
        impl VectorFunction<U2, U2> for Step<'_> {
            fn eval<S: Real>(&self, x: &Vector2<S>) -> Vector2<S> {
                self.0.transition(x, &[self.1], 0.0, self.0.dt)
            }
        }
        U2::jacobian(&Step(plant, tc), x).1
    }

    #[test]
    fn dt_is_seconds_and_the_balances_run_in_minutes() {
        // One 60 s sample equals one minute of the balances: compare against a fine RK4
        // integration of the per-minute equations over 1 min (RK4 converges at fourth order,
        // Hairer, Nørsett & Wanner, §II.1).
        let plant = Cstr::default();
        let u = [300.0];
        let x = Vector2::new(0.6, 345.0);
        let step = plant.transition(&x, &u, 0.0, 60.0);
        let fine = rk4(
            |_t, x: &Vector2<f64>| plant.balances(x, 300.0),
            &x,
            0.0,
            1.0,
            10_000,
        );
        assert!((step - fine).abs().max() < 1e-8, "{step} vs {fine}");
        // Open loop the operating point is a saddle: a run starting 1 K off it leaves it and
        // settles (after 20 min) at a steady state whose Jacobian is stable — an attractor has
        // both eigenvalues in the left half-plane (Lyapunov's indirect method).
        let mut x = Vector2::<f64>::new(0.5, 351.0);
        for k in 0..400 {
            x = plant.transition(&x, &u, k as f64 * plant.dt, plant.dt);
        }
        assert!((x[1] - 350.0).abs() > 10.0, "{x}");
        assert!(plant.balances(&x, 300.0).norm() < 1e-6, "{x}");
        let eig = plant.derivative_jacobian(&x).complex_eigenvalues();
        assert!(eig.iter().all(|l| l.re < 0.0), "{eig:?}");
    }
}
