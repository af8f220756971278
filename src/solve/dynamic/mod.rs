//! The periodic-steady-state engine for stages with charge storage (load, tail and junction
//! capacitances, transit time).
//!
//! # Method and why
//!
//! Each drive point is solved in the time domain: the stage's equations in charge-based form
//! ([`pair`]) are integrated with the trapezoidal rule applied to the charges, with Newton at
//! every step ([`trapezoid`]), and the periodic steady state is found by shooting (Newton on
//! the start state with the monodromy matrix). The choice over harmonic balance:
//!
//! - the pair is driven far into steering (hundreds of mV against φT = 26 mV), where the
//!   waveforms are nearly square and harmonic balance needs hundreds of harmonics and a
//!   dense Jacobian over all of them, with fragile convergence; a time step never sees more
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
//! `r` the step ratio). The result is accepted when every reported figure (fundamental in
//! dB, each harmonic and THD in dBc, or the two-tone fundamental, IM3 and IM2) of two
//! successive extrapolations differs by at most [`REFINEMENT_TOLERANCE_DB`]; levels above
//! [`MAX_STEPS`] are an error naming the drive point. Harmonics below
//! [`DYNAMIC_FLOOR_DBC`] are neither compared nor reported (they are `null`): the
//! integration's rounding noise sits some 60 dB further down.
//!
//! # Two tones
//!
//! Two tones at `f` and `f + Δ` are periodic over their common period `1/gcd(f, Δ)`. When
//! `Δ/f` is a ratio `a/b` with `a + b` ≤ [`MAX_COMMON_PERIOD_CYCLES`], that period is integrated
//! directly and the products read from their own FFT bins; otherwise the engine refuses with
//! a message saying how long the common period is and what spacing would work. (Substituting
//! a nearby spacing would be wrong in general: the tail node responds at `Δ`.)

pub mod dense;
pub mod pair;
pub mod trapezoid;

use crate::error::SolveFailure;
use crate::model::circuit::StageCircuit;
use crate::solve::response::ResponseEngine;
use crate::solve::response::{RegionCheck, ToneResult, TwoToneResult};
use crate::solve::spectrum::{FftCache, Spectrum};
use crate::solve::transfer::StaticSolver;
use dense::Lu;
use num_complex::Complex;
use pair::{Drive, PairSystem};
use std::sync::Arc;
use trapezoid::ChargeSystem;
use trapezoid::{periodic_steady_state, State, SteadyTolerance, StepTolerance};

/// Newton tolerance inside each time step, V (error after the last step is of order its square).
pub const NEWTON_TOLERANCE_V: f64 = 1e-9;
/// Steady-state criterion: largest change of any node voltage over one period, V.
pub const STEADY_STATE_TOLERANCE_V: f64 = 1e-12;
/// Largest change of any reported figure between successive refinements, dB.
pub const REFINEMENT_TOLERANCE_DB: f64 = 2e-3;
/// Harmonics and products below this level are not compared or reported, dBc.
pub const DYNAMIC_FLOOR_DBC: f64 = -160.0;
/// Largest number of time steps over one (common) period.
pub const MAX_STEPS: usize = 1 << 18;
/// Largest common period of two tones, in periods of the upper tone.
pub const MAX_COMMON_PERIOD_CYCLES: u64 = 1024;

