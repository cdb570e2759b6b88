//! `pf`: the sequential importance resampling particle filter with the transition prior as
//! proposal (the bootstrap filter of Gordon, Salmond & Smith, IEE Proc. F 140(2), 1993), and its
//! auxiliary variant (Pitt & Shephard, JASA 94(446), 1999).
//!
//! **Step.** Predict draws every particle from the transition density,
//! xᵢ ← f(xᵢ) + wᵢ, wᵢ ~ N(0, Q), and projects it onto the feasible set. Update multiplies each
//! weight by the Gaussian measurement likelihood
//! p(y | xᵢ) = N(r(y, h(xᵢ)); 0, R), r the model's `measurement_residual` (missing components of
//! `y` are left out: the density is over the present components only). Weights are kept as
//! logarithms and normalised by log-sum-exp, so nothing underflows even with 10⁶ particles and a
//! sharp likelihood. When the effective sample size 1/Σwᵢ² falls below `ess`·N the cloud is
//! resampled ([`crate::resample`]) into a second buffer and the buffers are swapped.
//!
//! **Outputs.** The estimate is the weighted mean (the model's `state_mean` hook with the
//! particle weights) and the weighted covariance Σwᵢdᵢdᵢᵀ, dᵢ the model's `state_residual`,
//! both taken after weighting and before resampling. The log-likelihood increment is
//! ln Σᵢ w̄ᵢ p(y | xᵢ) with w̄ the normalised weights before the update — the log of the mean
//! unnormalised weight when the cloud is equally weighted, an unbiased estimate of the
//! predictive likelihood p(y(k) | y(0..k)) (Del Moral, *Feynman–Kac Formulae*, 2004, §7.4.2).
//! The innovation is y − ŷ with ŷ the predicted measurement mean (the `measurement_mean` hook)
//! and S = Σ w̄ᵢ eᵢeᵢᵀ + R, for NIS.
//!
//! **Options.** `particles` (N), `resample` (scheme), `ess` (threshold as a fraction of N; 1
//! resamples at every update, 0 never), `roughening=K` (after resampling add independent
//! Gaussian jitter of standard deviation K·Eⱼ·N^(−1/n) to state j, Eⱼ the spread max − min of
//! that state over the cloud: Gordon et al. 1993, §4), `regularise=on` (after resampling add
//! h·D·ε with D Dᵀ the weighted covariance and the Gaussian-kernel bandwidth
//! h = (4/(n+2))^(1/(n+4)) N^(−1/(n+4)): the post-regularised filter of Musso, Oudjane & Le Gland,
//! in *Sequential Monte Carlo Methods in Practice*, 2001, §12.2), `temper=F` (below),
//! `variant=auxiliary`, `redraw`, `noise` ([`NoiseAt`]) and `lanes` (below).
//!
//! **Lanes** (`lanes=on`; off by default). The prediction's transitions and the weighting's
//! measurements are evaluated over four particles per call: the plant's own generic code runs
//! on [`sightline_core::Lanes`], a SIMD vector implementing the scalar trait, with vectorised
//! elementary functions. A plant that branches on a value ([`sightline_core::Real::value`]) is
//! detected and evaluated particle by particle instead, with the scalar path's numbers. The
//! random draws are those of the scalar path, so the estimates differ from `lanes=off` only by
//! the lane functions' documented accuracy (a few ulps per call: [`sightline_core::lanes`]),
//! carried along the run. The auxiliary variant's look-ahead points stay on the scalar path.
//!
//! **Tempered updates** (`temper=F`, 0 < F < 1; off by default). A measurement much sharper
//! than the predicted cloud leaves almost all the weight on a few particles (e.g. the first
//! update from a wide prior): the estimate is then built from a handful of points and its
//! covariance is nearly singular. With `temper=F` such an update is split into stages, the
//! progressive correction of Musso, Oudjane & Le Gland (2001, §12.4.1): the likelihood is
//! applied as p(y | x)^Δ₁, p(y | x)^Δ₂, … with Σ Δ = 1, each exponent the largest that keeps the
//! effective sample size at least F times its value at the start of the stage (found by
//! bisection, as in the adaptive tempering of Jasra, Stephens, Doucet & Tsagaris, Scand. J. Stat.
//! 38(1), 2011), and between stages the cloud is resampled and moved by the regularisation
//! kernel with Liu–West shrinkage ([`Jitter::Shrunk`], whatever jitter is configured for
//! ordinary resampling): it keeps the cloud's mean and covariance, so repeated stages do not
//! inflate the spread of unmeasured states. An update that keeps the ESS above F times its
//! starting value runs in one stage, exactly as without the option. The likelihood
//! increment is the sum of the stages' log mean weights (an approximation once a stage has
//! moved the cloud: the move is not invariant for the tempered posterior, unlike the MCMC moves
//! of an SMC sampler, so the product of the stages' means is no longer unbiased). At most 32
//! stages; the last takes what is left of the exponent. Extra stages are counted in
//! [`Diagnostics::tempered`]. The auxiliary variant does not temper (the spec refuses `temper`
//! with `variant=auxiliary`).
//!
//! **Auxiliary variant.** At an update, the first stage weighs the look-ahead points
//! μᵢ = f(xᵢ(k−1)) by λᵢ ∝ w̄ᵢ p(y | μᵢ), selects N ancestors aᵢ by λ with the chosen scheme and
//! propagates them afresh, xᵢ = μ_{aᵢ} + wᵢ; the second-stage weights are
//! p(y | xᵢ)/p(y | μ_{aᵢ}). The likelihood estimate is
//! [Σⱼ w̄ⱼ p(y | μⱼ)]·[N⁻¹ Σᵢ p(y | xᵢ)/p(y | μ_{aᵢ})] (Pitt & Shephard 1999, §3.2). Without a
//! prediction before the update (the first row) the step is the bootstrap one.
//!
//! **Collapse.** A particle whose state leaves the finite range gets weight zero. If every
//! weight is zero or NaN (e.g. a measurement so far out that every log-likelihood is −∞) the
//! step fails with [`FilterError::Collapse`] naming it. With `redraw=on` the cloud is instead
//! re-drawn from the predicted Gaussian N(m⁻, P⁻) (the weighted moments before the update) and
//! weighed again; if that also collapses the measurement is skipped (innovation `None`,
//! log-likelihood increment 0). Each re-draw is counted in [`Diagnostics::redraws`].
//!
//! **Smoothing.** With [`Filter::record_for_smoothing`] the filter keeps its weighted cloud at
//! every step and [`Filter::smooth`] runs forward filtering–backward simulation with
//! `smoother_paths` trajectories (Godsill, Doucet & West, JASA 99(465), 2004); see
//! [`crate::particle_smoother`] for the algorithm, its memory (N·(n+1) numbers per step) and cap.
//!
//! **Parallel and reproducible.** Propagation, weighting and every reduction run over blocks of
//! 1024 particles with rayon; the random stream of each block is derived from (seed, step,
//! block) and partial sums are combined in block order, so the output is bit-identical for any
//! thread count. Resampling picks ancestors sequentially (O(N)) and copies them in parallel. All
//! buffers are allocated at construction; with static plant sizes on a one-thread pool a step
//! performs no heap allocation.

