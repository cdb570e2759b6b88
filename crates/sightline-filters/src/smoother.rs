//! Fixed-interval smoothers: what a filter's forward pass leaves behind, and the backward passes
//! that turn it into the distribution of every state given *all* the measurements.
//!
//! **How a run is smoothed.** Call [`crate::Filter::record_for_smoothing`] before the first
//! step; a filter that supports smoothing then keeps what its backward pass needs and returns
//! `true`. After the forward pass [`crate::Filter::smooth`] returns a [`SmoothedTrack`]: the
//! smoothed mean and covariance of every *epoch* in order. An epoch is the belief when recording
//! started, then one per `predict`; with the runner's time line (no prediction before the first
//! row) epoch `k` is dataset row `k`, and its filtered moments are those after the row's update.
//!
//! **Gaussian filters** (`kf`, `ekf`, `iekf`, `ukf`, `ckf`, `ghkf`, `srukf`, and `enkf` on its
//! ensemble moments) record, at every prediction, the transition moments: the filtered mean and
//! covariance (m, P) before the step, the predicted (m⁻, P⁻) after it, and the cross-covariance
//! C = Cov(x(k−1), x(k) | y(0..k−1)). Each filter supplies only C: P Fᵀ for the linearised
//! filters (the Rauch–Tung–Striebel smoother, Rauch, Tung & Striebel, AIAA J. 3(8), 1965, and its
//! extended form), Σ Wᶜᵢ (Xᵢ − m)(f(Xᵢ) − m⁻)ᵀ over the filter's own sigma points for every
//! sigma-point rule (the sigma-point RTS smoother, Särkkä, IEEE TAC 53(3), 2008),
//! and the sample cross-covariance of the ensemble before and after the forecast for `enkf`
//! (the moment form of the ensemble RTS smoother, Raanes, Q. J. R. Meteorol. Soc. 142, 2016). One backward
//! pass, [`rts`], serves them all:
//!
//! ```text
//! G(k)   = C(k+1) P⁻(k+1)⁻¹                         (Cholesky solve, never an explicit inverse)
//! m_s(k) = m(k) + G(k) r(m_s(k+1), m⁻(k+1))        r = Model::state_residual
//! P_s(k) = P(k) + G(k) (P_s(k+1) − P⁻(k+1)) G(k)ᵀ
//! ```
//!
//! The mean difference goes through the model's `state_residual` hook, as every innovation-like
//! difference in the filters does, so plants whose states need a custom difference (angles) are
//! smoothed consistently; the smoothed mean is then moved onto the feasible set with
//! `Model::project`, like the filters' posterior means. For a linear-Gaussian plant and any of
//! these filters the result is the exact posterior: the batch least-squares solution.
//!
//! **The particle filter** records its weighted cloud at every epoch and smooths by forward
//! filtering–backward simulation (Godsill, Doucet & West, JASA 99(465), 2004): see
//! [`crate::pf`].
//!
//! **Cost.** Recording allocates (a Gaussian filter keeps 3n² + 2n values per step, the particle
//! filter N(n + 1)): smoothing is an offline analysis. The zero-allocation guarantee of a filter
//! step holds for filtering without recording.

use nalgebra::{DefaultAllocator, OMatrix, OVector};
use sightline_core::linalg::{cholesky, ensure_finite, symmetrise};
use sightline_core::{Alloc, Gaussian, Model};

use crate::filter::{FilterError, Tag};

/// Which backward pass produced a [`SmoothedTrack`].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum SmootherKind {
    /// Rauch–Tung–Striebel over linearised transitions (`kf`, `ekf`, `iekf`).
    Rts,
    /// The sigma-point RTS smoother (`ukf`, `ckf`, `ghkf`, `srukf`).
    SigmaPointRts,
    /// The RTS pass on ensemble moments (`enkf`).
    EnsembleRts,
    /// Forward filtering–backward simulation with this many backward trajectories (`pf`).
    BackwardSimulation {
        /// Number of trajectories drawn.
        paths: usize,
    },
}

impl SmootherKind {
    /// A short name for reports.
    ///
    /// ```
    /// use sightline_filters::SmootherKind;
    /// assert_eq!(SmootherKind::Rts.name(), "rts");
    /// assert_eq!(SmootherKind::BackwardSimulation { paths: 100 }.name(), "ffbsi");
    /// ```
    pub fn name(&self) -> &'static str {
        match self {
            SmootherKind::Rts => "rts",
            SmootherKind::SigmaPointRts => "sigma-point-rts",
            SmootherKind::EnsembleRts => "ensemble-rts",
            SmootherKind::BackwardSimulation { .. } => "ffbsi",
        }
    }
}

