//! Monte Carlo mismatch: the population of dies a stage's matching produces.
//!
//! For each stage and temperature (in the typical process corner), `runs` draws of the P-over-M
//! fractions δ (saturation current, emitter, load and base resistance, β) are made, each
//! normal with mean the plan's `mismatch` and standard deviation `mismatch_sigma`; a draw with
//! `1 + δ ≤ 0.01` (a non-physical element) is drawn again. Every run solves the drive points
//! and the budget lines; the report gives per drive point and metric the median, 5th and 95th
//! percentiles, and the fraction of runs meeting every budget line with a 95 % Wilson score
//! interval.
//!
//! Reproducibility: run `r` of stage `s` at temperature index `t` draws from ChaCha8 keyed by
//! `(seed, s, t)` on stream `r`, so each run's numbers depend only on the seed and its own
//! indices, never on the thread count or the order in which rayon schedules the runs.
//!
//! Stages with charge storage are drawn the same way (the same draws, the same fields); each
//! run solves the periodic steady state of every frequency and amplitude with the dynamic
//! engine, which carries the drawn values into both sides' elements.
//!
//! Cost: for a memoryless stage a run evaluates each amplitude once (frequency only
//! labels the records) with the sample count the converged nominal analysis needed, one
//! offset search, and only the budget figures the plan asks for (intercept or compression
//! searches per run only when a budget line constrains them).
//!
//! Percentiles: the sample quantile by linear interpolation between order statistics
//! (`h = (n − 1)·p`). A harmonic below the analysis floor counts as −∞ and an unbounded
//! intercept as +∞; a percentile that falls on or next to such a value is reported as null.

use crate::error::{Error, SolveFailure};
use crate::measure::budget::judge;
use crate::measure::noise::input_noise_density;
use crate::measure::small_signal::{offset_voltage, small_signal_gain};
use crate::measure::stage::{DriveSettings, StageMeasurements};
use crate::model::budget::Metric;
use crate::model::circuit::StageCircuit;
use crate::model::plan::{MonteCarloSettings, Plan};
use crate::model::stage::{Mismatch, Stage};
use crate::solve::engine::engine_for;
use crate::solve::memoryless::{single_tone, two_tone, two_tone_grid, MemorylessEngine};
use crate::solve::response::{RegionCheck, ResponseEngine};
use crate::solve::spectrum::{FftCache, ANALYSIS_FLOOR_DBC};
use crate::solve::transfer::{StaticSolver, WarmStart};
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, StandardNormal};
use rayon::prelude::*;
use std::sync::Arc;

/// Two-sided standard normal quantile for a 95 % interval.
pub const Z_95: f64 = 1.959_963_984_540_054;

/// The random generator of one run.
pub fn run_rng(seed: u64, stage_index: usize, temperature_index: usize, run: u64) -> ChaCha8Rng {
    let mut key = [0u8; 32];
    key[..8].copy_from_slice(&seed.to_le_bytes());
    key[8..16].copy_from_slice(&(stage_index as u64).to_le_bytes());
    key[16..24].copy_from_slice(&(temperature_index as u64).to_le_bytes());
    let mut rng = ChaCha8Rng::from_seed(key);
    rng.set_stream(run);
    rng
}

/// Draws one set of mismatch fractions (always nine normals, in a fixed order, so adding a
/// sigma to one parameter does not shift the others' draws).
pub fn draw_mismatch(rng: &mut ChaCha8Rng, mean: &Mismatch, sigma: &Mismatch) -> Mismatch {
    let mut one = |m: f64, s: f64| -> f64 {
        loop {
            let z: f64 = StandardNormal.sample(rng);
            let delta = m + s * z;
            if 1.0 + delta > 0.01 {
                return delta;
            }
        }
    };
    Mismatch {
        saturation_current: one(mean.saturation_current, sigma.saturation_current),
        emitter_resistance: one(mean.emitter_resistance, sigma.emitter_resistance),
        load_resistance: one(mean.load_resistance, sigma.load_resistance),
        base_resistance: one(mean.base_resistance, sigma.base_resistance),
        beta: one(mean.beta, sigma.beta),
        // Charge-storage fractions, then the split tail's source difference, come after the
        // first five, so populations drawn before they existed keep their dies.
        load_capacitance: one(mean.load_capacitance, sigma.load_capacitance),
        emitter_junction_capacitance: one(
            mean.emitter_junction_capacitance,
            sigma.emitter_junction_capacitance,
        ),
        collector_junction_capacitance: one(
            mean.collector_junction_capacitance,
            sigma.collector_junction_capacitance,
        ),
        transit_time: one(mean.transit_time, sigma.transit_time),
        tail_current: one(mean.tail_current, sigma.tail_current),
    }
}

