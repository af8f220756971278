//! Large-signal figures found by search over the drive level: the input 1 dB compression
//! point and the third-order intercept extrapolated from the small-signal region.

use crate::error::SolveFailure;
use crate::solve::response::{RegionCheck, ResponseEngine, TwoToneResult};

/// The input 1 dB compression point and the operating region there.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Compression {
    /// Input P1dB, V peak; `None` when the gain never compresses by 1 dB below 100 V.
    pub input_v: Option<f64>,
    /// Operating region of the solved tone nearest `input_v`, within 1e-6 relative of it (when
    /// unbounded: of the largest amplitude tried).
    pub region: RegionCheck,
}

/// Width of the final bracket around the 1 dB point in log amplitude: 1e-6 relative
/// (8.7e-6 dB).
const BRACKET_LOG: f64 = 1e-6;

/// Largest amplitude tried before the gain is declared never to compress by 1 dB, V.
const LARGEST_V: f64 = 100.0;

/// Smallest amplitude tried when the starting drive is already compressed, V.
const SMALLEST_V: f64 = 1e-9;

/// How far past the extrapolated 1 dB point a bracketing tone goes (amplitude ratio), so that
/// it lands beyond the root when the extrapolation is close; also the least step a bracketing
/// tone takes, so the bracketing cannot creep.
const OVERSHOOT: f64 = 1.03;

/// Largest step of one bracketing tone (amplitude ratio, up or down).
const FARTHEST_STEP: f64 = 4.0;

/// One single tone of the search: amplitude, compression + 1 dB (positive below the 1 dB
/// point), and the operating region over its period.
#[derive(Clone, Copy)]
struct Probe {
    amplitude: f64,
    value: f64,
    region: RegionCheck,
}

impl Probe {
    /// The point (A², value) the interpolation works on: at small drive the compression in
    /// dB goes as −c·A², so the value is nearly linear in A².
    fn squared(&self) -> (f64, f64) {
        (self.amplitude * self.amplitude, self.value)
    }
}

/// Harmonics each tone of the P1dB search resolves. The search reads only the fundamental,
/// and a solve settles when every figure it resolves has (to the engine's tolerance): asking
/// for the third rather than the ninth lets a stage with charge storage stop at the time
/// resolution the low orders need, about a third fewer operations per search, with the
/// fundamental as exact as before.
pub const COMPRESSION_HARMONICS: usize = 3;

