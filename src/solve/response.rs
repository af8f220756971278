//! What a response engine answers: single-tone and two-tone results of one stage at one
//! temperature, with the operating-region check over the period, and the trait every engine
//! implements. The memoryless engine ([`super::memoryless`]) and the periodic-steady-state
//! engine ([`super::dynamic`]) both answer these, so measuring code never asks which it has.

use crate::error::SolveFailure;
use crate::model::products::Product;
use crate::solve::spectrum::Spectrum;
use crate::solve::transfer::{OperatingPoint, StaticSolver};

/// A collector current below this fraction of the tail current counts as cut off.
pub const CUTOFF_FRACTION: f64 = 1e-6;

/// Where a drive point leaves the model's forward-active validity.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct RegionCheck {
    /// Largest base-collector voltage seen on either side, V (positive = forward-biased).
    pub max_base_collector_v: f64,
    /// Smallest collector current seen on either side, relative to the tail current.
    pub min_current_fraction: f64,
}

impl RegionCheck {
    /// No point seen yet.
    pub(crate) fn new() -> Self {
        RegionCheck {
            max_base_collector_v: f64::NEG_INFINITY,
            min_current_fraction: f64::INFINITY,
        }
    }

    /// Includes both sides of a solved point.
    pub(crate) fn update(&mut self, point: &OperatingPoint, tail: f64) {
        for side in [&point.p, &point.m] {
            self.include(side.base_collector_voltage(), side.collector_current / tail);
        }
    }

    /// Includes one side's base-collector voltage and collector-current fraction.
    pub(crate) fn include(&mut self, base_collector_v: f64, current_fraction: f64) {
        self.max_base_collector_v = self.max_base_collector_v.max(base_collector_v);
        self.min_current_fraction = self.min_current_fraction.min(current_fraction);
    }

    /// Whether both transistors stayed forward-active over the whole period: the
    /// collector-base junctions reverse-biased (or at zero bias) and neither side cut off.
    pub fn is_forward_active(&self) -> bool {
        let leaves = self.max_base_collector_v > 0.0 || self.min_current_fraction < CUTOFF_FRACTION;
        !leaves
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
    /// Grid size per tone axis (time steps per common period for stages with capacitance).
    pub samples: usize,
    /// Analysis floor of the point's products, dBc: where the solve's precision ends.
    pub floor_dbc: f64,
    /// IM3's floor, dBc: the point's floor, or higher when a product of higher order shares
    /// IM3's frequency in the common period (stages with capacitance).
    pub im3_floor_dbc: f64,
    /// IM2's floor, dBc, likewise.
    pub im2_floor_dbc: f64,
    /// The product of higher order that sets IM3's floor, when one does.
    pub im3_limited_by: Option<Product>,
    /// The product of higher order that sets IM2's floor, when one does.
    pub im2_limited_by: Option<Product>,
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

    /// IM3 in dBc when it stands above its floor.
    pub fn im3_resolved_dbc(&self) -> Option<f64> {
        let im3 = self.im3_dbc();
        (im3.is_finite() && im3 >= self.im3_floor_dbc).then_some(im3)
    }

    /// IM2 in dBc when it stands above its floor.
    pub fn im2_resolved_dbc(&self) -> Option<f64> {
        let im2 = self.im2_dbc();
        (im2.is_finite() && im2 >= self.im2_floor_dbc).then_some(im2)
    }
}

/// Answers single-tone and two-tone drives of one stage at one temperature.
pub trait ResponseEngine: Sync + Send {
    /// Single tone of peak differential amplitude `amplitude_v` at `frequency_hz`, with
    /// harmonics up to `harmonics` analysed.
    fn tone(
        &self,
        amplitude_v: f64,
        frequency_hz: f64,
        harmonics: usize,
    ) -> Result<ToneResult, SolveFailure>;

    /// Two equal tones of `amplitude_v` each at `frequency_hz` and `frequency_hz + spacing_hz`.
    fn two_tone(
        &self,
        amplitude_v: f64,
        frequency_hz: f64,
        spacing_hz: f64,
    ) -> Result<TwoToneResult, SolveFailure>;

    /// The static solver of the same stage (operating point, small-signal figures).
    fn static_solver(&self) -> &StaticSolver;

    /// The least amplitude this engine answers directly, V. A smaller drive is answered from
    /// the small-signal power series through this amplitude and half of it
    /// ([`crate::solve::small_drive`]), because the engine's absolute precision would be a
    /// sizeable part of its fundamental. `None`: every amplitude is answered directly.
    fn direct_floor_v(&self) -> Option<f64> {
        None
    }
}
