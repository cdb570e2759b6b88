//! The verdict: a few reasoned findings of one run — which filter was most accurate, which were
//! statistically inconsistent (over- or under-confident), what each cost — stated as findings
//! of this run, not as a universal ranking.
//!
//! Consistency is judged against the 95 % χ² band of the average statistic (Bar-Shalom, Li &
//! Kirubarajan 2001, §5.4): an average NEES (or NIS) above the band means the filter's covariance
//! understates its actual error (over-confident); below it, overstates it (under-confident).
//! Without truth the judgement rests on the NIS, the innovation whiteness (Mehra 1970) and the
//! log-likelihood.

use crate::summary::{FilterSummary, Status};

/// Accuracy within this relative margin of the best counts as "as accurate" (our own choice).
const CLOSE: f64 = 0.05;

/// A number with `digits` significant digits, in plain or scientific notation as fits.
pub fn sig(v: f64, digits: usize) -> String {
    if !v.is_finite() {
        return format!("{v}");
    }
    if v == 0.0 {
        return "0".into();
    }
    let magnitude = v.abs().log10().floor() as i32;
    if !(-3..6).contains(&magnitude) {
        return format!("{:.*e}", digits.saturating_sub(1), v);
    }
    let decimals = (digits as i32 - 1 - magnitude).max(0) as usize;
    format!("{v:.decimals$}")
}

/// Seconds as µs/ms/s with three significant digits.
pub fn duration(seconds: f64) -> String {
    if seconds < 1e-3 {
        format!("{} µs", sig(seconds * 1e6, 3))
    } else if seconds < 1.0 {
        format!("{} ms", sig(seconds * 1e3, 3))
    } else {
        format!("{} s", sig(seconds, 3))
    }
}

/// How a filter's average statistic sits against its band.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Consistency {
    /// Inside the band.
    Consistent,
    /// Above: the covariance understates the error.
    OverConfident,
    /// Below: the covariance overstates the error.
    UnderConfident,
    /// No statistic to judge.
    Unknown,
}

fn judge(value: Option<f64>, band: Option<[f64; 2]>) -> Consistency {
    match (value, band) {
        (Some(v), Some([_, hi])) if v > hi => Consistency::OverConfident,
        (Some(v), Some([lo, _])) if v < lo => Consistency::UnderConfident,
        (Some(_), Some(_)) => Consistency::Consistent,
        _ => Consistency::Unknown,
    }
}

/// Share of steps in one tail of the χ²(n) band beyond which a single run's NEES counts as
/// inconsistent: four times the 2.5 % a consistent filter puts there. This threshold is our own
/// choice: neighbouring steps' errors are correlated, so one run has no exact test of the NEES
/// (the time-average test is exact only for the white innovations, i.e. the NIS).
pub const TAIL_LIMIT: f64 = 0.10;

/// Factor above the upper end of its band at which a single run's ANEES, with consistent NEES
/// tails, is reported as dominated by a few outlying steps (our own choice: a mean ten times
/// the band's top cannot come from the band's 2.5 % upper tail).
pub const OUTLIER_DOMINATED: f64 = 10.0;

/// State consistency: over Monte Carlo runs the ANEES against χ²(M·n)/M; on one dataset the
/// shares of steps whose NEES falls below or above the χ²(n) band.
pub fn state_consistency(f: &FilterSummary, campaign: bool) -> Consistency {
    if campaign {
        return judge(f.anees, f.anees_band);
    }
    match f.nees_tails {
        Some([below, above]) if above > TAIL_LIMIT && above >= below => Consistency::OverConfident,
        Some([below, _]) if below > TAIL_LIMIT => Consistency::UnderConfident,
        Some(_) => Consistency::Consistent,
        None => Consistency::Unknown,
    }
}

/// Innovation consistency: the average NIS against its 95 % band.
pub fn innovation_consistency(f: &FilterSummary) -> Consistency {
    judge(f.anis, f.anis_band)
}

fn names(list: &[&FilterSummary]) -> String {
    list.iter()
        .map(|f| f.label.as_str())
        .collect::<Vec<_>>()
        .join(", ")
}

