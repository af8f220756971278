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

/// Degeneration sizing settings.
#[derive(Debug, Clone, PartialEq)]
pub struct SizingSettings {
    /// Lower end of the emitter-resistance search, Ω.
    pub from: f64,
    /// Upper end of the emitter-resistance search, Ω.
    pub to: f64,
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
            from,
            to,
            hold_gain: false,
            guard_band_db: 0.0,
        }
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
