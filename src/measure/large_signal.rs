//! Large-signal figures found by search over the drive level: the input 1 dB compression
//! point and the third-order intercept extrapolated from the small-signal region.

use crate::error::SolveFailure;
use crate::solve::response::{RegionCheck, ResponseEngine, TwoToneResult};

/// The input 1 dB compression point and the operating region there.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Compression {
    /// Input P1dB, V peak; `None` when the gain never compresses by 1 dB below 100 V.
    pub input_v: Option<f64>,
    /// Operating region of a single tone at `input_v` (when unbounded: at the largest
    /// amplitude tried).
    pub region: RegionCheck,
}

/// Input P1dB and the operating region of a single tone at the answer.
pub fn input_compression(
    engine: &dyn ResponseEngine,
    frequency_hz: f64,
    small_signal_gain: f64,
    start_v: f64,
) -> Result<Compression, SolveFailure> {
    let mut largest = RegionCheck::new();
    let found = input_p1db_tracking(
        engine,
        frequency_hz,
        small_signal_gain,
        start_v,
        &mut largest,
    )?;
    let region = match found {
        Some(amplitude) => engine.tone(amplitude, frequency_hz, 9)?.region,
        None => largest,
    };
    Ok(Compression {
        input_v: found,
        region,
    })
}

/// Input P1dB: the single-tone amplitude at which the fundamental's gain is 1 dB below the
/// small-signal gain, V peak; `None` when the gain never compresses by 1 dB below 100 V. Keeps
/// in `largest` the region of the largest amplitude tried.
fn input_p1db_tracking(
    engine: &dyn ResponseEngine,
    frequency_hz: f64,
    small_signal_gain: f64,
    start_v: f64,
    largest: &mut RegionCheck,
) -> Result<Option<f64>, SolveFailure> {
    let mut largest_amplitude = 0.0;
    let mut compression =
        |amplitude: f64| -> Result<f64, SolveFailure> {
            let tone = engine.tone(amplitude, frequency_hz, 9)?;
            if amplitude > largest_amplitude {
                largest_amplitude = amplitude;
                *largest = tone.region;
            }
            Ok(20.0
                * (tone.differential.fundamental() / (amplitude * small_signal_gain.abs())).log10()
                + 1.0)
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
    // The Illinois variant of regula falsi in log amplitude, until the bracket is 1e-6
    // relative (about 1e-5 dB): the compression is smooth there, so it takes about six solves
    // where bisection took twenty; the end that stays has its value halved so both ends move.
    let (mut a, mut b) = (low.ln(), high.ln());
    let (mut fa, mut fb) = (value_low, value_high);
    let mut kept_side = 0i8;
    for _ in 0..60 {
        if b - a < 1e-6 {
            break;
        }
        let secant = b - fb * (b - a) / (fb - fa);
        // Stay strictly inside, at least a tenth of the bracket from either end; a
        // secant step that would leave it falls back to the midpoint.
        let margin = 0.1 * (b - a);
        let mid = if secant.is_finite() {
            secant.clamp(a + margin.min(5e-7), b - margin.min(5e-7))
        } else {
            0.5 * (a + b)
        };
        let value = compression(mid.exp())?;
        if value > 0.0 {
            a = mid;
            fa = value;
            if kept_side == 1 {
                fb *= 0.5;
            }
            kept_side = 1;
        } else {
            b = mid;
            fb = value;
            if kept_side == -1 {
                fa *= 0.5;
            }
            kept_side = -1;
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
    /// Operating region of the two tones at the fit amplitude.
    pub fit_region: RegionCheck,
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
        if lower.im3_resolved_dbc().is_none() {
            return Ok(None);
        }
        let (e_upper, e_lower) = (effective(&upper), effective(&lower));
        let slope = 20.0 * (upper.im3_v / lower.im3_v).log10() / (20.0 * 2f64.log10());
        if (20.0 * (e_upper / e_lower).log10()).abs() < 0.01 {
            let iip2 = lower
                .im2_resolved_dbc()
                .map(|im2| lower.amplitude_v * 10f64.powf(-im2 / 20.0));
            return Ok(Some(Intercept {
                iip3_v: e_lower,
                fit_amplitude_v: lower.amplitude_v,
                im3_slope: slope,
                iip2_v: iip2,
                fit_region: lower.region,
            }));
        }
        upper = lower;
        amplitude *= 0.5;
    }
    Ok(None)
}
