//! A multivariate Gaussian belief: mean and covariance.

use nalgebra::allocator::Allocator;
use nalgebra::{DefaultAllocator, Dim, OMatrix, OVector};

/// Mean and covariance of a Gaussian over `N` states.
#[derive(Debug, Clone, PartialEq)]
pub struct Gaussian<N: Dim>
where
    DefaultAllocator: Allocator<N> + Allocator<N, N>,
{
    /// Mean.
    pub mean: OVector<f64, N>,
    /// Covariance (symmetric positive-definite).
    pub cov: OMatrix<f64, N, N>,
}

impl<N: Dim> Gaussian<N>
where
    DefaultAllocator: Allocator<N> + Allocator<N, N>,
{
    /// A Gaussian from its mean and covariance.
    pub fn new(mean: OVector<f64, N>, cov: OMatrix<f64, N, N>) -> Self {
        Gaussian { mean, cov }
    }

    /// Standard deviations: square roots of the covariance diagonal.
    pub fn std_devs(&self) -> OVector<f64, N> {
        self.cov.map_diagonal(|v| v.max(0.0).sqrt())
    }
}
