//! Parameter estimation by state augmentation: an unknown constant joins the state.
//!
//! Our own scenario: a rainwater cistern (cross-section 2 m²) drains through an outlet whose
//! effective area is unknown — partly blocked by sediment. A pump feeds it on a half-hour
//! cycle, and a level sensor reads every 10 s. Torricelli's law gives the outflow,
//! A·dh/dt = q_in − a·√(2 g h). Treating the area `a` as a second state with a tiny random walk
//! (da/dt = w_a) lets any filter estimate it from the level alone; the input cycle makes it
//! identifiable. Run with `cargo run --release --example augmented_outlet`.

use sightline::core::SigmaRule;
use sightline::core::nalgebra::{Matrix1, Matrix2, U1, U2, Vector1, Vector2};
use sightline::core::rng::stream;
use sightline::core::{Gaussian, Model, Real, Variable, rk4, van_loan};
use sightline::filters::{Ekf, Filter, SigmaPointFilter};

/// Cistern level `h` (m) and outlet area `a` (m²), the area as a random-walk state.
#[derive(Clone)]
pub struct Cistern {
    /// Cross-section (m²).
    pub section: f64,
    /// Gravity (m/s²).
    pub g: f64,
    /// Spectral density of the level disturbance (m²/s).
    pub q_level: f64,
    /// Spectral density of the area's random walk (m⁴/s): small, the area is nearly constant.
    pub q_area: f64,
    /// Level sensor variance (m²).
    pub r: f64,
}

impl Cistern {
    fn derivative<S: Real>(&self, x: &Vector2<S>, inflow: f64) -> Vector2<S> {
        // max(h, 0) keeps the square root real if an estimate dips below empty.
        let h = if x[0].re() > 0.0 { x[0] } else { x[0] * 0.0 };
        let outflow = x[1] * (h * (2.0 * self.g)).sqrt();
        Vector2::new((outflow * -1.0 + inflow) / self.section, x[1] * 0.0)
    }
}

impl Model for Cistern {
    type State = U2;
    type Meas = U1;
    type Input = U1;
    fn name(&self) -> &str {
        "cistern"
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
            Variable::new("level", "m"),
            Variable::new("outlet_area", "m^2"),
        ]
    }
    fn measurements(&self) -> Vec<Variable> {
        vec![Variable::new("level", "m")]
    }
    fn inputs(&self) -> Vec<Variable> {
        vec![Variable::new("inflow", "m^3/s")]
    }
    fn transition<S: Real>(&self, x: &Vector2<S>, u: &Vector1<f64>, t: f64, dt: f64) -> Vector2<S> {
        rk4(|_t, x: &Vector2<S>| self.derivative(x, u[0]), x, t, dt, 2)
    }
    fn measure<S: Real>(&self, x: &Vector2<S>, _u: &Vector1<f64>, _t: f64) -> Vector1<S> {
        Vector1::new(x[0])
    }
    fn process_noise(&self, x: &Vector2<f64>, _u: &Vector1<f64>, _t: f64, dt: f64) -> Matrix2<f64> {
        // Van Loan on the dynamics linearised at x (Van Loan, IEEE TAC 23(3), 1978).
        let h = x[0].max(1e-6);
        let root = (2.0 * self.g * h).sqrt();
        let a = Matrix2::new(
            -x[1] * self.g / (root * self.section),
            -root / self.section,
            0.0,
            0.0,
        );
        van_loan(&a, &Matrix2::new(self.q_level, 0.0, 0.0, self.q_area), dt).1
    }
    fn measurement_noise(&self, _t: f64) -> Matrix1<f64> {
        Matrix1::new(self.r)
    }
    fn prior(&self) -> Gaussian<U2> {
        // The level is read at once; the area is only guessed: 8 ± 4 cm².
        Gaussian::new(
            Vector2::new(0.8, 8e-4),
            Matrix2::new(0.01, 0.0, 0.0, 1.6e-7),
        )
    }
    fn default_input(&self) -> Vector1<f64> {
        Vector1::new(0.002)
    }
    fn dt(&self) -> f64 {
        10.0
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
    let plant = Cistern {
        section: 2.0,
        g: 9.80665,
        q_level: 1e-8,
        q_area: 1e-14,
        r: 2.5e-5,
    };
    let mut rng = stream(seed, &[1]);
    let mut x = Vector2::new(0.8, area);
    let dt = plant.dt();
    for k in 0..1080 {
        let t = k as f64 * dt;
        let u = Vector1::new(inflow(t));
        let noise: f64 = rng.sample(StandardNormal);
        let y = [x[0] + plant.r.sqrt() * noise];
        for f in filters.iter_mut() {
            if k > 0 {
                let u_prev = [inflow(t - dt)];
                f.predict(&u_prev, t - dt, dt).expect("predict");
            }
            f.update(&y, u.as_slice(), t).expect("update");
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
    let plant = Cistern {
        section: 2.0,
        g: 9.80665,
        q_level: 1e-8,
        q_area: 1e-14,
        r: 2.5e-5,
    };
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
