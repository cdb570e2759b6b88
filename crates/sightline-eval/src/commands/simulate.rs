//! `sightline simulate`: a dataset with ground truth, written atomically to a file or streamed
//! into standard output (`-o -`), a FIFO or a character device ([`crate::output::FileTarget`]).

use std::path::Path;

use crate::cli::{PlantArgs, configure};
use crate::dataset::Layout;
use crate::dataset::write::CsvRecordWriter;
use crate::error::{Error, Result};
use crate::output::FileTarget;
use crate::plant::AnyPlant;
use crate::simulate::SimOptions;

/// Runs `simulate`: the rows stream into a temporary file beside `output`, renamed onto it only
/// when the simulation is complete (an error or a signal leaves no partial file and an earlier
/// file intact), or straight into a stream.
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
    if steps == 0 {
        return Err(Error::Usage(
            "--steps must be at least 1 (a dataset needs at least one row)".into(),
        ));
    }
    let options = SimOptions {
        noise_free,
        every,
        dropout,
    };
    let layout = Layout {
        inputs: plant.inputs().into_iter().map(|v| v.name).collect(),
        measurements: plant.measurements().into_iter().map(|v| v.name).collect(),
        states: plant.states().into_iter().map(|v| v.name).collect(),
    };
    let target = FileTarget::check(output)?;
    let mut rows = 0u64;
    target
        .write(output, |w| {
            let mut writer = CsvRecordWriter::new(w, &layout)?;
            plant.simulate_each(steps, seed, &options, &mut |record| {
                rows += 1;
                writer.write(record)
            })?;
            writer.finish()
        })
        .map_err(|e| match e {
            Error::Interrupted(m) if target.streams() => Error::Interrupted(format!(
                "{m}; the rows before it were streamed to {}",
                output.display()
            )),
            Error::Interrupted(m) => Error::Interrupted(format!(
                "{m}; {} was not written (an earlier file there is unchanged)",
                output.display()
            )),
            other => other,
        })?;
    eprintln!(
        "wrote {rows} rows of '{}' to {}",
        plant.name(),
        output.display()
    );
    Ok(())
}
