//! Diffuse initial states (`--diffuse STATE`): a state whose prior is "unknown, any value", an
//! infinite prior variance.
//!
//! - `kf` (optimal gain) runs the **exact diffuse Kalman filter** ([`DiffuseKf`]): the prior
//!   covariance is written P = κ P∞ + P* with κ → ∞ (P∞ = 1 on the diagonal of each diffuse state,
//!   0 elsewhere; P* the declared prior with the diffuse rows and columns removed), and the
//!   filter propagates the two parts separately until P∞ vanishes (the *diffuse period*), then
//!   continues as the ordinary `kf` — Koopman, *J. Amer. Statist. Assoc.* 92, 1997; Durbin &
//!   Koopman, *Time Series Analysis by State Space Methods*, 2nd ed., 2012 (D&K), §5.2–5.3. The
//!   measurement vector is processed one component at a time (the univariate treatment, D&K
//!   §6.4; a correlated R is first decorrelated by its Cholesky factor, D&K §6.4.3), so that
//!   F∞ = zᵀP∞z is a scalar and the two cases F∞ > 0 / F∞ = 0 are exact. Its log-likelihood is
//!   the diffuse log-likelihood of D&K §7.2.2, eq. (7.4) (quoted from memory):
//!   ln L_d = −(np/2) ln 2π − ½ Σ_diffuse w − ½ Σ_rest (ln F + v²/F), so a component with
//!   F∞ > 0 contributes −½(ln 2π + ln F∞) in place of its (unbounded) prediction-error term and
//!   the others the usual −½(ln 2π + ln F + v²/F). On the local-level model (P∞ = 1, so
//!   ln F∞ = 0) this is the likelihood of the differenced series, which the level drops out of,
//!   less one −½ ln 2π for the first observation (checked against an independent dense
//!   computation in `tests/diffuse_start.rs`).
//! - The other Gaussian filters (`ekf`, `iekf`, `ukf`, `ckf`, `ghkf`, `srukf`, and `kf` with a
//!   constant gain, whose mean does not use the covariance) use the **large-variance
//!   approximation** ([`large_variance_prior`]): each diffuse state gets prior variance
//!   κᵢ = [`LARGE_VARIANCE_FACTOR`] × sᵢ, uncorrelated with the others, where the scale sᵢ (in
//!   the state's unit squared) is the larger of its declared prior variance sd0ᵢ² and the
//!   largest variance one measurement component j leaves on it, R_jj / H_ji² (H the measurement
//!   Jacobian at the prior mean; [`variance_scales`]) — so that κ dwarfs what the data say even
//!   where the declared prior is a unit placeholder. Its estimates agree with the exact filter's
//!   after the diffuse period to about sᵢ/κᵢ = 10⁻⁸ relative; its
//!   log-likelihood keeps the first steps' ln κ terms, so it is comparable between filters using
//!   the same approximation but not with the exact diffuse value.
//! - Sampling filters (`pf`, `enkf`: [`KindInfo::sampling`]) draw their samples from the prior
//!   and are refused: an infinite variance has no samples, and a large one wastes every sample
//!   but a few.

use nalgebra::{DefaultAllocator, Dim, OMatrix, OVector};
use sightline_core::linalg::{cholesky, ensure_finite, symmetrise};
use sightline_core::{Alloc, Gaussian, Model};

use crate::belief::Remedies;
use crate::filter::{Diagnostics, Filter, FilterError, Innovation};
use crate::kf::{self, Kf};
use crate::linearise::{JacobianSource, measurement_jacobian, transition_jacobian};
use crate::registry::{self, KINDS};
use crate::smoother::SmoothedTrack;
use crate::spec::{FilterSpec, SpecError};
use crate::update::LN_2PI;

/// κ of the large-variance approximation, relative to the declared prior variance of the state:
/// large enough that the prior carries ~10⁻⁸ of the weight of one measurement of a state
/// measured with the prior's own accuracy, small enough that `f64` keeps ~8 significant digits
/// of the posterior after the first update (common practice).
pub const LARGE_VARIANCE_FACTOR: f64 = 1e8;

