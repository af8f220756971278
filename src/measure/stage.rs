//! The measured figures of one stage at one temperature: small-signal gain, steering, noise,
//! intercepts and compression computed once and kept, and each budget line's value.

use crate::error::SolveFailure;
use crate::measure::large_signal::{input_p1db, third_order_intercept, Intercept};
use crate::measure::noise::input_noise_density;
use crate::measure::small_signal::{small_signal_gain, steering_points};
use crate::model::budget::{BudgetLine, Metric};
use crate::model::circuit::StageCircuit;
use crate::model::drive::{Drive, DEFAULT_THD_HARMONICS};
use crate::model::stage::Stage;
use crate::solve::engine::engine_for;
use crate::solve::response::ResponseEngine;
use crate::solve::spectrum::{FftCache, ANALYSIS_FLOOR_DBC};
use std::collections::HashMap;
use std::sync::{Arc, Mutex, OnceLock};

/// Highest harmonic order every single-tone analysis resolves, whatever THD sums.
pub const NAMED_HARMONICS: usize = 9;

/// The drive settings measurements depend on.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct DriveSettings {
    /// THD sums harmonics 2 through this order.
    pub thd_harmonics: usize,
    /// Two-tone spacing, Hz (`None`: 1 % of the frequency).
    pub two_tone_spacing: Option<f64>,
    /// Frequency of a budget line that names none, Hz.
    pub default_frequency_hz: f64,
    /// Amplitude of a budget line that names none, V.
    pub default_amplitude_v: f64,
}

impl DriveSettings {
    /// The settings a drive implies.
    pub fn of(drive: &Drive) -> Self {
        DriveSettings {
            thd_harmonics: drive.thd_harmonics,
            two_tone_spacing: drive.two_tone_spacing,
            default_frequency_hz: drive.frequencies.first().copied().unwrap_or(1e3),
            default_amplitude_v: drive.largest_amplitude(),
        }
    }

    /// Two-tone spacing at `frequency_hz`, Hz.
    pub fn spacing_at(&self, frequency_hz: f64) -> f64 {
        self.two_tone_spacing.unwrap_or(0.01 * frequency_hz)
    }

    /// Harmonics a single tone is analysed to: THD's and at least [`NAMED_HARMONICS`].
    pub fn tone_harmonics(&self) -> usize {
        self.thd_harmonics.max(NAMED_HARMONICS)
    }
}

impl Default for DriveSettings {
    fn default() -> Self {
        DriveSettings {
            thd_harmonics: DEFAULT_THD_HARMONICS,
            two_tone_spacing: None,
            default_frequency_hz: 1e3,
            default_amplitude_v: 0.0,
        }
    }
}

/// Figures of one stage at one temperature, each computed on first use and kept. Safe to
/// share between threads: a figure two threads ask for at once is computed twice and kept
/// once (the computation is deterministic).
pub struct StageMeasurements {
    engine: Box<dyn ResponseEngine>,
    settings: DriveSettings,
    gain: OnceLock<f64>,
    steering: OnceLock<(f64, f64)>,
    noise: OnceLock<f64>,
    intercepts: Mutex<HashMap<u64, Option<Intercept>>>,
    p1db: Mutex<HashMap<u64, Option<f64>>>,
    gains_at: Mutex<HashMap<u64, f64>>,
}

/// A value kept per frequency.
fn kept<T: Copy>(cache: &Mutex<HashMap<u64, T>>, frequency_hz: f64) -> Option<T> {
    cache
        .lock()
        .unwrap_or_else(|poisoned| poisoned.into_inner())
        .get(&frequency_hz.to_bits())
        .copied()
}

fn keep<T>(cache: &Mutex<HashMap<u64, T>>, frequency_hz: f64, value: T) {
    cache
        .lock()
        .unwrap_or_else(|poisoned| poisoned.into_inner())
        .insert(frequency_hz.to_bits(), value);
}

impl StageMeasurements {
    /// Measurements of the engine's stage under `settings`.
    pub fn new(engine: Box<dyn ResponseEngine>, settings: DriveSettings) -> Self {
        StageMeasurements {
            engine,
            settings,
            gain: OnceLock::new(),
            steering: OnceLock::new(),
            noise: OnceLock::new(),
            intercepts: Mutex::default(),
            p1db: Mutex::default(),
            gains_at: Mutex::default(),
        }
    }

    /// Measurements of `stage` at `temperature_c`, with the engine its charge storage needs.
    pub fn of_stage(
        stage: &Stage,
        temperature_c: f64,
        cache: Arc<FftCache>,
        settings: DriveSettings,
    ) -> Self {
        let circuit = StageCircuit::new(stage, temperature_c);
        Self::new(engine_for(circuit, cache), settings)
    }

    /// The engine measured.
    pub fn engine(&self) -> &dyn ResponseEngine {
        self.engine.as_ref()
    }

    /// The drive settings.
    pub fn settings(&self) -> &DriveSettings {
        &self.settings
    }

    /// The stage at its temperature.
    pub fn circuit(&self) -> &StageCircuit {
        self.engine.static_solver().circuit()
    }

    /// Small-signal differential voltage gain at zero input and zero frequency, V/V.
    pub fn gain(&self) -> Result<f64, SolveFailure> {
        if let Some(g) = self.gain.get() {
            return Ok(*g);
        }
        let g = small_signal_gain(self.engine.static_solver())?;
        Ok(*self.gain.get_or_init(|| g))
    }