use nalgebra::{DefaultAllocator, Dim, Dyn, OMatrix, OVector};
use rand::RngExt;
use rayon::prelude::*;
use sightline_core::linalg::{cholesky, ensure_finite};
use sightline_core::rng::stream;
use sightline_core::{Alloc, Gaussian, Model, NumericError};

use crate::cloud::{
    self, BLOCK, NoiseAt, Propagation, Weights, block_count, lower_factor, min_blocks_per_job,
    purpose, vector,
};
use crate::filter::{Diagnostics, Filter, FilterError, Innovation, Tag};
use crate::particle_smoother::ParticleRecord;
use crate::registry::KindInfo;
use crate::resample::{Scheme, resample, systematic_in_blocks};
use crate::smoother::SmoothedTrack;
use crate::spec::{FilterSpec, OptionInfo, SpecError};
use crate::update::{InnovationStore, LN_2PI, mask_missing, present_mask};

/// Most stages a tempered update is split into (`temper=F`).
const MAX_TEMPERING_STAGES: usize = 32;

/// Registry entry for `pf`.
pub const INFO: KindInfo = KindInfo {
    kind: "pf",
    about: "particle filter: sequential importance resampling, transition prior as proposal",
    options: &[
        OptionInfo {
            key: "particles",
            default: "1000",
            about: "number of particles N",
        },
        OptionInfo {
            key: "resample",
            default: "systematic",
            about: "systematic | stratified | multinomial | residual",
        },
        OptionInfo {
            key: "ess",
            default: "0.5",
            about: "resample when the effective sample size < ess·N (0..1)",
        },
        OptionInfo {
            key: "roughening",
            default: "0",
            about: "jitter after resampling, sd K·spread·N^(-1/n) (Gordon et al. 1993); 0 = off",
        },
        OptionInfo {
            key: "regularise",
            default: "off",
            about: "on: Gaussian-kernel jitter after resampling (Musso et al. 2001)",
        },
        OptionInfo {
            key: "temper",
            default: "0",
            about: "split an update that would keep < F of the ESS into tempered stages (0 = off)",
        },
        OptionInfo {
            key: "variant",
            default: "sir",
            about: "sir | auxiliary (Pitt & Shephard 1999)",
        },
        OptionInfo {
            key: "redraw",
            default: "off",
            about: "on: re-draw from the predicted Gaussian when every weight vanishes",
        },
        OptionInfo {
            key: "noise",
            default: "mean",
            about: "process noise Q at the cloud's mean | each particle",
        },
        OptionInfo {
            key: "smoother_paths",
            default: "100",
            about: "backward trajectories M of the particle smoother (FFBSi), when smoothing",
        },
        cloud::LANES_OPTION,
    ],
    linear_only: false,
    sampling: true,
};

/// Which particle filter runs.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Variant {
    /// Sequential importance resampling with the transition prior (`variant=sir`).
    Sir,
    /// The auxiliary particle filter (`variant=auxiliary`).
    Auxiliary,
}

/// What is added to the particles after resampling, against sample impoverishment.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Jitter {
    /// Nothing.
    None,
    /// Roughening with tuning constant K (Gordon et al. 1993).
    Roughening(f64),
    /// Post-regularisation with the optimal Gaussian kernel (Musso et al. 2001).
    Regularised,
    /// The same kernel with shrinkage towards the mean, xᵢ ← m + a(xᵢ − m) + h·D·ε with
    /// a = √(1 − h²), which keeps the cloud's mean and covariance (Liu & West, in *Sequential
    /// Monte Carlo Methods in Practice*, 2001, §10.3.3). Used between tempering stages.
    Shrunk,
}

/// Settings of a [`ParticleFilter`]; `Default` gives the spec defaults.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PfConfig {
    /// Number of particles N (at least 2).
    pub particles: usize,
    /// Resampling scheme.
    pub scheme: Scheme,
    /// Resample when the effective sample size is below `ess`·N.
    pub ess: f64,
    /// Jitter after resampling.
    pub jitter: Jitter,
    /// ESS fraction F below which an update is split into tempered stages (0 = never).
    pub temper: f64,
    /// Bootstrap or auxiliary.
    pub variant: Variant,
    /// Re-draw from the predicted Gaussian instead of failing on collapse.
    pub redraw: bool,
    /// Where Q is evaluated.
    pub noise: NoiseAt,
    /// Backward trajectories drawn by the particle smoother (at least 2).
    pub smoother_paths: usize,
    /// Evaluate the plant's transition and measurement over four particles per call
    /// (`lanes=on`; see [`sightline_core::lanes`]).
    pub lanes: bool,
}

impl Default for PfConfig {
    fn default() -> Self {
        PfConfig {
            particles: 1000,
            scheme: Scheme::Systematic,
            ess: 0.5,
            jitter: Jitter::None,
            temper: 0.0,
            variant: Variant::Sir,
            redraw: false,
            noise: NoiseAt::Mean,
            smoother_paths: 100,
            lanes: false,
        }
    }
}

/// The Gaussian measurement likelihood of one update over the present components.
struct Likelihood<M: Dim>
where
    DefaultAllocator: nalgebra::allocator::Allocator<M, M>,
{
    /// L⁻¹ with L Lᵀ = R̃, R̃ the measurement covariance with missing rows and columns replaced
    /// by the identity's; ‖L⁻¹e‖² is then the Mahalanobis distance over the present components.
    inverse_factor: OMatrix<f64, M, M>,
    /// −½(ln det R_pp + p ln 2π).
    log_norm: f64,
    /// R itself, for the innovation covariance.
    r: OMatrix<f64, M, M>,
}