/// An F∞ = zᵀP∞z below this share of its Cauchy–Schwarz bound (Σⱼ|zⱼ|√P∞ⱼⱼ)² is zero (round-off).
const DIFFUSE_TOLERANCE: f64 = 1e-9;

/// The variance scale sᵢ of each state (see the module docs): the larger of its declared prior
/// variance and R_jj / H_ji² over the measurement components j that see it (H at the prior mean,
/// default input, t = 0), and 1 where neither is positive.
pub fn variance_scales<M: Model>(model: &M, prior: &Gaussian<M::State>) -> Vec<f64>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    let declaration = model.declare();
    let u = declaration.default_input();
    let (_, h) = measurement_jacobian(model, &prior.mean, u, 0.0, JacobianSource::Model);
    let r = model.measurement_noise(0.0);
    (0..prior.cov.nrows())
        .map(|i| {
            let mapped = (0..h.nrows())
                .filter(|&j| h[(j, i)] != 0.0)
                .map(|j| r[(j, j)] / (h[(j, i)] * h[(j, i)]))
                .fold(prior.cov[(i, i)], f64::max);
            if mapped > 0.0 && mapped.is_finite() {
                mapped
            } else {
                1.0
            }
        })
        .collect()
}

/// The prior of the large-variance approximation: each state with `diffuse[i]` gets variance
/// κᵢ = [`LARGE_VARIANCE_FACTOR`] × `scales[i]` ([`variance_scales`]) and no correlation with
/// the others.
///
/// ```
/// use nalgebra::{Matrix2, Vector2};
/// use sightline_core::Gaussian;
/// let prior = Gaussian { mean: Vector2::new(1.0, 2.0), cov: Matrix2::new(4.0, 1.0, 1.0, 9.0) };
/// let wide = sightline_filters::diffuse::large_variance_prior(&prior, &[true, false], &[5.0, 9.0]);
/// assert_eq!(wide.cov, Matrix2::new(5e8, 0.0, 0.0, 9.0));
/// assert_eq!(wide.mean, prior.mean);
/// ```
pub fn large_variance_prior<N: Dim>(
    prior: &Gaussian<N>,
    diffuse: &[bool],
    scales: &[f64],
) -> Gaussian<N>
where
    DefaultAllocator: nalgebra::allocator::Allocator<N> + nalgebra::allocator::Allocator<N, N>,
{
    let mut wide = prior.clone();
    let n = wide.cov.nrows();
    for i in (0..n).filter(|&i| diffuse.get(i).copied().unwrap_or(false)) {
        let kappa = LARGE_VARIANCE_FACTOR * scales.get(i).copied().unwrap_or(1.0);
        for j in 0..n {
            wide.cov[(i, j)] = 0.0;
            wide.cov[(j, i)] = 0.0;
        }
        wide.cov[(i, i)] = kappa;
    }
    wide
}

/// Builds the filter `spec` names for a plant whose states with `diffuse[i]` start diffuse (see
/// the module docs): the exact diffuse `kf`, a Gaussian filter on the large-variance prior, or a
/// refusal for a sampling filter. Unknown kinds and bad options are reported as
/// [`registry::build`] reports them.
pub fn build<M: Model>(
    model: &M,
    prior: &Gaussian<M::State>,
    diffuse: &[bool],
    spec: &FilterSpec,
    seed: u64,
) -> Result<Box<dyn Filter>, SpecError>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    if !diffuse.iter().any(|&d| d) {
        return registry::build(model, prior, spec, seed);
    }
    let scales = variance_scales(model, prior);
    let wide = large_variance_prior(prior, diffuse, &scales);
    if KINDS.iter().any(|k| k.kind == spec.kind && k.sampling) {
        return Err(SpecError::NotApplicable {
            spec: spec.label.clone(),
            reason: format!(
                "{} draws its samples from the prior, and a diffuse state (--diffuse) has no \
                 distribution to draw from; give the state a finite prior instead (drop \
                 --diffuse and set --set sd0.<state>=...), or use a Gaussian filter (kf, ekf, \
                 ukf, ckf, ghkf, srukf, iekf), which start diffuse",
                spec.kind
            ),
        });
    }
    // Every option and applicability check of the kind, on the large-variance prior.
    let approximate = registry::build(model, &wide, spec, seed)?;
    if spec.kind != kf::INFO.kind {
        return Ok(approximate);
    }
    let opts = spec.options(kf::INFO.options)?;
    let optimal = opts
        .text("gain")
        .is_none_or(|g| g.eq_ignore_ascii_case("optimal"));
    if !optimal {
        return Ok(approximate);
    }
    let mut exact = DiffuseKf::new(model.clone(), prior, diffuse, &scales, &spec.label);
    exact.kf.belief.remedies = Remedies::from_options(&opts, model.meas_dim().value())?;
    Ok(Box::new(exact))
}

