//! The periodic-steady-state engine for stages with charge storage (load, tail and junction
//! capacitances, transit time).
//!
//! # Method and why
//!
//! Each drive point is first tried by harmonic balance ([`balance`]): the periodic
//! equations written on `N` equally spaced samples with the exact spectral time derivative,
//! solved by Newton with GMRES (the Jacobian applied through the FFT, preconditioned by the
//! time-averaged circuit bin by bin). For the smooth waveforms of a mildly driven stage its
//! error falls faster than any power of `1/N`, so a single tone settles at 32–64 samples where
//! the trapezoidal rule needs three levels of 33–257 steps, two to three periods each. Its
//! self-check: Newton converged at each sample count, and every reported figure within
//! [`ACCEPTED_ERROR_ESTIMATE_DB`] between `N` and `2N` samples (the `2N` figures are
//! reported); at most [`MAX_BALANCE_LEVELS`] sample counts are tried.
//!
//! Where harmonic balance does not settle — a drive that saturates (always left to the
//! method below), a Newton or GMRES that does not converge, figures still moving at the last
//! sample count — the point is solved in the time domain: the stage's equations in
//! charge-based form ([`pair`]) are integrated with the trapezoidal rule applied to the
//! charges, with Newton at every step ([`trapezoid`]), and the periodic steady state is found
//! by shooting (Newton on the start state with the monodromy matrix). Why this method
//! carries the hard points:
//!
//! - the pair is driven far into steering (hundreds of mV against φT = 26 mV), where the
//!   waveforms are nearly square and harmonic balance needs hundreds of harmonics and a
//!   Jacobian far from its average, with fragile convergence; a time step never sees more
//!   than one exponential at a time and Newton per step converges in two or three
//!   iterations from the previous step;
//! - the trapezoidal rule is A-stable (stiff junction and tail time constants far below the
//!   step are harmless), and applied to a linear circuit in periodic steady state it is
//!   *exactly* the continuous-time response at the warped frequency `(2/h)·tan(ωh/2)`; its
//!   error is a clean `c·h² + O(h⁴)` series, so Richardson extrapolation between step `h`
//!   and `h/2` gives fourth order for free;
//! - shooting converges in one to three periods for these weakly nonlinear-in-time circuits,
//!   instead of the hundreds of periods a plain transient needs when the tail node or a load
//!   has a time constant longer than the period.
//!
//! Odd step counts keep the shooting matrix well conditioned (see [`trapezoid`]).
//!
//! # Steady-state criterion
//!
//! A period is accepted only when integrating it returns every node voltage, and every
//! charge current times the mean load resistance, to within [`STEADY_STATE_TOLERANCE_V`] of
//! its start; the samples reported are those of that verified period.
//!
//! # Accuracy control
//!
//! Steps per period start at `N₀` (odd) and go `N → 2N − 1`. At each level the output
//! phasors are Richardson-extrapolated with the previous level (`(r²·X_fine − X_coarse)/(r² − 1)`,
//! `r` the step ratio), which leaves `X* − b·h₁²h₂²`; from the third level on, a Romberg stage
//! over the last two extrapolations cancels that too (sixth order). The sixth-order figures
//! (fundamental in dB, each harmonic and THD in dBc, or the two-tone fundamental, IM3 and IM2)
//! minus the fourth-order ones of the same levels estimate the fourth-order error; a level is
//! accepted when that estimate is at most [`ACCEPTED_ERROR_ESTIMATE_DB`] (a quarter of
//! [`REFINEMENT_TOLERANCE_DB`]) for every figure, and the sixth-order figures are reported;
//! levels above [`MAX_STEPS`] are an error naming the drive point. Harmonics below
//! [`DYNAMIC_FLOOR_DBC`] are neither compared nor reported (they are `null`): the
//! integration's rounding noise sits some 60 dB further down.
//!
//! # Cost
//!
//! Each level starts from the previous levels' start states extrapolated along the h² law,
//! and its Newton iterations from the previous level's trajectory interpolated onto the new
//! grid (see [`trapezoid`]); nothing is carried from one drive point to another, so a figure
//! does not depend on which other points are solved or in which order.
//!
//! # Two tones
//!
//! Two tones at `f` and `f + Δ` are periodic over their common period `1/gcd(f, Δ)`. When
//! `Δ/f` is a ratio `a/b` with `a + b` ≤ [`MAX_COMMON_PERIOD_CYCLES`], that period is integrated
//! directly and the products read from their own FFT bins; otherwise the engine refuses with
//! a message saying how long the common period is and what spacing would work. (Substituting
//! a nearby spacing would be wrong in general: the tail node responds at `Δ`.)

