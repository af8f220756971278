//! The figures a linearity budget constrains, measured on the memoryless solve:
//! single-tone harmonics, two-tone intermodulation, intercepts, compression, small-signal gain,
//! steering range and white input noise.

use crate::engine::ResponseEngine;
use crate::error::SolveFailure;
use crate::roots::{bracket_increasing, safe_newton, Tolerance};
use crate::spectrum::{analyse_adaptive, FftCache, Spectrum, ANALYSIS_FLOOR_DBC, CONVERGED_DB};
use crate::transfer::{StaticSolver, WarmStart};
use crate::units::{BOLTZMANN, ELEMENTARY_CHARGE, ZERO_CELSIUS_K};
use num_complex::Complex;
use std::f64::consts::TAU;

/// A collector current below this fraction of the tail current counts as cut off.
pub const CUTOFF_FRACTION: f64 = 1e-6;
/// Fraction of the tail current that defines the steering range (95 %).
pub const STEERING_FRACTION: f64 = 0.95;

/// Where a drive point leaves the model's forward-active validity.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct RegionCheck {
    /// Largest base-collector voltage seen on either side, V (positive = forward-biased).
    pub max_base_collector_v: f64,
    /// Smallest collector current seen on either side, relative to the tail current.
    pub min_current_fraction: f64,
}

impl RegionCheck {
    fn new() -> Self {
        RegionCheck {
            max_base_collector_v: f64::NEG_INFINITY,
            min_current_fraction: f64::INFINITY,
        }
    }

    fn update(&mut self, point: &crate::transfer::OperatingPoint, tail: f64) {
        for side in [&point.p, &point.m] {
            self.max_base_collector_v = self.max_base_collector_v.max(side.base_collector_voltage());
            self.min_current_fraction = self.min_current_fraction.min(side.collector_current / tail);
        }
    }

    /// Sentences describing each way the point leaves forward-active operation.
    pub fn warnings(&self) -> Vec<String> {
        let mut out = Vec::new();
        if self.max_base_collector_v > 0.0 {
            out.push(format!(
                "collector-base junction forward-biased by up to {:.3} V (saturation: the model's validity ends)",
                self.max_base_collector_v
            ));
        }
        if self.min_current_fraction < CUTOFF_FRACTION {
            out.push(format!(
                "a side cuts off (collector current down to {:.1e} of the tail current)",
                self.min_current_fraction.max(0.0)
            ));
        }
        out
    }
}

/// Single-tone result at one amplitude.
#[derive(Debug, Clone)]
pub struct ToneResult {
    /// Peak differential input, V.
    pub amplitude_v: f64,
    /// Spectrum of the differential output voltage.
    pub differential: Spectrum,
    /// Spectrum of the P-side collector voltage.
    pub single_ended: Spectrum,
    /// Samples per period used.
    pub samples: usize,
    /// Analysis floor, dBc.
    pub floor_dbc: f64,
    /// Forward-active check over the period.
    pub region: RegionCheck,
}

/// Analyses one single-tone drive `v_d = A·cos θ` of a memoryless stage.
pub fn single_tone(
    solver: &StaticSolver,
    cache: &FftCache,
    amplitude_v: f64,
    harmonics: usize,
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
            let point = solver.solve(amplitude_v * theta.cos(), &mut warm)?;
            region.update(&point, tail);
            out[0] = point.output_voltage;
            out[1] = point.p.collector_voltage;
            Ok(())
        },
        |n, change| SolveFailure {
            point: format!("amplitude {amplitude_v:e} V"),
            reason: format!(
                "harmonics did not converge to {CONVERGED_DB} dB with {n} samples per period (last change {change:.2e} dB)"
            ),
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

/// Two-tone result at one amplitude per tone.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TwoToneResult {
    /// Peak differential input per tone, V.
    pub amplitude_v: f64,
    /// Output fundamental of one tone, peak V.
    pub fundamental_v: f64,
    /// Larger of the two third-order products, peak V.
    pub im3_v: f64,
    /// Larger of the difference and sum products (f2 − f1, f1 + f2), peak V.
    pub im2_v: f64,
    /// Grid size per tone axis.
    pub samples: usize,
}

