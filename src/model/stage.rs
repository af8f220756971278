//! A differential-pair stage as data: the emitter-coupled pair with its resistors, bias,
//! capacitances, transistor, mismatch and tail-current law, at nominal values.

use super::tail::TailCurrentLaw;
use super::topology::{MultiTanh, Topology};
use super::transistor::Transistor;

/// Least voltage across the tail current source when a stage gives no `tail_compliance`, V:
/// the collector-emitter saturation voltage of a bipolar current source (common practice).
pub const DEFAULT_TAIL_COMPLIANCE_V: f64 = 0.2;

/// Supply used when a stage gives none, V.
pub const DEFAULT_SUPPLY_V: f64 = 5.0;

/// One bipolar emitter-coupled pair, every quantity in SI base units and per side where the
/// pair has two of an element.
///
/// Build it from its name, tail current and load, then set the rest with builder methods named
/// after the plan keys:
///
/// ```
/// use linbudget::{Stage, Transistor};
///
/// let stage = Stage::new("degenerated", 1e-3, 2e3)
///     .emitter_resistance(100.0)
///     .supply(3.3)
///     .transistor(Transistor::default().beta(100.0));
/// assert_eq!(stage.emitter_resistance, 100.0);
/// assert_eq!(stage.supply_v(), 3.3);
/// assert_eq!(stage.input_common_mode_v(), 1.65); // half the supply unless set
/// assert!(stage.tail_resistance.is_infinite()); // an ideal tail unless set
/// ```
#[derive(Debug, Clone, PartialEq)]
pub struct Stage {
    /// Unique name within a plan.
    pub name: String,
    /// Tail current at the transistor's nominal temperature, A.
    pub tail_current: f64,
    /// Load resistance per side, collector to supply, Ω.
    pub load_resistance: f64,
    /// Emitter degeneration per side, in series with each emitter, Ω.
    pub emitter_resistance: f64,
    /// Source resistance per side, Ω.
    pub source_resistance: f64,
    /// Output resistance of the tail source, tail node to ground, Ω (infinite = ideal).
    pub tail_resistance: f64,
    /// Capacitance across each load resistor, F.
    pub load_capacitance: f64,
    /// Capacitance from the tail node to ground, F.
    pub tail_capacitance: f64,
    /// Positive supply, V (`None`: [`DEFAULT_SUPPLY_V`]).
    pub supply: Option<f64>,
    /// Input common-mode voltage, V (`None`: half the supply).
    pub input_common_mode: Option<f64>,
    /// Least voltage the tail current source needs across it, V (`None`:
    /// [`DEFAULT_TAIL_COMPLIANCE_V`]); the tail node must sit above it.
    pub tail_compliance: Option<f64>,
    /// Transistor parameters (both sides).
    pub transistor: Transistor,
    /// Fractional excess of the P side over the M side (P = M·(1+δ)).
    pub mismatch: Mismatch,
    /// Standard deviations of the mismatch fractions, for Monte Carlo.
    pub mismatch_sigma: Mismatch,
    /// How the tail current moves with temperature.
    pub tail_current_law: TailCurrentLaw,
    /// The circuit form: emitter resistors, split tail or multi-tanh.
    pub topology: Topology,
    /// The multi-tanh cell (used with [`Topology::MultiTanh`]).
    pub multi_tanh: MultiTanh,
    /// White noise current density of a tail source carrying the whole tail current, A/√Hz;
    /// a source carrying a fraction `f` of it has `√f` of this density (noise power in
    /// proportion to the current, as for shot noise and for a degenerated mirror).
    pub tail_noise_current: f64,
}

impl Stage {
    /// A stage with the given name, tail current (A) and load resistance per side (Ω); no
    /// degeneration, source or base resistance, an ideal tail, no capacitance, the default
    /// bias and an ideal bipolar transistor.
    pub fn new(name: impl Into<String>, tail_current: f64, load_resistance: f64) -> Self {
        Stage {
            name: name.into(),
            tail_current,
            load_resistance,
            emitter_resistance: 0.0,
            source_resistance: 0.0,
            tail_resistance: f64::INFINITY,
            load_capacitance: 0.0,
            tail_capacitance: 0.0,
            supply: None,
            input_common_mode: None,
            tail_compliance: None,
            transistor: Transistor::default(),
            mismatch: Mismatch::default(),
            mismatch_sigma: Mismatch::default(),
            tail_current_law: TailCurrentLaw::default(),
            topology: Topology::default(),
            multi_tanh: MultiTanh::default(),
            tail_noise_current: 0.0,
        }
    }

    /// The supply in use, V.
    pub fn supply_v(&self) -> f64 {
        self.supply.unwrap_or(DEFAULT_SUPPLY_V)
    }

    /// The input common mode in use, V.
    pub fn input_common_mode_v(&self) -> f64 {
        self.input_common_mode.unwrap_or(0.5 * self.supply_v())
    }

    /// The tail source's compliance in use, V.
    pub fn tail_compliance_v(&self) -> f64 {
        self.tail_compliance.unwrap_or(DEFAULT_TAIL_COMPLIANCE_V)
    }

