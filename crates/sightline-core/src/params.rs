//! Named, documented, validated model parameters (`--set name=value`).

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

/// One model parameter as listed by `sightline models` and set by `--set`.
#[derive(Debug, Clone, PartialEq)]
pub struct Parameter {
    /// Name used on the command line.
    pub name: &'static str,
    /// Current value.
    pub value: f64,
    /// Unit, e.g. "m/s^2" ("-" when dimensionless).
    pub unit: &'static str,
    /// What it is, and where its default comes from.
    pub about: &'static str,
    /// Allowed values.
    pub domain: Domain,
}

impl Parameter {
    /// A parameter with its current value.
    pub fn new(
        name: &'static str,
        value: f64,
        unit: &'static str,
        domain: Domain,
        about: &'static str,
    ) -> Self {
        Parameter {
            name,
            value,
            unit,
            about,
            domain,
        }
    }
}

/// Checks `value` against the parameter list and returns the matching parameter, or an error
/// naming the valid choices or the allowed range.
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
            valid: params.iter().map(|p| p.name).collect::<Vec<_>>().join(", "),
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
        let ps = [Parameter::new("r", 1.0, "m^2", Domain::Positive, "noise")];
        let e = validate("cv", &ps, "rr", 1.0).unwrap_err().to_string();
        assert!(e.contains("'rr'") && e.contains("r"), "{e}");
        let e = validate("cv", &ps, "r", -1.0).unwrap_err().to_string();
        assert!(e.contains("> 0"), "{e}");
    }
}
