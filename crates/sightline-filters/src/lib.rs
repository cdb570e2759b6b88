//! Sightline filters: every estimator behind one object-safe [`Filter`] trait.
//!
//! One file per filter family; each builds from a spec string (`ukf:alpha=0.5`) through the
//! [`registry`]. Gaussian filters share the belief, the masked update for missing measurement
//! components and the Joseph-form covariance; the particle filter ([`pf`]) and the ensemble
//! Kalman filter ([`enkf`]) share the block-parallel, seed-split sample clouds that make their
//! output independent of the thread count. With static plant sizes a predict+update step
//! performs no heap allocation.
//!
//! Fixed-interval smoothers ([`smoother`]) sit behind the same trait: a filter asked to
//! [`Filter::record_for_smoothing`] keeps its forward pass, and [`Filter::smooth`] runs the
//! backward pass — Rauch–Tung–Striebel for the Gaussian filters (one generic pass, each filter
//! supplying its cross-covariance) and backward simulation for the particle filter
//! ([`particle_smoother`]).

mod belief;
mod cloud;
pub mod diffuse;
pub mod ekf;
pub mod enkf;
pub mod filter;
pub mod iekf;
pub mod kf;
pub mod linearise;
pub mod particle_smoother;
pub mod pf;
pub mod registry;
pub mod resample;
pub mod sigma_point;
pub mod smoother;
pub mod spec;
pub mod srukf;
mod update;

pub use cloud::NoiseAt;
pub use diffuse::DiffuseKf;
pub use ekf::Ekf;
pub use enkf::{EnkfConfig, EnsembleKalmanFilter};
pub use filter::{Diagnostics, Filter, FilterError, Innovation};
pub use iekf::Iekf;
pub use kf::{Gain, Kf};
pub use linearise::JacobianSource;
pub use pf::{ParticleFilter, PfConfig};
pub use registry::{KINDS, KindInfo, build, default_kinds};
pub use sigma_point::SigmaPointFilter;
pub use smoother::{SmoothedTrack, SmootherKind};
pub use spec::{FilterSpec, OptionInfo, Options, SpecError};
pub use srukf::SquareRootUkf;