pub mod balance;
pub mod cell;
pub mod dense;
pub mod pair;
pub mod system;
pub mod trapezoid;

use crate::error::SolveFailure;
use crate::model::circuit::StageCircuit;
use crate::solve::response::ResponseEngine;
use crate::solve::response::{RegionCheck, ToneResult, TwoToneResult};
use crate::solve::spectrum::{FftCache, Spectrum};
use crate::solve::transfer::StaticSolver;
use dense::Lu;
use num_complex::Complex;
use pair::Drive;
use std::sync::Arc;
use system::StageSystem;
use trapezoid::ChargeSystem;
use trapezoid::{periodic_steady_state, State, SteadyTolerance, StepTolerance};

/// Newton tolerance inside each time step, V (error after the last step is of order its square).
pub const NEWTON_TOLERANCE_V: f64 = 1e-9;
/// Steady-state criterion: largest change of any node voltage over one period, V.
pub const STEADY_STATE_TOLERANCE_V: f64 = 1e-12;
/// Largest change of any reported figure between successive refinements, dB.
pub const REFINEMENT_TOLERANCE_DB: f64 = 2e-3;
/// A level is accepted when the estimated error of its fourth-order figures (the difference
/// to the sixth-order ones) is at most this: a quarter of [`REFINEMENT_TOLERANCE_DB`], so the
/// reported sixth-order figures stay within the tolerance even before the error series is
/// fully asymptotic (a hard-driven two-tone point was off by 1.2e-3 dB with a full 0.002 dB).
pub const ACCEPTED_ERROR_ESTIMATE_DB: f64 = REFINEMENT_TOLERANCE_DB / 4.0;
/// Harmonics and products below this level are not compared or reported, dBc.
pub const DYNAMIC_FLOOR_DBC: f64 = -160.0;
/// How far above the output's precision ([`output_precision_v`]) a harmonic must stand to be resolved (the
/// waveform's error is smooth, not rounding noise, so a narrower margin than the memoryless
/// analysis's does).
pub const DYNAMIC_NOISE_MARGIN: f64 = 30.0;

/// The analysis floor of a drive point with this fundamental, dBc: [`DYNAMIC_FLOOR_DBC`], or
/// higher where the waveform's absolute precision `precision_v` is a sizeable part of a small
/// fundamental.
pub fn dynamic_floor_dbc(fundamental_v: f64, precision_v: f64) -> f64 {
    if !(fundamental_v > 0.0 && fundamental_v.is_finite()) {
        return 0.0;
    }
    DYNAMIC_FLOOR_DBC.max(20.0 * (DYNAMIC_NOISE_MARGIN * precision_v / fundamental_v).log10())
}

/// The slowest time constant of a stage's linearised circuit that a long period makes
/// hard to settle, with its name: the tail node (tail capacitance against the tail
/// resistance in parallel with the emitters seen from the tail) or a load (R_L·C_L), s.
pub fn slowest_time_constant(circuit: &StageCircuit) -> (&'static str, f64) {
    let emitters = {
        let side = &circuit.p;
        let transconductance = 0.5 * circuit.tail_current / circuit.thermal_voltage;
        2.0 / (1.0 / transconductance
            + side.emitter_resistance
            + side.base_path_resistance * side.beta_inv)
    };
    let tail = circuit.tail_capacitance / (emitters + circuit.tail_conductance);
    let load = circuit.load_capacitance * circuit.p.load_resistance.max(circuit.m.load_resistance);
    if tail >= load {
        (
            "tail node (tail_capacitance against the emitters and tail_resistance)",
            tail,
        )
    } else {
        ("load (load_resistance × load_capacitance)", load)
    }
}
/// Largest number of time steps over one (common) period.
pub const MAX_STEPS: usize = 1 << 18;
/// The region check's largest base-collector voltage is looked for on the accepted trajectory
/// interpolated (cubic) to this many times its steps, so it does not depend on the grid.
const REGION_OVERSAMPLING: usize = 8;
/// How many times a refinement that fails on a coarse grid is started again on finer grids.
const COARSE_RETRIES: usize = 2;
use crate::model::products::{
    collisions, separating_spacing, Product, TwoToneFigure, ANALYSED_ORDER, REPORTED,
};
pub use crate::model::products::{common_period_cycles, MAX_COMMON_PERIOD_CYCLES};