impl TwoToneResult {
    /// IM3 relative to one tone's fundamental, dBc (may be −∞).
    pub fn im3_dbc(&self) -> f64 {
        20.0 * (self.im3_v / self.fundamental_v).log10()
    }
    /// IM2 relative to one tone's fundamental, dBc (may be −∞).
    pub fn im2_dbc(&self) -> f64 {
        20.0 * (self.im2_v / self.fundamental_v).log10()
    }
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
                (clamp(result.im3_v, result.fundamental_v) - clamp(before.im3_v, before.fundamental_v)).abs(),
                (clamp(result.im2_v, result.fundamental_v) - clamp(before.im2_v, before.fundamental_v)).abs(),
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

fn two_tone_grid(
    solver: &StaticSolver,
    cache: &FftCache,
    amplitude_v: f64,
    n: usize,
) -> Result<TwoToneResult, SolveFailure> {
    let plan = cache.plan(n);
    let mut grid = vec![Complex::new(0.0, 0.0); n * n];
    let mut warm = WarmStart::default();
    for row in 0..n {
        let first = amplitude_v * (TAU * row as f64 / n as f64).cos();
        for col in 0..n {
            let second = amplitude_v * (TAU * col as f64 / n as f64).cos();
            let point = solver.solve(first + second, &mut warm)?;
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
    })
}

/// Small-signal differential voltage gain at zero input, V/V, by a Richardson-extrapolated
/// central difference (step 10⁻³·φT, truncation error of order 10⁻¹²).
pub fn small_signal_gain(solver: &StaticSolver) -> Result<f64, SolveFailure> {
    let h = 1e-3 * solver.circuit().thermal_voltage;
    let slope = |step: f64| -> Result<f64, SolveFailure> {
        let up = solver.solve_cold(step)?.output_voltage;
        let down = solver.solve_cold(-step)?.output_voltage;
        Ok((up - down) / (2.0 * step))
    };
    let coarse = slope(h)?;
    let fine = slope(0.5 * h)?;
    Ok((4.0 * fine - coarse) / 3.0)
}

/// Inputs at which the P side carries 95 % and 5 % of the total emitter current, V.
pub fn steering_points(solver: &StaticSolver) -> Result<(f64, f64), SolveFailure> {
    let c = solver.circuit();
    let guess = 3.0 * c.thermal_voltage + 0.9 * c.tail_current * c.p.emitter_resistance;
    let solve_for = |target: f64, start: f64| -> Result<f64, SolveFailure> {
        let fraction = |v: f64| solver.solve_cold(v).map(|p| p.p_fraction() - target);
        let wrap = |e: crate::roots::RootFailure| SolveFailure {
            point: format!("steering fraction {target}"),
            reason: e.reason,
        };
        let (low, high) = bracket_increasing(
            |v| fraction(v).unwrap_or(f64::NAN),
            start,
            c.thermal_voltage,
            60,
        )
        .map_err(wrap)?;
        safe_newton(
            |v| {
                let value = fraction(v).unwrap_or(f64::NAN);
                let step = 1e-6 * c.thermal_voltage;
                let slope = (fraction(v + step).unwrap_or(f64::NAN)
                    - fraction(v - step).unwrap_or(f64::NAN))
                    / (2.0 * step);
                (value, slope)
            },
            low,
            high,
            start,
            Tolerance {
                relative: 1e-13,
                scale: c.thermal_voltage,
                max_iterations: 200,
            },
        )
        .map_err(wrap)
    };
    let high = solve_for(STEERING_FRACTION, guess)?;
    let low = solve_for(1.0 - STEERING_FRACTION, -guess)?;
    Ok((low, high))
}

/// Input P1dB: the single-tone amplitude at which the fundamental's gain is 1 dB below the
/// small-signal gain, V peak; `None` when the gain never compresses by 1 dB below 100 V.
pub fn input_p1db(
    engine: &dyn ResponseEngine,
    frequency_hz: f64,
    small_signal_gain: f64,
    start_v: f64,
) -> Result<Option<f64>, SolveFailure> {
    let compression = |amplitude: f64| -> Result<f64, SolveFailure> {
        let tone = engine.tone(amplitude, frequency_hz, 9)?;
        Ok(20.0 * (tone.differential.fundamental() / (amplitude * small_signal_gain.abs())).log10() + 1.0)
    };
    // Bracket in log amplitude: compression + 1 dB goes from > 0 (small) to < 0 (compressed).
    let mut high = start_v;
    let mut value_high = compression(high)?;
    let mut low = high;
    let mut value_low = value_high;
    while value_high > 0.0 {
        low = high;
        value_low = value_high;
        high *= 2.0;
        if high > 100.0 {
            return Ok(None);
        }
        value_high = compression(high)?;
    }
    while value_low <= 0.0 {
        high = low;
        low *= 0.5;
        if low < 1e-9 {
            return Ok(None);
        }
        value_low = compression(low)?;
    }
    // Bisection in log amplitude to 1e-6 relative (about 1e-5 dB).
    let (mut a, mut b) = (low.ln(), high.ln());
    for _ in 0..60 {
        if b - a < 1e-6 {
            break;
        }
        let mid = 0.5 * (a + b);
        if compression(mid.exp())? > 0.0 {
            a = mid;
        } else {
            b = mid;
        }
    }
    Ok(Some((0.5 * (a + b)).exp()))
}

/// Third-order intercept found in the small-signal region.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Intercept {
    /// Input intercept, peak V per tone.
    pub iip3_v: f64,
    /// Amplitude per tone at which it was extrapolated, V.
    pub fit_amplitude_v: f64,
    /// Slope of the IM3 output versus input seen there (3 for a clean cubic region).
    pub im3_slope: f64,
    /// Input second-order intercept, peak V per tone (mismatch only).
    pub iip2_v: Option<f64>,
}

