//! `best`: which filters are indistinguishable from the most accurate one, paired.
//!
//! The reference is the finished, non-diverged filter with the smallest `rmse_all` (without
//! truth: the largest log-likelihood). Every other such filter is compared with it, paired
//! ([`crate::intervals`]): on one dataset by the moving-block bootstrap of the per-step
//! differences, in a campaign by the per-run differences. `best` is the reference and the
//! filters whose 95 % interval of the difference holds zero (or that agree to rounding), in
//! order of the point estimate. Failed and diverged filters are never ranked.

use crate::intervals::{Paired, StepSums};
use crate::summary::{FilterSummary, Status, VersusBest};

/// What one filter brings to a ranking on one dataset: its per-step squared errors and
/// log-likelihood increments.
pub struct StepRecord<'a> {
    /// Per-step squared errors summed over states.
    pub squared_errors: &'a StepSums,
    /// Per-step log-likelihood increments.
    pub log_likelihoods: &'a StepSums,
}

/// The measure a ranking uses.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Measure {
    /// Smaller `rmse_all` is better.
    Rmse,
    /// Larger log-likelihood is better.
    LogLikelihood,
}

impl Measure {
    /// The JSON name (`best_by`).
    pub fn name(self) -> &'static str {
        match self {
            Measure::Rmse => "rmse_all",
            Measure::LogLikelihood => "log_likelihood",
        }
    }

    fn value(self, f: &FilterSummary) -> Option<f64> {
        match self {
            Measure::Rmse => f.rmse_all,
            Measure::LogLikelihood => f.log_likelihood,
        }
    }
}

/// Index of the reference: the best value of `measure` among the `ok` filters.
fn reference(filters: &[FilterSummary], measure: Measure) -> Option<usize> {
    let mut best: Option<(usize, f64)> = None;
    for (i, f) in filters.iter().enumerate() {
        if f.status != Status::Ok {
            continue;
        }
        let Some(v) = measure.value(f).filter(|v| v.is_finite()) else {
            continue;
        };
        let better = match (best, measure) {
            (None, _) => true,
            (Some((_, b)), Measure::Rmse) => v < b,
            (Some((_, b)), Measure::LogLikelihood) => v > b,
        };
        if better {
            best = Some((i, v));
        }
    }
    best.map(|(i, _)| i)
}

/// Fills `versus_best` of each filter with `compare(i, reference)` and returns `best` and the
/// measure's name.
fn rank_with(
    filters: &mut [FilterSummary],
    measure: Measure,
    compare: &dyn Fn(usize, usize) -> Option<Paired>,
) -> (Vec<String>, Option<String>) {
    let Some(r) = reference(filters, measure) else {
        return (Vec::new(), None);
    };
    let reference_label = filters[r].label.clone();
    let mut group: Vec<(f64, String)> = vec![(0.0, reference_label.clone())];
    for (i, f) in filters.iter_mut().enumerate() {
        if i == r || f.status != Status::Ok {
            continue;
        }
        let Some(p) = compare(i, r) else { continue };
        if p.tied {
            // Order by closeness to the reference.
            group.push((p.difference.abs(), f.label.clone()));
        }
        f.versus_best = Some(VersusBest {
            reference: reference_label.clone(),
            measure: measure.name().to_string(),
            difference: p.difference,
            interval: p.interval,
            tied: p.tied,
        });
    }
    group.sort_by(|a, b| a.0.total_cmp(&b.0));
    (
        group.into_iter().map(|(_, l)| l).collect(),
        Some(measure.name().to_string()),
    )
}

/// Ranks the filters of one dataset (`records` in the same order as `filters`): by `rmse_all`
/// with truth, by log-likelihood without. Returns `best` and `best_by`.
pub fn rank_single(
    filters: &mut [FilterSummary],
    records: &[StepRecord<'_>],
    truth: bool,
) -> (Vec<String>, Option<String>) {
    let measure = if truth {
        Measure::Rmse
    } else {
        Measure::LogLikelihood
    };
    rank_with(filters, measure, &|i, r| match measure {
        Measure::Rmse => {
            crate::intervals::paired_rmse(records[i].squared_errors, records[r].squared_errors)
        }
        Measure::LogLikelihood => crate::intervals::paired_log_likelihood(
            records[i].log_likelihoods,
            records[r].log_likelihoods,
        ),
    })
}

/// Ranks a campaign's filters by `rmse_all` with `compare(i, reference)` giving the paired
/// per-run comparison. Returns `best` and `best_by`.
pub fn rank_campaign(
    filters: &mut [FilterSummary],
    compare: &dyn Fn(usize, usize) -> Option<Paired>,
) -> (Vec<String>, Option<String>) {
    rank_with(filters, Measure::Rmse, compare)
}
