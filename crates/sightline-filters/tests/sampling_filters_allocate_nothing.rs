//! The particle and ensemble filters allocate their buffers once: with static plant sizes a
//! predict + update step (propagation, weighting, resampling, jitter, analysis) performs no heap
//! allocation. Counted with a counting global allocator, so this file is its own test binary.
//!
//! On a one-thread rayon pool the block passes run in the calling thread and the count must be
//! exactly zero. On a multi-thread pool rayon's work-stealing `join` runs inside the pool's own
//! threads; the count is reported and must be zero as well (rayon's deques are preallocated).

use std::alloc::{GlobalAlloc, Layout, System};
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};

use sightline_core::nalgebra::{Matrix1, Matrix2, U1, U2, Vector1, Vector2};
use sightline_core::prelude::*;
use sightline_core::{Gaussian, Model, Real};
use sightline_filters::{Filter, FilterSpec, build};

struct Counting;

static COUNTING: AtomicBool = AtomicBool::new(false);
static ALLOCATIONS: AtomicUsize = AtomicUsize::new(0);

unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        if COUNTING.load(Ordering::SeqCst) {
            ALLOCATIONS.fetch_add(1, Ordering::SeqCst);
        }
        unsafe { System.alloc(layout) }
    }
    unsafe fn alloc_zeroed(&self, layout: Layout) -> *mut u8 {
        if COUNTING.load(Ordering::SeqCst) {
            ALLOCATIONS.fetch_add(1, Ordering::SeqCst);
        }
        unsafe { System.alloc_zeroed(layout) }
    }
    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, new_size: usize) -> *mut u8 {
        if COUNTING.load(Ordering::SeqCst) {
            ALLOCATIONS.fetch_add(1, Ordering::SeqCst);
        }
        unsafe { System.realloc(ptr, layout, new_size) }
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        unsafe { System.dealloc(ptr, layout) }
    }
}

#[global_allocator]
static GLOBAL: Counting = Counting;

/// A nonlinear two-state plant with static sizes: a damped oscillator seen through a saturating
/// sensor (any static-size plant would do; nonlinearity keeps the weights uneven).
#[derive(Clone, Parameters)]
struct Oscillator;

impl Model for Oscillator {
    type State = U2;
    type Meas = U1;
    fn declare(&self) -> Declaration {
        Declaration::new("oscillator", 0.1)
            .state("p", "m", 0.0, 1.0)
            .state("v", "m/s", 0.0, 1.0)
            .measurement("s", "-")
            .input("f", "N", 0.0)
    }
    fn transition<S: Real>(&self, x: &Vector2<S>, u: &[f64], _t: f64, dt: f64) -> Vector2<S> {
        Vector2::new(x[0] + x[1] * dt, x[1] - (x[0] + x[1] * 0.2 - u[0]) * dt)
    }
    fn measure<S: Real>(&self, x: &Vector2<S>, _u: &[f64], _t: f64) -> Vector1<S> {
        Vector1::new(x[0].tanh())
    }
    fn process_noise(&self, x: &Vector2<f64>, _u: &[f64], _t: f64, dt: f64) -> Matrix2<f64> {
        Matrix2::new(1e-3, 0.0, 0.0, 0.05 * (1.0 + 0.1 * x[0].abs())) * dt
    }
    fn measurement_noise(&self, _t: f64) -> Matrix1<f64> {
        Matrix1::new(0.01)
    }
    fn prior(&self) -> Gaussian<U2> {
        Gaussian::new(Vector2::new(0.5, 0.0), Matrix2::new(0.2, 0.0, 0.0, 0.2))
    }
    fn project(&self, x: &mut Vector2<f64>) {
        x[0] = x[0].clamp(-10.0, 10.0);
    }
}

/// Allocations during `steps` predict+update steps of `spec`, after two warm-up steps, on
/// `pool`. The counter is global, so the pools live for the whole test and are warmed up first:
/// threads allocate while they start and shut down.
fn allocations(spec: &str, pool: &rayon::ThreadPool, steps: usize) -> usize {
    pool.install(|| {
        let model = Oscillator;
        let mut filter: Box<dyn Filter> =
            build(&model, &model.prior(), &FilterSpec::parse(spec).unwrap(), 5).unwrap();
        let u = [0.1];
        let mut run = |k: usize| {
            let t = k as f64 * 0.1;
            filter.predict(&u, t - 0.1, 0.1).unwrap();
            // Every fifth measurement is missing.
            let y = if k % 5 == 0 {
                f64::NAN
            } else {
                (0.5 * t).sin().tanh()
            };
            filter.update(&[y], &u, t).unwrap();
        };
        run(1);
        run(2);
        ALLOCATIONS.store(0, Ordering::SeqCst);
        COUNTING.store(true, Ordering::SeqCst);
        for k in 3..3 + steps {
            run(k);
        }
        COUNTING.store(false, Ordering::SeqCst);
        ALLOCATIONS.load(Ordering::SeqCst)
    })
}

const SPECS: [&str; 10] = [
    // The lane path (four particles per plant call), with a short last group of one particle.
    "pf:particles=5001,lanes=on",
    "pf:particles=5001,ess=1,lanes=on,noise=each,roughening=0.2",
    "pf:particles=5000,ess=1,roughening=0.2",
    "pf:particles=5000,temper=0.9",
    "pf:particles=5000,ess=1,resample=multinomial,regularise=on,noise=each",
    "pf:particles=5000,ess=1,resample=residual,variant=auxiliary",
    "pf:particles=3000,ess=1,resample=stratified,variant=auxiliary,noise=each,redraw=on",
    "enkf:members=3000,inflation=1.05",
    "enkf:members=2500,noise=each",
    "enkf:members=2501,lanes=on",
];

// One test function: the counter is global, so the checks must not run concurrently.
#[test]
fn sampling_filter_steps_do_not_allocate() {
    let pool = |threads| {
        rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap()
    };
    let (one, two) = (pool(1), pool(2));
    // Every pool thread has started (thread start-up allocates) before anything is counted.
    one.broadcast(|_| ());
    two.broadcast(|_| ());
    for spec in SPECS {
        let sequential = allocations(spec, &one, 20);
        assert_eq!(
            sequential, 0,
            "{spec}: {sequential} allocations in 20 steps on 1 thread"
        );
        let parallel = allocations(spec, &two, 20);
        eprintln!("{spec}: {parallel} allocations in 20 steps on 2 threads");
        assert_eq!(
            parallel, 0,
            "{spec}: {parallel} allocations in 20 steps on 2 threads"
        );
    }
}
