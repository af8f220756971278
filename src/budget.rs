//! Budget lines: measuring the constrained figure of a stage and judging it against the limit.
//!
//! Margin convention (dB, positive = pass): `limit − value` for a `max` line in dB,
//! `value − limit` for a `min` line in dB, `20·log10(value/limit)` for a `min` line in volts,
//! `20·log10(limit/value)` for a `max` line in volts.

use crate::engine::ResponseEngine;
use crate::error::SolveFailure;
use crate::metrics::{self, Intercept};
use crate::plan::{BudgetLine, Limit, Metric, Plan};
use std::cell::OnceCell;
use std::collections::HashMap;

/// Lazily measured figures of one stage at one temperature, shared by all budget lines.
pub struct Figures<'a> {
    engine: &'a dyn ResponseEngine,
    plan: &'a Plan,
    gain: OnceCell<f64>,
    steering: OnceCell<(f64, f64)>,
    noise: OnceCell<f64>,
    intercepts: std::cell::RefCell<HashMap<u64, Option<Intercept>>>,
    p1db: std::cell::RefCell<HashMap<u64, Option<f64>>>,
    gains_at: std::cell::RefCell<HashMap<u64, f64>>,
}

impl<'a> Figures<'a> {
    /// Prepares lazy figures for one engine.
    pub fn new(engine: &'a dyn ResponseEngine, plan: &'a Plan) -> Self {
        Figures {
            engine,
            plan,
            gain: OnceCell::new(),
            steering: OnceCell::new(),
            noise: OnceCell::new(),
            intercepts: Default::default(),
            p1db: Default::default(),
            gains_at: Default::default(),
        }
    }

    /// The engine measured.
    pub fn engine(&self) -> &dyn ResponseEngine {
        self.engine
    }

    /// Small-signal differential voltage gain, V/V.
    pub fn gain(&self) -> Result<f64, SolveFailure> {
        if let Some(g) = self.gain.get() {
            return Ok(*g);
        }
        let g = metrics::small_signal_gain(self.engine.static_solver())?;
        Ok(*self.gain.get_or_init(|| g))
    }

    /// Small-signal differential voltage gain at `frequency_hz`, V/V (magnitude for stages with
    /// charge storage): the static derivative for a memoryless stage, otherwise the fundamental
    /// of a tone of 10⁻³·φT, whose compression is below 10⁻⁷ relative.
    pub fn gain_at(&self, frequency_hz: f64) -> Result<f64, SolveFailure> {
        let circuit = self.engine.static_solver().circuit();
        if circuit.is_memoryless() {
            return self.gain();
        }
        if let Some(found) = self.gains_at.borrow().get(&frequency_hz.to_bits()) {
            return Ok(*found);
        }
        let amplitude = 1e-3 * circuit.thermal_voltage;
        let tone = self.engine.tone(amplitude, frequency_hz, 3)?;
        let gain = tone.differential.fundamental() / amplitude;
        self.gains_at
            .borrow_mut()
            .insert(frequency_hz.to_bits(), gain);
        Ok(gain)
    }

    /// Inputs at the 5 % and 95 % steering points, V.
    pub fn steering(&self) -> Result<(f64, f64), SolveFailure> {
        if let Some(s) = self.steering.get() {
            return Ok(*s);
        }
        let s = metrics::steering_points(self.engine.static_solver())?;
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
        let n = metrics::input_noise_density(self.engine.static_solver())?;
        Ok(*self.noise.get_or_init(|| n))
    }

    /// Two-tone spacing used for intercepts at `frequency_hz`.
    fn spacing(&self, frequency_hz: f64) -> f64 {
        self.plan
            .drive
            .two_tone_spacing
            .unwrap_or(0.01 * frequency_hz)
    }

    /// Third-order intercept at `frequency_hz`.
    pub fn intercept(&self, frequency_hz: f64) -> Result<Option<Intercept>, SolveFailure> {
        if let Some(found) = self.intercepts.borrow().get(&frequency_hz.to_bits()) {
            return Ok(*found);
        }
        let start = self.steering_range()? / 8.0;
        let value = metrics::third_order_intercept(
            self.engine,
            frequency_hz,
            self.spacing(frequency_hz),
            start,
        )?;
        self.intercepts
            .borrow_mut()
            .insert(frequency_hz.to_bits(), value);
        Ok(value)
    }

