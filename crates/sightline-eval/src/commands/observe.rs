//! `sightline observe MODEL [DATA.csv] [--set ...] [--sensors NAME,...] [--compare-sensors
//! 'A|B,C'] [--steps K] -o DIR`: which states the sensors can see along a trajectory, and how
//! well — `DIR/observability.json`, `DIR/report.html` and a table on the terminal (see
//! [`crate::observability`] for the mathematics).
//!
//! The trajectory is the data's truth (`x.` columns) when the data has it; a dataset without
//! truth is followed by the noise-free prediction from the prior mean through its own times and
//! inputs; without data, the noise-free simulation from the prior mean with the constant inputs
//! over `--steps` rows ([`DEFAULT_STEPS`] when not given). With data, `--steps K` keeps its
//! first K rows.

use std::path::PathBuf;

use comfy_table::{Table, presets::UTF8_FULL_CONDENSED};

use crate::cli::{DatasetArgs, PlantArgs, configure};
use crate::commands::compare::open_dataset;
use crate::dataset::Dataset;
use crate::error::{Error, Result};
use crate::observability::{Observability, SensorSet, TrajectorySource, parse_sensors, sensor_set};
use crate::observability_report;
use crate::output::OutputDir;
use crate::plant::AnyPlant;
use crate::settings::Settings;
use crate::simulate::SimOptions;
use crate::verdict::sig;

/// Rows of the simulated window when neither data nor `--steps` is given.
pub const DEFAULT_STEPS: usize = 100;

/// Unobservable directions listed on the terminal (all of them are in the JSON and the report).
const SHOWN_DIRECTIONS: usize = 8;

/// Arguments of `observe`.
#[derive(Debug, Clone)]
pub struct ObserveArgs {
    /// Plant and overrides.
    pub plant: PlantArgs,
    /// Dataset whose trajectory is followed (none: a noise-free simulation).
    pub data: Option<PathBuf>,
    /// How to read it.
    pub dataset: DatasetArgs,
    /// `--sensors NAME,...`: the measurement components kept (default: all).
    pub sensors: Option<String>,
    /// `--compare-sensors 'A|B,C'`: sensor sets to compare side by side.
    pub compare_sensors: Option<String>,
    /// `--steps K`: rows of the window.
    pub steps: Option<usize>,
    /// Output directory.
    pub output: PathBuf,
}

/// The trajectory the command follows, and where it came from.
pub fn trajectory(
    plant: &dyn AnyPlant,
    args: &ObserveArgs,
) -> Result<(Dataset, TrajectorySource, Vec<String>)> {
    if args.steps == Some(0) {
        return Err(Error::Usage(
            "--steps must be at least 1 (the window needs a measurement)".into(),
        ));
    }
    let Some(path) = &args.data else {
        let steps = args.steps.unwrap_or(DEFAULT_STEPS);
        let options = SimOptions {
            noise_free: true,
            ..SimOptions::default()
        };
        let data = plant.simulate(steps, 0, &options)?;
        return Ok((data, TrajectorySource::Simulation, Vec::new()));
    };
    let (reader, notes) = open_dataset(plant, &args.plant, path, &args.dataset)?;
    let mut data = reader.read_all()?;
    if data.records.is_empty() {
        return Err(Error::data(
            path,
            2,
            1,
            "the dataset has a header but no rows",
        ));
    }
    if let Some(k) = args.steps {
        if k > data.records.len() {
            return Err(Error::Usage(format!(
                "--steps {k}: {} has only {} rows; give at most that many",
                path.display(),
                data.records.len()
            )));
        }
        data.records.truncate(k);
    }
    let (filled, all_truth) = plant.fill_states(&data)?;
    let source = if all_truth {
        TrajectorySource::Truth
    } else {
        TrajectorySource::Prediction
    };
    Ok((filled, source, notes))
}

/// The analysis of `trajectory` for the `--sensors` set and each `--compare-sensors` set.
pub fn observe(
    plant: &dyn AnyPlant,
    trajectory: &Dataset,
    source: TrajectorySource,
    sensors: Option<&str>,
    compare_sensors: Option<&str>,
) -> Result<Observability> {
    let chosen = match sensors {
        Some(list) => parse_sensors(plant, list, "--sensors")?,
        None => (0..plant.measurements().len()).collect(),
    };
    let sets = match compare_sensors {
        Some(text) => text
            .split('|')
            .map(|list| parse_sensors(plant, list, "--compare-sensors"))
            .collect::<Result<Vec<_>>>()?,
        None => Vec::new(),
    };
    let mut notes = Vec::new();
    let (result, _) = sensor_set(plant, trajectory, &chosen, &mut notes)?;
    let sensor_sets = sets
        .iter()
        .map(|set| sensor_set(plant, trajectory, set, &mut notes).map(|(s, _)| s))
        .collect::<Result<Vec<_>>>()?;
    notes.dedup();
    Ok(Observability {
        model: plant.name().to_string(),
        steps: trajectory.records.len(),
        trajectory: source,
        result,
        sensor_sets,
        notes,
        settings: None,
    })
}

