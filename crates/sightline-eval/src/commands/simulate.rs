//! `sightline simulate`: a dataset with ground truth, written atomically.

use std::path::Path;

use crate::cli::{PlantArgs, configure};
use crate::dataset::write::write_csv;
use crate::error::Result;
use crate::output::write_file;
use crate::plant::AnyPlant;
use crate::simulate::SimOptions;

/// Runs `simulate`.
#[allow(clippy::too_many_arguments)]
pub fn run(
    plants: &[Box<dyn AnyPlant>],
    args: &PlantArgs,
    steps: usize,
    seed: u64,
    noise_free: bool,
    every: usize,
    dropout: f64,
    output: &Path,
) -> Result<()> {
    let plant = configure(plants, args)?;
    let options = SimOptions {
        noise_free,
        every,
        dropout,
    };
    let data = plant.simulate(steps, seed, &options)?;
    write_file(output, |w| write_csv(&data, w))?;
    eprintln!(
        "wrote {} rows of '{}' to {}",
        data.records.len(),
        plant.name(),
        output.display()
    );
    Ok(())
}
