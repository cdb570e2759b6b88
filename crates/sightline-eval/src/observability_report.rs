//! The report of `observe` (`report.html`: the answer per state, the sensor sets side by side
//! and a bar chart of the per-state bounds per sensor set on a log axis), and the
//! "Observability" section that `compare` and `montecarlo` add to their report when a state is
//! weakly or not observable along the data's trajectory.

use plotters::prelude::*;

use crate::error::{Error, Result};
use crate::observability::{Observability, Reading, SensorSet, TrajectorySource};
use crate::plant::AnyPlant;
use crate::report::{colour, escape};
use crate::verdict::sig;

const WIDTH: u32 = 900;
const HEIGHT: u32 = 360;

fn plot_error<E: std::error::Error>(e: E) -> Error {
    Error::Run(format!("drawing the observability chart: {e}"))
}

fn cell(v: Option<f64>) -> String {
    v.map_or_else(|| "–".to_string(), |v| sig(v, 4))
}

/// The sensor sets the chart shows: the compared ones, else the chosen one.
fn charted_sets(result: &Observability) -> Vec<&SensorSet> {
    if result.sensor_sets.is_empty() {
        vec![&result.result]
    } else {
        result.sensor_sets.iter().collect()
    }
}

/// Grouped bars: per state one bar per sensor set, the height log₁₀ of its bound (`sd_bound`);
/// an unobservable state gets no bar and an "∞" mark.
pub fn bound_chart(sets: &[&SensorSet]) -> Result<String> {
    let Some(first) = sets.first() else {
        return Ok(String::new());
    };
    let n = first.states.len();
    let logs: Vec<f64> = sets
        .iter()
        .flat_map(|s| s.states.iter().filter_map(|b| b.sd_bound))
        .filter(|v| v.is_finite() && *v > 0.0)
        .map(f64::log10)
        .collect();
    let (lo, hi) = match (
        logs.iter().copied().reduce(f64::min),
        logs.iter().copied().reduce(f64::max),
    ) {
        // Headroom above the bars for the legend.
        (Some(lo), Some(hi)) => (lo.floor() - 1.0, hi.ceil() + 1.5),
        _ => (-1.0, 1.0),
    };
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (WIDTH, HEIGHT)).into_drawing_area();
        root.fill(&WHITE).map_err(plot_error)?;
        let mut chart = ChartBuilder::on(&root)
            .caption(
                "Smallest achievable sd of each state (log axis)",
                ("sans-serif", 18),
            )
            .margin(8)
            .x_label_area_size(36)
            .y_label_area_size(70)
            .build_cartesian_2d(-0.5..(n as f64 - 0.5), lo..hi)
            .map_err(plot_error)?;
        let names: Vec<String> = first.states.iter().map(|s| s.name.clone()).collect();
        let every = n.div_ceil(16).max(1);
        let x_format = |v: &f64| {
            let i = v.round();
            if (v - i).abs() < 1e-6 && i >= 0.0 && (i as usize) % every == 0 {
                names.get(i as usize).cloned().unwrap_or_default()
            } else {
                String::new()
            }
        };
        let y_format = |v: &f64| format!("1e{v:.0}");
        chart
            .configure_mesh()
            .disable_x_mesh()
            .x_labels(n + 1)
            .x_label_formatter(&x_format)
            .y_labels(((hi - lo) as usize + 1).min(12))
            .y_label_formatter(&y_format)
            .y_desc("sd bound (state's unit)")
            .light_line_style(RGBColor(235, 235, 235))
            .draw()
            .map_err(plot_error)?;
        let width = 0.8 / sets.len() as f64;
        for (j, set) in sets.iter().enumerate() {
            let c = colour(j);
            let left = |i: usize| i as f64 - 0.4 + j as f64 * width;
            chart
                .draw_series(set.states.iter().enumerate().filter_map(|(i, b)| {
                    let v = b.sd_bound.filter(|v| v.is_finite() && *v > 0.0)?;
                    Some(Rectangle::new(
                        [(left(i), lo), (left(i) + width * 0.9, v.log10())],
                        c.mix(0.85).filled(),
                    ))
                }))
                .map_err(plot_error)?
                .label(set.sensors.join(","))
                .legend(move |(x, y)| Rectangle::new([(x, y - 5), (x + 12, y + 5)], c.filled()));
            chart
                .draw_series(
                    set.states
                        .iter()
                        .enumerate()
                        .filter(|(_, b)| b.sd_bound.is_none())
                        .map(|(i, _)| {
                            Text::new(
                                "∞",
                                (left(i), lo + 0.1 * (hi - lo)),
                                ("sans-serif", 16).into_font().color(&c),
                            )
                        }),
                )
                .map_err(plot_error)?;
        }
        chart
            .configure_series_labels()
            .position(SeriesLabelPosition::UpperLeft)
            .border_style(RGBColor(200, 200, 200))
            .background_style(WHITE.mix(0.9))
            .draw()
            .map_err(plot_error)?;
        root.present().map_err(plot_error)?;
    }
    let start = svg.find("<svg").unwrap_or(0);
    Ok(svg[start..].to_string())
}

