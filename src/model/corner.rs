//! Process corners: named sets of fractional shifts of the process parameters, applied to
//! every stage on top of its nominal values and evaluated like temperatures.
//!
//! A shift `x` multiplies the parameter by `(1 + x)`: a saturation-current shift of −0.2 makes
//! I_S 0.8 times nominal. `resistors` scales every on-chip resistor (load, emitter, base,
//! collector; not the external source resistance); `load_resistance`, `emitter_resistance` and
//! `base_resistance` scale one kind further (the factors multiply). A plan's first corner is
//! always the typical one.

use super::stage::Stage;

/// Name of the nominal corner.
pub const TYPICAL: &str = "typical";

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
    pub fn apply(&self, nominal: &Stage) -> Stage {
        let mut stage = nominal.clone();
        let resistor = 1.0 + self.resistors;
        stage.load_resistance *= resistor * (1.0 + self.load_resistance);
        stage.emitter_resistance *= resistor * (1.0 + self.emitter_resistance);
        stage.transistor.base_resistance *= resistor * (1.0 + self.base_resistance);
        stage.transistor.collector_resistance *= resistor;
        stage.transistor.saturation_current *= 1.0 + self.saturation_current;
        stage.transistor.beta *= 1.0 + self.beta;
        stage.transistor.early_voltage *= 1.0 + self.early_voltage;
        stage.tail_current *= 1.0 + self.tail_current;
        stage
    }
}
