//! Maximum-likelihood tuning of model parameters (typically noise intensities) from data.
//!
//! The objective is the filter's log-likelihood by prediction-error decomposition,
//! ln p(y(0..N)) = Σₖ ln p(y(k) | y(0..k)) (Schweppe, IEEE Trans. Inf. Theory 11(1), 1965), summed
//! from the filter's own `log_likelihood_increment`. Positive parameters are searched in log space
//! (so the search never leaves the domain and scales are balanced), others in linear space, by
//! the Nelder–Mead simplex method of the `argmin` crate. Approximate standard errors come from the
//! curvature at the optimum: Cov(θ̂) ≈ (−∇²ln L)⁻¹ (asymptotic normality of the ML estimator),
//! with the Hessian by central differences in the search coordinates and the delta method back to
//! the parameters (SE(θ) = θ·SE(ln θ) in log space). Our filters run on `f64`, so the Hessian is
//! numerical rather than by automatic differentiation.
//!
//! **Intervals.** Each standard error comes with a 95 % Wald interval on the scale it was
//! computed in, mapped to the parameter: exp(ln θ̂ ± 1.96·SE(ln θ)) for a positive parameter
//! (so it never leaves the domain, and is skewed as the likelihood is in θ), θ̂ ± 1.96·SE(θ)
//! otherwise (1.96 = Φ⁻¹(0.975); common practice).
//!
//! **Sampling filters** (`pf`, `enkf`): their log-likelihood is a Monte Carlo estimate. With one
//! seed the search sees one smooth-looking realisation (common random numbers), but its
//! curvature over a finite-difference step measures the sampling noise as much as the
//! information, so standard errors and intervals are withheld (null) with a note saying so;
//! `--seed` repeats the search with other draws, and the spread of the estimates across seeds
//! shows the Monte Carlo error.
//!
//! **Refusals** (exit 2): no measurement in the data; fewer rows with a measurement than
//! parameters; a parameter the likelihood does not depend on (changing it by the simplex's first
//! step, a factor e^±0.5 in log space, moves ln L by less than [`FLAT_TOLERANCE`] × max(1, |ln L|)),
//! which would otherwise be "estimated" wherever the search happened to stop.

use std::collections::BTreeMap;
use std::sync::Mutex;

use argmin::core::{CostFunction, Executor, State};
use argmin::solver::neldermead::NelderMead;
use nalgebra::DMatrix;
use serde::{Deserialize, Serialize};
use sightline_core::Domain;
use sightline_filters::{Filter, FilterSpec};

use crate::dataset::Dataset;
use crate::error::{Error, Result};
use crate::plant::AnyPlant;

/// The relative change of ln L below which a parameter is refused as one the likelihood does
/// not depend on (see the module docs): round-off level of a sum over a dataset.
pub const FLAT_TOLERANCE: f64 = 1e-10;

/// Φ⁻¹(0.975), the half-width of a 95 % normal interval in standard errors.
const Z_95: f64 = 1.959_963_984_540_054;

/// One evaluation of the objective, as recorded in the trace.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TraceEntry {
    /// Evaluation number, from 0.
    pub evaluation: usize,
    /// Parameter values tried.
    pub params: BTreeMap<String, f64>,
    /// Log-likelihood there (null when the filter failed).
    pub log_likelihood: Option<f64>,
}

/// The result of `sightline tune`, written as `tuned.json`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Tuned {
    /// Maximum-likelihood parameter values.
    pub params: BTreeMap<String, f64>,
    /// Log-likelihood at the optimum.
    pub log_likelihood: f64,
    /// Starting values.
    pub start: BTreeMap<String, f64>,
    /// Log-likelihood at the start.
    pub start_log_likelihood: Option<f64>,
    /// Approximate standard errors (null where the curvature is not negative-definite, and for
    /// a sampling filter).
    pub std_errors: BTreeMap<String, Option<f64>>,
    /// 95 % intervals from the curvature on the search scale (see the module docs), null where
    /// the standard error is.
    #[serde(default)]
    pub intervals: BTreeMap<String, Option<[f64; 2]>>,
    /// What a reader of the result should know (e.g. why standard errors are withheld).
    #[serde(default)]
    pub notes: Vec<String>,
    /// Filter spec whose likelihood was maximised.
    pub filter: String,
    /// Optimiser used.
    pub optimiser: String,
    /// Optimiser iterations.
    pub iterations: u64,
    /// Every evaluation of the objective, in order.
    pub trace: Vec<TraceEntry>,
    /// How the result was made (set by the command; absent in files written before it existed).
    #[serde(default)]
    pub settings: Option<crate::settings::Settings>,
}

