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

/// "1 filter", "2 filters".
pub fn count(n: usize, noun: &str) -> String {
    if n == 1 {
        format!("{n} {noun}")
    } else {
        format!("{n} {noun}s")
    }
}

/// A relative difference and its interval in per cent: "2.1 % [0.4, 3.9]".
fn percent(difference: f64, interval: [f64; 2]) -> String {
    format!(
        "{} % [{}, {}]",
        sig(100.0 * difference.abs(), 2),
        sig(100.0 * interval[0], 2),
        sig(100.0 * interval[1], 2)
    )
}

/// Cost of `f` relative to `reference`: "300× the cost" or "0.5× the cost".
fn cost_ratio(f: &FilterSummary, reference: &FilterSummary) -> String {
    let r = f.seconds_per_step / reference.seconds_per_step.max(1e-15);
    format!("{}× the cost", sig(r, 2))
}

/// The accuracy (or, without truth, predictive-fit) ranking: the `best` group with the paired
/// intervals of the others against its reference.
fn ranking_lines(
    filters: &[FilterSummary],
    best: &[String],
    by_rmse: bool,
    lines: &mut Vec<String>,
) {
    let find = |label: &str| filters.iter().find(|f| f.label == label);
    let Some(reference) = best.first().and_then(|l| find(l)) else {
        return;
    };
    let group: Vec<&FilterSummary> = best.iter().filter_map(|l| find(l)).collect();
    let value = if by_rmse {
        format!(
            "rmse_all {}{}",
            sig(reference.rmse_all.unwrap_or(f64::NAN), 3),
            reference
                .rmse_all_ci
                .map_or(String::new(), |[lo, hi]| format!(
                    " [{}, {}]",
                    sig(lo, 3),
                    sig(hi, 3)
                ))
        )
    } else {
        format!(
            "log-likelihood {}",
            sig(reference.log_likelihood.unwrap_or(f64::NAN), 6)
        )
    };
    let what = if by_rmse {
        "accurate"
    } else {
        "good a predictive fit"
    };
    if group.len() > 1 {
        lines.push(format!(
            "{} are equally {what} here (paired, 95 %; {} {value}).",
            names(&group),
            reference.label,
        ));
    } else if by_rmse {
        lines.push(format!("Most accurate: {} ({value}).", reference.label));
    } else {
        lines.push(format!(
            "Best predictive fit (highest log-likelihood): {} ({value}).",
            reference.label
        ));
    }
    let mut others: Vec<(f64, String)> = Vec::new();
    for f in filters {
        let Some(v) = f.versus_best.as_ref().filter(|v| !v.tied) else {
            continue;
        };
        let text = if by_rmse {
            format!(
                "{} is {} {} accurate",
                f.label,
                percent(v.difference, v.interval),
                if v.difference > 0.0 { "less" } else { "more" },
            )
        } else {
            format!(
                "{}'s log-likelihood is {} [{}, {}] lower",
                f.label,
                sig(-v.difference, 3),
                sig(-v.interval[1], 3),
                sig(-v.interval[0], 3),
            )
        };
        others.push((v.difference.abs(), text));
    }
    others.sort_by(|a, b| a.0.total_cmp(&b.0));
    if !others.is_empty() {
        lines.push(format!(
            "Against {} (paired 95 % intervals): {}.",
            reference.label,
            others
                .into_iter()
                .map(|(_, t)| t)
                .collect::<Vec<_>>()
                .join("; ")
        ));
    }
}

