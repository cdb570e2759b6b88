//! Measures how filter cost scales — with the number of steps, the number of particles and the
//! state dimension — fits log-log slopes and draws the curves.
//!
//! ```sh
//! cargo run --release --example scaling_plot -- [OUT_DIR]      # default benches/results
//! ```
//!
//! Writes `scaling_steps.svg`, `scaling_particles.svg`, `scaling_dimension.svg`, every point in
//! `scaling.csv` (`curve,x,seconds`) and the fitted slopes and interleaved ratios in
//! `scaling.json`, and prints them.
//! About a minute on 2 cores.
//!
//! - **Steps**: wall time of K consecutive predict + update steps on `pendulum`,
//!   K = 10² … 10⁵ (three decades), for `ekf`, `ukf` and `pf:particles=1000`; expected slope 1.
//! - **Particles**: median cost of one step of `pf:particles=N` on `pendulum`,
//!   N = 10³ … 10⁶, on rayon pools of 1 and 2 threads; expected slope 1.
//! - **Dimension**: median cost of one step of the Gaussian filters on `tankchain`,
//!   n = 4 … 256; the Cholesky factorisations and covariance products are O(n³), so the slope
//!   tends to 3 once they dominate the O(n²) work (sigma points or Jacobian columns, each an O(n)
//!   model evaluation). Slopes are fitted over n = 8 … 64 (the benchmark range) and n = 64 … 256.
//!
//! - **Interleaved ratios**: the goals that compare two costs are also measured by alternating
//!   the two sides step by step (or block by block), so that both see the same load on a shared
//!   machine: the PF step against its bare arithmetic (`benches/support/bare_arithmetic.rs`) at
//!   N = 10⁵ and 10⁶, the PF on 2 threads against 1, and the EKF with AD against hand-written
//!   Jacobians on `pendulum` and `quadtank`. Each is the ratio of the two medians.
//!
//! Timings exclude building the filter. Each per-step figure is the median over a run of steps,
//! which shrugs off a few steps disturbed by other load on the machine.

use std::error::Error;
use std::fmt::Write as _;
use std::path::PathBuf;
use std::time::{Duration, Instant};

use plotters::prelude::*;
use sightline::eval::dataset::Record;
use sightline::eval::simulate::SimOptions;
use sightline::filters::{Filter, ParticleFilter, PfConfig};
use sightline::models::Pendulum;
use sightline::{AnyPlant, FilterSpec, Model, shipped};

#[path = "../benches/support/bare_arithmetic.rs"]
mod bare_arithmetic;
use bare_arithmetic::BareCloud;

/// One measured curve: points (x, seconds) and a label.
struct Curve {
    label: String,
    points: Vec<(f64, f64)>,
}

fn plant(name: &str, set: &[(&str, f64)]) -> Result<Box<dyn AnyPlant>, Box<dyn Error>> {
    let mut plant = shipped()
        .into_iter()
        .find(|p| p.name() == name)
        .ok_or("shipped plant")?;
    for &(k, v) in set {
        plant.set(k, v)?;
    }
    Ok(plant)
}

/// Runs predict + update over `records` (row 0 only updates) with a fresh filter, calling
/// `lap` with the duration of every step; returns the total.
fn run(
    plant: &dyn AnyPlant,
    spec: &str,
    records: &[Record],
    mut lap: impl FnMut(Duration) -> bool,
) -> Result<Duration, Box<dyn Error>> {
    let mut filter = plant.build_filter(&FilterSpec::parse(spec)?, 3)?;
    let first = &records[0];
    filter.update(&first.y, &first.u, first.t)?;
    let mut total = Duration::ZERO;
    for pair in records.windows(2) {
        let (prev, r) = (&pair[0], &pair[1]);
        let start = Instant::now();
        filter.predict(&prev.u, prev.t, r.t - prev.t)?;
        filter.update(&r.y, &r.u, r.t)?;
        let took = start.elapsed();
        total += took;
        if !lap(took) {
            break;
        }
    }
    Ok(total)
}

/// Median step cost (s) over up to `records.len() - 1` steps or about `budget` of wall time.
fn median_step(
    plant: &dyn AnyPlant,
    spec: &str,
    records: &[Record],
    budget: Duration,
) -> Result<f64, Box<dyn Error>> {
    let mut laps = Vec::new();
    let mut spent = Duration::ZERO;
    run(plant, spec, records, |d| {
        laps.push(d.as_secs_f64());
        spent += d;
        spent < budget || laps.len() < 5
    })?;
    laps.sort_by(f64::total_cmp);
    Ok(laps[laps.len() / 2])
}

