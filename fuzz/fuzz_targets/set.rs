//! `--set` items on arbitrary text (one item per line): parsing and applying them to every
//! shipped plant never panics; a plant that accepts them simulates and filters a few steps
//! without panicking.
#![no_main]

use libfuzzer_sys::fuzz_target;
use sightline_eval::cli::{PlantArgs, configure};
use sightline_eval::dataset::read::MemorySource;
use sightline_eval::runner::{self, NoObserver, RunConfig};
use sightline_eval::simulate::SimOptions;
use sightline_filters::FilterSpec;

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    let set: Vec<String> = text.lines().take(8).map(str::to_string).collect();
    let plants = sightline_eval::shipped();
    let names: Vec<String> = plants.iter().map(|p| p.name().to_string()).collect();
    for model in names {
        let args = PlantArgs {
            model,
            set: set.clone(),
        };
        let Ok(plant) = configure(&plants, &args) else {
            continue;
        };
        let Ok(data) = plant.simulate(5, 1, &SimOptions::default()) else {
            continue;
        };
        let specs: Vec<FilterSpec> = ["ekf", "ukf"]
            .iter()
            .filter_map(|s| FilterSpec::parse(s).ok())
            .collect();
        let Ok(filters) = runner::build_filters(plant.as_ref(), &specs, 1) else {
            continue;
        };
        let config = RunConfig {
            series_points: 0,
            ..RunConfig::default()
        };
        let _ = runner::run(
            plant.as_ref(),
            filters,
            &mut MemorySource::new(&data),
            &config,
            &mut NoObserver,
        );
    }
});
