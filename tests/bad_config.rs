//! Bad configuration is a usage error (exit code 2) whose message names what was wrong and
//! lists the valid choices: unknown model, filter kind or option; option values of the wrong type
//! or out of range; unknown, non-finite or out-of-domain parameters; bad counts and shards.

mod common_cli;

use common_cli::{expect, s, sightline};

#[test]
fn each_bad_setting_is_named_with_its_valid_choices() {
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("cv.csv");
    expect(
        &[
            "simulate",
            "cv",
            "--steps",
            "20",
            "--seed",
            "1",
            "-o",
            s(&data),
        ],
        0,
    );
    let out = dir.path().join("out");
    let (d, o) = (s(&data), s(&out));
    let kinds = "kf ekf iekf ukf ckf ghkf srukf pf enkf";
    let cases: Vec<(Vec<&str>, Vec<&str>)> = vec![
        // Filters: unknown kind, unknown option, wrong type, out of range.
        (
            vec!["compare", "cv", d, "-f", "ufk", "-o", o],
            vec!["unknown filter kind 'ufk'", kinds],
        ),
        (
            vec!["compare", "cv", d, "-f", "ukf:alhpa=0.5", "-o", o],
            vec![
                "unknown option 'alhpa' for ukf",
                "alpha, beta, kappa, repair, floor, gate",
            ],
        ),
        (
            vec!["compare", "cv", d, "-f", "pf:particles=0", "-o", o],
            vec!["'particles' = '0'", "a whole number from 2 to"],
        ),
        (
            vec!["compare", "cv", d, "-f", "pf:particles=many", "-o", o],
            vec!["'particles' = 'many'", "a whole number"],
        ),
        (
            vec!["compare", "cv", d, "-f", "ukf:alpha=abc", "-o", o],
            vec!["'alpha' = 'abc'", "a number > 0"],
        ),
        (
            vec!["compare", "cv", d, "-f", "ukf:alpha=-1", "-o", o],
            vec!["'alpha' = '-1'", "a number > 0"],
        ),
        (
            vec!["compare", "cv", d, "-f", "pf:resample=random", "-o", o],
            vec![
                "'resample' = 'random'",
                "systematic",
                "stratified",
                "multinomial",
                "residual",
            ],
        ),
        (
            vec!["compare", "cv", d, "-f", "ekf:gate=1.5", "-o", o],
            vec!["'gate' = '1.5'", "strictly between 0 and 1"],
        ),
        (
            vec!["compare", "cv", d, "-f", "ekf:floor=0", "-o", o],
            vec!["'floor' = '0'", "strictly between 0 and 1"],
        ),
        (
            vec!["compare", "cv", d, "-f", "ekf:repair=maybe", "-o", o],
            vec!["'repair' = 'maybe'", "on or off"],
        ),
        (
            vec![
                "compare",
                "cv",
                d,
                "-f",
                "ekf:repair=off,floor=1e-9",
                "-o",
                o,
            ],
            vec!["'floor'", "repair=off"],
        ),
        (
            vec!["compare", "cv", d, "-f", "ukf:alpha", "-o", o],
            vec!["option 'alpha' has no '=value'", "KIND[:key=value"],
        ),
        (
            vec!["compare", "cv", d, "-f", "kf", "-f", "kf", "-o", o],
            vec!["given twice"],
        ),
        (
            vec!["compare", "pendulum", d, "-f", "kf", "-o", o],
            vec!["kf needs a linear plant", "pendulum"],
        ),
        (
            vec![
                "compare",
                "tankchain",
                d,
                "--set",
                "n=64",
                "-f",
                "ghkf:order=5",
                "-o",
                o,
            ],
            vec!["ghkf:order=5", "5^64 points"],
        ),
        // Parameters: unknown, non-positive, non-finite, not a number, malformed.
        (
            vec!["compare", "cv", d, "--set", "qq=1", "-o", o],
            vec![
                "model 'cv' has no parameter 'qq'",
                "dt, q, r, sd0.pos, sd0.vel, x0.pos, x0.vel",
            ],
        ),
        (
            vec!["compare", "cv", d, "--set", "dt=0", "-o", o],
            vec!["parameter 'dt' of model 'cv' must be > 0, got 0"],
        ),
        (
            vec!["compare", "cv", d, "--set", "r=-0.5", "-o", o],
            vec!["parameter 'r' of model 'cv' must be > 0, got -0.5"],
        ),
        (
            vec!["compare", "cv", d, "--set", "q=inf", "-o", o],
            vec!["--set 'q=inf'", "not a finite number"],
        ),
        (
            vec!["compare", "cv", d, "--set", "q=abc", "-o", o],
            vec!["--set 'q=abc'", "not a finite number"],
        ),
        (
            vec!["compare", "cv", d, "--set", "q", "-o", o],
            vec!["--set 'q'", "expected NAME=VALUE"],
        ),
        (
            vec![
                "simulate",
                "tankchain",
                "--set",
                "n=0",
                "--steps",
                "5",
                "--seed",
                "1",
                "-o",
                o,
            ],
            vec!["parameter 'n'", "a whole number in [1, 512]"],
        ),
        (
            vec![
                "simulate",
                "tankchain",
                "--set",
                "n=2.5",
                "--steps",
                "5",
                "--seed",
                "1",
                "-o",
                o,
            ],
            vec!["parameter 'n'", "a whole number in [1, 512]"],
        ),
        // Models, counts, shards, files.
        (
            vec!["compare", "pendullum", d, "-o", o],
            vec!["unknown model 'pendullum'", "pendulum, cv, ungm"],
        ),
        (
            vec!["montecarlo", "cv", "--runs", "0", "--steps", "10", "-o", o],
            vec!["--runs must be at least 1"],
        ),
        (
            vec!["montecarlo", "cv", "--runs", "2", "--steps", "0", "-o", o],
            vec!["--steps must be at least 1"],
        ),
        (
            vec![
                "montecarlo",
                "cv",
                "--runs",
                "2",
                "--steps",
                "2000000",
                "-o",
                o,
            ],
            vec!["--steps 2000000", "at most 1000000"],
        ),
        (
            vec![
                "montecarlo",
                "cv",
                "--runs",
                "2",
                "--steps",
                "5",
                "--shard",
                "3/2",
                "-o",
                o,
            ],
            vec!["--shard '3/2'", "1 ≤ K ≤ N"],
        ),
        (
            vec!["montecarlo", "cv", "--runs", "-3", "--steps", "5", "-o", o],
            vec!["--runs"],
        ),
        (
            vec![
                "simulate", "cv", "--steps", "5", "--seed", "1", "--every", "0", "-o", o,
            ],
            vec!["--every must be at least 1"],
        ),
        (
            vec![
                "simulate",
                "cv",
                "--steps",
                "5",
                "--seed",
                "1",
                "--dropout",
                "1.5",
                "-o",
                o,
            ],
            vec!["--dropout must be a probability in [0, 1], got 1.5"],
        ),
        (
            vec!["simulate", "cv", "--steps", "many", "--seed", "1", "-o", o],
            vec!["--steps", "many"],
        ),
        (
            vec!["compare", "cv", "no-such-file.csv", "-o", o],
            vec!["cannot read no-such-file.csv"],
        ),
        (
            vec![
                "compare",
                "tankchain",
                d,
                "--set",
                "n=64",
                "-f",
                "pf:particles=100000000",
                "-o",
                o,
            ],
            vec![
                "'particles' = '100000000'",
                "at most 3125000 for a plant with 64 states",
            ],
        ),
        (
            vec!["simulate", "cv", "--steps", "0", "--seed", "1", "-o", o],
            vec!["--steps must be at least 1"],
        ),
        (vec!["frobnicate"], vec!["frobnicate"]),
    ];
    for (args, needles) in cases {
        let result = sightline(&args);
        let stderr = String::from_utf8_lossy(&result.stderr);
        assert_eq!(result.status.code(), Some(2), "{args:?}: {stderr}");
        assert!(stderr.starts_with("error:"), "{args:?}: {stderr}");
        for needle in needles {
            assert!(
                stderr.contains(needle),
                "{args:?}: no {needle:?} in\n{stderr}"
            );
        }
        assert!(!out.exists(), "{args:?} wrote an output");
    }
}

