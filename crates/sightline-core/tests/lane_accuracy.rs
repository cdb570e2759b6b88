//! Accuracy of the lane scalar's elementary functions (`sightline_core::lanes`): the largest
//! distance in units in the last place from `f64`'s libm function over 2²⁰ points of each
//! documented range must not exceed the bound in the module's table, and at sample points the
//! lane functions and libm must both be within that bound of the correctly rounded value from
//! mpmath (fixture `tests/reference/lane_functions.json`, written by
//! `tests/reference/lane_functions.py`).

use std::path::Path;

use rand::RngExt;
use sightline_core::lanes::{LANES, Lanes};
use sightline_core::real::Real;
use sightline_core::rng::stream;

/// Points per function (≥ 10⁶).
const POINTS: usize = 1 << 20;

/// Seed of the test points.
const SEED: u64 = 17;

/// The position of `x` on a line where neighbouring doubles are one apart (−0 and +0 coincide).
fn ordinal(x: f64) -> i128 {
    let bits = x.to_bits() as i64;
    if bits < 0 {
        -((bits & i64::MAX) as i128)
    } else {
        bits as i128
    }
}

/// Distance in ulps between `a` and the reference `b`; 0 when both are NaN, unbounded when only
/// one is.
fn ulps(a: f64, b: f64) -> u128 {
    match (a.is_nan(), b.is_nan()) {
        (true, true) => 0,
        (false, false) if a == b => 0,
        (false, false) => (ordinal(a) - ordinal(b)).unsigned_abs(),
        _ => u128::MAX,
    }
}

/// How the test points of a range are spread.
#[derive(Clone, Copy)]
enum Spread {
    /// Uniform on [lo, hi].
    Uniform(f64, f64),
    /// Log-uniform magnitude on [lo, hi] (0 < lo < hi), positive.
    Log(f64, f64),
    /// Log-uniform magnitude on [lo, hi] with a random sign.
    SignedLog(f64, f64),
}

fn draw(spread: Spread, rng: &mut sightline_core::rng::Stream) -> f64 {
    let u: f64 = rng.random();
    match spread {
        Spread::Uniform(lo, hi) => lo + (hi - lo) * u,
        Spread::Log(lo, hi) => (lo.ln() + (hi.ln() - lo.ln()) * u).exp(),
        Spread::SignedLog(lo, hi) => {
            let m = (lo.ln() + (hi.ln() - lo.ln()) * u).exp();
            if rng.random::<bool>() { m } else { -m }
        }
    }
}

/// Largest ulp distance of `lanes` from `scalar` over POINTS points of `spread`, and the worst
/// argument.
fn worst(
    key: u64,
    spread: Spread,
    lanes: impl Fn(Lanes) -> Lanes,
    scalar: impl Fn(f64) -> f64,
) -> (u128, f64) {
    let mut rng = stream(SEED, &[key]);
    let mut max = (0, f64::NAN);
    for _ in 0..POINTS / LANES {
        let x: [f64; LANES] = std::array::from_fn(|_| draw(spread, &mut rng));
        let out = lanes(Lanes::new(x));
        for (i, &xi) in x.iter().enumerate() {
            let d = ulps(out.lane(i), scalar(xi));
            if d > max.0 {
                max = (d, xi);
            }
        }
    }
    max
}

/// One documented row: name, bound in ulps, range.
struct Row {
    name: &'static str,
    bound: u128,
    spread: Spread,
    lanes: fn(Lanes) -> Lanes,
    scalar: fn(f64) -> f64,
}