const STEP_TOLERANCE: StepTolerance = StepTolerance {
    absolute: NEWTON_TOLERANCE_V,
    max_iterations: 60,
};
/// The steady-state criterion for a circuit: [`STEADY_STATE_TOLERANCE_V`], and as its rounding
/// floor the rounding of a junction voltage (ε·V) carried to the collectors by the voltage
/// gain g_m·R_L, sixteen rounding steps over.
pub fn steady_tolerance(circuit: &StageCircuit) -> SteadyTolerance {
    let largest = circuit
        .supply
        .abs()
        .max(circuit.input_common_mode.abs())
        .max(1.0);
    let gain = 0.5 * circuit.tail_current / circuit.thermal_voltage
        * circuit.p.load_resistance.max(circuit.m.load_resistance);
    SteadyTolerance {
        state: STEADY_STATE_TOLERANCE_V,
        rounding: trapezoid::ROUNDING_STEPS * f64::EPSILON * largest * (1.0 + gain),
        max_iterations: 40,
    }
}

/// Absolute precision of a circuit's output waveform, V: four times the larger of the
/// steady-state criterion and its rounding floor.
pub fn output_precision_v(circuit: &StageCircuit) -> f64 {
    let tolerance = steady_tolerance(circuit);
    4.0 * tolerance.state.max(tolerance.rounding)
}

/// Answers drives of a stage with charge storage by its periodic steady state.
#[derive(Debug, Clone)]
pub struct DynamicEngine {
    solver: StaticSolver,
    cache: Arc<FftCache>,
}

/// The refined, extrapolated phasors of one drive point.
#[derive(Debug, Clone)]
struct Refined {
    /// Differential-output phasors, index = bin of the period's fundamental.
    differential: Vec<Complex<f64>>,
    /// P-collector phasors.
    single_ended: Vec<Complex<f64>>,
    /// Steps per period of the finest level.
    steps: usize,
    /// Operating region over the finest verified period.
    region: RegionCheck,
}

/// One refinement level: steps per period, differential and P-collector phasors.
type Level = (usize, Vec<Complex<f64>>, Vec<Complex<f64>>);

/// dB of an amplitude relative to a reference, clamped at the floor.
fn dbc_clamped(level: f64, reference: f64, floor_dbc: f64) -> f64 {
    let db = 20.0 * (level / reference).log10();
    if db.is_nan() {
        floor_dbc
    } else {
        db.max(floor_dbc)
    }
}

impl DynamicEngine {
    /// Builds the engine for one stage at one temperature.
    pub fn new(circuit: StageCircuit, cache: Arc<FftCache>) -> Self {
        DynamicEngine {
            solver: StaticSolver::new(circuit),
            cache,
        }
    }

