//! `sightline compare`: every filter on one dataset — `DIR/estimates.csv`, `DIR/summary.json`,
//! `DIR/report.html`, a table and a verdict on the terminal.
//!
//! The library call is [`compare`]: it streams any [`RecordSource`] through the filters, writes
//! the estimates as it goes and returns the summary and the plot series.
//!
//! With `--smooth` every filter that has a smoother records its forward pass and is smoothed
//! after the last row (see [`crate::runner`]): the summary gains `smoothed_rmse_all`,
//! `smoothed_rmse` (per state) and `smoother`, `DIR/smoothed.csv` holds the smoothed tracks in
//! the layout of `estimates.csv`, and the report plots them. A smoothed run is held in memory;
//! without `--smooth` the run streams.

use std::fs::File;
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};

use sightline_filters::FilterSpec;

use crate::cli::{DatasetArgs, PlantArgs, configure};
use crate::dataset::read::{DatasetReader, RecordSource, Schema};
use crate::dataset::time::Clock;
use crate::dataset::{Layout, Record};
use crate::error::{Error, Result};
use crate::observability_check::{self, CHECK_ROWS, Keeping};
use crate::output::{Catching, OutputDir};
use crate::plant::AnyPlant;
use crate::ranking::{self, StepRecord};
use crate::report::{self, terminal_table};
use crate::runner::{
    self, EstimatesWriter, NoObserver, Observer, RunConfig, RunOutcome, Series, Smoothing,
};
use crate::settings::Settings;
use crate::summary::{self, FilterSummary, StateMap, Status, Summary};
use crate::verdict;

/// Arguments of `compare`.
#[derive(Debug, Clone)]
pub struct CompareArgs {
    /// Plant and overrides.
    pub plant: PlantArgs,
    /// Dataset (`-` for standard input).
    pub data: PathBuf,
    /// How to read it.
    pub dataset: DatasetArgs,
    /// Filter specs.
    pub filters: Vec<String>,
    /// Seed.
    pub seed: u64,
    /// Run smoothers.
    pub smooth: bool,
    /// `--diffuse` states, as given.
    pub diffuse: Vec<String>,
    /// Output directory.
    pub output: PathBuf,
}

/// Options of the library call [`compare`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CompareOptions {
    /// Seed of the sampling filters.
    pub seed: u64,
    /// Ask for smoothed accuracy (`smoothed_rmse_all`).
    pub smooth: bool,
    /// Rows kept for plots (bounded, decimated).
    pub series_points: usize,
}

impl Default for CompareOptions {
    fn default() -> Self {
        CompareOptions {
            seed: 0,
            smooth: false,
            series_points: RunConfig::default().series_points,
        }
    }
}

/// What a comparison produced.
#[derive(Debug, Clone)]
pub struct Comparison {
    /// The `summary.json` content.
    pub summary: Summary,
    /// The decimated series for plots.
    pub series: Option<Series>,
    /// Notes for the report (e.g. about `--smooth`).
    pub notes: Vec<String>,
    /// With `--smooth`: the time of every row and each filter's smoothed track (`None` for a
    /// filter that has none), in spec order.
    pub smoothed: Option<SmoothedRun>,
    /// The data's clock, for the plots' time axis.
    pub clock: Clock,
    /// The report's "Observability" section, when a state is not well observable along the
    /// data (see [`crate::observability_check`]).
    pub observability: Option<String>,
}

/// What a command knows about a comparison beyond the run itself: recorded in `summary.json`
/// and the report.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct ResultContext {
    /// The report's title.
    pub title: String,
    /// How the result was made.
    pub settings: Option<Settings>,
    /// The dataset's columns the model did not read.
    pub ignored_columns: Vec<String>,
    /// Notes for the report (how the data was read, filters skipped, ...).
    pub notes: Vec<String>,
}

/// The smoothed tracks of a compared run.
#[derive(Debug, Clone)]
pub struct SmoothedRun {
    /// Time of every row.
    pub times: Vec<f64>,
    /// The time cell of every row as written in the data (empty when the rows were not read
    /// from text: `times` is written then).
    pub time_texts: Vec<String>,
    /// Label and smoothed track of each filter, in spec order.
    pub tracks: Vec<(String, Option<sightline_filters::SmoothedTrack>)>,
}

