//! Filter specs: `KIND[:key=value[,key=value]...]`, e.g. `ukf:alpha=0.5,beta=2,kappa=0`.
//!
//! The spec string as given is the filter's label everywhere (tables, JSON, CSV).
//!
//! A **sweep** `key=a|b|c` ([`FilterSpec::expand`]) stands for one filter per value, each
//! labelled by its full expanded spec (`pf:particles=500|2000` is `pf:particles=500` and
//! `pf:particles=2000`), in the order given; several swept options expand to every combination,
//! the first option varying slowest.

use thiserror::Error;

/// A parsed filter spec.
#[derive(Debug, Clone, PartialEq)]
pub struct FilterSpec {
    /// The string as given: the filter's label.
    pub label: String,
    /// The kind before the colon.
    pub kind: String,
    /// `key=value` options in the order given.
    pub options: Vec<(String, String)>,
}

/// A spec that cannot be parsed or built.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum SpecError {
    /// Malformed syntax.
    #[error(
        "filter spec '{spec}': {reason}; expected KIND[:key=value[,key=value]...], e.g. ukf:alpha=0.5"
    )]
    Syntax {
        /// The spec string.
        spec: String,
        /// What is wrong.
        reason: String,
    },
    /// No filter of that kind.
    #[error("filter spec '{spec}': unknown filter kind '{kind}'; valid kinds: {valid}")]
    UnknownKind {
        /// The spec string.
        spec: String,
        /// The kind given.
        kind: String,
        /// Valid kinds.
        valid: String,
    },
    /// An option the kind does not have.
    #[error("filter spec '{spec}': unknown option '{key}' for {kind}; valid options: {valid}")]
    UnknownOption {
        /// The spec string.
        spec: String,
        /// Filter kind.
        kind: String,
        /// The option given.
        key: String,
        /// Valid options.
        valid: String,
    },
    /// An option value of the wrong type or out of range.
    #[error("filter spec '{spec}': option '{key}' = '{value}' is invalid: expected {expected}")]
    BadValue {
        /// The spec string.
        spec: String,
        /// Option name.
        key: String,
        /// Value given.
        value: String,
        /// What was expected.
        expected: String,
    },
    /// The filter does not apply to the model, or could not be set up for it.
    #[error("filter spec '{spec}': {reason}")]
    NotApplicable {
        /// The spec string.
        spec: String,
        /// Why.
        reason: String,
    },
}

impl FilterSpec {
    /// Parses a spec string.
    ///
    /// ```
    /// use sightline_filters::FilterSpec;
    /// let s = FilterSpec::parse("pf:particles=5000,resample=systematic").unwrap();
    /// assert_eq!(s.kind, "pf");
    /// assert_eq!(s.options[0], ("particles".to_string(), "5000".to_string()));
    /// assert_eq!(s.label, "pf:particles=5000,resample=systematic");
    /// assert!(FilterSpec::parse("ukf:alpha").is_err());
    /// ```
    pub fn parse(spec: &str) -> Result<Self, SpecError> {
        let syntax = |reason: &str| SpecError::Syntax {
            spec: spec.to_string(),
            reason: reason.to_string(),
        };
        let trimmed = spec.trim();
        let (kind, rest) = match trimmed.split_once(':') {
            Some((k, r)) => (k.trim(), Some(r)),
            None => (trimmed, None),
        };
        if kind.is_empty() {
            return Err(syntax("the filter kind is empty"));
        }
        if !kind
            .chars()
            .all(|c| c.is_ascii_alphanumeric() || c == '_' || c == '-')
        {
            return Err(syntax(
                "the kind may hold only letters, digits, '-' and '_'",
            ));
        }
        let mut options: Vec<(String, String)> = Vec::new();
        if let Some(rest) = rest {
            if rest.trim().is_empty() {
                return Err(syntax("nothing after ':'"));
            }
            for item in rest.split(',') {
                let Some((key, value)) = item.split_once('=') else {
                    return Err(syntax(&format!("option '{}' has no '=value'", item.trim())));
                };
                let (key, value) = (key.trim(), value.trim());
                if key.is_empty() || value.is_empty() {
                    return Err(syntax(&format!(
                        "option '{}' is empty on one side of '='",
                        item.trim()
                    )));
                }
                if options.iter().any(|(k, _)| k == key) {
                    return Err(syntax(&format!("option '{key}' is given twice")));
                }
                options.push((key.to_string(), value.to_string()));
            }
        }
        Ok(FilterSpec {
            label: trimmed.to_string(),
            kind: kind.to_ascii_lowercase(),
            options,
        })
    }

