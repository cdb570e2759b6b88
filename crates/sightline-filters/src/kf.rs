//! `kf`: the linear Kalman filter (Kalman, ASME J. Basic Eng. 82, 1960) with the Joseph-form
//! update, and its constant-gain variants.
//!
//! For an affine plant the EKF's linearisation is exact, so the optimal `kf` shares its step with
//! `ekf` but refuses nonlinear plants. Two constant-gain modes model what many deployments run:
//! `gain=steady` uses the steady-state gain of the discrete algebraic Riccati equation (DARE) at
//! the plant's nominal step, and `gain=k1/k2/...` a user-given gain (the `n × m` entries
//! row-major, separated by `/`) — the fixed-gain observer. For any gain the Joseph form
//! propagates the *actual* error covariance of that gain, so NEES and NIS stay meaningful.
//!
//! Smoothing ([`crate::smoother`]): the optimal-gain filter records for the Rauch–Tung–Striebel
//! smoother; the constant-gain modes decline, because their means are not conditional means.

use nalgebra::{DefaultAllocator, Dim, OMatrix};
use sightline_core::linalg::{cholesky, symmetrise};
use sightline_core::{Alloc, Gaussian, Model, NumericError};

use crate::belief::{Belief, FLOOR, GATE, REPAIR, Remedies, belief_accessors};
use crate::filter::{Filter, FilterError};
use crate::linearise::{JacobianSource, measurement_jacobian, transition_jacobian};
use crate::registry::KindInfo;
use crate::smoother::SmootherKind;
use crate::spec::{FilterSpec, OptionInfo, SpecError};

/// Registry entry.
pub const INFO: KindInfo = KindInfo {
    kind: "kf",
    about: "linear Kalman filter (Joseph form); linear plants only",
    options: &[
        OptionInfo {
            key: "gain",
            default: "optimal",
            about: "optimal | steady (DARE gain at the nominal dt) | k1/k2/... fixed n×m gain, row-major",
        },
        REPAIR,
        FLOOR,
        GATE,
    ],
    linear_only: true,
    sampling: false,
};

/// How the Kalman filter chooses its gain.
#[derive(Debug, Clone, PartialEq)]
pub enum Gain<K> {
    /// The optimal time-varying gain P⁻Hᵀ S⁻¹.
    Optimal,
    /// A constant gain used at every update.
    Constant(K),
}

/// Linear Kalman filter over an affine plant `M`.
#[derive(Debug, Clone)]
pub struct Kf<M: Model>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    pub(crate) belief: Belief<M>,
    gain: Gain<OMatrix<f64, M::State, M::Meas>>,
}

impl<M: Model> Kf<M>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    /// A Kalman filter with the optimal gain. The caller is responsible for `model` being affine
    /// (the spec builder checks [`Model::is_linear`]).
    pub fn new(model: M, prior: Gaussian<M::State>, label: &str) -> Self {
        Kf {
            belief: Belief::new(model, prior, label),
            gain: Gain::Optimal,
        }
    }

    /// Uses `gain` at every update.
    pub fn with_gain(mut self, gain: Gain<OMatrix<f64, M::State, M::Meas>>) -> Self {
        self.gain = gain;
        self
    }
}

/// The steady-state prediction covariance (`N × N`) and gain (`N × M`) of [`steady_state`].
pub type SteadyState<N, M> = (OMatrix<f64, N, N>, OMatrix<f64, N, M>);

