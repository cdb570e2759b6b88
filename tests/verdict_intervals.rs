//! Is a difference between filters real, and did anything blow up? The intervals on accuracy,
//! the paired `best` groups, divergence as a status and option sweeps, checked against closed
//! forms.
//!
//! The reference for the coverage checks is exact: on a linear-Gaussian plant whose initial
//! state is drawn from the prior, the Kalman filter's covariance P(k) is the covariance of its
//! error (Anderson & Moore, *Optimal Filtering*, 1979, §3.1), so the expected mean squared
//! error of a run is (1/N)·Σₖ tr P(k)/n and the expected `rmse_all` is its square root. The EKF
//! on the linear `cv` plant is that Kalman filter.

use sightline::core::nalgebra::{Matrix1, U1, Vector1};
use sightline::eval::campaign::{self, CampaignSpec};
use sightline::eval::commands::compare::summarise;
use sightline::eval::dataset::read::MemorySource;
use sightline::eval::intervals;
use sightline::eval::metrics::StepMetrics;
use sightline::eval::runner::{self, Observer, RunConfig};
use sightline::eval::simulate::SimOptions;
use sightline::eval::summary::Status;
use sightline::filters::Filter;
use sightline::prelude::*;
use sightline::{AnyPlant, FilterSpec, Gaussian, Model, Real, shipped};

fn cv() -> Box<dyn AnyPlant> {
    shipped()
        .into_iter()
        .find(|p| p.name() == "cv")
        .expect("the cv plant is shipped")
}

/// Σₖ tr P(k) of filter 0, from its posterior standard deviations.
struct TraceSum(f64);

impl Observer for TraceSum {
    fn filter_step(
        &mut self,
        _k: u64,
        _t: f64,
        index: usize,
        _filter: &dyn Filter,
        sd: &[f64],
        _step: &StepMetrics,
    ) -> sightline::eval::Result<()> {
        if index == 0 {
            self.0 += sd.iter().map(|s| s * s).sum::<f64>();
        }
        Ok(())
    }
}

fn specs(texts: &[&str]) -> Vec<FilterSpec> {
    texts
        .iter()
        .map(|s| FilterSpec::parse(s).unwrap())
        .collect()
}

/// Runs `filters` of `plant` over `data` without plot series, handing the steps to `observer`.
fn run(
    plant: &dyn AnyPlant,
    filters: Vec<Box<dyn Filter>>,
    data: &sightline::eval::dataset::Dataset,
    observer: &mut dyn Observer,
) -> runner::RunOutcome {
    let config = RunConfig {
        series_points: 0,
        ..RunConfig::default()
    };
    runner::run(
        plant,
        filters,
        &mut MemorySource::new(data),
        &config,
        observer,
    )
    .unwrap()
}

/// √((1/N)·Σₖ tr P(k)/n) of the EKF on `data`: the exact expected `rmse_all` on a linear plant.
fn expected_rmse(
    plant: &dyn AnyPlant,
    data: &sightline::eval::dataset::Dataset,
) -> (f64, runner::RunOutcome) {
    let filters = runner::build_filters(plant, &specs(&["ekf"]), 0).unwrap();
    let mut trace = TraceSum(0.0);
    let outcome = run(plant, filters, data, &mut trace);
    let per = data.records.len() as f64 * plant.states().len() as f64;
    ((trace.0 / per).sqrt(), outcome)
}

#[test]
fn the_single_run_interval_covers_the_exact_expected_rmse() {
    let plant = cv();
    let (datasets, steps) = (150u64, 400usize);
    let mut covered = 0;
    for seed in 0..datasets {
        let data = plant
            .simulate(steps, 1000 + seed, &SimOptions::default())
            .unwrap();
        let (expected, outcome) = expected_rmse(plant.as_ref(), &data);
        let summary = summarise(plant.as_ref(), &outcome);
        let [lo, hi] = summary.filters[0].rmse_all_ci.expect("an interval");
        let rmse = summary.filters[0].rmse_all.unwrap();
        assert!(lo <= rmse && rmse <= hi, "[{lo}, {hi}] ∌ {rmse}");
        if lo <= expected && expected <= hi {
            covered += 1;
        }
    }
    let share = covered as f64 / datasets as f64;
    eprintln!("single-run coverage: {covered} of {datasets}");
    assert!(
        (0.90..=0.99).contains(&share),
        "the 95 % interval covered the exact expected RMSE in {share} of {datasets} runs"
    );
}