/// Sample quantile `p` of ascending `sorted` (linear interpolation between order statistics);
/// `None` when it involves an infinite entry (below the floor or unbounded).
pub fn quantile(sorted: &[f64], p: f64) -> Option<f64> {
    if sorted.is_empty() {
        return None;
    }
    let h = (sorted.len() - 1) as f64 * p;
    let low = h.floor() as usize;
    let fraction = h - low as f64;
    let a = sorted[low];
    if fraction == 0.0 || low + 1 >= sorted.len() {
        return a.is_finite().then_some(a);
    }
    let b = sorted[low + 1];
    (a.is_finite() && b.is_finite()).then_some(a + fraction * (b - a))
}

/// Wilson score interval of a pass fraction from `passes` out of `runs`, at normal quantile `z`.
pub fn wilson_interval(passes: u64, runs: u64, z: f64) -> (f64, f64) {
    let n = runs as f64;
    let p = passes as f64 / n;
    let z2 = z * z;
    let centre = (p + z2 / (2.0 * n)) / (1.0 + z2 / n);
    let half = z / (1.0 + z2 / n) * (p * (1.0 - p) / n + z2 / (4.0 * n * n)).sqrt();
    let low = if passes == 0 {
        0.0
    } else {
        (centre - half).max(0.0)
    };
    let high = if passes == runs {
        1.0
    } else {
        (centre + half).min(1.0)
    };
    (low, high)
}

/// A figure whose distribution over the runs is reported.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum PopulationFigure {
    /// Second harmonic, dBc.
    Hd2,
    /// Third harmonic, dBc.
    Hd3,
    /// THD, dBc.
    Thd,
    /// Gain at the drive point, dB.
    Gain,
    /// Second-order intermodulation, dBc (two-tone plans).
    Im2,
    /// Third-order intermodulation, dBc (two-tone plans).
    Im3,
    /// Input second-order intercept, V (two-tone plans).
    Iip2,
    /// Input offset, V (one per frequency, amplitude 0).
    Offset,
    /// The least collector-base reverse bias over the single-tone period, V (negative:
    /// saturation).
    CollectorBaseMargin,
}

/// The figures tracked per drive point, in report order; `Im2`, `Im3` and `Iip2` need two
/// tones.
pub const POINT_FIGURES: [PopulationFigure; 8] = [
    PopulationFigure::Hd2,
    PopulationFigure::Hd3,
    PopulationFigure::Thd,
    PopulationFigure::Gain,
    PopulationFigure::Im2,
    PopulationFigure::Im3,
    PopulationFigure::Iip2,
    PopulationFigure::CollectorBaseMargin,
];

impl PopulationFigure {
    /// Whether the figure needs two-tone drive.
    pub fn needs_two_tones(self) -> bool {
        matches!(
            self,
            PopulationFigure::Im2 | PopulationFigure::Im3 | PopulationFigure::Iip2
        )
    }
}

/// The distribution of one figure at one drive point over the runs.
#[derive(Debug, Clone, PartialEq)]
pub struct FigureDistribution {
    /// Frequency, Hz.
    pub frequency_hz: f64,
    /// Amplitude, V (0 for the offset).
    pub amplitude_v: f64,
    /// The figure.
    pub figure: PopulationFigure,
    /// Median.
    pub median: Option<f64>,
    /// 5th percentile.
    pub p05: Option<f64>,
    /// 95th percentile.
    pub p95: Option<f64>,
    /// Runs whose figure was below the analysis floor (or unbounded).
    pub below_floor_runs: u64,
}

/// The pass fraction of the runs against the whole budget.
#[derive(Debug, Clone, PartialEq)]
pub struct YieldEstimate {
    /// Runs meeting every budget line.
    pub passing_runs: u64,
    /// Runs drawn.
    pub runs: u64,
    /// Lower end of the 95 % Wilson score interval.
    pub low: f64,
    /// Upper end of the 95 % Wilson score interval.
    pub high: f64,
    /// Per budget line (plan order), the runs failing that line (`None` for yield lines).
    pub failing_runs: Vec<Option<u64>>,
}