/// A particle filter over plant `M`; see the module docs.
///
/// ```
/// use sightline_core::prelude::*;
/// use sightline_filters::pf::{ParticleFilter, PfConfig};
/// use sightline_filters::Filter;
///
/// /// A scalar random walk seen directly.
/// #[derive(Clone, Parameters)]
/// struct Walk;
/// impl Model for Walk {
///     type State = U1;
///     type Meas = U1;
///     fn declare(&self) -> Declaration {
///         Declaration::new("walk", 1.0).state("x", "m", 0.0, 1.0).measurement("x", "m")
///     }
///     fn transition<S: Real>(&self, x: &Vector1<S>, _u: &[f64], _t: f64, _dt: f64) -> Vector1<S> { *x }
///     fn process_noise(&self, _x: &Vector1<f64>, _u: &[f64], _t: f64, _dt: f64) -> Matrix1<f64> { Matrix1::new(0.1) }
///     fn measure<S: Real>(&self, x: &Vector1<S>, _u: &[f64], _t: f64) -> Vector1<S> { *x }
///     fn measurement_noise(&self, _t: f64) -> Matrix1<f64> { Matrix1::new(1.0) }
/// }
///
/// let config = PfConfig { particles: 4000, ..PfConfig::default() };
/// let mut pf = ParticleFilter::new(Walk, Walk.prior(), config, "pf", 7).unwrap();
/// pf.update(&[1.0], &[], 0.0).unwrap();
/// // Conjugate Gaussian update of N(0, 1) by y = 1 with R = 1: posterior mean 0.5.
/// assert!((pf.mean()[0] - 0.5).abs() < 0.05);
/// ```
#[derive(Debug, Clone)]
pub struct ParticleFilter<M: Model>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    model: M,
    tag: Tag,
    config: PfConfig,
    seed: u64,
    /// The cloud, one particle per column.
    particles: OMatrix<f64, M::State, Dyn>,
    /// The resampling target, swapped with `particles`.
    spare: OMatrix<f64, M::State, Dyn>,
    /// Auxiliary variant: look-ahead points f(xᵢ(k−1)) (no columns otherwise).
    anchors: OMatrix<f64, M::State, Dyn>,
    /// Auxiliary variant: the particles the anchors came from (no columns otherwise).
    previous: OMatrix<f64, M::State, Dyn>,
    /// Whether `anchors` belong to the last prediction.
    anchored: bool,
    /// h(xᵢ) of the last weighting pass.
    predicted_meas: OMatrix<f64, M::Meas, Dyn>,
    log_weights: Vec<f64>,
    /// Normalised weights exp(log_weights).
    weights: Vec<f64>,
    /// Per-particle scratch: prior weights of particles with a finite h(x); first-stage weights.
    scratch: Vec<f64>,
    /// Per-particle scratch: first-stage log-weights of the auxiliary variant.
    scratch_log: Vec<f64>,
    ancestors: Vec<usize>,
    /// Per-block partial sums, `stride` values per block.
    partials: Vec<f64>,
    stride: usize,
    /// Factor of Q at the mean for the last prediction.
    q_factor: OMatrix<f64, M::State, M::State>,
    last_input: Vec<f64>,
    last_t: f64,
    last_dt: f64,
    mean: OVector<f64, M::State>,
    cov: OMatrix<f64, M::State, M::State>,
    innov: InnovationStore<M::Meas>,
    log_likelihood: f64,
    ess: f64,
    diagnostics: Diagnostics,
    /// The forward pass's clouds for the smoother, when recording.
    record: Option<ParticleRecord<M::State>>,
}

