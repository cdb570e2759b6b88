//! Sightline evaluation: datasets, the runner, metrics, Monte Carlo campaigns, reports, and the
//! command-line interface as a library function ([`cli::main_with`]).

pub mod cli;
pub mod commands;
pub mod dataset;
pub mod error;
pub mod output;
pub mod pcrlb;
pub mod plant;
pub mod simulate;
pub mod tune;

pub use error::{Error, Result};
pub use plant::{AnyPlant, Plant, plant, shipped};
