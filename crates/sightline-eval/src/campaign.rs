//! Monte Carlo campaigns: M simulated datasets, every filter on each, aggregated per filter.
//!
//! Run i simulates its dataset with the seed [`run_seed`]`(S, i)` = `derive_seed(S, [i])` and runs
//! the filters with that same seed (each filter's stream is keyed by its label), so
//! `sightline simulate MODEL --seed <run seed>` followed by `sightline compare ... --seed <run
//! seed>` reproduces run i alone. Runs execute in parallel (rayon) in bounded chunks.
//!
//! Aggregates are [`ExactSum`]s, so the totals do not depend on the order of the runs, the
//! number of threads or how the runs were split into shards: `--shard K/N` runs a contiguous
//! slice of the runs and writes its [`Totals`] to `partial.json`; [`merge`] adds the shards'
//! totals and gives bit for bit the totals of the unsharded campaign.
//!
//! Per filter: RMSE per state and overall pooled over runs, steps and states; the spread
//! (sample standard deviation) of the per-run `rmse_all`; ANEES with its 95 % band
//! χ²(M·n)/M and the share of steps whose M-run average NEES lies inside it (Bar-Shalom, Li &
//! Kirubarajan 2001, §5.4); the same for the NIS; the mean log-likelihood; failures.

use std::io::IsTerminal;
use std::ops::Range;
use std::sync::atomic::{AtomicBool, Ordering};

use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use sightline_core::rng::derive_seed;
use sightline_filters::{Filter, FilterSpec};

use crate::chi2;
use crate::dataset::read::MemorySource;
use crate::error::{Error, Result};
use crate::exact_sum::ExactSum;
use crate::intervals::RunMoments;
use crate::metrics::StepMetrics;
use crate::plant::AnyPlant;
use crate::runner::{self, Observer, RunConfig};
use crate::settings::Settings;
use crate::simulate::SimOptions;
use crate::summary::{self, DiagnosticsSummary, FilterSummary, StateMap, Status, Summary};
use crate::verdict;

/// Identifier of the `partial.json` format.
pub const PARTIAL_FORMAT: &str = "sightline-montecarlo-partial/3";

/// Errors kept per filter (those of the lowest run indices).
const KEPT_ERRORS: usize = 20;

/// The seed of run `i` of a campaign seeded with `seed`.
///
/// ```
/// use sightline_eval::campaign::run_seed;
/// assert_eq!(run_seed(7, 3), sightline_core::rng::derive_seed(7, &[3]));
/// ```
pub fn run_seed(seed: u64, i: u64) -> u64 {
    derive_seed(seed, &[i])
}

/// What a campaign is: everything that must agree between shards.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CampaignSpec {
    /// Model name.
    pub model: String,
    /// The `--set NAME=VALUE` items, as given.
    pub set: Vec<String>,
    /// Runs in the whole campaign.
    pub runs: u64,
    /// Rows per run.
    pub steps: u64,
    /// Campaign seed.
    pub seed: u64,
    /// Filter labels, in order.
    pub filters: Vec<String>,
    /// `--every K`: each run keeps a measurement only every K rows.
    pub every: usize,
    /// `--dropout P`: each simulated measurement component is dropped with probability P.
    pub dropout: f64,
    /// `--diffuse` states, as given (absent in files written before it existed).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub diffuse: Vec<String>,
}

impl CampaignSpec {
    /// How each run's dataset is simulated.
    pub fn sim_options(&self) -> SimOptions {
        SimOptions {
            noise_free: false,
            every: self.every,
            dropout: self.dropout,
        }
    }
}

/// `--shard K/N`: shard K (1-based) of N.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct Shard {
    /// K, from 1.
    pub index: u64,
    /// N.
    pub count: u64,
}

impl Shard {
    /// Parses `K/N`.
    ///
    /// ```
    /// use sightline_eval::campaign::Shard;
    /// assert_eq!(Shard::parse("2/8").unwrap(), Shard { index: 2, count: 8 });
    /// assert!(Shard::parse("0/8").is_err());
    /// assert!(Shard::parse("9/8").is_err());
    /// ```
    pub fn parse(text: &str) -> Result<Self> {
        let bad = || {
            Error::Usage(format!(
                "--shard '{text}': expected K/N with 1 ≤ K ≤ N, e.g. --shard 2/8"
            ))
        };
        let (k, n) = text.split_once('/').ok_or_else(bad)?;
        let index: u64 = k.trim().parse().map_err(|_| bad())?;
        let count: u64 = n.trim().parse().map_err(|_| bad())?;
        if index == 0 || count == 0 || index > count {
            return Err(bad());
        }
        Ok(Shard { index, count })
    }

    /// The runs of this shard: a contiguous slice ⌊(K−1)M/N⌋..⌊KM/N⌋.
    pub fn range(&self, runs: u64) -> Range<u64> {
        let cut = |k: u64| ((k as u128 * runs as u128) / self.count as u128) as u64;
        cut(self.index - 1)..cut(self.index)
    }
}

impl std::fmt::Display for Shard {
    /// `K/N`, as `--shard` takes it.
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}/{}", self.index, self.count)
    }
}

/// A failure of one filter in one run.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct RunError {
    /// Run index.
    pub run: u64,
    /// The error.
    pub error: String,
}

