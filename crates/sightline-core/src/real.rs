//! The scalar type plant functions are generic over.
//!
//! [`Real`] is Sightline's own trait, not num-dual's `DualNum`: it carries exactly what plant code
//! needs — arithmetic with itself and with `f64`, the elementary functions, comparisons,
//! `max`/`min`/`clamp`, a smooth maximum — and nothing that only a single number can honour.
//! The value of a scalar is inspected through one explicit method, [`Real::value`]; comparisons
//! return a [`Real::Mask`] that [`Real::select`] consumes, so that code written with them stays
//! valid for a scalar type that carries several values at once (a batch of particles).
//!
//! It is implemented for `f64` and for every num-dual number over `f64` (`Dual64`,
//! `DualVec<f64, N>`, ...), the types the filters evaluate plants with. Plants import it from the
//! prelude and never need num-dual's traits, so method names are never ambiguous.

use std::ops::{Add, AddAssign, Div, DivAssign, Mul, MulAssign, Neg, Sub, SubAssign};

use nalgebra::Scalar;
use num_dual::DualNum;
use num_traits::{One, Zero};

/// A real number as seen by a plant model: `f64` itself, or a dual number carrying derivatives.
///
/// Write model functions generic over `S: Real`. Arithmetic with `f64` works with the `f64` on
/// the right (`x[0] * 2.0`, `x - 1.0`); to put a constant on the left write [`c`]`(2.0) * x`
/// or `S::from(2.0)`. Elementary functions are methods (`x.sin()`, `x.sqrt()`, `x.powi(3)`).
/// `max`, `min`, `clamp` and comparisons look at the value and keep the derivatives of the
/// argument they select.
///
/// ```
/// use sightline_core::prelude::*;
/// fn drag<S: Real>(v: S, c_d: f64) -> S {
///     v * v.abs() * (-c_d)
/// }
/// fn logistic<S: Real>(x: S, k: f64) -> S {
///     (c(1.0) + (x * -k).exp()).recip()
/// }
/// assert_eq!(drag(2.0_f64, 0.5), -2.0);
/// assert_eq!(logistic(0.0_f64, 3.0), 0.5);
/// ```
pub trait Real:
    Copy
    + Scalar
    + Zero
    + One
    + From<f64>
    + Add<Output = Self>
    + Sub<Output = Self>
    + Mul<Output = Self>
    + Div<Output = Self>
    + Neg<Output = Self>
    + Add<f64, Output = Self>
    + Sub<f64, Output = Self>
    + Mul<f64, Output = Self>
    + Div<f64, Output = Self>
    + AddAssign
    + SubAssign
    + MulAssign
    + DivAssign
    + AddAssign<f64>
    + SubAssign<f64>
    + MulAssign<f64>
    + DivAssign<f64>
{
    /// The result of a comparison: `bool` for single numbers. Consume it with
    /// [`Real::select`] (an `if` on it only compiles for single-number types).
    type Mask: Copy;

    /// The value without derivatives (the real part of a dual number).
    ///
    /// This is the one way to look at a number's value, e.g. to branch between a series and a
    /// closed form. Prefer [`Real::select`] with a comparison where both branches are cheap.
    fn value(self) -> f64;

    /// `if_true` where `mask` holds, `if_false` elsewhere.
    fn select(mask: Self::Mask, if_true: Self, if_false: Self) -> Self;
    /// `self > other`, by value.
    fn gt(self, other: impl Into<Self>) -> Self::Mask;
    /// `self >= other`, by value.
    fn ge(self, other: impl Into<Self>) -> Self::Mask;
    /// `self < other`, by value.
    fn lt(self, other: impl Into<Self>) -> Self::Mask;
    /// `self <= other`, by value.
    fn le(self, other: impl Into<Self>) -> Self::Mask;

    /// The larger of the two by value, with its derivatives (the other one if either is NaN).
    #[inline]
    fn max(self, other: impl Into<Self>) -> Self {
        let other = other.into();
        Self::select(self.ge(other), self, other)
    }
    /// The smaller of the two by value, with its derivatives (the other one if either is NaN).
    #[inline]
    fn min(self, other: impl Into<Self>) -> Self {
        let other = other.into();
        Self::select(self.le(other), self, other)
    }
    /// `self` limited to `[lo, hi]` by value.
    #[inline]
    fn clamp(self, lo: impl Into<Self>, hi: impl Into<Self>) -> Self {
        self.max(lo).min(hi)
    }
    /// A smooth maximum of `self` and `other`:
    /// `other + (d + √(d² + width²))/2` with `d = self − other`.
    ///
    /// Analytic everywhere, it exceeds the true maximum by at most `width/2` (at `d = 0`) and
    /// by `width²/(4|d|)` far from it, and its slope stays between 0 and 1: the usual guard of
    /// a flow law such as √(max(h, 0)) at an empty tank, whose Jacobian would otherwise be
    /// infinite. For `d < 0` the equivalent cancellation-free form
    /// `width²/(2(√(d² + width²) − d))` is used, so the result stays above `other` for any
    /// finite `d`.
    #[inline]
    fn smooth_max(self, other: impl Into<Self>, width: f64) -> Self {
        let other = other.into();
        let d = self - other;
        let s = (d * d + width * width).sqrt();
        // The branch only chooses between two forms of the same analytic function.
        let above = (d + s) * 0.5;
        let below = (s - d).recip() * (width * width * 0.5);
        other + Self::select(d.ge(0.0), above, below)
    }

    /// |x|.
    fn abs(self) -> Self;
    /// 1/x.
    fn recip(self) -> Self;
    /// √x.
    fn sqrt(self) -> Self;
    /// ∛x.
    fn cbrt(self) -> Self;
    /// xⁿ for an integer n.
    fn powi(self, n: i32) -> Self;
    /// xᵖ for a real exponent p.
    fn powf(self, p: f64) -> Self;
    /// eˣ.
    fn exp(self) -> Self;
    /// 2ˣ.
    fn exp2(self) -> Self;
    /// eˣ − 1, accurate near 0.
    fn exp_m1(self) -> Self;
    /// ln x.
    fn ln(self) -> Self;
    /// ln(1 + x), accurate near 0.
    fn ln_1p(self) -> Self;
    /// log₁₀ x.
    fn log10(self) -> Self;
    /// log₂ x.
    fn log2(self) -> Self;
    /// Logarithm to `base`.
    fn log(self, base: f64) -> Self;
    /// sin x.
    fn sin(self) -> Self;
    /// cos x.
    fn cos(self) -> Self;
    /// (sin x, cos x).
    fn sin_cos(self) -> (Self, Self);
    /// tan x.
    fn tan(self) -> Self;
    /// arcsin x.
    fn asin(self) -> Self;
    /// arccos x.
    fn acos(self) -> Self;
    /// arctan x.
    fn atan(self) -> Self;
    /// Four-quadrant arctangent of `self / other`. Its derivative is that of atan(y/x), which
    /// is undefined where x = 0: a bearing seen from straight above differentiates badly.
    fn atan2(self, other: Self) -> Self;
    /// sinh x.
    fn sinh(self) -> Self;
    /// cosh x.
    fn cosh(self) -> Self;
    /// tanh x.
    fn tanh(self) -> Self;
    /// arsinh x.
    fn asinh(self) -> Self;
    /// arcosh x.
    fn acosh(self) -> Self;
    /// artanh x.
    fn atanh(self) -> Self;
    /// √(x² + y²).
    #[inline]
    fn hypot(self, other: Self) -> Self {
        (self * self + other * other).sqrt()
    }
}

