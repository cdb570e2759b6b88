//! The runner: every filter in lockstep over one stream of dataset rows.
//!
//! Time line of a dataset (rows k = 0, 1, ...):
//! - row 0: `update(y(0), u(0), t(0))` from the prior — the prior is the belief at t(0) before
//!   the first measurement;
//! - row k ≥ 1: `predict(u(k−1), t(k−1), t(k) − t(k−1))`, then `update(y(k), u(k), t(k))`;
//! - the posterior after each update is what is recorded (estimates, errors, NEES); the update's
//!   innovation gives the NIS, the whiteness test and the log-likelihood.
//!
//! NaN components of `y` are missing and skipped by the filters. Rows are read one at a time,
//! each filter's posterior is handed to an [`Observer`] (which may write `estimates.csv` as it
//! goes), metrics are accumulated online and the plot series is decimated to a bounded size, so
//! memory does not grow with the length of the file. A filter that fails is marked failed with
//! its error (which names the step) and the others go on. A Ctrl-C stops the run before the
//! next row with [`Error::Interrupted`] ([`crate::interrupt`]).
//!
//! **Smoothing** ([`RunConfig::smooth`]) is the exception to bounded memory: every filter is asked
//! to record its forward pass ([`Filter::record_for_smoothing`]), the run keeps the times and the
//! truth of every row, and after the last row each filter that ran to the end is smoothed
//! ([`Filter::smooth`]); its smoothed track and smoothed RMSE go into its [`FilterOutcome`]. So
//! a smoothed run holds the whole run in memory (a Gaussian filter records 3n²+2n numbers per
//! row, `pf` N·(n+1)); filtering without smoothing still streams.

use std::time::Instant;

use sightline_core::rng::derive_seed;
use sightline_filters::{Diagnostics, Filter, FilterSpec, SmoothedTrack};

use crate::dataset::read::RecordSource;
use crate::dataset::{Layout, Record};
use crate::divergence::{Divergence, DivergenceWatch};
use crate::error::{Error, Result};
use crate::metrics::{DEFAULT_WHITENESS_LAGS, FilterMetrics, StepMetrics, normalised_squared};
use crate::plant::AnyPlant;

/// How a run is carried out.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RunConfig {
    /// Seed of the sampling filters; each filter's own seed is [`filter_seed`]`(seed, label)`.
    pub seed: u64,
    /// Rows kept for plots: at most twice this many (0 keeps none).
    pub series_points: usize,
    /// Lags of the whiteness test.
    pub whiteness_lags: usize,
    /// Record every filter's forward pass and smooth it at the end (holds the run in memory; see
    /// the module docs).
    pub smooth: bool,
}

impl Default for RunConfig {
    fn default() -> Self {
        RunConfig {
            seed: 0,
            series_points: 1000,
            whiteness_lags: DEFAULT_WHITENESS_LAGS,
            smooth: false,
        }
    }
}

/// 64-bit FNV-1a hash of a label (Fowler, Noll & Vo): a fixed, portable key.
fn label_key(label: &str) -> u64 {
    label.bytes().fold(0xcbf2_9ce4_8422_2325, |h, b| {
        (h ^ u64::from(b)).wrapping_mul(0x0000_0100_0000_01b3)
    })
}

/// The seed a filter with `label` gets in a run seeded with `seed`. It depends only on the run
/// seed and the label, so adding or removing other filters never changes a filter's result.
///
/// ```
/// use sightline_eval::runner::filter_seed;
/// assert_eq!(filter_seed(3, "pf"), filter_seed(3, "pf"));
/// assert_ne!(filter_seed(3, "pf"), filter_seed(3, "pf:particles=500"));
/// ```
pub fn filter_seed(seed: u64, label: &str) -> u64 {
    derive_seed(seed, &[label_key(label)])
}

/// Builds every filter a list of specs names for `plant` (on the calling thread: filters are not
/// `Send`).
pub fn build_filters(
    plant: &dyn AnyPlant,
    specs: &[FilterSpec],
    seed: u64,
) -> Result<Vec<Box<dyn Filter>>> {
    specs
        .iter()
        .map(|s| {
            plant
                .build_filter(s, filter_seed(seed, &s.label))
                .map_err(Error::from)
        })
        .collect()
}

