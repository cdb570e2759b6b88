//! `sightline montecarlo`: a campaign over simulated datasets — `DIR/summary.json`,
//! `DIR/partial.json` (the exact totals `merge` combines) and `DIR/report.html`.
//!
//! The library calls are [`crate::campaign::run_campaign`] and [`crate::campaign::summarise`];
//! [`write_campaign`] writes a campaign's outputs. A campaign stopped early (Ctrl-C or a
//! failed simulation) keeps its finished runs in `DIR.checkpoint/`; the same command resumes
//! from it ([`crate::checkpoint`]).

use std::path::{Path, PathBuf};

use crate::campaign::{self, CampaignSpec, Shard, Totals};
use crate::checkpoint::Checkpoint;
use crate::cli::{PlantArgs, configure};
use crate::error::{Error, Result};
use crate::output::OutputDir;
use crate::plant::AnyPlant;
use crate::report::{self, Area, Line, LinePlot, Plot, colour};
use crate::runner;
use crate::settings::Settings;
use crate::summary::Summary;

/// Arguments of `montecarlo`.
#[derive(Debug, Clone)]
pub struct CampaignArgs {
    /// Plant and overrides.
    pub plant: PlantArgs,
    /// Runs.
    pub runs: usize,
    /// Steps per run.
    pub steps: usize,
    /// Filter specs.
    pub filters: Vec<String>,
    /// Seed.
    pub seed: u64,
    /// Shard K/N.
    pub shard: Option<String>,
    /// Keep a measurement every K rows.
    pub every: usize,
    /// Drop each measurement component with this probability.
    pub dropout: f64,
    /// Output directory.
    pub output: PathBuf,
}

/// The plots of a campaign: M-run average NEES and NIS per step with their bands, RMSE with
/// spread, cost.
pub fn campaign_plots(totals: &Totals, summary: &Summary) -> Vec<Plot> {
    let mut plots = Vec::new();
    let n = totals.states.len();
    let m = totals.measurements;
    let steps = totals.campaign.steps as f64;
    let nees_band = summary.filters.iter().find_map(|f| f.anees_band);
    let mut nees = LinePlot {
        id: "nees".into(),
        title: format!("average NEES over {} runs", totals.runs_covered()),
        x_label: "step".into(),
        y_label: "M-run average NEES (log scale)".into(),
        areas: nees_band
            .map(|[lo, hi]| Area {
                name: format!("95 % band χ²(M·{n})/M"),
                colour: report::colour(2),
                opacity: 0.18,
                points: vec![(0.0, lo, hi), (steps - 1.0, lo, hi)],
            })
            .into_iter()
            .collect(),
        lines: Vec::new(),
        dots: Vec::new(),
        log_y: true,
        clock: None,
        caption: "Average over the runs of each step's NEES; a consistent filter keeps about 95 % \
                  of the steps inside the band (Bar-Shalom et al. 2001, §5.4)."
            .into(),
    };
    let anis_band = summary.filters.iter().find_map(|f| f.anis_band);
    let mut nis = LinePlot {
        id: "nis".into(),
        title: format!("average NIS over {} runs", totals.runs_covered()),
        x_label: "step".into(),
        y_label: "M-run average NIS (log scale)".into(),
        areas: anis_band
            .map(|[lo, hi]| Area {
                name: format!("95 % band χ²(M·{m})/M"),
                colour: report::colour(2),
                opacity: 0.18,
                points: vec![(0.0, lo, hi), (steps - 1.0, lo, hi)],
            })
            .into_iter()
            .collect(),
        lines: Vec::new(),
        dots: Vec::new(),
        log_y: true,
        clock: None,
        caption: "Average over the runs of each step's NIS against the band of an average of \
                  M χ²(m) values."
            .into(),
    };
    for (i, t) in totals.filters.iter().enumerate() {
        if t.ok_runs == 0 {
            continue;
        }
        let decimate = |v: Vec<f64>| -> Vec<(f64, f64)> {
            let stride = v.len().div_ceil(2000).max(1);
            v.into_iter()
                .enumerate()
                .step_by(stride)
                .map(|(k, x)| (k as f64, x))
                .collect()
        };
        nees.lines.push(Line {
            name: t.label.clone(),
            colour: colour(i),
            points: decimate(campaign::average_nees(t)),
            width: 1,
        });
        nis.lines.push(Line {
            name: t.label.clone(),
            colour: colour(i),
            points: decimate(campaign::average_nis(t)),
            width: 1,
        });
    }
    plots.push(Plot::Lines(nees));
    plots.push(Plot::Lines(nis));
    plots.extend(report::bar_plots(summary));
    plots
}

fn write_json(dir: &OutputDir, name: &str, text: &str) -> Result<()> {
    dir.write(name, |w| {
        w.write_all(text.as_bytes())
            .and_then(|()| w.write_all(b"\n"))
            .map_err(|source| Error::Write {
                path: PathBuf::from(name),
                source,
            })
    })
}

