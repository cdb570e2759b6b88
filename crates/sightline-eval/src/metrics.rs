//! Online accuracy and consistency metrics of one filter over one run.
//!
//! Everything is accumulated step by step in constant memory, so a run over a file of ten
//! million rows needs no more memory than a run over ten:
//! - RMSE per state and overall: `rmse_all` is the square root of the mean over steps and state
//!   components of the squared error (the contract's definition);
//! - NEES εₓ = eᵀP⁻¹e (e = truth − posterior mean) and NIS ε_ν = νᵀS⁻¹ν, each with the share of
//!   steps inside the two-sided 95 % χ² band of one value, χ²(n) and χ²(present components)
//!   (Bar-Shalom, Li & Kirubarajan, *Estimation with Applications to Tracking and Navigation*,
//!   Wiley 2001, §5.4.2);
//! - the total log-likelihood by prediction-error decomposition (sum of the filter's increments);
//! - innovation whiteness: the normalised sample autocorrelation of each innovation component at
//!   lags 1..L, against the 95 % band ±1.96/√N of a white sequence (Mehra, "On the identification
//!   of variances and adaptive Kalman filtering", IEEE TAC 15(2), 1970).

use serde::{Deserialize, Serialize};
use sightline_filters::Innovation;

use crate::chi2::{self, Band};
use crate::intervals::StepSums;

/// Lags of the whiteness test unless configured otherwise.
pub const DEFAULT_WHITENESS_LAGS: usize = 20;

/// `eᵀ P⁻¹ e` for a symmetric positive-definite `p` (column-major `n × n`), by an in-place
/// Cholesky factorisation into `work` (length ≥ n²) and two triangular solves into `z` (length
/// ≥ n). `None` when `p` is not positive definite or a value is not finite. No allocation.
///
/// ```
/// use sightline_eval::metrics::normalised_squared;
/// // diag(4, 9): e = (2, 3) gives 2²/4 + 3²/9 = 2.
/// let (mut work, mut z) = (vec![0.0; 4], vec![0.0; 2]);
/// let v = normalised_squared(&[4.0, 0.0, 0.0, 9.0], &[2.0, 3.0], &mut work, &mut z).unwrap();
/// assert!((v - 2.0).abs() < 1e-12);
/// ```
pub fn normalised_squared(p: &[f64], e: &[f64], work: &mut [f64], z: &mut [f64]) -> Option<f64> {
    let n = e.len();
    if p.len() != n * n || work.len() < n * n || z.len() < n {
        return None;
    }
    // Lower Cholesky factor L (column-major in `work`), P = L Lᵀ (Cholesky–Banachiewicz).
    for j in 0..n {
        for i in j..n {
            let mut s = 0.5 * (p[i + j * n] + p[j + i * n]);
            for k in 0..j {
                s -= work[i + k * n] * work[j + k * n];
            }
            if i == j {
                if !(s > 0.0 && s.is_finite()) {
                    return None;
                }
                work[j + j * n] = s.sqrt();
            } else {
                work[i + j * n] = s / work[j + j * n];
            }
        }
    }
    // Solve L z = e; then eᵀP⁻¹e = |z|².
    let mut total = 0.0;
    for i in 0..n {
        let mut s = e[i];
        for k in 0..i {
            s -= work[i + k * n] * z[k];
        }
        z[i] = s / work[i + i * n];
        total += z[i] * z[i];
    }
    total.is_finite().then_some(total)
}

/// Online normalised autocorrelation of the standardised innovation components.
///
/// Each present component νᵢ is divided by its predicted standard deviation √Sᵢᵢ, so that under
/// the hypothesis of a consistent filter the sequence is stationary even while the gain still
/// varies (common practice). For each lag j the accumulator keeps the sums needed for the
/// sample autocovariance about the mean over the pairs where both values are present.
#[derive(Debug, Clone)]
pub struct Whiteness {
    lags: usize,
    components: usize,
    /// Ring buffer of the last `lags` standardised values per component (NaN = missing).
    history: Vec<f64>,
    /// Next write position in the ring.
    head: usize,
    /// Values seen so far (capped at `lags` for the ring).
    filled: usize,
    /// Per (lag 0..=L, component): count, Σx, Σy, Σxy with x = v(k), y = v(k−j).
    count: Vec<u64>,
    sx: Vec<f64>,
    sy: Vec<f64>,
    sxy: Vec<f64>,
}

