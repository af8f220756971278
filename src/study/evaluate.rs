//! Evaluates a whole plan: every stage, temperature, process corner, frequency and amplitude
//! ([`super::case`]), the corner spread, Monte Carlo and sizing — in parallel, with a
//! deterministic order, into typed results the report layer records and words.

use crate::error::Error;
use crate::measure::budget::judge;
use crate::model::bias::{bias_problem, temperature_supported, MODEL_TEMPERATURE_RANGE_C};
use crate::model::circuit::StageCircuit;
use crate::model::plan::{MonteCarloSettings, Plan, SizingSettings, SizingVariable};
use crate::model::products::{refused_collision, separating_spacing, PeriodTooLong};
use crate::model::stage::Stage;
use crate::solve::spectrum::FftCache;
use crate::solve::spectrum::ANALYSIS_FLOOR_DBC;
use crate::study::case::{evaluate_case, CaseEvaluation};
use crate::study::corners::{spread, CornerSpread};
use crate::study::fit::{self, BenchComparison, FitOutcome, FitProgress};
use crate::study::montecarlo::{self, Population};
use crate::study::region::{self, RegionOutcome, RegionPoint};
use crate::study::sizing::{self, Recommendation, SizingOutcome};
use crate::study::verdict::{DesignVerdict, Judged, Verdict};
use crate::units::short_number;
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
    /// Evaluating the recommended design over the whole plan.
    Recommended {
        /// Stages sized.
        stages: usize,
    },
    /// Fitting a stage to its bench data.
    Fitting(FitProgress),
    /// How far a phase has come: `done` of `total` units (cases, runs or sizing trials). A
    /// sizing's total is an estimate and grows if the refinement takes longer.
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
    /// Sizing per stage and temperature, when the plan asks for the least emitter resistance
    /// alone.
    pub sizing: Vec<SizingOutcome>,
    /// Sizing over a region of several variables, one per planned stage, when the plan
    /// names more than the emitter resistance (or minimises another variable).
    pub regions: Vec<RegionOutcome>,
    /// The recommended design, one per planned stage, when the plan asks for sizing.
    pub recommended: Vec<RecommendedStage>,
    /// Every measured stage fitted to its bench data, when the plan asks for a fit (the
    /// fitted stages are evaluated among the planned ones, each right after its stage).
    pub fits: Vec<FitOutcome>,
    /// Every bench file compared with the nominal model and, when fitted, the fitted one.
    pub comparisons: Vec<BenchComparison>,
    /// The planned stages compared at equal tail current or equal input noise, when the plan
    /// asks for it.
    pub schemes: Option<crate::study::schemes::SchemeComparison>,
}

/// A planned stage rebuilt with the values sizing recommends, evaluated in full.
#[derive(Debug, Clone)]
pub struct RecommendedStage {
    /// What sizing recommends.
    pub recommendation: Recommendation,
    /// The stage as recommended, named `<stage>@sized` (a derived stage).
    pub stage: Stage,
    /// Every temperature × corner, like the planned stage's cases.
    pub cases: Vec<CaseEvaluation>,
    /// Its spread across corners (plans with corners).
    pub spread: Vec<CornerSpread>,
}

impl PlanEvaluation {
    /// The verdicts on the design as planned and on the recommended one.
    pub fn verdict(&self) -> Verdict {
        Verdict {
            as_planned: DesignVerdict::of(&self.cases),
            recommended: (!self.recommended.is_empty()).then(|| {
                let mut verdict = DesignVerdict::of(self.recommended.iter().flat_map(|r| &r.cases));
                // Sizing's own constraints (collector headroom with `hold_gain`, one value for
                // every temperature) are not budget lines: a design sizing could not find is
                // not met, whatever its budget checks say.
                verdict.met &= self.recommended.iter().all(|r| r.recommendation.met);
                verdict
            }),
        }
    }

    /// Whether the plan is met: the recommended design meets every line (plans with sizing),
    /// otherwise the stages as planned do.
    pub fn met(&self) -> bool {
        self.verdict().met(Judged::Recommended)
    }
}

/// Every stage × temperature × corner of `stages` (each with its plan index), in report order.
fn evaluate_cases(
    plan: &Plan,
    stages: &[(usize, &Stage)],
    cache: &Arc<FftCache>,
    progress: &(dyn Fn(Progress) + Sync),
) -> Result<Vec<CaseEvaluation>, Error> {
    let cases: Vec<(usize, &Stage, f64, usize)> = stages
        .iter()
        .flat_map(|&(index, stage)| {
            plan.temperatures_c
                .iter()
                .flat_map(move |t| (0..plan.corners.len()).map(move |k| (index, stage, *t, k)))
        })
        .collect();
    let counter = Counter::new(Phase::DrivePoints, cases.len() as u64, progress);
    cases
        .par_iter()
        .map(|&(index, stage, temperature, corner)| {
            let process = &plan.corners[corner];
            let case = evaluate_case(
                plan,
                index,
                process.apply(stage),
                temperature,
                &process.name,
                cache,
            );
            counter.tick();
            case
        })
        .collect()
}

