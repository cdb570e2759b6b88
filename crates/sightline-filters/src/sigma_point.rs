//! Sigma-point Kalman filters on one implementation parameterised by the point rule:
//! `ukf` (scaled unscented transform), `ckf` (spherical-radial cubature) and `ghkf`
//! (Gauss–Hermite quadrature). See [`sightline_core::SigmaRule`] for the rules and their sources.
//!
//! Predict: points xᵢ = m + L ξᵢ (L the Cholesky factor of P), propagated through f; the
//! predicted mean is their weighted mean and P⁻ = Σ Wᶜᵢ dᵢdᵢᵀ + Q. Update: points are redrawn
//! from (m⁻, P⁻) and propagated through h; S = Σ Wᶜᵢ eᵢeᵢᵀ + R, C = Σ Wᶜᵢ dᵢeᵢᵀ, and the Kalman
//! update follows (Wan & van der Merwe, AS-SPCC 2000; Särkkä, *Bayesian Filtering and
//! Smoothing*, 2013, Alg. 5.14). Point buffers are allocated once, at construction.
//!
//! Smoothing: every rule records the cross-covariance of its own prediction points for the
//! sigma-point RTS smoother (Särkkä, IEEE TAC 53(3), 2008; see [`crate::smoother`]).

use nalgebra::{DefaultAllocator, Dim, Dyn, OMatrix, OVector};
use sightline_core::linalg::cholesky;
use sightline_core::{Alloc, Gaussian, Model, SigmaRule};

use crate::belief::{Belief, FLOOR, GATE, REPAIR, Remedies, belief_accessors};
use crate::filter::{Filter, FilterError};
use crate::registry::KindInfo;
use crate::smoother::SmootherKind;
use crate::spec::{FilterSpec, OptionInfo, SpecError};
use crate::update::{kalman_update, mask_missing};

/// Registry entry for `ukf`.
pub const UKF: KindInfo = KindInfo {
    kind: "ukf",
    about: "unscented Kalman filter, scaled unscented transform (2n+1 points)",
    options: &[
        OptionInfo {
            key: "alpha",
            default: "1",
            about: "spread of the points, 0 < alpha <= 1 typically",
        },
        OptionInfo {
            key: "beta",
            default: "2",
            about: "prior knowledge of the distribution (2 for Gaussian)",
        },
        OptionInfo {
            key: "kappa",
            default: "0",
            about: "secondary scaling (3-n matches the Gaussian kurtosis)",
        },
        REPAIR,
        FLOOR,
        GATE,
    ],
    linear_only: false,
    sampling: false,
};

/// Registry entry for `ckf`.
pub const CKF: KindInfo = KindInfo {
    kind: "ckf",
    about: "cubature Kalman filter, third-degree spherical-radial rule (2n points)",
    options: &[REPAIR, FLOOR, GATE],
    linear_only: false,
    sampling: false,
};

/// Registry entry for `ghkf`.
pub const GHKF: KindInfo = KindInfo {
    kind: "ghkf",
    about: "Gauss–Hermite Kalman filter, tensor-product rule of order p (p^n points)",
    options: &[
        OptionInfo {
            key: "order",
            default: "3",
            about: "points per axis, 2 to 20; exact to degree 2p-1",
        },
        REPAIR,
        FLOOR,
        GATE,
    ],
    linear_only: false,
    sampling: false,
};

/// A Gaussian filter whose moments come from a sigma-point rule.
#[derive(Debug, Clone)]
pub struct SigmaPointFilter<M: Model>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    belief: Belief<M>,
    kind: &'static str,
    unit: OMatrix<f64, M::State, Dyn>,
    wm: Vec<f64>,
    wc: Vec<f64>,
    points: OMatrix<f64, M::State, Dyn>,
    mapped: OMatrix<f64, M::State, Dyn>,
    meas_points: OMatrix<f64, M::Meas, Dyn>,
}

