//! Clouds of state samples shared by the particle filter and the ensemble Kalman filter: the
//! block layout that makes their output independent of the thread count, and the passes both
//! run over a cloud (Gaussian draws, propagation through the plant, weighted covariance).
//!
//! A cloud is a column-major `n × N` matrix, one sample per column. Work is split into fixed
//! blocks of [`BLOCK`] samples; block `b` of step `k` draws its random numbers from
//! `rng::stream(seed, &[purpose, k, b])` and writes its partial sums into its own slot of a
//! scratch buffer, and the partials are combined in block order. So a run's output is bit for
//! bit the same whether rayon uses 1, 2 or 16 threads. On a one-thread pool the blocks run in
//! the calling thread without touching rayon's queues, so a step allocates nothing for static
//! plant sizes.
//!
//! nalgebra cannot prove generic matrices `Send`/`Sync`, so everything that crosses into a rayon
//! closure is a plain `f64` slice, and vectors are rebuilt on the stack inside the closure.

use nalgebra::{Cholesky, DefaultAllocator, Dim, Dyn, OMatrix, OVector, U1};
use rand_distr::StandardNormal;
use rayon::prelude::*;
use sightline_core::lanes::{LANES, Lanes, attempt};
use sightline_core::rng::{Stream, stream};
use sightline_core::{Alloc, Model, NumericError};

use rand::RngExt;

/// Samples per block: the unit of parallel work and of random-stream splitting. Changing it
/// changes every sampled result, so it is fixed.
pub(crate) const BLOCK: usize = 1024;

/// Keys of the random streams, one per purpose, under the filter's seed.
pub(crate) mod purpose {
    /// Drawing the initial cloud from the prior.
    pub const INITIAL: u64 = 1;
    /// Process noise in the prediction.
    pub const PREDICT: u64 = 2;
    /// Choosing ancestors when resampling.
    pub const RESAMPLE: u64 = 3;
    /// Roughening or regularisation jitter after resampling.
    pub const JITTER: u64 = 4;
    /// Re-drawing a collapsed cloud from the predicted Gaussian.
    pub const REDRAW: u64 = 5;
    /// First-stage selection of the auxiliary particle filter.
    pub const AUXILIARY_SELECT: u64 = 6;
    /// Second-stage propagation of the auxiliary particle filter.
    pub const AUXILIARY_PROPAGATE: u64 = 7;
    /// Perturbed observations of the ensemble Kalman filter.
    pub const PERTURB: u64 = 8;
    /// Backward simulation of the particle smoother.
    pub const SMOOTH: u64 = 9;
    /// Resampling between the stages of a tempered update.
    pub const TEMPER_RESAMPLE: u64 = 10;
    /// Jitter between the stages of a tempered update.
    pub const TEMPER_JITTER: u64 = 11;
}

/// Number of blocks for `count` samples.
pub(crate) fn block_count(count: usize) -> usize {
    count.div_ceil(BLOCK)
}

/// Minimum number of blocks per rayon job: everything in one job (the calling thread) on a
/// one-thread pool, one block per job otherwise. Results are identical either way.
pub(crate) fn min_blocks_per_job() -> usize {
    if rayon::current_num_threads() <= 1 {
        usize::MAX
    } else {
        1
    }
}

/// Where a sampling filter evaluates the process-noise covariance Q(x) (option `noise=`).
///
/// For plants whose Q does not depend on the state (`cv`, `ungm`) both give the same result;
/// `Mean` factorises Q once per step, `Each` once per sample.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum NoiseAt {
    /// Once per step at the cloud's mean (`noise=mean`, the default).
    Mean,
    /// At every sample's own state (`noise=each`): the exact transition density when Q depends
    /// on the state.
    Each,
}

/// Lower-triangular L with L Lᵀ = `cov`. A positive semi-definite `cov` (a state without
/// noise) gets a relative jitter of 1e-12 on the diagonal, as the simulator does; the zero
/// matrix gives the zero factor.
pub(crate) fn lower_factor<N: Dim>(
    cov: &OMatrix<f64, N, N>,
    quantity: &'static str,
) -> Result<OMatrix<f64, N, N>, NumericError>
where
    DefaultAllocator: nalgebra::allocator::Allocator<N, N>,
{
    if !cov.iter().all(|v| v.is_finite()) {
        return Err(NumericError::NonFinite { quantity });
    }
    if cov.iter().all(|&v| v == 0.0) {
        return Ok(cov.clone());
    }
    if let Some(c) = Cholesky::new(cov.clone()) {
        return Ok(c.l());
    }
    let (n, _) = cov.shape_generic();
    let jitter = 1e-12 * cov.abs().max();
    let mut bumped = cov.clone();
    for i in 0..n.value() {
        bumped[(i, i)] += jitter;
    }
    Cholesky::new(bumped)
        .map(|c| c.l())
        .ok_or(NumericError::NotPositiveDefinite { quantity })
}

