//! Particle filter and ensemble Kalman filter against the world outside the project.
//!
//! - On the linear-Gaussian `cv` plant the Kalman filter is the exact posterior, so the sampling
//!   filters' means must converge to it at the Monte Carlo rate 1/√N (Crisan & Doucet, IEEE TSP
//!   50(3), 2002; Del Moral, *Feynman–Kac Formulae*, 2004, ch. 9) and the PF log-likelihood must
//!   match the KF's exact one.
//! - On `ungm` the posterior is bimodal: the published comparisons (Gordon, Salmond & Smith 1993;
//!   Arulampalam et al., IEEE TSP 50(2), 2002) show the bootstrap filter far ahead of the EKF.
//! - Output is bit-identical for 1, 2 and 16 threads and reproducible from the seed (also on
//!   the lane path, `lanes=on`).

use sightline::eval::dataset::Dataset;
use sightline::eval::simulate::SimOptions;
use sightline::filters::{Filter, FilterError};
use sightline::{AnyPlant, FilterSpec, shipped};

fn plant(name: &str) -> Box<dyn AnyPlant> {
    shipped().into_iter().find(|p| p.name() == name).unwrap()
}

/// Everything a filter reports over one dataset.
#[derive(Debug, Clone, PartialEq)]
struct Trace {
    means: Vec<Vec<f64>>,
    covariances: Vec<Vec<f64>>,
    log_likelihood: f64,
    nis: Vec<f64>,
    resamples: u64,
    redraws: u64,
}

fn run(plant: &dyn AnyPlant, data: &Dataset, spec: &str, seed: u64) -> Result<Trace, FilterError> {
    let mut filter = plant
        .build_filter(&FilterSpec::parse(spec).unwrap(), seed)
        .unwrap();
    run_filter(filter.as_mut(), data)
}

fn run_filter(filter: &mut dyn Filter, data: &Dataset) -> Result<Trace, FilterError> {
    let mut trace = Trace {
        means: Vec::new(),
        covariances: Vec::new(),
        log_likelihood: 0.0,
        nis: Vec::new(),
        resamples: 0,
        redraws: 0,
    };
    let mut previous: Option<(f64, &[f64])> = None;
    for r in &data.records {
        if let Some((t0, u0)) = previous {
            filter.predict(u0, t0, r.t - t0)?;
        }
        filter.update(&r.y, &r.u, r.t)?;
        trace.means.push(filter.mean().to_vec());
        trace.covariances.push(filter.covariance().to_vec());
        trace.log_likelihood += filter.log_likelihood_increment();
        trace
            .nis
            .push(filter.innovation().map_or(f64::NAN, |i| i.nis));
        previous = Some((r.t, &r.u));
    }
    let d = filter.diagnostics();
    trace.resamples = d.resamples;
    trace.redraws = d.redraws;
    Ok(trace)
}

/// Squared gaps between `trace`'s means and the reference means, in reference posterior standard
/// deviations, summed over steps and states; with the number of terms.
fn squared_gap(trace: &Trace, reference: &Trace) -> (f64, usize) {
    let mut sum = 0.0;
    let mut terms = 0;
    for (k, (m, r)) in trace.means.iter().zip(&reference.means).enumerate() {
        let n = r.len();
        for j in 0..n {
            let sd = reference.covariances[k][j * n + j].sqrt();
            sum += ((m[j] - r[j]) / sd).powi(2);
            terms += 1;
        }
    }
    (sum, terms)
}

fn rms_gap(trace: &Trace, reference: &Trace) -> f64 {
    let (sum, terms) = squared_gap(trace, reference);
    (sum / terms as f64).sqrt()
}

fn mean(values: &[f64]) -> f64 {
    values.iter().sum::<f64>() / values.len() as f64
}

