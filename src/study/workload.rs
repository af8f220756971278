//! The work a plan asks for, estimated before anything is evaluated, so that an absurd plan
//! (a billion amplitudes, a trillion Monte Carlo runs, a dense sweep of a stage with
//! capacitance) is refused in milliseconds with the estimate and the way to raise the limit,
//! instead of running for days — while a large plan of cheap points is admitted.
//!
//! The estimate is a time: seconds of one core of the reference machine (the 2-core
//! development machine of `benches/README.md`), counted per engine, because their costs per
//! drive point differ by four orders of magnitude:
//!
//! | piece | cost |
//! |---|---|
//! | single tone, matched memoryless pair (quarter-period fast path) | [`SYMMETRIC_TONE_S`] |
//! | single tone, other memoryless stages (every sample solved) | [`GENERAL_TONE_S`] (×[`REDUCED_FACTOR`] when the one-unknown solve applies) |
//! | two tones, memoryless (2-D grids up to 64×64) | [`MEMORYLESS_TWO_TONE_S`] (same factor) |
//! | single tone, stage with charge storage (periodic steady state) | [`DYNAMIC_TONE_S`] plus [`DYNAMIC_TONE_HARMONIC_S`] per harmonic analysed; a multi-tanh cell one pair's cost per pair |
//! | two tones, stage with charge storage | [`DYNAMIC_TWO_TONE_CYCLE_S`] per upper-tone cycle of the common period |
//! | stage-wide figures per frequency (IIP3 search, P1dB search) | [`INTERCEPT_TWO_TONES`] two-tone and [`COMPRESSION_TONES`] single-tone analyses |
//! | stage-wide static figures per case (steering, offset, transfer curve, noise) | [`STATIC_CASE_S`] |
//! | Monte Carlo, per run | the drive points at their nominal resolution, [`MONTE_CARLO_RUN_S`] fixed, and the stage-wide figures when a budget line needs them; a stage with charge storage: every drive point at every frequency and the measurements of every budget line, as a sizing trial |
//! | sizing | [`SIZING_TRIALS`] trials ([`REGION_DESIGNS`] when the tail current is sized too) × corners × the measurements the budget lines need, then the recommended design evaluated in full (its population too, [`YIELD_SEARCH_POPULATIONS`] more with a yield line) |
//! | a fit to bench data | [`FIT_EVALUATIONS`] single tones per bench point, then the fitted stage evaluated in full |
//! | the report (tables and figures) | [`REPORT_S`] + [`REPORT_POINT_S`] per point, and [`PROCESS_S`] of wall time |
//!
//! The constants were fitted to measured runs of the demo and benchmark plans and of plans
//! built to stress each engine (table in `benches/README.md`): the ratio of estimate to
//! measured time stays within a factor of a few across them. The wall time is the CPU time
//! spread over the worker threads, as far as the plan has independent pieces to spread.

use crate::model::budget::Metric;
use crate::model::circuit::StageCircuit;
use crate::model::plan::Plan;
use crate::model::products::common_period_cycles;
use crate::model::stage::Stage;
use crate::model::topology::Topology;
use crate::solve::symmetric;
use crate::study::region::{PRIMARY_POINTS, SECONDARY_POINTS};
use crate::study::sizing::SCAN_POINTS;