    /// Small-signal differential voltage gain at `frequency_hz`, V/V (magnitude for stages with
    /// charge storage): the static derivative for a memoryless stage, otherwise the fundamental
    /// of a tone of 10⁻³·φT, whose compression is below 10⁻⁷ relative.
    pub fn gain_at(&self, frequency_hz: f64) -> Result<f64, SolveFailure> {
        let circuit = self.circuit();
        if circuit.is_memoryless() {
            return self.gain();
        }
        if let Some(found) = kept(&self.gains_at, frequency_hz) {
            return Ok(found);
        }
        let amplitude = 1e-3 * circuit.thermal_voltage;
        let tone = self.engine.tone(amplitude, frequency_hz, 3)?;
        let gain = tone.differential.fundamental() / amplitude;
        keep(&self.gains_at, frequency_hz, gain);
        Ok(gain)
    }

    /// Inputs at the 5 % and 95 % steering points, V.
    pub fn steering(&self) -> Result<(f64, f64), SolveFailure> {
        if let Some(s) = self.steering.get() {
            return Ok(*s);
        }
        let s = steering_points(self.engine.static_solver())?;
        Ok(*self.steering.get_or_init(|| s))
    }

    /// Steering range: half the span between the 5 % and 95 % points, V.
    pub fn steering_range(&self) -> Result<f64, SolveFailure> {
        let (low, high) = self.steering()?;
        Ok(0.5 * (high - low))
    }

    /// White input-referred noise density, V/√Hz.
    pub fn noise(&self) -> Result<f64, SolveFailure> {
        if let Some(n) = self.noise.get() {
            return Ok(*n);
        }
        let n = input_noise_density(self.engine.static_solver())?;
        Ok(*self.noise.get_or_init(|| n))
    }

    /// Third-order intercept at `frequency_hz`, with the settings' two-tone spacing.
    pub fn intercept(&self, frequency_hz: f64) -> Result<Option<Intercept>, SolveFailure> {
        if let Some(found) = kept(&self.intercepts, frequency_hz) {
            return Ok(found);
        }
        let start = self.steering_range()? / 8.0;
        let value = third_order_intercept(
            self.engine.as_ref(),
            frequency_hz,
            self.settings.spacing_at(frequency_hz),
            start,
        )?;
        keep(&self.intercepts, frequency_hz, value);
        Ok(value)
    }

    /// Input 1 dB compression point at `frequency_hz`, V.
    pub fn p1db(&self, frequency_hz: f64) -> Result<Option<f64>, SolveFailure> {
        if let Some(found) = kept(&self.p1db, frequency_hz) {
            return Ok(found);
        }
        let start = self.steering_range()? / 4.0;
        let value = input_p1db(
            self.engine.as_ref(),
            frequency_hz,
            self.gain_at(frequency_hz)?,
            start,
        )?;
        keep(&self.p1db, frequency_hz, value);
        Ok(value)
    }

    /// The frequency a line applies at, Hz.
    pub fn line_frequency(&self, line: &BudgetLine) -> f64 {
        line.frequency.unwrap_or(self.settings.default_frequency_hz)
    }

    /// The amplitude a line applies at, V.
    pub fn line_amplitude(&self, line: &BudgetLine) -> f64 {
        line.at.unwrap_or(self.settings.default_amplitude_v)
    }

    /// The value a line constrains (`None`: below the floor or unbounded; always `None` for a
    /// yield line, which the Monte Carlo study judges).
    pub fn measure(&self, line: &BudgetLine) -> Result<Option<f64>, SolveFailure> {
        let frequency = self.line_frequency(line);
        let amplitude = self.line_amplitude(line);
        let thd_harmonics = self.settings.thd_harmonics;
        Ok(match line.metric {
            Metric::Harmonic(order) => {
                let tone = self
                    .engine
                    .tone(amplitude, frequency, thd_harmonics.max(order))?;
                tone.differential.harmonic_dbc(order, tone.floor_dbc)
            }
            Metric::Thd => {
                let tone = self.engine.tone(amplitude, frequency, thd_harmonics)?;
                let thd = tone.differential.raw_thd_dbc(thd_harmonics);
                (thd >= tone.floor_dbc).then_some(thd)
            }
            Metric::Im3 => {
                let result = self.engine.two_tone(
                    amplitude,
                    frequency,
                    self.settings.spacing_at(frequency),
                )?;
                let im3 = result.im3_dbc();
                (im3 >= ANALYSIS_FLOOR_DBC).then_some(im3)
            }
            Metric::Iip3 => self.intercept(frequency)?.map(|i| i.iip3_v),
            Metric::Oip3 => {
                let gain = self.gain_at(frequency)?.abs();
                self.intercept(frequency)?.map(|i| i.iip3_v * gain)
            }
            Metric::P1db => self.p1db(frequency)?,
            Metric::Gain => Some(20.0 * self.gain_at(frequency)?.abs().log10()),
            Metric::SteeringRange => Some(self.steering_range()?),
            Metric::InputNoise => Some(self.noise()?),
            // A property of the population, not of one stage: the study counts it.
            Metric::Yield => None,
        })
    }
}