/// Parses filter spec strings, expanding sweeps (`key=a|b|c`, [`FilterSpec::expand`]); with
/// none, every kind that applies to the plant (`kf` only for linear plants). Duplicated labels
/// are rejected since the label identifies a filter.
pub fn parse_specs(plant: &dyn AnyPlant, specs: &[String]) -> Result<Vec<FilterSpec>> {
    let parsed: Vec<FilterSpec> = if specs.is_empty() {
        sightline_filters::default_kinds(plant.is_linear())
            .into_iter()
            .map(FilterSpec::parse)
            .collect::<Result<_, _>>()?
    } else {
        let mut all = Vec::new();
        for s in specs {
            all.extend(FilterSpec::expand(s)?);
        }
        all
    };
    for (i, s) in parsed.iter().enumerate() {
        if parsed[..i].iter().any(|p| p.label == s.label) {
            return Err(Error::Usage(format!(
                "-f {}: the same filter spec is given twice; labels must be unique",
                s.label
            )));
        }
    }
    Ok(parsed)
}

/// The filters a command runs: those `specs` name, each built once so that a bad spec is a usage
/// error before any work; with no `-f`, the default kinds ([`parse_specs`]) that can run on the
/// plant — a kind whose build fails on it (e.g. `ghkf`, whose 3ⁿ points exceed the cap on a
/// 64-state plant) is skipped, and the returned note says which and why.
pub fn choose_specs(
    plant: &dyn AnyPlant,
    specs: &[String],
    seed: u64,
) -> Result<(Vec<FilterSpec>, Option<String>)> {
    let parsed = parse_specs(plant, specs)?;
    if !specs.is_empty() {
        build_filters(plant, &parsed, seed)?;
        return Ok((parsed, None));
    }
    let mut kept = Vec::with_capacity(parsed.len());
    let mut skipped = Vec::new();
    for spec in parsed {
        match plant.build_filter(&spec, filter_seed(seed, &spec.label)) {
            Ok(_) => kept.push(spec),
            Err(e) => skipped.push(format!("{} ({e})", spec.label)),
        }
    }
    if kept.is_empty() {
        return Err(Error::Usage(format!(
            "no default filter can run on model '{}': {}",
            plant.name(),
            skipped.join("; ")
        )));
    }
    let note = (!skipped.is_empty()).then(|| {
        format!(
            "the default filter set skips what cannot run on model '{}': {}",
            plant.name(),
            skipped.join("; ")
        )
    });
    Ok((kept, note))
}

/// Watches each filter's posterior after each update.
pub trait Observer {
    /// Row `k` at time `t` (seconds since the first row) begins; `time_text` is its time cell as
    /// written in the data, when it was read from text. Called before the row's
    /// [`Observer::filter_step`]s.
    fn begin_row(&mut self, k: u64, t: f64, time_text: Option<&str>) -> Result<()> {
        let _ = (k, t, time_text);
        Ok(())
    }

    /// Row `k` at time `t`: filter number `index` has updated; `sd` is the square root of its
    /// covariance diagonal and `step` its NEES/NIS at this step.
    fn filter_step(
        &mut self,
        k: u64,
        t: f64,
        index: usize,
        filter: &dyn Filter,
        sd: &[f64],
        step: &StepMetrics,
    ) -> Result<()>;
}

/// An observer that does nothing.
#[derive(Debug, Clone, Copy, Default)]
pub struct NoObserver;

impl Observer for NoObserver {
    fn filter_step(
        &mut self,
        _: u64,
        _: f64,
        _: usize,
        _: &dyn Filter,
        _: &[f64],
        _: &StepMetrics,
    ) -> Result<()> {
        Ok(())
    }
}

/// Writes `estimates.csv` as the run goes: `filter,t,x.<state>...,sd.<state>...`, one row per
/// filter per step, in row order then filter order; `t` is the data's own time cell (a
/// date-time stays a date-time), or the number when the rows were not read from text. A failed
/// filter has no rows from its failing step on.
pub struct EstimatesWriter<W: std::io::Write> {
    csv: csv::Writer<W>,
    labels: Vec<String>,
    cell: String,
    time_text: Option<String>,
}

