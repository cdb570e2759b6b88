//! Everything a plant needs, in one `use`: `use sightline_core::prelude::*;` (or
//! `use sightline::prelude::*;` from the facade).
//!
//! The model trait and its declaration ([`Model`], [`Declaration`], [`Variable`]), the scalar
//! trait and its left-hand constant ([`Real`], [`c`]), parameters ([`Parameters`] — trait and
//! derive —, [`Parameter`], [`Domain`]), continuous-time helpers ([`Integrator`], [`rk4`],
//! [`van_loan`], [`noise_through`]), [`Gaussian`], [`wrap_angle`], and the nalgebra vector,
//! matrix and dimension types plants are written with.

pub use crate::gaussian::Gaussian;
pub use crate::integrate::{Integrator, rk4};
pub use crate::model::{Declaration, Model, Variable, noise_through, wrap_angle};
pub use crate::params::{Domain, Parameter, Parameters};
pub use crate::real::{C, Real, c};
pub use crate::vanloan::van_loan;
pub use sightline_derive::Parameters;

pub use nalgebra::{
    Const, DMatrix, DVector, Dyn, Matrix1, Matrix2, Matrix3, Matrix4, Matrix5, Matrix6, OMatrix,
    OVector, SMatrix, SVector, U1, U2, U3, U4, U5, U6, Vector1, Vector2, Vector3, Vector4, Vector5,
    Vector6,
};

/// The path `#[derive(Parameters)]` names this crate by (plants import the prelude).
#[doc(hidden)]
pub use crate as __sightline_core;
