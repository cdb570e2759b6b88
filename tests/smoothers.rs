//! Smoothers on the linear-Gaussian `cv` plant, where the answer is known exactly: the posterior
//! of every state given all measurements is the solution of the stacked linear least-squares
//! problem (prior, process and measurement equations weighted by their inverse covariances).
//! Every Gaussian smoother must reproduce it; the particle and ensemble smoothers must come
//! within their Monte Carlo error of it.

mod common;

use sightline::eval::dataset::Record;
use sightline::eval::simulate::SimOptions;
use sightline::filters::{SmoothedTrack, SmootherKind};
use sightline::nalgebra::{DMatrix, DVector, Matrix2};
use sightline::{AnyPlant, FilterSpec, shipped};

fn cv() -> Box<dyn AnyPlant> {
    shipped().into_iter().find(|p| p.name() == "cv").unwrap()
}

/// 60 rows of `cv` data with irregular sample times (so every step has its own F and Q) and
/// every 7th measurement missing.
fn irregular_data(plant: &dyn AnyPlant, seed: u64) -> Vec<Record> {
    let mut data = plant.simulate(60, seed, &SimOptions::default()).unwrap();
    let mut t = 0.0;
    for (k, r) in data.records.iter_mut().enumerate() {
        r.t = t;
        t += 0.1 * (1.0 + 0.5 * (k as f64).sin());
        if k % 7 == 3 {
            r.y[0] = f64::NAN;
        }
    }
    data.records
}

/// The batch solution: stack the prior x(0) ~ N(μ₀, P₀), the process equations
/// x(k+1) − F(dt) x(k) ~ N(0, Q(dt)) and the measurements y(k) − H x(k) ~ N(0, r) into
/// J X ≈ z with weight W = blockdiag(P₀⁻¹, Q⁻¹, ..., r⁻¹, ...); the posterior of X is
/// N(A⁻¹ Jᵀ W z, A⁻¹) with A = Jᵀ W J (Gauss–Markov theorem; e.g. Bierman, *Factorization
/// Methods for Discrete Sequential Estimation*, 1977, ch. II). F and Q are the closed forms of the
/// white-noise-acceleration model (Bar-Shalom, Li & Kirubarajan 2001, §6.2.2), written out here
/// independently of the plant's code. Returns the means and the 2×2 diagonal blocks of A⁻¹.
fn batch_solution(
    records: &[Record],
    (q, r): (f64, f64),
    (mu0, p0): ([f64; 2], [f64; 2]),
) -> (Vec<[f64; 2]>, Vec<Matrix2<f64>>) {
    let steps = records.len();
    let unknowns = 2 * steps;
    let mut rows: Vec<(Vec<(usize, f64)>, f64, f64)> = Vec::new(); // (coefficients, z, variance)
    let mut blocks: Vec<(Vec<Vec<(usize, f64)>>, Vec<f64>, DMatrix<f64>)> = Vec::new();
    // Prior: two independent rows.
    for i in 0..2 {
        rows.push((vec![(i, 1.0)], mu0[i], p0[i] * p0[i]));
    }
    // Process equations: correlated pairs, kept as 2-row blocks with their full Q.
    for k in 0..steps - 1 {
        let dt = records[k + 1].t - records[k].t;
        let (a, b) = (2 * k, 2 * (k + 1));
        // x(k+1) − F x(k): pos' − pos − dt·vel, vel' − vel.
        let rows2 = vec![
            vec![(b, 1.0), (a, -1.0), (a + 1, -dt)],
            vec![(b + 1, 1.0), (a + 1, -1.0)],
        ];
        let qm = DMatrix::from_row_slice(
            2,
            2,
            &[
                q * dt.powi(3) / 3.0,
                q * dt.powi(2) / 2.0,
                q * dt.powi(2) / 2.0,
                q * dt,
            ],
        );
        blocks.push((rows2, vec![0.0, 0.0], qm));
    }
    // Measurements of position.
    for (k, rec) in records.iter().enumerate() {
        if !rec.y[0].is_nan() {
            rows.push((vec![(2 * k, 1.0)], rec.y[0], r));
        }
    }
    let mut a = DMatrix::<f64>::zeros(unknowns, unknowns);
    let mut rhs = DVector::<f64>::zeros(unknowns);
    for (coeffs, z, var) in &rows {
        for &(i, ci) in coeffs {
            rhs[i] += ci * z / var;
            for &(j, cj) in coeffs {
                a[(i, j)] += ci * cj / var;
            }
        }
    }
    for (rows2, z, cov) in &blocks {
        let w = cov.clone().try_inverse().unwrap();
        for (ri, ci_row) in rows2.iter().enumerate() {
            for (rj, cj_row) in rows2.iter().enumerate() {
                for &(i, ci) in ci_row {
                    rhs[i] += ci * w[(ri, rj)] * z[rj];
                    for &(j, cj) in cj_row {
                        a[(i, j)] += ci * w[(ri, rj)] * cj;
                    }
                }
            }
        }
    }
    let chol = a.cholesky().unwrap();
    let x = chol.solve(&rhs);
    let inv = chol.inverse();
    let means = (0..steps).map(|k| [x[2 * k], x[2 * k + 1]]).collect();
    let covs = (0..steps)
        .map(|k| inv.fixed_view::<2, 2>(2 * k, 2 * k).into_owned())
        .collect();
    (means, covs)
}