/// One filter's exact sums over a set of runs.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FilterTotals {
    /// Label.
    pub label: String,
    /// Kind.
    pub kind: String,
    /// Runs that finished.
    pub ok_runs: u64,
    /// Runs that failed.
    pub failures: u64,
    /// First errors, by run index.
    pub errors: Vec<RunError>,
    /// Σ squared error per state over finished runs and steps.
    pub sse: Vec<ExactSum>,
    /// Σ over finished runs of the run's `rmse_all`.
    pub rmse_run: ExactSum,
    /// Σ over finished runs of the run's `rmse_all`².
    pub rmse_run_sq: ExactSum,
    /// Per step: Σ NEES over finished runs.
    pub nees_step: Vec<ExactSum>,
    /// Per step: Σ NIS over finished runs with a measurement at that step.
    pub nis_step: Vec<ExactSum>,
    /// Per step: Σ of the NIS degrees of freedom.
    pub nis_dof_step: Vec<u64>,
    /// Per step: finished runs with a measurement at that step.
    pub nis_count_step: Vec<u64>,
    /// Σ over finished runs of the total log-likelihood.
    pub log_likelihood: ExactSum,
    /// Σ seconds in predict + update over all runs (a measurement, not reproducible).
    pub seconds: ExactSum,
    /// Steps timed.
    pub timed_steps: u64,
    /// Summed counters.
    pub diagnostics: DiagnosticsSummary,
    /// Moments over finished runs of each run's mean squared error (`rmse_all`²), for the
    /// interval of `rmse_all` (absent in files written before it existed).
    #[serde(default)]
    pub mse_run: RunMoments,
    /// Finished runs in which the filter diverged ([`crate::divergence`]).
    #[serde(default)]
    pub diverged_runs: u64,
    /// The divergence of the lowest run index: run, step and reason.
    #[serde(default)]
    pub first_divergence: Option<(u64, u64, String)>,
}

/// Paired moments of the per-run difference of mean squared error of two filters, over the runs
/// both finished.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct PairTotals {
    /// Index of the first filter (spec order).
    pub a: usize,
    /// Index of the second filter (`b > a`).
    pub b: usize,
    /// Moments of `mse_a − mse_b`.
    pub difference: RunMoments,
    /// Σ of `mse_b` over the same runs (the reference scale when `b` is the reference).
    pub mse_b: ExactSum,
    /// Σ of `mse_a` over the same runs.
    pub mse_a: ExactSum,
}

impl PairTotals {
    fn merge(&mut self, other: &PairTotals) {
        self.difference.merge(&other.difference);
        self.mse_a.merge(&other.mse_a);
        self.mse_b.merge(&other.mse_b);
    }
}

impl FilterTotals {
    fn new(label: &str, kind: &str, states: usize, steps: usize) -> Self {
        FilterTotals {
            label: label.to_string(),
            kind: kind.to_string(),
            ok_runs: 0,
            failures: 0,
            errors: Vec::new(),
            sse: vec![ExactSum::default(); states],
            rmse_run: ExactSum::default(),
            rmse_run_sq: ExactSum::default(),
            nees_step: vec![ExactSum::default(); steps],
            nis_step: vec![ExactSum::default(); steps],
            nis_dof_step: vec![0; steps],
            nis_count_step: vec![0; steps],
            log_likelihood: ExactSum::default(),
            seconds: ExactSum::default(),
            timed_steps: 0,
            diagnostics: DiagnosticsSummary::default(),
            mse_run: RunMoments::default(),
            diverged_runs: 0,
            first_divergence: None,
        }
    }

    /// Keeps the divergence of the lowest run index.
    fn note_divergence(&mut self, run: u64, step: u64, reason: &str) {
        if self
            .first_divergence
            .as_ref()
            .is_none_or(|(r, _, _)| run < *r)
        {
            self.first_divergence = Some((run, step, reason.to_string()));
        }
    }

    fn add_errors(&mut self, more: impl IntoIterator<Item = RunError>) {
        self.errors.extend(more);
        self.errors.sort_by_key(|e| e.run);
        self.errors.truncate(KEPT_ERRORS);
    }

    fn merge(&mut self, other: &FilterTotals) -> Result<()> {
        if other.sse.len() != self.sse.len() || other.nees_step.len() != self.nees_step.len() {
            return Err(Error::Usage(format!(
                "filter '{}': shard totals have different sizes",
                self.label
            )));
        }
        self.ok_runs += other.ok_runs;
        self.failures += other.failures;
        self.add_errors(other.errors.iter().cloned());
        for (a, b) in self.sse.iter_mut().zip(&other.sse) {
            a.merge(b);
        }
        self.rmse_run.merge(&other.rmse_run);
        self.rmse_run_sq.merge(&other.rmse_run_sq);
        for (a, b) in self.nees_step.iter_mut().zip(&other.nees_step) {
            a.merge(b);
        }
        for (a, b) in self.nis_step.iter_mut().zip(&other.nis_step) {
            a.merge(b);
        }
        for (a, b) in self.nis_dof_step.iter_mut().zip(&other.nis_dof_step) {
            *a += b;
        }
        for (a, b) in self.nis_count_step.iter_mut().zip(&other.nis_count_step) {
            *a += b;
        }
        self.log_likelihood.merge(&other.log_likelihood);
        self.seconds.merge(&other.seconds);
        self.timed_steps += other.timed_steps;
        self.diagnostics.add(&other.diagnostics);
        self.mse_run.merge(&other.mse_run);
        self.diverged_runs += other.diverged_runs;
        if let Some((run, step, reason)) = &other.first_divergence {
            self.note_divergence(*run, *step, reason);
        }
        Ok(())
    }
}