#[test]
fn pf_and_enkf_track_the_kalman_filter_on_cv() {
    // On a linear-Gaussian plant the KF gives the exact posterior and likelihood (Kalman 1960),
    // so the sampling filters are checked against it. Three datasets of 200 steps, pooled.
    // Tolerances: the gaps are the (0.05 sd for the PF at N = 20,000, 0.1 for the EnKF at
    // N = 2,000); the measured values are 0.013–0.027 (PF), 0.014–0.026 (auxiliary PF) and
    // 0.030–0.041 (EnKF) over six filter seeds. The log-likelihood error of the PF is the error
    // of an unbiased likelihood estimate, sd ≈ 0.15 over 200 steps at N = 20,000 (measured over
    // six filter seeds; EnKF ≈ 0.3), so the bounds are five of those sds.
    let cv = plant("cv");
    let cases = [
        ("pf:particles=20000", 0.05, 0.75, 0.02),
        ("pf:particles=20000,variant=auxiliary", 0.05, 0.75, 0.02),
        ("enkf:members=2000", 0.1, 1.5, 0.03),
    ];
    let mut pooled = vec![(0.0, 0); cases.len()];
    for dataset in [11, 12, 13] {
        let data = cv.simulate(200, dataset, &SimOptions::default()).unwrap();
        let kf = run(cv.as_ref(), &data, "kf", 0).unwrap();
        for (c, &(spec, _, loglik_tol, nis_tol)) in cases.iter().enumerate() {
            let t = run(cv.as_ref(), &data, spec, 1).unwrap();
            let (sum, terms) = squared_gap(&t, &kf);
            pooled[c].0 += sum;
            pooled[c].1 += terms;
            let dll = t.log_likelihood - kf.log_likelihood;
            assert!(
                dll.abs() <= loglik_tol,
                "{spec} on dataset {dataset}: log-likelihood {} vs KF {}",
                t.log_likelihood,
                kf.log_likelihood
            );
            // The innovation covariance S of the sampling filters estimates the KF's.
            let dnis = mean(&t.nis) - mean(&kf.nis);
            assert!(
                dnis.abs() <= nis_tol,
                "{spec}: mean NIS differs from the KF's by {dnis}"
            );
        }
    }
    for (c, &(spec, gap_tol, _, _)) in cases.iter().enumerate() {
        let gap = (pooled[c].0 / pooled[c].1 as f64).sqrt();
        eprintln!("{spec}: RMS gap to the KF mean {gap:.4} posterior sd");
        assert!(
            gap <= gap_tol,
            "{spec}: RMS gap {gap} > {gap_tol} posterior sd"
        );
    }
}

#[test]
fn pf_gap_to_the_kf_shrinks_like_one_over_root_n() {
    // The Monte Carlo error of the particle mean is O(N^(-1/2)) (Crisan & Doucet 2002; Del Moral
    // 2004, ch. 9): log(gap) vs log(N) has slope −1/2. The fit is least squares with one
    // intercept per dataset (the datasets differ in difficulty; all share the N values), i.e. the
    // mean over 12 datasets of each dataset's slope. Measured per-dataset slopes have sd ≈ 0.07,
    // so the mean's standard error is ≈ 0.02; N = 10³ sits slightly before the asymptotic regime
    // when the first measurement conflicts with the prior (measured mean slope −0.53). The bound
    // ±0.1 is about four standard errors beyond that.
    let cv = plant("cv");
    let sizes = [1_000usize, 10_000, 100_000];
    let x: Vec<f64> = sizes.iter().map(|&n| (n as f64).ln()).collect();
    let x_mean = mean(&x);
    let sxx: f64 = x.iter().map(|v| (v - x_mean).powi(2)).sum();
    let mut slopes = Vec::new();
    let mut gaps = vec![0.0; sizes.len()];
    let datasets = 12;
    for d in 0..datasets {
        let data = cv.simulate(50, 100 + d, &SimOptions::default()).unwrap();
        let kf = run(cv.as_ref(), &data, "kf", 0).unwrap();
        let y: Vec<f64> = sizes
            .iter()
            .map(|n| {
                let t = run(cv.as_ref(), &data, &format!("pf:particles={n}"), 7 + d).unwrap();
                rms_gap(&t, &kf).ln()
            })
            .collect();
        let y_mean = mean(&y);
        let sxy: f64 = x
            .iter()
            .zip(&y)
            .map(|(a, b)| (a - x_mean) * (b - y_mean))
            .sum();
        slopes.push(sxy / sxx);
        for (g, v) in gaps.iter_mut().zip(&y) {
            *g += v.exp() / datasets as f64;
        }
    }
    let slope = mean(&slopes);
    eprintln!("mean gap at N = {sizes:?}: {gaps:?}; log-log slope {slope:.3}");
    assert!(
        (slope + 0.5).abs() <= 0.1,
        "log-log slope {slope}, expected −0.5"
    );
}