/// The verdict text for a set of filter results. `truth` says whether accuracy was measurable;
/// `runs` is the Monte Carlo run count (`None` for a single dataset); `steps` the rows per
/// dataset.
pub fn verdict(filters: &[FilterSummary], truth: bool, runs: Option<u64>, steps: u64) -> String {
    let mut lines: Vec<String> = Vec::new();
    let ok: Vec<&FilterSummary> = filters.iter().filter(|f| f.status == Status::Ok).collect();
    for f in filters.iter().filter(|f| f.status == Status::Failed) {
        lines.push(format!(
            "{} failed: {}.",
            f.label,
            f.error.as_deref().unwrap_or("no error recorded")
        ));
    }
    for f in ok.iter().filter(|f| f.failures.unwrap_or(0) > 0) {
        lines.push(format!(
            "{} failed in {} of {} runs ({}); its averages cover the other runs.",
            f.label,
            f.failures.unwrap_or(0),
            f.failures.unwrap_or(0) + f.runs.unwrap_or(0),
            f.error.as_deref().unwrap_or("no error recorded")
        ));
    }
    if ok.is_empty() {
        lines.push("No filter ran to the end on this data.".into());
        return lines.join("\n");
    }
    let campaign = runs.is_some();
    // Accuracy.
    let mut best_accuracy: Option<&FilterSummary> = None;
    if truth {
        best_accuracy = ok
            .iter()
            .copied()
            .filter(|f| f.rmse_all.is_some())
            .min_by(|a, b| {
                a.rmse_all
                    .partial_cmp(&b.rmse_all)
                    .unwrap_or(std::cmp::Ordering::Equal)
            });
        if let Some(best) = best_accuracy {
            let r = best.rmse_all.unwrap_or(f64::NAN);
            let close: Vec<&FilterSummary> = ok
                .iter()
                .copied()
                .filter(|f| f.label != best.label)
                .filter(|f| f.rmse_all.is_some_and(|x| x <= r * (1.0 + CLOSE)))
                .collect();
            let mut line = format!("Most accurate: {} (rmse_all {}).", best.label, sig(r, 3));
            if !close.is_empty() {
                line.push_str(&format!(
                    " Within {:.0} % of it: {}.",
                    CLOSE * 100.0,
                    names(&close)
                ));
            }
            lines.push(line);
        }
    }

    // Consistency.
    let band_text = |v: Option<f64>, b: Option<[f64; 2]>| {
        let b = b.unwrap_or([f64::NAN; 2]);
        format!(
            "{} vs band [{}, {}]",
            sig(v.unwrap_or(f64::NAN), 3),
            sig(b[0], 3),
            sig(b[1], 3)
        )
    };
    let state_text = |f: &FilterSummary, over: bool| {
        if campaign {
            format!("{} (ANEES {})", f.label, band_text(f.anees, f.anees_band))
        } else {
            let [below, above] = f.nees_tails.unwrap_or([f64::NAN; 2]);
            format!(
                "{} (NEES {} its χ² band on {} % of steps, 2.5 % expected)",
                f.label,
                if over { "above" } else { "below" },
                sig(100.0 * if over { above } else { below }, 2)
            )
        }
    };
    let mut state_ok: Vec<&FilterSummary> = Vec::new();
    let mut over = Vec::new();
    let mut under = Vec::new();
    if truth {
        for f in &ok {
            match state_consistency(f, campaign) {
                Consistency::Consistent => state_ok.push(*f),
                Consistency::OverConfident => over.push(*f),
                Consistency::UnderConfident => under.push(*f),
                Consistency::Unknown => {}
            }
        }
        if !state_ok.is_empty() {
            lines.push(format!(
                "State-consistent ({}): {}.",
                if campaign {
                    "ANEES inside its 95 % band"
                } else {
                    "NEES tails within 10 % of steps each"
                },
                names(&state_ok)
            ));
        }
        // One run's ANEES is a mean: a few steps with an enormous NEES (a particle cloud that
        // collapsed on the first sharp update, say) can push it far out of its band while the
        // tails stay normal. Say so rather than leave the table to contradict the judgement.
        if !campaign {
            for f in &state_ok {
                if let (Some(v), Some([lo, hi]), Some([_, above])) =
                    (f.anees, f.anees_band, f.nees_tails)
                {
                    if v > OUTLIER_DOMINATED * hi {
                        let hint = if f.kind == "pf" {
                            " For a particle filter, `temper=0.1` splits such updates."
                        } else {
                            ""
                        };
                        lines.push(format!(
                            "{}: ANEES {} is far above its band [{}, {}] yet only {} % of steps \
                             lie above the band: a few steps with a very large NEES dominate the \
                             mean (see its NEES plot; often the first updates from the prior).{}",
                            f.label,
                            sig(v, 3),
                            sig(lo, 3),
                            sig(hi, 3),
                            sig(100.0 * above, 2),
                            hint
                        ));
                    }
                }
            }
        }
        if !over.is_empty() {
            lines.push(format!(
                "Over-confident (covariance smaller than the actual error): {}.",
                over.iter()
                    .map(|f| state_text(f, true))
                    .collect::<Vec<_>>()
                    .join(", ")
            ));
        }
        if !under.is_empty() {
            lines.push(format!(
                "Under-confident (covariance larger than the actual error): {}.",
                under
                    .iter()
                    .map(|f| state_text(f, false))
                    .collect::<Vec<_>>()
                    .join(", ")
            ));
        }
    }
    let mut nis_ok: Vec<&FilterSummary> = Vec::new();
    let mut nis_bad: Vec<String> = Vec::new();
    for f in &ok {
        match innovation_consistency(f) {
            Consistency::Consistent => nis_ok.push(*f),
            c @ (Consistency::OverConfident | Consistency::UnderConfident) => {
                nis_bad.push(format!(
                    "{} (ANIS {}, {})",
                    f.label,
                    band_text(f.anis, f.anis_band),
                    if c == Consistency::OverConfident {
                        "innovations larger than predicted"
                    } else {
                        "innovations smaller than predicted"
                    }
                ))
            }
            Consistency::Unknown => {}
        }
    }
    if !nis_bad.is_empty() {
        lines.push(format!(
            "Innovation-inconsistent (ANIS outside its 95 % band): {}.",
            nis_bad.join(", ")
        ));
    } else if !truth && !nis_ok.is_empty() {
        lines.push(format!(
            "Innovation-consistent (ANIS inside its 95 % band): {}.",
            names(&nis_ok)
        ));
    }
    let white_ok = |f: &FilterSummary| f.whiteness.as_ref().and_then(|w| w.white) != Some(false);
    let consistent: Vec<&FilterSummary> = ok
        .iter()
        .copied()
        .filter(|f| !truth || state_ok.iter().any(|g| g.label == f.label))
        .filter(|f| nis_ok.iter().any(|g| g.label == f.label))
        .filter(|f| white_ok(f))
        .collect();

    // Whiteness (single dataset).
    if runs.is_none() {
        let coloured: Vec<&FilterSummary> = ok
            .iter()
            .copied()
            .filter(|f| f.whiteness.as_ref().and_then(|w| w.white) == Some(false))
            .collect();
        let white: Vec<&FilterSummary> = ok
            .iter()
            .copied()
            .filter(|f| f.whiteness.as_ref().and_then(|w| w.white) == Some(true))
            .collect();
        if !coloured.is_empty() {
            lines.push(format!(
                "Innovations not white (more autocorrelation outside ±1.96/√N than chance \
                 allows): {} — the model or noise settings miss something these filters see.",
                coloured
                    .iter()
                    .map(|f| format!(
                        "{} ({} % outside)",
                        f.label,
                        sig(
                            100.0
                                * f.whiteness
                                    .as_ref()
                                    .and_then(|w| w.outside_share)
                                    .unwrap_or(f64::NAN),
                            2
                        )
                    ))
                    .collect::<Vec<_>>()
                    .join(", ")
            ));
        } else if !white.is_empty() && !truth {
            lines.push(format!("Innovations white: {}.", names(&white)));
        }
    }

    // Predictive fit.
    let best_fit = ok
        .iter()
        .copied()
        .filter(|f| f.log_likelihood.is_some())
        .max_by(|a, b| {
            a.log_likelihood
                .partial_cmp(&b.log_likelihood)
                .unwrap_or(std::cmp::Ordering::Equal)
        });
    if let Some(f) = best_fit {
        if ok.len() > 1 {
            let best = f.log_likelihood.unwrap_or(f64::NAN);
            // Equal to the printed precision counts as a tie (e.g. every Gaussian filter on a
            // linear plant).
            let tol = 1e-6 * best.abs().max(1.0);
            let tied: Vec<&FilterSummary> = ok
                .iter()
                .copied()
                .filter(|g| g.log_likelihood.is_some_and(|l| (best - l).abs() <= tol))
                .collect();
            lines.push(format!(
                "Best predictive fit (highest log-likelihood{}): {} ({}{}).",
                if runs.is_some() {
                    ", mean over runs"
                } else {
                    ""
                },
                if tied.len() > 1 {
                    names(&tied)
                } else {
                    f.label.clone()
                },
                if tied.len() > 1 { "tied at " } else { "" },
                sig(best, 6)
            ));
        }
    }

    // Cost.
    lines.push(format!(
        "Cost per step: {}.",
        ok.iter()
            .map(|f| format!("{} {}", f.label, duration(f.seconds_per_step)))
            .collect::<Vec<_>>()
            .join(", ")
    ));

    // Recommendation.
    let pick = if truth {
        consistent
            .iter()
            .copied()
            .filter(|f| f.rmse_all.is_some())
            .min_by(|a, b| {
                a.rmse_all
                    .partial_cmp(&b.rmse_all)
                    .unwrap_or(std::cmp::Ordering::Equal)
            })
    } else {
        consistent.iter().copied().max_by(|a, b| {
            a.log_likelihood
                .partial_cmp(&b.log_likelihood)
                .unwrap_or(std::cmp::Ordering::Equal)
        })
    };
    match pick {
        Some(p) => {
            let why = if truth {
                "the most accurate of the filters consistent in state and innovations"
            } else {
                "the best predictive fit among the filters with consistent, white innovations"
            };
            let mut line = format!("On this run, {} is {why}", p.label);
            let cheaper = consistent
                .iter()
                .copied()
                .filter(|f| f.label != p.label && f.seconds_per_step < 0.5 * p.seconds_per_step)
                .filter(|f| match (truth, f.rmse_all, p.rmse_all) {
                    (true, Some(a), Some(b)) => a <= b * (1.0 + CLOSE),
                    _ => false,
                })
                .min_by(|a, b| {
                    a.seconds_per_step
                        .partial_cmp(&b.seconds_per_step)
                        .unwrap_or(std::cmp::Ordering::Equal)
                });
            if let Some(c) = cheaper {
                line.push_str(&format!(
                    "; {} is within {:.0} % of its accuracy at {}× lower cost",
                    c.label,
                    CLOSE * 100.0,
                    sig(p.seconds_per_step / c.seconds_per_step.max(1e-12), 2)
                ));
            }
            line.push('.');
            lines.push(line);
        }
        None => {
            let fallback = best_accuracy.or(best_fit);
            lines.push(match fallback {
                Some(f) => format!(
                    "No filter was consistent on this run; {} did best — check the noise \
                     settings (q, r) before trusting any covariance.",
                    f.label
                ),
                None => "No filter could be judged on this run.".into(),
            });
        }
    }
    lines.push(match runs {
        Some(m) => format!(
            "These are findings of this campaign ({m} runs × {steps} steps), not a universal ranking."
        ),
        None => format!("These are findings of this run ({steps} steps), not a universal ranking."),
    });
    lines.join("\n")
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::summary::DiagnosticsSummary;

    fn filter(label: &str, rmse: f64, anees: f64, cost: f64) -> FilterSummary {
        FilterSummary {
            label: label.into(),
            kind: label.into(),
            status: Status::Ok,
            error: None,
            rmse: None,
            rmse_all: Some(rmse),
            anees: Some(anees),
            nees_in_band: Some(0.95),
            anis: Some(1.0),
            nis_in_band: Some(0.95),
            log_likelihood: Some(-rmse),
            seconds_per_step: cost,
            smoothed_rmse_all: None,
            smoothed_rmse: None,
            smoother: None,
            anees_band: Some([1.8, 2.2]),
            nees_tails: None,
            anis_band: Some([0.9, 1.1]),
            whiteness: None,
            diagnostics: DiagnosticsSummary::default(),
            runs: None,
            failures: None,
            rmse_all_spread: None,
            rmse_all_run_mean: None,
        }
    }

    #[test]
    fn names_the_accurate_the_inconsistent_and_the_cost() {
        let mut failed = filter("pf", 0.0, 0.0, 1e-4);
        failed.status = Status::Failed;
        failed.error = Some("particle collapse at step 3".into());
        let v = verdict(
            &[
                filter("ukf", 0.100, 2.0, 2e-6),
                filter("ekf", 0.102, 2.1, 5e-7),
                filter("ckf", 0.2, 5.0, 2e-6),
                filter("enkf", 0.3, 1.0, 1e-5),
                failed,
            ],
            true,
            Some(100),
            500,
        );
        assert!(v.contains("Most accurate: ukf"), "{v}");
        assert!(v.contains("Within 5 % of it: ekf"), "{v}");
        assert!(
            v.contains("Over-confident") && v.contains("ckf (ANEES 5.00"),
            "{v}"
        );
        assert!(v.contains("Under-confident") && v.contains("enkf"), "{v}");
        assert!(v.contains("pf failed: particle collapse"), "{v}");
        assert!(
            v.contains("ekf is within 5 % of its accuracy at 4.0× lower cost"),
            "{v}"
        );
        assert!(v.contains("not a universal ranking"), "{v}");
    }

    #[test]
    fn a_single_run_judges_the_nees_tails_and_the_nis() {
        let mut good = filter("ekf", 0.1, 2.4, 1e-6);
        good.nees_tails = Some([0.02, 0.04]);
        let mut over = filter("pf", 0.12, 1e8, 1e-4);
        over.nees_tails = Some([0.01, 0.14]);
        over.anis = Some(1.3);
        let v = verdict(&[good, over], true, None, 900);
        assert!(
            v.contains("State-consistent") && v.contains(": ekf."),
            "{v}"
        );
        assert!(
            v.contains("pf (NEES above its χ² band on 14 % of steps"),
            "{v}"
        );
        assert!(
            v.contains("Innovation-inconsistent") && v.contains("pf (ANIS 1.30"),
            "{v}"
        );
        assert!(v.contains("On this run, ekf is the most accurate"), "{v}");
    }

    #[test]
    fn an_anees_dominated_by_a_few_steps_is_explained() {
        let mut spiky = filter("pf", 1.0, 2.0e5, 1e-3);
        spiky.nees_tails = Some([0.02, 0.05]);
        let mut plain = filter("ekf", 1.0, 2.0, 1e-6);
        plain.nees_tails = Some([0.02, 0.03]);
        let text = verdict(&[spiky, plain], true, None, 900);
        assert!(
            text.contains("pf: ANEES 200000 is far above its band [1.80, 2.20] yet only 5.0 %"),
            "{text}"
        );
        assert!(
            text.contains("For a particle filter, `temper=0.1`"),
            "{text}"
        );
        assert!(!text.contains("ekf: ANEES"), "{text}");
    }

    #[test]
    fn formats_numbers_and_durations() {
        assert_eq!(sig(0.012345, 3), "0.0123");
        assert_eq!(sig(123.456, 3), "123");
        assert_eq!(sig(1.5e-7, 2), "1.5e-7");
        assert_eq!(duration(2.5e-6), "2.50 µs");
        assert_eq!(duration(0.0123), "12.3 ms");
    }
}