/// Steady-state prediction covariance and gain of the discrete algebraic Riccati equation for the
/// plant linearised at `prior.mean` with its default input and nominal step, by iterating the
/// Riccati recursion P⁻ ← F(P⁻ − P⁻Hᵀ(HP⁻Hᵀ+R)⁻¹HP⁻)Fᵀ + Q from the prior covariance until the
/// relative change is below 1e-13 (converges for stabilisable, detectable plants; Anderson &
/// Moore, *Optimal Filtering*, 1979, §4.4). Returns (P⁻∞, K∞ = P⁻∞Hᵀ S⁻¹).
pub fn steady_state<M: Model>(
    model: &M,
    prior: &Gaussian<M::State>,
) -> Result<SteadyState<M::State, M::Meas>, NumericError>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    let declaration = model.declare();
    let u = declaration.default_input();
    let dt = declaration.dt();
    let (_, f) = transition_jacobian(model, &prior.mean, u, 0.0, dt, JacobianSource::Automatic);
    let (_, h) = measurement_jacobian(model, &prior.mean, u, 0.0, JacobianSource::Automatic);
    let q = model.process_noise(&prior.mean, u, 0.0, dt);
    let r = model.measurement_noise(0.0);
    let mut p = prior.cov.clone();
    for _ in 0..100_000 {
        let s = &h * &p * h.transpose() + &r;
        let chol = cholesky(&s, "steady-state innovation covariance")?;
        let k = chol.solve(&(&h * &p)).transpose();
        let mut next = &f * (&p - &k * &h * &p) * f.transpose() + &q;
        symmetrise(&mut next);
        let change = (&next - &p).abs().max();
        p = next;
        if !p.iter().all(|v| v.is_finite()) {
            return Err(NumericError::NonFinite {
                quantity: "Riccati iterate",
            });
        }
        if change <= 1e-13 * p.abs().max().max(f64::MIN_POSITIVE) {
            break;
        }
    }
    let s = &h * &p * h.transpose() + &r;
    let chol = cholesky(&s, "steady-state innovation covariance")?;
    let k = chol.solve(&(&h * &p)).transpose();
    Ok((p, k))
}

/// Builds a `kf` from a spec; refuses nonlinear plants.
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
    if !model.is_linear() {
        return Err(opts.not_applicable(format!(
            "kf needs a linear plant and '{}' is nonlinear; use ekf, ukf or another nonlinear filter",
            model.declare().name()
        )));
    }
    let n = model.state_dim().value();
    let m = model.meas_dim().value();
    let gain = match opts.text("gain").unwrap_or("optimal") {
        g if g.eq_ignore_ascii_case("optimal") => Gain::Optimal,
        g if g.eq_ignore_ascii_case("steady") => {
            let (_, k) = steady_state(model, prior)
                .map_err(|e| opts.not_applicable(format!("steady-state gain: {e}")))?;
            Gain::Constant(k)
        }
        g => {
            let values: Option<Vec<f64>> = g
                .split('/')
                .map(|v| v.trim().parse::<f64>().ok().filter(|x| x.is_finite()))
                .collect();
            let expected = format!(
                "optimal, steady, or {} finite numbers (the {n}×{m} gain row-major, separated by '/')",
                n * m
            );
            match values {
                Some(v) if v.len() == n * m => Gain::Constant(OMatrix::from_row_slice_generic(
                    model.state_dim(),
                    model.meas_dim(),
                    &v,
                )),
                _ => return Err(opts.bad_value("gain", &expected)),
            }
        }
    };
    let mut kf = Kf::new(model.clone(), prior.clone(), &spec.label).with_gain(gain);
    kf.belief.remedies = Remedies::from_options(&opts, m)?;
    Ok(Box::new(kf))
}

impl<M: Model> Filter for Kf<M>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    belief_accessors!(belief);

    fn kind(&self) -> &'static str {
        INFO.kind
    }

    /// The RTS smoother needs the filtered moments to be the conditional ones; with a constant
    /// gain the mean is not the conditional mean, so only the optimal-gain filter smooths.
    fn record_for_smoothing(&mut self) -> bool {
        match self.gain {
            Gain::Optimal => self.belief.start_recording(SmootherKind::Rts),
            Gain::Constant(_) => false,
        }
    }

    fn predict(&mut self, u: &[f64], t: f64, dt: f64) -> Result<(), FilterError> {
        let b = &mut self.belief;
        b.tag.step += 1;
        let u = b.input(u)?;
        let (fx, f) = transition_jacobian(&b.model, &b.mean, u, t, dt, JacobianSource::Model);
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
        let (predicted, h) = measurement_jacobian(&b.model, &b.mean, u, t, JacobianSource::Model);
        let r = b.model.measurement_noise(t);
        let gain = match &self.gain {
            Gain::Optimal => None,
            Gain::Constant(k) => Some(k),
        };
        b.linear_update(&y, present, &predicted, h, &r, gain)
    }
}