    /// Expands a spec with sweeps (`key=a|b|c`) into one spec per combination of values, in
    /// the order given (the first swept option varying slowest), each labelled by its expanded
    /// spec string. A spec without a sweep is [`FilterSpec::parse`]d as it is (label unchanged).
    ///
    /// ```
    /// use sightline_filters::FilterSpec;
    /// let specs = FilterSpec::expand("pf:particles=500|2000|8000,resample=systematic").unwrap();
    /// let labels: Vec<&str> = specs.iter().map(|s| s.label.as_str()).collect();
    /// assert_eq!(labels, [
    ///     "pf:particles=500,resample=systematic",
    ///     "pf:particles=2000,resample=systematic",
    ///     "pf:particles=8000,resample=systematic",
    /// ]);
    /// assert_eq!(specs[1].options[0], ("particles".to_string(), "2000".to_string()));
    /// assert!(FilterSpec::expand("pf:particles=500|").is_err());
    /// ```
    pub fn expand(spec: &str) -> Result<Vec<Self>, SpecError> {
        let base = Self::parse(spec)?;
        if !base.options.iter().any(|(_, v)| v.contains('|')) {
            return Ok(vec![base]);
        }
        let mut choices: Vec<(String, Vec<String>)> = Vec::with_capacity(base.options.len());
        for (key, value) in &base.options {
            let values: Vec<String> = value.split('|').map(|v| v.trim().to_string()).collect();
            if values.iter().any(String::is_empty) {
                return Err(SpecError::Syntax {
                    spec: spec.trim().to_string(),
                    reason: format!("the sweep '{key}={value}' has an empty value"),
                });
            }
            if let Some(v) = values
                .iter()
                .enumerate()
                .find_map(|(i, v)| values[..i].contains(v).then_some(v))
            {
                return Err(SpecError::Syntax {
                    spec: spec.trim().to_string(),
                    reason: format!("the sweep '{key}={value}' gives '{v}' twice"),
                });
            }
            choices.push((key.clone(), values));
        }
        let kind_text = spec.trim().split_once(':').map_or("", |(k, _)| k.trim());
        let mut combos: Vec<Vec<(String, String)>> = vec![Vec::new()];
        for (key, values) in &choices {
            combos = combos
                .into_iter()
                .flat_map(|prefix| {
                    values.iter().map(move |v| {
                        let mut c = prefix.clone();
                        c.push((key.clone(), v.clone()));
                        c
                    })
                })
                .collect();
        }
        Ok(combos
            .into_iter()
            .map(|options| {
                let text = options
                    .iter()
                    .map(|(k, v)| format!("{k}={v}"))
                    .collect::<Vec<_>>()
                    .join(",");
                FilterSpec {
                    label: format!("{kind_text}:{text}"),
                    kind: base.kind.clone(),
                    options,
                }
            })
            .collect())
    }

    /// Option reader that rejects keys outside `valid`.
    pub fn options(&self, valid: &[OptionInfo]) -> Result<Options<'_>, SpecError> {
        for (key, _) in &self.options {
            if !valid.iter().any(|o| o.key == key) {
                return Err(SpecError::UnknownOption {
                    spec: self.label.clone(),
                    kind: self.kind.clone(),
                    key: key.clone(),
                    valid: if valid.is_empty() {
                        "(none)".into()
                    } else {
                        valid.iter().map(|o| o.key).collect::<Vec<_>>().join(", ")
                    },
                });
            }
        }
        Ok(Options { spec: self })
    }
}

/// One option a filter kind accepts, for the unknown-option error and `sightline models`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct OptionInfo {
    /// Key.
    pub key: &'static str,
    /// Default, as written in a spec.
    pub default: &'static str,
    /// What it does.
    pub about: &'static str,
}

/// Typed access to a spec's options.
#[derive(Debug, Clone, Copy)]
pub struct Options<'a> {
    spec: &'a FilterSpec,
}

