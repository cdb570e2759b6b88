//! The plant model trait: written once by the user, consumed by every filter.

use nalgebra::allocator::Allocator;
use nalgebra::{DefaultAllocator, Dim, Dyn, OMatrix, OVector, U1};

use crate::gaussian::Gaussian;
use crate::params::Parameter;
use crate::real::Real;

/// Every matrix shape a filter needs for a plant with `N` states, `M` measurements and `U` inputs.
///
/// This is a bundle of nalgebra allocator bounds: writing `DefaultAllocator: Alloc<N, M, U>` in a
/// `where` clause implies all of them. It holds for every static size (`U2`, `Const<5>`) and for
/// `Dyn`, so generic code never lists the shapes one by one.
pub trait Alloc<N: Dim, M: Dim, U: Dim>:
    Allocator<N>
    + Allocator<N, N>
    + Allocator<M>
    + Allocator<M, M>
    + Allocator<N, M>
    + Allocator<M, N>
    + Allocator<U>
    + Allocator<U1, N>
    + Allocator<U1, M>
    + Allocator<N, Dyn>
    + Allocator<M, Dyn>
{
}

impl<N: Dim, M: Dim, U: Dim, T> Alloc<N, M, U> for T where
    T: Allocator<N>
        + Allocator<N, N>
        + Allocator<M>
        + Allocator<M, M>
        + Allocator<N, M>
        + Allocator<M, N>
        + Allocator<U>
        + Allocator<U1, N>
        + Allocator<U1, M>
        + Allocator<N, Dyn>
        + Allocator<M, Dyn>
{
}

/// A named quantity with its unit: a state, a measurement or an input.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Variable {
    /// Name as it appears in CSV columns (`x.<name>`, `y.<name>`, `u.<name>`) and reports.
    pub name: String,
    /// Unit, e.g. "rad/s" ("-" when dimensionless).
    pub unit: String,
}

impl Variable {
    /// A variable with a name and a unit.
    pub fn new(name: impl Into<String>, unit: impl Into<String>) -> Self {
        Variable {
            name: name.into(),
            unit: unit.into(),
        }
    }
}