/// The raw totals of a campaign or of a shard of it: the content of `partial.json`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Totals {
    /// Always [`PARTIAL_FORMAT`].
    pub format: String,
    /// The campaign.
    pub campaign: CampaignSpec,
    /// State names in model order.
    pub states: Vec<String>,
    /// Measurement components.
    pub measurements: usize,
    /// The `--shard K/N` these totals belong to (`None` for a whole campaign or a merge).
    pub shard: Option<Shard>,
    /// Run ranges covered, sorted and disjoint.
    pub covered: Vec<[u64; 2]>,
    /// Per filter, in spec order.
    pub filters: Vec<FilterTotals>,
    /// Exact sums of the posterior Cramér–Rao bound's information terms over the runs
    /// (`None` for plants with more than [`crate::pcrlb::MAX_STATES`] states).
    pub pcrlb: Option<PcrlbTotals>,
    /// How the campaign was run, for the summary's `settings` (`None` for totals made through
    /// the library without them). Its `shard` always names [`Totals::shard`]
    /// ([`Totals::set_shard`]).
    pub settings: Option<Settings>,
    /// Paired per-run differences of every pair of filters, for `best` (absent in files
    /// written before it existed: no ranking then).
    #[serde(default)]
    pub pairs: Vec<PairTotals>,
}

/// The PCRLB's share of the totals: the information terms of every run, summed exactly so that
/// the bound of a merged campaign is bit for bit the unsharded one. The recursion itself runs on
/// the averages when the summary is made ([`crate::pcrlb::bound_from_terms`]).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PcrlbTotals {
    /// Prior covariance, column-major.
    pub prior_cov: Vec<f64>,
    /// Per step, Σ over runs of the `[D11 | D12 | D22]` entries.
    pub terms: Vec<Vec<ExactSum>>,
    /// Runs summed.
    pub runs: u64,
    /// Why the bound could not be computed (the lowest-numbered run's error).
    pub error: Option<RunError>,
}

impl PcrlbTotals {
    fn add(&mut self, run: u64, terms: Result<Vec<Vec<f64>>>) {
        match terms {
            Ok(terms) => {
                for (sums, row) in self.terms.iter_mut().zip(&terms) {
                    for (a, v) in sums.iter_mut().zip(row) {
                        a.add(*v);
                    }
                }
                self.runs += 1;
            }
            Err(e) => self.note_error(RunError {
                run,
                error: e.to_string(),
            }),
        }
    }

    fn note_error(&mut self, e: RunError) {
        if self.error.as_ref().is_none_or(|old| e.run < old.run) {
            self.error = Some(e);
        }
    }

    fn merge(&mut self, other: &PcrlbTotals) {
        for (a, b) in self.terms.iter_mut().zip(&other.terms) {
            for (x, y) in a.iter_mut().zip(b) {
                x.merge(y);
            }
        }
        self.runs += other.runs;
        if let Some(e) = &other.error {
            self.note_error(e.clone());
        }
    }

    /// The bound over the runs summed, or why there is none.
    pub fn bound(&self, states: usize) -> Result<crate::pcrlb::Bound> {
        if let Some(e) = &self.error {
            return Err(Error::Run(format!("run {}: {}", e.run, e.error)));
        }
        if self.runs == 0 {
            return Err(Error::Run("no run finished".into()));
        }
        let scale = 1.0 / self.runs as f64;
        let means: Vec<Vec<f64>> = self
            .terms
            .iter()
            .map(|row| row.iter().map(|s| s.value() * scale).collect())
            .collect();
        crate::pcrlb::bound_from_terms(states, &self.prior_cov, &means)
    }
}

impl Totals {
    /// Runs covered.
    pub fn runs_covered(&self) -> u64 {
        self.covered.iter().map(|[a, b]| b - a).sum()
    }

    /// Whether every run of the campaign is covered.
    pub fn complete(&self) -> bool {
        self.covered == [[0, self.campaign.runs]]
    }

    /// Sets the `--shard` these totals belong to, in [`Totals::shard`] and in the settings
    /// alike (so that a rerun from the settings runs the same shard, or the whole campaign).
    pub fn set_shard(&mut self, shard: Option<Shard>) {
        self.shard = shard;
        if let Some(s) = self.settings.as_mut() {
            s.shard = shard.map(|s| s.to_string());
        }
    }
}

/// One finished run of one filter, before it joins the totals.
struct FilterRun {
    error: Option<String>,
    sse: Vec<f64>,
    rmse_all: Option<f64>,
    nees: Vec<f64>,
    nis: Vec<(f64, u32)>,
    log_likelihood: f64,
    seconds: f64,
    steps: u64,
    diagnostics: DiagnosticsSummary,
    divergence: Option<crate::divergence::Divergence>,
}

/// Collects each filter's per-step NEES and NIS in one run.
struct PerStep {
    nees: Vec<Vec<f64>>,
    nis: Vec<Vec<(f64, u32)>>,
}

impl Observer for PerStep {
    fn filter_step(
        &mut self,
        k: u64,
        _t: f64,
        index: usize,
        _filter: &dyn Filter,
        _sd: &[f64],
        step: &StepMetrics,
    ) -> Result<()> {
        let k = k as usize;
        if let Some(v) = self.nees.get_mut(index).and_then(|v| v.get_mut(k)) {
            *v = step.nees.unwrap_or(f64::NAN);
        }
        if let Some(v) = self.nis.get_mut(index).and_then(|v| v.get_mut(k)) {
            *v = step.nis.map_or((0.0, 0), |(x, d)| (x, d as u32));
        }
        Ok(())
    }
}