/// `x += L ε`, ε standard normal, without allocation for static sizes.
pub(crate) fn add_gaussian<N: Dim>(
    x: &mut OVector<f64, N>,
    factor: &OMatrix<f64, N, N>,
    rng: &mut Stream,
) where
    DefaultAllocator: nalgebra::allocator::Allocator<N> + nalgebra::allocator::Allocator<N, N>,
{
    for j in 0..factor.ncols() {
        let e: f64 = rng.sample(StandardNormal);
        x.axpy(e, &factor.column(j), 1.0);
    }
}

/// A vector of dimension `d` from a slice (stack-allocated for static `d`).
pub(crate) fn vector<D: Dim>(d: D, values: &[f64]) -> OVector<f64, D>
where
    DefaultAllocator: nalgebra::allocator::Allocator<D>,
{
    OVector::<f64, D>::from_column_slice_generic(d, U1, values)
}

/// A square matrix of dimension `d` from a column-major slice.
pub(crate) fn square<D: Dim>(d: D, values: &[f64]) -> OMatrix<f64, D, D>
where
    DefaultAllocator: nalgebra::allocator::Allocator<D, D>,
{
    OMatrix::<f64, D, D>::from_column_slice_generic(d, d, values)
}

/// Up to [`LANES`] consecutive samples of a block (`n` values each) as a full group: a short
/// group at the end of a cloud repeats its last sample, so every sample is evaluated the same
/// way whatever its position.
pub(crate) fn group_states(group: &[f64], n: usize) -> [&[f64]; LANES] {
    let count = group.len() / n;
    std::array::from_fn(|l| &group[l.min(count - 1) * n..][..n])
}

/// A plant function of [`LANES`] samples `states`: evaluated once over [`Lanes`] (`on_lanes`)
/// while `friendly` holds, else sample by sample over `f64` (`on_f64`, the same plant code).
/// If the lane evaluation looks at a value ([`sightline_core::lanes::attempt`]: the plant
/// branches on it) the group is re-evaluated sample by sample and `friendly` is cleared, so the
/// rest of the block goes sample by sample too. Samples that fall back get exactly the scalar
/// path's numbers; the others are within the lane functions' documented accuracy.
pub(crate) fn evaluate_group<N: Dim, D: Dim>(
    nd: N,
    states: [&[f64]; LANES],
    friendly: &mut bool,
    on_lanes: impl FnOnce(&OVector<Lanes, N>) -> OVector<Lanes, D>,
    on_f64: impl Fn(&OVector<f64, N>) -> OVector<f64, D>,
) -> [OVector<f64, D>; LANES]
where
    DefaultAllocator: nalgebra::allocator::Allocator<N> + nalgebra::allocator::Allocator<D>,
{
    if *friendly {
        let x = OVector::<Lanes, N>::from_fn_generic(nd, U1, |i, _| {
            Lanes::new(std::array::from_fn(|l| states[l][i]))
        });
        if let Some(y) = attempt(|| on_lanes(&x)) {
            let (od, _) = y.shape_generic();
            return std::array::from_fn(|l| {
                OVector::<f64, D>::from_fn_generic(od, U1, |i, _| y[i].lane(l))
            });
        }
        *friendly = false;
    }
    std::array::from_fn(|l| on_f64(&vector(nd, states[l])))
}

/// The `lanes` option shared by the sampling filters.
pub(crate) const LANES_OPTION: crate::spec::OptionInfo = crate::spec::OptionInfo {
    key: "lanes",
    default: "off",
    about: "on: evaluate the plant over 4 samples per call in SIMD lanes",
};

/// h(xₖ) of every sample xₖ of `block` (`n` values each), in order, handed to `emit(k, h(xₖ))`:
/// four samples per call over lanes when `lanes` ([`evaluate_group`]), else one by one.
pub(crate) fn measure_each<M: Model>(
    model: &M,
    block: &[f64],
    lanes: bool,
    u: &[f64],
    t: f64,
    mut emit: impl FnMut(usize, OVector<f64, M::Meas>),
) where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    let nd = model.state_dim();
    let n = nd.value();
    if !lanes {
        for (k, x) in block.chunks_exact(n).enumerate() {
            emit(k, model.measure(&vector(nd, x), u, t));
        }
        return;
    }
    let mut friendly = true;
    for (g, group) in block.chunks(n * LANES).enumerate() {
        let values = evaluate_group(
            nd,
            group_states(group, n),
            &mut friendly,
            |x| model.measure(x, u, t),
            |x| model.measure(x, u, t),
        );
        for (l, z) in values.into_iter().take(group.len() / n).enumerate() {
            emit(g * LANES + l, z);
        }
    }
}

