//! Exact, order-independent floating-point sums, so that sharded Monte Carlo campaigns merge into
//! bit-for-bit the unsharded result.
//!
//! An [`ExactSum`] holds the running total as a list of non-overlapping doubles whose exact sum is
//! the exact sum of every value added (Shewchuk, "Adaptive precision floating-point arithmetic
//! and fast robust geometric predicates", Discrete & Computational Geometry 18, 1997, the
//! grow-expansion step). [`ExactSum::value`] rounds that exact total once, correctly (to nearest,
//! ties to even), as CPython's `math.fsum` does. The result therefore depends neither on the
//! order of the additions nor on how they were split between shards and threads.

use serde::de::{SeqAccess, Visitor};
use serde::ser::SerializeSeq;
use serde::{Deserialize, Deserializer, Serialize, Serializer};

/// An exact running sum of finite doubles.
///
/// ```
/// use sightline_eval::exact_sum::ExactSum;
/// let mut a = ExactSum::default();
/// for v in [1e16, 1.0, -1e16] {
///     a.add(v);
/// }
/// assert_eq!(a.value(), 1.0); // a naive left-to-right sum gives 0
/// ```
///
/// In JSON an exact sum is the array of its partials (`[]` for zero), with a trailing `null`
/// once a non-finite value was added. Written and read back with serde_json's exact float
/// round trip, the partials keep every bit.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct ExactSum {
    /// Non-overlapping partial sums in increasing order of magnitude.
    partials: Vec<f64>,
    /// Set once a non-finite value was added: the sum is then NaN.
    nonfinite: bool,
}

impl Serialize for ExactSum {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        let partials = self.canonical_partials();
        let mut seq = s.serialize_seq(Some(partials.len() + usize::from(self.nonfinite)))?;
        for p in &partials {
            seq.serialize_element(p)?;
        }
        if self.nonfinite {
            seq.serialize_element(&None::<f64>)?;
        }
        seq.end()
    }
}

impl<'de> Deserialize<'de> for ExactSum {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl<'de> Visitor<'de> for V {
            type Value = ExactSum;
            fn expecting(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
                f.write_str("an array of partial sums")
            }
            fn visit_seq<A: SeqAccess<'de>>(self, mut a: A) -> Result<ExactSum, A::Error> {
                let mut sum = ExactSum::default();
                while let Some(v) = a.next_element::<Option<f64>>()? {
                    match v {
                        Some(p) if p.is_finite() => sum.partials.push(p),
                        _ => sum.nonfinite = true,
                    }
                }
                Ok(sum)
            }
        }
        d.deserialize_seq(V)
    }
}

impl ExactSum {
    /// Adds one value (a non-finite value makes the sum NaN).
    pub fn add(&mut self, value: f64) {
        if !value.is_finite() {
            self.nonfinite = true;
            return;
        }
        // Shewchuk's grow-expansion with zero elimination (the msum recipe behind math.fsum).
        let mut x = value;
        let mut kept = 0;
        for i in 0..self.partials.len() {
            let mut y = self.partials[i];
            if x.abs() < y.abs() {
                std::mem::swap(&mut x, &mut y);
            }
            let hi = x + y;
            let lo = y - (hi - x);
            if lo != 0.0 {
                self.partials[kept] = lo;
                kept += 1;
            }
            x = hi;
        }
        if !x.is_finite() {
            // The exact total overflowed the double range.
            self.nonfinite = true;
        }
        self.partials.truncate(kept);
        self.partials.push(x);
    }

    /// Adds every partial of `other`: afterwards `self` holds the exact sum of both.
    pub fn merge(&mut self, other: &ExactSum) {
        self.nonfinite |= other.nonfinite;
        for &p in &other.partials {
            self.add(p);
        }
    }

    /// The partials in a form that depends only on the exact value, not on the order of the
    /// additions: the correctly rounded value, then the correctly rounded remainder, and so on,
    /// smallest first. Written to `partial.json`, it makes equal sums equal files.
    pub fn canonical_partials(&self) -> Vec<f64> {
        if self.nonfinite {
            return Vec::new();
        }
        let mut rest = self.clone();
        let mut out = Vec::new();
        // Each remainder is at most half an ulp of the previous value, so a double-range
        // value is exhausted after at most about 2100/53 ≈ 40 terms.
        for _ in 0..64 {
            let v = rest.value();
            if v == 0.0 {
                break;
            }
            out.push(v);
            rest.add(-v);
        }
        out.reverse();
        out
    }