impl<M: Model> SigmaPointFilter<M>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    /// A sigma-point filter with `rule`, starting from `prior`. `kind` names it in reports.
    pub fn new(
        model: M,
        prior: Gaussian<M::State>,
        rule: SigmaRule,
        kind: &'static str,
        label: &str,
    ) -> Result<Self, sightline_core::sigma::SigmaError> {
        let n = model.state_dim();
        let m = model.meas_dim();
        let sp = rule.points(n.value())?;
        let count = Dyn(sp.unit.ncols());
        let unit =
            OMatrix::<f64, M::State, Dyn>::from_column_slice_generic(n, count, sp.unit.as_slice());
        Ok(SigmaPointFilter {
            belief: Belief::new(model, prior, label),
            kind,
            points: unit.clone(),
            mapped: unit.clone(),
            unit,
            wm: sp.wm,
            wc: sp.wc,
            meas_points: OMatrix::zeros_generic(m, count),
        })
    }

    /// Fills `points` with m + L ξᵢ for the current belief.
    fn spread(&mut self, quantity: &'static str) -> Result<(), FilterError> {
        let b = &self.belief;
        let chol = cholesky(&b.cov, quantity).map_err(|e| b.tag.numeric(e))?;
        let l = chol.l();
        for (i, xi) in self.unit.column_iter().enumerate() {
            let point = &b.mean + &l * xi;
            self.points.set_column(i, &point);
        }
        Ok(())
    }
}

fn build_rule<M: Model>(
    model: &M,
    prior: &Gaussian<M::State>,
    spec: &FilterSpec,
    rule: SigmaRule,
    kind: &'static str,
    remedies: Remedies,
) -> Result<Box<dyn Filter>, SpecError>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    let mut f = SigmaPointFilter::new(model.clone(), prior.clone(), rule, kind, &spec.label)
        .map_err(|e| SpecError::NotApplicable {
            spec: spec.label.clone(),
            reason: e.to_string(),
        })?;
    f.belief.remedies = remedies;
    Ok(Box::new(f))
}

/// Builds a `ukf` from a spec.
pub fn build_ukf<M: Model>(
    model: &M,
    prior: &Gaussian<M::State>,
    spec: &FilterSpec,
    _seed: u64,
) -> Result<Box<dyn Filter>, SpecError>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    let rule = unscented_rule(spec)?;
    let remedies = Remedies::from_options(&spec.options(UKF.options)?, model.meas_dim().value())?;
    build_rule(model, prior, spec, rule, UKF.kind, remedies)
}

/// The scaled unscented rule from a spec's `alpha`, `beta`, `kappa` (the options of
/// [`UKF`], shared by `srukf`).
pub(crate) fn unscented_rule(spec: &FilterSpec) -> Result<SigmaRule, SpecError> {
    let o = spec.options(UKF.options)?;
    Ok(SigmaRule::Unscented {
        alpha: o.real("alpha", 1.0, |a| a > 0.0, "a number > 0")?,
        beta: o.real("beta", 2.0, |_| true, "a finite number")?,
        kappa: o.real("kappa", 0.0, |_| true, "a finite number")?,
    })
}

/// Builds a `ckf` from a spec.
pub fn build_ckf<M: Model>(
    model: &M,
    prior: &Gaussian<M::State>,
    spec: &FilterSpec,
    _seed: u64,
) -> Result<Box<dyn Filter>, SpecError>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    let remedies = Remedies::from_options(&spec.options(CKF.options)?, model.meas_dim().value())?;
    build_rule(model, prior, spec, SigmaRule::Cubature, CKF.kind, remedies)
}

/// Builds a `ghkf` from a spec.
pub fn build_ghkf<M: Model>(
    model: &M,
    prior: &Gaussian<M::State>,
    spec: &FilterSpec,
    _seed: u64,
) -> Result<Box<dyn Filter>, SpecError>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    let o = spec.options(GHKF.options)?;
    let order = o.count("order", 3, 1, 20)?;
    if order == 1 {
        // The one-point rule is the mean alone: it propagates no spread, so the filter would
        // never learn its own uncertainty (its covariance would only collect Q).
        return Err(o.bad_value(
            "order",
            "a whole number from 2 to 20 (order 1 is a one-point rule: the mean alone, which              propagates no uncertainty through the model)",
        ));
    }
    let remedies = Remedies::from_options(&o, model.meas_dim().value())?;
    build_rule(
        model,
        prior,
        spec,
        SigmaRule::GaussHermite { order },
        GHKF.kind,
        remedies,
    )
}