impl<W: std::io::Write> EstimatesWriter<W> {
    /// Starts the file with its header.
    pub fn new(out: W, states: &[String], labels: Vec<String>) -> Result<Self> {
        let mut csv = csv::Writer::from_writer(out);
        let mut header = vec!["filter".to_string(), "t".to_string()];
        header.extend(states.iter().map(|s| format!("x.{s}")));
        header.extend(states.iter().map(|s| format!("sd.{s}")));
        csv.write_record(&header).map_err(csv_write)?;
        Ok(EstimatesWriter {
            csv,
            labels,
            cell: String::new(),
            time_text: None,
        })
    }

    fn number(&mut self, v: f64) -> Result<()> {
        use std::fmt::Write;
        self.cell.clear();
        let _ = write!(self.cell, "{v}");
        self.csv.write_field(&self.cell).map_err(csv_write)
    }

    /// Flushes the file.
    pub fn finish(mut self) -> Result<()> {
        self.csv
            .flush()
            .map_err(|e| Error::Run(format!("writing estimates.csv: {e}")))
    }
}

fn csv_write(e: csv::Error) -> Error {
    Error::Run(format!("writing estimates.csv: {e}"))
}

impl<W: std::io::Write> Observer for EstimatesWriter<W> {
    fn begin_row(&mut self, _k: u64, _t: f64, time_text: Option<&str>) -> Result<()> {
        match (time_text, &mut self.time_text) {
            (Some(text), Some(kept)) => {
                kept.clear();
                kept.push_str(text);
            }
            (Some(text), None) => self.time_text = Some(text.to_string()),
            (None, _) => self.time_text = None,
        }
        Ok(())
    }

    fn filter_step(
        &mut self,
        _k: u64,
        t: f64,
        index: usize,
        filter: &dyn Filter,
        sd: &[f64],
        _step: &StepMetrics,
    ) -> Result<()> {
        let label = self.labels.get(index).map(String::as_str).unwrap_or("");
        self.csv.write_field(label).map_err(csv_write)?;
        match &self.time_text {
            Some(text) => self.csv.write_field(text).map_err(csv_write)?,
            None => self.number(t)?,
        }
        for &m in filter.mean() {
            self.number(m)?;
        }
        for &s in sd {
            self.number(s)?;
        }
        self.csv.write_record(None::<&[u8]>).map_err(csv_write)
    }
}

/// A bounded, decimated record of a run for plots: every `stride`-th row, with the stride
/// doubled (and every other kept row dropped) whenever the store fills up.
#[derive(Debug, Clone)]
pub struct Series {
    /// States per row.
    pub states: usize,
    /// Measurements per row.
    pub measurements: usize,
    /// Filters per row.
    pub filters: usize,
    /// Current decimation: rows kept are multiples of `stride`.
    pub stride: u64,
    capacity: usize,
    /// Time of each kept row.
    pub t: Vec<f64>,
    /// Truth, `states` per row (NaN without truth).
    pub truth: Vec<f64>,
    /// Measurements, `measurements` per row (NaN missing).
    pub y: Vec<f64>,
    /// Posterior means, `filters × states` per row (NaN after a failure).
    pub mean: Vec<f64>,
    /// Posterior standard deviations, like `mean`.
    pub sd: Vec<f64>,
    /// NEES, `filters` per row (NaN without truth).
    pub nees: Vec<f64>,
    /// NIS, `filters` per row (NaN without a measurement).
    pub nis: Vec<f64>,
    /// NIS degrees of freedom, `filters` per row (0 without a measurement).
    pub nis_dof: Vec<u32>,
    /// Smoothed means, `filters × states` per row (NaN for a filter without a smoothed track);
    /// empty unless the run was smoothed.
    pub smoothed_mean: Vec<f64>,
    /// Smoothed standard deviations, like `smoothed_mean`.
    pub smoothed_sd: Vec<f64>,
}

impl Series {
    fn new(states: usize, measurements: usize, filters: usize, capacity: usize) -> Self {
        Series {
            states,
            measurements,
            filters,
            stride: 1,
            capacity,
            t: Vec::new(),
            truth: Vec::new(),
            y: Vec::new(),
            mean: Vec::new(),
            sd: Vec::new(),
            nees: Vec::new(),
            nis: Vec::new(),
            nis_dof: Vec::new(),
            smoothed_mean: Vec::new(),
            smoothed_sd: Vec::new(),
        }
    }

    /// Whether the series carries smoothed tracks.
    pub fn smoothed(&self) -> bool {
        !self.smoothed_mean.is_empty()
    }

