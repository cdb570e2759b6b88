//! Property tests of `--set NAME=VALUE` parsing and application: never a panic; valid
//! assignments round-trip; invalid ones are errors naming what was wrong.

use proptest::prelude::*;
use sightline_eval::cli::parse_set;
use sightline_eval::shipped;

proptest! {
    /// Arbitrary text gives a parsed pair or a usage error, never a panic, and applying a parsed
    /// pair to any plant is an Ok or an error, never a panic.
    #[test]
    fn arbitrary_assignments_never_panic(text in ".{0,48}") {
        if let Ok((name, value)) = parse_set(&text) {
            prop_assert!(value.is_finite());
            for plant in shipped() {
                let mut p = plant.clone_box();
                let _ = p.set(&name, value);
            }
        }
    }

    /// A finite value written in Rust's shortest round-trip form parses back to the same bits.
    #[test]
    fn finite_values_round_trip(value in proptest::num::f64::NORMAL | proptest::num::f64::ZERO) {
        let (name, parsed) = parse_set(&format!("q={value}")).unwrap();
        prop_assert_eq!(name, "q");
        prop_assert_eq!(parsed.to_bits(), value.to_bits());
    }

    /// Every parameter of every shipped plant accepts its own default and rejects a value
    /// outside its domain, naming the parameter.
    #[test]
    fn parameters_accept_defaults_and_reject_out_of_domain(scale in 1.0f64..1e6) {
        for plant in shipped() {
            for param in plant.parameters() {
                let mut p = plant.clone_box();
                prop_assert!(p.set(&param.name, param.value).is_ok(), "{} rejects its default", param.name);
                let bad = match param.domain {
                    sightline_core::Domain::Positive => Some(-scale),
                    sightline_core::Domain::NonNegative => Some(-scale),
                    sightline_core::Domain::Interval(_, hi) => Some(hi + scale),
                    sightline_core::Domain::Integer(_, hi) => Some(hi as f64 + scale.ceil()),
                    sightline_core::Domain::Finite => None,
                };
                if let Some(bad) = bad {
                    let err = p.set(&param.name, bad).unwrap_err().to_string();
                    prop_assert!(err.contains(param.name.as_ref()), "{err}");
                }
            }
        }
    }
}

#[test]
fn malformed_assignments_are_usage_errors() {
    for bad in ["q", "=1", "q=", "q=abc", "q=inf", "q=NaN"] {
        let e = parse_set(bad).unwrap_err();
        assert_eq!(e.exit_code(), 2, "{bad}");
    }
}