#[test]
fn pf_beats_the_ekf_on_the_growth_model() {
    // The univariate nonstationary growth model (Kitagawa 1996; Gordon, Salmond & Smith 1993,
    // §4) has a bimodal posterior that defeats the EKF. Published Monte Carlo comparisons —
    // Gordon et al. 1993 (50 steps) and Arulampalam, Maskell, Gordon & Clapp, IEEE TSP 50(2),
    // 2002, §VI — report, from memory and approximately, an RMSE near 5 for the bootstrap filter
    // and several times that (above 15) for the EKF. We check the same ordering on 50 runs of 50
    // steps: PF RMSE below a third of the EKF's, PF within [3, 6.5] (the recalled ~5 widened by
    // the campaign-to-campaign spread: 4.2–4.9 measured over three independent 50-run campaigns)
    // and EKF above 12 (measured 19.8–26.0).
    let ungm = plant("ungm");
    let specs = [
        "ekf",
        "pf:particles=1000",
        "pf:particles=1000,variant=auxiliary",
    ];
    let mut squared = [0.0; 3];
    let mut count = 0;
    for r in 0..50 {
        let data = ungm.simulate(50, 1000 + r, &SimOptions::default()).unwrap();
        for (f, spec) in specs.iter().enumerate() {
            let t = run(ungm.as_ref(), &data, spec, r).unwrap();
            for (m, rec) in t.means.iter().zip(&data.records) {
                squared[f] += (m[0] - rec.x.as_ref().unwrap()[0]).powi(2);
            }
        }
        count += data.records.len();
    }
    let rmse = squared.map(|s| (s / count as f64).sqrt());
    eprintln!(
        "ungm RMSE: ekf {:.2}, pf {:.2}, auxiliary pf {:.2}",
        rmse[0], rmse[1], rmse[2]
    );
    assert!(rmse[0] > 12.0, "EKF RMSE {}", rmse[0]);
    assert!(rmse[1] < rmse[0] / 3.0, "PF {} vs EKF {}", rmse[1], rmse[0]);
    assert!((3.0..=6.5).contains(&rmse[1]), "PF RMSE {}", rmse[1]);
    // With Q = 10 a single look-ahead point describes p(x(k) | x(k−1)) poorly, so the
    // auxiliary filter is no better than the bootstrap one here (Arulampalam et al. 2002, §V.B,
    // from memory) — but still far ahead of the EKF.
    assert!(
        rmse[2] < rmse[0] / 2.0,
        "auxiliary PF {} vs EKF {}",
        rmse[2],
        rmse[0]
    );
}

/// Bit patterns of everything a trace holds, so NaN compares equal to NaN.
fn bits(trace: &Trace) -> Vec<u64> {
    let mut out: Vec<u64> = Vec::new();
    for (m, c) in trace.means.iter().zip(&trace.covariances) {
        out.extend(m.iter().chain(c).map(|v| v.to_bits()));
    }
    out.extend(trace.nis.iter().map(|v| v.to_bits()));
    out.push(trace.log_likelihood.to_bits());
    out.push(trace.resamples);
    out.push(trace.redraws);
    out
}

#[test]
fn output_is_identical_for_any_thread_count_and_reproducible_from_the_seed() {
    // Random streams are split per (seed, step, block of 1024) and reductions combine block
    // partials in block order, so 1, 2 and 16 threads give the same bits (common practice for
    // reproducible parallel Monte Carlo). 5,000 particles = 5 blocks, the last one partial.
    let cases = [
        ("cv", "pf:particles=5000,roughening=0.2"),
        ("cv", "pf:particles=5000,temper=0.9"),
        (
            "cv",
            "pf:particles=5000,ess=1,resample=multinomial,regularise=on",
        ),
        (
            "ungm",
            "pf:particles=5000,resample=residual,variant=auxiliary",
        ),
        ("ungm", "pf:particles=5000,resample=stratified,noise=each"),
        ("cv", "enkf:members=5000,inflation=1.02"),
        ("ungm", "enkf:members=3000"),
        // The lane path groups four particles within a block; 5,001: a short last group.
        ("pendulum", "pf:particles=5001,lanes=on"),
        (
            "ungm",
            "pf:particles=5001,lanes=on,noise=each,roughening=0.2",
        ),
        ("tracking", "pf:particles=5001,lanes=on"),
        ("cstr", "enkf:members=3001,lanes=on"),
    ];
    let pools: Vec<rayon::ThreadPool> = [1, 2, 16]
        .iter()
        .map(|&n| {
            rayon::ThreadPoolBuilder::new()
                .num_threads(n)
                .build()
                .unwrap()
        })
        .collect();
    for (model, spec) in cases {
        let plant = plant(model);
        let options = SimOptions {
            dropout: 0.1,
            ..SimOptions::default()
        };
        let data = plant.simulate(30, 5, &options).unwrap();
        let outputs: Vec<Vec<u64>> = pools
            .iter()
            .map(|pool| pool.install(|| bits(&run(plant.as_ref(), &data, spec, 42).unwrap())))
            .collect();
        assert!(outputs[0] == outputs[1], "{spec}: 1 vs 2 threads differ");
        assert!(outputs[0] == outputs[2], "{spec}: 1 vs 16 threads differ");
        // Same seed, same bits; another seed, another cloud.
        let again = bits(&run(plant.as_ref(), &data, spec, 42).unwrap());
        assert!(
            again == outputs[0],
            "{spec}: not reproducible from its seed"
        );
        let other = run(plant.as_ref(), &data, spec, 43).unwrap();
        assert!(bits(&other) != outputs[0], "{spec}: the seed has no effect");
    }
}