/// Largest relative difference of a track from the batch solution: means against
/// |mean| + standard deviation, covariances against √(PᵢᵢPⱼⱼ) (scale-free).
fn worst_difference(
    track: &SmoothedTrack,
    means: &[[f64; 2]],
    covs: &[Matrix2<f64>],
) -> (f64, f64) {
    let (mut worst_mean, mut worst_cov) = (0.0f64, 0.0f64);
    assert_eq!(track.len(), means.len());
    for k in 0..means.len() {
        for i in 0..2 {
            let scale = means[k][i].abs() + covs[k][(i, i)].sqrt();
            worst_mean = worst_mean.max((track.means[k][i] - means[k][i]).abs() / scale);
            for j in 0..2 {
                let scale = (covs[k][(i, i)] * covs[k][(j, j)]).sqrt();
                let got = track.covariances[k][j * 2 + i];
                worst_cov = worst_cov.max((got - covs[k][(i, j)]).abs() / scale);
            }
        }
    }
    (worst_mean, worst_cov)
}

fn cv_parameters(plant: &dyn AnyPlant) -> ((f64, f64), ([f64; 2], [f64; 2])) {
    let value = |name: &str| {
        plant
            .parameters()
            .iter()
            .find(|p| p.name == name)
            .unwrap()
            .value
    };
    let (mean, _) = plant.prior();
    (
        (value("q"), value("r")),
        ([mean[0], mean[1]], [value("sd0.pos"), value("sd0.vel")]),
    )
}

#[test]
fn every_gaussian_smoother_equals_the_batch_least_squares_solution_on_cv() {
    let plant = cv();
    let records = irregular_data(plant.as_ref(), 11);
    let (noise, prior) = cv_parameters(plant.as_ref());
    let (means, covs) = batch_solution(&records, noise, prior);
    // kf/ekf/iekf: RTS; every sigma-point rule (including negative centre weights at alpha=0.5):
    // the sigma-point RTS smoother, exact for a linear plant (Särkkä, IEEE TAC 53(3), 2008).
    let cases = [
        ("kf", SmootherKind::Rts),
        ("ekf", SmootherKind::Rts),
        ("iekf", SmootherKind::Rts),
        ("ukf", SmootherKind::SigmaPointRts),
        ("ukf:alpha=0.5", SmootherKind::SigmaPointRts),
        ("ckf", SmootherKind::SigmaPointRts),
        ("ghkf", SmootherKind::SigmaPointRts),
        ("ghkf:order=5", SmootherKind::SigmaPointRts),
        ("srukf", SmootherKind::SigmaPointRts),
        ("srukf:alpha=0.5", SmootherKind::SigmaPointRts),
    ];
    for (spec, kind) in cases {
        let mut f = plant
            .build_filter(&FilterSpec::parse(spec).unwrap(), 0)
            .unwrap();
        let (_, track) = common::run_and_smooth(f.as_mut(), &records);
        let track = track.unwrap();
        assert_eq!(track.kind, kind, "{spec}");
        let (dm, dc) = worst_difference(&track, &means, &covs);
        eprintln!(
            "{spec}: worst relative difference from batch: means {dm:.1e}, covariances {dc:.1e}"
        );
        assert!(
            dm <= 1e-8,
            "{spec}: smoothed means differ from batch by {dm:e}"
        );
        assert!(
            dc <= 1e-8,
            "{spec}: smoothed covariances differ from batch by {dc:e}"
        );
    }
    // The last smoothed epoch is the last filtered one, and the smoother gains something
    // earlier: the batch variance of the first position is below the filtered one.
    let mut kf = plant
        .build_filter(&FilterSpec::parse("kf").unwrap(), 0)
        .unwrap();
    let (filtered, _) = common::run_and_smooth(kf.as_mut(), &records);
    let last = records.len() - 1;
    assert!((filtered[last][0] - means[last][0]).abs() <= 1e-8 * (1.0 + means[last][0].abs()));
}

