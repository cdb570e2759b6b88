//! Small dense linear-algebra helpers shared by the filters. None allocates for static sizes.

use nalgebra::allocator::Allocator;
use nalgebra::{Cholesky, DefaultAllocator, Dim, OMatrix};

use crate::error::NumericError;

/// Replaces `p` by `(p + pᵀ)/2` in place, so round-off never accumulates into asymmetry.
pub fn symmetrise<N: Dim>(p: &mut OMatrix<f64, N, N>)
where
    DefaultAllocator: Allocator<N, N>,
{
    let n = p.nrows();
    for j in 0..n {
        for i in (j + 1)..n {
            let v = 0.5 * (p[(i, j)] + p[(j, i)]);
            p[(i, j)] = v;
            p[(j, i)] = v;
        }
    }
}

/// Cholesky factorisation that names the matrix when it fails or holds non-finite entries.
pub fn cholesky<N: Dim>(
    p: &OMatrix<f64, N, N>,
    quantity: &'static str,
) -> Result<Cholesky<f64, N>, NumericError>
where
    DefaultAllocator: Allocator<N, N>,
{
    if !p.iter().all(|v| v.is_finite()) {
        return Err(NumericError::NonFinite { quantity });
    }
    Cholesky::new(p.clone()).ok_or(NumericError::NotPositiveDefinite { quantity })
}

/// Checks that every entry is finite, naming the quantity otherwise.
pub fn ensure_finite<'a>(
    values: impl IntoIterator<Item = &'a f64>,
    quantity: &'static str,
) -> Result<(), NumericError> {
    if values.into_iter().all(|v| v.is_finite()) {
        Ok(())
    } else {
        Err(NumericError::NonFinite { quantity })
    }
}

/// Smallest eigenvalue of a symmetric matrix (for soundness checks and covariance repair).
pub fn min_eigenvalue<N>(p: &OMatrix<f64, N, N>) -> f64
where
    N: Dim + nalgebra::DimSub<nalgebra::U1>,
    DefaultAllocator:
        Allocator<N, N> + Allocator<N> + Allocator<<N as nalgebra::DimSub<nalgebra::U1>>::Output>,
{
    p.clone().symmetric_eigenvalues().min()
}
