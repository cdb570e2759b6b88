//! The `partial.json` file: a campaign's exact totals ([`Totals`]), sealed with a content hash
//! and checked on every read, so that `merge` and a resumed campaign use nothing they have not
//! verified.
//!
//! The file is the compact JSON of the totals with one more member after `format`:
//! `content_sha256`, the SHA-256 (hex) of the file's compact JSON *without* that member. Reading
//! ([`from_json`]) checks, in order: that the text is JSON; the format version
//! ([`PARTIAL_FORMAT`]); the content hash; then that the totals are consistent ([`validate`]):
//! the run ranges sorted, disjoint and inside the campaign (and the shard), `--every` and
//! `--dropout` possible, the recorded `settings` those of the campaign and shard, every filter
//! of the campaign present once, each filter's finished and failed runs adding up to the runs
//! covered, sums that cannot be negative not negative, per-step arrays of the campaign's
//! length. The first problem found is the error.

use std::path::Path;

use serde::Deserialize;

use crate::campaign::{CampaignSpec, MAX_STEPS, PARTIAL_FORMAT, Shard, Totals};
use crate::error::{Error, Result};
use crate::exact_sum::ExactSum;
use crate::output::sha256_hex;
use crate::settings::Settings;

/// The formats of earlier versions, with what became of them.
const RETIRED_FORMATS: &[(&str, &str)] = &[
    (
        "sightline-montecarlo-partial/1",
        "an older Sightline, before partial results carried a content hash",
    ),
    (
        "sightline-montecarlo-partial/2",
        "an older Sightline, before partial results recorded their settings, --every and \
         --dropout",
    ),
];

/// `totals` as the text of a `partial.json` (sealed with its content hash).
pub fn to_json(totals: &Totals) -> Result<String> {
    let body = serde_json::to_string(totals)
        .map_err(|e| Error::Run(format!("encoding partial.json: {e}")))?;
    let head = format!("{{\"format\":{},", json_string(&totals.format));
    let Some(rest) = body.strip_prefix(&head) else {
        return Err(Error::Run(
            "encoding partial.json: the format member does not come first".into(),
        ));
    };
    Ok(format!(
        "{head}\"content_sha256\":\"{}\",{rest}",
        sha256_hex(body.as_bytes())
    ))
}

fn json_string(s: &str) -> String {
    serde_json::to_string(s).unwrap_or_else(|_| format!("\"{s}\""))
}

#[derive(Deserialize)]
struct Head {
    format: Option<String>,
}

#[derive(Deserialize)]
struct Sealed {
    content_sha256: Option<String>,
    #[serde(flatten)]
    totals: Totals,
}

/// Whether `line`:`column` (1-based, as serde_json counts: bytes) is the last byte of `text`
/// but trailing white space: an error there is a file cut short (e.g. inside a number), not a
/// malformed one.
fn at_end(text: &str, line: usize, column: usize) -> bool {
    let start: usize = text
        .split_inclusive('\n')
        .take(line.saturating_sub(1))
        .map(str::len)
        .sum();
    start + column >= text.trim_end().len()
}

/// Reads the text of a `partial.json`: the totals, or the first problem found (see the module
/// docs for the checks).
pub fn from_json(text: &str) -> std::result::Result<Totals, String> {
    let head: Head = serde_json::from_str(text).map_err(|e| {
        if e.is_eof() || at_end(text, e.line(), e.column()) {
            format!(
                "it ends early at line {}, column {} (truncated?)",
                e.line(),
                e.column()
            )
        } else {
            format!("it is not valid JSON: {e}")
        }
    })?;
    let Some(format) = head.format else {
        return Err("it has no \"format\" member: it is not a Sightline partial result".into());
    };
    if format != PARTIAL_FORMAT {
        if let Some((_, by)) = RETIRED_FORMATS.iter().find(|(f, _)| *f == format) {
            return Err(format!(
                "it has format '{format}', written by {by}; rerun the campaign (or shard) that \
                 wrote it with this version"
            ));
        }
        return Err(format!(
            "its format '{format}' is not one this Sightline reads ('{PARTIAL_FORMAT}'; written \
             by a newer version?)"
        ));
    }
    let sealed: Sealed = serde_json::from_str(text)
        .map_err(|e| format!("it is not a Monte Carlo partial result: {e}"))?;
    let Some(stated) = sealed.content_sha256 else {
        return Err("it has no content_sha256".into());
    };
    let body = serde_json::to_string(&sealed.totals)
        .map_err(|e| format!("its totals cannot be encoded again: {e}"))?;
    if sha256_hex(body.as_bytes()) != stated {
        return Err(
            "its content does not match its content_sha256: the file was altered or damaged \
             after Sightline wrote it"
                .into(),
        );
    }
    validate(&sealed.totals)?;
    Ok(sealed.totals)
}

