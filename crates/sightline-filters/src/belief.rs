//! The Gaussian belief every Gaussian filter carries, the linearised (EKF-type) update, and the
//! recording of transition moments for the RTS smoothers ([`crate::smoother`]).

use nalgebra::{DefaultAllocator, OMatrix, OVector};
use sightline_core::linalg::{cholesky, ensure_finite, symmetrise};
use sightline_core::{Alloc, Gaussian, Model, NumericError};

use crate::filter::{FilterError, Tag};
use crate::smoother::{GaussianRecord, SmoothedTrack, SmootherKind};
use crate::update::{InnovationStore, mask_missing, present_mask};

/// Plant, label/step, mean, covariance and last innovation of a Gaussian filter.
#[derive(Debug, Clone)]
pub(crate) struct Belief<M: Model>
where
    DefaultAllocator: Alloc<M::State, M::Meas, M::Input>,
{
    pub model: M,
    pub tag: Tag,
    pub mean: OVector<f64, M::State>,
    pub cov: OMatrix<f64, M::State, M::State>,
    pub innov: InnovationStore<M::Meas>,
    /// Transition moments for the smoother, when recording.
    pub record: Option<GaussianRecord<M::State>>,
}

impl<M: Model> Belief<M>
where
    DefaultAllocator: Alloc<M::State, M::Meas, M::Input>,
{
    pub fn new(model: M, prior: Gaussian<M::State>, label: &str) -> Self {
        let m = model.meas_dim();
        Belief {
            model,
            tag: Tag::new(label),
            mean: prior.mean,
            cov: prior.cov,
            innov: InnovationStore::new(m),
            record: None,
        }
    }

    /// Starts recording transition moments for the smoother `kind` (once; later calls keep the
    /// record). Returns `true`: every Gaussian filter supports smoothing.
    pub fn start_recording(&mut self, kind: SmootherKind) -> bool {
        if self.record.is_none() {
            self.record = Some(GaussianRecord::new(kind));
        }
        true
    }

    /// Whether transition moments are being recorded (then the filter must call
    /// [`Belief::record_transition`] in its prediction).
    pub fn recording(&self) -> bool {
        self.record.is_some()
    }

    /// Records the filtered belief before a prediction, with the filter's cross-covariance
    /// C = Cov(x(k−1), x(k) | y(0..k−1)). Call it before the mean and covariance are overwritten;
    /// [`Belief::finish_predict`] completes the record with the predicted moments.
    pub fn record_transition(&mut self, cross: OMatrix<f64, M::State, M::State>) {
        if let Some(record) = &mut self.record {
            record.begin(&self.mean, &self.cov, cross);
        }
    }

    /// The RTS-smoothed track of the recorded run, `None` if not recording.
    pub fn smooth(&self) -> Option<Result<SmoothedTrack, FilterError>> {
        let record = self.record.as_ref()?;
        Some(record.smooth(&self.model, &self.tag, &self.mean, &self.cov))
    }

    /// The input slice as a model vector.
    pub fn input(&self, u: &[f64]) -> Result<OVector<f64, M::Input>, FilterError> {
        self.tag.vector(self.model.input_dim(), u, "input")
    }

    /// The measurement slice as a model vector, with the number of present components.
    pub fn measurement(&self, y: &[f64]) -> Result<(OVector<f64, M::Meas>, usize), FilterError> {
        let y = self.tag.vector(self.model.meas_dim(), y, "measurement")?;
        let present = present_mask(&y).map_err(|e| self.tag.numeric(e))?;
        Ok((y, present))
    }

    /// Checks the predicted moments, symmetrises the covariance and projects the mean.
    pub fn finish_predict(&mut self) -> Result<(), FilterError> {
        symmetrise(&mut self.cov);
        ensure_finite(self.mean.iter(), "predicted mean").map_err(|e| self.tag.numeric(e))?;
        ensure_finite(self.cov.iter(), "predicted covariance").map_err(|e| self.tag.numeric(e))?;
        self.model.project(&mut self.mean);
        if let Some(record) = &mut self.record {
            record.complete(&self.mean, &self.cov);
        }
        Ok(())
    }

    /// Update with a linearised measurement `y ≈ ŷ + H (x − x̄)`, with the Joseph-form
    /// covariance (I−KH)P(I−KH)ᵀ + KRKᵀ (Bucy & Joseph, *Filtering for Stochastic Processes*, 1968),
    /// which stays symmetric positive semi-definite for any gain and under round-off.
    ///
    /// `gain`: `None` computes the optimal gain K = P Hᵀ S⁻¹; `Some(K)` uses a fixed gain (its
    /// columns for missing components are ignored). Returns the gain used.
    pub fn linear_update(
        &mut self,
        y: &OVector<f64, M::Meas>,
        present: usize,
        predicted: &OVector<f64, M::Meas>,
        mut h: OMatrix<f64, M::Meas, M::State>,
        r: &OMatrix<f64, M::Meas, M::Meas>,
        gain: Option<&OMatrix<f64, M::State, M::Meas>>,
    ) -> Result<(), FilterError> {
        let tag = &self.tag;
        for i in 0..y.len() {
            if y[i].is_nan() {
                h.row_mut(i).fill(0.0);
            }
        }
        let mut residual = self.model.measurement_residual(y, predicted);
        let cross = &self.cov * h.transpose();
        let mut s = &h * &cross + r;
        mask_missing::<M::State, M::Meas>(y, &mut residual, &mut s, None);
        let chol = cholesky(&s, "innovation covariance").map_err(|e| tag.numeric(e))?;
        let k = match gain {
            Some(k) => {
                let mut k = k.clone();
                for i in 0..y.len() {
                    if y[i].is_nan() {
                        k.column_mut(i).fill(0.0);
                    }
                }
                k
            }
            None => chol.solve(&cross.transpose()).transpose(),
        };
        self.mean += &k * &residual;
        let (n, _) = self.cov.shape_generic();
        let i_kh = OMatrix::<f64, M::State, M::State>::identity_generic(n, n) - &k * &h;
        self.cov = &i_kh * &self.cov * i_kh.transpose() + &k * r * k.transpose();
        symmetrise(&mut self.cov);
        let weighted = chol.solve(&residual);
        self.innov.nis = residual.dot(&weighted);
        self.innov.log_likelihood = -0.5
            * (self.innov.nis + chol.ln_determinant() + present as f64 * crate::update::LN_2PI);
        self.innov.present = present;
        self.innov.residual = residual;
        self.innov.covariance = s;
        self.check_posterior()
    }

    /// Errors if the posterior holds a non-finite value; projects the mean.
    pub fn check_posterior(&mut self) -> Result<(), FilterError> {
        let check = |m: &Self| -> Result<(), NumericError> {
            ensure_finite(m.mean.iter(), "posterior mean")?;
            ensure_finite(m.cov.iter(), "posterior covariance")
        };
        check(self).map_err(|e| self.tag.numeric(e))?;
        self.model.project(&mut self.mean);
        Ok(())
    }
}

/// The `Filter` methods that only read the belief, identical for every Gaussian filter.
macro_rules! belief_accessors {
    ($field:ident) => {
        fn label(&self) -> &str {
            &self.$field.tag.label
        }
        fn mean(&self) -> &[f64] {
            self.$field.mean.as_slice()
        }
        fn covariance(&self) -> &[f64] {
            self.$field.cov.as_slice()
        }
        fn innovation(&self) -> Option<$crate::Innovation<'_>> {
            self.$field.innov.view()
        }
        fn log_likelihood_increment(&self) -> f64 {
            if self.$field.innov.present > 0 {
                self.$field.innov.log_likelihood
            } else {
                0.0
            }
        }
        fn smooth(&self) -> Option<Result<$crate::SmoothedTrack, $crate::FilterError>> {
            self.$field.smooth()
        }
    };
}
pub(crate) use belief_accessors;
