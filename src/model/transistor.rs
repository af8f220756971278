//! The bipolar transistor as data: the parameters of the Gummel–Poon core the engines solve
//! over the whole drive range (forward-active, saturation, high-level injection), with their
//! defaults, builders and the saturation current's temperature law.
//!
//! With the junction voltages `V_BE`, `V_BC` of the intrinsic transistor (inside r_b, R_E and
//! r_c), the transport currents are `I_CC = I_S·(exp(V_BE/φT) − 1)` and
//! `I_EC = I_S·(exp(V_BC/φT) − 1)`; the normalised base charge
//! `q_b = q_1·(1 + sqrt(1 + 4·q_2))/2` with `1/q_1 = 1 + V_CE/V_AF − V_BE/V_AR` and
//! `q_2 = I_CC/I_KF + I_EC/I_KR`; then `I_C = (I_CC − I_EC)/q_b − I_EC/β_R` and
//! `I_B = I_CC/β_F + I_EC/β_R`. With the collector-base junction reverse-biased and the knee
//! currents and reverse Early voltage infinite this is the exponential law with Early effect,
//! `I_C = I_S·exp(V_BE/φT)·(1 + V_CE/V_A)`, `I_B = I_S·exp(V_BE/φT)/β`, to within terms of
//! order I_S. The saturation current follows the usual temperature law
//! `I_S(T) = I_S(T0)·(T/T0)^XTI·exp(q·E_g/k·(1/T0 − 1/T))`; every other parameter is taken as
//! independent of temperature. `specs/README.md` writes the whole model down.

use crate::units::{BOLTZMANN, ELEMENTARY_CHARGE, ZERO_CELSIUS_K};

/// Bipolar transistor parameters; every quantity in SI base units.
///
/// The default is an ideal bipolar transistor (β and Early voltage infinite, no resistances or
/// charge storage) with `I_S = 1e-16 A` at 27 °C:
///
/// ```
/// use linbudget::Transistor;
///
/// let npn = Transistor::default().beta(120.0).early_voltage(60.0).base_resistance(150.0);
/// assert_eq!(npn.beta, 120.0);
/// assert_eq!(npn.saturation_current, 1e-16);
/// assert!(npn.transit_time == 0.0 && npn.early_voltage == 60.0);
/// ```
#[derive(Debug, Clone, PartialEq)]
pub struct Transistor {
    /// Saturation current at the nominal temperature, A.
    pub saturation_current: f64,
    /// Forward current gain β (infinite = no base current).
    pub beta: f64,
    /// Forward Early voltage, V (infinite = no Early effect).
    pub early_voltage: f64,
    /// Ohmic base resistance, Ω.
    pub base_resistance: f64,
    /// Forward transit time, s.
    pub transit_time: f64,
    /// Zero-bias base-emitter junction capacitance, F.
    pub emitter_junction_capacitance: f64,
    /// Zero-bias base-collector junction capacitance, F.
    pub collector_junction_capacitance: f64,
    /// Base-emitter built-in potential, V.
    pub emitter_junction_potential: f64,
    /// Base-emitter grading exponent.
    pub emitter_grading: f64,
    /// Base-collector built-in potential, V.
    pub collector_junction_potential: f64,
    /// Base-collector grading exponent.
    pub collector_grading: f64,
    /// Temperature at which `saturation_current` is given, °C.
    pub nominal_temperature_c: f64,
    /// Band-gap energy for the saturation current's temperature law, eV.
    pub bandgap_ev: f64,
    /// Temperature exponent of the saturation current (XTI).
    pub saturation_current_exponent: f64,
    /// Flicker-noise coefficient of the base current, KF: `i_b² = KF·I_B^AF/f` (A²/Hz at
    /// 1 Hz when AF = 1); 0 = no flicker noise.
    pub flicker_coefficient: f64,
    /// Flicker-noise exponent of the base current, AF.
    pub flicker_exponent: f64,
    /// Reverse current gain β_R (infinite = no reverse base current).
    pub reverse_beta: f64,
    /// Forward knee current I_KF where high-level injection sets in, A (infinite = none).
    pub forward_knee_current: f64,
    /// Reverse knee current I_KR, A (infinite = none).
    pub reverse_knee_current: f64,
    /// Collector series resistance r_c, Ω (between the collector terminal and the intrinsic
    /// collector).
    pub collector_resistance: f64,
    /// Reverse transit time τ_R, s (reverse diffusion charge τ_R·I_EC).
    pub reverse_transit_time: f64,
    /// Reverse Early voltage V_AR, V (infinite = none).
    pub reverse_early_voltage: f64,
}

