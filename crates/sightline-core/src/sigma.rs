//! Sigma-point rules: deterministic points and weights that integrate a Gaussian exactly for low-
//! degree polynomials. One filter implementation is parameterised by the rule.
//!
//! Points are returned for the standard normal N(0, I); a filter maps them through the Cholesky
//! factor of its covariance, `xᵢ = m + L ξᵢ`.

use nalgebra::{DMatrix, DVector, SymmetricEigen};
use thiserror::Error;

/// How the sigma points of a Gaussian are chosen.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum SigmaRule {
    /// Scaled unscented transform (Julier, "The scaled unscented transformation", ACC 2002; Wan &
    /// van der Merwe, AS-SPCC 2000): 2n+1 points, λ = α²(n+κ) − n,
    /// ξ₀ = 0, ξ±ᵢ = ±√(n+λ) eᵢ, W₀ᵐ = λ/(n+λ), W₀ᶜ = W₀ᵐ + 1 − α² + β, Wᵢ = 1/(2(n+λ)).
    ///
    /// Caveat: when λ < 0 (small α, or κ < 0) the centre weight is negative and the sigma-point
    /// covariance may lose positive-definiteness; Sightline then reports a failed Cholesky rather
    /// than continuing. α = 1, β = 2, κ = 0 (the defaults) keep every weight non-negative.
    Unscented {
        /// Spread of the points around the mean, 0 < α ≤ 1 typically.
        alpha: f64,
        /// Prior knowledge of the distribution; 2 is optimal for a Gaussian.
        beta: f64,
        /// Secondary scaling; 3 − n matches the fourth moment of a Gaussian (Julier & Uhlmann 2004).
        kappa: f64,
    },
    /// Third-degree spherical-radial cubature (Arasaratnam & Haykin, "Cubature Kalman filters",
    /// IEEE TAC 54(6), 2009): 2n points ±√n eᵢ, equal weights 1/(2n).
    Cubature,
    /// Tensor-product Gauss–Hermite quadrature of order p per axis (Ito & Xiong, "Gaussian filters
    /// for nonlinear filtering problems", IEEE TAC 45(5), 2000): pⁿ points, exact for polynomials
    /// of degree ≤ 2p − 1 in each variable.
    GaussHermite {
        /// Points per axis.
        order: usize,
    },
}

/// Standard-normal sigma points (one per column of `unit`) with mean and covariance weights.
#[derive(Debug, Clone, PartialEq)]
pub struct SigmaPoints {
    /// `n × L` matrix of points for N(0, I).
    pub unit: DMatrix<f64>,
    /// Weights for the mean (sum to 1).
    pub wm: Vec<f64>,
    /// Weights for the covariance.
    pub wc: Vec<f64>,
}

/// A rule that cannot produce points for the requested dimension.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum SigmaError {
    /// Parameters out of range.
    #[error("{0}")]
    Invalid(String),
}

/// Largest number of Gauss–Hermite points accepted (pⁿ grows fast: order 3 in 10 states is 59,049).
pub const MAX_GAUSS_HERMITE_POINTS: usize = 1_000_000;

