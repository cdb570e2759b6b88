//! The observability check of `compare` and `montecarlo`: along the data's trajectory, are all
//! states seen by the sensors the data carries? If not, the report gains an "Observability"
//! section ([`crate::observability_report::section`]) and, in `compare`, the verdict warns about
//! every filter that reports a small uncertainty on a state the sensors cannot see.
//!
//! The trajectory is the data's truth, else the noise-free prediction from the prior mean
//! through the data's times and inputs (as `observe DATA.csv` follows it), over the first
//! [`CHECK_ROWS`] rows (bounded cost and memory whatever the length of the data); a component
//! the data leaves empty carries no information at that row. "Small" is measured against the
//! posterior Cramér–Rao bound along the same rows (prior, process noise and the data's sensors):
//! a filter whose reported standard deviation on a weakly or not observable state is below
//! [`OVERCONFIDENT`] times the bound claims a certainty no estimator can have from this data.
//! It is read at the last plotted row within the window.
//!
//! Plants of more than [`MAX_STATES`] states are not checked (the campaigns' PCRLB limit): the
//! check's O(n³) work per row would then dwarf the filters' own; `sightline observe` answers
//! for any size.

use crate::campaign::CampaignSpec;
use crate::dataset::read::RecordSource;
use crate::dataset::time::Clock;
use crate::dataset::{Dataset, Layout, Record};
use crate::error::Result;
use crate::observability::{Observability, Reading, TrajectorySource, sensor_set};
use crate::plant::AnyPlant;
use crate::runner::Series;
use crate::simulate::SimOptions;
use crate::summary::{Status, Summary};
use crate::verdict::sig;

/// Rows of the data the check follows.
pub const CHECK_ROWS: usize = 2000;

/// Largest state dimension checked (that of the campaigns' PCRLB).
pub const MAX_STATES: usize = crate::pcrlb::MAX_STATES;

/// A reported sd below this fraction of the bound's is a warning.
pub const OVERCONFIDENT: f64 = 0.5;

/// A [`RecordSource`] that passes its rows through and keeps the first `limit` of them.
pub struct Keeping<'a> {
    inner: &'a mut dyn RecordSource,
    rows: Vec<Record>,
    limit: usize,
}

impl<'a> Keeping<'a> {
    /// Passes `inner`'s rows through, keeping the first `limit`.
    pub fn new(inner: &'a mut dyn RecordSource, limit: usize) -> Self {
        Keeping {
            inner,
            rows: Vec::new(),
            limit,
        }
    }

    /// The rows kept.
    pub fn into_rows(self) -> Vec<Record> {
        self.rows
    }
}

impl RecordSource for Keeping<'_> {
    fn layout(&self) -> &Layout {
        self.inner.layout()
    }
    fn next_into(&mut self, record: &mut Record) -> Result<bool> {
        let more = self.inner.next_into(record)?;
        if more && self.rows.len() < self.limit {
            self.rows.push(record.clone());
        }
        Ok(more)
    }
    fn time_text(&self) -> Option<&str> {
        self.inner.time_text()
    }
    fn clock(&self) -> Clock {
        self.inner.clock()
    }
}

/// What the check found along the rows.
#[derive(Debug, Clone)]
pub struct Check {
    /// The analysis with every sensor the data carries.
    pub result: Observability,
    /// Time of each row followed.
    times: Vec<f64>,
    /// The PCRLB as standard deviations per row and state (empty without one).
    bound_sd: Vec<Vec<f64>>,
}

