//! A smoother uses every measurement for every state, so on average it is at least as accurate
//! as the filter it smooths: for a linear-Gaussian plant the smoothed covariance is below the
//! filtered one, P_s(k) ≤ P(k) (Rauch, Tung & Striebel, AIAA J. 3(8), 1965), and on the shipped
//! nonlinear plants the same holds in practice for the smoothers of filters that track them.
//! Checked on every shipped plant with the smoothers that apply (the particle smoother on the
//! strongly nonlinear `ungm`, where the Gaussian filters do not track), pooled over seeded runs.

mod common;

use sightline::eval::simulate::SimOptions;
use sightline::{FilterSpec, shipped};

/// Runs per model and steps per run: six seeded runs of 200 steps per (model, filter), enough
/// that the pooled RMSE of each differs from its expectation by a few per cent, while the
/// smoothing gain measured on these plants is 23–56 % overall and at least 7 % per state.
const RUNS: u64 = 6;
const STEPS: usize = 200;

#[test]
fn smoothed_rmse_is_below_filtered_rmse_on_every_shipped_plant() {
    let cases: &[(&str, &[&str])] = &[
        (
            "cv",
            &["kf", "ukf", "pf:particles=1000", "enkf:members=200"],
        ),
        ("pendulum", &["ekf", "ukf", "srukf", "pf:particles=1000"]),
        ("ungm", &["pf:particles=1000"]),
        ("quadtank", &["ekf", "ukf", "enkf:members=200"]),
        ("cstr", &["ekf", "ukf"]),
        ("tracking", &["ekf", "ckf"]),
        ("tankchain", &["ekf", "ukf"]),
        ("local-level", &["kf", "ukf"]),
    ];
    let plants = shipped();
    let mut covered = Vec::new();
    for &(name, specs) in cases {
        let plant = plants
            .iter()
            .find(|p| p.name() == name)
            .unwrap_or_else(|| panic!("no shipped plant '{name}'"));
        let n = plant.states().len();
        for spec in specs {
            let (mut filtered, mut smoothed) = (0.0, 0.0);
            let (mut filtered_state, mut smoothed_state) = (vec![0.0; n], vec![0.0; n]);
            let mut rows = 0usize;
            for run in 0..RUNS {
                let data = plant
                    .simulate(STEPS, 100 + run, &SimOptions::default())
                    .unwrap();
                let mut f = plant
                    .build_filter(&FilterSpec::parse(spec).unwrap(), 7 + run)
                    .unwrap();
                let (means, track) = common::run_and_smooth(f.as_mut(), &data.records);
                let track = track.unwrap_or_else(|| panic!("{name}/{spec} does not smooth"));
                assert_eq!(track.len(), data.records.len());
                filtered += common::squared_error(&means, &data.records);
                smoothed += common::squared_error(&track.means, &data.records);
                for (k, r) in data.records.iter().enumerate() {
                    let x = r.x.as_ref().unwrap();
                    for i in 0..n {
                        filtered_state[i] += (means[k][i] - x[i]).powi(2);
                        smoothed_state[i] += (track.means[k][i] - x[i]).powi(2);
                    }
                }
                rows += data.records.len();
            }
            let filtered_rmse = (filtered / (rows * n) as f64).sqrt();
            let smoothed_rmse = (smoothed / (rows * n) as f64).sqrt();
            eprintln!(
                "{name:9} {spec:22} filtered rmse_all {filtered_rmse:.5}  smoothed {smoothed_rmse:.5}  ratio {:.3}",
                smoothed_rmse / filtered_rmse
            );
            assert!(
                smoothed_rmse < filtered_rmse,
                "{name}/{spec}: smoothed RMSE {smoothed_rmse} is not below filtered {filtered_rmse}"
            );
            // Per state too: the smoother gains on every component, not only on average.
            for (i, state) in plant.states().iter().enumerate() {
                let ratio = (smoothed_state[i] / filtered_state[i]).sqrt();
                eprintln!("    {:12} rmse ratio {ratio:.3}", state.name);
                assert!(
                    ratio < 1.0,
                    "{name}/{spec}: state {} not improved: {ratio}",
                    state.name
                );
            }
            covered.push(name);
        }
    }
    // Every shipped plant is covered.
    for p in &plants {
        assert!(
            covered.contains(&p.name()),
            "plant '{}' not checked",
            p.name()
        );
    }
}
