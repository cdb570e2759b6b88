//! `sightline tune MODEL DATA.csv -f SPEC --param NAME... [--set ...] -o DIR`: maximum-likelihood
//! values of the named parameters for one filter on one dataset, written to `DIR/tuned.json`
//! (see [`crate::tune`]).

use std::path::{Path, PathBuf};

use comfy_table::{Table, presets::UTF8_FULL_CONDENSED};
use sightline_filters::FilterSpec;

use crate::cli::{PlantArgs, configure};
use crate::dataset::read::{DatasetReader, ReadOptions, Schema};
use crate::error::{Error, Result};
use crate::output::OutputDir;
use crate::plant::AnyPlant;
use crate::runner::filter_seed;
use crate::tune::{Tuned, tune};

/// Runs `tune`.
pub fn run(
    plants: &[Box<dyn AnyPlant>],
    args: &PlantArgs,
    data: &Path,
    filter: &str,
    params: &[String],
    output: &Path,
) -> Result<()> {
    crate::output::refuse_inputs_inside(output, &[("dataset", data)])?;
    let plant = configure(plants, args)?;
    let spec = FilterSpec::parse(filter)?;
    // The same seed `compare` gives this label by default, so the likelihoods agree.
    let seed = filter_seed(0, &spec.label);
    plant.build_filter(&spec, seed)?;
    let schema = Schema::of(plant.as_ref(), &args.set_input_names());
    let dataset = DatasetReader::open(data, &schema, ReadOptions::default())?.read_all()?;
    if dataset.records.is_empty() {
        return Err(Error::data(
            data,
            2,
            1,
            "the dataset has a header but no rows",
        ));
    }
    // The output is checked before the (long) search, and again when it is put in place.
    crate::output::check_dir(output)?;
    let tuned = tune(plant.as_ref(), &dataset, &spec, params, seed).map_err(|e| match e {
        Error::Interrupted(m) => {
            Error::Interrupted(format!("{m}; nothing was written to {}", output.display()))
        }
        other => other,
    })?;
    let dir = OutputDir::new(output)?;
    let json = serde_json::to_string_pretty(&tuned)
        .map_err(|e| Error::Run(format!("encoding tuned.json: {e}")))?;
    dir.write("tuned.json", |w| {
        std::io::Write::write_all(w, json.as_bytes()).map_err(|source| Error::Write {
            path: PathBuf::from("tuned.json"),
            source,
        })
    })?;
    let target = dir.commit()?;
    print!("{}", describe(&tuned, plant.name(), &args.set));
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
    ]);
    for (name, value) in &tuned.params {
        let se = tuned
            .std_errors
            .get(name)
            .copied()
            .flatten()
            .map_or("n/a (flat or not a maximum)".to_string(), |v| {
                format!("{v:.4e}")
            });
        table.add_row(vec![
            name.clone(),
            format!("{:.6e}", tuned.start.get(name).copied().unwrap_or(f64::NAN)),
            format!("{value:.6e}"),
            se,
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
