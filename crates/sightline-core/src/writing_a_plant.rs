//! # Writing a plant
//!
//! A plant is a struct of parameters and one `impl Model`: seven items, written the way the
//! equations read in a notebook. Everything else — dimensions, the prior, inputs, `--set`,
//! the Jacobians, the discretisation of a continuous-time plant — is derived. This page shows
//! the idioms, and the mistakes generic code invites together with their fixes; every example
//! here is compiled and run by `cargo test`, and every "does not compile" example is checked to
//! fail.
//!
//! ## A continuous-time plant
//!
//! Write dx/dt = f(x, u, t) as [`Model::derivative`] and the white process noise as its spectral
//! density [`Model::noise_density`]. The library integrates `derivative` (RK4, one step per
//! sample unless [`Model::integrator`] says otherwise) and derives Q over each step by Van
//! Loan's method from the Jacobian of `derivative` at the current state, by automatic
//! differentiation.
//!
//! ```
//! use sightline_core::prelude::*;
//!
//! /// A mass on a spring with drag, pushed by a force input.
//! #[derive(Clone, Parameters)]
//! struct Spring {
//!     /// Stiffness over mass.
//!     #[param(default = 4.0, unit = "1/s^2", domain = Positive)]
//!     k: f64,
//!     /// Quadratic drag coefficient over mass.
//!     #[param(default = 0.3, unit = "1/m", domain = NonNegative)]
//!     drag: f64,
//!     /// Spectral density of the random force over mass.
//!     #[param(default = 0.01, unit = "m^2/s^3", domain = Positive)]
//!     q: f64,
//! }
//!
//! impl Model for Spring {
//!     type State = U2;
//!     type Meas = U1;
//!
//!     fn declare(&self) -> Declaration {
//!         Declaration::new("spring", 0.1)
//!             .state("x", "m", 1.0, 0.2)
//!             .state("v", "m/s", 0.0, 0.2)
//!             .measurement("x", "m")
//!             .input("force", "m/s^2", 0.0)
//!     }
//!     fn derivative<S: Real>(&self, x: &Vector2<S>, u: &[f64], _t: f64) -> Vector2<S> {
//!         let (pos, vel) = (x[0], x[1]);
//!         Vector2::new(vel, -pos * self.k - vel * vel.abs() * self.drag + u[0])
//!     }
//!     fn noise_density(&self, _x: &Vector2<f64>, _u: &[f64], _t: f64) -> Matrix2<f64> {
//!         // The force enters the rate only: G = (0, 1)ᵀ.
//!         noise_through(&Vector2::new(0.0, 1.0), &Matrix1::new(self.q))
//!     }
//!     fn measure<S: Real>(&self, x: &Vector2<S>, _u: &[f64], _t: f64) -> Vector1<S> {
//!         Vector1::new(x[0])
//!     }
//!     fn measurement_noise(&self, _t: f64) -> Matrix1<f64> {
//!         Matrix1::new(1e-4)
//!     }
//! }
//!
//! let plant = Spring::default();
//! let next = plant.transition(&Vector2::new(1.0, 0.0), &[0.0], 0.0, 0.1);
//! assert!(next[0] < 1.0 && next[1] < 0.0); // the spring pulls back
//! let q = plant.process_noise(&Vector2::new(1.0, 0.0), &[0.0], 0.0, 0.1);
//! // Over a short step Q ≈ Qc·dt on the rate (Van Loan's integral to first order).
//! assert!((q[(1, 1)] / (0.01 * 0.1) - 1.0).abs() < 0.05);
//! ```
//!
//! A discrete-time plant writes [`Model::transition`] and [`Model::process_noise`] instead
//! (see the example on [`Model`]). A plant that writes neither of a pair does not build:
//!
//! ```compile_fail
//! use sightline_core::prelude::*;
//! #[derive(Clone, Parameters)]
//! struct Forgetful;
//! impl Model for Forgetful {
//!     type State = U1;
//!     type Meas = U1;
//!     fn declare(&self) -> Declaration {
//!         Declaration::new("forgetful", 1.0).state("x", "-", 0.0, 1.0).measurement("x", "-")
//!     }
//!     fn measure<S: Real>(&self, x: &Vector1<S>, _u: &[f64], _t: f64) -> Vector1<S> { *x }
//!     fn measurement_noise(&self, _t: f64) -> Matrix1<f64> { Matrix1::new(1.0) }
//! }
//! // error: this plant defines neither `transition` (discrete time) nor `derivative` ...
//! let _ = Forgetful.transition(&Vector1::new(1.0), &[], 0.0, 1.0);
//! ```
//!
//! ## Arithmetic in generic code
//!
//! Plant functions are generic over `S: Real` (`f64`, or a dual number carrying derivatives).
//! A number of type `S` combines with `S` and with `f64` — with the `f64` on the right.
//!
//! **A constant on the left** does not compile, because Rust cannot know that `f64 − S` exists
//! for every `S`:
//!
//! ```compile_fail
//! use sightline_core::prelude::*;
//! fn damping<S: Real>(x: S, mu: f64) -> S {
//!     mu * (1.0 - x * x) // error: cannot subtract `S` from `{float}`
//! }
//! ```
//!
//! Wrap it in [`c`] (or write it on the right):
//!
//! ```
//! use sightline_core::prelude::*;
//! fn damping<S: Real>(x: S, mu: f64) -> S {
//!     c(mu) * (c(1.0) - x * x) // or: (-x * x + 1.0) * mu
//! }
//! assert_eq!(damping(2.0_f64, 0.5), -1.5);
//! ```
//!
//! The same holds for `2.0 * x` (write `x * 2.0` or `c(2.0) * x`) and for a parameter:
//!
//! ```compile_fail
//! use sightline_core::prelude::*;
//! fn spring<S: Real>(x: S, k: f64) -> S {
//!     -k * x // error: cannot multiply `f64` by `S`
//! }
//! ```
//!
//! ```
//! use sightline_core::prelude::*;
//! fn spring<S: Real>(x: S, k: f64) -> S {
//!     x * -k
//! }
//! assert_eq!(spring(2.0_f64, 3.0), -6.0);
//! ```
//!
//! A constant of type `S` is `S::from(v)`; zero and one are `S::zero()` and `S::one()`.
//!
//! ## Comparisons, maxima, branches
//!
//! `S` has no `<`: a dual number's order is that of its value, which has to be asked for.
//!
//! ```compile_fail
//! use sightline_core::prelude::*;
//! fn level<S: Real>(h: S) -> S {
//!     if h > 0.0 { h } else { h * 0.0 } // error: binary operation `>` cannot be applied to `S`
//! }
//! ```
//!
//! `max`, `min` and `clamp` compare by value and keep the derivatives of the argument they
//! select; [`Real::value`] reads the value for a branch:
//!
//! ```
//! use sightline_core::prelude::*;
//! fn level<S: Real>(h: S) -> S {
//!     h.max(0.0)
//! }
//! fn series_or_closed_form<S: Real>(theta: S) -> S {
//!     if theta.value().abs() < 1e-4 { c(1.0) - theta * theta / 6.0 } else { theta.sin() / theta }
//! }
//! assert_eq!(level(-2.0_f64), 0.0);
//! assert_eq!(series_or_closed_form(0.0_f64), 1.0);
//! ```
//!
//! Comparisons (`gt`, `ge`, `lt`, `le`) return a [`Real::Mask`]; choose with [`Real::select`].
//! An `if` on a mask does not compile in generic code — the mask of a scalar type that carries
//! several values at once (a batch of particles) is not a single `bool`:
//!
//! ```compile_fail
//! use sightline_core::prelude::*;
//! fn relu<S: Real>(x: S) -> S {
//!     if x.gt(0.0) { x } else { S::zero() } // error: expected `bool`, found associated type
//! }
//! ```
//!
//! ```
//! use sightline_core::prelude::*;
//! fn relu<S: Real>(x: S) -> S {
//!     S::select(x.gt(0.0), x, S::zero())
//! }
//! assert_eq!(relu(-1.0_f64), 0.0);
//! ```
//!
//! ## Many particles per call
//!
//! The particle filter with `lanes=on` runs the same `transition`, `derivative` and `measure`
//! with `S` = [`crate::Lanes`], four particles in one SIMD vector. Nothing is written twice,
//! and a branch on [`Real::value`] still works — the filter notices the value was read and
//! evaluates that plant one particle at a time — but only branch-free code gets the speed-up.
//! So prefer `select`, `max`, `min`, `clamp`, `smooth_max` and `abs` to an `if` on a value,
//! and keep both sides of a `select` finite (both are evaluated); branches on parameters,
//! inputs and time are free. [`crate::lanes`] lists the accuracy of each function on lanes.
//!
//! ```
//! use sightline_core::lanes::{Lanes, attempt};
//! use sightline_core::prelude::*;
//! fn relu<S: Real>(x: S) -> S {
//!     S::select(x.gt(0.0), x, S::zero())
//! }
//! fn relu_by_branch<S: Real>(x: S) -> S {
//!     if x.value() > 0.0 { x } else { S::zero() }
//! }
//! let x = Lanes::new([-1.0, 2.0, -3.0, 4.0]);
//! assert_eq!(attempt(|| relu(x)).unwrap().to_array(), [0.0, 2.0, 0.0, 4.0]);
//! assert!(attempt(|| relu_by_branch(x)).is_none()); // evaluated per particle instead
//! ```
//!
//! ## Flow laws at an empty tank
//!
//! √h has an infinite slope at h = 0, so `h.max(0.0).sqrt()` gives the extended filters an
//! infinite Jacobian when a tank runs dry. [`Real::smooth_max`] is analytic, within a small
//! width of the true maximum, with a slope between 0 and 1:
//!
//! ```
//! use sightline_core::num_dual::Dual64;
//! use sightline_core::prelude::*;
//! /// Torricelli outflow a·√(2g·h) with the level smoothed below 1e-3 cm.
//! fn outflow<S: Real>(h: S, a: f64, g: f64) -> S {
//!     (h.smooth_max(0.0, 1e-3) * (2.0 * g)).sqrt() * a
//! }
//! let slope = outflow(Dual64::new(0.0, 1.0), 0.07, 981.0).eps;
//! assert!(slope.is_finite() && slope > 0.0);
//! ```
//!
//! ## Parameters, prior and inputs
//!
//! Every field with `#[param(default, unit, domain)]` and a doc comment is a parameter
//! ([`crate::params`]): `sightline models` lists it, `--set name=value` sets it (an unknown
//! name is refused with the valid list), `tune --param name` searches it. The prior of every
//! state — its mean and standard deviation in the declaration — is `x0.<state>` and
//! `sd0.<state>` for `--set` and `tune` without any code in the plant. Inputs are declared with
//! their default value and arrive as `u: &[f64]` in declaration order; a plant without inputs
//! declares none and ignores `u`.
//!
//! ## Hooks
//!
//! Override a provided method only where the default is wrong for the plant: angle residuals
//! and circular means ([`Model::measurement_residual`], [`Model::measurement_mean`]), a
//! feasible set ([`Model::project`]), a hand-written Jacobian ([`Model::transition_jacobian`]),
//! the integrator ([`Model::integrator`]), or, for a runtime-sized (`Dyn`) plant, a cheap
//! [`Model::state_dim`].

#[cfg(doc)]
use crate::{Model, Real, c};
