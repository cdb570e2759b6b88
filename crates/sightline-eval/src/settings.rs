//! The `settings` object every result carries (`summary.json` of `compare`, `montecarlo` and
//! `merge`, `tuned.json`, the report): everything needed to rerun the result from its own
//! output — the command, model and its description, every `--set`, the seed, the filters, the
//! dataset-reading flags (time column, unit and zone, column map, missing tokens, ...), the
//! Monte Carlo set-up (`--runs`, `--steps`, `--every`, `--dropout`, `--shard`) and the Sightline
//! version. [`Settings::rerun_args`] turns it back into a command line.
//!
//! Built in one place ([`Settings::new`] plus the command's own fields) so that later options
//! add one field here.

use serde::{Deserialize, Serialize};

use crate::campaign::{CampaignSpec, Shard};
use crate::plant::AnyPlant;

/// The Sightline version that wrote a result.
pub const VERSION: &str = env!("CARGO_PKG_VERSION");

/// The dataset-reading flags of a command that read data.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct DatasetSettings {
    /// `--time`: name of the time column.
    pub time: String,
    /// `--time-unit` of a numeric time column (`s` when not given).
    pub time_unit: String,
    /// `--timezone` of date-times without offset.
    pub timezone: Option<String>,
    /// `--map SOURCE=TARGET` items, as given.
    pub map: Vec<String>,
    /// `--missing` tokens.
    pub missing: Vec<String>,
    /// `--strict-columns`.
    pub strict_columns: bool,
    /// `--accept-dt`.
    pub accept_dt: bool,
    /// `--nonfinite-as-missing`.
    pub nonfinite_as_missing: bool,
}

/// How a result was made (see the module docs).
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct Settings {
    /// The Sightline version.
    pub sightline_version: String,
    /// `compare`, `montecarlo`, `tune` or `observe` (a merged campaign keeps `montecarlo`).
    pub command: String,
    /// Model name.
    pub model: String,
    /// The model's one-line description.
    pub model_description: String,
    /// Every `--set NAME=VALUE`, as given.
    pub set: Vec<String>,
    /// `--seed`.
    pub seed: u64,
    /// The filter specs run (the labels), in order.
    pub filters: Vec<String>,
    /// The dataset path as given (`-` for standard input); commands that read data.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub data: Option<String>,
    /// The dataset-reading flags; commands that read data.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub dataset: Option<DatasetSettings>,
    /// `compare --smooth`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub smooth: Option<bool>,
    /// `tune --param` names.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub params: Option<Vec<String>>,
    /// `montecarlo --runs`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub runs: Option<u64>,
    /// `montecarlo --steps` (`observe --steps` when given).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub steps: Option<u64>,
    /// `montecarlo --every`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub every: Option<usize>,
    /// `montecarlo --dropout`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub dropout: Option<f64>,
    /// `--diffuse` states, as given (absent when none).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub diffuse: Vec<String>,
    /// `montecarlo --shard K/N` (absent for a whole or merged campaign).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub shard: Option<String>,
    /// `observe --sensors`, as given.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub sensors: Option<String>,
    /// `observe --compare-sensors`, as given.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub compare_sensors: Option<String>,
}

impl Settings {
    /// The settings common to every command: version, command, model, `--set`, seed, filters.
    pub fn new(command: &str, plant: &dyn AnyPlant, set: &[String], seed: u64) -> Self {
        Settings {
            sightline_version: VERSION.to_string(),
            command: command.to_string(),
            model: plant.name().to_string(),
            model_description: plant.description().to_string(),
            set: set.to_vec(),
            seed,
            ..Settings::default()
        }
    }

    /// The settings of the Monte Carlo campaign `spec` (or `shard` of it), made by this
    /// version; the model's description is left empty (the campaign does not hold it: the
    /// command adds it).
    pub fn of_campaign(spec: &CampaignSpec, shard: Option<Shard>) -> Self {
        Settings {
            sightline_version: VERSION.to_string(),
            command: "montecarlo".to_string(),
            model: spec.model.clone(),
            set: spec.set.clone(),
            seed: spec.seed,
            filters: spec.filters.clone(),
            runs: Some(spec.runs),
            steps: Some(spec.steps),
            every: Some(spec.every),
            dropout: Some(spec.dropout),
            diffuse: spec.diffuse.clone(),
            shard: shard.map(|s| s.to_string()),
            ..Settings::default()
        }
    }

