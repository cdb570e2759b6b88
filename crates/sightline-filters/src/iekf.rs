//! `iekf`: the iterated extended Kalman filter — Gauss–Newton on the measurement update
//! (Bell & Cathey, "The iterated Kalman filter update as a Gauss–Newton method", IEEE TAC 38(2),
//! 1993).
//!
//! The posterior mean of an EKF update with prior N(x̄, P) is one Gauss–Newton step from x̄ on
//! the maximum-a-posteriori cost ½(x − x̄)ᵀP⁻¹(x − x̄) + ½(y − h(x))ᵀR⁻¹(y − h(x)). The IEKF keeps
//! stepping: with Hᵢ = ∂h/∂x at the iterate xᵢ (x₁ = x̄),
//!
//! ```text
//! xᵢ₊₁ = x̄ + Kᵢ (y − h(xᵢ) − Hᵢ (x̄ − xᵢ)),   Kᵢ = P Hᵢᵀ (Hᵢ P Hᵢᵀ + R)⁻¹.
//! ```
//!
//! **Termination rule.** Iteration `i` linearises at xᵢ (so `iterations` counts Jacobian
//! evaluations of h). It stops when the step is small in the prior's metric,
//! ‖xᵢ₊₁ − xᵢ‖_{P⁻¹} = √((xᵢ₊₁ − xᵢ)ᵀ P⁻¹ (xᵢ₊₁ − xᵢ)) ≤ `tol` (dimensionless: a Mahalanobis
//! distance, so one tolerance suits every plant's units), or after `iterations` linearisations.
//! The posterior is then the Kalman update linearised at the last iterate xᵢ: mean xᵢ₊₁ and the
//! Joseph-form covariance with Kᵢ, Hᵢ (as in Bell & Cathey). `iterations=1` is exactly
//! the EKF; on an affine measurement the second linearisation reproduces the first, so the
//! filter stops after two with the Kalman filter's answer. Iterates are moved onto the plant's
//! feasible set ([`Model::project`]) so that h is never evaluated outside its domain. The
//! reported innovation is the linearised one, y − h(xᵢ) − Hᵢ(x̄ − xᵢ), with
//! S = Hᵢ P Hᵢᵀ + R: the pair the posterior mean was computed from. Gauss–Newton has no
//! step control, so on strongly nonlinear measurements the iterates may oscillate; the count
//! bound keeps the cost fixed.

use nalgebra::{DefaultAllocator, Dim};
use sightline_core::linalg::{cholesky, ensure_finite};
use sightline_core::{Alloc, Gaussian, Model};

use crate::belief::{Belief, FLOOR, GATE, REPAIR, Remedies, belief_accessors};
use crate::filter::{Filter, FilterError};
use crate::linearise::{JacobianSource, measurement_jacobian, transition_jacobian};
use crate::registry::KindInfo;
use crate::smoother::SmootherKind;
use crate::spec::{FilterSpec, OptionInfo, SpecError};
use crate::update::mask_missing;

/// Registry entry.
pub const INFO: KindInfo = KindInfo {
    kind: "iekf",
    about: "iterated EKF: Gauss–Newton on the measurement update (Bell & Cathey 1993)",
    options: &[
        OptionInfo {
            key: "iterations",
            default: "10",
            about: "most linearisations of h per update (1 = ekf)",
        },
        OptionInfo {
            key: "tol",
            default: "1e-9",
            about: "stop when the step's P⁻¹-norm (a Mahalanobis distance) is at most this",
        },
        OptionInfo {
            key: "jacobian",
            default: "model",
            about: "model: the plant's hand-written Jacobian where it has one, else AD; ad: always AD",
        },
        REPAIR,
        FLOOR,
        GATE,
    ],
    linear_only: false,
    sampling: false,
};

/// Iterated extended Kalman filter over plant `M`.
#[derive(Debug, Clone)]
pub struct Iekf<M: Model>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    belief: Belief<M>,
    source: JacobianSource,
    max_iterations: usize,
    tolerance: f64,
}

impl<M: Model> Iekf<M>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    /// An IEKF starting from `prior`, with at most `max_iterations` linearisations per update
    /// (at least 1) and step tolerance `tolerance` (see the module docs for the rule).
    pub fn new(
        model: M,
        prior: Gaussian<M::State>,
        label: &str,
        max_iterations: usize,
        tolerance: f64,
    ) -> Self {
        Iekf {
            belief: Belief::new(model, prior, label),
            source: JacobianSource::Model,
            max_iterations: max_iterations.max(1),
            tolerance,
        }
    }

    /// Chooses where Jacobians come from.
    pub fn with_jacobians(mut self, source: JacobianSource) -> Self {
        self.source = source;
        self
    }
}

