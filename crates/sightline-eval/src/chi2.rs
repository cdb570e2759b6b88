//! χ² quantiles and the two-sided 95 % consistency bands built from them.
//!
//! The quantile is [`sightline_core::chi2::quantile`] (the inverse of the regularised lower
//! incomplete gamma function, computed by the `statrs` crate). The bands follow
//! Bar-Shalom, Li & Kirubarajan, *Estimation with Applications to Tracking and Navigation*
//! (Wiley 2001), §5.4: the NEES of a consistent filter is χ²(n); the average of `count`
//! independent χ²(n) values, times `count`, is χ²(count·n).

/// Lower tail probability of the two-sided 95 % band.
pub const LOWER_TAIL: f64 = 0.025;
/// Upper tail probability of the two-sided 95 % band.
pub const UPPER_TAIL: f64 = 0.975;

/// The `p` quantile of χ²(`dof`), or `None` when `dof` is not positive and finite or `p` is not
/// inside (0, 1). One implementation, in the core crate, shared with the filters' χ² gating.
pub use sightline_core::chi2::quantile;

/// A closed interval `[lo, hi]` a consistency statistic should fall in.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Band {
    /// Lower bound.
    pub lo: f64,
    /// Upper bound.
    pub hi: f64,
}

impl Band {
    /// Whether `value` lies inside the band (bounds included).
    pub fn contains(&self, value: f64) -> bool {
        value >= self.lo && value <= self.hi
    }

    /// `[lo, hi]` as an array, the JSON form (`anees_band`).
    pub fn to_array(self) -> [f64; 2] {
        [self.lo, self.hi]
    }
}

/// The two-sided 95 % band of one χ²(`dof`) value: `[q(0.025), q(0.975)]`.
///
/// ```
/// use sightline_eval::chi2::band;
/// // χ²(2) quantiles are −2·ln(1 − p) (closed form: χ²(2) is exponential with mean 2).
/// let b = band(2).unwrap();
/// assert!((b.lo - (-2.0 * (0.975_f64).ln())).abs() < 1e-9);
/// assert!((b.hi - (-2.0 * (0.025_f64).ln())).abs() < 1e-9);
/// ```
pub fn band(dof: usize) -> Option<Band> {
    average_band(dof, 1)
}

/// The two-sided 95 % band of the average of `count` independent χ²(`dof`) values:
/// χ²(count·dof) quantiles divided by `count` (Bar-Shalom et al. 2001, §5.4.2). This is the
/// ANEES band of a Monte Carlo campaign with `count` runs, and the time-average band of a single
/// run with `count` steps.
pub fn average_band(dof: usize, count: usize) -> Option<Band> {
    pooled_band(dof.checked_mul(count)?, count)
}

/// The two-sided 95 % band of a sum of χ² values with `total_dof` degrees of freedom in all,
/// divided by `count` — the time-average NIS band when the number of measurement components
/// present varies from step to step.
pub fn pooled_band(total_dof: usize, count: usize) -> Option<Band> {
    if total_dof == 0 || count == 0 {
        return None;
    }
    let k = total_dof as f64;
    let c = count as f64;
    Some(Band {
        lo: quantile(k, LOWER_TAIL)? / c,
        hi: quantile(k, UPPER_TAIL)? / c,
    })
}

/// The 95 % bands of one χ² value for every dof from 1 to `max_dof`, indexed by `dof - 1` —
/// looked up once per run so that no step evaluates a quantile.
pub fn bands_up_to(max_dof: usize) -> Vec<Band> {
    (1..=max_dof)
        .map(|d| {
            band(d).unwrap_or(Band {
                lo: f64::NAN,
                hi: f64::NAN,
            })
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// `scipy.stats.chi2.ppf` values written by `tests/reference/chi2_quantiles.py` (scipy 1.17).
    const FIXTURE: &str = include_str!("../../../tests/reference/chi2_quantiles.csv");

    #[test]
    fn quantiles_match_scipy_fixture() {
        let mut checked = 0;
        for line in FIXTURE.lines().skip(1) {
            let cells: Vec<f64> = line.split(',').map(|c| c.trim().parse().unwrap()).collect();
            let (dof, p, expected) = (cells[0], cells[1], cells[2]);
            let got = quantile(dof, p).unwrap();
            // Both sides are double-precision inversions of the same function; 1e-9 relative is
            // far below any use the bands are put to and far above rounding noise.
            assert!(
                (got - expected).abs() <= 1e-9 * expected.abs().max(1.0),
                "chi2.ppf({p}, {dof}): scipy {expected}, got {got}"
            );
            checked += 1;
        }
        // dof 1..10 and large dof, at 0.025 / 0.5 / 0.975 (and more): the fixture is complete.
        assert!(checked >= 45, "fixture has only {checked} rows");
    }

    #[test]
    fn abramowitz_stegun_table_26_8_spot_values() {
        // Abramowitz & Stegun, Table 26.8 (percentage points of χ²), from memory to the printed
        // 4-5 significant digits: Q = 0.05 (p = 0.95) for ν = 1, 5, 10.
        for (dof, expected) in [(1.0, 3.84146), (5.0, 11.0705), (10.0, 18.3070)] {
            let got = quantile(dof, 0.95).unwrap();
            assert!((got - expected).abs() < 1e-4, "ν={dof}: {got}");
        }
    }

    #[test]
    fn average_band_narrows_like_one_over_sqrt_count() {
        // χ²(k)/k → 1 with standard deviation sqrt(2/k) (closed form of the χ² variance), so
        // the band half-width is about 1.96·sqrt(2/(M·n)).
        let b = average_band(2, 5000).unwrap();
        let half = 1.96 * (2.0_f64 / 10_000.0).sqrt() * 2.0;
        assert!(((b.hi - b.lo) / 2.0 - half).abs() < 0.01 * half, "{b:?}");
        assert!(average_band(0, 10).is_none());
        assert!(average_band(2, 0).is_none());
    }

    #[test]
    fn rejects_invalid_arguments() {
        assert!(quantile(-1.0, 0.5).is_none());
        assert!(quantile(f64::NAN, 0.5).is_none());
        assert!(quantile(3.0, 0.0).is_none());
        assert!(quantile(3.0, 1.0).is_none());
    }
}