/// Reads and checks `path` (a `partial.json`); a problem is a usage error (exit code 2) naming
/// the file and the first inconsistency.
pub fn read(path: &Path) -> Result<Totals> {
    let bytes = std::fs::read(path).map_err(|source| Error::Read {
        path: path.to_path_buf(),
        source,
    })?;
    let text = String::from_utf8(bytes).map_err(|e| {
        Error::Usage(format!(
            "{}: it is not UTF-8 text (byte {}); it is not a partial result Sightline wrote",
            path.display(),
            e.utf8_error().valid_up_to()
        ))
    })?;
    from_json(&text).map_err(|problem| Error::Usage(format!("{}: {problem}", path.display())))
}

fn negative(sum: &ExactSum) -> bool {
    sum.value() < 0.0
}

fn ranges_text(covered: &[[u64; 2]]) -> String {
    if covered.is_empty() {
        return "none".into();
    }
    covered
        .iter()
        .map(|[a, b]| format!("{a}..{b}"))
        .collect::<Vec<_>>()
        .join(", ")
}

/// Checks that `totals` are consistent; the error is the first inconsistency, in words.
pub fn validate(t: &Totals) -> std::result::Result<(), String> {
    let c = &t.campaign;
    if c.runs == 0 || c.steps == 0 || c.steps > MAX_STEPS {
        return Err(format!(
            "its campaign has {} runs of {} steps (expected at least 1 run and 1 to {MAX_STEPS} \
             steps)",
            c.runs, c.steps
        ));
    }
    if c.filters.is_empty() {
        return Err("its campaign lists no filter".into());
    }
    for (i, label) in c.filters.iter().enumerate() {
        if c.filters[..i].contains(label) {
            return Err(format!("its campaign lists filter '{label}' twice"));
        }
    }
    if c.every == 0 {
        return Err("its campaign keeps a measurement every 0 rows (--every is at least 1)".into());
    }
    if !(0.0..=1.0).contains(&c.dropout) {
        return Err(format!(
            "its campaign drops measurements with probability {} (--dropout is in [0, 1])",
            c.dropout
        ));
    }
    let n = t.states.len();
    if n == 0 {
        return Err("it names no state".into());
    }
    let mut next = 0;
    for &[a, b] in &t.covered {
        if a >= b || a < next || b > c.runs {
            return Err(format!(
                "its covered runs ({}) are not sorted, disjoint, non-empty ranges within the \
                 campaign's {} runs",
                ranges_text(&t.covered),
                c.runs
            ));
        }
        next = b;
    }
    if let Some(s) = t.shard {
        if s.index == 0 || s.index > s.count {
            return Err(format!("its shard {}/{} does not exist", s.index, s.count));
        }
        let r = s.range(c.runs);
        if t.covered.iter().any(|&[a, b]| a < r.start || b > r.end) {
            return Err(format!(
                "its covered runs ({}) lie outside shard {}/{} (runs {}..{})",
                ranges_text(&t.covered),
                s.index,
                s.count,
                r.start,
                r.end
            ));
        }
    }
    if let Some(settings) = &t.settings {
        validate_settings(settings, c, t.shard)?;
    }
    let covered = t.runs_covered();
    let steps = c.steps as usize;
    let is_covered = |run: u64| t.covered.iter().any(|&[a, b]| a <= run && run < b);
    for label in &c.filters {
        let count = t.filters.iter().filter(|f| &f.label == label).count();
        if count == 0 {
            return Err(format!(
                "filter '{label}' of the campaign has no totals (removed?)"
            ));
        }
        if count > 1 {
            return Err(format!("filter '{label}' has totals {count} times"));
        }
    }
    for (f, label) in t.filters.iter().zip(&c.filters) {
        if &f.label != label {
            return Err(format!(
                "the totals of filter '{}' are not in the campaign's filter order ('{label}' \
                 expected there)",
                f.label
            ));
        }
    }
    if let Some(extra) = t.filters.get(c.filters.len()) {
        return Err(format!(
            "filter '{}' has totals but is not one of the campaign's filters",
            extra.label
        ));
    }
    for f in &t.filters {
        let at = |what: String| format!("filter '{}': {what}", f.label);
        if f.ok_runs.checked_add(f.failures) != Some(covered) {
            return Err(at(format!(
                "{} finished and {} failed runs, but the file covers {covered} runs ({})",
                f.ok_runs,
                f.failures,
                ranges_text(&t.covered)
            )));
        }
        if f.errors.len() as u64 > f.failures {
            return Err(at(format!(
                "{} errors recorded for {} failed runs",
                f.errors.len(),
                f.failures
            )));
        }
        if let Some(e) = f.errors.iter().find(|e| !is_covered(e.run)) {
            return Err(at(format!(
                "an error of run {}, which the file does not cover",
                e.run
            )));
        }
        if f.sse.len() != n {
            return Err(at(format!(
                "{} squared-error sums for {n} states",
                f.sse.len()
            )));
        }
        for (what, len) in [
            ("NEES", f.nees_step.len()),
            ("NIS", f.nis_step.len()),
            ("NIS degrees of freedom", f.nis_dof_step.len()),
            ("NIS counts", f.nis_count_step.len()),
        ] {
            if len != steps {
                return Err(at(format!(
                    "{len} per-step {what} values for a campaign of {steps} steps (truncated?)"
                )));
            }
        }
        if let Some(i) = f.sse.iter().position(negative) {
            return Err(at(format!(
                "the squared-error sum of state '{}' is negative",
                t.states.get(i).map_or("?", String::as_str)
            )));
        }
        for (what, sum) in [
            ("the sum of run RMSEs", &f.rmse_run),
            ("the sum of squared run RMSEs", &f.rmse_run_sq),
            ("the time spent", &f.seconds),
        ] {
            if negative(sum) {
                return Err(at(format!("{what} is negative")));
            }
        }
        if let Some(k) = f.nees_step.iter().position(negative) {
            return Err(at(format!("the NEES sum of step {k} is negative")));
        }
        if let Some(k) = f.nis_step.iter().position(negative) {
            return Err(at(format!("the NIS sum of step {k} is negative")));
        }
        let m = t.measurements as u64;
        for (k, (&count, &dof)) in f.nis_count_step.iter().zip(&f.nis_dof_step).enumerate() {
            if count > f.ok_runs || dof < count || dof > count.saturating_mul(m) {
                return Err(at(format!(
                    "step {k} counts {count} runs with a measurement and {dof} degrees of \
                     freedom, impossible for {} finished runs of {m} measurement components",
                    f.ok_runs
                )));
            }
        }
        if f.timed_steps > covered.saturating_mul(c.steps) {
            return Err(at(format!(
                "{} steps timed in {covered} runs of {} steps",
                f.timed_steps, c.steps
            )));
        }
    }
    if let Some(p) = &t.pcrlb {
        if p.prior_cov.len() != n * n {
            return Err(format!(
                "the Cramér–Rao bound's prior covariance has {} entries for {n} states",
                p.prior_cov.len()
            ));
        }
        if p.terms.len() != steps || p.terms.iter().any(|row| row.len() != 3 * n * n) {
            return Err(format!(
                "the Cramér–Rao bound's terms are not {steps} steps of {} values (truncated?)",
                3 * n * n
            ));
        }
        if p.runs > covered || (p.error.is_none() && p.runs != covered) {
            return Err(format!(
                "the Cramér–Rao bound sums {} runs, but the file covers {covered}",
                p.runs
            ));
        }
    }
    Ok(())
}

