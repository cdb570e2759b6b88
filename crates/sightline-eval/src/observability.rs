//! Observability along a trajectory: which states the sensors can see, and how well.
//!
//! For x(k+1) = f(x(k)), y(k) = h(x(k)) + v(k), v(k) ~ N(0, R), the first-order sensitivity of
//! the k-th measurement to the state at the first row is Hₖ = ∂h(xₖ)/∂x₀ = Cₖ Φₖ with
//! Cₖ = ∂h/∂x at xₖ and Φₖ = Aₖ₋₁ ⋯ A₀, Aⱼ = ∂f/∂x at xⱼ (the chain rule through the discrete
//! transition the filters use, from exact AD Jacobians). The Fisher information the K
//! measurements k = 0..K−1 carry about x₀ is
//!
//! ```text
//! J = Σₖ Hₖᵀ R⁻¹ Hₖ
//! ```
//!
//! the deterministic local observability Gramian weighted by R⁻¹ (no process noise, no prior).
//! x₀ is locally observable iff J has full rank (Hermann & Krener, "Nonlinear controllability
//! and observability", IEEE TAC 22(5), 1977, the rank condition; Krener & Ide, "Measures of
//! unobservability", IEEE CDC 2009, for the Gramian as a measure). Missing measurement
//! components, and components outside the chosen sensor set, contribute nothing.
//!
//! **Scale.** J is first scaled to J_s = S J S with S = diag(prior sd), so that units do not
//! decide the rank: an eigenvalue λ of J_s is the information of that direction relative to the
//! prior's own (1). The numerical rank counts the singular values of J_s above
//! `n·ε·max(σ_max, 1)`: numpy's `matrix_rank` rule (common practice) on the matrix we hold, with
//! the floor that information below rounding of the prior's own information is none.
//! `conditioning` is σ_max/σ_min of J_s (`null` when J_s is numerically singular).
//!
//! **Per state.** The null space N (eigenvectors of J_s at the rank-deficient singular values)
//! holds the directions no measurement sees. State i is observable iff eᵢ is orthogonal to N
//! (the component of eᵢ in N has norm ≤ [`ORTHOGONAL_TOL`]), a statement that diagonal scaling
//! does not change. Its bound is √((J⁺)ᵢᵢ) computed as sᵢ·√((J_s⁺)ᵢᵢ) with the truncated
//! pseudo-inverse: for an estimable function eᵢᵀx every generalised inverse of J gives the same
//! value, and it is the Cramér–Rao bound of that function (Stoica & Marzetta, "Parameter
//! estimation problems with singular information matrices", IEEE TSP 49(1), 2001; from
//! memory). With J invertible it is √((J⁻¹)ᵢᵢ): the smallest standard deviation any unbiased
//! estimator of x₀ could reach from these measurements alone.
//!
//! **Reading.** A state is *not observable* outside the observable subspace, *weakly
//! observable* when its bound is no smaller than its prior standard deviation (over this window
//! the sensors alone know it no better than the prior does), *well observable* otherwise; the
//! whole set reads as its worst state.
//!
//! **Cost.** Per row one AD Jacobian of the transition and of the measurement (for runtime-sized
//! plants n forward passes each) and one n×n product Aₖ Φₖ (n³ multiply-adds), then one
//! symmetric eigen-decomposition of J: O(K·n³) in all, e.g. 0.26·10⁶ multiply-adds per row at
//! n = 64 (see the README for measured times).

use nalgebra::{DMatrix, DefaultAllocator, Dim, OVector, SymmetricEigen, U1};
use serde::{Deserialize, Serialize};
use sightline_core::{Alloc, Model};
use sightline_filters::JacobianSource;
use sightline_filters::linearise::{measurement_jacobian, transition_jacobian};

use crate::dataset::{Dataset, Record};
use crate::error::{Error, Result};
use crate::pcrlb::Bound;
use crate::plant::AnyPlant;
use crate::settings::Settings;

/// A state whose unit vector has a component of at most this norm in the unobservable
/// subspace counts as observable (cosine of its angle to the observable subspace ≥ 1 − 10⁻¹²).
pub const ORTHOGONAL_TOL: f64 = 1e-6;

/// Coefficients of a direction below this fraction of its largest are set to zero.
const KEPT_COEFFICIENT: f64 = 1e-9;

