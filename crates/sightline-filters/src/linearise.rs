//! Linearisation of a plant about a point: exact Jacobians by automatic differentiation, or the
//! model's own hand-written ones. Shared by `kf`, `ekf` and `iekf`.

use nalgebra::{DefaultAllocator, OMatrix, OVector};
use sightline_core::ad::{Differentiable, VectorFunction};
use sightline_core::{Alloc, Model, Real};

/// The transition with input, time and step bound: `x ↦ f(x, u, t, dt)`.
pub struct TransitionFn<'a, M: Model>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    /// Plant.
    pub model: &'a M,
    /// Input over the step.
    pub u: &'a [f64],
    /// Start time.
    pub t: f64,
    /// Step length.
    pub dt: f64,
}

impl<M: Model> VectorFunction<M::State, M::State> for TransitionFn<'_, M>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    fn eval<S: Real>(&self, x: &OVector<S, M::State>) -> OVector<S, M::State> {
        self.model.transition(x, self.u, self.t, self.dt)
    }
}

/// The measurement with input and time bound: `x ↦ h(x, u, t)`.
pub struct MeasureFn<'a, M: Model>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    /// Plant.
    pub model: &'a M,
    /// Input at the measurement time.
    pub u: &'a [f64],
    /// Measurement time.
    pub t: f64,
}

impl<M: Model> VectorFunction<M::State, M::Meas> for MeasureFn<'_, M>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    fn eval<S: Real>(&self, x: &OVector<S, M::State>) -> OVector<S, M::Meas> {
        self.model.measure(x, self.u, self.t)
    }
}

/// A function's value and Jacobian at a point: `(f(x), ∂f/∂x)`, `R` outputs over `C` states.
pub type Linearisation<R, C> = (OVector<f64, R>, OMatrix<f64, R, C>);

/// Where Jacobians come from.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum JacobianSource {
    /// The model's hand-written Jacobian where it supplies one, automatic differentiation otherwise.
    Model,
    /// Always automatic differentiation.
    Automatic,
}

/// `f(x)` and `∂f/∂x` at `x`.
// A dispatch small enough to inline into the filter step, so the hand-written Jacobian
// and the transition beside it are optimised together.
#[inline]
pub fn transition_jacobian<M: Model>(
    model: &M,
    x: &OVector<f64, M::State>,
    u: &[f64],
    t: f64,
    dt: f64,
    source: JacobianSource,
) -> Linearisation<M::State, M::State>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    if source == JacobianSource::Model {
        if let Some(jac) = model.transition_jacobian(x, u, t, dt) {
            return (model.transition(x, u, t, dt), jac);
        }
    }
    M::State::jacobian(&TransitionFn { model, u, t, dt }, x)
}

/// `h(x)` and `∂h/∂x` at `x`.
#[inline]
pub fn measurement_jacobian<M: Model>(
    model: &M,
    x: &OVector<f64, M::State>,
    u: &[f64],
    t: f64,
    source: JacobianSource,
) -> Linearisation<M::Meas, M::State>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    if source == JacobianSource::Model {
        if let Some(jac) = model.measurement_jacobian(x, u, t) {
            return (model.measure(x, u, t), jac);
        }
    }
    M::State::jacobian(&MeasureFn { model, u, t }, x)
}
