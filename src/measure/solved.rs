//! The library's small entry point: a [`Stage`] solved at one temperature answers the figures
//! a linearity budget constrains, with the same engines and settings as `linbudget run`.

use crate::error::{Error, SolveFailure};
use crate::measure::stage::{DriveSettings, StageMeasurements};
use crate::model::bias::{bias_problem, temperature_supported, MODEL_TEMPERATURE_RANGE_C};
use crate::model::stage::Stage;
use crate::solve::response::{ToneResult, TwoToneResult};
use crate::solve::spectrum::FftCache;
use crate::units::short_number;
use std::sync::Arc;

impl Stage {
    /// Solves the stage at `temperature_c` (°C): checks its values, builds the engine its
    /// charge storage needs (memoryless or periodic steady state) and works out the
    /// small-signal figures (gain, steering range, white input noise).
    ///
    /// ```
    /// use linbudget::{Stage, Transistor};
    ///
    /// let solved = Stage::new("degenerated", 1e-3, 2e3)
    ///     .emitter_resistance(100.0)
    ///     .transistor(Transistor::default().beta(100.0).early_voltage(50.0))
    ///     .at(27.0)?;
    /// let tone = solved.tone(0.1, 1e3)?;
    /// assert!(tone.hd_dbc(3).unwrap() < -30.0);
    /// assert!(solved.steering_range_v() > 0.1);
    /// # Ok::<(), linbudget::Error>(())
    /// ```
    pub fn at(&self, temperature_c: f64) -> Result<SolvedStage, Error> {
        self.check()?;
        if !(temperature_c.is_finite() && temperature_supported(temperature_c)) {
            let (low, high) = MODEL_TEMPERATURE_RANGE_C;
            return Err(Error::Argument {
                name: "temperature_c".into(),
                problem: format!(
                    "{} °C is outside the temperatures the device model supports",
                    short_number(temperature_c)
                ),
                accepted: format!("a temperature from {low} to {high} °C"),
            });
        }
        if let Some(problem) = bias_problem(self, temperature_c) {
            return Err(Error::Argument {
                name: format!("stage `{}`: {}", self.name, problem.key()),
                problem: format!("the stage cannot bias: {problem}"),
                accepted: problem.remedy(),
            });
        }
        let measurements = StageMeasurements::of_stage(
            self,
            temperature_c,
            Arc::new(FftCache::default()),
            DriveSettings::default(),
        );
        let attribute = |failure: SolveFailure| Error::solve(&self.name, temperature_c, failure);
        let steering_range_v = measurements.steering_range().map_err(attribute)?;
        let input_noise_v_rthz = measurements.noise().map_err(attribute)?;
        let gain = measurements.gain().map_err(attribute)?;
        Ok(SolvedStage {
            name: self.name.clone(),
            temperature_c,
            measurements,
            steering_range_v,
            input_noise_v_rthz,
            gain_db: 20.0 * gain.abs().log10(),
        })
    }

    /// Refuses values no stage can have (the plan reader refuses them with their position).
    fn check(&self) -> Result<(), Error> {
        let positive = [
            ("tail_current", self.tail_current),
            ("load_resistance", self.load_resistance),
            (
                "transistor.saturation_current",
                self.transistor.saturation_current,
            ),
        ];
        for (name, value) in positive {
            if !(value.is_finite() && value > 0.0) {
                return Err(self.invalid(name, value, "greater than zero and finite"));
            }
        }
        let non_negative = [
            ("emitter_resistance", self.emitter_resistance),
            ("source_resistance", self.source_resistance),
            ("load_capacitance", self.load_capacitance),
            ("tail_capacitance", self.tail_capacitance),
            (
                "transistor.base_resistance",
                self.transistor.base_resistance,
            ),
            ("transistor.transit_time", self.transistor.transit_time),
            (
                "transistor.emitter_junction_capacitance",
                self.transistor.emitter_junction_capacitance,
            ),
            (
                "transistor.collector_junction_capacitance",
                self.transistor.collector_junction_capacitance,
            ),
            (
                "transistor.collector_resistance",
                self.transistor.collector_resistance,
            ),
            (
                "transistor.reverse_transit_time",
                self.transistor.reverse_transit_time,
            ),
        ];
        for (name, value) in non_negative {
            if !(value.is_finite() && value >= 0.0) {
                return Err(self.invalid(name, value, "zero or more, finite"));
            }
        }
        let ideal_allowed = [
            ("tail_resistance", self.tail_resistance),
            ("transistor.beta", self.transistor.beta),
            ("transistor.early_voltage", self.transistor.early_voltage),
            ("transistor.reverse_beta", self.transistor.reverse_beta),
            (
                "transistor.forward_knee_current",
                self.transistor.forward_knee_current,
            ),
            (
                "transistor.reverse_knee_current",
                self.transistor.reverse_knee_current,
            ),
            (
                "transistor.reverse_early_voltage",
                self.transistor.reverse_early_voltage,
            ),
        ];
        for (name, value) in ideal_allowed {
            if value.is_nan() || value <= 0.0 {
                return Err(self.invalid(name, value, "greater than zero (infinite means ideal)"));
            }
        }
        if !(self.supply_v().is_finite() && self.supply_v() > 0.0) {
            return Err(self.invalid("supply", self.supply_v(), "greater than zero and finite"));
        }
        if !self.input_common_mode_v().is_finite() {
            return Err(self.invalid("input_common_mode", self.input_common_mode_v(), "finite"));
        }
        if !(self.tail_noise_current.is_finite() && self.tail_noise_current >= 0.0) {
            return Err(self.invalid(
                "tail_noise_current",
                self.tail_noise_current,
                "zero or more, finite",
            ));
        }
        self.check_topology()
    }