#[test]
fn constant_gain_kalman_filters_decline_to_smooth() {
    // The RTS pass assumes conditional moments; a fixed gain does not give them.
    let plant = cv();
    for spec in ["kf:gain=steady", "kf:gain=0.5/2"] {
        let mut f = plant
            .build_filter(&FilterSpec::parse(spec).unwrap(), 0)
            .unwrap();
        assert!(!f.record_for_smoothing(), "{spec}");
        assert!(f.smooth().is_none(), "{spec}");
    }
}

/// Root-mean-square over epochs and states of (smoothed mean − exact mean)/exact sd, and of the
/// ratio of smoothed to exact variance minus one.
fn standardised_errors(
    track: &SmoothedTrack,
    means: &[[f64; 2]],
    covs: &[Matrix2<f64>],
) -> (f64, f64) {
    let (mut z2, mut v2, mut count) = (0.0, 0.0, 0.0);
    for k in 0..means.len() {
        for i in 0..2 {
            let sd = covs[k][(i, i)].sqrt();
            z2 += ((track.means[k][i] - means[k][i]) / sd).powi(2);
            v2 += (track.covariances[k][i * 2 + i] / covs[k][(i, i)] - 1.0).powi(2);
            count += 1.0;
        }
    }
    ((z2 / count).sqrt(), (v2 / count).sqrt())
}

#[test]
fn particle_smoother_matches_the_exact_smoother_within_its_monte_carlo_error() {
    // FFBSi (Godsill, Doucet & West 2004) with M backward paths: each smoothed mean is an
    // average of M (conditionally independent) draws, so its error in units of the exact
    // smoothed sd has variance ≈ 1/M from the paths plus ≈ c/N from the forward particle
    // approximation. With M = 400, N = 4000 the RMS standardised error should be near
    // √(1/400 + c/4000) ≈ 0.05–0.07 (measured: 0.071 and 0.049 for the two specs); 0.12 leaves
    // room for c up to ~30 and still catches a wrong backward kernel (with Q doubled in the
    // kernel the errors measured 0.16 and 0.26). The sample variance of M paths has relative sd
    // √(2/(M−1)) ≈ 0.071 (common practice); the RMS over epochs of the relative variance error
    // (measured 0.088 and 0.071) must stay within 0.15.
    let plant = cv();
    let records = irregular_data(plant.as_ref(), 23);
    let (noise, prior) = cv_parameters(plant.as_ref());
    let (means, covs) = batch_solution(&records, noise, prior);
    for spec in [
        "pf:particles=4000,smoother_paths=400",
        "pf:particles=4000,smoother_paths=400,noise=each,resample=stratified",
    ] {
        let mut f = plant
            .build_filter(&FilterSpec::parse(spec).unwrap(), 9)
            .unwrap();
        let (_, track) = common::run_and_smooth(f.as_mut(), &records);
        let track = track.unwrap();
        assert_eq!(track.kind, SmootherKind::BackwardSimulation { paths: 400 });
        let (z, v) = standardised_errors(&track, &means, &covs);
        eprintln!("{spec}: RMS standardised mean error {z:.4}, variance error {v:.4}");
        assert!(z < 0.12, "{spec}: RMS standardised mean error {z}");
        assert!(v < 0.15, "{spec}: RMS relative variance error {v}");
    }
}

