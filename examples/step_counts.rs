//! Runs a fixed number of filter steps (or transition Jacobians) of one `benches/filter_step`
//! case, for instruction counting under valgrind's callgrind, where counts do not depend on the
//! load of the machine the way wall-clock medians do.
//!
//! ```sh
//! cargo build --release --example step_counts
//! valgrind --tool=callgrind --toggle-collect='*step_counts*timed*' \
//!     target/release/examples/step_counts step pendulum ekf 500
//! valgrind --tool=callgrind --toggle-collect='*step_counts*timed*' \
//!     target/release/examples/step_counts jacobian pendulum ad 500
//! ```
//!
//! Only the `timed_*` functions are counted (`--toggle-collect`): building the plant,
//! simulating the dataset and building the filter are not. `bash benches/callgrind.sh` runs
//! every case and prints instructions per step.

use std::error::Error;
use std::hint::black_box;

use sightline::core::Alloc;
use sightline::eval::dataset::Dataset;
use sightline::eval::simulate::SimOptions;
use sightline::filters::JacobianSource;
use sightline::filters::linearise::transition_jacobian;
use sightline::models::{Pendulum, QuadTank};
use sightline::nalgebra::DefaultAllocator;
use sightline::{AnyPlant, Filter, FilterSpec, Model, shipped};

/// Rows simulated for the step cases, as in `benches/filter_step.rs`.
const ROWS: usize = 2_000;

fn plant(name: &str) -> Result<Box<dyn AnyPlant>, Box<dyn Error>> {
    // `tankchain-<n>` is the chain of n tanks, as the bench names it.
    let (base, n) = match name.split_once('-') {
        Some((base, n)) => (base, Some(n.parse::<f64>()?)),
        None => (name, None),
    };
    let mut plant = shipped()
        .into_iter()
        .find(|p| p.name() == base)
        .ok_or_else(|| format!("no shipped plant '{base}'"))?;
    if let Some(n) = n {
        plant.set("n", n)?;
    }
    Ok(plant)
}

/// `steps` predict + update steps over the rows after the first (the filter has updated on it).
#[inline(never)]
fn timed_steps(filter: &mut dyn Filter, data: &Dataset, steps: usize) {
    for k in 1..=steps {
        let (prev, r) = (&data.records[k - 1], &data.records[k]);
        filter
            .predict(&prev.u, prev.t, r.t - prev.t)
            .expect("predict");
        filter.update(&r.y, &r.u, r.t).expect("update");
    }
}

/// `count` transition Jacobians at the prior mean, by `source`.
#[inline(never)]
fn timed_jacobians<M: Model>(model: &M, source: JacobianSource, count: usize)
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    let x = model.prior().mean;
    let declaration = model.declare();
    let (u, dt) = (declaration.default_input(), declaration.dt());
    for _ in 0..count {
        black_box(transition_jacobian(
            model,
            black_box(&x),
            u,
            0.0,
            dt,
            source,
        ));
    }
}

fn main() -> Result<(), Box<dyn Error>> {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let usage =
        "usage: step_counts step PLANT SPEC STEPS | step_counts jacobian PLANT model|ad COUNT";
    let [kind, plant_name, what, count] = [0, 1, 2, 3].map(|i| args.get(i).cloned());
    let (Some(kind), Some(plant_name), Some(what), Some(count)) = (kind, plant_name, what, count)
    else {
        return Err(usage.into());
    };
    let count: usize = count.parse()?;
    match kind.as_str() {
        "step" => {
            let plant = plant(&plant_name)?;
            let data = plant.simulate(ROWS, 1, &SimOptions::default())?;
            if count >= data.records.len() {
                return Err(format!("at most {} steps", data.records.len() - 1).into());
            }
            let spec = FilterSpec::parse(&what)?;
            let mut filter = plant.build_filter(&spec, 3)?;
            let r = &data.records[0];
            filter.update(&r.y, &r.u, r.t)?;
            timed_steps(filter.as_mut(), &data, count);
        }
        "jacobian" => {
            let source = match what.as_str() {
                "model" => JacobianSource::Model,
                "ad" => JacobianSource::Automatic,
                _ => return Err(usage.into()),
            };
            match plant_name.as_str() {
                "pendulum" => timed_jacobians(&Pendulum::default(), source, count),
                "quadtank" => timed_jacobians(&QuadTank::default(), source, count),
                _ => return Err(usage.into()),
            }
        }
        _ => return Err(usage.into()),
    }
    Ok(())
}
