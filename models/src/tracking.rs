//! `tracking`: a 2-D target with a nearly constant turn rate, seen by range and bearing from a
//! fixed sensor.
//!
//! Coordinated-turn model with the turn rate as a state (Bar-Shalom, Li & Kirubarajan,
//! *Estimation with Applications to Tracking and Navigation*, Wiley 2001, §11.7): states
//! (px, py, vx, vy, ω), and with θ = ω·dt the exact discrete motion of a constant turn,
//!
//! ```text
//! px⁺ = px + (sin θ/ω)·vx − ((1 − cos θ)/ω)·vy      vx⁺ = cos θ·vx − sin θ·vy
//! py⁺ = py + ((1 − cos θ)/ω)·vx + (sin θ/ω)·vy      vy⁺ = sin θ·vx + cos θ·vy
//! ω⁺  = ω
//! y   = (√((px − sx)² + (py − sy)²), atan2(py − sy, px − sx))      (range, bearing)
//! ```
//!
//! The ratios sin θ/ω = dt·sin θ/θ and (1 − cos θ)/ω = dt·(1 − cos θ)/θ have removable
//! singularities at ω = 0; they are evaluated by their Taylor series for |θ| < 0.1 (truncation
//! below 3·10⁻¹⁸) and in closed form otherwise, so the map and its derivatives are smooth through
//! straight flight. Process noise: white accelerations of spectral density `q` in x and y and a
//! white turn-rate derivative of density `q_omega`, discretised by Van Loan's method on the
//! continuous turn dynamics linearised at the current state.
//!
//! The bearing is measured counter-clockwise from the x axis in (−π, π]; its residual is wrapped
//! into (−π, π] ([`Model::measurement_residual`]) and sigma-point means of bearings are circular
//! ([`Model::measurement_mean`]). Noisy bearings in a dataset may lie just outside (−π, π];
//! the wrapped residual makes that harmless. Range and bearing are undefined at the sensor's
//! own position. Defaults are a scenario of our own: a target circling at 15 m/s on a 750 m
//! radius around a point 250 m from the sensor, so the bearing sweeps through ±π.

use sightline_core::prelude::*;

/// Below this |θ| = |ω·dt| the turn ratios are evaluated by their series.
const SERIES_BELOW: f64 = 0.1;

/// sin θ / θ, smooth through θ = 0 (series: Abramowitz & Stegun 4.3.65).
///
/// ```
/// use sightline_models::tracking::sin_over;
/// assert_eq!(sin_over(0.0), 1.0);
/// assert!((sin_over(0.5f64) - 0.5f64.sin() / 0.5).abs() < 1e-16);
/// ```
pub fn sin_over<S: Real>(theta: S) -> S {
    if theta.value().abs() < SERIES_BELOW {
        let t2 = theta * theta;
        // 1 − θ²/3! + θ⁴/5! − θ⁶/7! + θ⁸/9!
        ((((t2 * (1.0 / 362_880.0) - 1.0 / 5040.0) * t2 + 1.0 / 120.0) * t2 - 1.0 / 6.0) * t2) + 1.0
    } else {
        theta.sin() / theta
    }
}

/// (1 − cos θ) / θ, smooth through θ = 0 (series: Abramowitz & Stegun 4.3.66).
pub fn one_minus_cos_over<S: Real>(theta: S) -> S {
    if theta.value().abs() < SERIES_BELOW {
        let t2 = theta * theta;
        // θ/2! − θ³/4! + θ⁵/6! − θ⁷/8! + θ⁹/10!
        (((((t2 * (1.0 / 3_628_800.0) - 1.0 / 40_320.0) * t2 + 1.0 / 720.0) * t2 - 1.0 / 24.0)
            * t2)
            + 0.5)
            * theta
    } else {
        // 1 − cos θ = 2 sin²(θ/2), without cancellation.
        let s = (theta * 0.5).sin();
        s * s * 2.0 / theta
    }
}

/// atan2(dy, dx) with derivatives (dx·d(dy) − dy·d(dx))/(dx² + dy²) that stay finite when either
/// component is zero (num-dual's `atan2` differentiates atan(dy/dx), which fails at dx = 0).
pub fn bearing<S: Real>(dy: S, dx: S) -> S {
    let value = dy.value().atan2(dx.value());
    let smooth = if dx.value().abs() >= dy.value().abs() {
        (dy / dx).atan()
    } else {
        -(dx / dy).atan()
    };
    // Same derivatives; shift the value onto the right branch.
    smooth + (value - smooth.value())
}