fn rows() -> Vec<Row> {
    use Spread::*;
    let trig = Uniform(-1e4, 1e4);
    vec![
        Row {
            name: "sin",
            bound: 2,
            spread: trig,
            lanes: |x| x.sin(),
            scalar: f64::sin,
        },
        Row {
            name: "cos",
            bound: 2,
            spread: trig,
            lanes: |x| x.cos(),
            scalar: f64::cos,
        },
        Row {
            name: "sin_cos.0",
            bound: 2,
            spread: trig,
            lanes: |x| x.sin_cos().0,
            scalar: f64::sin,
        },
        Row {
            name: "sin_cos.1",
            bound: 2,
            spread: trig,
            lanes: |x| x.sin_cos().1,
            scalar: f64::cos,
        },
        Row {
            name: "sin small",
            bound: 2,
            spread: SignedLog(1e-300, 1.0),
            lanes: |x| x.sin(),
            scalar: f64::sin,
        },
        Row {
            name: "sin to 1e8",
            bound: 2,
            spread: Uniform(-1e8, 1e8),
            lanes: |x| x.sin(),
            scalar: f64::sin,
        },
        Row {
            name: "cos to 1e8",
            bound: 2,
            spread: Uniform(-1e8, 1e8),
            lanes: |x| x.cos(),
            scalar: f64::cos,
        },
        Row {
            name: "sin beyond",
            bound: 0,
            spread: SignedLog(1.0000001e8, 1e300),
            lanes: |x| x.sin(),
            scalar: f64::sin,
        },
        Row {
            name: "tan",
            bound: 4,
            spread: trig,
            lanes: |x| x.tan(),
            scalar: f64::tan,
        },
        Row {
            name: "exp",
            bound: 1,
            spread: Uniform(-700.0, 700.0),
            lanes: |x| x.exp(),
            scalar: f64::exp,
        },
        Row {
            name: "exp small",
            bound: 1,
            spread: SignedLog(1e-300, 1.0),
            lanes: |x| x.exp(),
            scalar: f64::exp,
        },
        Row {
            name: "exp2",
            bound: 0,
            spread: Uniform(-1000.0, 1000.0),
            lanes: |x| x.exp2(),
            scalar: f64::exp2,
        },
        Row {
            name: "exp_m1",
            bound: 5,
            spread: Uniform(-700.0, 700.0),
            lanes: |x| x.exp_m1(),
            scalar: f64::exp_m1,
        },
        Row {
            name: "exp_m1 small",
            bound: 5,
            spread: SignedLog(1e-300, 1.0),
            lanes: |x| x.exp_m1(),
            scalar: f64::exp_m1,
        },
        Row {
            name: "ln",
            bound: 1,
            spread: Log(1e-300, 1e300),
            lanes: |x| x.ln(),
            scalar: f64::ln,
        },
        Row {
            name: "ln near 1",
            bound: 1,
            spread: Uniform(0.5, 2.0),
            lanes: |x| x.ln(),
            scalar: f64::ln,
        },
        Row {
            name: "log2",
            bound: 2,
            spread: Log(1e-300, 1e300),
            lanes: |x| x.log2(),
            scalar: f64::log2,
        },
        Row {
            name: "log10",
            bound: 2,
            spread: Log(1e-300, 1e300),
            lanes: |x| x.log10(),
            scalar: f64::log10,
        },
        Row {
            name: "log base 3",
            bound: 2,
            spread: Log(1e-300, 1e300),
            lanes: |x| x.log(3.0),
            scalar: |x| x.log(3.0),
        },
        Row {
            name: "ln_1p",
            bound: 2,
            spread: Uniform(-0.999, 10.0),
            lanes: |x| x.ln_1p(),
            scalar: f64::ln_1p,
        },
        Row {
            name: "ln_1p small",
            bound: 2,
            spread: SignedLog(1e-300, 0.5),
            lanes: |x| x.ln_1p(),
            scalar: f64::ln_1p,
        },
        Row {
            name: "ln_1p large",
            bound: 2,
            spread: Log(1.0, 1e300),
            lanes: |x| x.ln_1p(),
            scalar: f64::ln_1p,
        },
        Row {
            name: "sqrt",
            bound: 0,
            spread: Log(1e-300, 1e300),
            lanes: |x| x.sqrt(),
            scalar: f64::sqrt,
        },
        Row {
            name: "recip",
            bound: 0,
            spread: SignedLog(1e-300, 1e300),
            lanes: |x| x.recip(),
            scalar: f64::recip,
        },
        Row {
            name: "cbrt",
            bound: 2,
            spread: SignedLog(1e-300, 1e300),
            lanes: |x| x.cbrt(),
            scalar: f64::cbrt,
        },
        Row {
            name: "powf 2.5",
            bound: 2,
            spread: Log(1e-3, 1e3),
            lanes: |x| x.powf(2.5),
            scalar: |x| x.powf(2.5),
        },
        Row {
            name: "powf -7.3",
            bound: 30,
            spread: Log(1e-3, 1e3),
            lanes: |x| x.powf(-7.3),
            scalar: |x| x.powf(-7.3),
        },
        Row {
            name: "powf -2.5",
            bound: 2,
            spread: Log(1e-3, 1e3),
            lanes: |x| x.powf(-2.5),
            scalar: |x| x.powf(-2.5),
        },
        Row {
            name: "powf 0.5",
            bound: 2,
            spread: Log(1e-3, 1e3),
            lanes: |x| x.powf(0.5),
            scalar: |x| x.powf(0.5),
        },
        Row {
            name: "powi 3",
            bound: 0,
            spread: Uniform(-10.0, 10.0),
            lanes: |x| x.powi(3),
            scalar: |x| x.powi(3),
        },
        Row {
            name: "powi -8",
            bound: 0,
            spread: Uniform(-10.0, 10.0),
            lanes: |x| x.powi(-8),
            scalar: |x| x.powi(-8),
        },
        Row {
            name: "powi 7",
            bound: 0,
            spread: Uniform(-10.0, 10.0),
            lanes: |x| x.powi(7),
            scalar: |x| x.powi(7),
        },
        Row {
            name: "atan",
            bound: 1,
            spread: SignedLog(1e-300, 1e300),
            lanes: |x| x.atan(),
            scalar: f64::atan,
        },
        Row {
            name: "asin",
            bound: 2,
            spread: Uniform(-1.0, 1.0),
            lanes: |x| x.asin(),
            scalar: f64::asin,
        },
        Row {
            name: "acos",
            bound: 2,
            spread: Uniform(-1.0, 1.0),
            lanes: |x| x.acos(),
            scalar: f64::acos,
        },
        Row {
            name: "sinh",
            bound: 3,
            spread: Uniform(-700.0, 700.0),
            lanes: |x| x.sinh(),
            scalar: f64::sinh,
        },
        Row {
            name: "sinh small",
            bound: 3,
            spread: SignedLog(1e-300, 1.0),
            lanes: |x| x.sinh(),
            scalar: f64::sinh,
        },
        Row {
            name: "cosh",
            bound: 2,
            spread: Uniform(-700.0, 700.0),
            lanes: |x| x.cosh(),
            scalar: f64::cosh,
        },
        Row {
            name: "tanh",
            bound: 7,
            spread: Uniform(-20.0, 20.0),
            lanes: |x| x.tanh(),
            scalar: f64::tanh,
        },
        Row {
            name: "tanh small",
            bound: 7,
            spread: SignedLog(1e-300, 1.0),
            lanes: |x| x.tanh(),
            scalar: f64::tanh,
        },
        Row {
            name: "asinh",
            bound: 0,
            spread: SignedLog(1e-300, 1e300),
            lanes: |x| x.asinh(),
            scalar: f64::asinh,
        },
        Row {
            name: "acosh",
            bound: 0,
            spread: Log(1.0, 1e300),
            lanes: |x| x.acosh(),
            scalar: f64::acosh,
        },
        Row {
            name: "atanh",
            bound: 0,
            spread: Uniform(-1.0, 1.0),
            lanes: |x| x.atanh(),
            scalar: f64::atanh,
        },
    ]
}

