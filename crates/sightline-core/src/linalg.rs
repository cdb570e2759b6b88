//! Small dense linear-algebra helpers shared by the filters. None allocates for static sizes.

use nalgebra::allocator::Allocator;
use nalgebra::{Cholesky, DefaultAllocator, Dim, Dyn, OMatrix, OVector};

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

/// Lower-triangular `L` with `L Lᵀ = A` for a symmetric positive *semi*-definite `A`.
///
/// The Cholesky–Banachiewicz recursion (Golub & Van Loan, *Matrix Computations*, 4th ed., 2013,
/// Alg. 4.2.1) with zero pivots allowed: a pivot within `16·n·ε·Aⱼⱼ` of zero (the rounding
/// level of its own column) gives a zero column, as it must for a semi-definite matrix (whose
/// Schur complement then has a zero column too, up to rounding — checked by Cauchy–Schwarz,
/// |aᵢⱼ|² ≤ aᵢᵢ aⱼⱼ). Process noise of a plant
/// with noise-free states (Q = 0 for a random constant) is semi-definite, so square-root filters
/// need this rather than a strict Cholesky factorisation. Does not allocate for static sizes.
///
/// ```
/// use sightline_core::linalg::semidefinite_factor;
/// use sightline_core::nalgebra::Matrix2;
/// let q = Matrix2::new(0.0, 0.0, 0.0, 4.0);
/// let l = semidefinite_factor(&q, "Q").unwrap();
/// assert_eq!(l, Matrix2::new(0.0, 0.0, 0.0, 2.0));
/// assert!(semidefinite_factor(&Matrix2::new(1.0, 2.0, 2.0, 1.0), "Q").is_err());
/// ```
pub fn semidefinite_factor<N: Dim>(
    a: &OMatrix<f64, N, N>,
    quantity: &'static str,
) -> Result<OMatrix<f64, N, N>, NumericError>
where
    DefaultAllocator: Allocator<N, N>,
{
    ensure_finite(a.iter(), quantity)?;
    let (dim, _) = a.shape_generic();
    let n = dim.value();
    let rounding = 16.0 * n as f64 * f64::EPSILON;
    let not_pd = NumericError::NotPositiveDefinite { quantity };
    let mut l = OMatrix::<f64, N, N>::zeros_generic(dim, dim);
    for j in 0..n {
        let tol = rounding * a[(j, j)].abs();
        let mut pivot = a[(j, j)];
        for k in 0..j {
            pivot -= l[(j, k)] * l[(j, k)];
        }
        if pivot < -tol {
            return Err(not_pd);
        }
        let zero_pivot = pivot <= tol;
        let diag = if zero_pivot { 0.0 } else { pivot.sqrt() };
        l[(j, j)] = diag;
        for i in (j + 1)..n {
            let mut v = a[(i, j)];
            for k in 0..j {
                v -= l[(i, k)] * l[(j, k)];
            }
            if zero_pivot {
                // Semi-definite: the remaining entries of this column are rounding noise.
                if v.abs() > 16.0 * (tol * a[(i, i)].abs()).sqrt() {
                    return Err(not_pd);
                }
            } else {
                l[(i, j)] = v / diag;
            }
        }
    }
    Ok(l)
}