#[test]
fn ensemble_smoother_matches_the_exact_smoother_for_a_large_ensemble() {
    // The ensemble RTS pass uses sample moments of N members: their relative errors are
    // O(1/√N) (sd of a sample variance √(2/(N−1)) ≈ 0.022 at N = 4000, common practice), and the
    // gain inherits them, so the smoothed means are within a few hundredths of an sd and the
    // variances within a few per cent. 0.08 and 0.1 are about four times the expected size.
    let plant = cv();
    let records = irregular_data(plant.as_ref(), 29);
    let (noise, prior) = cv_parameters(plant.as_ref());
    let (means, covs) = batch_solution(&records, noise, prior);
    let mut f = plant
        .build_filter(&FilterSpec::parse("enkf:members=4000").unwrap(), 3)
        .unwrap();
    let (_, track) = common::run_and_smooth(f.as_mut(), &records);
    let track = track.unwrap();
    assert_eq!(track.kind, SmootherKind::EnsembleRts);
    let (z, v) = standardised_errors(&track, &means, &covs);
    eprintln!("enkf: RMS standardised mean error {z:.4}, variance error {v:.4}");
    assert!(z < 0.08, "RMS standardised mean error {z}");
    assert!(v < 0.1, "RMS relative variance error {v}");
}

#[test]
fn particle_smoother_is_independent_of_the_thread_count() {
    // Each backward path draws from its own stream keyed (seed, smooth, step, path) and writes
    // only its own state (common practice for reproducible parallel Monte Carlo).
    let plant = cv();
    let records = irregular_data(plant.as_ref(), 31);
    let run = |seed: u64| {
        let mut f = plant
            .build_filter(
                &FilterSpec::parse("pf:particles=3000,smoother_paths=50").unwrap(),
                seed,
            )
            .unwrap();
        let (_, track) = common::run_and_smooth(f.as_mut(), &records);
        let track = track.unwrap();
        let mut bits: Vec<u64> = track.means.iter().flatten().map(|v| v.to_bits()).collect();
        bits.extend(track.covariances.iter().flatten().map(|v| v.to_bits()));
        bits
    };
    let outputs: Vec<Vec<u64>> = [1, 2, 7]
        .iter()
        .map(|&n| {
            rayon::ThreadPoolBuilder::new()
                .num_threads(n)
                .build()
                .unwrap()
                .install(|| run(5))
        })
        .collect();
    assert!(outputs[0] == outputs[1], "1 vs 2 threads differ");
    assert!(outputs[0] == outputs[2], "1 vs 7 threads differ");
    assert!(run(6) != outputs[0], "the seed has no effect");
}

#[test]
fn smoothing_is_off_unless_asked_and_an_epoch_per_prediction() {
    let plant = cv();
    let records = irregular_data(plant.as_ref(), 37);
    for spec in ["ekf", "ukf", "srukf", "pf:particles=500", "enkf:members=50"] {
        let mut f = plant
            .build_filter(&FilterSpec::parse(spec).unwrap(), 1)
            .unwrap();
        assert!(f.smooth().is_none(), "{spec}: smooths without recording");
        assert!(f.record_for_smoothing(), "{spec}");
        // A prediction before the first update adds an epoch for the prior.
        f.predict(&[], -0.1, 0.1).unwrap();
        for (k, r) in records.iter().enumerate() {
            let previous = (k > 0).then(|| (records[k - 1].t, records[k - 1].u.as_slice()));
            common::step(f.as_mut(), previous, r.t, &r.y, &r.u).unwrap();
        }
        let track = f.smooth().unwrap().unwrap();
        assert_eq!(track.len(), records.len() + 1, "{spec}");
        // Smoothing twice gives the same answer: the record is kept.
        assert_eq!(f.smooth().unwrap().unwrap(), track, "{spec}");
    }
}