/// One run's filter results and, when the campaign keeps the PCRLB, its information terms.
type RunResult = (Vec<FilterRun>, Option<Result<Vec<Vec<f64>>>>);

fn one_run(
    plant: &dyn AnyPlant,
    specs: &[FilterSpec],
    campaign: &CampaignSpec,
    i: u64,
    with_pcrlb: bool,
) -> Result<RunResult> {
    let seed = run_seed(campaign.seed, i);
    let steps = campaign.steps as usize;
    let data = plant
        .simulate(steps, seed, &campaign.sim_options())
        .map_err(|e| match e {
            // A Ctrl-C seen while simulating stays an interrupt (exit 130), not a failed run.
            Error::Interrupted(_) => e,
            other => Error::Run(format!("run {i} (seed {seed}): {other}")),
        })?;
    let terms = with_pcrlb.then(|| plant.pcrlb_terms(&data));
    let filters = runner::build_filters(plant, specs, seed)?;
    let mut per_step = PerStep {
        nees: vec![vec![f64::NAN; steps]; specs.len()],
        nis: vec![vec![(0.0, 0); steps]; specs.len()],
    };
    let config = RunConfig {
        seed,
        series_points: 0,
        ..RunConfig::default()
    };
    let outcome = runner::run(
        plant,
        filters,
        &mut MemorySource::new(&data),
        &config,
        &mut per_step,
    )?;
    if let Some(problem) = &outcome.truth_problem {
        return Err(Error::Run(format!("run {i} (seed {seed}): {problem}")));
    }
    let runs = outcome
        .filters
        .into_iter()
        .zip(per_step.nees)
        .zip(per_step.nis)
        .map(|((f, nees), nis)| FilterRun {
            error: f
                .error
                .clone()
                .map(|e| format!("run {i} (seed {seed}): {e}")),
            sse: f.metrics.sse.clone(),
            rmse_all: f.metrics.rmse_all(),
            nees,
            nis,
            log_likelihood: f.metrics.log_likelihood,
            seconds: f.metrics.seconds,
            steps: f.metrics.steps,
            diagnostics: f.diagnostics.into(),
            divergence: f.divergence.clone(),
        })
        .collect();
    Ok((runs, terms))
}

fn add_run(totals: &mut Totals, i: u64, (runs, terms): RunResult) {
    if let (Some(p), Some(terms)) = (totals.pcrlb.as_mut(), terms) {
        p.add(i, terms);
    }
    totals.covered.push([i, i + 1]);
    join_ranges(&mut totals.covered);
    let mse: Vec<Option<f64>> = runs
        .iter()
        .map(|r| {
            r.error
                .is_none()
                .then(|| r.rmse_all.map(|x| x * x))
                .flatten()
        })
        .collect();
    for p in totals.pairs.iter_mut() {
        if let (Some(Some(a)), Some(Some(b))) = (mse.get(p.a), mse.get(p.b)) {
            p.difference.add(a - b);
            p.mse_a.add(*a);
            p.mse_b.add(*b);
        }
    }
    for (t, r) in totals.filters.iter_mut().zip(runs) {
        t.seconds.add(r.seconds);
        t.timed_steps += r.steps;
        t.diagnostics.add(&r.diagnostics);
        if let Some(error) = r.error {
            t.failures += 1;
            t.add_errors([RunError { run: i, error }]);
            continue;
        }
        t.ok_runs += 1;
        for (a, v) in t.sse.iter_mut().zip(&r.sse) {
            a.add(*v);
        }
        let rmse = r.rmse_all.unwrap_or(f64::NAN);
        t.rmse_run.add(rmse);
        t.rmse_run_sq.add(rmse * rmse);
        t.mse_run.add(rmse * rmse);
        if let Some(d) = &r.divergence {
            t.diverged_runs += 1;
            t.note_divergence(i, d.step, &d.reason);
        }
        for (a, v) in t.nees_step.iter_mut().zip(&r.nees) {
            a.add(*v);
        }
        for (k, (nis, dof)) in r.nis.iter().enumerate() {
            if *dof > 0 {
                t.nis_step[k].add(*nis);
                t.nis_dof_step[k] += u64::from(*dof);
                t.nis_count_step[k] += 1;
            }
        }
        t.log_likelihood.add(r.log_likelihood);
    }
}

/// Most rows per run of a campaign. A campaign keeps every filter's per-step NEES and NIS sums
/// (for the averaged plots and bands) and holds each run's dataset while it runs, so its memory
/// grows with `--steps`; longer runs belong to `simulate` + `compare`, which stream.
pub const MAX_STEPS: u64 = 1_000_000;

/// Memory budget of the finished runs waiting to join the totals (their per-step statistics):
/// the queue is shorter for long runs to stay within it. It never changes a result (the totals
/// are exact sums).
const IN_FLIGHT_BYTES: u64 = 256 << 20;