    /// Periodic steady state of `drive` over `period_s`, refined from `first_steps` (odd)
    /// until `figures` of the extrapolated phasors (bins `0..=bins`) settle.
    fn refine(
        &self,
        drive: Drive,
        period_s: f64,
        first_steps: usize,
        bins: usize,
        figures: impl Fn(&[Complex<f64>]) -> Vec<f64>,
        label: &str,
    ) -> Result<Refined, SolveFailure> {
        let circuit = self.solver.circuit();
        // A drive whose static peak saturates is solved with the whole core throughout.
        let peak_v = match drive {
            Drive::Tone { amplitude_v, .. } => amplitude_v,
            Drive::TwoTone { amplitude_v, .. } => 2.0 * amplitude_v,
        };
        let whole = self.solver.saturates_within(peak_v)?;
        let system = StageSystem::new(circuit, drive, whole);
        let fail = |reason: String| SolveFailure {
            point: label.to_owned(),
            reason,
        };
        if !whole {
            if let Some(refined) = self.refine_balance(&system, drive, period_s, bins, &figures) {
                return Ok(refined);
            }
        }
        let start = system.start_state(&self.solver, drive.differential_v(0.0))?;
        let mut guess = State {
            x: start.clone(),
            i: vec![0.0; system.charges()],
        };
        let mut monodromy: Option<(usize, Lu)> = None;
        // Start states of the last two levels (for the h² extrapolation of the next start)
        // and the last level's trajectory (the next level's Newton guide).
        let mut starts: Vec<(usize, State)> = Vec::new();
        let mut previous_trajectory: Option<(usize, Vec<f64>)> = None;
        let mut steps = first_steps;
        let mut retries = 0;
        let mut coarser: Option<Level> = None;
        // The last fourth-order extrapolation: the coarser of its two levels and its phasors.
        let mut fourth_order: Option<Level> = None;
        let mut last_change = f64::INFINITY;
        while steps <= MAX_STEPS {
            let guide = previous_trajectory
                .as_ref()
                .map(|(coarse, rows)| resample_periodic(rows, *coarse, steps, system.unknowns()));
            let attempt = periodic_steady_state(
                &system,
                guess.clone(),
                period_s,
                steps,
                STEP_TOLERANCE,
                steady_tolerance(circuit),
                &mut monodromy,
                guide,
            );
            let solution = match attempt {
                Ok(solution) => solution,
                Err(e) => {
                    let (node, tau) = slowest_time_constant(circuit);
                    let hint = if tau > 0.2 * period_s {
                        format!(
                            "; the {node} has a time constant of {} s, {} periods of the drive: a stage this slow against its period is outside what the steady-state solve can settle, so lower the capacitance or raise the frequency",
                            crate::units::short_number(tau),
                            crate::units::short_number(tau / period_s)
                        )
                    } else {
                        String::new()
                    };
                    let failure = fail(format!(
                        "periodic steady state with {steps} steps per period: {}{hint}",
                        e.reason
                    ));
                    // A coarse grid can be too coarse for Newton on a hard-driven waveform:
                    // start the refinement again, cold, on the next finer grids (at most
                    // `COARSE_RETRIES` times). Nothing of the failed level is kept.
                    if retries == COARSE_RETRIES {
                        return Err(failure);
                    }
                    retries += 1;
                    guess = State {
                        x: start.clone(),
                        i: vec![0.0; system.charges()],
                    };
                    monodromy = None;
                    starts.clear();
                    previous_trajectory = None;
                    coarser = None;
                    fourth_order = None;
                    steps = 2 * steps - 1;
                    continue;
                }
            };
            let rows = solution.trajectory.chunks_exact(system.unknowns());
            let differential: Vec<f64> = rows.clone().map(|x| system.output_v(x)).collect();
            let single: Vec<f64> = rows.map(|x| system.p_collector_v(x)).collect();
            let raw_differential = self.cache.harmonic_phasors(&differential, bins);
            let raw_single = self.cache.harmonic_phasors(&single, bins);
            starts.push((steps, solution.start.clone()));
            guess = next_start(&starts, 2 * steps - 1);
            if let Some((coarse_steps, coarse_differential, coarse_single)) = &coarser {
                // First Richardson stage: the h² term cancels, E(h₁, h₂) = X* − b·h₁²h₂² + O(h⁶).
                let ratio = steps as f64 / *coarse_steps as f64;
                let weight = ratio * ratio;
                let extrapolate =
                    |fine: &[Complex<f64>], coarse: &[Complex<f64>]| -> Vec<Complex<f64>> {
                        fine.iter()
                            .zip(coarse)
                            .map(|(f, c)| (f * weight - c) / (weight - 1.0))
                            .collect()
                    };
                let extrapolated = extrapolate(&raw_differential, coarse_differential);
                let extrapolated_single = extrapolate(&raw_single, coarse_single);
                if let Some((first_steps, before_differential, before_single)) = &fourth_order {
                    // Second stage (Romberg): E(h₂, h₃) and E(h₁, h₂) differ by b·h₂²(h₁² − h₃²),
                    // so X₆ = (ρ·E₂₃ − E₁₂)/(ρ − 1) with ρ = (h₁/h₃)² is sixth order, and
                    // X₆ − E₂₃ estimates the error of the fourth-order value.
                    let rho = {
                        let r = steps as f64 / *first_steps as f64;
                        r * r
                    };
                    let romberg =
                        |fine: &[Complex<f64>], coarse: &[Complex<f64>]| -> Vec<Complex<f64>> {
                            fine.iter()
                                .zip(coarse)
                                .map(|(f, c)| (f * rho - c) / (rho - 1.0))
                                .collect()
                        };
                    let sixth = romberg(&extrapolated, before_differential);
                    let current = figures(&extrapolated);
                    let refined = figures(&sixth);
                    last_change = refined
                        .iter()
                        .zip(&current)
                        .map(|(a, b)| if a == b { 0.0 } else { (a - b).abs() })
                        .fold(0.0, f64::max);
                    if last_change <= ACCEPTED_ERROR_ESTIMATE_DB {
                        let mut region = RegionCheck::new();
                        for x in solution.trajectory.chunks_exact(system.unknowns()) {
                            system.include_region(x, &mut region);
                        }
                        // The largest base-collector voltage between the steps too: the
                        // trajectory interpolated to REGION_OVERSAMPLING times as many points.
                        let junctions: Vec<f64> = solution
                            .trajectory
                            .chunks_exact(system.unknowns())
                            .flat_map(|x| system.base_collector_v(x))
                            .collect();
                        let dense = resample_periodic(
                            &junctions,
                            steps,
                            REGION_OVERSAMPLING * steps,
                            system.transistors(),
                        );
                        for v in dense {
                            region.max_base_collector_v = region.max_base_collector_v.max(v);
                        }
                        return Ok(Refined {
                            differential: sixth,
                            single_ended: romberg(&extrapolated_single, before_single),
                            steps,
                            region,
                        });
                    }
                }
                fourth_order = Some((*coarse_steps, extrapolated, extrapolated_single));
            }
            coarser = Some((steps, raw_differential, raw_single));
            previous_trajectory = Some((steps, solution.trajectory));
            steps = 2 * steps - 1;
        }
        Err(fail(format!(
            "results did not settle to {REFINEMENT_TOLERANCE_DB} dB with up to {MAX_STEPS} steps per period (last error estimate {last_change:.2e} dB)"
        )))
    }
}

