//! Evaluates a whole plan: every stage, temperature, process corner, frequency and amplitude
//! ([`super::case`]), the corner spread, Monte Carlo and sizing — in parallel, with a
//! deterministic order, into typed results the report layer records and words.

use crate::error::Error;
use crate::model::plan::Plan;
use crate::solve::spectrum::FftCache;
use crate::study::case::{evaluate_case, CaseEvaluation};
use crate::study::corners::{spread, CornerSpread};
use crate::study::fit::{self, BenchComparison, FitOutcome, FitProgress};
use crate::study::montecarlo::{self, Population};
use crate::study::sizing::{self, SizingOutcome};
use rayon::prelude::*;
use std::sync::Arc;

/// What the evaluation is doing, for a progress display.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Progress {
    /// Evaluating the drive points of every case.
    DrivePoints {
        /// Stages in the plan.
        stages: usize,
        /// Temperatures.
        temperatures: usize,
        /// Process corners.
        corners: usize,
        /// Frequencies.
        frequencies: usize,
        /// Amplitudes.
        amplitudes: usize,
    },
    /// Drawing the Monte Carlo population.
    MonteCarlo {
        /// Runs per stage and temperature.
        runs: u64,
    },
    /// Sizing the emitter degeneration.
    Sizing,
    /// Fitting a stage to its bench data.
    Fitting(FitProgress),
}

/// Everything a plan's evaluation found.
#[derive(Debug, Clone)]
pub struct PlanEvaluation {
    /// Every stage × temperature × corner, in that nesting order.
    pub cases: Vec<CaseEvaluation>,
    /// Typical, least and greatest of each figure across corners (plans with corners).
    pub spread: Vec<CornerSpread>,
    /// The Monte Carlo population, when the plan asks for one.
    pub population: Option<Population>,
    /// Sizing per stage and temperature, when the plan asks for it.
    pub sizing: Vec<SizingOutcome>,
    /// Every measured stage fitted to its bench data, when the plan asks for a fit (the
    /// fitted stages are evaluated among the cases, each right after its nominal stage).
    pub fits: Vec<FitOutcome>,
    /// Every bench file compared with the nominal model and, when fitted, the fitted one.
    pub comparisons: Vec<BenchComparison>,
}

impl PlanEvaluation {
    /// Whether the plan is met: every sizing found a value (when sizing ran), otherwise every
    /// budget line passes in every case.
    pub fn met(&self, plan: &Plan) -> bool {
        if plan.sizing.is_some() {
            self.sizing.iter().all(|s| s.met)
        } else {
            self.cases
                .iter()
                .all(|case| case.budget.iter().all(|line| line.pass))
        }
    }
}

/// Evaluates the plan. `progress` hears what is being done.
///
/// Stages with bench data are fitted first (when the plan asks for a fit); each fitted stage
/// is then evaluated like any other, named `<stage>@fitted` and placed right after its
/// nominal stage.
pub fn evaluate(
    plan: &Plan,
    progress: &(dyn Fn(Progress) + Sync),
) -> Result<PlanEvaluation, Error> {
    let cache = Arc::new(FftCache::default());
    let fits = fit::fit_all(plan, &cache, &|event| progress(Progress::Fitting(event)))?;
    let mut comparisons = Vec::new();
    for measurements in &plan.measurements {
        let Some(nominal) = plan.stages.iter().find(|s| s.name == measurements.stage) else {
            continue;
        };
        comparisons.push(fit::compare(plan, nominal, measurements, &cache)?);
        if let Some(outcome) = fits.iter().find(|f| f.stage == measurements.stage) {
            comparisons.push(fit::compare(plan, &outcome.fitted, measurements, &cache)?);
        }
    }
    let augmented = fit::with_fitted_stages(plan, &fits);
    let plan = &augmented;
    // Every stage × temperature × process corner, in report order.
    let cases: Vec<(usize, f64, usize)> = plan
        .stages
        .iter()
        .enumerate()
        .flat_map(|(i, _)| {
            plan.temperatures_c
                .iter()
                .flat_map(move |t| (0..plan.corners.len()).map(move |k| (i, *t, k)))
        })
        .collect();

    progress(Progress::DrivePoints {
        stages: plan.stages.len(),
        temperatures: plan.temperatures_c.len(),
        corners: plan.corners.len(),
        frequencies: plan.drive.frequencies.len(),
        amplitudes: plan.drive.amplitudes.len(),
    });
    let evaluated: Vec<CaseEvaluation> = cases
        .par_iter()
        .map(|(index, temperature, corner)| {
            let process = &plan.corners[*corner];
            let stage = process.apply(&plan.stages[*index]);
            evaluate_case(plan, *index, stage, *temperature, &process.name, &cache)
        })
        .collect::<Result<Vec<_>, Error>>()?;
    let corner_spread = if plan.corners.len() > 1 {
        evaluated
            .chunks(plan.corners.len())
            .flat_map(|group| spread(plan, group))
            .collect()
    } else {
        Vec::new()
    };

    let population = match &plan.monte_carlo {
        Some(settings) => {
            progress(Progress::MonteCarlo {
                runs: settings.runs,
            });
            Some(montecarlo::evaluate(plan, settings, &cache)?)
        }
        None => None,
    };

    let sizing = match &plan.sizing {
        Some(settings) => {
            progress(Progress::Sizing);
            let stage_temperatures: Vec<(usize, f64)> = plan
                .stages
                .iter()
                .enumerate()
                .flat_map(|(i, _)| plan.temperatures_c.iter().map(move |t| (i, *t)))
                .collect();
            stage_temperatures
                .par_iter()
                .map(|(index, temperature)| {
                    sizing::size_stage(plan, &plan.stages[*index], *temperature, settings, &cache)
                })
                .collect::<Result<Vec<_>, Error>>()?
        }
        None => Vec::new(),
    };

    Ok(PlanEvaluation {
        cases: evaluated,
        spread: corner_spread,
        population,
        sizing,
        fits,
        comparisons,
    })
}
