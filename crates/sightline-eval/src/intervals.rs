//! Intervals on accuracy and paired comparisons: is a difference between two filters real?
//!
//! **One dataset.** Neighbouring steps' errors are correlated, so the steps are not independent
//! samples. The 95 % interval of `rmse_all` is a percentile interval of the moving-block
//! bootstrap (Künsch, "The jackknife and the bootstrap for general stationary observations",
//! Ann. Statist. 17(3), 1989) of the per-step squared errors: blocks of `b` consecutive steps
//! drawn with replacement keep the correlation within a block. `b` is chosen by the automatic
//! rule of Politis & White, "Automatic block-length selection for the dependent bootstrap",
//! Econometric Reviews 23(1), 2004, with the correction of Patton, Politis & White,
//! Econometric Reviews 28(4), 2009 (the circular/moving-block constant D = 4/3·ĝ(0)²; written
//! from memory of the papers), see [`block_length`].
//!
//! Comparisons are **paired**: every filter saw the same data, so the same resampled blocks are
//! applied to both filters of a pair and the interval is that of the difference, which cancels
//! what the data did to both (a hard stretch of the run raises every filter's error). The block
//! length of a pair comes from the per-step differences. An exact tie (identical per-step
//! values) is a tie without resampling.
//!
//! Without truth the same paired bootstrap applies to the per-step log-likelihood increments:
//! the difference of total log-likelihoods with its interval, a Vuong-type comparison of
//! non-nested models (Vuong, Econometrica 57(2), 1989) that respects time correlation.
//!
//! **Memory.** A run of ten million rows must not keep ten million values per filter:
//! [`StepSums`] keeps at most [`MAX_UNITS`] sums of consecutive steps, doubling the number of
//! steps per sum (and adding neighbours) when it fills up. Blocks are then whole units, which is
//! the moving-block bootstrap with block lengths rounded up to a multiple of the unit: the
//! statistic being a sum, nothing else changes.
//!
//! **Reproducibility.** The resampling stream is seeded by a hash of the data it resamples, so
//! the same run gives the same interval, and independently of the thread count.
//!
//! **Monte Carlo.** Runs are independent: the interval of `rmse_all` is the Student-t interval of
//! the mean over runs of each run's mean squared error, mapped through the square root; paired
//! comparisons use the per-run differences of mean squared error ([`TDistribution`], common
//! practice).

use rand::RngExt;
use serde::{Deserialize, Serialize};
use statrs::distribution::{ContinuousCDF, StudentsT};

use crate::exact_sum::ExactSum;

/// Confidence level of every interval.
pub const LEVEL: f64 = 0.95;

/// Bootstrap replicates (an odd count so that the 2.5 % and 97.5 % order statistics are
/// well-placed; 999 is common practice, Davison & Hinkley, *Bootstrap Methods and their
/// Application*, 1997, §5.2).
pub const REPLICATES: usize = 999;

/// Most units a [`StepSums`] keeps before merging neighbours.
pub const MAX_UNITS: usize = 1 << 14;

/// Relative differences smaller than this are rounding, not accuracy: two filters that agree to
/// it (e.g. every Gaussian filter on a linear plant, equal to 1e-15) are tied whatever the
/// bootstrap says (our own choice, far above double rounding, far below any practical
/// difference).
pub const ROUNDING: f64 = 1e-9;

/// Per-step values of one filter kept as sums of consecutive steps, in bounded memory.
#[derive(Debug, Clone, PartialEq)]
pub struct StepSums {
    /// Steps per full unit.
    width: u64,
    /// Sums of the full units, then the open one.
    units: Vec<f64>,
    /// Steps in the open (last) unit.
    open: u64,
    /// Steps added.
    steps: u64,
}

impl Default for StepSums {
    fn default() -> Self {
        Self::new()
    }
}

impl StepSums {
    /// An empty store; its buffer is reserved once, so adding a value never allocates.
    pub fn new() -> Self {
        StepSums {
            width: 1,
            units: Vec::with_capacity(MAX_UNITS + 1),
            open: 0,
            steps: 0,
        }
    }

