//! Single-tone analysis of a matched pair using its symmetry: the fast path of
//! [`crate::solve::memoryless::single_tone`].
//!
//! A matched pair with an ideal tail and no Early effect has an odd transfer (swapping the
//! input swaps the sides), and the drive `A·cos θ` is even in θ, so the differential output
//! obeys `x(θ) = x(−θ)` and `x(π − θ) = −x(θ)`: one quarter period (`N/4 + 1` samples) fixes
//! the whole period, and at `−v_d` the P side carries what the M side carried at `+v_d`.
//! The sample counts, the convergence rule and the FFT normalisation are those of
//! [`crate::solve::spectrum::analyse_adaptive`], so results agree with the general path to rounding.
//!
//! Each quarter sample solves the pair's exact reduced equation
//! `f(y) = φT·y + R·tanh(y/2) − v_d = 0` (with `R = (R_b/β + R_E·(1 + 1/β))·I_tail/(1 + 1/β)`,
//! `y = ln(J_P/J_M)`; `R = 0` is closed form) by Newton's method warm-started from the previous
//! sample. Tolerance: since `f′ ≥ φT` and `|f″| ≤ 0.1925·R`, after a step `s` the error is at
//! most `2·C·s²` with `C = 0.1925·R/(2φT)` whenever `C·|s| ≤ 1/4`; iteration stops when that
//! bound is below `4ε·max(|y|, 1)`, the same tolerance as [`crate::solve::transfer`]. Any iterate that
//! leaves the bracket `[(v_d − R)/φT − 1, (v_d + R)/φT + 1]`, or 30 steps without convergence,
//! hands the sample to the safeguarded general solver instead. So does a sample where either
//! intrinsic collector-base junction is forward-biased, where the reduced equation no longer
//! holds: the symmetry holds for the whole model too, so only that sample's solve changes,
//! never the unfolding.

use crate::error::SolveFailure;
use crate::model::circuit::StageCircuit;
use crate::solve::response::{RegionCheck, ToneResult};
use crate::solve::spectrum::{
    converged, largest_change_db, FftCache, Spectrum, ANALYSIS_FLOOR_DBC, CONVERGED_DB,
    INITIAL_SAMPLES, MAX_SAMPLES,
};
use crate::solve::transfer::{StaticSolver, WarmStart};
use num_complex::Complex;
use std::cell::RefCell;

/// Whether the symmetric fast path applies: matched sides, ideal tail, no Early effect.
pub fn applies(circuit: &StageCircuit) -> bool {
    circuit.is_reducible() && is_matched(circuit)
}

/// Whether the two sides are identical, so that the quarter-period symmetry holds whatever
/// the model solved at each sample (used with the whole model for saturating drives).
pub fn is_matched(circuit: &StageCircuit) -> bool {
    circuit.p == circuit.m
}

/// What one quarter sample contributes: the differential output and the two collector
/// voltages (P and M) at `+v_d`.
#[derive(Debug, Clone, Copy, Default)]
struct QuarterSample {
    output_v: f64,
    collector_p_v: f64,
    collector_m_v: f64,
    /// The solved `y = ln(J_P/J_M)`, kept so finer grids start Newton from interpolation.
    log_ratio: f64,
}

/// The reduced equation of a matched pair, prepared once per stage and temperature.
struct MatchedPair<'a> {
    solver: &'a StaticSolver,
    phi: f64,
    /// `R` of the module docs, V.
    drop_v: f64,
    /// Tail current over (1 + 1/β): the transport-current sum, A.
    transport_sum: f64,
    /// Newton's quadratic-convergence constant `C`, 1/unit of y.
    newton_c: f64,
}

impl<'a> MatchedPair<'a> {
    fn new(solver: &'a StaticSolver) -> Self {
        let c = solver.circuit();
        let side = &c.p;
        let k = 1.0 + side.beta_inv;
        let r = side.base_path_resistance * side.beta_inv + side.emitter_resistance * k;
        let transport_sum = c.tail_current / k;
        let drop_v = r * transport_sum;
        MatchedPair {
            solver,
            phi: c.thermal_voltage,
            drop_v,
            transport_sum,
            newton_c: 0.1925 * drop_v / (2.0 * c.thermal_voltage),
        }
    }

    /// `tanh(y/2)` and `exp(−|y|)` without cancellation.
    fn split(y: f64) -> (f64, f64) {
        let a = y.abs();
        let (t, e) = if a < 0.5 {
            // 1 − e cancels for small |y|: take it from expm1.
            let m = (-a).exp_m1();
            (-m / (2.0 + m), m + 1.0)
        } else {
            let e = (-a).exp();
            ((1.0 - e) / (1.0 + e), e)
        };
        (if y >= 0.0 { t } else { -t }, e)
    }