/// Result of the whiteness test for one filter.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct WhitenessSummary {
    /// Lags tested (1..=lags).
    pub lags: usize,
    /// Per measurement component: the normalised autocorrelation ρ(1..=lags) (null where
    /// undefined) and the number of samples N.
    pub autocorrelation: Vec<Vec<Option<f64>>>,
    /// Samples per component.
    pub samples: Vec<u64>,
    /// Half-width of the 95 % band per component, 1.96/√N (Mehra 1970).
    pub band: Vec<Option<f64>>,
    /// Share of the tested values outside their band (about 0.05 for a white sequence).
    pub outside_share: Option<f64>,
    /// Whether the count outside stays within the 95 % point of Binomial(values, 0.05) — the
    /// number a white sequence would exceed only 5 % of the time, treating the lags as
    /// independent (asymptotically true under the null; Bartlett's formula).
    pub white: Option<bool>,
}

impl Whiteness {
    /// A test with `lags` lags over `components` measurement components.
    pub fn new(components: usize, lags: usize) -> Self {
        let cells = (lags + 1) * components;
        Whiteness {
            lags,
            components,
            history: vec![f64::NAN; lags * components],
            head: 0,
            filled: 0,
            count: vec![0; cells],
            sx: vec![0.0; cells],
            sy: vec![0.0; cells],
            sxy: vec![0.0; cells],
        }
    }

    /// Adds one step of standardised values (NaN = missing component).
    pub fn push_standardised(&mut self, values: &[f64]) {
        for i in 0..self.components {
            self.record(i, values.get(i).copied().unwrap_or(f64::NAN));
        }
        self.advance();
    }

    fn record(&mut self, i: usize, x: f64) {
        let m = self.components;
        let cell0 = i;
        if x.is_finite() {
            self.count[cell0] += 1;
            self.sx[cell0] += x;
            self.sy[cell0] += x;
            self.sxy[cell0] += x * x;
        }
        for j in 1..=self.lags.min(self.filled) {
            // Value j steps back: ring slot (head − j) mod lags.
            let slot = (self.head + self.lags - j) % self.lags;
            let y = self.history[slot * m + i];
            if x.is_finite() && y.is_finite() {
                let cell = j * m + i;
                self.count[cell] += 1;
                self.sx[cell] += x;
                self.sy[cell] += y;
                self.sxy[cell] += x * y;
            }
        }
        if self.lags > 0 {
            self.history[self.head * m + i] = x;
        }
    }

    fn advance(&mut self) {
        if self.lags > 0 {
            self.head = (self.head + 1) % self.lags;
            self.filled = (self.filled + 1).min(self.lags);
        }
    }

    /// The normalised autocorrelations and the test decision.
    pub fn summary(&self) -> WhitenessSummary {
        let m = self.components;
        let mut autocorrelation = Vec::with_capacity(m);
        let mut samples = Vec::with_capacity(m);
        let mut band = Vec::with_capacity(m);
        let mut tested = 0u64;
        let mut outside = 0u64;
        for i in 0..m {
            let n0 = self.count[i];
            samples.push(n0);
            let autocov = |cell: usize| -> Option<f64> {
                let n = self.count[cell] as f64;
                if self.count[cell] < 2 {
                    return None;
                }
                // Sample autocovariance about the means of the paired values, normalised by
                // the number of pairs.
                Some((self.sxy[cell] - self.sx[cell] * self.sy[cell] / n) / n)
            };
            let c0 = autocov(i).filter(|c| *c > 0.0);
            let half = (n0 >= 2).then(|| 1.96 / (n0 as f64).sqrt());
            band.push(half);
            let mut rho = Vec::with_capacity(self.lags);
            for j in 1..=self.lags {
                let r = match (c0, autocov(j * m + i)) {
                    (Some(c0), Some(cj)) => Some(cj / c0),
                    _ => None,
                };
                if let (Some(r), Some(h)) = (r, half) {
                    tested += 1;
                    if r.abs() > h {
                        outside += 1;
                    }
                }
                rho.push(r);
            }
            autocorrelation.push(rho);
        }
        let (outside_share, white) = if tested > 0 {
            (
                Some(outside as f64 / tested as f64),
                Some(outside <= binomial_upper_point(tested, 0.05, 0.95)),
            )
        } else {
            (None, None)
        };
        WhitenessSummary {
            lags: self.lags,
            autocorrelation,
            samples,
            band,
            outside_share,
            white,
        }
    }
}