/// Checks a campaign and returns its empty totals (no run covered yet); every spec is built
/// once so that a bad one is a usage error before any work starts.
pub fn empty_totals(
    plant: &dyn AnyPlant,
    specs: &[FilterSpec],
    campaign: &CampaignSpec,
) -> Result<Totals> {
    if campaign.steps == 0 {
        return Err(Error::Usage("--steps must be at least 1".into()));
    }
    if campaign.steps > MAX_STEPS {
        return Err(Error::Usage(format!(
            "--steps {}: a Monte Carlo run has at most {MAX_STEPS} rows (the campaign keeps \
             per-step statistics of every filter); for longer runs simulate a file with \
             `sightline simulate` and run `sightline compare` on it, which streams",
            campaign.steps
        )));
    }
    if campaign.runs == 0 {
        return Err(Error::Usage("--runs must be at least 1".into()));
    }
    if campaign.every == 0 {
        return Err(Error::Usage("--every must be at least 1".into()));
    }
    if !(0.0..=1.0).contains(&campaign.dropout) {
        return Err(Error::Usage(format!(
            "--dropout must be a probability in [0, 1], got {}",
            campaign.dropout
        )));
    }
    let probe = runner::build_filters(plant, specs, campaign.seed)?;
    let states: Vec<String> = plant.states().into_iter().map(|v| v.name).collect();
    let steps = campaign.steps as usize;
    Ok(Totals {
        format: PARTIAL_FORMAT.into(),
        campaign: campaign.clone(),
        states: states.clone(),
        measurements: plant.measurements().len(),
        shard: None,
        covered: Vec::new(),
        filters: probe
            .iter()
            .map(|f| FilterTotals::new(f.label(), f.kind(), states.len(), steps))
            .collect(),
        pcrlb: (states.len() <= crate::pcrlb::MAX_STATES).then(|| {
            let n = states.len();
            PcrlbTotals {
                prior_cov: plant.prior().1,
                terms: vec![vec![ExactSum::default(); 3 * n * n]; steps],
                runs: 0,
                error: None,
            }
        }),
        settings: None,
        pairs: (0..specs.len())
            .flat_map(|a| (a + 1..specs.len()).map(move |b| (a, b)))
            .map(|(a, b)| PairTotals {
                a,
                b,
                ..PairTotals::default()
            })
            .collect(),
    })
}

/// Runs `range` of the campaign's runs of `plant` with `specs` and returns their totals. A
/// progress bar is drawn on stderr when it is a terminal.
pub fn run_campaign(
    plant: &dyn AnyPlant,
    specs: &[FilterSpec],
    campaign: &CampaignSpec,
    range: Range<u64>,
) -> Result<Totals> {
    let mut totals = empty_totals(plant, specs, campaign)?;
    run_ranges(plant, specs, &[range], &mut totals, &mut |_| Ok(()))?;
    Ok(totals)
}

/// Runs the given ranges of the campaign's runs into `totals` (from [`empty_totals`] or a
/// checkpoint) in parallel; each run joins the totals as soon as it finishes, and `after_run`
/// sees the totals after every run (e.g. to save a checkpoint). On an error — a signal included
/// — no new run starts, the runs that finished are still added to `totals` (and marked covered)
/// and the error is returned, so nothing finished is lost; an interrupt takes precedence over
/// other errors, then the failure of the lowest run. The totals do not depend on the order in
/// which runs finish (exact sums; errors kept by run index).
pub fn run_ranges(
    plant: &dyn AnyPlant,
    specs: &[FilterSpec],
    ranges: &[Range<u64>],
    totals: &mut Totals,
    after_run: &mut dyn FnMut(&Totals) -> Result<()>,
) -> Result<()> {
    let campaign = totals.campaign.clone();
    let with_pcrlb = totals.pcrlb.is_some();
    let count: u64 = ranges.iter().map(|r| r.end.saturating_sub(r.start)).sum();
    let progress = std::io::stderr().is_terminal().then(|| {
        let bar = indicatif::ProgressBar::new(count);
        bar.set_style(
            indicatif::ProgressStyle::with_template(
                "{msg} [{bar:40}] {pos}/{len} runs, {elapsed} elapsed, ~{eta} left",
            )
            .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar())
            .progress_chars("=> "),
        );
        bar.set_message(format!("{} montecarlo", campaign.model));
        bar
    });
    // Finished runs wait in a bounded queue, so memory stays flat however many runs there are
    // (and long runs, whose per-step statistics are large, queue fewer).
    let threads = rayon::current_num_threads().max(1) as u64;
    let per_run = campaign
        .steps
        .saturating_mul(24 * specs.len() as u64 + 200)
        .max(1);
    let queue = (IN_FLIGHT_BYTES / per_run).clamp(1, 2 * threads) as usize;
    let (sender, finished) = std::sync::mpsc::sync_channel::<(u64, Result<RunResult>)>(queue);
    let stop = AtomicBool::new(false);
    let mut failure: Option<(u64, Error)> = None;
    std::thread::scope(|scope| {
        let (stop, campaign) = (&stop, &campaign);
        scope.spawn(move || {
            ranges
                .par_iter()
                .flat_map(|r| r.clone().into_par_iter())
                .for_each_with(sender, |sender, i| {
                    if stop.load(Ordering::Relaxed) || crate::interrupt::requested() {
                        return;
                    }
                    let result = one_run(plant, specs, campaign, i, with_pcrlb);
                    if sender.send((i, result)).is_err() {
                        stop.store(true, Ordering::Relaxed);
                    }
                });
        });
        let keep = |i: u64, e: Error, failure: &mut Option<(u64, Error)>| {
            stop.store(true, Ordering::Relaxed);
            let interrupt = matches!(e, Error::Interrupted(_));
            let replace = match failure {
                None => true,
                Some((j, old)) => {
                    let old_interrupt = matches!(old, Error::Interrupted(_));
                    (interrupt && !old_interrupt) || (interrupt == old_interrupt && i < *j)
                }
            };
            if replace {
                *failure = Some((i, e));
            }
        };
        for (i, result) in finished {
            match result {
                Ok(run) => {
                    add_run(totals, i, run);
                    if let Some(bar) = &progress {
                        bar.inc(1);
                    }
                    if let Err(e) = after_run(totals) {
                        keep(u64::MAX, e, &mut failure);
                    }
                }
                Err(e) => keep(i, e, &mut failure),
            }
        }
    });
    if let Some((_, e)) = failure {
        if let Some(bar) = &progress {
            bar.abandon();
        }
        return Err(e);
    }
    if crate::interrupt::requested() && totals_miss(totals, ranges) {
        // Runs were skipped, not failed: a stop arrived between two runs.
        if let Some(bar) = &progress {
            bar.abandon();
        }
        return Err(Error::Interrupted(format!(
            "{} between two runs",
            crate::interrupt::describe()
        )));
    }
    if let Some(bar) = progress {
        bar.finish_and_clear();
    }
    Ok(())
}

