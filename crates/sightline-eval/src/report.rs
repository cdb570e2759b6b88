//! `report.html`: one self-contained page (inline SVG drawn by plotters, no network) to decide
//! from — the verdict, the criteria it used, the summary table and the plots:
//! per state the truth, the measurements and each filter's mean with its ±2σ band; NEES and NIS
//! over time with their χ² bands; innovation autocorrelation with its ±1.96/√N band; RMSE and
//! cost bars. A small inline script marks each plot that the browser laid out
//! (`data-rendered`), so a headless browser can check that every plot rendered.

use plotters::coord::Shift;
use plotters::prelude::*;

use crate::chi2;
use crate::dataset::time::Clock;
use crate::error::{Error, Result};
use crate::runner::Series;
use crate::settings::Settings;
use crate::summary::{FilterSummary, Status, Summary};
use crate::verdict::{self, duration, sig};

/// Plot size in pixels.
const WIDTH: u32 = 900;
const HEIGHT: u32 = 340;

/// Colours of successive filters (a colour-blind-safe qualitative set, Okabe & Ito 2008).
const COLOURS: [RGBColor; 8] = [
    RGBColor(0, 114, 178),
    RGBColor(213, 94, 0),
    RGBColor(0, 158, 115),
    RGBColor(204, 121, 167),
    RGBColor(230, 159, 0),
    RGBColor(86, 180, 233),
    RGBColor(120, 120, 120),
    RGBColor(240, 228, 66),
];

/// The colour of filter number `i`.
pub fn colour(i: usize) -> RGBColor {
    COLOURS[i % COLOURS.len()]
}

/// A line of a line plot.
#[derive(Debug, Clone)]
pub struct Line {
    /// Legend name.
    pub name: String,
    /// Colour.
    pub colour: RGBColor,
    /// Points; NaN points are left out.
    pub points: Vec<(f64, f64)>,
    /// Stroke width.
    pub width: u32,
}

/// A shaded band between two curves sharing x values.
#[derive(Debug, Clone)]
pub struct Area {
    /// Legend name (empty: no legend entry).
    pub name: String,
    /// Colour (drawn translucent).
    pub colour: RGBColor,
    /// Opacity.
    pub opacity: f64,
    /// (x, lower, upper) triples; NaN entries are left out.
    pub points: Vec<(f64, f64, f64)>,
}

/// Scatter dots: legend name, colour, points.
pub type Dots = (String, RGBColor, Vec<(f64, f64)>);

/// A line plot with optional bands and dots.
#[derive(Debug, Clone, Default)]
pub struct LinePlot {
    /// Identifier (used in `data-plot`).
    pub id: String,
    /// Title.
    pub title: String,
    /// X axis label.
    pub x_label: String,
    /// Y axis label.
    pub y_label: String,
    /// Shaded bands, drawn first.
    pub areas: Vec<Area>,
    /// Lines.
    pub lines: Vec<Line>,
    /// Scatter dots (name, colour, points).
    pub dots: Vec<Dots>,
    /// Plot log₁₀ of the values (for NEES/NIS spanning decades).
    pub log_y: bool,
    /// Plot log₁₀ of the x values (cost).
    pub log_x: bool,
    /// The y range drawn, when it is set by part of the data only (the truth and the filters
    /// that did not diverge): bands are clamped to it and clipped curves end with a marker.
    pub y_range: Option<(f64, f64)>,
    /// Markers where a clipped curve leaves the frame: (legend name, colour, point).
    pub clipped: Vec<(String, RGBColor, (f64, f64))>,
    /// Time spans without any measurement (missing values, outages), shaded.
    pub gaps: Vec<(f64, f64)>,
    /// Caption under the plot.
    pub caption: String,
    /// The data's clock when x is time in seconds since the first row: ticks are then shown in
    /// the data's own terms (clock time for date-times, the data's unit for numbers).
    pub clock: Option<Clock>,
}

/// A bar plot, one bar per filter.
#[derive(Debug, Clone)]
pub struct BarPlot {
    /// Identifier.
    pub id: String,
    /// Title.
    pub title: String,
    /// Y axis label.
    pub y_label: String,
    /// (label, value, optional ± whisker, colour).
    pub bars: Vec<(String, f64, Option<f64>, RGBColor)>,
    /// Caption.
    pub caption: String,
}

/// Any plot in the report.
#[derive(Debug, Clone)]
pub enum Plot {
    /// Lines over time or lag.
    Lines(LinePlot),
    /// Bars per filter.
    Bars(BarPlot),
}

impl Plot {
    fn id(&self) -> &str {
        match self {
            Plot::Lines(p) => &p.id,
            Plot::Bars(p) => &p.id,
        }
    }
    fn caption(&self) -> &str {
        match self {
            Plot::Lines(p) => &p.caption,
            Plot::Bars(p) => &p.caption,
        }
    }
}

fn plot_error<E: std::error::Error>(e: E) -> Error {
    Error::Run(format!("drawing a report plot: {e}"))
}

fn finite_range(values: impl Iterator<Item = f64>) -> (f64, f64) {
    let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
    for v in values.filter(|v| v.is_finite()) {
        lo = lo.min(v);
        hi = hi.max(v);
    }
    if !lo.is_finite() {
        return (0.0, 1.0);
    }
    if hi - lo <= f64::EPSILON * hi.abs().max(1.0) {
        let pad = 0.5 * hi.abs().max(1.0);
        return (lo - pad, hi + pad);
    }
    let pad = 0.04 * (hi - lo);
    (lo - pad, hi + pad)
}

/// Lower bound applied before taking log₁₀ (NEES/NIS of exactly 0 would be −∞).
const LOG_FLOOR: f64 = 1e-6;

/// Width of the legend column to the right of a line plot, in pixels: the legend sits beside
/// the data, never on it (a legend inside the axes hid the end of rising level curves).
const LEGEND_WIDTH: u32 = 210;

/// How a legend entry is drawn.
#[derive(Debug, Clone, Copy)]
enum Glyph {
    /// A filled square (a ±2σ band).
    Band(ShapeStyle),
    /// A dot (measurements).
    Dot(RGBColor),
    /// A short line (a mean, the truth, a bound).
    Stroke(ShapeStyle),
}

/// Draws the legend entries top-down into `area` (pixel coordinates).
fn draw_legend(
    entries: &[(String, Glyph)],
    area: &DrawingArea<SVGBackend<'_>, Shift>,
) -> Result<()> {
    let font = ("sans-serif", 12).into_font().color(&BLACK);
    for (i, (name, glyph)) in entries.iter().enumerate() {
        let y = 40 + 18 * i as i32;
        match *glyph {
            Glyph::Band(style) => area
                .draw(&Rectangle::new([(8, y - 5), (24, y + 5)], style))
                .map_err(plot_error)?,
            Glyph::Dot(c) => area
                .draw(&Circle::new((16, y), 3, c.filled()))
                .map_err(plot_error)?,
            Glyph::Stroke(style) => area
                .draw(&PathElement::new(vec![(8, y), (24, y)], style))
                .map_err(plot_error)?,
        }
        area.draw(&Text::new(name.as_str(), (30, y - 7), font.clone()))
            .map_err(plot_error)?;
    }
    Ok(())
}