/// A discrete-time stochastic plant with additive Gaussian noise:
///
/// ```text
/// x(k+1) = f(x(k), u(k), t(k), dt) + w(k),   w ~ N(0, Q(x, dt))
/// y(k)   = h(x(k), u(k), t(k))     + v(k),   v ~ N(0, R)
/// ```
///
/// `transition` and `measure` are generic over the scalar `S: Real`, so the same code is evaluated
/// with `f64` (sigma-point, particle and ensemble filters, the simulator) and with dual numbers
/// (exact Jacobians for the extended filters). Continuous-time plants implement `transition` with
/// [`crate::rk4`] and `process_noise` with [`crate::van_loan`].
///
/// Dimensions are nalgebra type-level sizes (`U2`, `Const<5>`), so small plants run on the stack
/// with no heap traffic, or `Dyn` for plants whose size is chosen at run time.
///
/// Only the first block of methods is required; the hooks below have defaults that suit plants
/// whose states and measurements live in a plain vector space.
///
/// ```
/// use sightline_core::nalgebra::{Matrix1, Vector1, U1};
/// use sightline_core::{Gaussian, Model, Real, Variable};
///
/// /// A scalar random walk seen directly.
/// #[derive(Clone)]
/// struct Drift;
///
/// impl Model for Drift {
///     type State = U1;
///     type Meas = U1;
///     type Input = U1;
///     fn name(&self) -> &str { "drift" }
///     fn state_dim(&self) -> U1 { U1 }
///     fn meas_dim(&self) -> U1 { U1 }
///     fn input_dim(&self) -> U1 { U1 }
///     fn states(&self) -> Vec<Variable> { vec![Variable::new("level", "m")] }
///     fn measurements(&self) -> Vec<Variable> { vec![Variable::new("level", "m")] }
///     fn inputs(&self) -> Vec<Variable> { vec![Variable::new("unused", "-")] }
///     fn transition<S: Real>(&self, x: &Vector1<S>, _u: &Vector1<f64>, _t: f64, _dt: f64) -> Vector1<S> { *x }
///     fn measure<S: Real>(&self, x: &Vector1<S>, _u: &Vector1<f64>, _t: f64) -> Vector1<S> { *x }
///     fn process_noise(&self, _x: &Vector1<f64>, _u: &Vector1<f64>, _t: f64, dt: f64) -> Matrix1<f64> { Matrix1::new(0.01 * dt) }
///     fn measurement_noise(&self, _t: f64) -> Matrix1<f64> { Matrix1::new(0.25) }
///     fn prior(&self) -> Gaussian<U1> { Gaussian::new(Vector1::new(0.0), Matrix1::new(1.0)) }
///     fn default_input(&self) -> Vector1<f64> { Vector1::new(0.0) }
///     fn dt(&self) -> f64 { 1.0 }
/// }
/// let y = Drift.measure(&Vector1::new(2.0_f64), &Vector1::new(0.0), 0.0);
/// assert_eq!(y[0], 2.0);
/// ```
pub trait Model: Clone + Send + Sync + 'static
where
    DefaultAllocator: Alloc<Self::State, Self::Meas, Self::Input>,
{
    /// State dimension (`U2`, ..., or `Dyn`).
    type State: Dim;
    /// Measurement dimension.
    type Meas: Dim;
    /// Input dimension (use `U1` with one unused input for autonomous plants, or `U0`).
    type Input: Dim;

    /// Short name used on the command line (`sightline compare NAME ...`).
    fn name(&self) -> &str;
    /// One line saying what the plant is and where its parameters come from.
    fn description(&self) -> &str {
        ""
    }
    /// Number of states, as a dimension value (`U2` or `Dyn(n)`).
    fn state_dim(&self) -> Self::State;
    /// Number of measurements.
    fn meas_dim(&self) -> Self::Meas;
    /// Number of inputs.
    fn input_dim(&self) -> Self::Input;
    /// States in model order, with units.
    fn states(&self) -> Vec<Variable>;
    /// Measurements in model order, with units.
    fn measurements(&self) -> Vec<Variable>;
    /// Inputs in model order, with units.
    fn inputs(&self) -> Vec<Variable>;

    /// Mean of the next state given the current one: `f(x, u, t, dt)`.
    fn transition<S: Real>(
        &self,
        x: &OVector<S, Self::State>,
        u: &OVector<f64, Self::Input>,
        t: f64,
        dt: f64,
    ) -> OVector<S, Self::State>;

    /// Noise-free measurement `h(x, u, t)`.
    fn measure<S: Real>(
        &self,
        x: &OVector<S, Self::State>,
        u: &OVector<f64, Self::Input>,
        t: f64,
    ) -> OVector<S, Self::Meas>;

    /// Covariance Q of the additive process noise over a step of length `dt` starting at `x`.
    fn process_noise(
        &self,
        x: &OVector<f64, Self::State>,
        u: &OVector<f64, Self::Input>,
        t: f64,
        dt: f64,
    ) -> OMatrix<f64, Self::State, Self::State>;

    /// Covariance R of the additive measurement noise.
    fn measurement_noise(&self, t: f64) -> OMatrix<f64, Self::Meas, Self::Meas>;

    /// The initial Gaussian belief about the state (also what the simulator draws the truth from).
    fn prior(&self) -> Gaussian<Self::State>;

    /// Input used when the data has no input column and none is set (`--set u.<input>=value`).
    fn default_input(&self) -> OVector<f64, Self::Input>;

    /// Nominal sample time in seconds, used by the simulator and steady-state gain design.
    fn dt(&self) -> f64;

    // ---- optional hooks -------------------------------------------------------------------

    /// Parameters with their current values, units and domains (`sightline models`, `--set`).
    fn parameters(&self) -> Vec<Parameter> {
        Vec::new()
    }

    /// Sets a parameter. Called only with a name from [`Model::parameters`] and a value inside its
    /// domain (see [`crate::params::validate`]), so implementations need not check again.
    fn apply_parameter(&mut self, _name: &str, _value: f64) {}

    /// Whether `transition` is affine in `x` and `measure` affine in `x` (the `kf` requirement).
    fn is_linear(&self) -> bool {
        false
    }

    /// Measurement residual `y - ŷ`. Override to wrap angles into (−π, π].
    fn measurement_residual(
        &self,
        y: &OVector<f64, Self::Meas>,
        predicted: &OVector<f64, Self::Meas>,
    ) -> OVector<f64, Self::Meas> {
        y - predicted
    }

    /// State difference `a - b`. Override for angle states.
    fn state_residual(
        &self,
        a: &OVector<f64, Self::State>,
        b: &OVector<f64, Self::State>,
    ) -> OVector<f64, Self::State> {
        a - b
    }

    /// Weighted mean of state sigma points (one point per column). Override for angle states,
    /// e.g. with a circular mean.
    fn state_mean(
        &self,
        points: &OMatrix<f64, Self::State, Dyn>,
        weights: &[f64],
    ) -> OVector<f64, Self::State> {
        weighted_mean(points, weights)
    }

    /// Weighted mean of measurement sigma points. Override for bearing-type measurements.
    fn measurement_mean(
        &self,
        points: &OMatrix<f64, Self::Meas, Dyn>,
        weights: &[f64],
    ) -> OVector<f64, Self::Meas> {
        weighted_mean(points, weights)
    }

    /// Moves a state onto the feasible set (e.g. tank levels ≥ 0). Applied to posterior means,
    /// particles and ensemble members. The default does nothing.
    fn project(&self, _x: &mut OVector<f64, Self::State>) {}

    /// Hand-written Jacobian of `transition` with respect to `x`; `None` (the default) means
    /// automatic differentiation.
    fn transition_jacobian(
        &self,
        _x: &OVector<f64, Self::State>,
        _u: &OVector<f64, Self::Input>,
        _t: f64,
        _dt: f64,
    ) -> Option<OMatrix<f64, Self::State, Self::State>> {
        None
    }

    /// Hand-written Jacobian of `measure`; `None` (the default) means automatic differentiation.
    fn measurement_jacobian(
        &self,
        _x: &OVector<f64, Self::State>,
        _u: &OVector<f64, Self::Input>,
        _t: f64,
    ) -> Option<OMatrix<f64, Self::Meas, Self::State>> {
        None
    }
}

