//! `sightline tune MODEL DATA.csv -f SPEC --param NAME... [--set ...] -o DIR`: maximum-likelihood
//! values of the named parameters for one filter on one dataset, written to `DIR/tuned.json`
//! (see [`crate::tune`]).

use std::path::PathBuf;

use comfy_table::{Table, presets::UTF8_FULL_CONDENSED};
use sightline_filters::FilterSpec;

use crate::cli::{DatasetArgs, PlantArgs, configure};
use crate::commands::compare::open_dataset;
use crate::error::{Error, Result};
use crate::output::OutputDir;
use crate::plant::AnyPlant;
use crate::runner::filter_seed;
use crate::settings::Settings;
use crate::tune::{Tuned, tune};

/// Arguments of `tune`.
#[derive(Debug, Clone)]
pub struct TuneArgs {
    /// Plant and overrides.
    pub plant: PlantArgs,
    /// Dataset (`-` for standard input).
    pub data: PathBuf,
    /// How to read it.
    pub dataset: DatasetArgs,
    /// Filter spec whose likelihood is maximised.
    pub filter: String,
    /// Parameters to tune.
    pub params: Vec<String>,
    /// Seed (the filter's own seed is derived from it and its label, as in `compare`).
    pub seed: u64,
    /// `--diffuse` states, as given.
    pub diffuse: Vec<String>,
    /// Output directory.
    pub output: PathBuf,
}

/// Runs `tune`.
pub fn run(plants: &[Box<dyn AnyPlant>], args: &TuneArgs) -> Result<()> {
    crate::output::refuse_inputs_inside(&args.output, &[("dataset", &args.data)])?;
    let mut plant = configure(plants, &args.plant)?;
    plant.set_diffuse(&args.diffuse)?;
    if args.filter.contains('|') {
        return Err(Error::Usage(format!(
            "tune -f '{}': a sweep (key=a|b|...) names several filters, and tune maximises the \
             likelihood of one; tune each value with its own -f, or compare them with \
             `compare` or `montecarlo`, which expand sweeps",
            args.filter
        )));
    }
    let spec = FilterSpec::parse(&args.filter)?;
    // The same seed `compare --seed S` gives this label, so the likelihoods agree.
    let seed = filter_seed(args.seed, &spec.label);
    plant.build_filter(&spec, seed)?;
    let (reader, _notes) = open_dataset(plant.as_ref(), &args.plant, &args.data, &args.dataset)?;
    let dataset = reader.read_all()?;
    if dataset.records.is_empty() {
        return Err(Error::data(
            &args.data,
            2,
            1,
            "the dataset has a header but no rows",
        ));
    }
    // The output is checked before the (long) search, and again when it is put in place.
    crate::output::check_dir(&args.output)?;
    let mut tuned =
        tune(plant.as_ref(), &dataset, &spec, &args.params, seed).map_err(|e| match e {
            Error::Interrupted(m) => Error::Interrupted(format!(
                "{m}; nothing was written to {}",
                args.output.display()
            )),
            other => other,
        })?;
    tuned.settings = Some(Settings {
        filters: vec![spec.label.clone()],
        data: Some(args.data.display().to_string()),
        dataset: Some(args.dataset.settings()),
        params: Some(args.params.clone()),
        diffuse: args.diffuse.clone(),
        ..Settings::new("tune", plant.as_ref(), &args.plant.set, args.seed)
    });
    let dir = OutputDir::new(&args.output)?;
    let json = serde_json::to_string_pretty(&tuned)
        .map_err(|e| Error::Run(format!("encoding tuned.json: {e}")))?;
    dir.write("tuned.json", |w| {
        std::io::Write::write_all(w, json.as_bytes()).map_err(|source| Error::Write {
            path: PathBuf::from("tuned.json"),
            source,
        })
    })?;
    let target = dir.commit()?;
    print!("{}", describe(&tuned, plant.name(), &args.plant.set));
    println!("written: {}", target.join("tuned.json").display());
    Ok(())
}

/// The terminal summary of a tuning result.
pub fn describe(tuned: &Tuned, model: &str, set: &[String]) -> String {
    let mut table = Table::new();
    table.load_style(UTF8_FULL_CONDENSED);
    table.set_header(vec![
        "parameter",
        "start",
        "maximum likelihood",
        "std error",
        "95 % interval",
    ]);
    for (name, value) in &tuned.params {
        let se = tuned.std_errors.get(name).copied().flatten().map_or(
            if tuned.notes.is_empty() {
                "n/a (flat or not a maximum)".to_string()
            } else {
                "withheld (see the note)".to_string()
            },
            |v| format!("{v:.4e}"),
        );
        let interval = tuned
            .intervals
            .get(name)
            .copied()
            .flatten()
            .map_or("n/a".to_string(), |[lo, hi]| {
                format!("[{lo:.4e}, {hi:.4e}]")
            });
        table.add_row(vec![
            name.clone(),
            format!("{:.6e}", tuned.start.get(name).copied().unwrap_or(f64::NAN)),
            format!("{value:.6e}"),
            se,
            interval,
        ]);
    }
    let mut out = format!("{table}\n");
    out.push_str(&format!(
        "log-likelihood of {}: {} at the start, {:.6} at the maximum ({} iterations, {} evaluations)\n",
        tuned.filter,
        tuned
            .start_log_likelihood
            .map_or("n/a".to_string(), |v| format!("{v:.6}")),
        tuned.log_likelihood,
        tuned.iterations,
        tuned.trace.len()
    ));
    for note in &tuned.notes {
        out.push_str(&format!("note: {note}\n"));
    }
    let mut sets: Vec<String> = set
        .iter()
        .filter(|s| {
            let name = s.split_once('=').map_or(s.as_str(), |(n, _)| n.trim());
            !tuned.params.contains_key(name)
        })
        .map(|s| format!("--set {s}"))
        .collect();
    sets.extend(tuned.params.iter().map(|(n, v)| format!("--set {n}={v}")));
    out.push_str(&format!(
        "use them: sightline compare {model} DATA.csv {} -o DIR\n",
        sets.join(" ")
    ));
    out
}
