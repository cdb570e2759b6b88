//! Output safety: nothing the user had is changed by a command that refuses its output, and a
//! command that succeeds changes only what it owns. Each case snapshots every byte under its
//! directory before and after (common practice for a data tool: a user's files are sacred;
//! the rules are the project's contract in design.md §4 and §6).

#![cfg(unix)]

mod common_cli;

use std::os::unix::fs::{FileTypeExt, PermissionsExt};
use std::path::Path;
use std::process::{Command, Output, Stdio};

use common_cli::{expect, json, names, s, sightline, snapshot};

fn stderr(out: &Output) -> String {
    String::from_utf8_lossy(&out.stderr).into_owned()
}

/// Runs `args`; asserts exit code 2, a message holding every `needle`, and `dir` unchanged.
fn refused(dir: &Path, args: &[&str], needles: &[&str]) {
    let before = snapshot(dir);
    let out = sightline(args);
    let err = stderr(&out);
    assert_eq!(out.status.code(), Some(2), "sightline {args:?}: {err}");
    for n in needles {
        assert!(
            err.contains(n),
            "sightline {args:?}: message lacks {n:?}:\n{err}"
        );
    }
    assert!(err.contains("nothing was changed"), "{err}");
    let after = snapshot(dir);
    assert_eq!(
        names(&before),
        names(&after),
        "sightline {args:?} changed the directory's entries"
    );
    assert!(before == after, "sightline {args:?} changed a file's bytes");
}

fn simulate(dir: &Path, name: &str) -> std::path::PathBuf {
    let path = dir.join(name);
    expect(
        &[
            "simulate",
            "cv",
            "--steps",
            "200",
            "--seed",
            "3",
            "-o",
            s(&path),
        ],
        0,
    );
    path
}

fn compare_into(data: &Path, out: &Path) -> Output {
    sightline(&["compare", "cv", s(data), "-f", "kf", "-o", s(out)])
}

#[test]
fn a_dataset_inside_the_output_directory_is_refused_before_any_work() {
    let dir = tempfile::tempdir().unwrap();
    let demo = dir.path().join("demo");
    expect(&["demo", "-o", s(&demo)], 0);
    // The very layout demo writes: rerunning compare into the directory of its own data.
    let data = demo.join("data.csv");
    refused(
        dir.path(),
        &[
            "compare",
            "quadtank",
            s(&data),
            "-f",
            "ekf",
            "--set",
            "x0.h1=3",
            "-o",
            s(&demo),
        ],
        &[
            "the dataset",
            "data.csv",
            "lies inside the output directory",
        ],
    );
    // The same through a roundabout path, and for tune.
    let roundabout = format!("{}/../demo/data.csv", s(&demo));
    refused(
        dir.path(),
        &[
            "tune",
            "quadtank",
            &roundabout,
            "-f",
            "ekf",
            "--param",
            "q",
            "-o",
            s(&demo),
        ],
        &["the dataset", "lies inside the output directory"],
    );
    // Whatever the reading flags say: the refusal comes before the data is read.
    refused(
        dir.path(),
        &[
            "compare",
            "quadtank",
            s(&data),
            "--time",
            "t",
            "--time-unit",
            "s",
            "--map",
            "y.level1=y.level2",
            "--missing",
            "NA",
            "--strict-columns",
            "-o",
            s(&demo),
        ],
        &["the dataset", "lies inside the output directory"],
    );
    // Standard input lies inside nothing: the same data piped in replaces the demo's output
    // (an unchanged output of Sightline's own), data.csv included.
    let piped = Command::new(env!("CARGO_BIN_EXE_sightline"))
        .args([
            "compare", "quadtank", "-", "-f", "ekf", "--set", "x0.h1=3", "-o",
        ])
        .arg(&demo)
        .stdin(Stdio::from(std::fs::File::open(&data).unwrap()))
        .output()
        .unwrap();
    assert_eq!(piped.status.code(), Some(0), "{}", stderr(&piped));
    let manifest = json(&demo.join("manifest.json"));
    let listed: Vec<&str> = manifest["files"]
        .as_array()
        .unwrap()
        .iter()
        .map(|f| f["name"].as_str().unwrap())
        .collect();
    assert!(listed.contains(&"estimates.csv"), "{manifest}");
    assert!(!demo.join("data.csv").exists(), "the old output went whole");
    assert_eq!(
        json(&demo.join("summary.json"))["settings"]["data"],
        "-",
        "the settings name standard input"
    );
}