#[test]
fn elementary_functions_stay_within_their_documented_ulps_of_libm() {
    let mut failures = Vec::new();
    for row in rows() {
        // Each row's points depend on its name only, so adding a row moves no other.
        let key = row
            .name
            .bytes()
            .fold(0u64, |h, b| h.wrapping_mul(31).wrapping_add(b as u64));
        let (max, at) = worst(key, row.spread, row.lanes, row.scalar);
        println!(
            "{:<14} max {max:>4} ulps (bound {}) at x = {at:e}",
            row.name, row.bound
        );
        if max > row.bound {
            failures.push(format!(
                "{}: {max} ulps at x = {at:e} (bound {})",
                row.name, row.bound
            ));
        }
    }
    assert!(failures.is_empty(), "{failures:#?}");
}

#[test]
fn atan2_stays_within_its_documented_ulps_of_libm() {
    // All four quadrants and both orders of magnitude of y/x: |y|, |x| ≤ 10³.
    let mut rng = stream(17, &[1000]);
    let spread = Spread::Uniform(-1e3, 1e3);
    let mut max = (0u128, 0.0, 0.0);
    for _ in 0..POINTS / LANES {
        let y: [f64; LANES] = std::array::from_fn(|_| draw(spread, &mut rng));
        let x: [f64; LANES] = std::array::from_fn(|_| draw(spread, &mut rng));
        let out = Lanes::new(y).atan2(Lanes::new(x));
        for i in 0..LANES {
            let d = ulps(out.lane(i), y[i].atan2(x[i]));
            if d > max.0 {
                max = (d, y[i], x[i]);
            }
        }
    }
    println!("atan2 max {} ulps at ({:e}, {:e})", max.0, max.1, max.2);
    assert!(
        max.0 <= 2,
        "atan2: {} ulps at y = {:e}, x = {:e}",
        max.0,
        max.1,
        max.2
    );
    // Signs of zero and the axes (IEEE 754 §9.2 / C99 Annex F, common practice).
    for (y, x) in [
        (0.0, 1.0),
        (1.0, 0.0),
        (-1.0, 0.0),
        (0.0, -1.0),
        (-0.0, -1.0),
    ] {
        let lane = Lanes::splat(y).atan2(Lanes::splat(x)).lane(0);
        assert_eq!(
            lane.to_bits(),
            f64::atan2(y, x).to_bits(),
            "atan2({y}, {x})"
        );
    }
}