impl<T> Real for T
where
    T: DualNum<Primitive = f64> + Copy + Scalar,
{
    type Mask = bool;

    #[inline]
    fn value(self) -> f64 {
        num_dual::DualStruct::re(&self)
    }
    #[inline]
    fn select(mask: bool, if_true: Self, if_false: Self) -> Self {
        if mask { if_true } else { if_false }
    }
    #[inline]
    fn gt(self, other: impl Into<Self>) -> bool {
        self.value() > other.into().value()
    }
    #[inline]
    fn ge(self, other: impl Into<Self>) -> bool {
        self.value() >= other.into().value()
    }
    #[inline]
    fn lt(self, other: impl Into<Self>) -> bool {
        self.value() < other.into().value()
    }
    #[inline]
    fn le(self, other: impl Into<Self>) -> bool {
        self.value() <= other.into().value()
    }
    /// The same function as the provided method, evaluating only the branch it selects.
    #[inline]
    fn smooth_max(self, other: impl Into<Self>, width: f64) -> Self {
        let other = other.into();
        let d = self - other;
        let s = (d * d + width * width).sqrt();
        if d.value() >= 0.0 {
            other + (d + s) * 0.5
        } else {
            other + (s - d).recip() * (width * width * 0.5)
        }
    }
    #[inline]
    fn abs(self) -> Self {
        num_traits::Signed::abs(&self)
    }
    #[inline]
    fn recip(self) -> Self {
        DualNum::recip(&self)
    }
    #[inline]
    fn sqrt(self) -> Self {
        DualNum::sqrt(&self)
    }
    #[inline]
    fn cbrt(self) -> Self {
        DualNum::cbrt(&self)
    }
    #[inline]
    fn powi(self, n: i32) -> Self {
        DualNum::powi(&self, n)
    }
    #[inline]
    fn powf(self, p: f64) -> Self {
        DualNum::powf(&self, p)
    }
    #[inline]
    fn exp(self) -> Self {
        DualNum::exp(&self)
    }
    #[inline]
    fn exp2(self) -> Self {
        DualNum::exp2(&self)
    }
    #[inline]
    fn exp_m1(self) -> Self {
        DualNum::exp_m1(&self)
    }
    #[inline]
    fn ln(self) -> Self {
        DualNum::ln(&self)
    }
    #[inline]
    fn ln_1p(self) -> Self {
        DualNum::ln_1p(&self)
    }
    #[inline]
    fn log10(self) -> Self {
        DualNum::log10(&self)
    }
    #[inline]
    fn log2(self) -> Self {
        DualNum::log2(&self)
    }
    #[inline]
    fn log(self, base: f64) -> Self {
        DualNum::log(&self, base)
    }
    #[inline]
    fn sin(self) -> Self {
        DualNum::sin(&self)
    }
    #[inline]
    fn cos(self) -> Self {
        DualNum::cos(&self)
    }
    #[inline]
    fn sin_cos(self) -> (Self, Self) {
        DualNum::sin_cos(&self)
    }
    #[inline]
    fn tan(self) -> Self {
        DualNum::tan(&self)
    }
    #[inline]
    fn asin(self) -> Self {
        DualNum::asin(&self)
    }
    #[inline]
    fn acos(self) -> Self {
        DualNum::acos(&self)
    }
    #[inline]
    fn atan(self) -> Self {
        DualNum::atan(&self)
    }
    #[inline]
    fn atan2(self, other: Self) -> Self {
        DualNum::atan2(&self, other)
    }
    #[inline]
    fn sinh(self) -> Self {
        DualNum::sinh(&self)
    }
    #[inline]
    fn cosh(self) -> Self {
        DualNum::cosh(&self)
    }
    #[inline]
    fn tanh(self) -> Self {
        DualNum::tanh(&self)
    }
    #[inline]
    fn asinh(self) -> Self {
        DualNum::asinh(&self)
    }
    #[inline]
    fn acosh(self) -> Self {
        DualNum::acosh(&self)
    }
    #[inline]
    fn atanh(self) -> Self {
        DualNum::atanh(&self)
    }
}