/// Runs `observe`.
pub fn run(plants: &[Box<dyn AnyPlant>], args: &ObserveArgs) -> Result<()> {
    if let Some(data) = &args.data {
        crate::output::refuse_inputs_inside(&args.output, &[("dataset", data)])?;
    }
    let plant = configure(plants, &args.plant)?;
    crate::output::check_dir(&args.output)?;
    let (trajectory, source, mut read_notes) = trajectory(plant.as_ref(), args)?;
    let mut result = observe(
        plant.as_ref(),
        &trajectory,
        source,
        args.sensors.as_deref(),
        args.compare_sensors.as_deref(),
    )?;
    read_notes.append(&mut result.notes);
    result.notes = read_notes;
    result.settings = Some(Settings {
        data: args.data.as_ref().map(|p| p.display().to_string()),
        dataset: args.data.as_ref().map(|_| args.dataset.settings()),
        steps: args.steps.map(|k| k as u64),
        sensors: args.sensors.clone(),
        compare_sensors: args.compare_sensors.clone(),
        ..Settings::new("observe", plant.as_ref(), &args.plant.set, 0)
    });
    let dir = OutputDir::new(&args.output)?;
    let json = serde_json::to_string_pretty(&result)
        .map_err(|e| Error::Run(format!("encoding observability.json: {e}")))?;
    let html = observability_report::render(plant.as_ref(), &result)?;
    for (name, text) in [
        ("observability.json", format!("{json}\n")),
        ("report.html", html),
    ] {
        dir.write(name, |w| {
            w.write_all(text.as_bytes()).map_err(|source| Error::Write {
                path: PathBuf::from(name),
                source,
            })
        })?;
    }
    let target = dir.commit()?;
    print!("{}", describe(&result));
    println!("written: {}", target.join("observability.json").display());
    println!("report: {}", target.join("report.html").display());
    Ok(())
}

fn bound_text(v: Option<f64>) -> String {
    v.map_or_else(|| "–".to_string(), |v| sig(v, 4))
}

/// One line per set: rank, conditioning, reading and the unobservable directions.
pub fn set_line(set: &SensorSet) -> String {
    let n = set.states.len();
    let mut line = format!(
        "sensors {}: rank {} of {n}, conditioning {}, {}",
        set.sensors.join(","),
        set.rank,
        set.conditioning.map_or("∞".to_string(), |c| sig(c, 3)),
        set.reading.words()
    );
    if !set.unobservable_directions.is_empty() {
        let all = &set.unobservable_directions;
        let dirs: Vec<&str> = all
            .iter()
            .take(SHOWN_DIRECTIONS)
            .map(|d| d.combination.as_str())
            .collect();
        line.push_str(&format!("; unseen: {}", dirs.join("; ")));
        if all.len() > SHOWN_DIRECTIONS {
            line.push_str(&format!(
                "; … ({} directions in all, in observability.json)",
                all.len()
            ));
        }
    }
    line
}

/// The terminal summary: the chosen set's per-state table, then (with `--compare-sensors`) the
/// bounds of every set side by side.
pub fn describe(result: &Observability) -> String {
    let set = &result.result;
    let mut table = Table::new();
    table.load_style(UTF8_FULL_CONDENSED);
    table.set_header(vec![
        "state",
        "observable",
        "sd bound (measurements only)",
        "prior sd",
        "PCRLB sd at the end",
        "reading",
    ]);
    for s in &set.states {
        table.add_row(vec![
            s.name.clone(),
            if s.observable { "yes" } else { "no" }.to_string(),
            bound_text(s.sd_bound),
            sig(s.prior_sd, 4),
            bound_text(s.pcrlb_sd),
            s.reading.words().to_string(),
        ]);
    }
    let mut out = format!(
        "observability of '{}' along the {} over {} rows\n{table}\n{}\n",
        result.model,
        match result.trajectory {
            TrajectorySource::Truth => "data's truth",
            TrajectorySource::Prediction => "noise-free prediction through the data",
            TrajectorySource::Simulation => "noise-free simulation from the prior mean",
        },
        result.steps,
        set_line(set)
    );
    if !result.sensor_sets.is_empty() {
        let mut table = Table::new();
        table.load_style(UTF8_FULL_CONDENSED);
        let mut header = vec!["state".to_string()];
        header.extend(result.sensor_sets.iter().map(|s| s.sensors.join(",")));
        table.set_header(header);
        for (i, s) in set.states.iter().enumerate() {
            let mut row = vec![s.name.clone()];
            for other in &result.sensor_sets {
                let b = &other.states[i];
                row.push(format!(
                    "{} / {}",
                    bound_text(b.sd_bound),
                    bound_text(b.pcrlb_sd)
                ));
            }
            table.add_row(row);
        }
        let mut rank_row = vec!["rank".to_string()];
        rank_row.extend(
            result
                .sensor_sets
                .iter()
                .map(|s| format!("{} ({})", s.rank, s.reading.words())),
        );
        table.add_row(rank_row);
        out.push_str(&format!(
            "sensor sets compared (sd bound from the measurements only / PCRLB sd at the end):\n\
             {table}\n"
        ));
        for s in &result.sensor_sets {
            out.push_str(&format!("{}\n", set_line(s)));
        }
    }
    for n in &result.notes {
        out.push_str(&format!("note: {n}\n"));
    }
    out
}