/// Runs `filter` over `data` and returns the summed log-likelihood.
///
/// Time line: row 0 is an update from the prior; row k ≥ 1 is predict(u(k−1), t(k−1),
/// t(k) − t(k−1)) then update(y(k)).
pub fn log_likelihood(filter: &mut dyn Filter, data: &Dataset) -> Result<f64> {
    let mut total = 0.0;
    let mut previous: Option<(f64, &[f64])> = None;
    for r in &data.records {
        if let Some((t0, u0)) = previous {
            filter
                .predict(u0, t0, r.t - t0)
                .map_err(|e| Error::Run(e.to_string()))?;
        }
        filter
            .update(&r.y, &r.u, r.t)
            .map_err(|e| Error::Run(e.to_string()))?;
        total += filter.log_likelihood_increment();
        previous = Some((r.t, &r.u));
    }
    Ok(total)
}

/// How one tuned parameter maps to the search coordinate.
#[derive(Debug, Clone)]
struct Coordinate {
    name: String,
    log: bool,
}

impl Coordinate {
    fn to_param(&self, z: f64) -> f64 {
        if self.log { z.exp() } else { z }
    }
    fn to_search(&self, v: f64) -> f64 {
        if self.log { v.ln() } else { v }
    }
}

#[derive(Clone, Copy)]
struct Objective<'a> {
    plant: &'a dyn AnyPlant,
    data: &'a Dataset,
    spec: &'a FilterSpec,
    seed: u64,
    coords: &'a [Coordinate],
    trace: &'a Mutex<Vec<TraceEntry>>,
}

impl Objective<'_> {
    fn params_at(&self, z: &[f64]) -> BTreeMap<String, f64> {
        self.coords
            .iter()
            .zip(z)
            .map(|(c, &z)| (c.name.clone(), c.to_param(z)))
            .collect()
    }

    /// Log-likelihood at search point `z`, or `None` where the filter fails or a value leaves
    /// its domain.
    fn evaluate(&self, z: &[f64]) -> Option<f64> {
        let mut plant = self.plant.clone_box();
        for (c, &zi) in self.coords.iter().zip(z) {
            plant.set(&c.name, c.to_param(zi)).ok()?;
        }
        let mut filter = plant.build_filter(self.spec, self.seed).ok()?;
        log_likelihood(filter.as_mut(), self.data)
            .ok()
            .filter(|v| v.is_finite())
    }
}

impl CostFunction for Objective<'_> {
    type Param = Vec<f64>;
    type Output = f64;

    fn cost(&self, z: &Self::Param) -> std::result::Result<f64, argmin::core::Error> {
        // A signal stops the search at the next evaluation (see `crate::interrupt`): every
        // point is then the worst, so the simplex collapses at once, and `tune` reports the
        // interruption after the run. Not an error here: argmin unwraps the costs of its
        // initial simplex, so an error there would be a panic.
        if crate::interrupt::requested() {
            return Ok(f64::MAX);
        }
        let ll = self.evaluate(z);
        if let Ok(mut trace) = self.trace.lock() {
            let evaluation = trace.len();
            trace.push(TraceEntry {
                evaluation,
                params: self.params_at(z),
                log_likelihood: ll,
            });
        }
        // A failed evaluation is the worst point of the simplex, never chosen.
        Ok(ll.map_or(f64::MAX, |v| -v))
    }
}

