//! Parameter estimation by state augmentation: an unknown constant joins the state.
//!
//! Our own scenario: a rainwater cistern (cross-section 2 m²) drains through an outlet whose
//! effective area is unknown — partly blocked by sediment. A pump feeds it on a half-hour
//! cycle, and a level sensor reads every 10 s. Torricelli's law gives the outflow,
//! A·dh/dt = q_in − a·√(2 g h). Treating the area `a` as a second state with a tiny random walk
//! (da/dt = w_a) lets any filter estimate it from the level alone; the input cycle makes it
//! identifiable. Run with `cargo run --release --example augmented_outlet`.

use sightline::core::SigmaRule;
use sightline::core::rng::stream;
use sightline::filters::{Ekf, Filter, SigmaPointFilter};
use sightline::prelude::*;

/// Cistern level `h` (m) and outlet area `a` (m²), the area as a random-walk state.
#[derive(Clone, Parameters)]
pub struct Cistern {
    /// Cross-section of the cistern.
    #[param(default = 2.0, unit = "m^2", domain = Positive)]
    pub section: f64,
    /// Gravitational acceleration.
    #[param(default = 9.80665, unit = "m/s^2", domain = Positive)]
    pub g: f64,
    /// Spectral density of the level disturbance.
    #[param(default = 1e-8, unit = "m^2/s", domain = Positive)]
    pub q_level: f64,
    /// Spectral density of the area's random walk: small, the area is nearly constant.
    #[param(default = 1e-14, unit = "m^4/s", domain = Positive)]
    pub q_area: f64,
    /// Level sensor variance.
    #[param(default = 2.5e-5, unit = "m^2", domain = Positive)]
    pub r: f64,
}

impl Model for Cistern {
    type State = U2;
    type Meas = U1;

    /// The level is read at once; the area is only guessed: 8 ± 4 cm².
    fn declare(&self) -> Declaration {
        Declaration::new("cistern", 10.0)
            .state("level", "m", 0.8, 0.1)
            .state("outlet_area", "m^2", 8e-4, 4e-4)
            .measurement("level", "m")
            .input("inflow", "m^3/s", 0.002)
    }

    /// A·dh/dt = q_in − a·√(2 g h), da/dt = 0. The smooth maximum keeps the root real and its
    /// slope finite if an estimate dips below empty.
    fn derivative<S: Real>(&self, x: &Vector2<S>, u: &[f64], _t: f64) -> Vector2<S> {
        let (level, area) = (x[0], x[1]);
        let outflow = area * (level.smooth_max(0.0, 1e-4) * (2.0 * self.g)).sqrt();
        Vector2::new((c(u[0]) - outflow) / self.section, S::zero())
    }

    fn noise_density(&self, _x: &Vector2<f64>, _u: &[f64], _t: f64) -> Matrix2<f64> {
        Matrix2::new(self.q_level, 0.0, 0.0, self.q_area)
    }

    fn integrator(&self, _dt: f64) -> Integrator {
        Integrator::Rk4 { substeps: 2 }
    }

    fn measure<S: Real>(&self, x: &Vector2<S>, _u: &[f64], _t: f64) -> Vector1<S> {
        Vector1::new(x[0])
    }

    fn measurement_noise(&self, _t: f64) -> Matrix1<f64> {
        Matrix1::new(self.r)
    }

    fn project(&self, x: &mut Vector2<f64>) {
        x[0] = x[0].max(0.0);
        x[1] = x[1].max(0.0);
    }
}

/// The pump cycle: 3 L/s for a quarter hour, 1 L/s for the next.
fn inflow(t: f64) -> f64 {
    if (t / 900.0).floor() as i64 % 2 == 0 {
        0.003
    } else {
        0.001
    }
}

/// Simulates the cistern with a true outlet area of `area` and runs `filters` on it; returns the
/// final area estimate and standard deviation of each.
pub fn run(area: f64, seed: u64, filters: &mut [Box<dyn Filter>]) -> Vec<(f64, f64)> {
    use rand::RngExt;
    use rand_distr::StandardNormal;
    let plant = Cistern::default();
    let mut rng = stream(seed, &[1]);
    let mut x = Vector2::new(0.8, area);
    let dt = plant.declare().dt();
    for k in 0..1080 {
        let t = k as f64 * dt;
        let u = [inflow(t)];
        let noise: f64 = rng.sample(StandardNormal);
        let y = [x[0] + plant.r.sqrt() * noise];
        for f in filters.iter_mut() {
            if k > 0 {
                let u_prev = [inflow(t - dt)];
                f.predict(&u_prev, t - dt, dt).expect("predict");
            }
            f.update(&y, &u, t).expect("update");
        }
        // The truth: the level drifts only through the plant; the area is constant.
        x = plant.transition(&x, &u, t, dt);
        let disturbance: f64 = rng.sample(StandardNormal);
        x[0] += (plant.q_level * dt).sqrt() * disturbance;
    }
    filters
        .iter()
        .map(|f| (f.mean()[1], f.covariance()[3].sqrt()))
        .collect()
}

/// The cistern filters used by the example and its test.
pub fn cistern_filters() -> Vec<Box<dyn Filter>> {
    let plant = Cistern::default();
    let prior = plant.prior();
    vec![
        Box::new(Ekf::new(plant.clone(), prior.clone(), "ekf")),
        Box::new(
            SigmaPointFilter::new(
                plant,
                prior,
                SigmaRule::Unscented {
                    alpha: 1.0,
                    beta: 2.0,
                    kappa: 1.0,
                },
                "ukf",
                "ukf",
            )
            .expect("two states"),
        ),
    ]
}

fn main() {
    let true_area = 5e-4;
    let mut filters = cistern_filters();
    let results = run(true_area, 7, &mut filters);
    println!("true outlet area: {:.3} cm²", true_area * 1e4);
    for (f, (a, sd)) in filters.iter().zip(results) {
        println!(
            "{:>4}: estimated {:.3} ± {:.3} cm² after 3 hours",
            f.label(),
            a * 1e4,
            sd * 1e4
        );
    }
}
