//! χ² quantiles, shared by the filters (χ² gating of outlier measurements) and the evaluation
//! crate (consistency bands).
//!
//! The quantile is the inverse of the regularised lower incomplete gamma function, computed by
//! the `statrs` crate (safeguarded Newton–Raphson on its incomplete-gamma CDF).

use statrs::distribution::{ChiSquared, ContinuousCDF};

/// The `p` quantile of χ²(`dof`), or `None` when `dof` is not positive and finite or `p` is not
/// inside (0, 1).
///
/// ```
/// use sightline_core::chi2::quantile;
/// // χ²(1) 95 % point: P(Z² ≤ z²) = P(|Z| ≤ z) = 0.95 at the standard normal 97.5 % point
/// // z = 1.959964 (closed form).
/// let q = quantile(1.0, 0.95).unwrap();
/// assert!((q - 1.959963984540054_f64.powi(2)).abs() < 1e-8);
/// assert!(quantile(0.0, 0.5).is_none());
/// ```
pub fn quantile(dof: f64, p: f64) -> Option<f64> {
    if !(dof.is_finite() && dof > 0.0 && p > 0.0 && p < 1.0) {
        return None;
    }
    let dist = ChiSquared::new(dof).ok()?;
    let q = dist.inverse_cdf(p);
    q.is_finite().then_some(q)
}
