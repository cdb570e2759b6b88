//! Your own plant with Sightline: a heated aluminium block cooling by convection and radiation,
//! seen through a thermocouple with its own lag. (A plant of our own; the numbers are a
//! plausible bench set-up, invented for the example.)
//!
//! ```text
//! C·dT/dt  = P − h·A·(T − Ta) − ε·σ·A·((T + 273.15)⁴ − (Ta + 273.15)⁴)   (block)
//! τ·dTs/dt = T − Ts                                                        (sensor)
//! y        = Ts + v
//! ```
//!
//! Two ways to use it:
//! - `cargo run --release --example thermal_mass -- <command> ...` gives this plant every
//!   command of the `sightline` binary through [`sightline::cli::main_with`], e.g.
//!   `... -- simulate thermal-mass --steps 600 --seed 1 -o block.csv` then
//!   `... -- compare thermal-mass block.csv -o out/`;
//! - `cargo run --release --example thermal_mass` (no arguments) drives two filters from a plain
//!   Rust loop, as a product embedding the estimator would.

use std::process::ExitCode;

use sightline::eval::simulate::SimOptions;
use sightline::nalgebra::{Matrix1, Matrix2, U1, U2, Vector1, Vector2};
use sightline::{FilterSpec, Gaussian, Model, Real, Variable, core::rk4};

/// Stefan–Boltzmann constant (W m⁻² K⁻⁴), CODATA 2018 exact value.
const SIGMA: f64 = 5.670_374_419e-8;

/// The heated block; every field could be exposed as a `--set` parameter via `parameters()`.
#[derive(Debug, Clone)]
struct ThermalMass {
    /// Heat capacity (J/K).
    capacity: f64,
    /// Convection coefficient (W m⁻² K⁻¹).
    convection: f64,
    /// Surface area (m²).
    area: f64,
    /// Emissivity (-).
    emissivity: f64,
    /// Ambient temperature (°C).
    ambient: f64,
    /// Thermocouple time constant (s).
    tau: f64,
    /// Sample time (s).
    dt: f64,
}

impl Default for ThermalMass {
    fn default() -> Self {
        ThermalMass {
            capacity: 900.0,
            convection: 10.0,
            area: 0.06,
            emissivity: 0.8,
            ambient: 20.0,
            tau: 8.0,
            dt: 1.0,
        }
    }
}

impl ThermalMass {
    fn derivative<S: Real>(&self, x: &Vector2<S>, power: f64) -> Vector2<S> {
        let t = x[0];
        let kelvin = t + 273.15;
        let ambient_k4 = (self.ambient + 273.15).powi(4);
        let loss = (t - self.ambient) * (self.convection * self.area)
            + (kelvin.powi(4) - ambient_k4) * (self.emissivity * SIGMA * self.area);
        Vector2::new(
            (loss * -1.0 + power) * (1.0 / self.capacity),
            (t - x[1]) * (1.0 / self.tau),
        )
    }
}

impl Model for ThermalMass {
    type State = U2;
    type Meas = U1;
    type Input = U1;
    fn name(&self) -> &str {
        "thermal-mass"
    }
    fn description(&self) -> &str {
        "heated block, convection + radiation, lagging thermocouple (example plant)"
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
            Variable::new("block", "degC"),
            Variable::new("sensor", "degC"),
        ]
    }
    fn measurements(&self) -> Vec<Variable> {
        vec![Variable::new("thermocouple", "degC")]
    }
    fn inputs(&self) -> Vec<Variable> {
        vec![Variable::new("heater", "W")]
    }
    fn transition<S: Real>(&self, x: &Vector2<S>, u: &Vector1<f64>, t: f64, dt: f64) -> Vector2<S> {
        rk4(|_t, x: &Vector2<S>| self.derivative(x, u[0]), x, t, dt, 4)
    }
    fn measure<S: Real>(&self, x: &Vector2<S>, _u: &Vector1<f64>, _t: f64) -> Vector1<S> {
        Vector1::new(x[1])
    }
    fn process_noise(
        &self,
        _x: &Vector2<f64>,
        _u: &Vector1<f64>,
        _t: f64,
        dt: f64,
    ) -> Matrix2<f64> {
        // Unmodelled heat flows (draughts, heater ripple) on the block only.
        Matrix2::new(4e-4 * dt, 0.0, 0.0, 1e-6 * dt)
    }
    fn measurement_noise(&self, _t: f64) -> Matrix1<f64> {
        Matrix1::new(0.05)
    }
    fn prior(&self) -> Gaussian<U2> {
        Gaussian::new(Vector2::new(25.0, 25.0), Matrix2::new(4.0, 0.0, 0.0, 4.0))
    }
    fn default_input(&self) -> Vector1<f64> {
        Vector1::new(60.0)
    }
    fn dt(&self) -> f64 {
        self.dt
    }
}

/// Filters driven by hand on a simulated heat-up: the same time line as the runner (update at
/// row 0; then predict over the gap and update at every row).
fn direct_loop() -> ExitCode {
    let plant = sightline::plant(ThermalMass::default());
    let Ok(data) = plant.simulate(900, 7, &SimOptions::default()) else {
        return ExitCode::FAILURE;
    };
    for spec in ["ekf", "ukf"] {
        let Ok(spec) = FilterSpec::parse(spec) else {
            return ExitCode::FAILURE;
        };
        let Ok(mut filter) = plant.build_filter(&spec, 0) else {
            return ExitCode::FAILURE;
        };
        let mut previous: Option<(f64, Vec<f64>)> = None;
        let mut squared_error = 0.0;
        for row in &data.records {
            if let Some((t0, u0)) = &previous {
                if filter.predict(u0, *t0, row.t - t0).is_err() {
                    return ExitCode::FAILURE;
                }
            }
            if filter.update(&row.y, &row.u, row.t).is_err() {
                return ExitCode::FAILURE;
            }
            if let Some(x) = &row.x {
                squared_error += (x[0] - filter.mean()[0]).powi(2);
            }
            previous = Some((row.t, row.u.clone()));
        }
        let rms = (squared_error / data.records.len() as f64).sqrt();
        println!(
            "{}: block temperature after 15 min {:.2} degC (±{:.2}), RMS error {rms:.3} degC",
            filter.label(),
            filter.mean()[0],
            filter.covariance()[0].sqrt()
        );
    }
    ExitCode::SUCCESS
}

fn main() -> ExitCode {
    if std::env::args_os().len() <= 1 {
        return direct_loop();
    }
    // Every `sightline` command, for the shipped plants and this one.
    let mut plants = sightline::shipped();
    plants.push(sightline::plant(ThermalMass::default()));
    sightline::cli::main_with(plants)
}