/// Checks that the `settings` recorded with totals are those of their campaign `c` and `shard`
/// (a rerun from them must run the same campaign); the error names the first that is not.
fn validate_settings(
    settings: &Settings,
    c: &CampaignSpec,
    shard: Option<Shard>,
) -> std::result::Result<(), String> {
    let want = Settings::of_campaign(c, shard);
    fn shown<T: ToString>(v: Option<T>) -> String {
        v.map_or_else(|| "nothing".into(), |v| v.to_string())
    }
    let pairs = [
        ("the command", settings.command.clone(), want.command),
        ("the model", settings.model.clone(), want.model),
        ("--set", settings.set.join(" "), want.set.join(" ")),
        ("--seed", settings.seed.to_string(), want.seed.to_string()),
        ("-f", settings.filters.join(", "), want.filters.join(", ")),
        ("--runs", shown(settings.runs), shown(want.runs)),
        ("--steps", shown(settings.steps), shown(want.steps)),
        ("--every", shown(settings.every), shown(want.every)),
        ("--dropout", shown(settings.dropout), shown(want.dropout)),
        (
            "--diffuse",
            settings.diffuse.join(" "),
            want.diffuse.join(" "),
        ),
        ("--shard", shown(settings.shard.as_ref()), shown(want.shard)),
    ];
    if let Some((what, a, b)) = pairs.into_iter().find(|(_, a, b)| a != b) {
        return Err(format!(
            "its settings record {what} '{a}', but its totals are of {what} '{b}'"
        ));
    }
    if settings.data.is_some() || settings.dataset.is_some() || settings.params.is_some() {
        return Err(
            "its settings record a dataset or tuned parameters, which a campaign has none of"
                .into(),
        );
    }
    Ok(())
}

