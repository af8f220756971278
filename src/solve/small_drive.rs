//! Small drives answered from the small-signal power series.
//!
//! An engine whose samples carry an absolute error (the general memoryless solve converges
//! each side's current on its own, so their difference — the signal — keeps an absolute error
//! near 1e-15 V; the periodic steady state is settled to 1e-12 V) cannot answer a 1 pV drive
//! directly: the error is a sizeable part of the fundamental, the harmonics are noise and the
//! analysis would refine forever. Below the engine's [`ResponseEngine::direct_floor_v`] `A_r`
//! the answer comes instead from the power series of the periodic response, which for a
//! drive `A·cos θ` gives harmonic `k` as
//!
//! ```text
//! H_k(A) = A^k·(a_k + b_k·A² + O(A⁴))
//! ```
//!
//! (the Taylor series of the transfer in the drive, collected by harmonic; the fundamental is
//! `k = 1`, a DC level `k = 0`). `a_k` and `b_k` come from the engine's own answers at `A_r`
//! and `A_r/2`, both exact to the engine's tolerance (Richardson extrapolation in `A²`), so
//! the gain at any smaller drive is exact to `O(A_r⁴)` — below 1e-12 relative at
//! `A_r = 10⁻⁴·φT`. A harmonic is carried only when it stands above the floor at both
//! reference drives and follows the leading power to 5 %; otherwise it is reported absent,
//! and the point's floor is the larger of the references' floors (in dBc a harmonic only
//! falls as the drive falls, so it stays below). Two tones follow the same law, IM3 as `A³`
//! and IM2 as `A²`.
//!
//! Reference answers are kept per frequency (and harmonic count), so a sweep of small drives
//! costs two analyses.

use crate::error::SolveFailure;
use crate::solve::response::{ResponseEngine, ToneResult, TwoToneResult};
use crate::solve::spectrum::Spectrum;
use crate::solve::transfer::StaticSolver;
use std::collections::HashMap;
use std::sync::{Arc, Mutex};

/// Largest relative departure from the leading power between the two reference drives for a
/// harmonic to be carried down by the series.
pub const LEADING_POWER_TOLERANCE: f64 = 0.05;

/// The series value at `amplitude_v` of a component of power `k` measured `upper` at
/// `reference_v` and `lower` at `reference_v/2` (magnitudes).
fn series(k: i32, upper: f64, lower: f64, reference_v: f64, amplitude_v: f64) -> f64 {
    let h_upper = upper / reference_v.powi(k);
    let h_lower = lower / (0.5 * reference_v).powi(k);
    let leading = (4.0 * h_lower - h_upper) / 3.0;
    let correction = h_upper - leading;
    let ratio = amplitude_v / reference_v;
    amplitude_v.powi(k) * (leading + correction * ratio * ratio)
}

/// Whether a component of power `k ≥ 1` follows its leading power between the references.
fn follows_leading_power(k: i32, upper: f64, lower: f64) -> bool {
    let expected = upper / 2f64.powi(k);
    upper > 0.0 && lower > 0.0 && ((lower - expected) / expected).abs() <= LEADING_POWER_TOLERANCE
}

/// A single tone at `amplitude_v` from the analyses at `A_r` (`upper`) and `A_r/2` (`lower`).
pub fn tone_from_series(upper: &ToneResult, lower: &ToneResult, amplitude_v: f64) -> ToneResult {
    let reference_v = upper.amplitude_v;
    let floor_dbc = upper.floor_dbc.max(lower.floor_dbc);
    let scale = |high: &Spectrum, low: &Spectrum, check_floor: bool| -> Spectrum {
        let (f_high, f_low) = (high.fundamental(), low.fundamental());
        let floor = 10f64.powf(floor_dbc / 20.0);
        let amplitudes = (0..high.amplitudes.len().min(low.amplitudes.len()))
            .map(|k| {
                let (a, b) = (high.amplitudes[k], low.amplitudes[k]);
                let carried = k <= 1
                    || ((!check_floor || (a >= floor * f_high && b >= floor * f_low))
                        && follows_leading_power(k as i32, a, b));
                if carried {
                    series(k as i32, a, b, reference_v, amplitude_v).max(0.0)
                } else {
                    0.0
                }
            })
            .collect();
        Spectrum { amplitudes }
    };
    ToneResult {
        amplitude_v,
        differential: scale(&upper.differential, &lower.differential, true),
        single_ended: scale(&upper.single_ended, &lower.single_ended, true),
        samples: lower.samples,
        floor_dbc,
        region: lower.region,
    }
}

/// Two tones at `amplitude_v` per tone from the analyses at `A_r` and `A_r/2`.
pub fn two_tone_from_series(
    upper: &TwoToneResult,
    lower: &TwoToneResult,
    amplitude_v: f64,
) -> TwoToneResult {
    let reference_v = upper.amplitude_v;
    let fundamental_v = series(
        1,
        upper.fundamental_v,
        lower.fundamental_v,
        reference_v,
        amplitude_v,
    );
    let product = |k: i32, high: f64, low: f64, floor_dbc: f64| -> f64 {
        let floor = 10f64.powf(floor_dbc / 20.0);
        let resolved = high >= floor * upper.fundamental_v && low >= floor * lower.fundamental_v;
        if resolved && follows_leading_power(k, high, low) {
            series(k, high, low, reference_v, amplitude_v).max(0.0)
        } else {
            0.0
        }
    };
    let im3_floor_dbc = upper.im3_floor_dbc.max(lower.im3_floor_dbc);
    let im2_floor_dbc = upper.im2_floor_dbc.max(lower.im2_floor_dbc);
    TwoToneResult {
        amplitude_v,
        fundamental_v,
        im3_v: product(3, upper.im3_v, lower.im3_v, im3_floor_dbc),
        im2_v: product(2, upper.im2_v, lower.im2_v, im2_floor_dbc),
        samples: lower.samples,
        floor_dbc: upper.floor_dbc.max(lower.floor_dbc),
        im3_floor_dbc,
        im2_floor_dbc,
        im3_limited_by: upper.im3_limited_by.or(lower.im3_limited_by),
        im2_limited_by: upper.im2_limited_by.or(lower.im2_limited_by),
        region: lower.region,
    }
}