const STEP_TOLERANCE: StepTolerance = StepTolerance {
    absolute: NEWTON_TOLERANCE_V,
    max_iterations: 60,
};
const STEADY_TOLERANCE: SteadyTolerance = SteadyTolerance {
    state: STEADY_STATE_TOLERANCE_V,
    max_iterations: 40,
};

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
fn dbc_clamped(level: f64, reference: f64) -> f64 {
    let db = 20.0 * (level / reference).log10();
    if db.is_nan() {
        DYNAMIC_FLOOR_DBC
    } else {
        db.max(DYNAMIC_FLOOR_DBC)
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
        let system = PairSystem::new(circuit, drive, whole);
        let fail = |reason: String| SolveFailure {
            point: label.to_owned(),
            reason,
        };
        let start = self.solver.solve_cold(drive.differential_v(0.0))?;
        let mut guess = State {
            x: system.state_from(&start),
            i: vec![0.0; pair::CHARGES],
        };
        let mut monodromy: Option<Lu> = None;
        let mut steps = first_steps;
        let mut coarser: Option<Level> = None;
        let mut previous_figures: Option<Vec<f64>> = None;
        let mut last_change = f64::INFINITY;
        while steps <= MAX_STEPS {
            let solution = periodic_steady_state(
                &system,
                guess.clone(),
                period_s,
                steps,
                STEP_TOLERANCE,
                STEADY_TOLERANCE,
                &mut monodromy,
            )
            .map_err(|e| {
                fail(format!(
                    "periodic steady state with {steps} steps per period, at t = {:.4e} s: {}",
                    e.time_s, e.reason
                ))
            })?;
            let rows = solution.trajectory.chunks_exact(system.unknowns());
            let differential: Vec<f64> = rows.clone().map(PairSystem::output_v).collect();
            let single: Vec<f64> = rows.map(PairSystem::p_collector_v).collect();
            let raw_differential = self.cache.harmonic_phasors(&differential, bins);
            let raw_single = self.cache.harmonic_phasors(&single, bins);
            guess = solution.start.clone();
            if let Some((coarse_steps, coarse_differential, coarse_single)) = &coarser {
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
                let current = figures(&extrapolated);
                if let Some(before) = &previous_figures {
                    last_change = before
                        .iter()
                        .zip(&current)
                        .map(|(a, b)| if a == b { 0.0 } else { (a - b).abs() })
                        .fold(0.0, f64::max);
                    if last_change <= REFINEMENT_TOLERANCE_DB {
                        let mut region = RegionCheck::new();
                        for x in solution.trajectory.chunks_exact(system.unknowns()) {
                            system.include_region(x, &mut region);
                        }
                        return Ok(Refined {
                            differential: extrapolated,
                            single_ended: extrapolate(&raw_single, coarse_single),
                            steps,
                            region,
                        });
                    }
                }
                previous_figures = Some(current);
            }
            coarser = Some((steps, raw_differential, raw_single));
            steps = 2 * steps - 1;
        }
        Err(fail(format!(
            "results did not settle to {REFINEMENT_TOLERANCE_DB} dB with up to {MAX_STEPS} steps per period (last change {last_change:.2e} dB)"
        )))
    }
}

/// `Δ/f` as a ratio `a/b` of small integers (continued fractions), when one exists with
/// `a + b ≤ MAX_COMMON_PERIOD_CYCLES` to a relative 10⁻⁹.
pub fn common_period_cycles(frequency_hz: f64, spacing_hz: f64) -> Option<(u64, u64)> {
    let ratio = spacing_hz / frequency_hz;
    if !(ratio.is_finite() && ratio > 0.0) {
        return None;
    }
    let (mut h0, mut h1) = (0u64, 1u64);
    let (mut k0, mut k1) = (1u64, 0u64);
    let mut value = ratio;
    for _ in 0..64 {
        let whole = value.floor();
        if whole > 1e12 {
            break;
        }
        let a = whole as u64;
        let h2 = a.checked_mul(h1)?.checked_add(h0)?;
        let k2 = a.checked_mul(k1)?.checked_add(k0)?;
        (h0, h1, k0, k1) = (h1, h2, k1, k2);
        if k1 > 0 && h1 + k1 > MAX_COMMON_PERIOD_CYCLES {
            return None;
        }
        if k1 > 0 && (h1 as f64 / k1 as f64 - ratio).abs() <= 1e-9 * ratio {
            return Some((k1, h1 + k1));
        }
        let fraction = value - whole;
        if fraction <= 0.0 {
            break;
        }
        value = 1.0 / fraction;
    }
    None
}

impl DynamicEngine {
    /// A multi-tanh cell with charge storage is not solved yet (its pairs couple through the
    /// shared collector nodes at every instant); the plan reader refuses it, and a library
    /// caller gets this failure rather than a pair solved alone.
    fn refuse_cell(&self, label: &str) -> Result<(), SolveFailure> {
        if self.static_solver().cell().is_empty() {
            Ok(())
        } else {
            Err(SolveFailure {
                point: label.to_owned(),
                reason: "a multi-tanh cell with charge storage is not solved yet: remove its capacitances and transit times".into(),
            })
        }
    }
}

