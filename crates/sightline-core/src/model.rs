//! The plant model trait: written once by the user, consumed by every filter.

use nalgebra::allocator::Allocator;
use nalgebra::{DefaultAllocator, Dim, Dyn, OMatrix, OVector, U1};

use crate::ad::{Differentiable, VectorFunction};
use crate::gaussian::Gaussian;
use crate::integrate::Integrator;
use crate::params::Parameters;
use crate::real::Real;
use crate::vanloan::van_loan;

/// Every matrix shape a filter needs for a plant with `N` states and `M` measurements.
///
/// This is a bundle of nalgebra allocator bounds: writing `DefaultAllocator: Alloc<N, M>` in a
/// `where` clause implies all of them. It holds for every static size (`U2`, `Const<5>`) and for
/// `Dyn`, so generic code never lists the shapes one by one.
pub trait Alloc<N: Dim, M: Dim>:
    Allocator<N>
    + Allocator<N, N>
    + Allocator<M>
    + Allocator<M, M>
    + Allocator<N, M>
    + Allocator<M, N>
    + Allocator<U1, N>
    + Allocator<U1, M>
    + Allocator<N, Dyn>
    + Allocator<M, Dyn>
{
}

impl<N: Dim, M: Dim, T> Alloc<N, M> for T where
    T: Allocator<N>
        + Allocator<N, N>
        + Allocator<M>
        + Allocator<M, M>
        + Allocator<N, M>
        + Allocator<M, N>
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

/// What a plant is, as data: its name, sample time, states (with the prior's mean and spread),
/// measurements and inputs (with their default values), declared once in [`Model::declare`].
///
/// ```
/// use sightline_core::Declaration;
/// let d = Declaration::new("pendulum", 0.01)
///     .describe("damped pendulum; bob's horizontal position measured")
///     .state("angle", "rad", 0.6, 0.1)
///     .state("rate", "rad/s", 0.0, 0.2)
///     .measurement("position", "m")
///     .input("torque", "rad/s^2", 0.0);
/// assert_eq!(d.states()[1].name, "rate");
/// assert_eq!(d.prior_sd(), [0.1, 0.2]);
/// assert_eq!(d.default_input(), [0.0]);
/// ```
#[derive(Debug, Clone, PartialEq)]
pub struct Declaration {
    name: String,
    description: String,
    dt: f64,
    states: Vec<Variable>,
    prior_mean: Vec<f64>,
    prior_sd: Vec<f64>,
    measurements: Vec<Variable>,
    inputs: Vec<Variable>,
    default_input: Vec<f64>,
}

impl Declaration {
    /// A plant called `name` (its name on the command line) with nominal sample time `dt`
    /// seconds (used by the simulator and steady-state gain design).
    pub fn new(name: impl Into<String>, dt: f64) -> Self {
        Declaration {
            name: name.into(),
            description: String::new(),
            dt,
            states: Vec::new(),
            prior_mean: Vec::new(),
            prior_sd: Vec::new(),
            measurements: Vec::new(),
            inputs: Vec::new(),
            default_input: Vec::new(),
        }
    }

    /// One line saying what the plant is and where its parameters come from.
    pub fn describe(mut self, description: impl Into<String>) -> Self {
        self.description = description.into();
        self
    }

    /// The next state, with the prior's mean and standard deviation for it (the defaults of
    /// `--set x0.<name>` and `--set sd0.<name>`).
    pub fn state(
        mut self,
        name: impl Into<String>,
        unit: impl Into<String>,
        prior_mean: f64,
        prior_sd: f64,
    ) -> Self {
        self.states.push(Variable::new(name, unit));
        self.prior_mean.push(prior_mean);
        self.prior_sd.push(prior_sd);
        self
    }

    /// The next measurement.
    pub fn measurement(mut self, name: impl Into<String>, unit: impl Into<String>) -> Self {
        self.measurements.push(Variable::new(name, unit));
        self
    }

    /// The next input, with the value used where the data has no column for it (the default of
    /// `--set u.<name>`).
    pub fn input(mut self, name: impl Into<String>, unit: impl Into<String>, default: f64) -> Self {
        self.inputs.push(Variable::new(name, unit));
        self.default_input.push(default);
        self
    }

