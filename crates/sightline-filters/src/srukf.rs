//! `srukf`: the square-root unscented Kalman filter, which propagates a Cholesky factor of the
//! covariance instead of the covariance itself (van der Merwe & Wan, "The square-root unscented
//! Kalman filter for state and parameter-estimation", ICASSP 2001, Alg. 3.1).
//!
//! With S the lower-triangular factor of P (P = S Sᵀ), points χᵢ = x̂ + S ξᵢ of the scaled
//! unscented rule (options `alpha`, `beta`, `kappa` as for `ukf`) and weights Wᵐ, Wᶜ:
//!
//! ```text
//! predict:  Xᵢ = f(χᵢ),  x̂⁻ = Σ Wᵐᵢ Xᵢ
//!           S⁻ = qr([√Wᶜᵢ (Xᵢ − x̂⁻)]ᵢ≥₁, √Q)          (triangular factor of the stack)
//!           S⁻ = cholupdate(S⁻, √|Wᶜ₀| (X₀ − x̂⁻), sign Wᶜ₀)
//! update:   points redrawn from (x̂⁻, S⁻), Yᵢ = h(χᵢ), ŷ = Σ Wᵐᵢ Yᵢ
//!           S_y = qr([√Wᶜᵢ (Yᵢ − ŷ)]ᵢ≥₁, √R), then cholupdate with the centre point
//!           P_xy = Σ Wᶜᵢ (χᵢ − x̂⁻)(Yᵢ − ŷ)ᵀ,  K = P_xy S_y⁻ᵀ S_y⁻¹
//!           x̂ = x̂⁻ + K (y − ŷ),  S = cholupdate(S⁻, K S_y, −1)  (one downdate per column)
//! ```
//!
//! The "qr" step is an in-place Householder LQ triangularisation
//! ([`sightline_core::linalg::lower_triangular_factor`]) of an `n × (L−1+n)` stack allocated
//! once at construction; the rank-one steps are in-place Givens/hyperbolic rotations
//! ([`sightline_core::linalg::cholesky_rank_one`]). With static plant sizes a step allocates
//! nothing. The gain is never formed: U = K S_y = P_xy S_y⁻ᵀ = Wᵀ with W = S_y⁻¹ P_xyᵀ, one
//! triangular solve, and K ν = Wᵀ S_y⁻¹ ν.
//!
//! The centre weight Wᶜ₀ (and any other negative weight) enters by a rank-one update or, when
//! negative (small α), a downdate. A downdate that would lose positive-definiteness is reported as
//! [`sightline_core::NumericError::NotPositiveDefinite`] naming the covariance, never as NaN.
//! √Q and √R are lower-triangular factors that allow zero pivots, so noise-free states work.
//! Missing measurement components get the same exact treatment as in the other Gaussian filters:
//! their rows of the measurement stack are blanked and R's row and column become the identity's,
//! so S_y is block-diagonal with an identity block and the gain has zero columns for them.
//!
//! Remedies (`repair`, `floor`, `gate`, shared with the other Gaussian filters): with
//! `repair=on` a rank-one downdate that would lose positive-definiteness falls back to forming
//! the full matrix, repairing it and factorising it afresh (counted as a repair), and a P
//! repaired by the eigenvalue floor is refactorised; `gate` skips outlier updates as in the
//! other filters.
//!
//! Mathematically the filter equals `ukf` with the same options. It keeps the covariance
//! positive semi-definite by construction, and the factor's condition number is the square root
//! of the covariance's, which is what makes square-root forms robust in finite precision.
//!
//! Smoothing: the prediction points and their images give the cross-covariance of the
//! sigma-point RTS smoother (Särkkä, IEEE TAC 53(3), 2008); the backward pass works on the
//! covariance P = S Sᵀ ([`crate::smoother`]).

use nalgebra::{DefaultAllocator, Dim, Dyn, OMatrix, OVector};
use sightline_core::linalg::{
    cholesky, cholesky_rank_one, ensure_finite, lower_triangular_factor, semidefinite_factor,
    symmetrise,
};
use sightline_core::{Alloc, Gaussian, Model, NumericError, SigmaRule};

