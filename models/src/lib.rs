//! Sightline plant library: shipped plant models with published parameters, one file each.
//!
//! Every model implements [`sightline_core::Model`]; its parameters, their units and sources are
//! in its doc comment and listed by `sightline models`. Adding a plant is one file plus one line
//! in [`visit_all`].
//!
//! | model | states | measured | source |
//! |---|---|---|---|
//! | [`pendulum`] | angle, rate | bob's horizontal position | scenario of our own, standard gravity |
//! | [`cv`] | pos, vel | pos | Bar-Shalom, Li & Kirubarajan 2001 |
//! | [`ungm`] | x | x²/20 | Kitagawa 1996; Gordon, Salmond & Smith 1993 |
//! | [`quadtank`] | h1..h4 | kc·h1, kc·h2 | Johansson, IEEE TCST 8(3), 2000 |
//! | [`cstr`] | ca, temp | temp | textbook exothermic CSTR benchmark |
//! | [`tracking`] | px, py, vx, vy, omega | range, bearing | Bar-Shalom et al. 2001, §11.7 |
//! | [`tankchain`] | h1..hn (n at run time) | hn | Torricelli cascade, `Dyn` states |
//! | [`local_level`] | level | level | Durbin & Koopman 2012, ch. 2 |
//!
//! ```
//! use sightline_core::prelude::*;
//! use sightline_models::QuadTank;
//! let plant = QuadTank::default();
//! assert_eq!(plant.declare().states().len(), 4);
//! assert!(plant.parameters().iter().any(|p| p.name == "gamma1"));
//! ```

use sightline_core::nalgebra::DefaultAllocator;
use sightline_core::{Alloc, Model};

pub mod cstr;
pub mod cv;
pub mod local_level;
pub mod pendulum;
pub mod quadtank;
pub mod tankchain;
pub mod torricelli;
pub mod tracking;
pub mod ungm;

pub use cstr::Cstr;
pub use cv::Cv;
pub use local_level::LocalLevel;
pub use pendulum::Pendulum;
pub use quadtank::QuadTank;
pub use tankchain::TankChain;
pub use tracking::Tracking;
pub use ungm::Ungm;

/// Something that can be handed every shipped model in turn, whatever its concrete type.
///
/// The model registry is a visitor rather than a list because models differ in type (and
/// dimension); the evaluation crate's visitor boxes each into its type-erased plant handle.
pub trait ModelVisitor {
    /// Receives one model.
    fn visit<M: Model>(&mut self, model: M)
    where
        DefaultAllocator: Alloc<M::State, M::Meas>;
}

/// Hands every shipped model, with its default parameters, to `visitor` — the model registry.
pub fn visit_all(visitor: &mut impl ModelVisitor) {
    visitor.visit(Pendulum::default());
    visitor.visit(Cv::default());
    visitor.visit(Ungm::default());
    visitor.visit(QuadTank::default());
    visitor.visit(Cstr::default());
    visitor.visit(Tracking::default());
    visitor.visit(TankChain::default());
    visitor.visit(LocalLevel::default());
}