#[test]
fn an_output_path_that_is_not_ours_is_refused_never_replaced() {
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("cv.csv");
    expect(
        &[
            "simulate",
            "cv",
            "--steps",
            "20",
            "--seed",
            "1",
            "-o",
            s(&data),
        ],
        0,
    );
    // A file given as the output directory stays as it was.
    let file = dir.path().join("notes.txt");
    std::fs::write(&file, "keep me").unwrap();
    let result = sightline(&["compare", "cv", s(&data), "-o", s(&file)]);
    let stderr = String::from_utf8_lossy(&result.stderr);
    assert_eq!(result.status.code(), Some(2), "{stderr}");
    assert!(stderr.contains("exists and is not a directory"), "{stderr}");
    assert_eq!(std::fs::read_to_string(&file).unwrap(), "keep me");
    // So does a directory of other things.
    let other = dir.path().join("photos");
    std::fs::create_dir(&other).unwrap();
    std::fs::write(other.join("cat.jpg"), "meow").unwrap();
    let result = sightline(&[
        "montecarlo",
        "cv",
        "--runs",
        "2",
        "--steps",
        "5",
        "-o",
        s(&other),
    ]);
    let stderr = String::from_utf8_lossy(&result.stderr);
    assert_eq!(result.status.code(), Some(2), "{stderr}");
    assert!(
        stderr.contains("cat.jpg") && stderr.contains("has no manifest.json"),
        "{stderr}"
    );
    assert_eq!(
        std::fs::read_to_string(other.join("cat.jpg")).unwrap(),
        "meow"
    );
    // A dataset path that is a directory.
    let result = sightline(&[
        "simulate",
        "cv",
        "--steps",
        "5",
        "--seed",
        "1",
        "-o",
        s(&other),
    ]);
    assert_eq!(result.status.code(), Some(2));
    // An earlier output is replaced, and nothing else is left beside it.
    let out = dir.path().join("out");
    expect(&["compare", "cv", s(&data), "-f", "kf", "-o", s(&out)], 0);
    expect(&["compare", "cv", s(&data), "-f", "ukf", "-o", s(&out)], 0);
    let summary = common_cli::json(&out.join("summary.json"));
    assert_eq!(summary["filters"][0]["label"], "ukf");
    let mut names: Vec<String> = std::fs::read_dir(dir.path())
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    names.sort();
    assert_eq!(names, ["cv.csv", "notes.txt", "out", "photos"]);
}