/// Writes `summary.json`, `partial.json` and `report.html` of `totals` into `output`
/// (atomically) and returns the summary and the directory.
pub fn write_campaign(totals: &Totals, output: &Path) -> Result<(Summary, PathBuf)> {
    let summary = campaign::summarise(totals);
    let dir = OutputDir::new(output)?;
    write_json(&dir, "summary.json", &summary.to_json())?;
    let partial = serde_json::to_string(totals)
        .map_err(|e| Error::Run(format!("encoding partial.json: {e}")))?;
    write_json(&dir, "partial.json", &partial)?;
    let mut notes = Vec::new();
    if !totals.complete() {
        notes.push(format!(
            "This output covers runs {} of a {}-run campaign; merge every shard with \
             `sightline merge DIR... -o DIR` for the campaign result.",
            totals
                .covered
                .iter()
                .map(|[a, b]| format!("{a}..{b}"))
                .collect::<Vec<_>>()
                .join(", "),
            totals.campaign.runs
        ));
    }
    let (every, dropout) = (totals.campaign.every, totals.campaign.dropout);
    let sparse = if every == 1 && dropout == 0.0 {
        String::new()
    } else {
        format!(" --every {every} --dropout {dropout}")
    };
    notes.push(format!(
        "Run i uses seed derive_seed({}, [i]); `sightline simulate {} --steps {}{sparse} --seed \
         <that seed>` and `sightline compare ... --seed <that seed>` reproduce it alone.",
        totals.campaign.seed, totals.campaign.model, totals.campaign.steps
    ));
    let title = format!(
        "Sightline Monte Carlo: {} filters on {}, {} runs × {} steps",
        totals.filters.len(),
        totals.campaign.model,
        totals.runs_covered(),
        totals.campaign.steps
    );
    let html = report::render_html(&title, &summary, &campaign_plots(totals, &summary), &notes)?;
    dir.write("report.html", |w| {
        w.write_all(html.as_bytes()).map_err(|source| Error::Write {
            path: PathBuf::from("report.html"),
            source,
        })
    })?;
    let target = dir.commit()?;
    Ok((summary, target))
}

/// Prints a campaign's table and verdict; returns an error (exit code 1) if any run failed.
pub fn finish(summary: &Summary, dir: &Path) -> Result<()> {
    println!("{}", report::terminal_table(summary));
    println!();
    println!("{}", summary.verdict);
    println!();
    println!("report: {}", dir.join("report.html").display());
    let failed: u64 = summary.filters.iter().filter_map(|f| f.failures).sum();
    if failed > 0 {
        return Err(Error::Run(format!(
            "{failed} filter runs failed; the results of the others and the report were written"
        )));
    }
    Ok(())
}

/// Runs `montecarlo`.
pub fn run(plants: &[Box<dyn AnyPlant>], args: &CampaignArgs) -> Result<()> {
    let plant = configure(plants, &args.plant)?;
    let (specs, skipped) = runner::choose_specs(plant.as_ref(), &args.filters, args.seed)?;
    if let Some(note) = &skipped {
        eprintln!("note: {note}");
    }
    let shard = args.shard.as_deref().map(Shard::parse).transpose()?;
    let spec = CampaignSpec {
        model: plant.name().to_string(),
        set: args.plant.set.clone(),
        runs: args.runs as u64,
        steps: args.steps as u64,
        seed: args.seed,
        filters: specs.iter().map(|s| s.label.clone()).collect(),
        every: args.every,
        dropout: args.dropout,
    };
    let settings = Settings {
        filters: spec.filters.clone(),
        runs: Some(spec.runs),
        steps: Some(spec.steps),
        every: Some(spec.every),
        dropout: Some(spec.dropout),
        shard: shard.map(|s| format!("{}/{}", s.index, s.count)),
        ..Settings::new("montecarlo", plant.as_ref(), &args.plant.set, args.seed)
    };
    let range = match shard {
        Some(s) => s.range(spec.runs),
        None => 0..spec.runs,
    };
    let mut fresh = campaign::empty_totals(plant.as_ref(), &specs, &spec)?;
    fresh.settings = Some(settings);
    let mut checkpoint = Checkpoint::beside(&args.output);
    let mut totals = match checkpoint.load(&fresh, &range)? {
        Some(saved) => {
            eprintln!(
                "resuming from {}: {} of {} runs already done",
                checkpoint.dir().display(),
                saved.runs_covered(),
                range.end - range.start
            );
            saved
        }
        None => fresh,
    };
    let todo = campaign::uncovered(&totals, range.clone());
    let outcome = campaign::run_ranges(plant.as_ref(), &specs, &todo, &mut totals, &mut |t| {
        checkpoint.save_if_due(t)
    });
    if let Err(e) = outcome {
        return Err(stopped_early(
            e,
            &totals,
            &mut checkpoint,
            &range,
            &args.output,
        ));
    }
    let (summary, dir) = write_campaign(&totals, &args.output)?;
    checkpoint.remove();
    finish(&summary, &dir)
}

/// The error of a campaign that stopped early (Ctrl-C or a failure): the finished runs are
/// saved in the checkpoint and the message says how to resume.
fn stopped_early(
    error: Error,
    totals: &Totals,
    checkpoint: &mut Checkpoint,
    range: &std::ops::Range<u64>,
    output: &Path,
) -> Error {
    let done = totals.runs_covered();
    let total = range.end - range.start;
    let kept = if done == 0 {
        format!(
            "no run had finished; nothing was written to {}",
            output.display()
        )
    } else {
        match checkpoint.save(totals) {
            Ok(()) => format!(
                "{done} of {total} runs finished and are kept in {}; run the same command again \
                 to resume (nothing was written to {})",
                checkpoint.dir().display(),
                output.display()
            ),
            Err(e) => format!("the {done} finished runs could not be kept: {e}"),
        }
    };
    match error {
        // The row a run was stopped at says nothing useful about a campaign.
        Error::Interrupted(_) => Error::Interrupted(format!("interrupted (Ctrl-C): {kept}")),
        Error::Run(m) => Error::Run(format!("{m}; {kept}")),
        other => other,
    }
}
