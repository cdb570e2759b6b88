//! The object-safe [`Filter`] trait every estimator implements, and its error type.

use nalgebra::allocator::Allocator;
use nalgebra::{DefaultAllocator, Dim, OVector, U1};
use sightline_core::{Alloc, Model, NumericError};
use thiserror::Error;

use crate::smoother::SmoothedTrack;

/// A recursive state estimator over `f64`, as the runner sees it.
///
/// Object-safe so that filters of different kinds and plants of different sizes sit in one
/// `Vec<Box<dyn Filter>>`. Vectors cross the trait as slices in model order; matrices as
/// column-major slices. Nothing here allocates: the slices view the filter's own buffers
/// (recording for a smoother, an offline analysis, is the exception: see [`crate::smoother`]).
///
/// The time line of one dataset row `k` is: `predict(u(k-1), t(k-1), t(k) - t(k-1))` (skipped for
/// the first row, whose prior is the model's), then `update(y(k), u(k), t(k))`. A NaN component of
/// `y` is a missing measurement: only the present components are used, so multi-rate and
/// intermittent sensors work without special cases.
///
/// `Filter` does not require `Send`: nalgebra cannot prove it for generic plant sizes. Build
/// filters on the thread that runs them (the runner builds one set per Monte Carlo run).
pub trait Filter {
    /// The filter's label: the spec string as the user gave it (e.g. `ukf:alpha=0.5`).
    fn label(&self) -> &str;
    /// The filter kind (`kf`, `ekf`, `ukf`, ...).
    fn kind(&self) -> &'static str;
    /// Propagates the estimate over `dt` seconds from time `t` with input `u`.
    fn predict(&mut self, u: &[f64], t: f64, dt: f64) -> Result<(), FilterError>;
    /// Corrects the estimate with measurement `y` taken at time `t` (NaN components are missing).
    fn update(&mut self, y: &[f64], u: &[f64], t: f64) -> Result<(), FilterError>;
    /// Current posterior mean, in model state order.
    fn mean(&self) -> &[f64];
    /// Current posterior covariance, column-major `n × n`.
    fn covariance(&self) -> &[f64];
    /// The innovation of the last update, or `None` if it used no measurement component.
    fn innovation(&self) -> Option<Innovation<'_>>;
    /// `ln p(y(k) | y(0..k))` of the last update under the filter's own predictive
    /// distribution (0 when no component was present). Summed over a run: the log-likelihood
    /// by prediction-error decomposition.
    fn log_likelihood_increment(&self) -> f64;
    /// Counters of opt-in remedies and internal events (gated updates, re-draws, iterations).
    fn diagnostics(&self) -> Diagnostics {
        Diagnostics::default()
    }
    /// Asks the filter to keep what its smoother needs from now on; call it before the first
    /// step. Returns whether the filter supports smoothing (the default: it does not). Recording
    /// allocates as the run grows, so it is for offline analysis; see [`crate::smoother`].
    fn record_for_smoothing(&mut self) -> bool {
        false
    }
    /// After the forward pass: the smoothed mean and covariance of every recorded epoch in step
    /// order (see [`crate::smoother`] for what an epoch is), or `None` if the filter does not
    /// support smoothing or was not asked to record.
    fn smooth(&self) -> Option<Result<SmoothedTrack, FilterError>> {
        None
    }
}

/// The innovation (measurement residual) of the last update and its predicted covariance.
///
/// Missing components have residual 0 and a unit diagonal with zero off-diagonal entries in
/// `covariance`, so `nis` and `present` already account for them.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Innovation<'a> {
    /// `y − ŷ` in measurement order (0 for missing components).
    pub residual: &'a [f64],
    /// Innovation covariance, column-major `m × m`.
    pub covariance: &'a [f64],
    /// Number of measurement components present: the degrees of freedom of the NIS.
    pub present: usize,
    /// Normalised innovation squared νᵀS⁻¹ν over the present components.
    pub nis: f64,
}

