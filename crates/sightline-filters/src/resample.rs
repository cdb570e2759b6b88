//! Resampling schemes for particle filters: multinomial, stratified, systematic and residual
//! (compared by Douc & Cappé, "Comparison of resampling schemes for particle filtering",
//! ISPA 2005).
//!
//! Each scheme draws `N` ancestor indices from normalised weights `w` so that particle `i` has
//! `N·wᵢ` offspring in expectation (every scheme is unbiased); they differ in the variance of the
//! offspring counts. Multinomial draws `N` independent uniforms; stratified draws one uniform in
//! each of the `N` strata `[k/N, (k+1)/N)`; systematic uses one uniform shifted by `k/N`; residual
//! keeps `⌊N·wᵢ⌋` copies deterministically and draws the remainder multinomially from the
//! residual weights (Liu & Chen, JASA 93, 1998). Stratified and residual never have more offspring
//! variance than multinomial (Douc & Cappé 2005, §3).
//!
//! The functions run in O(N) and allocate nothing: multinomial uniforms are generated already
//! sorted, as normalised partial sums of exponential variates (Devroye, *Non-Uniform Random
//! Variate Generation*, 1986, §V.3), so one merge-like walk over the cumulative weights assigns
//! them. Ancestors come out in non-decreasing order for the multinomial, stratified and
//! systematic schemes, so copying particles reads memory forwards.
//!
//! ```
//! use sightline_core::rng::stream;
//! use sightline_filters::resample::{Scheme, resample};
//! let weights = [0.5, 0.0, 0.25, 0.25];
//! let mut ancestors = [0usize; 8];
//! resample(Scheme::Systematic, &weights, &mut stream(1, &[]), &mut ancestors);
//! // Systematic resampling gives each particle ⌊N·wᵢ⌋ or ⌈N·wᵢ⌉ offspring.
//! assert_eq!(ancestors.iter().filter(|&&a| a == 0).count(), 4);
//! assert!(!ancestors.contains(&1));
//! ```

use rand::RngExt;
use rand_distr::Exp1;
use rayon::prelude::*;
use sightline_core::rng::Stream;

/// A resampling scheme.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Scheme {
    /// `N` independent draws from the weights.
    Multinomial,
    /// One uniform draw in each of `N` equal strata.
    Stratified,
    /// One uniform draw, shifted by `k/N` for the `k`-th offspring.
    Systematic,
    /// `⌊N·wᵢ⌋` deterministic copies, the rest multinomial on the residual weights.
    Residual,
}

impl Scheme {
    /// Every scheme's name as written in a spec (`resample=...`).
    pub const NAMES: &'static [&'static str] =
        &["systematic", "stratified", "multinomial", "residual"];

    /// The scheme a spec name denotes (case-insensitive).
    pub fn from_name(name: &str) -> Option<Self> {
        match name.to_ascii_lowercase().as_str() {
            "multinomial" => Some(Scheme::Multinomial),
            "stratified" => Some(Scheme::Stratified),
            "systematic" => Some(Scheme::Systematic),
            "residual" => Some(Scheme::Residual),
            _ => None,
        }
    }

    /// The scheme's spec name.
    pub fn name(self) -> &'static str {
        match self {
            Scheme::Multinomial => "multinomial",
            Scheme::Stratified => "stratified",
            Scheme::Systematic => "systematic",
            Scheme::Residual => "residual",
        }
    }
}

