//! Discretisation of a linear(ised) continuous-time system with white process noise by Van Loan's
//! method (C. F. Van Loan, "Computing integrals involving the matrix exponential", IEEE TAC 23(3),
//! 1978).

use nalgebra::allocator::Allocator;
use nalgebra::{DefaultAllocator, Dim, OMatrix};

/// A block upper-triangular 2n×2n matrix `[[f, g], [0, h]]`, kept as its three n×n blocks so
/// that the exponential needs no 2n×2n storage (and no heap for static sizes).
struct BlockUpper<N: Dim>
where
    DefaultAllocator: Allocator<N, N>,
{
    f: OMatrix<f64, N, N>,
    g: OMatrix<f64, N, N>,
    h: OMatrix<f64, N, N>,
}

impl<N: Dim> BlockUpper<N>
where
    DefaultAllocator: Allocator<N, N>,
{
    fn mul(&self, other: &Self) -> Self {
        BlockUpper {
            f: &self.f * &other.f,
            g: &self.f * &other.g + &self.g * &other.h,
            h: &self.h * &other.h,
        }
    }

    /// The induced 1-norm (largest absolute column sum) of `[[f, g], [0, h]]`. The scaling rule
    /// needs a true norm: the largest entry understates it by up to the dimension, which left
    /// dense plants with a truncated series.
    fn norm1(&self) -> f64 {
        let column_sum =
            |m: &OMatrix<f64, N, N>, j: usize| m.column(j).iter().map(|v| v.abs()).sum::<f64>();
        (0..self.f.ncols())
            .map(|j| column_sum(&self.f, j).max(column_sum(&self.g, j) + column_sum(&self.h, j)))
            .fold(0.0, f64::max)
    }
}

/// Transition matrix Φ = e^{A·dt} and discrete process-noise covariance
/// Q_d = ∫₀^dt e^{A s} Q_c e^{Aᵀ s} ds of `dx = A x dt + dβ`, E[dβ dβᵀ] = Q_c dt.
///
/// Van Loan's identity: with `C = [[-A, Q_c], [0, Aᵀ]]·dt`, `e^C = [[·, Φ⁻¹Q_d], [0, Φᵀ]]`.
/// The exponential is taken by scaling and squaring with a degree-18 Taylor series on the
/// block-triangular structure (Moler & Van Loan, SIAM Review 45(1), 2003, method 3), accurate to
/// rounding for the step sizes plants use.
///
/// ```
/// use sightline_core::nalgebra::Matrix2;
/// use sightline_core::van_loan;
/// // Constant velocity with white acceleration of spectral density q (closed form, Bar-Shalom,
/// // Li & Kirubarajan 2001, §6.2): Q = q [[dt³/3, dt²/2], [dt²/2, dt]].
/// let (q, dt) = (0.7, 0.5);
/// let a = Matrix2::new(0.0, 1.0, 0.0, 0.0);
/// let qc = Matrix2::new(0.0, 0.0, 0.0, q);
/// let (phi, qd) = van_loan(&a, &qc, dt);
/// assert!((phi[(0, 1)] - dt).abs() < 1e-14);
/// assert!((qd[(0, 0)] - q * dt.powi(3) / 3.0).abs() < 1e-14);
/// assert!((qd[(0, 1)] - q * dt.powi(2) / 2.0).abs() < 1e-14);
/// ```
pub fn van_loan<N: Dim>(
    a: &OMatrix<f64, N, N>,
    qc: &OMatrix<f64, N, N>,
    dt: f64,
) -> (OMatrix<f64, N, N>, OMatrix<f64, N, N>)
where
    DefaultAllocator: Allocator<N, N>,
{
    let (n, _) = a.shape_generic();
    let c = BlockUpper {
        f: -a * dt,
        g: qc * dt,
        h: a.transpose() * dt,
    };
    // Scale so the series converges fast: ‖C/2^s‖ ≤ 1/2.
    let norm = c.norm1();
    let squarings = if norm > 0.5 {
        (norm / 0.5).log2().ceil() as i32
    } else {
        0
    };
    let scale = 0.5f64.powi(squarings);
    let c = BlockUpper {
        f: c.f * scale,
        g: c.g * scale,
        h: c.h * scale,
    };
    let identity = OMatrix::<f64, N, N>::identity_generic(n, n);
    let mut sum = BlockUpper {
        f: identity.clone(),
        g: OMatrix::zeros_generic(n, n),
        h: identity.clone(),
    };
    let mut term = BlockUpper {
        f: identity.clone(),
        g: OMatrix::zeros_generic(n, n),
        h: identity,
    };
    for k in 1..=18 {
        term = term.mul(&c);
        let inv_k = 1.0 / k as f64;
        term.f *= inv_k;
        term.g *= inv_k;
        term.h *= inv_k;
        sum.f += &term.f;
        sum.g += &term.g;
        sum.h += &term.h;
    }
    for _ in 0..squarings {
        sum = sum.mul(&sum);
    }
    let phi = sum.h.transpose();
    let mut qd = &phi * &sum.g;
    crate::linalg::symmetrise(&mut qd);
    (phi, qd)
}