    /// Refuses cells and topologies the engines do not solve (the plan reader says where).
    fn check_topology(&self) -> Result<(), Error> {
        use crate::model::topology::Topology;
        match self.topology {
            Topology::EmitterResistors => Ok(()),
            Topology::SplitTail if self.tail_capacitance > 0.0 => Err(self.invalid(
                "tail_capacitance",
                self.tail_capacitance,
                "0 with a split tail (its source capacitances are not modelled yet)",
            )),
            Topology::SplitTail => Ok(()),
            Topology::MultiTanh => {
                let pairs = self.multi_tanh.pairs();
                let total: f64 = pairs.iter().map(|p| p.tail_fraction).sum();
                let positive = |v: f64| v.is_finite() && v > 0.0;
                let usable = |p: &crate::model::topology::TanhPair| {
                    positive(p.area_p)
                        && positive(p.area_m)
                        && positive(p.tail_fraction)
                        && p.emitter_resistance
                            .is_none_or(|r| r.is_finite() && r >= 0.0)
                };
                let bad_pair = !pairs.iter().all(usable);
                if pairs.is_empty() || bad_pair || (total - 1.0).abs() > 1e-6 {
                    return Err(Error::Argument {
                        name: format!("stage `{}`: multi_tanh", self.name),
                        problem: format!(
                            "{} pairs with tail fractions adding up to {total}, or a pair with a non-positive area or fraction",
                            pairs.len()
                        ),
                        accepted: "one or more pairs with positive areas and fractions adding up to 1 (area_ratio ≥ 1, centre_fraction in (0, 1))".into(),
                    });
                }
                Ok(())
            }
        }
    }

    fn invalid(&self, name: &str, value: f64, accepted: &str) -> Error {
        Error::Argument {
            name: format!("stage `{}`: {name}", self.name),
            problem: format!("{} is out of range", short_number(value)),
            accepted: accepted.into(),
        }
    }
}

/// A stage solved at one temperature: ask it for single tones, two tones, intercepts and
/// compression. Figures are computed when first asked for and kept.
///
/// Single tones are analysed with THD over harmonics 2–40 and IIP3 uses a two-tone spacing of
/// 1 % of the frequency, as `linbudget run` does for a plan without those keys; change them
/// with [`SolvedStage::thd_harmonics`] and [`SolvedStage::two_tone_spacing`].
///
/// ```
/// use linbudget::Stage;
///
/// let bare = Stage::new("bare", 1e-3, 2e3).at(27.0)?;
/// // The bare pair's IIP3 is 4·φT from the tanh law: about 103.5 mV at 27 °C.
/// let iip3 = bare.iip3_v(1e3)?;
/// assert!((iip3 - 0.1035).abs() < 1e-3);
/// let im3 = bare.two_tone(0.01, 1e3, 10.0)?.im3_dbc().unwrap();
/// assert!(im3 < -40.0);
/// # Ok::<(), linbudget::Error>(())
/// ```
pub struct SolvedStage {
    name: String,
    temperature_c: f64,
    measurements: StageMeasurements,
    steering_range_v: f64,
    input_noise_v_rthz: f64,
    gain_db: f64,
}

impl SolvedStage {
    /// The stage's name.
    pub fn name(&self) -> &str {
        &self.name
    }

    /// The temperature it was solved at, °C.
    pub fn temperature_c(&self) -> f64 {
        self.temperature_c
    }

    /// THD sums harmonics 2 through `highest` (default 40, at least 2).
    #[must_use]
    pub fn thd_harmonics(self, highest: usize) -> Self {
        let mut settings = *self.measurements.settings();
        settings.thd_harmonics = highest.max(2);
        self.rebuild(settings)
    }

