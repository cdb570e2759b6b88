//! [`Lanes`]: a scalar that carries [`LANES`] values at once, so that a plant's own
//! `transition`/`measure`/`derivative`, written once over `S: Real`, evaluates several particles
//! per call in SIMD registers.
//!
//! A lane value is a `wide::f64x4` (stable Rust, no `unsafe` here). The `wide` crate was chosen
//! over `pulp` because its vector is a plain value type with operators and elementary functions,
//! which is what implementing [`Real`] needs: pulp's vectors are only operated on through a
//! `Simd` token passed into a closure, which a scalar type cannot carry through user code.
//! `wide` selects its instructions at compile time (SSE2 on the default x86-64 target, AVX/FMA
//! when built with `-C target-cpu=native`); within one build the results are deterministic and
//! the same in every lane, so they do not depend on which lane a particle lands in nor on the
//! thread count.
//!
//! # Accuracy
//!
//! Arithmetic, `sqrt`, `abs`, `recip`, comparisons and selections are IEEE 754 operations lane
//! by lane: bit for bit what `f64` gives. The elementary functions are `wide`'s vectorised
//! polynomial approximations (ports of Agner Fog's vector class library), except `sin`, `cos`,
//! `sin_cos` and `tan`, written here on the same polynomials so that they vectorise on every
//! x86-64 target (see `sin_cos` in the source: wide's version converts to integers, which SSE2
//! lacks, and measured barely faster than libm there); `exp2`, `asinh`, `acosh`, `atanh` (whose
//! vectorised forms are less accurate, or absent) call `f64`'s libm functions lane by lane.
//! Their largest error against the `f64` (libm) function, in units in the last place, measured
//! over 2²⁰ points of each range below by `tests/lane_accuracy.rs` (which fails if a bound is
//! exceeded; the bounds are the largest errors seen over three such samples) and checked
//! against correctly rounded mpmath values at sample points (`tests/reference/lane_functions.py`):
//!
//! | function | range | max ulps vs libm |
//! |---|---|---|
//! | `sin`, `cos`, `sin_cos` | \|x\| ≤ 10⁸ | 2 |
//! | `tan` | \|x\| ≤ 10⁴ | 4 |
//! | `sin`, `cos`, `sin_cos`, `tan` | \|x\| > 10⁸ | 0 (libm lane by lane) |
//! | `exp` | \|x\| ≤ 700 | 1 |
//! | `exp_m1` | \|x\| ≤ 700 | 5 |
//! | `ln` | 10⁻³⁰⁰ ≤ x ≤ 10³⁰⁰ | 1 |
//! | `log2`, `log10`, `log` | 10⁻³⁰⁰ ≤ x ≤ 10³⁰⁰ | 2 |
//! | `ln_1p` | −0.999 ≤ x ≤ 10³⁰⁰ | 2 |
//! | `cbrt` | 10⁻³⁰⁰ ≤ \|x\| ≤ 10³⁰⁰ | 2 |
//! | `powf` | 10⁻³ ≤ x ≤ 10³, \|p\| ≤ 2.5 | 2 |
//! | `powf` | 10⁻³ ≤ x ≤ 10³, \|p\| ≤ 8 | 30 |
//! | `powi` | \|x\| ≤ 10, \|n\| ≤ 8 | 0 |
//! | `atan` | all | 1 |
//! | `asin`, `acos` | [−1, 1] | 2 |
//! | `atan2` | \|y\|, \|x\| ≤ 10³ | 2 |
//! | `sinh` | \|x\| ≤ 700 | 3 |
//! | `cosh` | \|x\| ≤ 700 | 2 |
//! | `tanh` | \|x\| ≤ 20 | 7 |
//! | `sqrt`, `recip` | all | 0 (IEEE 754 operations) |
//! | `exp2`, `asinh`, `acosh`, `atanh` | all | 0 (libm lane by lane) |
//!
//! `powf`'s error grows with |p ln x|, the condition number of xᵖ. The bounds are those of the
//! default x86-64 build; an FMA build (`target-cpu=native`) rounds the polynomials differently
//! and may move them by an ulp.
//!
//! Trigonometric arguments beyond 10⁸ in magnitude go to libm lane by lane (the three-part
//! reduction by π/2 is exact only below about 4·10⁸).
//!
//! # Keeping a plant lane-friendly
//!
//! A plant needs no second version: its generic body is the lane body. What a lane type cannot
//! do is answer a question about *the* value, because it has four: [`Real::value`] on `Lanes`
//! returns the first lane and records that the value was inspected. The filters evaluate a
//! group of particles with [`attempt`], which reports the inspection; such a group, and the
//! rest of its block, is then evaluated one particle at a time with `f64` — the same numbers as
//! without lanes, only without the speed-up. To stay on the fast path:
//!
//! - branch with [`Real::select`] on a comparison ([`Real::gt`], [`Real::lt`], ...) instead of
//!   `if x.value() > 0.0`; both branches are evaluated, so keep them finite (e.g. guard a
//!   division with `max`);
//! - use [`Real::max`], [`Real::min`], [`Real::clamp`], [`Real::smooth_max`], [`Real::abs`],
//!   which are branch-free already;
//! - branch freely on parameters, inputs `u` and time `t`: they are plain `f64`.
//!
//! ```
//! use sightline_core::lanes::{Lanes, attempt};
//! use sightline_core::prelude::*;
//!
//! fn flow<S: Real>(level: S) -> S {
//!     // √(max(h, 0)) without an `if`: the same for f64 and for four particles at once.
//!     level.max(0.0).sqrt() * 0.5
//! }
//! fn flow_with_branch<S: Real>(level: S) -> S {
//!     if level.value() > 0.0 { level.sqrt() * 0.5 } else { S::from(0.0) }
//! }
//! let levels = Lanes::new([4.0, -1.0, 0.25, 0.0]);
//! let out = attempt(|| flow(levels)).unwrap();
//! assert_eq!(out.to_array(), [1.0, 0.0, 0.25, 0.0]);
//! // The branching version asks for a value: the caller must evaluate lane by lane.
//! assert!(attempt(|| flow_with_branch(levels)).is_none());
//! ```