/// Largest sample count harmonic balance is tried with before the point is left to shooting.
pub const MAX_BALANCE_SAMPLES: usize = 4096;
/// Most sample counts harmonic balance tries for one point (the first and two doublings)
/// before the point is left to shooting: a drive whose figures have not settled by then is
/// hard enough that shooting is the cheaper answer.
pub const MAX_BALANCE_LEVELS: usize = 3;

/// Fewest points a period at which harmonic balance's region check looks at the trajectory.
const BALANCE_REGION_POINTS: usize = 1024;

/// Convergence settings of harmonic balance (the node-voltage tolerance comes from the
/// circuit's steady-state criterion).
const BALANCE_NEWTON_ITERATIONS: usize = 12;
const BALANCE_KRYLOV_RELATIVE: f64 = 1e-6;
const BALANCE_KRYLOV_ITERATIONS: usize = 60;
/// Harmonic balance is tried only where the memoryless waveform keeps at least this fraction
/// of the tail current on each side throughout the period (1 %: about ±4.6 φT of steering in
/// a bare pair).
const BALANCE_STEERING_LIMIT: f64 = 0.01;

impl DynamicEngine {
    /// Periodic steady state by harmonic balance ([`balance`]): Newton from the memoryless
    /// waveform at the first sample count, then at twice as many samples from the trigonometric
    /// interpolant of the last solution, until `figures` of two successive sample counts differ
    /// by at most [`ACCEPTED_ERROR_ESTIMATE_DB`] (the finer ones are returned). `None` when
    /// Newton or its linear solve does not converge, or the figures do not settle by
    /// [`MAX_BALANCE_SAMPLES`]: the caller then solves the point by shooting.
    fn refine_balance(
        &self,
        system: &StageSystem,
        drive: Drive,
        period_s: f64,
        bins: usize,
        figures: &impl Fn(&[Complex<f64>]) -> Vec<f64>,
    ) -> Option<Refined> {
        let circuit = self.solver.circuit();
        let width = system.unknowns();
        let steady = steady_tolerance(circuit);
        let tolerance = balance::BalanceTolerance {
            absolute: steady.state.max(steady.rounding),
            max_newton: BALANCE_NEWTON_ITERATIONS,
            krylov_relative: BALANCE_KRYLOV_RELATIVE,
            max_krylov: BALANCE_KRYLOV_ITERATIONS,
        };
        // Like the memoryless analysis, a single tone starts at 32 samples whatever the number
        // of harmonics: an order the samples cannot resolve reads as below the floor there,
        // and one above the floor then moves by far more than the tolerance at the next
        // doubling. Two tones start where every reported product has its own bin.
        let mut samples = match drive {
            Drive::Tone { .. } => 32,
            Drive::TwoTone { second_hz, .. } => {
                let upper_cycles = (second_hz * period_s).round() as usize;
                (2 * bins + 2)
                    .max(8 * upper_cycles + 2)
                    .next_power_of_two()
                    .max(32)
            }
        };
        if samples > MAX_BALANCE_SAMPLES {
            return None;
        }
        // The memoryless waveform at the first sample count; a drive that steers nearly all
        // the tail current to one side is left to shooting (the time-averaged preconditioner
        // is far from such a Jacobian, and the nearly square waves need more samples than
        // harmonic balance is allowed).
        let mut warm = crate::solve::transfer::WarmStart::default();
        let mut start = Vec::with_capacity(samples * width);
        for k in 0..samples {
            let v_d = drive.differential_v(k as f64 * period_s / samples as f64);
            match system {
                StageSystem::Pair(pair) => {
                    let point = self.solver.solve(v_d, &mut warm).ok()?;
                    let fraction = point.p_fraction();
                    if fraction.min(1.0 - fraction) < BALANCE_STEERING_LIMIT {
                        return None;
                    }
                    start.extend(pair.state_from(&point));
                }
                StageSystem::Cell(_) => start.extend(system.start_state(&self.solver, v_d).ok()?),
            }
        }
        let mut previous: Option<Vec<f64>> = None;
        let last = (samples << (MAX_BALANCE_LEVELS - 1)).min(MAX_BALANCE_SAMPLES);
        while samples <= last {
            let fft = self.cache.plan(samples);
            let solution =
                balance::periodic_balance(system, period_s, &start, fft.clone(), tolerance).ok()?;
            let rows = solution.trajectory.chunks_exact(width);
            let differential: Vec<f64> = rows.clone().map(|x| system.output_v(x)).collect();
            let raw = self.cache.harmonic_phasors(&differential, bins);
            let current = figures(&raw);
            if let Some(before) = &previous {
                let change = current
                    .iter()
                    .zip(before)
                    .map(|(a, b)| if a == b { 0.0 } else { (a - b).abs() })
                    .fold(0.0, f64::max);
                if change <= ACCEPTED_ERROR_ESTIMATE_DB {
                    let single: Vec<f64> = rows.map(|x| system.p_collector_v(x)).collect();
                    // The operating region between the samples too: the trajectory's own
                    // trigonometric interpolant, at least REGION_OVERSAMPLING times as dense
                    // and at least BALANCE_REGION_POINTS points a period.
                    let dense_count = (REGION_OVERSAMPLING * samples).max(BALANCE_REGION_POINTS);
                    let dense = balance::interpolate_spectral(
                        &solution.trajectory,
                        samples,
                        dense_count,
                        width,
                        &*fft,
                        &*self.cache.plan(dense_count),
                    );
                    let mut region = RegionCheck::new();
                    for x in dense.chunks_exact(width) {
                        system.include_region(x, &mut region);
                    }
                    return Some(Refined {
                        differential: raw,
                        single_ended: self.cache.harmonic_phasors(&single, bins),
                        steps: samples,
                        region,
                    });
                }
            }
            previous = Some(current);
            let finer = 2 * samples;
            start = balance::interpolate_spectral(
                &solution.trajectory,
                samples,
                finer,
                width,
                &*fft,
                &*self.cache.plan(finer),
            );
            samples = finer;
        }
        None
    }
}