/// Fills `ancestors` (of any length `N`) with indices into `weights` drawn by `scheme`.
///
/// `weights` must be non-negative with a positive, finite sum; they need not sum to exactly 1
/// (they are scaled by their sum, so round-off in normalisation does not bias the draw). A zero
/// weight is never selected. If the weights are unusable (empty, negative, non-finite or all
/// zero) `ancestors` is filled with `0..N` cyclically, so callers must check first; the particle
/// filter only resamples weights it has normalised.
pub fn resample(scheme: Scheme, weights: &[f64], rng: &mut Stream, ancestors: &mut [usize]) {
    let total: f64 = weights.iter().sum();
    let usable = total.is_finite() && total > 0.0 && weights.iter().all(|&w| w >= 0.0);
    if !usable || ancestors.is_empty() {
        let len = weights.len().max(1);
        for (i, a) in ancestors.iter_mut().enumerate() {
            *a = i % len;
        }
        return;
    }
    let n = ancestors.len();
    let inv_n = 1.0 / n as f64;
    match scheme {
        Scheme::Systematic => {
            let shift: f64 = rng.random();
            walk(weights, total, ancestors, |k| (k as f64 + shift) * inv_n);
        }
        Scheme::Stratified => {
            walk(weights, total, ancestors, |k| {
                (k as f64 + rng.random::<f64>()) * inv_n
            });
        }
        Scheme::Multinomial => {
            sorted_uniforms_walk(weights, total, rng, ancestors);
        }
        Scheme::Residual => {
            // Deterministic part: ⌊N·wᵢ⌋ copies of particle i (Liu & Chen 1998).
            let scale = n as f64 / total;
            let mut filled = 0;
            for (i, &w) in weights.iter().enumerate() {
                let copies = ((w * scale).floor() as usize).min(n - filled);
                ancestors[filled..filled + copies].fill(i);
                filled += copies;
            }
            if filled < n {
                // Random part: the remaining R = N − Σ⌊N·wᵢ⌋ offspring are multinomial on the
                // residual weights N·wᵢ − ⌊N·wᵢ⌋.
                let residual = |w: f64| {
                    let x = w * scale;
                    x - x.floor()
                };
                let residual_total: f64 = weights.iter().map(|&w| residual(w)).sum();
                if residual_total > 0.0 {
                    sorted_uniforms_walk_by(
                        weights.len(),
                        |i| residual(weights[i]),
                        residual_total,
                        rng,
                        &mut ancestors[filled..],
                    );
                } else {
                    // Round-off left R > 0 with no residual mass: give the rest by the weights.
                    sorted_uniforms_walk(weights, total, rng, &mut ancestors[filled..]);
                }
            }
        }
    }
}

/// Multinomial draw: `ancestors.len()` sorted uniforms assigned by one walk over the weights.
/// Systematic resampling (one uniform `shift` in [0, 1), positions (k + shift)/N) computed in
/// fixed blocks of `block` weights, in parallel, with the same draw for any number of threads.
///
/// The cumulative weight of particle j is taken as `offset(b) + s(j)`: the exclusive prefix of
/// the block totals before j's block b plus the running sum within the block. Both are fixed by
/// the block layout alone, so the ancestors do not depend on how rayon splits the work. Ancestor
/// k is the first j whose cumulative weight exceeds (k + shift)/N of the total, never past the
/// last positive weight, exactly as in the sequential walk of [`resample`] (only the rounding of
/// the cumulative sums differs). Each block of ancestors finds its first index by bisection and
/// walks forwards from there, so the work stays O(N) in total and the walk runs in parallel.
///
/// `within` (length `weights.len()`) and `offsets` (at least one value per block) are scratch
/// buffers; nothing is allocated. `min_len` is the least number of blocks per rayon job. Returns
/// `false`, leaving `ancestors` unspecified, when the weights are unusable (a negative or
/// non-finite weight, or a zero total): the caller falls back to [`resample`].
///
/// ```
/// use sightline_filters::resample::systematic_in_blocks;
/// let weights = [0.5, 0.0, 0.25, 0.25];
/// let (mut within, mut offsets, mut ancestors) = ([0.0; 4], [0.0; 2], [0usize; 8]);
/// assert!(systematic_in_blocks(&weights, 0.3, 2, 1, &mut within, &mut offsets, &mut ancestors));
/// assert_eq!(ancestors, [0, 0, 0, 0, 2, 2, 3, 3]);
/// ```
pub fn systematic_in_blocks(
    weights: &[f64],
    shift: f64,
    block: usize,
    min_len: usize,
    within: &mut [f64],
    offsets: &mut [f64],
    ancestors: &mut [usize],
) -> bool {
    let block = block.max(1);
    let blocks = weights.len().div_ceil(block);
    if weights.is_empty() || ancestors.is_empty() || within.len() < weights.len() {
        return false;
    }
    let Some(offsets) = offsets.get_mut(..blocks) else {
        return false;
    };
    // Running sums within each block; a block with a negative or non-finite weight totals NaN.
    (
        weights.par_chunks(block),
        within.par_chunks_mut(block),
        offsets.par_iter_mut(),
    )
        .into_par_iter()
        .with_min_len(min_len)
        .for_each(|(w, s, total)| {
            let mut sum = 0.0;
            let mut valid = true;
            for (&wi, si) in w.iter().zip(s.iter_mut()) {
                valid &= wi >= 0.0 && wi.is_finite();
                sum += wi;
                *si = sum;
            }
            *total = if valid { sum } else { f64::NAN };
        });
    // Block totals into exclusive prefixes (a handful of values: sequential).
    let mut total = 0.0;
    for offset in offsets.iter_mut() {
        let sum = *offset;
        *offset = total;
        total += sum;
    }
    if !(total.is_finite() && total > 0.0) {
        return false;
    }
    let Some(last) = weights.iter().rposition(|&w| w > 0.0) else {
        return false;
    };
    let offsets = &*offsets;
    let within = &*within;
    let cumulative = |j: usize| offsets[j / block] + within[j];
    let n = ancestors.len();
    let scale = total / n as f64;
    let position = |k: usize| (k as f64 + shift) * scale;
    ancestors
        .par_chunks_mut(block)
        .enumerate()
        .with_min_len(min_len)
        .for_each(|(b, chunk)| {
            let k0 = b * block;
            // First j with cumulative(j) > position(k0): bisection over the monotone sums.
            let u0 = position(k0);
            let (mut lo, mut hi) = (0, last);
            while lo < hi {
                let mid = lo + (hi - lo) / 2;
                if cumulative(mid) <= u0 {
                    lo = mid + 1;
                } else {
                    hi = mid;
                }
            }
            let mut j = lo;
            for (k, a) in chunk.iter_mut().enumerate() {
                let u = position(k0 + k);
                while j < last && cumulative(j) <= u {
                    j += 1;
                }
                *a = j;
            }
        });
    true
}