    /// Adds the next step's value.
    pub fn push(&mut self, value: f64) {
        if self.open == 0 {
            if self.units.len() == MAX_UNITS {
                self.halve();
            }
            self.units.push(0.0);
        }
        if let Some(last) = self.units.last_mut() {
            *last += value;
        }
        self.open += 1;
        if self.open == self.width {
            self.open = 0;
        }
        self.steps += 1;
    }

    /// Adds neighbouring full units in pairs: half as many units, twice as wide.
    fn halve(&mut self) {
        let pairs = self.units.len() / 2;
        for i in 0..pairs {
            self.units[i] = self.units[2 * i] + self.units[2 * i + 1];
        }
        let odd = self.units.len() % 2 == 1;
        if odd {
            self.units[pairs] = self.units[2 * pairs];
        }
        self.units.truncate(pairs + usize::from(odd));
        self.width *= 2;
    }

    /// Steps added.
    pub fn steps(&self) -> u64 {
        self.steps
    }

    /// Steps per unit.
    pub fn width(&self) -> u64 {
        self.width
    }

    /// The unit sums (the last one may hold fewer steps).
    pub fn units(&self) -> &[f64] {
        &self.units
    }

    /// Steps in unit `i`.
    fn unit_steps(&self, i: usize) -> f64 {
        if i + 1 == self.units.len() && self.open > 0 {
            self.open as f64
        } else {
            self.width as f64
        }
    }

    /// Sum of every value.
    pub fn total(&self) -> f64 {
        self.units.iter().sum()
    }
}

/// 64-bit FNV-1a over the bits of some values: the data-derived seed of a bootstrap.
fn data_seed(series: &[&[f64]]) -> u64 {
    let mut h: u64 = 0xcbf2_9ce4_8422_2325;
    for s in series {
        for v in *s {
            for b in v.to_bits().to_le_bytes() {
                h = (h ^ u64::from(b)).wrapping_mul(0x0000_0100_0000_01b3);
            }
        }
    }
    h
}

/// The `p` quantile of sorted values, by linear interpolation between order statistics
/// (Hyndman & Fan 1996, type 7; common practice).
fn quantile_sorted(sorted: &[f64], p: f64) -> f64 {
    if sorted.is_empty() {
        return f64::NAN;
    }
    let h = (sorted.len() - 1) as f64 * p;
    let lo = h.floor() as usize;
    let hi = (lo + 1).min(sorted.len() - 1);
    sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo])
}

/// The two-sided [`LEVEL`] percentile interval of some replicates (NaN ones dropped).
fn percentile_interval(mut values: Vec<f64>) -> Option<[f64; 2]> {
    values.retain(|v| !v.is_nan());
    if values.is_empty() {
        return None;
    }
    values.sort_by(f64::total_cmp);
    let tail = (1.0 - LEVEL) / 2.0;
    Some([
        quantile_sorted(&values, tail),
        quantile_sorted(&values, 1.0 - tail),
    ])
}

