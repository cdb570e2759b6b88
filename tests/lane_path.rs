//! The lane path (`pf:lanes=on`, `enkf:lanes=on`): the plant's own generic code evaluated over
//! `sightline_core::Lanes` (four particles per call) against the same code over `f64`.
//!
//! - Every shipped plant's transition and measurement, over random states around its prior:
//!   equal lane by lane within the accumulated accuracy of the lane functions
//!   (`sightline_core::lanes`, at most 4 ulps per call for the functions the plants use), or —
//!   for plants that branch on a value — detected, so the filters evaluate them per particle.
//! - The particle and ensemble filters with lanes on against lanes off on the same data and seed: the same
//!   random draws, estimates equal to rounding amplified over the run.
//! - (Lane-path output is bit-identical for 1, 2 and 16 threads: `tests/sampling_filters.rs`.)

use rand_distr::{Distribution, StandardNormal};
use sightline::core::lanes::{LANES, Lanes, attempt};
use sightline::core::nalgebra::{DefaultAllocator, Dim, OVector, U1};
use sightline::core::rng::stream;
use sightline::core::{Alloc, Model};
use sightline::eval::dataset::Dataset;
use sightline::eval::simulate::SimOptions;
use sightline::models::{ModelVisitor, visit_all};
use sightline::{AnyPlant, FilterSpec, shipped};

/// Lanes of `x` (lane l = states[l]).
fn pack<N: Dim>(n: N, states: &[OVector<f64, N>; LANES]) -> OVector<Lanes, N>
where
    DefaultAllocator: sightline::core::nalgebra::allocator::Allocator<N>,
{
    OVector::from_fn_generic(n, U1, |i, _| {
        Lanes::new(std::array::from_fn(|l| states[l][i]))
    })
}

/// Largest |lane − scalar| / (|scalar| + 1) over the components of one lane, in units of
/// f64::EPSILON. The `+ 1` keeps outputs near zero (cancellation in a difference of order-one
/// terms) from inflating a relative measure; every shipped plant's states are of order one or
/// larger in their units.
fn gap<D: Dim>(lanes: &OVector<Lanes, D>, l: usize, scalar: &OVector<f64, D>) -> f64
where
    DefaultAllocator: sightline::core::nalgebra::allocator::Allocator<D>,
{
    lanes
        .iter()
        .zip(scalar.iter())
        .map(|(a, b)| (a.lane(l) - b).abs() / (b.abs() + 1.0) / f64::EPSILON)
        .fold(0.0, f64::max)
}

/// Per plant: (name, worst transition gap, worst measurement gap), `None` where the plant
/// branches on a value.
#[derive(Default)]
struct Gaps(Vec<(String, Option<f64>, Option<f64>)>);

impl ModelVisitor for Gaps {
    fn visit<M: Model>(&mut self, model: M)
    where
        DefaultAllocator: Alloc<M::State, M::Meas>,
    {
        let prior = model.prior();
        let d = model.declare();
        let u = d.default_input().to_vec();
        let (dt, n) = (d.dt(), model.state_dim());
        let mut rng = stream(17, &[d.name().len() as u64]);
        let (mut transition, mut measurement) = (Some(0.0f64), Some(0.0f64));
        for _ in 0..2_000 {
            // States spread over three prior standard deviations, projected as the filters do.
            let states: [OVector<f64, M::State>; LANES] = std::array::from_fn(|_| {
                let mut x = prior.mean.clone();
                for i in 0..x.len() {
                    let e: f64 = StandardNormal.sample(&mut rng);
                    x[i] += 3.0 * prior.cov[(i, i)].sqrt() * e;
                }
                model.project(&mut x);
                x
            });
            let lanes = pack(n, &states);
            let t = 0.37;
            if let Some(worst) = transition {
                transition = attempt(|| model.transition(&lanes, &u, t, dt)).map(|f| {
                    (0..LANES).fold(worst, |w, l| {
                        w.max(gap(&f, l, &model.transition(&states[l], &u, t, dt)))
                    })
                });
            }
            if let Some(worst) = measurement {
                measurement = attempt(|| model.measure(&lanes, &u, t)).map(|h| {
                    (0..LANES).fold(worst, |w, l| {
                        w.max(gap(&h, l, &model.measure(&states[l], &u, t)))
                    })
                });
            }
        }
        self.0.push((d.name().to_string(), transition, measurement));
    }
}

