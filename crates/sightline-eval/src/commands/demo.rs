//! `sightline demo [-o DIR]`: the built-in scenario — simulate, compare every filter, report.
//!
//! The scenario is our own (invented data, for demonstration only): at dusk the pumps of a
//! four-reservoir irrigation cascade — modelled by the quadruple-tank process — start filling
//! the nearly empty tanks for the night. Only the two lower levels are measured, so the upper
//! ones must be estimated, and the level-2 sensor drops out for a minute mid-fill: the filters
//! must coast through the gap on the model alone and recover when the sensor returns.

use std::io::Write;
use std::path::{Path, PathBuf};

use sightline_filters::FilterSpec;

use crate::commands::compare::{
    CompareOptions, ResultContext, compare_to_dir, failures_error, print_result,
};
use crate::dataset::read::MemorySource;
use crate::dataset::write::write_csv;
use crate::error::{Error, Result};
use crate::plant::AnyPlant;
use crate::settings::{DatasetSettings, Settings};
use crate::simulate::SimOptions;

/// A demo scenario: a plant, its settings, a simulated dataset with a sensor outage, and the
/// filters to compare.
#[derive(Debug, Clone, PartialEq)]
pub struct Scenario {
    /// Model name.
    pub model: &'static str,
    /// Parameter overrides.
    pub set: &'static [(&'static str, f64)],
    /// Rows.
    pub steps: usize,
    /// Seed of the simulation and of the sampling filters.
    pub seed: u64,
    /// Measurement components (by name) that drop out, and the outage window [start, end) in s.
    pub outage: (&'static [&'static str], f64, f64),
    /// Filter specs.
    pub filters: &'static [&'static str],
    /// One paragraph telling the story.
    pub story: &'static str,
}

/// The built-in scenario.
pub const SCENARIO: Scenario = Scenario {
    model: "quadtank",
    set: &[
        ("x0.h1", 3.0),
        ("x0.h2", 3.0),
        ("x0.h3", 0.8),
        ("x0.h4", 0.8),
    ],
    steps: 900,
    seed: 2024,
    outage: (&["level2"], 300.0, 360.0),
    filters: &[
        "ekf",
        "ukf",
        "ckf",
        "pf:particles=2000,temper=0.1",
        "enkf:members=200",
    ],
    story: "Night-time irrigation: at dusk two pumps (3 V each) start filling a cascade of four \
            nearly empty reservoirs, a quadruple-tank process. Only the two lower levels are \
            measured (1 s samples); the upper levels h3, h4 must be estimated. From t = 300 s \
            to 360 s the level-2 sensor drops out. Which estimator tracks all four levels best, \
            and which ones know how uncertain they are while the sensor is gone?",
};

/// Builds the scenario's plant and dataset.
pub fn scenario_data(
    plants: &[Box<dyn AnyPlant>],
    scenario: &Scenario,
) -> Result<(Box<dyn AnyPlant>, crate::dataset::Dataset)> {
    let Some(found) = plants.iter().find(|p| p.name() == scenario.model) else {
        return Err(Error::Usage(format!(
            "demo: the model '{}' is not in this build",
            scenario.model
        )));
    };
    let mut plant = found.clone_box();
    for (name, value) in scenario.set {
        plant.set(name, *value)?;
    }
    let mut data = plant.simulate(scenario.steps, scenario.seed, &SimOptions::default())?;
    let (names, start, end) = scenario.outage;
    let columns: Vec<usize> = data
        .layout
        .measurements
        .iter()
        .enumerate()
        .filter(|(_, n)| names.contains(&n.as_str()))
        .map(|(i, _)| i)
        .collect();
    for r in data
        .records
        .iter_mut()
        .filter(|r| r.t >= start && r.t < end)
    {
        for &j in &columns {
            r.y[j] = f64::NAN;
        }
    }
    Ok((plant, data))
}

/// Runs the demo into `output`; returns the summary's verdict.
pub fn run(plants: &[Box<dyn AnyPlant>], output: &Path) -> Result<()> {
    let scenario = &SCENARIO;
    let (plant, data) = scenario_data(plants, scenario)?;
    let specs = scenario
        .filters
        .iter()
        .map(|s| FilterSpec::parse(s))
        .collect::<Result<Vec<_>, _>>()?;
    println!("{}\n", scenario.story);
    let options = CompareOptions {
        seed: scenario.seed,
        ..CompareOptions::default()
    };
    // The demo's result reruns as a `compare` of the data.csv it keeps beside it.
    let sets: Vec<String> = scenario
        .set
        .iter()
        .map(|(n, v)| format!("{n}={v}"))
        .collect();
    let settings = Settings {
        filters: specs.iter().map(|s| s.label.clone()).collect(),
        data: Some("data.csv".into()),
        dataset: Some(DatasetSettings {
            time: "t".into(),
            time_unit: "s".into(),
            ..DatasetSettings::default()
        }),
        smooth: Some(false),
        ..Settings::new("compare", plant.as_ref(), &sets, scenario.seed)
    };
    let context = ResultContext {
        title: format!("Sightline demo: {} with a sensor outage", scenario.model),
        settings: Some(settings),
        ..ResultContext::default()
    };
    let (comparison, dir) = compare_to_dir(
        plant.as_ref(),
        &specs,
        &mut MemorySource::new(&data),
        &options,
        output,
        context,
        // Keep the dataset beside the results (and in the manifest) so the comparison can be
        // rerun by hand.
        &|dir| dir.write("data.csv", |w| write_csv(&data, w)),
    )?;
    let data_path: PathBuf = dir.join("data.csv");
    print_result(&comparison.summary, &dir, &comparison.notes);
    let sets: String = sets.iter().map(|s| format!(" --set {s}")).collect();
    println!(
        "data: {} (rerun: sightline compare {}{sets} {} -o DIR)",
        data_path.display(),
        scenario.model,
        data_path.display()
    );
    let _ = std::io::stdout().flush();
    match failures_error(&comparison.summary) {
        Some(e) => Err(e),
        None => Ok(()),
    }
}