fn draw_lines(plot: &LinePlot, whole: &DrawingArea<SVGBackend<'_>, Shift>) -> Result<()> {
    let labelled = plot.areas.iter().any(|a| !a.name.is_empty())
        || plot.dots.iter().any(|d| !d.0.is_empty())
        || plot.lines.iter().any(|l| !l.name.is_empty());
    let (area, legend_area) = if labelled {
        let (w, _) = whole.dim_in_pixel();
        let (left, right) = whole.split_horizontally(w.saturating_sub(LEGEND_WIDTH));
        (left, Some(right))
    } else {
        (whole.clone(), None)
    };
    let mut legend: Vec<(String, Glyph)> = Vec::new();
    let ty = |v: f64| {
        if plot.log_y {
            v.max(LOG_FLOOR).log10()
        } else {
            v
        }
    };
    let log_x = plot.log_x;
    let tx = move |v: f64| if log_x { v.max(1e-300).log10() } else { v };
    let xs = plot
        .lines
        .iter()
        .flat_map(|l| l.points.iter().map(|p| tx(p.0)))
        .chain(
            plot.areas
                .iter()
                .flat_map(|a| a.points.iter().map(|p| tx(p.0))),
        )
        .chain(plot.dots.iter().flat_map(|d| d.2.iter().map(|p| tx(p.0))));
    let (x0, x1) = finite_range(xs);
    let (y0, y1) = match plot.y_range {
        Some((lo, hi)) => (ty(lo), ty(hi)),
        None => {
            let ys = plot
                .lines
                .iter()
                .flat_map(|l| l.points.iter().map(|p| ty(p.1)))
                .chain(
                    plot.areas
                        .iter()
                        .flat_map(|a| a.points.iter().flat_map(|p| [ty(p.1), ty(p.2)])),
                )
                .chain(plot.dots.iter().flat_map(|d| d.2.iter().map(|p| ty(p.1))));
            finite_range(ys)
        }
    };
    // Everything drawn stays inside the frame (a clipped curve has its marker).
    let clamp = move |y: f64| y.clamp(y0, y1);
    let mut chart = ChartBuilder::on(&area)
        .caption(&plot.title, ("sans-serif", 18))
        .margin(8)
        .x_label_area_size(36)
        .y_label_area_size(64)
        .build_cartesian_2d(x0..x1, y0..y1)
        .map_err(plot_error)?;
    let log = plot.log_y;
    // Tick values computed as k·step carry rounding noise (e.g. −5.55e−17 for 0).
    let snap = |v: f64, span: f64| if v.abs() < 1e-9 * span { 0.0 } else { v };
    let (x_span, y_span) = (x1 - x0, y1 - y0);
    let y_format = move |v: &f64| {
        if log {
            sig(10f64.powf(*v), 2)
        } else {
            sig(snap(*v, y_span), 3)
        }
    };
    let clock = plot.clock.as_ref();
    let x_format = move |v: &f64| {
        let v = snap(*v, x_span);
        if log_x {
            return sig(10f64.powf(v), 2);
        }
        clock
            .and_then(|c| c.tick(v, x_span))
            .unwrap_or_else(|| sig(v, 3))
    };
    chart
        .configure_mesh()
        .x_desc(plot.x_label.as_str())
        .y_desc(plot.y_label.as_str())
        .x_label_formatter(&x_format)
        .y_label_formatter(&y_format)
        .light_line_style(RGBColor(235, 235, 235))
        .draw()
        .map_err(plot_error)?;
    let gap_style = RGBColor(200, 200, 200).mix(0.35).filled();
    for &(g0, g1) in &plot.gaps {
        chart
            .draw_series(std::iter::once(Rectangle::new(
                [(tx(g0), y0), (tx(g1), y1)],
                gap_style,
            )))
            .map_err(plot_error)?;
    }
    if !plot.gaps.is_empty() {
        legend.push(("no measurement".into(), Glyph::Band(gap_style)));
    }
    for a in &plot.areas {
        let pts: Vec<(f64, f64, f64)> = a
            .points
            .iter()
            .map(|&(x, lo, hi)| (tx(x), clamp(ty(lo)), clamp(ty(hi))))
            .filter(|(x, lo, hi)| x.is_finite() && lo.is_finite() && hi.is_finite())
            .collect();
        if pts.is_empty() {
            continue;
        }
        let mut outline: Vec<(f64, f64)> = pts.iter().map(|p| (p.0, p.2)).collect();
        outline.extend(pts.iter().rev().map(|p| (p.0, p.1)));
        let style = a.colour.mix(a.opacity).filled();
        chart
            .draw_series(std::iter::once(Polygon::new(outline, style)))
            .map_err(plot_error)?;
        if !a.name.is_empty() {
            legend.push((a.name.clone(), Glyph::Band(style)));
        }
    }
    for (name, c, pts) in &plot.dots {
        let c = *c;
        let pts: Vec<(f64, f64)> = pts
            .iter()
            .map(|&(x, y)| (tx(x), ty(y)))
            .filter(|(x, y)| x.is_finite() && y.is_finite() && (y0..=y1).contains(y))
            .collect();
        if pts.is_empty() {
            continue;
        }
        chart
            .draw_series(
                pts.into_iter()
                    .map(|p| Circle::new(p, 2, c.mix(0.5).filled())),
            )
            .map_err(plot_error)?;
        if !name.is_empty() {
            legend.push((name.clone(), Glyph::Dot(c)));
        }
    }
    for l in &plot.lines {
        let pts: Vec<(f64, f64)> = l
            .points
            .iter()
            .map(|&(x, y)| (tx(x), clamp(ty(y))))
            .filter(|(x, y)| x.is_finite() && y.is_finite())
            .collect();
        if pts.is_empty() {
            continue;
        }
        let style = l.colour.stroke_width(l.width);
        chart
            .draw_series(LineSeries::new(pts, style))
            .map_err(plot_error)?;
        if !l.name.is_empty() {
            legend.push((l.name.clone(), Glyph::Stroke(style)));
        }
    }
    for (name, c, (x, y)) in &plot.clipped {
        let style = c.stroke_width(2);
        chart
            .draw_series(std::iter::once(Cross::new(
                (tx(*x), clamp(ty(*y))),
                6,
                style,
            )))
            .map_err(plot_error)?;
        legend.push((format!("{name}: diverged, clipped"), Glyph::Stroke(style)));
    }
    if let Some(legend_area) = legend_area {
        draw_legend(&legend, &legend_area)?;
    }
    Ok(())
}

