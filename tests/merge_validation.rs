//! `merge` trusts nothing: a tampered, truncated or inconsistent `partial.json` is refused with
//! exit code 2 naming the file and the first inconsistency; campaigns are described in words;
//! shard-count mismatches, shards given twice and missing shards are each reported as such; an
//! empty shard says so. Facts checked: the counting identities of a campaign's totals (every
//! covered run is either finished or failed for each filter; sums of squares are never
//! negative; one value per step) — common practice for aggregated statistics.

mod common_cli;

use std::path::{Path, PathBuf};

use common_cli::{expect, json, s, sightline, snapshot};
use sightline::eval::campaign::{PARTIAL_FORMAT, Totals};
use sightline::eval::exact_sum::ExactSum;
use sightline::eval::partial;

fn shard(dir: &Path, name: &str, k: &str, seed: &str) -> PathBuf {
    shard_with(dir, name, k, seed, &[])
}

/// [`shard`] with `extra` options.
fn shard_with(dir: &Path, name: &str, k: &str, seed: &str, extra: &[&str]) -> PathBuf {
    let out = dir.join(name);
    let mut args = vec![
        "montecarlo",
        "cv",
        "--runs",
        "10",
        "--steps",
        "20",
        "-f",
        "kf",
        "-f",
        "ukf",
        "--seed",
        seed,
        "--shard",
        k,
        "-o",
        s(&out),
    ];
    args.extend(extra);
    expect(&args, 0);
    out
}

/// A copy of shard `from` as `name`, whose `partial.json` is `edit`ed as text.
fn tampered_text(
    dir: &Path,
    from: &Path,
    name: &str,
    edit: impl FnOnce(String) -> String,
) -> PathBuf {
    let to = dir.join(name);
    std::fs::create_dir_all(&to).unwrap();
    let text = std::fs::read_to_string(from.join("partial.json")).unwrap();
    std::fs::write(to.join("partial.json"), edit(text)).unwrap();
    to
}

/// A copy of shard `from` whose totals are changed by `edit` and sealed again with a valid
/// content hash, so that only the consistency checks can tell.
fn tampered(dir: &Path, from: &Path, name: &str, edit: impl FnOnce(&mut Totals)) -> PathBuf {
    tampered_text(dir, from, name, |text| {
        let mut totals = partial::from_json(&text).unwrap();
        edit(&mut totals);
        partial::to_json(&totals).unwrap()
    })
}

/// `merge a b -o out` is refused with exit code 2, a message naming `named` and holding
/// `needle`, and nothing changed.
fn refused(dir: &Path, a: &Path, b: &Path, named: &Path, needle: &str) {
    let before = snapshot(dir);
    let out = dir.join("merged");
    let run = sightline(&["merge", s(a), s(b), "-o", s(&out)]);
    let err = String::from_utf8_lossy(&run.stderr);
    assert_eq!(run.status.code(), Some(2), "{err}");
    assert!(
        err.contains(s(named)),
        "the message does not name {}: {err}",
        named.display()
    );
    assert!(err.contains(needle), "lacks {needle:?}: {err}");
    assert!(!err.contains("CampaignSpec"), "a debug dump: {err}");
    assert!(before == snapshot(dir), "a refused merge changed something");
}

