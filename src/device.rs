//! The bipolar transistor model: forward-active Gummel–Poon subset at a given temperature.
//!
//! Collector current `I_C = I_S·exp(V_BE/φT)·(1 + V_CE/V_A)` (exponential law with Early
//! effect), base current `I_B = I_S·exp(V_BE/φT)/β`. The saturation current follows the usual
//! temperature law `I_S(T) = I_S(T0)·(T/T0)^XTI·exp(q·E_g/k·(1/T0 − 1/T))`.

use crate::plan::TransistorSpec;
use crate::units::{BOLTZMANN, ELEMENTARY_CHARGE, ZERO_CELSIUS_K};

/// Saturation current at `temperature_c` from its value at the nominal temperature.
pub fn saturation_current_at(spec: &TransistorSpec, temperature_c: f64) -> f64 {
    let t = temperature_c + ZERO_CELSIUS_K;
    let t0 = spec.nominal_temperature_c + ZERO_CELSIUS_K;
    let gap_term = spec.bandgap_ev * ELEMENTARY_CHARGE / BOLTZMANN * (1.0 / t0 - 1.0 / t);
    spec.saturation_current * (t / t0).powf(spec.saturation_current_exponent) * gap_term.exp()
}

/// Charge-storage parameters of one transistor (for the dynamic engine).
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct ChargeModel {
    /// Forward transit time, s (diffusion charge = τ_F·I_C).
    pub transit_time: f64,
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
    /// Takes the charge parameters from the plan's transistor.
    pub fn from_spec(spec: &TransistorSpec) -> Self {
        ChargeModel {
            transit_time: spec.transit_time,
            emitter_junction_capacitance: spec.emitter_junction_capacitance,
            emitter_junction_potential: spec.emitter_junction_potential,
            emitter_grading: spec.emitter_grading,
            collector_junction_capacitance: spec.collector_junction_capacitance,
            collector_junction_potential: spec.collector_junction_potential,
            collector_grading: spec.collector_grading,
        }
    }

    /// Whether the transistor stores any charge.
    pub fn is_memoryless(&self) -> bool {
        self.transit_time == 0.0
            && self.emitter_junction_capacitance == 0.0
            && self.collector_junction_capacitance == 0.0
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn saturation_current_unchanged_at_nominal() {
        let spec = TransistorSpec::default();
        assert_eq!(saturation_current_at(&spec, spec.nominal_temperature_c), spec.saturation_current);
    }

    #[test]
    fn vbe_temperature_coefficient_is_about_minus_two_millivolts_per_kelvin() {
        // Common practice: V_BE at constant collector current falls by roughly 1.5 to 2.2 mV/K.
        let spec = TransistorSpec::default();
        let current = 0.5e-3;
        let vbe = |t: f64| crate::units::thermal_voltage(t) * (current / saturation_current_at(&spec, t)).ln();
        let slope = (vbe(37.0) - vbe(17.0)) / 20.0;
        assert!(slope < -1.5e-3 && slope > -2.2e-3, "dV_BE/dT = {slope}");
    }
}
