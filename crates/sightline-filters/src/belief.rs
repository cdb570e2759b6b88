//! The Gaussian belief every Gaussian filter carries, the linearised (EKF-type) update, and the
//! recording of transition moments for the RTS smoothers ([`crate::smoother`]), and the opt-in
//! remedies every Gaussian filter shares ([`Remedies`]: covariance repair and χ² gating).

use nalgebra::{DefaultAllocator, Dim, OMatrix, OVector};
use sightline_core::linalg::{cholesky, ensure_finite, floor_eigenvalues, symmetrise};
use sightline_core::{Alloc, Gaussian, Model, NumericError};

use crate::filter::{Diagnostics, FilterError, Tag};
use crate::smoother::{GaussianRecord, SmoothedTrack, SmootherKind};
use crate::spec::{OptionInfo, Options, SpecError};
use crate::update::{InnovationStore, mask_missing, present_mask};

/// Spec option `repair`: covariance repair on or off.
pub(crate) const REPAIR: OptionInfo = OptionInfo {
    key: "repair",
    default: "off",
    about: "on: after every step symmetrise P (and S) and raise eigenvalues below floor·λmax to \
            it (counted in diagnostics.repaired)",
};

/// Spec option `floor`: the relative eigenvalue floor of covariance repair.
pub(crate) const FLOOR: OptionInfo = OptionInfo {
    key: "floor",
    default: "1e-12",
    about: "relative eigenvalue floor of repair, in (0, 1); giving it turns repair on",
};

/// Spec option `gate`: χ² gating of outlier measurements.
pub(crate) const GATE: OptionInfo = OptionInfo {
    key: "gate",
    default: "off",
    about: "probability p in (0, 1): an update whose NIS exceeds the χ²(m) p-quantile is skipped \
            (counted in diagnostics.gated)",
};

/// Opt-in remedies of the Gaussian filters, read from the spec options [`REPAIR`], [`FLOOR`]
/// and [`GATE`].
///
/// - **Covariance repair** (`repair=on`, `floor=1e-12`): after each predict and update the
///   state covariance — and, before it is factorised, the innovation covariance — is
///   symmetrised and its eigenvalues below `floor · ρ` (ρ the spectral radius, λmax for a
///   semi-definite matrix) are raised to that level
///   ([`floor_eigenvalues`]). A matrix that meets the floor is left untouched, so on a healthy
///   filter repair changes nothing; each change counts in [`Diagnostics::repaired`]. It turns a
///   covariance that round-off or a poor model pushed indefinite into the nearest usable one,
///   at the price of a bias the count reveals.
/// - **χ² gating** (`gate=p`): an update whose normalised innovation squared exceeds the
///   `p`-quantile of χ²(k), k the number of measurement components present, is skipped: the
///   posterior is the prediction, the step contributes no innovation and no log-likelihood, and
///   it counts in [`Diagnostics::gated`] (validation gating, Bar-Shalom, Li & Kirubarajan,
///   *Estimation with Applications to Tracking and Navigation*, 2001, §5.4 and §7.3). The
///   thresholds are computed once, when the filter is built.
#[derive(Debug, Clone, Default, PartialEq)]
pub(crate) struct Remedies {
    /// Relative eigenvalue floor, when repair is on.
    pub floor: Option<f64>,
    /// NIS thresholds by number of components present (index k − 1), when gating is on.
    pub gate: Option<Vec<f64>>,
}

impl Remedies {
    /// Reads `repair`, `floor` and `gate` for a plant with `measurements` components.
    pub fn from_options(opts: &Options<'_>, measurements: usize) -> Result<Self, SpecError> {
        let repair = opts.switch(REPAIR.key, false)?;
        let floor = opts.real(
            FLOOR.key,
            1e-12,
            |f| f > 0.0 && f < 1.0,
            "a number strictly between 0 and 1, e.g. 1e-12",
        )?;
        let floor_given = opts.text(FLOOR.key).is_some();
        if floor_given && opts.text(REPAIR.key).is_some() && !repair {
            return Err(opts.bad_value(
                FLOOR.key,
                "no floor with repair=off (giving floor turns repair on)",
            ));
        }
        let gate = match opts.text(GATE.key) {
            None => None,
            Some(v) if v.eq_ignore_ascii_case("off") => None,
            Some(v) => {
                let expected = "off or a probability strictly between 0 and 1, e.g. 0.999";
                let p = v
                    .parse::<f64>()
                    .ok()
                    .filter(|p| *p > 0.0 && *p < 1.0)
                    .ok_or_else(|| opts.bad_value(GATE.key, expected))?;
                let thresholds: Option<Vec<f64>> = (1..=measurements)
                    .map(|k| sightline_core::chi2::quantile(k as f64, p))
                    .collect();
                Some(thresholds.ok_or_else(|| opts.bad_value(GATE.key, expected))?)
            }
        };
        Ok(Remedies {
            floor: (repair || floor_given).then_some(floor),
            gate,
        })
    }

    /// Applies covariance repair to `p` if it is on; returns whether `p` was changed.
    pub fn repair<N: Dim>(&self, p: &mut OMatrix<f64, N, N>) -> bool
    where
        DefaultAllocator: nalgebra::allocator::Allocator<N, N>,
    {
        match self.floor {
            Some(floor) => floor_eigenvalues(p, floor),
            None => false,
        }
    }