/// Maximises the log-likelihood of `spec` on `data` over the parameters `names` of `plant`,
/// starting from the plant's current values.
pub fn tune(
    plant: &dyn AnyPlant,
    data: &Dataset,
    spec: &FilterSpec,
    names: &[String],
    seed: u64,
) -> Result<Tuned> {
    if names.is_empty() {
        return Err(Error::Usage("tune: give at least one --param NAME".into()));
    }
    let measured = data
        .records
        .iter()
        .filter(|r| r.y.iter().any(|v| !v.is_nan()))
        .count();
    if measured == 0 {
        return Err(Error::Usage(format!(
            "tune: the dataset's {} rows hold no measurement at all (every y. cell is empty), so \
             the likelihood does not depend on any parameter; give data with measurements",
            data.records.len()
        )));
    }
    if measured < names.len() {
        return Err(Error::Usage(format!(
            "tune: {} parameters cannot be estimated from {measured} row(s) with a measurement; \
             give at least as many measured rows as --param names (and many more for a useful \
             estimate)",
            names.len()
        )));
    }
    let params = plant.parameters();
    let mut coords = Vec::new();
    let mut start = BTreeMap::new();
    for name in names {
        let Some(p) = params.iter().find(|p| p.name == *name) else {
            return Err(Error::Usage(format!(
                "tune: --param '{name}' is not a parameter of '{}'; its parameters are: {}",
                plant.name(),
                params
                    .iter()
                    .map(|p| p.name.as_ref())
                    .collect::<Vec<_>>()
                    .join(", ")
            )));
        };
        let state = name
            .strip_prefix("x0.")
            .or_else(|| name.strip_prefix("sd0."));
        if let Some(state) = state.filter(|s| plant.diffuse_states().iter().any(|d| d == s)) {
            return Err(Error::Usage(format!(
                "tune: --param '{name}' and --diffuse {state} contradict each other: a diffuse \
                 state has no prior mean or standard deviation to tune"
            )));
        }
        if matches!(p.domain, Domain::Integer(..)) {
            return Err(Error::Usage(format!(
                "tune: --param '{name}' is a whole number; only real parameters can be tuned"
            )));
        }
        if coords.iter().any(|c: &Coordinate| c.name == *name) {
            return Err(Error::Usage(format!(
                "tune: --param '{name}' is given twice"
            )));
        }
        coords.push(Coordinate {
            name: name.clone(),
            log: matches!(p.domain, Domain::Positive),
        });
        start.insert(name.clone(), p.value);
    }
    let trace = Mutex::new(Vec::new());
    let objective = Objective {
        plant,
        data,
        spec,
        seed,
        coords: &coords,
        trace: &trace,
    };
    let z0: Vec<f64> = coords.iter().map(|c| c.to_search(start[&c.name])).collect();
    let start_ll = objective.evaluate(&z0);
    // An evaluation cut short by a signal is not a failing filter.
    crate::interrupt::check(|| "at the starting parameters".into())?;
    let Some(start_value) = start_ll else {
        return Err(Error::Run(format!(
            "tune: filter '{}' fails at the starting parameters; set a better start with --set",
            spec.label
        )));
    };
    refuse_flat(&objective, &z0, start_value)?;
    // Initial simplex: the start and a step of 0.5 (a factor e^0.5 ≈ 1.65 in log space) per axis.
    let mut simplex = vec![z0.clone()];
    for i in 0..z0.len() {
        let mut z = z0.clone();
        z[i] += simplex_step(&coords[i], z0[i]);
        simplex.push(z);
    }
    let solver = NelderMead::new(simplex)
        .with_sd_tolerance(1e-9)
        .map_err(|e| Error::Run(format!("tune: optimiser set-up: {e}")))?;
    let result = Executor::new(objective, solver)
        .configure(|state| state.max_iters(2000))
        .run()
        .map_err(
            |e| match crate::interrupt::check(|| "during the search".into()) {
                Err(stopped) => stopped,
                Ok(()) => Error::Run(format!("tune: optimiser: {e}")),
            },
        )?;
    crate::interrupt::check(|| "during the search".into())?;
    let state = result.state();
    let best = state
        .get_best_param()
        .cloned()
        .ok_or_else(|| Error::Run("tune: the optimiser returned no point".into()))?;
    let iterations = state.get_iter();
    let best_ll = objective
        .evaluate(&best)
        .ok_or_else(|| Error::Run("tune: the filter fails at the optimum".into()))?;
    let sampling = sightline_filters::KINDS
        .iter()
        .any(|k| k.kind == spec.kind && k.sampling);
    let mut notes = Vec::new();
    let std_errors = if sampling {
        notes.push(format!(
            "standard errors and intervals withheld: the log-likelihood of {} is a Monte Carlo \
             estimate, and its curvature at one seed measures sampling noise as much as the \
             information in the data; rerun with other --seed values and read the spread of the \
             estimates, or tune a Gaussian filter (ekf, ukf, ...)",
            spec.label
        ));
        coords.iter().map(|c| (c.name.clone(), None)).collect()
    } else {
        standard_errors(&objective, &best, best_ll)
    };
    crate::interrupt::check(|| "while estimating the standard errors".into())?;
    let intervals = intervals(&coords, &best, &std_errors);
    let trace = trace.into_inner().unwrap_or_default();
    Ok(Tuned {
        params: coords
            .iter()
            .zip(&best)
            .map(|(c, &z)| (c.name.clone(), c.to_param(z)))
            .collect(),
        log_likelihood: best_ll,
        start,
        start_log_likelihood: start_ll,
        std_errors,
        intervals,
        notes,
        filter: spec.label.clone(),
        optimiser: "Nelder–Mead simplex (argmin)".into(),
        iterations,
        trace,
        settings: None,
    })
}

