//! The work a plan asks for, estimated before anything is evaluated, so that an absurd plan
//! (a billion amplitudes, a trillion Monte Carlo runs) is refused in milliseconds with the
//! estimate and the way to raise the limit, instead of running for days.
//!
//! The unit of work is one *sample solve*: the large-signal solve of a stage at one input
//! value. A single-tone point costs about [`SAMPLES_PER_TONE`] of them (the adaptive FFT's
//! first two sample counts), a two-tone point about [`SAMPLES_PER_TWO_TONE`] (the 2-D grids
//! up to 64×64), and each stage and temperature a fixed [`SAMPLES_PER_CORNER`] for its
//! intercept, compression point, steering range and transfer curve. Monte Carlo repeats the
//! drive points once per run; sizing repeats the budget's measurements once per trial value.
//! The estimate is deliberately coarse (within a factor of a few): it exists to tell a
//! minutes-long plan from a years-long one.

use crate::model::plan::Plan;
use crate::study::region::{PRIMARY_POINTS, SECONDARY_POINTS};
use crate::study::sizing::SCAN_POINTS;

/// Sample solves of one single-tone drive point (first two adaptive sample counts).
pub const SAMPLES_PER_TONE: f64 = 768.0;
/// Sample solves of one two-tone drive point (grids of 16² to 64²).
pub const SAMPLES_PER_TWO_TONE: f64 = 5_376.0;
/// Fixed sample solves per stage and temperature (intercept, P1dB, steering, transfer curve).
pub const SAMPLES_PER_CORNER: f64 = 200_000.0;
/// Trial values of the emitter resistance a sizing search evaluates (scan plus refinement).
pub const SIZING_TRIALS: f64 = SCAN_POINTS as f64 + 12.0;
/// Designs a sizing search over two variables evaluates: the map, the refinement of the least
/// value (about ten bisection steps, each a row of the other variable and a golden-section
/// search), and the Pareto fronts' edges (about eight per grid row and front).
pub const REGION_DESIGNS: f64 = (PRIMARY_POINTS * SECONDARY_POINTS) as f64
    + 10.0 * (SECONDARY_POINTS as f64 + 20.0)
    + 2.0 * 8.0 * PRIMARY_POINTS as f64;
/// Model evaluations over every bench point a fit takes (coarse search, optimiser,
/// Jacobians and the final statistics; 25–50 for three parameters).
pub const FIT_EVALUATIONS: f64 = 50.0;
/// Default limit, sample solves: about a minute on one core of a 2020s laptop.
pub const DEFAULT_MAX_WORK: f64 = 5e9;

/// The estimated work of a plan, with the factors that make it up.
#[derive(Debug, Clone, PartialEq)]
pub struct Workload {
    /// Estimated sample solves of the whole plan.
    pub sample_solves: f64,
    /// The factors in words, e.g. "2 stages × 1 temperature × 1 frequency × 4096 amplitudes".
    pub breakdown: String,
    /// Key path of the largest multiplier the user controls (where to point an error).
    pub dominant_key: &'static str,
}