/// One single tone through the matched-pair fast path, s.
pub const SYMMETRIC_TONE_S: f64 = 5e-6;
/// One single tone solved sample by sample (general memoryless stage), s.
pub const GENERAL_TONE_S: f64 = 3e-5;
/// Added per harmonic analysed to a general single tone, s.
pub const GENERAL_TONE_HARMONIC_S: f64 = 6e-7;
/// Cost of the one-unknown solve (ideal tail, no Early effect, mismatched) against the general
/// solve's joint Newton: the same at plan level (a 4,096-point sweep of each, 0.26 s and 0.28 s
/// of CPU; benches/README.md), so the costs above, calibrated when the general solve was nested
/// and 20× slower, stay as they were for the one-unknown solve.
pub const REDUCED_FACTOR: f64 = 1.0;
/// One memoryless two-tone analysis (general solve), s.
pub const MEMORYLESS_TWO_TONE_S: f64 = 2.5e-3;
/// One memoryless two-tone analysis of a matched pair with the one-unknown solve, s.
pub const SYMMETRIC_TWO_TONE_S: f64 = 5e-4;
/// One single tone of a stage with charge storage, s: harmonic balance settles a mild point
/// in about 0.3–0.4 ms whatever the harmonics analysed; a fully steered or saturating point
/// goes to the shooting solve, several times dearer (benches/README.md).
pub const DYNAMIC_TONE_S: f64 = 6e-4;
/// Added per harmonic analysed to a single tone with charge storage, s.
pub const DYNAMIC_TONE_HARMONIC_S: f64 = 1e-5;
/// One two-tone periodic steady state, per upper-tone cycle of the common period, s (about
/// 2 ms for 11 cycles by harmonic balance).
pub const DYNAMIC_TWO_TONE_CYCLE_S: f64 = 3e-4;
/// Two-tone analyses an IIP3 search costs (halving until the slope is 3:1), per engine: the
/// matched pair's grids grow as the drive falls, the general solve's shrink, and the periodic
/// steady state refines further at each level.
pub const INTERCEPT_TWO_TONES: [f64; 3] = [6.0, 2.5, 8.0];
/// Single tones of a P1dB search (bracketing, interpolation in A² and the closing tone: 6.4
/// per frequency on average over the demo plans), each resolving
/// [`crate::measure::large_signal::COMPRESSION_HARMONICS`] harmonics.
pub const COMPRESSION_TONES: f64 = 7.0;
/// Static figures of one case (steering, offset, transfer curve, noise) through the general
/// solve, s (calibrated with the nested solve, now an upper bound); a tenth of it with the
/// one-unknown solve.
pub const STATIC_CASE_S: f64 = 5e-3;
/// Fixed part of one Monte Carlo run (offset search, gain, noise), s.
pub const MONTE_CARLO_RUN_S: f64 = 1e-5;
/// A Monte Carlo run analyses each drive point at the nominal's converged sample count only:
/// this fraction of an adaptive analysis.
pub const MONTE_CARLO_POINT_FACTOR: f64 = 0.3;
/// Populations the upward search for a yield line draws, on average (a probe each, most
/// searches ending within two).
pub const YIELD_SEARCH_POPULATIONS: f64 = 1.5;
/// Trial values of the emitter resistance a sizing search evaluates (scan plus refinement).
pub const SIZING_TRIALS: f64 = SCAN_POINTS as f64 + 12.0;
/// Designs a sizing search over two variables (tail current and emitter resistance)
/// evaluates: the map, the refinement of the least value (about ten bisection steps, each a row
/// of the other variable and a golden-section search), and the Pareto fronts' edges (about
/// eight per grid row and front).
pub const REGION_DESIGNS: f64 = (PRIMARY_POINTS * SECONDARY_POINTS) as f64
    + 10.0 * (SECONDARY_POINTS as f64 + 20.0)
    + 2.0 * 8.0 * PRIMARY_POINTS as f64;

/// Trials the plan's sizing evaluates per stage and temperature: the one-variable scan, or the
/// designs of a region search.
pub fn sizing_trials(plan: &Plan) -> f64 {
    match &plan.sizing {
        Some(settings) if settings.is_emitter_only() => SIZING_TRIALS,
        Some(_) => REGION_DESIGNS,
        None => 0.0,
    }
}
/// Writing the report: tables, documents and figures, s.
pub const REPORT_S: f64 = 0.03;
/// Writing the report, per drive point, s.
pub const REPORT_POINT_S: f64 = 4e-6;
/// Wall time of starting the process and putting the report folder on disk (files and folder
/// synced before the swap), s; waiting on the disk costs no CPU.
pub const PROCESS_S: f64 = 0.05;
/// Model evaluations over every bench point a fit takes (coarse search, optimiser,
/// Jacobians and the final statistics; 25–50 for three parameters).
pub const FIT_EVALUATIONS: f64 = 50.0;
/// Default limit on the estimated wall time, s (ten minutes).
pub const DEFAULT_MAX_WORK: f64 = 600.0;