    /// Fills the smoothed columns from each filter's track: kept row r is dataset row
    /// r·`stride` (rows kept are the multiples of the current stride).
    fn set_smoothed(&mut self, tracks: &[Option<&SmoothedTrack>]) {
        let (f, n) = (self.filters, self.states);
        let rows = self.t.len();
        self.smoothed_mean = vec![f64::NAN; rows * f * n];
        self.smoothed_sd = vec![f64::NAN; rows * f * n];
        for (index, track) in tracks.iter().enumerate() {
            let Some(track) = track else { continue };
            for r in 0..rows {
                let k = r * self.stride as usize;
                let (Some(mean), Some(sd)) = (track.means.get(k), track.std_devs(k)) else {
                    continue;
                };
                let at = (r * f + index) * n;
                self.smoothed_mean[at..at + n].copy_from_slice(&mean[..n]);
                self.smoothed_sd[at..at + n].copy_from_slice(&sd[..n]);
            }
        }
    }

    /// Rows kept.
    pub fn len(&self) -> usize {
        self.t.len()
    }

    /// Whether no row is kept.
    pub fn is_empty(&self) -> bool {
        self.t.is_empty()
    }

    fn begin_row(&mut self, record: &Record) {
        self.t.push(record.t);
        match &record.x {
            Some(x) => self.truth.extend_from_slice(x),
            None => self
                .truth
                .extend(std::iter::repeat_n(f64::NAN, self.states)),
        }
        self.y.extend_from_slice(&record.y);
        let f = self.filters;
        let n = self.states;
        self.mean.extend(std::iter::repeat_n(f64::NAN, f * n));
        self.sd.extend(std::iter::repeat_n(f64::NAN, f * n));
        self.nees.extend(std::iter::repeat_n(f64::NAN, f));
        self.nis.extend(std::iter::repeat_n(f64::NAN, f));
        self.nis_dof.extend(std::iter::repeat_n(0, f));
    }

    fn set_filter(&mut self, index: usize, mean: &[f64], sd: &[f64], step: &StepMetrics) {
        let row = self.t.len() - 1;
        let (f, n) = (self.filters, self.states);
        let at = (row * f + index) * n;
        self.mean[at..at + n].copy_from_slice(&mean[..n]);
        self.sd[at..at + n].copy_from_slice(&sd[..n]);
        self.nees[row * f + index] = step.nees.unwrap_or(f64::NAN);
        if let Some((nis, dof)) = step.nis {
            self.nis[row * f + index] = nis;
            self.nis_dof[row * f + index] = dof as u32;
        }
    }

    fn compact_if_full(&mut self) {
        if self.capacity == 0 || self.t.len() < 2 * self.capacity {
            return;
        }
        fn keep_even<T: Copy>(v: &mut Vec<T>, width: usize) {
            if width == 0 {
                return;
            }
            let rows = v.len() / width;
            let mut w = 0;
            for r in (0..rows).step_by(2) {
                for c in 0..width {
                    v[w * width + c] = v[r * width + c];
                }
                w += 1;
            }
            v.truncate(w * width);
        }
        let (n, m, f) = (self.states, self.measurements, self.filters);
        keep_even(&mut self.t, 1);
        keep_even(&mut self.truth, n);
        keep_even(&mut self.y, m);
        keep_even(&mut self.mean, f * n);
        keep_even(&mut self.sd, f * n);
        keep_even(&mut self.nees, f);
        keep_even(&mut self.nis, f);
        keep_even(&mut self.nis_dof, f);
        self.stride *= 2;
    }
}

/// What became of one filter over a run.
#[derive(Debug, Clone)]
pub struct FilterOutcome {
    /// Label (the spec string).
    pub label: String,
    /// Kind.
    pub kind: String,
    /// The error that stopped the filter, if it failed.
    pub error: Option<String>,
    /// Row at which it failed.
    pub failed_at: Option<u64>,
    /// Metrics over the rows it processed.
    pub metrics: FilterMetrics,
    /// The filter's own counters at the end.
    pub diagnostics: Diagnostics,
    /// What smoothing gave, when the run was smoothed and the filter ran to the end.
    pub smoothing: Option<Smoothing>,
    /// When and why the filter diverged, if it did ([`crate::divergence`]).
    pub divergence: Option<Divergence>,
}

