//! One file per command; [`dispatch`] routes a parsed command line to it.

use crate::cli::Command;
use crate::error::Result;
use crate::plant::AnyPlant;

pub mod compare;
pub mod demo;
pub mod merge;
pub mod models;
pub mod montecarlo;
pub mod simulate;
pub mod tune;

/// Runs one parsed command.
pub fn dispatch(command: Command, plants: &[Box<dyn AnyPlant>]) -> Result<()> {
    match command {
        Command::Models => models::run(plants),
        Command::Simulate {
            plant,
            steps,
            seed,
            noise_free,
            every,
            dropout,
            output,
        } => simulate::run(
            plants, &plant, steps, seed, noise_free, every, dropout, &output,
        ),
        Command::Compare {
            plant,
            data,
            filters,
            seed,
            smooth,
            nonfinite_as_missing,
            output,
        } => compare::run(
            plants,
            &compare::CompareArgs {
                plant,
                data,
                filters,
                seed,
                smooth,
                nonfinite_as_missing,
                output,
            },
        ),
        Command::Montecarlo {
            plant,
            runs,
            steps,
            filters,
            seed,
            shard,
            output,
        } => montecarlo::run(
            plants,
            &montecarlo::CampaignArgs {
                plant,
                runs,
                steps,
                filters,
                seed,
                shard,
                output,
            },
        ),
        Command::Merge { dirs, output } => merge::run(&dirs, &output),
        Command::Tune {
            plant,
            data,
            filter,
            params,
            output,
        } => tune::run(plants, &plant, &data, &filter, &params, &output),
        Command::Demo { output } => demo::run(plants, &output),
    }
}