impl YieldEstimate {
    /// Fraction of runs meeting every budget line.
    pub fn pass_fraction(&self) -> f64 {
        self.passing_runs as f64 / self.runs as f64
    }
}

/// The population of one stage at one temperature.
#[derive(Debug, Clone, PartialEq)]
pub struct StagePopulation {
    /// Stage name.
    pub stage: String,
    /// Temperature, °C.
    pub temperature_c: f64,
    /// Process corner the draws were made in.
    pub corner: String,
    /// Runs drawn.
    pub runs: u64,
    /// Distributions in frequency, amplitude, figure order.
    pub distributions: Vec<FigureDistribution>,
    /// Yield against the budget.
    pub yield_estimate: YieldEstimate,
    /// Least collector-base margin over every run and every drive a run evaluated (drive
    /// amplitudes, budget amplitudes, two tones), V.
    pub least_collector_base_margin_v: f64,
    /// Runs in which some evaluated drive forward-biased a collector-base junction.
    pub saturating_runs: u64,
}

/// The Monte Carlo population of a plan.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Population {
    /// Per stage with something to draw and temperature.
    pub stages: Vec<StagePopulation>,
}

/// Sample counts of one amplitude, taken from the converged nominal analysis.
#[derive(Debug, Clone, Copy)]
struct Resolution {
    amplitude_v: f64,
    tone_samples: usize,
    grid_samples: Option<usize>,
}

/// What one run measured.
struct RunResult {
    /// The POINT_FIGURES values (±∞ for null) per amplitude (memoryless: the same at every
    /// frequency) or per (frequency, amplitude), frequency-major (charge storage).
    points: Vec<[f64; 8]>,
    offset_v: f64,
    /// Whether the run meets each budget line (yield lines count as met).
    line_passes: Vec<bool>,
    /// Least collector-base margin over every drive the run evaluated, V.
    least_margin_v: f64,
}

fn level_dbc(level: f64, fundamental: f64) -> f64 {
    let dbc = 20.0 * (level / fundamental).log10();
    if dbc.is_finite() && dbc >= ANALYSIS_FLOOR_DBC {
        dbc
    } else {
        f64::NEG_INFINITY
    }
}

fn measure_amplitude(
    solver: &StaticSolver,
    cache: &FftCache,
    resolution: &Resolution,
    harmonics: usize,
) -> Result<([f64; 8], Vec<f64>, RegionCheck), SolveFailure> {
    let n = resolution.tone_samples;
    let a = resolution.amplitude_v;
    let mut warm = WarmStart::default();
    let mut samples = Vec::with_capacity(n);
    let mut region = RegionCheck::new();
    let tail = solver.circuit().tail_current;
    // A run that saturates is solved with the whole model at every sample (no switch of form
    // within the period; see StaticSolver::solve_whole_model).
    let whole = solver.saturates_within(a)?;
    for i in 0..n {
        let theta = std::f64::consts::TAU * i as f64 / n as f64;
        let point = if whole {
            solver.solve_whole_model(a * theta.cos(), &mut warm)?
        } else {
            solver.solve(a * theta.cos(), &mut warm)?
        };
        region.update(&point, tail);
        samples.push(point.output_voltage);
    }
    let amplitudes = cache.harmonic_amplitudes(&samples, harmonics);
    let fundamental = amplitudes[1];
    let power: f64 = amplitudes.iter().skip(2).map(|h| h * h).sum();
    let thd = level_dbc(power.sqrt(), fundamental);
    let mut values = [
        level_dbc(amplitudes[2], fundamental),
        level_dbc(amplitudes[3], fundamental),
        thd,
        20.0 * (fundamental / a).log10(),
        f64::NEG_INFINITY,
        f64::NEG_INFINITY,
        f64::INFINITY,
        region.collector_base_margin_v(),
    ];
    let mut evaluated = region;
    if let Some(grid) = resolution.grid_samples {
        let two = two_tone_grid(solver, cache, a, grid)?;
        values[4] = level_dbc(two.im2_v, two.fundamental_v);
        values[5] = level_dbc(two.im3_v, two.fundamental_v);
        if values[4].is_finite() {
            values[6] = a * 10f64.powf(-values[4] / 20.0);
        }
        evaluated.merge(&two.region);
    }
    Ok((values, amplitudes, evaluated))
}

