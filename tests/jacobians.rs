//! Exact Jacobians by automatic differentiation (num-dual) against the pendulum's hand-derived
//! Jacobian of its RK4 step, and against central differences, at random points.

use rand::RngExt;
use sightline::Model;
use sightline::core::ad::Differentiable;
use sightline::core::nalgebra::{Matrix1x2, Matrix2, U2, Vector2};
use sightline::core::rng::stream;
use sightline::filters::linearise::{MeasureFn, TransitionFn};
use sightline::models::Pendulum;

fn random_points() -> Vec<(Vector2<f64>, f64, f64)> {
    let mut rng = stream(1993, &[]);
    (0..200)
        .map(|_| {
            let x = Vector2::new(rng.random_range(-3.1..3.1), rng.random_range(-6.0..6.0));
            let torque = rng.random_range(-2.0..2.0);
            let dt = [0.01, 0.05, 0.2][rng.random_range(0..3)];
            (x, torque, dt)
        })
        .collect()
}

#[test]
fn ad_transition_jacobian_equals_the_hand_derived_rk4_jacobian() {
    let model = Pendulum {
        damping: 0.3,
        ..Pendulum::default()
    };
    for (x, torque, dt) in random_points() {
        let u = [torque];
        let (value, ad) = U2::jacobian(
            &TransitionFn {
                model: &model,
                u: &u,
                t: 0.0,
                dt,
            },
            &x,
        );
        assert_eq!(value, model.transition(&x, &u, 0.0, dt));
        // Hand-derived by the chain rule through the four RK4 stages (models/src/pendulum.rs;
        // the derivation is the textbook sensitivity of an explicit Runge–Kutta step).
        let hand = model.transition_jacobian(&x, &u, 0.0, dt).unwrap();
        let err = (ad - hand).abs().max();
        assert!(
            err <= 1e-12,
            "x={x:?} dt={dt}: AD {ad} vs hand {hand} (error {err:e})"
        );
    }
}

#[test]
fn ad_jacobians_equal_central_differences() {
    let model = Pendulum {
        damping: 0.3,
        ..Pendulum::default()
    };
    for (x, torque, dt) in random_points() {
        let u = [torque];
        let (_, ad) = U2::jacobian(
            &TransitionFn {
                model: &model,
                u: &u,
                t: 0.0,
                dt,
            },
            &x,
        );
        let (_, ad_h) = U2::jacobian(
            &MeasureFn {
                model: &model,
                u: &u,
                t: 0.0,
            },
            &x,
        );
        // Central differences (common practice): truncation O(h²) and rounding O(ε/h), both far
        // below 1e-7 with h = 1e-5 for these smooth functions of order-one size.
        let h = 1e-5;
        let mut cd = Matrix2::zeros();
        let mut cd_h = Matrix1x2::zeros();
        for j in 0..2 {
            let mut plus = x;
            let mut minus = x;
            plus[j] += h;
            minus[j] -= h;
            let df = (model.transition(&plus, &u, 0.0, dt) - model.transition(&minus, &u, 0.0, dt))
                / (2.0 * h);
            cd.set_column(j, &df);
            cd_h[j] =
                (model.measure(&plus, &u, 0.0)[0] - model.measure(&minus, &u, 0.0)[0]) / (2.0 * h);
        }
        assert!(
            (ad - cd).abs().max() <= 1e-7,
            "x={x:?} dt={dt}: AD {ad} vs central differences {cd}"
        );
        assert!(
            (ad_h - cd_h).abs().max() <= 1e-7,
            "x={x:?}: AD {ad_h} vs central differences {cd_h}"
        );
        // And the measurement Jacobian's closed form, ∂(ℓ sin θ)/∂θ = ℓ cos θ.
        let closed = Matrix1x2::new(model.length * x[0].cos(), 0.0);
        assert!(
            (ad_h - closed).abs().max() <= 1e-15,
            "x={x:?}: {ad_h} vs {closed}"
        );
    }
}
