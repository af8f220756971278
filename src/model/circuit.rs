//! A differential-pair stage made concrete at one temperature: both sides' element values,
//! with the plan's P-over-M mismatch applied.
//!
//! Mismatch convention: a fraction δ means the P-side value is the M-side value times (1 + δ);
//! the M side keeps the nominal value. So a saturation-current mismatch δ is an input offset of
//! exactly φT·ln(1 + δ).

use super::stage::{Mismatch, Stage};
use super::transistor::ChargeModel;
use crate::units::thermal_voltage;

/// Element values of one side (one transistor with its resistors).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Side {
    /// Saturation current at the stage temperature, A.
    pub saturation_current: f64,
    /// 1/β (0 for no base current).
    pub beta_inv: f64,
    /// 1/V_AF, 1/V (0 for no forward Early effect).
    pub early_inv: f64,
    /// 1/β_R (0 for no reverse base current).
    pub reverse_beta_inv: f64,
    /// 1/V_AR, 1/V (0 for no reverse Early effect).
    pub reverse_early_inv: f64,
    /// 1/I_KF, 1/A (0 for no forward high-level injection).
    pub forward_knee_inv: f64,
    /// 1/I_KR, 1/A (0 for no reverse high-level injection).
    pub reverse_knee_inv: f64,
    /// Collector series resistance r_c, between the collector terminal and the intrinsic
    /// collector, Ω.
    pub collector_resistance: f64,
    /// Source plus base resistance in the base path, Ω.
    pub base_path_resistance: f64,
    /// Emitter degeneration, Ω.
    pub emitter_resistance: f64,
    /// Collector load, Ω.
    pub load_resistance: f64,
}

/// A stage at one temperature, ready to solve.
#[derive(Debug, Clone, PartialEq)]
pub struct StageCircuit {
    /// The P side (driven by +v_d/2).
    pub p: Side,
    /// The M side (driven by −v_d/2).
    pub m: Side,
    /// Thermal voltage φT = kT/q, V.
    pub thermal_voltage: f64,
    /// Ideal part of the tail source, A.
    pub tail_current: f64,
    /// 1/R_tail, S (0 for an ideal tail).
    pub tail_conductance: f64,
    /// Supply, V.
    pub supply: f64,
    /// Input common mode, V.
    pub input_common_mode: f64,
    /// Temperature, °C.
    pub temperature_c: f64,
    /// Charge storage of each transistor.
    pub charge: ChargeModel,
    /// Capacitance across each load, F.
    pub load_capacitance: f64,
    /// Tail-node capacitance, F.
    pub tail_capacitance: f64,
    /// The P side's charge-storage elements relative to the M side's (nominal) ones.
    pub p_charge_scale: ChargeScale,
}

/// Factors `1 + δ` on the P side's charge-storage elements (the M side is nominal).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ChargeScale {
    /// Load capacitance.
    pub load_capacitance: f64,
    /// Zero-bias base-emitter junction capacitance.
    pub emitter_junction_capacitance: f64,
    /// Zero-bias base-collector junction capacitance.
    pub collector_junction_capacitance: f64,
    /// Forward transit time.
    pub transit_time: f64,
}

impl ChargeScale {
    /// Both sides alike.
    pub const MATCHED: ChargeScale = ChargeScale {
        load_capacitance: 1.0,
        emitter_junction_capacitance: 1.0,
        collector_junction_capacitance: 1.0,
        transit_time: 1.0,
    };
}

fn scaled(nominal: f64, fraction: f64) -> f64 {
    nominal * (1.0 + fraction)
}

fn inverse_or_zero(value: f64) -> f64 {
    if value.is_finite() {
        1.0 / value
    } else {
        0.0
    }
}

impl StageCircuit {
    /// Builds the stage at `temperature_c` with the plan's own mismatch.
    pub fn new(stage: &Stage, temperature_c: f64) -> Self {
        Self::with_mismatch(stage, temperature_c, &stage.mismatch)
    }

