//! `ekf`: the extended Kalman filter with exact Jacobians by automatic differentiation.
//!
//! Predict: x⁻ = f(x), P⁻ = F P Fᵀ + Q with F = ∂f/∂x at x. Update: linearise h at x⁻ and apply
//! the Kalman update with the Joseph-form covariance (e.g. Simon, *Optimal State Estimation*,
//! 2006, §13.2). Jacobians come from num-dual in one forward pass with vector duals, or from
//! the model's hand-written Jacobian when it supplies one (`jacobian=model`, the default).

use nalgebra::{DefaultAllocator, Dim};
use sightline_core::{Alloc, Gaussian, Model};

use crate::belief::{Belief, FLOOR, GATE, REPAIR, Remedies, belief_accessors};
use crate::filter::{Filter, FilterError};
use crate::linearise::{JacobianSource, measurement_jacobian, transition_jacobian};
use crate::registry::KindInfo;
use crate::smoother::SmootherKind;
use crate::spec::{FilterSpec, OptionInfo, SpecError};

/// Registry entry.
pub const INFO: KindInfo = KindInfo {
    kind: "ekf",
    about: "extended Kalman filter, exact Jacobians by automatic differentiation",
    options: &[
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

/// Extended Kalman filter over plant `M`.
///
/// ```
/// # use sightline_core::prelude::*;
/// # #[derive(Clone, Parameters)] struct Drift;
/// # impl Model for Drift {
/// #   type State = U1; type Meas = U1;
/// #   fn declare(&self) -> Declaration {
/// #       Declaration::new("drift", 1.0).state("x", "-", 0.0, 1.0).measurement("y", "-").input("u", "-", 0.0)
/// #   }
/// #   fn transition<S: Real>(&self, x: &Vector1<S>, _: &[f64], _: f64, _: f64) -> Vector1<S> { *x }
/// #   fn measure<S: Real>(&self, x: &Vector1<S>, _: &[f64], _: f64) -> Vector1<S> { *x }
/// #   fn process_noise(&self, _: &Vector1<f64>, _: &[f64], _: f64, _: f64) -> Matrix1<f64> { Matrix1::new(0.0) }
/// #   fn measurement_noise(&self, _: f64) -> Matrix1<f64> { Matrix1::new(1.0) }
/// # }
/// use sightline_filters::{Ekf, Filter};
/// let mut ekf = Ekf::new(Drift, Drift.prior(), "ekf");
/// ekf.update(&[2.0], &[0.0], 0.0).unwrap();
/// assert!((ekf.mean()[0] - 1.0).abs() < 1e-12); // equal prior and noise variances: halfway
/// ```
#[derive(Debug, Clone)]
pub struct Ekf<M: Model>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    belief: Belief<M>,
    source: JacobianSource,
}

impl<M: Model> Ekf<M>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    /// An EKF starting from `prior`, labelled `label`.
    pub fn new(model: M, prior: Gaussian<M::State>, label: &str) -> Self {
        Ekf {
            belief: Belief::new(model, prior, label),
            source: JacobianSource::Model,
        }
    }

    /// Chooses where Jacobians come from.
    pub fn with_jacobians(mut self, source: JacobianSource) -> Self {
        self.source = source;
        self
    }
}

/// Builds an `ekf` from a spec.
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
    let source = match opts.choice("jacobian", "model", &["model", "ad"])? {
        "ad" => JacobianSource::Automatic,
        _ => JacobianSource::Model,
    };
    let mut ekf = Ekf::new(model.clone(), prior.clone(), &spec.label).with_jacobians(source);
    ekf.belief.remedies = Remedies::from_options(&opts, model.meas_dim().value())?;
    Ok(Box::new(ekf))
}

impl<M: Model> Filter for Ekf<M>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    belief_accessors!(belief);

    fn kind(&self) -> &'static str {
        INFO.kind
    }

    fn record_for_smoothing(&mut self) -> bool {
        self.belief.start_recording(SmootherKind::Rts)
    }

    fn predict(&mut self, u: &[f64], t: f64, dt: f64) -> Result<(), FilterError> {
        // `kf` and `iekf` repeat these lines on purpose: one shared `Belief` method measured
        // the AD pendulum step 1.8× slower (criterion `ekf_jacobians`, 2026-12-02, codegen).
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
        let (predicted, h) = measurement_jacobian(&b.model, &b.mean, u, t, self.source);
        let r = b.model.measurement_noise(t);
        b.linear_update(&y, present, &predicted, h, &r, None)
    }
}