/// Smoothed means and covariances of every recorded epoch, in step order.
#[derive(Debug, Clone, PartialEq)]
pub struct SmoothedTrack {
    /// The backward pass used.
    pub kind: SmootherKind,
    /// Smoothed mean of each epoch, model state order.
    pub means: Vec<Vec<f64>>,
    /// Smoothed covariance of each epoch, column-major `n × n`.
    pub covariances: Vec<Vec<f64>>,
}

impl SmoothedTrack {
    /// Number of epochs.
    pub fn len(&self) -> usize {
        self.means.len()
    }

    /// Whether no epoch was recorded.
    pub fn is_empty(&self) -> bool {
        self.means.is_empty()
    }

    /// Standard deviations (square roots of the covariance diagonal) of epoch `k`, or `None` if
    /// there is no such epoch.
    pub fn std_devs(&self, k: usize) -> Option<Vec<f64>> {
        let cov = self.covariances.get(k)?;
        let n = self.means.get(k)?.len();
        Some((0..n).map(|i| cov[i * n + i].max(0.0).sqrt()).collect())
    }
}

/// The moments of one prediction, as the RTS backward pass needs them.
#[derive(Debug, Clone, PartialEq)]
pub struct GaussianTransition<N: nalgebra::Dim>
where
    DefaultAllocator: nalgebra::allocator::Allocator<N> + nalgebra::allocator::Allocator<N, N>,
{
    /// Filtered belief before the prediction, (m(k), P(k)).
    pub filtered: Gaussian<N>,
    /// Predicted belief after it, (m⁻(k+1), P⁻(k+1)).
    pub predicted: Gaussian<N>,
    /// C = Cov(x(k), x(k+1) | y(0..k)), `n × n`.
    pub cross: OMatrix<f64, N, N>,
}

/// Why a backward pass failed: the epoch and what went wrong.
#[derive(Debug, Clone, PartialEq)]
pub struct SmootherFailure {
    /// Epoch at which the pass failed.
    pub epoch: usize,
    /// What went wrong, in words.
    pub reason: String,
}

/// The Rauch–Tung–Striebel backward pass (module docs) over `transitions` (epoch k → k+1, in
/// order) ending in the filtered belief `last` of the final epoch. Returns the smoothed belief of
/// every epoch: `transitions.len() + 1` of them.
///
/// ```
/// use sightline_filters::smoother::{GaussianTransition, rts};
/// # use sightline_core::prelude::*;
/// # #[derive(Clone, Parameters)] struct Walk;
/// # impl Model for Walk {
/// #   type State = U1; type Meas = U1;
/// #   fn declare(&self) -> Declaration {
/// #       Declaration::new("walk", 1.0).state("x", "-", 0.0, 1.0).measurement("y", "-").input("u", "-", 0.0)
/// #   }
/// #   fn transition<S: Real>(&self, x: &Vector1<S>, _: &[f64], _: f64, _: f64) -> Vector1<S> { *x }
/// #   fn measure<S: Real>(&self, x: &Vector1<S>, _: &[f64], _: f64) -> Vector1<S> { *x }
/// #   fn process_noise(&self, _: &Vector1<f64>, _: &[f64], _: f64, _: f64) -> Matrix1<f64> { Matrix1::new(1.0) }
/// #   fn measurement_noise(&self, _: f64) -> Matrix1<f64> { Matrix1::new(1.0) }
/// # }
/// // A random walk x(1) = x(0) + w, Var w = 1, from N(0, 1) at k = 0, seen once at k = 1 as
/// // y = 2 with unit noise: P⁻ = 2, filtered x(1) ~ N(4/3, 2/3), and x(0) | y ~ N(2/3, 2/3).
/// let step = GaussianTransition {
///     filtered: Gaussian::new(Vector1::new(0.0), Matrix1::new(1.0)),
///     predicted: Gaussian::new(Vector1::new(0.0), Matrix1::new(2.0)),
///     cross: Matrix1::new(1.0),
/// };
/// let last = Gaussian::new(Vector1::new(4.0 / 3.0), Matrix1::new(2.0 / 3.0));
/// let smoothed = rts(&Walk, &[step], &last).unwrap();
/// assert!((smoothed[0].mean[0] - 2.0 / 3.0).abs() < 1e-12);
/// assert!((smoothed[0].cov[(0, 0)] - 2.0 / 3.0).abs() < 1e-12);
/// ```
pub fn rts<M: Model>(
    model: &M,
    transitions: &[GaussianTransition<M::State>],
    last: &Gaussian<M::State>,
) -> Result<Vec<Gaussian<M::State>>, SmootherFailure>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    let mut smoothed = Vec::with_capacity(transitions.len() + 1);
    smoothed.push(last.clone());
    let mut next = last.clone();
    for (epoch, step) in transitions.iter().enumerate().rev() {
        let fail = |reason: String| SmootherFailure { epoch, reason };
        // G = C (P⁻)⁻¹, i.e. Gᵀ = (P⁻)⁻¹ Cᵀ with P⁻ symmetric.
        let chol = cholesky(&step.predicted.cov, "predicted covariance")
            .map_err(|e| fail(format!("smoother gain: {e}")))?;
        let gain = chol.solve(&step.cross.transpose()).transpose();
        let mut mean =
            &step.filtered.mean + &gain * model.state_residual(&next.mean, &step.predicted.mean);
        let mut cov =
            &step.filtered.cov + &gain * (&next.cov - &step.predicted.cov) * gain.transpose();
        symmetrise(&mut cov);
        ensure_finite(mean.iter(), "smoothed mean").map_err(|e| fail(e.to_string()))?;
        ensure_finite(cov.iter(), "smoothed covariance").map_err(|e| fail(e.to_string()))?;
        model.project(&mut mean);
        next = Gaussian::new(mean, cov);
        smoothed.push(next.clone());
    }
    smoothed.reverse();
    Ok(smoothed)
}

