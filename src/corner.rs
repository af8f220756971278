//! Process corners: named sets of fractional shifts of the process parameters, applied to
//! every stage on top of its nominal values and evaluated like temperatures.
//!
//! A shift `x` multiplies the parameter by `(1 + x)`: `saturation_current: -20%` makes I_S
//! 0.8 times nominal. `resistors` scales every on-chip resistor (load, emitter, base; not the
//! external source resistance); `load_resistance`, `emitter_resistance` and `base_resistance`
//! scale one kind further (the factors multiply). The first corner is always the typical one:
//! the plan's own `typical` entry if it lists one, otherwise the nominal process.
// Plan errors are the plan reader's `PlanError`, as elsewhere in the plan code.
#![allow(clippy::result_large_err)]

use crate::error::PlanError;
use crate::plan::reader::{At, Range};
use crate::plan::{Plan, StageSpec};
use crate::report::{BudgetRecord, InterceptRecord, SpreadRecord};
use crate::units::Unit;

/// Name of the nominal corner.
pub const TYPICAL: &str = "typical";

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

/// One process corner: fractional shifts of the process parameters.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Corner {
    /// Corner name, unique in the plan.
    pub name: String,
    /// Shift of the saturation current.
    pub saturation_current: f64,
    /// Shift of the current gain β.
    pub beta: f64,
    /// Shift of the Early voltage.
    pub early_voltage: f64,
    /// Shift of every on-chip resistor.
    pub resistors: f64,
    /// Further shift of the load resistors.
    pub load_resistance: f64,
    /// Further shift of the emitter resistors.
    pub emitter_resistance: f64,
    /// Further shift of the base resistance.
    pub base_resistance: f64,
    /// Shift of the tail current.
    pub tail_current: f64,
}

impl Corner {
    /// The nominal process.
    pub fn typical() -> Corner {
        Corner {
            name: TYPICAL.into(),
            ..Corner::default()
        }
    }

    /// The stage as built in this corner.
    pub fn apply(&self, nominal: &StageSpec) -> StageSpec {
        let mut spec = nominal.clone();
        let resistor = 1.0 + self.resistors;
        spec.load_resistance *= resistor * (1.0 + self.load_resistance);
        spec.emitter_resistance *= resistor * (1.0 + self.emitter_resistance);
        spec.transistor.base_resistance *= resistor * (1.0 + self.base_resistance);
        spec.transistor.saturation_current *= 1.0 + self.saturation_current;
        spec.transistor.beta *= 1.0 + self.beta;
        spec.transistor.early_voltage *= 1.0 + self.early_voltage;
        spec.tail_current *= 1.0 + self.tail_current;
        spec
    }
}

/// Reads the plan's `corners` list; the result always starts with the typical corner.
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

/// Reads one figure from an intercept record.
type FigureOf = fn(&InterceptRecord) -> Option<f64>;

/// One corner's records of a stage at one temperature, for [`spread`].
pub struct CornerView<'a> {
    /// Corner name.
    pub corner: &'a str,
    /// Budget records in plan order.
    pub budget: &'a [BudgetRecord],
    /// Intercept records in frequency order.
    pub intercepts: &'a [InterceptRecord],
}

/// Typical, minimum and maximum of every budget line and of the main small-signal figures
/// across corners. `views[0]` is the typical corner. A null value sorts below everything for
/// dB figures (below the floor) and above everything for volt figures (unbounded).
pub fn spread(
    plan: &Plan,
    stage: &str,
    temperature_c: f64,
    views: &[CornerView],
) -> Vec<SpreadRecord> {
    let mut out = Vec::new();
    let mut push =
        |metric: String, at_v: Option<f64>, unit: &str, decibel: bool, values: Vec<Option<f64>>| {
            let key = |v: &Option<f64>| match v {
                Some(x) => *x,
                None if decibel => f64::NEG_INFINITY,
                None => f64::INFINITY,
            };
            let order = |a: &usize, b: &usize| key(&values[*a]).total_cmp(&key(&values[*b]));
            let indices: Vec<usize> = (0..values.len()).collect();
            let low = indices.iter().copied().min_by(order).unwrap_or(0);
            let high = indices.iter().copied().max_by(order).unwrap_or(0);
            out.push(SpreadRecord {
                stage: stage.to_owned(),
                temperature_c,
                metric,
                at_v,
                unit: unit.to_owned(),
                typical: values.first().copied().flatten(),
                min: values.get(low).copied().flatten(),
                max: values.get(high).copied().flatten(),
                min_corner: views
                    .get(low)
                    .map(|v| v.corner.to_owned())
                    .unwrap_or_default(),
                max_corner: views
                    .get(high)
                    .map(|v| v.corner.to_owned())
                    .unwrap_or_default(),
            });
        };
    for (index, line) in plan.budget.iter().enumerate() {
        let Some(first) = views.first().and_then(|v| v.budget.get(index)) else {
            continue;
        };
        let values = views
            .iter()
            .map(|v| v.budget.get(index).and_then(|b| b.value))
            .collect();
        push(
            line.metric.name(),
            first.at_v,
            &first.unit,
            line.metric.is_decibel(),
            values,
        );
    }
    let figures: [(&str, &str, bool, FigureOf); 5] = [
        ("gain", "dB", true, |i| Some(i.small_signal_gain_db)),
        ("iip3", "V", false, |i| i.iip3_v),
        ("p1db", "V", false, |i| i.p1db_v),
        ("steering_range", "V", false, |i| Some(i.steering_range_v)),
        ("input_noise", "V/√Hz", false, |i| {
            Some(i.input_noise_v_rthz)
        }),
    ];
    for (name, unit, decibel, get) in figures {
        if plan.budget.iter().any(|l| l.metric.name() == name) {
            continue;
        }
        let values = views
            .iter()
            .map(|v| v.intercepts.first().and_then(get))
            .collect();
        push(name.to_owned(), None, unit, decibel, values);
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::plan::Plan;

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