/// The spread across corners of each stage and temperature (plans with corners).
fn corner_spread(plan: &Plan, cases: &[CaseEvaluation]) -> Vec<CornerSpread> {
    if plan.corners.len() > 1 {
        cases
            .chunks(plan.corners.len())
            .flat_map(|group| spread(plan, group))
            .collect()
    } else {
        Vec::new()
    }
}

/// The recommended stage rebuilt at `emitter_resistance` (with the load `hold_gain` asks for).
fn rebuilt(
    plan: &Plan,
    settings: &SizingSettings,
    design: &RecommendedStage,
    emitter_resistance: f64,
    cache: &Arc<FftCache>,
) -> Result<Stage, Error> {
    let planned = &plan.stages[design.recommendation.stage_index];
    let mut stage = design.stage.clone();
    stage.emitter_resistance = emitter_resistance;
    if settings.hold_gain {
        stage.load_resistance = sizing::held_load(
            plan,
            planned,
            sizing::typical_temperature(&plan.temperatures_c),
            emitter_resistance,
            cache,
        )?;
    }
    Ok(stage)
}

/// Sizing's trials do not draw a population, so the least value holding the other lines may
/// miss a yield line. When it does, the common windows are searched upward (their scan grid
/// values and upper edges, then bisection to [`sizing::REFINE_RELATIVE`] inside the window where
/// the yield is first reached) for the least value whose population meets every yield line at
/// every temperature. The draws are the same dies at every value (common random numbers), so the
/// search compares like with like. When no value in the windows reaches the yield, the least
/// value is kept and the recommendation says so.
fn raise_for_yield(
    plan: &Plan,
    settings: &SizingSettings,
    monte_carlo: &MonteCarloSettings,
    design: &mut RecommendedStage,
    outcomes: &[&SizingOutcome],
    cache: &Arc<FftCache>,
) -> Result<(), Error> {
    let yield_lines: Vec<_> = plan
        .budget
        .iter()
        .filter(|l| l.metric.is_population())
        .collect();
    if yield_lines.is_empty() || !design.recommendation.met {
        return Ok(());
    }
    let index = design.recommendation.stage_index;
    let holds = |emitter_resistance: f64| -> Result<Option<bool>, Error> {
        let stage = rebuilt(plan, settings, design, emitter_resistance, cache)?;
        let population = montecarlo::evaluate_stages(plan, monte_carlo, &[(index, &stage)], cache)?;
        if population.stages.is_empty() {
            return Ok(None);
        }
        Ok(Some(population.stages.iter().all(|drawn| {
            let fraction = Some(drawn.yield_estimate.pass_fraction());
            yield_lines
                .iter()
                .all(|line| judge(line, fraction, ANALYSIS_FLOOR_DBC).pass)
        })))
    };
    let least = design.recommendation.emitter_resistance;
    if holds(least)? != Some(false) {
        return Ok(());
    }
    let windows = design.recommendation.windows.clone();
    let window_of = |r: f64| {
        windows
            .iter()
            .position(|&(low, high)| r >= low && r <= high)
    };
    let mut candidates: Vec<f64> = outcomes
        .first()
        .map(|o| o.scan.iter().map(|t| t.emitter_resistance).collect())
        .unwrap_or_default();
    candidates.extend(windows.iter().map(|&(_, high)| high));
    candidates.retain(|&r| r > least && window_of(r).is_some());
    candidates.sort_by(f64::total_cmp);
    candidates.dedup();
    let mut failing = least;
    for candidate in candidates {
        if holds(candidate)? != Some(true) {
            failing = candidate;
            continue;
        }
        let mut passing = candidate;
        if window_of(failing) == window_of(passing) {
            while passing - failing > sizing::REFINE_RELATIVE * passing {
                let mid = 0.5 * (failing + passing);
                if holds(mid)? == Some(true) {
                    passing = mid;
                } else {
                    failing = mid;
                }
            }
        }
        design.stage = rebuilt(plan, settings, design, passing, cache)?;
        design.recommendation.emitter_resistance = passing;
        design.recommendation.load_resistance = design.stage.load_resistance;
        design.recommendation.basis = sizing::Basis::YieldInWindow;
        return Ok(());
    }
    design.recommendation.yield_short = true;
    Ok(())
}