#[test]
fn user_files_and_edits_in_an_earlier_output_are_never_replaced() {
    let dir = tempfile::tempdir().unwrap();
    let data = simulate(dir.path(), "data.csv");
    let out = dir.path().join("out");
    assert_eq!(compare_into(&data, &out).status.code(), Some(0));
    // A note the user added to an earlier output.
    std::fs::write(out.join("notes.txt"), "keep me\n").unwrap();
    refused(
        dir.path(),
        &["compare", "cv", s(&data), "-f", "kf", "-o", s(&out)],
        &[
            "notes.txt",
            "is not a file Sightline wrote",
            "Choose another -o",
        ],
    );
    std::fs::remove_file(out.join("notes.txt")).unwrap();
    // An exported plot in a sub-directory.
    std::fs::create_dir(out.join("plots")).unwrap();
    std::fs::write(out.join("plots/fig.svg"), "<svg/>").unwrap();
    refused(
        dir.path(),
        &["compare", "cv", s(&data), "-f", "kf", "-o", s(&out)],
        &["plots"],
    );
    std::fs::remove_dir_all(out.join("plots")).unwrap();
    // A report edited by hand, same size: only the content hash tells.
    let report = out.join("report.html");
    let mut bytes = std::fs::read(&report).unwrap();
    let i = bytes.len() / 2;
    bytes[i] = if bytes[i] == b'x' { b'y' } else { b'x' };
    std::fs::write(&report, &bytes).unwrap();
    refused(
        dir.path(),
        &["compare", "cv", s(&data), "-f", "kf", "-o", s(&out)],
        &["report.html", "was changed since Sightline wrote it"],
    );
    // A listed file removed.
    std::fs::remove_file(&report).unwrap();
    refused(
        dir.path(),
        &["compare", "cv", s(&data), "-f", "kf", "-o", s(&out)],
        &["report.html", "missing"],
    );
}

#[test]
fn foreign_trees_are_refused_even_with_a_summary_json() {
    let dir = tempfile::tempdir().unwrap();
    let data = simulate(dir.path(), "data.csv");
    // An unrelated source tree that happens to hold a summary.json.
    let tree = dir.path().join("project");
    std::fs::create_dir_all(tree.join("src")).unwrap();
    std::fs::write(tree.join("Cargo.toml"), "[package]\n").unwrap();
    std::fs::write(tree.join("src/main.rs"), "fn main() {}\n").unwrap();
    std::fs::write(tree.join("summary.json"), "{}\n").unwrap();
    for args in [
        vec!["compare", "cv", s(&data), "-f", "kf", "-o", s(&tree)],
        vec![
            "montecarlo",
            "cv",
            "--runs",
            "4",
            "--steps",
            "20",
            "-f",
            "kf",
            "-o",
            s(&tree),
        ],
        vec![
            "tune",
            "cv",
            s(&data),
            "-f",
            "kf",
            "--param",
            "q",
            "-o",
            s(&tree),
        ],
        vec!["demo", "-o", s(&tree)],
    ] {
        refused(dir.path(), &args, &["Cargo.toml", "has no manifest.json"]);
    }
    // A manifest that is not Sightline's does not make a directory Sightline's.
    std::fs::write(tree.join("manifest.json"), "{\"name\": \"app\"}\n").unwrap();
    refused(
        dir.path(),
        &["compare", "cv", s(&data), "-f", "kf", "-o", s(&tree)],
        &["manifest.json", "is not a Sightline manifest"],
    );
    // A plain file where a directory would go (or the dataset itself).
    let plain = dir.path().join("plain.txt");
    std::fs::write(&plain, "mine\n").unwrap();
    refused(
        dir.path(),
        &["compare", "cv", s(&data), "-f", "kf", "-o", s(&plain)],
        &["is not a directory"],
    );
    refused(
        dir.path(),
        &["compare", "cv", s(&data), "-f", "kf", "-o", s(&data)],
        &["is the output directory itself"],
    );
    // `..` (or `.`) names no directory of its own to replace.
    let up = tree.join("src").join("..");
    refused(
        dir.path(),
        &["compare", "cv", s(&data), "-f", "kf", "-o", s(&up)],
        &["not `.`, `..` or `/`"],
    );
}

