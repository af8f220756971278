//! The shell: the commands as library calls. `run` reads a plan, evaluates it with
//! [`crate::Plan::evaluate_with`] — the call a library user makes — and writes its folder;
//! `check` validates only. The binary parses arguments and maps the outcome to an exit
//! status.

mod files;
mod folder;

use crate::error::Error;
use crate::model::plan::Plan;
use crate::plan::PlanSource;
use crate::report::build::rejudge;
use crate::report::Report;
use crate::study::evaluate::{Phase, Progress};
use crate::study::verdict::Judged;
use crate::study::workload::{self, Workload};
use std::path::{Path, PathBuf};

pub use files::write_files;
pub use folder::{check_output_dir, write_report_folder, Staging};
pub use workload::{parse_duration, DEFAULT_MAX_WORK};

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
    /// Largest estimated wall time accepted, s.
    pub max_work: f64,
    /// Draw the figures (SVG and PNG); false writes the tables and reports only.
    pub figures: bool,
    /// Judge the design as written (`--as-planned`), not the recommended one.
    pub as_planned: bool,
    /// `--set KEY.PATH=VALUE` overrides, applied in order.
    pub overrides: Vec<String>,
}

impl RunOptions {
    /// Options for `plan` with the command's defaults: output to `out`, figures drawn, the
    /// default work limit, no overrides, judged on the recommended design.
    pub fn new(plan: impl Into<PathBuf>) -> Self {
        RunOptions {
            plan: plan.into(),
            out: PathBuf::from("out"),
            json: false,
            quiet: false,
            max_work: DEFAULT_MAX_WORK,
            figures: true,
            as_planned: false,
            overrides: Vec::new(),
        }
    }
}

/// What a run produced.
#[derive(Debug)]
pub struct RunOutcome {
    /// The report.
    pub report: Report,
    /// Where it was written.
    pub folder: PathBuf,
}

/// What a run is doing: the evaluation's own events, then writing the report folder.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum RunProgress {
    /// An event of the evaluation.
    Study(Progress),
    /// Drawing the figures and writing the report folder.
    Writing,
}

/// The name of a counted phase, for a progress bar's label.
pub fn phase_name(phase: Phase) -> &'static str {
    match phase {
        Phase::DrivePoints => "drive points",
        Phase::MonteCarlo => "Monte Carlo runs",
        Phase::Sizing => "sizing trials",
    }
}

/// A run's progress event in words, for a status line.
pub fn describe_run(progress: RunProgress) -> String {
    match progress {
        RunProgress::Study(event) => describe(event),
        RunProgress::Writing => "drawing figures and writing the report".into(),
    }
}

/// A progress event in words, for a status line.
pub fn describe(progress: Progress) -> String {
    match progress {
        Progress::Step { phase, done, total } => {
            format!("{}: {done} of {total}", phase_name(phase))
        }
        Progress::DrivePoints {
            stages,
            temperatures,
            corners,
            frequencies,
            amplitudes,
        } => format!(
            "evaluating {stages} stage(s) × {temperatures} temperature(s) × {corners} corner(s) × {frequencies} frequency(ies) × {amplitudes} amplitude(s)"
        ),
        Progress::MonteCarlo { runs } => {
            format!("Monte Carlo: {runs} run(s) per stage and temperature")
        }
        Progress::Sizing => "sizing emitter degeneration".into(),
        Progress::Fitting(fit) => format!(
            "fitting stage {} to its bench data: {} model evaluation(s), rms residual {:.3} dB",
            fit.stage_index + 1,
            fit.evaluations,
            fit.rms
        ),
        Progress::Recommended { stages } => {
            format!("evaluating the recommended design of {stages} stage(s)")
        }
    }
}

/// Validates a plan file, including its estimated work against the default limit.
pub fn check(plan: &Path) -> Result<Plan, Error> {
    check_within(plan, DEFAULT_MAX_WORK)
}

/// Validates a plan file and refuses it when its estimated wall time exceeds `max_work`
/// seconds.
pub fn check_within(plan: &Path, max_work: f64) -> Result<Plan, Error> {
    check_with_overrides(plan, &[], max_work)
}

/// Validates a plan file with `--set` overrides applied (each validated like a value written
/// in the file, errors located at the argument), within the work limit.
pub fn check_with_overrides(
    plan: &Path,
    overrides: &[String],
    max_work: f64,
) -> Result<Plan, Error> {
    let source = PlanSource::read(plan)?.with_overrides(overrides)?;
    let validated = source.plan()?;
    within_work_limit(&source, &validated, max_work)?;
    Ok(validated)
}

/// Refuses a plan whose estimated wall time exceeds `max_work` seconds, pointing at the key
/// of its largest factor and giving a `--max-work` value that would admit it.
fn within_work_limit(source: &PlanSource, plan: &Plan, max_work: f64) -> Result<Workload, Error> {
    let work = workload::estimate(plan);
    if work.wall_seconds <= max_work {
        return Ok(work);
    }
    Err(source
        .error_at_key(
            work.dominant_key,
            format!(
                "the plan would take about {} ({} of one core: {}), above the work limit of {}",
                workload::format_duration(work.wall_seconds),
                workload::format_duration(work.cpu_seconds),
                work.breakdown,
                workload::format_duration(max_work)
            ),
            format!(
                "a plan within the limit (fewer points or runs), or raise the limit deliberately \
                 with `--max-work {}`",
                workload::suggested_limit(work.wall_seconds)
            ),
        )
        .into())
}

/// Evaluates a plan and writes its report folder; nothing is written when anything fails.
/// `progress` hears typed events (the shell words or draws them, see [`describe_run`]).
pub fn run(
    options: &RunOptions,
    progress: &(dyn Fn(RunProgress) + Sync),
) -> Result<RunOutcome, Error> {
    let plan = check_with_overrides(&options.plan, &options.overrides, options.max_work)?;
    check_output_dir(&options.out)?;
    let mut report = plan.evaluate_with(&|event| progress(RunProgress::Study(event)))?;
    if options.as_planned {
        rejudge(&mut report, Judged::AsPlanned);
    }
    progress(RunProgress::Writing);
    let folder = write_report_folder(&options.out, &plan.name, |staging| {
        write_files(&report, options.figures, staging)
    })?;
    Ok(RunOutcome { report, folder })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Counted progress is worded as a fraction, in the shell, never in the study layer.
    #[test]
    fn counted_progress_reads_as_a_fraction() {
        let text = describe(Progress::Step {
            phase: Phase::Sizing,
            done: 12,
            total: 204,
        });
        assert_eq!(text, "sizing trials: 12 of 204");
    }
}
