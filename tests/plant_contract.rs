//! What every plant gets from the framework: parameters refused by name with the valid list,
//! and the prior's mean `x0.<state>` and spread `sd0.<state>` for `--set` and `tune`.

mod common_cli;

use common_cli::{expect, json, s, sightline};

/// An unknown `--set` name is refused (exit 2) with every valid name: the plant's own
/// parameters, the prior's `x0.`/`sd0.` of each state and the constant inputs `u.`.
#[test]
fn unknown_set_names_are_refused_with_the_valid_list() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("p.csv");
    // `simulate MODEL --set ITEM` must fail with exit 2, write nothing, and say `expected`.
    let refused = |model: &str, item: &str, expected: &str| {
        let run = sightline(&[
            "simulate",
            model,
            "--steps",
            "5",
            "--seed",
            "1",
            "--set",
            item,
            "-o",
            s(&out),
        ]);
        let err = String::from_utf8_lossy(&run.stderr);
        assert_eq!(run.status.code(), Some(2), "{item}: {err}");
        assert!(err.contains(expected), "{item}: {err}");
        assert!(!out.exists(), "{item}: nothing is written on a usage error");
    };
    refused(
        "pendulum",
        "lenght=2",
        "model 'pendulum' has no parameter 'lenght'; its parameters are: g, length, damping, dt, \
         qc, r, sd0.angle, sd0.rate, x0.angle, x0.rate, u.torque",
    );
    // A framework name of a state the plant does not have is just as unknown.
    refused("cv", "sd0.angle=2", "sd0.pos, sd0.vel, x0.pos, x0.vel");
    // And a prior spread must be positive.
    refused("cv", "sd0.vel=0", "'sd0.vel' of model 'cv' must be > 0");
}

/// `tune --param x0.pos` recovers a known initial position. The data come from `cv` with the
/// truth started at (3, 1) m, m/s with prior spreads of 1 mm and almost no process noise, so the
/// track is a straight line of known slope through an unknown intercept; the ML intercept of N
/// unit-weight fixes with noise variance r then has variance r/N (closed form of the
/// least-squares intercept with known slope): 0.25/200, sd 0.035 m. The tuned value lies within
/// four of those.
#[test]
fn tune_recovers_a_known_initial_state() {
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("cv.csv");
    let truth = [
        "--set",
        "x0.pos=3",
        "--set",
        "sd0.pos=0.001",
        "--set",
        "sd0.vel=0.001",
        "--set",
        "q=1e-9",
    ];
    let mut args = vec![
        "simulate",
        "cv",
        "--steps",
        "200",
        "--seed",
        "5",
        "-o",
        s(&data),
    ];
    args.extend(truth);
    expect(&args, 0);
    // Start the search 1.5 m off, with a wide prior on the position so the data decide.
    let out = dir.path().join("tuned");
    expect(
        &[
            "tune",
            "cv",
            s(&data),
            "-f",
            "kf",
            "--param",
            "x0.pos",
            "--set",
            "x0.pos=1.5",
            "--set",
            "sd0.pos=0.001",
            "--set",
            "sd0.vel=0.001",
            "--set",
            "q=1e-9",
            "-o",
            s(&out),
        ],
        0,
    );
    let tuned = json(&out.join("tuned.json"));
    let x0 = tuned["params"]["x0.pos"].as_f64().unwrap();
    assert_eq!(tuned["start"]["x0.pos"].as_f64(), Some(1.5));
    let sd = (0.25f64 / 200.0).sqrt();
    assert!((x0 - 3.0).abs() < 4.0 * sd, "tuned x0.pos = {x0}");
    assert!(
        (x0 - 1.5).abs() > 1.0,
        "the search moved from its start: {x0}"
    );
}