/// What became of smoothing one filter's run.
#[derive(Debug, Clone)]
pub enum Smoothing {
    /// The filter has no smoother (e.g. `kf` with a constant gain).
    Unsupported,
    /// The backward pass failed; the filtered results stand.
    Failed(String),
    /// The smoothed track, one epoch per row.
    Done {
        /// Smoothed mean and covariance of every row.
        track: SmoothedTrack,
        /// RMSE of the smoothed means per state (model order), `None` without truth.
        rmse: Option<Vec<f64>>,
        /// √(mean over rows and states of the squared smoothed error), `None` without truth.
        rmse_all: Option<f64>,
    },
}

impl Smoothing {
    /// The smoothed track, if smoothing succeeded.
    pub fn track(&self) -> Option<&SmoothedTrack> {
        match self {
            Smoothing::Done { track, .. } => Some(track),
            _ => None,
        }
    }
}

impl FilterOutcome {
    /// Whether the filter ran to the end.
    pub fn ok(&self) -> bool {
        self.error.is_none()
    }
}

/// The result of running a set of filters over one dataset.
#[derive(Debug, Clone)]
pub struct RunOutcome {
    /// Rows processed.
    pub steps: u64,
    /// Dataset layout.
    pub layout: Layout,
    /// Whether the data carried truth.
    pub truth: bool,
    /// One outcome per filter, in spec order.
    pub filters: Vec<FilterOutcome>,
    /// The decimated series for plots (`None` with `series_points = 0`).
    pub series: Option<Series>,
    /// Time of every row, kept only when the run was smoothed (for `smoothed.csv`).
    pub times: Vec<f64>,
    /// The time cell of every row as written in the data, kept like `times` when the rows were
    /// read from text (empty otherwise).
    pub time_texts: Vec<String>,
    /// Why the data's truth could not be used (a value whose square overflows), if so: the
    /// run is then judged as one without truth.
    pub truth_problem: Option<String>,
}

/// Per-filter working state of a run.
struct Lane {
    filter: Box<dyn Filter>,
    outcome: FilterOutcome,
    sd: Vec<f64>,
    error: Vec<f64>,
    work: Vec<f64>,
    z: Vec<f64>,
    variances: Vec<f64>,
    watch: DivergenceWatch,
}

impl Lane {
    fn fail(&mut self, k: u64, message: String) {
        self.outcome.error = Some(message);
        self.outcome.failed_at = Some(k);
    }
}

