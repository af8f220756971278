//! The memoryless engine: a stage without charge storage answers a drive sample by sample
//! from its exact static transfer, so frequency only labels the points.
//!
//! Single tones are sampled coherently over one period (from a quarter period for a matched
//! pair, see [`super::symmetric`]); two tones are sampled on the torus of the two phases.

use crate::error::SolveFailure;
use crate::model::circuit::StageCircuit;
use crate::solve::response::{RegionCheck, ResponseEngine, ToneResult, TwoToneResult};
use crate::solve::spectrum::{
    analyse_adaptive, resolved_floor_dbc, FftCache, Spectrum, ANALYSIS_FLOOR_DBC, CONVERGED_DB,
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

/// Absolute precision of the differential output of the general solve, V.
///
/// The general solve converges each side's `u = ln J` to a few ulps on its own (relative step
/// ≤ 4ε), so each collector current carries a relative error near `4ε·|u|`, and their
/// difference — the signal — an absolute one near `4ε·|u|·R_L·I_tail` however small the
/// signal is (measured: 2.3e-15 V for 1 mA, 2 kΩ, against this bound's 6e-15 V). The
/// matched-pair fast path keeps full relative precision and needs no such bound.
pub fn general_precision_v(circuit: &StageCircuit) -> f64 {
    let log_transport = (0.5 * circuit.tail_current).ln().abs().max(1.0);
    let load = circuit.p.load_resistance.max(circuit.m.load_resistance);
    4.0 * f64::EPSILON * log_transport * load * circuit.tail_current
}

/// The least amplitude answered directly by the general path, V: large enough that at half
/// of it [`general_precision_v`] times the noise margin is 10⁻⁹ of the fundamental (the
/// analysis floor there is −180 dBc and the gain exact to about 1e-10 dB), at least 10⁻⁴·φT,
/// and never above 3·10⁻²·φT, where the power series through it and half of it still leaves
/// a gain error near 1e-8 relative (the fourth-order term, (A/2φT)⁴ ≈ 6e-8 at most).
pub fn general_direct_floor_v(circuit: &StageCircuit) -> f64 {
    let phi = circuit.thermal_voltage;
    let for_precision =
        2.0 * crate::solve::spectrum::NOISE_MARGIN * 1e9 * general_precision_v(circuit)
            / estimated_gain(circuit).max(f64::MIN_POSITIVE);
    (1e-4 * phi).max(for_precision).min(3e-2 * phi)
}

/// The small-signal gain `g_m·R_L/(1 + g_m·(R_E + R_b/β))` of the P side's half circuit, a
/// close estimate without the Early effect (half-circuit analysis, common practice): it scales
/// an engine's precision to the input.
pub fn estimated_gain(circuit: &StageCircuit) -> f64 {
    let side = &circuit.p;
    let transconductance = 0.5 * circuit.tail_current / circuit.thermal_voltage;
    side.load_resistance * transconductance
        / (1.0
            + transconductance
                * (side.emitter_resistance + side.base_path_resistance * side.beta_inv))
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
    let result = analyse_adaptive(
        cache,
        2,
        harmonics,
        ANALYSIS_FLOOR_DBC,
        general_precision_v(solver.circuit()),
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
            point: format!("amplitude {} V", crate::units::short_number(amplitude_v)),
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
        floor_dbc: result.floor_dbc,
        region,
    })
}

/// Two equal tones through a memoryless stage, analysed exactly on the torus of the two
/// phases: `v_d = A·(cos θ1 + cos θ2)` sampled on an `N×N` grid and transformed in 2-D, so
/// every product `m·f1 + n·f2` has its own coefficient and none can collide, whatever the
/// tone frequencies. `N` doubles until the fundamental, IM3 and IM2 move by less than
/// [`CONVERGED_DB`], products compared down to the point's analysis floor (which rises
/// above [`ANALYSIS_FLOOR_DBC`] when the solve's absolute precision is a sizeable part of a
/// small fundamental, see [`resolved_floor_dbc`]).
pub fn two_tone(
    solver: &StaticSolver,
    cache: &FftCache,
    amplitude_v: f64,
) -> Result<TwoToneResult, SolveFailure> {
    let precision = if crate::solve::symmetric::applies(solver.circuit()) {
        0.0
    } else {
        general_precision_v(solver.circuit())
    };
    let mut n = 16usize;
    let mut previous: Option<TwoToneResult> = None;
    while n <= 4096 {
        let mut result = two_tone_grid(solver, cache, amplitude_v, n)?;
        result.floor_dbc = resolved_floor_dbc(ANALYSIS_FLOOR_DBC, precision, result.fundamental_v);
        result.im3_floor_dbc = result.floor_dbc;
        result.im2_floor_dbc = result.floor_dbc;
        if let Some(before) = previous {
            let floor = result.floor_dbc.max(before.floor_dbc);
            let clamp =
                |level: f64, fundamental: f64| (20.0 * (level / fundamental).log10()).max(floor);
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
                result.floor_dbc = floor;
                result.im3_floor_dbc = floor;
                result.im2_floor_dbc = floor;
                return Ok(result);
            }
        }
        previous = Some(result);
        n *= 2;
    }
    Err(SolveFailure {
        point: format!(
            "two tones of {} V each",
            crate::units::short_number(amplitude_v)
        ),
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
        floor_dbc: ANALYSIS_FLOOR_DBC,
        im3_floor_dbc: ANALYSIS_FLOOR_DBC,
        im2_floor_dbc: ANALYSIS_FLOOR_DBC,
        im3_limited_by: None,
        im2_limited_by: None,
        region,
    })
}

/// The engine for stages without charge storage: frequency only labels the points.
#[derive(Debug, Clone)]
pub struct MemorylessEngine {
    solver: StaticSolver,
    cache: Arc<FftCache>,
    /// Least amplitude answered directly (`None`: the matched-pair fast path, exact to its
    /// own relative precision at any amplitude).
    direct_floor_v: Option<f64>,
}

impl MemorylessEngine {
    /// Builds the engine for one stage at one temperature.
    pub fn new(circuit: StageCircuit, cache: Arc<FftCache>) -> Self {
        let direct_floor_v =
            (!crate::solve::symmetric::applies(&circuit)).then(|| general_direct_floor_v(&circuit));
        MemorylessEngine {
            solver: StaticSolver::new(circuit),
            cache,
            direct_floor_v,
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

    fn direct_floor_v(&self) -> Option<f64> {
        self.direct_floor_v
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
