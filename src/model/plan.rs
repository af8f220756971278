//! A plan as data: the stages to compare, the temperatures and process corners, the drive,
//! the budget and the studies to run (sizing, Monte Carlo, noise band). Reading one from YAML
//! is the plan reader's job (`Plan::from_file`); evaluating it is the study layer's.

use super::budget::BudgetLine;
use super::corner::Corner;
use super::drive::Drive;
use super::measurement::{FitSettings, Measurements};
use super::stage::Stage;

/// A validated plan with every quantity in SI base units.
///
/// ```
/// use linbudget::{BudgetLine, Drive, Limit, Metric, Plan, Stage};
///
/// let plan = Plan::new("bench-check", vec![Stage::new("pair", 1e-3, 2e3)], Drive::new(vec![0.01, 0.1]))
///     .temperatures_c(vec![27.0, 85.0])
///     .budget_line(BudgetLine::new(Metric::Harmonic(3), Limit::Max(-40.0)).at(0.1));
/// assert_eq!(plan.corners.len(), 1); // the typical process
/// assert_eq!(plan.budget.len(), 1);
/// ```
#[derive(Debug, Clone, PartialEq)]
pub struct Plan {
    /// Plan name; the output folder's name.
    pub name: String,
    /// Temperatures to evaluate, °C.
    pub temperatures_c: Vec<f64>,
    /// Stages compared side by side.
    pub stages: Vec<Stage>,
    /// Drive amplitudes and frequencies.
    pub drive: Drive,
    /// Monte Carlo mismatch analysis, if asked for.
    pub monte_carlo: Option<MonteCarloSettings>,
    /// Budget lines, checked for every stage and temperature.
    pub budget: Vec<BudgetLine>,
    /// Degeneration sizing, if asked for.
    pub sizing: Option<SizingSettings>,
    /// Noise bandwidth for integrated noise and SNR, if given.
    pub noise_band: Option<NoiseBand>,
    /// Reference impedance for dBm figures, ohms, if given.
    pub reference_impedance: Option<f64>,
    /// Process corners, the typical one first.
    pub corners: Vec<Corner>,
    /// Bench sweeps of the stages, compared with the model (and fitted, with `fit`).
    pub measurements: Vec<Measurements>,
    /// The fit of every measured stage to its bench data, if asked for.
    pub fit: Option<FitSettings>,
    /// Values the plan reader accepted but found unusual for a bipolar stage (worded as
    /// warnings by the report layer).
    pub cautions: Vec<PlanCaution>,
    /// The stages compared at equal tail current or equal input noise, if asked for.
    pub comparison: Option<ComparisonSettings>,
}

/// What the stages are made equal in for the comparison of schemes.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ComparisonBasis {
    /// Every stage at the same tail current (resistors as planned).
    TailCurrent,
    /// Every stage impedance-scaled (tail current × k, its resistors ÷ k) to the same white
    /// input noise; the current each then needs is the answer.
    InputNoise,
}

impl ComparisonBasis {
    /// The name in plans and reports.
    pub fn name(self) -> &'static str {
        match self {
            ComparisonBasis::TailCurrent => "tail_current",
            ComparisonBasis::InputNoise => "input_noise",
        }
    }
}

/// The comparison of the plan's stages at equal terms.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ComparisonSettings {
    /// What is held equal.
    pub basis: ComparisonBasis,
    /// The common value (A or V/√Hz); `None`: the largest planned tail current, or the lowest
    /// planned input noise at the first temperature.
    pub value: Option<f64>,
}

impl Plan {
    /// A plan of `stages` under `drive` at 27 °C in the typical process, with no budget.
    pub fn new(name: impl Into<String>, stages: Vec<Stage>, drive: Drive) -> Self {
        Plan {
            name: name.into(),
            temperatures_c: vec![27.0],
            stages,
            drive,
            monte_carlo: None,
            budget: Vec::new(),
            sizing: None,
            noise_band: None,
            reference_impedance: None,
            corners: vec![Corner::typical()],
            measurements: Vec::new(),
            fit: None,
            cautions: Vec::new(),
            comparison: None,
        }
    }