/// Nearly-constant-turn target with a range–bearing sensor; every field is a `--set` parameter.
#[derive(Debug, Clone, PartialEq, Parameters)]
pub struct Tracking {
    /// Sample time.
    #[param(default = 1.0, unit = "s", domain = Positive)]
    pub dt: f64,
    /// Spectral density of the white accelerations in x and y.
    #[param(default = 0.04, unit = "m^2/s^3", domain = Positive)]
    pub q: f64,
    /// Spectral density of the white turn-rate derivative.
    #[param(default = 1e-8, unit = "rad^2/s^3", domain = Positive)]
    pub q_omega: f64,
    /// Range noise variance.
    #[param(default = 25.0, unit = "m^2", domain = Positive)]
    pub r_range: f64,
    /// Bearing noise variance.
    #[param(default = 1e-4, unit = "rad^2", domain = Positive)]
    pub r_bearing: f64,
    /// Sensor x position.
    #[param(default = 0.0, unit = "m", domain = Finite)]
    pub sensor_x: f64,
    /// Sensor y position.
    #[param(default = 0.0, unit = "m", domain = Finite)]
    pub sensor_y: f64,
}

impl Tracking {
    /// Jacobian of the continuous turn dynamics (ṗ = v, v̇ = ω × v, ω̇ = 0) at `x`.
    pub fn derivative_jacobian(x: &Vector5<f64>) -> Matrix5<f64> {
        let (vx, vy, w) = (x[2], x[3], x[4]);
        #[rustfmt::skip]
        let a = Matrix5::new(
            0.0, 0.0, 1.0, 0.0, 0.0,
            0.0, 0.0, 0.0, 1.0, 0.0,
            0.0, 0.0, 0.0, -w,  -vy,
            0.0, 0.0, w,   0.0, vx,
            0.0, 0.0, 0.0, 0.0, 0.0,
        );
        a
    }
}

impl Model for Tracking {
    type State = U5;
    type Meas = U2;

    fn declare(&self) -> Declaration {
        Declaration::new("tracking", self.dt)
            .describe("2-D nearly-constant-turn target (Bar-Shalom et al. 2001, 11.7); range and bearing measured")
            .state("px", "m", 1000.0, 20.0)
            .state("py", "m", 0.0, 20.0)
            .state("vx", "m/s", 0.0, 1.0)
            .state("vy", "m/s", 15.0, 1.0)
            .state("omega", "rad/s", 0.02, 0.002)
            .measurement("range", "m")
            .measurement("bearing", "rad")
    }

    fn transition<S: Real>(&self, x: &Vector5<S>, _u: &[f64], _t: f64, dt: f64) -> Vector5<S> {
        let (px, py, vx, vy, w) = (x[0], x[1], x[2], x[3], x[4]);
        let theta = w * dt;
        let a = sin_over(theta) * dt;
        let b = one_minus_cos_over(theta) * dt;
        let (s, c) = theta.sin_cos();
        Vector5::new(
            px + a * vx - b * vy,
            py + b * vx + a * vy,
            c * vx - s * vy,
            s * vx + c * vy,
            w,
        )
    }

    fn process_noise(&self, x: &Vector5<f64>, _u: &[f64], _t: f64, dt: f64) -> Matrix5<f64> {
        let qc = Matrix5::from_diagonal(&Vector5::new(0.0, 0.0, self.q, self.q, self.q_omega));
        van_loan(&Self::derivative_jacobian(x), &qc, dt).1
    }

    fn measure<S: Real>(&self, x: &Vector5<S>, _u: &[f64], _t: f64) -> Vector2<S> {
        let dx = x[0] - self.sensor_x;
        let dy = x[1] - self.sensor_y;
        Vector2::new((dx * dx + dy * dy).sqrt(), bearing(dy, dx))
    }

    fn measurement_noise(&self, _t: f64) -> Matrix2<f64> {
        Matrix2::new(self.r_range, 0.0, 0.0, self.r_bearing)
    }

    /// y − ŷ with the bearing component wrapped into (−π, π].
    fn measurement_residual(&self, y: &Vector2<f64>, predicted: &Vector2<f64>) -> Vector2<f64> {
        Vector2::new(y[0] - predicted[0], wrap_angle(y[1] - predicted[1]))
    }

