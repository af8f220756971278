//! What a response engine answers: single-tone and two-tone results of one stage at one
//! temperature, with the operating region over the period, and the trait every engine
//! implements. The memoryless engine ([`super::memoryless`]) and the periodic-steady-state
//! engine ([`super::dynamic`]) both answer these, so measuring code never asks which it has.

use crate::error::SolveFailure;
use crate::model::products::Product;
use crate::solve::device::{base_charge_factor, HIGH_INJECTION_FACTOR};
use crate::solve::spectrum::Spectrum;
use crate::solve::transfer::{OperatingPoint, StaticSolver};

/// Where a transistor operates over a drive: the worst region any sample reached.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum OperatingRegion {
    /// Both collector-base junctions reverse-biased (or at zero bias) and no high-level
    /// injection anywhere in the period.
    ForwardActive,
    /// The transport current reached high-level injection: the base-charge factor
    /// `(1 + sqrt(1 + 4·q_2))/2` exceeded [`HIGH_INJECTION_FACTOR`] somewhere in the period.
    HighInjection,
    /// A collector-base junction was forward-biased somewhere in the period (saturation,
    /// including quasi-saturation behind the collector resistance).
    Saturating,
}

impl OperatingRegion {
    /// The region's name in reports: `forward-active`, `high-injection`, `saturating`.
    pub fn name(self) -> &'static str {
        match self {
            OperatingRegion::ForwardActive => "forward-active",
            OperatingRegion::HighInjection => "high-injection",
            OperatingRegion::Saturating => "saturating",
        }
    }
}

/// The operating region over a drive: the extremes both transistors reached, sample by
/// sample, on the intrinsic junctions.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RegionCheck {
    /// Largest intrinsic base-collector voltage seen on either side, V (positive =
    /// forward-biased).
    pub max_base_collector_v: f64,
    /// Smallest collector current seen on either side, relative to the tail current.
    pub min_current_fraction: f64,
    /// Largest injection level `q_2 = I_CC/I_KF + I_EC/I_KR` seen on either side.
    pub max_injection: f64,
}

impl Default for RegionCheck {
    fn default() -> Self {
        RegionCheck::new()
    }
}

impl RegionCheck {
    /// No point seen yet.
    pub fn new() -> Self {
        RegionCheck {
            max_base_collector_v: f64::NEG_INFINITY,
            min_current_fraction: f64::INFINITY,
            max_injection: f64::NEG_INFINITY,
        }
    }

    /// The region of one static operating point.
    pub fn of_point(point: &OperatingPoint, tail: f64) -> Self {
        let mut region = RegionCheck::new();
        region.update(point, tail);
        region
    }

    /// Includes both sides of a solved point.
    pub fn update(&mut self, point: &OperatingPoint, tail: f64) {
        for side in [&point.p, &point.m] {
            self.include(
                side.base_collector_voltage(),
                side.collector_current / tail,
                side.injection,
            );
        }
    }

    /// Includes one side's base-collector voltage, collector-current fraction and injection
    /// level.
    pub fn include(&mut self, base_collector_v: f64, current_fraction: f64, injection: f64) {
        self.max_base_collector_v = self.max_base_collector_v.max(base_collector_v);
        self.min_current_fraction = self.min_current_fraction.min(current_fraction);
        self.max_injection = self.max_injection.max(injection);
    }

    /// Includes another check (the worst of both).
    pub fn merge(&mut self, other: &RegionCheck) {
        self.max_base_collector_v = self.max_base_collector_v.max(other.max_base_collector_v);
        self.min_current_fraction = self.min_current_fraction.min(other.min_current_fraction);
        self.max_injection = self.max_injection.max(other.max_injection);
    }

    /// The least collector-base reverse bias over the drive, V: negative when a junction was
    /// forward-biased.
    pub fn collector_base_margin_v(&self) -> f64 {
        -self.max_base_collector_v
    }

    /// The worst region reached.
    pub fn region(&self) -> OperatingRegion {
        if self.max_base_collector_v > 0.0 {
            OperatingRegion::Saturating
        } else if base_charge_factor(self.max_injection) > HIGH_INJECTION_FACTOR {
            OperatingRegion::HighInjection
        } else {
            OperatingRegion::ForwardActive
        }
    }

    /// Whether both transistors stayed forward-active (no saturation, no high-level injection)
    /// over the whole drive.
    pub fn is_forward_active(&self) -> bool {
        self.region() == OperatingRegion::ForwardActive
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
    /// Operating region over the period.
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
    /// Operating region over the two-tone drive.
    pub region: RegionCheck,
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