/// The design a region search recommends: its values, the load `hold_gain` asks for at the
/// temperature nearest 27 °C, and how it was found.
fn region_recommendation(
    plan: &Plan,
    settings: &SizingSettings,
    found: &RegionOutcome,
    design: &RegionPoint,
    cache: &Arc<FftCache>,
) -> Result<Recommendation, Error> {
    let planned = &plan.stages[found.stage_index];
    let mut base = planned.clone();
    base.tail_current = design.tail_current();
    let area_ratio = found.value_at(design, SizingVariable::AreaRatio);
    if let Some(ratio) = area_ratio {
        base.multi_tanh.area_ratio = ratio;
    }
    let emitter_resistance = design.emitter_resistance();
    let load_resistance = if settings.hold_gain {
        sizing::held_load_from(
            plan,
            planned,
            &base,
            sizing::typical_temperature(&plan.temperatures_c),
            emitter_resistance,
            cache,
        )?
    } else {
        planned.load_resistance
    };
    Ok(Recommendation {
        stage_index: found.stage_index,
        emitter_resistance,
        tail_current: base.tail_current,
        load_resistance,
        area_ratio,
        met: found.met && design.holds,
        windows: Vec::new(),
        basis: if found.met {
            sizing::Basis::LeastInRegion
        } else {
            sizing::Basis::BestInRegion
        },
        yield_short: false,
    })
}

/// The region search does not draw a population per design either. When its answer misses a
/// yield line, the map's grid rows above the answer are tried in turn, each at its best
/// holding design, on the same dies (common random numbers); the first whose population meets
/// every yield line at every temperature is recommended (grid resolution: no bisection).
fn raise_region_for_yield(
    plan: &Plan,
    settings: &SizingSettings,
    monte_carlo: &MonteCarloSettings,
    design: &mut RecommendedStage,
    found: &RegionOutcome,
    cache: &Arc<FftCache>,
) -> Result<(), Error> {
    let yield_lines: Vec<_> = plan
        .budget
        .iter()
        .filter(|l| l.metric.is_population())
        .collect();
    if yield_lines.is_empty() || !design.recommendation.met {
        return Ok(());
    }
    let index = design.recommendation.stage_index;
    let holds = |candidate: &Stage| -> Result<Option<bool>, Error> {
        let population =
            montecarlo::evaluate_stages(plan, monte_carlo, &[(index, candidate)], cache)?;
        if population.stages.is_empty() {
            return Ok(None);
        }
        Ok(Some(population.stages.iter().all(|drawn| {
            let fraction = Some(drawn.yield_estimate.pass_fraction());
            yield_lines
                .iter()
                .all(|line| judge(line, fraction, ANALYSIS_FLOOR_DBC).pass)
        })))
    };
    if holds(&design.stage)? != Some(false) {
        return Ok(());
    }
    let width = found.map.len() / found.primary.grid.len().max(1);
    for row in found.map.chunks(width.max(1)) {
        let Some(best) = row
            .iter()
            .filter(|p| p.holds && p.primary > found.chosen.primary)
            .max_by(|a, b| a.excess.total_cmp(&b.excess))
        else {
            continue;
        };
        let recommendation = region_recommendation(plan, settings, found, best, cache)?;
        let mut candidate = design.stage.clone();
        recommendation.apply(&mut candidate);
        if holds(&candidate)? == Some(true) {
            design.stage = candidate;
            design.recommendation = Recommendation {
                basis: sizing::Basis::YieldInRegion,
                ..recommendation
            };
            return Ok(());
        }
    }
    design.recommendation.yield_short = true;
    Ok(())
}