    /// Whether the supply or the input common mode is left to its default.
    pub fn bias_is_default(&self) -> bool {
        self.supply.is_none() || self.input_common_mode.is_none()
    }

    /// Sets the name.
    #[must_use]
    pub fn name(mut self, name: impl Into<String>) -> Self {
        self.name = name.into();
        self
    }

    /// Sets the supply, V.
    #[must_use]
    pub fn supply(mut self, volts: f64) -> Self {
        self.supply = Some(volts);
        self
    }

    /// Sets the input common-mode voltage, V.
    #[must_use]
    pub fn input_common_mode(mut self, volts: f64) -> Self {
        self.input_common_mode = Some(volts);
        self
    }

    /// Sets the least voltage the tail current source needs across it, V.
    #[must_use]
    pub fn tail_compliance(mut self, volts: f64) -> Self {
        self.tail_compliance = Some(volts);
        self
    }

    /// Sets the transistor.
    #[must_use]
    pub fn transistor(mut self, transistor: Transistor) -> Self {
        self.transistor = transistor;
        self
    }

    /// Sets the P-over-M mismatch fractions.
    #[must_use]
    pub fn mismatch(mut self, mismatch: Mismatch) -> Self {
        self.mismatch = mismatch;
        self
    }

    /// Sets the standard deviations of the mismatch fractions (Monte Carlo).
    #[must_use]
    pub fn mismatch_sigma(mut self, sigma: Mismatch) -> Self {
        self.mismatch_sigma = sigma;
        self
    }

    /// Sets the circuit form.
    #[must_use]
    pub fn topology(mut self, topology: Topology) -> Self {
        self.topology = topology;
        self
    }

    /// Makes the stage a multi-tanh cell with the given pairs.
    #[must_use]
    pub fn multi_tanh(mut self, cell: MultiTanh) -> Self {
        self.topology = Topology::MultiTanh;
        self.multi_tanh = cell;
        self
    }

    /// Sets the tail current's temperature law.
    #[must_use]
    pub fn tail_current_law(mut self, law: TailCurrentLaw) -> Self {
        self.tail_current_law = law;
        self
    }
}

/// Builder methods for the plain quantities, named after the fields.
macro_rules! quantity_builders {
    ($type:ty; $($(#[$doc:meta])* $field:ident),* $(,)?) => {
        impl $type {
            $(
                $(#[$doc])*
                #[must_use]
                pub fn $field(mut self, value: f64) -> Self {
                    self.$field = value;
                    self
                }
            )*
        }
    };
}

quantity_builders!(Stage;
    /// Sets the tail current, A.
    tail_current,
    /// Sets the load resistance per side, Ω.
    load_resistance,
    /// Sets the emitter degeneration per side, Ω.
    emitter_resistance,
    /// Sets the source resistance per side, Ω.
    source_resistance,
    /// Sets the tail source's output resistance, Ω (`f64::INFINITY` = ideal).
    tail_resistance,
    /// Sets the capacitance across each load resistor, F.
    load_capacitance,
    /// Sets the tail-node capacitance to ground, F.
    tail_capacitance,
    /// Sets the tail source's white noise current density at the whole tail current, A/√Hz.
    tail_noise_current,
);

impl Default for Stage {
    /// A 1 mA pair with 2 kΩ loads named `stage`.
    fn default() -> Self {
        Stage::new("stage", 1e-3, 2e3)
    }
}

/// P-over-M fractional differences of the matched parameters: a fraction δ makes the P-side
/// value the M-side (nominal) value times (1 + δ).
///
/// ```
/// use linbudget::Mismatch;
///
/// let offset = Mismatch::default().saturation_current(0.01);
/// assert_eq!(offset.saturation_current, 0.01);
/// assert_eq!(offset.beta, 0.0);
/// ```
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct Mismatch {
    /// Saturation current.
    pub saturation_current: f64,
    /// Emitter resistance.
    pub emitter_resistance: f64,
    /// Load resistance.
    pub load_resistance: f64,
    /// Base resistance.
    pub base_resistance: f64,
    /// Current gain β.
    pub beta: f64,
    /// Tail current of the P-side source over the M-side source (split tail only).
    pub tail_current: f64,
    /// Load capacitance (charge storage: only stages with capacitance feel it).
    pub load_capacitance: f64,
    /// Zero-bias base-emitter junction capacitance.
    pub emitter_junction_capacitance: f64,
    /// Zero-bias base-collector junction capacitance.
    pub collector_junction_capacitance: f64,
    /// Forward transit time.
    pub transit_time: f64,
}

quantity_builders!(Mismatch;
    /// Sets the saturation-current fraction.
    saturation_current,
    /// Sets the emitter-resistance fraction.
    emitter_resistance,
    /// Sets the load-resistance fraction.
    load_resistance,
    /// Sets the base-resistance fraction.
    base_resistance,
    /// Sets the β fraction.
    beta,
    /// Sets the split tail's source-current fraction.
    tail_current,
    /// Sets the load-capacitance fraction.
    load_capacitance,
    /// Sets the base-emitter junction-capacitance fraction.
    emitter_junction_capacitance,
    /// Sets the base-collector junction-capacitance fraction.
    collector_junction_capacitance,
    /// Sets the transit-time fraction.
    transit_time,
);