impl Options<'_> {
    fn raw(&self, key: &str) -> Option<&str> {
        self.spec
            .options
            .iter()
            .find(|(k, _)| k == key)
            .map(|(_, v)| v.as_str())
    }

    fn bad(&self, key: &str, value: &str, expected: &str) -> SpecError {
        SpecError::BadValue {
            spec: self.spec.label.clone(),
            key: key.to_string(),
            value: value.to_string(),
            expected: expected.to_string(),
        }
    }

    /// The spec's label.
    pub fn label(&self) -> &str {
        &self.spec.label
    }

    /// Error for a spec that does not apply.
    pub fn not_applicable(&self, reason: impl Into<String>) -> SpecError {
        SpecError::NotApplicable {
            spec: self.spec.label.clone(),
            reason: reason.into(),
        }
    }

    /// A real option with a default, accepted when `ok` holds; `expected` describes the range.
    pub fn real(
        &self,
        key: &str,
        default: f64,
        ok: impl Fn(f64) -> bool,
        expected: &str,
    ) -> Result<f64, SpecError> {
        match self.raw(key) {
            None => Ok(default),
            Some(v) => match v.parse::<f64>() {
                Ok(x) if x.is_finite() && ok(x) => Ok(x),
                _ => Err(self.bad(key, v, expected)),
            },
        }
    }

    /// A whole-number option in `[min, max]`.
    pub fn count(
        &self,
        key: &str,
        default: usize,
        min: usize,
        max: usize,
    ) -> Result<usize, SpecError> {
        match self.raw(key) {
            None => Ok(default),
            Some(v) => match v.replace('_', "").parse::<usize>() {
                Ok(x) if (min..=max).contains(&x) => Ok(x),
                _ => Err(self.bad(key, v, &format!("a whole number from {min} to {max}"))),
            },
        }
    }

    /// One of a fixed set of words.
    pub fn choice<'c>(
        &self,
        key: &str,
        default: &'c str,
        choices: &[&'c str],
    ) -> Result<&'c str, SpecError> {
        match self.raw(key) {
            None => Ok(default),
            Some(v) => choices
                .iter()
                .copied()
                .find(|c| c.eq_ignore_ascii_case(v))
                .ok_or_else(|| self.bad(key, v, &format!("one of {}", choices.join(", ")))),
        }
    }

    /// A switch: `on`/`off` (also `true`/`false`, `yes`/`no`, `1`/`0`).
    pub fn switch(&self, key: &str, default: bool) -> Result<bool, SpecError> {
        match self.raw(key) {
            None => Ok(default),
            Some(v) => match v.to_ascii_lowercase().as_str() {
                "on" | "true" | "yes" | "1" => Ok(true),
                "off" | "false" | "no" | "0" => Ok(false),
                _ => Err(self.bad(key, v, "on or off")),
            },
        }
    }

    /// The raw text of an option, for kinds that parse it themselves (e.g. a gain matrix).
    pub fn text(&self, key: &str) -> Option<&str> {
        self.raw(key)
    }

    /// Error for an option whose text a kind could not parse.
    pub fn bad_value(&self, key: &str, expected: &str) -> SpecError {
        self.bad(key, self.raw(key).unwrap_or(""), expected)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const OPTS: &[OptionInfo] = &[
        OptionInfo {
            key: "alpha",
            default: "1",
            about: "",
        },
        OptionInfo {
            key: "resample",
            default: "systematic",
            about: "",
        },
        OptionInfo {
            key: "particles",
            default: "1000",
            about: "",
        },
    ];

    #[test]
    fn parses_kind_alone_and_with_options() {
        let s = FilterSpec::parse("EKF").unwrap();
        assert_eq!(s.kind, "ekf");
        assert!(s.options.is_empty());
        let s = FilterSpec::parse("ukf: alpha = 0.5 ").unwrap();
        assert_eq!(s.options, vec![("alpha".into(), "0.5".into())]);
    }

    #[test]
    fn sweeps_expand_every_combination_in_order() {
        let specs = FilterSpec::expand("ukf:alpha=0.1|1, kappa=0|2").unwrap();
        let labels: Vec<&str> = specs.iter().map(|s| s.label.as_str()).collect();
        assert_eq!(
            labels,
            [
                "ukf:alpha=0.1,kappa=0",
                "ukf:alpha=0.1,kappa=2",
                "ukf:alpha=1,kappa=0",
                "ukf:alpha=1,kappa=2"
            ]
        );
        // Without a sweep the label is the spec as given.
        assert_eq!(FilterSpec::expand(" ekf ").unwrap()[0].label, "ekf");
        assert!(FilterSpec::expand("pf:particles=5|5").is_err());
    }

    #[test]
    fn rejects_malformed_specs() {
        for bad in [
            "",
            ":a=1",
            "ukf:",
            "ukf:alpha",
            "ukf:=1",
            "ukf:alpha=1,alpha=2",
            "u kf",
        ] {
            assert!(
                FilterSpec::parse(bad).is_err(),
                "{bad:?} should be rejected"
            );
        }
    }

    #[test]
    fn typed_options_name_the_problem() {
        let s = FilterSpec::parse("pf:particles=0,alpha=abc").unwrap();
        let o = s.options(OPTS).unwrap();
        let e = o
            .count("particles", 1000, 1, 10_000_000)
            .unwrap_err()
            .to_string();
        assert!(e.contains("particles") && e.contains("from 1"), "{e}");
        let e = o
            .real("alpha", 1.0, |a| a > 0.0, "> 0")
            .unwrap_err()
            .to_string();
        assert!(e.contains("alpha") && e.contains("abc"), "{e}");
        let s = FilterSpec::parse("pf:bogus=1").unwrap();
        let e = s.options(OPTS).unwrap_err().to_string();
        assert!(e.contains("bogus") && e.contains("particles"), "{e}");
        let s = FilterSpec::parse("pf:resample=Stratified").unwrap();
        let o = s.options(OPTS).unwrap();
        assert_eq!(
            o.choice("resample", "systematic", &["systematic", "stratified"])
                .unwrap(),
            "stratified"
        );
    }
}
