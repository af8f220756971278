//! Whether a stage can bias: its rest point (zero input) worked out from the plan alone,
//! before anything is solved, and the conditions a real pair needs there.
//!
//! At zero input each side carries half the tail current. With `I_E` per side, `β` and the
//! exponential law `I_C = I_S(T)·exp(V_BE/φT)`, the tail node sits at
//!
//! ```text
//! V_tail = V_CM − (R_S + r_b)·I_E/(β + 1) − V_BE − R_E·I_E,   V_BE = φT·ln(I_C/I_S(T)),
//! ```
//!
//! where `2·I_E = I_tail + V_tail/R_tail` when the tail source has a finite output resistance
//! (solved by bisection; the right side falls as the current rises, so there is one root).
//! The Early effect moves `V_BE` by a few millivolts at most and is left out: the estimate is
//! for refusing bias points that cannot exist, not for reporting (the solved operating point
//! is reported).
//!
//! A stage cannot bias — and the plan is refused before solving — when
//! - the input common mode lies outside the supply (`0 ≤ V_CM ≤ V_CC`);
//! - `V_BE` falls outside [`JUNCTION_RANGE_V`], where the exponential diffusion law the model
//!   solves stops describing a junction (below it recombination and leakage dominate, as with
//!   `tail_current: 1e-30`; above it high injection and ohmic drops do, as with a saturation
//!   current far too small for the current);
//! - the tail node sits below the tail source's compliance `tail_compliance` (default
//!   [`DEFAULT_TAIL_COMPLIANCE_V`]): the source would saturate, so the tail current the plan
//!   states could not flow (`emitter_resistance: 50k` with 1 mA from 5 V puts the node at
//!   −23 V);
//! - a temperature lies outside [`MODEL_TEMPERATURE_RANGE_C`].

use super::stage::Stage;
use crate::units::thermal_voltage;
use std::fmt;

pub use super::stage::DEFAULT_TAIL_COMPLIANCE_V;
/// Range of the base-emitter voltage at rest in which the exponential junction law applies, V.
pub const JUNCTION_RANGE_V: (f64, f64) = (0.2, 1.2);
/// Temperatures the device model supports, °C: from carrier freeze-out (about 70 K, where the
/// exponential law and the band-gap law of I_S no longer hold) to where lightly doped silicon
/// turns intrinsic (about 400 °C).
pub const MODEL_TEMPERATURE_RANGE_C: (f64, f64) = (-200.0, 400.0);

/// The rest point of a stage at one temperature (zero differential input, no mismatch).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RestPoint {
    /// Temperature, °C.
    pub temperature_c: f64,
    /// Tail (common-emitter) node, V.
    pub tail_node_v: f64,
    /// Base-emitter voltage of each side, V.
    pub base_emitter_v: f64,
    /// Emitter current of each side, A.
    pub emitter_current_a: f64,
    /// Drop across each emitter resistor, V.
    pub emitter_drop_v: f64,
    /// Drop across each base path (source and base resistance), V.
    pub base_drop_v: f64,
    /// Input common mode, V.
    pub common_mode_v: f64,
    /// Supply, V.
    pub supply_v: f64,
    /// The tail source's compliance, V.
    pub compliance_v: f64,
}

