//! `summary.json`: the machine-readable result of `compare` and `montecarlo`, with the key names
//! of the command and file contract (design notes §4).
//!
//! Contract keys per filter: `label`, `kind`, `status` (`ok`/`failed`/`diverged`), `error`,
//! `rmse` (state → value, model order), `rmse_all`, `rmse_all_ci` (95 %, [`crate::intervals`]),
//! `anees`, `nees_in_band`, `anis`, `nis_in_band`,
//! `log_likelihood`, `seconds_per_step`, `smoothed_rmse_all` (with `compare --smooth` also
//! `smoothed_rmse`, state → value, and `smoother`); `montecarlo` adds `runs`,
//! `failures`, `rmse_all_spread` and `anees_band`, and at top level `runs` and
//! `pcrlb_rmse_all`. At top level `best` lists the filters not distinguishable at 95 % from the
//! most accurate (paired; by log-likelihood without truth, `best_by` says which), and every result carries `settings` (how to rerun it, see
//! [`crate::settings`]) and `ignored_columns` (the dataset's columns the model did not read).
//! Extra keys (bands, whiteness, diagnostics, criteria) add detail without
//! changing any contract key.

use std::fmt;

use serde::de::{MapAccess, Visitor};
use serde::ser::SerializeMap;
use serde::{Deserialize, Deserializer, Serialize, Serializer};

use crate::metrics::WhitenessSummary;
use crate::settings::Settings;

/// A map from state name to value that keeps model order in JSON.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct StateMap(pub Vec<(String, f64)>);

impl Serialize for StateMap {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        let mut map = s.serialize_map(Some(self.0.len()))?;
        for (k, v) in &self.0 {
            map.serialize_entry(k, v)?;
        }
        map.end()
    }
}

impl<'de> Deserialize<'de> for StateMap {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl<'de> Visitor<'de> for V {
            type Value = StateMap;
            fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
                f.write_str("a map from state name to number")
            }
            fn visit_map<A: MapAccess<'de>>(self, mut a: A) -> Result<StateMap, A::Error> {
                let mut out = Vec::new();
                while let Some((k, v)) = a.next_entry::<String, f64>()? {
                    out.push((k, v));
                }
                Ok(StateMap(out))
            }
        }
        d.deserialize_map(V)
    }
}

/// A filter's own counters, as reported.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Serialize, Deserialize)]
pub struct DiagnosticsSummary {
    /// Updates skipped by χ² gating.
    pub gated: u64,
    /// Covariance repairs.
    pub repaired: u64,
    /// Particle re-draws after a collapse.
    pub redraws: u64,
    /// Resampling events.
    pub resamples: u64,
    /// Iterations of iterated updates.
    pub iterations: u64,
    /// Extra stages of tempered particle-filter updates (absent in files written before the
    /// option existed).
    #[serde(default)]
    pub tempered: u64,
}

impl From<sightline_filters::Diagnostics> for DiagnosticsSummary {
    fn from(d: sightline_filters::Diagnostics) -> Self {
        DiagnosticsSummary {
            gated: d.gated,
            repaired: d.repaired,
            redraws: d.redraws,
            resamples: d.resamples,
            iterations: d.iterations,
            tempered: d.tempered,
        }
    }
}

impl DiagnosticsSummary {
    /// Adds another run's counters.
    pub fn add(&mut self, other: &DiagnosticsSummary) {
        self.gated += other.gated;
        self.repaired += other.repaired;
        self.redraws += other.redraws;
        self.resamples += other.resamples;
        self.iterations += other.iterations;
        self.tempered += other.tempered;
    }
}

/// Status of a filter.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Status {
    /// Ran to the end.
    Ok,
    /// Stopped by an error.
    Failed,
    /// Ran to the end but lost the state ([`crate::divergence`]): never in `best`.
    Diverged,
}

impl Status {
    /// Whether the filter ran to the end (ok or diverged): its numbers are reported.
    pub fn finished(self) -> bool {
        self != Status::Failed
    }
}

