//! `tune` reports what its estimates are worth: 95 % intervals that cover the truth as often as
//! they claim, withheld standard errors for a sampling filter (with a note), reproducible seeds,
//! and refusals where no estimate can be made.

mod common_cli;

use common_cli::{json, s, sightline, simulated};
use sightline::eval::simulate::SimOptions;
use sightline::eval::tune::tune;
use sightline::{AnyPlant, FilterSpec, shipped};

fn cv() -> Box<dyn AnyPlant> {
    shipped().into_iter().find(|p| p.name() == "cv").unwrap()
}

/// Coverage (asymptotic normality of the ML estimator, Cov(θ̂) ≈ I(θ̂)⁻¹; common practice): over
/// 200 independent simulated `cv` datasets of 400 rows the 95 % intervals of q and r cover the
/// generating values in 90–99 % of them (a binomial(200, 0.95) count lies in 180–198 with
/// probability above 0.99). The intervals are on the log scale, so they stay positive and
/// geometric: lo·hi = θ̂².
#[test]
fn intervals_cover_the_generating_values_at_their_level() {
    let (q_true, r_true) = (0.5, 0.25);
    let spec = FilterSpec::parse("kf").unwrap();
    let runs = 200;
    let (mut covered_q, mut covered_r) = (0, 0);
    for seed in 0..runs {
        let mut plant = cv();
        plant.set("q", q_true).unwrap();
        plant.set("r", r_true).unwrap();
        let data = plant
            .simulate(400, 7_000 + seed, &SimOptions::default())
            .unwrap();
        let tuned = tune(plant.as_ref(), &data, &spec, &["q".into(), "r".into()], 0).unwrap();
        for (name, truth, covered) in [("q", q_true, &mut covered_q), ("r", r_true, &mut covered_r)]
        {
            let [lo, hi] = tuned.intervals[name].expect("an interval for a Gaussian filter");
            let estimate = tuned.params[name];
            assert!(
                lo > 0.0 && lo < estimate && estimate < hi,
                "{name}: {lo} {estimate} {hi}"
            );
            assert!(
                (lo * hi - estimate * estimate).abs() <= 1e-9 * estimate * estimate,
                "{name}: the log-scale interval is geometric about the estimate"
            );
            if lo <= truth && truth <= hi {
                *covered += 1;
            }
        }
    }
    eprintln!("coverage over {runs} datasets: q {covered_q}, r {covered_r}");
    for (name, covered) in [("q", covered_q), ("r", covered_r)] {
        assert!(
            (180..=198).contains(&covered),
            "{name}: covered {covered} of {runs}"
        );
    }
}

/// A sampling filter's standard errors and intervals are withheld with a note saying why; `--seed`
/// gives other draws (another estimate) and the same seed reproduces the result exactly (seeded
/// streams; common practice).
#[test]
fn sampling_filters_withhold_standard_errors_and_follow_the_seed() {
    let tmp = tempfile::tempdir().unwrap();
    let data = tmp.path().join("cv.csv");
    let simulated = sightline(&[
        "simulate",
        "cv",
        "--steps",
        "60",
        "--seed",
        "3",
        "-o",
        s(&data),
    ]);
    assert_eq!(simulated.status.code(), Some(0));
    let run = |seed: &str, out: &str| {
        let dir = tmp.path().join(out);
        let o = sightline(&[
            "tune",
            "cv",
            s(&data),
            "-f",
            "pf:particles=200",
            "--param",
            "r",
            "--seed",
            seed,
            "-o",
            s(&dir),
        ]);
        assert_eq!(
            o.status.code(),
            Some(0),
            "{}",
            String::from_utf8_lossy(&o.stderr)
        );
        (
            json(&dir.join("tuned.json")),
            String::from_utf8_lossy(&o.stdout).into_owned(),
        )
    };
    let (a, shown) = run("1", "a");
    let (b, _) = run("1", "b");
    let (c, _) = run("2", "c");
    assert!(a["std_errors"]["r"].is_null());
    assert!(a["intervals"]["r"].is_null());
    let notes = a["notes"].as_array().unwrap();
    assert!(
        notes
            .iter()
            .any(|n| n.as_str().unwrap().contains("Monte Carlo")),
        "{notes:?}"
    );
    assert!(shown.contains("withheld"), "{shown}");
    assert_eq!(
        a["params"], b["params"],
        "the same seed reproduces the estimate"
    );
    assert_eq!(a["settings"]["seed"], 1);
    assert_ne!(a["params"], c["params"], "another seed, other draws");
}

/// Refusals with exit 2 and what to do: a parameter the likelihood does not depend on (`cv`'s
/// `dt` is the nominal step of simulation; the filters step by the data's time stamps), a dataset
/// without a single measurement, and fewer measured rows than parameters.
#[test]
fn tuning_refuses_what_cannot_be_estimated() {
    let tmp = tempfile::tempdir().unwrap();
    let data = simulated(&tmp.path().join("cv.csv"), "cv", 50, 4);
    let empty = tmp.path().join("empty.csv");
    std::fs::write(&empty, "t,y.pos\n0,\n0.1,\n0.2,\n").unwrap();
    let one = tmp.path().join("one.csv");
    std::fs::write(&one, "t,y.pos\n0,0.3\n0.1,\n").unwrap();
    let out = tmp.path().join("o");
    let cases: &[(&std::path::Path, &[&str], &str)] = &[
        (&data, &["--param", "dt"], "does not depend on --param 'dt'"),
        (&data, &["--param", "q", "--param", "dt"], "'dt'"),
        (&empty, &["--param", "r"], "no measurement at all"),
        (
            &one,
            &["--param", "q", "--param", "r"],
            "2 parameters cannot be estimated from 1 row",
        ),
    ];
    for (file, params, says) in cases {
        let mut args = vec!["tune", "cv", s(file), "-f", "kf", "-o", s(&out)];
        args.extend_from_slice(params);
        let o = sightline(&args);
        let stderr = String::from_utf8_lossy(&o.stderr);
        assert_eq!(o.status.code(), Some(2), "{params:?}: {stderr}");
        assert!(stderr.contains(says), "{params:?}: {stderr}");
        assert!(!out.exists());
    }
}

/// A sweep names several filters; `tune` maximises one likelihood, so it refuses the sweep by
/// name (exit 2) instead of reporting the swept value as an invalid number.
#[test]
fn a_sweep_is_refused_with_where_sweeps_belong() {
    let tmp = tempfile::tempdir().unwrap();
    let data = simulated(&tmp.path().join("d.csv"), "cv", 50, 4);
    let out = tmp.path().join("o");
    let o = sightline(&[
        "tune",
        "cv",
        s(&data),
        "-f",
        "ukf:alpha=0.5|1",
        "--param",
        "q",
        "-o",
        s(&out),
    ]);
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(2), "{stderr}");
    assert!(stderr.contains("a sweep"), "{stderr}");
    assert!(stderr.contains("compare"), "{stderr}");
    assert!(!out.exists());
}