impl ResponseEngine for DynamicEngine {
    fn tone(
        &self,
        amplitude_v: f64,
        frequency_hz: f64,
        harmonics: usize,
    ) -> Result<ToneResult, SolveFailure> {
        let label = format!("amplitude {amplitude_v:e} V at {frequency_hz:e} Hz");
        self.refuse_cell(&label)?;
        if !(frequency_hz.is_finite() && frequency_hz > 0.0) {
            return Err(SolveFailure {
                point: label,
                reason: "the frequency must be positive and finite for a stage with capacitance"
                    .into(),
            });
        }
        let harmonics = harmonics.max(3);
        let first_steps = (4 * (harmonics + 1)).next_power_of_two().max(64) + 1;
        let figures = |phasors: &[Complex<f64>]| -> Vec<f64> {
            let fundamental = phasors[1].norm();
            let mut out = vec![20.0 * fundamental.log10()];
            let mut power = 0.0;
            for phasor in &phasors[2..] {
                out.push(dbc_clamped(phasor.norm(), fundamental));
                power += phasor.norm_sqr();
            }
            out.push(dbc_clamped(power.sqrt(), fundamental));
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
        Ok(ToneResult {
            amplitude_v,
            differential: amplitudes(&refined.differential),
            single_ended: amplitudes(&refined.single_ended),
            samples: refined.steps,
            floor_dbc: DYNAMIC_FLOOR_DBC,
            region: refined.region,
        })
    }

    fn two_tone(
        &self,
        amplitude_v: f64,
        frequency_hz: f64,
        spacing_hz: f64,
    ) -> Result<TwoToneResult, SolveFailure> {
        let label = format!(
            "two tones of {amplitude_v:e} V at {frequency_hz:e} Hz and {:e} Hz",
            frequency_hz + spacing_hz
        );
        self.refuse_cell(&label)?;
        let (lower, upper) = common_period_cycles(frequency_hz, spacing_hz).ok_or_else(|| SolveFailure {
            point: label.clone(),
            reason: format!(
                "the common period of the two tones spans more than {MAX_COMMON_PERIOD_CYCLES} periods of the upper tone, \
                 which would take an impractical number of time steps; choose a spacing for which frequency/spacing is a \
                 ratio of small integers (for example a spacing that divides the frequency)"
            ),
        })?;
        if 2 * lower == upper {
            return Err(SolveFailure {
                point: label,
                reason:
                    "a spacing equal to the frequency puts 2f1 − f2 at DC; IM3 is undefined there"
                        .into(),
            });
        }
        let (p, q) = (lower as usize, upper as usize);
        let im3_low = (2 * p).abs_diff(q);
        let im3_high = 2 * q - p;
        let (im2_low, im2_high) = (q - p, p + q);
        let bins = im3_high.max(im2_high);
        let first_steps = (16 * q).max(4 * bins) + 1;
        let measure = |phasors: &[Complex<f64>]| -> (f64, f64, f64) {
            (
                phasors[p].norm(),
                phasors[im3_low].norm().max(phasors[im3_high].norm()),
                phasors[im2_low].norm().max(phasors[im2_high].norm()),
            )
        };
        let figures = |phasors: &[Complex<f64>]| -> Vec<f64> {
            let (fundamental, im3, im2) = measure(phasors);
            vec![
                20.0 * fundamental.log10(),
                dbc_clamped(im3, fundamental),
                dbc_clamped(im2, fundamental),
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
        // Products under the floor are rounding noise: report them as absent.
        let floor = 10f64.powf(DYNAMIC_FLOOR_DBC / 20.0) * fundamental_v;
        let clean = |level: f64| if level < floor { 0.0 } else { level };
        Ok(TwoToneResult {
            amplitude_v,
            fundamental_v,
            im3_v: clean(im3_v),
            im2_v: clean(im2_v),
            samples: refined.steps,
            region: refined.region,
        })
    }

    fn static_solver(&self) -> &StaticSolver {
        &self.solver
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn common_periods_are_found_for_simple_ratios_only() {
        assert_eq!(common_period_cycles(1e6, 1e5), Some((10, 11)));
        assert_eq!(common_period_cycles(1e3, 1e5), Some((1, 101)));
        assert_eq!(common_period_cycles(3e6, 2e6), Some((3, 5)));
        assert_eq!(common_period_cycles(1e7, 1.0), None);
        assert_eq!(common_period_cycles(1e6, 1e6 / std::f64::consts::PI), None);
    }
}