#[test]
fn read_only_outputs_are_refused() {
    let dir = tempfile::tempdir().unwrap();
    let data = simulate(dir.path(), "data.csv");
    let out = dir.path().join("out");
    assert_eq!(compare_into(&data, &out).status.code(), Some(0));
    std::fs::set_permissions(&out, std::fs::Permissions::from_mode(0o555)).unwrap();
    refused(
        dir.path(),
        &["compare", "cv", s(&data), "-f", "kf", "-o", s(&out)],
        &["read-only (mode 0555)"],
    );
    std::fs::set_permissions(&out, std::fs::Permissions::from_mode(0o755)).unwrap();
    // A read-only parent: no new entry is made there.
    let locked = dir.path().join("locked");
    std::fs::create_dir(&locked).unwrap();
    std::fs::set_permissions(&locked, std::fs::Permissions::from_mode(0o555)).unwrap();
    refused(
        dir.path(),
        &[
            "compare",
            "cv",
            s(&data),
            "-f",
            "kf",
            "-o",
            s(&locked.join("new")),
        ],
        &["is read-only"],
    );
    // A read-only file for simulate.
    std::fs::set_permissions(&data, std::fs::Permissions::from_mode(0o444)).unwrap();
    refused(
        dir.path(),
        &[
            "simulate",
            "cv",
            "--steps",
            "5",
            "--seed",
            "1",
            "-o",
            s(&data),
        ],
        &["the file is read-only (mode 0444)"],
    );
    std::fs::set_permissions(&locked, std::fs::Permissions::from_mode(0o755)).unwrap();
}

#[test]
fn merge_never_writes_over_its_own_shards() {
    let dir = tempfile::tempdir().unwrap();
    let shard = |k: &str| {
        let out = dir.path().join(format!("shard{k}"));
        expect(
            &[
                "montecarlo",
                "cv",
                "--runs",
                "6",
                "--steps",
                "20",
                "-f",
                "kf",
                "--shard",
                &format!("{k}/2"),
                "-o",
                s(&out),
            ],
            0,
        );
        out
    };
    let (a, b) = (shard("1"), shard("2"));
    refused(
        dir.path(),
        &["merge", s(&a), s(&b), "-o", s(&a)],
        &["the shard", "is the output directory itself"],
    );
    refused(
        dir.path(),
        &["merge", s(&a), s(&b), "-o", s(dir.path())],
        &["the shard", "lies inside the output directory"],
    );
}

#[test]
fn a_campaign_refused_for_its_output_starts_nothing() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("mc");
    let campaign = [
        "montecarlo",
        "cv",
        "--runs",
        "50",
        "--steps",
        "20",
        "-f",
        "kf",
        "-o",
        s(&out),
    ];
    std::fs::create_dir(&out).unwrap();
    std::fs::write(out.join("results.txt"), "mine\n").unwrap();
    refused(dir.path(), &campaign, &["results.txt"]);
    assert!(!dir.path().join("mc.checkpoint").exists());
    // A checkpoint directory holding something of the user's is not Sightline's either.
    std::fs::remove_dir_all(&out).unwrap();
    let checkpoint = dir.path().join("mc.checkpoint");
    std::fs::create_dir(&checkpoint).unwrap();
    std::fs::write(checkpoint.join("todo.txt"), "mine\n").unwrap();
    refused(
        dir.path(),
        &campaign,
        &[
            "mc.checkpoint",
            "todo.txt",
            "not a checkpoint Sightline keeps",
        ],
    );
}

#[test]
fn an_earlier_output_is_replaced_whole_with_no_debris() {
    let dir = tempfile::tempdir().unwrap();
    let data = simulate(dir.path(), "data.csv");
    let out = dir.path().join("out");
    assert_eq!(compare_into(&data, &out).status.code(), Some(0));
    std::fs::set_permissions(&out, std::fs::Permissions::from_mode(0o750)).unwrap();
    let first = json(&out.join("manifest.json"));
    let other = simulate(dir.path(), "other.csv");
    let run = sightline(&["compare", "cv", s(&other), "-f", "ukf", "-o", s(&out)]);
    assert_eq!(run.status.code(), Some(0), "{}", stderr(&run));
    let listing = names(&snapshot(dir.path()))
        .into_iter()
        .map(String::from)
        .collect::<Vec<_>>();
    assert_eq!(
        listing,
        [
            "data.csv",
            "other.csv",
            "out/",
            "out/estimates.csv",
            "out/manifest.json",
            "out/report.html",
            "out/summary.json"
        ],
        "no *.old, *.prev or temporary left"
    );
    assert_ne!(json(&out.join("manifest.json")), first);
    // The user's permissions on the directory stay.
    let mode = std::fs::metadata(&out).unwrap().permissions().mode() & 0o777;
    assert_eq!(mode, 0o750);
    // The manifest lists exactly the files, with their sizes and SHA-256 (as sha256sum gives).
    let manifest = json(&out.join("manifest.json"));
    assert_eq!(manifest["format"], "sightline-output-manifest/1");
    for f in manifest["files"].as_array().unwrap() {
        let name = f["name"].as_str().unwrap();
        let bytes = std::fs::read(out.join(name)).unwrap();
        assert_eq!(f["bytes"].as_u64().unwrap(), bytes.len() as u64, "{name}");
        let sum = Command::new("sha256sum")
            .arg(out.join(name))
            .output()
            .expect("sha256sum (GNU coreutils) runs");
        let hex = String::from_utf8_lossy(&sum.stdout);
        assert_eq!(
            f["sha256"].as_str().unwrap(),
            hex.split_whitespace().next().unwrap()
        );
    }
}

