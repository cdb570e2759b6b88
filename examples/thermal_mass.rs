//! Your own plant with Sightline: a heated aluminium block cooling by convection and radiation,
//! seen through a thermocouple with its own lag, written in continuous time: the library
//! integrates it and derives the process noise. (A plant of our own; the numbers are a
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

use sightline::FilterSpec;
use sightline::eval::simulate::SimOptions;
use sightline::prelude::*;

/// Stefan–Boltzmann constant (W m⁻² K⁻⁴), CODATA 2018 exact value.
const SIGMA: f64 = 5.670_374_419e-8;

/// The heated block; every field is a `--set` parameter.
#[derive(Debug, Clone, Parameters)]
struct ThermalMass {
    /// Heat capacity of the block.
    #[param(default = 900.0, unit = "J/K", domain = Positive)]
    capacity: f64,
    /// Convection coefficient.
    #[param(default = 10.0, unit = "W/(m^2 K)", domain = NonNegative)]
    convection: f64,
    /// Surface area.
    #[param(default = 0.06, unit = "m^2", domain = Positive)]
    area: f64,
    /// Emissivity of the surface.
    #[param(default = 0.8, unit = "-", domain = Interval(0.0, 1.0))]
    emissivity: f64,
    /// Ambient temperature.
    #[param(default = 20.0, unit = "degC", domain = Finite)]
    ambient: f64,
    /// Thermocouple time constant.
    #[param(default = 8.0, unit = "s", domain = Positive)]
    tau: f64,
    /// Sample time.
    #[param(default = 1.0, unit = "s", domain = Positive)]
    dt: f64,
}

impl Model for ThermalMass {
    type State = U2;
    type Meas = U1;

    fn declare(&self) -> Declaration {
        Declaration::new("thermal-mass", self.dt)
            .describe("heated block, convection + radiation, lagging thermocouple (example plant)")
            .state("block", "degC", 25.0, 2.0)
            .state("sensor", "degC", 25.0, 2.0)
            .measurement("thermocouple", "degC")
            .input("heater", "W", 60.0)
    }

    fn derivative<S: Real>(&self, x: &Vector2<S>, u: &[f64], _t: f64) -> Vector2<S> {
        let (block, sensor) = (x[0], x[1]);
        let kelvin = block + 273.15;
        let ambient_k4 = (self.ambient + 273.15).powi(4);
        let loss = (block - self.ambient) * (self.convection * self.area)
            + (kelvin.powi(4) - ambient_k4) * (self.emissivity * SIGMA * self.area);
        Vector2::new(
            (c(u[0]) - loss) / self.capacity,
            (block - sensor) / self.tau,
        )
    }

    /// Unmodelled heat flows (draughts, heater ripple) on the block, a little on the junction.
    fn noise_density(&self, _x: &Vector2<f64>, _u: &[f64], _t: f64) -> Matrix2<f64> {
        Matrix2::new(4e-4, 0.0, 0.0, 1e-6)
    }

    /// Four RK4 steps per sample: the thermocouple's lag is the fastest dynamics.
    fn integrator(&self, _dt: f64) -> Integrator {
        Integrator::Rk4 { substeps: 4 }
    }

    fn measure<S: Real>(&self, x: &Vector2<S>, _u: &[f64], _t: f64) -> Vector1<S> {
        Vector1::new(x[1])
    }

    fn measurement_noise(&self, _t: f64) -> Matrix1<f64> {
        Matrix1::new(0.05)
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