    /// The exact sum rounded once to the nearest double (ties to even); NaN after a non-finite
    /// value.
    pub fn value(&self) -> f64 {
        if self.nonfinite {
            return f64::NAN;
        }
        // CPython's math_fsum final step: add the partials from the largest down until the
        // rounding error is non-zero, then correct a half-way case using the next partial.
        let p = &self.partials;
        let mut n = p.len();
        if n == 0 {
            return 0.0;
        }
        n -= 1;
        let mut hi = p[n];
        let mut lo = 0.0;
        while n > 0 {
            let x = hi;
            n -= 1;
            let y = p[n];
            hi = x + y;
            let yr = hi - x;
            lo = y - yr;
            if lo != 0.0 {
                break;
            }
        }
        if n > 0 && ((lo < 0.0 && p[n - 1] < 0.0) || (lo > 0.0 && p[n - 1] > 0.0)) {
            let y = lo * 2.0;
            let x = hi + y;
            let yr = x - hi;
            if y == yr {
                hi = x;
            }
        }
        hi
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{RngExt, SeedableRng};

    #[test]
    fn matches_python_fsum_examples() {
        // Examples from memory of the Python documentation and CPython's test_math.py, checked
        // against CPython's math.fsum when this test was written.
        // Examples from the Python documentation of math.fsum: sum of ten 0.1 is exactly 1.0
        // after correct rounding (a naive sum gives 0.9999999999999999).
        let mut s = ExactSum::default();
        for _ in 0..10 {
            s.add(0.1);
        }
        assert_eq!(s.value(), 1.0);
        // CPython test_math.py fsum case: [1e100, 1.0, -1e100, 1e-100, 1e50, -1.0, -1e50] → 1e-100.
        let mut s = ExactSum::default();
        for v in [1e100, 1.0, -1e100, 1e-100, 1e50, -1.0, -1e50] {
            s.add(v);
        }
        assert_eq!(s.value(), 1e-100);
        // CPython test_math.py half-way case: [2.0**53, -0.5, -2.0**-54] → 2.0**53 - 1.0.
        let mut s = ExactSum::default();
        for v in [2f64.powi(53), -0.5, -(2f64.powi(-54))] {
            s.add(v);
        }
        assert_eq!(s.value(), 2f64.powi(53) - 1.0);
    }

    #[test]
    fn order_and_split_do_not_change_the_bits() {
        let mut rng = rand::rngs::Xoshiro256PlusPlus::seed_from_u64(1);
        let values: Vec<f64> = (0..2000)
            .map(|_| {
                let m: f64 = rng.random_range(-1.0..1.0);
                m * 10f64.powi(rng.random_range(-8..8))
            })
            .collect();
        let mut forward = ExactSum::default();
        values.iter().for_each(|v| forward.add(*v));
        let mut backward = ExactSum::default();
        values.iter().rev().for_each(|v| backward.add(*v));
        let mut split = ExactSum::default();
        for chunk in values.chunks(333) {
            let mut part = ExactSum::default();
            chunk.iter().for_each(|v| part.add(*v));
            split.merge(&part);
        }
        assert_eq!(forward.value().to_bits(), backward.value().to_bits());
        assert_eq!(forward.value().to_bits(), split.value().to_bits());
        // The stored form is canonical too.
        assert_eq!(forward.canonical_partials(), backward.canonical_partials());
        assert_eq!(forward.canonical_partials(), split.canonical_partials());
    }

    #[test]
    fn json_round_trip_keeps_every_bit() {
        let mut s = ExactSum::default();
        for v in [0.1, 1e-17, 3.0e20, -2.9999e20, std::f64::consts::PI] {
            s.add(v);
        }
        let text = serde_json::to_string(&s).unwrap();
        let back: ExactSum = serde_json::from_str(&text).unwrap();
        // JSON holds the canonical form: the same exact value, written the same way again.
        assert_eq!(back.canonical_partials(), s.canonical_partials());
        assert_eq!(serde_json::to_string(&back).unwrap(), text);
        assert_eq!(back.value().to_bits(), s.value().to_bits());
    }

    #[test]
    fn non_finite_values_poison_the_sum() {
        let mut s = ExactSum::default();
        s.add(1.0);
        s.add(f64::INFINITY);
        assert!(s.value().is_nan());
    }
}