fn sorted_uniforms_walk(weights: &[f64], total: f64, rng: &mut Stream, ancestors: &mut [usize]) {
    sorted_uniforms_walk_by(weights.len(), |i| weights[i], total, rng, ancestors);
}

/// The order statistics of `n` uniforms are `Sₖ/Sₙ₊₁` with `Sₖ` the partial sums of `n + 1`
/// standard exponentials (Devroye 1986, §V.3.1). The first pass finds `Sₙ₊₁`; the second replays
/// the same exponentials from a copy of the generator, so nothing is stored.
fn sorted_uniforms_walk_by(
    len: usize,
    weight: impl Fn(usize) -> f64,
    total: f64,
    rng: &mut Stream,
    ancestors: &mut [usize],
) {
    let n = ancestors.len();
    let replay = rng.clone();
    let mut sum = 0.0;
    for _ in 0..=n {
        sum += rng.sample::<f64, _>(Exp1);
    }
    let mut replay = replay;
    let mut partial = 0.0;
    walk_by(len, &weight, total, ancestors, |_| {
        partial += replay.sample::<f64, _>(Exp1);
        partial / sum
    });
}

/// Assigns each offspring `k` the particle whose cumulative-weight interval contains the
/// non-decreasing position `position(k)·total`.
fn walk(weights: &[f64], total: f64, ancestors: &mut [usize], position: impl FnMut(usize) -> f64) {
    walk_by(weights.len(), |i| weights[i], total, ancestors, position);
}