/// Runs the Monte Carlo analysis of every stage of the plan and temperature (see
/// [`evaluate_stages`]).
pub fn evaluate(
    plan: &Plan,
    settings: &MonteCarloSettings,
    cache: &Arc<FftCache>,
) -> Result<Population, Error> {
    let stages: Vec<(usize, &Stage)> = plan.stages.iter().enumerate().collect();
    evaluate_stages(plan, settings, &stages, cache)
}

/// Runs the Monte Carlo analysis of `stages` at every temperature; each stage is given with the
/// plan index its draws are keyed by (a derived stage shares its planned stage's index, so both
/// see the same dies). Stages with no `mismatch_sigma` have nothing to draw and are left out,
/// unless the budget has a yield line (then every run is the nominal die and the yield is 0 or
/// 1). Stages with capacitance get a periodic steady state per run, frequency and amplitude
/// ([`evaluate_one_with_charge`]).
pub fn evaluate_stages(
    plan: &Plan,
    settings: &MonteCarloSettings,
    stages: &[(usize, &Stage)],
    cache: &Arc<FftCache>,
) -> Result<Population, Error> {
    evaluate_stages_observed(plan, settings, stages, cache, &|| {})
}

/// The number of runs [`evaluate_stages`] draws in all for `stages`: `runs` per temperature of
/// every stage it does not leave out.
pub fn planned_runs(plan: &Plan, settings: &MonteCarloSettings, stages: &[(usize, &Stage)]) -> u64 {
    let typical = &plan.corners[0];
    let has_yield_line = plan.budget.iter().any(|l| l.metric.is_population());
    let drawn = stages
        .iter()
        .filter(|(_, nominal)| nominal.mismatch_sigma != Mismatch::default() || has_yield_line)
        .filter(|(_, nominal)| {
            StageCircuit::new(&typical.apply(nominal), plan.temperatures_c[0]).is_memoryless()
        })
        .count();
    drawn as u64 * plan.temperatures_c.len() as u64 * settings.runs
}

/// [`evaluate_stages`], calling `run_done` after every run (for a progress count).
pub fn evaluate_stages_observed(
    plan: &Plan,
    settings: &MonteCarloSettings,
    stages: &[(usize, &Stage)],
    cache: &Arc<FftCache>,
    run_done: &(dyn Fn() + Sync),
) -> Result<Population, Error> {
    let typical = &plan.corners[0];
    let has_yield_line = plan.budget.iter().any(|l| l.metric.is_population());
    let mut population = Population::default();
    for &(stage_index, nominal) in stages {
        if nominal.mismatch_sigma == Mismatch::default() && !has_yield_line {
            continue;
        }
        let stage = typical.apply(nominal);
        let memoryless = StageCircuit::new(&stage, plan.temperatures_c[0]).is_memoryless();
        for (temperature_index, &temperature_c) in plan.temperatures_c.iter().enumerate() {
            let evaluate = if memoryless {
                evaluate_one
            } else {
                evaluate_one_with_charge
            };
            population.stages.push(evaluate(
                plan,
                settings,
                &stage,
                (stage_index, temperature_index, temperature_c),
                cache,
                &typical.name,
                run_done,
            )?);
        }
    }
    Ok(population)
}

