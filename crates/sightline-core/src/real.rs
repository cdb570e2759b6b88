//! The scalar type plant functions are generic over.

use nalgebra::Scalar;
use num_dual::DualNum;

/// A real number as seen by a plant model: `f64` itself, or a dual number carrying derivatives.
///
/// Write model functions generic over `S: Real`; arithmetic with `f64` constants works directly
/// (`x[0] * 2.0`), and `S::from(c)` lifts a constant. Every elementary function (`sin`, `sqrt`,
/// `exp`, ...) is a method of [`DualNum`].
///
/// ```
/// use sightline_core::Real;
/// fn drag<S: Real>(v: S, c: f64) -> S {
///     v * v.abs() * (-c)
/// }
/// assert_eq!(drag(2.0_f64, 0.5), -2.0);
/// ```
pub trait Real: DualNum<Primitive = f64> + Copy + Scalar + 'static {}

impl<T> Real for T where T: DualNum<Primitive = f64> + Copy + Scalar + 'static {}