/// The smallest c with P(X ≤ c) ≥ `level` for X ~ Binomial(`trials`, `p`), by summing the
/// probability mass function (closed form).
pub fn binomial_upper_point(trials: u64, p: f64, level: f64) -> u64 {
    let q = 1.0 - p;
    // P(X = 0) = q^n; P(X = c+1) = P(X = c)·(n−c)/(c+1)·p/q.
    let mut pmf = q.powf(trials as f64);
    let mut cdf = pmf;
    let mut c = 0u64;
    while cdf < level && c < trials {
        pmf *= (trials - c) as f64 / (c + 1) as f64 * p / q;
        c += 1;
        cdf += pmf;
    }
    c
}

/// One step's metrics of one filter, as handed to observers (plots, Monte Carlo sums).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct StepMetrics {
    /// NEES of the posterior, if truth is known.
    pub nees: Option<f64>,
    /// NIS and its degrees of freedom, if the update used a measurement.
    pub nis: Option<(f64, usize)>,
}

/// Online metrics of one filter over one run.
#[derive(Debug, Clone)]
pub struct FilterMetrics {
    states: usize,
    /// Steps processed.
    pub steps: u64,
    /// Σ squared error per state.
    pub sse: Vec<f64>,
    /// Σ NEES over steps with truth.
    pub nees_sum: f64,
    /// Steps with a NEES.
    pub nees_steps: u64,
    /// Steps whose NEES is inside the χ²(n) band.
    pub nees_inside: u64,
    /// Steps whose NEES is below the band.
    pub nees_below: u64,
    /// Steps whose NEES is above the band.
    pub nees_above: u64,
    /// Σ NIS over updates with a measurement.
    pub nis_sum: f64,
    /// Σ degrees of freedom of those NIS values.
    pub nis_dof: u64,
    /// Updates with a measurement.
    pub nis_steps: u64,
    /// Updates whose NIS is inside the χ²(dof) band.
    pub nis_inside: u64,
    /// Total log-likelihood.
    pub log_likelihood: f64,
    /// Seconds spent in predict + update.
    pub seconds: f64,
    /// Per-step squared error summed over the states, for the interval of `rmse_all` and the
    /// paired comparisons ([`crate::intervals`]).
    pub squared_errors: StepSums,
    /// Per-step log-likelihood increments, for the paired comparison without truth.
    pub log_likelihoods: StepSums,
    whiteness: Whiteness,
    nees_band: Option<Band>,
    nis_bands: Vec<Band>,
    standardised: Vec<f64>,
}

impl FilterMetrics {
    /// Metrics for a plant with `states` states and `measurements` measurement components.
    pub fn new(states: usize, measurements: usize, whiteness_lags: usize) -> Self {
        FilterMetrics {
            states,
            steps: 0,
            sse: vec![0.0; states],
            nees_sum: 0.0,
            nees_steps: 0,
            nees_inside: 0,
            nees_below: 0,
            nees_above: 0,
            nis_sum: 0.0,
            nis_dof: 0,
            nis_steps: 0,
            nis_inside: 0,
            log_likelihood: 0.0,
            seconds: 0.0,
            squared_errors: StepSums::new(),
            log_likelihoods: StepSums::new(),
            whiteness: Whiteness::new(measurements, whiteness_lags),
            nees_band: chi2::band(states),
            nis_bands: chi2::bands_up_to(measurements),
            standardised: vec![f64::NAN; measurements],
        }
    }

    /// The χ²(n) band one NEES value is tested against.
    pub fn nees_band(&self) -> Option<Band> {
        self.nees_band
    }

    /// Records a step's squared errors and NEES (`error` = truth − mean).
    pub fn add_error(&mut self, error: &[f64], nees: f64) {
        let mut step = 0.0;
        for (s, e) in self.sse.iter_mut().zip(error) {
            *s += e * e;
            step += e * e;
        }
        self.squared_errors.push(step);
        self.nees_sum += nees;
        self.nees_steps += 1;
        if let Some(b) = self.nees_band {
            if nees < b.lo {
                self.nees_below += 1;
            } else if nees > b.hi {
                self.nees_above += 1;
            } else {
                self.nees_inside += 1;
            }
        }
    }