    /// Weighted mean of the ranges and circular mean atan2(Σ wᵢ sin βᵢ, Σ wᵢ cos βᵢ) of the
    /// bearings (common practice for sigma points straddling ±π).
    fn measurement_mean(&self, points: &OMatrix<f64, U2, Dyn>, weights: &[f64]) -> Vector2<f64> {
        let (mut range, mut sin, mut cos) = (0.0, 0.0, 0.0);
        for (p, w) in points.column_iter().zip(weights) {
            range += w * p[0];
            sin += w * p[1].sin();
            cos += w * p[1].cos();
        }
        Vector2::new(range, sin.atan2(cos))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use sightline_core::ad::{Differentiable, VectorFunction};
    use sightline_core::num_dual::Dual64;
    use std::f64::consts::PI;

    struct Step<'a>(&'a Tracking);
    impl VectorFunction<U5, U5> for Step<'_> {
        fn eval<S: Real>(&self, x: &Vector5<S>) -> Vector5<S> {
            self.0.transition(x, &[], 0.0, self.0.dt)
        }
    }
    struct Sense<'a>(&'a Tracking);
    impl VectorFunction<U5, U2> for Sense<'_> {
        fn eval<S: Real>(&self, x: &Vector5<S>) -> Vector2<S> {
            self.0.measure(x, &[], 0.0)
        }
    }

    #[test]
    fn a_full_turn_closes_the_circle() {
        // Uniform circular motion (closed form): after ω·t = 2π the target is back where it
        // started with the same velocity, having stayed on the circle of radius |v|/ω about
        // the centre p + (−vy, vx)/ω.
        let plant = Tracking::default();
        let steps = 100;
        let w = 2.0 * PI / (steps as f64 * plant.dt);
        let start = Vector5::new(1000.0, 0.0, 0.0, 15.0, w);
        let centre = Vector2::new(1000.0 - 15.0 / w, 0.0);
        let mut x = start;
        for _ in 0..steps {
            x = plant.transition(&x, &[], 0.0, plant.dt);
            let radius = (Vector2::new(x[0], x[1]) - centre).norm();
            assert!((radius - 15.0 / w).abs() < 1e-9, "radius {radius}");
        }
        assert!((x - start).abs().max() < 1e-9, "{x} vs {start}");
    }

    #[test]
    fn zero_turn_rate_is_constant_velocity() {
        // ω = 0: straight flight, p⁺ = p + v·dt exactly (BLK 2001, §11.7 limit).
        let plant = Tracking::default();
        let x = Vector5::new(3.0, -4.0, 10.0, -2.0, 0.0);
        let next = plant.transition(&x, &[], 0.0, 2.0);
        assert_eq!(next, Vector5::new(23.0, -8.0, 10.0, -2.0, 0.0));
        // and the Jacobian there is the limit: ∂px⁺/∂ω = −vy·dt²/2, ∂py⁺/∂ω = vx·dt²/2,
        // ∂vx⁺/∂ω = −vy·dt, ∂vy⁺/∂ω = vx·dt (differentiating the series at θ = 0).
        let plant = Tracking {
            dt: 2.0,
            ..Tracking::default()
        };
        let (_, jac) = U5::jacobian(&Step(&plant), &x);
        let expected = [
            2.0 * 4.0 / 2.0,
            10.0 * 4.0 / 2.0,
            2.0 * 2.0,
            10.0 * 2.0,
            1.0,
        ];
        for (i, e) in expected.iter().enumerate() {
            assert!((jac[(i, 4)] - e).abs() < 1e-14, "row {i}: {}", jac[(i, 4)]);
        }
    }

    #[test]
    fn series_and_closed_form_agree_at_the_switch() {
        // Value and first derivative continuous across |θ| = 0.1, where both forms are accurate.
        for theta in [SERIES_BELOW, -SERIES_BELOW] {
            let below = theta * (1.0 - 1e-15);
            let forms: [fn(Dual64) -> Dual64; 2] = [sin_over, one_minus_cos_over];
            for f in forms {
                let a = f(Dual64::new(below, 1.0));
                let b = f(Dual64::new(theta, 1.0));
                assert!((a.re - b.re).abs() < 1e-15, "{} vs {}", a.re, b.re);
                assert!((a.eps - b.eps).abs() < 1e-13, "{} vs {}", a.eps, b.eps);
            }
        }
        // The series against the closed forms sin θ/θ and (1 − cos θ)/θ = 2 sin²(θ/2)/θ
        // (the half-angle identity avoids the cancellation of 1 − cos θ), away from θ = 0.
        for theta in [1e-3f64, 0.05, 0.0999] {
            let a = theta.sin() / theta;
            let b = 2.0 * (theta / 2.0).sin().powi(2) / theta;
            assert!((sin_over(theta) / a - 1.0).abs() < 1e-15);
            assert!((one_minus_cos_over(theta) / b - 1.0).abs() < 1e-14);
        }
    }

    #[test]
    fn transition_jacobian_matches_central_differences() {
        let plant = Tracking::default();
        for x in [
            Vector5::new(1000.0, 0.0, 0.0, 15.0, 0.02),
            Vector5::new(-200.0, 300.0, 5.0, -7.0, 0.0),
            Vector5::new(50.0, 60.0, -12.0, 1.0, -0.3),
            Vector5::new(50.0, 60.0, -12.0, 1.0, 0.1 / plant.dt),
        ] {
            let (_, ad) = U5::jacobian(&Step(&plant), &x);
            for j in 0..5 {
                let delta = if j == 4 { 1e-6 } else { 1e-4 };
                let mut e = Vector5::zeros();
                e[j] = delta;
                let u: [f64; 0] = [];
                let fd = (plant.transition(&(x + e), &u, 0.0, plant.dt)
                    - plant.transition(&(x - e), &u, 0.0, plant.dt))
                    / (2.0 * delta);
                for i in 0..5 {
                    assert!(
                        (fd[i] - ad[(i, j)]).abs() < 1e-6 * (1.0 + ad[(i, j)].abs()),
                        "x = {x}, ({i}, {j}): fd {} vs AD {}",
                        fd[i],
                        ad[(i, j)]
                    );
                }
            }
        }
    }

    #[test]
    fn bearing_derivatives_stay_finite_on_the_axes() {
        // ∂β/∂px = −dy/r², ∂β/∂py = dx/r², ∂r/∂p = (dx, dy)/r (closed form), including
        // a target due north (dx = 0), where atan(dy/dx) cannot be differentiated.
        let plant = Tracking {
            sensor_x: 10.0,
            sensor_y: -5.0,
            ..Tracking::default()
        };
        for (dx, dy) in [(0.0, 300.0), (0.0, -300.0), (-400.0, 0.0), (120.0, -50.0)] {
            let x = Vector5::new(10.0 + dx, -5.0 + dy, 1.0, 1.0, 0.0);
            let (y, jac) = U5::jacobian(&Sense(&plant), &x);
            let r2: f64 = dx * dx + dy * dy;
            assert!((y[0] - r2.sqrt()).abs() < 1e-12);
            assert!((y[1] - f64::atan2(dy, dx)).abs() < 1e-15);
            assert!((jac[(0, 0)] - dx / r2.sqrt()).abs() < 1e-15);
            assert!((jac[(0, 1)] - dy / r2.sqrt()).abs() < 1e-15);
            assert!((jac[(1, 0)] + dy / r2).abs() < 1e-15, "{}", jac[(1, 0)]);
            assert!((jac[(1, 1)] - dx / r2).abs() < 1e-15, "{}", jac[(1, 1)]);
        }
    }

    #[test]
    fn bearing_residual_wraps_and_mean_is_circular() {
        let plant = Tracking::default();
        // Two bearings 0.02 rad apart across ±π (common practice: wrap into (−π, π]).
        let y = Vector2::new(100.0, PI - 0.01);
        let predicted = Vector2::new(90.0, -PI + 0.01);
        let e = plant.measurement_residual(&y, &predicted);
        assert!((e[0] - 10.0).abs() < 1e-12);
        assert!((e[1] + 0.02).abs() < 1e-12, "{}", e[1]);
        // Equal-weight mean of bearings ±(π − 0.01) is π, not 0.
        let points =
            OMatrix::<f64, U2, Dyn>::from_column_slice(&[10.0, PI - 0.01, 20.0, -PI + 0.01]);
        let mean = plant.measurement_mean(&points, &[0.5, 0.5]);
        assert!((mean[0] - 15.0).abs() < 1e-12);
        assert!((wrap_angle(mean[1]) - PI).abs() < 1e-12, "{}", mean[1]);
    }
}