#[test]
fn every_shipped_plant_evaluates_in_lanes_as_with_f64_or_is_detected_as_branching() {
    let mut gaps = Gaps::default();
    visit_all(&mut gaps);
    let mut friendly = 0;
    for (name, transition, measurement) in &gaps.0 {
        println!("{name}: transition {transition:?} eps, measurement {measurement:?} eps");
        // One RK4 step calls the right-hand side four times and combines the stages with
        // weights summing to one, so per-call errors of ≤ 4 ulps (the table in
        // sightline_core::lanes for sin/cos/exp/sqrt/atan) stay within 4·4 = 16 eps relative
        // to |x| + 1 after the step; a discrete transition or a measurement calls each function
        // once per term.
        for (what, g) in [("transition", transition), ("measurement", measurement)] {
            if let Some(g) = g {
                assert!(*g <= 16.0, "{name}: {what} off by {g} eps");
            }
        }
        if transition.is_some() && measurement.is_some() {
            friendly += 1;
        }
    }
    // The plants written with select/max/smooth_max are lane-friendly; `tracking` branches on
    // its turn rate (series near zero) and its bearing, so it must be detected, not mis-evaluated.
    let find = |name: &str| gaps.0.iter().find(|g| g.0 == name).unwrap();
    let lane_friendly = [
        "pendulum",
        "cv",
        "ungm",
        "quadtank",
        "cstr",
        "tankchain",
        "local-level",
    ];
    for name in lane_friendly {
        let (_, t, m) = find(name);
        assert!(t.is_some() && m.is_some(), "{name} should be lane-friendly");
    }
    assert!(
        find("tracking").1.is_none(),
        "tracking branches on its turn rate"
    );
    assert_eq!(friendly, lane_friendly.len());
}

fn plant(name: &str) -> Box<dyn AnyPlant> {
    shipped().into_iter().find(|p| p.name() == name).unwrap()
}

/// Means and covariances of every step, then the log-likelihood.
fn run(plant: &dyn AnyPlant, data: &Dataset, spec: &str, seed: u64) -> Vec<f64> {
    let mut filter = plant
        .build_filter(&FilterSpec::parse(spec).unwrap(), seed)
        .unwrap();
    let mut out = Vec::new();
    let mut log_likelihood = 0.0;
    let mut previous: Option<(f64, &[f64])> = None;
    for r in &data.records {
        if let Some((t0, u0)) = previous {
            filter.predict(u0, t0, r.t - t0).unwrap();
        }
        filter.update(&r.y, &r.u, r.t).unwrap();
        log_likelihood += filter.log_likelihood_increment();
        out.extend_from_slice(filter.mean());
        out.extend_from_slice(filter.covariance());
        previous = Some((r.t, &r.u));
    }
    out.push(log_likelihood);
    out
}

#[test]
fn lanes_on_and_off_give_the_same_estimates_to_rounding() {
    // Same seed, same draws: the runs differ only by the lane functions' few ulps per call,
    // carried along the run. 10⁴ particles, 200 steps.
    for (name, spec) in [
        ("pendulum", "pf:particles=10000"),
        ("ungm", "pf:particles=10000,resample=stratified"),
        ("cstr", "pf:particles=10000,noise=each"),
        ("tracking", "pf:particles=10000"),
        ("pendulum", "enkf:members=2000"),
    ] {
        let plant = plant(name);
        let data = plant.simulate(200, 3, &SimOptions::default()).unwrap();
        let scalar = run(plant.as_ref(), &data, spec, 9);
        let lanes = run(plant.as_ref(), &data, &format!("{spec},lanes=on"), 9);
        let worst = scalar
            .iter()
            .zip(&lanes)
            .map(|(a, b)| (a - b).abs() / (a.abs() + 1.0))
            .fold(0.0, f64::max);
        println!("{name}: worst relative gap {worst:e}");
        if name == "tracking" {
            // Detected as branching: evaluated particle by particle, the scalar path's bits.
            assert!(scalar == lanes, "{name}: the per-particle fallback differs");
        } else {
            // At most 16 eps per step (the per-call bound of the plant test above), added up
            // over the 200 steps if nothing damps it.
            let bound = 200.0 * 16.0 * f64::EPSILON;
            assert!(
                worst < bound,
                "{name}: lanes differ from f64 by {worst:e} (bound {bound:e})"
            );
        }
    }
}