/// The rest point of `stage` at `temperature_c` (see the module docs).
pub fn rest_point(stage: &Stage, temperature_c: f64) -> RestPoint {
    let transistor = &stage.transistor;
    let phi = thermal_voltage(temperature_c);
    let saturation = transistor.saturation_current_at(temperature_c);
    let tail = stage.tail_current_law.current_at(
        stage.tail_current,
        transistor.nominal_temperature_c,
        temperature_c,
    );
    let beta = transistor.beta;
    let base_path = stage.source_resistance + transistor.base_resistance;
    let common_mode = stage.input_common_mode_v();
    // Drops at a total emitter current `total`: (V_BE, base drop, emitter drop).
    let drops = |total: f64| -> (f64, f64, f64) {
        let emitter = 0.5 * total;
        let base = if beta.is_finite() {
            emitter / (beta + 1.0)
        } else {
            0.0
        };
        let collector = emitter - base;
        let vbe = phi * (collector / saturation).ln();
        (vbe, base_path * base, stage.emitter_resistance * emitter)
    };
    let node_at = |total: f64| -> f64 {
        let (vbe, base, emitter) = drops(total);
        common_mode - base - vbe - emitter
    };
    let total = if stage.tail_resistance.is_finite() && stage.tail_resistance > 0.0 {
        // 2·I_E = I_tail + V/R_tail; residual V − node(I(V)) rises with V.
        let current = |v: f64| tail + v / stage.tail_resistance;
        let mut low = -tail * stage.tail_resistance * (1.0 - 1e-12);
        let mut high = common_mode.max(low + 1.0);
        for _ in 0..200 {
            let middle = 0.5 * (low + high);
            let i = current(middle);
            let residual = if i > 0.0 {
                middle - node_at(i)
            } else {
                f64::NEG_INFINITY
            };
            if residual.is_nan() {
                break;
            }
            if residual < 0.0 {
                low = middle;
            } else {
                high = middle;
            }
        }
        current(0.5 * (low + high)).max(f64::MIN_POSITIVE)
    } else {
        tail
    };
    let (vbe, base, emitter) = drops(total);
    RestPoint {
        temperature_c,
        tail_node_v: common_mode - base - vbe - emitter,
        base_emitter_v: vbe,
        emitter_current_a: 0.5 * total,
        emitter_drop_v: emitter,
        base_drop_v: base,
        common_mode_v: common_mode,
        supply_v: stage.supply_v(),
        compliance_v: stage.tail_compliance_v(),
    }
}

/// Why a stage cannot bias.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum BiasProblem {
    /// The input common mode lies outside the supply.
    CommonModeOutsideSupply(RestPoint),
    /// The base-emitter voltage at rest lies outside [`JUNCTION_RANGE_V`].
    JunctionOutsideRange(RestPoint),
    /// The tail node sits below the tail source's compliance.
    TailBelowCompliance(RestPoint),
}

impl BiasProblem {
    /// The rest point it was found at.
    pub fn rest(&self) -> &RestPoint {
        match self {
            BiasProblem::CommonModeOutsideSupply(rest)
            | BiasProblem::JunctionOutsideRange(rest)
            | BiasProblem::TailBelowCompliance(rest) => rest,
        }
    }

    /// The stage key most to blame, for pointing at the plan: the emitter resistor when its
    /// drop alone exceeds the shortfall, else the input common mode; the current or the
    /// saturation current for a junction outside its range.
    pub fn key(&self) -> &'static str {
        match self {
            BiasProblem::CommonModeOutsideSupply(_) => "input_common_mode",
            BiasProblem::JunctionOutsideRange(_) => "tail_current",
            BiasProblem::TailBelowCompliance(rest) => {
                if rest.emitter_drop_v > rest.compliance_v - rest.tail_node_v {
                    "emitter_resistance"
                } else {
                    "input_common_mode"
                }
            }
        }
    }

    /// What would be accepted instead, in the plan's words.
    pub fn remedy(&self) -> String {
        let v = crate::units::short_number;
        match self {
            BiasProblem::CommonModeOutsideSupply(rest) => format!(
                "an input_common_mode from 0 to the supply ({} V)",
                v(rest.supply_v)
            ),
            BiasProblem::JunctionOutsideRange(_) => format!(
                "a tail_current and saturation_current giving V_BE = φT·ln(I_C/I_S) between {} and {} V at every plan temperature (e.g. 1 mA with 1e-16 A gives about 0.76 V at 27 °C)",
                v(JUNCTION_RANGE_V.0),
                v(JUNCTION_RANGE_V.1)
            ),
            BiasProblem::TailBelowCompliance(rest) => {
                let shortfall = rest.compliance_v - rest.tail_node_v;
                let mut ways = Vec::new();
                if rest.emitter_drop_v > shortfall {
                    let largest = (rest.emitter_drop_v - shortfall) / rest.emitter_current_a;
                    ways.push(format!("lower emitter_resistance to at most {} Ω", v(largest)));
                } else if rest.emitter_drop_v > 0.0 {
                    ways.push("lower tail_current or emitter_resistance".into());
                }
                if rest.common_mode_v + shortfall <= rest.supply_v {
                    ways.push(format!(
                        "raise input_common_mode above {} V",
                        v(rest.common_mode_v + shortfall)
                    ));
                }
                if rest.tail_node_v > 0.0 {
                    ways.push(format!(
                        "lower tail_compliance below {} V if the tail source really works there",
                        v(rest.tail_node_v)
                    ));
                }
                if ways.is_empty() {
                    ways.push("raise the supply and the input common mode".into());
                }
                format!(
                    "a rest point with the tail node above the tail source's compliance ({} V): {}",
                    v(rest.compliance_v),
                    ways.join("; or ")
                )
            }
        }
    }
}

