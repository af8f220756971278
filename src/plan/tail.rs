//! Reading a stage's `tail_current_law`.

use super::reader::{At, Range};
use super::tree::NodeValue;
use crate::error::PlanError;
use crate::model::tail::TailCurrentLaw;
use crate::units::Unit;

/// What the `tail_current_law` key accepts.
pub const ACCEPTED: &str =
    "constant, ptat, or {temperature_coefficient: 0.002} (fraction per kelvin, e.g. \"2000e-6\" or \"0.2%\")";

/// Reads the `tail_current_law` value of a stage.
pub fn read_tail_law(at: &At) -> Result<TailCurrentLaw, PlanError> {
    match &at.node.value {
        NodeValue::Text(text) => match text.as_str() {
            "constant" => Ok(TailCurrentLaw::Constant),
            "ptat" => Ok(TailCurrentLaw::Ptat),
            other => Err(at.error(format!("unknown tail-current law `{other}`"), ACCEPTED)),
        },
        NodeValue::Map(_) => {
            let map = at.map(&["temperature_coefficient"])?;
            let tc = map.quantity(
                "temperature_coefficient",
                Unit::Ratio,
                Range::Between(-0.1, 0.1),
            )?;
            Ok(TailCurrentLaw::Coefficient(tc))
        }
        other => Err(at.error(format!("expected a law, found {}", other.kind()), ACCEPTED)),
    }
}
