//! The measured figures of one stage at one temperature: small-signal gain, steering, noise,
//! intercepts and compression computed once and kept, and each budget line's value.

use crate::error::SolveFailure;
use crate::measure::large_signal::{
    input_compression, third_order_intercept, Compression, Intercept,
};
use crate::measure::noise::input_noise_density;
use crate::measure::small_signal::{small_signal_gain, steering_points};
use crate::model::budget::{BudgetLine, Metric};
use crate::model::circuit::StageCircuit;
use crate::model::drive::{Drive, DEFAULT_THD_HARMONICS};
use crate::model::stage::Stage;
use crate::solve::engine::engine_for;
use crate::solve::response::{RegionCheck, ResponseEngine};
use crate::solve::spectrum::FftCache;
use crate::solve::transfer::junctions_reverse_biased;
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

/// A budget line's value and the operating region of the drive it rests on.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Measured {
    /// The value (`None`: below the floor, or unbounded).
    pub value: Option<f64>,
    /// Operating region where it was measured.
    pub region: RegionCheck,
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
    zero_input: OnceLock<RegionCheck>,
    intercepts: Mutex<HashMap<u64, Option<Intercept>>>,
    p1db: Mutex<HashMap<u64, Compression>>,
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
            zero_input: OnceLock::new(),
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
        let start = self.intercept_start()?;
        let value = third_order_intercept(
            self.engine.as_ref(),
            frequency_hz,
            self.settings.spacing_at(frequency_hz),
            start,
        )?;
        keep(&self.intercepts, frequency_hz, value);
        Ok(value)
    }

    /// Where the intercept search starts: an eighth of the steering range, halved (at most
    /// ten times) until the two tones' static peak (twice the amplitude) forward-biases
    /// neither collector-base junction — the search only looks for the small-signal region,
    /// and two tones driven into saturation there would cost time and tell nothing. A stage
    /// saturated at zero input keeps the eighth, V.
    fn intercept_start(&self) -> Result<f64, SolveFailure> {
        let solver = self.engine.static_solver();
        let mut start = self.steering_range()? / 8.0;
        if !junctions_reverse_biased(&solver.solve_cold(0.0)?) {
            return Ok(start);
        }
        for _ in 0..10 {
            let peak_up = solver.solve_cold(2.0 * start)?;
            let peak_down = solver.solve_cold(-2.0 * start)?;
            if junctions_reverse_biased(&peak_up) && junctions_reverse_biased(&peak_down) {
                break;
            }
            start *= 0.5;
        }
        Ok(start)
    }

    /// Input 1 dB compression point at `frequency_hz`, V.
    pub fn p1db(&self, frequency_hz: f64) -> Result<Option<f64>, SolveFailure> {
        Ok(self.compression(frequency_hz)?.input_v)
    }

    /// Input 1 dB compression point at `frequency_hz` with the operating region there.
    pub fn compression(&self, frequency_hz: f64) -> Result<Compression, SolveFailure> {
        if let Some(found) = kept(&self.p1db, frequency_hz) {
            return Ok(found);
        }
        let start = self.steering_range()? / 4.0;
        let value = input_compression(
            self.engine.as_ref(),
            frequency_hz,
            self.gain_at(frequency_hz)?,
            start,
        )?;
        keep(&self.p1db, frequency_hz, value);
        Ok(value)
    }

    /// Operating region at zero input (the bias point of the small-signal figures).
    pub fn zero_input_region(&self) -> Result<RegionCheck, SolveFailure> {
        if let Some(r) = self.zero_input.get() {
            return Ok(*r);
        }
        let solver = self.engine.static_solver();
        let point = solver.solve_cold(0.0)?;
        let region = RegionCheck::of_point(&point, solver.circuit().tail_current);
        Ok(*self.zero_input.get_or_init(|| region))
    }

    /// Operating region at the two steering points and zero input (static).
    pub fn steering_region(&self) -> Result<RegionCheck, SolveFailure> {
        let (low, high) = self.steering()?;
        let solver = self.engine.static_solver();
        let mut region = self.zero_input_region()?;
        for v in [low, high] {
            region.update(&solver.solve_cold(v)?, solver.circuit().tail_current);
        }
        Ok(region)
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
        Ok(self.measure_checked(line)?.value)
    }

    /// The value a line constrains, with the operating region of the drive it was measured
    /// at: the tone or two tones at the line's amplitude, the compression point, the
    /// intercept's fit point, the steering points, or the bias point for small-signal figures.
    pub fn measure_checked(&self, line: &BudgetLine) -> Result<Measured, SolveFailure> {
        let frequency = self.line_frequency(line);
        let amplitude = self.line_amplitude(line);
        let thd_harmonics = self.settings.thd_harmonics;
        let (value, region) = match line.metric {
            Metric::Harmonic(order) => {
                let tone = self
                    .engine
                    .tone(amplitude, frequency, thd_harmonics.max(order))?;
                (
                    tone.differential.harmonic_dbc(order, tone.floor_dbc),
                    tone.region,
                )
            }
            Metric::Thd => {
                let tone = self.engine.tone(amplitude, frequency, thd_harmonics)?;
                let thd = tone.differential.raw_thd_dbc(thd_harmonics);
                ((thd >= tone.floor_dbc).then_some(thd), tone.region)
            }
            Metric::CollectorBaseMargin => {
                let tone =
                    self.engine
                        .tone(amplitude, frequency, self.settings.tone_harmonics())?;
                (Some(tone.region.collector_base_margin_v()), tone.region)
            }
            Metric::Im3 => {
                let result = self.engine.two_tone(
                    amplitude,
                    frequency,
                    self.settings.spacing_at(frequency),
                )?;
                (result.im3_resolved_dbc(), result.region)
            }
            Metric::Iip3 | Metric::Oip3 => {
                let scale = if line.metric == Metric::Oip3 {
                    self.gain_at(frequency)?.abs()
                } else {
                    1.0
                };
                match self.intercept(frequency)? {
                    Some(i) => (Some(i.iip3_v * scale), i.fit_region),
                    // No 3:1 region: judged at the bias point, the smallest drive there is.
                    None => (None, self.zero_input_region()?),
                }
            }
            Metric::P1db => {
                let c = self.compression(frequency)?;
                (c.input_v, c.region)
            }
            Metric::Gain => (
                Some(20.0 * self.gain_at(frequency)?.abs().log10()),
                self.zero_input_region()?,
            ),
            Metric::SteeringRange => (Some(self.steering_range()?), self.steering_region()?),
            Metric::InputNoise => (Some(self.noise()?), self.zero_input_region()?),
            // A property of the population, not of one stage: the study counts it (judged at
            // the bias point here).
            Metric::Yield => (None, self.zero_input_region()?),
        };
        Ok(Measured { value, region })
    }
}