/// Whether some run of `ranges` is not covered by `totals`.
fn totals_miss(totals: &Totals, ranges: &[Range<u64>]) -> bool {
    ranges
        .iter()
        .any(|r| !uncovered(totals, r.clone()).is_empty())
}

/// Sorts disjoint run ranges and joins adjacent ones.
fn join_ranges(covered: &mut Vec<[u64; 2]>) {
    covered.sort();
    let mut joined: Vec<[u64; 2]> = Vec::with_capacity(covered.len());
    for r in covered.drain(..) {
        match joined.last_mut() {
            Some(last) if last[1] == r[0] => last[1] = r[1],
            _ => joined.push(r),
        }
    }
    *covered = joined;
}

/// The runs of `range` that `totals` does not cover yet, as ranges (what a resumed campaign has
/// left to do).
pub fn uncovered(totals: &Totals, range: Range<u64>) -> Vec<Range<u64>> {
    let mut left = Vec::new();
    let mut next = range.start;
    for &[a, b] in &totals.covered {
        if b <= next || a >= range.end {
            continue;
        }
        if a > next {
            left.push(next..a);
        }
        next = next.max(b);
    }
    if next < range.end {
        left.push(next..range.end);
    }
    left
}

/// Adds shard totals into the totals of the whole campaign. The shards must come from the same
/// campaign and cover disjoint runs; the result covers their union.
pub fn merge(parts: Vec<Totals>) -> Result<Totals> {
    merge_named(
        parts
            .into_iter()
            .enumerate()
            .map(|(i, t)| (format!("part {}", i + 1), t))
            .collect(),
    )
}

fn shard_text(s: Option<Shard>) -> String {
    match s {
        Some(s) => format!("shard {s}"),
        None => "an unsharded campaign".into(),
    }
}

/// [`merge`] of totals named (e.g. by their files) for the messages: a different campaign names
/// what differs and describes both; shards of different `--shard` counts, the same shard given
/// twice and otherwise overlapping runs are each reported as such.
pub fn merge_named(parts: Vec<(String, Totals)>) -> Result<Totals> {
    let mut parts = parts.into_iter();
    let Some((first_name, mut total)) = parts.next() else {
        return Err(Error::Usage("merge: no shard given".into()));
    };
    let mut seen: Vec<(String, Option<Shard>, Vec<[u64; 2]>)> =
        vec![(first_name.clone(), total.shard, total.covered.clone())];
    for (name, part) in parts {
        if part.campaign != total.campaign {
            let what = crate::partial::differences(&total.campaign, &part.campaign, true);
            return Err(Error::Usage(format!(
                "merge: {name} comes from a different campaign than {first_name}: they differ in \
                 {} (\"there\" is {first_name}, \"here\" {name}).\n  {first_name}: {}\n  \
                 {name}: {}\nMerge only the shards of one campaign (model, --set, --runs, \
                 --steps, --seed, -f, --every and --dropout the same)",
                what.join(", "),
                crate::partial::describe(&total),
                crate::partial::describe(&part)
            )));
        }
        if part.states != total.states || part.measurements != total.measurements {
            return Err(Error::Usage(format!(
                "merge: {name} and {first_name} describe plants of different shapes (states {} \
                 vs {}, {} vs {} measurement components): the model was changed between them",
                part.states.join(", "),
                total.states.join(", "),
                part.measurements,
                total.measurements
            )));
        }
        for (other, shard, covered) in &seen {
            if let (Some(a), Some(b)) = (shard, part.shard) {
                if a.count != b.count {
                    return Err(Error::Usage(format!(
                        "merge: {other} is {} and {name} is {}: the shards were run with \
                         different --shard counts ({} and {}), so their runs do not fit \
                         together; merge the N shards of one --shard K/N",
                        shard_text(Some(*a)),
                        shard_text(Some(b)),
                        a.count,
                        b.count
                    )));
                }
                if a.index == b.index {
                    return Err(Error::Usage(format!(
                        "merge: {other} and {name} are both {} (the same shard given twice)",
                        shard_text(Some(b))
                    )));
                }
            }
            for [a, b] in &part.covered {
                if let Some([c, d]) = covered.iter().find(|[c, d]| a < d && c < b) {
                    return Err(Error::Usage(format!(
                        "merge: runs {a}..{b} of {name} ({}) overlap runs {c}..{d} of {other} \
                         ({}); every run must come from exactly one of the given directories",
                        shard_text(part.shard),
                        shard_text(*shard)
                    )));
                }
            }
        }
        match (total.pcrlb.as_mut(), &part.pcrlb) {
            (Some(a), Some(b)) if a.prior_cov == b.prior_cov && a.terms.len() == b.terms.len() => {
                a.merge(b)
            }
            (None, None) => {}
            _ => {
                return Err(Error::Usage(format!(
                    "merge: {name} and {first_name} disagree on the Cramér–Rao bound's set-up \
                     (the prior was changed between them)"
                )));
            }
        }
        for (a, b) in total.filters.iter_mut().zip(&part.filters) {
            a.merge(b)?;
        }
        if total.pairs.len() == part.pairs.len() {
            for (a, b) in total.pairs.iter_mut().zip(&part.pairs) {
                a.merge(b);
            }
        } else {
            // A shard written before paired totals existed: no ranking for the merge.
            total.pairs.clear();
        }
        seen.push((name, part.shard, part.covered.clone()));
        total.covered.extend(part.covered.iter().copied());
        join_ranges(&mut total.covered);
    }
    // Totals of several shards belong to no single shard (and neither do their settings).
    if seen.len() > 1 {
        total.set_shard(None);
    }
    Ok(total)
}