/// Refuses a parameter the likelihood does not depend on: ln L at the start moved by the
/// simplex's first step in either direction changes by no more than [`FLAT_TOLERANCE`] relative.
fn refuse_flat(objective: &Objective<'_>, z0: &[f64], ll: f64) -> Result<()> {
    let tolerance = FLAT_TOLERANCE * ll.abs().max(1.0);
    for (i, c) in objective.coords.iter().enumerate() {
        crate::interrupt::check(|| "before the search".into())?;
        let step = simplex_step(c, z0[i]);
        let moved = [step, -step].iter().any(|&s| {
            let mut z = z0.to_vec();
            z[i] += s;
            // A point where the filter fails is a dependence too (the search avoids it).
            objective
                .evaluate(&z)
                .is_none_or(|v| (v - ll).abs() > tolerance)
        });
        if !moved {
            let change = if c.log {
                "a factor e^±0.5".to_string()
            } else {
                format!("±{step}")
            };
            return Err(Error::Usage(format!(
                "tune: the log-likelihood of '{}' does not depend on --param '{}' (changing it \
                 by {change} from {} moves ln L by less than {tolerance:.1e}); it cannot be \
                 estimated from these data — drop it, or check that the filter and data use it",
                objective.spec.label,
                c.name,
                c.to_param(z0[i])
            )));
        }
    }
    Ok(())
}

/// The first step of the simplex along a coordinate: 0.5 in log space (a factor e^0.5 ≈ 1.65),
/// else half the start's magnitude (at least 0.5).
fn simplex_step(c: &Coordinate, z: f64) -> f64 {
    if c.log { 0.5 } else { 0.5 * z.abs().max(1.0) }
}

/// 95 % intervals (see the module docs) from the standard errors at the optimum `z`.
fn intervals(
    coords: &[Coordinate],
    z: &[f64],
    std_errors: &BTreeMap<String, Option<f64>>,
) -> BTreeMap<String, Option<[f64; 2]>> {
    coords
        .iter()
        .zip(z)
        .map(|(c, &zi)| {
            let interval = std_errors.get(&c.name).copied().flatten().map(|se| {
                // On the search scale: SE(ln θ) = SE(θ)/θ for a positive parameter.
                let sd = if c.log { se / c.to_param(zi) } else { se };
                [c.to_param(zi - Z_95 * sd), c.to_param(zi + Z_95 * sd)]
            });
            (c.name.clone(), interval)
        })
        .collect()
}

/// Standard errors from the central-difference Hessian of the log-likelihood at `z`.
fn standard_errors(objective: &Objective<'_>, z: &[f64], ll: f64) -> BTreeMap<String, Option<f64>> {
    let n = z.len();
    let coords = objective.coords;
    let none = || coords.iter().map(|c| (c.name.clone(), None)).collect();
    let h: Vec<f64> = coords
        .iter()
        .zip(z)
        .map(|(c, &zi)| {
            if c.log {
                1e-3
            } else {
                1e-3 * zi.abs().max(1e-3)
            }
        })
        .collect();
    let at = |steps: &[(usize, f64)]| -> Option<f64> {
        let mut p = z.to_vec();
        for &(i, s) in steps {
            p[i] += s;
        }
        objective.evaluate(&p)
    };
    let mut hess = DMatrix::<f64>::zeros(n, n);
    for i in 0..n {
        let (Some(fp), Some(fm)) = (at(&[(i, h[i])]), at(&[(i, -h[i])])) else {
            return none();
        };
        hess[(i, i)] = (fp - 2.0 * ll + fm) / (h[i] * h[i]);
        for j in 0..i {
            let (Some(a), Some(b), Some(c), Some(d)) = (
                at(&[(i, h[i]), (j, h[j])]),
                at(&[(i, h[i]), (j, -h[j])]),
                at(&[(i, -h[i]), (j, h[j])]),
                at(&[(i, -h[i]), (j, -h[j])]),
            ) else {
                return none();
            };
            let v = (a - b - c + d) / (4.0 * h[i] * h[j]);
            hess[(i, j)] = v;
            hess[(j, i)] = v;
        }
    }
    // Observed information −∇²ln L must be positive-definite at a maximum.
    let Some(chol) = (-hess).cholesky() else {
        return none();
    };
    let cov = chol.inverse();
    coords
        .iter()
        .zip(z)
        .enumerate()
        .map(|(i, (c, &zi))| {
            let sd = cov[(i, i)].sqrt();
            let se = if c.log { c.to_param(zi) * sd } else { sd };
            (c.name.clone(), Some(se))
        })
        .collect()
}
