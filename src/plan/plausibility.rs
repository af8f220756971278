//! Values a plan may give but a bipolar stage rarely has: accepted, with a caution the report
//! words as a warning, naming the key, where it is written and the usual range. (Values no
//! stage can have are refused where they are read; see `specs/README.md` for both lists.)

use super::reader::{At, MapAt};
use super::STAGE_KEYS;
use crate::error::PlanError;
use crate::model::drive::Drive;
use crate::model::plan::PlanCaution;
use crate::model::stage::Stage;

/// Usual supplies of a bipolar stage, V: below 1.5 V a pair has no room for V_BE and its load
/// drop; above 40 V few integrated processes go.
pub const USUAL_SUPPLY_V: (f64, f64) = (1.5, 40.0);
/// Usual tail currents, A.
pub const USUAL_TAIL_CURRENT_A: (f64, f64) = (100e-9, 100e-3);
/// Usual load resistances, Ω.
pub const USUAL_LOAD_OHM: (f64, f64) = (10.0, 1e6);
/// Usual series resistances (source, emitter, base), Ω.
pub const USUAL_SERIES_OHM: (f64, f64) = (0.0, 1e6);
/// Usual saturation currents of an integrated transistor, A.
pub const USUAL_SATURATION_CURRENT_A: (f64, f64) = (1e-22, 1e-12);
/// Usual current gains.
pub const USUAL_BETA: (f64, f64) = (5.0, f64::INFINITY);
/// Usual Early voltages, V.
pub const USUAL_EARLY_V: (f64, f64) = (5.0, f64::INFINITY);
/// Temperatures over which bipolar processes are usually characterised, °C (the military
/// range, common practice).
pub const USUAL_TEMPERATURE_C: (f64, f64) = (-55.0, 150.0);
/// Usual drive frequencies, Hz (beyond the transit frequency of any bipolar device).
pub const USUAL_FREQUENCY_HZ: (f64, f64) = (0.0, 1e12);

fn caution(
    at: &At,
    value: f64,
    unit: &'static str,
    usual: (f64, f64),
    concern: &'static str,
) -> Option<PlanCaution> {
    (value < usual.0 || value > usual.1).then(|| PlanCaution {
        key_path: at.path.clone(),
        location: String::new(),
        line: at.node.line,
        column: at.node.column,
        value,
        unit,
        usual,
        concern,
    })
}

/// The cautions of an otherwise valid plan, in plan order.
pub fn cautions(
    top: &MapAt,
    stage_items: &[At],
    temperatures_c: &[f64],
    stages: &[Stage],
    drive: &Drive,
) -> Result<Vec<PlanCaution>, PlanError> {
    let mut out = Vec::new();
    if let Some(at) = top.get("temperatures_c") {
        for (item, t) in at.seq("temperatures")?.iter().zip(temperatures_c) {
            out.extend(caution(
                item,
                *t,
                "°C",
                USUAL_TEMPERATURE_C,
                "outside the range bipolar processes are characterised over",
            ));
        }
    }
    for (item, stage) in stage_items.iter().zip(stages) {
        let map = item.map(STAGE_KEYS)?;
        let mut check = |key: &str,
                         value: f64,
                         unit: &'static str,
                         usual: (f64, f64),
                         concern: &'static str| {
            if let Some(at) = map.get(key) {
                out.extend(caution(&at, value, unit, usual, concern));
            }
        };
        check(
            "tail_current",
            stage.tail_current,
            "A",
            USUAL_TAIL_CURRENT_A,
            "an unusual bias current for one differential pair",
        );
        check(
            "load_resistance",
            stage.load_resistance,
            "Ω",
            USUAL_LOAD_OHM,
            "an unusual load for one side of a pair",
        );
        check(
            "supply",
            stage.supply_v(),
            "V",
            USUAL_SUPPLY_V,
            "an unusual supply for a bipolar stage",
        );
        check(
            "emitter_resistance",
            stage.emitter_resistance,
            "Ω",
            USUAL_SERIES_OHM,
            "a degeneration so large the pair hardly conducts signal",
        );
        check(
            "source_resistance",
            stage.source_resistance,
            "Ω",
            USUAL_SERIES_OHM,
            "a source so resistive the base current sets the bias",
        );
        if let Some(transistor) = map.get("transistor") {
            let t = transistor.map(super::TRANSISTOR_KEYS)?;
            let device = &stage.transistor;
            for (key, value, unit, usual, concern) in [
                (
                    "saturation_current",
                    device.saturation_current,
                    "A",
                    USUAL_SATURATION_CURRENT_A,
                    "outside the saturation currents of integrated transistors",
                ),
                (
                    "beta",
                    device.beta,
                    "",
                    USUAL_BETA,
                    "a current gain so low the base current dominates",
                ),
                (
                    "early_voltage",
                    device.early_voltage,
                    "V",
                    USUAL_EARLY_V,
                    "an Early voltage so low the output conductance dominates",
                ),
                (
                    "nominal_temperature_c",
                    device.nominal_temperature_c,
                    "°C",
                    USUAL_TEMPERATURE_C,
                    "outside the range bipolar processes are characterised over",
                ),
                (
                    "base_resistance",
                    device.base_resistance,
                    "Ω",
                    USUAL_SERIES_OHM,
                    "an unusually large base resistance",
                ),
            ] {
                if let Some(at) = t.get(key) {
                    out.extend(caution(&at, value, unit, usual, concern));
                }
            }
        }
    }
    // A peak differential input above every stage's supply cannot be applied to any of them.
    let largest_supply = stages.iter().map(Stage::supply_v).fold(0.0, f64::max);
    let largest_amplitude = drive.largest_amplitude();
    if let Some(drive_at) = top.get("drive") {
        let drive_map = drive_at.map(super::DRIVE_KEYS)?;
        if let Some(at) = drive_map.get("amplitudes") {
            out.extend(caution(
                &at,
                largest_amplitude,
                "V",
                (0.0, largest_supply),
                "a peak differential input larger than the supply",
            ));
        }
        if let Some(at) = drive_map.get("frequencies") {
            let highest = drive.frequencies.iter().copied().fold(0.0, f64::max);
            out.extend(caution(
                &at,
                highest,
                "Hz",
                USUAL_FREQUENCY_HZ,
                "beyond the transit frequency of any bipolar transistor",
            ));
        }
    }
    Ok(out)
}