fn draw_bars(plot: &BarPlot, area: &DrawingArea<SVGBackend<'_>, Shift>) -> Result<()> {
    let top = plot
        .bars
        .iter()
        .map(|b| b.1 + b.2.unwrap_or(0.0))
        .filter(|v| v.is_finite())
        .fold(0.0f64, f64::max);
    let top = if top > 0.0 { top * 1.12 } else { 1.0 };
    let count = plot.bars.len().max(1) as i32;
    let labels: Vec<String> = plot.bars.iter().map(|b| b.0.clone()).collect();
    let mut chart = ChartBuilder::on(area)
        .caption(&plot.title, ("sans-serif", 18))
        .margin(8)
        .x_label_area_size(36)
        .y_label_area_size(64)
        .build_cartesian_2d((0..count).into_segmented(), 0.0..top)
        .map_err(plot_error)?;
    let x_format = |v: &SegmentValue<i32>| match v {
        SegmentValue::CenterOf(i) => labels.get(*i as usize).cloned().unwrap_or_default(),
        _ => String::new(),
    };
    let y_format = |v: &f64| sig(*v, 3);
    chart
        .configure_mesh()
        .disable_x_mesh()
        .x_labels(plot.bars.len().max(1))
        .x_label_formatter(&x_format)
        .y_label_formatter(&y_format)
        .y_desc(plot.y_label.as_str())
        .light_line_style(RGBColor(235, 235, 235))
        .draw()
        .map_err(plot_error)?;
    chart
        .draw_series(
            plot.bars
                .iter()
                .enumerate()
                .filter(|(_, b)| b.1.is_finite())
                .map(|(i, b)| {
                    let i = i as i32;
                    let mut r = Rectangle::new(
                        [
                            (SegmentValue::Exact(i), 0.0),
                            (SegmentValue::Exact(i + 1), b.1),
                        ],
                        b.3.mix(0.85).filled(),
                    );
                    r.set_margin(0, 0, 12, 12);
                    r
                }),
        )
        .map_err(plot_error)?;
    chart
        .draw_series(
            plot.bars
                .iter()
                .enumerate()
                .filter_map(|(i, b)| b.2.filter(|s| s.is_finite()).map(|s| (i as i32, b.1, s)))
                .map(|(i, v, s)| {
                    PathElement::new(
                        vec![
                            (SegmentValue::CenterOf(i), (v - s).max(0.0)),
                            (SegmentValue::CenterOf(i), v + s),
                        ],
                        BLACK.stroke_width(2),
                    )
                }),
        )
        .map_err(plot_error)?;
    Ok(())
}

/// Draws one plot as an SVG string.
pub fn render_svg(plot: &Plot) -> Result<String> {
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (WIDTH, HEIGHT)).into_drawing_area();
        root.fill(&WHITE).map_err(plot_error)?;
        match plot {
            Plot::Lines(p) => draw_lines(p, &root)?,
            Plot::Bars(p) => draw_bars(p, &root)?,
        }
        root.present().map_err(plot_error)?;
    }
    // Keep the <svg> element only (no XML prolog inside HTML).
    let start = svg.find("<svg").unwrap_or(0);
    Ok(svg[start..].to_string())
}

/// Escapes text for HTML.
pub fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            _ => out.push(c),
        }
    }
    out
}

fn opt(v: Option<f64>, digits: usize) -> String {
    v.map_or("–".into(), |v| sig(v, digits))
}

fn share(v: Option<f64>) -> String {
    v.map_or("–".into(), |v| format!("{:.1} %", 100.0 * v))
}

fn band_text(b: Option<[f64; 2]>) -> String {
    b.map_or(String::new(), |[lo, hi]| {
        format!(" [{}, {}]", sig(lo, 3), sig(hi, 3))
    })
}

/// What the verdict concluded about a consistency statistic, in a word for the table.
fn judged(c: verdict::Consistency) -> &'static str {
    match c {
        verdict::Consistency::Consistent => "consistent",
        verdict::Consistency::OverConfident => "over-confident",
        verdict::Consistency::UnderConfident => "under-confident",
        verdict::Consistency::Unknown => "–",
    }
}

/// A filter's status as the table shows it.
fn status_text(f: &FilterSummary) -> String {
    match (f.status, f.diverged_at) {
        (Status::Ok, _) => "ok".into(),
        (Status::Failed, _) => "failed".into(),
        (Status::Diverged, Some(k)) => format!("diverged at step {k}"),
        (Status::Diverged, None) => "diverged".into(),
    }
}

/// The paired comparison with the reference of `best`, as the table shows it.
fn versus_best_text(summary: &Summary, f: &FilterSummary) -> String {
    if summary.best.first() == Some(&f.label) {
        return "best".into();
    }
    let Some(v) = &f.versus_best else {
        return "–".into();
    };
    let tie = if v.tied { "tie: " } else { "" };
    let sign = if v.difference > 0.0 { "+" } else { "" };
    if v.measure == "rmse_all" {
        format!(
            "{tie}{sign}{} % [{}, {}]",
            sig(100.0 * v.difference, 2),
            sig(100.0 * v.interval[0], 2),
            sig(100.0 * v.interval[1], 2)
        )
    } else {
        format!(
            "{tie}{sign}{} [{}, {}]",
            sig(v.difference, 3),
            sig(v.interval[0], 3),
            sig(v.interval[1], 3)
        )
    }
}