/// A filter compared with the reference of `best` (the most accurate, or the best fit), paired.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct VersusBest {
    /// The reference filter's label.
    pub reference: String,
    /// `rmse_all` (relative difference `rmse_all / reference − 1`) or `log_likelihood`
    /// (difference `log_likelihood − reference`).
    pub measure: String,
    /// The point estimate of the difference.
    pub difference: f64,
    /// Its 95 % interval.
    pub interval: [f64; 2],
    /// Whether it is indistinguishable from the reference at 95 %.
    pub tied: bool,
}

/// One filter's entry in `summary.json`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FilterSummary {
    /// The spec string as given.
    pub label: String,
    /// Filter kind.
    pub kind: String,
    /// `ok`, `failed` or `diverged`.
    pub status: Status,
    /// The error, if it failed (Monte Carlo: the first failure, with its run).
    pub error: Option<String>,
    /// RMSE per state in model order (null without truth or after a failure).
    pub rmse: Option<StateMap>,
    /// √(mean over steps and state components of the squared error).
    pub rmse_all: Option<f64>,
    /// 95 % interval of `rmse_all`: moving-block bootstrap on one dataset, Student-t over runs
    /// in a campaign ([`crate::intervals`]); null without truth.
    #[serde(default)]
    pub rmse_all_ci: Option<[f64; 2]>,
    /// Row at which the filter diverged (Monte Carlo: in the first run that diverged).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub diverged_at: Option<u64>,
    /// Why it is declared diverged (Monte Carlo: the first run's reason, with the run).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub divergence: Option<String>,
    /// Monte Carlo: runs in which the filter diverged.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub diverged_runs: Option<u64>,
    /// The paired comparison with the reference of `best` (null for the reference itself and
    /// for filters that failed or diverged).
    #[serde(default)]
    pub versus_best: Option<VersusBest>,
    /// Average NEES.
    pub anees: Option<f64>,
    /// Share of steps whose NEES (Monte Carlo: whose M-run average NEES) is inside its 95 % band.
    pub nees_in_band: Option<f64>,
    /// Average NIS.
    pub anis: Option<f64>,
    /// Share of updates whose NIS (Monte Carlo: M-run average NIS) is inside its 95 % band.
    pub nis_in_band: Option<f64>,
    /// Total log-likelihood (Monte Carlo: mean over runs).
    pub log_likelihood: Option<f64>,
    /// Wall-clock seconds per predict + update (a measurement: it varies between runs).
    pub seconds_per_step: f64,
    /// RMSE of the smoothed estimates (all rows and states); null unless `--smooth` ran this
    /// filter's smoother on data with truth.
    pub smoothed_rmse_all: Option<f64>,
    /// RMSE of the smoothed estimates per state in model order; null like `smoothed_rmse_all`.
    #[serde(default)]
    pub smoothed_rmse: Option<StateMap>,
    /// The smoother run with `--smooth` (`rts`, `sigma-point-rts`, `ensemble-rts`, `ffbsi`), or
    /// null if none ran.
    #[serde(default)]
    pub smoother: Option<String>,
    /// 95 % band of `anees`: χ²(K·n)/K with K = steps (`compare`, time average) or K = runs
    /// (`montecarlo`, Bar-Shalom et al. 2001 §5.4).
    pub anees_band: Option<[f64; 2]>,
    /// Single dataset: shares of steps whose NEES lies below and above the χ²(n) band (2.5 %
    /// each for a consistent filter).
    #[serde(default)]
    pub nees_tails: Option<[f64; 2]>,
    /// 95 % band of `anis`, built the same way from the measurement components present.
    pub anis_band: Option<[f64; 2]>,
    /// Innovation whiteness (single dataset only).
    pub whiteness: Option<WhitenessSummary>,
    /// The filter's counters.
    pub diagnostics: DiagnosticsSummary,
    /// Monte Carlo: runs that finished and enter the averages.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub runs: Option<u64>,
    /// Monte Carlo: runs in which the filter failed.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub failures: Option<u64>,
    /// Monte Carlo: sample standard deviation over runs of each run's `rmse_all`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub rmse_all_spread: Option<f64>,
    /// Monte Carlo: mean over runs of each run's `rmse_all` (the centre of the spread).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub rmse_all_run_mean: Option<f64>,
}

