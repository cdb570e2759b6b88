//! `sightline simulate` and `sightline models` through the built binary: reproducibility, the
//! dataset layout of the command and file contract, and bad input (exit code 2 with the valid
//! names or the allowed range in the message).

use std::path::Path;
use std::process::{Command, Output};

fn sightline(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_sightline"))
        .args(args)
        .output()
        .unwrap()
}

fn simulate_to(dir: &Path, file: &str, model: &str, seed: &str, extra: &[&str]) -> Vec<u8> {
    let path = dir.join(file);
    let path_text = path.to_str().unwrap();
    let mut args = vec![
        "simulate", model, "--steps", "120", "--seed", seed, "-o", path_text,
    ];
    args.extend_from_slice(extra);
    let out = sightline(&args);
    assert!(
        out.status.success(),
        "{model}: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    std::fs::read(&path).unwrap()
}

fn stderr(out: &Output) -> String {
    String::from_utf8_lossy(&out.stderr).into_owned()
}

#[test]
fn same_seed_gives_byte_identical_files_and_other_seeds_differ() {
    // The contract: one seed, one dataset, on every run (common practice for reproducible
    // simulation); checked for every shipped model.
    let dir = tempfile::tempdir().unwrap();
    for plant in sightline::shipped() {
        let name = plant.name().to_string();
        let a = simulate_to(dir.path(), "a.csv", &name, "7", &[]);
        let b = simulate_to(dir.path(), "b.csv", &name, "7", &[]);
        let c = simulate_to(dir.path(), "c.csv", &name, "8", &[]);
        assert_eq!(a, b, "{name}: same seed, different files");
        assert_ne!(a, c, "{name}: different seeds, same file");
        let text = String::from_utf8(a).unwrap();
        assert_eq!(text.lines().count(), 121, "{name}: header + 120 rows");
        // Every cell of a full-rate simulation is a finite number.
        for line in text.lines().skip(1) {
            for cell in line.split(',') {
                let v: f64 = cell
                    .parse()
                    .unwrap_or_else(|_| panic!("{name}: cell '{cell}'"));
                assert!(v.is_finite(), "{name}: {line}");
            }
        }
    }
}

#[test]
fn quadtank_dataset_follows_the_contract_layout() {
    let dir = tempfile::tempdir().unwrap();
    let data = simulate_to(dir.path(), "q.csv", "quadtank", "1", &["--noise-free"]);
    let text = String::from_utf8(data).unwrap();
    let mut lines = text.lines();
    assert_eq!(
        lines.next().unwrap(),
        "t,u.v1,u.v2,y.level1,y.level2,x.h1,x.h2,x.h3,x.h4"
    );
    // Noise-free: the truth starts at the prior mean (the paper's P− levels) and the
    // measurements are kc·h exactly (Johansson 2000: kc = 0.5 V/cm, from memory).
    assert_eq!(lines.next().unwrap(), "0,3,3,6.2,6.35,12.4,12.7,1.8,1.4");
}

#[test]
fn runtime_sized_chain_takes_its_size_from_the_command_line() {
    let dir = tempfile::tempdir().unwrap();
    // `n` may follow the x0. override that needs it.
    let data = simulate_to(
        dir.path(),
        "chain.csv",
        "tankchain",
        "1",
        &["--set", "x0.h16=2.5", "--set", "n=16", "--noise-free"],
    );
    let text = String::from_utf8(data).unwrap();
    let header: Vec<&str> = text.lines().next().unwrap().split(',').collect();
    assert_eq!(header.len(), 1 + 1 + 1 + 16, "{header:?}");
    assert_eq!(header[3], "x.h1");
    assert_eq!(header[18], "x.h16");
    let first: Vec<&str> = text.lines().nth(1).unwrap().split(',').collect();
    assert_eq!(first[2], "2.5", "the measured last level is x0.h16");
    assert_eq!(first[18], "2.5");
}

#[test]
fn dropout_and_multirate_leave_cells_empty() {
    let dir = tempfile::tempdir().unwrap();
    let data = simulate_to(dir.path(), "d.csv", "tracking", "3", &["--every", "3"]);
    let text = String::from_utf8(data).unwrap();
    for (k, line) in text.lines().skip(1).enumerate() {
        let cells: Vec<&str> = line.split(',').collect();
        // t, y.range, y.bearing, then five states.
        assert_eq!(cells.len(), 8);
        assert_eq!(cells[1].is_empty(), k % 3 != 0, "row {k}: {line}");
        assert_eq!(cells[2].is_empty(), k % 3 != 0, "row {k}: {line}");
    }
}

#[test]
fn unknown_model_lists_the_models() {
    let out = sightline(&[
        "simulate",
        "quadtanks",
        "--steps",
        "3",
        "--seed",
        "1",
        "-o",
        "x.csv",
    ]);
    assert_eq!(out.status.code(), Some(2));
    let e = stderr(&out);
    assert!(e.contains("'quadtanks'"), "{e}");
    for name in [
        "pendulum",
        "cv",
        "ungm",
        "quadtank",
        "cstr",
        "tracking",
        "tankchain",
    ] {
        assert!(e.contains(name), "{name} missing from: {e}");
    }
}

#[test]
fn unknown_parameter_or_state_lists_the_valid_names() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("x.csv");
    let path = path.to_str().unwrap();
    for set in ["gamma=0.5", "x0.h5=1", "u.v3=2"] {
        let out = sightline(&[
            "simulate", "quadtank", "--steps", "3", "--seed", "1", "--set", set, "-o", path,
        ]);
        assert_eq!(out.status.code(), Some(2), "{set}");
        let e = stderr(&out);
        let name = set.split('=').next().unwrap();
        assert!(e.contains(&format!("'{name}'")), "{e}");
        for valid in [
            "gamma1", "gamma2", "A1", "h_smooth", "sd0.h4", "x0.h1", "x0.h4", "u.v1",
        ] {
            assert!(e.contains(valid), "{valid} missing from: {e}");
        }
    }
    assert!(!Path::new(path).exists(), "no output on bad input");
}

