//! The posterior Cramér–Rao lower bound (PCRLB) on the mean-squared error of any estimator.
//!
//! For x(k) = f(x(k−1)) + w, w ~ N(0, Q), y(k) = h(x(k)) + v, v ~ N(0, R), the Fisher information
//! J(k) of the state obeys the recursion of Tichavský, Muravchik & Nehorai ("Posterior Cramér–Rao
//! bounds for discrete-time nonlinear filtering", IEEE TSP 46(5), 1998, eqs. 21–34):
//!
//! ```text
//! J(k) = D22 − D21 (J(k−1) + D11)⁻¹ D12
//! D11 = E[Fᵀ Q⁻¹ F],  D12 = D21ᵀ = −E[Fᵀ Q⁻¹],  D22 = E[Q⁻¹] + E[Hᵀ R⁻¹ H]
//! ```
//!
//! with F = ∂f/∂x at x(k−1) and H = ∂h/∂x at x(k), from exact AD Jacobians, and J(0) =
//! P0⁻¹ + E[H(0)ᵀ R⁻¹ H(0)] (the first row carries a measurement too). The expectations are
//! Monte Carlo averages over simulated true trajectories. Any estimator's error covariance is
//! bounded below by J(k)⁻¹; for a linear-Gaussian plant the bound equals the Kalman filter's
//! covariance. Where Q depends on the state (Van Loan on a linearisation), Q is evaluated at
//! the true state and its own dependence on x is neglected. Missing measurement components carry
//! no information: their rows of H are dropped.

use nalgebra::{DMatrix, DefaultAllocator, Dim, OMatrix, OVector, U1};
use serde::{Deserialize, Serialize};
use sightline_core::linalg::{cholesky, symmetrise};
use sightline_core::{Alloc, Gaussian, Model, NumericError};
use sightline_filters::JacobianSource;
use sightline_filters::linearise::{measurement_jacobian, transition_jacobian};

use crate::dataset::Dataset;
use crate::error::{Error, Result};

/// The bound over a run: per step and state, and summarised like the filters' RMSE.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Bound {
    /// Diagonal of J(k)⁻¹ per step (row k), in state order: the smallest achievable MSE.
    pub variance: Vec<Vec<f64>>,
    /// √(mean over steps of the bound on each state's squared error): compare with `rmse`.
    pub rmse: Vec<f64>,
    /// √(mean over steps and states of the bound): compare with `rmse_all`.
    pub rmse_all: f64,
}

/// Largest state dimension for which campaigns compute the bound: its sums hold 3·n² entries per
/// step, which for large runtime-sized plants would dwarf everything else a campaign keeps.
pub const MAX_STATES: usize = 12;

fn inverse<N: Dim>(
    m: &OMatrix<f64, N, N>,
    what: &'static str,
) -> Result<OMatrix<f64, N, N>, NumericError>
where
    DefaultAllocator: nalgebra::allocator::Allocator<N, N>,
{
    Ok(cholesky(m, what)?.inverse())
}

/// The information terms one true trajectory contributes, per row: `[D11 | D12 | D22]`, each
/// n×n column-major, concatenated (3·n² values). Row 0 holds only its measurement term in D22.
/// Summed over trajectories and divided by their number they are the expectations of the
/// recursion; [`bound_from_terms`] runs it.
pub fn information_terms<M: Model>(model: &M, truth: &Dataset) -> Result<Vec<Vec<f64>>>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    let n = model.state_dim();
    let declaration = model.declare();
    let (name, inputs) = (declaration.name(), declaration.inputs().len());
    let numeric = |e: NumericError| Error::Run(format!("Cramér–Rao bound of '{name}': {e}"));
    let mut rows = Vec::with_capacity(truth.records.len());
    let mut previous: Option<(f64, OVector<f64, M::State>, &[f64])> = None;
    for (k, rec) in truth.records.iter().enumerate() {
        let Some(x) = &rec.x else {
            return Err(Error::Run(format!(
                "Cramér–Rao bound: row {k} has no true state"
            )));
        };
        if x.len() != n.value() || rec.u.len() != inputs {
            return Err(Error::Run(format!(
                "Cramér–Rao bound: row {k} does not match the plant's state or input size"
            )));
        }
        let x = OVector::<f64, M::State>::from_column_slice_generic(n, U1, x);
        let u = rec.u.as_slice();
        let mut d11 = OMatrix::<f64, M::State, M::State>::zeros_generic(n, n);
        let mut d12 = d11.clone();
        let mut d22 = d11.clone();
        if let Some((t0, x0, u0)) = &previous {
            let dt = rec.t - t0;
            let (_, f) = transition_jacobian(model, x0, u0, *t0, dt, JacobianSource::Automatic);
            let q_inv = inverse(
                &model.process_noise(x0, u0, *t0, dt),
                "process noise covariance Q",
            )
            .map_err(numeric)?;
            let ft_qinv = f.transpose() * &q_inv;
            d11 += &ft_qinv * &f;
            d12 -= &ft_qinv;
            d22 += &q_inv;
        }
        // Measurement information over the present components only.
        let (_, mut h) = measurement_jacobian(model, &x, u, rec.t, JacobianSource::Automatic);
        let mut r = model.measurement_noise(rec.t);
        for (i, yi) in rec.y.iter().enumerate() {
            if yi.is_nan() {
                h.row_mut(i).fill(0.0);
                r.row_mut(i).fill(0.0);
                r.column_mut(i).fill(0.0);
                r[(i, i)] = 1.0;
            }
        }
        let r_inv = inverse(&r, "measurement noise covariance R").map_err(numeric)?;
        d22 += h.transpose() * r_inv * &h;
        let mut row = Vec::with_capacity(3 * n.value() * n.value());
        row.extend_from_slice(d11.as_slice());
        row.extend_from_slice(d12.as_slice());
        row.extend_from_slice(d22.as_slice());
        rows.push(row);
        previous = Some((rec.t, x, u));
    }
    Ok(rows)
}