/// The exact diffuse Kalman filter (see the module docs): `kf` with some states' prior variance
/// infinite. After the diffuse period it is the ordinary optimal-gain [`Kf`].
///
/// While P∞ ≠ 0 the covariance it reports is P* + κ^½ P∞ κ^½ with κ as in
/// [`large_variance_prior`] (a finite stand-in for "unbounded", so that tables and plots stay
/// finite), its innovation is `None` (the predicted variance of a diffuse component is
/// unbounded: no NIS) and its log-likelihood increment is the diffuse one. Remedies (`repair`,
/// `gate`) act after the diffuse period. It does not smooth (the exact diffuse smoother, D&K
/// §5.4, is not implemented): `record_for_smoothing` declines.
#[derive(Debug, Clone)]
pub struct DiffuseKf<M: Model>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    /// The ordinary filter: its belief's covariance is P* during the diffuse period.
    kf: Kf<M>,
    /// P∞, the diffuse part of the covariance; zero once the diffuse period is over.
    p_inf: OMatrix<f64, M::State, M::State>,
    /// Whether P∞ is still nonzero.
    in_diffuse_period: bool,
    /// √κ per state, for the reported covariance during the diffuse period.
    sqrt_kappa: OVector<f64, M::State>,
    /// The covariance reported during the diffuse period.
    shown: OMatrix<f64, M::State, M::State>,
    /// The log-likelihood increment of the last update, when it was a diffuse-period update.
    diffuse_increment: Option<f64>,
}