fn walk_by(
    len: usize,
    weight: impl Fn(usize) -> f64,
    total: f64,
    ancestors: &mut [usize],
    mut position: impl FnMut(usize) -> f64,
) {
    // The last particle with positive weight absorbs round-off at the top of [0, total).
    let Some(last) = (0..len).rev().find(|&i| weight(i) > 0.0) else {
        return;
    };
    let mut j = 0;
    let mut cumulative = weight(0);
    for (k, a) in ancestors.iter_mut().enumerate() {
        let u = position(k) * total;
        // Particle j covers [C(j−1), C(j)); a zero-width interval is never selected.
        while cumulative <= u && j < last {
            j += 1;
            cumulative += weight(j);
        }
        *a = j;
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use sightline_core::rng::stream;

    /// Weights with a zero, a tiny and several large entries; N·w has fractional parts of every
    /// size. Any non-uniform weights would do: the checks are closed-form properties.
    const WEIGHTS: [f64; 8] = [0.31, 0.02, 0.0, 0.17, 0.09, 0.25, 0.005, 0.155];
    const SCHEMES: [Scheme; 4] = [
        Scheme::Multinomial,
        Scheme::Stratified,
        Scheme::Systematic,
        Scheme::Residual,
    ];

    /// Mean and variance of the offspring count of every particle over `draws` resamplings.
    fn offspring_moments(scheme: Scheme, n: usize, draws: usize) -> (Vec<f64>, Vec<f64>) {
        let mut rng = stream(2005, &[scheme as u64]);
        let mut ancestors = vec![0; n];
        let mut sum = [0.0; 8];
        let mut sum_sq = [0.0; 8];
        for _ in 0..draws {
            resample(scheme, &WEIGHTS, &mut rng, &mut ancestors);
            let mut counts = [0.0; 8];
            for &a in &ancestors {
                counts[a] += 1.0;
            }
            for i in 0..8 {
                sum[i] += counts[i];
                sum_sq[i] += counts[i] * counts[i];
            }
        }
        let d = draws as f64;
        let mean: Vec<f64> = sum.iter().map(|s| s / d).collect();
        let var = (0..8).map(|i| sum_sq[i] / d - mean[i] * mean[i]).collect();
        (mean, var)
    }

    #[test]
    fn every_scheme_is_unbiased() {
        // E[offspring of i] = N·wᵢ for every scheme (Douc & Cappé 2005, §2). Each count's variance
        // is at most the multinomial N·wᵢ(1−wᵢ) (ibid., §3; for systematic, the count is ⌊N·wᵢ⌋ or
        // ⌈N·wᵢ⌉, variance f(1−f) with f the fractional part), so the mean over D draws deviates
        // by less than 5·√(N·wᵢ(1−wᵢ)/D) with overwhelming probability.
        let (n, draws) = (13, 100_000);
        for scheme in SCHEMES {
            let (mean, _) = offspring_moments(scheme, n, draws);
            for (i, &w) in WEIGHTS.iter().enumerate() {
                let expected = n as f64 * w;
                let sd = (n as f64 * w * (1.0 - w) / draws as f64).sqrt();
                assert!(
                    (mean[i] - expected).abs() <= 5.0 * sd + 1e-12,
                    "{scheme:?}: particle {i} mean offspring {} vs N·w = {expected}",
                    mean[i]
                );
            }
            assert_eq!(mean[2], 0.0, "{scheme:?} selected a zero-weight particle");
        }
    }

    #[test]
    fn stratified_systematic_and_residual_reduce_offspring_variance() {
        // Multinomial counts are Binomial(N, wᵢ): variance N·wᵢ(1−wᵢ) (closed form). Systematic
        // counts are ⌊N·wᵢ⌋ + Bernoulli(f), variance f(1−f). Stratified and residual have less
        // total variance than multinomial (Douc & Cappé 2005, §3).
        let (n, draws) = (13, 100_000);
        let (_, multinomial) = offspring_moments(Scheme::Multinomial, n, draws);
        for (i, &w) in WEIGHTS.iter().enumerate() {
            let exact = n as f64 * w * (1.0 - w);
            // Sample variance of a binomial count: relative sd about √(2/D) ≪ 5 %.
            assert!(
                (multinomial[i] - exact).abs() <= 0.05 * exact + 1e-12,
                "multinomial variance of particle {i}: {} vs {exact}",
                multinomial[i]
            );
        }
        let (_, systematic) = offspring_moments(Scheme::Systematic, n, draws);
        for (i, &w) in WEIGHTS.iter().enumerate() {
            let x = n as f64 * w;
            let f = x - x.floor();
            let exact = f * (1.0 - f);
            assert!(
                (systematic[i] - exact).abs() <= 0.05 * exact + 1e-9,
                "systematic variance of particle {i}: {} vs {exact}",
                systematic[i]
            );
        }
        let total_multinomial: f64 = multinomial.iter().sum();
        for scheme in [Scheme::Stratified, Scheme::Systematic, Scheme::Residual] {
            let (_, var) = offspring_moments(scheme, n, draws);
            let total: f64 = var.iter().sum();
            assert!(
                total < 0.8 * total_multinomial,
                "{scheme:?} total offspring variance {total} vs multinomial {total_multinomial}"
            );
        }
    }

    #[test]
    fn residual_keeps_the_deterministic_copies() {
        // ⌊N·wᵢ⌋ copies are guaranteed (Liu & Chen 1998).
        let n = 100;
        let mut ancestors = vec![0; n];
        let mut rng = stream(3, &[]);
        for _ in 0..100 {
            resample(Scheme::Residual, &WEIGHTS, &mut rng, &mut ancestors);
            for (i, &w) in WEIGHTS.iter().enumerate() {
                let count = ancestors.iter().filter(|&&a| a == i).count();
                assert!(count >= (n as f64 * w).floor() as usize);
            }
        }
    }

    #[test]
    fn blocked_systematic_equals_the_sequential_walk() {
        // Dyadic weights (multiples of 2⁻¹⁰) sum exactly in any order, so the blocked and the
        // sequential cumulative sums agree bit for bit and so must the ancestors, for any block
        // size (the block layout is the only thing a thread count could change).
        let mut rng = stream(77, &[]);
        for len in [1usize, 7, 64, 1000, 4099] {
            let mut weights: Vec<f64> = (0..len)
                .map(|_| f64::from(rng.random_range(0u32..8)) / 1024.0)
                .collect();
            weights[len / 2] += 1.0 / 1024.0;
            for count in [1usize, 5, len, 3 * len + 1] {
                let mut expected = vec![0; count];
                let mut draw = rng.clone();
                let shift: f64 = draw.clone().random();
                resample(Scheme::Systematic, &weights, &mut draw, &mut expected);
                for block in [1usize, 3, 64, 1024, 10_000] {
                    let mut within = vec![0.0; len];
                    let mut offsets = vec![0.0; len.div_ceil(block)];
                    let mut ancestors = vec![usize::MAX; count];
                    assert!(systematic_in_blocks(
                        &weights,
                        shift,
                        block,
                        1,
                        &mut within,
                        &mut offsets,
                        &mut ancestors
                    ));
                    assert_eq!(ancestors, expected, "len {len}, N {count}, block {block}");
                }
                let _: f64 = rng.random();
            }
        }
        // Unusable weights are refused, not drawn from.
        let (mut within, mut offsets, mut ancestors) = ([0.0; 3], [0.0; 3], [0usize; 4]);
        for bad in [
            [1.0, -0.5, 1.0],
            [0.0; 3],
            [1.0, f64::NAN, 1.0],
            [1.0, f64::INFINITY, 0.0],
        ] {
            assert!(!systematic_in_blocks(
                &bad,
                0.5,
                1,
                1,
                &mut within,
                &mut offsets,
                &mut ancestors
            ));
        }
    }

    #[test]
    fn unnormalised_and_degenerate_weights() {
        let mut ancestors = [9usize; 5];
        let mut rng = stream(4, &[]);
        // Scaling the weights does not change a systematic draw from the same stream.
        let mut a2 = [9usize; 5];
        resample(
            Scheme::Systematic,
            &[1.0, 3.0],
            &mut rng.clone(),
            &mut ancestors,
        );
        resample(Scheme::Systematic, &[0.25, 0.75], &mut rng, &mut a2);
        assert_eq!(ancestors, a2);
        // One positive weight takes every offspring.
        for scheme in SCHEMES {
            resample(scheme, &[0.0, 0.0, 2.0, 0.0], &mut rng, &mut ancestors);
            assert_eq!(ancestors, [2; 5], "{scheme:?}");
        }
        // Unusable weights do not panic.
        resample(
            Scheme::Multinomial,
            &[f64::NAN, 1.0],
            &mut rng,
            &mut ancestors,
        );
        resample(Scheme::Multinomial, &[], &mut rng, &mut ancestors);
        assert_eq!(ancestors, [0; 5]);
        assert_eq!(Scheme::from_name("Residual"), Some(Scheme::Residual));
        assert!(Scheme::NAMES.iter().all(|n| Scheme::from_name(n).is_some()));
    }
}