impl<M: Model> ParticleFilter<M>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    /// A particle filter labelled `label` with the cloud drawn from `prior` (stream
    /// `(seed, initial)`).
    ///
    /// Fails, naming the setting, if the config is out of range (fewer than 2 particles, `ess`
    /// outside [0, 1], a negative roughening constant, `temper` outside [0, 1)), if the plant
    /// has no state or no measurement, or if the prior covariance is not positive semi-definite.
    pub fn new(
        model: M,
        prior: Gaussian<M::State>,
        config: PfConfig,
        label: &str,
        seed: u64,
    ) -> Result<Self, SpecError> {
        let nd = model.state_dim();
        let md = model.meas_dim();
        let (n, m) = (nd.value(), md.value());
        let count = config.particles;
        let bad = |key: &str, value: String, expected: &str| SpecError::BadValue {
            spec: label.to_string(),
            key: key.to_string(),
            value,
            expected: expected.to_string(),
        };
        if count < 2 {
            return Err(bad("particles", count.to_string(), "at least 2"));
        }
        cloud::check_cloud_size(label, "particles", count, n)?;
        if !(0.0..=1.0).contains(&config.ess) {
            return Err(bad(
                "ess",
                config.ess.to_string(),
                "a fraction of N from 0 to 1",
            ));
        }
        if config.smoother_paths < 2 {
            return Err(bad(
                "smoother_paths",
                config.smoother_paths.to_string(),
                "at least 2",
            ));
        }
        if let Jitter::Roughening(k) = config.jitter {
            if !(k.is_finite() && k >= 0.0) {
                return Err(bad("roughening", k.to_string(), "a number >= 0"));
            }
        }
        if !(0.0..1.0).contains(&config.temper) {
            return Err(bad(
                "temper",
                config.temper.to_string(),
                "an ESS fraction from 0 (off) up to but excluding 1",
            ));
        }
        let not_applicable = |reason: String| SpecError::NotApplicable {
            spec: label.to_string(),
            reason,
        };
        if n == 0 || m == 0 {
            return Err(not_applicable(format!(
                "the particle filter needs at least one state and one measurement; '{}' has {n} and {m}",
                model.declare().name()
            )));
        }
        let blocks = block_count(count);
        let stride = n * n + m * m + 2 * n + 3;
        let auxiliary_columns = if config.variant == Variant::Auxiliary {
            count
        } else {
            0
        };
        let factor = lower_factor(&prior.cov, "prior covariance")
            .map_err(|e| not_applicable(format!("cannot draw the initial particles: {e}")))?;
        let mut pf = ParticleFilter {
            tag: Tag::new(label, &model),
            config,
            seed,
            particles: cloud::cloud_matrix(nd, count),
            spare: cloud::cloud_matrix(nd, count),
            anchors: cloud::cloud_matrix(nd, auxiliary_columns),
            previous: cloud::cloud_matrix(nd, auxiliary_columns),
            anchored: false,
            predicted_meas: cloud::cloud_matrix(md, count),
            log_weights: vec![-(count as f64).ln(); count],
            weights: vec![1.0 / count as f64; count],
            scratch: vec![0.0; count],
            scratch_log: vec![0.0; count],
            ancestors: vec![0; count],
            partials: vec![0.0; blocks * stride],
            stride,
            q_factor: OMatrix::zeros_generic(nd, nd),
            last_input: model.declare().default_input().to_vec(),
            last_t: 0.0,
            last_dt: 0.0,
            mean: prior.mean.clone(),
            cov: prior.cov.clone(),
            innov: InnovationStore::new(md),
            log_likelihood: 0.0,
            ess: count as f64,
            diagnostics: Diagnostics::default(),
            record: None,
            model,
        };
        cloud::scatter(
            &pf.model,
            pf.particles.as_mut_slice(),
            Some(prior.mean.as_slice()),
            factor.as_slice(),
            seed,
            purpose::INITIAL,
            0,
        );
        pf.estimate()
            .map_err(|e| not_applicable(format!("the initial particles: {e}")))?;
        Ok(pf)
    }

    /// The particles, one per column (state order), after the last step.
    pub fn particles(&self) -> &OMatrix<f64, M::State, Dyn> {
        &self.particles
    }

    /// The normalised weights of the particles.
    pub fn weights(&self) -> &[f64] {
        &self.weights
    }

    /// The effective sample size 1/Σwᵢ² after the last update (before any resampling).
    pub fn effective_sample_size(&self) -> f64 {
        self.ess
    }

    /// The settings.
    pub fn config(&self) -> &PfConfig {
        &self.config
    }

    /// The per-block partial results of the last parallel pass, one slice per block in block
    /// order (combining them in this order keeps results independent of the thread count).
    fn block_partials(&self) -> std::iter::Take<std::slice::ChunksExact<'_, f64>> {
        self.partials
            .chunks_exact(self.stride)
            .take(block_count(self.count()))
    }

    fn count(&self) -> usize {
        self.config.particles
    }

    fn collapse(&self) -> FilterError {
        FilterError::Collapse {
            label: self.tag.label.clone(),
            step: self.tag.step,
        }
    }

    fn set_uniform_weights(&mut self) {
        let count = self.count() as f64;
        self.log_weights.fill(-count.ln());
        self.weights.fill(1.0 / count);
    }

    /// Weighted mean and covariance of the cloud into `mean`, `cov`.
    fn estimate(&mut self) -> Result<(), FilterError> {
        let mut mean = self.model.state_mean(&self.particles, &self.weights);
        ensure_finite(mean.iter(), "particle mean").map_err(|e| self.tag.numeric(e))?;
        self.cov = cloud::covariance(
            &self.model,
            self.particles.as_slice(),
            Weights::Each(&self.weights),
            &mean,
            &mut self.partials,
            self.stride,
        );
        ensure_finite(self.cov.iter(), "particle covariance").map_err(|e| self.tag.numeric(e))?;
        self.model.project(&mut mean);
        self.mean = mean;
        Ok(())
    }

    /// Gives particles lost in a propagation (NaN states) weight zero and a zero state, and
    /// renormalises. Fails on collapse.
    fn discard_lost(&mut self) -> Result<(), FilterError> {
        let n = self.model.state_dim().value();
        for (i, x) in self
            .particles
            .as_mut_slice()
            .chunks_exact_mut(n)
            .enumerate()
        {
            if x.iter().any(|v| v.is_nan()) {
                x.fill(0.0);
                self.log_weights[i] = f64::NEG_INFINITY;
            }
        }
        let max = self
            .log_weights
            .iter()
            .copied()
            .fold(f64::NEG_INFINITY, f64::max);
        if max == f64::NEG_INFINITY {
            return Err(self.collapse());
        }
        self.normalise(max);
        Ok(())
    }

    /// The measurement likelihood over the present components of `y`.
    fn likelihood(
        &self,
        y: &OVector<f64, M::Meas>,
        present: usize,
        t: f64,
    ) -> Result<Likelihood<M::Meas>, FilterError> {
        let r = self.model.measurement_noise(t);
        let mut masked = r.clone();
        let mut unused = y.map(|_| 0.0);
        mask_missing::<M::State, M::Meas>(y, &mut unused, &mut masked, None);
        let chol =
            cholesky(&masked, "measurement noise covariance R").map_err(|e| self.tag.numeric(e))?;
        let (md, _) = r.shape_generic();
        let inverse_factor = chol
            .l()
            .solve_lower_triangular(&OMatrix::<f64, M::Meas, M::Meas>::identity_generic(md, md))
            .ok_or_else(|| {
                self.tag.numeric(NumericError::NotPositiveDefinite {
                    quantity: "measurement noise covariance R",
                })
            })?;
        Ok(Likelihood {
            inverse_factor,
            log_norm: -0.5 * (chol.ln_determinant() + present as f64 * LN_2PI),
            r,
        })
    }

    /// Adds ln p(y | xᵢ) of the points `source` (the particles, or the auxiliary anchors) to
    /// `target` (the log-weights, or the auxiliary scratch), keeping h(xᵢ) in `predicted_meas`
    /// and the prior weight of every particle with a finite h(xᵢ) in `scratch`. Returns the
    /// largest new log-weight (−∞ on collapse) and the sum of `scratch`.
    fn weigh(
        &mut self,
        source: Source,
        target: Target,
        y: &[f64],
        u: &[f64],
        t: f64,
        lik: &Likelihood<M::Meas>,
    ) -> (f64, f64) {
        let model = &self.model;
        let nd = model.state_dim();
        let md = model.meas_dim();
        let (n, m) = (nd.value(), md.value());
        let points = match source {
            Source::Particles => self.particles.as_slice(),
            Source::Anchors => self.anchors.as_slice(),
        };
        let log_weights = match target {
            Target::LogWeights => &mut self.log_weights,
            Target::Scratch => &mut self.scratch_log,
        };
        let prior = &self.weights;
        let lanes = self.config.lanes;
        let inverse = lik.inverse_factor.as_slice();
        let log_norm = lik.log_norm;
        (
            log_weights.par_chunks_mut(BLOCK),
            self.predicted_meas.as_mut_slice().par_chunks_mut(m * BLOCK),
            self.scratch.par_chunks_mut(BLOCK),
            self.partials.par_chunks_mut(self.stride),
        )
            .into_par_iter()
            .enumerate()
            .with_min_len(min_blocks_per_job())
            .for_each(|(b, (lw, meas, valid, slot))| {
                let y = vector(md, y);
                let block = &points[b * BLOCK * n..][..lw.len() * n];
                let (mut max, mut valid_sum) = (f64::NEG_INFINITY, 0.0);
                // Adds ln p(y | xᵢ) for the block's k-th point, whose measurement is z.
                let mut score = |k: usize, z: OVector<f64, M::Meas>| {
                    let i = b * BLOCK + k;
                    let out = &mut meas[k * m..(k + 1) * m];
                    let l = if z.iter().all(|v| v.is_finite()) {
                        out.copy_from_slice(z.as_slice());
                        valid[k] = prior[i];
                        valid_sum += prior[i];
                        let e = model.measurement_residual(&y, &z);
                        // ‖L⁻¹e‖² over the present components (missing ones contribute 0).
                        let mut distance = 0.0;
                        for r in 0..m {
                            let mut row = 0.0;
                            for c in 0..=r {
                                if !y[c].is_nan() {
                                    row += inverse[r + c * m] * e[c];
                                }
                            }
                            distance += row * row;
                        }
                        log_norm - 0.5 * distance
                    } else {
                        out.fill(0.0);
                        valid[k] = 0.0;
                        f64::NEG_INFINITY
                    };
                    let mut w = lw[k] + l;
                    if w.is_nan() {
                        w = f64::NEG_INFINITY;
                    }
                    lw[k] = w;
                    max = max.max(w);
                };
                cloud::measure_each(model, block, lanes, u, t, &mut score);
                slot[0] = max;
                slot[1] = valid_sum;
            });
        let max = self
            .block_partials()
            .map(|s| s[0])
            .fold(f64::NEG_INFINITY, f64::max);
        let valid_sum: f64 = self.block_partials().map(|s| s[1]).sum();
        (max, valid_sum)
    }

    /// Innovation y − ŷ and S = Σ w̄ᵢ eᵢeᵢᵀ + R from the last weighting pass over the
    /// predicted particles (`scratch` holds their prior weights, summing to `valid_sum` > 0).
    fn innovation_stats(
        &mut self,
        y: &OVector<f64, M::Meas>,
        present: usize,
        valid_sum: f64,
        r: &OMatrix<f64, M::Meas, M::Meas>,
    ) -> Result<(), FilterError> {
        if valid_sum != 1.0 {
            let scale = 1.0 / valid_sum;
            self.scratch.iter_mut().for_each(|w| *w *= scale);
        }
        let predicted = self
            .model
            .measurement_mean(&self.predicted_meas, &self.scratch);
        let model = &self.model;
        let md = model.meas_dim();
        let m = md.value();
        let centre = predicted.as_slice();
        let weights = &self.scratch;
        (
            self.predicted_meas.as_slice().par_chunks(m * BLOCK),
            self.partials.par_chunks_mut(self.stride),
        )
            .into_par_iter()
            .enumerate()
            .with_min_len(min_blocks_per_job())
            .for_each(|(b, (meas, slot))| {
                let centre = vector(md, centre);
                let mut sum = OMatrix::<f64, M::Meas, M::Meas>::zeros_generic(md, md);
                for (k, z) in meas.chunks_exact(m).enumerate() {
                    let w = weights[b * BLOCK + k];
                    if w != 0.0 {
                        let e = model.measurement_residual(&vector(md, z), &centre);
                        sum.ger(w, &e, &e, 1.0);
                    }
                }
                slot[..m * m].copy_from_slice(sum.as_slice());
            });
        let mut s = r.clone();
        for slot in self.block_partials() {
            for (t, v) in s.iter_mut().zip(&slot[..m * m]) {
                *t += v;
            }
        }
        sightline_core::linalg::symmetrise(&mut s);
        let mut residual = model.measurement_residual(y, &predicted);
        mask_missing::<M::State, M::Meas>(y, &mut residual, &mut s, None);
        let chol = cholesky(&s, "innovation covariance").map_err(|e| self.tag.numeric(e))?;
        self.innov.nis = residual.dot(&chol.solve(&residual));
        self.innov.residual = residual;
        self.innov.covariance = s;
        self.innov.present = present;
        Ok(())
    }

    /// Normalises the log-weights by log-sum-exp about their maximum `max` (finite), so that
    /// no weight underflows to zero unless it is negligible against the largest, and refreshes
    /// the linear weights and the ESS. Returns the log normaliser ln Σ exp(log-weights).
    fn normalise(&mut self, max: f64) -> f64 {
        (
            self.log_weights.par_chunks(BLOCK),
            self.weights.par_chunks_mut(BLOCK),
            self.partials.par_chunks_mut(self.stride),
        )
            .into_par_iter()
            .with_min_len(min_blocks_per_job())
            .for_each(|(lw, w, slot)| {
                let mut sum = 0.0;
                for (l, w) in lw.iter().zip(w.iter_mut()) {
                    *w = (l - max).exp();
                    sum += *w;
                }
                slot[0] = sum;
            });
        let total: f64 = self.block_partials().map(|s| s[0]).sum();
        let log_z = max + total.ln();
        let scale = 1.0 / total;
        (
            self.log_weights.par_chunks_mut(BLOCK),
            self.weights.par_chunks_mut(BLOCK),
            self.partials.par_chunks_mut(self.stride),
        )
            .into_par_iter()
            .with_min_len(min_blocks_per_job())
            .for_each(|(lw, w, slot)| {
                let mut squares = 0.0;
                for (l, w) in lw.iter_mut().zip(w.iter_mut()) {
                    *l -= log_z;
                    *w *= scale;
                    squares += *w * *w;
                }
                slot[0] = squares;
            });
        let squares: f64 = self.block_partials().map(|s| s[0]).sum();
        self.ess = 1.0 / squares;
        log_z
    }

    /// Resamples by the current weights into the spare buffer, swaps, and jitters.
    fn resample(&mut self) -> Result<(), FilterError> {
        let keys = [purpose::RESAMPLE, purpose::JITTER, self.tag.step as u64];
        self.resample_keyed(keys, self.config.jitter)
    }

    /// [`Self::resample`] with the streams keyed `[resample key, jitter key, step key]` and the
    /// given jitter (tempering stages use their own keys).
    fn resample_keyed(&mut self, keys: [u64; 3], jitter: Jitter) -> Result<(), FilterError> {
        let [resample_key, jitter_key, step] = keys;
        let mut rng = stream(self.seed, &[resample_key, step]);
        // Systematic (the default) runs in parallel blocks; `scratch` is free after the weighting
        // pass, and the first slots of `partials` hold the block totals.
        let in_blocks = self.config.scheme == Scheme::Systematic && {
            let shift: f64 = rng.clone().random();
            systematic_in_blocks(
                &self.weights,
                shift,
                BLOCK,
                min_blocks_per_job(),
                &mut self.scratch,
                &mut self.partials,
                &mut self.ancestors,
            )
        };
        if !in_blocks {
            resample(
                self.config.scheme,
                &self.weights,
                &mut rng,
                &mut self.ancestors,
            );
        }
        let n = self.model.state_dim().value();
        let source = self.particles.as_slice();
        let ancestors = &self.ancestors;
        self.spare
            .as_mut_slice()
            .par_chunks_mut(n * BLOCK)
            .enumerate()
            .with_min_len(min_blocks_per_job())
            .for_each(|(b, chunk)| {
                for (k, x) in chunk.chunks_exact_mut(n).enumerate() {
                    let a = ancestors[b * BLOCK + k];
                    x.copy_from_slice(&source[a * n..(a + 1) * n]);
                }
            });
        std::mem::swap(&mut self.particles, &mut self.spare);
        self.set_uniform_weights();
        self.diagnostics.resamples += 1;
        self.jitter(jitter, jitter_key, step)
    }

    /// Roughening or regularisation after a resampling.
    fn jitter(&mut self, jitter: Jitter, key: u64, step: u64) -> Result<(), FilterError> {
        let nd = self.model.state_dim();
        let n = nd.value();
        let count = self.count() as f64;
        let factor = match jitter {
            Jitter::None => return Ok(()),
            Jitter::Roughening(k) => {
                if k == 0.0 {
                    return Ok(());
                }
                let spread = self.spread();
                let scale = k * count.powf(-1.0 / n as f64);
                OMatrix::<f64, M::State, M::State>::from_diagonal(&(spread * scale))
            }
            Jitter::Regularised | Jitter::Shrunk => {
                // Optimal bandwidth of the Gaussian kernel (Musso et al. 2001, eq. 12.7).
                let nf = n as f64;
                let a = (4.0 / (nf + 2.0)).powf(1.0 / (nf + 4.0));
                let h = a * count.powf(-1.0 / (nf + 4.0));
                let factor = lower_factor(&self.cov, "particle covariance")
                    .map_err(|e| self.tag.numeric(e))?;
                if jitter == Jitter::Shrunk {
                    // h < 1 for every N ≥ 2 and n ≥ 1, so the shrinkage factor is real.
                    cloud::shrink(
                        &self.model,
                        self.particles.as_mut_slice(),
                        self.mean.as_slice(),
                        (1.0 - h * h).max(0.0).sqrt(),
                    );
                }
                factor * h
            }
        };
        cloud::scatter(
            &self.model,
            self.particles.as_mut_slice(),
            None,
            factor.as_slice(),
            self.seed,
            key,
            step,
        );
        Ok(())
    }

    /// Per-state spread max − min of the cloud (block partials; min/max are order-free).
    fn spread(&mut self) -> OVector<f64, M::State> {
        let nd = self.model.state_dim();
        let n = nd.value();
        (
            self.particles.as_slice().par_chunks(n * BLOCK),
            self.partials.par_chunks_mut(self.stride),
        )
            .into_par_iter()
            .with_min_len(min_blocks_per_job())
            .for_each(|(chunk, slot)| {
                let (lo, hi) = slot[..2 * n].split_at_mut(n);
                lo.fill(f64::INFINITY);
                hi.fill(f64::NEG_INFINITY);
                for x in chunk.chunks_exact(n) {
                    for j in 0..n {
                        lo[j] = lo[j].min(x[j]);
                        hi[j] = hi[j].max(x[j]);
                    }
                }
            });
        let mut spread = OVector::<f64, M::State>::zeros_generic(nd, nalgebra::U1);
        for j in 0..n {
            let slots = || self.block_partials();
            let lo = slots().map(|s| s[j]).fold(f64::INFINITY, f64::min);
            let hi = slots().map(|s| s[n + j]).fold(f64::NEG_INFINITY, f64::max);
            spread[j] = hi - lo;
        }
        spread
    }

    /// Replaces the cloud by a draw from the current (predicted) Gaussian, equally weighted.
    fn redraw(&mut self) -> Result<(), FilterError> {
        let factor =
            lower_factor(&self.cov, "predicted covariance").map_err(|e| self.tag.numeric(e))?;
        cloud::scatter(
            &self.model,
            self.particles.as_mut_slice(),
            Some(self.mean.as_slice()),
            factor.as_slice(),
            self.seed,
            purpose::REDRAW,
            self.tag.step as u64,
        );
        self.set_uniform_weights();
        self.diagnostics.redraws += 1;
        Ok(())
    }

    /// The collapse remedy: an error, or (with `redraw=on`) a re-drawn and re-weighed cloud.
    /// Returns the new largest log-weight and valid prior mass, or `None` if the measurement
    /// had to be skipped.
    fn recover(
        &mut self,
        y: &[f64],
        u: &[f64],
        t: f64,
        lik: &Likelihood<M::Meas>,
    ) -> Result<Option<(f64, f64)>, FilterError> {
        if !self.config.redraw {
            return Err(self.collapse());
        }
        self.redraw()?;
        let (max, valid_sum) = self.weigh(Source::Particles, Target::LogWeights, y, u, t, lik);
        if max.is_finite() {
            return Ok(Some((max, valid_sum)));
        }
        self.set_uniform_weights();
        self.innov.clear();
        self.log_likelihood = 0.0;
        self.estimate()?;
        Ok(None)
    }

    /// Estimate from the normalised weights, and resample when the ESS is low.
    fn finish_update(&mut self) -> Result<(), FilterError> {
        self.estimate()?;
        if self.ess < self.config.ess * self.count() as f64 {
            self.resample()?;
        }
        Ok(())
    }

    fn sir_update(
        &mut self,
        y: &OVector<f64, M::Meas>,
        present: usize,
        u: &[f64],
        t: f64,
        lik: &Likelihood<M::Meas>,
    ) -> Result<(), FilterError> {
        if self.config.temper > 0.0 {
            self.tempered_update(y, present, u, t, lik)
        } else {
            self.bootstrap_update(y, present, u, t, lik)
        }
    }

    /// The update in one stage: weigh by the whole likelihood, normalise, estimate.
    fn bootstrap_update(
        &mut self,
        y: &OVector<f64, M::Meas>,
        present: usize,
        u: &[f64],
        t: f64,
        lik: &Likelihood<M::Meas>,
    ) -> Result<(), FilterError> {
        let ys = y.as_slice();
        let (mut max, mut valid_sum) =
            self.weigh(Source::Particles, Target::LogWeights, ys, u, t, lik);
        if !max.is_finite() {
            match self.recover(ys, u, t, lik)? {
                Some(found) => (max, valid_sum) = found,
                None => return Ok(()),
            }
        }
        self.innovation_stats(y, present, valid_sum, &lik.r)?;
        // The prior weights summed to 1, so ln Σ exp(new log-weights) = ln Σ w̄ᵢ p(y | xᵢ).
        self.log_likelihood = self.normalise(max);
        self.finish_update()
    }

    /// The update in tempered stages (`temper=F`; see the module docs).
    fn tempered_update(
        &mut self,
        y: &OVector<f64, M::Meas>,
        present: usize,
        u: &[f64],
        t: f64,
        lik: &Likelihood<M::Meas>,
    ) -> Result<(), FilterError> {
        let ys = y.as_slice();
        // ln p(y | xᵢ) of every particle into `scratch_log`.
        self.scratch_log.fill(0.0);
        let (max_log_lik, valid_sum) =
            self.weigh(Source::Particles, Target::Scratch, ys, u, t, lik);
        if !max_log_lik.is_finite() {
            // Every likelihood vanished: the one-stage path reports or recovers the collapse.
            return self.bootstrap_update(y, present, u, t, lik);
        }
        self.innovation_stats(y, present, valid_sum, &lik.r)?;
        let step = self.tag.step as u64;
        let mut remaining = 1.0;
        let mut log_z = 0.0;
        for stage in 0..MAX_TEMPERING_STAGES {
            let delta = if stage + 1 == MAX_TEMPERING_STAGES {
                remaining
            } else {
                self.tempering_exponent(remaining)
            };
            let max = self.add_tempered_log_likelihood(delta);
            if !max.is_finite() {
                return Err(self.collapse());
            }
            log_z += self.normalise(max);
            if delta >= remaining {
                break;
            }
            remaining -= delta;
            // Resample and move the cloud, then weigh the moved particles afresh.
            self.estimate()?;
            let keys = [
                purpose::TEMPER_RESAMPLE,
                purpose::TEMPER_JITTER,
                step * MAX_TEMPERING_STAGES as u64 + stage as u64,
            ];
            self.resample_keyed(keys, Jitter::Shrunk)?;
            self.diagnostics.tempered += 1;
            self.scratch_log.fill(0.0);
            let (max_moved, _) = self.weigh(Source::Particles, Target::Scratch, ys, u, t, lik);
            if !max_moved.is_finite() {
                return Err(self.collapse());
            }
        }
        self.log_likelihood = log_z;
        self.finish_update()
    }

    /// The largest exponent Δ ≤ `remaining` for which the weights wᵢ·p(y | xᵢ)^Δ keep an
    /// effective sample size of at least `temper` times the current one (bisection on Δ; the
    /// ESS falls as Δ grows). At least `remaining`·2⁻²⁴, so every stage makes progress.
    fn tempering_exponent(&mut self, remaining: f64) -> f64 {
        let target = self.config.temper * self.tempered_ess(0.0);
        if self.tempered_ess(remaining) >= target {
            return remaining;
        }
        let (mut lo, mut hi) = (0.0, remaining);
        for _ in 0..24 {
            let mid = 0.5 * (lo + hi);
            if self.tempered_ess(mid) >= target {
                lo = mid;
            } else {
                hi = mid;
            }
        }
        lo.max(remaining * (-24.0f64).exp2())
    }

    /// Effective sample size of the weights ∝ exp(log wᵢ + Δ·ln p(y | xᵢ)), by blocks (a
    /// block's maximum, Σe^(a−max) and Σe^(2(a−max)), combined in block order).
    fn tempered_ess(&mut self, delta: f64) -> f64 {
        (
            self.log_weights.par_chunks(BLOCK),
            self.scratch_log.par_chunks(BLOCK),
            self.partials.par_chunks_mut(self.stride),
        )
            .into_par_iter()
            .with_min_len(min_blocks_per_job())
            .for_each(|(lw, ll, slot)| {
                let at = |k: usize| lw[k] + delta * ll[k];
                let max = (0..lw.len()).map(at).fold(f64::NEG_INFINITY, f64::max);
                let (mut sum, mut squares) = (0.0, 0.0);
                if max.is_finite() {
                    for k in 0..lw.len() {
                        let w = (at(k) - max).exp();
                        sum += w;
                        squares += w * w;
                    }
                }
                slot[..3].copy_from_slice(&[max, sum, squares]);
            });
        let slots = || self.block_partials();
        let max = slots().map(|s| s[0]).fold(f64::NEG_INFINITY, f64::max);
        if !max.is_finite() {
            return 0.0;
        }
        let (mut sum, mut squares) = (0.0, 0.0);
        for s in slots() {
            if s[0].is_finite() {
                let scale = (s[0] - max).exp();
                sum += s[1] * scale;
                squares += s[2] * scale * scale;
            }
        }
        sum * sum / squares
    }

    /// Adds Δ·ln p(y | xᵢ) to the log-weights; returns the largest.
    fn add_tempered_log_likelihood(&mut self, delta: f64) -> f64 {
        (
            self.log_weights.par_chunks_mut(BLOCK),
            self.scratch_log.par_chunks(BLOCK),
            self.partials.par_chunks_mut(self.stride),
        )
            .into_par_iter()
            .with_min_len(min_blocks_per_job())
            .for_each(|(lw, ll, slot)| {
                let mut max = f64::NEG_INFINITY;
                for (w, l) in lw.iter_mut().zip(ll) {
                    let mut v = *w + delta * l;
                    if v.is_nan() {
                        v = f64::NEG_INFINITY;
                    }
                    *w = v;
                    max = max.max(v);
                }
                slot[0] = max;
            });
        self.block_partials()
            .map(|s| s[0])
            .fold(f64::NEG_INFINITY, f64::max)
    }

    fn auxiliary_update(
        &mut self,
        y: &OVector<f64, M::Meas>,
        present: usize,
        u: &[f64],
        t: f64,
        lik: &Likelihood<M::Meas>,
    ) -> Result<(), FilterError> {
        let ys = y.as_slice();
        // Innovation statistics from the predicted cloud (its weights are discarded).
        self.scratch_log.copy_from_slice(&self.log_weights);
        let (max, valid_sum) = self.weigh(Source::Particles, Target::Scratch, ys, u, t, lik);
        if !max.is_finite() {
            // The predicted cloud itself collapses: the bootstrap step owns the remedy.
            return self.sir_update(y, present, u, t, lik);
        }
        self.innovation_stats(y, present, valid_sum, &lik.r)?;
        // First stage: λⱼ ∝ w̄ⱼ p(y | μⱼ).
        self.scratch_log.copy_from_slice(&self.log_weights);
        let (max_first, _) = self.weigh(Source::Anchors, Target::Scratch, ys, u, t, lik);
        if !max_first.is_finite() {
            // The look-ahead points all miss the measurement: take the bootstrap step.
            return self.sir_update(y, present, u, t, lik);
        }
        let mut first_total = 0.0;
        for (w, l) in self.scratch.iter_mut().zip(&self.scratch_log) {
            *w = (l - max_first).exp();
            first_total += *w;
        }
        let log_first = max_first + first_total.ln();
        let step = self.tag.step as u64;
        let mut rng = stream(self.seed, &[purpose::AUXILIARY_SELECT, step]);
        resample(
            self.config.scheme,
            &self.scratch,
            &mut rng,
            &mut self.ancestors,
        );
        // Second-stage weights start at −ln p(y | μ_a) = −(log λ̃_a − ln w̄_a).
        for (i, &a) in self.ancestors.iter().enumerate() {
            self.weights[i] = self.log_weights[a] - self.scratch_log[a];
        }
        self.log_weights.copy_from_slice(&self.weights);
        let how = Propagation {
            input: &self.last_input,
            t: self.last_t,
            dt: self.last_dt,
            factor: self.q_factor.as_slice(),
            noise: self.config.noise,
            anchors: Some(self.anchors.as_slice()),
            previous: Some(self.previous.as_slice()),
            ancestors: Some(&self.ancestors),
            key: purpose::AUXILIARY_PROPAGATE,
            step,
            lanes: self.config.lanes,
        };
        let lost = cloud::propagate(
            &self.model,
            self.particles.as_mut_slice(),
            &how,
            self.seed,
            &mut self.partials,
            self.stride,
        )
        .map_err(|e| self.tag.numeric(e))?;
        if lost > 0 {
            let n = self.model.state_dim().value();
            for (i, x) in self
                .particles
                .as_mut_slice()
                .chunks_exact_mut(n)
                .enumerate()
            {
                if x.iter().any(|v| v.is_nan()) {
                    x.fill(0.0);
                    self.log_weights[i] = f64::NEG_INFINITY;
                }
            }
        }
        let uniform = 1.0 / self.count() as f64;
        self.weights.fill(uniform);
        let (max_second, _) = self.weigh(Source::Particles, Target::LogWeights, ys, u, t, lik);
        self.log_likelihood = if max_second.is_finite() {
            log_first + self.normalise(max_second) - (self.count() as f64).ln()
        } else {
            match self.recover(ys, u, t, lik)? {
                Some((max, _)) => self.normalise(max),
                None => return Ok(()),
            }
        };
        self.innov.present = present;
        self.finish_update()
    }
}

