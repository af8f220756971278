//! The memoryless engine: a stage without charge storage answers a drive sample by sample
//! from its exact static transfer, so frequency only labels the points.
//!
//! Single tones are sampled coherently over one period (from a quarter period for a matched
//! pair, see [`super::symmetric`]); two tones are sampled on the torus of the two phases.

use crate::error::SolveFailure;
use crate::model::circuit::StageCircuit;
use crate::solve::response::{RegionCheck, ResponseEngine, ToneResult, TwoToneResult};
use crate::solve::spectrum::{
    analyse_adaptive, FftCache, Spectrum, ANALYSIS_FLOOR_DBC, CONVERGED_DB,
};
use crate::solve::transfer::{StaticSolver, WarmStart};
use num_complex::Complex;
use std::f64::consts::TAU;
use std::sync::Arc;

/// Analyses one single-tone drive `v_d = A·cos θ` of a memoryless stage, from a quarter
/// period when the pair is matched (see [`super::symmetric`]), otherwise sample by sample.
/// A drive that forward-biases a collector-base junction anywhere is solved with the whole
/// model at every sample (see [`StaticSolver::solve_whole_model`]).
pub fn single_tone(
    solver: &StaticSolver,
    cache: &FftCache,
    amplitude_v: f64,
    harmonics: usize,
) -> Result<ToneResult, SolveFailure> {
    let whole = solver.saturates_within(amplitude_v)?;
    let circuit = solver.circuit();
    if crate::solve::symmetric::applies(circuit)
        || (whole && crate::solve::symmetric::is_matched(circuit))
    {
        crate::solve::symmetric::single_tone(solver, cache, amplitude_v, harmonics, whole)
    } else {
        general_tone(solver, cache, amplitude_v, harmonics, whole)
    }
}

/// The general single-tone analysis: every sample of the period solved in turn (with the
/// whole model throughout when the drive saturates anywhere).
pub fn single_tone_general(
    solver: &StaticSolver,
    cache: &FftCache,
    amplitude_v: f64,
    harmonics: usize,
) -> Result<ToneResult, SolveFailure> {
    let whole = solver.saturates_within(amplitude_v)?;
    general_tone(solver, cache, amplitude_v, harmonics, whole)
}

fn general_tone(
    solver: &StaticSolver,
    cache: &FftCache,
    amplitude_v: f64,
    harmonics: usize,
    whole: bool,
) -> Result<ToneResult, SolveFailure> {
    let tail = solver.circuit().tail_current;
    let mut warm = WarmStart::default();
    let mut region = RegionCheck::new();
    let floor = ANALYSIS_FLOOR_DBC;
    let result = analyse_adaptive(
        cache,
        2,
        harmonics,
        floor,
        |theta, out: &mut [f64]| {
            let v_d = amplitude_v * theta.cos();
            let point = if whole {
                solver.solve_whole_model(v_d, &mut warm)?
            } else {
                solver.solve(v_d, &mut warm)?
            };
            region.update(&point, tail);
            out[0] = point.output_voltage;
            out[1] = point.p.collector_voltage;
            Ok(())
        },
        |n, change| {
            SolveFailure {
            point: format!("amplitude {amplitude_v:e} V"),
            reason: format!(
                "harmonics did not converge to {CONVERGED_DB} dB with {n} samples per period (last change {change:.2e} dB)"
            ),
        }
        },
    )?;
    let mut spectra = result.spectra.into_iter();
    let differential = spectra.next().unwrap_or(Spectrum { amplitudes: vec![] });
    let single_ended = spectra.next().unwrap_or(Spectrum { amplitudes: vec![] });
    Ok(ToneResult {
        amplitude_v,
        differential,
        single_ended,
        samples: result.samples,
        floor_dbc: floor,
        region,
    })
}