/// The columns of the summary table (terminal and HTML), one row per filter.
///
/// The consistency columns show exactly what the verdict judges ([`verdict::state_consistency`],
/// [`verdict::innovation_consistency`]), so that the two cannot disagree: on one dataset the
/// shares of steps below / above the χ²(n) band against their limit (no ANEES band: one run's
/// steps are correlated, so the χ²(N·n)/N band of independent steps does not apply), over runs
/// the ANEES against χ²(M·n)/M.
pub fn table_rows(summary: &Summary) -> (Vec<String>, Vec<Vec<String>>) {
    let campaign = summary.runs.is_some();
    let smoothed = summary
        .filters
        .iter()
        .any(|f| f.smoothed_rmse_all.is_some());
    let mut header = vec!["filter".to_string(), "status".to_string()];
    if summary.truth {
        header.push("rmse_all [95 % CI]".into());
        if campaign {
            header.push("± spread".into());
        }
        if smoothed {
            header.push("smoothed".into());
        }
    }
    if summary.best_by.is_some() {
        header.push(match summary.best_by.as_deref() {
            Some("rmse_all") => "vs best (paired, 95 %)".into(),
            _ => "log-lik vs best (paired, 95 %)".into(),
        });
    }
    if summary.truth {
        if campaign {
            header.push("ANEES [95 % band]".into());
            header.push("NEES in band".into());
        } else {
            header.push("ANEES".into());
            header.push(format!(
                "NEES below / above band (limit {:.0} %)",
                100.0 * verdict::TAIL_LIMIT
            ));
        }
        header.push("state".into());
    }
    header.push("ANIS [95 % band]".into());
    header.push("NIS in band".into());
    header.push("innovations".into());
    if !campaign {
        header.push("white".into());
    }
    header.push("log-lik".into());
    header.push("per step".into());
    if campaign {
        header.push("runs ok/failed".into());
    }
    let rows = summary
        .filters
        .iter()
        .map(|f: &FilterSummary| {
            let mut row = vec![f.label.clone(), status_text(f)];
            if summary.truth {
                row.push(format!(
                    "{}{}",
                    opt(f.rmse_all, 4),
                    band_text(f.rmse_all_ci)
                ));
                if campaign {
                    row.push(opt(f.rmse_all_spread, 2));
                }
                if smoothed {
                    row.push(opt(f.smoothed_rmse_all, 4));
                }
            }
            if summary.best_by.is_some() {
                row.push(versus_best_text(summary, f));
            }
            if summary.truth {
                if campaign {
                    row.push(format!("{}{}", opt(f.anees, 3), band_text(f.anees_band)));
                    row.push(share(f.nees_in_band));
                } else {
                    row.push(opt(f.anees, 3));
                    row.push(match f.nees_tails {
                        Some([below, above]) => {
                            format!("{} / {}", share(Some(below)), share(Some(above)))
                        }
                        None => "–".into(),
                    });
                }
                row.push(judged(verdict::state_consistency(f, campaign)).into());
            }
            row.push(format!("{}{}", opt(f.anis, 3), band_text(f.anis_band)));
            row.push(share(f.nis_in_band));
            row.push(judged(verdict::innovation_consistency(f)).into());
            if !campaign {
                row.push(
                    match f.whiteness.as_ref().and_then(|w| w.white) {
                        Some(true) => "yes",
                        Some(false) => "no",
                        None => "–",
                    }
                    .into(),
                );
            }
            row.push(opt(f.log_likelihood, 6));
            row.push(duration(f.seconds_per_step));
            if campaign {
                row.push(format!(
                    "{}/{}",
                    f.runs.unwrap_or(0),
                    f.failures.unwrap_or(0)
                ));
            }
            row
        })
        .collect();
    (header, rows)
}

/// The summary table for the terminal (comfy-table).
pub fn terminal_table(summary: &Summary) -> String {
    let (header, rows) = table_rows(summary);
    let mut table = comfy_table::Table::new();
    table.load_style(comfy_table::presets::UTF8_FULL_CONDENSED);
    table.set_header(header);
    for row in rows {
        table.add_row(row);
    }
    table.to_string()
}