#[test]
fn special_values_follow_ieee_754() {
    // C99 Annex F special cases (common practice).
    let inf = f64::INFINITY;
    let checks: [(&str, fn(Lanes) -> Lanes, f64, f64); 10] = [
        ("exp(-inf)", |x| x.exp(), -inf, 0.0),
        ("exp(inf)", |x| x.exp(), inf, inf),
        ("exp(800)", |x| x.exp(), 800.0, inf),
        ("exp(-800)", |x| x.exp(), -800.0, 0.0),
        ("ln(0)", |x| x.ln(), 0.0, -inf),
        ("ln(inf)", |x| x.ln(), inf, inf),
        ("ln(1)", |x| x.ln(), 1.0, 0.0),
        ("sin(0)", |x| x.sin(), 0.0, 0.0),
        ("cos(0)", |x| x.cos(), 0.0, 1.0),
        ("sqrt(inf)", |x| x.sqrt(), inf, inf),
    ];
    for (name, f, x, expected) in checks {
        assert_eq!(f(Lanes::splat(x)).lane(0), expected, "{name}");
    }
    for (name, f, x) in [
        ("ln(-1)", (|x: Lanes| x.ln()) as fn(Lanes) -> Lanes, -1.0),
        ("sqrt(-1)", |x| x.sqrt(), -1.0),
        ("sin(inf)", |x| x.sin(), inf),
        ("cos(nan)", |x| x.cos(), f64::NAN),
    ] {
        assert!(f(Lanes::splat(x)).lane(0).is_nan(), "{name}");
    }
}

/// One fixture case: function, argument(s), correctly rounded value.
fn fixture() -> Vec<(String, Vec<f64>, f64)> {
    let path =
        Path::new(env!("CARGO_MANIFEST_DIR")).join("../../tests/reference/lane_functions.json");
    let text = std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    let json: serde_json::Value = serde_json::from_str(&text).unwrap();
    json["cases"]
        .as_array()
        .unwrap()
        .iter()
        .map(|c| {
            let args = c["args"]
                .as_array()
                .unwrap()
                .iter()
                .map(|a| a.as_str().unwrap().parse::<f64>().unwrap())
                .collect();
            let value = c["value"].as_str().unwrap().parse::<f64>().unwrap();
            (c["function"].as_str().unwrap().to_string(), args, value)
        })
        .collect()
}

#[test]
fn lane_functions_and_libm_agree_with_mpmath() {
    let cases = fixture();
    assert!(cases.len() >= 50, "{} cases", cases.len());
    for (function, args, expected) in cases {
        let x = Lanes::splat(args[0]);
        let (lane, libm, bound) = match function.as_str() {
            "sin" => (x.sin(), args[0].sin(), 2),
            "cos" => (x.cos(), args[0].cos(), 2),
            "exp" => (x.exp(), args[0].exp(), 2),
            "ln" => (x.ln(), args[0].ln(), 2),
            "sqrt" => (x.sqrt(), args[0].sqrt(), 0),
            "atan2" => (x.atan2(Lanes::splat(args[1])), args[0].atan2(args[1]), 2),
            "powf" => (x.powf(args[1]), args[0].powf(args[1]), 2),
            other => panic!("fixture names an unknown function {other}"),
        };
        let lane = lane.lane(0);
        // libm itself is within 1 ulp of the correctly rounded value (glibc's documented
        // bound for these functions is ≤ 1 ulp; common practice).
        assert!(
            ulps(libm, expected) <= 1,
            "libm {function}{args:?} = {libm:e} vs {expected:e}"
        );
        assert!(
            ulps(lane, expected) <= bound + 1,
            "lanes {function}{args:?} = {lane:e} vs {expected:e}"
        );
    }
}
