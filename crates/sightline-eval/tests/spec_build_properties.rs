//! Property tests of building filters from specs: every registered kind with an arbitrary value
//! for any of its options either builds (and then filters a short dataset without panicking)
//! or fails with an error naming the option — never a panic.

use proptest::prelude::*;
use sightline_eval::dataset::read::MemorySource;
use sightline_eval::runner::{self, NoObserver, RunConfig};
use sightline_eval::shipped;
use sightline_eval::simulate::SimOptions;
use sightline_filters::{FilterSpec, KINDS, SpecError};

/// Sample counts above this are valid but only slow the test down.
const MAX_SAMPLES: f64 = 20_000.0;

/// Values that are often valid (numbers in and around the usual ranges, the words the options
/// take) mixed with arbitrary short text.
fn option_value() -> impl Strategy<Value = String> {
    prop_oneof![
        (-3.0f64..3.0).prop_map(|v| v.to_string()),
        (0.0f64..1.0).prop_map(|v| v.to_string()),
        (0u32..3000).prop_map(|v| v.to_string()),
        prop::sample::select(vec![
            "on",
            "off",
            "yes",
            "no",
            "systematic",
            "stratified",
            "multinomial",
            "residual",
            "sir",
            "auxiliary",
            "mean",
            "each",
            "model",
            "ad",
            "optimal",
            "steady",
            "1e-300",
            "1e300",
            "0.999999999",
            "1e-12",
            "0",
            "-0",
            "nan",
            "inf",
        ])
        .prop_map(str::to_string),
        "[-+0-9.eE_a-z]{1,10}",
    ]
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(400))]

    #[test]
    fn any_option_value_builds_or_is_named(
        kind in 0..KINDS.len(),
        option in any::<prop::sample::Index>(),
        value in option_value(),
    ) {
        let info = KINDS[kind];
        prop_assume!(!info.options.is_empty());
        let key = info.options[option.index(info.options.len())].key;
        let big = matches!(key, "particles" | "members" | "order" | "iterations")
            && value.replace('_', "").parse::<f64>().is_ok_and(|v| v > MAX_SAMPLES);
        prop_assume!(!big);
        let Ok(spec) = FilterSpec::parse(&format!("{}:{key}={value}", info.kind)) else {
            return Ok(());
        };
        for plant in shipped() {
            if !matches!(plant.name(), "cv" | "pendulum") {
                continue;
            }
            match plant.build_filter(&spec, 7) {
                Ok(filter) => {
                    let data = plant.simulate(8, 1, &SimOptions::default()).unwrap();
                    let config = RunConfig { series_points: 0, ..RunConfig::default() };
                    let outcome = runner::run(
                        plant.as_ref(),
                        vec![filter],
                        &mut MemorySource::new(&data),
                        &config,
                        &mut NoObserver,
                    )
                    .unwrap();
                    prop_assert_eq!(outcome.steps, 8);
                }
                Err(SpecError::NotApplicable { .. }) => {}
                Err(e) => {
                    let text = e.to_string();
                    prop_assert!(text.contains(key), "{} does not name {}", text, key);
                }
            }
        }
    }
}