/// Reference tones at one frequency and harmonic count.
type TonePair = Arc<(ToneResult, ToneResult)>;
/// Reference two-tone answers at one frequency and spacing.
type TwoTonePair = Arc<(TwoToneResult, TwoToneResult)>;

/// An engine that answers drives below its inner engine's direct floor from the power series
/// (see the module docs) and every other drive directly.
pub struct SmallDriveEngine {
    inner: Box<dyn ResponseEngine>,
    tones: Mutex<HashMap<(u64, usize), TonePair>>,
    two_tones: Mutex<HashMap<(u64, u64), TwoTonePair>>,
}

impl SmallDriveEngine {
    /// Wraps `inner`.
    pub fn new(inner: Box<dyn ResponseEngine>) -> Self {
        SmallDriveEngine {
            inner,
            tones: Mutex::default(),
            two_tones: Mutex::default(),
        }
    }

    fn reference_tones(
        &self,
        reference_v: f64,
        frequency_hz: f64,
        harmonics: usize,
    ) -> Result<TonePair, SolveFailure> {
        kept_or_solved(&self.tones, (frequency_hz.to_bits(), harmonics), || {
            Ok((
                self.inner.tone(reference_v, frequency_hz, harmonics)?,
                self.inner
                    .tone(0.5 * reference_v, frequency_hz, harmonics)?,
            ))
        })
    }

    fn reference_two_tones(
        &self,
        reference_v: f64,
        frequency_hz: f64,
        spacing_hz: f64,
    ) -> Result<TwoTonePair, SolveFailure> {
        kept_or_solved(
            &self.two_tones,
            (frequency_hz.to_bits(), spacing_hz.to_bits()),
            || {
                Ok((
                    self.inner.two_tone(reference_v, frequency_hz, spacing_hz)?,
                    self.inner
                        .two_tone(0.5 * reference_v, frequency_hz, spacing_hz)?,
                ))
            },
        )
    }
}

/// The pair kept under `key`, or the one `solve` returns, kept for the next call (a poisoned
/// lock still holds whole pairs: each is inserted in one step).
fn kept_or_solved<K: std::hash::Hash + Eq, T>(
    kept: &Mutex<HashMap<K, Arc<T>>>,
    key: K,
    solve: impl FnOnce() -> Result<T, SolveFailure>,
) -> Result<Arc<T>, SolveFailure> {
    let lock = || kept.lock().unwrap_or_else(|poisoned| poisoned.into_inner());
    if let Some(pair) = lock().get(&key).cloned() {
        return Ok(pair);
    }
    let pair = Arc::new(solve()?);
    lock().insert(key, pair.clone());
    Ok(pair)
}

impl ResponseEngine for SmallDriveEngine {
    fn tone(
        &self,
        amplitude_v: f64,
        frequency_hz: f64,
        harmonics: usize,
    ) -> Result<ToneResult, SolveFailure> {
        match self.inner.direct_floor_v() {
            Some(reference_v) if amplitude_v > 0.0 && amplitude_v < reference_v => {
                let pair = self.reference_tones(reference_v, frequency_hz, harmonics)?;
                Ok(tone_from_series(&pair.0, &pair.1, amplitude_v))
            }
            _ => self.inner.tone(amplitude_v, frequency_hz, harmonics),
        }
    }

    fn two_tone(
        &self,
        amplitude_v: f64,
        frequency_hz: f64,
        spacing_hz: f64,
    ) -> Result<TwoToneResult, SolveFailure> {
        match self.inner.direct_floor_v() {
            Some(reference_v) if amplitude_v > 0.0 && amplitude_v < reference_v => {
                let pair = self.reference_two_tones(reference_v, frequency_hz, spacing_hz)?;
                Ok(two_tone_from_series(&pair.0, &pair.1, amplitude_v))
            }
            _ => self.inner.two_tone(amplitude_v, frequency_hz, spacing_hz),
        }
    }

    fn static_solver(&self) -> &StaticSolver {
        self.inner.static_solver()
    }

    fn direct_floor_v(&self) -> Option<f64> {
        self.inner.direct_floor_v()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A cubic transfer y = x − c·x³ driven by A·cos θ has fundamental A − (3/4)·c·A³ and
    /// third harmonic (1/4)·c·A³ exactly (cos³θ = (3cos θ + cos 3θ)/4, a trigonometric
    /// identity): the series through A_r and A_r/2 must reproduce both at any smaller drive.
    #[test]
    fn the_series_reproduces_a_cubic_exactly() {
        let c = 2.5;
        let fundamental = |a: f64| a - 0.75 * c * a.powi(3);
        let third = |a: f64| 0.25 * c * a.powi(3);
        let (r, a) = (1e-2, 3e-7);
        let got = series(1, fundamental(r), fundamental(0.5 * r), r, a);
        assert!((got / fundamental(a) - 1.0).abs() < 1e-15, "{got}");
        let got = series(3, third(r), third(0.5 * r), r, a);
        assert!((got / third(a) - 1.0).abs() < 1e-12, "{got}");
        assert!(follows_leading_power(3, third(r), third(0.5 * r)));
        assert!(!follows_leading_power(3, third(r), 0.5 * third(r)));
    }
}