/// The block length (in values) of the moving-block bootstrap of `x` by Politis & White (2004)
/// with the Patton–Politis–White (2009) correction.
///
/// The sample autocorrelation ρ̂(k) is "significant" beyond c·√(log₁₀N/N), c = 2; m̂ is the
/// smallest lag after which K_N = max(5, ⌈√log₁₀N⌉) consecutive lags are insignificant, and
/// M = 2m̂ (capped at ⌈√N⌉ + K_N). With the flat-top lag window λ(t) = 1 for |t| ≤ ½,
/// 2(1 − |t|) for ½ < |t| ≤ 1, 0 beyond, Ĝ = Σ λ(k/M)|k|R̂(k) and ĝ(0) = Σ λ(k/M)R̂(k) over
/// |k| ≤ M; then b = (2Ĝ²/D)^{1/3} N^{1/3} with D = (4/3)ĝ(0)², rounded up and kept in
/// [1, min(3√N, N/3)]. Uncorrelated values give b = 1 (the ordinary bootstrap).
///
/// ```
/// use sightline_eval::intervals::block_length;
/// // Too short to estimate anything: blocks of one.
/// assert_eq!(block_length(&[1.0, 2.0, 3.0]), 1);
/// // A slow sine: strongly correlated, long blocks.
/// let slow: Vec<f64> = (0..400).map(|k| (k as f64 / 20.0).sin()).collect();
/// assert!(block_length(&slow) > 10);
/// ```
pub fn block_length(x: &[f64]) -> usize {
    let n = x.len();
    if n < 8 {
        return 1;
    }
    let nf = n as f64;
    let mean = x.iter().sum::<f64>() / nf;
    let kn = 5usize.max(nf.log10().sqrt().ceil() as usize);
    let mmax = ((nf.sqrt().ceil() as usize) + kn).min(n - 1);
    let acv = |k: usize| -> f64 {
        x[k..]
            .iter()
            .zip(x)
            .map(|(a, b)| (a - mean) * (b - mean))
            .sum::<f64>()
            / nf
    };
    let r: Vec<f64> = (0..=mmax).map(acv).collect();
    if !(r[0] > 0.0 && r[0].is_finite()) {
        return 1;
    }
    let threshold = 2.0 * (nf.log10() / nf).sqrt();
    let insignificant = |k: usize| (r[k] / r[0]).abs() < threshold;
    let m_hat = (0..=mmax.saturating_sub(kn))
        .find(|&m| (1..=kn).all(|j| insignificant(m + j)))
        .unwrap_or(mmax.saturating_sub(kn));
    let big_m = (2 * m_hat).min(mmax);
    if big_m == 0 {
        return 1;
    }
    let window = |t: f64| {
        let t = t.abs();
        if t <= 0.5 {
            1.0
        } else if t <= 1.0 {
            2.0 * (1.0 - t)
        } else {
            0.0
        }
    };
    let (mut g, mut g0) = (0.0, r[0]);
    for (k, rk) in r.iter().enumerate().take(big_m + 1).skip(1) {
        let l = window(k as f64 / big_m as f64);
        // Both signs of the lag.
        g += 2.0 * l * k as f64 * rk;
        g0 += 2.0 * l * rk;
    }
    let d = 4.0 / 3.0 * g0 * g0;
    if d.is_nan() || d <= 0.0 {
        return 1;
    }
    let b = (2.0 * g * g / d).cbrt() * nf.cbrt();
    let cap = (3.0 * nf.sqrt()).min(nf / 3.0).max(1.0);
    if !b.is_finite() {
        return 1;
    }
    b.ceil().clamp(1.0, cap) as usize
}

/// Moving-block resamples of aligned unit series: each replicate draws ⌈U/b⌉ blocks of `b`
/// consecutive units (starts uniform on 0..=U−b, Künsch 1989), the same blocks for every
/// series, truncated to U units. Returns per series per replicate the resampled sum divided by
/// the steps resampled, times the steps of the original (a total on the original scale).
fn resample(series: &[&StepSums], block: usize, seed: u64) -> Vec<Vec<f64>> {
    let Some(first) = series.first() else {
        return Vec::new();
    };
    let units = first.units().len();
    if units == 0 {
        return vec![Vec::new(); series.len()];
    }
    let block = block.clamp(1, units);
    let prefix = |s: &StepSums| -> Vec<f64> {
        let mut p = Vec::with_capacity(units + 1);
        p.push(0.0);
        let mut acc = 0.0;
        for v in s.units() {
            acc += v;
            p.push(acc);
        }
        p
    };
    let sums: Vec<Vec<f64>> = series.iter().map(|s| prefix(s)).collect();
    let mut steps = Vec::with_capacity(units + 1);
    steps.push(0.0);
    for i in 0..units {
        steps.push(steps[i] + first.unit_steps(i));
    }
    let original = first.steps() as f64;
    let mut rng = sightline_core::rng::stream(seed, &[0x626f_6f74]);
    let mut out = vec![Vec::with_capacity(REPLICATES); series.len()];
    let mut acc = vec![0.0; series.len()];
    for _ in 0..REPLICATES {
        acc.iter_mut().for_each(|a| *a = 0.0);
        let mut taken_steps = 0.0;
        let mut taken = 0;
        while taken < units {
            let len = block.min(units - taken);
            let start = rng.random_range(0..=units - block);
            for (a, p) in acc.iter_mut().zip(&sums) {
                *a += p[start + len] - p[start];
            }
            taken_steps += steps[start + len] - steps[start];
            taken += len;
        }
        for (o, a) in out.iter_mut().zip(&acc) {
            o.push(a * original / taken_steps);
        }
    }
    out
}

