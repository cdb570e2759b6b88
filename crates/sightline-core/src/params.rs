//! Named, documented, validated model parameters (`--set name=value`), declared once.
//!
//! A plant's parameters are the fields of its struct. `#[derive(Parameters)]` reads one
//! declaration per field — the field's name, its doc comment (the meaning) and a `#[param(...)]`
//! attribute with the default, unit and domain — and from it implements [`Parameters`] (listing
//! and setting by name, unknown names refused with the valid list) and `Default`. What
//! `sightline models`, `--set`, `tune` and the report show all comes from there.
//!
//! ```
//! use sightline_core::prelude::*;
//!
//! #[derive(Debug, Clone, Parameters)]
//! struct Heater {
//!     /// Heat capacity of the block.
//!     #[param(default = 900.0, unit = "J/K", domain = Positive)]
//!     capacity: f64,
//!     /// Splits of the two outlets (fraction to the first).
//!     #[param(default = [0.5, 0.7], unit = "-", domain = Interval(0.0, 1.0), name = "split{}")]
//!     split: [f64; 2],
//! }
//!
//! let mut h = Heater::default();
//! assert_eq!(h.capacity, 900.0);
//! h.set_parameter("split2", 0.25).unwrap();
//! assert_eq!(h.split, [0.5, 0.25]);
//! let names: Vec<_> = h.parameters().iter().map(|p| p.name.to_string()).collect();
//! assert_eq!(names, ["capacity", "split1", "split2"]);
//! let e = h.set_parameter("capacty", 1.0).unwrap_err().to_string();
//! assert!(e.contains("capacity, split1, split2"), "{e}");
//! assert!(h.set_parameter("capacity", -1.0).is_err());
//! ```

use std::borrow::Cow;

use crate::error::ParamError;

/// The values a parameter may take.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Domain {
    /// Strictly positive (variances, lengths, areas, time steps).
    Positive,
    /// Zero or positive (damping, rates).
    NonNegative,
    /// Any finite value.
    Finite,
    /// A closed interval `[lo, hi]`.
    Interval(f64, f64),
    /// A whole number in `[lo, hi]` (e.g. the number of tanks of a runtime-sized chain).
    Integer(i64, i64),
}

impl Domain {
    /// Whether `value` lies in the domain (non-finite values never do).
    pub fn contains(&self, value: f64) -> bool {
        value.is_finite()
            && match *self {
                Domain::Positive => value > 0.0,
                Domain::NonNegative => value >= 0.0,
                Domain::Finite => true,
                Domain::Interval(lo, hi) => (lo..=hi).contains(&value),
                Domain::Integer(lo, hi) => {
                    value.fract() == 0.0 && (lo as f64..=hi as f64).contains(&value)
                }
            }
    }

    /// The domain in words, for error messages and `sightline models`.
    pub fn describe(&self) -> String {
        match *self {
            Domain::Positive => "> 0".into(),
            Domain::NonNegative => ">= 0".into(),
            Domain::Finite => "finite".into(),
            Domain::Interval(lo, hi) => format!("in [{lo}, {hi}]"),
            Domain::Integer(lo, hi) => format!("a whole number in [{lo}, {hi}]"),
        }
    }
}

/// One parameter as listed by `sightline models`, set by `--set` and searched by `tune`.
///
/// Built with named fields:
///
/// ```
/// use sightline_core::prelude::*;
/// let p = Parameter {
///     name: "q".into(),
///     value: 0.5,
///     unit: "m^2/s^3".into(),
///     about: "spectral density of the white acceleration".into(),
///     domain: Domain::Positive,
/// };
/// assert!(p.domain.contains(p.value));
/// ```
#[derive(Debug, Clone, PartialEq)]
pub struct Parameter {
    /// Name used on the command line.
    pub name: Cow<'static, str>,
    /// Current value.
    pub value: f64,
    /// Unit, e.g. "m/s^2" ("-" when dimensionless).
    pub unit: Cow<'static, str>,
    /// What it is, and where its default comes from.
    pub about: Cow<'static, str>,
    /// Allowed values.
    pub domain: Domain,
}

/// A plant's parameters: listed with their current values and set by name.
///
/// Implement it with `#[derive(Parameters)]` (see the [module docs](self)); a plant without
/// parameters derives it too (`#[derive(Clone, Parameters)] struct Walk;`).
pub trait Parameters {
    /// Every parameter with its current value, in declaration order.
    fn parameters(&self) -> Vec<Parameter>;

    /// Sets the parameter `name` to `value`: an unknown name, or a value outside the
    /// parameter's domain, is an error that names the valid choices or the allowed range.
    fn set_parameter(&mut self, name: &str, value: f64) -> Result<(), ParamError>;
}

/// Checks `value` against the parameter list and returns the matching parameter, or an error
/// naming the valid choices or the allowed range. `model` names the plant in the message (the
/// derive passes the struct's name; the command line replaces it with the declared name).
pub fn validate<'a>(
    model: &str,
    params: &'a [Parameter],
    name: &str,
    value: f64,
) -> Result<&'a Parameter, ParamError> {
    let Some(p) = params.iter().find(|p| p.name == name) else {
        return Err(ParamError::Unknown {
            model: model.to_string(),
            name: name.to_string(),
            valid: params
                .iter()
                .map(|p| p.name.as_ref())
                .collect::<Vec<_>>()
                .join(", "),
        });
    };
    if !p.domain.contains(value) {
        return Err(ParamError::OutOfDomain {
            model: model.to_string(),
            name: name.to_string(),
            value,
            expected: p.domain.describe(),
        });
    }
    Ok(p)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn domains_reject_what_they_should() {
        assert!(Domain::Positive.contains(1e-300));
        assert!(!Domain::Positive.contains(0.0));
        assert!(!Domain::Positive.contains(f64::NAN));
        assert!(Domain::NonNegative.contains(0.0));
        assert!(!Domain::Finite.contains(f64::INFINITY));
        assert!(Domain::Integer(1, 64).contains(8.0));
        assert!(!Domain::Integer(1, 64).contains(8.5));
        assert!(!Domain::Integer(1, 64).contains(65.0));
    }

    #[test]
    fn validate_names_the_choices() {
        let ps = [Parameter {
            name: "r".into(),
            value: 1.0,
            unit: "m^2".into(),
            about: "noise".into(),
            domain: Domain::Positive,
        }];
        let e = validate("cv", &ps, "rr", 1.0).unwrap_err().to_string();
        assert!(e.contains("'rr'") && e.contains("r"), "{e}");
        let e = validate("cv", &ps, "r", -1.0).unwrap_err().to_string();
        assert!(e.contains("> 0"), "{e}");
    }
}