/// Counters a filter keeps over a run.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Diagnostics {
    /// Updates skipped by χ² gating.
    pub gated: u64,
    /// Covariance repairs performed.
    pub repaired: u64,
    /// Particle re-draws after a collapse.
    pub redraws: u64,
    /// Resampling events.
    pub resamples: u64,
    /// Extra stages of tempered particle-filter updates (each one a resampling).
    pub tempered: u64,
    /// Iterations of iterated updates, summed.
    pub iterations: u64,
}

/// Why a filter step failed. Every variant names the filter and the step.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum FilterError {
    /// A numerical failure: lost positive-definiteness or a non-finite value.
    #[error("filter '{label}' failed at step {step}: {source}")]
    Numeric {
        /// Filter label.
        label: String,
        /// Step (dataset row) at which it failed.
        step: usize,
        /// What went wrong.
        source: NumericError,
    },
    /// Every particle weight vanished (e.g. after an outlier measurement).
    #[error(
        "filter '{label}' failed at step {step}: particle collapse (every weight is zero or NaN); \
         the measurement may be an outlier — enable re-draw with `redraw=on`"
    )]
    Collapse {
        /// Filter label.
        label: String,
        /// Step at which it collapsed.
        step: usize,
    },
    /// The smoother's backward pass failed (after a forward pass that succeeded).
    #[error("smoother of filter '{label}' failed at step {step}: {reason}")]
    Smoothing {
        /// Filter label.
        label: String,
        /// Epoch (dataset row, with the runner's time line) at which the backward pass failed.
        step: usize,
        /// What went wrong and what would fix it.
        reason: String,
    },
    /// A vector of the wrong length crossed the trait.
    #[error("filter '{label}': {what} has {got} values, the model expects {expected}")]
    Dimension {
        /// Filter label.
        label: String,
        /// Which vector ("input", "measurement").
        what: &'static str,
        /// Length given.
        got: usize,
        /// Length expected.
        expected: usize,
    },
}

/// Label and step counter shared by every filter, and the conversions they all need.
#[derive(Debug, Clone)]
pub(crate) struct Tag {
    pub label: String,
    pub step: usize,
    /// Number of plant inputs, counted once from the declaration (checked on every step).
    pub inputs: usize,
}

impl Tag {
    pub fn new<M: Model>(label: &str, model: &M) -> Self
    where
        DefaultAllocator: Alloc<M::State, M::Meas>,
    {
        Tag {
            label: label.to_string(),
            step: 0,
            inputs: model.declare().inputs().len(),
        }
    }

    /// The input slice, checked against the plant's number of inputs.
    // Inlined into every (generic, downstream-instantiated) filter step: a call across crates
    // for a length comparison measured 18 instructions a step (`benches/callgrind.py`).
    #[inline]
    pub fn input<'a>(&self, u: &'a [f64]) -> Result<&'a [f64], FilterError> {
        if u.len() != self.inputs {
            return Err(self.wrong_input_length(u.len()));
        }
        Ok(u)
    }

    /// The error of [`Tag::input`], kept out of line.
    #[cold]
    #[inline(never)]
    fn wrong_input_length(&self, got: usize) -> FilterError {
        FilterError::Dimension {
            label: self.label.clone(),
            what: "input",
            got,
            expected: self.inputs,
        }
    }

    /// Wraps a numerical error with the label and step.
    pub fn numeric(&self, source: NumericError) -> FilterError {
        FilterError::Numeric {
            label: self.label.clone(),
            step: self.step,
            source,
        }
    }

    /// Copies a slice into a vector of dimension `d`, checking the length.
    pub fn vector<D: Dim>(
        &self,
        d: D,
        values: &[f64],
        what: &'static str,
    ) -> Result<OVector<f64, D>, FilterError>
    where
        DefaultAllocator: Allocator<D>,
    {
        if values.len() != d.value() {
            return Err(FilterError::Dimension {
                label: self.label.clone(),
                what,
                got: values.len(),
                expected: d.value(),
            });
        }
        Ok(OVector::<f64, D>::from_column_slice_generic(d, U1, values))
    }
}
