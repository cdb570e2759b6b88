//! Cost of one predict + update step of every filter on the shipped plants, and of the EKF with
//! automatically differentiated Jacobians against the same EKF with the plant's hand-written ones.
//!
//! ```sh
//! cargo bench --bench filter_step                  # everything (a few minutes on 2 cores)
//! cargo bench --bench filter_step -- tankchain     # one group
//! ```
//!
//! Groups:
//! - `step/<plant>`: `ekf iekf ukf ckf ghkf srukf pf enkf` with their default options on
//!   `pendulum` (n = 2), `quadtank` (n = 4), `tracking` (n = 5), and on `tankchain` at
//!   n = 8, 16, 32, 64 (`step/tankchain-<n>`, the run-time sized path). `ghkf` needs 3ⁿ points
//!   and is reported not applicable above n = 12 (more than 10⁶ points).
//! - `ekf_jacobians/<plant>`: the EKF step with `jacobian=model` (hand-written) and
//!   `jacobian=ad`, and the transition Jacobian alone by both routes, on `pendulum` and
//!   `quadtank`.
//!
//! Steps run on a simulated dataset; when a run reaches its end the filter is rebuilt with the
//! clock stopped, so every timed step is a regular one.

use std::hint::black_box;
use std::time::{Duration, Instant};

use criterion::{
    BenchmarkGroup, Criterion, criterion_group, criterion_main, measurement::WallTime,
};
use sightline::core::Alloc;
use sightline::eval::dataset::Dataset;
use sightline::eval::simulate::SimOptions;
use sightline::filters::JacobianSource;
use sightline::filters::linearise::transition_jacobian;
use sightline::models::{Pendulum, QuadTank};
use sightline::nalgebra::DefaultAllocator;
use sightline::{AnyPlant, FilterSpec, Model, shipped};

/// Filters benchmarked on every plant, as specs with default options.
const FILTERS: &[&str] = &["ekf", "iekf", "ukf", "ckf", "ghkf", "srukf", "pf", "enkf"];

/// Rows in each simulated dataset.
const ROWS: usize = 2_000;

fn configure(group: &mut BenchmarkGroup<'_, WallTime>) {
    group
        .sample_size(10)
        .warm_up_time(Duration::from_millis(500))
        .measurement_time(Duration::from_secs(2));
}

fn plant(name: &str, set: &[(&str, f64)]) -> Box<dyn AnyPlant> {
    let mut plant = shipped()
        .into_iter()
        .find(|p| p.name() == name)
        .expect("shipped plant");
    for &(key, value) in set {
        plant.set(key, value).expect("valid parameter");
    }
    plant
}

/// Times predict + update over the rows of `data` (row 0 only updates), rebuilding the filter
/// with the clock stopped when the rows run out. Returns `None` if the spec does not apply.
fn bench_spec(
    group: &mut BenchmarkGroup<'_, WallTime>,
    name: &str,
    plant: &dyn AnyPlant,
    data: &Dataset,
    spec: &str,
) {
    let spec_parsed = FilterSpec::parse(spec).expect("valid spec");
    let fresh = || {
        let mut f = plant.build_filter(&spec_parsed, 3)?;
        let r = &data.records[0];
        f.update(&r.y, &r.u, r.t).expect("first update");
        Ok::<_, sightline::filters::SpecError>(f)
    };
    let mut filter = match fresh() {
        Ok(f) => f,
        Err(e) => {
            eprintln!("{name}: not applicable: {e}");
            return;
        }
    };
    let records = &data.records;
    let mut k = 1;
    group.bench_function(name, |b| {
        b.iter_custom(|iters| {
            let mut total = Duration::ZERO;
            let mut start = Instant::now();
            for _ in 0..iters {
                if k == records.len() {
                    total += start.elapsed();
                    filter = fresh().expect("rebuild");
                    k = 1;
                    start = Instant::now();
                }
                let (prev, r) = (&records[k - 1], &records[k]);
                filter
                    .predict(&prev.u, prev.t, r.t - prev.t)
                    .expect("predict");
                filter.update(&r.y, &r.u, r.t).expect("update");
                k += 1;
            }
            total + start.elapsed()
        })
    });
}

fn every_filter(c: &mut Criterion) {
    let cases: Vec<(String, Box<dyn AnyPlant>)> = vec![
        ("pendulum".into(), plant("pendulum", &[])),
        ("quadtank".into(), plant("quadtank", &[])),
        ("tracking".into(), plant("tracking", &[])),
    ]
    .into_iter()
    .chain([8, 16, 32, 64].into_iter().map(|n| {
        (
            format!("tankchain-{n}"),
            plant("tankchain", &[("n", n as f64)]),
        )
    }))
    .collect();
    for (name, plant) in &cases {
        let data = plant
            .simulate(ROWS, 1, &SimOptions::default())
            .expect("simulate");
        let mut group = c.benchmark_group(format!("step/{name}"));
        configure(&mut group);
        for spec in FILTERS {
            bench_spec(&mut group, spec, plant.as_ref(), &data, spec);
        }
        group.finish();
    }
}

/// The transition Jacobian alone at the prior mean, by `source`.
fn bench_jacobian<M: Model>(
    group: &mut BenchmarkGroup<'_, WallTime>,
    model: &M,
    source: JacobianSource,
    name: &str,
) where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    let x = model.prior().mean;
    let declaration = model.declare();
    let (u, dt) = (declaration.default_input(), declaration.dt());
    group.bench_function(name, |b| {
        b.iter(|| transition_jacobian(model, black_box(&x), u, 0.0, dt, source))
    });
}

fn ekf_jacobians(c: &mut Criterion) {
    for name in ["pendulum", "quadtank"] {
        let plant = plant(name, &[]);
        let data = plant
            .simulate(ROWS, 1, &SimOptions::default())
            .expect("simulate");
        let mut group = c.benchmark_group(format!("ekf_jacobians/{name}"));
        configure(&mut group);
        bench_spec(
            &mut group,
            "step hand-written",
            plant.as_ref(),
            &data,
            "ekf",
        );
        bench_spec(
            &mut group,
            "step ad",
            plant.as_ref(),
            &data,
            "ekf:jacobian=ad",
        );
        match name {
            "pendulum" => {
                let m = Pendulum::default();
                bench_jacobian(&mut group, &m, JacobianSource::Model, "F hand-written");
                bench_jacobian(&mut group, &m, JacobianSource::Automatic, "F ad");
            }
            _ => {
                let m = QuadTank::default();
                bench_jacobian(&mut group, &m, JacobianSource::Model, "F hand-written");
                bench_jacobian(&mut group, &m, JacobianSource::Automatic, "F ad");
            }
        }
        group.finish();
    }
}

criterion_group!(benches, every_filter, ekf_jacobians);
criterion_main!(benches);