/// Extrapolates IIP3 (and IIP2) from a drive level inside the small-signal region: halves the
/// amplitude from `start_v` until the effective intercept changes by less than 0.01 dB between
/// A and A/2 (so the IM3 slope there is 3:1 to within 0.005), then reports the value at A/2.
pub fn third_order_intercept(
    engine: &dyn ResponseEngine,
    frequency_hz: f64,
    spacing_hz: f64,
    start_v: f64,
) -> Result<Option<Intercept>, SolveFailure> {
    let effective = |t: &TwoToneResult| t.amplitude_v * 10f64.powf(-t.im3_dbc() / 40.0);
    let mut amplitude = start_v;
    let mut upper = engine.two_tone(amplitude, frequency_hz, spacing_hz)?;
    for _ in 0..30 {
        let lower = engine.two_tone(0.5 * amplitude, frequency_hz, spacing_hz)?;
        if !(lower.im3_dbc() > ANALYSIS_FLOOR_DBC) {
            return Ok(None);
        }
        let (e_upper, e_lower) = (effective(&upper), effective(&lower));
        let slope = 20.0 * (upper.im3_v / lower.im3_v).log10() / (20.0 * 2f64.log10());
        if (20.0 * (e_upper / e_lower).log10()).abs() < 0.01 {
            let iip2 = (lower.im2_dbc() > ANALYSIS_FLOOR_DBC)
                .then(|| lower.amplitude_v * 10f64.powf(-lower.im2_dbc() / 20.0));
            return Ok(Some(Intercept {
                iip3_v: e_lower,
                fit_amplitude_v: lower.amplitude_v,
                im3_slope: slope,
                iip2_v: iip2,
            }));
        }
        upper = lower;
        amplitude *= 0.5;
    }
    Ok(None)
}

/// White input-referred differential noise density, V/√Hz, at the zero-input operating point:
/// per side `4kT·(R_S + r_b + R_E) + 2kT/g_m + 2q·I_B·(R_S + r_b)² + 4kT/(G²·R_L)`
/// with `g_m = I_C/φT` and `G = g_m/(1 + g_m·R_E)`, summed over both sides.
pub fn input_noise_density(solver: &StaticSolver) -> Result<f64, SolveFailure> {
    let c = solver.circuit();
    let point = solver.solve_cold(0.0)?;
    let kt = BOLTZMANN * (c.temperature_c + ZERO_CELSIUS_K);
    let mut total = 0.0;
    for (side, state) in [(&c.p, &point.p), (&c.m, &point.m)] {
        let gm = state.collector_current / c.thermal_voltage;
        let g = gm / (1.0 + gm * side.emitter_resistance);
        total += 4.0 * kt * (side.base_path_resistance + side.emitter_resistance)
            + 2.0 * kt / gm
            + 2.0 * ELEMENTARY_CHARGE * state.base_current * side.base_path_resistance.powi(2)
            + 4.0 * kt / (g * g * side.load_resistance);
    }
    Ok(total.sqrt())
}

/// One point of the transfer curve.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TransferSample {
    /// Differential input, V.
    pub input_v: f64,
    /// (I_CP − I_CM)/I_tail.
    pub normalised_current: f64,
    /// Incremental transconductance d(I_CP − I_CM)/dv_d, S.
    pub transconductance_s: f64,
    /// Differential output voltage, V.
    pub output_v: f64,
}

/// The transfer curve over `±span_v` with `points` samples.
pub fn transfer_curve(
    solver: &StaticSolver,
    span_v: f64,
    points: usize,
) -> Result<Vec<TransferSample>, SolveFailure> {
    let c = solver.circuit();
    let mut warm = WarmStart::default();
    let current = |v: f64, warm: &mut WarmStart| {
        solver
            .solve(v, warm)
            .map(|p| p.p.collector_current - p.m.collector_current)
    };
    let step = 1e-4 * c.thermal_voltage;
    (0..points)
        .map(|i| {
            let v = -span_v + 2.0 * span_v * i as f64 / (points - 1).max(1) as f64;
            let point = solver.solve(v, &mut warm)?;
            let mut probe = warm;
            let up = current(v + step, &mut probe)?;
            let down = current(v - step, &mut probe)?;
            Ok(TransferSample {
                input_v: v,
                normalised_current: (point.p.collector_current - point.m.collector_current)
                    / c.tail_current,
                transconductance_s: (up - down) / (2.0 * step),
                output_v: point.output_voltage,
            })
        })
        .collect()
}