    /// Solves `y` at `v_d ≥ 0`, warm-started from `guess`; `None` hands over to the general
    /// solver.
    fn solve_log_ratio(&self, v_d: f64, guess: f64) -> Option<f64> {
        if self.drop_v == 0.0 {
            return Some(v_d / self.phi);
        }
        let low = (v_d - self.drop_v) / self.phi - 1.0;
        let high = (v_d + self.drop_v) / self.phi + 1.0;
        let mut y = guess.clamp(low, high);
        for _ in 0..30 {
            let (t, _) = Self::split(y);
            let value = self.phi * y + self.drop_v * t - v_d;
            let slope = self.phi + 0.5 * self.drop_v * (1.0 - t * t);
            let step = value / slope;
            y -= step;
            if !(y > low && y < high) {
                return None;
            }
            let bound = self.newton_c * step.abs();
            if bound <= 0.25 && 2.0 * bound * step.abs() <= 4.0 * f64::EPSILON * y.abs().max(1.0) {
                return Some(y);
            }
        }
        None
    }

    /// The quarter sample at `v_d ≥ 0`, updating `region` with both sides.
    fn sample(
        &self,
        v_d: f64,
        guess: &mut f64,
        region: &mut RegionCheck,
        fallback: &mut WarmStart,
        whole: bool,
    ) -> Result<QuarterSample, SolveFailure> {
        let c = self.solver.circuit();
        if whole {
            let point = self.solver.solve_whole_model(v_d, fallback)?;
            region.update(&point, c.tail_current);
            return Ok(QuarterSample {
                output_v: point.output_voltage,
                collector_p_v: point.p.collector_voltage,
                collector_m_v: point.m.collector_voltage,
                log_ratio: 0.0,
            });
        }
        let solved = self.solve_log_ratio(v_d, *guess);
        let reduced = solved.filter(|&y| {
            // Both intrinsic collector-base junctions at or below zero bias?
            let (_, e) = Self::split(y);
            let larger = self.transport_sum / (1.0 + e);
            let side = &c.p;
            let internal = side.load_resistance + side.collector_resistance;
            // The side carrying the larger current has the lower collector and, at v_d ≥ 0,
            // the higher base: it is the one that saturates first.
            let base_collector = c.input_common_mode + 0.5 * v_d.abs()
                - side.base_path_resistance * larger * side.beta_inv
                - (c.supply - internal * larger);
            base_collector <= 0.0
        });
        let Some(y) = reduced else {
            // The safeguarded solver: slower, never wrong. Saturating samples keep a warm
            // start from one to the next; others start afresh.
            let point = match solved {
                Some(_) => self.solver.solve(v_d, fallback)?,
                None => self.solver.solve(v_d, &mut WarmStart::default())?,
            };
            region.update(&point, c.tail_current);
            *guess = (point.p.collector_current / point.m.collector_current).ln();
            return Ok(QuarterSample {
                output_v: point.output_voltage,
                collector_p_v: point.p.collector_voltage,
                collector_m_v: point.m.collector_voltage,
                log_ratio: *guess,
            });
        };
        *guess = y;
        let (t, e) = Self::split(y);
        let side = &c.p;
        // Larger and smaller transport currents, each without cancellation.
        let larger = self.transport_sum / (1.0 + e);
        let smaller = self.transport_sum * e / (1.0 + e);
        let (j_p, j_m) = if y >= 0.0 {
            (larger, smaller)
        } else {
            (smaller, larger)
        };
        let collector_p_v = c.supply - side.load_resistance * j_p;
        let collector_m_v = c.supply - side.load_resistance * j_m;
        let base_p_v =
            c.input_common_mode + 0.5 * v_d - side.base_path_resistance * j_p * side.beta_inv;
        let base_m_v =
            c.input_common_mode - 0.5 * v_d - side.base_path_resistance * j_m * side.beta_inv;
        let behind_rc = side.collector_resistance;
        region.include(
            base_p_v - (collector_p_v - behind_rc * j_p),
            j_p / c.tail_current,
            0.0,
        );
        region.include(
            base_m_v - (collector_m_v - behind_rc * j_m),
            j_m / c.tail_current,
            0.0,
        );
        Ok(QuarterSample {
            output_v: side.load_resistance * self.transport_sum * t,
            collector_p_v,
            collector_m_v,
            log_ratio: y,
        })
    }
}

/// Buffers reused from point to point on each thread (quarter samples of the current and the
/// previous grid, the packed FFT input and the FFT's scratch).
#[derive(Default)]
struct Scratch {
    quarter: Vec<QuarterSample>,
    coarse: Vec<QuarterSample>,
    packed: Vec<Complex<f64>>,
    fft: Vec<Complex<f64>>,
}

thread_local! {
    static SCRATCH: RefCell<Scratch> = RefCell::new(Scratch::default());
}

