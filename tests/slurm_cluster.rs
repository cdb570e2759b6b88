//! The cluster example end to end on a real Slurm: `examples/cluster/submit.sh` submits a
//! sharded campaign as a job array plus a dependent merge job; one task is cancelled with
//! `scancel` mid-run (Slurm sends SIGTERM), its finished runs stay in its checkpoint, and the
//! task resubmitted alone resumes from them; the merged result equals the unsharded run's bit
//! for bit (timings aside).
//!
//! Needs a running Slurm (Debian packages `slurm-wlm` and `munge`): `scripts/test` installs and
//! starts a single-node cluster and exports its `SLURM_CONF`; run by hand, the test also finds
//! that cluster's configuration in `/var/lib/sightline-test-slurm/`. Without one the test fails
//! with a message saying so — it never skips.

#![cfg(unix)]

mod common_cli;

use std::path::{Path, PathBuf};
use std::process::{Command, Output};
use std::time::{Duration, Instant};

use common_cli::{json, s, without_timings};

/// Where `scripts/test` keeps its single-node cluster's configuration.
const SCRIPT_CONF: &str = "/var/lib/sightline-test-slurm/slurm.conf";

/// Runs a Slurm command with the test cluster's configuration.
fn slurm(program: &str, args: &[&str]) -> Output {
    let mut cmd = Command::new(program);
    cmd.args(args);
    if std::env::var_os("SLURM_CONF").is_none() && Path::new(SCRIPT_CONF).exists() {
        cmd.env("SLURM_CONF", SCRIPT_CONF);
    }
    cmd.output().unwrap_or_else(|e| {
        panic!(
            "`{program}` cannot be run ({e}): the cluster test needs Slurm (Debian packages \
             slurm-wlm and munge) with a running controller and node; `scripts/test` installs \
             and starts a single-node cluster"
        )
    })
}

fn text(out: &Output) -> String {
    format!(
        "{}{}",
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    )
}

/// `JobState` of a job (or array task `ID_K`) as `scontrol` reports it.
fn job_state(id: &str) -> String {
    let out = slurm("scontrol", &["show", "job", "-o", id]);
    let all = text(&out);
    all.split_whitespace()
        .find_map(|w| w.strip_prefix("JobState="))
        .unwrap_or("UNKNOWN")
        .to_string()
}

/// Waits until `done()` holds, failing after `limit` with `what` and the cluster's queue.
fn wait_for(what: &str, limit: Duration, mut done: impl FnMut() -> bool) {
    let started = Instant::now();
    while !done() {
        if started.elapsed() > limit {
            let queue = text(&slurm("squeue", &[]));
            panic!("timed out after {limit:?} waiting for {what}; squeue:\n{queue}");
        }
        std::thread::sleep(Duration::from_millis(200));
    }
}

fn ended(state: &str) -> bool {
    !matches!(
        state,
        "PENDING"
            | "RUNNING"
            | "CONFIGURING"
            | "COMPLETING"
            | "REQUEUED"
            | "RESIZING"
            | "SUSPENDED"
    )
}

/// The campaign: long enough per task (several seconds on two cores) to be cancelled mid-run.
const RUNS: &str = "1200";
const STEPS: &str = "200";
const SEED: &str = "7";
const FILTERS: [&str; 3] = ["kf", "ukf", "pf:particles=1000"];
/// Sparse sensors and a `--set`, so that the merge must also carry the shards' settings.
const SET: &str = "q=0.5";
const EVERY: &str = "2";
const DROPOUT: &str = "0.1";

fn submit(out: &Path, tasks: Option<&str>) -> (String, String) {
    let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("examples/cluster/submit.sh");
    let mut cmd = Command::new(&script);
    if let Some(t) = tasks {
        cmd.args(["--tasks", t]);
    }
    cmd.env("SIGHTLINE", env!("CARGO_BIN_EXE_sightline"))
        .env("MODEL", "cv")
        .env("RUNS", RUNS)
        .env("STEPS", STEPS)
        .env("SEED", SEED)
        .env("SHARDS", "3")
        .env("FILTERS", FILTERS.join(" "))
        .env("SETS", SET)
        .env("EVERY", EVERY)
        .env("DROPOUT", DROPOUT)
        .env("OUT", out);
    if std::env::var_os("SLURM_CONF").is_none() && Path::new(SCRIPT_CONF).exists() {
        cmd.env("SLURM_CONF", SCRIPT_CONF);
    }
    let done = cmd.output().expect("submit.sh runs");
    let all = text(&done);
    assert!(done.status.success(), "submit.sh failed:\n{all}");
    let id = |key: &str| {
        all.lines()
            .find_map(|l| l.strip_prefix(key))
            .map(|v| v.trim().to_string())
            .unwrap_or_else(|| panic!("submit.sh printed no '{key}' line:\n{all}"))
    };
    (id("array job: "), id("merge job: "))
}

