//! Filter specs on arbitrary text: parsing and building never panic; a filter that builds runs
//! a short simulated dataset without panicking (it may fail with an error).
#![no_main]

use libfuzzer_sys::fuzz_target;
use sightline_eval::dataset::read::MemorySource;
use sightline_eval::runner::{self, NoObserver, RunConfig};
use sightline_eval::simulate::SimOptions;
use sightline_filters::FilterSpec;

/// Largest sample count built here: bigger clouds are valid but only slow the fuzzer down.
const MAX_SAMPLES: f64 = 5000.0;

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    let Ok(spec) = FilterSpec::parse(text) else {
        return;
    };
    let big = spec.options.iter().any(|(key, value)| {
        matches!(key.as_str(), "particles" | "members" | "order" | "iterations")
            && value
                .replace('_', "")
                .parse::<f64>()
                .map_or(false, |v| v > MAX_SAMPLES)
    });
    if big {
        return;
    }
    for plant in sightline_eval::shipped() {
        if !matches!(plant.name(), "cv" | "pendulum" | "tracking") {
            continue;
        }
        let Ok(filter) = plant.build_filter(&spec, 1) else {
            continue;
        };
        let Ok(data) = plant.simulate(20, 3, &SimOptions::default()) else {
            continue;
        };
        let config = RunConfig {
            series_points: 0,
            ..RunConfig::default()
        };
        let outcome = runner::run(
            plant.as_ref(),
            vec![filter],
            &mut MemorySource::new(&data),
            &config,
            &mut NoObserver,
        );
        if let Ok(outcome) = outcome {
            for f in &outcome.filters {
                if f.ok() {
                    assert_eq!(outcome.steps, 20);
                }
            }
        }
    }
});