impl<M: Model> Filter for SigmaPointFilter<M>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    belief_accessors!(belief);

    fn kind(&self) -> &'static str {
        self.kind
    }

    fn record_for_smoothing(&mut self) -> bool {
        self.belief.start_recording(SmootherKind::SigmaPointRts)
    }

    fn predict(&mut self, u: &[f64], t: f64, dt: f64) -> Result<(), FilterError> {
        self.belief.tag.step += 1;
        let u = self.belief.input(u)?;
        self.spread("covariance before prediction")?;
        let b = &mut self.belief;
        for i in 0..self.points.ncols() {
            let x: OVector<f64, M::State> = self.points.column(i).into_owned();
            self.mapped.set_column(i, &b.model.transition(&x, u, t, dt));
        }
        let q = b.model.process_noise(&b.mean, u, t, dt);
        let mean = b.model.state_mean(&self.mapped, &self.wm);
        let mut cov = q;
        for (i, &w) in self.wc.iter().enumerate() {
            let x: OVector<f64, M::State> = self.mapped.column(i).into_owned();
            let d = b.model.state_residual(&x, &mean);
            cov.ger(w, &d, &d, 1.0);
        }
        if b.recording() {
            // Sigma-point cross-covariance D = Σ Wᶜᵢ (Xᵢ − m)(f(Xᵢ) − m⁻)ᵀ (Särkkä 2008).
            let (n, _) = cov.shape_generic();
            let mut cross = OMatrix::<f64, M::State, M::State>::zeros_generic(n, n);
            for (i, &w) in self.wc.iter().enumerate() {
                let x: OVector<f64, M::State> = self.points.column(i).into_owned();
                let fx: OVector<f64, M::State> = self.mapped.column(i).into_owned();
                let d = b.model.state_residual(&x, &b.mean);
                let e = b.model.state_residual(&fx, &mean);
                cross.ger(w, &d, &e, 1.0);
            }
            b.record_transition(cross);
        }
        b.mean = mean;
        b.cov = cov;
        b.finish_predict()
    }

    fn update(&mut self, y: &[f64], u: &[f64], t: f64) -> Result<(), FilterError> {
        let u = self.belief.input(u)?;
        let (y, present) = self.belief.measurement(y)?;
        if present == 0 {
            self.belief.innov.clear();
            return Ok(());
        }
        self.spread("predicted covariance")?;
        let b = &mut self.belief;
        for i in 0..self.points.ncols() {
            let x: OVector<f64, M::State> = self.points.column(i).into_owned();
            self.meas_points.set_column(i, &b.model.measure(&x, u, t));
        }
        let predicted = b.model.measurement_mean(&self.meas_points, &self.wm);
        let mut s = b.model.measurement_noise(t);
        let (n, _) = b.cov.shape_generic();
        let (m, _) = s.shape_generic();
        let mut cross = OMatrix::<f64, M::State, M::Meas>::zeros_generic(n, m);
        for (i, &w) in self.wc.iter().enumerate() {
            let x: OVector<f64, M::State> = self.points.column(i).into_owned();
            let z: OVector<f64, M::Meas> = self.meas_points.column(i).into_owned();
            let d = b.model.state_residual(&x, &b.mean);
            let e = b.model.measurement_residual(&z, &predicted);
            s.ger(w, &e, &e, 1.0);
            cross.ger(w, &d, &e, 1.0);
        }
        let mut residual = b.model.measurement_residual(&y, &predicted);
        mask_missing(&y, &mut residual, &mut s, Some(&mut cross));
        b.innov.residual = residual;
        b.innov.covariance = s;
        kalman_update(
            &mut b.mean,
            &mut b.cov,
            &cross,
            &mut b.innov,
            present,
            &b.remedies,
            &mut b.diagnostics,
        )
        .map_err(|e| b.tag.numeric(e))?;
        b.check_posterior()
    }
}