    /// Builds the stage at `temperature_c` with an explicit mismatch (Monte Carlo draws).
    pub fn with_mismatch(stage: &Stage, temperature_c: f64, mismatch: &Mismatch) -> Self {
        let t = &stage.transistor;
        let is_m = t.saturation_current_at(temperature_c);
        let m = Side {
            saturation_current: is_m,
            beta_inv: inverse_or_zero(t.beta),
            early_inv: inverse_or_zero(t.early_voltage),
            reverse_beta_inv: inverse_or_zero(t.reverse_beta),
            reverse_early_inv: inverse_or_zero(t.reverse_early_voltage),
            forward_knee_inv: inverse_or_zero(t.forward_knee_current),
            reverse_knee_inv: inverse_or_zero(t.reverse_knee_current),
            collector_resistance: t.collector_resistance,
            base_path_resistance: stage.source_resistance + t.base_resistance,
            emitter_resistance: stage.emitter_resistance,
            load_resistance: stage.load_resistance,
        };
        let p = Side {
            saturation_current: scaled(is_m, mismatch.saturation_current),
            beta_inv: inverse_or_zero(scaled(t.beta, mismatch.beta)),
            early_inv: m.early_inv,
            reverse_beta_inv: m.reverse_beta_inv,
            reverse_early_inv: m.reverse_early_inv,
            forward_knee_inv: m.forward_knee_inv,
            reverse_knee_inv: m.reverse_knee_inv,
            collector_resistance: m.collector_resistance,
            base_path_resistance: stage.source_resistance
                + scaled(t.base_resistance, mismatch.base_resistance),
            emitter_resistance: scaled(stage.emitter_resistance, mismatch.emitter_resistance),
            load_resistance: scaled(stage.load_resistance, mismatch.load_resistance),
        };
        StageCircuit {
            p,
            m,
            thermal_voltage: thermal_voltage(temperature_c),
            tail_current: stage.tail_current_law.current_at(
                stage.tail_current,
                t.nominal_temperature_c,
                temperature_c,
            ),
            tail_conductance: inverse_or_zero(stage.tail_resistance),
            supply: stage.supply_v(),
            input_common_mode: stage.input_common_mode_v(),
            temperature_c,
            charge: ChargeModel::of(t),
            load_capacitance: stage.load_capacitance,
            tail_capacitance: stage.tail_capacitance,
            p_charge_scale: ChargeScale {
                load_capacitance: 1.0 + mismatch.load_capacitance,
                emitter_junction_capacitance: 1.0 + mismatch.emitter_junction_capacitance,
                collector_junction_capacitance: 1.0 + mismatch.collector_junction_capacitance,
                transit_time: 1.0 + mismatch.transit_time,
            },
        }
    }

    /// Whether the stage stores no charge anywhere (frequency only labels the points).
    pub fn is_memoryless(&self) -> bool {
        self.charge.is_memoryless() && self.load_capacitance == 0.0 && self.tail_capacitance == 0.0
    }

    /// Whether the reduced one-unknown solve applies: an ideal tail, no Early effect and no
    /// high-level injection. It holds wherever both collector-base junctions are at or below
    /// zero bias; [`crate::solve::transfer::StaticSolver`] checks that at every solved point
    /// and solves the whole model where it does not.
    pub fn is_reducible(&self) -> bool {
        self.tail_conductance == 0.0
            && [&self.p, &self.m]
                .iter()
                .all(|s| s.forward_law() && s.early_inv == 0.0)
    }
}

impl Side {
    /// Whether, with the collector-base junction at or below zero bias, this side follows the
    /// forward-active form `I_C = J·(1 + V_CE/V_AF)`, `I_B = J/β_F` (no knee currents and no
    /// reverse Early voltage).
    pub fn forward_law(&self) -> bool {
        self.reverse_early_inv == 0.0
            && self.forward_knee_inv == 0.0
            && self.reverse_knee_inv == 0.0
    }
}