use std::cell::Cell;
use std::fmt;
use std::ops::{Add, AddAssign, Div, DivAssign, Mul, MulAssign, Neg, Sub, SubAssign};

use num_traits::{One, Zero};
use wide::{f64x4, u64x4};

use crate::real::Real;

/// Values carried by one [`Lanes`]: particles evaluated per call.
pub const LANES: usize = 4;

thread_local! {
    /// Set when [`Real::value`] is called on a [`Lanes`] in this thread (see [`attempt`]).
    static INSPECTED: Cell<bool> = const { Cell::new(false) };
}

/// Runs `f` (plant code over [`Lanes`]) and returns its result, or `None` if it looked at a
/// lane value through [`Real::value`] — a branch on the value, which took lane 0's side for
/// every lane. The caller then evaluates those lanes one at a time with `f64`.
///
/// Nesting is allowed: an inspection inside also counts for an enclosing `attempt`.
#[inline]
pub fn attempt<R>(f: impl FnOnce() -> R) -> Option<R> {
    let before = INSPECTED.with(|c| c.replace(false));
    let result = f();
    let inspected = INSPECTED.with(|c| c.replace(before));
    if inspected {
        INSPECTED.with(|c| c.set(true));
        None
    } else {
        Some(result)
    }
}

/// [`LANES`] real numbers evaluated together: the lane scalar of plant code (see the module
/// docs).
///
/// ```
/// use sightline_core::lanes::Lanes;
/// use sightline_core::prelude::*;
/// let x = Lanes::new([0.0, 1.0, 2.0, 3.0]);
/// let y = (x * 2.0 + 1.0).max(2.0);
/// assert_eq!(y.to_array(), [2.0, 3.0, 5.0, 7.0]);
/// assert_eq!(Lanes::from(0.5).lane(3), 0.5);
/// ```
#[derive(Clone, Copy, Default)]
#[repr(transparent)]
pub struct Lanes(f64x4);