/// A campaign in words, with the Sightline version that ran it when its settings say:
/// `model cv, 100 runs × 50 steps, seed 11, filters kf, ukf, --set q=0.1, a measurement every
/// 2 rows, dropout 0.1 (Sightline 0.1.0)`.
///
/// ```
/// use sightline_eval::campaign::{CampaignSpec, PARTIAL_FORMAT, Totals};
/// let totals = Totals {
///     format: PARTIAL_FORMAT.into(),
///     campaign: CampaignSpec {
///         model: "cv".into(),
///         set: vec!["q=0.1".into()],
///         runs: 100,
///         steps: 50,
///         seed: 11,
///         filters: vec!["kf".into(), "ukf".into()],
///         every: 2,
///         dropout: 0.1,
///         diffuse: vec![],
///     },
///     states: vec!["pos".into(), "vel".into()],
///     measurements: 1,
///     shard: None,
///     covered: vec![],
///     filters: vec![],
///     pcrlb: None,
///     settings: None,
///     pairs: vec![],
/// };
/// assert_eq!(
///     sightline_eval::partial::describe(&totals),
///     "model cv, 100 runs × 50 steps, seed 11, filters kf, ukf, --set q=0.1, a measurement \
///      every 2 rows, dropout 0.1"
/// );
/// ```
pub fn describe(totals: &Totals) -> String {
    let spec = &totals.campaign;
    let set = if spec.set.is_empty() {
        "no --set".to_string()
    } else {
        spec.set
            .iter()
            .map(|s| format!("--set {s}"))
            .collect::<Vec<_>>()
            .join(" ")
    };
    let every = match spec.every {
        1 => "a measurement every row".to_string(),
        k => format!("a measurement every {k} rows"),
    };
    let dropout = if spec.dropout == 0.0 {
        "no dropout".to_string()
    } else {
        format!("dropout {}", spec.dropout)
    };
    let version = totals
        .settings
        .as_ref()
        .map(|s| format!(" (Sightline {})", s.sightline_version))
        .unwrap_or_default();
    let diffuse = if spec.diffuse.is_empty() {
        String::new()
    } else {
        format!(", --diffuse {}", spec.diffuse.join(" "))
    };
    format!(
        "model {}, {} runs × {} steps, seed {}, filters {}, {set}, {every}, {dropout}{diffuse}{version}",
        spec.model,
        spec.runs,
        spec.steps,
        spec.seed,
        spec.filters.join(", ")
    )
}

/// What differs between the campaign `found` (in a file) and `wanted` (the command), each as
/// `--seed (11 there, 12 here)`; `runs` says whether a difference in `--runs` counts.
pub fn differences(found: &CampaignSpec, wanted: &CampaignSpec, runs: bool) -> Vec<String> {
    let mut out = Vec::new();
    let mut differ = |what: &str, a: String, b: String| {
        if a != b {
            out.push(format!("{what} ({a} there, {b} here)"));
        }
    };
    differ("the model", found.model.clone(), wanted.model.clone());
    let set = |s: &CampaignSpec| {
        if s.set.is_empty() {
            "none".to_string()
        } else {
            s.set.join(" ")
        }
    };
    differ("--set", set(found), set(wanted));
    if runs {
        differ("--runs", found.runs.to_string(), wanted.runs.to_string());
    }
    differ("--steps", found.steps.to_string(), wanted.steps.to_string());
    differ("--seed", found.seed.to_string(), wanted.seed.to_string());
    differ("-f", found.filters.join(", "), wanted.filters.join(", "));
    differ("--every", found.every.to_string(), wanted.every.to_string());
    differ(
        "--dropout",
        found.dropout.to_string(),
        wanted.dropout.to_string(),
    );
    let diffuse = |s: &CampaignSpec| {
        if s.diffuse.is_empty() {
            "none".to_string()
        } else {
            s.diffuse.join(" ")
        }
    };
    differ("--diffuse", diffuse(found), diffuse(wanted));
    out
}

/// The `sightline montecarlo` command (without `-o`) that runs the campaign `spec`, or `shard`
/// of it: every option that makes the campaign, `--set`, `--every` and `--dropout` included.
///
/// ```
/// use sightline_eval::campaign::{CampaignSpec, Shard};
/// let spec = CampaignSpec {
///     model: "cv".into(),
///     set: vec!["q=0.5".into()],
///     runs: 100,
///     steps: 50,
///     seed: 11,
///     filters: vec!["kf".into(), "pf:particles=500".into()],
///     every: 2,
///     dropout: 0.25,
///     diffuse: vec![],
/// };
/// assert_eq!(
///     sightline_eval::partial::command_line(&spec, Some(Shard { index: 2, count: 4 })),
///     "sightline montecarlo cv --runs 100 --steps 50 --seed 11 -f kf -f pf:particles=500 \
///      --set q=0.5 --every 2 --dropout 0.25 --shard 2/4"
/// );
/// ```
pub fn command_line(spec: &CampaignSpec, shard: Option<Shard>) -> String {
    Settings::of_campaign(spec, shard).command_line()
}