/// Replaces the lower-triangular factor `l` of `P = L Lᵀ` by that of `P + x xᵀ`
/// (`downdate = false`) or `P − x xᵀ` (`downdate = true`), in O(n²) and in place; `x` is used as
/// workspace and overwritten.
///
/// The update applies Givens rotations, the downdate hyperbolic rotations, column by column
/// (the LINPACK `dchud`/`dchdd` scheme; Golub & Van Loan, *Matrix Computations*, 4th ed., 2013,
/// §6.5.4). The diagonal of `l` must be non-negative and stays so. A downdate whose result is not
/// positive-definite (a pivot `lₖₖ² − xₖ² ≤ 0` with `xₖ ≠ 0`) returns
/// [`NumericError::NotPositiveDefinite`] naming `quantity`; it never yields NaN.
///
/// ```
/// use sightline_core::linalg::cholesky_rank_one;
/// use sightline_core::nalgebra::{Matrix2, Vector2};
/// let mut l = Matrix2::new(2.0, 0.0, 1.0, 1.0);
/// let mut x = Vector2::new(1.0, 1.0);
/// cholesky_rank_one(&mut l, &mut x, false, "P").unwrap();
/// let p = Matrix2::new(4.0, 2.0, 2.0, 2.0) + Matrix2::new(1.0, 1.0, 1.0, 1.0);
/// assert!((l * l.transpose() - p).abs().max() < 1e-14);
/// let mut too_big = Vector2::new(3.0, 0.0);
/// assert!(cholesky_rank_one(&mut l, &mut too_big, true, "P").is_err());
/// ```
pub fn cholesky_rank_one<N: Dim>(
    l: &mut OMatrix<f64, N, N>,
    x: &mut OVector<f64, N>,
    downdate: bool,
    quantity: &'static str,
) -> Result<(), NumericError>
where
    DefaultAllocator: Allocator<N, N> + Allocator<N>,
{
    ensure_finite(x.iter(), quantity)?;
    let n = x.len();
    for k in 0..n {
        let a = l[(k, k)];
        let b = x[k];
        if b == 0.0 {
            continue;
        }
        if downdate {
            let r2 = (a - b) * (a + b);
            let definite = r2 > 0.0 && a > 0.0;
            if !definite {
                return Err(NumericError::NotPositiveDefinite { quantity });
            }
            let r = r2.sqrt();
            let (c, s) = (r / a, b / a);
            l[(k, k)] = r;
            for i in (k + 1)..n {
                let lik = (l[(i, k)] - s * x[i]) / c;
                l[(i, k)] = lik;
                x[i] = c * x[i] - s * lik;
            }
        } else {
            let r = a.hypot(b);
            let (c, s) = (a / r, b / r);
            l[(k, k)] = r;
            for i in (k + 1)..n {
                let (lik, xi) = (l[(i, k)], x[i]);
                l[(i, k)] = c * lik + s * xi;
                x[i] = c * xi - s * lik;
            }
        }
    }
    ensure_finite(l.iter(), quantity)
}

/// Lower-triangular `L` (non-negative diagonal) with `L Lᵀ = A Aᵀ` for a wide `r × c` matrix `A`
/// (`c ≥ r`), by Householder reflections applied from the right — the LQ factorisation, i.e. the
/// QR factorisation of `Aᵀ` transposed (Golub & Van Loan, *Matrix Computations*, 4th ed., 2013,
/// §5.2.2). This is the "qr" step of square-root filters. Works in place on `a` (its contents are
/// destroyed), so a buffer allocated once serves every step; the result does not allocate for a
/// static row count.
///
/// ```
/// use sightline_core::linalg::lower_triangular_factor;
/// use sightline_core::nalgebra::{Dyn, Matrix2, OMatrix, U2};
/// let mut a = OMatrix::<f64, U2, Dyn>::from_row_slice_generic(U2, Dyn(3), &[1.0, 2.0, 3.0, 4.0, 5.0, 6.0]);
/// let gram = &a * a.transpose();
/// let l = lower_triangular_factor(&mut a);
/// assert_eq!(l[(0, 1)], 0.0);
/// assert!((l * l.transpose() - gram).abs().max() < 1e-12);
/// ```
pub fn lower_triangular_factor<R: Dim>(a: &mut OMatrix<f64, R, Dyn>) -> OMatrix<f64, R, R>
where
    DefaultAllocator: Allocator<R, Dyn> + Allocator<R, R> + Allocator<R>,
{
    let (rows, _) = a.shape_generic();
    let r = rows.value();
    let c = a.ncols();
    // Per-row factors of the reflection, f_j = β (a_j · v) for the rows j below the pivot.
    let mut f = OVector::<f64, R>::zeros_generic(rows, nalgebra::U1);
    let f = f.as_mut_slice();
    for i in 0..r.min(c) {
        let x0 = a[(i, i)];
        let tail2: f64 = ((i + 1)..c).map(|k| a[(i, k)] * a[(i, k)]).sum();
        if tail2 == 0.0 {
            continue;
        }
        let norm = (x0 * x0 + tail2).sqrt();
        // Reflect onto −sign(x0)·‖x‖ to avoid cancellation in v0 = x0 − α.
        let alpha = if x0 > 0.0 { -norm } else { norm };
        let v0 = x0 - alpha;
        let beta = 2.0 / (v0 * v0 + tail2);
        // Rows j > i become a_j − β (a_j · v) v with v = (v0, a_i,i+1 .. a_i,c−1). The storage
        // is column-major, so both passes walk columns (contiguous) and keep one running dot
        // product per row, summed in the same order as a row-by-row loop would.
        let (head, tail) = a.as_mut_slice().split_at_mut((i + 1) * r);
        let pivot_column = &mut head[i * r..];
        let below = (i + 1)..r;
        for (fj, &aji) in f[below.clone()]
            .iter_mut()
            .zip(&pivot_column[below.clone()])
        {
            *fj = aji * v0;
        }
        for column in tail.chunks_exact(r) {
            let vk = column[i];
            for (fj, &ajk) in f[below.clone()].iter_mut().zip(&column[below.clone()]) {
                *fj += ajk * vk;
            }
        }
        for (fj, aji) in f[below.clone()]
            .iter_mut()
            .zip(&mut pivot_column[below.clone()])
        {
            *fj *= beta;
            *aji -= *fj * v0;
        }
        for column in tail.chunks_exact_mut(r) {
            let vk = column[i];
            for (ajk, &fj) in column[below.clone()].iter_mut().zip(&f[below.clone()]) {
                *ajk -= fj * vk;
            }
        }
        a[(i, i)] = alpha;
        for k in (i + 1)..c {
            a[(i, k)] = 0.0;
        }
    }
    let mut l = OMatrix::<f64, R, R>::zeros_generic(rows, rows);
    for j in 0..r.min(c) {
        // Flipping a column's sign leaves L Lᵀ unchanged; it makes the diagonal non-negative.
        let sign = if a[(j, j)] < 0.0 { -1.0 } else { 1.0 };
        for i in j..r {
            l[(i, j)] = sign * a[(i, j)];
        }
    }
    l
}