/// The result of comparing two [`Lanes`]: one truth value per lane, consumed by
/// [`Real::select`].
#[derive(Clone, Copy, Debug)]
#[repr(transparent)]
pub struct LaneMask(f64x4);

impl LaneMask {
    /// Whether the comparison holds in lane `i` (`i < LANES`).
    pub fn lane(self, i: usize) -> bool {
        self.0.to_bitmask() & (1 << i) != 0
    }
    /// Whether it holds in every lane.
    pub fn all(self) -> bool {
        self.0.all()
    }
    /// Whether it holds in some lane.
    pub fn any(self) -> bool {
        self.0.any()
    }
}

impl Lanes {
    /// The lanes `values`, lane 0 first.
    #[inline]
    pub const fn new(values: [f64; LANES]) -> Self {
        Lanes(f64x4::new(values))
    }
    /// Every lane `value`.
    #[inline]
    pub const fn splat(value: f64) -> Self {
        Lanes(f64x4::splat(value))
    }
    /// The lanes as an array, lane 0 first.
    #[inline]
    pub const fn to_array(self) -> [f64; LANES] {
        self.0.to_array()
    }
    /// The value of lane `i` (`i < LANES`), without counting as an inspection.
    #[inline]
    pub fn lane(self, i: usize) -> f64 {
        self.0.as_array()[i]
    }
    /// `f` applied lane by lane (for functions without a vectorised form).
    #[inline]
    fn map(self, f: impl Fn(f64) -> f64) -> Self {
        let a = self.0.to_array();
        Lanes::new([f(a[0]), f(a[1]), f(a[2]), f(a[3])])
    }
}

impl fmt::Debug for Lanes {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.debug_tuple("Lanes").field(&self.to_array()).finish()
    }
}

/// Equal when every lane is equal (IEEE comparison: NaN lanes are unequal).
impl PartialEq for Lanes {
    fn eq(&self, other: &Self) -> bool {
        self.0.simd_eq(other.0).all()
    }
}

impl From<f64> for Lanes {
    #[inline]
    fn from(value: f64) -> Self {
        Lanes::splat(value)
    }
}

impl Zero for Lanes {
    #[inline]
    fn zero() -> Self {
        Lanes::splat(0.0)
    }
    fn is_zero(&self) -> bool {
        self.0.simd_eq(f64x4::ZERO).all()
    }
}

impl One for Lanes {
    #[inline]
    fn one() -> Self {
        Lanes::splat(1.0)
    }
}

impl Neg for Lanes {
    type Output = Lanes;
    #[inline]
    fn neg(self) -> Lanes {
        Lanes(-self.0)
    }
}

/// The four arithmetic operators with a `Lanes` or an `f64` (broadcast) on the right, and
/// their assigning forms.
macro_rules! arithmetic {
    ($($op:ident $method:ident $assign:ident $assign_method:ident),*) => {$(
        impl $op for Lanes {
            type Output = Lanes;
            #[inline]
            fn $method(self, rhs: Lanes) -> Lanes {
                Lanes(self.0.$method(rhs.0))
            }
        }
        impl $op<f64> for Lanes {
            type Output = Lanes;
            #[inline]
            fn $method(self, rhs: f64) -> Lanes {
                Lanes(self.0.$method(f64x4::splat(rhs)))
            }
        }
        impl $assign for Lanes {
            #[inline]
            fn $assign_method(&mut self, rhs: Lanes) {
                *self = $op::$method(*self, rhs);
            }
        }
        impl $assign<f64> for Lanes {
            #[inline]
            fn $assign_method(&mut self, rhs: f64) {
                *self = $op::$method(*self, rhs);
            }
        }
    )*};
}

arithmetic!(
    Add add AddAssign add_assign,
    Sub sub SubAssign sub_assign,
    Mul mul MulAssign mul_assign,
    Div div DivAssign div_assign
);

impl Real for Lanes {
    type Mask = LaneMask;