#[test]
fn the_campaign_interval_covers_the_exact_expected_rmse() {
    let plant = cv();
    let (campaigns, runs, steps) = (120u64, 12u64, 40usize);
    // P(k) of a linear filter does not depend on the data: one run gives it for all.
    let data = plant.simulate(steps, 1, &SimOptions::default()).unwrap();
    let (expected, _) = expected_rmse(plant.as_ref(), &data);
    let mut covered = 0;
    for c in 0..campaigns {
        let spec = CampaignSpec {
            model: "cv".into(),
            set: Vec::new(),
            runs,
            steps: steps as u64,
            seed: 77 + c,
            filters: vec!["ekf".into()],
            every: 1,
            dropout: 0.0,
            diffuse: Vec::new(),
        };
        let totals =
            campaign::run_campaign(plant.as_ref(), &specs(&["ekf"]), &spec, 0..runs).unwrap();
        let summary = campaign::summarise(&totals);
        let [lo, hi] = summary.filters[0].rmse_all_ci.expect("an interval");
        if lo <= expected && expected <= hi {
            covered += 1;
        }
    }
    let share = covered as f64 / campaigns as f64;
    eprintln!("campaign coverage: {covered} of {campaigns}");
    assert!(
        (0.90..=0.99).contains(&share),
        "the campaign's 95 % interval covered the exact expected RMSE in {share} of {campaigns}"
    );
}

#[test]
fn identical_filters_tie_and_a_filter_with_noise_wrong_by_100_is_excluded() {
    let plant = cv();
    let mut wrong = plant.clone_box();
    let q = plant
        .parameters()
        .iter()
        .find(|p| p.name == "q")
        .map(|p| p.value)
        .unwrap();
    wrong.set("q", 100.0 * q).unwrap();
    let data = plant.simulate(600, 5, &SimOptions::default()).unwrap();
    let mut copy = FilterSpec::parse("ekf").unwrap();
    copy.label = "ekf (copy)".into();
    let mut filters =
        runner::build_filters(plant.as_ref(), &specs(&["ekf", "ukf", "ckf"]), 0).unwrap();
    filters.push(plant.build_filter(&copy, 0).unwrap());
    let mut bad = FilterSpec::parse("iekf").unwrap();
    bad.label = "ekf, q × 100".into();
    filters.push(wrong.build_filter(&bad, 0).unwrap());
    let outcome = run(plant.as_ref(), filters, &data, &mut runner::NoObserver);
    let summary = summarise(plant.as_ref(), &outcome);
    let mut best = summary.best.clone();
    best.sort();
    assert_eq!(
        best,
        ["ckf", "ekf", "ekf (copy)", "ukf"],
        "{}",
        summary.verdict
    );
    assert_eq!(summary.best_by.as_deref(), Some("rmse_all"));
    // Bitwise the same estimates: an exact tie, without resampling.
    let (ekf, copy) = (&outcome.filters[0].metrics, &outcome.filters[3].metrics);
    let p = intervals::paired_rmse(&copy.squared_errors, &ekf.squared_errors).unwrap();
    assert!(
        p.tied && p.difference == 0.0 && p.interval == [0.0, 0.0],
        "{p:?}"
    );
    assert_eq!(
        summary.filters[0].versus_best,
        summary.filters[3].versus_best
    );
    let bad = summary
        .filters
        .iter()
        .find(|f| f.label == "ekf, q × 100")
        .unwrap();
    let vs = bad.versus_best.as_ref().unwrap();
    assert!(!vs.tied && vs.interval[0] > 0.0, "{vs:?}");
    assert!(
        summary
            .verdict
            .contains("are equally accurate here (paired, 95 %"),
        "{}",
        summary.verdict
    );
    assert!(
        summary.verdict.contains("ekf, q × 100 is"),
        "{}",
        summary.verdict
    );
}

#[test]
fn without_truth_the_log_likelihood_ranks_with_its_own_interval() {
    let plant = cv();
    let mut data = plant.simulate(500, 8, &SimOptions::default()).unwrap();
    data.layout.states.clear();
    for r in &mut data.records {
        r.x = None;
    }
    let mut wrong = plant.clone_box();
    let r = plant
        .parameters()
        .iter()
        .find(|p| p.name == "r")
        .map(|p| p.value)
        .unwrap();
    wrong.set("r", 100.0 * r).unwrap();
    let mut filters = runner::build_filters(plant.as_ref(), &specs(&["ekf", "ukf"]), 0).unwrap();
    let mut bad = FilterSpec::parse("ckf").unwrap();
    bad.label = "ckf, r × 100".into();
    filters.push(wrong.build_filter(&bad, 0).unwrap());
    let outcome = run(plant.as_ref(), filters, &data, &mut runner::NoObserver);
    let summary = summarise(plant.as_ref(), &outcome);
    assert_eq!(summary.best_by.as_deref(), Some("log_likelihood"));
    let mut best = summary.best.clone();
    best.sort();
    assert_eq!(best, ["ekf", "ukf"], "{}", summary.verdict);
    let vs = summary.filters[2].versus_best.as_ref().unwrap();
    assert!(!vs.tied && vs.interval[1] < 0.0, "{vs:?}");
    assert!(summary.filters[0].rmse_all_ci.is_none());
}

