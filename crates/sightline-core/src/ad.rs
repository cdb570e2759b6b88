//! Exact Jacobians by forward-mode automatic differentiation (num-dual).
//!
//! For a static state size `N` the Jacobian takes one forward pass with vector dual numbers
//! (`DualVec<f64, N>`, one derivative direction per state), all on the stack. For `Dyn` it takes `n`
//! passes with scalar dual numbers, one per column, so that the plant code only ever sees
//! `Copy` scalars.

use nalgebra::allocator::Allocator;
use nalgebra::{Const, DefaultAllocator, Dim, Dyn, OMatrix, OVector, U1};
use num_dual::{Derivative, Dual64, DualVec};

use crate::real::Real;

/// A vector function `R^N -> R^R` written generically over the scalar, e.g. a plant transition
/// with its input and time bound.
pub trait VectorFunction<N: Dim, R: Dim>
where
    DefaultAllocator: Allocator<N> + Allocator<R>,
{
    /// Evaluates the function at `x`.
    fn eval<S: Real>(&self, x: &OVector<S, N>) -> OVector<S, R>;
}

/// State dimensions for which Sightline computes Jacobians by automatic differentiation.
///
/// Implemented for every static size `Const<D>` (one forward pass with vector duals) and for `Dyn`
/// (one pass per column with scalar duals).
///
/// ```
/// use sightline_core::ad::{Differentiable, VectorFunction};
/// use sightline_core::nalgebra::{Vector2, U2};
/// use sightline_core::Real;
///
/// struct Polar;
/// impl VectorFunction<U2, U2> for Polar {
///     fn eval<S: Real>(&self, x: &Vector2<S>) -> Vector2<S> {
///         Vector2::new(x[0] * x[1].cos(), x[0] * x[1].sin())
///     }
/// }
/// let (value, jac) = U2::jacobian(&Polar, &Vector2::new(2.0, 0.0));
/// assert_eq!(value, Vector2::new(2.0, 0.0));
/// assert_eq!(jac[(1, 1)], 2.0); // d(r sin θ)/dθ = r cos θ
/// ```
pub trait Differentiable: Dim {
    /// Value and Jacobian (`R × N`) of `f` at `x`.
    fn jacobian<R: Dim, F: VectorFunction<Self, R>>(
        f: &F,
        x: &OVector<f64, Self>,
    ) -> (OVector<f64, R>, OMatrix<f64, R, Self>)
    where
        DefaultAllocator: Allocator<Self> + Allocator<R> + Allocator<R, Self> + Allocator<U1, Self>;
}

impl<const D: usize> Differentiable for Const<D> {
    fn jacobian<R: Dim, F: VectorFunction<Self, R>>(
        f: &F,
        x: &OVector<f64, Self>,
    ) -> (OVector<f64, R>, OMatrix<f64, R, Self>)
    where
        DefaultAllocator: Allocator<Self> + Allocator<R> + Allocator<R, Self> + Allocator<U1, Self>,
    {
        let lifted =
            OVector::<DualVec<f64, Const<D>>, Const<D>>::from_fn_generic(Const::<D>, U1, |i, _| {
                DualVec::new(x[i], Derivative::derivative_generic(Const::<D>, U1, i))
            });
        let out = f.eval(&lifted);
        let (rows, _) = out.shape_generic();
        let value = out.map(|d| d.re);
        let mut jac = OMatrix::<f64, R, Const<D>>::zeros_generic(rows, Const::<D>);
        for (i, d) in out.iter().enumerate() {
            let grad = d.eps.unwrap_generic(Const::<D>, U1);
            for j in 0..D {
                jac[(i, j)] = grad[j];
            }
        }
        (value, jac)
    }
}

impl Differentiable for Dyn {
    fn jacobian<R: Dim, F: VectorFunction<Self, R>>(
        f: &F,
        x: &OVector<f64, Self>,
    ) -> (OVector<f64, R>, OMatrix<f64, R, Self>)
    where
        DefaultAllocator: Allocator<Self> + Allocator<R> + Allocator<R, Self> + Allocator<U1, Self>,
    {
        let (n, _) = x.shape_generic();
        let mut lifted = x.map(Dual64::from_re);
        let mut value = None;
        let mut jac: Option<OMatrix<f64, R, Dyn>> = None;
        for j in 0..n.value() {
            lifted[j].eps = 1.0;
            let out = f.eval(&lifted);
            lifted[j].eps = 0.0;
            let (rows, _) = out.shape_generic();
            let jac = jac.get_or_insert_with(|| OMatrix::zeros_generic(rows, n));
            for (i, d) in out.iter().enumerate() {
                jac[(i, j)] = d.eps;
            }
            if value.is_none() {
                value = Some(out.map(|d| d.re));
            }
        }
        match (value, jac) {
            (Some(v), Some(j)) => (v, j),
            // Zero states: evaluate once for the value; the Jacobian has no columns.
            _ => {
                let out = f.eval(&lifted);
                let (rows, _) = out.shape_generic();
                (out.map(|d| d.re), OMatrix::zeros_generic(rows, n))
            }
        }
    }
}
