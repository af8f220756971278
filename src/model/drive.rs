//! How the stages are driven: amplitudes, frequencies, two-tone spacing, THD's span.

use super::budget::BudgetLine;

/// THD sums harmonics 2 through this order unless a plan says otherwise.
pub const DEFAULT_THD_HARMONICS: usize = 40;

/// How the stages are driven.
#[derive(Debug, Clone, PartialEq)]
pub struct Drive {
    /// Peak differential input amplitudes per tone, V (in the order given).
    pub amplitudes: Vec<f64>,
    /// Signal frequencies, Hz.
    pub frequencies: Vec<f64>,
    /// Two-tone spacing, Hz, when the plan asks for two-tone analysis.
    pub two_tone_spacing: Option<f64>,
    /// THD sums harmonics 2 through this order.
    pub thd_harmonics: usize,
}

impl Drive {
    /// Single tones of `amplitudes` (peak differential, V) at 1 kHz.
    pub fn new(amplitudes: Vec<f64>) -> Self {
        Drive {
            amplitudes,
            frequencies: vec![1e3],
            two_tone_spacing: None,
            thd_harmonics: DEFAULT_THD_HARMONICS,
        }
    }

    /// Sets the frequencies, Hz.
    #[must_use]
    pub fn frequencies(mut self, frequencies: Vec<f64>) -> Self {
        self.frequencies = frequencies;
        self
    }

    /// Adds two-tone analysis with the given spacing, Hz.
    #[must_use]
    pub fn two_tone_spacing(mut self, spacing_hz: f64) -> Self {
        self.two_tone_spacing = Some(spacing_hz);
        self
    }

    /// Sets the highest harmonic THD sums.
    #[must_use]
    pub fn thd_harmonics(mut self, highest: usize) -> Self {
        self.thd_harmonics = highest;
        self
    }

    /// The largest amplitude, V (0 when there is none).
    pub fn largest_amplitude(&self) -> f64 {
        self.amplitudes.iter().copied().fold(0.0, f64::max)
    }

    /// The frequency a budget line applies at (default: the first drive frequency), Hz.
    pub fn frequency_of(&self, line: &BudgetLine) -> f64 {
        line.frequency.unwrap_or(self.frequencies[0])
    }

    /// The amplitude a budget line applies at (default: the largest drive amplitude), V.
    pub fn amplitude_of(&self, line: &BudgetLine) -> f64 {
        line.at.unwrap_or_else(|| self.largest_amplitude())
    }

    /// The two-tone spacing used at `frequency_hz`: the plan's, or 1 % of the frequency.
    pub fn spacing_at(&self, frequency_hz: f64) -> f64 {
        self.two_tone_spacing.unwrap_or(0.01 * frequency_hz)
    }
}