/// Adds Gaussian noise L ε to every sample (`centre = None`: roughening, regularisation) or
/// replaces every sample by `centre + L ε` (draws from N(centre, L Lᵀ)), `factor` = L
/// column-major, then projects it onto the model's feasible set. Streams are keyed
/// `(key, step, block)`.
pub(crate) fn scatter<M: Model>(
    model: &M,
    cloud: &mut [f64],
    centre: Option<&[f64]>,
    factor: &[f64],
    seed: u64,
    key: u64,
    step: u64,
) where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    let nd = model.state_dim();
    let n = nd.value();
    cloud
        .par_chunks_mut(n * BLOCK)
        .enumerate()
        .with_min_len(min_blocks_per_job())
        .for_each(|(b, chunk)| {
            let mut rng = stream(seed, &[key, step, b as u64]);
            let l = square(nd, factor);
            for sample in chunk.chunks_exact_mut(n) {
                let mut x = vector(nd, centre.unwrap_or(sample));
                add_gaussian(&mut x, &l, &mut rng);
                model.project(&mut x);
                sample.copy_from_slice(x.as_slice());
            }
        });
}

/// Pulls every sample towards `mean` by the factor `a`: x ← m + a·(x ⊖ m), ⊖ the model's
/// `state_residual` (the shrinkage step of Liu & West 2001, §10.3.3).
pub(crate) fn shrink<M: Model>(model: &M, cloud: &mut [f64], mean: &[f64], a: f64)
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    let nd = model.state_dim();
    let n = nd.value();
    cloud
        .par_chunks_mut(n * BLOCK)
        .with_min_len(min_blocks_per_job())
        .for_each(|chunk| {
            let m = vector(nd, mean);
            for sample in chunk.chunks_exact_mut(n) {
                let x = vector(nd, sample);
                let pulled = &m + model.state_residual(&x, &m) * a;
                sample.copy_from_slice(pulled.as_slice());
            }
        });
}

/// Where a propagation takes each sample's predicted mean from.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Propagation<'a> {
    /// Input over the step, model order.
    pub input: &'a [f64],
    /// Start time and length of the step.
    pub t: f64,
    /// Step length.
    pub dt: f64,
    /// The factor of Q for [`NoiseAt::Mean`] (column-major `n × n`); ignored for `Each`.
    pub factor: &'a [f64],
    /// Where Q is evaluated.
    pub noise: NoiseAt,
    /// Precomputed transition means f(xⱼ) (the auxiliary filter's look-ahead points), `None`
    /// to apply the transition to the sample itself.
    pub anchors: Option<&'a [f64]>,
    /// The states the anchors were computed from (for Q at each sample's own start).
    pub previous: Option<&'a [f64]>,
    /// Sample i continues the anchor `ancestors[i]` (auxiliary second stage); `None`: anchor i.
    pub ancestors: Option<&'a [usize]>,
    /// Random-stream purpose key, and the step.
    pub key: u64,
    /// Step index for the stream key.
    pub step: u64,
    /// Evaluate the transition over [`LANES`] samples per call ([`evaluate_group`]); used only
    /// where the transition is applied to the samples themselves (`anchors` is `None`).
    pub lanes: bool,
}