/// The 95 % moving-block bootstrap interval of `rmse_all` from a filter's per-step squared
/// errors summed over the `states` components (see the module docs).
pub fn rmse_interval(squared_errors: &StepSums, states: usize) -> Option<[f64; 2]> {
    let steps = squared_errors.steps();
    if steps < 2 || states == 0 {
        return None;
    }
    let block = block_length(squared_errors.units());
    let seed = data_seed(&[squared_errors.units()]);
    let scale = 1.0 / (steps as f64 * states as f64);
    let reps = resample(&[squared_errors], block, seed).pop()?;
    percentile_interval(reps.into_iter().map(|t| (t * scale).sqrt()).collect())
}

/// A paired comparison of one filter with the reference (the most accurate, or the best fit).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Paired {
    /// The point estimate: relative RMSE difference `rmse/rmse_ref − 1`, or the log-likelihood
    /// difference `ll − ll_ref`.
    pub difference: f64,
    /// Its 95 % interval.
    pub interval: [f64; 2],
    /// Whether the filter is not distinguishable from the reference at 95 %.
    pub tied: bool,
}

/// Whether `a` and `b` hold bitwise the same units.
fn identical(a: &StepSums, b: &StepSums) -> bool {
    a.units().len() == b.units().len()
        && a.units()
            .iter()
            .zip(b.units())
            .all(|(x, y)| x.to_bits() == y.to_bits())
}

fn differences(a: &StepSums, b: &StepSums) -> Vec<f64> {
    a.units()
        .iter()
        .zip(b.units())
        .map(|(x, y)| x - y)
        .collect()
}

/// Settles a comparison that needs no resampling: `Err(None)` for series that do not pair up
/// (different lengths, fewer than two steps), `Err(Some(tie))` for bitwise-equal ones.
fn unsettled(other: &StepSums, reference: &StepSums) -> Result<(), Option<Paired>> {
    if other.units().len() != reference.units().len() || other.steps() < 2 {
        return Err(None);
    }
    if identical(other, reference) {
        return Err(Some(Paired {
            difference: 0.0,
            interval: [0.0, 0.0],
            tied: true,
        }));
    }
    Ok(())
}

/// The paired result from the point `difference` and its bootstrap replicates: tied when the
/// interval holds 0 or lies within ±`rounding`.
fn paired_from(difference: f64, replicates: Vec<f64>, rounding: f64) -> Option<Paired> {
    let interval = percentile_interval(replicates)?;
    let within_rounding = interval[0] > -rounding && interval[1] < rounding;
    Some(Paired {
        difference,
        interval,
        tied: within_rounding || (interval[0] <= 0.0 && interval[1] >= 0.0),
    })
}

/// The paired resamples of two aligned series, blocks chosen from their per-unit differences.
fn paired_resamples(other: &StepSums, reference: &StepSums) -> Vec<Vec<f64>> {
    let block = block_length(&differences(other, reference));
    let seed = data_seed(&[other.units(), reference.units()]);
    resample(&[other, reference], block, seed)
}