/// The estimated work of a plan, with the factors that make it up.
#[derive(Debug, Clone, PartialEq)]
pub struct Workload {
    /// Estimated CPU time on one core of the reference machine, s.
    pub cpu_seconds: f64,
    /// Estimated wall time with the worker threads available, s.
    pub wall_seconds: f64,
    /// The factors in words, e.g. "2 stages × 1 temperature × 1 frequency × 4096 amplitudes".
    pub breakdown: String,
    /// Key path of the largest multiplier the user controls (where to point an error).
    pub dominant_key: &'static str,
}

/// How one stage is solved, for costing.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Engine {
    /// Matched memoryless pair with the quarter-period fast path.
    Symmetric,
    /// Memoryless, every sample solved; `reduced` when the one-unknown solve applies.
    General { reduced: bool },
    /// Periodic steady state.
    Dynamic,
}

impl Engine {
    fn of(stage: &Stage, temperature_c: f64) -> Engine {
        let circuit = StageCircuit::new(stage, temperature_c);
        if !circuit.is_memoryless() {
            Engine::Dynamic
        } else if symmetric::applies(&circuit) {
            Engine::Symmetric
        } else {
            Engine::General {
                reduced: circuit.is_reducible(),
            }
        }
    }

    fn tone_s(self, harmonics: usize) -> f64 {
        match self {
            Engine::Symmetric => SYMMETRIC_TONE_S,
            Engine::General { reduced } => {
                (GENERAL_TONE_S + GENERAL_TONE_HARMONIC_S * harmonics as f64)
                    * if reduced { REDUCED_FACTOR } else { 1.0 }
            }
            Engine::Dynamic => DYNAMIC_TONE_S + DYNAMIC_TONE_HARMONIC_S * harmonics.max(3) as f64,
        }
    }

    fn two_tone_s(self, frequency_hz: f64, spacing_hz: f64) -> f64 {
        match self {
            Engine::Symmetric => SYMMETRIC_TWO_TONE_S,
            Engine::General { reduced } => {
                MEMORYLESS_TWO_TONE_S * if reduced { REDUCED_FACTOR } else { 1.0 }
            }
            Engine::Dynamic => {
                let cycles = common_period_cycles(frequency_hz, spacing_hz)
                    .map_or(crate::model::products::MAX_COMMON_PERIOD_CYCLES, |(_, q)| q);
                DYNAMIC_TWO_TONE_CYCLE_S * cycles.max(2) as f64
            }
        }
    }

    /// Static figures of one case.
    fn static_s(self) -> f64 {
        match self {
            Engine::Symmetric | Engine::General { reduced: true } => 0.1 * STATIC_CASE_S,
            Engine::General { reduced: false } | Engine::Dynamic => STATIC_CASE_S,
        }
    }

    /// An IIP3 search at one frequency.
    fn intercept_s(self, frequency_hz: f64, spacing_hz: f64) -> f64 {
        let count = match self {
            Engine::Symmetric => INTERCEPT_TWO_TONES[0],
            Engine::General { .. } => INTERCEPT_TWO_TONES[1],
            Engine::Dynamic => INTERCEPT_TWO_TONES[2],
        };
        count * self.two_tone_s(frequency_hz, spacing_hz)
    }

    /// IIP3 search and P1dB search at one frequency.
    fn stage_wide_s(self, frequency_hz: f64, spacing_hz: f64) -> f64 {
        self.intercept_s(frequency_hz, spacing_hz)
            + COMPRESSION_TONES * self.tone_s(crate::measure::large_signal::COMPRESSION_HARMONICS)
    }
}