/// Least-squares slope of log y against log x over the points with x in [lo, hi].
fn slope(points: &[(f64, f64)], lo: f64, hi: f64) -> f64 {
    let pts: Vec<(f64, f64)> = points
        .iter()
        .filter(|(x, _)| *x >= lo && *x <= hi)
        .map(|(x, y)| (x.ln(), y.ln()))
        .collect();
    let n = pts.len() as f64;
    let (mx, my) = (
        pts.iter().map(|p| p.0).sum::<f64>() / n,
        pts.iter().map(|p| p.1).sum::<f64>() / n,
    );
    let sxy: f64 = pts.iter().map(|p| (p.0 - mx) * (p.1 - my)).sum();
    let sxx: f64 = pts.iter().map(|p| (p.0 - mx).powi(2)).sum();
    sxy / sxx
}

fn steps_curves() -> Result<Vec<Curve>, Box<dyn Error>> {
    let pendulum = plant("pendulum", &[])?;
    let data = pendulum.simulate(100_001, 1, &SimOptions::default())?;
    let mut curves = Vec::new();
    for spec in ["ekf", "ukf", "pf:particles=1000"] {
        let mut points = Vec::new();
        for k in [100usize, 1_000, 10_000, 100_000] {
            // Best of a few runs for the short ones; the longest runs once.
            let repeats = if k >= 100_000 { 1 } else { 3 };
            let mut best = f64::INFINITY;
            for _ in 0..repeats {
                let t = run(pendulum.as_ref(), spec, &data.records[..=k], |_| true)?;
                best = best.min(t.as_secs_f64());
            }
            points.push((k as f64, best));
        }
        curves.push(Curve {
            label: spec.to_string(),
            points,
        });
    }
    Ok(curves)
}

fn particle_curves() -> Result<Vec<Curve>, Box<dyn Error>> {
    let pendulum = plant("pendulum", &[])?;
    let data = pendulum.simulate(200, 1, &SimOptions::default())?;
    let mut curves = Vec::new();
    for threads in [1, 2] {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()?;
        let mut points = Vec::new();
        for n in [1_000usize, 10_000, 100_000, 1_000_000] {
            let spec = format!("pf:particles={n}");
            // Built and stepped inside the pool, so its passes split over `threads` workers.
            let t = pool
                .install(|| {
                    median_step(
                        pendulum.as_ref(),
                        &spec,
                        &data.records,
                        Duration::from_millis(1500),
                    )
                    .map_err(|e| e.to_string())
                })
                .map_err(|e| -> Box<dyn Error> { e.into() })?;
            points.push((n as f64, t));
        }
        curves.push(Curve {
            label: format!("pf, {threads} thread{}", if threads > 1 { "s" } else { "" }),
            points,
        });
    }
    Ok(curves)
}

fn dimension_curves() -> Result<Vec<Curve>, Box<dyn Error>> {
    let sizes = [4usize, 8, 16, 32, 64, 128, 256];
    let specs = ["ekf", "iekf", "ukf", "ckf", "srukf"];
    let mut curves: Vec<Curve> = specs
        .iter()
        .map(|s| Curve {
            label: s.to_string(),
            points: Vec::new(),
        })
        .collect();
    for n in sizes {
        let chain = plant("tankchain", &[("n", n as f64)])?;
        let data = chain.simulate(400, 1, &SimOptions::default())?;
        for (spec, curve) in specs.iter().zip(curves.iter_mut()) {
            let t = median_step(
                chain.as_ref(),
                spec,
                &data.records,
                Duration::from_millis(600),
            )?;
            curve.points.push((n as f64, t));
        }
    }
    Ok(curves)
}

fn median(mut v: Vec<f64>) -> f64 {
    v.sort_by(f64::total_cmp);
    v[v.len() / 2]
}

fn pendulum_pf(particles: usize, first: &Record) -> Result<ParticleFilter<Pendulum>, String> {
    let model = Pendulum::default();
    let prior = model.prior();
    let config = PfConfig {
        particles,
        ..PfConfig::default()
    };
    let mut pf = ParticleFilter::new(model, prior, config, "pf", 3).map_err(|e| e.to_string())?;
    pf.update(&first.y, &first.u, first.t)
        .map_err(|e| e.to_string())?;
    Ok(pf)
}

fn pf_step(pf: &mut ParticleFilter<Pendulum>, prev: &Record, r: &Record) -> Result<f64, String> {
    let start = Instant::now();
    pf.predict(&prev.u, prev.t, r.t - prev.t)
        .map_err(|e| e.to_string())?;
    pf.update(&r.y, &r.u, r.t).map_err(|e| e.to_string())?;
    Ok(start.elapsed().as_secs_f64())
}

