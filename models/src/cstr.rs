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

use sightline_core::nalgebra::{Matrix1, Matrix2, U1, U2, Vector1, Vector2};
use sightline_core::{Domain, Gaussian, Model, Parameter, Real, Variable, rk4, van_loan};

/// Longest RK4 substep, in seconds.
const MAX_SUBSTEP_SECONDS: f64 = 0.5;

/// Jacketed exothermic CSTR; every field is a `--set` parameter.
#[derive(Debug, Clone, PartialEq)]
pub struct Cstr {
    /// Feed flow q (L/min).
    pub flow: f64,
    /// Reactor volume V (L).
    pub volume: f64,
    /// Density ρ (g/L).
    pub density: f64,
    /// Heat capacity Cp (J/(g·K)).
    pub heat_capacity: f64,
    /// Heat of reaction ΔH (J/mol; negative: exothermic).
    pub dh: f64,
    /// Activation temperature E/R (K).
    pub e_over_r: f64,
    /// Pre-exponential factor k0 (1/min).
    pub k0: f64,
    /// Jacket heat-transfer coefficient times area UA (J/(min·K)).
    pub ua: f64,
    /// Feed temperature Tf (K).
    pub t_feed: f64,
    /// Feed concentration CAf (mol/L).
    pub ca_feed: f64,
    /// Sample time (s).
    pub dt: f64,
    /// Spectral density of the concentration noise ((mol/L)²/min).
    pub qc_ca: f64,
    /// Spectral density of the temperature noise (K²/min).
    pub qc_temp: f64,
    /// Temperature sensor noise variance (K²).
    pub r: f64,
    /// Prior mean (CA, T).
    pub x0: Vector2<f64>,
    /// Prior standard deviations (CA, T).
    pub sd0: Vector2<f64>,
}

impl Default for Cstr {
    /// The textbook benchmark parameters (module docs).
    fn default() -> Self {
        Cstr {
            flow: 100.0,
            volume: 100.0,
            density: 1000.0,
            heat_capacity: 0.239,
            dh: -5e4,
            e_over_r: 8750.0,
            k0: 7.2e10,
            ua: 5e4,
            t_feed: 350.0,
            ca_feed: 1.0,
            dt: 3.0,
            qc_ca: 1e-5,
            qc_temp: 0.1,
            r: 0.1,
            x0: Vector2::new(0.5, 350.0),
            sd0: Vector2::new(0.01, 1.0),
        }
    }
}

impl Cstr {
    /// Reaction rate constant k0·exp(−E/(R·T)) (1/min).
    pub fn rate<S: Real>(&self, temp: S) -> S {
        (temp.recip() * (-self.e_over_r)).exp() * self.k0
    }

