//! Evaluates a whole plan: every stage, temperature, process corner, frequency and amplitude
//! ([`super::case`]), the corner spread, Monte Carlo and sizing — in parallel, with a
//! deterministic order, into typed results the report layer records and words.

use crate::error::Error;
use crate::model::bias::{bias_problem, temperature_supported, MODEL_TEMPERATURE_RANGE_C};
use crate::model::circuit::StageCircuit;
use crate::model::plan::Plan;
use crate::model::products::{refused_collision, separating_spacing, PeriodTooLong};
use crate::solve::spectrum::FftCache;
use crate::study::case::{evaluate_case, CaseEvaluation};
use crate::study::corners::{spread, CornerSpread};
use crate::study::montecarlo::{self, Population};
use crate::study::sizing::{self, SizingOutcome};
use crate::units::short_number;
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

/// Refuses what the plan alone decides cannot be answered (the plan reader refuses the same
/// with positions; this covers plans built in code): a temperature outside the device
/// model's range, a stage that cannot bias, a two-tone spacing whose products collide for a
/// stage with charge storage.
fn check_physics(plan: &Plan) -> Result<(), Error> {
    for &temperature in &plan.temperatures_c {
        if !temperature_supported(temperature) {
            let (low, high) = MODEL_TEMPERATURE_RANGE_C;
            return Err(Error::Argument {
                name: "temperatures_c".into(),
                problem: format!(
                    "{} °C is outside the temperatures the device model supports",
                    short_number(temperature)
                ),
                accepted: format!("temperatures from {low} to {high} °C"),
            });
        }
    }
    for stage in &plan.stages {
        for corner in &plan.corners {
            for &temperature in &plan.temperatures_c {
                if let Some(problem) = bias_problem(&corner.apply(stage), temperature) {
                    return Err(Error::Argument {
                        name: format!(
                            "stage `{}` ({} corner): {}",
                            stage.name,
                            corner.name,
                            problem.key()
                        ),
                        problem: format!("the stage cannot bias: {problem}"),
                        accepted: problem.remedy(),
                    });
                }
            }
        }
    }
    if let Some(spacing) = plan.drive.two_tone_spacing {
        let stores_charge = plan.stages.iter().any(|stage| {
            plan.temperatures_c
                .iter()
                .any(|&t| !StageCircuit::new(stage, t).is_memoryless())
        });
        if stores_charge {
            for &frequency in &plan.drive.frequencies {
                let problem = match refused_collision(frequency, spacing) {
                    Err(PeriodTooLong) => format!(
                        "the common period of {} Hz and {} Hz is too long to solve",
                        short_number(frequency),
                        short_number(frequency + spacing)
                    ),
                    Ok(Some(collision)) => format!(
                        "at {} Hz the product {} falls on {} (order {})",
                        short_number(frequency),
                        collision.reported,
                        collision.other,
                        collision.other.order()
                    ),
                    Ok(None) => continue,
                };
                return Err(Error::Argument {
                    name: "drive.two_tone_spacing".into(),
                    problem,
                    accepted: match separating_spacing(frequency, spacing) {
                        Some(s) => format!(
                            "a spacing that separates the products, e.g. {} Hz",
                            short_number(s)
                        ),
                        None => "a spacing that divides the frequency".into(),
                    },
                });
            }
        }
    }
    Ok(())
}

/// Evaluates the plan. `progress` hears what is being done.
pub fn evaluate(
    plan: &Plan,
    progress: &(dyn Fn(Progress) + Sync),
) -> Result<PlanEvaluation, Error> {
    check_physics(plan)?;
    let cache = Arc::new(FftCache::default());
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
    })
}
