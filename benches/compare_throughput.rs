//! Throughput of `compare` (rows per second): reading a dataset CSV as a stream, running the
//! filters in lockstep, accumulating every metric and writing `estimates.csv` rows as it goes.
//! The measured time covers 20 000 rows of the shipped `cv` plant; criterion reports it as
//! elements (rows) per second.
//!
//! `cargo bench --bench compare_throughput`

use criterion::{Criterion, Throughput, criterion_group, criterion_main};
use sightline::eval::commands::compare::{CompareOptions, compare};
use sightline::eval::dataset::read::{DatasetReader, ReadOptions, Schema};
use sightline::eval::dataset::write::write_csv;
use sightline::eval::simulate::SimOptions;
use sightline::{FilterSpec, shipped};

const ROWS: usize = 20_000;

fn throughput(c: &mut Criterion) {
    let plant = shipped().into_iter().find(|p| p.name() == "cv").unwrap();
    let data = plant.simulate(ROWS, 1, &SimOptions::default()).unwrap();
    let mut csv = Vec::new();
    write_csv(&data, &mut csv).unwrap();
    let schema = Schema::of(plant.as_ref(), &[]);
    let mut group = c.benchmark_group("compare");
    group.sample_size(10);
    group.throughput(Throughput::Elements(ROWS as u64));
    for specs in [&["kf"][..], &["kf", "ekf", "ukf"][..]] {
        let specs: Vec<FilterSpec> = specs
            .iter()
            .map(|s| FilterSpec::parse(s).unwrap())
            .collect();
        let name = specs
            .iter()
            .map(|s| s.label.as_str())
            .collect::<Vec<_>>()
            .join("+");
        group.bench_function(format!("cv {name}"), |b| {
            b.iter(|| {
                let mut reader = DatasetReader::from_reader(
                    std::path::Path::new("bench.csv"),
                    std::io::Cursor::new(csv.clone()),
                    &schema,
                    ReadOptions::default(),
                )
                .unwrap();
                let mut sink = std::io::sink();
                compare(
                    plant.as_ref(),
                    &specs,
                    &mut reader,
                    &CompareOptions::default(),
                    Some(&mut sink),
                )
                .unwrap()
            })
        });
    }
    group.finish();
}

criterion_group!(benches, throughput);
criterion_main!(benches);
