//! The measurement update shared by the Gaussian filters: missing components, the Kalman gain,
//! the innovation statistics and the log-likelihood increment.
//!
//! Missing components (NaN in `y`) are handled exactly and without allocation: their residual is
//! set to 0, their row and column of the innovation covariance S to those of the identity, and
//! their column of the cross-covariance C to 0. S is then block-diagonal (S_pp, I), so the gain
//! K = C S⁻¹ has zero columns for them and `K ν`, `K S Kᵀ`, `νᵀS⁻¹ν` and `ln det S` equal the
//! same quantities over the present block alone.

use nalgebra::{DefaultAllocator, Dim, OMatrix, OVector};
use sightline_core::NumericError;
use sightline_core::linalg::{cholesky, ensure_finite, symmetrise};

use crate::belief::Remedies;
use crate::filter::Diagnostics;

/// ln(2π).
pub(crate) const LN_2PI: f64 = 1.837_877_066_409_345_5;

/// Innovation statistics of one update, kept by every Gaussian filter.
#[derive(Debug, Clone)]
pub(crate) struct InnovationStore<M: Dim>
where
    DefaultAllocator: nalgebra::allocator::Allocator<M> + nalgebra::allocator::Allocator<M, M>,
{
    pub residual: OVector<f64, M>,
    pub covariance: OMatrix<f64, M, M>,
    pub present: usize,
    pub nis: f64,
    pub log_likelihood: f64,
}

impl<M: Dim> InnovationStore<M>
where
    DefaultAllocator: nalgebra::allocator::Allocator<M> + nalgebra::allocator::Allocator<M, M>,
{
    pub fn new(m: M) -> Self {
        InnovationStore {
            residual: OVector::zeros_generic(m, nalgebra::U1),
            covariance: OMatrix::identity_generic(m, m),
            present: 0,
            nis: 0.0,
            log_likelihood: 0.0,
        }
    }

    /// Marks "no measurement used".
    pub fn clear(&mut self) {
        self.present = 0;
        self.nis = 0.0;
        self.log_likelihood = 0.0;
    }

    pub fn view(&self) -> Option<crate::Innovation<'_>> {
        (self.present > 0).then(|| crate::Innovation {
            residual: self.residual.as_slice(),
            covariance: self.covariance.as_slice(),
            present: self.present,
            nis: self.nis,
        })
    }
}

/// Which components of `y` are present; errors on ±∞ (NaN means missing).
pub(crate) fn present_mask<M: Dim>(y: &OVector<f64, M>) -> Result<usize, NumericError>
where
    DefaultAllocator: nalgebra::allocator::Allocator<M>,
{
    if y.iter().any(|v| v.is_infinite()) {
        return Err(NumericError::NonFinite {
            quantity: "measurement",
        });
    }
    Ok(y.iter().filter(|v| !v.is_nan()).count())
}

/// Blanks the missing components (NaN in `y`) of a residual, an innovation covariance and the
/// columns of a cross-covariance, as described in the module docs.
pub(crate) fn mask_missing<N: Dim, M: Dim>(
    y: &OVector<f64, M>,
    residual: &mut OVector<f64, M>,
    s: &mut OMatrix<f64, M, M>,
    cross: Option<&mut OMatrix<f64, N, M>>,
) where
    DefaultAllocator: nalgebra::allocator::Allocator<M>
        + nalgebra::allocator::Allocator<M, M>
        + nalgebra::allocator::Allocator<N, M>,
{
    let m = y.len();
    let mut cross = cross;
    for i in 0..m {
        if y[i].is_nan() {
            residual[i] = 0.0;
            for j in 0..m {
                s[(i, j)] = 0.0;
                s[(j, i)] = 0.0;
            }
            s[(i, i)] = 1.0;
            if let Some(c) = cross.as_deref_mut() {
                c.column_mut(i).fill(0.0);
            }
        }
    }
}

/// Kalman update from a (masked) residual ν, innovation covariance S and cross-covariance C:
/// x ← x + C S⁻¹ ν, P ← P − C S⁻¹ Cᵀ. Fills `store` with NIS and the log-likelihood
/// increment −½(νᵀS⁻¹ν + ln det S + p ln 2π), p the number of present components.
///
/// With the [`Remedies`] on, S is repaired before it is factorised and an update whose NIS
/// exceeds the gate is skipped (mean and covariance unchanged, `store` cleared); both are
/// counted in `diagnostics`.
pub(crate) fn kalman_update<N: Dim, M: Dim>(
    mean: &mut OVector<f64, N>,
    cov: &mut OMatrix<f64, N, N>,
    cross: &OMatrix<f64, N, M>,
    store: &mut InnovationStore<M>,
    present: usize,
    remedies: &Remedies,
    diagnostics: &mut Diagnostics,
) -> Result<(), NumericError>
where
    DefaultAllocator: nalgebra::allocator::Allocator<N>
        + nalgebra::allocator::Allocator<N, N>
        + nalgebra::allocator::Allocator<M>
        + nalgebra::allocator::Allocator<M, M>
        + nalgebra::allocator::Allocator<N, M>
        + nalgebra::allocator::Allocator<M, N>,
{
    if remedies.repair(&mut store.covariance) {
        diagnostics.repaired += 1;
    }
    let chol = cholesky(&store.covariance, "innovation covariance")?;
    let weighted = chol.solve(&store.residual);
    let nis = store.residual.dot(&weighted);
    if remedies.gates(nis, present) {
        diagnostics.gated += 1;
        store.clear();
        return Ok(());
    }
    // Kᵀ = S⁻¹ Cᵀ (S symmetric).
    let gain_t = chol.solve(&cross.transpose());
    *mean += gain_t.transpose() * &store.residual;
    *cov -= cross * &gain_t;
    symmetrise(cov);
    store.nis = nis;
    store.log_likelihood = -0.5 * (store.nis + chol.ln_determinant() + present as f64 * LN_2PI);
    store.present = present;
    ensure_finite(mean.iter(), "posterior mean")?;
    ensure_finite(cov.iter(), "posterior covariance")?;
    Ok(())
}
