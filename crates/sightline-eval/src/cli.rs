//! The `sightline` command line as a library function.
//!
//! [`run`] parses arguments and executes a command against a list of plants, so a user's own
//! binary gets every command for its own plant in a few lines:
//!
//! ```no_run
//! fn main() -> std::process::ExitCode {
//!     let mut plants = sightline_eval::shipped();
//!     // plants.push(sightline_eval::plant(MyPlant::default()));
//!     sightline_eval::cli::main_with(plants)
//! }
//! ```

use std::ffi::OsString;
use std::io::Write;
use std::path::PathBuf;
use std::process::ExitCode;

use clap::{Args, Parser, Subcommand};

use crate::commands;
use crate::dataset::read::{ReadOptions, parse_mapping};
use crate::dataset::time::TimeUnit;
use crate::error::{Error, Result};
use crate::plant::AnyPlant;
use crate::settings::DatasetSettings;

/// Nonlinear state estimation: write the plant once, compare every estimator on it.
#[derive(Debug, Parser)]
#[command(name = "sightline", version, about, long_about = None)]
pub struct Cli {
    /// The command to run.
    #[command(subcommand)]
    pub command: Command,
}

/// Options shared by commands that build a plant.
#[derive(Debug, Clone, Args)]
pub struct PlantArgs {
    /// Model name (see `sightline models`).
    pub model: String,
    /// Set a model parameter, a prior mean (`x0.<state>`) or standard deviation (`sd0.<state>`),
    /// or a constant input (`u.<input>`).
    #[arg(long = "set", value_name = "NAME=VALUE")]
    pub set: Vec<String>,
}

impl PlantArgs {
    /// Inputs given a constant with `--set u.<input>=VALUE` (their data column may be absent).
    pub fn set_input_names(&self) -> Vec<String> {
        self.set
            .iter()
            .filter_map(|s| s.split_once('=').map(|(n, _)| n.trim()))
            .filter_map(|n| n.strip_prefix("u.").map(str::to_string))
            .collect()
    }
}

/// The dataset-reading options of every command that reads data (`compare`, `tune`, ...): how a
/// real log's time column, column names, missing values and extra columns are read.
#[derive(Debug, Clone, Default, PartialEq, Args)]
pub struct DatasetArgs {
    /// Name of the time column (numbers or RFC 3339 date-times; '' for an unnamed first column).
    #[arg(long = "time", value_name = "COLUMN", default_value = "t")]
    pub time: String,
    /// Unit of a numeric time column: s, ms, us, ns, min or h.
    #[arg(long = "time-unit", value_name = "UNIT", value_parser = parse_time_unit)]
    pub time_unit: Option<TimeUnit>,
    /// Time zone of date-times written without offset (e.g. UTC, Europe/Berlin, +02:00); also
    /// the zone the report's clock shows.
    #[arg(long, value_name = "TZ")]
    pub timezone: Option<String>,
    /// Read column SOURCE as a model quantity (y.<measurement>, u.<input> or x.<state>);
    /// repeat for several.
    #[arg(long = "map", value_name = "SOURCE=y.<name>")]
    pub map: Vec<String>,
    /// A cell text that marks a missing measurement (e.g. NA, null, -); repeat for several. An
    /// empty cell is always missing.
    #[arg(long = "missing", value_name = "TOKEN")]
    pub missing: Vec<String>,
    /// Refuse columns the model does not read (they are otherwise ignored with a warning).
    #[arg(long)]
    pub strict_columns: bool,
    /// Accept a time base the plant's dt range refuses (median interval outside it, or ×1000 off
    /// its nominal dt).
    #[arg(long)]
    pub accept_dt: bool,
    /// Treat non-finite measurement cells (nan, inf) as missing instead of rejecting them.
    #[arg(long)]
    pub nonfinite_as_missing: bool,
}

fn parse_time_unit(text: &str) -> std::result::Result<TimeUnit, String> {
    text.parse()
}