/// The start state for a level of `steps` steps: the last level's periodic start, moved along
/// the trapezoidal rule's `c·h²` error law when two levels are known (`h ∝ 1/steps`). Only a
/// starting guess: shooting still verifies the period at the new level.
fn next_start(starts: &[(usize, State)], steps: usize) -> State {
    match starts {
        [.., (n1, s1), (n2, s2)] => {
            let h2 = |n: usize| 1.0 / (n as f64 * n as f64);
            let factor = (h2(steps) - h2(*n2)) / (h2(*n2) - h2(*n1));
            let step = |a: &[f64], b: &[f64]| -> Vec<f64> {
                a.iter()
                    .zip(b)
                    .map(|(x1, x2)| x2 + factor * (x2 - x1))
                    .collect()
            };
            State {
                x: step(&s1.x, &s2.x),
                i: step(&s1.i, &s2.i),
            }
        }
        [.., (_, last)] => last.clone(),
        [] => unreachable!("a level has been solved before the next start is asked for"),
    }
}

/// A periodic trajectory of `from` rows (each `width` unknowns, row k at time k/from of the
/// period) resampled onto `to` rows by cubic Lagrange interpolation through the four
/// nearest rows.
fn resample_periodic(rows: &[f64], from: usize, to: usize, width: usize) -> Vec<f64> {
    let mut out = Vec::with_capacity(to * width);
    for j in 0..to {
        let position = j as f64 * from as f64 / to as f64;
        let base = position.floor();
        let t = position - base;
        let base = base as usize;
        // Lagrange weights on the nodes −1, 0, 1, 2.
        let weights = [
            -t * (t - 1.0) * (t - 2.0) / 6.0,
            (t + 1.0) * (t - 1.0) * (t - 2.0) / 2.0,
            -(t + 1.0) * t * (t - 2.0) / 2.0,
            (t + 1.0) * t * (t - 1.0) / 6.0,
        ];
        let nodes = [
            (base + from - 1) % from,
            base % from,
            (base + 1) % from,
            (base + 2) % from,
        ];
        for k in 0..width {
            let mut value = 0.0;
            for (w, node) in weights.iter().zip(nodes) {
                value += w * rows[node * width + k];
            }
            out.push(value);
        }
    }
    out
}