/// Which points a weighting pass measures.
#[derive(Debug, Clone, Copy)]
enum Source {
    Particles,
    Anchors,
}

/// Which log-weights a weighting pass adds to.
#[derive(Debug, Clone, Copy)]
enum Target {
    LogWeights,
    Scratch,
}

/// Reads the `pf` options of a spec.
pub fn config_from_spec(spec: &FilterSpec) -> Result<PfConfig, SpecError> {
    let o = spec.options(INFO.options)?;
    let defaults = PfConfig::default();
    let particles = o.count("particles", defaults.particles, 2, 100_000_000)?;
    let scheme_name = o.choice("resample", defaults.scheme.name(), Scheme::NAMES)?;
    let scheme = Scheme::from_name(scheme_name).unwrap_or(defaults.scheme);
    let ess = o.real(
        "ess",
        defaults.ess,
        |e| (0.0..=1.0).contains(&e),
        "a fraction of N from 0 to 1",
    )?;
    let roughening = o.real("roughening", 0.0, |k| k >= 0.0, "a number >= 0")?;
    let regularise = o.switch("regularise", false)?;
    let jitter = match (roughening > 0.0, regularise) {
        (true, true) => {
            return Err(o.not_applicable(
                "roughening and regularise both jitter the resampled cloud; choose one",
            ));
        }
        (true, false) => Jitter::Roughening(roughening),
        (false, true) => Jitter::Regularised,
        (false, false) => Jitter::None,
    };
    let temper = o.real(
        "temper",
        defaults.temper,
        |f| (0.0..1.0).contains(&f),
        "an ESS fraction from 0 (off) up to but excluding 1",
    )?;
    let variant = match o.choice("variant", "sir", &["sir", "auxiliary"])? {
        "auxiliary" => Variant::Auxiliary,
        _ => Variant::Sir,
    };
    if variant == Variant::Auxiliary && temper > 0.0 {
        return Err(o.not_applicable(
            "temper splits the bootstrap (variant=sir) update; the auxiliary variant's two-stage \
             weights are not tempered — drop one of them",
        ));
    }
    let redraw = o.switch("redraw", false)?;
    let noise = match o.choice("noise", "mean", &["mean", "each"])? {
        "each" => NoiseAt::Each,
        _ => NoiseAt::Mean,
    };
    let smoother_paths = o.count("smoother_paths", defaults.smoother_paths, 2, 1_000_000)?;
    let lanes = o.switch("lanes", defaults.lanes)?;
    Ok(PfConfig {
        particles,
        scheme,
        ess,
        jitter,
        temper,
        variant,
        redraw,
        noise,
        smoother_paths,
        lanes,
    })
}