impl fmt::Display for BiasProblem {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let v = crate::units::short_number;
        let rest = self.rest();
        let at = v(rest.temperature_c);
        match self {
            BiasProblem::CommonModeOutsideSupply(_) => write!(
                f,
                "the input common mode {} V lies outside the supply (0 to {} V)",
                v(rest.common_mode_v),
                v(rest.supply_v)
            ),
            BiasProblem::JunctionOutsideRange(_) => write!(
                f,
                "at {at} °C the junctions would need V_BE = {} V to carry {} A each, outside the {}…{} V where the exponential junction law applies",
                v(rest.base_emitter_v),
                v(rest.emitter_current_a),
                v(JUNCTION_RANGE_V.0),
                v(JUNCTION_RANGE_V.1)
            ),
            BiasProblem::TailBelowCompliance(_) => write!(
                f,
                "at {at} °C the tail node would sit at {} V (input common mode {} V − V_BE {} V − R_E·I_E {} V − base drop {} V), below the tail source's compliance of {} V: the tail current could not flow",
                v(rest.tail_node_v),
                v(rest.common_mode_v),
                v(rest.base_emitter_v),
                v(rest.emitter_drop_v),
                v(rest.base_drop_v),
                v(rest.compliance_v)
            ),
        }
    }
}

/// The first reason `stage` cannot bias at `temperature_c`, if any.
pub fn bias_problem(stage: &Stage, temperature_c: f64) -> Option<BiasProblem> {
    let rest = rest_point(stage, temperature_c);
    if !(rest.common_mode_v >= 0.0 && rest.common_mode_v <= rest.supply_v) {
        return Some(BiasProblem::CommonModeOutsideSupply(rest));
    }
    let (low, high) = JUNCTION_RANGE_V;
    if !(rest.base_emitter_v >= low && rest.base_emitter_v <= high) {
        return Some(BiasProblem::JunctionOutsideRange(rest));
    }
    if rest.tail_node_v.is_nan() || rest.tail_node_v < rest.compliance_v {
        return Some(BiasProblem::TailBelowCompliance(rest));
    }
    None
}

/// Collector-base reverse bias of each side at rest, V: `V_C − V_B` with the collector at
/// `V_CC − R_L·I_C` and the base at the common mode less its base-path drop (negative means
/// the collectors sit below the bases, a saturated pair the forward-active model cannot
/// represent).
pub fn rest_collector_headroom_v(stage: &Stage, temperature_c: f64) -> f64 {
    let rest = rest_point(stage, temperature_c);
    let beta = stage.transistor.beta;
    let collector_current = if beta.is_finite() {
        rest.emitter_current_a * beta / (beta + 1.0)
    } else {
        rest.emitter_current_a
    };
    let collector = rest.supply_v - stage.load_resistance * collector_current;
    collector - (rest.common_mode_v - rest.base_drop_v)
}