fn evaluate_one(
    plan: &Plan,
    settings: &MonteCarloSettings,
    stage: &Stage,
    (stage_index, temperature_index, temperature_c): (usize, usize, f64),
    cache: &Arc<FftCache>,
    corner: &str,
    run_done: &(dyn Fn() + Sync),
) -> Result<StagePopulation, Error> {
    let fail = |failure: SolveFailure| Error::solve(&stage.name, temperature_c, failure);
    let nominal_circuit = StageCircuit::new(stage, temperature_c);
    let harmonics = plan.drive.thd_harmonics.max(9);
    let nominal = StaticSolver::new(nominal_circuit);
    let drive_settings = DriveSettings::of(&plan.drive);
    // Amplitudes: the drive's, then any budget amplitude not among them.
    let mut amplitudes: Vec<f64> = plan.drive.amplitudes.clone();
    for line in plan.budget.iter().filter(|l| l.metric.needs_amplitude()) {
        let a = plan.drive.amplitude_of(line);
        if !amplitudes.contains(&a) {
            amplitudes.push(a);
        }
    }
    let resolutions: Vec<Resolution> = amplitudes
        .iter()
        .map(|&a| {
            let tone = single_tone(&nominal, cache, a, harmonics)?;
            let grid = match plan.drive.two_tone_spacing {
                Some(_) => Some(two_tone(&nominal, cache, a)?.samples),
                None => None,
            };
            Ok(Resolution {
                amplitude_v: a,
                tone_samples: tone.samples,
                grid_samples: grid,
            })
        })
        .collect::<Result<_, SolveFailure>>()
        .map_err(fail)?;
    let needs_figures = plan.budget.iter().any(|l| {
        matches!(
            l.metric,
            Metric::Iip3 | Metric::Oip3 | Metric::P1db | Metric::SteeringRange
        )
    });

    let runs: Vec<RunResult> = (0..settings.runs)
        .into_par_iter()
        .map(|run| {
            let mismatches = run_mismatches(settings, stage, (stage_index, temperature_index), run);
            let circuit = StageCircuit::with_mismatches(stage, temperature_c, &mismatches);
            let solver = StaticSolver::new(circuit.clone());
            let mut points = Vec::with_capacity(resolutions.len());
            let mut spectra = Vec::with_capacity(resolutions.len());
            let mut least_margin_v = f64::INFINITY;
            for resolution in &resolutions {
                let (values, amplitudes, region) =
                    measure_amplitude(&solver, cache, resolution, harmonics)?;
                least_margin_v = least_margin_v.min(region.collector_base_margin_v());
                points.push(values);
                spectra.push(amplitudes);
            }
            let offset_v = offset_voltage(&solver)?;
            let measured = needs_figures.then(|| {
                StageMeasurements::new(
                    Box::new(MemorylessEngine::new(circuit, cache.clone())),
                    drive_settings,
                )
            });
            let mut line_passes = Vec::with_capacity(plan.budget.len());
            for line in &plan.budget {
                if line.metric.is_population() {
                    line_passes.push(true);
                    continue;
                }
                let at = resolutions
                    .iter()
                    .position(|r| r.amplitude_v == plan.drive.amplitude_of(line))
                    .unwrap_or(0);
                let finite = |v: f64| v.is_finite().then_some(v);
                let value = match line.metric {
                    Metric::Harmonic(order) => {
                        let amplitudes = &spectra[at];
                        let level =
                            level_dbc(amplitudes.get(order).copied().unwrap_or(0.0), amplitudes[1]);
                        finite(level)
                    }
                    Metric::Thd => finite(points[at][2]),
                    Metric::Im3 => finite(points[at][5]),
                    Metric::CollectorBaseMargin => Some(points[at][7]),
                    Metric::Gain => Some(20.0 * small_signal_gain(&solver)?.abs().log10()),
                    Metric::InputNoise => Some(input_noise_density(&solver)?),
                    Metric::Yield => None,
                    _ => match &measured {
                        Some(m) => {
                            let checked = m.measure_checked(line)?;
                            least_margin_v =
                                least_margin_v.min(checked.region.collector_base_margin_v());
                            checked.value
                        }
                        None => None,
                    },
                };
                line_passes.push(judge(line, value, ANALYSIS_FLOOR_DBC).pass);
            }
            run_done();
            Ok(RunResult {
                points,
                offset_v,
                line_passes,
                least_margin_v,
            })
        })
        .collect::<Result<Vec<_>, SolveFailure>>()
        .map_err(|failure| run_failure(stage, temperature_c, failure))?;

    // The memoryless runs measured each amplitude once: every frequency shares it.
    Ok(summarise(
        plan,
        settings,
        stage,
        temperature_c,
        corner,
        &runs,
        |_, a| a,
    ))
}