impl SmoothedRun {
    /// Writes `smoothed.csv`: the columns of `estimates.csv`
    /// (`filter,t,x.<state>...,sd.<state>...`) with the smoothed means and standard deviations,
    /// one row per smoothed filter per step, in row order then filter order.
    pub fn write_csv(&self, out: &mut dyn Write, states: &[String]) -> Result<()> {
        let fail = |e: csv::Error| Error::Run(format!("writing smoothed.csv: {e}"));
        let mut csv = csv::Writer::from_writer(out);
        let mut header = vec!["filter".to_string(), "t".to_string()];
        header.extend(states.iter().map(|s| format!("x.{s}")));
        header.extend(states.iter().map(|s| format!("sd.{s}")));
        csv.write_record(&header).map_err(fail)?;
        for (k, t) in self.times.iter().enumerate() {
            for (label, track) in &self.tracks {
                let Some(track) = track else { continue };
                let (Some(mean), Some(sd)) = (track.means.get(k), track.std_devs(k)) else {
                    continue;
                };
                let time = self
                    .time_texts
                    .get(k)
                    .cloned()
                    .unwrap_or_else(|| t.to_string());
                let mut row = vec![label.clone(), time];
                row.extend(mean.iter().chain(&sd).map(|v| v.to_string()));
                csv.write_record(&row).map_err(fail)?;
            }
        }
        csv.flush()
            .map_err(|e| Error::Run(format!("writing smoothed.csv: {e}")))
    }
}

impl Comparison {
    /// Whether any filter failed.
    pub fn any_failed(&self) -> bool {
        self.summary
            .filters
            .iter()
            .any(|f| f.status == Status::Failed)
    }

    /// The report page.
    pub fn report_html(&self, plant: &dyn AnyPlant, title: &str) -> Result<String> {
        let plots = match &self.series {
            Some(s) => report::compare_plots(
                &self.summary,
                s,
                &plant.states(),
                &plant.measurements(),
                &self.clock,
            ),
            None => report::bar_plots(&self.summary),
        };
        let mut notes = self.notes.clone();
        notes.push(crate::plant::parameters_text(plant));
        let html = report::render_html(title, &self.summary, &plots, &notes)?;
        Ok(match &self.observability {
            Some(section) => crate::observability_report::insert_section(&html, section),
            None => html,
        })
    }
}

/// The summary of one run of a set of filters over one dataset.
pub fn summarise(plant: &dyn AnyPlant, outcome: &RunOutcome) -> Summary {
    let states: Vec<String> = plant.states().into_iter().map(|v| v.name).collect();
    let n = states.len();
    let mut filters: Vec<FilterSummary> = outcome
        .filters
        .iter()
        .map(|f| {
            let ok = f.ok();
            let m = &f.metrics;
            let keep = |v: Option<f64>| if ok { v } else { None };
            FilterSummary {
                label: f.label.clone(),
                kind: f.kind.clone(),
                status: match (ok, &f.divergence) {
                    (false, _) => Status::Failed,
                    (true, Some(_)) => Status::Diverged,
                    (true, None) => Status::Ok,
                },
                error: f.error.clone(),
                rmse_all_ci: if ok && m.rmse_all().is_some() {
                    crate::intervals::rmse_interval(&m.squared_errors, n)
                } else {
                    None
                },
                diverged_at: f.divergence.as_ref().map(|d| d.step),
                divergence: f.divergence.as_ref().map(|d| d.reason.clone()),
                diverged_runs: None,
                versus_best: None,
                rmse: if ok {
                    m.rmse()
                        .map(|r| StateMap(states.iter().cloned().zip(r).collect()))
                } else {
                    None
                },
                rmse_all: keep(m.rmse_all()),
                anees: keep(m.anees()),
                nees_in_band: keep(m.nees_in_band()),
                anis: keep(m.anis()),
                nis_in_band: keep(m.nis_in_band()),
                log_likelihood: keep(Some(m.log_likelihood)),
                seconds_per_step: m.seconds_per_step(),
                smoothed_rmse_all: match &f.smoothing {
                    Some(Smoothing::Done { rmse_all, .. }) => *rmse_all,
                    _ => None,
                },
                smoothed_rmse: match &f.smoothing {
                    Some(Smoothing::Done {
                        rmse: Some(rmse), ..
                    }) => Some(StateMap(states.iter().cloned().zip(rmse.clone()).collect())),
                    _ => None,
                },
                smoother: f
                    .smoothing
                    .as_ref()
                    .and_then(Smoothing::track)
                    .map(|t| t.kind.name().to_string()),
                anees_band: if ok {
                    m.anees_band().map(|b| b.to_array())
                } else {
                    None
                },
                nees_tails: if ok { m.nees_tails() } else { None },
                anis_band: if ok {
                    m.anis_band().map(|b| b.to_array())
                } else {
                    None
                },
                whiteness: ok.then(|| m.whiteness()),
                diagnostics: f.diagnostics.into(),
                runs: None,
                failures: None,
                rmse_all_spread: None,
                rmse_all_run_mean: None,
            }
        })
        .collect();
    let records: Vec<StepRecord<'_>> = outcome
        .filters
        .iter()
        .map(|f| StepRecord {
            squared_errors: &f.metrics.squared_errors,
            log_likelihoods: &f.metrics.log_likelihoods,
        })
        .collect();
    let (best, best_by) = ranking::rank_single(&mut filters, &records, outcome.truth);
    let verdict = verdict::verdict(&filters, &best, outcome.truth, None, outcome.steps);
    Summary {
        command: "compare".into(),
        model: plant.name().to_string(),
        steps: outcome.steps,
        settings: None,
        ignored_columns: Vec::new(),
        truth: outcome.truth,
        best,
        best_by,
        criteria: summary::criteria(outcome.truth, false),
        filters,
        verdict,
        runs: None,
        pcrlb_rmse_all: None,
        pcrlb_rmse: None,
    }
}

