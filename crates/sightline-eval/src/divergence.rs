//! Divergence: a filter that ran to the end but lost the state is `diverged`, not `ok`.
//!
//! A filter is declared **diverged** at step k when, for [`CONSECUTIVE`] consecutive steps from
//! k on, either
//! - **its covariance blew up**: some state's posterior variance exceeds [`VARIANCE_FACTOR`]
//!   times that state's scale², the scale² being the larger of its prior variance and the
//!   square of the range its truth has covered so far (prior mean included; the prior variance
//!   alone without truth) — a filter whose uncertainty is a million times what the problem ever
//!   needed says nothing about the state (e.g. an EKF whose sensor slope vanishes at its
//!   estimate, so that no update ever reduces the growth); or
//! - **its estimate ran away** (with truth): its NEES exceeds [`NEES_FACTOR`] times the upper end
//!   of the 95 % χ²(n) band — an error some thirty standard deviations from its own covariance,
//!   step after step.
//!
//! The thresholds are our own choice (orders of magnitude beyond any consistent or merely
//! mistuned filter, which sits within a factor of a few of its band). A diverged filter keeps
//! running and its estimates are written; the summary records the step, the verdict names it
//! first, it never enters `best`, and the report clips its curves.

/// Posterior variance beyond this many times a state's scale² counts as blown up.
pub const VARIANCE_FACTOR: f64 = 1e6;

/// NEES beyond this many times the top of its χ²(n) band counts as run away.
pub const NEES_FACTOR: f64 = 1e3;

/// Consecutive steps beyond a bound before a filter is declared diverged.
pub const CONSECUTIVE: u64 = 10;

/// When and why a filter diverged.
#[derive(Debug, Clone, PartialEq)]
pub struct Divergence {
    /// Row at which the run of offending steps began.
    pub step: u64,
    /// What was beyond which bound.
    pub reason: String,
}

/// Watches one filter's posteriors, step by step, for divergence. No allocation per step.
#[derive(Debug, Clone)]
pub struct DivergenceWatch {
    prior_var: Vec<f64>,
    lo: Vec<f64>,
    hi: Vec<f64>,
    nees_limit: Option<f64>,
    run: u64,
    start: u64,
    found: Option<Divergence>,
}

impl DivergenceWatch {
    /// A watch for a plant with the prior `(mean, covariance)` (covariance column-major) and,
    /// for the NEES test, the top of the χ²(n) band.
    pub fn new(prior_mean: &[f64], prior_cov: &[f64], nees_band_hi: Option<f64>) -> Self {
        let n = prior_mean.len();
        let prior_var = (0..n)
            .map(|i| prior_cov.get(i + i * n).copied().unwrap_or(0.0).abs())
            .collect();
        DivergenceWatch {
            prior_var,
            lo: prior_mean.to_vec(),
            hi: prior_mean.to_vec(),
            nees_limit: nees_band_hi.map(|h| NEES_FACTOR * h),
            run: 0,
            start: 0,
            found: None,
        }
    }

    /// The divergence found, if any.
    pub fn divergence(&self) -> Option<&Divergence> {
        self.found.as_ref()
    }

    /// Looks at row `k`: posterior variances `var` (one per state), its NEES and the truth if
    /// known; `states` names them for the reason.
    pub fn observe(
        &mut self,
        k: u64,
        var: &[f64],
        nees: Option<f64>,
        truth: Option<&[f64]>,
        states: &[String],
    ) {
        if self.found.is_some() {
            return;
        }
        if let Some(x) = truth {
            for (i, v) in x.iter().enumerate().take(self.lo.len()) {
                self.lo[i] = self.lo[i].min(*v);
                self.hi[i] = self.hi[i].max(*v);
            }
        }
        let mut worst: Option<(usize, f64, f64)> = None;
        for (i, v) in var.iter().enumerate().take(self.prior_var.len()) {
            let range = self.hi[i] - self.lo[i];
            let scale2 = self.prior_var[i].max(range * range);
            let bound = VARIANCE_FACTOR * scale2;
            if scale2 > 0.0 && *v > bound && worst.is_none_or(|(_, w, b)| v / bound > w / b) {
                worst = Some((i, *v, bound));
            }
        }
        let runaway = match (nees, self.nees_limit) {
            (Some(e), Some(limit)) => e > limit,
            _ => false,
        };
        if worst.is_none() && !runaway {
            self.run = 0;
            return;
        }
        if self.run == 0 {
            self.start = k;
        }
        self.run += 1;
        if self.run < CONSECUTIVE {
            return;
        }
        let reason = match worst {
            Some((i, v, bound)) => format!(
                "the posterior variance of {} reached {v:.3e}, beyond {VARIANCE_FACTOR:e} × its \
                 scale² ({bound:.3e}, from the prior variance and the truth's range), for \
                 {CONSECUTIVE} steps",
                states.get(i).map_or("a state", String::as_str)
            ),
            None => format!(
                "its NEES stayed above {NEES_FACTOR:e} × the top of its χ² band ({:.3e}) for \
                 {CONSECUTIVE} steps",
                self.nees_limit.unwrap_or(f64::NAN)
            ),
        };
        self.found = Some(Divergence {
            step: self.start,
            reason,
        });
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_variance_blow_up_is_dated_to_its_first_step() {
        let names = vec!["x".to_string()];
        let mut w = DivergenceWatch::new(&[0.0], &[1.0], None);
        for k in 0..20u64 {
            let var = if k >= 5 { 2e6 } else { 1.0 };
            w.observe(k, &[var], None, None, &names);
        }
        let d = w.divergence().unwrap();
        assert_eq!(d.step, 5);
        assert!(d.reason.contains("variance of x"), "{}", d.reason);
    }

    #[test]
    fn an_interrupted_excursion_is_not_divergence() {
        let names = vec!["x".to_string()];
        let mut w = DivergenceWatch::new(&[0.0], &[1.0], Some(5.0));
        for k in 0..40u64 {
            // Nine bad steps, one good, repeatedly.
            let nees = if k % 10 == 9 { 1.0 } else { 1e5 };
            w.observe(k, &[1.0], Some(nees), Some(&[0.0]), &names);
        }
        assert!(w.divergence().is_none());
        // The truth's range raises the scale: a variance of 2e6 is fine when x spans 10.
        let mut w = DivergenceWatch::new(&[0.0], &[1.0], None);
        for k in 0..20u64 {
            w.observe(
                k,
                &[2e6],
                None,
                Some(&[if k == 0 { 10.0 } else { 0.0 }]),
                &names,
            );
        }
        assert!(w.divergence().is_none());
    }
}