/// x(k+1) = 2·sin x(k) + w, y = x² + v, x(0) ~ N(0, 1): the sensor's slope 2x vanishes at the
/// prior mean, so the EKF never updates and, linearised at 0 where f'(0) = 2, its variance grows
/// fourfold each step, while the truth stays within ±2.2 (|2 sin x| ≤ 2).
#[derive(Debug, Clone, Parameters)]
struct BlindAtZero;

impl Model for BlindAtZero {
    type State = U1;
    type Meas = U1;
    fn declare(&self) -> Declaration {
        Declaration::new("blind-at-zero", 1.0)
            .state("x", "-", 0.0, 1.0)
            .measurement("y", "-")
    }
    fn transition<S: Real>(&self, x: &Vector1<S>, _u: &[f64], _t: f64, _dt: f64) -> Vector1<S> {
        Vector1::new(x[0].sin() * 2.0)
    }
    fn measure<S: Real>(&self, x: &Vector1<S>, _u: &[f64], _t: f64) -> Vector1<S> {
        Vector1::new(x[0] * x[0])
    }
    fn process_noise(&self, _x: &Vector1<f64>, _u: &[f64], _t: f64, _dt: f64) -> Matrix1<f64> {
        Matrix1::new(0.01)
    }
    fn measurement_noise(&self, _t: f64) -> Matrix1<f64> {
        Matrix1::new(0.01)
    }
    fn prior(&self) -> Gaussian<U1> {
        Gaussian::new(Vector1::new(0.0), Matrix1::new(1.0))
    }
}

#[test]
fn an_ekf_blind_at_its_prior_mean_diverges_and_is_dated_named_and_clipped() {
    let plant = sightline::plant(BlindAtZero);
    let data = plant.simulate(60, 3, &SimOptions::default()).unwrap();
    let filters = runner::build_filters(plant.as_ref(), &specs(&["ekf", "ukf"]), 0).unwrap();
    let outcome = runner::run(
        plant.as_ref(),
        filters,
        &mut MemorySource::new(&data),
        &RunConfig::default(),
        &mut runner::NoObserver,
    )
    .unwrap();
    let summary = summarise(plant.as_ref(), &outcome);
    let ekf = &summary.filters[0];
    assert_eq!(ekf.status, Status::Diverged, "{}", summary.verdict);
    // P(k) = 4ᵏ·P(0) + Q·(4ᵏ − 1)/3 passes 10⁶ × the scale² (prior variance 1, or the truth's
    // range² ≤ 4.4² ≈ 19) between k = 10 and k = 13; the run of ten steps begins there.
    let at = ekf.diverged_at.unwrap();
    assert!((10..=13).contains(&at), "diverged at {at}");
    assert_eq!(summary.filters[1].status, Status::Ok);
    assert!(!summary.best.contains(&"ekf".to_string()));
    assert!(
        summary.verdict.starts_with(&format!(
            "ekf diverged at step {at}: the posterior variance of x"
        )),
        "{}",
        summary.verdict
    );
    // The report's axes come from the truth and the filters that did not diverge.
    let series = outcome.series.as_ref().unwrap();
    let plots = sightline::eval::report::compare_plots(
        &summary,
        series,
        &plant.states(),
        &plant.measurements(),
        &sightline::eval::dataset::time::Clock::default(),
    );
    let state = plots
        .iter()
        .find_map(|p| match p {
            sightline::eval::report::Plot::Lines(l) if l.id.starts_with("state-") => Some(l),
            _ => None,
        })
        .expect("a state plot");
    let (lo, hi) = state.y_range.expect("a set y range");
    assert!(lo > -100.0 && hi < 100.0, "y range [{lo}, {hi}]");
    assert!(
        !state.clipped.is_empty(),
        "the diverged curve carries a marker"
    );
}

#[test]
fn a_sweep_expands_in_order_and_its_pareto_front_is_known() {
    let plant = cv();
    let parsed = runner::parse_specs(
        plant.as_ref(),
        &["ukf".into(), "pf:particles=50|400|100".into()],
    )
    .unwrap();
    let labels: Vec<&str> = parsed.iter().map(|s| s.label.as_str()).collect();
    assert_eq!(
        labels,
        [
            "ukf",
            "pf:particles=50",
            "pf:particles=400",
            "pf:particles=100"
        ]
    );
    // A front on made-up points where it is known by inspection: (cost, error) pairs, lower is
    // better for both; (2, 5) and (3, 4) are dominated by (1, 4).
    let points = [(1.0, 4.0), (2.0, 5.0), (3.0, 4.0), (4.0, 1.0), (0.5, 9.0)];
    assert_eq!(
        sightline::eval::report::pareto_front(&points),
        [true, false, false, true, true]
    );
}
