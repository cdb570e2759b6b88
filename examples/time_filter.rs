//! Times one filter on a dataset and writes its estimates: the Sightline side of the numpy
//! baseline (`benches/baseline/compare.py`).
//!
//! ```sh
//! cargo run --release --example time_filter -- pendulum data.csv ukf --repeat 5 -o ukf.csv
//! ```
//!
//! Runs the filter over every row `--repeat` times (a fresh filter each time, same seed), timing
//! the predict + update calls and copying out the estimates, and prints one JSON line
//! `{"label", "steps", "seconds_per_step", "seconds_per_step_all": [...]}` with the fastest run's
//! per-step time (the least disturbed by other load on the machine). `-o` writes the estimates
//! of the last run as `t,x.<state>...,sd.<state>...`. Threads: `RAYON_NUM_THREADS`.

use std::error::Error;
use std::io::Write;
use std::time::Instant;

use sightline::{FilterSpec, shipped};

/// Rows of a dataset, inputs and measurements in model order (missing cells are NaN).
struct Rows {
    t: Vec<f64>,
    u: Vec<Vec<f64>>,
    y: Vec<Vec<f64>>,
}

fn read_rows(
    path: &str,
    inputs: &[String],
    measurements: &[String],
) -> Result<Rows, Box<dyn Error>> {
    let text = std::fs::read_to_string(path)?;
    let mut lines = text.lines();
    let header: Vec<&str> = lines.next().ok_or("empty dataset")?.split(',').collect();
    let column = |name: &str| header.iter().position(|h| *h == name);
    let t_col = column("t").ok_or("no column 't'")?;
    let u_cols: Vec<Option<usize>> = inputs.iter().map(|n| column(&format!("u.{n}"))).collect();
    let y_cols: Vec<usize> = measurements
        .iter()
        .map(|n| column(&format!("y.{n}")).ok_or(format!("no column 'y.{n}'")))
        .collect::<Result<_, _>>()?;
    let mut rows = Rows {
        t: Vec::new(),
        u: Vec::new(),
        y: Vec::new(),
    };
    for (i, line) in lines.enumerate() {
        let cells: Vec<&str> = line.split(',').collect();
        let cell = |c: usize| -> Result<f64, Box<dyn Error>> {
            match cells.get(c).map(|s| s.trim()) {
                None | Some("") => Ok(f64::NAN),
                Some(s) => Ok(s
                    .parse()
                    .map_err(|e| format!("{path}:{}: column {}: {e}", i + 2, c + 1))?),
            }
        };
        rows.t.push(cell(t_col)?);
        rows.u.push(
            u_cols
                .iter()
                .map(|c| c.map_or(Ok(0.0), cell))
                .collect::<Result<_, _>>()?,
        );
        rows.y
            .push(y_cols.iter().map(|&c| cell(c)).collect::<Result<_, _>>()?);
    }
    Ok(rows)
}

fn main() -> Result<(), Box<dyn Error>> {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let usage = "usage: time_filter MODEL DATA.csv SPEC [--repeat K] [-o ESTIMATES.csv]";
    let [model, data, spec] = [0, 1, 2].map(|i| args.get(i).cloned());
    let (Some(model), Some(data), Some(spec)) = (model, data, spec) else {
        return Err(usage.into());
    };
    let mut repeat = 3;
    let mut output = None;
    let mut rest = args[3..].iter();
    while let Some(a) = rest.next() {
        match a.as_str() {
            "--repeat" => repeat = rest.next().ok_or(usage)?.parse()?,
            "-o" => output = Some(rest.next().ok_or(usage)?.clone()),
            _ => return Err(usage.into()),
        }
    }
    let plant = shipped()
        .into_iter()
        .find(|p| p.name() == model)
        .ok_or(format!("unknown model '{model}'"))?;
    let names = |v: Vec<sightline::Variable>| v.into_iter().map(|v| v.name).collect::<Vec<_>>();
    let rows = read_rows(&data, &names(plant.inputs()), &names(plant.measurements()))?;
    let spec = FilterSpec::parse(&spec)?;
    let n = plant.states().len();
    let steps = rows.t.len();
    let mut estimates = vec![0.0; steps * 2 * n];
    let mut per_step = Vec::new();
    for _ in 0..repeat.max(1) {
        let mut filter = plant.build_filter(&spec, 0)?;
        // The clock covers the steps and copying the estimates out (as a runner must).
        let start = Instant::now();
        for k in 0..steps {
            if k > 0 {
                filter.predict(&rows.u[k - 1], rows.t[k - 1], rows.t[k] - rows.t[k - 1])?;
            }
            filter.update(&rows.y[k], &rows.u[k], rows.t[k])?;
            let out = &mut estimates[k * 2 * n..(k + 1) * 2 * n];
            out[..n].copy_from_slice(filter.mean());
            let cov = filter.covariance();
            for i in 0..n {
                out[n + i] = cov[i * n + i].sqrt();
            }
        }
        per_step.push(start.elapsed().as_secs_f64() / steps as f64);
    }
    if let Some(path) = output {
        let mut w = std::io::BufWriter::new(std::fs::File::create(&path)?);
        let states = names(plant.states());
        let head: Vec<String> = std::iter::once("t".to_string())
            .chain(states.iter().map(|s| format!("x.{s}")))
            .chain(states.iter().map(|s| format!("sd.{s}")))
            .collect();
        writeln!(w, "{}", head.join(","))?;
        for k in 0..steps {
            let row = &estimates[k * 2 * n..(k + 1) * 2 * n];
            let cells: Vec<String> = row.iter().map(|v| format!("{v:e}")).collect();
            writeln!(w, "{},{}", rows.t[k], cells.join(","))?;
        }
    }
    let best = per_step.iter().copied().fold(f64::INFINITY, f64::min);
    let all: Vec<String> = per_step.iter().map(|v| format!("{v:e}")).collect();
    println!(
        "{{\"label\": \"{}\", \"steps\": {steps}, \"seconds_per_step\": {best:e}, \"seconds_per_step_all\": [{}]}}",
        spec.label,
        all.join(", ")
    );
    Ok(())
}