#[test]
fn collapse_is_a_typed_error_or_a_counted_redraw() {
    // A measurement 1e200 away makes every log-likelihood −∞: every weight vanishes.
    let cv = plant("cv");
    let mut data = cv.simulate(40, 21, &SimOptions::default()).unwrap();
    data.records[10].y[0] = 1e200;
    let e = run(cv.as_ref(), &data, "pf:particles=2000", 3).unwrap_err();
    assert!(
        matches!(e, FilterError::Collapse { step: 10, .. }),
        "expected a collapse at step 10, got {e:?}"
    );
    let message = e.to_string();
    assert!(
        message.contains("step 10") && message.contains("redraw=on"),
        "{message}"
    );
    for spec in [
        "pf:particles=2000,redraw=on",
        "pf:particles=2000,redraw=on,variant=auxiliary",
    ] {
        let t = run(cv.as_ref(), &data, spec, 3).unwrap();
        assert_eq!(t.redraws, 1, "{spec}");
        // The outlier is skipped: no innovation at step 10, and the run goes on. Afterwards the
        // filter tracks the KF run on the same data with that measurement missing.
        assert!(t.nis[10].is_nan() && t.nis[11].is_finite(), "{spec}");
        let mut clean = data.clone();
        clean.records[10].y[0] = f64::NAN;
        let kf = run(cv.as_ref(), &clean, "kf", 0).unwrap();
        let last = t.means.len() - 1;
        let sd = kf.covariances[last][0].sqrt();
        assert!(
            (t.means[last][0] - kf.means[last][0]).abs() < 0.5 * sd,
            "{spec}: final position {} vs KF {}",
            t.means[last][0],
            kf.means[last][0]
        );
    }
}

/// A constant-velocity plant with both position and velocity measured, to exercise missing
/// components of a multi-component measurement (F and Q as in `cv`; Bar-Shalom et al. 2001).
#[derive(Clone, sightline::prelude::Parameters)]
#[parameters(crate = "sightline::core")]
struct TwoSensors;

mod two_sensors {
    use super::TwoSensors;
    use sightline::prelude::*;

    impl Model for TwoSensors {
        type State = U2;
        type Meas = U2;
        fn declare(&self) -> Declaration {
            Declaration::new("two-sensors", 0.1)
                .state("pos", "m", 0.0, 1.0)
                .state("vel", "m/s", 0.0, 1.0)
                .measurement("pos", "m")
                .measurement("vel", "m/s")
        }
        fn transition<S: Real>(&self, x: &Vector2<S>, _u: &[f64], _t: f64, dt: f64) -> Vector2<S> {
            Vector2::new(x[0] + x[1] * dt, x[1])
        }
        fn measure<S: Real>(&self, x: &Vector2<S>, _u: &[f64], _t: f64) -> Vector2<S> {
            *x
        }
        fn process_noise(&self, _x: &Vector2<f64>, _u: &[f64], _t: f64, dt: f64) -> Matrix2<f64> {
            0.5 * Matrix2::new(dt.powi(3) / 3.0, dt.powi(2) / 2.0, dt.powi(2) / 2.0, dt)
        }
        fn measurement_noise(&self, _t: f64) -> Matrix2<f64> {
            Matrix2::new(0.25, 0.05, 0.05, 0.16)
        }
        fn prior(&self) -> Gaussian<U2> {
            Gaussian::new(Vector2::new(0.0, 1.0), Matrix2::identity())
        }
        fn is_linear(&self) -> bool {
            true
        }
    }
}