/// Runs the recursion on expectations for an `n`-state plant with prior covariance `prior_cov`
/// (column-major): `terms[k]` is the mean over trajectories of [`information_terms`]' row k.
/// Needs no model, so a merged Monte Carlo campaign can compute it from its totals alone.
pub fn bound_from_terms(n: usize, prior_cov: &[f64], terms: &[Vec<f64>]) -> Result<Bound> {
    let nn = n * n;
    let numeric = |e: NumericError| Error::Run(format!("Cramér–Rao bound: {e}"));
    let block = |row: &[f64], b: usize| -> Result<DMatrix<f64>> {
        row.get(b * nn..(b + 1) * nn)
            .map(|s| DMatrix::from_column_slice(n, n, s))
            .ok_or_else(|| {
                Error::Run("Cramér–Rao bound: information terms of the wrong size".into())
            })
    };
    if prior_cov.len() != nn {
        return Err(Error::Run(
            "Cramér–Rao bound: prior covariance of the wrong size".into(),
        ));
    }
    let bound_of = |j: &DMatrix<f64>| -> Result<Vec<f64>> {
        let inv = inverse(j, "Fisher information").map_err(numeric)?;
        Ok(inv.diagonal().iter().copied().collect())
    };
    let mut variance = Vec::with_capacity(terms.len());
    let mut j = inverse(
        &DMatrix::from_column_slice(n, n, prior_cov),
        "prior covariance",
    )
    .map_err(numeric)?;
    for (k, row) in terms.iter().enumerate() {
        let d22 = block(row, 2)?;
        if k == 0 {
            j += d22;
        } else {
            let d11 = block(row, 0)?;
            let d12 = block(row, 1)?;
            let middle = inverse(&(&j + d11), "J + D11").map_err(numeric)?;
            let mut next = d22 - d12.transpose() * middle * &d12;
            symmetrise(&mut next);
            j = next;
        }
        variance.push(bound_of(&j)?);
    }
    let count = variance.len().max(1) as f64;
    let rmse: Vec<f64> = (0..n)
        .map(|i| (variance.iter().map(|v| v[i]).sum::<f64>() / count).sqrt())
        .collect();
    let rmse_all = (variance.iter().map(|v| v.iter().sum::<f64>()).sum::<f64>()
        / (count * n.max(1) as f64))
        .sqrt();
    Ok(Bound {
        variance,
        rmse,
        rmse_all,
    })
}

/// The PCRLB of `model` from `prior` along the given true trajectories (datasets with `x.`
/// columns, all of the same length, e.g. the runs of a Monte Carlo campaign).
pub fn pcrlb<M: Model>(model: &M, prior: &Gaussian<M::State>, truths: &[Dataset]) -> Result<Bound>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    let Some(first) = truths.first() else {
        return Err(Error::Run(
            "the Cramér–Rao bound needs at least one true trajectory".into(),
        ));
    };
    let mut sums: Vec<Vec<f64>> = Vec::new();
    for (run, data) in truths.iter().enumerate() {
        if data.records.len() != first.records.len() {
            return Err(Error::Run(format!(
                "Cramér–Rao bound: trajectory {run} has {} rows, the first has {}",
                data.records.len(),
                first.records.len()
            )));
        }
        let terms = information_terms(model, data)?;
        if sums.is_empty() {
            sums = terms;
        } else {
            for (a, b) in sums.iter_mut().zip(&terms) {
                for (x, y) in a.iter_mut().zip(b) {
                    *x += y;
                }
            }
        }
    }
    let scale = 1.0 / truths.len() as f64;
    for row in &mut sums {
        for v in row.iter_mut() {
            *v *= scale;
        }
    }
    bound_from_terms(model.state_dim().value(), prior.cov.as_slice(), &sums)
}