    /// Forgets the accuracy measured so far (squared errors and NEES), for a run whose truth
    /// turned out unusable.
    pub fn forget_truth(&mut self) {
        self.sse.iter_mut().for_each(|s| *s = 0.0);
        self.squared_errors = StepSums::new();
        self.nees_sum = 0.0;
        self.nees_steps = 0;
        self.nees_inside = 0;
        self.nees_below = 0;
        self.nees_above = 0;
    }

    /// Records an update: its innovation (if any component was present, with `y` telling which)
    /// and log-likelihood increment. Returns the NIS and its dof.
    pub fn add_update(
        &mut self,
        y: &[f64],
        innovation: Option<Innovation<'_>>,
        log_likelihood_increment: f64,
    ) -> Option<(f64, usize)> {
        self.steps += 1;
        self.log_likelihood += log_likelihood_increment;
        self.log_likelihoods.push(log_likelihood_increment);
        let m = self.standardised.len();
        let mut result = None;
        match innovation {
            Some(inn) if inn.present > 0 => {
                for i in 0..m {
                    let present = y.get(i).is_some_and(|v| !v.is_nan());
                    let s = inn.covariance.get(i + i * m).copied().unwrap_or(f64::NAN);
                    let v = inn.residual.get(i).copied().unwrap_or(f64::NAN);
                    self.standardised[i] = if present && s > 0.0 {
                        v / s.sqrt()
                    } else {
                        f64::NAN
                    };
                }
                self.nis_sum += inn.nis;
                self.nis_dof += inn.present as u64;
                self.nis_steps += 1;
                if self
                    .nis_bands
                    .get(inn.present - 1)
                    .is_some_and(|b| b.contains(inn.nis))
                {
                    self.nis_inside += 1;
                }
                result = Some((inn.nis, inn.present));
            }
            _ => self.standardised.iter_mut().for_each(|v| *v = f64::NAN),
        }
        let Self {
            whiteness,
            standardised,
            ..
        } = self;
        whiteness.push_standardised(standardised);
        result
    }

    /// RMSE per state, if truth was seen.
    pub fn rmse(&self) -> Option<Vec<f64>> {
        (self.nees_steps > 0).then(|| {
            self.sse
                .iter()
                .map(|s| (s / self.nees_steps as f64).sqrt())
                .collect()
        })
    }

    /// `rmse_all`: √(Σ squared errors / (steps · n)).
    pub fn rmse_all(&self) -> Option<f64> {
        (self.nees_steps > 0 && self.states > 0).then(|| {
            (self.sse.iter().sum::<f64>() / (self.nees_steps as f64 * self.states as f64)).sqrt()
        })
    }

    /// Average NEES over the steps with truth.
    pub fn anees(&self) -> Option<f64> {
        (self.nees_steps > 0).then(|| self.nees_sum / self.nees_steps as f64)
    }

    /// The 95 % band of the time-average NEES: χ²(steps·n)/steps (Bar-Shalom et al. 2001,
    /// §5.4.2), treating the steps as independent.
    pub fn anees_band(&self) -> Option<Band> {
        chi2::average_band(self.states, self.nees_steps as usize)
    }

    /// Share of steps whose NEES is inside the χ²(n) band.
    pub fn nees_in_band(&self) -> Option<f64> {
        (self.nees_steps > 0).then(|| self.nees_inside as f64 / self.nees_steps as f64)
    }

    /// Shares of steps whose NEES lies below and above the χ²(n) band (2.5 % each expected).
    pub fn nees_tails(&self) -> Option<[f64; 2]> {
        (self.nees_steps > 0).then(|| {
            let n = self.nees_steps as f64;
            [self.nees_below as f64 / n, self.nees_above as f64 / n]
        })
    }

    /// Average NIS over the updates that used a measurement.
    pub fn anis(&self) -> Option<f64> {
        (self.nis_steps > 0).then(|| self.nis_sum / self.nis_steps as f64)
    }

