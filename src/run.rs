//! The commands as library calls: `run` evaluates a plan and writes its folder, `check`
//! validates only. The binary only parses arguments and maps the outcome to an exit status.

use crate::analysis;
use crate::error::Error;
use crate::plan::Plan;
use crate::report::write::{check_output_dir, write_report_folder_with, Staging};
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
/// ready: the tables (report.json, points.csv, summary.md), the figures and the report
/// documents, side by side.
pub fn write_files(report: &Report, with_figures: bool, staging: &Staging) -> Result<(), Error> {
    let (tables, documents) = rayon::join(
        || write_tables(report, staging),
        || datasheet::write_into(report, with_figures, staging),
    );
    tables.and(documents)
}

/// The machine- and human-readable tables: report.json, points.csv, summary.md (each a pass
/// over every point, so rendered side by side).
fn write_tables(report: &Report, staging: &Staging) -> Result<(), Error> {
    let (json, (csv, summary)) = rayon::join(
        || {
            staging.put_streamed("report.json", |file| {
                json::write_json(report, file).map_err(|e| e.to_string())
            })
        },
        || {
            rayon::join(
                || {
                    staging.put_streamed("points.csv", |file| {
                        csv_export::write_points_csv(report, file)
                            .map(|_| ())
                            .map_err(|e| e.to_string())
                    })
                },
                || staging.put("summary.md", markdown::summary(report).as_bytes()),
            )
        },
    );
    json.and(csv).and(summary)
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
    let folder = write_report_folder_with(&options.out, &plan.name, |staging| {
        write_files(&report, options.figures, staging)
    })?;
    Ok(RunOutcome { report, folder })
}