    /// Sets the temperatures, °C.
    #[must_use]
    pub fn temperatures_c(mut self, temperatures_c: Vec<f64>) -> Self {
        self.temperatures_c = temperatures_c;
        self
    }

    /// Adds a budget line.
    #[must_use]
    pub fn budget_line(mut self, line: BudgetLine) -> Self {
        self.budget.push(line);
        self
    }

    /// Asks for degeneration sizing.
    #[must_use]
    pub fn sizing(mut self, sizing: SizingSettings) -> Self {
        self.sizing = Some(sizing);
        self
    }

    /// Asks for a Monte Carlo mismatch analysis.
    #[must_use]
    pub fn monte_carlo(mut self, settings: MonteCarloSettings) -> Self {
        self.monte_carlo = Some(settings);
        self
    }

    /// Adds a bench sweep of one stage.
    #[must_use]
    pub fn measurements(mut self, measurements: Measurements) -> Self {
        self.measurements.push(measurements);
        self
    }

    /// Asks for every measured stage to be fitted to its bench data.
    #[must_use]
    pub fn fit(mut self, settings: FitSettings) -> Self {
        self.fit = Some(settings);
        self
    }

    /// Adds a process corner after the typical one.
    #[must_use]
    pub fn corner(mut self, corner: Corner) -> Self {
        self.corners.push(corner);
        self
    }
}

/// Monte Carlo settings.
#[derive(Debug, Clone, PartialEq)]
pub struct MonteCarloSettings {
    /// Number of draws per stage and temperature.
    pub runs: u64,
    /// Random seed; the same seed gives the same report.
    pub seed: u64,
}

/// Integration band for noise, Hz.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct NoiseBand {
    /// Lower edge, Hz.
    pub from: f64,
    /// Upper edge, Hz.
    pub to: f64,
}

/// A stage value sizing may choose. Each variant is one plan key under `sizing:`; a new
/// variable is one more variant with its key, unit, getter and setter.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum SizingVariable {
    /// Emitter degeneration per side, Ω.
    EmitterResistance,
    /// Tail current (the pair's supply current), A.
    TailCurrent,
    /// Emitter-area ratio `A` of a multi-tanh doublet's or triplet's offset pairs
    /// (dimensionless; the offset is `φT·ln A`).
    AreaRatio,
}

impl SizingVariable {
    /// Every variable, in the order the plan format lists them.
    pub const ALL: [SizingVariable; 3] = [
        SizingVariable::EmitterResistance,
        SizingVariable::TailCurrent,
        SizingVariable::AreaRatio,
    ];