impl<M: Model> DiffuseKf<M>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    /// A diffuse `kf` from `prior`, the states with `diffuse[i]` diffuse (their prior mean is
    /// kept but carries no weight); `scales` ([`variance_scales`]) set only the covariance
    /// reported during the diffuse period.
    pub fn new(
        model: M,
        prior: &Gaussian<M::State>,
        diffuse: &[bool],
        scales: &[f64],
        label: &str,
    ) -> Self {
        let (n, _) = prior.cov.shape_generic();
        let mut p_star = prior.clone();
        let mut p_inf = OMatrix::<f64, M::State, M::State>::zeros_generic(n, n);
        let mut sqrt_kappa = OVector::<f64, M::State>::zeros_generic(n, nalgebra::U1);
        for i in 0..n.value() {
            if diffuse.get(i).copied().unwrap_or(false) {
                for j in 0..n.value() {
                    p_star.cov[(i, j)] = 0.0;
                    p_star.cov[(j, i)] = 0.0;
                }
                p_inf[(i, i)] = 1.0;
                sqrt_kappa[i] =
                    (LARGE_VARIANCE_FACTOR * scales.get(i).copied().unwrap_or(1.0)).sqrt();
            }
        }
        let kf = Kf::new(model, p_star, label);
        let mut filter = DiffuseKf {
            kf,
            in_diffuse_period: true,
            p_inf,
            sqrt_kappa,
            shown: OMatrix::zeros_generic(n, n),
            diffuse_increment: None,
        };
        filter.end_diffuse_period_if_done();
        filter
    }

    /// Whether the diffuse period is still running (P∞ ≠ 0).
    pub fn in_diffuse_period(&self) -> bool {
        self.in_diffuse_period
    }

    /// P∞, the diffuse part of the covariance (zero after the diffuse period).
    pub fn diffuse_covariance(&self) -> &OMatrix<f64, M::State, M::State> {
        &self.p_inf
    }

    /// P*, the finite part of the covariance (the covariance after the diffuse period).
    pub fn finite_covariance(&self) -> &OMatrix<f64, M::State, M::State> {
        &self.kf.belief.cov
    }

    /// Ends the diffuse period when P∞ is zero up to round-off (its entries start at 1), else
    /// refreshes the reported covariance.
    fn end_diffuse_period_if_done(&mut self) {
        symmetrise(&mut self.p_inf);
        if self.p_inf.iter().all(|v| v.abs() <= DIFFUSE_TOLERANCE) {
            self.p_inf.fill(0.0);
            self.in_diffuse_period = false;
            return;
        }
        let (n, _) = self.p_inf.shape_generic();
        for j in 0..n.value() {
            for i in 0..n.value() {
                self.shown[(i, j)] = self.kf.belief.cov[(i, j)]
                    + self.sqrt_kappa[i] * self.p_inf[(i, j)] * self.sqrt_kappa[j];
            }
        }
    }

    /// One update of the diffuse period, component by component (D&K §5.2.1 and §6.4): with
    /// v = y − zᵀa, F∞ = zᵀP∞z, F* = zᵀP*z + σ², M∞ = P∞z, M* = P*z,
    /// - F∞ > 0: a ← a + M∞v/F∞, P∞ ← P∞ − M∞M∞ᵀ/F∞,
    ///   P* ← P* + M∞M∞ᵀF*/F∞² − (M∞M*ᵀ + M*M∞ᵀ)/F∞ (the κ⁰ terms of P − MMᵀ/F as κ → ∞);
    ///   log-likelihood −½(ln 2π + ln F∞) (D&K eq. 7.4: the constant counts every observation);
    /// - F∞ = 0: the ordinary scalar update with F*, P∞ unchanged.
    fn diffuse_update(&mut self, y: &[f64], u: &[f64], t: f64) -> Result<(), FilterError> {
        let b = &mut self.kf.belief;
        let u = b.input(u)?;
        let (y, present) = b.measurement(y)?;
        b.innov.clear();
        self.diffuse_increment = Some(0.0);
        if present == 0 {
            return Ok(());
        }
        let (predicted, mut h) =
            measurement_jacobian(&b.model, &b.mean, u, t, JacobianSource::Model);
        let mut residual = b.model.measurement_residual(&y, &predicted);
        let mut r = b.model.measurement_noise(t);
        let m = y.len();
        let mut increment = 0.0;
        for i in (0..m).filter(|&i| y[i].is_nan()) {
            residual[i] = 0.0;
            h.row_mut(i).fill(0.0);
            for j in 0..m {
                r[(i, j)] = 0.0;
                r[(j, i)] = 0.0;
            }
            r[(i, i)] = 1.0;
        }
        // A correlated R is decorrelated first: with R = LLᵀ, L⁻¹y has unit, independent noise
        // (D&K §6.4.3) and the Jacobian of the transformation adds −ln L_ii per component. A
        // diagonal R (the usual case) is used as it is, with no rounding from the transform.
        let diagonal = (0..m).all(|i| (0..m).all(|j| i == j || r[(i, j)] == 0.0));
        let (residual, h, noise) = if diagonal {
            (residual, h, r.diagonal())
        } else {
            let tag = &b.tag;
            let l = cholesky(&r, "measurement noise covariance")
                .map_err(|e| tag.numeric(e))?
                .l();
            let not_triangular = || {
                tag.numeric(sightline_core::NumericError::NotPositiveDefinite {
                    quantity: "measurement noise covariance",
                })
            };
            let residual = l
                .solve_lower_triangular(&residual)
                .ok_or_else(not_triangular)?;
            let h = l.solve_lower_triangular(&h).ok_or_else(not_triangular)?;
            for i in (0..m).filter(|&i| !y[i].is_nan()) {
                increment -= l[(i, i)].ln();
            }
            (residual, h, r.diagonal().map(|_| 1.0))
        };
        let start = b.mean.clone();
        for i in (0..m).filter(|&i| !y[i].is_nan()) {
            let z = h.row(i).transpose();
            // The plant is affine (kf), so the residual at the current mean is the first one
            // less z·(a − a₀).
            let v = residual[i] - z.dot(&(&b.mean - &start));
            let m_inf = &self.p_inf * &z;
            let f_inf = z.dot(&m_inf);
            let m_star = &b.cov * &z;
            let f_star = z.dot(&m_star) + noise[i];
            let bound: f64 = z
                .iter()
                .enumerate()
                .map(|(j, zj)| zj.abs() * self.p_inf[(j, j)].max(0.0).sqrt())
                .sum();
            if f_inf > DIFFUSE_TOLERANCE * bound * bound && f_inf > 0.0 {
                b.mean += &m_inf * (v / f_inf);
                let cross = &m_inf * m_star.transpose();
                b.cov += &m_inf * m_inf.transpose() * (f_star / (f_inf * f_inf))
                    - (&cross + cross.transpose()) / f_inf;
                self.p_inf -= &m_inf * m_inf.transpose() / f_inf;
                increment -= 0.5 * (LN_2PI + f_inf.ln());
            } else {
                b.mean += &m_star * (v / f_star);
                b.cov -= &m_star * m_star.transpose() / f_star;
                increment -= 0.5 * (LN_2PI + f_star.ln() + v * v / f_star);
            }
        }
        symmetrise(&mut b.cov);
        ensure_finite(b.mean.iter(), "posterior mean").map_err(|e| b.tag.numeric(e))?;
        ensure_finite(b.cov.iter(), "posterior covariance").map_err(|e| b.tag.numeric(e))?;
        ensure_finite(self.p_inf.iter(), "diffuse covariance").map_err(|e| b.tag.numeric(e))?;
        if !increment.is_finite() {
            return Err(b.tag.numeric(sightline_core::NumericError::NonFinite {
                quantity: "diffuse log-likelihood",
            }));
        }
        self.diffuse_increment = Some(increment);
        self.end_diffuse_period_if_done();
        Ok(())
    }

    /// One prediction of the diffuse period (D&K §5.2.1): a ← Ta, P* ← TP*Tᵀ + Q, P∞ ← TP∞Tᵀ.
    fn diffuse_predict(&mut self, u: &[f64], t: f64, dt: f64) -> Result<(), FilterError> {
        let b = &mut self.kf.belief;
        b.tag.step += 1;
        let u = b.input(u)?;
        let (fx, f) = transition_jacobian(&b.model, &b.mean, u, t, dt, JacobianSource::Model);
        let q = b.model.process_noise(&b.mean, u, t, dt);
        b.mean = fx;
        b.cov = &f * &b.cov * f.transpose() + q;
        self.p_inf = &f * &self.p_inf * f.transpose();
        ensure_finite(self.p_inf.iter(), "predicted diffuse covariance")
            .map_err(|e| b.tag.numeric(e))?;
        b.finish_predict()?;
        self.end_diffuse_period_if_done();
        Ok(())
    }
}