/// Input P1dB and the operating region at the answer.
///
/// The root of compression + 1 dB is first bracketed: from `start_v`, each tone goes 3 %
/// past the amplitude where the secant in A² through the last two points (zero drive and
/// the first tone to begin with) reaches 1 dB — beyond the root whenever the compression
/// steepens with drive, as it does towards full steering — by a factor of 1.03 to 4 per
/// tone (downwards likewise when `start_v` is already compressed). The bracket is then
/// narrowed by inverse quadratic interpolation in A², where the compression is nearly linear,
/// with a bisection in log amplitude whenever two tones did not halve the bracket (Brent's
/// method: the bracket at least halves every three tones, so the search ends). Once the
/// estimate lies within half the final width of an end, one tone 0.9 of that width from the
/// end, just past the estimate, closes the bracket. The search stops when the bracket is at
/// most 1e-6 relative (8.7e-6 dB), both ends solved and the compression changing sign
/// between them. The answer is the interpolated root inside that bracket; its operating
/// region is the one of the bracket end nearer to it, a solved tone within 1e-6 relative of
/// the answer, not a fresh solve at the answer. Over the demo plans this takes 6.4 tones per
/// frequency on average, where the regula-falsi search took 10.4.
pub fn input_compression(
    engine: &dyn ResponseEngine,
    frequency_hz: f64,
    small_signal_gain: f64,
    start_v: f64,
) -> Result<Compression, SolveFailure> {
    let gain = small_signal_gain.abs();
    let probe = |amplitude: f64| -> Result<Probe, SolveFailure> {
        let tone = engine.tone(amplitude, frequency_hz, COMPRESSION_HARMONICS)?;
        Ok(Probe {
            amplitude,
            value: 20.0 * (tone.differential.fundamental() / (amplitude * gain)).log10() + 1.0,
            region: tone.region,
        })
    };
    // Zero drive compresses by nothing (value 1): an anchor for the interpolation, never an
    // end of the bracket.
    let anchor = (0.0, 1.0);
    let first = probe(start_v)?;
    // `other`: the tone tried before the latest end (zero drive at first), the third point of
    // the interpolation.
    let (mut low, mut high, mut other) = if first.value > 0.0 {
        let (mut previous, mut low) = (None::<Probe>, first);
        loop {
            let guess = extrapolated_root(anchor, previous.map(|p| p.squared()), low.squared());
            let farthest = FARTHEST_STEP * low.amplitude;
            let next = match guess {
                Some(x) if x.sqrt() > low.amplitude => (x.sqrt() * OVERSHOOT).min(farthest),
                _ => farthest,
            };
            if next > LARGEST_V {
                return Ok(Compression {
                    input_v: None,
                    region: low.region,
                });
            }
            let tried = probe(next)?;
            if tried.value > 0.0 {
                (previous, low) = (Some(low), tried);
            } else {
                break (low, tried, previous.map_or(anchor, |p| p.squared()));
            }
        }
    } else {
        let (mut high, mut previous) = (first, anchor);
        loop {
            let guess = extrapolated_root(anchor, None, high.squared());
            let farthest = high.amplitude / FARTHEST_STEP;
            let next = match guess {
                Some(x) if x.sqrt() < high.amplitude => (x.sqrt() / OVERSHOOT).max(farthest),
                _ => farthest,
            };
            if next < SMALLEST_V {
                // The largest amplitude tried is the first.
                return Ok(Compression {
                    input_v: None,
                    region: first.region,
                });
            }
            let tried = probe(next)?;
            if tried.value > 0.0 {
                break (tried, high, previous);
            }
            (previous, high) = (high.squared(), tried);
        }
    };
    // Brent's method between `low` (value > 0) and `high` (value <= 0); `widths` holds the
    // bracket's log width before each of the last two tones.
    let mut widths = [f64::INFINITY; 2];
    let mut estimate = interpolated_root(low.squared(), high.squared(), other);
    while (high.amplitude / low.amplitude).ln() > BRACKET_LOG {
        let (a, b) = (low.amplitude.ln(), high.amplitude.ln());
        let width = b - a;
        let mut next = if width <= 0.5 * widths[0] {
            0.5 * estimate.ln()
        } else {
            0.5 * (a + b)
        };
        // Closing step: the tone goes just past an estimate that sits next to an end, so that
        // the two bracket the root within BRACKET_LOG (the tone stays strictly inside).
        if next - a <= 0.5 * BRACKET_LOG {
            next = a + 0.9 * BRACKET_LOG;
        } else if b - next <= 0.5 * BRACKET_LOG {
            next = b - 0.9 * BRACKET_LOG;
        }
        widths = [widths[1], width];
        let tried = probe(next.exp())?;
        if tried.value > 0.0 {
            other = low.squared();
            low = tried;
        } else {
            other = high.squared();
            high = tried;
        }
        estimate = interpolated_root(low.squared(), high.squared(), other);
    }
    let answer = estimate.sqrt().clamp(low.amplitude, high.amplitude);
    let nearer = if answer / low.amplitude <= high.amplitude / answer {
        low
    } else {
        high
    };
    Ok(Compression {
        input_v: Some(answer),
        region: nearer.region,
    })
}

/// Where the compression seen so far — the two latest tones below the 1 dB point, or zero
/// drive (`anchor`) and the first — extrapolates to 1 dB, as A², along the secant in A²: when
/// the compression steepens with drive (as it does towards full steering) the secant lands
/// beyond the root. `None` when the two points show no compression.
fn extrapolated_root(
    anchor: (f64, f64),
    previous: Option<(f64, f64)>,
    last: (f64, f64),
) -> Option<f64> {
    let p = previous.unwrap_or(anchor);
    let root = last.0 + last.1 * (last.0 - p.0) / (p.1 - last.1);
    (last.1 < p.1 && root.is_finite()).then_some(root)
}

/// The root, as A², between `low` (value > 0) and `high` (value <= 0): inverse quadratic
/// interpolation through both ends and `other` when it lands strictly inside, otherwise the
/// secant of the two ends.
fn interpolated_root(low: (f64, f64), high: (f64, f64), other: (f64, f64)) -> f64 {
    let quadratic = inverse_quadratic(low, high, other);
    if quadratic > low.0 && quadratic < high.0 {
        return quadratic;
    }
    let secant = high.0 - high.1 * (high.0 - low.0) / (high.1 - low.1);
    if secant.is_finite() {
        secant.clamp(low.0, high.0)
    } else {
        (low.0 * high.0).sqrt()
    }
}

/// x where the quadratic x(y) through three points (x, y) has y = 0 (Lagrange form); not
/// finite when two y coincide.
fn inverse_quadratic(p: (f64, f64), q: (f64, f64), r: (f64, f64)) -> f64 {
    p.0 * q.1 * r.1 / ((p.1 - q.1) * (p.1 - r.1))
        + q.0 * p.1 * r.1 / ((q.1 - p.1) * (q.1 - r.1))
        + r.0 * p.1 * q.1 / ((r.1 - p.1) * (r.1 - q.1))
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