/// The ratios of the goals, each side alternated with the other.
fn interleaved() -> Result<serde_json::Value, Box<dyn Error>> {
    let pendulum = plant("pendulum", &[])?;
    let data = pendulum.simulate(2_000, 1, &SimOptions::default())?;
    let rows = &data.records;
    let one = rayon::ThreadPoolBuilder::new().num_threads(1).build()?;
    let two = rayon::ThreadPoolBuilder::new().num_threads(2).build()?;
    let mut out = serde_json::Map::new();
    for (count, pairs) in [(100_000usize, 40usize), (1_000_000, 10)] {
        let mut pf1 = one.install(|| pendulum_pf(count, &rows[0]))?;
        let mut pf2 = two.install(|| pendulum_pf(count, &rows[0]))?;
        let mut bare = BareCloud::new(count);
        // Two alternations: PF on one thread against the bare loop, then PF on one thread
        // against PF on two (so that idle workers of the two-thread pool never overlap the
        // bare loop).
        let (mut t1, mut tb) = (Vec::new(), Vec::new());
        for k in 1..=pairs {
            let (prev, r) = (&rows[k - 1], &rows[k]);
            t1.push(one.install(|| pf_step(&mut pf1, prev, r))?);
            let start = Instant::now();
            std::hint::black_box(bare.sweep(prev, r, k as u64));
            tb.push(start.elapsed().as_secs_f64());
        }
        let mut pf1 = one.install(|| pendulum_pf(count, &rows[0]))?;
        let (mut t1b, mut t2) = (Vec::new(), Vec::new());
        for k in 1..=pairs {
            let (prev, r) = (&rows[k - 1], &rows[k]);
            t1b.push(one.install(|| pf_step(&mut pf1, prev, r))?);
            t2.push(two.install(|| pf_step(&mut pf2, prev, r))?);
        }
        let (m1, mb) = (median(t1), median(tb));
        let (m1b, m2) = (median(t1b), median(t2));
        println!(
            "interleaved pf N={count}: 1 thread {m1:.3e} s against bare {mb:.3e} s \
             (pf/bare {:.2}); 1 thread {m1b:.3e} s against 2 threads {m2:.3e} s (speed-up {:.2})",
            m1 / mb,
            m1b / m2
        );
        out.insert(
            format!("pf_{count}"),
            serde_json::json!({
                "one_thread_seconds": m1, "bare_seconds": mb, "pf_over_bare": m1 / mb,
                "one_thread_seconds_against_two": m1b, "two_threads_seconds": m2,
                "speed_up_two_threads": m1b / m2,
            }),
        );
    }
    for name in ["pendulum", "quadtank"] {
        let p = plant(name, &[])?;
        let data = p.simulate(201, 1, &SimOptions::default())?;
        let (mut hand, mut ad) = (Vec::new(), Vec::new());
        for _ in 0..40 {
            hand.push(run(p.as_ref(), "ekf", &data.records, |_| true)?.as_secs_f64());
            ad.push(run(p.as_ref(), "ekf:jacobian=ad", &data.records, |_| true)?.as_secs_f64());
        }
        let (mh, ma) = (median(hand) / 200.0, median(ad) / 200.0);
        println!(
            "interleaved ekf {name}: hand-written {mh:.3e} s, ad {ma:.3e} s (ad/hand {:.2})",
            ma / mh
        );
        out.insert(
            format!("ekf_{name}"),
            serde_json::json!({
                "hand_written_seconds": mh, "ad_seconds": ma, "ad_over_hand": ma / mh,
            }),
        );
    }
    Ok(serde_json::Value::Object(out))
}