/// Builds a `pf` from a spec.
pub fn build<M: Model>(
    model: &M,
    prior: &Gaussian<M::State>,
    spec: &FilterSpec,
    seed: u64,
) -> Result<Box<dyn Filter>, SpecError>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    let config = config_from_spec(spec)?;
    let pf = ParticleFilter::new(model.clone(), prior.clone(), config, &spec.label, seed)?;
    Ok(Box::new(pf))
}

impl<M: Model> Filter for ParticleFilter<M>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    fn label(&self) -> &str {
        &self.tag.label
    }

    fn kind(&self) -> &'static str {
        INFO.kind
    }

    fn predict(&mut self, u: &[f64], t: f64, dt: f64) -> Result<(), FilterError> {
        self.tag.step += 1;
        let input = self.tag.input(u)?;
        self.last_input.copy_from_slice(input);
        self.last_t = t;
        self.last_dt = dt;
        if self.config.noise == NoiseAt::Mean {
            let q = self.model.process_noise(&self.mean, input, t, dt);
            self.q_factor =
                lower_factor(&q, "process noise covariance Q").map_err(|e| self.tag.numeric(e))?;
        }
        if let Some(record) = &mut self.record {
            record.push(
                self.particles.as_slice(),
                &self.weights,
                (u, t, dt),
                &self.q_factor,
            );
        }
        let auxiliary = self.config.variant == Variant::Auxiliary;
        if auxiliary {
            self.previous.copy_from(&self.particles);
            cloud::transition_means(
                &self.model,
                self.previous.as_slice(),
                self.anchors.as_mut_slice(),
                u,
                t,
                dt,
            );
        }
        let how = Propagation {
            input: u,
            t,
            dt,
            factor: self.q_factor.as_slice(),
            noise: self.config.noise,
            anchors: auxiliary.then_some(self.anchors.as_slice()),
            previous: auxiliary.then_some(self.previous.as_slice()),
            ancestors: None,
            key: purpose::PREDICT,
            step: self.tag.step as u64,
            lanes: self.config.lanes,
        };
        let lost = cloud::propagate(
            &self.model,
            self.particles.as_mut_slice(),
            &how,
            self.seed,
            &mut self.partials,
            self.stride,
        )
        .map_err(|e| self.tag.numeric(e))?;
        if lost > 0 {
            self.discard_lost()?;
        }
        self.anchored = auxiliary;
        self.estimate()
    }

    fn update(&mut self, y: &[f64], u: &[f64], t: f64) -> Result<(), FilterError> {
        let input = self.tag.input(u)?;
        let y = self.tag.vector(self.model.meas_dim(), y, "measurement")?;
        let present = present_mask(&y).map_err(|e| self.tag.numeric(e))?;
        let anchored = std::mem::take(&mut self.anchored);
        if present == 0 {
            self.innov.clear();
            self.log_likelihood = 0.0;
            return Ok(());
        }
        let lik = self.likelihood(&y, present, t)?;
        if anchored {
            self.auxiliary_update(&y, present, input, t, &lik)
        } else {
            self.sir_update(&y, present, input, t, &lik)
        }
    }

    fn mean(&self) -> &[f64] {
        self.mean.as_slice()
    }

    fn covariance(&self) -> &[f64] {
        self.cov.as_slice()
    }

    fn innovation(&self) -> Option<Innovation<'_>> {
        self.innov.view()
    }

    fn log_likelihood_increment(&self) -> f64 {
        if self.innov.present > 0 {
            self.log_likelihood
        } else {
            0.0
        }
    }

    fn diagnostics(&self) -> Diagnostics {
        self.diagnostics
    }

    fn record_for_smoothing(&mut self) -> bool {
        if self.record.is_none() {
            self.record = Some(ParticleRecord::new(
                self.config.smoother_paths,
                self.config.noise,
            ));
        }
        true
    }

    fn smooth(&self) -> Option<Result<SmoothedTrack, FilterError>> {
        let record = self.record.as_ref()?;
        Some(record.smooth(
            &self.model,
            &self.tag,
            self.seed,
            self.particles.as_slice(),
            &self.weights,
        ))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn spec_options_are_read_and_checked() {
        let spec = FilterSpec::parse(
            "pf:particles=5000,resample=residual,ess=0.3,roughening=0.2,redraw=on,variant=auxiliary,noise=each,lanes=on",
        )
        .unwrap();
        let c = config_from_spec(&spec).unwrap();
        assert_eq!(c.particles, 5000);
        assert_eq!(c.scheme, Scheme::Residual);
        assert_eq!(c.ess, 0.3);
        assert_eq!(c.jitter, Jitter::Roughening(0.2));
        assert!(c.redraw);
        assert_eq!(c.variant, Variant::Auxiliary);
        assert_eq!(c.noise, NoiseAt::Each);
        assert!(c.lanes);
        assert_eq!(
            config_from_spec(&FilterSpec::parse("pf").unwrap()).unwrap(),
            PfConfig::default()
        );
        for (bad, word) in [
            ("pf:particles=1", "particles"),
            ("pf:ess=1.5", "ess"),
            ("pf:resample=best", "systematic"),
            ("pf:roughening=-1", "roughening"),
            ("pf:roughening=0.2,regularise=on", "choose one"),
            ("pf:temper=1", "up to but excluding 1"),
            ("pf:temper=0.1,variant=auxiliary", "drop one of them"),
            ("pf:temper=-0.1", "an ESS fraction"),
            ("pf:variant=unscented", "auxiliary"),
            ("pf:members=10", "particles"),
        ] {
            let e = config_from_spec(&FilterSpec::parse(bad).unwrap())
                .unwrap_err()
                .to_string();
            assert!(e.contains(word), "{bad}: {e}");
        }
    }
}