    /// Input 1 dB compression point at `frequency_hz`, V.
    pub fn p1db(&self, frequency_hz: f64) -> Result<Option<f64>, SolveFailure> {
        if let Some(found) = self.p1db.borrow().get(&frequency_hz.to_bits()) {
            return Ok(*found);
        }
        let start = self.steering_range()? / 4.0;
        let value = metrics::input_p1db(
            self.engine,
            frequency_hz,
            self.gain_at(frequency_hz)?,
            start,
        )?;
        self.p1db.borrow_mut().insert(frequency_hz.to_bits(), value);
        Ok(value)
    }

    /// The value a line constrains (None: below the floor or unbounded).
    pub fn measure(&self, line: &BudgetLine) -> Result<Option<f64>, SolveFailure> {
        let frequency = line_frequency(line, self.plan);
        let amplitude = line_amplitude(line, self.plan);
        Ok(match line.metric {
            Metric::Harmonic(order) => {
                let tone = self.engine.tone(
                    amplitude,
                    frequency,
                    self.plan.drive.thd_harmonics.max(order),
                )?;
                tone.differential.harmonic_dbc(order, tone.floor_dbc)
            }
            Metric::Thd => {
                let tone = self
                    .engine
                    .tone(amplitude, frequency, self.plan.drive.thd_harmonics)?;
                let thd = tone.differential.raw_thd_dbc(self.plan.drive.thd_harmonics);
                (thd >= tone.floor_dbc).then_some(thd)
            }
            Metric::Im3 => {
                let result = self
                    .engine
                    .two_tone(amplitude, frequency, self.spacing(frequency))?;
                let im3 = result.im3_dbc();
                (im3 >= crate::spectrum::ANALYSIS_FLOOR_DBC).then_some(im3)
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
        })
    }
}

/// The frequency a line applies at (default: the first drive frequency).
pub fn line_frequency(line: &BudgetLine, plan: &Plan) -> f64 {
    line.frequency.unwrap_or(plan.drive.frequencies[0])
}

/// The amplitude a line applies at (default: the largest drive amplitude).
pub fn line_amplitude(line: &BudgetLine, plan: &Plan) -> f64 {
    line.at
        .unwrap_or_else(|| plan.drive.amplitudes.iter().copied().fold(0.0, f64::max))
}

/// Margin (dB, positive = pass) and verdict of a measured value.
///
/// A value below the analysis floor (`None`) passes a `max` line in dB with its margin
/// measured from the floor, so the margin shown is a lower bound; an unbounded intercept or
/// compression point (`None`) passes a `min` line with no finite margin.
pub fn judge(line: &BudgetLine, value: Option<f64>, floor_dbc: f64) -> (Option<f64>, bool) {
    let margin = match (line.limit, value, line.metric.is_decibel()) {
        (Limit::Max(limit), Some(v), true) => Some(limit - v),
        (Limit::Min(limit), Some(v), true) => Some(v - limit),
        (Limit::Max(limit), Some(v), false) => Some(20.0 * (limit / v).log10()),
        (Limit::Min(limit), Some(v), false) => Some(20.0 * (v / limit).log10()),
        (Limit::Max(limit), None, true) => Some(limit - floor_dbc),
        (Limit::Min(_), None, true) => None,
        (Limit::Min(_), None, false) => None,
        (Limit::Max(_), None, false) => None,
    };
    let pass = match (margin, line.limit, value) {
        (Some(m), _, _) => m >= 0.0,
        // An unbounded intercept passes any minimum; a missing dB figure fails a minimum.
        (None, Limit::Min(_), None) => !line.metric.is_decibel(),
        (None, _, _) => false,
    };
    (margin, pass)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn line(metric: Metric, limit: Limit) -> BudgetLine {
        BudgetLine {
            metric,
            at: None,
            frequency: None,
            limit,
        }
    }

    #[test]
    fn margins_follow_the_contract() {
        let (m, pass) = judge(
            &line(Metric::Harmonic(3), Limit::Max(-60.0)),
            Some(-36.6),
            -200.0,
        );
        assert!((m.unwrap() + 23.4).abs() < 1e-12 && !pass);
        let (m, pass) = judge(&line(Metric::Gain, Limit::Min(6.0)), Some(10.0), -200.0);
        assert!((m.unwrap() - 4.0).abs() < 1e-12 && pass);
        let (m, pass) = judge(&line(Metric::Iip3, Limit::Min(0.3)), Some(0.6), -200.0);
        assert!((m.unwrap() - 20.0 * 2f64.log10()).abs() < 1e-12 && pass);
        let (m, pass) = judge(&line(Metric::Harmonic(2), Limit::Max(-80.0)), None, -200.0);
        assert!((m.unwrap() - 120.0).abs() < 1e-12 && pass);
    }
}