impl ResponseEngine for DynamicEngine {
    fn tone(
        &self,
        amplitude_v: f64,
        frequency_hz: f64,
        harmonics: usize,
    ) -> Result<ToneResult, SolveFailure> {
        let label = format!(
            "amplitude {} V at {} Hz",
            crate::units::short_number(amplitude_v),
            crate::units::short_number(frequency_hz)
        );
        if !(frequency_hz.is_finite() && frequency_hz > 0.0) {
            return Err(SolveFailure {
                point: label,
                reason: "the frequency must be positive and finite for a stage with capacitance"
                    .into(),
            });
        }
        let harmonics = harmonics.max(3);
        let precision = output_precision_v(self.solver.circuit());
        let first_steps = (2 * (harmonics + 1)).next_power_of_two().max(16) + 1;
        let figures = |phasors: &[Complex<f64>]| -> Vec<f64> {
            let fundamental = phasors[1].norm();
            let floor = dynamic_floor_dbc(fundamental, precision);
            let mut out = vec![20.0 * fundamental.log10()];
            let mut power = 0.0;
            for phasor in &phasors[2..] {
                out.push(dbc_clamped(phasor.norm(), fundamental, floor));
                power += phasor.norm_sqr();
            }
            out.push(dbc_clamped(power.sqrt(), fundamental, floor));
            out
        };
        let drive = Drive::Tone {
            amplitude_v,
            frequency_hz,
        };
        let refined = self.refine(
            drive,
            1.0 / frequency_hz,
            first_steps,
            harmonics,
            figures,
            &label,
        )?;
        let amplitudes = |phasors: &[Complex<f64>]| Spectrum {
            amplitudes: phasors.iter().map(|p| p.norm()).collect(),
        };
        let differential = amplitudes(&refined.differential);
        Ok(ToneResult {
            amplitude_v,
            floor_dbc: dynamic_floor_dbc(differential.fundamental(), precision),
            differential,
            single_ended: amplitudes(&refined.single_ended),
            samples: refined.steps,
            region: refined.region,
        })
    }