/// Estimates the work of `plan` (see the module docs for the cost model).
pub fn estimate(plan: &Plan) -> Workload {
    let stages = plan.stages.len() as f64;
    let temperatures = plan.temperatures_c.len() as f64;
    let frequencies = plan.drive.frequencies.len() as f64;
    let amplitudes = plan.drive.amplitudes.len() as f64;
    // Every stage and temperature is evaluated in every process corner.
    let corners = stages * temperatures * plan.corners.len().max(1) as f64;
    let per_point = SAMPLES_PER_TONE
        + if plan.drive.two_tone_spacing.is_some() {
            SAMPLES_PER_TWO_TONE
        } else {
            0.0
        };
    let sweep = corners * (frequencies * amplitudes * per_point + SAMPLES_PER_CORNER);
    let runs = plan.monte_carlo.as_ref().map_or(0.0, |mc| mc.runs as f64);
    let monte_carlo = runs * corners * (frequencies * amplitudes * per_point + SAMPLES_PER_CORNER);
    let trials = match &plan.sizing {
        Some(settings) if settings.is_emitter_only() => SIZING_TRIALS,
        Some(_) => REGION_DESIGNS,
        None => 0.0,
    };
    let sizing = trials * corners * (plan.budget.len() as f64 * per_point + SAMPLES_PER_CORNER);
    // A fit evaluates every measured point about FIT_EVALUATIONS times, and the fitted stage
    // is then evaluated through the plan like the nominal one.
    let fitted_stages = match &plan.fit {
        Some(_) => plan
            .stages
            .iter()
            .filter(|s| plan.measurements.iter().any(|m| m.stage == s.name))
            .count() as f64,
        None => 0.0,
    };
    let bench_points: f64 = plan
        .measurements
        .iter()
        .map(|m| m.points.len() as f64)
        .sum();
    let fit = if plan.fit.is_some() {
        bench_points * SAMPLES_PER_TONE * FIT_EVALUATIONS
            + fitted_stages / stages.max(1.0) * (sweep + monte_carlo + sizing)
    } else {
        0.0
    };
    let mut breakdown = format!(
        "{} stage(s) × {} temperature(s) × {} process corner(s) × {} frequency(ies) × {} amplitude(s) × ~{} samples",
        plan.stages.len(),
        plan.temperatures_c.len(),
        plan.corners.len().max(1),
        plan.drive.frequencies.len(),
        plan.drive.amplitudes.len(),
        per_point
    );
    if runs > 0.0 {
        breakdown.push_str(&format!(", × {runs} Monte Carlo runs"));
    }
    if sizing > 0.0 {
        breakdown.push_str(&format!(", + sizing ({trials} trials)"));
    }
    if fit > 0.0 {
        breakdown.push_str(&format!(
            ", + fit ({bench_points} bench points × ~{FIT_EVALUATIONS} evaluations, and the fitted stage(s))"
        ));
    }
    let dominant_key = if fit > sweep.max(sizing).max(monte_carlo) {
        "measurements"
    } else if monte_carlo > sweep.max(sizing) {
        "monte_carlo.runs"
    } else if sizing > sweep {
        "sizing"
    } else if amplitudes >= frequencies.max(temperatures).max(stages) {
        "drive.amplitudes"
    } else if frequencies >= temperatures.max(stages) {
        "drive.frequencies"
    } else if temperatures >= stages {
        "temperatures_c"
    } else {
        "stages"
    };
    Workload {
        sample_solves: sweep + monte_carlo + sizing + fit,
        breakdown,
        dominant_key,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::drive::Drive;
    use crate::model::plan::MonteCarloSettings;
    use crate::model::stage::Stage;

    fn plan() -> Plan {
        let amplitudes = (0..100).map(|i| 1e-3 * 1.07f64.powi(i)).collect();
        Plan::new(
            "w",
            vec![Stage::new("a", 1e-3, 2e3)],
            Drive::new(amplitudes),
        )
    }

    #[test]
    fn the_estimate_multiplies_the_plan_factors() {
        // 1 stage × 1 temperature × 1 frequency × 100 amplitudes × 768 + one corner's fixed part.
        let work = estimate(&plan());
        assert_eq!(
            work.sample_solves,
            100.0 * SAMPLES_PER_TONE + SAMPLES_PER_CORNER
        );
        assert_eq!(work.dominant_key, "drive.amplitudes");
    }

    #[test]
    fn monte_carlo_runs_multiply_the_sweep_and_dominate() {
        let plan = plan().monte_carlo(MonteCarloSettings {
            runs: 1_000_000_000_000,
            seed: 1,
        });
        let work = estimate(&plan);
        let sweep = 100.0 * SAMPLES_PER_TONE + SAMPLES_PER_CORNER;
        assert_eq!(work.sample_solves, sweep * (1.0 + 1e12));
        assert_eq!(work.dominant_key, "monte_carlo.runs");
    }

    #[test]
    fn sizing_the_current_costs_the_region_designs() {
        use crate::model::budget::{BudgetLine, Limit, Metric};
        use crate::model::plan::SizingSettings;
        let line = BudgetLine::new(Metric::Harmonic(3), Limit::Max(-60.0)).at(0.1);
        let one = plan()
            .budget_line(line.clone())
            .sizing(SizingSettings::new(0.0, 1e3));
        let two = plan()
            .budget_line(line)
            .sizing(SizingSettings::new(0.0, 1e3).tail_current(1e-4, 1e-3));
        let per_trial = SAMPLES_PER_TONE + SAMPLES_PER_CORNER;
        let sweep = 100.0 * SAMPLES_PER_TONE + SAMPLES_PER_CORNER;
        assert_eq!(
            estimate(&one).sample_solves,
            sweep + SIZING_TRIALS * per_trial
        );
        assert_eq!(
            estimate(&two).sample_solves,
            sweep + REGION_DESIGNS * per_trial
        );
    }
}
