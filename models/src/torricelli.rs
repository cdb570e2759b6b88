//! Torricelli's outflow law with a smooth guard at an empty tank, shared by the tank plants.
//!
//! A tank of level h drains through an outlet of area a at q = a·√(2g·h) (Torricelli's law, as
//! used by Johansson, IEEE TCST 8(3), 2000, eq. 1). The law is undefined for h < 0, and √h has an
//! infinite slope at h = 0, which would give infinite Jacobians to the extended filters. Sightline
//! therefore evaluates the law at a smooth positive part of the level,
//!
//! ```text
//! ĥ(h) = (h + √(h² + ε²)) / 2,        q = a·√(2g·ĥ(h)),
//! ```
//!
//! with a small smoothing level ε (a model parameter, `h_smooth`). ĥ is analytic, strictly
//! positive, ĥ(h) − h = ε²/(4h) + O(ε⁴/h³) above the outlet (a relative flow error of about
//! 1e-7 at 1.4 cm for ε = 1e-3 cm) and ĥ(h) ≈ ε²/(4|h|) → 0 below it, so the flow never sees
//! a negative level, never returns NaN, and its derivative is finite everywhere: per unit of
//! a·√(2g) it is ĥ′/(2√ĥ) ≤ 3/(8·(3/4)^¼·√ε) ≈ 0.403/√ε, reached at h = ε/√3. Below zero ĥ is computed in the
//! cancellation-free form ε²/(2(√(h² + ε²) − h)), the same analytic function, so it stays
//! positive for any finite level.

use sightline_core::prelude::*;

/// The smooth positive part ĥ(h) of a level (module docs), in cm if `h` and `eps` are:
/// `h.smooth_max(0.0, eps)` ([`Real::smooth_max`]), whose two forms are exactly the two forms
/// of ĥ above (the floor 0 adds and subtracts exactly). Written through `smooth_max` rather
/// than an `if` on the value so that the tank plants stay lane-friendly (`sightline_core::lanes`):
/// `f64` and dual numbers still evaluate only the branch they take.
pub fn smooth_level<S: Real>(h: S, eps: f64) -> S {
    h.smooth_max(0.0, eps)
}

/// Outflow a·√(2g·ĥ(h)) of an outlet of area `a` at level `h` (cm³/s for cm, cm², cm/s²).
///
/// ```
/// use sightline_models::torricelli::outflow;
/// // Torricelli's law a·√(2gh) above the outlet; a small positive trickle, never NaN, below it.
/// let q = outflow(0.071, 981.0, 12.4, 1e-3);
/// assert!((q - 0.071 * (2.0 * 981.0 * 12.4f64).sqrt()).abs() < 1e-6);
/// assert!(outflow(0.071, 981.0, -2.0, 1e-3) > 0.0);
/// ```
pub fn outflow<S: Real>(a: f64, g: f64, h: S, eps: f64) -> S {
    (smooth_level(h, eps) * (2.0 * g)).sqrt() * a
}

/// Derivative of [`outflow`] with respect to the level: a·√(2g)·ĥ′/(2√ĥ), with ĥ′ = ĥ/√(h² + ε²).
pub fn outflow_slope(a: f64, g: f64, h: f64, eps: f64) -> f64 {
    let s = (h * h + eps * eps).sqrt();
    let level = smooth_level(h, eps);
    let level_slope = level / s;
    a * (2.0 * g).sqrt() * level_slope / (2.0 * level.sqrt())
}

#[cfg(test)]
mod tests {
    use super::*;
    use sightline_core::num_dual::Dual64;

    #[test]
    fn matches_torricelli_above_the_outlet_and_vanishes_below() {
        // Torricelli's law q = a√(2gh) (closed form) for a level well above ε.
        let (a, g, eps) = (0.071, 981.0, 1e-3);
        let h: f64 = 12.4;
        let exact = a * (2.0 * g * h).sqrt();
        assert!((outflow(a, g, h, eps) / exact - 1.0).abs() < 1e-7);
        // Below the outlet the flow tends to zero like ε/(2√|h|) and stays positive and finite.
        for h in [-1e-3f64, -1.0, -1e3, -1e8] {
            let q = outflow(a, g, h, eps);
            assert!(q > 0.0 && q.is_finite(), "h = {h}: q = {q}");
            let limit = a * (2.0 * g).sqrt() * eps / (2.0 * (-h).sqrt());
            if h < -1.0 {
                assert!((q / limit - 1.0).abs() < 1e-6, "h = {h}: {q} vs {limit}");
            }
        }
    }

    #[test]
    fn smooth_level_is_the_smooth_maximum_with_zero() {
        // The same function as Real::smooth_max at a zero floor, bit for bit.
        for h in [-1e6f64, -5.0, -1e-3, -1e-9, 0.0, 1e-9, 1e-3, 0.5, 12.7, 1e4] {
            assert_eq!(
                smooth_level(h, 1e-3).to_bits(),
                h.smooth_max(0.0, 1e-3).to_bits(),
                "{h}"
            );
        }
    }

    #[test]
    fn slope_matches_automatic_differentiation_everywhere() {
        let (a, g, eps) = (0.057, 981.0, 1e-3);
        for h in [-1e6, -5.0, -1e-3, -1e-9, 0.0, 1e-9, 1e-3, 0.5, 12.7, 1e4] {
            let d = outflow(a, g, Dual64::new(h, 1.0), eps);
            let hand = outflow_slope(a, g, h, eps);
            assert!(d.eps.is_finite());
            assert!(
                (d.eps - hand).abs() <= 1e-12 * (1.0 + hand.abs()),
                "h = {h}: AD {} vs hand {hand}",
                d.eps
            );
        }
    }

    #[test]
    fn slope_bound_stated_in_the_docs_holds() {
        // max over h of ĥ′/(2√ĥ) = 3/(8·(3/4)^¼·√ε) at h = ε/√3 (closed form from setting the
        // derivative of ĥ′/√ĥ to zero), checked on a fine grid of levels.
        let eps: f64 = 1e-3;
        let max = (-20000..20000)
            .map(|i| outflow_slope(1.0, 0.5, i as f64 * eps / 1000.0, eps))
            .fold(0.0, f64::max);
        let bound = 3.0 / (8.0 * 0.75f64.powf(0.25) * eps.sqrt());
        assert!(max <= bound * (1.0 + 1e-12), "{max} vs {bound}");
        assert!(max > bound * (1.0 - 1e-5), "{max} vs {bound}");
    }
}
