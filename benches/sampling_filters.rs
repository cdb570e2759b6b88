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
//! - `pf_bare/<N>`: the arithmetic no particle filter can avoid, as a tight sequential loop over
//!   the same cloud: per particle, draw the process noise (two standard normals from the same
//!   generator), apply one transition (the model's RK4 step), add the noise through the factor of
//!   Q, and evaluate one Gaussian log-likelihood of the measurement (the model's `measure`),
//!   storing it as the log-weight. `pf_particles/1t/N ÷ pf_bare/N` is the filter's overhead
//!   ratio: normalisation, weighted moments, innovation statistics and resampling.
//! - `step_1e5`: the sampling filters' variants at 10⁵ particles / members on `cv` and `ungm`,
//!   on rayon's default pool.

use std::hint::black_box;
use std::time::{Duration, Instant};

use criterion::{
    BenchmarkGroup, Criterion, criterion_group, criterion_main, measurement::WallTime,
};
use rand::RngExt;
use rand_distr::StandardNormal;
use sightline::core::rng::stream;
use sightline::eval::dataset::Record;
use sightline::eval::simulate::SimOptions;
use sightline::filters::{Filter, ParticleFilter, PfConfig};
use sightline::models::Pendulum;
use sightline::nalgebra::{Cholesky, Vector1, Vector2};
use sightline::{FilterSpec, Model, plant, shipped};

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

/// A PF on the pendulum, with the first row's update done.
fn fresh_pf(particles: usize, first: &Record) -> ParticleFilter<Pendulum> {
    let model = Pendulum::default();
    let prior = model.prior();
    let config = PfConfig {
        particles,
        ..PfConfig::default()
    };
    let mut pf = ParticleFilter::new(model, prior, config, "pf", 3).expect("pf");
    pf.update(&first.y, &first.u, first.t)
        .expect("first update");
    pf
}

fn pf_particles(c: &mut Criterion) {
    let records = pendulum_data(2_000);
    for threads in [1, 2] {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .expect("thread pool");
        let mut group = c.benchmark_group(format!("pf_particles/{threads}t"));
        configure(&mut group);
        for &count in COUNTS {
            // Filters are built and stepped inside the pool, so rayon splits their passes over
            // exactly `threads` workers.
            let mut pf = pool.install(|| fresh_pf(count, &records[0]));
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
                                pf = fresh_pf(count, &records[0]);
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

/// One sweep of the bare particle arithmetic over `cloud` (2 × N, column-major): noise, one
/// transition, one log-likelihood per particle. Returns the sum of log-weights so that nothing
/// is optimised away.
#[allow(clippy::too_many_arguments)]
fn bare_sweep(
    model: &Pendulum,
    cloud: &mut [f64],
    log_weights: &mut [f64],
    factor: &sightline::nalgebra::Matrix2<f64>,
    r: &Record,
    prev: &Record,
    step: u64,
) -> f64 {
    let u = Vector1::new(prev.u[0]);
    let (t, dt) = (prev.t, r.t - prev.t);
    let y = r.y[0];
    let inv_r = 1.0 / model.r;
    let log_norm = -0.5 * (model.r.ln() + (2.0 * std::f64::consts::PI).ln());
    let mut rng = stream(3, &[2, step]);
    let mut total = 0.0;
    for (x, lw) in cloud.chunks_exact_mut(2).zip(log_weights.iter_mut()) {
        let mut next = model.transition(&Vector2::new(x[0], x[1]), &u, t, dt);
        let e0: f64 = rng.sample(StandardNormal);
        let e1: f64 = rng.sample(StandardNormal);
        next += factor * Vector2::new(e0, e1);
        let z = model.measure(&next, &u, r.t);
        let e = y - z[0];
        let l = log_norm - 0.5 * e * e * inv_r;
        *lw = l;
        total += l;
        x.copy_from_slice(next.as_slice());
    }
    total
}

fn pf_bare(c: &mut Criterion) {
    let records = pendulum_data(2_000);
    let model = Pendulum::default();
    let mut group = c.benchmark_group("pf_bare");
    configure(&mut group);
    for &count in COUNTS {
        // The cloud starts at the prior and is never resampled: the arithmetic per particle does
        // not depend on where the particles are.
        let prior = model.prior();
        let mut rng = stream(3, &[1]);
        let sd = prior.cov.map_diagonal(f64::sqrt);
        let mut cloud: Vec<f64> = (0..count)
            .flat_map(|_| {
                let e0: f64 = rng.sample(StandardNormal);
                let e1: f64 = rng.sample(StandardNormal);
                [prior.mean[0] + sd[0] * e0, prior.mean[1] + sd[1] * e1]
            })
            .collect();
        let mut log_weights = vec![0.0; count];
        let mut k = 1;
        group.throughput(criterion::Throughput::Elements(count as u64));
        group.bench_function(count.to_string(), |b| {
            b.iter(|| {
                if k == records.len() {
                    k = 1;
                }
                let (prev, r) = (&records[k - 1], &records[k]);
                // The factor of Q, once per step as the filter does (it takes Q at the cloud's
                // mean; here at the first particle, which costs the same).
                let q = model.process_noise(
                    &Vector2::new(cloud[0], cloud[1]),
                    &Vector1::new(prev.u[0]),
                    prev.t,
                    r.t - prev.t,
                );
                let factor = Cholesky::new(q).expect("Q").l();
                let s = bare_sweep(
                    &model,
                    &mut cloud,
                    &mut log_weights,
                    &factor,
                    r,
                    prev,
                    k as u64,
                );
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