impl<M: Model> Filter for DiffuseKf<M>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    fn label(&self) -> &str {
        self.kf.label()
    }

    fn kind(&self) -> &'static str {
        kf::INFO.kind
    }

    fn predict(&mut self, u: &[f64], t: f64, dt: f64) -> Result<(), FilterError> {
        if self.in_diffuse_period {
            self.diffuse_predict(u, t, dt)
        } else {
            self.kf.predict(u, t, dt)
        }
    }

    fn update(&mut self, y: &[f64], u: &[f64], t: f64) -> Result<(), FilterError> {
        if self.in_diffuse_period {
            self.diffuse_update(y, u, t)
        } else {
            self.diffuse_increment = None;
            self.kf.update(y, u, t)
        }
    }

    fn mean(&self) -> &[f64] {
        self.kf.mean()
    }

    fn covariance(&self) -> &[f64] {
        if self.in_diffuse_period {
            self.shown.as_slice()
        } else {
            self.kf.covariance()
        }
    }

    fn innovation(&self) -> Option<Innovation<'_>> {
        match self.diffuse_increment {
            Some(_) => None,
            None => self.kf.innovation(),
        }
    }

    fn log_likelihood_increment(&self) -> f64 {
        self.diffuse_increment
            .unwrap_or_else(|| self.kf.log_likelihood_increment())
    }

    fn diagnostics(&self) -> Diagnostics {
        self.kf.diagnostics()
    }

    fn smooth(&self) -> Option<Result<SmoothedTrack, FilterError>> {
        None
    }
}