impl SigmaRule {
    /// Points and weights for an `n`-dimensional standard normal.
    ///
    /// ```
    /// use sightline_core::SigmaRule;
    /// let sp = SigmaRule::Cubature.points(3).unwrap();
    /// assert_eq!(sp.unit.ncols(), 6);
    /// assert!((sp.wm.iter().sum::<f64>() - 1.0).abs() < 1e-15);
    /// ```
    pub fn points(&self, n: usize) -> Result<SigmaPoints, SigmaError> {
        if n == 0 {
            return Err(SigmaError::Invalid(
                "sigma points need at least one state".into(),
            ));
        }
        match *self {
            SigmaRule::Unscented { alpha, beta, kappa } => {
                let nf = n as f64;
                let lambda = alpha * alpha * (nf + kappa) - nf;
                let c = nf + lambda;
                let valid = c.is_finite() && c > 0.0;
                if !valid {
                    return Err(SigmaError::Invalid(format!(
                        "unscented rule needs n + λ = α²(n+κ) > 0, got {c} (α={alpha}, κ={kappa}, n={n})"
                    )));
                }
                let mut unit = DMatrix::zeros(n, 2 * n + 1);
                let spread = c.sqrt();
                for i in 0..n {
                    unit[(i, 1 + i)] = spread;
                    unit[(i, 1 + n + i)] = -spread;
                }
                let w = 1.0 / (2.0 * c);
                let mut wm = vec![w; 2 * n + 1];
                let mut wc = wm.clone();
                wm[0] = lambda / c;
                wc[0] = lambda / c + 1.0 - alpha * alpha + beta;
                Ok(SigmaPoints { unit, wm, wc })
            }
            SigmaRule::Cubature => {
                let mut unit = DMatrix::zeros(n, 2 * n);
                let spread = (n as f64).sqrt();
                for i in 0..n {
                    unit[(i, i)] = spread;
                    unit[(i, n + i)] = -spread;
                }
                let w = vec![1.0 / (2.0 * n as f64); 2 * n];
                Ok(SigmaPoints {
                    unit,
                    wm: w.clone(),
                    wc: w,
                })
            }
            SigmaRule::GaussHermite { order } => {
                if order == 0 {
                    return Err(SigmaError::Invalid(
                        "Gauss–Hermite order must be ≥ 1".into(),
                    ));
                }
                let total = u32::try_from(n)
                    .ok()
                    .and_then(|e| order.checked_pow(e))
                    .filter(|&t| t <= MAX_GAUSS_HERMITE_POINTS)
                    .ok_or_else(|| {
                        SigmaError::Invalid(format!(
                            "Gauss–Hermite order {order} in {n} states needs {order}^{n} points, \
                             more than {MAX_GAUSS_HERMITE_POINTS}; lower the order"
                        ))
                    })?;
                let (nodes, weights) = gauss_hermite(order);
                let mut unit = DMatrix::zeros(n, total);
                let mut wm = vec![1.0; total];
                for k in 0..total {
                    // Digits of k in base `order` pick the node on each axis.
                    let mut rest = k;
                    for i in 0..n {
                        let digit = rest % order;
                        rest /= order;
                        unit[(i, k)] = nodes[digit];
                        wm[k] *= weights[digit];
                    }
                }
                Ok(SigmaPoints {
                    unit,
                    wc: wm.clone(),
                    wm,
                })
            }
        }
    }
}

/// Nodes and weights of the `p`-point Gauss–Hermite rule for the standard normal weight
/// e^{−x²/2}/√(2π) (probabilists' Hermite polynomials), by the Golub–Welsch eigenvalue method
/// (Golub & Welsch, Math. Comp. 23, 1969): the nodes are the eigenvalues of the symmetric Jacobi
/// matrix with off-diagonal √k, the weights the squared first components of its eigenvectors.
/// Nodes are sorted ascending and the weights sum to one.
///
/// ```
/// let (x, w) = sightline_core::sigma::gauss_hermite(3);
/// assert!((x[2] - 3f64.sqrt()).abs() < 1e-14);
/// assert!((w[1] - 2.0 / 3.0).abs() < 1e-14);
/// ```
pub fn gauss_hermite(p: usize) -> (Vec<f64>, Vec<f64>) {
    if p == 0 {
        return (Vec::new(), Vec::new());
    }
    let mut jacobi = DMatrix::<f64>::zeros(p, p);
    for k in 1..p {
        let b = (k as f64).sqrt();
        jacobi[(k - 1, k)] = b;
        jacobi[(k, k - 1)] = b;
    }
    let eig = SymmetricEigen::new(jacobi);
    let mut pairs: Vec<(f64, f64)> = (0..p)
        .map(|i| (eig.eigenvalues[i], eig.eigenvectors[(0, i)].powi(2)))
        .collect();
    pairs.sort_by(|a, b| a.0.total_cmp(&b.0));
    // Symmetrise: the rule is symmetric about 0, remove eigen-solver round-off.
    let nodes_raw: Vec<f64> = pairs.iter().map(|p| p.0).collect();
    let weights_raw: Vec<f64> = pairs.iter().map(|p| p.1).collect();
    let nodes: Vec<f64> = (0..p)
        .map(|i| 0.5 * (nodes_raw[i] - nodes_raw[p - 1 - i]))
        .collect();
    let weights: Vec<f64> = (0..p)
        .map(|i| 0.5 * (weights_raw[i] + weights_raw[p - 1 - i]))
        .collect();
    let total: f64 = weights.iter().sum();
    let weights = DVector::from_vec(weights) / total;
    (nodes, weights.as_slice().to_vec())
}