/// What a Gaussian filter records for its smoother: one [`GaussianTransition`] per prediction.
#[derive(Debug, Clone)]
pub(crate) struct GaussianRecord<N: nalgebra::Dim>
where
    DefaultAllocator: nalgebra::allocator::Allocator<N> + nalgebra::allocator::Allocator<N, N>,
{
    kind: SmootherKind,
    transitions: Vec<GaussianTransition<N>>,
    /// The filtered moments and cross-covariance of a prediction still in progress.
    pending: Option<(Gaussian<N>, OMatrix<f64, N, N>)>,
}

impl<N: nalgebra::Dim> GaussianRecord<N>
where
    DefaultAllocator: nalgebra::allocator::Allocator<N> + nalgebra::allocator::Allocator<N, N>,
{
    pub fn new(kind: SmootherKind) -> Self {
        GaussianRecord {
            kind,
            transitions: Vec::new(),
            pending: None,
        }
    }

    /// Starts a transition from the filtered belief (`mean`, `cov`) with cross-covariance `cross`.
    pub fn begin(
        &mut self,
        mean: &OVector<f64, N>,
        cov: &OMatrix<f64, N, N>,
        cross: OMatrix<f64, N, N>,
    ) {
        self.pending = Some((Gaussian::new(mean.clone(), cov.clone()), cross));
    }

    /// Completes the transition in progress with the predicted belief.
    pub fn complete(&mut self, mean: &OVector<f64, N>, cov: &OMatrix<f64, N, N>) {
        if let Some((filtered, cross)) = self.pending.take() {
            self.transitions.push(GaussianTransition {
                filtered,
                predicted: Gaussian::new(mean.clone(), cov.clone()),
                cross,
            });
        }
    }

    /// Smooths the record, the current belief (`mean`, `cov`) being the last epoch's.
    pub fn smooth<M: Model<State = N>>(
        &self,
        model: &M,
        tag: &Tag,
        mean: &OVector<f64, N>,
        cov: &OMatrix<f64, N, N>,
    ) -> Result<SmoothedTrack, FilterError>
    where
        DefaultAllocator: Alloc<N, M::Meas>,
    {
        if self.pending.is_some() {
            return Err(smoothing_error(
                tag,
                self.transitions.len() + 1,
                "the last prediction did not complete, so the forward pass has no final belief"
                    .into(),
            ));
        }
        let last = Gaussian::new(mean.clone(), cov.clone());
        let smoothed = rts(model, &self.transitions, &last)
            .map_err(|f| smoothing_error(tag, f.epoch, f.reason))?;
        Ok(SmoothedTrack {
            kind: self.kind,
            means: smoothed
                .iter()
                .map(|g| g.mean.as_slice().to_vec())
                .collect(),
            covariances: smoothed.iter().map(|g| g.cov.as_slice().to_vec()).collect(),
        })
    }
}

/// A [`FilterError::Smoothing`] for the filter `tag` at `epoch`.
pub(crate) fn smoothing_error(tag: &Tag, epoch: usize, reason: String) -> FilterError {
    FilterError::Smoothing {
        label: tag.label.clone(),
        step: epoch,
        reason,
    }
}