impl DatasetArgs {
    /// The reader options these flags ask for (`--map` items parsed and checked for repeats).
    pub fn read_options(&self) -> Result<ReadOptions> {
        let mut map: Vec<(String, String)> = Vec::with_capacity(self.map.len());
        for item in &self.map {
            let (source, target) = parse_mapping(item)?;
            if let Some((_, other)) = map.iter().find(|(s, _)| *s == source) {
                return Err(Error::Usage(format!(
                    "--map {item}: column '{source}' is already mapped to {other}; map each \
                     column once"
                )));
            }
            if let Some((other, _)) = map.iter().find(|(_, t)| *t == target) {
                return Err(Error::Usage(format!(
                    "--map {item}: {target} is already read from column '{other}'; read each \
                     quantity from one column"
                )));
            }
            map.push((source, target));
        }
        Ok(ReadOptions {
            nonfinite_as_missing: self.nonfinite_as_missing,
            time_column: self.time.trim().to_string(),
            time_unit: self.time_unit,
            timezone: self.timezone.clone(),
            map,
            missing: self.missing.iter().map(|m| m.trim().to_string()).collect(),
            strict_columns: self.strict_columns,
        })
    }

    /// These flags as recorded in `settings`.
    pub fn settings(&self) -> DatasetSettings {
        DatasetSettings {
            time: self.time.clone(),
            time_unit: self.time_unit.unwrap_or_default().name().to_string(),
            timezone: self.timezone.clone(),
            map: self.map.clone(),
            missing: self.missing.clone(),
            strict_columns: self.strict_columns,
            accept_dt: self.accept_dt,
            nonfinite_as_missing: self.nonfinite_as_missing,
        }
    }
}