/// The per-state table of one sensor set as HTML.
fn state_table(set: &SensorSet) -> String {
    let mut html = String::from(
        "<table><thead><tr><th>state</th><th>observable</th><th>sd bound (measurements \
         only)</th><th>prior sd</th><th>PCRLB sd at the end</th><th>reading</th></tr></thead>\
         <tbody>\n",
    );
    for s in &set.states {
        html.push_str(&format!(
            "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>\n",
            escape(&s.name),
            if s.observable { "yes" } else { "no" },
            cell(s.sd_bound),
            sig(s.prior_sd, 4),
            cell(s.pcrlb_sd),
            s.reading.words()
        ));
    }
    html.push_str("</tbody></table>\n");
    html
}

/// What a set says, in one paragraph.
fn set_paragraph(set: &SensorSet) -> String {
    let n = set.states.len();
    let mut text = format!(
        "Sensors {}: rank {} of {n}, conditioning {}: {}.",
        set.sensors.join(", "),
        set.rank,
        set.conditioning.map_or("∞".to_string(), |c| sig(c, 3)),
        set.reading.words()
    );
    if !set.unobservable_directions.is_empty() {
        let dirs: Vec<&str> = set
            .unobservable_directions
            .iter()
            .map(|d| d.combination.as_str())
            .collect();
        text.push_str(&format!(
            " No measurement changes (to first order) when the state moves along: {}.",
            dirs.join("; ")
        ));
    }
    format!("<p>{}</p>\n", escape(&text))
}

const EXPLANATION: &str = "The sd bound is √((J⁻¹)ᵢᵢ) of the information J = Σ Hₖᵀ R⁻¹ Hₖ \
    that the window's measurements carry about the state at its first row (Hₖ = ∂h(xₖ)/∂x₀, \
    exact derivatives; no prior, no process noise): the smallest standard deviation any \
    unbiased estimator could reach from these measurements alone. 'Weakly observable' means \
    the bound is no smaller than the prior's sd; the PCRLB column adds the prior and the \
    process noise and is read at the last row.";

/// Which trajectory was followed, as a paragraph.
fn along(result: &Observability) -> String {
    let what = match result.trajectory {
        TrajectorySource::Truth => "the data's true trajectory",
        TrajectorySource::Prediction => {
            "the noise-free prediction from the prior mean through the data's times and inputs \
             (the data has no truth)"
        }
        TrajectorySource::Simulation => {
            "the noise-free simulation from the prior mean with the constant inputs"
        }
    };
    format!("<p>Along {what}, {} rows.</p>\n", result.steps)
}

