//! The spec registry: every filter kind, one line each.
//!
//! Adding a filter family is one file implementing [`crate::Filter`] plus one line in the
//! `registry!` invocation below: its [`KindInfo`] and its `build` function.

use nalgebra::DefaultAllocator;
use sightline_core::{Alloc, Gaussian, Model};

use crate::filter::Filter;
use crate::spec::{FilterSpec, OptionInfo, SpecError};

/// What the registry knows about a filter kind.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct KindInfo {
    /// The kind as written in a spec.
    pub kind: &'static str,
    /// One line on what it is.
    pub about: &'static str,
    /// Options it accepts.
    pub options: &'static [OptionInfo],
    /// Whether it only applies to linear plants.
    pub linear_only: bool,
    /// Whether it represents the belief by random samples drawn from the prior (`pf`, `enkf`):
    /// such a filter cannot start from a diffuse (infinite-variance) prior, see
    /// [`crate::diffuse`].
    pub sampling: bool,
}

macro_rules! registry {
    ($($info:path => $build:path),* $(,)?) => {
        /// Every filter kind, in the order `compare` runs them by default.
        pub const KINDS: &[KindInfo] = &[$($info),*];

        /// Builds the filter a spec names for plant `model`, starting from `prior`. `seed` feeds
        /// the random streams of sampling filters and is ignored by deterministic ones.
        pub fn build<M: Model>(
            model: &M,
            prior: &Gaussian<M::State>,
            spec: &FilterSpec,
            seed: u64,
        ) -> Result<Box<dyn Filter>, SpecError>
        where
            DefaultAllocator: Alloc<M::State, M::Meas>,
        {
            $(
                if spec.kind == $info.kind {
                    return $build(model, prior, spec, seed);
                }
            )*
            Err(SpecError::UnknownKind {
                spec: spec.label.clone(),
                kind: spec.kind.clone(),
                valid: KINDS.iter().map(|k| k.kind).collect::<Vec<_>>().join(" "),
            })
        }
    };
}

registry! {
    crate::kf::INFO => crate::kf::build,
    crate::ekf::INFO => crate::ekf::build,
    crate::iekf::INFO => crate::iekf::build,
    crate::sigma_point::UKF => crate::sigma_point::build_ukf,
    crate::sigma_point::CKF => crate::sigma_point::build_ckf,
    crate::sigma_point::GHKF => crate::sigma_point::build_ghkf,
    crate::srukf::INFO => crate::srukf::build,
    crate::pf::INFO => crate::pf::build,
    crate::enkf::INFO => crate::enkf::build,
}

/// The kinds `compare` runs when no `-f` is given: every kind that applies to the plant.
pub fn default_kinds(linear: bool) -> Vec<&'static str> {
    KINDS
        .iter()
        .filter(|k| linear || !k.linear_only)
        .map(|k| k.kind)
        .collect()
}