/// Coefficients below this fraction of the largest are left out of a direction's text (which
/// then ends in "+ …"); the numeric vector keeps them.
const SHOWN_COEFFICIENT: f64 = 1e-4;

/// How well a state (or a whole sensor set) is seen.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize)]
pub enum Reading {
    /// Observable, and the sensors alone know it better than the prior does.
    #[serde(rename = "well observable")]
    Well,
    /// Observable, but its bound is no smaller than its prior standard deviation.
    #[serde(rename = "weakly observable")]
    Weakly,
    /// In the unobservable subspace: the measurements do not depend on it (to first order).
    #[serde(rename = "not observable")]
    Not,
}

impl Reading {
    /// The words of the reading.
    pub fn words(self) -> &'static str {
        match self {
            Reading::Well => "well observable",
            Reading::Weakly => "weakly observable",
            Reading::Not => "not observable",
        }
    }
}

/// One state's answer.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StateBound {
    /// State name.
    pub name: String,
    /// Whether the state is orthogonal to the unobservable subspace.
    pub observable: bool,
    /// √((J⁺)ᵢᵢ): the smallest standard deviation of an unbiased estimate of the state at the
    /// first row from these measurements alone; `null` when not observable.
    pub sd_bound: Option<f64>,
    /// Plain-words reading.
    pub reading: Reading,
    /// The prior standard deviation it is read against (the scale of J_s).
    pub prior_sd: f64,
    /// The posterior Cramér–Rao bound (with the prior and the process noise) at the last row of
    /// the window, as a standard deviation; `null` when it cannot be computed.
    pub pcrlb_sd: Option<f64>,
}

/// A direction of the state space the measurements do not see.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Direction {
    /// The direction as a combination of state names, e.g. `h2 + 0.5 h4` (moving the states by
    /// these amounts changes no measurement, to first order).
    pub combination: String,
    /// Its coefficients in state order (1 at its leading state).
    pub coefficients: Vec<f64>,
}

/// The answer for one set of sensors.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SensorSet {
    /// The measurement components used.
    pub sensors: Vec<String>,
    /// Numerical rank of J_s.
    pub rank: usize,
    /// Singular values of J_s = S J S, largest first.
    pub singular_values: Vec<f64>,
    /// σ_max/σ_min of J_s; `null` when J_s is numerically singular (rank below n).
    pub conditioning: Option<f64>,
    /// The worst state's reading.
    pub reading: Reading,
    /// Per state, in model order.
    pub states: Vec<StateBound>,
    /// A basis of the unobservable subspace, in reduced echelon form.
    pub unobservable_directions: Vec<Direction>,
}

/// Where the trajectory came from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum TrajectorySource {
    /// The data's `x.` columns.
    Truth,
    /// The data has no truth: the noise-free prediction from the prior mean through the data's
    /// times and inputs.
    Prediction,
    /// No data: the noise-free simulation from the prior mean with the constant inputs.
    Simulation,
}

/// `observability.json`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Observability {
    /// Model name.
    pub model: String,
    /// Rows of the window (K).
    pub steps: usize,
    /// Where the trajectory came from.
    pub trajectory: TrajectorySource,
    /// The answer for `--sensors` (every measurement when not given).
    #[serde(flatten)]
    pub result: SensorSet,
    /// The answer for each `--compare-sensors` set, in the order given.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub sensor_sets: Vec<SensorSet>,
    /// Notes (e.g. why a PCRLB is missing).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub notes: Vec<String>,
    /// How the result was made.
    pub settings: Option<Settings>,
}