/// Paired moving-block bootstrap of the relative RMSE difference of `other` against
/// `reference`, both per-step squared-error sums over the same steps.
pub fn paired_rmse(other: &StepSums, reference: &StepSums) -> Option<Paired> {
    if let Err(settled) = unsettled(other, reference) {
        return settled;
    }
    let (to, tr) = (other.total(), reference.total());
    if tr.is_nan() || tr <= 0.0 {
        return None;
    }
    let reps = paired_resamples(other, reference);
    let ratios = reps[0]
        .iter()
        .zip(&reps[1])
        .map(|(o, r)| {
            if *r > 0.0 {
                (o / r).sqrt() - 1.0
            } else {
                f64::NAN
            }
        })
        .collect();
    paired_from((to / tr).sqrt() - 1.0, ratios, ROUNDING)
}

/// Paired moving-block bootstrap of the total log-likelihood difference `other − reference`
/// from the per-step increments over the same steps.
pub fn paired_log_likelihood(other: &StepSums, reference: &StepSums) -> Option<Paired> {
    if let Err(settled) = unsettled(other, reference) {
        return settled;
    }
    let reps = paired_resamples(other, reference);
    let diffs = reps[0].iter().zip(&reps[1]).map(|(o, r)| o - r).collect();
    let rounding = ROUNDING * reference.total().abs().max(1.0);
    paired_from(other.total() - reference.total(), diffs, rounding)
}

/// The two-sided [`LEVEL`] quantile of Student's t with `dof` degrees of freedom.
pub struct TDistribution;

impl TDistribution {
    /// t_{(1+LEVEL)/2}(dof); `None` for dof < 1.
    pub fn critical(dof: u64) -> Option<f64> {
        if dof < 1 {
            return None;
        }
        let t = StudentsT::new(0.0, 1.0, dof as f64).ok()?;
        Some(t.inverse_cdf(0.5 + LEVEL / 2.0))
    }
}

/// Exact sums of a quantity over independent runs: count, Σx, Σx².
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct RunMoments {
    /// Runs added.
    pub count: u64,
    /// Σ x.
    pub sum: ExactSum,
    /// Σ x².
    pub sum_sq: ExactSum,
}

impl RunMoments {
    /// Adds one run's value.
    pub fn add(&mut self, x: f64) {
        self.count += 1;
        self.sum.add(x);
        self.sum_sq.add(x * x);
    }

    /// Adds another set of runs.
    pub fn merge(&mut self, other: &RunMoments) {
        self.count += other.count;
        self.sum.merge(&other.sum);
        self.sum_sq.merge(&other.sum_sq);
    }

    /// The mean and the Student-t [`LEVEL`] interval of the mean; `None` below two runs.
    pub fn mean_interval(&self) -> Option<(f64, [f64; 2])> {
        if self.count < 2 {
            return None;
        }
        let m = self.count as f64;
        let (s, s2) = (self.sum.value(), self.sum_sq.value());
        let mean = s / m;
        let var = ((s2 - s * s / m) / (m - 1.0)).max(0.0);
        let half = TDistribution::critical(self.count - 1)? * (var / m).sqrt();
        Some((mean, [mean - half, mean + half]))
    }
}

/// The campaign interval of `rmse_all` from the moments of each run's mean squared error: the
/// t interval of the mean MSE, its ends mapped through √ (the lower one kept ≥ 0).
pub fn campaign_rmse_interval(mse: &RunMoments) -> Option<[f64; 2]> {
    let (_, [lo, hi]) = mse.mean_interval()?;
    Some([lo.max(0.0).sqrt(), hi.max(0.0).sqrt()])
}

