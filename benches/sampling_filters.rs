//! Cost of the sampling filters.
//!
//! ```sh
//! cargo bench --bench sampling_filters                 # everything (a few minutes on 2 cores)
//! cargo bench --bench sampling_filters -- pf_particles # one group
//! ```
//!
//! Groups:
//! - `pf_particles/<threads>t/<N>`: one predict + update step of the bootstrap particle filter
//!   (`pf:particles=N`, systematic resampling at ESS < N/2) on `pendulum`, N = 10³ … 10⁶, on a
//!   rayon pool of 1 and of 2 threads (`ThreadPoolBuilder` + `install`).
//! - `pf_lanes/<threads>t/<N>`: the same with `lanes=on` (the plant's transition and measurement
//!   evaluated over four particles per call, `sightline_core::lanes`).
//! - `pf_bare/<N>`: the arithmetic no particle filter can avoid, as a tight sequential loop over
//!   a cloud of N (`support/bare_arithmetic.rs`): per particle, draw the process noise (two
//!   standard normals from the same generator), apply one transition (the model's RK4 step), add
//!   the noise through the factor of Q, and evaluate one Gaussian log-likelihood of the
//!   measurement (the model's `measure`), storing it as the log-weight. `pf_particles/1t/N ÷ pf_bare/N` is the filter's overhead
//!   ratio: normalisation, weighted moments, innovation statistics and resampling.
//! - `step_1e5`: the sampling filters' variants at 10⁵ particles / members on `cv` and `ungm`,
//!   on rayon's default pool.

use std::hint::black_box;
use std::time::{Duration, Instant};

use criterion::{
    BenchmarkGroup, Criterion, criterion_group, criterion_main, measurement::WallTime,
};
use sightline::eval::dataset::Record;
use sightline::eval::simulate::SimOptions;
use sightline::filters::{Filter, ParticleFilter, PfConfig};
use sightline::models::Pendulum;
use sightline::{FilterSpec, Model, plant, shipped};

#[path = "support/bare_arithmetic.rs"]
mod bare_arithmetic;
use bare_arithmetic::BareCloud;

/// Particle counts of the scaling groups.
const COUNTS: &[usize] = &[1_000, 10_000, 100_000, 1_000_000];

fn configure(group: &mut BenchmarkGroup<'_, WallTime>) {
    group
        .sample_size(10)
        .warm_up_time(Duration::from_millis(500))
        .measurement_time(Duration::from_secs(3));
}

fn pendulum_data(rows: usize) -> Vec<Record> {
    plant(Pendulum::default())
        .simulate(rows, 1, &SimOptions::default())
        .expect("simulate")
        .records
}

/// A PF on the pendulum (`lanes` on or off), with the first row's update done.
fn fresh_pf(particles: usize, lanes: bool, first: &Record) -> ParticleFilter<Pendulum> {
    let model = Pendulum::default();
    let prior = model.prior();
    let config = PfConfig {
        particles,
        lanes,
        ..PfConfig::default()
    };
    let mut pf = ParticleFilter::new(model, prior, config, "pf", 3).expect("pf");
    pf.update(&first.y, &first.u, first.t)
        .expect("first update");
    pf
}

fn pf_particles(c: &mut Criterion) {
    let records = pendulum_data(2_000);
    for (threads, lanes) in [(1, false), (2, false), (1, true), (2, true)] {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .expect("thread pool");
        let name = if lanes { "pf_lanes" } else { "pf_particles" };
        let mut group = c.benchmark_group(format!("{name}/{threads}t"));
        configure(&mut group);
        for &count in COUNTS {
            // Filters are built and stepped inside the pool, so rayon splits their passes over
            // exactly `threads` workers.
            let mut pf = pool.install(|| fresh_pf(count, lanes, &records[0]));
            let mut k = 1;
            group.throughput(criterion::Throughput::Elements(count as u64));
            group.bench_function(count.to_string(), |b| {
                b.iter_custom(|iters| {
                    pool.install(|| {
                        let mut total = Duration::ZERO;
                        let mut start = Instant::now();
                        for _ in 0..iters {
                            if k == records.len() {
                                total += start.elapsed();
                                pf = fresh_pf(count, lanes, &records[0]);
                                k = 1;
                                start = Instant::now();
                            }
                            let (prev, r) = (&records[k - 1], &records[k]);
                            pf.predict(&prev.u, prev.t, r.t - prev.t).expect("predict");
                            pf.update(&r.y, &r.u, r.t).expect("update");
                            k += 1;
                        }
                        total + start.elapsed()
                    })
                })
            });
        }
        group.finish();
    }
}

fn pf_bare(c: &mut Criterion) {
    let records = pendulum_data(2_000);
    let mut group = c.benchmark_group("pf_bare");
    configure(&mut group);
    for &count in COUNTS {
        let mut cloud = BareCloud::new(count);
        let mut k = 1;
        group.throughput(criterion::Throughput::Elements(count as u64));
        group.bench_function(count.to_string(), |b| {
            b.iter(|| {
                if k == records.len() {
                    k = 1;
                }
                let s = cloud.sweep(&records[k - 1], &records[k], k as u64);
                k += 1;
                black_box(s)
            })
        });
    }
    group.finish();
}

fn step_1e5(c: &mut Criterion) {
    let mut group = c.benchmark_group("step_1e5");
    configure(&mut group);
    for (model, spec) in [
        ("cv", "pf:particles=100000"),
        ("cv", "pf:particles=100000,ess=1"),
        ("cv", "pf:particles=100000,variant=auxiliary"),
        ("cv", "enkf:members=100000"),
        ("ungm", "pf:particles=100000"),
    ] {
        let plant = shipped().into_iter().find(|p| p.name() == model).unwrap();
        let data = plant.simulate(2_000, 1, &SimOptions::default()).unwrap();
        let mut filter = plant
            .build_filter(&FilterSpec::parse(spec).unwrap(), 3)
            .unwrap();
        let dt = plant.dt();
        let mut k = 0;
        group.bench_function(format!("{model} {spec}"), |b| {
            b.iter(|| {
                k = (k + 1) % data.records.len();
                let r = &data.records[k];
                filter.predict(&r.u, r.t - dt, dt).unwrap();
                filter.update(&r.y, &r.u, r.t).unwrap();
            })
        });
    }
    group.finish();
}

criterion_group!(benches, pf_particles, pf_bare, step_1e5);
criterion_main!(benches);