/// The figures of one drive point of a stage with charge storage, in [`POINT_FIGURES`] order
/// (±∞ for null), with the region of every drive evaluated.
fn measure_point_with_charge(
    engine: &dyn ResponseEngine,
    amplitude_v: f64,
    frequency_hz: f64,
    spacing_hz: Option<f64>,
    harmonics: usize,
) -> Result<([f64; 8], Vec<f64>, RegionCheck), SolveFailure> {
    let tone = engine.tone(amplitude_v, frequency_hz, harmonics)?;
    let floor = tone.floor_dbc;
    let level = |amplitude: f64, fundamental: f64| -> f64 {
        let dbc = 20.0 * (amplitude / fundamental).log10();
        if dbc.is_finite() && dbc >= floor.max(ANALYSIS_FLOOR_DBC) {
            dbc
        } else {
            f64::NEG_INFINITY
        }
    };
    let amplitudes = tone.differential.amplitudes.clone();
    let fundamental = amplitudes[1];
    let power: f64 = amplitudes.iter().skip(2).map(|h| h * h).sum();
    let mut region = tone.region;
    let mut values = [
        level(amplitudes[2], fundamental),
        level(amplitudes[3], fundamental),
        level(power.sqrt(), fundamental),
        20.0 * (fundamental / amplitude_v).log10(),
        f64::NEG_INFINITY,
        f64::NEG_INFINITY,
        f64::INFINITY,
        tone.region.collector_base_margin_v(),
    ];
    if let Some(spacing) = spacing_hz {
        let two = engine.two_tone(amplitude_v, frequency_hz, spacing)?;
        values[4] = level(two.im2_v, two.fundamental_v);
        values[5] = level(two.im3_v, two.fundamental_v);
        if values[4].is_finite() {
            values[6] = amplitude_v * 10f64.powf(-values[4] / 20.0);
        }
        region.merge(&two.region);
        values[7] = values[7].min(two.region.collector_base_margin_v());
    }
    Ok((values, amplitudes, region))
}

/// The population of a stage with charge storage at one temperature: every run draws its
/// mismatch exactly as [`evaluate_one`] does (same keys, same order), and solves the periodic
/// steady state of each frequency and amplitude, and each budget line, with the dynamic
/// engine. Each solve is independent of every other (no state carried between runs or
/// points), so the report does not depend on the thread count or scheduling.
fn evaluate_one_with_charge(
    plan: &Plan,
    settings: &MonteCarloSettings,
    stage: &Stage,
    (stage_index, temperature_index, temperature_c): (usize, usize, f64),
    cache: &Arc<FftCache>,
    corner: &str,
    run_done: &(dyn Fn() + Sync),
) -> Result<StagePopulation, Error> {
    let harmonics = plan.drive.thd_harmonics.max(9);
    let drive_settings = DriveSettings::of(&plan.drive);
    let frequencies = &plan.drive.frequencies;
    let amplitudes = &plan.drive.amplitudes;
    let spacing = plan.drive.two_tone_spacing;
    let runs: Vec<RunResult> = (0..settings.runs)
        .into_par_iter()
        .map(|run| {
            let mismatches = run_mismatches(settings, stage, (stage_index, temperature_index), run);
            let circuit = StageCircuit::with_mismatches(stage, temperature_c, &mismatches);
            let engine = engine_for(circuit, cache.clone());
            let mut points = Vec::with_capacity(frequencies.len() * amplitudes.len());
            let mut least_margin_v = f64::INFINITY;
            for &frequency_hz in frequencies {
                for &amplitude_v in amplitudes {
                    let (values, _, region) = measure_point_with_charge(
                        engine.as_ref(),
                        amplitude_v,
                        frequency_hz,
                        spacing,
                        harmonics,
                    )?;
                    least_margin_v = least_margin_v.min(region.collector_base_margin_v());
                    points.push(values);
                }
            }
            let offset_v = offset_voltage(engine.static_solver())?;
            let lines: Vec<_> = plan
                .budget
                .iter()
                .filter(|l| !l.metric.is_population())
                .collect();
            let mut line_passes = Vec::with_capacity(plan.budget.len());
            if lines.is_empty() {
                line_passes.resize(plan.budget.len(), true);
            } else {
                let measured = StageMeasurements::new(engine, drive_settings);
                for line in &plan.budget {
                    if line.metric.is_population() {
                        line_passes.push(true);
                        continue;
                    }
                    let checked = measured.measure_checked(line)?;
                    least_margin_v = least_margin_v.min(checked.region.collector_base_margin_v());
                    line_passes.push(judge(line, checked.value, ANALYSIS_FLOOR_DBC).pass);
                }
            }
            run_done();
            Ok(RunResult {
                points,
                offset_v,
                line_passes,
                least_margin_v,
            })
        })
        .collect::<Result<Vec<_>, SolveFailure>>()
        .map_err(|failure| run_failure(stage, temperature_c, failure))?;

    let per_frequency = amplitudes.len();
    Ok(summarise(
        plan,
        settings,
        stage,
        temperature_c,
        corner,
        &runs,
        |f, a| f * per_frequency + a,
    ))
}

