//! The tail current source's temperature law: how the bias of the pair moves with temperature.
//!
//! `constant`: `I(T) = I_0`; `ptat` (proportional to absolute temperature, as from a ΔV_BE
//! cell): `I(T) = I_0·T/T_0`; a temperature coefficient `tc` (1/K): `I(T) = I_0·(1 + tc·(T − T_0))`.
//! `I_0` is the stage's `tail_current`, `T_0` the transistor's nominal temperature.

use crate::units::ZERO_CELSIUS_K;

/// How the tail current depends on temperature.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub enum TailCurrentLaw {
    /// The same current at every temperature (an ideal bandgap-referenced source).
    #[default]
    Constant,
    /// Proportional to absolute temperature (constant transconductance bias).
    Ptat,
    /// A linear temperature coefficient, 1/K, about the nominal temperature.
    Coefficient(f64),
}

impl TailCurrentLaw {
    /// Tail current at `temperature_c` from `nominal_a` at `nominal_c`, A (may be ≤ 0 for a
    /// steep negative coefficient; the plan reader refuses such plans).
    pub fn current_at(self, nominal_a: f64, nominal_c: f64, temperature_c: f64) -> f64 {
        match self {
            TailCurrentLaw::Constant => nominal_a,
            TailCurrentLaw::Ptat => {
                nominal_a * (temperature_c + ZERO_CELSIUS_K) / (nominal_c + ZERO_CELSIUS_K)
            }
            TailCurrentLaw::Coefficient(tc) => nominal_a * (1.0 + tc * (temperature_c - nominal_c)),
        }
    }

    /// Name for reports.
    pub fn describe(self) -> String {
        match self {
            TailCurrentLaw::Constant => "constant".into(),
            TailCurrentLaw::Ptat => "ptat".into(),
            TailCurrentLaw::Coefficient(tc) => format!("{:.0} ppm/K", tc * 1e6),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ptat_current_keeps_the_transconductance_constant() {
        // Common practice: g_m = I_C/φT, and φT ∝ T, so a PTAT tail holds g_m fixed.
        let law = TailCurrentLaw::Ptat;
        let gm = |t: f64| 0.5 * law.current_at(1e-3, 27.0, t) / crate::units::thermal_voltage(t);
        assert!((gm(125.0) / gm(-40.0) - 1.0).abs() < 1e-12);
    }

    #[test]
    fn coefficient_law_is_linear_about_nominal() {
        let law = TailCurrentLaw::Coefficient(2e-3);
        assert!((law.current_at(1e-3, 27.0, 77.0) - 1.1e-3).abs() < 1e-15);
        assert_eq!(law.current_at(1e-3, 27.0, 27.0), 1e-3);
    }
}