/// Propagates every sample through the transition density: xᵢ ← f(xᵢ) + w, w ~ N(0, Q), then
/// projects it. Samples that leave the finite range are filled with NaN and counted: the particle
/// filter gives them weight zero, the ensemble filter reports an error. `partials` holds one
/// slot of `stride ≥ 2` values per block. Returns the number of lost samples.
pub(crate) fn propagate<M: Model>(
    model: &M,
    cloud: &mut [f64],
    how: &Propagation<'_>,
    seed: u64,
    partials: &mut [f64],
    stride: usize,
) -> Result<usize, NumericError>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    let nd = model.state_dim();
    let n = nd.value();
    (
        cloud.par_chunks_mut(n * BLOCK),
        partials.par_chunks_mut(stride),
    )
        .into_par_iter()
        .enumerate()
        .with_min_len(min_blocks_per_job())
        .for_each(|(b, (chunk, slot))| {
            let mut rng = stream(seed, &[how.key, how.step, b as u64]);
            let u = how.input;
            let shared = square(nd, how.factor);
            let (mut lost, mut failed) = (0usize, false);
            // Adds the process noise to the transition mean `x` of the sample that started at
            // `start`, projects it and stores it (NaN and counted if it is not finite).
            let mut finish = |start: &OVector<f64, M::State>,
                              mut x: OVector<f64, M::State>,
                              sample: &mut [f64]| {
                match how.noise {
                    NoiseAt::Mean => add_gaussian(&mut x, &shared, &mut rng),
                    NoiseAt::Each => {
                        let q = model.process_noise(start, u, how.t, how.dt);
                        match lower_factor(&q, "process noise covariance Q") {
                            Ok(l) => add_gaussian(&mut x, &l, &mut rng),
                            Err(_) => failed = true,
                        }
                    }
                }
                model.project(&mut x);
                if x.iter().all(|v| v.is_finite()) {
                    sample.copy_from_slice(x.as_slice());
                } else {
                    sample.fill(f64::NAN);
                    lost += 1;
                }
            };
            if how.lanes && how.anchors.is_none() && how.previous.is_none() {
                let mut friendly = true;
                for group in chunk.chunks_mut(n * LANES) {
                    let means = evaluate_group(
                        nd,
                        group_states(group, n),
                        &mut friendly,
                        |x| model.transition(x, u, how.t, how.dt),
                        |x| model.transition(x, u, how.t, how.dt),
                    );
                    for (x, sample) in means.into_iter().zip(group.chunks_exact_mut(n)) {
                        finish(&vector(nd, sample), x, sample);
                    }
                }
            } else {
                for (k, sample) in chunk.chunks_exact_mut(n).enumerate() {
                    let i = b * BLOCK + k;
                    let source = how.ancestors.map_or(i, |a| a[i]);
                    let start = match how.previous {
                        Some(p) => vector(nd, &p[source * n..(source + 1) * n]),
                        None => vector(nd, sample),
                    };
                    let x = match how.anchors {
                        Some(a) => vector(nd, &a[source * n..(source + 1) * n]),
                        None => model.transition(&start, u, how.t, how.dt),
                    };
                    finish(&start, x, sample);
                }
            }
            slot[0] = lost as f64;
            slot[1] = if failed { 1.0 } else { 0.0 };
        });
    let blocks = block_count(cloud.len() / n.max(1));
    let mut lost = 0;
    for slot in partials.chunks_exact(stride).take(blocks) {
        if slot[1] != 0.0 {
            return Err(NumericError::NotPositiveDefinite {
                quantity: "process noise covariance Q at a sample",
            });
        }
        lost += slot[0] as usize;
    }
    Ok(lost)
}

/// Transition means f(xᵢ) of every sample of `from` into `to` (the auxiliary filter's
/// look-ahead points).
pub(crate) fn transition_means<M: Model>(
    model: &M,
    from: &[f64],
    to: &mut [f64],
    input: &[f64],
    t: f64,
    dt: f64,
) where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    let nd = model.state_dim();
    let n = nd.value();
    to.par_chunks_mut(n * BLOCK)
        .zip(from.par_chunks(n * BLOCK))
        .with_min_len(min_blocks_per_job())
        .for_each(|(out, src)| {
            let u = input;
            for (o, s) in out.chunks_exact_mut(n).zip(src.chunks_exact(n)) {
                let mean = model.transition(&vector(nd, s), u, t, dt);
                o.copy_from_slice(mean.as_slice());
            }
        });
}

/// Weights of a covariance pass.
#[derive(Debug, Clone, Copy)]
pub(crate) enum Weights<'a> {
    /// The same weight for every sample (1/(N−1) for an ensemble's sample covariance).
    Equal(f64),
    /// One weight per sample; zero-weight samples are skipped.
    Each(&'a [f64]),
}