/// The commands.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// List models: states, measurements, inputs, parameters with defaults and units.
    Models,
    /// Simulate a dataset with ground truth.
    Simulate {
        #[command(flatten)]
        plant: PlantArgs,
        /// Number of rows.
        #[arg(long)]
        steps: usize,
        /// Random seed.
        #[arg(long)]
        seed: u64,
        /// No noise; the truth starts at the prior mean.
        #[arg(long)]
        noise_free: bool,
        /// Keep a measurement only every K rows (multi-rate sensor).
        #[arg(long, value_name = "K", default_value_t = 1)]
        every: usize,
        /// Drop each measurement component with probability P (left empty).
        #[arg(long, value_name = "P", default_value_t = 0.0)]
        dropout: f64,
        /// Output CSV file.
        #[arg(short = 'o', long = "output", value_name = "FILE.csv")]
        output: PathBuf,
    },
    /// Run every filter on one dataset; print a table and a verdict.
    Compare {
        #[command(flatten)]
        plant: PlantArgs,
        /// Dataset CSV (`-` reads standard input).
        data: PathBuf,
        #[command(flatten)]
        dataset: DatasetArgs,
        /// Filter spec KIND[:key=value,...]; repeat for several (default: every applicable kind).
        #[arg(short = 'f', long = "filter", value_name = "SPEC")]
        filters: Vec<String>,
        /// Seed of the sampling filters' random streams.
        #[arg(long, default_value_t = 0)]
        seed: u64,
        /// Also smooth every filter that has a smoother: smoothed_rmse_all in summary.json,
        /// DIR/smoothed.csv and smoothed plots (holds the run in memory).
        #[arg(long)]
        smooth: bool,
        /// Start STATE diffuse (unknown, infinite prior variance): exact diffuse kf, a
        /// large-variance prior for the other Gaussian filters; repeat, or `all`.
        #[arg(long = "diffuse", value_name = "STATE")]
        diffuse: Vec<String>,
        /// Output directory.
        #[arg(short = 'o', long = "output", value_name = "DIR")]
        output: PathBuf,
    },
    /// Monte Carlo campaign over simulated datasets.
    Montecarlo {
        #[command(flatten)]
        plant: PlantArgs,
        /// Number of runs.
        #[arg(long)]
        runs: usize,
        /// Rows per run.
        #[arg(long)]
        steps: usize,
        /// Filter spec; repeat for several (default: every applicable kind).
        #[arg(short = 'f', long = "filter", value_name = "SPEC")]
        filters: Vec<String>,
        /// Campaign seed; run i uses a seed derived from it and i.
        #[arg(long, default_value_t = 0)]
        seed: u64,
        /// Run only shard K of N (1-based), e.g. 2/8.
        #[arg(long, value_name = "K/N")]
        shard: Option<String>,
        /// Keep a measurement only every K rows of each simulated run (multi-rate sensor).
        #[arg(long, value_name = "K", default_value_t = 1)]
        every: usize,
        /// Drop each simulated measurement component with probability P.
        #[arg(long, value_name = "P", default_value_t = 0.0)]
        dropout: f64,
        /// Start STATE diffuse (unknown, infinite prior variance): exact diffuse kf, a
        /// large-variance prior for the other Gaussian filters; repeat, or `all`.
        #[arg(long = "diffuse", value_name = "STATE")]
        diffuse: Vec<String>,
        /// Output directory.
        #[arg(short = 'o', long = "output", value_name = "DIR")]
        output: PathBuf,
    },
    /// Combine shard outputs into the unsharded result.
    Merge {
        /// Shard output directories.
        #[arg(required = true)]
        dirs: Vec<PathBuf>,
        /// Output directory.
        #[arg(short = 'o', long = "output", value_name = "DIR")]
        output: PathBuf,
    },
    /// Maximum-likelihood tuning of model parameters (e.g. noise intensities).
    Tune {
        #[command(flatten)]
        plant: PlantArgs,
        /// Dataset CSV (`-` reads standard input).
        data: PathBuf,
        #[command(flatten)]
        dataset: DatasetArgs,
        /// Filter spec whose likelihood is maximised.
        #[arg(short = 'f', long = "filter", value_name = "SPEC")]
        filter: String,
        /// Parameter to tune; repeat for several.
        #[arg(long = "param", value_name = "NAME", required = true)]
        params: Vec<String>,
        /// Seed of a sampling filter's random streams (as in `compare`).
        #[arg(long, default_value_t = 0)]
        seed: u64,
        /// Start STATE diffuse (unknown, infinite prior variance): exact diffuse kf, a
        /// large-variance prior for the other Gaussian filters; repeat, or `all`.
        #[arg(long = "diffuse", value_name = "STATE")]
        diffuse: Vec<String>,
        /// Output directory.
        #[arg(short = 'o', long = "output", value_name = "DIR")]
        output: PathBuf,
    },
    /// Observability along a trajectory: which states the sensors can see, and how well.
    Observe {
        #[command(flatten)]
        plant: PlantArgs,
        /// Dataset CSV whose trajectory is followed (its truth, else the noise-free prediction
        /// through its inputs); without it, the noise-free simulation from the prior mean.
        data: Option<PathBuf>,
        #[command(flatten)]
        dataset: DatasetArgs,
        /// Keep only these measurement components, e.g. level1 (default: all).
        #[arg(long, value_name = "NAME,...")]
        sensors: Option<String>,
        /// Compare sensor sets side by side, e.g. 'level1|level2|level1,level2'.
        #[arg(long = "compare-sensors", value_name = "A|B,C")]
        compare_sensors: Option<String>,
        /// Rows of the window (default: every row of the data, or 100 simulated).
        #[arg(long, value_name = "K")]
        steps: Option<usize>,
        /// Output directory.
        #[arg(short = 'o', long = "output", value_name = "DIR")]
        output: PathBuf,
    },
    /// The built-in scenario: simulate, compare, report.
    Demo {
        /// Output directory.
        #[arg(
            short = 'o',
            long = "output",
            value_name = "DIR",
            default_value = "sightline-demo"
        )]
        output: PathBuf,
    },
}

/// Parses one `--set NAME=VALUE`.
///
/// ```
/// use sightline_eval::cli::parse_set;
/// assert_eq!(parse_set("x0.angle=0.5").unwrap(), ("x0.angle".to_string(), 0.5));
/// assert!(parse_set("q").is_err());
/// assert!(parse_set("q=abc").is_err());
/// ```
pub fn parse_set(item: &str) -> Result<(String, f64)> {
    let Some((name, value)) = item.split_once('=') else {
        return Err(Error::Usage(format!(
            "--set '{item}': expected NAME=VALUE, e.g. --set q=0.5"
        )));
    };
    let name = name.trim();
    if name.is_empty() {
        return Err(Error::Usage(format!(
            "--set '{item}': the name before '=' is empty"
        )));
    }
    match value.trim().parse::<f64>() {
        Ok(v) if v.is_finite() => Ok((name.to_string(), v)),
        _ => Err(Error::Usage(format!(
            "--set '{item}': value '{}' is not a finite number",
            value.trim()
        ))),
    }
}

