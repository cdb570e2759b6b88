//! The textbook consistency test of a Monte Carlo campaign (Bar-Shalom, Li & Kirubarajan,
//! *Estimation with Applications to Tracking and Navigation*, Wiley 2001, §5.4.2): on a
//! linear-Gaussian plant the Kalman filter is exact, so its ANEES over M runs lies in the
//! two-sided 95 % band χ²(M·n)/M and about 95 % of the steps' M-run average NEES fall inside
//! that band. A filter given ten times the true process noise must fail the same test.

use sightline_eval::campaign::{CampaignSpec, run_campaign, summarise};
use sightline_eval::commands::compare::{CompareOptions, compare};
use sightline_eval::dataset::read::MemorySource;
use sightline_eval::simulate::SimOptions;
use sightline_eval::{chi2, shipped};
use sightline_filters::FilterSpec;

const RUNS: u64 = 200;
const STEPS: u64 = 300;

#[test]
fn kalman_filter_anees_is_inside_its_band_on_cv() {
    let plants = shipped();
    let cv = plants.iter().find(|p| p.name() == "cv").unwrap();
    let specs = vec![FilterSpec::parse("kf").unwrap()];
    let campaign = CampaignSpec {
        model: "cv".into(),
        set: Vec::new(),
        runs: RUNS,
        steps: STEPS,
        seed: 42,
        filters: vec!["kf".into()],
        every: 1,
        dropout: 0.0,
        diffuse: Vec::new(),
    };
    let totals = run_campaign(cv.as_ref(), &specs, &campaign, 0..RUNS).unwrap();
    let summary = summarise(&totals);
    let kf = &summary.filters[0];
    assert_eq!(kf.runs, Some(RUNS));
    assert_eq!(kf.failures, Some(0));
    let [lo, hi] = kf.anees_band.unwrap();
    // χ²(400)/200 band: about [1.73, 2.28] (closed-form normal approximation 2 ± 1.96·√(4/200)).
    assert!(
        (lo - 1.73).abs() < 0.02 && (hi - 2.28).abs() < 0.02,
        "[{lo}, {hi}]"
    );
    let anees = kf.anees.unwrap();
    assert!(
        lo <= anees && anees <= hi,
        "ANEES {anees} outside [{lo}, {hi}]"
    );
    // "About 95 %" of the steps: with 300 steps the binomial standard deviation is 1.3 %, and
    // neighbouring steps are correlated, so ±5 % (common practice for such a check).
    let share = kf.nees_in_band.unwrap();
    assert!(
        (0.90..=1.0).contains(&share),
        "share of steps in band {share}"
    );
    let nis_share = kf.nis_in_band.unwrap();
    assert!((0.90..=1.0).contains(&nis_share), "NIS share {nis_share}");
    let [nlo, nhi] = kf.anis_band.unwrap();
    let anis = kf.anis.unwrap();
    assert!(
        nlo <= anis && anis <= nhi,
        "ANIS {anis} outside [{nlo}, {nhi}]"
    );
}

#[test]
fn a_kalman_filter_with_ten_times_the_process_noise_is_under_confident() {
    let plants = shipped();
    let truth = plants.iter().find(|p| p.name() == "cv").unwrap();
    let mut mistuned = truth.clone_box();
    mistuned.set("q", 5.0).unwrap(); // the default is 0.5
    let specs = vec![FilterSpec::parse("kf").unwrap()];
    let mut nees_sum = 0.0;
    let mut count = 0.0;
    for i in 0..50 {
        let data = truth
            .simulate(STEPS as usize, i, &SimOptions::default())
            .unwrap();
        let result = compare(
            mistuned.as_ref(),
            &specs,
            &mut MemorySource::new(&data),
            &CompareOptions::default(),
            None,
        )
        .unwrap();
        nees_sum += result.summary.filters[0].anees.unwrap() * STEPS as f64;
        count += STEPS as f64;
    }
    let anees = nees_sum / count;
    let band = chi2::average_band(2, 50).unwrap();
    assert!(
        anees < band.lo,
        "ANEES {anees} should fall below {}",
        band.lo
    );
}

/// Run i of a campaign is reproduced alone by simulating with its run seed and comparing with
/// the same seed (the reproducibility promise of `montecarlo`; common practice for seeded
/// campaigns). The particle filter checks that the filters' streams follow the seed too.
#[test]
fn one_run_of_a_campaign_reproduces_alone() {
    use sightline_eval::campaign::{Shard, run_seed};
    let plants = shipped();
    let cv = plants.iter().find(|p| p.name() == "cv").unwrap();
    let labels = ["kf", "pf:particles=300"];
    let specs: Vec<FilterSpec> = labels
        .iter()
        .map(|s| FilterSpec::parse(s).unwrap())
        .collect();
    let campaign = CampaignSpec {
        model: "cv".into(),
        set: Vec::new(),
        runs: 3,
        steps: 80,
        seed: 99,
        filters: labels.iter().map(|s| s.to_string()).collect(),
        every: 1,
        dropout: 0.0,
        diffuse: Vec::new(),
    };
    // Shard 2/3 of 3 runs is run 1 alone.
    let range = Shard { index: 2, count: 3 }.range(3);
    assert_eq!(range, 1..2);
    let totals = run_campaign(cv.as_ref(), &specs, &campaign, range).unwrap();
    let from_campaign = summarise(&totals);
    let seed = run_seed(99, 1);
    let data = cv.simulate(80, seed, &SimOptions::default()).unwrap();
    let options = CompareOptions {
        seed,
        ..CompareOptions::default()
    };
    let alone = compare(
        cv.as_ref(),
        &specs,
        &mut MemorySource::new(&data),
        &options,
        None,
    )
    .unwrap();
    for (a, b) in from_campaign.filters.iter().zip(&alone.summary.filters) {
        let (x, y) = (a.rmse_all.unwrap(), b.rmse_all.unwrap());
        // Equal up to the order of the floating-point sums (exact vs running).
        assert!((x - y).abs() <= 1e-12 * y, "{}: {x} vs {y}", a.label);
        let (x, y) = (a.log_likelihood.unwrap(), b.log_likelihood.unwrap());
        assert!((x - y).abs() <= 1e-9 * y.abs(), "{}: {x} vs {y}", a.label);
    }
}