    /// The command line (after `sightline`, without `-o`) that reruns this result; a dataset
    /// command reads `data` (the recorded path when `None`).
    ///
    /// ```
    /// use sightline_eval::settings::Settings;
    /// let s = Settings {
    ///     command: "montecarlo".into(),
    ///     model: "cv".into(),
    ///     set: vec!["q=0.5".into()],
    ///     seed: 3,
    ///     filters: vec!["kf".into()],
    ///     runs: Some(10),
    ///     steps: Some(50),
    ///     every: Some(2),
    ///     dropout: Some(0.1),
    ///     ..Settings::default()
    /// };
    /// assert_eq!(
    ///     s.rerun_args(None).join(" "),
    ///     "montecarlo cv --runs 10 --steps 50 --seed 3 -f kf --set q=0.5 --every 2 --dropout 0.1"
    /// );
    /// ```
    pub fn rerun_args(&self, data: Option<&str>) -> Vec<String> {
        let mut args = vec![self.command.clone(), self.model.clone()];
        if let Some(path) = data.or(self.data.as_deref()) {
            if self.dataset.is_some() {
                args.push(path.to_string());
            }
        }
        let mut flag = |name: &str, value: String| {
            args.push(name.to_string());
            args.push(value);
        };
        // A campaign's size first: it reads best in a resuming command.
        if let Some(runs) = self.runs {
            flag("--runs", runs.to_string());
        }
        if let Some(steps) = self.steps {
            flag("--steps", steps.to_string());
        }
        // `observe` draws no random numbers, so it has no seed.
        if self.command != "observe" {
            flag("--seed", self.seed.to_string());
        }
        for f in &self.filters {
            flag("-f", f.clone());
        }
        for s in &self.set {
            flag("--set", s.clone());
        }
        if let Some(d) = &self.dataset {
            flag("--time", d.time.clone());
            flag("--time-unit", d.time_unit.clone());
            if let Some(tz) = &d.timezone {
                flag("--timezone", tz.clone());
            }
            for m in &d.map {
                flag("--map", m.clone());
            }
            for m in &d.missing {
                flag("--missing", m.clone());
            }
        }
        for p in self.params.iter().flatten() {
            flag("--param", p.clone());
        }
        for d in &self.diffuse {
            flag("--diffuse", d.clone());
        }
        if let Some(every) = self.every {
            flag("--every", every.to_string());
        }
        if let Some(dropout) = self.dropout {
            flag("--dropout", dropout.to_string());
        }
        if let Some(shard) = &self.shard {
            flag("--shard", shard.clone());
        }
        if let Some(sensors) = &self.sensors {
            flag("--sensors", sensors.clone());
        }
        if let Some(sets) = &self.compare_sensors {
            flag("--compare-sensors", sets.clone());
        }
        if let Some(d) = &self.dataset {
            for (on, name) in [
                (d.strict_columns, "--strict-columns"),
                (d.accept_dt, "--accept-dt"),
                (d.nonfinite_as_missing, "--nonfinite-as-missing"),
            ] {
                if on {
                    args.push(name.to_string());
                }
            }
        }
        if self.smooth == Some(true) {
            args.push("--smooth".to_string());
        }
        args
    }

    /// The rerun command as one line for people, without `-o` (arguments quoted where a shell
    /// needs it).
    ///
    /// ```
    /// use sightline_eval::settings::Settings;
    /// let s = Settings {
    ///     command: "montecarlo".into(),
    ///     model: "cv".into(),
    ///     filters: vec!["ghkf:order=3|5".into()],
    ///     runs: Some(10),
    ///     steps: Some(50),
    ///     shard: Some("2/4".into()),
    ///     ..Settings::default()
    /// };
    /// assert_eq!(
    ///     s.command_line(),
    ///     "sightline montecarlo cv --runs 10 --steps 50 --seed 0 -f 'ghkf:order=3|5' --shard 2/4"
    /// );
    /// ```
    pub fn command_line(&self) -> String {
        let args: Vec<String> = self
            .rerun_args(None)
            .iter()
            .map(|a| shell_word(a))
            .collect();
        format!("sightline {}", args.join(" "))
    }

    /// [`Settings::command_line`] with `-o DIR`.
    pub fn rerun_line(&self) -> String {
        format!("{} -o DIR", self.command_line())
    }
}

/// `word` as a POSIX shell reads it back: as it is when it holds only characters no shell
/// treats specially, else single-quoted.
pub fn shell_word(word: &str) -> String {
    if !word.is_empty()
        && word
            .chars()
            .all(|c| c.is_ascii_alphanumeric() || "-_.=/:,+@%".contains(c))
    {
        word.to_string()
    } else {
        format!("'{}'", word.replace('\'', r"'\''"))
    }
}