    /// The plan key (`emitter_resistance`, `tail_current`, `area_ratio`).
    pub fn key(self) -> &'static str {
        match self {
            SizingVariable::EmitterResistance => "emitter_resistance",
            SizingVariable::TailCurrent => "tail_current",
            SizingVariable::AreaRatio => "area_ratio",
        }
    }

    /// The variable a plan key names; `None` for any other key.
    pub fn from_key(key: &str) -> Option<Self> {
        Self::ALL.into_iter().find(|v| v.key() == key)
    }

    /// Unit symbol (`Ω`, `A`; empty for the dimensionless area ratio).
    pub fn unit_symbol(self) -> &'static str {
        match self {
            SizingVariable::EmitterResistance => "Ω",
            SizingVariable::TailCurrent => "A",
            SizingVariable::AreaRatio => "",
        }
    }

    /// The symbol designers write for it (`R_E`, `I_tail`, `A_E` for the area ratio, so it
    /// is not read as amperes).
    pub fn symbol(self) -> &'static str {
        match self {
            SizingVariable::EmitterResistance => "R_E",
            SizingVariable::TailCurrent => "I_tail",
            SizingVariable::AreaRatio => "A_E",
        }
    }

    /// Whether its search grid is spaced geometrically (a quantity that only scales, with a
    /// positive lower end) rather than evenly (a range that may start at zero). The area
    /// ratio is spaced evenly: its offset `φT·ln A` and the cubic null near `A = 2 + √3` want
    /// no crowding at the low end.
    pub fn geometric(self) -> bool {
        matches!(self, SizingVariable::TailCurrent)
    }

    /// The stage's value of this variable.
    pub fn value_of(self, stage: &Stage) -> f64 {
        match self {
            SizingVariable::EmitterResistance => stage.emitter_resistance,
            SizingVariable::TailCurrent => stage.tail_current,
            SizingVariable::AreaRatio => stage.multi_tanh.area_ratio,
        }
    }

    /// Sets this variable of `stage` to `value`.
    pub fn set(self, stage: &mut Stage, value: f64) {
        match self {
            SizingVariable::EmitterResistance => stage.emitter_resistance = value,
            SizingVariable::TailCurrent => stage.tail_current = value,
            SizingVariable::AreaRatio => stage.multi_tanh.area_ratio = value,
        }
    }

    /// Whether `stage` has this value to choose: the area ratio only belongs to a multi-tanh
    /// doublet or triplet (a listed cell has an area per transistor instead).
    pub fn applies_to(self, stage: &Stage) -> bool {
        match self {
            SizingVariable::AreaRatio => {
                stage.topology == crate::model::topology::Topology::MultiTanh
                    && matches!(
                        stage.multi_tanh.form,
                        crate::model::topology::MultiTanhForm::Doublet
                            | crate::model::topology::MultiTanhForm::Triplet
                    )
            }
            _ => true,
        }
    }
}

/// The range sizing may choose one variable from.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct VariableRange {
    /// Which stage value.
    pub variable: SizingVariable,
    /// Lower end, in the variable's unit.
    pub from: f64,
    /// Upper end, in the variable's unit.
    pub to: f64,
}

/// Degeneration sizing settings: the variables to choose, each with its range, the one to
/// minimise, and how far inside every budget line the answer must stay.
///
/// ```
/// use linbudget::{SizingSettings, SizingVariable};
///
/// let sizing = SizingSettings::new(0.0, 3e3).tail_current(0.2e-3, 5e-3);
/// assert_eq!(sizing.minimise, SizingVariable::TailCurrent); // the default once current varies
/// assert_eq!(sizing.range_of(SizingVariable::EmitterResistance), Some((0.0, 3e3)));
/// ```
#[derive(Debug, Clone, PartialEq)]
pub struct SizingSettings {
    /// The variables and their ranges, in plan order (at most one range per variable).
    pub variables: Vec<VariableRange>,
    /// The variable whose least value meeting every line is the answer.
    pub minimise: SizingVariable,
    /// Rescale the load to hold the small-signal gain of the stage as planned.
    pub hold_gain: bool,
    /// Margin every line must keep at the recommended value, dB (0: the least value that
    /// passes).
    pub guard_band_db: f64,
}

impl SizingSettings {
    /// Sizing of the emitter resistance over `from..=to` Ω, no guard band, load as planned.
    pub fn new(from: f64, to: f64) -> Self {
        SizingSettings {
            variables: vec![VariableRange {
                variable: SizingVariable::EmitterResistance,
                from,
                to,
            }],
            minimise: SizingVariable::EmitterResistance,
            hold_gain: false,
            guard_band_db: 0.0,
        }
    }

    /// Sizing of the tail current alone over `from..=to` A (degeneration as planned).
    pub fn tail_current_only(from: f64, to: f64) -> Self {
        Self::only(SizingVariable::TailCurrent, from, to)
    }