    fn two_tone(
        &self,
        amplitude_v: f64,
        frequency_hz: f64,
        spacing_hz: f64,
    ) -> Result<TwoToneResult, SolveFailure> {
        let v = crate::units::short_number;
        let label = format!(
            "two tones of {} V at {} Hz and {} Hz",
            v(amplitude_v),
            v(frequency_hz),
            v(frequency_hz + spacing_hz)
        );
        let suggestion = || match separating_spacing(frequency_hz, spacing_hz) {
            Some(s) => format!("for example {} Hz", v(s)),
            None => "for example a spacing that divides the frequency".into(),
        };
        let (lower, upper) = common_period_cycles(frequency_hz, spacing_hz).ok_or_else(|| SolveFailure {
            point: label.clone(),
            reason: format!(
                "the common period of the two tones spans more than {MAX_COMMON_PERIOD_CYCLES} periods of the upper tone, \
                 which would take an impractical number of time steps; choose a spacing for which frequency/spacing is a \
                 ratio of small integers ({})", suggestion()
            ),
        })?;
        let (p, q) = (lower as usize, upper as usize);
        let precision = output_precision_v(self.solver.circuit());
        let found = collisions(lower, upper, ANALYSED_ORDER);
        if let Some(refused) = found.iter().find(|c| c.is_refused()) {
            return Err(SolveFailure {
                point: label,
                reason: format!(
                    "{} falls on the frequency of {} (order {}), so {} cannot be told from it; choose a spacing that separates them ({})",
                    refused.reported,
                    refused.other,
                    refused.other.order(),
                    refused.figure.name().to_uppercase(),
                    suggestion()
                ),
            });
        }
        let im3_low = (2 * p).abs_diff(q);
        let im3_high = 2 * q - p;
        let (im2_low, im2_high) = (q - p, p + q);
        // The product of higher order limiting each figure, with the product one step down
        // its family whose own bin is clean (no product of lower order there): its level
        // bounds the colliding one's.
        let limit = |figure: TwoToneFigure| -> Option<(Product, Option<Product>)> {
            let collider = found.iter().find(|c| c.figure == figure)?.other;
            let mut neighbour = collider.family_neighbour();
            while let Some(candidate) = neighbour {
                let bin = candidate.bin(lower, upper);
                let reported = REPORTED.iter().any(|(r, _)| r.bin(lower, upper) == bin);
                if !reported && bin <= 4 * upper && bin_is_clean(candidate, lower, upper) {
                    return Some((collider, Some(candidate)));
                }
                neighbour = candidate.family_neighbour();
            }
            Some((collider, None))
        };
        let im3_limit = limit(TwoToneFigure::Im3);
        let im2_limit = limit(TwoToneFigure::Im2);
        let neighbour_bin = |limit: &Option<(Product, Option<Product>)>| {
            limit
                .and_then(|(_, n)| n)
                .map_or(0, |n| n.bin(lower, upper) as usize)
        };
        let bins = im3_high
            .max(im2_high)
            .max(neighbour_bin(&im3_limit))
            .max(neighbour_bin(&im2_limit));
        let first_steps = (8 * q).max(2 * bins + 2) + 1;
        let measure = |phasors: &[Complex<f64>]| -> (f64, f64, f64) {
            (
                phasors[p].norm(),
                phasors[im3_low].norm().max(phasors[im3_high].norm()),
                phasors[im2_low].norm().max(phasors[im2_high].norm()),
            )
        };
        let figures = |phasors: &[Complex<f64>]| -> Vec<f64> {
            let (fundamental, im3, im2) = measure(phasors);
            let floor = dynamic_floor_dbc(fundamental, precision);
            vec![
                20.0 * fundamental.log10(),
                dbc_clamped(im3, fundamental, floor),
                dbc_clamped(im2, fundamental, floor),
            ]
        };
        let drive = Drive::TwoTone {
            amplitude_v,
            first_hz: frequency_hz,
            second_hz: frequency_hz + spacing_hz,
        };
        let period_s = lower as f64 / frequency_hz;
        let refined = self.refine(drive, period_s, first_steps, bins, figures, &label)?;
        let (fundamental_v, im3_v, im2_v) = measure(&refined.differential);
        let floor_dbc = dynamic_floor_dbc(fundamental_v, precision);
        // A figure sharing its bin with a product of higher order: its floor is the level of
        // that product's clean family neighbour (or, without one, the bin's own level: the
        // figure cannot be separated at all).
        let collision_floor = |limit: &Option<(Product, Option<Product>)>, own_v: f64| match limit {
            None => (floor_dbc, None),
            Some((collider, neighbour)) => {
                let level = match neighbour {
                    Some(n) => refined.differential[n.bin(lower, upper) as usize].norm(),
                    None => own_v,
                };
                let dbc = 20.0 * (level / fundamental_v).log10();
                if dbc.is_finite() && dbc > floor_dbc {
                    (dbc, Some(*collider))
                } else {
                    (floor_dbc, None)
                }
            }
        };
        let (im3_floor_dbc, im3_limited_by) = collision_floor(&im3_limit, im3_v);
        let (im2_floor_dbc, im2_limited_by) = collision_floor(&im2_limit, im2_v);
        Ok(TwoToneResult {
            amplitude_v,
            fundamental_v,
            im3_v,
            im2_v,
            samples: refined.steps,
            floor_dbc,
            im3_floor_dbc,
            im2_floor_dbc,
            im3_limited_by,
            im2_limited_by,
            region: refined.region,
        })
    }

    fn direct_floor_v(&self) -> Option<f64> {
        let circuit = self.solver.circuit();
        let phi = circuit.thermal_voltage;
        let gain = crate::solve::memoryless::estimated_gain(circuit);
        // The fundamental at half this amplitude stands 10⁷ above the waveform's precision.
        let for_precision = 2.0 * 1e7 * output_precision_v(circuit) / gain.max(f64::MIN_POSITIVE);
        Some((1e-3 * phi).max(for_precision).min(0.3 * phi))
    }

    fn static_solver(&self) -> &StaticSolver {
        &self.solver
    }
}

/// Whether no product of lower order than `product` lands on its bin (so the bin's level is
/// that product's own, give or take products of equal or higher order).
fn bin_is_clean(product: Product, p: u64, q: u64) -> bool {
    let bin = product.bin(p, q);
    let below = product.order() as i32 - 1;
    for m in -below..=below {
        let rest = below - m.abs();
        for n in -rest..=rest {
            if Product::new(m, n).bin(p, q) == bin {
                return false;
            }
        }
    }
    true
}