#[test]
fn tampered_truncated_and_inconsistent_partials_are_refused_naming_the_file() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let (a, b) = (shard(d, "a", "1/2", "1"), shard(d, "b", "2/2", "1"));
    // The genuine pair merges, into the totals of no shard: `shard` and the settings' shard
    // both cleared, which the merged file's own validation accepts.
    expect(&["merge", s(&a), s(&b), "-o", s(&d.join("ok"))], 0);
    let merged = partial::read(&d.join("ok/partial.json")).unwrap();
    assert_eq!(merged.shard, None);
    let settings = merged
        .settings
        .expect("the merged totals keep the settings");
    assert_eq!(settings.shard, None);
    assert_eq!(settings.runs, Some(10));
    std::fs::remove_dir_all(d.join("ok")).unwrap();
    let bad = |name: &str| d.join(name).join("partial.json");

    // Changed bytes with the old hash.
    let t = tampered_text(d, &b, "hash", |t| {
        t.replacen("\"ok_runs\":5", "\"ok_runs\":6", 1)
    });
    refused(d, &a, &t, &bad("hash"), "does not match its content_sha256");
    let t = tampered_text(d, &b, "nohash", |t| {
        let i = t.find("\"content_sha256\"").unwrap();
        let j = i + t[i..].find(',').unwrap() + 1;
        format!("{}{}", &t[..i], &t[j..])
    });
    refused(d, &a, &t, &bad("nohash"), "has no content_sha256");
    // Cut anywhere (inside a string, a number, between members): the file ends early.
    for (i, eighths) in [1, 3, 4, 5, 7].into_iter().enumerate() {
        let name = format!("cut{i}");
        let t = tampered_text(d, &b, &name, |t| {
            let mut at = t.len() * eighths / 8;
            while !t.is_char_boundary(at) {
                at -= 1;
            }
            t[..at].to_string()
        });
        refused(d, &a, &t, &bad(&name), "ends early");
    }
    // Formats of earlier versions (/1 without a content hash, /2 without settings) are named.
    for old in ["1", "2"] {
        let name = format!("old{old}");
        let t = tampered_text(d, &b, &name, |t| {
            t.replace(
                PARTIAL_FORMAT,
                &format!("sightline-montecarlo-partial/{old}"),
            )
        });
        refused(d, &a, &t, &bad(&name), "written by an older Sightline");
    }
    let t = tampered_text(d, &b, "new", |t| {
        t.replace(PARTIAL_FORMAT, "sightline-montecarlo-partial/9")
    });
    refused(d, &a, &t, &bad("new"), "is not one this Sightline reads");

    // Resealed, so that only the consistency checks see it.
    let t = tampered(d, &b, "counts", |t| t.filters[0].ok_runs += 1);
    refused(
        d,
        &a,
        &t,
        &bad("counts"),
        "filter 'kf': 6 finished and 0 failed runs, but the file covers 5 runs (5..10)",
    );
    let t = tampered(d, &b, "removed", |t| {
        t.filters.remove(1);
    });
    refused(
        d,
        &a,
        &t,
        &bad("removed"),
        "filter 'ukf' of the campaign has no totals",
    );
    let t = tampered(d, &b, "twice", |t| {
        let f = t.filters[0].clone();
        t.filters[1] = f;
    });
    refused(d, &a, &t, &bad("twice"), "filter 'kf' has totals 2 times");
    let t = tampered(d, &b, "short", |t| {
        t.filters[1].nees_step.truncate(15);
    });
    refused(
        d,
        &a,
        &t,
        &bad("short"),
        "filter 'ukf': 15 per-step NEES values for a campaign of 20 steps",
    );
    let t = tampered(d, &b, "negative", |t| {
        let mut minus = ExactSum::default();
        minus.add(-1.0);
        t.filters[0].sse[1] = minus;
    });
    refused(
        d,
        &a,
        &t,
        &bad("negative"),
        "the squared-error sum of state 'vel' is negative",
    );
    let t = tampered(d, &b, "outside", |t| t.covered = vec![[4, 10]]);
    refused(
        d,
        &a,
        &t,
        &bad("outside"),
        "lie outside shard 2/2 (runs 5..10)",
    );
    let t = tampered(d, &b, "nis", |t| t.filters[0].nis_count_step[3] = 99);
    refused(
        d,
        &a,
        &t,
        &bad("nis"),
        "step 3 counts 99 runs with a measurement",
    );

    // The settings are covered by the hash, and must be those of the campaign and shard.
    let t = tampered_text(d, &b, "settings_hash", |t| {
        t.replacen(
            "\"model_description\":\"",
            "\"model_description\":\"edited ",
            1,
        )
    });
    refused(
        d,
        &a,
        &t,
        &bad("settings_hash"),
        "does not match its content_sha256",
    );
    let t = tampered(d, &b, "settings_seed", |t| {
        t.settings.as_mut().unwrap().seed = 7;
    });
    refused(
        d,
        &a,
        &t,
        &bad("settings_seed"),
        "its settings record --seed '7', but its totals are of --seed '1'",
    );
    let t = tampered(d, &b, "settings_shard", |t| {
        t.settings.as_mut().unwrap().shard = None;
    });
    refused(
        d,
        &a,
        &t,
        &bad("settings_shard"),
        "its settings record --shard 'nothing', but its totals are of --shard '2/2'",
    );
    let t = tampered(d, &b, "settings_every", |t| {
        t.settings.as_mut().unwrap().every = Some(3);
    });
    refused(
        d,
        &a,
        &t,
        &bad("settings_every"),
        "its settings record --every '3', but its totals are of --every '1'",
    );
    // --every and --dropout must be possible.
    let t = tampered(d, &b, "every", |t| t.campaign.every = 0);
    refused(d, &a, &t, &bad("every"), "a measurement every 0 rows");
    let t = tampered(d, &b, "dropout", |t| t.campaign.dropout = 1.5);
    refused(d, &a, &t, &bad("dropout"), "with probability 1.5");
}