/// `report.html` of `observe`.
pub fn render(plant: &dyn AnyPlant, result: &Observability) -> Result<String> {
    let title = format!("Sightline: observability of {}", plant.name());
    let mut html = String::with_capacity(64 * 1024);
    html.push_str("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">");
    html.push_str(&format!("<title>{}</title>", escape(&title)));
    html.push_str(
        "<style>body{font-family:sans-serif;max-width:960px;margin:1.5em auto;color:#222}\
         table{border-collapse:collapse;font-size:0.9em}td,th{border:1px solid #ccc;\
         padding:3px 7px;text-align:right}td:first-child,th:first-child{text-align:left}\
         figure{margin:1.2em 0}figcaption{font-size:0.85em;color:#555}\
         .verdict{background:#f4f7fb;border-left:4px solid #0072b2;padding:0.6em 1em}</style>\
         </head><body>\n",
    );
    html.push_str(&format!("<h1>{}</h1>\n", escape(&title)));
    html.push_str(&format!(
        "<div class=\"verdict\">{}{}</div>\n",
        set_paragraph(&result.result),
        along(result)
    ));
    html.push_str(&format!("<p>{}</p>\n", escape(EXPLANATION)));
    html.push_str(&state_table(&result.result));
    if !result.sensor_sets.is_empty() {
        html.push_str("<h2>Sensor sets compared</h2>\n<table><thead><tr><th>state</th>");
        for s in &result.sensor_sets {
            html.push_str(&format!("<th>{}</th>", escape(&s.sensors.join(","))));
        }
        html.push_str("</tr></thead><tbody>\n");
        for (i, st) in result.result.states.iter().enumerate() {
            html.push_str(&format!("<tr><td>{}</td>", escape(&st.name)));
            for s in &result.sensor_sets {
                let b = &s.states[i];
                html.push_str(&format!(
                    "<td>{} / {}</td>",
                    cell(b.sd_bound),
                    cell(b.pcrlb_sd)
                ));
            }
            html.push_str("</tr>\n");
        }
        html.push_str("<tr><td>rank</td>");
        for s in &result.sensor_sets {
            html.push_str(&format!("<td>{} ({})</td>", s.rank, s.reading.words()));
        }
        html.push_str(
            "</tr>\n</tbody></table>\n<p>Each cell: sd bound from the measurements only / PCRLB \
             sd at the end.</p>\n",
        );
        for s in &result.sensor_sets {
            html.push_str(&set_paragraph(s));
        }
    }
    let chart = bound_chart(&charted_sets(result))?;
    html.push_str(&format!(
        "<figure class=\"plot\" data-plot=\"bounds\">{chart}<figcaption>Per state and sensor \
         set, the sd bound from the measurements only (∞: not observable).</figcaption></figure>\n"
    ));
    for n in &result.notes {
        html.push_str(&format!("<p>{}</p>\n", escape(n)));
    }
    if let Some(settings) = &result.settings {
        html.push_str(&format!(
            "<h2>Settings</h2>\n<p>To rerun it:</p>\n<pre>{}</pre>\n",
            escape(&settings.rerun_line())
        ));
    }
    html.push_str(&format!(
        "<p>{}</p>\n",
        escape(&crate::plant::parameters_text(plant))
    ));
    html.push_str("</body></html>\n");
    Ok(html)
}

/// The "Observability" section of a comparison report, or `None` when every state is well
/// observable along the trajectory. `warnings` are the verdict's lines about filters that
/// report small uncertainty on states the sensors cannot see.
pub fn section(result: &Observability, warnings: &[String]) -> Option<String> {
    if result.result.reading == Reading::Well {
        return None;
    }
    let mut html = String::from("<h2 id=\"observability\">Observability</h2>\n");
    html.push_str(&set_paragraph(&result.result));
    html.push_str(&along(result));
    html.push_str(&format!("<p>{}</p>\n", escape(EXPLANATION)));
    html.push_str(&state_table(&result.result));
    for w in warnings {
        html.push_str(&format!("<p class=\"failed\">{}</p>\n", escape(w)));
    }
    html.push_str(&format!(
        "<p>For sensor what-ifs: <code>sightline observe {} DATA.csv --compare-sensors \
         'A|B,C' -o DIR</code>.</p>\n",
        escape(&result.model)
    ));
    Some(html)
}

/// `html` with `section` inserted before its plots (or at the end of the body): the one hook
/// into a comparison page, so that the page's own renderer needs no change.
pub fn insert_section(html: &str, section: &str) -> String {
    let at = html
        .find("<h2>Plots</h2>")
        .or_else(|| html.rfind("</body>"))
        .unwrap_or(html.len());
    let mut out = String::with_capacity(html.len() + section.len());
    out.push_str(&html[..at]);
    out.push_str(section);
    out.push_str(&html[at..]);
    out
}