/// Judges every yield line of `cases` on the population drawn for its stage and temperature;
/// a stage the population left out keeps its yield lines failing (not estimated).
fn judge_yield(plan: &Plan, cases: &mut [CaseEvaluation], population: Option<&Population>) {
    for case in cases {
        let drawn = population.and_then(|p| {
            p.stages
                .iter()
                .find(|s| s.stage == case.stage.name && s.temperature_c == case.temperature_c)
        });
        for result in case.budget.iter_mut() {
            let line = &plan.budget[result.line];
            if !line.metric.is_population() || !result.judged {
                continue;
            }
            let estimate = drawn.map(|d| &d.yield_estimate);
            result.judge_yield(
                line,
                estimate.map(|e| e.pass_fraction()),
                estimate.map(|e| (e.low, e.high)),
            );
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
///
/// Stages with bench data are fitted first (when the plan asks for a fit); each fitted stage
/// is then evaluated like any planned stage — budget, sizing, Monte Carlo — named
/// `<stage>@fitted` and placed right after its stage.
pub fn evaluate(
    plan: &Plan,
    progress: &(dyn Fn(Progress) + Sync),
) -> Result<PlanEvaluation, Error> {
    check_physics(plan)?;
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
    let planned: Vec<(usize, &Stage)> = plan.stages.iter().enumerate().collect();

    progress(Progress::DrivePoints {
        stages: plan.stages.len(),
        temperatures: plan.temperatures_c.len(),
        corners: plan.corners.len(),
        frequencies: plan.drive.frequencies.len(),
        amplitudes: plan.drive.amplitudes.len(),
    });
    let mut evaluated = evaluate_cases(plan, &planned, &cache, progress)?;

    let sizing = match &plan.sizing {
        Some(settings) if settings.is_emitter_only() => {
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
        _ => Vec::new(),
    };
    let regions = match &plan.sizing {
        Some(settings) if !settings.is_emitter_only() => {
            progress(Progress::Sizing);
            (0..plan.stages.len())
                .map(|index| region::size_region(plan, index, settings, &cache))
                .collect::<Result<Vec<_>, Error>>()?
        }
        _ => Vec::new(),
    };

    // The recommended design: each planned stage with the values to build, as a stage of its own.
    let mut recommended: Vec<RecommendedStage> = Vec::new();
    if let Some(settings) = &plan.sizing {
        let mut taken: Vec<String> = plan.stages.iter().map(|s| s.name.clone()).collect();
        for (index, planned_stage) in plan.stages.iter().enumerate() {
            let outcomes: Vec<&SizingOutcome> = sizing
                .iter()
                .filter(|o| o.stage == planned_stage.name)
                .collect();
            let recommendation = match regions.iter().find(|r| r.stage_index == index) {
                Some(found) => region_recommendation(plan, settings, found, &found.chosen, &cache)?,
                None => sizing::recommend(plan, index, &outcomes, settings, &cache)?,
            };
            let mut stage = planned_stage.clone();
            stage.name = sizing::sized_name(&planned_stage.name, &taken);
            taken.push(stage.name.clone());
            recommendation.apply(&mut stage);
            recommended.push(RecommendedStage {
                recommendation,
                stage,
                cases: Vec::new(),
                spread: Vec::new(),
            });
        }
        if let Some(monte_carlo) = &plan.monte_carlo {
            for design in &mut recommended {
                let outcomes: Vec<&SizingOutcome> = sizing
                    .iter()
                    .filter(|o| o.stage == plan.stages[design.recommendation.stage_index].name)
                    .collect();
                match regions
                    .iter()
                    .find(|r| r.stage_index == design.recommendation.stage_index)
                {
                    Some(found) => {
                        raise_region_for_yield(plan, settings, monte_carlo, design, found, &cache)?
                    }
                    None => {
                        raise_for_yield(plan, settings, monte_carlo, design, &outcomes, &cache)?
                    }
                }
            }
        }
        progress(Progress::Recommended {
            stages: recommended.len(),
        });
        let derived: Vec<(usize, &Stage)> = recommended
            .iter()
            .map(|r| (r.recommendation.stage_index, &r.stage))
            .collect();
        let mut derived_cases = evaluate_cases(plan, &derived, &cache, progress)?;
        let per_stage = plan.temperatures_c.len() * plan.corners.len();
        for design in recommended.iter_mut().rev() {
            let start = derived_cases.len() - per_stage;
            design.cases = derived_cases.split_off(start);
        }
    }

    let population = match &plan.monte_carlo {
        Some(settings) => {
            progress(Progress::MonteCarlo {
                runs: settings.runs,
            });
            let mut stages = planned.clone();
            stages.extend(
                recommended
                    .iter()
                    .map(|r| (r.recommendation.stage_index, &r.stage)),
            );
            let counter = Counter::new(
                Phase::MonteCarlo,
                montecarlo::planned_runs(plan, settings, &stages),
                progress,
            );
            let population =
                montecarlo::evaluate_stages_observed(plan, settings, &stages, &cache, &|| {
                    counter.tick()
                })?;
            counter.finish();
            Some(population)
        }
        None => None,
    };
    judge_yield(plan, &mut evaluated, population.as_ref());
    for design in &mut recommended {
        judge_yield(plan, &mut design.cases, population.as_ref());
        design.spread = corner_spread(plan, &design.cases);
    }
    let spread = corner_spread(plan, &evaluated);
    let schemes = plan
        .comparison
        .as_ref()
        .map(|settings| crate::study::schemes::compare_schemes(plan, settings))
        .transpose()?;

    Ok(PlanEvaluation {
        schemes,
        cases: evaluated,
        spread,
        population,
        sizing,
        regions,
        recommended,
        fits,
        comparisons,
    })
}