/// The rows of `data` with every missing true state filled: a row without one gets the
/// noise-free transition of the previous row's state (the `start` state at row 0), projected
/// onto the plant's feasible set as the simulator does. Returns the rows and whether every row
/// had its own truth.
pub fn fill_states<M: Model>(
    model: &M,
    start: &OVector<f64, M::State>,
    data: &Dataset,
) -> Result<(Dataset, bool)>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    let n = model.state_dim();
    let mut out = data.clone();
    let mut all_truth = true;
    let mut previous: Option<(f64, OVector<f64, M::State>, Vec<f64>)> = None;
    for (k, rec) in out.records.iter_mut().enumerate() {
        let x = match &rec.x {
            Some(x) if x.len() == n.value() => {
                OVector::<f64, M::State>::from_column_slice_generic(n, U1, x)
            }
            Some(_) => {
                return Err(Error::Run(format!(
                    "observability: row {k} does not match the plant's state size"
                )));
            }
            None => {
                all_truth = false;
                match &previous {
                    None => start.clone(),
                    Some((t0, x0, u0)) => {
                        let mut x = model.transition(x0, u0, *t0, rec.t - t0);
                        model.project(&mut x);
                        x
                    }
                }
            }
        };
        if !x.iter().all(|v| v.is_finite()) {
            return Err(Error::Run(format!(
                "observability: the state at row {k} (t = {}) is not finite",
                rec.t
            )));
        }
        rec.x = Some(x.as_slice().to_vec());
        previous = Some((rec.t, x, rec.u.clone()));
    }
    Ok((out, all_truth))
}

/// J = Σₖ Hₖᵀ R⁻¹ Hₖ along `trajectory` (every row with its state) from the components
/// `sensors[i]` that the row measured (module docs); n×n, column-major.
pub fn information<M: Model>(model: &M, trajectory: &Dataset, sensors: &[bool]) -> Result<Vec<f64>>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    let n = model.state_dim();
    let nv = n.value();
    let m = model.meas_dim().value();
    if sensors.len() != m {
        return Err(Error::Run(format!(
            "observability: {} sensor flags for {m} measurements",
            sensors.len()
        )));
    }
    let mut j = DMatrix::<f64>::zeros(nv, nv);
    let mut phi = DMatrix::<f64>::identity(nv, nv);
    let rows = &trajectory.records;
    for (k, rec) in rows.iter().enumerate() {
        let state = |rec: &Record| -> Result<OVector<f64, M::State>> {
            match &rec.x {
                Some(x) if x.len() == nv => Ok(
                    OVector::<f64, M::State>::from_column_slice_generic(n, U1, x),
                ),
                _ => Err(Error::Run(format!(
                    "observability: row {k} has no true state of the plant's size"
                ))),
            }
        };
        let x = state(rec)?;
        let used: Vec<usize> = (0..m)
            .filter(|&i| sensors[i] && rec.y.get(i).is_some_and(|y| !y.is_nan()))
            .collect();
        if !used.is_empty() {
            let (_, c) = measurement_jacobian(model, &x, &rec.u, rec.t, JacobianSource::Automatic);
            let r = model.measurement_noise(rec.t);
            let p = used.len();
            let c_used = DMatrix::from_fn(p, nv, |a, b| c[(used[a], b)]);
            let r_used = DMatrix::from_fn(p, p, |a, b| r[(used[a], used[b])]);
            let r_inv = r_used.cholesky().map(|l| l.inverse()).ok_or_else(|| {
                Error::Run(format!(
                    "observability: the measurement noise covariance R at row {k} (t = {}) is \
                     not positive definite on the chosen sensors",
                    rec.t
                ))
            })?;
            let h = c_used * &phi;
            j += h.transpose() * r_inv * h;
        }
        if let Some(next) = rows.get(k + 1) {
            let (_, a) = transition_jacobian(
                model,
                &x,
                &rec.u,
                rec.t,
                next.t - rec.t,
                JacobianSource::Automatic,
            );
            phi = DMatrix::from_column_slice(nv, nv, a.as_slice()) * phi;
            if !phi.iter().all(|v| v.is_finite()) {
                return Err(Error::Run(format!(
                    "observability: the sensitivity to the first state overflowed at row {} \
                     (t = {}); the plant diverges along this trajectory: use fewer --steps",
                    k + 1,
                    next.t
                )));
            }
        }
    }
    if !j.iter().all(|v| v.is_finite()) {
        return Err(Error::Run(
            "observability: the information matrix is not finite; use fewer --steps".into(),
        ));
    }
    Ok(j.as_slice().to_vec())
}