/// Analyses `v_d = A·cos θ` of a matched pair from quarter periods (see the module docs);
/// `whole` solves every quarter sample with the whole model (a drive that saturates).
/// Callers check [`applies`] first (or [`is_matched`] with `whole`); otherwise the general
/// path must be used.
pub fn single_tone(
    solver: &StaticSolver,
    cache: &FftCache,
    amplitude_v: f64,
    harmonics: usize,
    whole: bool,
) -> Result<ToneResult, SolveFailure> {
    SCRATCH.with(|scratch| match scratch.try_borrow_mut() {
        Ok(mut scratch) => {
            single_tone_in(solver, cache, amplitude_v, harmonics, whole, &mut scratch)
        }
        // Only reachable if a solve re-entered this function on the same thread.
        Err(_) => single_tone_in(
            solver,
            cache,
            amplitude_v,
            harmonics,
            whole,
            &mut Scratch::default(),
        ),
    })
}

fn single_tone_in(
    solver: &StaticSolver,
    cache: &FftCache,
    amplitude_v: f64,
    harmonics: usize,
    whole: bool,
    scratch: &mut Scratch,
) -> Result<ToneResult, SolveFailure> {
    let pair = MatchedPair::new(solver);
    let mut region = RegionCheck::new();
    let mut n = INITIAL_SAMPLES;
    let mut guess = amplitude_v / (pair.phi + 0.5 * pair.drop_v);
    let refine = |n: usize,
                  scratch: &mut Scratch,
                  first: bool,
                  guess: &mut f64,
                  region: &mut RegionCheck|
     -> Result<(Spectrum, Spectrum), SolveFailure> {
        // Warm start of the samples handed to the safeguarded solver (neighbours in θ).
        let mut fallback = WarmStart::default();
        let cosines = cache.quarter_cosines(n);
        std::mem::swap(&mut scratch.quarter, &mut scratch.coarse);
        let (fresh, coarse) = (&mut scratch.quarter, &scratch.coarse);
        fresh.clear();
        for i in 0..=n / 4 {
            // Keep the samples already solved (they sit at the even indices of the finer grid).
            if !first && i % 2 == 0 {
                fresh.push(coarse[i / 2]);
                continue;
            }
            // Warm start: on a refined grid, cubic interpolation between the four nearest
            // solved samples (error of fourth order in the spacing; beyond either end of the
            // quarter, y is even about θ = 0 and odd about θ = π/2), else a linear
            // extrapolation of the last two.
            if !first {
                let last = coarse.len() as isize - 1;
                let at = |k: isize| -> f64 {
                    if k < 0 {
                        coarse[(-k) as usize].log_ratio
                    } else if k > last {
                        -coarse[(2 * last - k) as usize].log_ratio
                    } else {
                        coarse[k as usize].log_ratio
                    }
                };
                let k = (i / 2) as isize;
                *guess = (9.0 * (at(k) + at(k + 1)) - (at(k - 1) + at(k + 2))) / 16.0;
            } else if i >= 2 {
                *guess = 2.0 * fresh[i - 1].log_ratio - fresh[i - 2].log_ratio;
            }
            fresh.push(pair.sample(
                amplitude_v * cosines[i],
                guess,
                region,
                &mut fallback,
                whole,
            )?);
        }
        unfold_packed(fresh, n, &mut scratch.packed);
        let (a, b) =
            cache.two_real_amplitudes_packed(&mut scratch.packed, &mut scratch.fft, harmonics);
        Ok((Spectrum { amplitudes: a }, Spectrum { amplitudes: b }))
    };
    let mut previous = refine(n, scratch, true, &mut guess, &mut region)?;
    loop {
        n *= 2;
        let current = refine(n, scratch, false, &mut guess, &mut region)?;
        if converged(&previous.0, &current.0, harmonics, ANALYSIS_FLOOR_DBC) {
            return Ok(ToneResult {
                amplitude_v,
                differential: current.0,
                single_ended: current.1,
                samples: n,
                floor_dbc: ANALYSIS_FLOOR_DBC,
                region,
            });
        }
        if 2 * n > MAX_SAMPLES {
            let change = largest_change_db(&previous.0, &current.0, harmonics, ANALYSIS_FLOOR_DBC);
            return Err(SolveFailure {
                point: format!("amplitude {amplitude_v:e} V"),
                reason: format!(
                    "harmonics did not converge to {CONVERGED_DB} dB with {n} samples per period (last change {change:.2e} dB)"
                ),
            });
        }
        previous = current;
    }
}

/// The full period (`n` samples at `θ = 2π·j/n`) of the differential output (real part) and
/// the P-side collector voltage (imaginary part) from the quarter samples `j = 0..=n/4`,
/// packed for [`FftCache::two_real_amplitudes_packed`].
fn unfold_packed(quarter: &[QuarterSample], n: usize, packed: &mut Vec<Complex<f64>>) {
    packed.clear();
    packed.resize(n, Complex::new(0.0, 0.0));
    for j in 0..=n / 2 {
        let value = if j <= n / 4 {
            Complex::new(quarter[j].output_v, quarter[j].collector_p_v)
        } else {
            // θ = π − θ' with θ' in the first quarter: the input is negated, the sides swap.
            let mirror = quarter[n / 2 - j];
            Complex::new(-mirror.output_v, mirror.collector_m_v)
        };
        packed[j] = value;
        if j > 0 && j < n / 2 {
            packed[n - j] = value;
        }
    }
}