    /// IIP3 is extrapolated from two tones this far apart, Hz (default 1 % of the frequency;
    /// it matters only for stages with charge storage).
    #[must_use]
    pub fn two_tone_spacing(self, spacing_hz: f64) -> Self {
        let mut settings = *self.measurements.settings();
        settings.two_tone_spacing = Some(spacing_hz);
        self.rebuild(settings)
    }

    fn rebuild(mut self, settings: DriveSettings) -> Self {
        let circuit = self.measurements.circuit().clone();
        self.measurements = StageMeasurements::new(
            crate::solve::engine::engine_for(circuit, Arc::new(FftCache::default())),
            settings,
        );
        self
    }

    fn attribute(&self) -> impl Fn(SolveFailure) -> Error + '_ {
        move |failure| Error::solve(&self.name, self.temperature_c, failure)
    }

    fn check_drive(amplitude_v: f64, frequency_hz: f64) -> Result<(), Error> {
        if !(amplitude_v.is_finite() && amplitude_v > 0.0) {
            return Err(Error::Argument {
                name: "amplitude_v".into(),
                problem: format!("{} V is not a drive amplitude", short_number(amplitude_v)),
                accepted: "a peak differential amplitude greater than zero and finite, V".into(),
            });
        }
        if !(frequency_hz.is_finite() && frequency_hz > 0.0) {
            return Err(Error::Argument {
                name: "frequency_hz".into(),
                problem: format!("{} Hz is not a frequency", short_number(frequency_hz)),
                accepted: "a frequency greater than zero and finite, Hz".into(),
            });
        }
        Ok(())
    }

    /// One tone of `amplitude_v` peak differential at `frequency_hz`.
    pub fn tone(&self, amplitude_v: f64, frequency_hz: f64) -> Result<Tone, Error> {
        Self::check_drive(amplitude_v, frequency_hz)?;
        let settings = self.measurements.settings();
        let result = self
            .measurements
            .engine()
            .tone(amplitude_v, frequency_hz, settings.tone_harmonics())
            .map_err(self.attribute())?;
        Ok(Tone {
            result,
            thd_harmonics: settings.thd_harmonics,
        })
    }

    /// Two equal tones of `amplitude_v` each at `frequency_hz` and `frequency_hz + spacing_hz`.
    pub fn two_tone(
        &self,
        amplitude_v: f64,
        frequency_hz: f64,
        spacing_hz: f64,
    ) -> Result<TwoTone, Error> {
        Self::check_drive(amplitude_v, frequency_hz)?;
        Self::check_drive(amplitude_v, spacing_hz)?;
        let result = self
            .measurements
            .engine()
            .two_tone(amplitude_v, frequency_hz, spacing_hz)
            .map_err(self.attribute())?;
        Ok(TwoTone { result })
    }

    /// Input third-order intercept at `frequency_hz`, peak volts per tone, extrapolated where
    /// the IM3 slope is verified to be 3:1.
    pub fn iip3_v(&self, frequency_hz: f64) -> Result<f64, Error> {
        Self::check_drive(1.0, frequency_hz)?;
        self.measurements
            .intercept(frequency_hz)
            .map_err(self.attribute())?
            .map(|i| i.iip3_v)
            .ok_or_else(|| Error::NotDefined {
                stage: self.name.clone(),
                temperature_c: self.temperature_c,
                figure: format!("IIP3 at {frequency_hz} Hz"),
                reason: "no small-signal region with a 3:1 IM3 slope was found".into(),
            })
    }

    /// Input 1 dB compression point at `frequency_hz`, peak volts.
    pub fn p1db_v(&self, frequency_hz: f64) -> Result<f64, Error> {
        Self::check_drive(1.0, frequency_hz)?;
        self.measurements
            .p1db(frequency_hz)
            .map_err(self.attribute())?
            .ok_or_else(|| Error::NotDefined {
                stage: self.name.clone(),
                temperature_c: self.temperature_c,
                figure: format!("P1dB at {frequency_hz} Hz"),
                reason: "the gain does not compress by 1 dB for any input up to 100 V".into(),
            })
    }

    /// Input at which one side carries 95 % of the tail current, V (half the span between the
    /// 5 % and 95 % points).
    pub fn steering_range_v(&self) -> f64 {
        self.steering_range_v
    }

    /// White (thermal and shot) input-referred differential noise density, V/√Hz.
    pub fn input_noise_v_rthz(&self) -> f64 {
        self.input_noise_v_rthz
    }

    /// The white input noise by source (transistors, resistors, tail sources, loads), V²/Hz.
    pub fn noise_breakdown(&self) -> Result<crate::measure::noise::NoiseBreakdown, Error> {
        crate::measure::noise::NoiseBreakdown::measure(self.measurements.engine().static_solver())
            .map_err(self.attribute())
    }

    /// The tail-source and emitter voltages at zero input (the headroom the scheme takes).
    pub fn bias_nodes(&self) -> Result<crate::measure::small_signal::BiasNodes, Error> {
        crate::measure::small_signal::bias_nodes(self.measurements.engine().static_solver())
            .map_err(self.attribute())
    }

    /// Small-signal differential voltage gain at zero frequency, dB.
    pub fn gain_db(&self) -> f64 {
        self.gain_db
    }
}