/// Measurements the plan's budget lines need of one design at one corner and temperature
/// (a sizing trial, a Monte Carlo run of a stage with charge storage), s.
fn budget_lines_s(plan: &Plan, engine: Engine, harmonics: usize) -> f64 {
    let first = plan.drive.frequencies.first().copied().unwrap_or(1e3);
    let spacing = |f: f64| plan.drive.spacing_at(f);
    plan.budget
        .iter()
        .map(|line| {
            let f = line.frequency.unwrap_or(first);
            match line.metric {
                Metric::Harmonic(_) | Metric::Thd | Metric::CollectorBaseMargin => {
                    engine.tone_s(harmonics)
                }
                Metric::Im3 => engine.two_tone_s(f, spacing(f)),
                Metric::Iip3 | Metric::Oip3 => engine.intercept_s(f, spacing(f)),
                Metric::P1db => COMPRESSION_TONES * engine.tone_s(9),
                Metric::Gain => {
                    if engine == Engine::Dynamic {
                        engine.tone_s(3)
                    } else {
                        0.0
                    }
                }
                Metric::SteeringRange | Metric::InputNoise | Metric::Yield => 0.0,
            }
        })
        .sum()
}

/// Estimates the work of `plan` (see the module docs for the cost model).
pub fn estimate(plan: &Plan) -> Workload {
    let temperatures = plan.temperatures_c.len() as f64;
    let corners = plan.corners.len().max(1) as f64;
    let amplitudes = plan.drive.amplitudes.len() as f64;
    let frequencies = &plan.drive.frequencies;
    let harmonics = plan.drive.thd_harmonics.max(9);
    let reference_temperature = plan.temperatures_c.first().copied().unwrap_or(27.0);
    let spacing = |f: f64| plan.drive.spacing_at(f);

    let mut sweep = 0.0;
    let mut monte_carlo = 0.0;
    let mut sizing = 0.0;
    let mut sweep_per_stage: Vec<f64> = Vec::with_capacity(plan.stages.len());
    for stage in &plan.stages {
        let engine = Engine::of(stage, reference_temperature);
        // A multi-tanh cell with charge storage solves every pair's nodes at once: about
        // one pair's cost per pair (the doublet demo's steady states cost 2.3× the pair's).
        let cell = if engine == Engine::Dynamic && stage.topology == Topology::MultiTanh {
            stage.multi_tanh.pairs().len().max(1) as f64
        } else {
            1.0
        };
        // Every drive point once: its tone, and its two tones with two-tone drive.
        let drive_points: f64 = cell
            * frequencies
                .iter()
                .map(|&f| {
                    amplitudes
                        * (engine.tone_s(harmonics)
                            + plan
                                .drive
                                .two_tone_spacing
                                .map_or(0.0, |s| engine.two_tone_s(f, s)))
                })
                .sum::<f64>();
        let points: f64 = drive_points
            + cell
                * frequencies
                    .iter()
                    .map(|&f| engine.stage_wide_s(f, spacing(f)))
                    .sum::<f64>();
        let stage_sweep = temperatures * corners * (points + engine.static_s());
        sweep += stage_sweep;
        sweep_per_stage.push(stage_sweep);

        if let Some(mc) = &plan.monte_carlo {
            let draws = stage.mismatch_sigma != crate::model::stage::Mismatch::default();
            if draws && engine != Engine::Dynamic {
                // Every run solves each drive point sample by sample at the nominal resolution.
                let general = Engine::General {
                    reduced: StageCircuit::new(stage, reference_temperature).is_reducible(),
                };
                let per_point = MONTE_CARLO_POINT_FACTOR
                    * (general.tone_s(harmonics)
                        + plan
                            .drive
                            .two_tone_spacing
                            .map_or(0.0, |s| general.two_tone_s(frequencies[0], s)));
                let figures = plan.budget.iter().any(|l| {
                    matches!(
                        l.metric,
                        Metric::Iip3 | Metric::Oip3 | Metric::P1db | Metric::SteeringRange
                    )
                });
                let per_run = amplitudes * per_point
                    + MONTE_CARLO_RUN_S
                    + if figures {
                        general.stage_wide_s(frequencies[0], spacing(frequencies[0]))
                            + general.static_s()
                    } else {
                        0.0
                    };
                monte_carlo += mc.runs as f64 * temperatures * per_run;
            } else if draws {
                // A stage with charge storage: every run solves the periodic steady state of
                // each drive point at every frequency, then each budget line afresh.
                let per_run = drive_points
                    + cell * budget_lines_s(plan, engine, harmonics)
                    + MONTE_CARLO_RUN_S;
                monte_carlo += mc.runs as f64 * temperatures * per_run;
            }
        }

        if plan.sizing.is_some() {
            let lines = budget_lines_s(plan, engine, harmonics);
            let hold = plan.sizing.as_ref().is_some_and(|s| s.hold_gain);
            let headroom = if hold { engine.tone_s(3) } else { 0.0 };
            sizing += temperatures
                * sizing_trials(plan)
                * (corners * cell * (lines + headroom) + engine.static_s());
        }
    }
    // A fit evaluates every measured point about FIT_EVALUATIONS times as a single tone, and
    // the fitted stage is then evaluated through the plan like the nominal one.
    let bench_points: f64 = plan
        .measurements
        .iter()
        .map(|m| m.points.len() as f64)
        .sum();
    let fit = match &plan.fit {
        Some(_) => {
            let per_stage = sweep_per_stage.iter().copied().sum::<f64>();
            let fitted: f64 = plan
                .stages
                .iter()
                .zip(&sweep_per_stage)
                .filter(|(s, _)| plan.measurements.iter().any(|m| m.stage == s.name))
                .map(|(_, cost)| cost)
                .sum();
            let tone = plan
                .stages
                .iter()
                .filter(|s| plan.measurements.iter().any(|m| m.stage == s.name))
                .map(|s| Engine::of(s, reference_temperature).tone_s(harmonics))
                .fold(0.0, f64::max);
            bench_points * tone * FIT_EVALUATIONS
                + fitted * (1.0 + (monte_carlo + sizing) / per_stage.max(f64::MIN_POSITIVE))
        }
        None => 0.0,
    };
    // With sizing, the recommended design is evaluated in full as a stage of its own, with its
    // own population; a yield line sends the recommendation up the window, a population per
    // probe.
    let recommended = if plan.sizing.is_some() {
        let yield_line = plan.budget.iter().any(|l| l.metric == Metric::Yield);
        sweep
            + monte_carlo
                * (1.0
                    + if yield_line {
                        YIELD_SEARCH_POPULATIONS
                    } else {
                        0.0
                    })
    } else {
        0.0
    };
    let points =
        plan.stages.len() as f64 * temperatures * corners * frequencies.len() as f64 * amplitudes;
    let report = REPORT_S + REPORT_POINT_S * points;
    let cpu_seconds = sweep + monte_carlo + sizing + fit + recommended + report;

    // Independent pieces the evaluation spreads over the threads: the cases and their points,
    // Monte Carlo runs, sizing trials.
    let threads = rayon::current_num_threads().max(1) as f64;
    let spread = |pieces: f64| pieces.clamp(1.0, threads);
    let cases = plan.stages.len() as f64 * temperatures * corners;
    let wall_seconds = sweep / spread(cases * (points / cases.max(1.0) + 1.0))
        + monte_carlo / spread(plan.monte_carlo.as_ref().map_or(1.0, |m| m.runs as f64))
        + sizing / spread(sizing_trials(plan) * plan.stages.len() as f64 * temperatures)
        + fit / spread(cases)
        + recommended / spread(cases.max(plan.monte_carlo.as_ref().map_or(1.0, |m| m.runs as f64)))
        + report / spread(4.0)
        + PROCESS_S;

    let mut breakdown = format!(
        "{} stage(s) × {} temperature(s) × {} process corner(s) × {} frequency(ies) × {} amplitude(s)",
        plan.stages.len(),
        plan.temperatures_c.len(),
        plan.corners.len().max(1),
        frequencies.len(),
        plan.drive.amplitudes.len(),
    );
    if let Some(mc) = &plan.monte_carlo {
        breakdown.push_str(&format!(", {} Monte Carlo run(s)", mc.runs));
    }
    if plan.sizing.is_some() {
        breakdown.push_str(&format!(", sizing ({} trials)", sizing_trials(plan)));
    }
    if fit > 0.0 {
        breakdown.push_str(&format!(
            ", fit ({bench_points} bench points × ~{FIT_EVALUATIONS} evaluations, and the fitted stage(s))"
        ));
    }
    breakdown.push_str(&format!(
        "; drive points {}, Monte Carlo {}, sizing {}, fit {} of one core",
        format_duration(sweep + recommended),
        format_duration(monte_carlo),
        format_duration(sizing),
        format_duration(fit)
    ));
    let (stages, frequency_count) = (plan.stages.len() as f64, frequencies.len() as f64);
    let dominant_key = if fit > sweep.max(sizing).max(monte_carlo) {
        "measurements"
    } else if monte_carlo > sweep.max(sizing) {
        "monte_carlo.runs"
    } else if sizing > sweep {
        "sizing"
    } else if amplitudes >= frequency_count.max(temperatures).max(stages) {
        "drive.amplitudes"
    } else if frequency_count >= temperatures.max(stages) {
        "drive.frequencies"
    } else if temperatures >= stages {
        "temperatures_c"
    } else {
        "stages"
    };
    Workload {
        cpu_seconds,
        wall_seconds,
        breakdown,
        dominant_key,
    }
}