impl Default for Transistor {
    fn default() -> Self {
        Transistor {
            saturation_current: 1e-16,
            beta: f64::INFINITY,
            early_voltage: f64::INFINITY,
            base_resistance: 0.0,
            transit_time: 0.0,
            emitter_junction_capacitance: 0.0,
            collector_junction_capacitance: 0.0,
            emitter_junction_potential: 0.75,
            emitter_grading: 0.33,
            collector_junction_potential: 0.75,
            collector_grading: 0.33,
            nominal_temperature_c: 27.0,
            bandgap_ev: 1.11,
            saturation_current_exponent: 3.0,
            flicker_coefficient: 0.0,
            flicker_exponent: 1.0,
            reverse_beta: 1.0,
            forward_knee_current: f64::INFINITY,
            reverse_knee_current: f64::INFINITY,
            collector_resistance: 0.0,
            reverse_transit_time: 0.0,
            reverse_early_voltage: f64::INFINITY,
        }
    }
}

/// Builder methods named after the fields (and the plan keys): each returns the transistor
/// with that one parameter replaced.
macro_rules! builders {
    ($($(#[$doc:meta])* $field:ident),* $(,)?) => {
        impl Transistor {
            $(
                $(#[$doc])*
                #[must_use]
                pub fn $field(mut self, value: f64) -> Self {
                    self.$field = value;
                    self
                }
            )*
        }
    };
}

builders!(
    /// Sets the saturation current at the nominal temperature, A.
    saturation_current,
    /// Sets the forward current gain β (`f64::INFINITY` = no base current).
    beta,
    /// Sets the forward Early voltage, V (`f64::INFINITY` = none).
    early_voltage,
    /// Sets the ohmic base resistance, Ω.
    base_resistance,
    /// Sets the forward transit time, s.
    transit_time,
    /// Sets the zero-bias base-emitter junction capacitance, F.
    emitter_junction_capacitance,
    /// Sets the zero-bias base-collector junction capacitance, F.
    collector_junction_capacitance,
    /// Sets the base-emitter built-in potential, V.
    emitter_junction_potential,
    /// Sets the base-emitter grading exponent.
    emitter_grading,
    /// Sets the base-collector built-in potential, V.
    collector_junction_potential,
    /// Sets the base-collector grading exponent.
    collector_grading,
    /// Sets the temperature at which the saturation current is given, °C.
    nominal_temperature_c,
    /// Sets the band-gap energy of the saturation current's temperature law, eV.
    bandgap_ev,
    /// Sets the saturation current's temperature exponent (XTI).
    saturation_current_exponent,
    /// Sets the base current's flicker-noise coefficient KF.
    flicker_coefficient,
    /// Sets the base current's flicker-noise exponent AF.
    flicker_exponent,
    /// Sets the reverse current gain β_R (`f64::INFINITY` = no reverse base current).
    reverse_beta,
    /// Sets the forward knee current I_KF, A (`f64::INFINITY` = no high-level injection).
    forward_knee_current,
    /// Sets the reverse knee current I_KR, A (`f64::INFINITY` = none).
    reverse_knee_current,
    /// Sets the collector series resistance r_c, Ω.
    collector_resistance,
    /// Sets the reverse transit time τ_R, s.
    reverse_transit_time,
    /// Sets the reverse Early voltage V_AR, V (`f64::INFINITY` = none).
    reverse_early_voltage,
);

impl Transistor {
    /// Saturation current at `temperature_c` from its value at the nominal temperature, A.
    pub fn saturation_current_at(&self, temperature_c: f64) -> f64 {
        let t = temperature_c + ZERO_CELSIUS_K;
        let t0 = self.nominal_temperature_c + ZERO_CELSIUS_K;
        let gap_term = self.bandgap_ev * ELEMENTARY_CHARGE / BOLTZMANN * (1.0 / t0 - 1.0 / t);
        self.saturation_current * (t / t0).powf(self.saturation_current_exponent) * gap_term.exp()
    }
}

/// Charge-storage parameters of one transistor (for the dynamic engine).
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct ChargeModel {
    /// Forward transit time, s (forward diffusion charge = τ_F·I_CC/q_b).
    pub transit_time: f64,
    /// Reverse transit time, s (reverse diffusion charge = τ_R·I_EC).
    pub reverse_transit_time: f64,
    /// Zero-bias base-emitter junction capacitance, F.
    pub emitter_junction_capacitance: f64,
    /// Base-emitter built-in potential, V.
    pub emitter_junction_potential: f64,
    /// Base-emitter grading exponent.
    pub emitter_grading: f64,
    /// Zero-bias base-collector junction capacitance, F.
    pub collector_junction_capacitance: f64,
    /// Base-collector built-in potential, V.
    pub collector_junction_potential: f64,
    /// Base-collector grading exponent.
    pub collector_grading: f64,
}

impl ChargeModel {
    /// Takes the charge parameters of a transistor.
    pub fn of(transistor: &Transistor) -> Self {
        ChargeModel {
            transit_time: transistor.transit_time,
            reverse_transit_time: transistor.reverse_transit_time,
            emitter_junction_capacitance: transistor.emitter_junction_capacitance,
            emitter_junction_potential: transistor.emitter_junction_potential,
            emitter_grading: transistor.emitter_grading,
            collector_junction_capacitance: transistor.collector_junction_capacitance,
            collector_junction_potential: transistor.collector_junction_potential,
            collector_grading: transistor.collector_grading,
        }
    }

    /// Whether the transistor stores any charge.
    pub fn is_memoryless(&self) -> bool {
        self.transit_time == 0.0
            && self.reverse_transit_time == 0.0
            && self.emitter_junction_capacitance == 0.0
            && self.collector_junction_capacitance == 0.0
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn saturation_current_unchanged_at_nominal() {
        let transistor = Transistor::default();
        assert_eq!(
            transistor.saturation_current_at(transistor.nominal_temperature_c),
            transistor.saturation_current
        );
    }

    #[test]
    fn vbe_temperature_coefficient_follows_the_bandgap_formula() {
        // At constant collector current dV_BE/dT = (V_BE − E_g − XTI·φT)/T, the usual
        // derivative of the exponential law with I_S ∝ T^XTI·exp(−qE_g/kT) (e.g. Gray & Meyer's
        // band-gap reference chapter, from memory); roughly −1.5 to −2 mV/K (common practice).
        let transistor = Transistor::default();
        let current = 0.5e-3;
        let vbe = |t: f64| {
            crate::units::thermal_voltage(t) * (current / transistor.saturation_current_at(t)).ln()
        };
        let slope = (vbe(27.01) - vbe(26.99)) / 0.02;
        let phi = crate::units::thermal_voltage(27.0);
        let expected =
            (vbe(27.0) - transistor.bandgap_ev - transistor.saturation_current_exponent * phi)
                / 300.15;
        assert!(
            (slope / expected - 1.0).abs() < 1e-4,
            "{slope} vs {expected}"
        );
        assert!(slope < -1.0e-3 && slope > -2.5e-3, "dV_BE/dT = {slope}");
    }
}