/// Draws curves on log-log axes into an SVG file, with a dashed grey reference line of slope
/// `reference` through the first curve's last point.
fn plot(
    path: &PathBuf,
    title: &str,
    x_label: &str,
    y_label: &str,
    curves: &[Curve],
    reference: f64,
) -> Result<(), Box<dyn Error>> {
    let all = || curves.iter().flat_map(|c| c.points.iter());
    let (x_lo, x_hi) = all().fold((f64::INFINITY, 0.0f64), |(a, b), p| {
        (a.min(p.0), b.max(p.0))
    });
    let (y_lo, y_hi) = all().fold((f64::INFINITY, 0.0f64), |(a, b), p| {
        (a.min(p.1), b.max(p.1))
    });
    let root = SVGBackend::new(path, (720, 480)).into_drawing_area();
    root.fill(&WHITE)?;
    let mut chart = ChartBuilder::on(&root)
        .caption(title, ("sans-serif", 20))
        .margin(12)
        .x_label_area_size(44)
        .y_label_area_size(72)
        .build_cartesian_2d(
            (x_lo / 1.5..x_hi * 1.5).log_scale(),
            (y_lo / 2.0..y_hi * 2.0).log_scale(),
        )?;
    chart
        .configure_mesh()
        .x_desc(x_label)
        .y_desc(y_label)
        .x_label_formatter(&|v| {
            if *v < 1000.0 {
                format!("{v:.0}")
            } else {
                format!("{v:.0e}")
            }
        })
        .y_label_formatter(&|v| format!("{v:.0e}"))
        .draw()?;
    if let Some(&(x1, y1)) = curves.first().and_then(|c| c.points.last()) {
        // Start where the line enters the plotted range.
        let x0 = x_lo.max(x1 * (y_lo / y1).powf(1.0 / reference));
        let line = (0..=20).map(move |i| {
            let x = x0 * (x1 / x0).powf(i as f64 / 20.0);
            (x, y1 * (x / x1).powf(reference))
        });
        let grey = RGBColor(120, 120, 120);
        chart
            .draw_series(DashedLineSeries::new(line, 6, 4, grey.stroke_width(1)))?
            .label(format!("slope {reference} (reference)"))
            .legend(move |(x, y)| PathElement::new([(x, y), (x + 18, y)], grey));
    }
    for (i, curve) in curves.iter().enumerate() {
        let color = Palette99::pick(i).to_rgba();
        chart
            .draw_series(LineSeries::new(
                curve.points.iter().copied(),
                color.stroke_width(2),
            ))?
            .label(&curve.label)
            .legend(move |(x, y)| PathElement::new([(x, y), (x + 18, y)], color.stroke_width(2)));
        chart.draw_series(
            curve
                .points
                .iter()
                .map(|&p| Circle::new(p, 3, color.filled())),
        )?;
    }
    chart
        .configure_series_labels()
        .position(SeriesLabelPosition::UpperLeft)
        .background_style(WHITE.mix(0.85))
        .border_style(BLACK)
        .draw()?;
    root.present()?;
    Ok(())
}

fn main() -> Result<(), Box<dyn Error>> {
    let out = PathBuf::from(
        std::env::args()
            .nth(1)
            .unwrap_or_else(|| "benches/results".into()),
    );
    std::fs::create_dir_all(&out)?;
    let mut csv = String::from("curve,x,seconds\n");
    let mut json = serde_json::Map::new();
    let mut record = |group: &str, curves: &mut Vec<Curve>, ranges: &[(&str, f64, f64)]| {
        let mut fits = serde_json::Map::new();
        for c in curves.iter_mut() {
            for &(x, t) in &c.points {
                let _ = writeln!(csv, "{group}/{},{x},{t:e}", c.label);
            }
            let mut slopes = serde_json::Map::new();
            let mut text = Vec::new();
            for &(name, lo, hi) in ranges {
                let s = slope(&c.points, lo, hi);
                slopes.insert(name.to_string(), serde_json::json!(s));
                text.push(format!("{s:.2}"));
                println!("{group:9} {:18} slope {name:10} {s:.3}", c.label);
            }
            fits.insert(c.label.clone(), serde_json::Value::Object(slopes));
            c.label = format!("{} (slope {})", c.label, text.join(" / "));
        }
        json.insert(group.to_string(), serde_json::Value::Object(fits));
    };

    let ratios = interleaved()?;
    let mut steps = steps_curves()?;
    record("steps", &mut steps, &[("1e2..1e5", 1e2, 1e5)]);
    let mut particles = particle_curves()?;
    record("particles", &mut particles, &[("1e3..1e6", 1e3, 1e6)]);
    let mut dimension = dimension_curves()?;
    record(
        "dimension",
        &mut dimension,
        &[("8..64", 8.0, 64.0), ("64..256", 64.0, 256.0)],
    );

    plot(
        &out.join("scaling_steps.svg"),
        "cost vs steps, pendulum",
        "steps K",
        "wall time of K steps (s)",
        &steps,
        1.0,
    )?;
    plot(
        &out.join("scaling_particles.svg"),
        "cost vs particles, pendulum",
        "particles N",
        "time per step (s)",
        &particles,
        1.0,
    )?;
    plot(
        &out.join("scaling_dimension.svg"),
        "cost vs state dimension, tankchain (slopes 8..64 / 64..256)",
        "states n",
        "time per step (s)",
        &dimension,
        3.0,
    )?;
    json.insert("interleaved".into(), ratios);
    std::fs::write(out.join("scaling.csv"), csv)?;
    std::fs::write(
        out.join("scaling.json"),
        serde_json::to_string_pretty(&serde_json::Value::Object(json))? + "\n",
    )?;
    println!("wrote {}", out.display());
    Ok(())
}
