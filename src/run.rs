//! The commands as library calls: `run` evaluates a plan and writes its folder, `check`
//! validates only. The binary only parses arguments and maps the outcome to an exit status.

use crate::analysis;
use crate::error::Error;
use crate::plan::Plan;
use crate::plots;
use crate::report::write::{check_output_dir, write_report_folder, Staging};
use crate::report::{csv_export, datasheet, json, markdown, Report};
use crate::workload;
use std::path::{Path, PathBuf};

/// Options of `linbudget run`.
#[derive(Debug, Clone)]
pub struct RunOptions {
    /// The plan file.
    pub plan: PathBuf,
    /// Output folder (the report goes to `out/<plan name>/`).
    pub out: PathBuf,
    /// Print the JSON report on standard output.
    pub json: bool,
    /// No progress lines on standard error.
    pub quiet: bool,
    /// Largest estimated work accepted, sample solves (see [`crate::workload`]).
    pub max_work: f64,
    /// Draw the figures (SVG and PNG); false writes the tables and reports only.
    pub figures: bool,
}

/// What a run produced.
#[derive(Debug)]
pub struct RunOutcome {
    /// The report.
    pub report: Report,
    /// Where it was written.
    pub folder: PathBuf,
}

/// Renders every file of the report folder into `staging`, each written as soon as it is
/// ready: the tables (report.json, points.csv, summary.md), the figures (SVG and PNG) and the
/// report documents.
///
/// The pieces are independent tasks of very unequal cost (a dense sweep's harmonics raster
/// takes ten times its summary), so they are started longest first: with the workers
/// greedily taking the next task, the last one to finish is then a short one.
pub fn write_files(report: &Report, with_figures: bool, staging: &Staging) -> Result<(), Error> {
    let sketches = if with_figures {
        plots::sketches(report)
    } else {
        Vec::new()
    };
    type Task<'a> = Box<dyn FnOnce() -> Result<(), Error> + Send + 'a>;
    // (relative cost, task); the costs are rough shares of a dense sweep's run.
    let mut tasks: Vec<(u32, Task)> = Vec::new();
    for sketch in &sketches {
        tasks.push((
            sketch.raster_cost(),
            Box::new(move || staging.put(&format!("{}.png", sketch.stem()), &sketch.draw_png()?)),
        ));
    }
    tasks.push((
        5,
        Box::new(|| {
            staging.put_streamed("report.json", |file| {
                json::write_json(report, file).map_err(|e| e.to_string())
            })
        }),
    ));
    tasks.push((
        3,
        Box::new(|| {
            staging.put_streamed("points.csv", |file| {
                csv_export::write_points_csv(report, file).map_err(|e| e.to_string())
            })
        }),
    ));
    tasks.push((
        1 + sketches.len() as u32,
        Box::new(|| datasheet::write_documents(report, &sketches, staging)),
    ));
    tasks.push((
        1,
        Box::new(|| staging.put("summary.md", markdown::summary(report).as_bytes())),
    ));
    tasks.sort_by_key(|(cost, _)| std::cmp::Reverse(*cost));
    // When several tasks fail, report the one first in the list, whatever finished first.
    let failure: std::sync::Mutex<Option<(usize, Error)>> = std::sync::Mutex::new(None);
    rayon::scope_fifo(|scope| {
        for (index, (_, task)) in tasks.into_iter().enumerate() {
            let failure = &failure;
            scope.spawn_fifo(move |_| {
                if let Err(error) = task() {
                    let mut slot = failure
                        .lock()
                        .unwrap_or_else(|poisoned| poisoned.into_inner());
                    if slot.as_ref().is_none_or(|(first, _)| index < *first) {
                        *slot = Some((index, error));
                    }
                }
            });
        }
    });
    match failure
        .into_inner()
        .unwrap_or_else(|poisoned| poisoned.into_inner())
    {
        Some((_, error)) => Err(error),
        None => Ok(()),
    }
}

/// Validates a plan file, including its estimated work against the default limit.
pub fn check(plan: &Path) -> Result<Plan, Error> {
    check_within(plan, workload::DEFAULT_MAX_WORK)
}

/// Validates a plan file and refuses it when its estimated work exceeds `max_work`.
pub fn check_within(plan: &Path, max_work: f64) -> Result<Plan, Error> {
    let validated = Plan::load(plan)?;
    // Plan::load has already bounded the file's size; read it again to locate the error.
    let text = std::fs::read_to_string(plan).map_err(|source| Error::ReadPlan {
        path: plan.to_owned(),
        source,
    })?;
    workload::check(&validated, max_work, &text, &plan.display().to_string())?;
    Ok(validated)
}

/// Evaluates a plan and writes its report folder; nothing is written when anything fails.
pub fn run(options: &RunOptions, progress: &(dyn Fn(&str) + Sync)) -> Result<RunOutcome, Error> {
    let plan = check_within(&options.plan, options.max_work)?;
    check_output_dir(&options.out)?;
    let report = analysis::evaluate(&plan, progress)?;
    progress("drawing figures and writing the report");
    let folder = write_report_folder(&options.out, &plan.name, |staging| {
        write_files(&report, options.figures, staging)
    })?;
    Ok(RunOutcome { report, folder })
}