    /// The 95 % band of the time-average NIS: χ²(Σ dof)/updates (Bar-Shalom et al. 2001,
    /// §5.4.2).
    pub fn anis_band(&self) -> Option<Band> {
        chi2::pooled_band(self.nis_dof as usize, self.nis_steps as usize)
    }

    /// Share of updates whose NIS is inside its χ²(dof) band.
    pub fn nis_in_band(&self) -> Option<f64> {
        (self.nis_steps > 0).then(|| self.nis_inside as f64 / self.nis_steps as f64)
    }

    /// Mean wall-clock seconds per step.
    pub fn seconds_per_step(&self) -> f64 {
        if self.steps == 0 {
            0.0
        } else {
            self.seconds / self.steps as f64
        }
    }

    /// The whiteness test so far.
    pub fn whiteness(&self) -> WhitenessSummary {
        self.whiteness.summary()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::SeedableRng;
    use rand_distr::{Distribution, StandardNormal};

    #[test]
    fn normalised_squared_matches_explicit_inverse() {
        // P = [[4, 2], [2, 3]], P⁻¹ = [[3, −2], [−2, 4]]/8 (closed form of a 2×2 inverse);
        // e = (1, 2): eᵀP⁻¹e = (3 − 8 + 16)/8 = 11/8.
        let (mut w, mut z) = (vec![0.0; 4], vec![0.0; 2]);
        let v = normalised_squared(&[4.0, 2.0, 2.0, 3.0], &[1.0, 2.0], &mut w, &mut z).unwrap();
        assert!((v - 11.0 / 8.0).abs() < 1e-12);
        assert!(normalised_squared(&[1.0, 2.0, 2.0, 1.0], &[1.0, 0.0], &mut w, &mut z).is_none());
    }

    #[test]
    fn binomial_point_matches_scipy() {
        // scipy.stats.binom.ppf(0.95, n, 0.05), written by tests/reference/binomial_points.py.
        let fixture = include_str!("../../../tests/reference/binomial_points.csv");
        let mut rows = 0;
        for line in fixture.lines().skip(1) {
            let c: Vec<&str> = line.split(',').collect();
            let (n, p, level, point): (u64, f64, f64, u64) = (
                c[0].parse().unwrap(),
                c[1].parse().unwrap(),
                c[2].parse().unwrap(),
                c[3].parse().unwrap(),
            );
            assert_eq!(binomial_upper_point(n, p, level), point, "n = {n}");
            rows += 1;
        }
        assert_eq!(rows, 8);
    }

    #[test]
    fn white_noise_passes_and_a_random_walk_fails() {
        // A white Gaussian sequence has ρ(j) ~ N(0, 1/N) for j ≥ 1 (Mehra 1970, Bartlett);
        // an AR(1) with coefficient 0.9 has ρ(j) = 0.9^j (closed form).
        let mut rng = rand::rngs::Xoshiro256PlusPlus::seed_from_u64(11);
        let mut white = Whiteness::new(1, 20);
        let mut ar = Whiteness::new(1, 20);
        let mut a = 0.0;
        for _ in 0..20_000 {
            let v: f64 = StandardNormal.sample(&mut rng);
            white.push_standardised(&[v]);
            a = 0.9 * a + v;
            ar.push_standardised(&[a]);
        }
        let w = white.summary();
        assert_eq!(w.white, Some(true), "{w:?}");
        let r = ar.summary();
        assert_eq!(r.white, Some(false));
        let rho1 = r.autocorrelation[0][0].unwrap();
        assert!((rho1 - 0.9).abs() < 0.02, "ρ(1) = {rho1}");
        let rho5 = r.autocorrelation[0][4].unwrap();
        assert!((rho5 - 0.9f64.powi(5)).abs() < 0.05, "ρ(5) = {rho5}");
    }

    #[test]
    fn missing_components_break_no_pairs() {
        // Every other sample missing: lag-1 pairs never form, lag 2 pairs do.
        let mut w = Whiteness::new(1, 2);
        for k in 0..100 {
            let v = if k % 2 == 0 {
                (k as f64).sin()
            } else {
                f64::NAN
            };
            w.push_standardised(&[v]);
        }
        let s = w.summary();
        assert_eq!(s.samples, vec![50]);
        assert_eq!(s.autocorrelation[0][0], None);
        assert!(s.autocorrelation[0][1].is_some());
    }
}