#[test]
fn a_failing_command_leaves_the_disk_as_it_found_it() {
    let dir = tempfile::tempdir().unwrap();
    let data = simulate(dir.path(), "data.csv");
    let out = dir.path().join("out");
    assert_eq!(compare_into(&data, &out).status.code(), Some(0));
    // A dataset that turns bad at row 150: the comparison fails after it started writing.
    let text = std::fs::read_to_string(&data).unwrap();
    let mut lines: Vec<String> = text.lines().map(String::from).collect();
    lines[150] = "oops,1,2,3".into();
    let bad = dir.path().join("bad.csv");
    std::fs::write(&bad, lines.join("\n") + "\n").unwrap();
    let before = snapshot(dir.path());
    for target in [out.clone(), dir.path().join("new/deeper/out")] {
        let run = sightline(&["compare", "cv", s(&bad), "-f", "kf", "-o", s(&target)]);
        assert_eq!(run.status.code(), Some(2), "{}", stderr(&run));
        assert!(stderr(&run).contains("bad.csv:151:"), "{}", stderr(&run));
        assert!(
            before == snapshot(dir.path()),
            "a failed compare left a trace"
        );
    }
}

#[test]
fn single_file_outputs_stream_follow_links_and_never_replace_special_files() {
    let dir = tempfile::tempdir().unwrap();
    let reference = std::fs::read(simulate(dir.path(), "reference.csv")).unwrap();
    let args = |o: &str| {
        vec!["simulate", "cv", "--steps", "200", "--seed", "3", "-o", o]
            .into_iter()
            .map(String::from)
            .collect::<Vec<_>>()
    };
    // `-` and /dev/stdout pipe the CSV.
    for o in ["-", "/dev/stdout"] {
        let out = Command::new(env!("CARGO_BIN_EXE_sightline"))
            .args(args(o))
            .current_dir(dir.path())
            .output()
            .unwrap();
        assert_eq!(out.status.code(), Some(0));
        assert!(
            out.stdout == reference,
            "-o {o} does not stream the dataset"
        );
    }
    assert_eq!(
        names(&snapshot(dir.path())),
        ["reference.csv"],
        "no file for -o -"
    );
    // A FIFO is streamed into and stays a FIFO.
    let fifo = dir.path().join("pipe");
    let made = Command::new("mkfifo").arg(&fifo).status().unwrap();
    assert!(made.success());
    let reader = Command::new("cat")
        .arg(&fifo)
        .stdout(Stdio::piped())
        .spawn()
        .unwrap();
    expect(
        &args(s(&fifo))
            .iter()
            .map(String::as_str)
            .collect::<Vec<_>>(),
        0,
    );
    let got = reader.wait_with_output().unwrap().stdout;
    assert!(got == reference, "the FIFO did not receive the dataset");
    let kind = std::fs::symlink_metadata(&fifo).unwrap().file_type();
    assert!(kind.is_fifo(), "the FIFO was replaced");
    // A character device is written into, not replaced.
    expect(
        &args("/dev/null")
            .iter()
            .map(String::as_str)
            .collect::<Vec<_>>(),
        0,
    );
    assert!(
        std::fs::metadata("/dev/null")
            .unwrap()
            .file_type()
            .is_char_device()
    );
    // A symbolic link is followed: its target is replaced, the link stays.
    let target = dir.path().join("target.csv");
    std::fs::write(&target, "old\n").unwrap();
    std::fs::set_permissions(&target, std::fs::Permissions::from_mode(0o600)).unwrap();
    let link = dir.path().join("link.csv");
    std::os::unix::fs::symlink("target.csv", &link).unwrap();
    expect(
        &args(s(&link))
            .iter()
            .map(String::as_str)
            .collect::<Vec<_>>(),
        0,
    );
    assert!(
        std::fs::symlink_metadata(&link)
            .unwrap()
            .file_type()
            .is_symlink()
    );
    assert!(std::fs::read(&target).unwrap() == reference);
    // The replaced file keeps the permissions the user gave it.
    let mode = std::fs::metadata(&target).unwrap().permissions().mode() & 0o777;
    assert_eq!(mode, 0o600);
    // A dangling link: the file is created where it points.
    let dangling = dir.path().join("dangling.csv");
    std::os::unix::fs::symlink("made.csv", &dangling).unwrap();
    expect(
        &args(s(&dangling))
            .iter()
            .map(String::as_str)
            .collect::<Vec<_>>(),
        0,
    );
    assert!(std::fs::read(dir.path().join("made.csv")).unwrap() == reference);
    // A directory is never replaced by a file.
    let sub = dir.path().join("sub");
    std::fs::create_dir(&sub).unwrap();
    refused(
        dir.path(),
        &args(s(&sub)).iter().map(String::as_str).collect::<Vec<_>>(),
        &["it is a directory"],
    );
}

