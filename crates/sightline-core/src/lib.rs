//! Sightline core: what a plant is and the numerical pieces every estimator shares.
//!
//! A plant is written once as a [`Model`]: its transition and measurement functions are generic
//! over the scalar type ([`Real`]), so the same code runs with `f64` in sigma-point and particle
//! filters and with dual numbers in the extended filters, which get exact Jacobians by automatic
//! differentiation ([`Differentiable`]).
//!
//! This crate owns the model trait, the [`Gaussian`] type, the fixed-step integrators ([`rk4`],
//! [`Integrator`]), Van Loan's discretisation of process noise ([`van_loan`]), the sigma-point
//! rules ([`SigmaRule`]), seeded random streams ([`rng`]) and the error types. A plant file
//! starts with `use sightline_core::prelude::*;` ([`prelude`]); the section
//! [Writing a plant](writing_a_plant) shows the idioms and the traps.

pub mod ad;
pub mod chi2;
pub mod error;
pub mod gaussian;
pub mod integrate;
pub mod lanes;
pub mod linalg;
pub mod model;
pub mod params;
pub mod prelude;
pub mod real;
pub mod rng;
pub mod sigma;
pub mod vanloan;
pub mod writing_a_plant;

pub use ad::Differentiable;
pub use error::{NumericError, ParamError};
pub use gaussian::Gaussian;
pub use integrate::{Integrator, rk4};
pub use lanes::Lanes;
pub use model::{Alloc, Declaration, Model, Variable, noise_through};
pub use params::{Domain, Parameter, Parameters};
pub use real::{C, Real, c};
pub use sightline_derive::Parameters;
pub use sigma::{SigmaPoints, SigmaRule};
pub use vanloan::van_loan;

/// Re-exported so that user models name the same nalgebra and num-dual versions as Sightline.
pub use nalgebra;
pub use num_dual;