#[test]
fn missing_components_are_skipped_exactly() {
    // With 30 % of the components dropped at random (correlated R), the KF's masked update is
    // exact, so the sampling filters must still track it within the cv tolerances.
    let plant = sightline::plant(TwoSensors);
    let options = SimOptions {
        dropout: 0.3,
        ..SimOptions::default()
    };
    let data = plant.simulate(200, 8, &options).unwrap();
    let missing = data
        .records
        .iter()
        .flat_map(|r| &r.y)
        .filter(|v| v.is_nan())
        .count();
    assert!(missing > 80, "only {missing} missing components");
    let kf = run(plant.as_ref(), &data, "kf", 0).unwrap();
    for (spec, tol) in [
        ("pf:particles=20000", 0.05),
        ("pf:particles=20000,variant=auxiliary", 0.05),
        ("enkf:members=2000", 0.1),
    ] {
        let t = run(plant.as_ref(), &data, spec, 2).unwrap();
        let gap = rms_gap(&t, &kf);
        eprintln!("{spec} with missing components: gap {gap:.4}");
        assert!(gap <= tol, "{spec}: gap {gap}");
        assert!((t.log_likelihood - kf.log_likelihood).abs() < 1.5, "{spec}");
    }
}

#[test]
fn tempering_keeps_a_sharp_first_update_from_collapsing_the_cloud() {
    // A prior 200 times wider than the measurement noise: the bootstrap weights of the first
    // update fall on a few particles (ESS/N ≈ √2·σ_r/σ₀ ≈ 0.7 %, the weight degeneracy of
    // Bengtsson, Bickel & Li 2008 — from memory), so the estimate comes from ~14 points. The
    // tempered update (progressive correction, Musso, Oudjane & Le Gland 2001) keeps a usable
    // sample. Reference: the KF's exact posterior after the same update (Kalman 1960).
    let plants = shipped();
    let args = sightline::cli::PlantArgs {
        model: "cv".into(),
        set: vec!["sd0.pos=100".into()],
    };
    let cv = sightline::cli::configure(&plants, &args).unwrap();
    let data = cv.simulate(1, 5, &SimOptions::default()).unwrap();
    let kf = run(cv.as_ref(), &data, "kf", 0).unwrap();
    let sd = |t: &Trace, j: usize| t.covariances[0][j * 2 + j].sqrt();
    let seeds = 0..40u64;
    let summary = |spec: &str| {
        let (mut gap, mut ratio) = (0.0, [0.0; 2]);
        let mut stages = 0;
        for seed in seeds.clone() {
            let mut filter = cv
                .build_filter(&FilterSpec::parse(spec).unwrap(), seed)
                .unwrap();
            let t = run_filter(filter.as_mut(), &data).unwrap();
            stages += filter.diagnostics().tempered;
            gap += ((t.means[0][0] - kf.means[0][0]) / sd(&kf, 0)).powi(2);
            for (j, r) in ratio.iter_mut().enumerate() {
                *r += sd(&t, j) / sd(&kf, j);
            }
        }
        let count = seeds.clone().count() as f64;
        let gap = (gap / count).sqrt();
        let ratio = ratio.map(|r| r / count);
        eprintln!("{spec}: RMS gap {gap:.3} sd, sd ratios {ratio:?}, tempered stages {stages}");
        (gap, ratio, stages)
    };
    let (plain_gap, plain_ratio, plain_stages) = summary("pf:particles=2000");
    let (gap, ratio, stages) = summary("pf:particles=2000,temper=0.3");
    assert_eq!(plain_stages, 0);
    assert!(
        stages >= 40,
        "every run should split the update: {stages} extra stages"
    );
    assert!(
        gap < 0.1 && gap < plain_gap / 2.0,
        "tempered {gap} vs plain {plain_gap}"
    );
    assert!(
        (ratio[0] - 1.0).abs() < 0.1,
        "tempered position sd ratio {}",
        ratio[0]
    );
    assert!(
        (ratio[1] - 1.0).abs() < 0.1,
        "tempered velocity sd ratio {}",
        ratio[1]
    );
    assert!(plain_ratio[0] < ratio[0], "{plain_ratio:?} vs {ratio:?}");
}