/// Two equal tones through a memoryless stage, analysed exactly on the torus of the two
/// phases: `v_d = A·(cos θ1 + cos θ2)` sampled on an `N×N` grid and transformed in 2-D, so
/// every product `m·f1 + n·f2` has its own coefficient and none can collide, whatever the
/// tone frequencies. `N` doubles until the fundamental, IM3 and IM2 move by less than
/// [`CONVERGED_DB`].
pub fn two_tone(
    solver: &StaticSolver,
    cache: &FftCache,
    amplitude_v: f64,
) -> Result<TwoToneResult, SolveFailure> {
    let mut n = 16usize;
    let mut previous: Option<TwoToneResult> = None;
    while n <= 4096 {
        let result = two_tone_grid(solver, cache, amplitude_v, n)?;
        if let Some(before) = previous {
            let clamp = |level: f64, fundamental: f64| {
                (20.0 * (level / fundamental).log10()).max(ANALYSIS_FLOOR_DBC)
            };
            let changes = [
                (20.0 * (result.fundamental_v / before.fundamental_v).log10()).abs(),
                (clamp(result.im3_v, result.fundamental_v)
                    - clamp(before.im3_v, before.fundamental_v))
                .abs(),
                (clamp(result.im2_v, result.fundamental_v)
                    - clamp(before.im2_v, before.fundamental_v))
                .abs(),
            ];
            if changes.iter().all(|c| *c <= CONVERGED_DB) {
                return Ok(result);
            }
        }
        previous = Some(result);
        n *= 2;
    }
    Err(SolveFailure {
        point: format!("two tones of {amplitude_v:e} V each"),
        reason: "intermodulation did not converge on a 4096×4096 grid".into(),
    })
}

/// One two-tone analysis on a fixed `n×n` grid of the two phases (no convergence loop: the
/// caller takes `n` from a converged [`two_tone`] of a neighbouring circuit).
pub fn two_tone_grid(
    solver: &StaticSolver,
    cache: &FftCache,
    amplitude_v: f64,
    n: usize,
) -> Result<TwoToneResult, SolveFailure> {
    let plan = cache.plan(n);
    let mut grid = vec![Complex::new(0.0, 0.0); n * n];
    let mut warm = WarmStart::default();
    let mut region = RegionCheck::new();
    let tail = solver.circuit().tail_current;
    let whole = solver.saturates_within(2.0 * amplitude_v)?;
    for row in 0..n {
        let first = amplitude_v * (TAU * row as f64 / n as f64).cos();
        for col in 0..n {
            let second = amplitude_v * (TAU * col as f64 / n as f64).cos();
            let point = if whole {
                solver.solve_whole_model(first + second, &mut warm)?
            } else {
                solver.solve(first + second, &mut warm)?
            };
            region.update(&point, tail);
            grid[row * n + col] = Complex::new(point.output_voltage, 0.0);
        }
    }
    // Rows, then columns (via transpose).
    for row in grid.chunks_mut(n) {
        plan.process(row);
    }
    let mut transposed = vec![Complex::new(0.0, 0.0); n * n];
    for r in 0..n {
        for c in 0..n {
            transposed[c * n + r] = grid[r * n + c];
        }
    }
    for row in transposed.chunks_mut(n) {
        plan.process(row);
    }
    // transposed[k2 * n + k1] is the coefficient of exp(i(k1·θ1 + k2·θ2)).
    let coefficient = |k1: i64, k2: i64| -> f64 {
        let wrap = |k: i64| k.rem_euclid(n as i64) as usize;
        2.0 * transposed[wrap(k2) * n + wrap(k1)].norm() / (n * n) as f64
    };
    let fundamental_v = coefficient(1, 0);
    let im3_v = coefficient(2, -1).max(coefficient(-1, 2));
    let im2_v = coefficient(1, -1).max(coefficient(1, 1));
    Ok(TwoToneResult {
        amplitude_v,
        fundamental_v,
        im3_v,
        im2_v,
        samples: n,
        region,
    })
}

/// The engine for stages without charge storage: frequency only labels the points.
#[derive(Debug, Clone)]
pub struct MemorylessEngine {
    solver: StaticSolver,
    cache: Arc<FftCache>,
}

impl MemorylessEngine {
    /// Builds the engine for one stage at one temperature.
    pub fn new(circuit: StageCircuit, cache: Arc<FftCache>) -> Self {
        MemorylessEngine {
            solver: StaticSolver::new(circuit),
            cache,
        }
    }
}