    /// Whether an update with normalised innovation squared `nis` over `present` components is
    /// gated out.
    pub fn gates(&self, nis: f64, present: usize) -> bool {
        match &self.gate {
            Some(thresholds) => present
                .checked_sub(1)
                .and_then(|k| thresholds.get(k))
                .is_some_and(|&limit| nis > limit),
            None => false,
        }
    }
}

/// Plant, label/step, mean, covariance and last innovation of a Gaussian filter.
#[derive(Debug, Clone)]
pub(crate) struct Belief<M: Model>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    pub model: M,
    pub tag: Tag,
    pub mean: OVector<f64, M::State>,
    pub cov: OMatrix<f64, M::State, M::State>,
    pub innov: InnovationStore<M::Meas>,
    /// Transition moments for the smoother, when recording.
    pub record: Option<GaussianRecord<M::State>>,
    /// Opt-in remedies (set by the spec builders).
    pub remedies: Remedies,
    /// Counters reported by [`crate::Filter::diagnostics`].
    pub diagnostics: Diagnostics,
}

impl<M: Model> Belief<M>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    pub fn new(model: M, prior: Gaussian<M::State>, label: &str) -> Self {
        let m = model.meas_dim();
        let tag = Tag::new(label, &model);
        Belief {
            model,
            tag,
            mean: prior.mean,
            cov: prior.cov,
            innov: InnovationStore::new(m),
            record: None,
            remedies: Remedies::default(),
            diagnostics: Diagnostics::default(),
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

    /// The input slice, checked against the plant's number of inputs.
    pub fn input<'a>(&self, u: &'a [f64]) -> Result<&'a [f64], FilterError> {
        self.tag.input(u)
    }

    /// The measurement slice as a model vector, with the number of present components.
    pub fn measurement(&self, y: &[f64]) -> Result<(OVector<f64, M::Meas>, usize), FilterError> {
        let y = self.tag.vector(self.model.meas_dim(), y, "measurement")?;
        let present = present_mask(&y).map_err(|e| self.tag.numeric(e))?;
        Ok((y, present))
    }

    /// Checks the predicted moments, symmetrises (and with `repair=on` repairs) the covariance
    /// and projects the mean.
    pub fn finish_predict(&mut self) -> Result<(), FilterError> {
        symmetrise(&mut self.cov);
        ensure_finite(self.mean.iter(), "predicted mean").map_err(|e| self.tag.numeric(e))?;
        ensure_finite(self.cov.iter(), "predicted covariance").map_err(|e| self.tag.numeric(e))?;
        self.repair_covariance();
        self.model.project(&mut self.mean);
        if let Some(record) = &mut self.record {
            record.complete(&self.mean, &self.cov);
        }
        Ok(())
    }

    /// Repairs the state covariance if repair is on, counting a change.
    pub fn repair_covariance(&mut self) {
        if self.remedies.repair(&mut self.cov) {
            self.diagnostics.repaired += 1;
        }
    }

    /// Repairs an innovation covariance if repair is on, counting a change.
    pub fn repair_innovation(&mut self, s: &mut OMatrix<f64, M::Meas, M::Meas>) {
        if self.remedies.repair(s) {
            self.diagnostics.repaired += 1;
        }
    }

    /// Whether the gate rejects an update with this NIS; counts it and clears the innovation
    /// (the step then used no measurement) if so.
    pub fn gate(&mut self, nis: f64, present: usize) -> bool {
        if self.remedies.gates(nis, present) {
            self.diagnostics.gated += 1;
            self.innov.clear();
            return true;
        }
        false
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
        for i in 0..y.len() {
            if y[i].is_nan() {
                h.row_mut(i).fill(0.0);
            }
        }
        let mut residual = self.model.measurement_residual(y, predicted);
        let cross = &self.cov * h.transpose();
        let mut s = &h * &cross + r;
        mask_missing::<M::State, M::Meas>(y, &mut residual, &mut s, None);
        self.repair_innovation(&mut s);
        let tag = &self.tag;
        let chol = cholesky(&s, "innovation covariance").map_err(|e| tag.numeric(e))?;
        let weighted = chol.solve(&residual);
        let nis = residual.dot(&weighted);
        if self.gate(nis, present) {
            return self.check_posterior();
        }
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
        self.innov.nis = nis;
        self.innov.log_likelihood = -0.5
            * (self.innov.nis + chol.ln_determinant() + present as f64 * crate::update::LN_2PI);
        self.innov.present = present;
        self.innov.residual = residual;
        self.innov.covariance = s;
        self.check_posterior()
    }

    /// Errors if the posterior holds a non-finite value; with `repair=on` repairs the
    /// covariance; projects the mean.
    pub fn check_posterior(&mut self) -> Result<(), FilterError> {
        let check = |m: &Self| -> Result<(), NumericError> {
            ensure_finite(m.mean.iter(), "posterior mean")?;
            ensure_finite(m.cov.iter(), "posterior covariance")
        };
        check(self).map_err(|e| self.tag.numeric(e))?;
        self.repair_covariance();
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
        fn diagnostics(&self) -> $crate::Diagnostics {
            self.$field.diagnostics
        }
    };
}
pub(crate) use belief_accessors;