/// Runs every filter in `specs` over `source` in lockstep. With `estimates`, writes
/// `estimates.csv` rows to it as the run goes.
///
/// ```
/// use sightline_eval::commands::compare::{compare, CompareOptions};
/// use sightline_eval::dataset::read::MemorySource;
/// use sightline_eval::simulate::SimOptions;
/// use sightline_filters::FilterSpec;
///
/// let plants = sightline_eval::shipped();
/// let cv = plants.iter().find(|p| p.name() == "cv").unwrap();
/// let data = cv.simulate(200, 1, &SimOptions::default()).unwrap();
/// let specs = vec![FilterSpec::parse("kf").unwrap(), FilterSpec::parse("ukf").unwrap()];
/// let result = compare(cv.as_ref(), &specs, &mut MemorySource::new(&data), &CompareOptions::default(), None).unwrap();
/// assert_eq!(result.summary.filters.len(), 2);
/// assert!(result.summary.filters[0].rmse_all.unwrap() < 1.0);
/// ```
pub fn compare(
    plant: &dyn AnyPlant,
    specs: &[FilterSpec],
    source: &mut dyn RecordSource,
    options: &CompareOptions,
    estimates: Option<&mut dyn Write>,
) -> Result<Comparison> {
    let filters = runner::build_filters(plant, specs, options.seed)?;
    let config = RunConfig {
        seed: options.seed,
        series_points: options.series_points,
        smooth: options.smooth,
        ..RunConfig::default()
    };
    let states: Vec<String> = plant.states().into_iter().map(|v| v.name).collect();
    // The first rows pass through a copy kept for the observability check.
    let kept = if plant.states().len() > observability_check::MAX_STATES {
        0
    } else {
        CHECK_ROWS
    };
    let mut keeping = Keeping::new(source, kept);
    let outcome = match estimates {
        Some(out) => {
            let labels = specs.iter().map(|s| s.label.clone()).collect();
            let mut writer = EstimatesWriter::new(out, &states, labels)?;
            let outcome = runner::run(plant, filters, &mut keeping, &config, &mut writer)?;
            writer.finish()?;
            outcome
        }
        None => {
            let mut observer = NoObserver;
            let observer: &mut dyn Observer = &mut observer;
            runner::run(plant, filters, &mut keeping, &config, observer)?
        }
    };
    let rows = keeping.into_rows();
    let mut notes: Vec<String> = outcome.truth_problem.iter().cloned().collect();
    let smoothed = options
        .smooth
        .then(|| smoothing_notes(&outcome, &mut notes));
    let mut summary = summarise(plant, &outcome);
    let observability = observability_section(plant, source.layout(), rows, &outcome, &mut summary);
    Ok(Comparison {
        summary,
        series: outcome.series,
        notes,
        smoothed,
        clock: source.clock(),
        observability,
    })
}

/// The observability check along the run's first rows: the report section when a state is
/// not well observable, with the verdict's warnings appended to `summary`. A check that cannot
/// be made (a singular R, an overflowing sensitivity) leaves the comparison as it is: it is an
/// addition to the report, not a condition of it.
fn observability_section(
    plant: &dyn AnyPlant,
    layout: &Layout,
    rows: Vec<Record>,
    outcome: &RunOutcome,
    summary: &mut Summary,
) -> Option<String> {
    if plant.states().len() > observability_check::MAX_STATES {
        return None;
    }
    let check = observability_check::check(plant, layout, rows).ok()?;
    let warnings = match &outcome.series {
        Some(series) => observability_check::warnings(&check, series, summary),
        None => Vec::new(),
    };
    for w in &warnings {
        summary.verdict.push('\n');
        summary.verdict.push_str(w);
    }
    crate::observability_report::section(&check.result, &warnings)
}