impl ResponseEngine for MemorylessEngine {
    fn tone(
        &self,
        amplitude_v: f64,
        _frequency_hz: f64,
        harmonics: usize,
    ) -> Result<ToneResult, SolveFailure> {
        single_tone(&self.solver, &self.cache, amplitude_v, harmonics)
    }

    fn two_tone(
        &self,
        amplitude_v: f64,
        _frequency_hz: f64,
        _spacing_hz: f64,
    ) -> Result<TwoToneResult, SolveFailure> {
        two_tone(&self.solver, &self.cache, amplitude_v)
    }

    fn static_solver(&self) -> &StaticSolver {
        &self.solver
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::stage::{Mismatch, Stage};
    use crate::model::transistor::Transistor;
    use crate::solve::symmetric::{self, applies};

    fn solver(stage: Stage) -> StaticSolver {
        StaticSolver::new(StageCircuit::new(&stage, 27.0))
    }

    /// The fast path must reproduce the general sample-by-sample path (the obviously correct
    /// reference, RustFFT-style): same sample count, harmonics equal to within 1e-12 of the
    /// fundamental (rounding of two different but exact solves), and every harmonic above
    /// −150 dBc equal to within 1e-6 dB, THD and HD3 to within 1e-9 dB when above −100 dBc.
    #[test]
    fn the_symmetric_path_matches_the_general_path() {
        let cache = FftCache::default();
        for stage in [
            Stage::new("a", 1e-3, 2e3).emitter_resistance(200.0),
            Stage::new("b", 1e-3, 2e3),
            Stage::new("c", 2e-3, 1e3)
                .emitter_resistance(50.0)
                .source_resistance(300.0)
                .transistor(Transistor::default().beta(80.0).base_resistance(100.0)),
        ] {
            let name = stage.name.clone();
            let solver = solver(stage);
            assert!(applies(solver.circuit()));
            for amplitude in [1e-3, 0.01, 0.05, 0.2, 1.0] {
                let fast = symmetric::single_tone(&solver, &cache, amplitude, 40, false).unwrap();
                let slow = single_tone_general(&solver, &cache, amplitude, 40).unwrap();
                assert_eq!(fast.samples, slow.samples, "{name} at {amplitude} V");
                let f1 = slow.differential.fundamental();
                for k in 0..=40 {
                    let (a, b) = (
                        fast.differential.amplitudes[k],
                        slow.differential.amplitudes[k],
                    );
                    assert!(
                        (a - b).abs() <= 1e-12 * f1,
                        "{name} at {amplitude} V, H{k}: {a:e} vs {b:e}"
                    );
                    let (a, b) = (
                        fast.single_ended.amplitudes[k],
                        slow.single_ended.amplitudes[k],
                    );
                    assert!(
                        (a - b).abs() <= 1e-12 * slow.single_ended.fundamental().max(1e-3),
                        "single-ended H{k}"
                    );
                }
                for (fast_db, slow_db) in [
                    (fast.differential.raw_dbc(3), slow.differential.raw_dbc(3)),
                    (
                        fast.differential.raw_thd_dbc(40),
                        slow.differential.raw_thd_dbc(40),
                    ),
                ] {
                    if slow_db > -100.0 {
                        assert!(
                            (fast_db - slow_db).abs() < 1e-9,
                            "{name} at {amplitude} V: {fast_db} vs {slow_db}"
                        );
                    }
                }
                assert_eq!(
                    fast.region.is_forward_active(),
                    slow.region.is_forward_active()
                );
                assert!(
                    (fast.region.min_current_fraction - slow.region.min_current_fraction).abs()
                        <= 1e-9 * slow.region.min_current_fraction.max(1e-300)
                );
            }
        }
    }

    #[test]
    fn a_mismatched_pair_takes_the_general_path() {
        let solver = solver(
            Stage::new("m", 1e-3, 2e3).mismatch(Mismatch::default().saturation_current(0.01)),
        );
        assert!(!applies(solver.circuit()));
    }
}