    /// Short name used on the command line.
    pub fn name(&self) -> &str {
        &self.name
    }
    /// One-line description ("" if none was given).
    pub fn description(&self) -> &str {
        &self.description
    }
    /// Nominal sample time (s).
    pub fn dt(&self) -> f64 {
        self.dt
    }
    /// States in model order.
    pub fn states(&self) -> &[Variable] {
        &self.states
    }
    /// Prior mean of each state.
    pub fn prior_mean(&self) -> &[f64] {
        &self.prior_mean
    }
    /// Prior standard deviation of each state.
    pub fn prior_sd(&self) -> &[f64] {
        &self.prior_sd
    }
    /// Measurements in model order.
    pub fn measurements(&self) -> &[Variable] {
        &self.measurements
    }
    /// Inputs in model order.
    pub fn inputs(&self) -> &[Variable] {
        &self.inputs
    }
    /// The input used where the data has none.
    pub fn default_input(&self) -> &[f64] {
        &self.default_input
    }
}

/// Compile-time guards of the two ways to write a plant's dynamics: a default that is reached
/// only when a plant defines neither form fails the build with these messages.
struct Undefined<M: ?Sized>(std::marker::PhantomData<M>);

impl<M: ?Sized> Undefined<M> {
    const DYNAMICS: () = panic!(
        "this plant defines neither `transition` (discrete time) nor `derivative` (continuous \
         time); implement one of them in its `impl Model`"
    );
    const NOISE: () = panic!(
        "this plant defines neither `process_noise` (discrete time) nor `noise_density` \
         (continuous time); implement one of them in its `impl Model`"
    );
}

/// The right-hand side `x ↦ f(x, u, t)` of a continuous-time plant, for its linearisation.
struct RightHandSide<'a, M> {
    model: &'a M,
    u: &'a [f64],
    t: f64,
}

impl<M: Model> VectorFunction<M::State, M::State> for RightHandSide<'_, M>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    fn eval<S: Real>(&self, x: &OVector<S, M::State>) -> OVector<S, M::State> {
        self.model.derivative(x, self.u, self.t)
    }
}