/// Rank, bounds and unobservable directions of the information matrix `information` (n×n,
/// column-major) of states `names` with prior standard deviations `prior_sd` (module docs).
///
/// ```
/// use sightline_eval::observability::{analyse, Reading};
/// // Two states, the measurements inform only the first (information 4 ⇒ sd 0.5).
/// let j = [4.0, 0.0, 0.0, 0.0];
/// let a = analyse(&j, &["a".into(), "b".into()], &[1.0, 1.0], vec!["y".into()]).unwrap();
/// assert_eq!(a.rank, 1);
/// assert_eq!(a.states[0].sd_bound, Some(0.5));
/// assert_eq!(a.states[1].sd_bound, None);
/// assert_eq!(a.unobservable_directions[0].combination, "b");
/// assert_eq!(a.reading, Reading::Not);
/// ```
pub fn analyse(
    information: &[f64],
    names: &[String],
    prior_sd: &[f64],
    sensors: Vec<String>,
) -> Result<SensorSet> {
    let n = names.len();
    if information.len() != n * n || prior_sd.len() != n {
        return Err(Error::Run(
            "observability: information matrix of the wrong size".into(),
        ));
    }
    if let Some(i) = prior_sd.iter().position(|s| !(s.is_finite() && *s > 0.0)) {
        return Err(Error::Run(format!(
            "observability: the prior standard deviation of {} is {}; a positive scale is needed",
            names[i], prior_sd[i]
        )));
    }
    let j = DMatrix::from_column_slice(n, n, information);
    let mut scaled = DMatrix::from_fn(n, n, |a, b| prior_sd[a] * j[(a, b)] * prior_sd[b]);
    // Exactly symmetric before the symmetric eigen-decomposition.
    scaled = (&scaled + scaled.transpose()) * 0.5;
    let eigen = SymmetricEigen::new(scaled);
    let mut order: Vec<usize> = (0..n).collect();
    order.sort_by(|&a, &b| {
        eigen.eigenvalues[b]
            .abs()
            .total_cmp(&eigen.eigenvalues[a].abs())
    });
    let singular_values: Vec<f64> = order.iter().map(|&i| eigen.eigenvalues[i].abs()).collect();
    let largest = singular_values.first().copied().unwrap_or(0.0);
    let tol = n as f64 * f64::EPSILON * largest.max(1.0);
    let rank = singular_values.iter().filter(|s| **s > tol).count();
    // Numerically singular: the ratio of rounding-level values would say nothing.
    let conditioning = singular_values
        .last()
        .filter(|_| rank == n)
        .map(|smallest| largest / smallest)
        .filter(|c| c.is_finite());
    let vector = |k: usize, i: usize| eigen.eigenvectors[(i, order[k])];
    let states: Vec<StateBound> = (0..n)
        .map(|i| {
            let in_null = (rank..n).map(|k| vector(k, i).powi(2)).sum::<f64>().sqrt();
            let observable = in_null <= ORTHOGONAL_TOL;
            let sd_bound = observable.then(|| {
                let scaled_var: f64 = (0..rank)
                    .map(|k| vector(k, i).powi(2) / singular_values[k])
                    .sum();
                prior_sd[i] * scaled_var.sqrt()
            });
            let reading = match sd_bound {
                None => Reading::Not,
                Some(b) if b >= prior_sd[i] => Reading::Weakly,
                Some(_) => Reading::Well,
            };
            StateBound {
                name: names[i].clone(),
                observable,
                sd_bound,
                reading,
                prior_sd: prior_sd[i],
                pcrlb_sd: None,
            }
        })
        .collect();
    // The null space in the states' own units (x = S z), in reduced echelon form so that a
    // structural null space reads as plain state names.
    let null: Vec<Vec<f64>> = (rank..n)
        .map(|k| (0..n).map(|i| prior_sd[i] * vector(k, i)).collect())
        .collect();
    let unobservable_directions = echelon(null)
        .into_iter()
        .map(|coefficients| Direction {
            combination: combination_text(&coefficients, names),
            coefficients,
        })
        .collect();
    let reading = states
        .iter()
        .map(|s| s.reading)
        .max()
        .unwrap_or(Reading::Well);
    Ok(SensorSet {
        sensors,
        rank,
        singular_values,
        conditioning,
        reading,
        states,
        unobservable_directions,
    })
}

