//! Cost of one predict + update step of the sampling filters at 10⁵ particles / members, on the
//! shipped `cv` (2 states) and `ungm` (1 state) plants, with rayon's default pool.
//!
//! `cargo bench --bench sampling_filters`; `RAYON_NUM_THREADS=1` for the sequential cost.

use criterion::{Criterion, criterion_group, criterion_main};
use sightline::eval::simulate::SimOptions;
use sightline::{FilterSpec, shipped};

fn step_cost(c: &mut Criterion) {
    let mut group = c.benchmark_group("step_1e5");
    group.sample_size(20);
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

criterion_group!(benches, step_cost);
criterion_main!(benches);
