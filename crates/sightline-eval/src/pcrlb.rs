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

use nalgebra::{DefaultAllocator, Dim, OMatrix};
use serde::{Deserialize, Serialize};
use sightline_core::ad::Differentiable;
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

/// Information sums of one step over the trajectories.
struct StepSums<N: Dim>
where
    DefaultAllocator: nalgebra::allocator::Allocator<N, N>,
{
    d11: OMatrix<f64, N, N>,
    d12: OMatrix<f64, N, N>,
    d22: OMatrix<f64, N, N>,
}

fn inverse<N: Dim>(
    m: &OMatrix<f64, N, N>,
    what: &'static str,
) -> Result<OMatrix<f64, N, N>, NumericError>
where
    DefaultAllocator: nalgebra::allocator::Allocator<N, N>,
{
    Ok(cholesky(m, what)?.inverse())
}

/// The PCRLB of `model` from `prior` along the true trajectories in `truths` (datasets with
/// `x.` columns, all of the same length, e.g. the runs of a Monte Carlo campaign).
pub fn pcrlb<M: Model>(model: &M, prior: &Gaussian<M::State>, truths: &[Dataset]) -> Result<Bound>
where
    M::State: Differentiable,
    DefaultAllocator: Alloc<M::State, M::Meas, M::Input>,
{
    let Some(first) = truths.first() else {
        return Err(Error::Run(
            "the Cramér–Rao bound needs at least one true trajectory".into(),
        ));
    };
    let steps = first.records.len();
    let n = model.state_dim();
    let numeric =
        |e: NumericError| Error::Run(format!("Cramér–Rao bound of '{}': {e}", model.name()));
    let zeros = || OMatrix::<f64, M::State, M::State>::zeros_generic(n, n);
    let mut sums: Vec<StepSums<M::State>> = (0..steps)
        .map(|_| StepSums {
            d11: zeros(),
            d12: zeros(),
            d22: zeros(),
        })
        .collect();
    for (run, data) in truths.iter().enumerate() {
        if data.records.len() != steps {
            return Err(Error::Run(format!(
                "Cramér–Rao bound: trajectory {run} has {} rows, the first has {steps}",
                data.records.len()
            )));
        }
        let mut previous: Option<(
            f64,
            OMatrix<f64, M::State, nalgebra::U1>,
            OMatrix<f64, M::Input, nalgebra::U1>,
        )> = None;
        for (k, rec) in data.records.iter().enumerate() {
            let Some(x) = &rec.x else {
                return Err(Error::Run(format!(
                    "Cramér–Rao bound: trajectory {run} row {k} has no true state"
                )));
            };
            let x = OMatrix::<f64, M::State, nalgebra::U1>::from_column_slice_generic(
                n,
                nalgebra::U1,
                x,
            );
            let u = OMatrix::<f64, M::Input, nalgebra::U1>::from_column_slice_generic(
                model.input_dim(),
                nalgebra::U1,
                &rec.u,
            );
            let s = &mut sums[k];
            if let Some((t0, x0, u0)) = &previous {
                let dt = rec.t - t0;
                let (_, f) = transition_jacobian(model, x0, u0, *t0, dt, JacobianSource::Automatic);
                let q_inv = inverse(
                    &model.process_noise(x0, u0, *t0, dt),
                    "process noise covariance Q",
                )
                .map_err(numeric)?;
                let ft_qinv = f.transpose() * &q_inv;
                s.d11 += &ft_qinv * &f;
                s.d12 -= &ft_qinv;
                s.d22 += &q_inv;
            }
            // Measurement information over the present components.
            let (_, mut h) = measurement_jacobian(model, &x, &u, rec.t, JacobianSource::Automatic);
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
            s.d22 += h.transpose() * r_inv * &h;
            previous = Some((rec.t, x, u));
        }
    }
    let scale = 1.0 / truths.len() as f64;
    let p0_inv = inverse(&prior.cov, "prior covariance").map_err(numeric)?;
    let mut j = p0_inv + &sums[0].d22 * scale;
    let mut variance = Vec::with_capacity(steps);
    let bound_of = |j: &OMatrix<f64, M::State, M::State>| -> Result<Vec<f64>> {
        let inv = inverse(j, "Fisher information").map_err(numeric)?;
        Ok(inv.diagonal().iter().copied().collect())
    };
    if steps > 0 {
        variance.push(bound_of(&j)?);
    }
    for s in sums.iter().skip(1) {
        let d11 = &s.d11 * scale;
        let d12 = &s.d12 * scale;
        let d22 = &s.d22 * scale;
        let middle = inverse(&(&j + d11), "J + D11").map_err(numeric)?;
        let mut next = d22 - d12.transpose() * middle * &d12;
        symmetrise(&mut next);
        j = next;
        variance.push(bound_of(&j)?);
    }
    let count = variance.len().max(1) as f64;
    let dim = n.value();
    let rmse: Vec<f64> = (0..dim)
        .map(|i| (variance.iter().map(|v| v[i]).sum::<f64>() / count).sqrt())
        .collect();
    let rmse_all = (variance.iter().map(|v| v.iter().sum::<f64>()).sum::<f64>()
        / (count * dim.max(1) as f64))
        .sqrt();
    Ok(Bound {
        variance,
        rmse,
        rmse_all,
    })
}