use crate::belief::{Belief, Remedies, belief_accessors};
use crate::filter::{Filter, FilterError};
use crate::registry::KindInfo;
use crate::sigma_point::{UKF, unscented_rule};
use crate::smoother::SmootherKind;
use crate::spec::{FilterSpec, SpecError};
use crate::update::{LN_2PI, mask_missing};

/// Registry entry: the same options as `ukf`.
pub const INFO: KindInfo = KindInfo {
    kind: "srukf",
    about: "square-root UKF: propagates Cholesky factors by QR and rank-one updates",
    options: UKF.options,
    linear_only: false,
    sampling: false,
};

/// Square-root unscented Kalman filter over plant `M`.
#[derive(Debug, Clone)]
pub struct SquareRootUkf<M: Model>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    belief: Belief<M>,
    /// Lower-triangular S with P = S Sᵀ; `belief.cov` mirrors S Sᵀ for the accessors.
    factor: OMatrix<f64, M::State, M::State>,
    unit: OMatrix<f64, M::State, Dyn>,
    wm: Vec<f64>,
    wc: Vec<f64>,
    points: OMatrix<f64, M::State, Dyn>,
    mapped: OMatrix<f64, M::State, Dyn>,
    meas_points: OMatrix<f64, M::Meas, Dyn>,
    /// `n × (L−1+n)`: weighted state deviations of points 1.., then √Q.
    state_stack: OMatrix<f64, M::State, Dyn>,
    /// `m × (L−1+m)`: weighted measurement deviations of points 1.., then √R.
    meas_stack: OMatrix<f64, M::Meas, Dyn>,
}

impl<M: Model> SquareRootUkf<M>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    /// A square-root filter with sigma-point `rule` (the registry uses the scaled unscented
    /// rule), starting from `prior`. Fails if the rule has no points for the plant's dimension or
    /// the prior covariance is not positive semi-definite.
    pub fn new(
        model: M,
        prior: Gaussian<M::State>,
        rule: SigmaRule,
        label: &str,
    ) -> Result<Self, SpecError> {
        let not_applicable = |reason: String| SpecError::NotApplicable {
            spec: label.to_string(),
            reason,
        };
        let n = model.state_dim();
        let m = model.meas_dim();
        let sp = rule
            .points(n.value())
            .map_err(|e| not_applicable(e.to_string()))?;
        let factor = semidefinite_factor(&prior.cov, "prior covariance")
            .map_err(|e| not_applicable(e.to_string()))?;
        let count = sp.unit.ncols();
        let unit = OMatrix::<f64, M::State, Dyn>::from_column_slice_generic(
            n,
            Dyn(count),
            sp.unit.as_slice(),
        );
        let deviations = count.saturating_sub(1);
        Ok(SquareRootUkf {
            belief: Belief::new(model, prior, label),
            factor,
            points: unit.clone(),
            mapped: unit.clone(),
            unit,
            wm: sp.wm,
            wc: sp.wc,
            meas_points: OMatrix::zeros_generic(m, Dyn(count)),
            state_stack: OMatrix::zeros_generic(n, Dyn(deviations + n.value())),
            meas_stack: OMatrix::zeros_generic(m, Dyn(deviations + m.value())),
        })
    }

    /// The current lower-triangular covariance factor S (P = S Sᵀ).
    pub fn factor(&self) -> &OMatrix<f64, M::State, M::State> {
        &self.factor
    }

    /// Fills `points` with x̂ + S ξᵢ.
    fn spread(&mut self) {
        let b = &self.belief;
        for (i, xi) in self.unit.column_iter().enumerate() {
            let point = &b.mean + &self.factor * xi;
            self.points.set_column(i, &point);
        }
    }

    /// Whether point `i` enters by a rank-one step rather than the stack: the centre point (as in
    /// van der Merwe & Wan) and any point with a negative weight (which needs a downdate).
    fn by_rank_one(&self, i: usize) -> bool {
        i == 0 || self.wc[i] < 0.0
    }

    /// Sets S and mirrors P = S Sᵀ.
    fn set_factor(&mut self, factor: OMatrix<f64, M::State, M::State>) {
        self.belief.cov = &factor * factor.transpose();
        symmetrise(&mut self.belief.cov);
        self.factor = factor;
    }

    /// After the belief's checks: if covariance repair changed P (`repaired` counted past
    /// `before`), the factor is recomputed from the repaired P.
    fn refactor_if_repaired(&mut self, before: u64) -> Result<(), FilterError> {
        if self.belief.diagnostics.repaired == before {
            return Ok(());
        }
        let chol = cholesky(&self.belief.cov, "repaired covariance")
            .map_err(|e| self.belief.tag.numeric(e))?;
        self.factor = chol.l();
        Ok(())
    }
}