/// The verdict text for a set of filter results. `truth` says whether accuracy was measurable;
/// `runs` is the Monte Carlo run count (`None` for a single dataset); `steps` the rows per
/// dataset; `best` the summary's `best` group (reference first).
pub fn verdict(
    filters: &[FilterSummary],
    best: &[String],
    truth: bool,
    runs: Option<u64>,
    steps: u64,
) -> String {
    let mut lines: Vec<String> = Vec::new();
    let ok: Vec<&FilterSummary> = filters.iter().filter(|f| f.status == Status::Ok).collect();
    for f in filters.iter().filter(|f| f.status == Status::Diverged) {
        let at = match (f.diverged_at, f.diverged_runs) {
            (Some(k), Some(m)) => format!(
                "in {} of {} (first at step {k})",
                count(m as usize, "run"),
                f.runs.unwrap_or(0)
            ),
            (Some(k), None) => format!("at step {k}"),
            _ => String::new(),
        };
        lines.push(format!(
            "{} diverged {at}: {}; it is not ranked.",
            f.label,
            f.divergence.as_deref().unwrap_or("no reason recorded")
        ));
    }
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
    let best_accuracy: Option<&FilterSummary> = if truth {
        best.first()
            .and_then(|l| ok.iter().copied().find(|f| &f.label == l))
    } else {
        None
    };
    if truth {
        ranking_lines(filters, best, true, &mut lines);
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
    if !truth && ok.len() > 1 {
        ranking_lines(filters, best, false, &mut lines);
    } else if let Some(f) = best_fit.filter(|_| ok.len() > 1) {
        let top = f.log_likelihood.unwrap_or(f64::NAN);
        // Equal to the printed precision counts as a tie (e.g. every Gaussian filter on a
        // linear plant).
        let tol = 1e-6 * top.abs().max(1.0);
        let tied: Vec<&FilterSummary> = ok
            .iter()
            .copied()
            .filter(|g| g.log_likelihood.is_some_and(|l| (top - l).abs() <= tol))
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
            sig(top, 6)
        ));
    }

    // Cost (every wall-clock figure stays on this one line, so that the rest of the verdict
    // is reproducible).
    let relative = best
        .first()
        .and_then(|l| ok.iter().copied().find(|f| &f.label == l))
        .map(|reference| {
            let others: Vec<String> = ok
                .iter()
                .filter(|f| f.label != reference.label)
                .map(|f| format!("{} {}", f.label, cost_ratio(f, reference)))
                .collect();
            if others.is_empty() {
                String::new()
            } else {
                format!("; against {}: {}", reference.label, others.join(", "))
            }
        })
        .unwrap_or_default();
    lines.push(format!(
        "Cost per step: {}{relative}.",
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
            // A cheaper consistent filter that the paired comparison cannot tell from it.
            let in_best = |f: &FilterSummary| best.iter().any(|l| l == &f.label);
            let cheaper = consistent
                .iter()
                .copied()
                .filter(|f| f.label != p.label && f.seconds_per_step < 0.5 * p.seconds_per_step)
                .filter(|f| in_best(f) && in_best(p))
                .min_by(|a, b| {
                    a.seconds_per_step
                        .partial_cmp(&b.seconds_per_step)
                        .unwrap_or(std::cmp::Ordering::Equal)
                });
            if let Some(c) = cheaper {
                line.push_str(&format!(
                    "; {} is as {} (paired, 95 %) at {}× lower cost",
                    c.label,
                    if truth { "accurate" } else { "good a fit" },
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
            rmse_all_ci: Some([0.9 * rmse, 1.1 * rmse]),
            diverged_at: None,
            divergence: None,
            diverged_runs: None,
            versus_best: None,
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

    fn versus(f: &mut FilterSummary, difference: f64, interval: [f64; 2], tied: bool) {
        f.versus_best = Some(crate::summary::VersusBest {
            reference: "ukf".into(),
            measure: "rmse_all".into(),
            difference,
            interval,
            tied,
        });
    }

    #[test]
    fn names_the_accurate_the_inconsistent_and_the_cost() {
        let mut failed = filter("pf", 0.0, 0.0, 1e-4);
        failed.status = Status::Failed;
        failed.error = Some("particle collapse at step 3".into());
        let mut ekf = filter("ekf", 0.102, 2.1, 5e-7);
        versus(&mut ekf, 0.02, [-0.01, 0.05], true);
        let mut ckf = filter("ckf", 0.2, 5.0, 2e-6);
        versus(&mut ckf, 1.0, [0.8, 1.2], false);
        let mut enkf = filter("enkf", 0.3, 1.0, 1e-5);
        versus(&mut enkf, 2.0, [1.5, 2.5], false);
        let mut diverged = filter("iekf", 9.0, 1.0, 1e-6);
        diverged.status = Status::Diverged;
        diverged.diverged_at = Some(17);
        diverged.divergence = Some("the posterior variance of x reached 1e16".into());
        let v = verdict(
            &[
                filter("ukf", 0.100, 2.0, 2e-6),
                ekf,
                ckf,
                enkf,
                failed,
                diverged,
            ],
            &["ukf".into(), "ekf".into()],
            true,
            None,
            500,
        );
        assert!(
            v.starts_with("iekf diverged at step 17: the posterior variance"),
            "{v}"
        );
        assert!(
            v.contains("ukf, ekf are equally accurate here (paired, 95 %; ukf rmse_all 0.100 [0.0900, 0.110])"),
            "{v}"
        );
        assert!(
            v.contains("Against ukf (paired 95 % intervals): ckf is 100 % [80, 120] less accurate; enkf is 200 % [150, 250] less accurate."),
            "{v}"
        );
        assert!(!v.contains("iekf is"), "{v}");
        assert!(
            v.contains("against ukf: ekf 0.25× the cost, ckf 1.0× the cost"),
            "{v}"
        );
        let v = verdict(
            &[
                filter("ukf", 0.100, 2.0, 2e-6),
                filter("ckf", 0.2, 5.0, 2e-6),
                filter("enkf", 0.3, 1.0, 1e-5),
            ],
            &["ukf".into()],
            true,
            Some(100),
            500,
        );
        assert!(v.contains("Most accurate: ukf"), "{v}");
        let v = verdict(
            &[
                filter("ukf", 0.100, 2.0, 2e-6),
                filter("ekf", 0.102, 2.1, 5e-7),
                filter("ckf", 0.2, 5.0, 2e-6),
                filter("enkf", 0.3, 1.0, 1e-5),
                filter("pf", 0.0, 0.0, 1e-4),
            ]
            .into_iter()
            .map(|mut f| {
                if f.label == "pf" {
                    f.status = Status::Failed;
                    f.error = Some("particle collapse at step 3".into());
                }
                f
            })
            .collect::<Vec<_>>(),
            &["ukf".into(), "ekf".into()],
            true,
            Some(100),
            500,
        );
        assert!(
            v.contains("Over-confident") && v.contains("ckf (ANEES 5.00"),
            "{v}"
        );
        assert!(v.contains("Under-confident") && v.contains("enkf"), "{v}");
        assert!(v.contains("pf failed: particle collapse"), "{v}");
        assert!(
            v.contains("ekf is as accurate (paired, 95 %) at 4.0× lower cost"),
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
        let v = verdict(&[good, over], &["ekf".into()], true, None, 900);
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
        let text = verdict(
            &[spiky, plain],
            &["pf".into(), "ekf".into()],
            true,
            None,
            900,
        );
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