/// Reduced row echelon form of the rows `basis` (Gauss–Jordan with partial pivoting), each row
/// scaled to 1 at its pivot; entries at rounding level are set to zero.
fn echelon(mut rows: Vec<Vec<f64>>) -> Vec<Vec<f64>> {
    let Some(n) = rows.first().map(Vec::len) else {
        return rows;
    };
    let scale = rows
        .iter()
        .flatten()
        .fold(0.0_f64, |m, v| m.max(v.abs()))
        .max(f64::MIN_POSITIVE);
    let tiny = ORTHOGONAL_TOL * scale;
    let mut next = 0;
    for col in 0..n {
        if next == rows.len() {
            break;
        }
        let Some(pivot) = (next..rows.len())
            .max_by(|&a, &b| rows[a][col].abs().total_cmp(&rows[b][col].abs()))
            .filter(|&p| rows[p][col].abs() > tiny)
        else {
            continue;
        };
        rows.swap(next, pivot);
        let p = rows[next][col];
        for v in rows[next].iter_mut() {
            *v /= p;
        }
        let lead = rows[next].clone();
        for (r, row) in rows.iter_mut().enumerate() {
            if r != next {
                let factor = row[col];
                for (v, l) in row.iter_mut().zip(&lead) {
                    *v -= factor * l;
                }
            }
        }
        next += 1;
    }
    rows.truncate(next);
    for row in &mut rows {
        let top = row.iter().fold(0.0_f64, |m, v| m.max(v.abs()));
        for v in row.iter_mut() {
            if v.abs() <= KEPT_COEFFICIENT * top {
                *v = 0.0;
            }
        }
    }
    rows
}

/// `h2 + 0.5 h4 − 2 h5`: the coefficients with their state names, the small ones left out.
fn combination_text(coefficients: &[f64], names: &[String]) -> String {
    let top = coefficients.iter().fold(0.0_f64, |m, v| m.max(v.abs()));
    let mut text = String::new();
    let mut left_out = false;
    for (c, name) in coefficients.iter().zip(names).filter(|(c, _)| **c != 0.0) {
        if c.abs() < SHOWN_COEFFICIENT * top {
            left_out = true;
            continue;
        }
        let sign = match (text.is_empty(), *c < 0.0) {
            (true, false) => "",
            (true, true) => "−",
            (false, false) => " + ",
            (false, true) => " − ",
        };
        text.push_str(sign);
        if (c.abs() - 1.0).abs() > 1e-9 {
            text.push_str(&format!("{} ", crate::verdict::sig(c.abs(), 4)));
        }
        text.push_str(name);
    }
    if left_out {
        text.push_str(" + …");
    }
    text
}

/// The answer for one sensor set (indices into the plant's measurements) along `trajectory`
/// (every row with its state), with the PCRLB per state at the last row where the plant's
/// process noise allows it (a note says why not otherwise); also returns that bound over the
/// whole window.
pub fn sensor_set(
    plant: &dyn AnyPlant,
    trajectory: &Dataset,
    chosen: &[usize],
    notes: &mut Vec<String>,
) -> Result<(SensorSet, Option<Bound>)> {
    let measurements = plant.measurements();
    let states = plant.states();
    let flags: Vec<bool> = (0..measurements.len())
        .map(|i| chosen.contains(&i))
        .collect();
    let names: Vec<String> = states.iter().map(|v| v.name.clone()).collect();
    let (_, cov) = plant.prior();
    let n = names.len();
    let prior_sd: Vec<f64> = (0..n)
        .map(|i| cov.get(i * n + i).copied().unwrap_or(0.0).max(0.0).sqrt())
        .collect();
    let information = plant.observability_information(trajectory, &flags)?;
    let sensors: Vec<String> = chosen
        .iter()
        .map(|&i| measurements[i].name.clone())
        .collect();
    let mut set = analyse(&information, &names, &prior_sd, sensors.clone())?;
    // The PCRLB reads missing components as NaN: blank the sensors outside the set.
    let mut masked = trajectory.clone();
    for rec in &mut masked.records {
        for (y, keep) in rec.y.iter_mut().zip(&flags) {
            if !keep {
                *y = f64::NAN;
            }
        }
    }
    let bound = match plant.pcrlb(&[masked]) {
        Ok(bound) => {
            if let Some(last) = bound.variance.last() {
                for (s, v) in set.states.iter_mut().zip(last) {
                    s.pcrlb_sd = Some(v.max(0.0).sqrt());
                }
            }
            Some(bound)
        }
        Err(e) => {
            notes.push(format!(
                "no Cramér–Rao bound with process noise for sensors {}: {e}",
                sensors.join(",")
            ));
            None
        }
    };
    Ok((set, bound))
}