/// A stochastic plant with additive Gaussian noise, in discrete or in continuous time.
///
/// ```text
/// discrete time:    x(k+1) = f(x(k), u(k), t(k), dt) + w(k),    w ~ N(0, Q(x, u, t, dt))
/// continuous time:  dx/dt  = f(x, u, t) + w(t),                 w white, spectral density Qc
/// both:             y(k)   = h(x(k), u(k), t(k)) + v(k),        v ~ N(0, R(t))
/// ```
///
/// # The required core
///
/// Seven items, whichever time base the plant uses:
///
/// | item | what |
/// |---|---|
/// | `type State` | state dimension (`U2`, `Const<5>`, or `Dyn` for sizes chosen at run time) |
/// | `type Meas` | measurement dimension |
/// | [`Model::declare`] | name, sample time, states with the prior, measurements, inputs — as data |
/// | [`Model::measure`] | `h(x, u, t)`, generic over the scalar |
/// | [`Model::measurement_noise`] | `R(t)` |
/// | [`Model::transition`] **or** [`Model::derivative`] | `f` in discrete or in continuous time |
/// | [`Model::process_noise`] **or** [`Model::noise_density`] | `Q` over a step, or `Qc` |
///
/// A continuous-time plant gets its transition by integrating `derivative` ([`Model::integrator`]:
/// RK4, one step per sample by default) and its `Q` by Van Loan's method from `Qc` and the
/// Jacobian of `derivative` at the current state, taken by automatic differentiation — no
/// hand-written Jacobian, no hand-written discretisation. A plant that defines neither form
/// of a pair does not build: the default of one calls the other, which stops the compiler with
/// a message saying what to implement.
///
/// Parameters come from the [`Parameters`] supertrait (`#[derive(Parameters)]`), the prior
/// mean and spread of every state from the declaration (overridable as `x0.<state>` and
/// `sd0.<state>` on the command line for every plant), inputs are plain `&[f64]` in declaration
/// order (a plant without inputs declares none and ignores `u`).
///
/// `transition`, `measure` and `derivative` are generic over the scalar `S: Real`, so one body
/// is evaluated with `f64` (sigma-point, particle and ensemble filters, the simulator) and with
/// dual numbers (exact Jacobians for the extended filters). Dimensions are nalgebra type-level
/// sizes, so small plants run on the stack with no heap traffic. Everything else has a default:
/// the provided methods below are hooks for angles, constraints and hand-written Jacobians.
///
/// ```
/// use sightline_core::prelude::*;
///
/// /// A scalar random walk seen directly.
/// #[derive(Clone, Parameters)]
/// struct Drift;
///
/// impl Model for Drift {
///     type State = U1;
///     type Meas = U1;
///     fn declare(&self) -> Declaration {
///         Declaration::new("drift", 1.0).state("level", "m", 0.0, 1.0).measurement("level", "m")
///     }
///     fn transition<S: Real>(&self, x: &Vector1<S>, _u: &[f64], _t: f64, _dt: f64) -> Vector1<S> {
///         *x
///     }
///     fn process_noise(&self, _x: &Vector1<f64>, _u: &[f64], _t: f64, dt: f64) -> Matrix1<f64> {
///         Matrix1::new(0.01 * dt)
///     }
///     fn measure<S: Real>(&self, x: &Vector1<S>, _u: &[f64], _t: f64) -> Vector1<S> {
///         *x
///     }
///     fn measurement_noise(&self, _t: f64) -> Matrix1<f64> {
///         Matrix1::new(0.25)
///     }
/// }
/// let y = Drift.measure(&Vector1::new(2.0_f64), &[], 0.0);
/// assert_eq!(y[0], 2.0);
/// assert_eq!(Drift.prior().cov[(0, 0)], 1.0);
/// ```
pub trait Model: Parameters + Clone + Send + Sync + 'static
where
    DefaultAllocator: Alloc<Self::State, Self::Meas>,
{
    /// State dimension (`U2`, ..., or `Dyn`).
    type State: Differentiable;
    /// Measurement dimension.
    type Meas: Dim;

    /// Name, sample time, states (with the prior), measurements and inputs, as data.
    fn declare(&self) -> Declaration;

    /// Noise-free measurement `h(x, u, t)`.
    fn measure<S: Real>(
        &self,
        x: &OVector<S, Self::State>,
        u: &[f64],
        t: f64,
    ) -> OVector<S, Self::Meas>;

    /// Covariance R of the additive measurement noise.
    fn measurement_noise(&self, t: f64) -> OMatrix<f64, Self::Meas, Self::Meas>;

    // ---- dynamics: `transition` + `process_noise` (discrete) or `derivative` + `noise_density`

    /// Mean of the next state given the current one: `f(x, u, t, dt)`. Discrete-time plants
    /// write it; continuous-time plants get it from [`Model::derivative`] and
    /// [`Model::integrator`].
    // Inlined like a hand-written transition would be: the filters call it once per sigma
    // point or particle, and out of line it cost 40 instructions a call (`benches/callgrind.py`).
    #[inline]
    fn transition<S: Real>(
        &self,
        x: &OVector<S, Self::State>,
        u: &[f64],
        t: f64,
        dt: f64,
    ) -> OVector<S, Self::State> {
        self.integrator(dt)
            .integrate(|t, x| self.derivative(x, u, t), x, t, dt)
    }

    /// Covariance Q of the additive process noise over a step of length `dt` starting at `x`.
    /// Discrete-time plants write it; continuous-time plants get
    /// `Q = ∫₀^dt e^{As} Qc e^{Aᵀs} ds` by Van Loan's method ([`van_loan`]) with
    /// `A = ∂f/∂x` at `x` by automatic differentiation and `Qc` from [`Model::noise_density`].
    fn process_noise(
        &self,
        x: &OVector<f64, Self::State>,
        u: &[f64],
        t: f64,
        dt: f64,
    ) -> OMatrix<f64, Self::State, Self::State> {
        let (_, a) = Self::State::jacobian(&RightHandSide { model: self, u, t }, x);
        van_loan(&a, &self.noise_density(x, u, t), dt).1
    }

    /// Right-hand side `dx/dt = f(x, u, t)` of a continuous-time plant (per second).
    fn derivative<S: Real>(
        &self,
        x: &OVector<S, Self::State>,
        _u: &[f64],
        _t: f64,
    ) -> OVector<S, Self::State> {
        let () = Undefined::<Self>::DYNAMICS;
        x.clone()
    }

    /// Spectral density Qc of the white process noise of a continuous-time plant, in state
    /// coordinates (for noise entering through a matrix G, return `G Qc Gᵀ`:
    /// [`crate::noise_through`]).
    fn noise_density(
        &self,
        x: &OVector<f64, Self::State>,
        _u: &[f64],
        _t: f64,
    ) -> OMatrix<f64, Self::State, Self::State> {
        let () = Undefined::<Self>::NOISE;
        let (n, _) = x.shape_generic();
        OMatrix::zeros_generic(n, n)
    }

    /// How [`Model::derivative`] is integrated over a step of `dt` (default: one RK4 step).
    fn integrator(&self, _dt: f64) -> Integrator {
        Integrator::default()
    }

    // ---- derived from the declaration ---------------------------------------------------------

    /// Number of states, as a dimension value: from the type for static sizes; `Dyn` plants
    /// should override it cheaply (the default counts the declared states).
    fn state_dim(&self) -> Self::State {
        let n = Self::State::try_to_usize().unwrap_or_else(|| self.declare().states().len());
        Self::State::from_usize(n)
    }

    /// Number of measurements, as a dimension value (from the type for static sizes).
    fn meas_dim(&self) -> Self::Meas {
        let m = Self::Meas::try_to_usize().unwrap_or_else(|| self.declare().measurements().len());
        Self::Meas::from_usize(m)
    }

    /// The initial Gaussian belief about the state (also what the simulator draws the truth
    /// from): the declared means, independent with the declared standard deviations.
    fn prior(&self) -> Gaussian<Self::State> {
        let d = self.declare();
        let n = self.state_dim();
        let mean = OVector::<f64, Self::State>::from_fn_generic(n, U1, |i, _| {
            d.prior_mean().get(i).copied().unwrap_or(0.0)
        });
        let sd = OVector::<f64, Self::State>::from_fn_generic(n, U1, |i, _| {
            d.prior_sd().get(i).copied().unwrap_or(0.0)
        });
        Gaussian::new(mean, OMatrix::from_diagonal(&sd.component_mul(&sd)))
    }

    // ---- optional hooks -------------------------------------------------------------------

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
        _u: &[f64],
        _t: f64,
        _dt: f64,
    ) -> Option<OMatrix<f64, Self::State, Self::State>> {
        None
    }

    /// Hand-written Jacobian of `measure`; `None` (the default) means automatic differentiation.
    fn measurement_jacobian(
        &self,
        _x: &OVector<f64, Self::State>,
        _u: &[f64],
        _t: f64,
    ) -> Option<OMatrix<f64, Self::Meas, Self::State>> {
        None
    }
}

/// `G Qc Gᵀ`: the spectral density in state coordinates of white noise of density `qc` that
/// enters the dynamics through the noise-input matrix `g` (n × p), for
/// [`Model::noise_density`].
///
/// ```
/// use sightline_core::prelude::*;
/// // A force on the second state only: G = (0, 1)ᵀ.
/// let qc = noise_through(&Vector2::new(0.0, 1.0), &Matrix1::new(0.3));
/// assert_eq!(qc, Matrix2::new(0.0, 0.0, 0.0, 0.3));
/// ```
pub fn noise_through<N: Dim, P: Dim>(
    g: &OMatrix<f64, N, P>,
    qc: &OMatrix<f64, P, P>,
) -> OMatrix<f64, N, N>
where
    DefaultAllocator: Allocator<N, P> + Allocator<P, P> + Allocator<N, N> + Allocator<P, N>,
{
    g * qc * g.transpose()
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