/// The `repair=on` fallback of a rank-one downdate that lost positive-definiteness: the full
/// matrix `p` (formed by the caller) is repaired and factorised afresh. Without repair the
/// downdate's `failure` stands. Each fallback counts as one repair.
fn refactor_repaired<D: Dim>(
    remedies: &Remedies,
    mut p: OMatrix<f64, D, D>,
    failure: NumericError,
    repaired: &mut u64,
) -> Result<OMatrix<f64, D, D>, NumericError>
where
    DefaultAllocator: nalgebra::allocator::Allocator<D, D>,
{
    if remedies.floor.is_none() {
        return Err(failure);
    }
    symmetrise(&mut p);
    remedies.repair(&mut p);
    *repaired += 1;
    let quantity = match failure {
        NumericError::NotPositiveDefinite { quantity } | NumericError::NonFinite { quantity } => {
            quantity
        }
    };
    cholesky(&p, quantity).map(|c| c.l())
}

/// Builds an `srukf` from a spec.
pub fn build<M: Model>(
    model: &M,
    prior: &Gaussian<M::State>,
    spec: &FilterSpec,
    _seed: u64,
) -> Result<Box<dyn Filter>, SpecError>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    let rule = unscented_rule(spec)?;
    let remedies = Remedies::from_options(&spec.options(INFO.options)?, model.meas_dim().value())?;
    let mut filter = SquareRootUkf::new(model.clone(), prior.clone(), rule, &spec.label)?;
    filter.belief.remedies = remedies;
    Ok(Box::new(filter))
}

/// Blanks the components of a measurement deviation that are missing in `y`.
fn blank_missing<D: Dim>(y: &OVector<f64, D>, e: &mut OVector<f64, D>)
where
    DefaultAllocator: nalgebra::allocator::Allocator<D>,
{
    for (ek, yk) in e.iter_mut().zip(y.iter()) {
        if yk.is_nan() {
            *ek = 0.0;
        }
    }
}