/// Finds a plant by name and applies the `--set` overrides.
///
/// Model parameters are applied before prior means (`x0.`), prior standard deviations (`sd0.`)
/// and inputs (`u.`), each group in the order given, so that a parameter that sizes the plant
/// (`tankchain`'s `n`) may come anywhere on the command line. A name given twice is refused
/// (which value was meant?), never last-wins; an input given a constant that the data also has
/// as a column is refused by the dataset reader.
pub fn configure(plants: &[Box<dyn AnyPlant>], args: &PlantArgs) -> Result<Box<dyn AnyPlant>> {
    let Some(found) = plants.iter().find(|p| p.name() == args.model) else {
        return Err(Error::Usage(format!(
            "unknown model '{}'; available models: {}",
            args.model,
            plants
                .iter()
                .map(|p| p.name())
                .collect::<Vec<_>>()
                .join(", ")
        )));
    };
    let mut plant = found.clone_box();
    let mut sets = args
        .set
        .iter()
        .map(|item| parse_set(item))
        .collect::<Result<Vec<_>>>()?;
    for (i, (name, value)) in sets.iter().enumerate() {
        if let Some((_, first)) = sets[..i].iter().find(|(n, _)| n == name) {
            return Err(Error::Usage(format!(
                "--set {name} is given twice ({name}={first} and {name}={value}); which one did \
                 you mean? Give each name once"
            )));
        }
    }
    // Stable: parameters first, then x0./sd0./u. overrides, each in command-line order.
    sets.sort_by_key(|(name, _)| {
        ["x0.", "sd0.", "u."]
            .iter()
            .any(|prefix| name.starts_with(prefix))
    });
    for (name, value) in sets {
        plant.set(&name, value)?;
    }
    Ok(plant)
}

/// Parses `args` (program name first) and runs the command on `plants`.
pub fn run<I, T>(args: I, plants: &[Box<dyn AnyPlant>]) -> Result<()>
where
    I: IntoIterator<Item = T>,
    T: Into<OsString> + Clone,
{
    let cli = Cli::try_parse_from(args).map_err(|e| {
        // --help and --version are not errors: clap prints them and we exit 0.
        if matches!(
            e.kind(),
            clap::error::ErrorKind::DisplayHelp | clap::error::ErrorKind::DisplayVersion
        ) {
            let _ = e.print();
            Error::Usage(String::new())
        } else {
            Error::Usage(e.render().to_string())
        }
    });
    let cli = match cli {
        Ok(c) => c,
        Err(Error::Usage(msg)) if msg.is_empty() => return Ok(()),
        Err(e) => return Err(e),
    };
    commands::dispatch(cli.command, plants)
}

/// Runs the process's command line on `plants`, prints any error and returns the exit code
/// (0 success, 1 a run failed, 2 bad input, usage or an unwritable output, 128 + n stopped by
/// signal n: 130 Ctrl-C, 143 SIGTERM, 129 SIGHUP, 131 SIGQUIT). Installs the signal handler
/// ([`crate::interrupt`]).
pub fn main_with(plants: Vec<Box<dyn AnyPlant>>) -> ExitCode {
    crate::interrupt::install();
    match run(std::env::args_os(), &plants) {
        Ok(()) => ExitCode::SUCCESS,
        // The reader of standard output went away (`| head`): what it read is all it wanted,
        // so no message, only the SIGPIPE exit code a shell pipeline expects.
        Err(e)
            if e.is_broken_pipe()
                && matches!(&e, Error::Write { path, .. } if path.as_os_str() == "-") =>
        {
            ExitCode::from(e.exit_code())
        }
        Err(e) => {
            let text = e.to_string();
            let text = text.trim_end();
            let prefix = if text.starts_with("error:") {
                ""
            } else {
                "error: "
            };
            // After SIGHUP the terminal may be gone: a failed write must not become a panic.
            let _ = writeln!(std::io::stderr(), "{prefix}{text}");
            ExitCode::from(e.exit_code())
        }
    }
}
