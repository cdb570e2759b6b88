//! Sightline: nonlinear state estimation. Write a plant's process and measurement functions once
//! in Rust; run every estimator on it — extended (with exact Jacobians by automatic
//! differentiation), sigma-point, particle and ensemble filters — and compare accuracy,
//! statistical consistency, likelihood and cost side by side.
//!
//! A plant file starts with one `use`:
//!
//! ```
//! use sightline::prelude::*;
//! ```
//!
//! (see [`core::writing_a_plant`] for the idioms). This facade re-exports the workspace crates:
//! - [`core`]: the [`Model`] trait, [`Gaussian`], RK4 and Van Loan discretisation, sigma-point
//!   rules;
//! - [`filters`]: the [`Filter`] trait and every filter family;
//! - [`models`]: the shipped plants;
//! - [`eval`]: datasets, runner, metrics, Monte Carlo, reports and the command line
//!   ([`cli::main_with`]).

pub use sightline_core as core;
pub use sightline_eval as eval;
pub use sightline_filters as filters;
pub use sightline_models as models;

pub use sightline_core::{Gaussian, Model, Real, Variable, nalgebra, num_dual};

/// Everything a plant needs: `use sightline::prelude::*;` (see [`sightline_core::prelude`]).
pub mod prelude {
    pub use sightline_core::prelude::*;
}
pub use sightline_eval::{AnyPlant, cli, plant, shipped};
pub use sightline_filters::{Filter, FilterSpec};