/// Whether the device model supports `temperature_c`.
pub fn temperature_supported(temperature_c: f64) -> bool {
    let (low, high) = MODEL_TEMPERATURE_RANGE_C;
    temperature_c >= low && temperature_c <= high
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::transistor::Transistor;

    #[test]
    fn the_rest_point_follows_the_loop_from_the_base_to_the_tail() {
        // KVL round the input loop with the exponential law (common practice): 1 mA, I_S
        // 1e-16 A at 27 °C gives V_BE = φT·ln(0.5 mA/1e-16 A) ≈ 0.7752 V per side.
        let stage = Stage::new("s", 1e-3, 2e3)
            .emitter_resistance(100.0)
            .input_common_mode(2.0);
        let rest = rest_point(&stage, 27.0);
        let vbe = thermal_voltage(27.0) * (0.5e-3f64 / 1e-16).ln();
        assert!((rest.base_emitter_v - vbe).abs() < 1e-12);
        assert!((rest.tail_node_v - (2.0 - vbe - 0.05)).abs() < 1e-12);
        assert!(bias_problem(&stage, 27.0).is_none());
    }

    #[test]
    fn a_finite_tail_resistance_adds_its_own_current() {
        // With R_tail = 10 kΩ the node near 1.2 V adds ≈ 0.12 mA: solve V = V_CM − V_BE(I)
        // with I = I_tail + V/R_tail by hand (fixed point) and compare.
        let stage = Stage::new("s", 1e-3, 2e3)
            .tail_resistance(1e4)
            .input_common_mode(2.0);
        let rest = rest_point(&stage, 27.0);
        let phi = thermal_voltage(27.0);
        let mut v: f64 = 1.2;
        for _ in 0..100 {
            v = 2.0 - phi * ((0.5 * (1e-3 + v / 1e4)) / 1e-16).ln();
        }
        assert!(
            (rest.tail_node_v - v).abs() < 1e-9,
            "{} vs {v}",
            rest.tail_node_v
        );
    }

    #[test]
    fn bias_points_that_cannot_exist_are_named() {
        // 50 kΩ per side with 1 mA from a 2.5 V common mode: the node would be near −23 V.
        let stage = Stage::new("s", 1e-3, 2e3).emitter_resistance(5e4);
        let problem = bias_problem(&stage, 27.0).unwrap();
        assert!(matches!(problem, BiasProblem::TailBelowCompliance(_)));
        assert_eq!(problem.key(), "emitter_resistance");
        assert!(problem.rest().tail_node_v < -20.0);
        assert!(problem.remedy().contains("emitter_resistance"));
        // A tail current of 1e-30 A needs a negative V_BE.
        let starved = Stage::new("s", 1e-30, 2e3);
        assert!(matches!(
            bias_problem(&starved, 27.0),
            Some(BiasProblem::JunctionOutsideRange(_))
        ));
        // A saturation current of 1 A: V_BE ≈ φT·ln(5e-4) < 0.
        let leaky =
            Stage::new("s", 1e-3, 2e3).transistor(Transistor::default().saturation_current(1.0));
        assert!(matches!(
            bias_problem(&leaky, 27.0),
            Some(BiasProblem::JunctionOutsideRange(_))
        ));
        // A common mode below ground.
        let below = Stage::new("s", 1e-3, 2e3).input_common_mode(-1.0);
        assert!(matches!(
            bias_problem(&below, 27.0),
            Some(BiasProblem::CommonModeOutsideSupply(_))
        ));
        // The compliance is the plan's to set.
        let low_node = Stage::new("s", 1e-3, 2e3).input_common_mode(0.9);
        assert!(bias_problem(&low_node, 27.0).is_some());
        assert!(bias_problem(&low_node.tail_compliance(0.0), 27.0).is_none());
    }
}