/// Notes on what `--smooth` gave each filter, and the smoothed tracks.
fn smoothing_notes(outcome: &RunOutcome, notes: &mut Vec<String>) -> SmoothedRun {
    let mut tracks = Vec::new();
    let mut unsupported = Vec::new();
    for f in &outcome.filters {
        let track = match &f.smoothing {
            Some(Smoothing::Done { track, .. }) => Some(track.clone()),
            Some(Smoothing::Unsupported) => {
                unsupported.push(f.label.as_str());
                None
            }
            Some(Smoothing::Failed(e)) => {
                notes.push(format!("--smooth: {e}; its filtered results stand."));
                None
            }
            None => None,
        };
        tracks.push((f.label.clone(), track));
    }
    if !unsupported.is_empty() {
        notes.push(format!(
            "--smooth: {} {} no smoother (a constant-gain kf does not give the conditional moments \
             a smoother needs), so smoothed_rmse_all is null.",
            unsupported.join(", "),
            if unsupported.len() == 1 {
                "has"
            } else {
                "have"
            }
        ));
    }
    if !outcome.truth && tracks.iter().any(|(_, t)| t.is_some()) {
        notes.push(
            "--smooth: the data carries no truth, so smoothed accuracy is not measured; the \
             smoothed tracks are in smoothed.csv and the report."
                .to_string(),
        );
    }
    SmoothedRun {
        times: outcome.times.clone(),
        time_texts: outcome.time_texts.clone(),
        tracks,
    }
}

/// Writes `estimates.csv` (through `write_estimates`), `summary.json` and `report.html` into a
/// fresh output directory committed atomically onto `output`, with the `context` (title,
/// settings, ignored columns, notes) in the summary and the report and, with `more`, any
/// further files the caller writes into it first (e.g. demo's `data.csv`); returns the
/// comparison.
pub fn compare_to_dir(
    plant: &dyn AnyPlant,
    specs: &[FilterSpec],
    source: &mut dyn RecordSource,
    options: &CompareOptions,
    output: &Path,
    context: ResultContext,
    more: &dyn Fn(&OutputDir) -> Result<()>,
) -> Result<(Comparison, PathBuf)> {
    let dir = OutputDir::new(output)?;
    // Messages name the file where it will be, not the temporary directory.
    let estimates_path = dir.target().join("estimates.csv");
    let file = File::create(dir.path("estimates.csv")).map_err(|source| Error::Write {
        path: estimates_path.clone(),
        source,
    })?;
    let mut buffered = Catching::new(BufWriter::with_capacity(1 << 16, file));
    let mut comparison = compare(plant, specs, source, options, Some(&mut buffered))
        .map_err(|e| buffered.explain(e, &estimates_path))?;
    buffered.finish(&estimates_path)?;
    comparison.summary.settings = context.settings;
    comparison.summary.ignored_columns = context.ignored_columns;
    let mut notes = context.notes;
    notes.append(&mut comparison.notes);
    comparison.notes = notes;
    if let Some(smoothed) = &comparison.smoothed {
        let states: Vec<String> = plant.states().into_iter().map(|v| v.name).collect();
        dir.write("smoothed.csv", |w| smoothed.write_csv(w, &states))?;
    }
    let json = comparison.summary.to_json();
    dir.write("summary.json", |w| {
        w.write_all(json.as_bytes())
            .and_then(|()| w.write_all(b"\n"))
            .map_err(|source| Error::Write {
                path: PathBuf::from("summary.json"),
                source,
            })
    })?;
    let html = comparison.report_html(plant, &context.title)?;
    dir.write("report.html", |w| {
        w.write_all(html.as_bytes()).map_err(|source| Error::Write {
            path: PathBuf::from("report.html"),
            source,
        })
    })?;
    more(&dir)?;
    let target = dir.commit()?;
    Ok((comparison, target))
}

/// Prints the table, the verdict and where the report is.
pub fn print_result(summary: &Summary, dir: &Path, notes: &[String]) {
    println!("{}", terminal_table(summary));
    println!();
    for n in notes {
        println!("note: {n}");
    }
    println!("{}", summary.verdict);
    println!();
    println!("report: {}", dir.join("report.html").display());
}

