//! One file per command; [`dispatch`] routes a parsed command line to it.

use crate::cli::Command;
use crate::error::Result;
use crate::plant::AnyPlant;

pub mod compare;
pub mod demo;
pub mod merge;
pub mod models;
pub mod montecarlo;
pub mod observe;
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
            dataset,
            filters,
            seed,
            smooth,
            diffuse,
            output,
        } => compare::run(
            plants,
            &compare::CompareArgs {
                plant,
                data,
                dataset,
                filters,
                seed,
                smooth,
                diffuse,
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
            every,
            dropout,
            diffuse,
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
                every,
                dropout,
                diffuse,
                output,
            },
        ),
        Command::Merge { dirs, output } => merge::run(&dirs, &output),
        Command::Tune {
            plant,
            data,
            dataset,
            filter,
            params,
            seed,
            diffuse,
            output,
        } => tune::run(
            plants,
            &tune::TuneArgs {
                plant,
                data,
                dataset,
                filter,
                params,
                seed,
                diffuse,
                output,
            },
        ),
        Command::Observe {
            plant,
            data,
            dataset,
            sensors,
            compare_sensors,
            steps,
            output,
        } => observe::run(
            plants,
            &observe::ObserveArgs {
                plant,
                data,
                dataset,
                sensors,
                compare_sensors,
                steps,
                output,
            },
        ),
        Command::Demo { output } => demo::run(plants, &output),
    }
}