/// Follows `rows` (the data's first rows, in `layout`) with every sensor of the plant.
pub fn check(plant: &dyn AnyPlant, layout: &Layout, rows: Vec<Record>) -> Result<Check> {
    let data = Dataset {
        layout: layout.clone(),
        records: rows,
    };
    let (trajectory, all_truth) = plant.fill_states(&data)?;
    // The sensors the data carries: a column left empty throughout is no sensor.
    let present: Vec<usize> = (0..plant.measurements().len())
        .filter(|&i| {
            trajectory
                .records
                .iter()
                .any(|r| r.y.get(i).is_some_and(|y| !y.is_nan()))
        })
        .collect();
    let mut notes = Vec::new();
    let (result, bound) = sensor_set(plant, &trajectory, &present, &mut notes)?;
    let bound_sd = bound
        .map(|b| {
            b.variance
                .iter()
                .map(|row| row.iter().map(|v| v.max(0.0).sqrt()).collect())
                .collect()
        })
        .unwrap_or_default();
    Ok(Check {
        result: Observability {
            model: plant.name().to_string(),
            steps: trajectory.records.len(),
            trajectory: if all_truth {
                TrajectorySource::Truth
            } else {
                TrajectorySource::Prediction
            },
            result,
            sensor_sets: Vec::new(),
            notes,
            settings: None,
        },
        times: trajectory.records.iter().map(|r| r.t).collect(),
        bound_sd,
    })
}

/// The "Observability" section of a campaign's report, or `None` when every state is well
/// observable: along the nominal run (the noise-free simulation from the prior mean, with the
/// campaign's `--every`; a random `--dropout` thins the information without changing which
/// states it reaches), over at most [`CHECK_ROWS`] rows. The campaign keeps no filter's
/// standard deviations, so it has no warnings.
pub fn campaign_section(plant: &dyn AnyPlant, spec: &CampaignSpec) -> Option<String> {
    if plant.states().len() > MAX_STATES {
        return None;
    }
    let options = SimOptions {
        noise_free: true,
        every: spec.every,
        ..SimOptions::default()
    };
    let steps = usize::try_from(spec.steps).ok()?.min(CHECK_ROWS);
    let data = plant.simulate(steps, spec.seed, &options).ok()?;
    let mut found = check(plant, &data.layout, data.records).ok()?;
    found.result.trajectory = TrajectorySource::Simulation;
    crate::observability_report::section(&found.result, &[])
}

/// The verdict's warnings: each filter that reports, at the last plotted row within the
/// window, a standard deviation below [`OVERCONFIDENT`] × the PCRLB's on a state that is not
/// well observable.
pub fn warnings(check: &Check, series: &Series, summary: &Summary) -> Vec<String> {
    let set = &check.result.result;
    let weak: Vec<usize> = (0..set.states.len())
        .filter(|&i| set.states[i].reading != Reading::Well)
        .collect();
    let Some(end) = check.times.last() else {
        return Vec::new();
    };
    if weak.is_empty() || check.bound_sd.is_empty() {
        return Vec::new();
    }
    // The last plotted row inside the window, and its row number there.
    let Some(r) = series.t.iter().rposition(|t| t <= end) else {
        return Vec::new();
    };
    let Ok(row) = check.times.binary_search_by(|t| t.total_cmp(&series.t[r])) else {
        return Vec::new();
    };
    let (f, n) = (series.filters, series.states);
    let mut out = Vec::new();
    for (index, filter) in summary.filters.iter().enumerate().take(f) {
        if filter.status == Status::Failed {
            continue;
        }
        for &i in &weak {
            let (Some(sd), Some(bound)) = (
                series.sd.get((r * f + index) * n + i),
                check.bound_sd.get(row).and_then(|b| b.get(i)),
            ) else {
                continue;
            };
            if sd.is_finite() && *sd < OVERCONFIDENT * bound {
                out.push(format!(
                    "Warning: {} reports sd {} on {} at t = {}, a state the sensors cannot see \
                     along this data ({}); no estimator can do better than sd {} there \
                     (Cramér–Rao bound), so that confidence is not earned by the data.",
                    filter.label,
                    sig(*sd, 3),
                    set.states[i].name,
                    series.t[r],
                    set.states[i].reading.words(),
                    sig(*bound, 3)
                ));
            }
        }
    }
    out
}
