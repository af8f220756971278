//! A differential-pair stage made concrete at one temperature: both sides' element values,
//! with the plan's P-over-M mismatch applied.
//!
//! Mismatch convention: a fraction δ means the P-side value is the M-side value times (1 + δ);
//! the M side keeps the nominal value. So a saturation-current mismatch δ is an input offset of
//! exactly φT·ln(1 + δ).
//!
//! **Split tail.** One resistor `2·R_E` between the emitters, and at each emitter a tail
//! source `I_k` with output resistance `R_t` to ground, is a Π network; its Δ–Y (Π–T)
//! transform is exactly the emitter-resistor form with `R_E' = R_E·R_t/(R_t + R_E)` per side,
//! a tail resistance `R_g = R_t²/(2·(R_t + R_E))` and a tail current
//! `I' = (I_1 + I_2)·(R_t + R_E)/R_t`, plus sources `±R_E'·(I_1 − I_2)/2` in the emitter
//! leads where the two source currents differ (linear circuit theory: the two networks have
//! the same impedance matrix and the same open-circuit voltages). With ideal sources
//! `R_E' = R_E`, `R_g = ∞`, `I' = I`: the differential transfer is that of the emitter-resistor
//! form, while the sources sit at the emitters, `I·R_E/2` higher.
//!
//! **Multi-tanh.** Each pair is a circuit of its own (its tail source, areas, degeneration);
//! the pairs share the input nodes (through the source resistance) and the collector nodes
//! (through the loads), which [`crate::solve::transfer::StaticSolver`] couples exactly.
//! A transistor of emitter area `a` has `a·I_S`, `a·I_KF`, `a·I_KR`, `r_b/a` and `r_c/a`, and
//! (in the dynamic engine) `a·C_je` and `a·C_jc`; its transit time does not change.

use super::stage::{Mismatch, Stage};
use super::topology::Topology;
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
    /// A voltage source in the emitter lead, V, positive raising `V_BE` (the split tail's
    /// source-current difference; a noise source's probe).
    pub emitter_source_v: f64,
    /// Current other pairs of a multi-tanh cell draw through this side's load, A.
    pub extra_load_current: f64,
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
    /// The circuit form.
    pub topology: Topology,
    /// The split tail's own elements (with [`Topology::SplitTail`]).
    pub split_tail: Option<SplitTail>,
    /// The pairs of a multi-tanh cell (empty otherwise); their sides carry the shared source
    /// resistance in their base paths.
    pub cell: Vec<CellPair>,
    /// Source resistance per side, shared by every pair of a cell, Ω.
    pub source_resistance: f64,
    /// White noise current density of a tail source carrying the whole tail current, A/√Hz
    /// (a source carrying the fraction `f` has `√f` of it).
    pub tail_noise_current: f64,
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

    /// The same factors for a transistor of emitter area `area` (relative to a unit device):
    /// its junction capacitances scale with the area, its transit time does not.
    pub fn with_area(self, area: f64) -> ChargeScale {
        ChargeScale {
            emitter_junction_capacitance: self.emitter_junction_capacitance * area,
            collector_junction_capacitance: self.collector_junction_capacitance * area,
            ..self
        }
    }
}

/// The elements of a split tail before its transform to the emitter-resistor form.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SplitTail {
    /// Half the resistor between the emitters, Ω.
    pub half_resistance: f64,
    /// Output resistance of each source, Ω (infinite = ideal).
    pub source_resistance: f64,
    /// Currents of the P-side and M-side sources at this temperature, A.
    pub source_currents: [f64; 2],
    /// The emitter-lead source the transform last put on the P side (minus on M), V.
    pub applied_source_v: f64,
}

/// One pair of a multi-tanh cell.
#[derive(Debug, Clone, PartialEq)]
pub struct CellPair {
    /// The pair as a circuit of its own (its tail, its sides).
    pub circuit: StageCircuit,
    /// Its share of the stage's tail current.
    pub tail_fraction: f64,
    /// Emitter areas of its P and M transistors relative to a unit device (their junction
    /// capacitances scale with them; the saturation currents and resistances in
    /// [`CellPair::circuit`] already do).
    pub areas: [f64; 2],
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

    /// Builds the stage at `temperature_c` with an explicit mismatch (Monte Carlo draws); every
    /// pair of a multi-tanh cell gets the same mismatch.
    pub fn with_mismatch(stage: &Stage, temperature_c: f64, mismatch: &Mismatch) -> Self {
        Self::with_mismatches(stage, temperature_c, std::slice::from_ref(mismatch))
    }