/// Builds an `iekf` from a spec.
pub fn build<M: Model>(
    model: &M,
    prior: &Gaussian<M::State>,
    spec: &FilterSpec,
    _seed: u64,
) -> Result<Box<dyn Filter>, SpecError>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    let opts = spec.options(INFO.options)?;
    let iterations = opts.count("iterations", 10, 1, 1000)?;
    let tol = opts.real("tol", 1e-9, |v| v >= 0.0, "a number >= 0")?;
    let source = match opts.choice("jacobian", "model", &["model", "ad"])? {
        "ad" => JacobianSource::Automatic,
        _ => JacobianSource::Model,
    };
    let mut iekf = Iekf::new(model.clone(), prior.clone(), &spec.label, iterations, tol)
        .with_jacobians(source);
    iekf.belief.remedies = Remedies::from_options(&opts, model.meas_dim().value())?;
    Ok(Box::new(iekf))
}

impl<M: Model> Filter for Iekf<M>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    belief_accessors!(belief);

    fn kind(&self) -> &'static str {
        INFO.kind
    }

    /// The RTS pass over the IEKF's filtered moments, the transition linearised at the
    /// filtered mean as in the prediction.
    fn record_for_smoothing(&mut self) -> bool {
        self.belief.start_recording(SmootherKind::Rts)
    }

    fn predict(&mut self, u: &[f64], t: f64, dt: f64) -> Result<(), FilterError> {
        // The time update is the EKF's: x⁻ = f(x), P⁻ = F P Fᵀ + Q.
        let b = &mut self.belief;
        b.tag.step += 1;
        let u = b.input(u)?;
        let (fx, f) = transition_jacobian(&b.model, &b.mean, u, t, dt, self.source);
        let q = b.model.process_noise(&b.mean, u, t, dt);
        if b.recording() {
            // Cov(x(k−1), x(k)) = P Fᵀ under the linearised transition (Rauch et al. 1965).
            let cross = &b.cov * f.transpose();
            b.record_transition(cross);
        }
        b.mean = fx;
        b.cov = &f * &b.cov * f.transpose() + q;
        b.finish_predict()
    }

    fn update(&mut self, y: &[f64], u: &[f64], t: f64) -> Result<(), FilterError> {
        let b = &mut self.belief;
        let u = b.input(u)?;
        let (y, present) = b.measurement(y)?;
        if present == 0 {
            b.innov.clear();
            return Ok(());
        }
        let tag = &b.tag;
        let prior_chol = cholesky(&b.cov, "predicted covariance").map_err(|e| tag.numeric(e))?;
        let r = b.model.measurement_noise(t);
        let mut point = b.mean.clone();
        let mut done = 0;
        let (predicted, h) = loop {
            let (hx, mut h) = measurement_jacobian(&b.model, &point, u, t, self.source);
            done += 1;
            // The measurement linearised at the iterate, evaluated at the prior mean.
            let predicted = hx + &h * b.model.state_residual(&b.mean, &point);
            ensure_finite(predicted.iter(), "linearised predicted measurement")
                .map_err(|e| tag.numeric(e))?;
            if done >= self.max_iterations {
                break (predicted, h);
            }
            for i in 0..y.len() {
                if y[i].is_nan() {
                    h.row_mut(i).fill(0.0);
                }
            }
            let mut residual = b.model.measurement_residual(&y, &predicted);
            let cross = &b.cov * h.transpose();
            let mut s = &h * &cross + &r;
            mask_missing::<M::State, M::Meas>(&y, &mut residual, &mut s, None);
            let chol = cholesky(&s, "innovation covariance").map_err(|e| tag.numeric(e))?;
            let mut next = &b.mean + cross * chol.solve(&residual);
            b.model.project(&mut next);
            ensure_finite(next.iter(), "iterated update iterate").map_err(|e| tag.numeric(e))?;
            let step = b.model.state_residual(&next, &point);
            let step_norm = step.dot(&prior_chol.solve(&step)).max(0.0).sqrt();
            if step_norm <= self.tolerance {
                break (predicted, h);
            }
            point = next;
        };
        b.diagnostics.iterations += done as u64;
        b.linear_update(&y, present, &predicted, h, &r, None)
    }
}