/// A constant that may stand on the left of an operator in generic plant code.
///
/// `1.0 - x` does not compile for a generic `x: S` (Rust cannot know that `f64 - S` exists for
/// every `S: Real`); `c(1.0) - x` does, and so do `c(2.0) * x`, `c(1.0) + x` and `c(1.0) / x`.
/// Each gives exactly what `S::from(v)` on the left would, rounded once.
///
/// ```
/// use sightline_core::prelude::*;
/// fn van_der_pol<S: Real>(x: S, v: S, mu: f64) -> S {
///     c(mu) * (c(1.0) - x * x) * v - x
/// }
/// assert_eq!(van_der_pol(2.0_f64, 1.0, 0.5), -3.5);
/// ```
pub fn c(value: f64) -> C {
    C(value)
}

/// A constant for the left of an operator; see [`c`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct C(pub f64);

impl<S: Real> Add<S> for C {
    type Output = S;
    fn add(self, x: S) -> S {
        // Addition commutes exactly.
        x + self.0
    }
}

impl<S: Real> Sub<S> for C {
    type Output = S;
    fn sub(self, x: S) -> S {
        // a − x = (−x) + a exactly (IEEE 754 defines subtraction so).
        -x + self.0
    }
}

impl<S: Real> Mul<S> for C {
    type Output = S;
    fn mul(self, x: S) -> S {
        // Multiplication commutes exactly.
        x * self.0
    }
}