#[test]
fn mismatched_shards_are_reported_as_what_they_are() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let a = shard(d, "a", "1/2", "1");
    // A shard of another --shard count.
    let c = shard(d, "c", "3/3", "1");
    refused(
        d,
        &a,
        &c,
        &c.join("partial.json"),
        "different --shard counts (2 and 3)",
    );
    // The same shard twice, as a copy and as the same directory.
    let copy = d.join("copy");
    std::fs::create_dir(&copy).unwrap();
    std::fs::copy(a.join("partial.json"), copy.join("partial.json")).unwrap();
    refused(
        d,
        &a,
        &copy,
        &copy,
        "are both shard 1/2 (the same shard given twice)",
    );
    refused(
        d,
        &a,
        &a,
        &a,
        "are the same directory (a shard given twice)",
    );
    // Another campaign: what differs, and both campaigns in words.
    let other = shard(d, "other", "2/2", "2");
    refused(
        d,
        &a,
        &other,
        &other.join("partial.json"),
        "they differ in --seed (1 there, 2 here)",
    );
    refused(
        d,
        &a,
        &other,
        &a.join("partial.json"),
        "model cv, 10 runs × 20 steps, seed 2, filters kf, ukf, no --set",
    );
    // Other sensors (--every, --dropout): named, and both campaigns say which they had.
    let sparse = shard_with(
        d,
        "sparse",
        "2/2",
        "1",
        &["--every", "2", "--dropout", "0.1"],
    );
    refused(
        d,
        &a,
        &sparse,
        &sparse.join("partial.json"),
        "they differ in --every (1 there, 2 here), --dropout (0 there, 0.1 here)",
    );
    refused(
        d,
        &a,
        &sparse,
        &sparse.join("partial.json"),
        "no --set, a measurement every 2 rows, dropout 0.1 (Sightline ",
    );
    // A missing shard is named.
    let run = sightline(&["merge", s(&a), "-o", s(&d.join("m"))]);
    let err = String::from_utf8_lossy(&run.stderr);
    assert_eq!(run.status.code(), Some(2), "{err}");
    assert!(
        err.contains("runs 5..10") && err.contains("shard 2/2 missing"),
        "{err}"
    );
}

#[test]
fn an_empty_shard_says_so_and_still_merges() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let mut parts = Vec::new();
    // Three shards of a two-run campaign: the first holds no run (⌊0·2/3⌋..⌊1·2/3⌋ = 0..0).
    for k in 1..=3 {
        let out = d.join(format!("s{k}"));
        let run = sightline(&[
            "montecarlo",
            "cv",
            "--runs",
            "2",
            "--steps",
            "20",
            "-f",
            "kf",
            "--shard",
            &format!("{k}/3"),
            "-o",
            s(&out),
        ]);
        let text = format!(
            "{}{}",
            String::from_utf8_lossy(&run.stdout),
            String::from_utf8_lossy(&run.stderr)
        );
        assert_eq!(run.status.code(), Some(0), "{text}");
        assert!(!text.contains("no error recorded"), "{text}");
        if k == 1 {
            assert!(text.contains("shard 1/3 holds no run"), "{text}");
            let summary = json(&out.join("summary.json"));
            assert!(
                summary["verdict"]
                    .as_str()
                    .unwrap()
                    .contains("holds no run"),
                "{summary}"
            );
        }
        parts.push(out);
    }
    let merged = d.join("merged");
    let mut args = vec!["merge"];
    args.extend(parts.iter().map(|p| s(p)));
    args.extend(["-o", s(&merged)]);
    expect(&args, 0);
    assert_eq!(json(&merged.join("summary.json"))["runs"], 2);
}