/// Runs `filters` in lockstep over `source` (see the module docs for the time line).
///
/// Dataset errors stop the run (`Err`); filter failures do not: they are recorded in the
/// filter's outcome and the other filters continue.
pub fn run(
    plant: &dyn AnyPlant,
    filters: Vec<Box<dyn Filter>>,
    source: &mut dyn RecordSource,
    config: &RunConfig,
    observer: &mut dyn Observer,
) -> Result<RunOutcome> {
    let n = plant.states().len();
    let m = plant.measurements().len();
    let layout = source.layout().clone();
    let truth = !layout.states.is_empty();
    let state_names: Vec<String> = plant.states().into_iter().map(|v| v.name).collect();
    let (prior_mean, prior_cov) = plant.prior();
    let nees_hi = crate::chi2::band(n).map(|b| b.hi);
    let mut lanes: Vec<Lane> = filters
        .into_iter()
        .map(|mut filter| {
            if config.smooth {
                // A filter without a smoother declines; it is reported as such at the end.
                filter.record_for_smoothing();
            }
            filter
        })
        .map(|filter| Lane {
            outcome: FilterOutcome {
                label: filter.label().to_string(),
                kind: filter.kind().to_string(),
                error: None,
                failed_at: None,
                metrics: FilterMetrics::new(n, m, config.whiteness_lags),
                diagnostics: Diagnostics::default(),
                smoothing: None,
                divergence: None,
            },
            filter,
            sd: vec![0.0; n],
            error: vec![0.0; n],
            work: vec![0.0; n * n],
            z: vec![0.0; n],
            variances: vec![0.0; n],
            watch: DivergenceWatch::new(&prior_mean, &prior_cov, nees_hi),
        })
        .collect();
    let mut series =
        (config.series_points > 0).then(|| Series::new(n, m, lanes.len(), config.series_points));
    let mut record = Record::empty();
    let mut previous: Option<(f64, Vec<f64>)> = None;
    let mut k: u64 = 0;
    // Smoothing only: the time and truth of every row.
    let (mut times, mut truths) = (Vec::new(), Vec::new());
    let mut time_texts = Vec::new();
    let mut truth_problem: Option<String> = None;
    while source.next_into(&mut record)? {
        crate::interrupt::check(|| format!("at row {k}"))?;
        if let Some(x) = &record.x {
            if x.len() != n {
                return Err(Error::Usage(format!(
                    "row {k}: the truth has {} values but model '{}' has {n} states",
                    x.len(),
                    plant.name()
                )));
            }
        }
        if truth_problem.is_none() {
            // An error against such a truth overflows for every filter: the truth is at fault.
            let huge = record.x.as_ref().and_then(|x| {
                x.iter()
                    .zip(&layout.states)
                    .find(|(v, _)| !(*v * *v).is_finite())
            });
            if let Some((v, name)) = huge {
                // The time as the data wrote it (a date-time reads better than its seconds).
                let t = source
                    .time_text()
                    .map_or_else(|| record.t.to_string(), str::to_string);
                truth_problem = Some(format!(
                    "row {k} (t = {t}): the truth x.{name} = {v:e} is too large to measure an \
                     error against (its square overflows), so accuracy and NEES are not measured \
                     on this dataset"
                ));
            }
        }
        let row_truth = record.x.as_ref().filter(|_| truth_problem.is_none());
        if config.smooth {
            times.push(record.t);
            if let Some(text) = source.time_text() {
                time_texts.push(text.to_string());
            }
            if let Some(x) = &record.x {
                truths.extend_from_slice(x);
            }
        }
        observer.begin_row(k, record.t, source.time_text())?;
        let keep = series
            .as_mut()
            .map(|s| {
                let keep = k % s.stride == 0;
                if keep {
                    s.begin_row(&record);
                }
                keep
            })
            .unwrap_or(false);
        for (index, lane) in lanes.iter_mut().enumerate() {
            if !lane.outcome.ok() {
                continue;
            }
            let started = Instant::now();
            let stepped = match &previous {
                Some((t0, u0)) => lane.filter.predict(u0, *t0, record.t - t0),
                None => Ok(()),
            }
            .and_then(|()| lane.filter.update(&record.y, &record.u, record.t));
            lane.outcome.metrics.seconds += started.elapsed().as_secs_f64();
            if let Err(e) = stepped {
                lane.fail(k, e.to_string());
                continue;
            }
            let label = &lane.outcome.label;
            let mean = lane.filter.mean();
            let cov = lane.filter.covariance();
            if mean.len() != n || cov.len() != n * n {
                let message = format!(
                    "filter '{label}' failed at step {k}: its estimate has {} values, the model \
                     has {n} states",
                    mean.len()
                );
                lane.fail(k, message);
                continue;
            }
            if mean.iter().chain(cov).any(|v| !v.is_finite()) {
                let message = format!(
                    "filter '{label}' failed at step {k} (t = {}): non-finite posterior mean or \
                     covariance",
                    record.t
                );
                lane.fail(k, message);
                continue;
            }
            for i in 0..n {
                lane.variances[i] = cov[i + i * n];
                lane.sd[i] = cov[i + i * n].max(0.0).sqrt();
            }
            let mut step = StepMetrics {
                nees: None,
                nis: None,
            };
            if let Some(x) = row_truth {
                for i in 0..n {
                    lane.error[i] = x[i] - mean[i];
                }
                let Some(nees) = normalised_squared(cov, &lane.error, &mut lane.work, &mut lane.z)
                else {
                    // Either P is not positive definite, or it is and the error is so large
                    // that eᵀP⁻¹e overflows (e.g. after an absurd measurement).
                    let zero = vec![0.0; n];
                    let definite =
                        normalised_squared(cov, &zero, &mut lane.work, &mut lane.z).is_some();
                    let reason = if definite {
                        let far = lane.error.iter().fold(0.0_f64, |a, e| a.max(e.abs()));
                        format!(
                            "its NEES is not finite: the estimate is {far:e} away from the truth"
                        )
                    } else {
                        "the posterior covariance is not positive definite, so its NEES is \
                         undefined"
                            .to_string()
                    };
                    let message = format!(
                        "filter '{label}' failed at step {k} (t = {}): {reason}",
                        record.t
                    );
                    lane.fail(k, message);
                    continue;
                };
                lane.outcome.metrics.add_error(&lane.error, nees);
                step.nees = Some(nees);
            }
            let increment = lane.filter.log_likelihood_increment();
            if !increment.is_finite() {
                let message = format!(
                    "filter '{label}' failed at step {k} (t = {}): the log-likelihood increment \
                     is not finite",
                    record.t
                );
                lane.fail(k, message);
                continue;
            }
            step.nis =
                lane.outcome
                    .metrics
                    .add_update(&record.y, lane.filter.innovation(), increment);
            lane.watch.observe(
                k,
                &lane.variances,
                step.nees,
                row_truth.map(Vec::as_slice),
                &state_names,
            );
            observer.filter_step(k, record.t, index, lane.filter.as_ref(), &lane.sd, &step)?;
            if keep {
                if let Some(s) = series.as_mut() {
                    s.set_filter(index, lane.filter.mean(), &lane.sd, &step);
                }
            }
        }
        if let Some(s) = series.as_mut() {
            s.compact_if_full();
        }
        match &mut previous {
            Some((t0, u0)) => {
                *t0 = record.t;
                u0.clone_from(&record.u);
            }
            None => previous = Some((record.t, record.u.clone())),
        }
        k += 1;
    }
    let truth = truth && truth_problem.is_none();
    let truth_rows = (truth && truths.len() == times.len() * n).then_some(truths.as_slice());
    if truth_problem.is_some() {
        if let Some(s) = series.as_mut() {
            s.truth.iter_mut().for_each(|v| *v = f64::NAN);
        }
    }
    let filters: Vec<FilterOutcome> = lanes
        .into_iter()
        .map(|mut lane| {
            if truth_problem.is_some() {
                lane.outcome.metrics.forget_truth();
            }
            lane.outcome.diagnostics = lane.filter.diagnostics();
            lane.outcome.divergence = lane.watch.divergence().cloned();
            if config.smooth && lane.outcome.ok() {
                lane.outcome.smoothing = Some(smooth(lane.filter.as_ref(), k, n, truth_rows));
            }
            lane.outcome
        })
        .collect();
    if let Some(s) = series.as_mut().filter(|_| config.smooth) {
        let tracks: Vec<Option<&SmoothedTrack>> = filters
            .iter()
            .map(|f| f.smoothing.as_ref().and_then(Smoothing::track))
            .collect();
        s.set_smoothed(&tracks);
    }
    Ok(RunOutcome {
        steps: k,
        layout,
        truth,
        filters,
        series,
        times,
        time_texts,
        truth_problem,
    })
}