#[test]
fn write_errors_are_exit_2_with_the_path() {
    // /dev/full fails every write with ENOSPC (Linux's full(4) device).
    let out = sightline(&[
        "simulate",
        "cv",
        "--steps",
        "100",
        "--seed",
        "1",
        "-o",
        "/dev/full",
    ]);
    let err = stderr(&out);
    assert_eq!(out.status.code(), Some(2), "{err}");
    assert!(
        err.contains("cannot write /dev/full") && err.contains("No space left"),
        "{err}"
    );
    // A path through a regular file.
    let dir = tempfile::tempdir().unwrap();
    let file = dir.path().join("plain");
    std::fs::write(&file, "x").unwrap();
    let inside = file.join("out.csv");
    let out = sightline(&[
        "simulate",
        "cv",
        "--steps",
        "5",
        "--seed",
        "1",
        "-o",
        s(&inside),
    ]);
    assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
    assert!(stderr(&out).contains(s(&file)), "{}", stderr(&out));
}

/// Runs `args` under `umask`, in `dir`.
fn with_umask(umask: &str, dir: &Path, args: &[&str]) {
    let status = Command::new("sh")
        .arg("-c")
        .arg(format!("umask {umask} && exec \"$0\" \"$@\""))
        .arg(env!("CARGO_BIN_EXE_sightline"))
        .args(args)
        .current_dir(dir)
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .status()
        .unwrap();
    assert!(status.success(), "sightline {args:?} under umask {umask}");
}

fn mode(p: &Path) -> u32 {
    std::fs::metadata(p).unwrap().permissions().mode() & 0o777
}

#[test]
fn new_files_get_the_mode_the_umask_gives_for_every_command() {
    // POSIX: a new file's mode is 0666 & !umask, a new directory's 0777 & !umask.
    for (umask, file, dirmode) in [("022", 0o644, 0o755), ("027", 0o640, 0o750)] {
        let dir = tempfile::tempdir().unwrap();
        let d = dir.path();
        with_umask(
            umask,
            d,
            &[
                "simulate", "cv", "--steps", "100", "--seed", "1", "-o", "data.csv",
            ],
        );
        with_umask(umask, d, &["demo", "-o", "demo"]);
        with_umask(
            umask,
            d,
            &["compare", "cv", "data.csv", "-f", "kf", "-o", "cmp"],
        );
        with_umask(
            umask,
            d,
            &[
                "tune", "cv", "data.csv", "-f", "kf", "--param", "q", "-o", "tuned",
            ],
        );
        for k in ["1", "2"] {
            with_umask(
                umask,
                d,
                &[
                    "montecarlo",
                    "cv",
                    "--runs",
                    "4",
                    "--steps",
                    "20",
                    "-f",
                    "kf",
                    "--shard",
                    &format!("{k}/2"),
                    "-o",
                    &format!("mc{k}"),
                ],
            );
        }
        with_umask(umask, d, &["merge", "mc1", "mc2", "-o", "merged"]);
        assert_eq!(mode(&d.join("data.csv")), file, "simulate, umask {umask}");
        for out in ["demo", "cmp", "tuned", "mc1", "merged"] {
            assert_eq!(mode(&d.join(out)), dirmode, "{out}/, umask {umask}");
            for e in std::fs::read_dir(d.join(out)).unwrap() {
                let p = e.unwrap().path();
                assert_eq!(mode(&p), file, "{}, umask {umask}", p.display());
            }
        }
        assert!(d.join("demo/data.csv").exists());
    }
}