    /// Builds the stage with one mismatch per pair of a multi-tanh cell (pair `k` takes
    /// `mismatches[k % len]`); other topologies take the first. Panics on an empty slice.
    pub fn with_mismatches(stage: &Stage, temperature_c: f64, mismatches: &[Mismatch]) -> Self {
        let mut circuit = Self::pair(stage, temperature_c, &mismatches[0], 1.0, 1.0);
        circuit.source_resistance = stage.source_resistance;
        match stage.topology {
            Topology::EmitterResistors => {}
            Topology::SplitTail => {
                let half = circuit.tail_current * 0.5;
                let delta = mismatches[0].tail_current;
                // P = M·(1 + δ) with the sum kept: I_M = I/(2 + δ), I_P = I·(1 + δ)/(2 + δ).
                let m_current = 2.0 * half / (2.0 + delta);
                circuit.split_tail = Some(SplitTail {
                    half_resistance: stage.emitter_resistance,
                    source_resistance: 2.0 * stage.tail_resistance,
                    source_currents: [m_current * (1.0 + delta), m_current],
                    applied_source_v: 0.0,
                });
                circuit.apply_split_tail();
            }
            Topology::MultiTanh => {
                circuit.topology = Topology::MultiTanh;
                circuit.cell = stage
                    .multi_tanh
                    .pairs()
                    .iter()
                    .enumerate()
                    .map(|(k, pair)| {
                        let mut local = stage.clone();
                        local.emitter_resistance =
                            pair.emitter_resistance.unwrap_or(stage.emitter_resistance);
                        let mismatch = &mismatches[k % mismatches.len()];
                        let mut part =
                            Self::pair(&local, temperature_c, mismatch, pair.area_p, pair.area_m);
                        part.tail_current *= pair.tail_fraction;
                        part.tail_conductance *= pair.tail_fraction;
                        part.tail_capacitance *= pair.tail_fraction;
                        part.source_resistance = stage.source_resistance;
                        // The loads are shared: one pair of resistors for the whole cell.
                        part.p.load_resistance = circuit.p.load_resistance;
                        part.m.load_resistance = circuit.m.load_resistance;
                        CellPair {
                            circuit: part,
                            tail_fraction: pair.tail_fraction,
                            areas: [pair.area_p, pair.area_m],
                        }
                    })
                    .collect();
            }
        }
        circuit
    }

    /// Recomputes the emitter-resistor equivalent of a split tail from its elements (see the
    /// module notes), keeping each side's emitter-source probe apart from the transform's.
    pub fn apply_split_tail(&mut self) {
        let Some(split) = self.split_tail.as_mut() else {
            return;
        };
        self.topology = Topology::SplitTail;
        let r_e = split.half_resistance;
        let r_t = split.source_resistance;
        let [i_p, i_m] = split.source_currents;
        let (r_equivalent, tail_conductance, scale) = if r_t.is_finite() {
            (
                r_e * r_t / (r_t + r_e),
                2.0 * (r_t + r_e) / (r_t * r_t),
                (r_t + r_e) / r_t,
            )
        } else {
            (r_e, 0.0, 1.0)
        };
        let source = 0.5 * r_equivalent * (i_p - i_m);
        let previous = std::mem::replace(&mut split.applied_source_v, source);
        self.p.emitter_resistance = r_equivalent;
        self.m.emitter_resistance = r_equivalent;
        self.tail_conductance = tail_conductance;
        self.tail_current = (i_p + i_m) * scale;
        self.p.emitter_source_v += source - previous;
        self.m.emitter_source_v += -source + previous;
    }

    /// One pair with the given emitter areas (relative to a unit device).
    fn pair(
        stage: &Stage,
        temperature_c: f64,
        mismatch: &Mismatch,
        area_p: f64,
        area_m: f64,
    ) -> Self {
        let t = &stage.transistor;
        let is_m = t.saturation_current_at(temperature_c);
        let m = Side {
            saturation_current: is_m * area_m,
            beta_inv: inverse_or_zero(t.beta),
            early_inv: inverse_or_zero(t.early_voltage),
            reverse_beta_inv: inverse_or_zero(t.reverse_beta),
            reverse_early_inv: inverse_or_zero(t.reverse_early_voltage),
            forward_knee_inv: inverse_or_zero(t.forward_knee_current * area_m),
            reverse_knee_inv: inverse_or_zero(t.reverse_knee_current * area_m),
            collector_resistance: t.collector_resistance / area_m,
            base_path_resistance: stage.source_resistance + t.base_resistance / area_m,
            emitter_resistance: stage.emitter_resistance,
            load_resistance: stage.load_resistance,
            emitter_source_v: 0.0,
            extra_load_current: 0.0,
        };
        let p = Side {
            saturation_current: scaled(is_m * area_p, mismatch.saturation_current),
            beta_inv: inverse_or_zero(scaled(t.beta, mismatch.beta)),
            early_inv: m.early_inv,
            reverse_beta_inv: m.reverse_beta_inv,
            reverse_early_inv: m.reverse_early_inv,
            forward_knee_inv: inverse_or_zero(t.forward_knee_current * area_p),
            reverse_knee_inv: inverse_or_zero(t.reverse_knee_current * area_p),
            collector_resistance: t.collector_resistance / area_p,
            base_path_resistance: stage.source_resistance
                + scaled(t.base_resistance, mismatch.base_resistance) / area_p,
            emitter_resistance: scaled(stage.emitter_resistance, mismatch.emitter_resistance),
            load_resistance: scaled(stage.load_resistance, mismatch.load_resistance),
            emitter_source_v: 0.0,
            extra_load_current: 0.0,
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
            topology: Topology::EmitterResistors,
            split_tail: None,
            cell: Vec::new(),
            source_resistance: stage.source_resistance,
            tail_noise_current: stage.tail_noise_current,
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
        self.cell.is_empty()
            && self.tail_conductance == 0.0
            && [&self.p, &self.m]
                .iter()
                .all(|s| s.forward_law() && s.early_inv == 0.0)
    }
}

impl Side {
    /// The voltage the load hangs from for this side's own current, V: the supply less the
    /// drop of the other pairs' current in the shared load.
    pub fn load_top_v(&self, supply: f64) -> f64 {
        supply - self.load_resistance * self.extra_load_current
    }

    /// Whether, with the collector-base junction at or below zero bias, this side follows the
    /// forward-active form `I_C = J·(1 + V_CE/V_AF)`, `I_B = J/β_F` (no knee currents and no
    /// reverse Early voltage).
    pub fn forward_law(&self) -> bool {
        self.reverse_early_inv == 0.0
            && self.forward_knee_inv == 0.0
            && self.reverse_knee_inv == 0.0
    }
}