/// A run's solve failure, named as a Monte Carlo point of its stage and temperature.
fn run_failure(stage: &Stage, temperature_c: f64, failure: SolveFailure) -> Error {
    Error::Solve {
        stage: stage.name.clone(),
        temperature_c,
        point: format!("Monte Carlo: {}", failure.point),
        reason: failure.reason,
    }
}

/// The mismatches of run `run`: one draw per pair of transistors (a multi-tanh cell's pairs
/// are drawn on their own, in pair order after the first, which keeps every other stage's
/// draws), from the run's own stream.
fn run_mismatches(
    settings: &MonteCarloSettings,
    stage: &Stage,
    (stage_index, temperature_index): (usize, usize),
    run: u64,
) -> Vec<Mismatch> {
    let mut rng = run_rng(settings.seed, stage_index, temperature_index, run);
    let pairs = if stage.topology == crate::model::topology::Topology::MultiTanh {
        stage.multi_tanh.pairs().len().max(1)
    } else {
        1
    };
    (0..pairs)
        .map(|_| draw_mismatch(&mut rng, &stage.mismatch, &stage.mismatch_sigma))
        .collect()
}

/// The population's distributions (per frequency, amplitude and figure, plus the offset),
/// its yield and its least collector-base margin. `point(f, a)` is the index into a run's
/// `points` of frequency `f` and amplitude `a` (indices into the plan's drive lists).
fn summarise(
    plan: &Plan,
    settings: &MonteCarloSettings,
    stage: &Stage,
    temperature_c: f64,
    corner: &str,
    runs: &[RunResult],
    point: impl Fn(usize, usize) -> usize,
) -> StagePopulation {
    let distribution =
        |frequency_hz: f64, amplitude_v: f64, figure: PopulationFigure, mut values: Vec<f64>| {
            values.sort_by(f64::total_cmp);
            FigureDistribution {
                frequency_hz,
                amplitude_v,
                figure,
                median: quantile(&values, 0.5),
                p05: quantile(&values, 0.05),
                p95: quantile(&values, 0.95),
                below_floor_runs: values.iter().filter(|v| !v.is_finite()).count() as u64,
            }
        };
    let two_tone_plan = plan.drive.two_tone_spacing.is_some();
    let mut distributions = Vec::new();
    for (f_index, &frequency_hz) in plan.drive.frequencies.iter().enumerate() {
        for (a_index, &amplitude_v) in plan.drive.amplitudes.iter().enumerate() {
            let index = point(f_index, a_index);
            for (k, figure) in POINT_FIGURES.iter().enumerate() {
                if figure.needs_two_tones() && !two_tone_plan {
                    continue;
                }
                let values = runs.iter().map(|r| r.points[index][k]).collect();
                distributions.push(distribution(frequency_hz, amplitude_v, *figure, values));
            }
        }
        let offsets = runs.iter().map(|r| r.offset_v).collect();
        distributions.push(distribution(
            frequency_hz,
            0.0,
            PopulationFigure::Offset,
            offsets,
        ));
    }
    let passes = runs
        .iter()
        .filter(|r| r.line_passes.iter().all(|p| *p))
        .count() as u64;
    let (low, high) = wilson_interval(passes, settings.runs, Z_95);
    let least_collector_base_margin_v = runs
        .iter()
        .map(|r| r.least_margin_v)
        .fold(f64::INFINITY, f64::min);
    let saturating_runs = runs.iter().filter(|r| r.least_margin_v < 0.0).count() as u64;
    let failing_runs = plan
        .budget
        .iter()
        .enumerate()
        .map(|(index, line)| {
            (!line.metric.is_population())
                .then(|| runs.iter().filter(|r| !r.line_passes[index]).count() as u64)
        })
        .collect();
    StagePopulation {
        stage: stage.name.clone(),
        temperature_c,
        corner: corner.to_owned(),
        runs: settings.runs,
        distributions,
        yield_estimate: YieldEstimate {
            passing_runs: passes,
            runs: settings.runs,
            low,
            high,
            failing_runs,
        },
        least_collector_base_margin_v,
        saturating_runs,
    }
}