    /// Lane 0's value, recording the inspection for [`attempt`]: code that branches on it
    /// takes lane 0's branch for all lanes, so the filters re-evaluate such a group lane by
    /// lane.
    #[inline]
    fn value(self) -> f64 {
        INSPECTED.with(|c| c.set(true));
        self.lane(0)
    }
    #[inline]
    fn select(mask: LaneMask, if_true: Self, if_false: Self) -> Self {
        Lanes(mask.0.select(if_true.0, if_false.0))
    }
    #[inline]
    fn gt(self, other: impl Into<Self>) -> LaneMask {
        LaneMask(self.0.simd_gt(other.into().0))
    }
    #[inline]
    fn ge(self, other: impl Into<Self>) -> LaneMask {
        LaneMask(self.0.simd_ge(other.into().0))
    }
    #[inline]
    fn lt(self, other: impl Into<Self>) -> LaneMask {
        LaneMask(self.0.simd_lt(other.into().0))
    }
    #[inline]
    fn le(self, other: impl Into<Self>) -> LaneMask {
        LaneMask(self.0.simd_le(other.into().0))
    }
    #[inline]
    fn abs(self) -> Self {
        Lanes(self.0.abs())
    }
    #[inline]
    fn recip(self) -> Self {
        Lanes(f64x4::ONE / self.0)
    }
    #[inline]
    fn sqrt(self) -> Self {
        Lanes(self.0.sqrt())
    }
    #[inline]
    fn cbrt(self) -> Self {
        Lanes(self.0.cbrt())
    }
    /// Binary powering (square-and-multiply, the algorithm of compiler-rt's `__powidf2`), the
    /// reciprocal for a negative `n`.
    #[inline]
    fn powi(self, n: i32) -> Self {
        let mut base = self.0;
        let mut e = n.unsigned_abs();
        let mut result = f64x4::ONE;
        loop {
            if e & 1 == 1 {
                result *= base;
            }
            e >>= 1;
            if e == 0 {
                break;
            }
            base *= base;
        }
        Lanes(if n < 0 { f64x4::ONE / result } else { result })
    }
    #[inline]
    fn powf(self, p: f64) -> Self {
        Lanes(self.0.powf_simd(f64x4::splat(p)))
    }
    #[inline]
    fn exp(self) -> Self {
        Lanes(self.0.exp())
    }
    #[inline]
    fn exp2(self) -> Self {
        // wide's exp2 is ~2000 ulps off at |x| ≈ 500 (tests/lane_accuracy.rs found it).
        self.map(f64::exp2)
    }
    #[inline]
    fn exp_m1(self) -> Self {
        Lanes(self.0.exp_m1())
    }
    #[inline]
    fn ln(self) -> Self {
        Lanes(self.0.ln())
    }
    #[inline]
    fn ln_1p(self) -> Self {
        Lanes(self.0.ln_1p())
    }
    #[inline]
    fn log10(self) -> Self {
        Lanes(self.0.log10())
    }
    #[inline]
    fn log2(self) -> Self {
        Lanes(self.0.log2())
    }
    /// ln x / ln base, as `f64::log` computes it.
    #[inline]
    fn log(self, base: f64) -> Self {
        Lanes(self.0.ln() / f64x4::splat(base.ln()))
    }
    #[inline]
    fn sin(self) -> Self {
        Lanes(sin_cos(self.0).0)
    }
    #[inline]
    fn cos(self) -> Self {
        Lanes(sin_cos(self.0).1)
    }
    #[inline]
    fn sin_cos(self) -> (Self, Self) {
        let (s, c) = sin_cos(self.0);
        (Lanes(s), Lanes(c))
    }
    #[inline]
    fn tan(self) -> Self {
        let (s, c) = sin_cos(self.0);
        Lanes(s / c)
    }
    #[inline]
    fn asin(self) -> Self {
        Lanes(self.0.asin())
    }
    #[inline]
    fn acos(self) -> Self {
        Lanes(self.0.acos())
    }
    #[inline]
    fn atan(self) -> Self {
        Lanes(self.0.atan())
    }
    #[inline]
    fn atan2(self, other: Self) -> Self {
        Lanes(self.0.atan2(other.0))
    }
    #[inline]
    fn sinh(self) -> Self {
        Lanes(self.0.sinh())
    }
    #[inline]
    fn cosh(self) -> Self {
        Lanes(self.0.cosh())
    }
    #[inline]
    fn tanh(self) -> Self {
        Lanes(self.0.tanh())
    }
    #[inline]
    fn asinh(self) -> Self {
        self.map(f64::asinh)
    }
    #[inline]
    fn acosh(self) -> Self {
        self.map(f64::acosh)
    }
    #[inline]
    fn atanh(self) -> Self {
        self.map(f64::atanh)
    }
}