/// Σᵢ wᵢ dᵢ dᵢᵀ with dᵢ = `state_residual(xᵢ, mean)`, by per-block partial sums combined in block
/// order. `partials` holds one slot of `stride ≥ n²` values per block.
pub(crate) fn covariance<M: Model>(
    model: &M,
    cloud: &[f64],
    weights: Weights<'_>,
    mean: &OVector<f64, M::State>,
    partials: &mut [f64],
    stride: usize,
) -> OMatrix<f64, M::State, M::State>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    let nd = model.state_dim();
    let n = nd.value();
    let mean = mean.as_slice();
    (cloud.par_chunks(n * BLOCK), partials.par_chunks_mut(stride))
        .into_par_iter()
        .enumerate()
        .with_min_len(min_blocks_per_job())
        .for_each(|(b, (chunk, slot))| {
            let centre = vector(nd, mean);
            let mut sum = OMatrix::<f64, M::State, M::State>::zeros_generic(nd, nd);
            for (k, sample) in chunk.chunks_exact(n).enumerate() {
                let w = match weights {
                    Weights::Equal(w) => w,
                    Weights::Each(ws) => ws[b * BLOCK + k],
                };
                if w == 0.0 {
                    continue;
                }
                let d = model.state_residual(&vector(nd, sample), &centre);
                sum.ger(w, &d, &d, 1.0);
            }
            slot[..n * n].copy_from_slice(sum.as_slice());
        });
    let mut total = OMatrix::<f64, M::State, M::State>::zeros_generic(nd, nd);
    let blocks = block_count(cloud.len() / n.max(1));
    for slot in partials.chunks_exact(stride).take(blocks) {
        for (t, s) in total.iter_mut().zip(&slot[..n * n]) {
            *t += s;
        }
    }
    sightline_core::linalg::symmetrise(&mut total);
    total
}

/// w Σᵢ dᵢ eᵢᵀ with dᵢ = `state_residual(aᵢ, mean_a)` and eᵢ = `state_residual(bᵢ, mean_b)` over
/// two clouds of the same size (the ensemble before and after a forecast), by per-block partial
/// sums combined in block order. `partials` holds one slot of `stride ≥ n²` values per block.
pub(crate) fn cross_covariance<M: Model>(
    model: &M,
    (a, mean_a): (&[f64], &OVector<f64, M::State>),
    (b, mean_b): (&[f64], &OVector<f64, M::State>),
    weight: f64,
    partials: &mut [f64],
    stride: usize,
) -> OMatrix<f64, M::State, M::State>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    let nd = model.state_dim();
    let n = nd.value();
    let (mean_a, mean_b) = (mean_a.as_slice(), mean_b.as_slice());
    (
        a.par_chunks(n * BLOCK),
        b.par_chunks(n * BLOCK),
        partials.par_chunks_mut(stride),
    )
        .into_par_iter()
        .with_min_len(min_blocks_per_job())
        .for_each(|(xs, zs, slot)| {
            let (ca, cb) = (vector(nd, mean_a), vector(nd, mean_b));
            let mut sum = OMatrix::<f64, M::State, M::State>::zeros_generic(nd, nd);
            for (x, z) in xs.chunks_exact(n).zip(zs.chunks_exact(n)) {
                let d = model.state_residual(&vector(nd, x), &ca);
                let e = model.state_residual(&vector(nd, z), &cb);
                sum.ger(1.0, &d, &e, 1.0);
            }
            slot[..n * n].copy_from_slice(sum.as_slice());
        });
    let mut total = OMatrix::<f64, M::State, M::State>::zeros_generic(nd, nd);
    let blocks = block_count(a.len() / n.max(1));
    for slot in partials.chunks_exact(stride).take(blocks) {
        for (t, s) in total.iter_mut().zip(&slot[..n * n]) {
            *t += s;
        }
    }
    total * weight
}

/// A state cloud as a matrix with one sample per column (the layout of `Model::state_mean`).
pub(crate) fn cloud_matrix<N: Dim>(n: N, count: usize) -> OMatrix<f64, N, Dyn>
where
    DefaultAllocator: nalgebra::allocator::Allocator<N, Dyn>,
{
    OMatrix::<f64, N, Dyn>::zeros_generic(n, Dyn(count))
}

/// Most values (samples × states) one sample buffer may hold: 2·10⁸ doubles, 1.6 GB. A particle
/// filter keeps two to four such buffers, so larger clouds would exhaust the memory of most
/// machines and abort the process instead of failing with a message.
pub const MAX_CLOUD_VALUES: usize = 200_000_000;

/// Checks that `count` samples of `n` states fit [`MAX_CLOUD_VALUES`]; the error names the
/// option (`key`) and the largest count that fits.
pub(crate) fn check_cloud_size(
    label: &str,
    key: &str,
    count: usize,
    n: usize,
) -> Result<(), crate::spec::SpecError> {
    if count.saturating_mul(n.max(1)) <= MAX_CLOUD_VALUES {
        return Ok(());
    }
    Err(crate::spec::SpecError::BadValue {
        spec: label.to_string(),
        key: key.to_string(),
        value: count.to_string(),
        expected: format!(
            "at most {} for a plant with {n} states (a sample buffer holds {key} × states \
             values, at most {MAX_CLOUD_VALUES})",
            MAX_CLOUD_VALUES / n.max(1)
        ),
    })
}
