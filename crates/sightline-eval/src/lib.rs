//! Sightline evaluation: datasets, the runner, metrics, Monte Carlo campaigns, reports, and the
//! command-line interface as a library function ([`cli::main_with`]).
//!
//! Every command is a library call: [`commands::compare::compare`] (one dataset, streamed),
//! [`campaign::run_campaign`] and [`campaign::merge`] (Monte Carlo, sharded), [`report`] (the
//! HTML page), [`verdict`] (the findings), and the [`runner`] underneath them.

pub mod campaign;
pub mod checkpoint;
pub mod chi2;
pub mod cli;
pub mod commands;
pub mod dataset;
pub mod divergence;
pub mod error;
pub mod exact_sum;
pub mod interrupt;
pub mod intervals;
pub mod metrics;
pub mod observability;
pub mod observability_check;
pub mod observability_report;
pub mod output;
pub mod partial;
pub mod pcrlb;
pub mod plant;
pub mod ranking;
pub mod report;
pub mod runner;
pub mod settings;
pub mod simulate;
pub mod summary;
pub mod tune;
pub mod verdict;

pub use error::{Error, Result};
pub use plant::{AnyPlant, Plant, plant, shipped};
