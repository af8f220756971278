//! Reading the plan's `corners` list (see [`crate::model::corner`] for what a corner is).

use super::reader::{At, Range};
use crate::error::PlanError;
use crate::model::corner::{Corner, TYPICAL};
use crate::units::Unit;

/// Keys of one corner entry.
pub const CORNER_KEYS: &[&str] = &[
    "name",
    "saturation_current",
    "beta",
    "early_voltage",
    "resistors",
    "load_resistance",
    "emitter_resistance",
    "base_resistance",
    "tail_current",
];

/// Reads the plan's `corners` list; the result always starts with the typical corner: the
/// plan's own `typical` entry if it lists one, otherwise the nominal process.
pub fn read_corners(at: Option<&At>) -> Result<Vec<Corner>, PlanError> {
    let Some(at) = at else {
        return Ok(vec![Corner::typical()]);
    };
    let items = at.seq("corners, e.g. [{name: slow, beta: -30%}]")?;
    if items.len() > 64 {
        return Err(at.error(
            format!("{} corners were listed", items.len()),
            "at most 64 corners",
        ));
    }
    let mut corners: Vec<Corner> = Vec::with_capacity(items.len() + 1);
    for item in &items {
        let map = item.map(CORNER_KEYS)?;
        let name_at = map.required("name", "a corner name such as slow, typical, fast")?;
        let name = name_at.text("a corner name")?.to_owned();
        if name.is_empty()
            || name.len() > 40
            || !name
                .chars()
                .all(|c| c.is_ascii_alphanumeric() || c == '-' || c == '_')
        {
            return Err(name_at.error(
                format!("\"{name}\" cannot name a corner"),
                "1 to 40 ASCII letters, digits, '-' and '_'",
            ));
        }
        if corners.iter().any(|c| c.name == name) {
            return Err(name_at.error(
                format!("corner name `{name}` is used twice"),
                "a unique name for each corner",
            ));
        }
        let shift = |key: &str| map.quantity_or(key, Unit::Ratio, Range::Between(-0.9, 9.0), 0.0);
        corners.push(Corner {
            name,
            saturation_current: shift("saturation_current")?,
            beta: shift("beta")?,
            early_voltage: shift("early_voltage")?,
            resistors: shift("resistors")?,
            load_resistance: shift("load_resistance")?,
            emitter_resistance: shift("emitter_resistance")?,
            base_resistance: shift("base_resistance")?,
            tail_current: shift("tail_current")?,
        });
    }
    match corners.iter().position(|c| c.name == TYPICAL) {
        Some(index) => {
            let typical = corners.remove(index);
            corners.insert(0, typical);
        }
        None => corners.insert(0, Corner::typical()),
    }
    Ok(corners)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::plan::Plan;

    const BASE: &str = "name: c\nstages:\n  - {name: a, tail_current: 1 mA, load_resistance: 2k, emitter_resistance: 100}\ndrive: {amplitudes: [10 mV]}\n";

    #[test]
    fn typical_comes_first_and_shifts_multiply() {
        let text = format!("{BASE}corners:\n  - {{name: slow, saturation_current: -20%, resistors: +15%, load_resistance: 10%}}\n");
        let plan = Plan::from_yaml(&text, "c.yaml").unwrap();
        assert_eq!(plan.corners[0].name, TYPICAL);
        let slow = plan.corners[1].apply(&plan.stages[0]);
        assert!((slow.load_resistance - 2e3 * 1.15 * 1.1).abs() < 1e-9);
        assert!((slow.emitter_resistance - 115.0).abs() < 1e-9);
        assert!((slow.transistor.saturation_current - 0.8e-16).abs() < 1e-30);
    }

    #[test]
    fn a_repeated_corner_name_is_refused_with_its_position() {
        let text = format!("{BASE}corners:\n  - {{name: slow}}\n  - {{name: slow}}\n");
        let err = Plan::from_yaml(&text, "c.yaml").unwrap_err();
        assert_eq!(err.line, 7);
        assert_eq!(err.key_path, "corners[1].name");
    }
}