/// `summary.json`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Summary {
    /// `compare` or `montecarlo`.
    pub command: String,
    /// Model name.
    pub model: String,
    /// Rows per dataset.
    pub steps: u64,
    /// How the result was made: enough to rerun it (absent in files written before it existed).
    #[serde(default)]
    pub settings: Option<Settings>,
    /// Columns of the dataset the model did not read (ignored with a warning).
    #[serde(default)]
    pub ignored_columns: Vec<String>,
    /// Whether accuracy could be measured (the data carried truth).
    pub truth: bool,
    /// The filters not distinguishable at 95 % from the most accurate one (paired), most
    /// accurate first; without truth, from the highest log-likelihood.
    #[serde(default)]
    pub best: Vec<String>,
    /// What `best` ranks by: `rmse_all` or `log_likelihood` (null when nothing could be
    /// ranked).
    #[serde(default)]
    pub best_by: Option<String>,
    /// What the verdict and report judged by.
    pub criteria: Vec<String>,
    /// One entry per filter, in spec order.
    pub filters: Vec<FilterSummary>,
    /// The short reasoned verdict.
    pub verdict: String,
    /// Monte Carlo: number of runs in the campaign.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub runs: Option<u64>,
    /// Monte Carlo: RMSE bound from the posterior Cramér–Rao bound; null until it is computed
    /// for the plant (`Some(None)` serialises as `null`).
    #[serde(
        default,
        skip_serializing_if = "Option::is_none",
        deserialize_with = "present_or_null"
    )]
    pub pcrlb_rmse_all: Option<Option<f64>>,
    /// Monte Carlo: the Cramér–Rao bound per state, comparable with each filter's `rmse`.
    #[serde(
        default,
        skip_serializing_if = "Option::is_none",
        deserialize_with = "state_map_or_null"
    )]
    pub pcrlb_rmse: Option<Option<StateMap>>,
}

fn state_map_or_null<'de, D: Deserializer<'de>>(
    d: D,
) -> Result<Option<Option<StateMap>>, D::Error> {
    Ok(Some(Option::<StateMap>::deserialize(d)?))
}

fn present_or_null<'de, D: Deserializer<'de>>(d: D) -> Result<Option<Option<f64>>, D::Error> {
    Ok(Some(Option::<f64>::deserialize(d)?))
}

impl Summary {
    /// Pretty JSON text.
    pub fn to_json(&self) -> String {
        serde_json::to_string_pretty(self).unwrap_or_else(|_| "{}".into())
    }
}

/// Criteria judged by, as listed in the report and `summary.json`.
pub fn criteria(truth: bool, campaign: bool) -> Vec<String> {
    let mut c = Vec::new();
    if truth {
        c.push("accuracy: RMSE against the true state".to_string());
        c.push(if campaign {
            "state consistency: ANEES over runs against χ²(M·n)/M, share of steps inside"
                .to_string()
        } else {
            "state consistency: share of steps with NEES below / above the χ²(n) band".to_string()
        });
    }
    c.push(if campaign {
        "innovation consistency: NIS averaged over runs against χ²(M·m)/M".to_string()
    } else {
        "innovation consistency: time-average NIS against χ²(Σm)/N".to_string()
    });
    if !campaign {
        c.push("innovation whiteness: normalised autocorrelation, ±1.96/√N (Mehra 1970)".into());
    }
    c.push("predictive fit: total log-likelihood".to_string());
    c.push("cost: wall-clock seconds per step".to_string());
    c
}
