//! Evaluates a whole plan: every stage, temperature, process corner, frequency and amplitude
//! ([`super::case`]), the corner spread, Monte Carlo and sizing — in parallel, with a
//! deterministic order, into typed results the report layer records and words.

use crate::error::Error;
use crate::model::plan::Plan;
use crate::solve::spectrum::FftCache;
use crate::study::case::{evaluate_case, CaseEvaluation};
use crate::study::corners::{spread, CornerSpread};
use crate::study::montecarlo::{self, Population};
use crate::study::sizing::{self, SizingOutcome};
use rayon::prelude::*;
use std::sync::atomic::{AtomicU64, Ordering};
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
    /// How far a phase has come: `done` of `total` units (cases, runs or sizing trials). A
    /// sizing's total is an estimate and grows if the bisection takes longer.
    Step {
        /// The phase counted.
        phase: Phase,
        /// Units finished.
        done: u64,
        /// Units in the phase.
        total: u64,
    },
}

/// The phases of an evaluation that report counted progress.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Phase {
    /// Drive points: one unit per stage × temperature × corner.
    DrivePoints,
    /// Monte Carlo: one unit per run.
    MonteCarlo,
    /// Sizing: one unit per trial emitter resistance.
    Sizing,
}

/// A thread-safe counter that reports each finished unit of a phase.
struct Counter<'a> {
    phase: Phase,
    done: AtomicU64,
    total: u64,
    progress: &'a (dyn Fn(Progress) + Sync),
}

impl<'a> Counter<'a> {
    fn new(phase: Phase, total: u64, progress: &'a (dyn Fn(Progress) + Sync)) -> Self {
        progress(Progress::Step {
            phase,
            done: 0,
            total,
        });
        Counter {
            phase,
            done: AtomicU64::new(0),
            total,
            progress,
        }
    }

    fn tick(&self) {
        let done = self.done.fetch_add(1, Ordering::Relaxed) + 1;
        (self.progress)(Progress::Step {
            phase: self.phase,
            done,
            total: self.total.max(done),
        });
    }

    fn finish(&self) {
        let done = self.done.load(Ordering::Relaxed);
        (self.progress)(Progress::Step {
            phase: self.phase,
            done,
            total: done,
        });
    }
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

/// Evaluates the plan. `progress` hears what is being done.
pub fn evaluate(
    plan: &Plan,
    progress: &(dyn Fn(Progress) + Sync),
) -> Result<PlanEvaluation, Error> {
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
    let counter = Counter::new(Phase::DrivePoints, cases.len() as u64, progress);
    let evaluated: Vec<CaseEvaluation> = cases
        .par_iter()
        .map(|(index, temperature, corner)| {
            let process = &plan.corners[*corner];
            let stage = process.apply(&plan.stages[*index]);
            let case = evaluate_case(plan, *index, stage, *temperature, &process.name, &cache);
            counter.tick();
            case
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
            let counter = Counter::new(
                Phase::MonteCarlo,
                montecarlo::planned_runs(plan, settings),
                progress,
            );
            let population =
                montecarlo::evaluate_observed(plan, settings, &cache, &|| counter.tick())?;
            counter.finish();
            Some(population)
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
            let counter = Counter::new(
                Phase::Sizing,
                (stage_temperatures.len() * sizing::EXPECTED_TRIALS) as u64,
                progress,
            );
            let outcomes = stage_temperatures
                .par_iter()
                .map(|(index, temperature)| {
                    sizing::size_stage_observed(
                        plan,
                        &plan.stages[*index],
                        *temperature,
                        settings,
                        &cache,
                        &|| counter.tick(),
                    )
                })
                .collect::<Result<Vec<_>, Error>>()?;
            counter.finish();
            outcomes
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