/// Smooths a filter that ran over `steps` rows of an `n`-state plant and scores the smoothed
/// means against the truth (`n` values per row), if known.
fn smooth(filter: &dyn Filter, steps: u64, n: usize, truth: Option<&[f64]>) -> Smoothing {
    let track = match filter.smooth() {
        None => return Smoothing::Unsupported,
        Some(Err(e)) => return Smoothing::Failed(e.to_string()),
        Some(Ok(track)) => track,
    };
    let label = filter.label();
    if track.len() as u64 != steps || track.means.iter().any(|m| m.len() != n) {
        return Smoothing::Failed(format!(
            "smoother of filter '{label}' returned {} epochs for {steps} rows",
            track.len()
        ));
    }
    if track.means.iter().flatten().any(|v| !v.is_finite()) {
        return Smoothing::Failed(format!(
            "smoother of filter '{label}' returned a non-finite smoothed mean"
        ));
    }
    let (rmse, rmse_all) = match truth {
        Some(x) if steps > 0 && n > 0 => {
            let mut per_state = vec![0.0; n];
            for (k, mean) in track.means.iter().enumerate() {
                for i in 0..n {
                    per_state[i] += (mean[i] - x[k * n + i]).powi(2);
                }
            }
            let rows = steps as f64;
            let all = (per_state.iter().sum::<f64>() / (rows * n as f64)).sqrt();
            let per_state = per_state.iter().map(|s| (s / rows).sqrt()).collect();
            (Some(per_state), Some(all))
        }
        _ => (None, None),
    };
    Smoothing::Done {
        track,
        rmse,
        rmse_all,
    }
}