    /// Sizing of one variable alone over `from..=to`, minimised.
    pub fn only(variable: SizingVariable, from: f64, to: f64) -> Self {
        SizingSettings {
            variables: vec![VariableRange { variable, from, to }],
            minimise: variable,
            hold_gain: false,
            guard_band_db: 0.0,
        }
    }

    /// Adds the tail current over `from..=to` A as a variable and makes it the one to
    /// minimise (the least supply current meeting every line).
    #[must_use]
    pub fn tail_current(self, from: f64, to: f64) -> Self {
        let mut settings = self.with_variable(SizingVariable::TailCurrent, from, to);
        settings.minimise = SizingVariable::TailCurrent;
        settings
    }

    /// Sizing of a multi-tanh doublet's or triplet's area ratio alone over `from..=to`: the
    /// least ratio meeting every line (the rest of the stage as planned).
    pub fn area_ratio_only(from: f64, to: f64) -> Self {
        Self::only(SizingVariable::AreaRatio, from, to)
    }

    /// Adds a multi-tanh cell's area ratio over `from..=to` as a variable (the variable to
    /// minimise stays as it is).
    #[must_use]
    pub fn area_ratio(self, from: f64, to: f64) -> Self {
        self.with_variable(SizingVariable::AreaRatio, from, to)
    }

    /// Adds `variable` over `from..=to` (replacing its range if it is one already).
    #[must_use]
    pub fn with_variable(mut self, variable: SizingVariable, from: f64, to: f64) -> Self {
        self.variables.retain(|v| v.variable != variable);
        self.variables.push(VariableRange { variable, from, to });
        self
    }

    /// Sets the variable to minimise (it must be one of the variables).
    #[must_use]
    pub fn minimise(mut self, variable: SizingVariable) -> Self {
        self.minimise = variable;
        self
    }

    /// Sets the guard band, dB.
    #[must_use]
    pub fn guard_band_db(mut self, guard_band_db: f64) -> Self {
        self.guard_band_db = guard_band_db;
        self
    }

    /// Rescales the load to hold the planned small-signal gain.
    #[must_use]
    pub fn hold_gain(mut self, hold_gain: bool) -> Self {
        self.hold_gain = hold_gain;
        self
    }

    /// The range of `variable`, if sizing chooses it.
    pub fn range_of(&self, variable: SizingVariable) -> Option<(f64, f64)> {
        self.variables
            .iter()
            .find(|v| v.variable == variable)
            .map(|v| (v.from, v.to))
    }

    /// The emitter-resistance range, Ω (`(0, 0)` when the emitter resistance is not a
    /// variable).
    pub fn emitter_range(&self) -> (f64, f64) {
        self.range_of(SizingVariable::EmitterResistance)
            .unwrap_or((0.0, 0.0))
    }

    /// Whether this is the one-variable search of the least emitter resistance (scan,
    /// windows and guard band), rather than a search over a region of several variables.
    pub fn is_emitter_only(&self) -> bool {
        self.variables.len() == 1
            && self.variables[0].variable == SizingVariable::EmitterResistance
            && self.minimise == SizingVariable::EmitterResistance
    }
}

/// A plan value that was accepted but lies outside what a bipolar stage usually has: the
/// report warns about it, naming where it was written and the usual range.
#[derive(Debug, Clone, PartialEq)]
pub struct PlanCaution {
    /// Key path, e.g. `stages[0].supply`.
    pub key_path: String,
    /// Where the value was written: `file:line:column`, or the `--set` argument.
    pub location: String,
    /// 1-based line of the value in the plan file (0 when unknown).
    pub line: u64,
    /// 1-based column of the value in the plan file (0 when unknown).
    pub column: u64,
    /// The value, in SI base units (°C for temperatures).
    pub value: f64,
    /// Unit symbol of the value (`V`, `Ω`, `°C`, or empty for a plain number).
    pub unit: &'static str,
    /// The usual range, in the same unit.
    pub usual: (f64, f64),
    /// What the value would mean for the stage, in a few words.
    pub concern: &'static str,
}