/// A duration for people: `250 ms`, `42 s`, `12 min`, `3.5 h`, `40 days`.
pub fn format_duration(seconds: f64) -> String {
    let short = crate::units::short_number;
    let round = |x: f64| {
        if x >= 10.0 {
            x.round()
        } else {
            (x * 10.0).round() / 10.0
        }
    };
    if !seconds.is_finite() {
        "forever".into()
    } else if seconds < 1.0 {
        format!("{} ms", short(round(seconds * 1e3)))
    } else if seconds < 120.0 {
        format!("{} s", short(round(seconds)))
    } else if seconds < 2.0 * 3600.0 {
        format!("{} min", short(round(seconds / 60.0)))
    } else if seconds < 2.0 * 86400.0 {
        format!("{} h", short(round(seconds / 3600.0)))
    } else {
        format!("{} days", short(round(seconds / 86400.0)))
    }
}

/// Reads a work limit: a duration with a unit (`90s`, `10min`, `1.5h`, `2d`, `500ms`, or a
/// sum such as `1h30min`), or a plain number of seconds (SI base unit), so a limit written
/// as a large plain number (the sample-solve counts earlier versions took, such as `1e12`)
/// still raises the limit far. Returns seconds.
pub fn parse_duration(text: &str) -> Result<f64, String> {
    let refuse = || {
        format!(
            "`{text}` is not a duration: a positive number with a unit (ms, s, min, h, d), e.g. 90s, 10min, 1.5h, or plain seconds"
        )
    };
    let cleaned: String = text.chars().filter(|c| !c.is_whitespace()).collect();
    if cleaned.is_empty() {
        return Err(refuse());
    }
    if let Ok(seconds) = cleaned.parse::<f64>() {
        return if seconds.is_finite() && seconds > 0.0 {
            Ok(seconds)
        } else {
            Err(refuse())
        };
    }
    let mut total = 0.0;
    let mut rest = cleaned.as_str();
    while !rest.is_empty() {
        let number_end = rest
            .find(|c: char| !(c.is_ascii_digit() || c == '.'))
            .unwrap_or(rest.len());
        let number: f64 = rest[..number_end].parse().map_err(|_| refuse())?;
        rest = &rest[number_end..];
        let unit_end = rest
            .find(|c: char| c.is_ascii_digit() || c == '.')
            .unwrap_or(rest.len());
        let scale = match &rest[..unit_end] {
            "ms" => 1e-3,
            "s" | "sec" => 1.0,
            "m" | "min" => 60.0,
            "h" | "hr" => 3600.0,
            "d" | "day" | "days" => 86400.0,
            _ => return Err(refuse()),
        };
        total += number * scale;
        rest = &rest[unit_end..];
    }
    if total.is_finite() && total > 0.0 {
        Ok(total)
    } else {
        Err(refuse())
    }
}