/// Runs of the campaign that `totals` does not cover, as `a..b` ranges.
pub fn missing_runs(totals: &Totals) -> Vec<Range<u64>> {
    let mut missing = Vec::new();
    let mut next = 0;
    for [a, b] in &totals.covered {
        if *a > next {
            missing.push(next..*a);
        }
        next = *b;
    }
    if next < totals.campaign.runs {
        missing.push(next..totals.campaign.runs);
    }
    missing
}

/// The M-run average NEES per step (NaN where no run finished).
pub fn average_nees(t: &FilterTotals) -> Vec<f64> {
    t.nees_step
        .iter()
        .map(|s| {
            if t.ok_runs == 0 {
                f64::NAN
            } else {
                s.value() / t.ok_runs as f64
            }
        })
        .collect()
}

/// The average NIS per step over the runs with a measurement there.
pub fn average_nis(t: &FilterTotals) -> Vec<f64> {
    t.nis_step
        .iter()
        .zip(&t.nis_count_step)
        .map(|(s, &c)| {
            if c == 0 {
                f64::NAN
            } else {
                s.value() / c as f64
            }
        })
        .collect()
}

fn filter_summary(totals: &Totals, t: &FilterTotals) -> FilterSummary {
    let n = totals.states.len();
    let steps = totals.campaign.steps as usize;
    let m_runs = t.ok_runs;
    let ok = m_runs > 0;
    let pooled = (m_runs * steps as u64) as f64;
    let rmse = ok.then(|| {
        StateMap(
            totals
                .states
                .iter()
                .zip(&t.sse)
                .map(|(s, e)| (s.clone(), (e.value() / pooled).sqrt()))
                .collect(),
        )
    });
    let mut total_sse = ExactSum::default();
    t.sse.iter().for_each(|e| total_sse.merge(e));
    let rmse_all = (ok && n > 0).then(|| (total_sse.value() / (pooled * n as f64)).sqrt());
    let run_mean = ok.then(|| t.rmse_run.value() / m_runs as f64);
    let spread = (m_runs >= 2).then(|| {
        let s = t.rmse_run.value();
        let s2 = t.rmse_run_sq.value();
        let var = (s2 - s * s / m_runs as f64) / (m_runs - 1) as f64;
        var.max(0.0).sqrt()
    });
    let band = chi2::average_band(n, m_runs as usize);
    let nees_avg = average_nees(t);
    let mut nees_all = ExactSum::default();
    t.nees_step.iter().for_each(|e| nees_all.merge(e));
    let anees = ok.then(|| nees_all.value() / pooled);
    let nees_in_band = match (ok, band) {
        (true, Some(b)) if steps > 0 => {
            Some(nees_avg.iter().filter(|v| b.contains(**v)).count() as f64 / steps as f64)
        }
        _ => None,
    };
    let nis_avg = average_nis(t);
    let mut nis_all = ExactSum::default();
    t.nis_step.iter().for_each(|e| nis_all.merge(e));
    let nis_count: u64 = t.nis_count_step.iter().sum();
    let nis_dof: u64 = t.nis_dof_step.iter().sum();
    let anis = (ok && nis_count > 0).then(|| nis_all.value() / nis_count as f64);
    let mut inside = 0usize;
    let mut judged = 0usize;
    for (k, v) in nis_avg.iter().enumerate() {
        if let Some(b) = chi2::pooled_band(t.nis_dof_step[k] as usize, t.nis_count_step[k] as usize)
        {
            judged += 1;
            if b.contains(*v) {
                inside += 1;
            }
        }
    }
    let nis_in_band = (ok && judged > 0).then(|| inside as f64 / judged as f64);
    // The band of a per-step M-run average with the mean number of components present.
    let anis_band = if ok && steps > 0 {
        chi2::pooled_band((nis_dof / steps as u64) as usize, m_runs as usize)
    } else {
        None
    };
    let error = match t.errors.first() {
        Some(e) if t.failures > 1 => Some(format!(
            "{} (and {} more failed runs)",
            e.error,
            t.failures - 1
        )),
        Some(e) => Some(e.error.clone()),
        None if totals.runs_covered() == 0 => Some(empty_text(totals)),
        None => None,
    };
    FilterSummary {
        label: t.label.clone(),
        kind: t.kind.clone(),
        status: match (ok, t.diverged_runs) {
            (false, _) => Status::Failed,
            (true, 0) => Status::Ok,
            (true, _) => Status::Diverged,
        },
        error,
        rmse_all_ci: if ok && t.mse_run.count == m_runs {
            crate::intervals::campaign_rmse_interval(&t.mse_run)
        } else {
            None
        },
        diverged_at: t.first_divergence.as_ref().map(|(_, step, _)| *step),
        divergence: t
            .first_divergence
            .as_ref()
            .map(|(run, _, reason)| format!("run {run}: {reason}")),
        diverged_runs: Some(t.diverged_runs),
        versus_best: None,
        rmse,
        rmse_all,
        anees,
        nees_in_band,
        anis,
        nis_in_band,
        log_likelihood: ok.then(|| t.log_likelihood.value() / m_runs as f64),
        seconds_per_step: if t.timed_steps > 0 {
            t.seconds.value() / t.timed_steps as f64
        } else {
            0.0
        },
        smoothed_rmse_all: None,
        smoothed_rmse: None,
        smoother: None,
        anees_band: if ok { band.map(|b| b.to_array()) } else { None },
        nees_tails: None,
        anis_band: anis_band.map(|b| b.to_array()),
        whiteness: None,
        diagnostics: t.diagnostics,
        runs: Some(m_runs),
        failures: Some(t.failures),
        rmse_all_spread: spread,
        rmse_all_run_mean: run_mean,
    }
}