/// Parses a `--sensors` list (`level1,level2`) into measurement indices, in the order given.
pub fn parse_sensors(plant: &dyn AnyPlant, list: &str, option: &str) -> Result<Vec<usize>> {
    let measurements = plant.measurements();
    let valid = || {
        measurements
            .iter()
            .map(|v| v.name.as_str())
            .collect::<Vec<_>>()
            .join(", ")
    };
    let mut chosen = Vec::new();
    for name in list.split(',').map(str::trim) {
        if name.is_empty() {
            return Err(Error::Usage(format!(
                "{option} '{list}': an empty sensor name; expected measurement names separated \
                 by commas, from: {}",
                valid()
            )));
        }
        let Some(i) = measurements.iter().position(|v| v.name == name) else {
            return Err(Error::Usage(format!(
                "{option} '{list}': '{name}' is not a measurement of '{}'; valid: {}",
                plant.name(),
                valid()
            )));
        };
        if chosen.contains(&i) {
            return Err(Error::Usage(format!(
                "{option} '{list}': '{name}' is named twice; name each sensor once"
            )));
        }
        chosen.push(i);
    }
    Ok(chosen)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn names(list: &[&str]) -> Vec<String> {
        list.iter().map(|s| s.to_string()).collect()
    }

    /// y₁ = a + b, y₂ = c, unit noise, one row: J = [[1, 1, 0], [1, 1, 0], [0, 0, 1]]. Only
    /// a + b and c are seen; the null space is a − b, so neither a nor b is observable and c has
    /// bound √(1/1) = 1 (closed form, common practice). Prior scales change neither answer.
    #[test]
    fn a_measured_sum_leaves_the_difference_unseen() {
        #[rustfmt::skip]
        let j = [
            1.0, 1.0, 0.0,
            1.0, 1.0, 0.0,
            0.0, 0.0, 1.0,
        ];
        for prior in [[1.0, 1.0, 1.0], [2.0, 0.5, 10.0]] {
            let a = analyse(&j, &names(&["a", "b", "c"]), &prior, vec![]).unwrap();
            assert_eq!(a.rank, 2);
            assert_eq!(
                a.states.iter().map(|s| s.observable).collect::<Vec<_>>(),
                [false, false, true]
            );
            assert!((a.states[2].sd_bound.unwrap() - 1.0).abs() < 1e-12);
            assert_eq!(a.unobservable_directions.len(), 1);
            assert_eq!(a.unobservable_directions[0].combination, "a − b");
            let c = &a.unobservable_directions[0].coefficients;
            assert!((c[0] - 1.0).abs() < 1e-12 && (c[1] + 1.0).abs() < 1e-12 && c[2] == 0.0);
            assert!(a.conditioning.is_none());
        }
    }

    /// A full-rank J: the bound is √diag(J⁻¹) (closed form of the 2×2 inverse) and the reading
    /// compares it with the prior's sd.
    #[test]
    fn full_rank_bounds_are_the_inverse_diagonal() {
        // J = [[4, 2], [2, 2]]: J⁻¹ = [[0.5, −0.5], [−0.5, 1]].
        let j = [4.0, 2.0, 2.0, 2.0];
        let a = analyse(&j, &names(&["p", "q"]), &[1.0, 0.9], vec![]).unwrap();
        assert_eq!(a.rank, 2);
        assert!((a.states[0].sd_bound.unwrap() - 0.5_f64.sqrt()).abs() < 1e-12);
        assert!((a.states[1].sd_bound.unwrap() - 1.0).abs() < 1e-12);
        assert_eq!(a.states[0].reading, Reading::Well);
        assert_eq!(a.states[1].reading, Reading::Weakly);
        assert_eq!(a.reading, Reading::Weakly);
        assert!(a.unobservable_directions.is_empty());
    }

    /// Information far below rounding of the prior's own is none (the floor of the rank rule).
    #[test]
    fn rounding_level_information_is_no_information() {
        let j = [1e-33, 0.0, 0.0, 1e-34];
        let a = analyse(&j, &names(&["x", "y"]), &[0.1, 0.2], vec![]).unwrap();
        assert_eq!(a.rank, 0);
        assert_eq!(a.reading, Reading::Not);
    }
}