fn covered_runs(partial: &Path) -> u64 {
    json(partial)["covered"]
        .as_array()
        .unwrap()
        .iter()
        .map(|r| r[1].as_u64().unwrap() - r[0].as_u64().unwrap())
        .sum()
}

#[test]
fn a_sharded_campaign_on_slurm_survives_a_cancelled_task_and_merges_to_the_unsharded_result() {
    let sbatch = slurm("sbatch", &["--version"]);
    assert!(
        sbatch.status.success(),
        "sbatch does not run: {}",
        text(&sbatch)
    );
    let nodes = text(&slurm("sinfo", &["-h", "-o", "%T"]));
    assert!(
        nodes.lines().any(|l| ["idle", "mixed", "allocated"]
            .iter()
            .any(|s| l.starts_with(s))),
        "no Slurm node is up (sinfo says {nodes:?}); start the cluster (`scripts/test` starts a \
         single-node one)"
    );

    let work = tempfile::tempdir().unwrap();
    // The unsharded reference, run directly.
    let reference = work.path().join("reference");
    let mut args = vec![
        "montecarlo",
        "cv",
        "--runs",
        RUNS,
        "--steps",
        STEPS,
        "--seed",
        SEED,
        "--set",
        SET,
        "--every",
        EVERY,
        "--dropout",
        DROPOUT,
        "-o",
        s(&reference),
    ];
    for f in FILTERS {
        args.extend(["-f", f]);
    }
    common_cli::expect(&args, 0);

    let campaign: PathBuf = work.path().join("campaign");
    let (array, first_merge) = submit(&campaign, None);
    let task2 = format!("{array}_2");
    let checkpoint = campaign.join("shard-2.checkpoint").join("partial.json");
    // Cancel task 2 once it has saved some finished runs, while it still runs.
    wait_for(
        "task 2 to save a checkpoint",
        Duration::from_secs(180),
        || checkpoint.exists() || ended(&job_state(&task2)),
    );
    assert_eq!(
        job_state(&task2),
        "RUNNING",
        "task 2 ended before it could be cancelled mid-run"
    );
    let cancel = slurm("scancel", &[&task2]);
    assert!(cancel.status.success(), "scancel: {}", text(&cancel));
    wait_for("task 2 to end", Duration::from_secs(60), || {
        ended(&job_state(&task2))
    });
    assert_eq!(job_state(&task2), "CANCELLED");
    let log = std::fs::read_to_string(campaign.join("logs/task-2.log")).unwrap();
    assert!(
        log.contains("interrupted (SIGTERM)") && log.contains("run the same command again"),
        "task 2's log does not show a safe stop on SIGTERM:\n{log}"
    );
    assert!(
        !campaign.join("shard-2").exists(),
        "a cancelled task wrote its output"
    );
    let kept = covered_runs(&checkpoint);
    assert!(
        kept > 0 && kept < 400,
        "the checkpoint of the cancelled task covers {kept} of its 400 runs"
    );
    // The first merge job can never run now; Slurm drops it (--kill-on-invalid-dep).
    wait_for(
        "the first merge job to be dropped",
        Duration::from_secs(120),
        || ended(&job_state(&first_merge)),
    );
    assert_ne!(job_state(&first_merge), "COMPLETED");

    // Resubmitted alone, task 2 resumes; a new merge job follows it and the other tasks.
    let (_again, merge) = submit(&campaign, Some("2"));
    wait_for("the merge job", Duration::from_secs(300), || {
        ended(&job_state(&merge))
    });
    let merge_log = std::fs::read_to_string(campaign.join("logs/merge.log")).unwrap_or_default();
    assert_eq!(job_state(&merge), "COMPLETED", "merge log:\n{merge_log}");
    let log = std::fs::read_to_string(campaign.join("logs/task-2.log")).unwrap();
    assert!(
        log.contains(&format!(
            "resuming from {}",
            s(checkpoint.parent().unwrap())
        )) && log.contains(&format!("{kept} of 400 runs already done")),
        "the resubmitted task did not resume from its checkpoint:\n{log}"
    );
    assert!(
        !checkpoint.parent().unwrap().exists(),
        "checkpoint left after completion"
    );

    // Bit for bit the unsharded result, timings aside.
    let merged = campaign.join("merged");
    for name in ["summary.json", "partial.json"] {
        assert_eq!(
            without_timings(&json(&merged.join(name))),
            without_timings(&json(&reference.join(name))),
            "{name} of the merge differs from the unsharded run's"
        );
    }
}