/// The paired comparison of filter `i` with the reference `r` over the runs both finished.
fn paired(totals: &Totals, i: usize, r: usize) -> Option<crate::intervals::Paired> {
    let (a, b) = (i.min(r), i.max(r));
    let p = totals.pairs.iter().find(|p| p.a == a && p.b == b)?;
    let count = p.difference.count;
    if count == 0 {
        return None;
    }
    // d = mse_a − mse_b; the comparison wants mse_i − mse_r.
    let (d, reference) = if i == a {
        (p.difference.clone(), p.mse_b.value() / count as f64)
    } else {
        let mut flipped = p.difference.clone();
        flipped.sum = ExactSum::default();
        flipped.sum.add(-p.difference.sum.value());
        (flipped, p.mse_a.value() / count as f64)
    };
    crate::intervals::campaign_paired(&d, reference)
}

/// What an output without runs is: a shard with no run of the campaign in it.
fn empty_text(totals: &Totals) -> String {
    match totals.shard {
        Some(s) => format!(
            "shard {}/{} holds no run of this {}-run campaign (there are more shards than runs)",
            s.index, s.count, totals.campaign.runs
        ),
        None => "this output covers no run of the campaign".to_string(),
    }
}

/// The `summary.json` of a campaign (or of the runs a shard covers).
pub fn summarise(totals: &Totals) -> Summary {
    let mut filters: Vec<FilterSummary> = totals
        .filters
        .iter()
        .map(|t| filter_summary(totals, t))
        .collect();
    let (best, best_by) = if totals.pairs.is_empty() && totals.filters.len() > 1 {
        (Vec::new(), None)
    } else {
        crate::ranking::rank_campaign(&mut filters, &|i, r| paired(totals, i, r))
    };
    let runs = totals.runs_covered();
    let bound = totals
        .pcrlb
        .as_ref()
        .and_then(|p| p.bound(totals.states.len()).ok());
    let verdict = if runs == 0 {
        format!(
            "{}: there is nothing to judge. Merge it with the other shards \
             (`sightline merge DIR... -o DIR`).",
            empty_text(totals)
        )
    } else {
        verdict::verdict(&filters, &best, true, Some(runs), totals.campaign.steps)
    };
    Summary {
        command: "montecarlo".into(),
        model: totals.campaign.model.clone(),
        steps: totals.campaign.steps,
        settings: totals.settings.clone(),
        ignored_columns: Vec::new(),
        truth: true,
        best,
        best_by,
        criteria: summary::criteria(true, true),
        filters,
        verdict,
        runs: Some(runs),
        pcrlb_rmse_all: Some(bound.as_ref().map(|b| b.rmse_all)),
        pcrlb_rmse: Some(
            bound.map(|b| StateMap(totals.states.iter().cloned().zip(b.rmse).collect())),
        ),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn runs_left_to_do_are_the_gaps_in_the_covered_ranges() {
        let mut covered = vec![[5, 6], [0, 2], [2, 3], [8, 10]];
        join_ranges(&mut covered);
        assert_eq!(covered, vec![[0, 3], [5, 6], [8, 10]]);
        let totals = Totals {
            format: PARTIAL_FORMAT.into(),
            campaign: CampaignSpec {
                model: "m".into(),
                set: Vec::new(),
                runs: 12,
                steps: 1,
                seed: 0,
                filters: Vec::new(),
                every: 1,
                dropout: 0.0,
                diffuse: Vec::new(),
            },
            states: Vec::new(),
            measurements: 0,
            shard: None,
            covered,
            filters: Vec::new(),
            pcrlb: None,
            settings: None,
            pairs: Vec::new(),
        };
        assert_eq!(uncovered(&totals, 0..12), vec![3..5, 6..8, 10..12]);
        assert_eq!(uncovered(&totals, 2..9), vec![3..5, 6..8]);
        assert_eq!(uncovered(&totals, 0..3), Vec::<Range<u64>>::new());
    }

    #[test]
    fn shards_partition_the_runs() {
        for runs in [0u64, 1, 7, 100, 101] {
            for count in 1..=9u64 {
                let mut next = 0;
                for index in 1..=count {
                    let r = Shard { index, count }.range(runs);
                    assert_eq!(r.start, next);
                    next = r.end;
                }
                assert_eq!(next, runs);
            }
        }
    }
}