    /// Right-hand side of the balances, d(CA, T)/dt per minute, at coolant temperature `tc`.
    pub fn derivative<S: Real>(&self, x: &Vector2<S>, tc: f64) -> Vector2<S> {
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
    type Input = U1;

    fn name(&self) -> &str {
        "cstr"
    }
    fn description(&self) -> &str {
        "jacketed exothermic CSTR A->B, textbook benchmark parameters; temperature measured"
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
        vec![Variable::new("ca", "mol/L"), Variable::new("temp", "K")]
    }
    fn measurements(&self) -> Vec<Variable> {
        vec![Variable::new("temp", "K")]
    }
    fn inputs(&self) -> Vec<Variable> {
        vec![Variable::new("tc", "K")]
    }

    /// One sample of `dt` seconds = dt/60 minutes of the balances.
    fn transition<S: Real>(&self, x: &Vector2<S>, u: &Vector1<f64>, t: f64, dt: f64) -> Vector2<S> {
        let tc = u[0];
        rk4(
            |_t, x: &Vector2<S>| self.derivative(x, tc),
            x,
            t / 60.0,
            dt / 60.0,
            Self::substeps(dt),
        )
    }

    fn measure<S: Real>(&self, x: &Vector2<S>, _u: &Vector1<f64>, _t: f64) -> Vector1<S> {
        Vector1::new(x[1])
    }

    fn process_noise(&self, x: &Vector2<f64>, _u: &Vector1<f64>, _t: f64, dt: f64) -> Matrix2<f64> {
        let qc = Matrix2::new(self.qc_ca, 0.0, 0.0, self.qc_temp);
        van_loan(&self.derivative_jacobian(x), &qc, dt / 60.0).1
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
        Vector1::new(300.0)
    }

    fn dt(&self) -> f64 {
        self.dt
    }

    fn parameters(&self) -> Vec<Parameter> {
        vec![
            Parameter::new("flow", self.flow, "L/min", Domain::Positive, "feed flow q"),
            Parameter::new(
                "volume",
                self.volume,
                "L",
                Domain::Positive,
                "reactor volume V",
            ),
            Parameter::new(
                "density",
                self.density,
                "g/L",
                Domain::Positive,
                "density rho",
            ),
            Parameter::new(
                "heat_capacity",
                self.heat_capacity,
                "J/(g K)",
                Domain::Positive,
                "heat capacity Cp",
            ),
            Parameter::new(
                "dh",
                self.dh,
                "J/mol",
                Domain::Finite,
                "heat of reaction dH (negative: exothermic)",
            ),
            Parameter::new(
                "e_over_r",
                self.e_over_r,
                "K",
                Domain::Positive,
                "activation temperature E/R",
            ),
            Parameter::new(
                "k0",
                self.k0,
                "1/min",
                Domain::Positive,
                "pre-exponential factor",
            ),
            Parameter::new(
                "ua",
                self.ua,
                "J/(min K)",
                Domain::NonNegative,
                "jacket heat-transfer coefficient times area UA",
            ),
            Parameter::new(
                "t_feed",
                self.t_feed,
                "K",
                Domain::Positive,
                "feed temperature Tf",
            ),
            Parameter::new(
                "ca_feed",
                self.ca_feed,
                "mol/L",
                Domain::NonNegative,
                "feed concentration CAf",
            ),
            Parameter::new(
                "dt",
                self.dt,
                "s",
                Domain::Interval(1e-3, 3600.0),
                "sample time (the balances run in minutes: a step is dt/60 min)",
            ),
            Parameter::new(
                "qc_ca",
                self.qc_ca,
                "(mol/L)^2/min",
                Domain::Positive,
                "spectral density of the concentration noise",
            ),
            Parameter::new(
                "qc_temp",
                self.qc_temp,
                "K^2/min",
                Domain::Positive,
                "spectral density of the temperature noise",
            ),
            Parameter::new(
                "r",
                self.r,
                "K^2",
                Domain::Positive,
                "temperature sensor noise variance",
            ),
            Parameter::new(
                "sd0.ca",
                self.sd0[0],
                "mol/L",
                Domain::Positive,
                "prior standard deviation of ca",
            ),
            Parameter::new(
                "sd0.temp",
                self.sd0[1],
                "K",
                Domain::Positive,
                "prior standard deviation of temp",
            ),
        ]
    }

    fn apply_parameter(&mut self, name: &str, value: f64) {
        match name {
            "flow" => self.flow = value,
            "volume" => self.volume = value,
            "density" => self.density = value,
            "heat_capacity" => self.heat_capacity = value,
            "dh" => self.dh = value,
            "e_over_r" => self.e_over_r = value,
            "k0" => self.k0 = value,
            "ua" => self.ua = value,
            "t_feed" => self.t_feed = value,
            "ca_feed" => self.ca_feed = value,
            "dt" => self.dt = value,
            "qc_ca" => self.qc_ca = value,
            "qc_temp" => self.qc_temp = value,
            "r" => self.r = value,
            "sd0.ca" => self.sd0[0] = value,
            "sd0.temp" => self.sd0[1] = value,
            _ => {}
        }
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
            self.0.derivative(x, self.1)
        }
    }

    #[test]
    fn textbook_operating_point_is_an_unstable_equilibrium() {
        let plant = Cstr::default();
        let tc = plant.default_input()[0];
        assert_eq!(tc, 300.0);
        // Newton's method on the balances from the textbook point (CA, T) = (0.5 mol/L, 350 K)
        // at Tc = 300 K (textbook value, from memory).
        let mut x = Vector2::new(0.5, 350.0);
        for _ in 0..20 {
            let (f, jac) = U2::jacobian(&Balances(&plant, tc), &x);
            x -= jac.lu().solve(&f).unwrap();
        }
        assert!(plant.derivative(&x, tc).norm() < 1e-10);
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
                self.0.transition(x, &Vector1::new(self.1), 0.0, self.0.dt)
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
        let u = Vector1::new(300.0);
        let x = Vector2::new(0.6, 345.0);
        let step = plant.transition(&x, &u, 0.0, 60.0);
        let fine = rk4(
            |_t, x: &Vector2<f64>| plant.derivative(x, 300.0),
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
        assert!(plant.derivative(&x, 300.0).norm() < 1e-6, "{x}");
        let eig = plant.derivative_jacobian(&x).complex_eigenvalues();
        assert!(eig.iter().all(|l| l.re < 0.0), "{eig:?}");
    }
}