/// A limit to suggest for a plan estimated at `seconds`: comfortably above it, in whole
/// minutes (or hours), written so [`parse_duration`] reads it back.
pub fn suggested_limit(seconds: f64) -> String {
    let wanted = (seconds * 1.5).max(60.0);
    if wanted < 2.0 * 3600.0 {
        format!("{}min", (wanted / 60.0).ceil() as u64)
    } else if wanted < 1e7 {
        format!("{}h", (wanted / 3600.0).ceil() as u64)
    } else if wanted < 1e9 {
        format!("{}d", (wanted / 86400.0).ceil() as u64)
    } else {
        // Plain seconds, one significant digit rounded up.
        let exponent = wanted.log10().floor();
        let mantissa = (wanted / 10f64.powf(exponent) * (1.0 + 1e-12)).ceil();
        if mantissa >= 10.0 {
            format!("1e{}", exponent + 1.0)
        } else {
            format!("{mantissa}e{exponent}")
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::drive::Drive;
    use crate::model::plan::MonteCarloSettings;
    use crate::model::stage::Mismatch;
    use crate::model::transistor::Transistor;

    fn plan(stage: Stage, amplitudes: usize) -> Plan {
        let amplitudes = (0..amplitudes)
            .map(|i| 1e-3 * 1.001f64.powi(i as i32))
            .collect();
        Plan::new("w", vec![stage], Drive::new(amplitudes))
    }

    #[test]
    fn the_estimate_grows_with_the_points_and_the_engine_cost() {
        let small = estimate(&plan(Stage::new("a", 1e-3, 2e3), 100));
        let large = estimate(&plan(Stage::new("a", 1e-3, 2e3), 10_000));
        assert!(large.cpu_seconds > small.cpu_seconds);
        assert_eq!(large.dominant_key, "drive.amplitudes");
        // The same sweep through the general solve (Early effect) costs more (about 4× at
        // plan level, benches/README.md), and a stage with capacitance far more again.
        let early = estimate(&plan(
            Stage::new("a", 1e-3, 2e3).transistor(Transistor::default().early_voltage(50.0)),
            10_000,
        ));
        let capacitive = estimate(&plan(
            Stage::new("a", 1e-3, 2e3).load_capacitance(1e-12),
            10_000,
        ));
        assert!(early.cpu_seconds > 3.0 * large.cpu_seconds);
        assert!(capacitive.cpu_seconds > 10.0 * early.cpu_seconds);
    }

    #[test]
    fn monte_carlo_runs_multiply_the_points_and_dominate() {
        let stage =
            Stage::new("a", 1e-3, 2e3).mismatch_sigma(Mismatch::default().saturation_current(0.01));
        let base = estimate(&plan(stage.clone(), 10));
        let many = estimate(&plan(stage, 10).monte_carlo(MonteCarloSettings {
            runs: 1_000_000_000_000,
            seed: 1,
        }));
        assert!(many.cpu_seconds > 1e6 * base.cpu_seconds);
        assert_eq!(many.dominant_key, "monte_carlo.runs");
    }

    #[test]
    fn a_population_of_a_stage_with_charge_storage_is_costed_per_run_and_frequency() {
        // Each run of such a stage solves its own periodic steady state at every frequency, so
        // the population costs about runs × frequencies × one dynamic tone (it was costed as
        // nothing, and a plan of a million runs passed any limit).
        let stage = Stage::new("a", 1e-3, 2e3)
            .load_capacitance(1e-12)
            .mismatch_sigma(Mismatch::default().load_capacitance(0.02));
        let with_runs = |runs: u64, frequencies: Vec<f64>| {
            estimate(
                &Plan::new(
                    "w",
                    vec![stage.clone()],
                    Drive::new(vec![0.05]).frequencies(frequencies),
                )
                .monte_carlo(MonteCarloSettings { runs, seed: 1 }),
            )
        };
        let base = estimate(&Plan::new(
            "w",
            vec![stage.clone()],
            Drive::new(vec![0.05]).frequencies(vec![1e7]),
        ));
        let one = with_runs(1000, vec![1e7]);
        let two = with_runs(1000, vec![1e7, 2e7]);
        let tone = Engine::Dynamic.tone_s(crate::model::drive::DEFAULT_THD_HARMONICS.max(9));
        let population = one.cpu_seconds - base.cpu_seconds;
        assert!(
            population > 500.0 * tone && population < 2000.0 * tone,
            "{population} s"
        );
        assert!(two.cpu_seconds - one.cpu_seconds > 900.0 * tone);
        assert_eq!(
            with_runs(1_000_000, vec![1e7]).dominant_key,
            "monte_carlo.runs"
        );
    }

    #[test]
    fn durations_are_read_with_their_units() {
        for (text, seconds) in [
            ("10min", 600.0),
            ("90s", 90.0),
            ("1.5h", 5400.0),
            ("1h30min", 5400.0),
            ("500ms", 0.5),
            ("2d", 172800.0),
            ("45", 45.0),
            ("1e12", 1e12),
            (" 3 min ", 180.0),
        ] {
            assert_eq!(parse_duration(text), Ok(seconds), "{text}");
        }
        for bad in ["", "-5min", "0", "10 parsecs", "min", "inf", "NaN"] {
            assert!(parse_duration(bad).is_err(), "{bad}");
        }
    }

    #[test]
    fn the_suggested_limit_is_accepted_and_admits_the_plan() {
        for seconds in [0.5, 59.0, 601.0, 7199.0, 9e5, 4e12, 1e30] {
            let text = suggested_limit(seconds);
            let limit = parse_duration(&text).unwrap();
            assert!(limit >= seconds, "{text} for {seconds}");
        }
    }

    #[test]
    fn sizing_the_current_costs_the_region_designs() {
        use crate::model::budget::{BudgetLine, Limit, Metric};
        use crate::model::drive::Drive;
        use crate::model::plan::SizingSettings;
        use crate::model::stage::Stage;
        let line = BudgetLine::new(Metric::Harmonic(3), Limit::Max(-60.0)).at(0.1);
        let base = Plan::new("w", vec![Stage::new("a", 1e-3, 2e3)], Drive::new(vec![0.1]))
            .budget_line(line);
        let none = estimate(&base.clone());
        let one = estimate(&base.clone().sizing(SizingSettings::new(0.0, 1e3)));
        let two = estimate(
            &base
                .clone()
                .sizing(SizingSettings::new(0.0, 1e3).tail_current(1e-4, 1e-3)),
        );
        // The sizing part scales with the trials, the rest is the same plan.
        let ratio = (two.cpu_seconds - none.cpu_seconds) / (one.cpu_seconds - none.cpu_seconds);
        assert!(ratio > 0.5 * REGION_DESIGNS / SIZING_TRIALS, "{ratio}");
        assert!(two
            .breakdown
            .contains(&format!("sizing ({REGION_DESIGNS} trials)")));
    }
}