/// The campaign's paired comparison of a filter with the reference from the moments of the
/// per-run differences of mean squared error `d = mse − mse_ref` (runs where both finished) and
/// the reference's mean MSE over those runs: relative RMSE difference √(1 + d̄/m̄_ref) − 1 with
/// the t interval of d̄ mapped the same way (m̄_ref held fixed, first order).
pub fn campaign_paired(d: &RunMoments, reference_mean_mse: f64) -> Option<Paired> {
    if d.count < 2 || reference_mean_mse.is_nan() || reference_mean_mse <= 0.0 {
        return None;
    }
    let rel = |x: f64| (1.0 + x / reference_mean_mse).max(0.0).sqrt() - 1.0;
    let (mean, [lo, hi]) = d.mean_interval()?;
    let exact = d.sum.value() == 0.0 && d.sum_sq.value() == 0.0;
    let interval = [rel(lo), rel(hi)];
    let rounding = interval[0] > -ROUNDING && interval[1] < ROUNDING;
    Some(Paired {
        difference: rel(mean),
        interval,
        tied: exact || rounding || (lo <= 0.0 && hi >= 0.0),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn step_sums_merge_neighbours_and_keep_the_total() {
        let mut s = StepSums::new();
        let n = 3 * MAX_UNITS as u64 + 5;
        for k in 0..n {
            s.push(k as f64);
        }
        assert_eq!(s.steps(), n);
        assert!(s.units().len() <= MAX_UNITS);
        assert_eq!(s.width(), 4);
        // Σ k for k < n, exact in f64 at this size.
        assert_eq!(s.total(), (n * (n - 1) / 2) as f64);
        // The first unit holds steps 0..4.
        assert_eq!(s.units()[0], 6.0);
    }

    #[test]
    fn quantiles_interpolate_order_statistics() {
        // numpy.quantile([1, 2, 3, 4], 0.25) = 1.75 (type 7, numpy's default).
        assert_eq!(quantile_sorted(&[1.0, 2.0, 3.0, 4.0], 0.25), 1.75);
        assert_eq!(quantile_sorted(&[1.0, 2.0, 3.0, 4.0], 1.0), 4.0);
    }

    #[test]
    fn t_critical_values_match_tables() {
        // Student-t two-sided 95 % points, e.g. NIST/SEMATECH e-Handbook, table 1.3.6.7.2:
        // t(0.975; 1) = 12.706, t(0.975; 10) = 2.228, t(0.975; 100) = 1.984.
        for (dof, t) in [(1, 12.706), (10, 2.228), (100, 1.984)] {
            let c = TDistribution::critical(dof).unwrap();
            assert!((c - t).abs() < 1e-3, "dof {dof}: {c}");
        }
    }

    #[test]
    fn block_length_approaches_its_closed_form_on_an_ar1() {
        // AR(1) x(k) = φ·x(k−1) + e(k), unit innovations: R(k) = φ^|k|/(1 − φ²), so
        // ĝ(0) → 1/(1 − φ)², Ĝ → 2φ/((1 − φ²)(1 − φ)²) and the optimal block length of the
        // circular/moving-block bootstrap is (2G²/D)^{1/3}N^{1/3} = (6φ²/(1 − φ²)²)^{1/3}N^{1/3}
        // (Politis & White 2004, with D = 4/3·g(0)²): 29.9 for φ = 0.5, N = 10 000.
        use rand::SeedableRng;
        use rand_distr::{Distribution, StandardNormal};
        let (phi, n) = (0.5f64, 10_000usize);
        let exact = (6.0 * phi * phi / (1.0 - phi * phi).powi(2)).cbrt() * (n as f64).cbrt();
        let mut rng = rand::rngs::Xoshiro256PlusPlus::seed_from_u64(3);
        let mut x = vec![0.0; n];
        for k in 1..n {
            let e: f64 = StandardNormal.sample(&mut rng);
            x[k] = phi * x[k - 1] + e;
        }
        let b = block_length(&x) as f64;
        assert!(
            (b - exact).abs() < 0.35 * exact,
            "b = {b}, closed form {exact}"
        );
    }

    #[test]
    fn identical_series_tie_exactly() {
        let mut a = StepSums::new();
        for k in 0..200 {
            a.push((k as f64 * 0.37).sin().powi(2));
        }
        let p = paired_rmse(&a, &a.clone()).unwrap();
        assert!(p.tied && p.difference == 0.0 && p.interval == [0.0, 0.0]);
        let p = paired_log_likelihood(&a, &a.clone()).unwrap();
        assert!(p.tied);
    }
}
