//! `sightline montecarlo`: a campaign over simulated datasets — `DIR/summary.json`,
//! `DIR/partial.json` (the exact totals `merge` combines) and `DIR/report.html`.
//!
//! The library calls are [`crate::campaign::run_campaign`] and [`crate::campaign::summarise`];
//! [`write_campaign`] writes a campaign's outputs. A running campaign keeps its finished runs
//! in `DIR.checkpoint/` as they finish; the same command resumes from it after a signal, a
//! failure or a kill, and a larger `--runs` extends a campaign ([`crate::checkpoint`]).

use std::ops::Range;
use std::path::{Path, PathBuf};

use crate::campaign::{self, CampaignSpec, Shard, Totals};
use crate::checkpoint::Checkpoint;
use crate::cli::{PlantArgs, configure};
use crate::error::{Error, Result};
use crate::observability_check;
use crate::output::{self, OutputDir};
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
    /// `--diffuse` states, as given.
    pub diffuse: Vec<String>,
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
        log_x: false,
        y_range: None,
        clipped: Vec::new(),
        gaps: Vec::new(),
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
        log_x: false,
        y_range: None,
        clipped: Vec::new(),
        gaps: Vec::new(),
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
    plots.extend(report::accuracy_cost_plot(summary));
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
    write_campaign_with(totals, output, None)
}

/// [`write_campaign`] with an extra report `section` (the campaign's observability check).
pub fn write_campaign_with(
    totals: &Totals,
    output: &Path,
    section: Option<&str>,
) -> Result<(Summary, PathBuf)> {
    let summary = campaign::summarise(totals);
    let dir = OutputDir::new(output)?;
    write_json(&dir, "summary.json", &summary.to_json())?;
    write_json(&dir, "partial.json", &crate::partial::to_json(totals)?)?;
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
        "Sightline Monte Carlo: {} on {}, {} runs × {} steps",
        crate::verdict::count(totals.filters.len(), "filter"),
        totals.campaign.model,
        totals.runs_covered(),
        totals.campaign.steps
    );
    let mut html =
        report::render_html(&title, &summary, &campaign_plots(totals, &summary), &notes)?;
    if let Some(section) = section {
        html = crate::observability_report::insert_section(&html, section);
    }
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

/// Runs `montecarlo`. Every check — the output directory, the checkpoint beside it, whether it
/// resumes or extends — comes before the first run; nothing is touched if one fails.
pub fn run(plants: &[Box<dyn AnyPlant>], args: &CampaignArgs) -> Result<()> {
    let mut plant = configure(plants, &args.plant)?;
    plant.set_diffuse(&args.diffuse)?;
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
        diffuse: args.diffuse.clone(),
    };
    let range = match shard {
        Some(s) => s.range(spec.runs),
        None => 0..spec.runs,
    };
    let mut fresh = campaign::empty_totals(plant.as_ref(), &specs, &spec)?;
    fresh.settings = Some(Settings {
        model_description: plant.description().to_string(),
        ..Settings::of_campaign(&spec, None)
    });
    fresh.set_shard(shard);
    let checked = output::check_dir(&args.output)?;
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
        None => match extension_of(&checked, &fresh, &range) {
            Some(done) => {
                eprintln!(
                    "extending {}: {} of {} runs already done there",
                    args.output.display(),
                    done.runs_covered(),
                    range.end - range.start
                );
                done
            }
            None => fresh,
        },
    };
    if range.is_empty() {
        eprintln!(
            "note: shard {} of a {}-run campaign holds no run (there are more shards than \
             runs); its output only completes the set for `sightline merge`",
            args.shard.as_deref().unwrap_or("?"),
            spec.runs
        );
    }
    checkpoint.pace(range.end - range.start, totals.runs_covered());
    let todo = campaign::uncovered(&totals, range.clone());
    let mut warned = false;
    let outcome = campaign::run_ranges(plant.as_ref(), &specs, &todo, &mut totals, &mut |t| {
        // A checkpoint that cannot be written costs only crash safety: say so once, go on.
        if let Err(e) = checkpoint.save_if_due(t) {
            if !warned {
                eprintln!("warning: the checkpoint could not be saved ({e}); the campaign goes on");
                warned = true;
            }
        }
        Ok(())
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
    let section = observability_check::campaign_section(plant.as_ref(), &spec);
    let (summary, dir) = match write_campaign_with(&totals, &args.output, section.as_deref()) {
        Ok(done) => done,
        // E.g. a file added to the old output meanwhile: keep the finished runs.
        Err(e) => {
            return Err(stopped_early(
                e,
                &totals,
                &mut checkpoint,
                &range,
                &args.output,
            ));
        }
    };
    checkpoint.remove();
    finish(&summary, &dir)
}

/// The finished output at the target as the start of a campaign that grows `--runs` (the same
/// campaign otherwise), or `None`: an earlier output of another campaign is simply replaced.
fn extension_of(checked: &output::Checked, fresh: &Totals, range: &Range<u64>) -> Option<Totals> {
    let output::Found::Output(manifest) = &checked.found else {
        return None;
    };
    manifest.files.iter().find(|f| f.name == "partial.json")?;
    let file = checked.target.join("partial.json");
    let done = crate::partial::read(&file).ok()?;
    if done.campaign.runs >= fresh.campaign.runs {
        return None;
    }
    crate::checkpoint::adopt(done, fresh, range, &file, &checked.target).ok()
}

/// The error of a campaign that stopped early (a signal, a failure, an output that cannot be
/// written): the finished runs are saved in the checkpoint and the message says how to resume.
fn stopped_early(
    error: Error,
    totals: &Totals,
    checkpoint: &mut Checkpoint,
    range: &Range<u64>,
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
        Error::Interrupted(_) => {
            Error::Interrupted(format!("{}: {kept}", crate::interrupt::describe()))
        }
        Error::Run(m) => Error::Run(format!("{m}; {kept}")),
        Error::Usage(m) => Error::Usage(format!("{m}; {kept}")),
        Error::Write { path, source } => {
            Error::Usage(format!("cannot write {}: {source}; {kept}", path.display()))
        }
        other => other,
    }
}