impl<S: Real> Div<S> for C {
    type Output = S;
    fn div(self, x: S) -> S {
        S::from(self.0) / x
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use num_dual::Dual64;

    #[test]
    fn comparisons_and_selections_keep_the_chosen_derivatives() {
        let x = Dual64::new(2.0, 1.0);
        let y = Dual64::new(3.0, -4.0);
        assert_eq!(x.max(y), y);
        assert_eq!(x.min(y), x);
        assert_eq!(x.max(1.0).eps, 1.0);
        assert_eq!(x.max(5.0), Dual64::new(5.0, 0.0));
        assert_eq!(x.clamp(0.0, 1.5), Dual64::new(1.5, 0.0));
        assert!(x.lt(y) && x.le(2.0) && x.ge(2.0) && !x.gt(y));
        assert_eq!(Real::max(f64::NAN, 1.0), 1.0);
    }

    #[test]
    fn constants_on_the_left_equal_the_right_hand_forms() {
        for x in [-3.5f64, -0.0, 0.0, 1e-300, 0.1, 7.0] {
            assert_eq!((c(1.0) - x).to_bits(), (1.0 - x).to_bits(), "{x}");
            assert_eq!((c(2.5) * x).to_bits(), (2.5 * x).to_bits());
            assert_eq!((c(0.3) + x).to_bits(), (0.3 + x).to_bits());
            if x != 0.0 {
                assert_eq!((c(0.3) / x).to_bits(), (0.3 / x).to_bits());
            }
        }
        // d/dx (1 − x²) = −2x, d/dx (3/x) = −3/x² (closed forms).
        let x = Dual64::new(2.0, 1.0);
        assert_eq!((c(1.0) - x * x).eps, -4.0);
        assert_eq!((c(3.0) / x).eps, -0.75);
    }

    #[test]
    fn smooth_max_bounds_hold() {
        // At d = 0 it exceeds the maximum by width/2; far away by width²/(4|d|) (closed form of
        // (d + √(d² + w²))/2 − max(d, 0), expanded for |d| ≫ w).
        let w = 1e-3;
        assert!((0.0f64.smooth_max(0.0, w) - w / 2.0).abs() < 1e-18);
        for d in [1.0f64, -1.0, 10.0, -1e4] {
            let excess = d.smooth_max(0.0, w) - d.max(0.0);
            let expected = w * w / (4.0 * d.abs());
            assert!(
                (excess / expected - 1.0).abs() < 1e-5,
                "{d}: {excess} vs {expected}"
            );
        }
        // Slope between 0 and 1, finite at d = 0.
        for d in [-1e3, -1e-3, 0.0, 1e-3, 1e3] {
            let s = Dual64::new(d, 1.0).smooth_max(0.0, w).eps;
            assert!((0.0..=1.0).contains(&s), "{d}: {s}");
        }
    }
}