#[test]
fn non_positive_variance_length_or_area_is_rejected_with_its_range() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("x.csv");
    let path = path.to_str().unwrap();
    let cases = [
        ("pendulum", "length=0", "> 0"),
        ("pendulum", "r=-1", "> 0"),
        ("cv", "q=0", "> 0"),
        ("quadtank", "A3=-28", "> 0"),
        ("quadtank", "a2=0", "> 0"),
        ("quadtank", "gamma1=1.5", "in [0, 1]"),
        ("cstr", "volume=0", "> 0"),
        ("tracking", "r_bearing=0", "> 0"),
        ("tankchain", "n=0", "a whole number in [1, 512]"),
        ("tankchain", "n=2.5", "a whole number in [1, 512]"),
        ("tankchain", "area=-1", "> 0"),
    ];
    for (model, set, range) in cases {
        let out = sightline(&[
            "simulate", model, "--steps", "3", "--seed", "1", "--set", set, "-o", path,
        ]);
        assert_eq!(out.status.code(), Some(2), "{model} {set}");
        let e = stderr(&out);
        let name = set.split('=').next().unwrap();
        assert!(e.contains(&format!("'{name}'")), "{model} {set}: {e}");
        assert!(e.contains(range), "{model} {set}: {e}");
    }
}

#[test]
fn models_lists_every_plant_with_parameters_defaults_and_units() {
    let out = sightline(&["models"]);
    assert!(out.status.success());
    let text = String::from_utf8(out.stdout).unwrap();
    for plant in sightline::shipped() {
        assert!(
            text.contains(&format!("{}: ", plant.name())),
            "{}",
            plant.name()
        );
        for p in plant.parameters() {
            // The prior's `x0.<state>` and `sd0.<state>` of a long state list are elided.
            let elided = plant.states().len() > 8 && p.name.contains('.');
            if !elided {
                assert!(
                    text.contains(p.name.as_ref()),
                    "{}: {}",
                    plant.name(),
                    p.name
                );
            }
        }
    }
    // A published value shown as typed, with its unit (Johansson 2000, Table I, from memory).
    assert!(text.contains("0.071"), "{text}");
    assert!(text.contains("7.2e10"), "{text}");
    assert!(text.contains("cm^3/(V s)"), "{text}");
}

#[test]
fn a_reader_that_stops_early_ends_the_stream_quietly_with_the_sigpipe_code() {
    // `simulate -o - | head -n 2`: the reader closes the pipe after two lines. A program that
    // writes into a closed pipe ends as if by SIGPIPE (exit 128 + 13 = 141), silently — what
    // the shell and `yes | head` do (common practice); an "error: Broken pipe" with exit 2 would
    // call the user's pipeline broken.
    use std::io::{BufRead, BufReader};
    use std::process::Stdio;
    let mut child = Command::new(env!("CARGO_BIN_EXE_sightline"))
        .args([
            "simulate", "cv", "--steps", "2000000", "--seed", "3", "-o", "-",
        ])
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let mut reader = BufReader::new(child.stdout.take().unwrap());
    let mut header = String::new();
    reader.read_line(&mut header).unwrap();
    assert!(header.starts_with("t,"), "{header}");
    drop(reader);
    let out = child.wait_with_output().unwrap();
    assert_eq!(out.status.code(), Some(141), "{}", stderr(&out));
    assert_eq!(stderr(&out), "");
}