/// Arguments up to this magnitude are reduced in lanes; larger ones (and ±∞) by libm.
/// `y·DP1` and `y·DP2` below are exact while the quadrant count y < 2²⁸ (their constants have
/// 24 significant bits), i.e. |x| < 2²⁸·π/2 ≈ 4.2·10⁸; the limit leaves a margin.
const TRIG_LANE_LIMIT: f64 = 1e8;

/// `a + b·x` evaluated by Horner's rule in x (coefficients lowest first), unfused so that every
/// build target rounds the same way.
#[inline(always)]
fn horner(x: f64x4, coefficients: &[f64]) -> f64x4 {
    let mut acc = f64x4::splat(coefficients[coefficients.len() - 1]);
    for &c in coefficients[..coefficients.len() - 1].iter().rev() {
        acc = acc * x + f64x4::splat(c);
    }
    acc
}

/// sin x and cos x of every lane.
///
/// Cody–Waite reduction by π/2 in three parts (Cody & Waite, *Software Manual for the
/// Elementary Functions*, 1980, ch. 8) and the minimax polynomials of Moshier's Cephes library
/// (`sin.c`; Moshier, *Methods and Programs for Mathematical Functions*, 1989) on
/// [−π/4, π/4] — the scheme `wide`'s own `sin_cos` uses. Written here with operations every
/// x86-64 target has in SIMD (add, multiply, bitwise and 64-bit integer add/shift): the
/// quadrant is rounded with the 1.5·2⁵² trick instead of a float-to-integer conversion, which
/// SSE2 lacks and `wide` emulates lane by lane, at a cost that ate the whole gain.
// The constants are quoted as published (Cephes), digits beyond f64 included.
#[allow(clippy::excessive_precision)]
#[inline]
fn sin_cos(x: f64x4) -> (f64x4, f64x4) {
    const SIN: [f64; 6] = [
        -1.66666666666666307295E-1,
        8.33333333332211858878E-3,
        -1.98412698295895385996E-4,
        2.75573136213857245213E-6,
        -2.50507477628578072866E-8,
        1.58962301576546568060E-10,
    ];
    const COS: [f64; 6] = [
        4.16666666666665929218E-2,
        -1.38888888888730564116E-3,
        2.48015872888517045348E-5,
        -2.75573141792967388112E-7,
        2.08757008419747316778E-9,
        -1.13585365213876817300E-11,
    ];
    // π/2 = DP1 + DP2 + DP3 to about 3·53 bits (Cephes).
    const DP1: f64 = 7.853981554508209228515625E-1 * 2.0;
    const DP2: f64 = 7.94662735614792836714E-9 * 2.0;
    const DP3: f64 = 3.06161699786838294307E-17 * 2.0;
    // Adding 1.5·2⁵² rounds a value below 2⁵¹ to an integer (to nearest, ties to even) and
    // leaves that integer in the low bits of the sum.
    const ROUNDER: f64 = 6755399441055744.0;
    const SIGN: u64 = 1 << 63;
    let xa = x.abs();
    if !xa.simd_le(f64x4::splat(TRIG_LANE_LIMIT)).all() {
        // Huge, infinite or NaN lanes: libm, lane by lane.
        let a = x.to_array();
        return (f64x4::new(a.map(f64::sin)), f64x4::new(a.map(f64::cos)));
    }
    let shifted = xa * f64x4::splat(std::f64::consts::FRAC_2_PI) + f64x4::splat(ROUNDER);
    let quadrant = shifted.to_bits();
    let y = shifted - f64x4::splat(ROUNDER);
    let r = xa - y * f64x4::splat(DP1) - y * f64x4::splat(DP2) - y * f64x4::splat(DP3);
    let r2 = r * r;
    let s = r + r * r2 * horner(r2, &SIN);
    let c = r2 * r2 * horner(r2, &COS) + (f64x4::ONE - r2 * f64x4::splat(0.5));
    // Odd quadrants swap the two; all-ones where the quadrant is odd.
    let one = u64x4::splat(1);
    let odd = f64x4::from_bits(u64x4::ZERO - (quadrant & one));
    let (sin, cos) = (odd.select(c, s), odd.select(s, c));
    // sin is negative in quadrants 2 and 3 (bit 1), and odd in x; cos in quadrants 1 and 2.
    let sin_sign = ((quadrant << 62) ^ x.to_bits()) & u64x4::splat(SIGN);
    let cos_sign = ((quadrant + one) & u64x4::splat(2)) << 62;
    (
        f64x4::from_bits(sin.to_bits() ^ sin_sign),
        f64x4::from_bits(cos.to_bits() ^ cos_sign),
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn arithmetic_and_selection_are_exact_lane_by_lane() {
        let a = [0.1, -2.5, 1e300, 3.0];
        let b = [7.0, 0.3, -1e-300, 3.0];
        let (x, y) = (Lanes::new(a), Lanes::new(b));
        for i in 0..LANES {
            assert_eq!((x + y).lane(i).to_bits(), (a[i] + b[i]).to_bits());
            assert_eq!((x - y).lane(i).to_bits(), (a[i] - b[i]).to_bits());
            assert_eq!((x * y).lane(i).to_bits(), (a[i] * b[i]).to_bits());
            assert_eq!((x / y).lane(i).to_bits(), (a[i] / b[i]).to_bits());
            assert_eq!((x * 0.7).lane(i).to_bits(), (a[i] * 0.7).to_bits());
            assert_eq!(
                x.abs().sqrt().lane(i).to_bits(),
                a[i].abs().sqrt().to_bits()
            );
            assert_eq!(x.max(y).lane(i), Real::max(a[i], b[i]));
            assert_eq!(x.min(1.0).lane(i), Real::min(a[i], 1.0));
            assert_eq!(x.gt(y).lane(i), a[i] > b[i]);
            assert_eq!(x.le(y).lane(i), a[i] <= b[i]);
        }
        assert!(x.ge(y).any() && !x.ge(y).all());
        assert_eq!(
            Lanes::select(x.lt(0.0), y, x).to_array(),
            [0.1, 0.3, 1e300, 3.0]
        );
        let mut z = x;
        z += 1.0;
        z *= y;
        assert_eq!(z.lane(3), 12.0);
        assert!(Lanes::zero().is_zero() && Lanes::one() == Lanes::splat(1.0));
    }

    #[test]
    fn attempt_reports_inspection_and_nests() {
        let x = Lanes::splat(2.0);
        assert_eq!(attempt(|| x * x), Some(Lanes::splat(4.0)));
        assert_eq!(attempt(|| x.value()), None);
        // An inspection inside a nested attempt also spoils the outer one.
        assert_eq!(attempt(|| attempt(|| x.value()).is_none()), None);
        // And the flag does not leak into the next attempt.
        assert!(attempt(|| x + 1.0).is_some());
    }

    #[test]
    fn powi_is_binary_powering() {
        // Small integer powers of exactly representable values are exact (common practice).
        let x = Lanes::new([2.0, -3.0, 0.5, 10.0]);
        assert_eq!(x.powi(3).to_array(), [8.0, -27.0, 0.125, 1000.0]);
        assert_eq!(x.powi(-2).to_array(), [0.25, 1.0 / 9.0, 4.0, 0.01]);
        assert_eq!(x.powi(0), Lanes::splat(1.0));
    }
}