/// Eigen-decomposition `A = V diag(λ) Vᵀ` of a symmetric matrix by the cyclic Jacobi method
/// (Golub & Van Loan, *Matrix Computations*, 4th ed., 2013, §8.5.2–8.5.3, Alg. 8.5.1 for the
/// 2×2 symmetric Schur rotation and Alg. 8.5.3 for the cyclic sweep): `a` is overwritten by
/// (nearly) diag(λ) and `v` by the orthogonal V. Sweeps stop once the off-diagonal mass is below
/// `ε·‖A‖_F` (quadratic convergence; a few sweeps for the sizes of state covariances) or after
/// 60 sweeps. Works for every dimension type, static or `Dyn`, without allocating for static
/// sizes — which nalgebra's own symmetric eigensolver cannot offer over a generic `Dim`.
pub fn jacobi_eigen<N: Dim>(a: &mut OMatrix<f64, N, N>, v: &mut OMatrix<f64, N, N>)
where
    DefaultAllocator: Allocator<N, N>,
{
    let n = a.nrows();
    v.fill_with_identity();
    let scale = a.norm();
    if !(scale.is_finite() && scale > 0.0) {
        return;
    }
    for _sweep in 0..60 {
        let mut off = 0.0;
        for j in 0..n {
            for i in 0..n {
                if i != j {
                    off += a[(i, j)] * a[(i, j)];
                }
            }
        }
        if off.sqrt() <= f64::EPSILON * scale {
            return;
        }
        for p in 0..n {
            for q in (p + 1)..n {
                let apq = a[(p, q)];
                if apq == 0.0 {
                    continue;
                }
                // sym.schur2: the rotation (c, s) that zeroes a_pq.
                let tau = (a[(q, q)] - a[(p, p)]) / (2.0 * apq);
                let t = if tau >= 0.0 {
                    1.0 / (tau + (1.0 + tau * tau).sqrt())
                } else {
                    -1.0 / (-tau + (1.0 + tau * tau).sqrt())
                };
                let c = 1.0 / (1.0 + t * t).sqrt();
                let s = t * c;
                // A ← Jᵀ A J, column pair then row pair; V ← V J.
                for k in 0..n {
                    let (akp, akq) = (a[(k, p)], a[(k, q)]);
                    a[(k, p)] = c * akp - s * akq;
                    a[(k, q)] = s * akp + c * akq;
                }
                for k in 0..n {
                    let (apk, aqk) = (a[(p, k)], a[(q, k)]);
                    a[(p, k)] = c * apk - s * aqk;
                    a[(q, k)] = s * apk + c * aqk;
                }
                for k in 0..n {
                    let (vkp, vkq) = (v[(k, p)], v[(k, q)]);
                    v[(k, p)] = c * vkp - s * vkq;
                    v[(k, q)] = s * vkp + c * vkq;
                }
            }
        }
    }
}