/// `Σ wᵢ·pointsᵢ` over the columns of `points`, without heap allocation for static row counts.
pub fn weighted_mean<R: Dim>(points: &OMatrix<f64, R, Dyn>, weights: &[f64]) -> OVector<f64, R>
where
    DefaultAllocator: Allocator<R> + Allocator<R, Dyn>,
{
    let (rows, _) = points.shape_generic();
    let mut mean = OVector::<f64, R>::zeros_generic(rows, U1);
    for (column, &w) in points.column_iter().zip(weights) {
        mean.axpy(w, &column, 1.0);
    }
    mean
}

/// Wraps an angle into (−π, π] — the usual residual for bearings and headings (common practice).
pub fn wrap_angle(a: f64) -> f64 {
    use std::f64::consts::PI;
    let r = (a + PI).rem_euclid(2.0 * PI) - PI;
    if r == -PI { PI } else { r }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::f64::consts::PI;

    #[test]
    fn wrap_angle_maps_into_half_open_interval() {
        assert_eq!(wrap_angle(PI), PI);
        assert_eq!(wrap_angle(-PI), PI);
        assert!((wrap_angle(3.0 * PI / 2.0) + PI / 2.0).abs() < 1e-12);
        assert!((wrap_angle(0.1 - 4.0 * PI) - 0.1).abs() < 1e-12);
    }
}