impl<M: Model> Filter for SquareRootUkf<M>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    belief_accessors!(belief);

    fn kind(&self) -> &'static str {
        INFO.kind
    }

    fn record_for_smoothing(&mut self) -> bool {
        self.belief.start_recording(SmootherKind::SigmaPointRts)
    }

    fn predict(&mut self, u: &[f64], t: f64, dt: f64) -> Result<(), FilterError> {
        self.belief.tag.step += 1;
        let u = self.belief.input(u)?;
        self.spread();
        let b = &self.belief;
        let numeric = |e: NumericError| b.tag.numeric(e);
        for i in 0..self.points.ncols() {
            let x: OVector<f64, M::State> = self.points.column(i).into_owned();
            self.mapped.set_column(i, &b.model.transition(&x, u, t, dt));
        }
        let mean = b.model.state_mean(&self.mapped, &self.wm);
        ensure_finite(mean.iter(), "predicted mean").map_err(numeric)?;
        let q = b.model.process_noise(&b.mean, u, t, dt);
        let q_factor = semidefinite_factor(&q, "process noise covariance").map_err(numeric)?;
        let deviations = self.mapped.ncols() - 1;
        for i in 1..self.mapped.ncols() {
            if self.by_rank_one(i) {
                self.state_stack.column_mut(i - 1).fill(0.0);
            } else {
                let x: OVector<f64, M::State> = self.mapped.column(i).into_owned();
                let d = b.model.state_residual(&x, &mean) * self.wc[i].sqrt();
                self.state_stack.set_column(i - 1, &d);
            }
        }
        for j in 0..q_factor.ncols() {
            self.state_stack
                .set_column(deviations + j, &q_factor.column(j));
        }
        ensure_finite(self.state_stack.iter(), "predicted sigma-point spread").map_err(numeric)?;
        let mut factor = lower_triangular_factor(&mut self.state_stack);
        let stacked = factor.clone();
        let mut failure = None;
        for i in 0..self.mapped.ncols() {
            let w = self.wc[i];
            if !self.by_rank_one(i) || w == 0.0 {
                continue;
            }
            let x: OVector<f64, M::State> = self.mapped.column(i).into_owned();
            let mut d = b.model.state_residual(&x, &mean) * w.abs().sqrt();
            if let Err(e) = cholesky_rank_one(&mut factor, &mut d, w < 0.0, "predicted covariance")
            {
                failure = Some(e);
                break;
            }
        }
        let mut repaired = 0;
        if let Some(failure) = failure {
            // P⁻ in full: the stack's Gram matrix plus the rank-one terms.
            let mut p = &stacked * stacked.transpose();
            for i in 0..self.mapped.ncols() {
                let w = self.wc[i];
                if self.by_rank_one(i) && w != 0.0 {
                    let x: OVector<f64, M::State> = self.mapped.column(i).into_owned();
                    let d = b.model.state_residual(&x, &mean);
                    p.ger(w, &d, &d, 1.0);
                }
            }
            factor = refactor_repaired(&b.remedies, p, failure, &mut repaired).map_err(numeric)?;
        }
        self.belief.diagnostics.repaired += repaired;
        if self.belief.recording() {
            // Cross-covariance of the prediction points χᵢ = x̂ + S ξᵢ and Xᵢ = f(χᵢ), as for the
            // ukf (Särkkä 2008); the centre weight may be negative, which a sum handles as is.
            let b = &self.belief;
            let (n, _) = self.factor.shape_generic();
            let mut cross = OMatrix::<f64, M::State, M::State>::zeros_generic(n, n);
            for (i, &w) in self.wc.iter().enumerate() {
                let x: OVector<f64, M::State> = self.points.column(i).into_owned();
                let fx: OVector<f64, M::State> = self.mapped.column(i).into_owned();
                let d = b.model.state_residual(&x, &b.mean);
                let e = b.model.state_residual(&fx, &mean);
                cross.ger(w, &d, &e, 1.0);
            }
            self.belief.record_transition(cross);
        }
        self.belief.mean = mean;
        self.set_factor(factor);
        let before = self.belief.diagnostics.repaired;
        self.belief.finish_predict()?;
        self.refactor_if_repaired(before)
    }

    fn update(&mut self, y: &[f64], u: &[f64], t: f64) -> Result<(), FilterError> {
        let u = self.belief.input(u)?;
        let (y, present) = self.belief.measurement(y)?;
        if present == 0 {
            self.belief.innov.clear();
            return Ok(());
        }
        self.spread();
        let b = &self.belief;
        let numeric = |e: NumericError| b.tag.numeric(e);
        for i in 0..self.points.ncols() {
            let x: OVector<f64, M::State> = self.points.column(i).into_owned();
            self.meas_points.set_column(i, &b.model.measure(&x, u, t));
        }
        let predicted = b.model.measurement_mean(&self.meas_points, &self.wm);
        ensure_finite(predicted.iter(), "predicted measurement").map_err(numeric)?;
        let mut r = b.model.measurement_noise(t);
        let mut residual = b.model.measurement_residual(&y, &predicted);
        mask_missing::<M::State, M::Meas>(&y, &mut residual, &mut r, None);
        let r_factor = semidefinite_factor(&r, "measurement noise covariance").map_err(numeric)?;
        let deviation = |i: usize| {
            let z: OVector<f64, M::Meas> = self.meas_points.column(i).into_owned();
            let mut e = b.model.measurement_residual(&z, &predicted);
            blank_missing(&y, &mut e);
            e
        };
        let deviations = self.meas_points.ncols() - 1;
        for i in 1..self.meas_points.ncols() {
            if self.by_rank_one(i) {
                self.meas_stack.column_mut(i - 1).fill(0.0);
            } else {
                let e = deviation(i) * self.wc[i].sqrt();
                self.meas_stack.set_column(i - 1, &e);
            }
        }
        for j in 0..r_factor.ncols() {
            self.meas_stack
                .set_column(deviations + j, &r_factor.column(j));
        }
        ensure_finite(self.meas_stack.iter(), "innovation sigma-point spread").map_err(numeric)?;
        let mut sy = lower_triangular_factor(&mut self.meas_stack);
        let stacked = sy.clone();
        let mut failure = None;
        for i in 0..self.meas_points.ncols() {
            let w = self.wc[i];
            if !self.by_rank_one(i) || w == 0.0 {
                continue;
            }
            let mut e = deviation(i) * w.abs().sqrt();
            if let Err(e) = cholesky_rank_one(&mut sy, &mut e, w < 0.0, "innovation covariance") {
                failure = Some(e);
                break;
            }
        }
        let mut repaired = 0;
        if let Some(failure) = failure {
            let mut s_full = &stacked * stacked.transpose();
            for i in 0..self.meas_points.ncols() {
                let w = self.wc[i];
                if self.by_rank_one(i) && w != 0.0 {
                    let e = deviation(i);
                    s_full.ger(w, &e, &e, 1.0);
                }
            }
            sy = refactor_repaired(&b.remedies, s_full, failure, &mut repaired).map_err(numeric)?;
        }
        // Cross-covariance P_xy = Σ Wᶜᵢ (χᵢ − x̂⁻)(Yᵢ − ŷ)ᵀ (missing columns are zero).
        let (n, _) = self.factor.shape_generic();
        let (m, _) = r.shape_generic();
        let mut cross = OMatrix::<f64, M::State, M::Meas>::zeros_generic(n, m);
        for (i, &w) in self.wc.iter().enumerate() {
            let x: OVector<f64, M::State> = self.points.column(i).into_owned();
            let d = b.model.state_residual(&x, &b.mean);
            cross.ger(w, &d, &deviation(i), 1.0);
        }
        // W = S_y⁻¹ P_xyᵀ, so K S_y = Wᵀ and K ν = Wᵀ S_y⁻¹ ν.
        let singular = NumericError::NotPositiveDefinite {
            quantity: "innovation covariance",
        };
        let mut w = cross.transpose();
        let mut weighted = residual.clone();
        if !sy.solve_lower_triangular_mut(&mut w) || !sy.solve_lower_triangular_mut(&mut weighted) {
            return Err(numeric(singular));
        }
        let nis = weighted.norm_squared();
        if b.remedies.gates(nis, present) {
            self.belief.diagnostics.repaired += repaired;
            self.belief.diagnostics.gated += 1;
            self.belief.innov.clear();
            let before = self.belief.diagnostics.repaired;
            self.belief.check_posterior()?;
            return self.refactor_if_repaired(before);
        }
        let mut factor = self.factor.clone();
        let mut failure = None;
        for j in 0..w.nrows() {
            let mut column: OVector<f64, M::State> = w.row(j).transpose();
            if let Err(e) =
                cholesky_rank_one(&mut factor, &mut column, true, "posterior covariance")
            {
                failure = Some(e);
                break;
            }
        }
        if let Some(failure) = failure {
            // P⁺ = P⁻ − K S_y S_yᵀ Kᵀ = S⁻S⁻ᵀ − WᵀW.
            let p = &self.factor * self.factor.transpose() - w.transpose() * &w;
            factor = refactor_repaired(&b.remedies, p, failure, &mut repaired).map_err(numeric)?;
        }
        let shift = w.transpose() * &weighted;
        let ln_det: f64 = 2.0 * sy.diagonal().iter().map(|v| v.ln()).sum::<f64>();
        let innovation_cov = &sy * sy.transpose();
        self.belief.mean += shift;
        self.set_factor(factor);
        let b = &mut self.belief;
        b.innov.nis = nis;
        b.innov.log_likelihood = -0.5 * (nis + ln_det + present as f64 * LN_2PI);
        b.innov.present = present;
        b.innov.residual = residual;
        b.innov.covariance = innovation_cov;
        b.diagnostics.repaired += repaired;
        let before = b.diagnostics.repaired;
        b.check_posterior()?;
        self.refactor_if_repaired(before)
    }
}
