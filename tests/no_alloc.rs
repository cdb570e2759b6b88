//! With static plant sizes a predict+update step performs zero heap allocations. A counting
//! global allocator (armed per thread, so parallel tests do not interfere) watches every Gaussian
//! filter on the shipped `cv` and `pendulum` plants and on a two-sensor pendulum defined here
//! (so that a step with one of two measurement components missing is covered too).

mod common;

use std::alloc::{GlobalAlloc, Layout, System};
use std::cell::Cell;

use sightline::core::nalgebra::{Matrix2, U2, Vector2};
use sightline::eval::simulate::SimOptions;
use sightline::filters::Filter;
use sightline::models::Pendulum;
use sightline::prelude::*;
use sightline::{AnyPlant, FilterSpec, Gaussian, Model, Real, shipped};

struct Counting;

thread_local! {
    static ARMED: Cell<bool> = const { Cell::new(false) };
    static COUNT: Cell<usize> = const { Cell::new(0) };
}

fn note() {
    let _ = ARMED.try_with(|armed| {
        if armed.get() {
            COUNT.with(|c| c.set(c.get() + 1));
        }
    });
}

unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        note();
        unsafe { System.alloc(layout) }
    }
    unsafe fn alloc_zeroed(&self, layout: Layout) -> *mut u8 {
        note();
        unsafe { System.alloc_zeroed(layout) }
    }
    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, new_size: usize) -> *mut u8 {
        note();
        unsafe { System.realloc(ptr, layout, new_size) }
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        unsafe { System.dealloc(ptr, layout) }
    }
}

#[global_allocator]
static GLOBAL: Counting = Counting;

/// Allocations made by `f` on this thread.
fn count_allocations(f: impl FnOnce()) -> usize {
    COUNT.with(|c| c.set(0));
    ARMED.with(|a| a.set(true));
    f();
    ARMED.with(|a| a.set(false));
    COUNT.with(|c| c.get())
}

/// A pendulum seen by two sensors, the bob's horizontal and vertical positions.
#[derive(Debug, Clone, Parameters)]
struct TwoSensorPendulum(Pendulum);

impl Model for TwoSensorPendulum {
    type State = U2;
    type Meas = U2;
    fn declare(&self) -> Declaration {
        let p = self.0.declare();
        Declaration::new("pendulum-xy", p.dt())
            .state("angle", "rad", 0.6, 0.1)
            .state("rate", "rad/s", 0.0, 0.2)
            .measurement("x", "m")
            .measurement("y", "m")
            .input("torque", "rad/s^2", 0.0)
    }
    // Continuous time through the library: the integrated transition and the derived Q (AD
    // linearisation, then Van Loan) must not allocate either.
    fn derivative<S: Real>(&self, x: &Vector2<S>, u: &[f64], t: f64) -> Vector2<S> {
        self.0.derivative(x, u, t)
    }
    fn measure<S: Real>(&self, x: &Vector2<S>, _u: &[f64], _t: f64) -> Vector2<S> {
        Vector2::new(x[0].sin() * self.0.length, -x[0].cos() * self.0.length)
    }
    fn noise_density(&self, x: &Vector2<f64>, u: &[f64], t: f64) -> Matrix2<f64> {
        self.0.noise_density(x, u, t)
    }
    fn measurement_noise(&self, _t: f64) -> Matrix2<f64> {
        Matrix2::new(4e-4, 1e-4, 1e-4, 9e-4)
    }
    fn prior(&self) -> Gaussian<U2> {
        self.0.prior()
    }
}

const GAUSSIAN_NONLINEAR: [&str; 10] = [
    "ekf",
    "ekf:jacobian=ad",
    "iekf",
    "iekf:iterations=3,tol=0",
    "ukf",
    "ukf:alpha=0.1",
    "ckf",
    "ghkf",
    "srukf",
    "srukf:alpha=0.1",
];

/// Runs `specs` on `plant` over a simulated dataset in which every 5th row misses its first
/// measurement component and every 7th row misses them all; returns the allocation count of the
/// stepping loop after a warm-up.
fn allocations_per_run(plant: &dyn AnyPlant, specs: &[&str]) -> Vec<(String, usize)> {
    let mut data = plant.simulate(400, 17, &SimOptions::default()).unwrap();
    for (k, r) in data.records.iter_mut().enumerate() {
        if k % 5 == 3 {
            r.y[0] = f64::NAN;
        }
        if k % 7 == 4 {
            r.y.iter_mut().for_each(|v| *v = f64::NAN);
        }
    }
    let warm_up = 10;
    let mut counts = Vec::new();
    for spec in specs {
        let mut f: Box<dyn Filter> = plant
            .build_filter(&FilterSpec::parse(spec).unwrap(), 0)
            .unwrap();
        let rows = &data.records;
        for k in 0..warm_up {
            let previous = (k > 0).then(|| (rows[k - 1].t, rows[k - 1].u.as_slice()));
            common::step(f.as_mut(), previous, rows[k].t, &rows[k].y, &rows[k].u).unwrap();
        }
        let n = count_allocations(|| {
            for k in warm_up..rows.len() {
                let previous = Some((rows[k - 1].t, rows[k - 1].u.as_slice()));
                common::step(f.as_mut(), previous, rows[k].t, &rows[k].y, &rows[k].u).unwrap();
                assert!(f.mean().iter().all(|v| v.is_finite()));
            }
        });
        counts.push((spec.to_string(), n));
    }
    counts
}

#[test]
fn counting_allocator_sees_allocations() {
    // The instrument works: a boxed value allocates once.
    let n = count_allocations(|| {
        std::hint::black_box(Box::new(1u64));
    });
    assert_eq!(n, 1);
}

#[test]
fn gaussian_filter_steps_do_not_allocate_for_static_sizes() {
    let plants = shipped();
    let cv = plants.iter().find(|p| p.name() == "cv").unwrap();
    let pendulum = plants.iter().find(|p| p.name() == "pendulum").unwrap();
    let two_sensor = sightline::plant(TwoSensorPendulum(Pendulum::default()));
    let mut linear: Vec<&str> = vec!["kf", "kf:gain=steady", "kf:gain=0.5/2"];
    linear.extend(GAUSSIAN_NONLINEAR);
    let mut results = allocations_per_run(cv.as_ref(), &linear);
    results.extend(allocations_per_run(pendulum.as_ref(), &GAUSSIAN_NONLINEAR));
    results.extend(allocations_per_run(
        two_sensor.as_ref(),
        &GAUSSIAN_NONLINEAR,
    ));
    let offenders: Vec<_> = results.iter().filter(|(_, n)| *n > 0).collect();
    assert!(
        offenders.is_empty(),
        "allocations in the step loop: {offenders:?}"
    );
    assert_eq!(results.len(), linear.len() + 2 * GAUSSIAN_NONLINEAR.len());
}