/// The full report page.
pub fn render_html(
    title: &str,
    summary: &Summary,
    plots: &[Plot],
    notes: &[String],
) -> Result<String> {
    let mut html = String::with_capacity(64 * 1024 + plots.len() * 128 * 1024);
    html.push_str("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">");
    html.push_str(&format!("<title>{}</title>", escape(title)));
    html.push_str(
        "<style>body{font-family:sans-serif;max-width:960px;margin:1.5em auto;color:#222}\
         table{border-collapse:collapse;font-size:0.9em}td,th{border:1px solid #ccc;\
         padding:3px 7px;text-align:right}td:first-child,th:first-child{text-align:left}\
         .failed{color:#b00}figure{margin:1.2em 0}figcaption{font-size:0.85em;color:#555}\
         .verdict{background:#f4f7fb;border-left:4px solid #0072b2;padding:0.6em 1em}\
         .verdict p{margin:0.3em 0}</style></head><body>\n",
    );
    html.push_str(&format!("<h1>{}</h1>\n", escape(title)));
    html.push_str("<h2>Verdict</h2>\n<div class=\"verdict\">");
    for line in summary.verdict.lines() {
        html.push_str(&format!("<p>{}</p>", escape(line)));
    }
    html.push_str("</div>\n<h2>Criteria used</h2>\n<ul>");
    for c in &summary.criteria {
        html.push_str(&format!("<li>{}</li>", escape(c)));
    }
    html.push_str("</ul>\n");
    if !summary.truth {
        html.push_str(
            "<p>The data carries no true state (<code>x.</code> columns), so accuracy and NEES \
             cannot be measured: the judgement rests on NIS consistency, innovation whiteness \
             and log-likelihood.</p>\n",
        );
    }
    for n in notes {
        html.push_str(&format!("<p>{}</p>\n", escape(n)));
    }
    html.push_str("<h2>Summary</h2>\n<table><thead><tr>");
    let (header, rows) = table_rows(summary);
    for h in &header {
        html.push_str(&format!("<th>{}</th>", escape(h)));
    }
    html.push_str("</tr></thead><tbody>\n");
    for (row, f) in rows.iter().zip(&summary.filters) {
        let class = if f.status == Status::Failed {
            " class=\"failed\""
        } else {
            ""
        };
        html.push_str(&format!("<tr{class}>"));
        for cell in row {
            html.push_str(&format!("<td>{}</td>", escape(cell)));
        }
        html.push_str("</tr>\n");
    }
    html.push_str("</tbody></table>\n");
    if !summary.ignored_columns.is_empty() {
        html.push_str(&format!(
            "<p>Columns of the dataset the model does not read (ignored): {}.</p>\n",
            escape(&summary.ignored_columns.join(", "))
        ));
    }
    for f in summary.filters.iter().filter(|f| f.error.is_some()) {
        html.push_str(&format!(
            "<p class=\"failed\">{}: {}</p>\n",
            escape(&f.label),
            escape(f.error.as_deref().unwrap_or(""))
        ));
    }
    html.push_str("<h2>Plots</h2>\n");
    for plot in plots {
        let svg = render_svg(plot)?;
        html.push_str(&format!(
            "<figure class=\"plot\" data-plot=\"{}\">{svg}<figcaption>{}</figcaption></figure>\n",
            escape(plot.id()),
            escape(plot.caption())
        ));
    }
    if let Some(settings) = &summary.settings {
        html.push_str(&settings_section(settings));
    }
    html.push_str(
        "<script>(function(){var f=document.querySelectorAll('figure.plot'),ok=0;\
         f.forEach(function(e){var s=e.querySelector('svg'),r=false;if(s){var b=s.getBBox();\
         var n=s.querySelectorAll('polyline,path,polygon,rect,circle,line').length;\
         r=b.width>0&&b.height>0&&n>0;}e.setAttribute('data-rendered',r?'yes':'no');if(r)ok++;});\
         document.body.setAttribute('data-plots',String(f.length));\
         document.body.setAttribute('data-rendered',String(ok));})();</script>\n",
    );
    html.push_str("</body></html>\n");
    Ok(html)
}

/// The report's "Settings" section: the rerun command and the `settings` object as recorded in
/// `summary.json`.
fn settings_section(settings: &Settings) -> String {
    let json = serde_json::to_string_pretty(settings).unwrap_or_default();
    format!(
        "<h2 id=\"settings\">Settings</h2>\n<p>Sightline {} ran {} on model {} ({}). To rerun \
         it:</p>\n<pre>{}</pre>\n<details><summary>settings as recorded in summary.json</summary>\
         <pre>{}</pre></details>\n",
        escape(&settings.sightline_version),
        escape(&settings.command),
        escape(&settings.model),
        escape(&settings.model_description),
        escape(&settings.rerun_line()),
        escape(&json)
    )
}

fn time_band(series: &Series, lo: f64, hi: f64) -> Vec<(f64, f64, f64)> {
    match (series.t.first(), series.t.last()) {
        (Some(&a), Some(&b)) => vec![(a, lo, hi), (b, lo, hi)],
        _ => Vec::new(),
    }
}

/// Time spans without any measurement component longer than twice the median interval
/// between measured rows (an outage, not the regular pace of a slow sensor); a missing start
/// or end is shaded from the first or to the last row.
pub fn measurement_gaps(series: &Series) -> Vec<(f64, f64)> {
    let m = series.measurements;
    let rows = series.len();
    if m == 0 || rows < 2 {
        return Vec::new();
    }
    let measured: Vec<f64> = (0..rows)
        .filter(|&r| series.y[r * m..(r + 1) * m].iter().any(|v| !v.is_nan()))
        .map(|r| series.t[r])
        .collect();
    let (first, last) = (series.t[0], series.t[rows - 1]);
    let Some((&m0, &m1)) = measured.first().zip(measured.last()) else {
        return vec![(first, last)];
    };
    let mut intervals: Vec<f64> = measured.windows(2).map(|w| w[1] - w[0]).collect();
    intervals.sort_by(f64::total_cmp);
    let median = intervals.get(intervals.len() / 2).copied().unwrap_or(0.0);
    let row_step = (last - first) / (rows - 1) as f64;
    let limit = 2.0 * median.max(row_step);
    let mut gaps = Vec::new();
    if m0 > first + limit / 2.0 {
        gaps.push((first, m0));
    }
    gaps.extend(
        measured
            .windows(2)
            .filter(|w| w[1] - w[0] > limit)
            .map(|w| (w[0], w[1])),
    );
    if last > m1 + limit / 2.0 {
        gaps.push((m1, last));
    }
    gaps
}

/// Sets the frame of a plot from everything but the curves of the `diverged` filters (lines
/// with those names; their bands are the unnamed areas in the same order) and cuts each such
/// curve where it first leaves the frame, with a marker there.
fn clip_diverged(plot: &mut LinePlot, diverged: &[String]) {
    if diverged.is_empty() {
        return;
    }
    let is_diverged = |name: &str| diverged.iter().any(|d| d == name);
    // Bands are pushed one per filter line, in the same order, before the truth.
    let filter_lines: Vec<bool> = plot
        .lines
        .iter()
        .filter(|l| l.name != "truth")
        .map(|l| is_diverged(&l.name))
        .collect();
    let unnamed: Vec<usize> = (0..plot.areas.len())
        .filter(|&a| plot.areas[a].name.is_empty())
        .collect();
    let mut values: Vec<f64> = Vec::new();
    for l in plot.lines.iter().filter(|l| !is_diverged(&l.name)) {
        values.extend(l.points.iter().map(|p| p.1));
    }
    for (k, &a) in unnamed.iter().enumerate() {
        if !filter_lines.get(k).copied().unwrap_or(false) {
            values.extend(plot.areas[a].points.iter().flat_map(|p| [p.1, p.2]));
        }
    }
    for a in plot.areas.iter().filter(|a| !a.name.is_empty()) {
        values.extend(a.points.iter().flat_map(|p| [p.1, p.2]));
    }
    for d in &plot.dots {
        values.extend(d.2.iter().map(|p| p.1));
    }
    let (lo, hi) = finite_range(values.into_iter());
    plot.y_range = Some((lo, hi));
    let names: Vec<(String, RGBColor)> = plot
        .lines
        .iter()
        .filter(|l| l.name != "truth")
        .map(|l| (l.name.clone(), l.colour))
        .collect();
    for (k, (name, colour)) in names.iter().enumerate() {
        if !is_diverged(name) {
            continue;
        }
        let outside = |y: f64| y.is_finite() && !(lo..=hi).contains(&y);
        let line = plot.lines.iter_mut().find(|l| &l.name == name);
        let line_cut = line
            .as_ref()
            .and_then(|l| l.points.iter().position(|p| outside(p.1)));
        let band = unnamed.get(k).map(|&a| &mut plot.areas[a]);
        let band_cut = band
            .as_ref()
            .and_then(|b| b.points.iter().position(|p| outside(p.1) || outside(p.2)));
        // The curve and its band stop where the first of them leaves the frame.
        let cut = match (line_cut, band_cut) {
            (Some(a), Some(b)) => a.min(b),
            (Some(a), None) | (None, Some(a)) => a,
            (None, None) => continue,
        };
        let mut marker = None;
        if let Some(l) = line {
            marker = l.points.get(cut).copied();
            l.points.truncate(cut);
        }
        if let Some(b) = band {
            if band_cut == Some(cut) {
                marker = b.points.get(cut).map(|p| (p.0, p.2));
            }
            b.points.truncate(cut);
        }
        if let Some((x, y)) = marker {
            plot.clipped
                .push((name.clone(), *colour, (x, y.clamp(lo, hi))));
        }
    }
}

/// The estimation error (estimate − truth) of state `i` with each filter's ±2σ band, one panel
/// per filter on shared axes (small multiples), diverged filters clipped.
fn error_panels(
    summary: &Summary,
    series: &Series,
    i: usize,
    state: &sightline_core::Variable,
    clock: &Clock,
    gaps: &[(f64, f64)],
    diverged: &[String],
) -> Vec<Plot> {
    let (n, nf) = (series.states, series.filters);
    let rows = series.len();
    let at = |r: usize, f: usize| (r * nf + f) * n + i;
    let error = |r: usize, f: usize| series.mean[at(r, f)] - series.truth[r * n + i];
    let shown: Vec<usize> = (0..nf)
        .filter(|&f| summary.filters.get(f).is_some_and(|s| s.status.finished()))
        .collect();
    // Shared frame from the filters that did not diverge.
    let frame_values = shown
        .iter()
        .filter(|&&f| !diverged.contains(&summary.filters[f].label))
        .flat_map(|&f| {
            (0..rows).flat_map(move |r| {
                let (e, sd) = (error(r, f), series.sd[at(r, f)]);
                [e, -2.0 * sd, 2.0 * sd]
            })
        });
    let frame = finite_range(frame_values);
    shown
        .iter()
        .map(|&f| {
            let label = summary.filters[f].label.clone();
            let mut plot = LinePlot {
                id: format!("error-{}-{f}", state.name),
                title: format!("{} error: {label}", state.name),
                x_label: clock.axis_label(),
                y_label: format!("estimate − truth [{}]", state.unit),
                areas: vec![Area {
                    name: "±2σ".into(),
                    colour: colour(f),
                    opacity: 0.2,
                    points: (0..rows)
                        .map(|r| {
                            let sd = series.sd[at(r, f)];
                            (series.t[r], -2.0 * sd, 2.0 * sd)
                        })
                        .collect(),
                }],
                lines: vec![Line {
                    name: label.clone(),
                    colour: colour(f),
                    points: (0..rows).map(|r| (series.t[r], error(r, f))).collect(),
                    width: 1,
                }],
                y_range: Some(frame),
                gaps: gaps.to_vec(),
                clock: Some(clock.clone()),
                caption: format!(
                    "Estimation error of {} by {label} with its ±2σ band; every panel of this                      state shares its axes. About 95 % of the error should lie inside the band                      for a consistent filter.",
                    state.name
                ),
                ..LinePlot::default()
            };
            if diverged.contains(&label) {
                let (lo, hi) = frame;
                if let Some(cut) = plot.lines[0]
                    .points
                    .iter()
                    .position(|p| p.1.is_finite() && !(lo..=hi).contains(&p.1))
                {
                    let (x, y) = plot.lines[0].points[cut];
                    plot.lines[0].points.truncate(cut);
                    plot.clipped.push((label, colour(f), (x, y.clamp(lo, hi))));
                }
            }
            Plot::Lines(plot)
        })
        .collect()
}

/// Which of the (cost, error) points lie on the Pareto front: no other point is at most as
/// costly and at most as wrong, and strictly better in one of the two.
///
/// ```
/// use sightline_eval::report::pareto_front;
/// assert_eq!(pareto_front(&[(1.0, 2.0), (2.0, 1.0), (2.0, 2.0)]), [true, true, false]);
/// ```
pub fn pareto_front(points: &[(f64, f64)]) -> Vec<bool> {
    points
        .iter()
        .map(|&(c, e)| {
            !points
                .iter()
                .any(|&(c2, e2)| c2 <= c && e2 <= e && (c2 < c || e2 < e))
        })
        .collect()
}

/// Accuracy against cost per step, both on log axes, with each filter's 95 % interval of
/// `rmse_all` and the Pareto front (what no other filter beats on both): e.g. how many
/// particles are enough, from a sweep `pf:particles=500|2000|8000`.
pub fn accuracy_cost_plot(summary: &Summary) -> Option<Plot> {
    let ranked: Vec<(usize, &FilterSummary)> = summary
        .filters
        .iter()
        .enumerate()
        .filter(|(_, f)| f.status == Status::Ok && f.seconds_per_step > 0.0)
        .filter(|(_, f)| f.rmse_all.is_some_and(|r| r > 0.0))
        .collect();
    if !summary.truth || ranked.len() < 2 {
        return None;
    }
    let points: Vec<(f64, f64)> = ranked
        .iter()
        .map(|(_, f)| (f.seconds_per_step, f.rmse_all.unwrap_or(f64::NAN)))
        .collect();
    let front = pareto_front(&points);
    let mut on_front: Vec<(f64, f64)> = points
        .iter()
        .zip(&front)
        .filter(|(_, on)| **on)
        .map(|(p, _)| *p)
        .collect();
    on_front.sort_by(|a, b| a.0.total_cmp(&b.0));
    let mut lines = vec![Line {
        name: "Pareto front".into(),
        colour: BLACK,
        points: on_front,
        width: 1,
    }];
    let mut dots = Vec::new();
    for (k, (i, f)) in ranked.iter().enumerate() {
        let (c, r) = points[k];
        dots.push((f.label.clone(), colour(*i), vec![(c, r)]));
        if let Some([lo, hi]) = f.rmse_all_ci {
            lines.push(Line {
                name: String::new(),
                colour: colour(*i),
                points: vec![(c, lo.max(r * 1e-3)), (c, hi)],
                width: 2,
            });
        }
    }
    Some(Plot::Lines(LinePlot {
        id: "accuracy-cost".into(),
        title: "accuracy against cost".into(),
        x_label: "seconds per step (log scale)".into(),
        y_label: "rmse_all (log scale)".into(),
        lines,
        dots,
        log_x: true,
        log_y: true,
        caption: "Each filter's rmse_all with its 95 % interval against its wall-clock cost per                   step; the line joins the Pareto front, the filters no other filter beats on                   both accuracy and cost. Costs are measurements of this run on this machine."
            .into(),
        ..LinePlot::default()
    }))
}

/// The plots of a single-dataset comparison.
pub fn compare_plots(
    summary: &Summary,
    series: &Series,
    states: &[sightline_core::Variable],
    measurements: &[sightline_core::Variable],
    clock: &Clock,
) -> Vec<Plot> {
    let time_label = clock.axis_label();
    let mut plots = Vec::new();
    let (n, m, nf) = (series.states, series.measurements, series.filters);
    let rows = series.len();
    let labels: Vec<&str> = summary.filters.iter().map(|f| f.label.as_str()).collect();
    let mut shown_measurement = vec![false; m];
    let gaps = measurement_gaps(series);
    let diverged: Vec<String> = summary
        .filters
        .iter()
        .filter(|f| f.status == Status::Diverged)
        .map(|f| f.label.clone())
        .collect();
    for (i, state) in states.iter().enumerate().take(n) {
        let mut plot = LinePlot {
            id: format!("state-{}", state.name),
            title: format!("{} [{}]", state.name, state.unit),
            x_label: time_label.clone(),
            y_label: format!("{} [{}]", state.name, state.unit),
            areas: Vec::new(),
            lines: Vec::new(),
            dots: Vec::new(),
            log_y: false,
            log_x: false,
            y_range: None,
            clipped: Vec::new(),
            gaps: Vec::new(),
            clock: Some(clock.clone()),
            caption: format!(
                "State {}: each filter's posterior mean with its ±2σ band{}.",
                state.name,
                if summary.truth { ", and the truth" } else { "" }
            ),
        };
        if let Some(j) = measurements
            .iter()
            .position(|v| v.name == state.name && v.unit == state.unit)
        {
            shown_measurement[j] = true;
            plot.dots.push((
                format!("y.{}", measurements[j].name),
                RGBColor(90, 90, 90),
                (0..rows)
                    .map(|r| (series.t[r], series.y[r * m + j]))
                    .collect(),
            ));
            plot.caption
                .push_str(" Dots: the measurement of the same quantity.");
        }
        for f in 0..nf {
            let at = |r: usize| (r * nf + f) * n + i;
            plot.areas.push(Area {
                name: String::new(),
                colour: colour(f),
                opacity: 0.15,
                points: (0..rows)
                    .map(|r| {
                        let (mu, sd) = (series.mean[at(r)], series.sd[at(r)]);
                        (series.t[r], mu - 2.0 * sd, mu + 2.0 * sd)
                    })
                    .collect(),
            });
            plot.lines.push(Line {
                name: labels.get(f).copied().unwrap_or("").to_string(),
                colour: colour(f),
                points: (0..rows)
                    .map(|r| (series.t[r], series.mean[at(r)]))
                    .collect(),
                width: 1,
            });
        }
        if summary.truth {
            plot.lines.push(Line {
                name: "truth".into(),
                colour: BLACK,
                points: (0..rows)
                    .map(|r| (series.t[r], series.truth[r * n + i]))
                    .collect(),
                width: 2,
            });
        }
        plot.gaps = gaps.clone();
        clip_diverged(&mut plot, &diverged);
        plots.push(Plot::Lines(plot));
        if summary.truth {
            plots.extend(error_panels(
                summary, series, i, state, clock, &gaps, &diverged,
            ));
        }
    }
    if let Some(p) = accuracy_cost_plot(summary) {
        plots.push(p);
    }
    if series.smoothed() {
        plots.extend(smoothed_plots(summary, series, states, clock));
    }
    for (j, meas) in measurements.iter().enumerate().take(m) {
        if shown_measurement[j] {
            continue;
        }
        plots.push(Plot::Lines(LinePlot {
            id: format!("measurement-{}", meas.name),
            title: format!("measurement {} [{}]", meas.name, meas.unit),
            x_label: time_label.clone(),
            y_label: format!("{} [{}]", meas.name, meas.unit),
            areas: Vec::new(),
            lines: Vec::new(),
            dots: vec![(
                format!("y.{}", meas.name),
                RGBColor(90, 90, 90),
                (0..rows)
                    .map(|r| (series.t[r], series.y[r * m + j]))
                    .collect(),
            )],
            log_y: false,
            log_x: false,
            y_range: None,
            clipped: Vec::new(),
            gaps: gaps.clone(),
            clock: Some(clock.clone()),
            caption: format!(
                "Measurement {} as recorded; gaps are missing values.",
                meas.name
            ),
        }));
    }
    if summary.truth {
        if let Some(b) = chi2::band(n) {
            plots.push(Plot::Lines(LinePlot {
                id: "nees".into(),
                title: "NEES over time".into(),
                x_label: time_label.clone(),
                y_label: "NEES (log scale)".into(),
                areas: vec![Area {
                    name: format!("95 % band of χ²({n})"),
                    colour: RGBColor(0, 158, 115),
                    opacity: 0.18,
                    points: time_band(series, b.lo, b.hi),
                }],
                lines: (0..nf)
                    .map(|f| Line {
                        name: labels.get(f).copied().unwrap_or("").to_string(),
                        colour: colour(f),
                        points: (0..rows)
                            .map(|r| (series.t[r], series.nees[r * nf + f]))
                            .collect(),
                        width: 1,
                    })
                    .collect(),
                dots: Vec::new(),
                log_y: true,
                log_x: false,
                y_range: None,
                clipped: Vec::new(),
                gaps: gaps.clone(),
                clock: Some(clock.clone()),
                caption: format!(
                    "Normalised estimation error squared eᵀP⁻¹e of each posterior; a consistent \
                     filter stays inside the χ²({n}) band about 95 % of the time \
                     (Bar-Shalom et al. 2001, §5.4)."
                ),
            }));
        }
    }
    if let Some(b) = chi2::band(m) {
        plots.push(Plot::Lines(LinePlot {
            id: "nis".into(),
            title: "NIS over time".into(),
            x_label: time_label.clone(),
            y_label: "NIS (log scale)".into(),
            areas: vec![Area {
                name: format!("95 % band of χ²({m})"),
                colour: RGBColor(0, 158, 115),
                opacity: 0.18,
                points: time_band(series, b.lo, b.hi),
            }],
            lines: (0..nf)
                .map(|f| Line {
                    name: labels.get(f).copied().unwrap_or("").to_string(),
                    colour: colour(f),
                    points: (0..rows)
                        .map(|r| (series.t[r], series.nis[r * nf + f]))
                        .collect(),
                    width: 1,
                })
                .collect(),
            dots: Vec::new(),
            log_y: true,
            log_x: false,
            y_range: None,
            clipped: Vec::new(),
            gaps: gaps.clone(),
            clock: Some(clock.clone()),
            caption: format!(
                "Normalised innovation squared νᵀS⁻¹ν of each update; the band is that of all {m} \
                 components present (fewer components present lower the expected value)."
            ),
        }));
    }
    for j in 0..m {
        let mut lines = Vec::new();
        let mut half = None;
        for (f, fs) in summary.filters.iter().enumerate() {
            let Some(w) = &fs.whiteness else { continue };
            let Some(rho) = w.autocorrelation.get(j) else {
                continue;
            };
            half = half.or(w.band.get(j).copied().flatten());
            lines.push(Line {
                name: fs.label.clone(),
                colour: colour(f),
                points: rho
                    .iter()
                    .enumerate()
                    .map(|(lag, r)| ((lag + 1) as f64, r.unwrap_or(f64::NAN)))
                    .collect(),
                width: 2,
            });
        }
        if lines.is_empty() {
            continue;
        }
        let lags = lines.first().map_or(1, |l| l.points.len()) as f64;
        let name = measurements
            .get(j)
            .map_or(format!("{j}"), |v| v.name.clone());
        plots.push(Plot::Lines(LinePlot {
            id: format!("whiteness-{name}"),
            title: format!("innovation autocorrelation, {name}"),
            x_label: "lag [steps]".into(),
            y_label: "normalised autocorrelation".into(),
            areas: half
                .map(|h| Area {
                    name: "95 % band ±1.96/√N".into(),
                    colour: RGBColor(0, 158, 115),
                    opacity: 0.18,
                    points: vec![(1.0, -h, h), (lags, -h, h)],
                })
                .into_iter()
                .collect(),
            lines,
            dots: Vec::new(),
            log_y: false,
            log_x: false,
            y_range: None,
            clipped: Vec::new(),
            gaps: Vec::new(),
            clock: None,
            caption: format!(
                "Normalised sample autocorrelation of the standardised innovation of {name}; a \
                 white sequence stays inside ±1.96/√N at about 95 % of the lags (Mehra, IEEE TAC \
                 15(2), 1970)."
            ),
        }));
    }
    plots.extend(bar_plots(summary));
    plots
}

/// One plot per state of every smoothed track (`compare --smooth`): smoothed mean with its ±2σ
/// band per filter that has a smoother, and the truth.
fn smoothed_plots(
    summary: &Summary,
    series: &Series,
    states: &[sightline_core::Variable],
    clock: &Clock,
) -> Vec<Plot> {
    let time_label = clock.axis_label();
    let (n, nf) = (series.states, series.filters);
    let rows = series.len();
    let mut plots = Vec::new();
    for (i, state) in states.iter().enumerate().take(n) {
        let at = |r: usize, f: usize| (r * nf + f) * n + i;
        let mut areas = Vec::new();
        let mut lines = Vec::new();
        for f in 0..nf {
            if (0..rows).all(|r| series.smoothed_mean[at(r, f)].is_nan()) {
                continue;
            }
            let fs = summary.filters.get(f);
            let name = fs.map_or(String::new(), |fs| match &fs.smoother {
                Some(kind) => format!("{} ({kind})", fs.label),
                None => fs.label.clone(),
            });
            areas.push(Area {
                name: String::new(),
                colour: colour(f),
                opacity: 0.15,
                points: (0..rows)
                    .map(|r| {
                        let (mu, sd) =
                            (series.smoothed_mean[at(r, f)], series.smoothed_sd[at(r, f)]);
                        (series.t[r], mu - 2.0 * sd, mu + 2.0 * sd)
                    })
                    .collect(),
            });
            lines.push(Line {
                name,
                colour: colour(f),
                points: (0..rows)
                    .map(|r| (series.t[r], series.smoothed_mean[at(r, f)]))
                    .collect(),
                width: 1,
            });
        }
        if lines.is_empty() {
            continue;
        }
        if summary.truth {
            lines.push(Line {
                name: "truth".into(),
                colour: BLACK,
                points: (0..rows)
                    .map(|r| (series.t[r], series.truth[r * n + i]))
                    .collect(),
                width: 2,
            });
        }
        plots.push(Plot::Lines(LinePlot {
            id: format!("smoothed-{}", state.name),
            title: format!("{} smoothed [{}]", state.name, state.unit),
            x_label: time_label.clone(),
            y_label: format!("{} [{}]", state.name, state.unit),
            areas,
            lines,
            dots: Vec::new(),
            clock: Some(clock.clone()),
            log_y: false,
            log_x: false,
            y_range: None,
            clipped: Vec::new(),
            gaps: measurement_gaps(series),
            caption: format!(
                "State {}: each smoother's estimate from all the measurements (--smooth), with \
                 its ±2σ band{}. Rauch–Tung–Striebel for the Gaussian filters (sigma-point and \
                 ensemble forms), backward simulation for the particle filter.",
                state.name,
                if summary.truth { ", and the truth" } else { "" }
            ),
        }));
    }
    plots
}

/// RMSE (with Monte Carlo spread) and cost bars.
pub fn bar_plots(summary: &Summary) -> Vec<Plot> {
    let mut plots = Vec::new();
    let ok: Vec<(usize, &FilterSummary)> = summary
        .filters
        .iter()
        .enumerate()
        .filter(|(_, f)| f.status == Status::Ok)
        .collect();
    if summary.truth && ok.iter().any(|(_, f)| f.rmse_all.is_some()) {
        plots.push(Plot::Bars(BarPlot {
            id: "rmse".into(),
            title: "accuracy: rmse_all".into(),
            y_label: "rmse_all".into(),
            bars: ok
                .iter()
                .map(|(i, f)| {
                    (
                        f.label.clone(),
                        f.rmse_all.unwrap_or(f64::NAN),
                        f.rmse_all_spread,
                        colour(*i),
                    )
                })
                .collect(),
            caption: if summary.runs.is_some() {
                "Root mean squared error over runs, steps and states; whiskers: spread (standard \
                 deviation) of the per-run values."
                    .into()
            } else {
                "Root mean squared error over steps and states.".into()
            },
        }));
    }
    if summary.truth && ok.iter().any(|(_, f)| f.smoothed_rmse_all.is_some()) {
        plots.push(Plot::Bars(BarPlot {
            id: "smoothed-rmse".into(),
            title: "accuracy: filtered and smoothed rmse_all".into(),
            y_label: "rmse_all".into(),
            bars: ok
                .iter()
                .filter_map(|(i, f)| Some((i, f, f.smoothed_rmse_all?)))
                .flat_map(|(i, f, smoothed)| {
                    [
                        (
                            f.label.clone(),
                            f.rmse_all.unwrap_or(f64::NAN),
                            None,
                            colour(*i),
                        ),
                        (format!("{} smoothed", f.label), smoothed, None, colour(*i)),
                    ]
                })
                .collect(),
            caption: "Root mean squared error of each filter and of its smoother (--smooth) over \
                      steps and states: what the measurements after each step add."
                .into(),
        }));
    }
    plots.push(Plot::Bars(BarPlot {
        id: "cost".into(),
        title: "cost: microseconds per step".into(),
        y_label: "µs per step".into(),
        bars: ok
            .iter()
            .map(|(i, f)| (f.label.clone(), f.seconds_per_step * 1e6, None, colour(*i)))
            .collect(),
        caption: "Wall-clock time of predict + update per step on this machine.".into(),
    }));
    plots
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn renders_svg_with_drawn_elements() {
        let plot = Plot::Lines(LinePlot {
            id: "x".into(),
            title: "t".into(),
            x_label: "x".into(),
            y_label: "y".into(),
            areas: vec![Area {
                name: "band".into(),
                colour: RED,
                opacity: 0.2,
                points: vec![(0.0, 1.0, 2.0), (1.0, 1.0, 2.0)],
            }],
            lines: vec![Line {
                name: "a<b".into(),
                colour: BLUE,
                points: vec![(0.0, 1.0), (0.5, f64::NAN), (1.0, 3.0)],
                width: 1,
            }],
            dots: Vec::new(),
            log_y: true,
            log_x: false,
            y_range: None,
            clipped: Vec::new(),
            gaps: Vec::new(),
            clock: None,
            caption: String::new(),
        });
        let svg = render_svg(&plot).unwrap();
        assert!(svg.starts_with("<svg"), "{}", &svg[..40]);
        assert!(svg.contains("<polyline") || svg.contains("<path"));
        assert!(svg.contains("a&lt;b"), "legend text is escaped");
        // The legend sits in its own column right of the axes (x ≥ WIDTH − LEGEND_WIDTH).
        let texts: Vec<(f64, &str)> = svg
            .split("<text ")
            .skip(1)
            .filter_map(|t| {
                let x = t.split("x=\"").nth(1)?.split('"').next()?.parse().ok()?;
                let body = t.split_once('>')?.1.split("</text>").next()?.trim();
                Some((x, body))
            })
            .collect();
        for label in ["a&lt;b", "band"] {
            let &(x, _) = texts
                .iter()
                .find(|(_, body)| *body == label)
                .unwrap_or_else(|| panic!("{label} drawn: {texts:?}"));
            assert!(x >= f64::from(WIDTH - LEGEND_WIDTH), "{label} at x = {x}");
        }
        // ... and the data (the band, the one <polygon>) stays left of it.
        let data_x = svg
            .split("<polygon")
            .skip(1)
            .filter_map(|t| t.split("points=\"").nth(1)?.split('"').next())
            .flat_map(|points| points.split_whitespace())
            .filter_map(|p| p.split(',').next()?.parse::<f64>().ok())
            .fold(f64::NEG_INFINITY, f64::max);
        assert!(
            data_x.is_finite() && data_x < f64::from(WIDTH - LEGEND_WIDTH),
            "the band reaches x = {data_x}"
        );
        let bars = Plot::Bars(BarPlot {
            id: "b".into(),
            title: "b".into(),
            y_label: "v".into(),
            bars: vec![
                ("kf".into(), 1.0, Some(0.1), RED),
                ("ukf".into(), 2.0, None, BLUE),
            ],
            caption: String::new(),
        });
        let svg = render_svg(&bars).unwrap();
        assert!(svg.contains("<rect"));
        assert!(svg.contains("ukf"));
    }
}