/// Error to return after the outputs are written when filters failed (exit code 1).
pub fn failures_error(summary: &Summary) -> Option<Error> {
    let failed: Vec<&str> = summary
        .filters
        .iter()
        .filter(|f| f.status == Status::Failed)
        .map(|f| f.label.as_str())
        .collect();
    (!failed.is_empty()).then(|| {
        Error::Run(format!(
            "{} of {} filters failed ({}); the other results and the report were written",
            failed.len(),
            summary.filters.len(),
            failed.join(", ")
        ))
    })
}

/// Opens the dataset of a command: `path` (`-` for standard input) read with `dataset`'s flags,
/// its time base checked against `plant` (see [`DatasetReader::check_time_base`]). Prints the
/// reader's warnings and notes on stderr and returns them for the report.
pub fn open_dataset(
    plant: &dyn AnyPlant,
    plant_args: &PlantArgs,
    path: &Path,
    dataset: &DatasetArgs,
) -> Result<(DatasetReader, Vec<String>)> {
    let schema = Schema::of(plant, &plant_args.set_input_names());
    let mut reader = DatasetReader::open(path, &schema, dataset.read_options()?)?;
    let mut messages = reader.messages();
    if let Some(note) = reader.check_time_base(plant, dataset.accept_dt)? {
        messages.push(format!("note: {note}"));
    }
    for m in &messages {
        eprintln!("{m}");
    }
    let notes = messages
        .iter()
        .map(|m| {
            m.strip_prefix("warning: ")
                .or_else(|| m.strip_prefix("note: "))
                .unwrap_or(m)
                .to_string()
        })
        .collect();
    Ok((reader, notes))
}

/// Runs `compare`.
pub fn run(plants: &[Box<dyn AnyPlant>], args: &CompareArgs) -> Result<()> {
    crate::output::refuse_inputs_inside(&args.output, &[("dataset", &args.data)])?;
    let mut plant = configure(plants, &args.plant)?;
    plant.set_diffuse(&args.diffuse)?;
    // Built once before reading so that a bad spec is reported before any work.
    let (specs, skipped) = runner::choose_specs(plant.as_ref(), &args.filters, args.seed)?;
    let (mut reader, mut notes) =
        open_dataset(plant.as_ref(), &args.plant, &args.data, &args.dataset)?;
    if let Some(note) = skipped {
        eprintln!("note: {note}");
        notes.push(note);
    }
    if !args.diffuse.is_empty() && specs.iter().any(|s| s.kind == "kf") && specs.len() > 1 {
        let note = "with --diffuse, kf's log-likelihood is the exact diffuse one (the diffuse \
                    period's prediction errors replaced by −½ ln F∞) while the other filters' start from a large-variance \
                    prior and keep its ln κ terms: compare log-likelihoods with kf's only after \
                    removing the first rows, or among the other filters"
            .to_string();
        eprintln!("note: {note}");
        notes.push(note);
    }
    let options = CompareOptions {
        seed: args.seed,
        smooth: args.smooth,
        ..CompareOptions::default()
    };
    let settings = Settings {
        filters: specs.iter().map(|s| s.label.clone()).collect(),
        data: Some(args.data.display().to_string()),
        dataset: Some(args.dataset.settings()),
        smooth: Some(args.smooth),
        diffuse: args.diffuse.clone(),
        ..Settings::new("compare", plant.as_ref(), &args.plant.set, args.seed)
    };
    let shown_already = notes.len();
    let context = ResultContext {
        title: format!(
            "Sightline: {} on {} ({})",
            verdict::count(specs.len(), "filter"),
            plant.name(),
            args.data.display()
        ),
        settings: Some(settings),
        ignored_columns: reader.ignored_columns(),
        notes,
    };
    let (comparison, dir) = compare_to_dir(
        plant.as_ref(),
        &specs,
        &mut reader,
        &options,
        &args.output,
        context,
        &|_| Ok(()),
    )
    .map_err(|e| match e {
        Error::Interrupted(m) => Error::Interrupted(format!(
            "{m}; nothing was written to {}",
            args.output.display()
        )),
        other => other,
    })?;
    // The reader's and the filter set's notes went to stderr as they arose.
    let notes = comparison.notes.get(shown_already..).unwrap_or(&[]);
    print_result(&comparison.summary, &dir, notes);
    match failures_error(&comparison.summary) {
        Some(e) => Err(e),
        None => Ok(()),
    }
}