/// One single-tone drive point: harmonics, THD and gain of the differential output.
///
/// ```
/// use linbudget::Stage;
///
/// let tone = Stage::new("bare", 1e-3, 2e3).at(27.0)?.tone(0.01, 1e3)?;
/// // A bare pair at 10 mV: HD3 ≈ (1/48)·(v̂/φT)² ≈ −50.1 dBc, and no even harmonics.
/// assert!((tone.hd_dbc(3).unwrap() + 50.1).abs() < 0.2);
/// assert_eq!(tone.hd_dbc(2), None);
/// assert!(tone.thd_dbc().unwrap() >= tone.hd_dbc(3).unwrap());
/// // Small-signal gain I_tail·R_L/(2φT) = 38.7 (31.7 dB), compressed a little at 10 mV.
/// assert!((tone.gain_db() - 31.7).abs() < 0.3);
/// # Ok::<(), linbudget::Error>(())
/// ```
#[derive(Debug, Clone)]
pub struct Tone {
    result: ToneResult,
    thd_harmonics: usize,
}

impl Tone {
    /// Peak differential input, V.
    pub fn amplitude_v(&self) -> f64 {
        self.result.amplitude_v
    }

    /// Peak differential output fundamental, V.
    pub fn fundamental_v(&self) -> f64 {
        self.result.differential.fundamental()
    }

    /// 20·log10(fundamental / amplitude), dB.
    pub fn gain_db(&self) -> f64 {
        20.0 * (self.fundamental_v() / self.amplitude_v()).log10()
    }

    /// Harmonic `order` of the differential output, dBc; `None` below the analysis floor or
    /// beyond the analysed orders.
    pub fn hd_dbc(&self, order: usize) -> Option<f64> {
        if order < 2 {
            return None;
        }
        self.result
            .differential
            .harmonic_dbc(order, self.result.floor_dbc)
    }

    /// THD over harmonics 2 through the stage's `thd_harmonics`, dBc; `None` below the floor.
    pub fn thd_dbc(&self) -> Option<f64> {
        let thd = self.result.differential.raw_thd_dbc(self.thd_harmonics);
        (thd >= self.result.floor_dbc).then_some(thd)
    }

    /// The analysis floor below which harmonics are reported as absent, dBc.
    pub fn floor_dbc(&self) -> f64 {
        self.result.floor_dbc
    }

    /// Whether both transistors stayed forward-active over the period.
    pub fn is_forward_active(&self) -> bool {
        self.result.region.is_forward_active()
    }

    /// The engine's raw result (spectra, samples, region check).
    pub fn result(&self) -> &ToneResult {
        &self.result
    }
}

/// Two equal tones: intermodulation of the differential output.
///
/// ```
/// use linbudget::Stage;
///
/// let solved = Stage::new("bare", 1e-3, 2e3).at(27.0)?;
/// let two = solved.two_tone(0.001, 1e6, 1e4)?;
/// let one = solved.tone(0.001, 1e6)?;
/// // A memoryless cubic: IM3 = 3·HD3, i.e. 9.54 dB above it.
/// let gap = two.im3_dbc().unwrap() - one.hd_dbc(3).unwrap();
/// assert!((gap - 9.54).abs() < 0.02);
/// # Ok::<(), linbudget::Error>(())
/// ```
#[derive(Debug, Clone, Copy)]
pub struct TwoTone {
    result: TwoToneResult,
}

impl TwoTone {
    /// Output fundamental of one tone, peak V.
    pub fn fundamental_v(&self) -> f64 {
        self.result.fundamental_v
    }

    /// The larger third-order product (2f1 − f2 or 2f2 − f1) relative to one tone's output
    /// fundamental, dBc; `None` below the analysis floor.
    pub fn im3_dbc(&self) -> Option<f64> {
        self.result.im3_resolved_dbc()
    }

    /// The larger second-order product (f2 − f1 or f1 + f2), dBc; `None` below the floor.
    pub fn im2_dbc(&self) -> Option<f64> {
        self.result.im2_resolved_dbc()
    }

    /// The engine's raw result.
    pub fn result(&self) -> &TwoToneResult {
        &self.result
    }
}