/// Covariance repair: symmetrises `p` and raises every eigenvalue below `floor · ρ(P)` (ρ the
/// spectral radius, i.e. λ_max for a semi-definite P; and at least the smallest positive normal
/// number) to that level, keeping the eigenvectors — the
/// nearest matrix in the Frobenius norm with that spectral floor (Higham, "Computing a nearest
/// symmetric positive semidefinite matrix", Linear Algebra Appl. 103, 1988, Thm. 2.1, applied
/// with a floor). Returns whether `p` was changed beyond symmetrisation; a matrix that already
/// satisfies the floor is left bit for bit as it was (after symmetrisation), so repair costs
/// nothing in accuracy on a healthy filter. Non-finite matrices are left alone (the caller
/// reports them). A Cholesky test of `P − floor·tr(P)·I` skips the eigen-decomposition in the
/// common healthy case (tr P ≥ λ_max, so success proves the floor holds).
///
/// ```
/// use sightline_core::linalg::floor_eigenvalues;
/// use sightline_core::nalgebra::Matrix2;
/// // Eigenvalues 3 and −1, eigenvectors (1, 1)/√2 and (1, −1)/√2: the −1 becomes 3·10⁻³.
/// let mut p = Matrix2::new(1.0, 2.0, 2.0, 1.0);
/// assert!(floor_eigenvalues(&mut p, 1e-3));
/// assert!((p - Matrix2::new(1.5015, 1.4985, 1.4985, 1.5015)).abs().max() < 1e-12);
/// let mut healthy = Matrix2::new(2.0, 0.5, 0.5, 1.0);
/// assert!(!floor_eigenvalues(&mut healthy, 1e-3));
/// assert_eq!(healthy, Matrix2::new(2.0, 0.5, 0.5, 1.0));
/// ```
pub fn floor_eigenvalues<N: Dim>(p: &mut OMatrix<f64, N, N>, floor: f64) -> bool
where
    DefaultAllocator: Allocator<N, N>,
{
    symmetrise(p);
    if !p.iter().all(|v| v.is_finite()) {
        return false;
    }
    let trace = p.trace();
    if trace > 0.0 {
        let (dim, _) = p.shape_generic();
        let shifted = &*p - OMatrix::<f64, N, N>::identity_generic(dim, dim) * (floor * trace);
        if Cholesky::new(shifted).is_some() {
            return false;
        }
    }
    let mut a = p.clone();
    let mut v = p.clone();
    jacobi_eigen(&mut a, &mut v);
    let n = p.nrows();
    // The spectral radius: λmax for a semi-definite matrix, and still a scale when round-off
    // or a poor model made every eigenvalue negative.
    let radius = (0..n).map(|i| a[(i, i)].abs()).fold(0.0, f64::max);
    let threshold = (floor * radius).max(f64::MIN_POSITIVE);
    // Eigenvalues computed within rounding of the floor already meet it (so a repaired matrix
    // is not repaired again on the next step).
    let slack = 8.0 * n as f64 * f64::EPSILON * radius;
    if (0..n).all(|i| a[(i, i)] >= threshold - slack) {
        return false;
    }
    p.fill(0.0);
    for k in 0..n {
        let lambda = a[(k, k)].max(threshold);
        for j in 0..n {
            let vjk = v[(j, k)] * lambda;
            for i in 0..n {
                p[(i, j)] += v[(i, k)] * vjk;
            }
        }
    }
    symmetrise(p);
    true
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

#[cfg(test)]
mod tests {
    use super::*;
    use nalgebra::{Matrix4, U4, Vector4};

    /// A fixed, well-conditioned test matrix (entries of our own).
    fn sample() -> OMatrix<f64, U4, Dyn> {
        OMatrix::<f64, U4, Dyn>::from_fn_generic(U4, Dyn(9), |i, j| {
            ((i * 7 + j * 3) % 11) as f64 / 5.0 - 1.0 + if i == j { 2.0 } else { 0.0 }
        })
    }

    #[test]
    fn lq_factor_is_the_cholesky_factor_of_the_gram_matrix() {
        // The Cholesky factor with positive diagonal is unique, so LQ must reproduce it.
        let mut a = sample();
        let gram: Matrix4<f64> = &a * a.transpose();
        let l = lower_triangular_factor(&mut a);
        let reference = Cholesky::new(gram).unwrap().l();
        assert!((l - reference).abs().max() < 1e-12, "{l} vs {reference}");
    }

    #[test]
    fn rank_one_update_and_downdate_match_refactorisation() {
        let mut a = sample();
        let p: Matrix4<f64> = &a * a.transpose();
        let mut l = lower_triangular_factor(&mut a);
        let x = Vector4::new(0.3, -1.2, 0.5, 2.0);
        let mut work = x;
        cholesky_rank_one(&mut l, &mut work, false, "P").unwrap();
        let up = Cholesky::new(p + x * x.transpose()).unwrap().l();
        assert!((l - up).abs().max() < 1e-12);
        let mut work = x;
        cholesky_rank_one(&mut l, &mut work, true, "P").unwrap();
        let back = Cholesky::new(p).unwrap().l();
        assert!((l - back).abs().max() < 1e-11);
        // Removing more than is there must fail with a named error, not NaN.
        let mut big = x * 100.0;
        let e = cholesky_rank_one(&mut l, &mut big, true, "test covariance").unwrap_err();
        assert_eq!(
            e,
            NumericError::NotPositiveDefinite {
                quantity: "test covariance"
            }
        );
    }

    #[test]
    fn semidefinite_factor_handles_zero_pivots() {
        let g = OMatrix::<f64, U4, U4>::from_row_slice(&[
            1.0, 0.0, 0.0, 0.0, //
            2.0, 0.0, 0.0, 0.0, //
            0.5, 0.0, 3.0, 0.0, //
            1.0, 0.0, 1.0, 0.0,
        ]);
        let q = g * g.transpose();
        let l = semidefinite_factor(&q, "Q").unwrap();
        assert!((l * l.transpose() - q).abs().max() < 1e-12);
        let strict = semidefinite_factor(&Matrix4::<f64>::identity(), "Q").unwrap();
        assert_eq!(strict, Matrix4::identity());
        // Tolerances are per column: a tiny variance next to a huge one is kept, not zeroed.
        let wide = Matrix4::from_diagonal(&Vector4::new(1e6, 1e-12, 1.0, 0.0));
        let l = semidefinite_factor(&wide, "Q").unwrap();
        assert!((l[(1, 1)] - 1e-6).abs() < 1e-20 && l[(3, 3)] == 0.0);
        let mut indefinite = Matrix4::<f64>::identity();
        indefinite[(3, 3)] = -1e-3;
        assert!(semidefinite_factor(&indefinite, "Q").is_err());
    }
    #[test]
    fn jacobi_finds_the_eigenvalues_of_the_second_difference_matrix() {
        // tridiag(−1, 2, −1) of size n has eigenvalues 2 − 2cos(kπ/(n+1)), k = 1..n (closed form
        // for tridiagonal Toeplitz matrices).
        let n = 6;
        let mut a = nalgebra::DMatrix::<f64>::from_fn(n, n, |i, j| match i.abs_diff(j) {
            0 => 2.0,
            1 => -1.0,
            _ => 0.0,
        });
        let original = a.clone();
        let mut v = a.clone();
        jacobi_eigen(&mut a, &mut v);
        let mut got: Vec<f64> = (0..n).map(|i| a[(i, i)]).collect();
        got.sort_by(f64::total_cmp);
        for (k, g) in got.iter().enumerate() {
            let exact = 2.0 - 2.0 * ((k + 1) as f64 * std::f64::consts::PI / (n + 1) as f64).cos();
            assert!((g - exact).abs() < 1e-13, "λ{k}: {g} vs {exact}");
        }
        // V is orthogonal and V diag(λ) Vᵀ reproduces the matrix.
        let diag = nalgebra::DMatrix::from_diagonal(&a.diagonal());
        assert!(
            (&v * v.transpose() - nalgebra::DMatrix::identity(n, n))
                .abs()
                .max()
                < 1e-14
        );
        assert!((&v * diag * v.transpose() - original).abs().max() < 1e-13);
    }

    #[test]
    fn eigenvalue_floor_repairs_only_what_breaks_the_floor() {
        // diag(4, 1, −2, 0) rotated: the repaired spectrum is (4, 1, 4·10⁻⁶, 4·10⁻⁶) in the same
        // eigenbasis.
        let q = {
            let a = sample();
            let g: Matrix4<f64> = &a * a.transpose();
            let mut v = g;
            let mut d = g;
            jacobi_eigen(&mut d, &mut v);
            v
        };
        let spectrum = Vector4::new(4.0, 1.0, -2.0, 0.0);
        let p = q * Matrix4::from_diagonal(&spectrum) * q.transpose();
        let mut repaired = p;
        assert!(floor_eigenvalues(&mut repaired, 1e-6));
        let expected =
            q * Matrix4::from_diagonal(&Vector4::new(4.0, 1.0, 4e-6, 4e-6)) * q.transpose();
        assert!(
            (repaired - expected).abs().max() < 1e-12,
            "{repaired} vs {expected}"
        );
        assert!(Cholesky::new(repaired).is_some());
        // A second pass has nothing left to do.
        let again = repaired;
        assert!(!floor_eigenvalues(&mut repaired, 1e-6));
        assert_eq!(repaired, again);
        // Non-finite input is left for the caller to report.
        let mut bad = Matrix4::<f64>::identity();
        bad[(0, 0)] = f64::NAN;
        assert!(!floor_eigenvalues(&mut bad, 1e-6));
    }
}
