//! The plan: what to evaluate, read in two stages.
//!
//! 1. [`tree`] parses YAML into positioned nodes (nothing numeric yet);
//! 2. this module validates every key into a [`Plan`] with SI values and defaults, so nothing
//!    numeric ever runs on an unvalidated plan. Every error names the file, line, column, key
//!    path, what is wrong and what is accepted.

pub mod reader;
pub mod tree;

use crate::error::{Error, PlanError};
use crate::units::Unit;
use reader::{At, MapAt, Range};
use std::path::Path;

/// Largest plan file read, bytes (a plan is a page of text, not a data set).
pub const MAX_PLAN_BYTES: u64 = 4 * 1024 * 1024;

/// A validated plan with every quantity in SI base units.
#[derive(Debug, Clone, PartialEq)]
pub struct Plan {
    /// Plan name; the output folder's name.
    pub name: String,
    /// Temperatures to evaluate, °C.
    pub temperatures_c: Vec<f64>,
    /// Stages compared side by side.
    pub stages: Vec<StageSpec>,
    /// Drive amplitudes and frequencies.
    pub drive: Drive,
    /// Monte Carlo mismatch analysis, if asked for.
    pub monte_carlo: Option<MonteCarloSpec>,
    /// Budget lines, checked for every stage and temperature.
    pub budget: Vec<BudgetLine>,
    /// Degeneration sizing, if asked for.
    pub sizing: Option<SizingSpec>,
    /// Noise bandwidth for integrated noise and SNR, if given.
    pub noise_band: Option<NoiseBand>,
    /// Reference impedance for dBm figures, ohms, if given.
    pub reference_impedance: Option<f64>,
    /// Process corners, the typical one first (see [`crate::corner`]).
    pub corners: Vec<crate::corner::Corner>,
}

/// One differential-pair stage as the plan describes it (nominal values).
#[derive(Debug, Clone, PartialEq)]
pub struct StageSpec {
    /// Unique name.
    pub name: String,
    /// Tail current, A.
    pub tail_current: f64,
    /// Load resistance per side, collector to supply, Ω.
    pub load_resistance: f64,
    /// Emitter degeneration per side, Ω.
    pub emitter_resistance: f64,
    /// Source resistance per side, Ω.
    pub source_resistance: f64,
    /// Output resistance of the tail source, Ω (infinite = ideal).
    pub tail_resistance: f64,
    /// Capacitance across each load resistor, F.
    pub load_capacitance: f64,
    /// Capacitance from the tail node to ground, F.
    pub tail_capacitance: f64,
    /// Positive supply, V.
    pub supply: f64,
    /// Input common-mode voltage, V.
    pub input_common_mode: f64,
    /// Whether the supply or the input common mode was left to its default (bias warnings
    /// then say so).
    pub bias_defaulted: bool,
    /// Transistor model parameters.
    pub transistor: TransistorSpec,
    /// Fractional excess of the P side over the M side (P = M·(1+δ)).
    pub mismatch: Mismatch,
    /// Standard deviations of the mismatch fractions, for Monte Carlo.
    pub mismatch_sigma: Mismatch,
    /// How the tail current moves with temperature.
    pub tail_current_law: crate::tail::TailCurrentLaw,
}

/// Bipolar transistor parameters (forward-active Gummel–Poon subset).
#[derive(Debug, Clone, PartialEq)]
pub struct TransistorSpec {
    /// Saturation current at the nominal temperature, A.
    pub saturation_current: f64,
    /// Forward current gain β (infinite = no base current).
    pub beta: f64,
    /// Forward Early voltage, V (infinite = no Early effect).
    pub early_voltage: f64,
    /// Ohmic base resistance, Ω.
    pub base_resistance: f64,
    /// Forward transit time, s.
    pub transit_time: f64,
    /// Zero-bias base-emitter junction capacitance, F.
    pub emitter_junction_capacitance: f64,
    /// Zero-bias base-collector junction capacitance, F.
    pub collector_junction_capacitance: f64,
    /// Base-emitter built-in potential, V.
    pub emitter_junction_potential: f64,
    /// Base-emitter grading exponent.
    pub emitter_grading: f64,
    /// Base-collector built-in potential, V.
    pub collector_junction_potential: f64,
    /// Base-collector grading exponent.
    pub collector_grading: f64,
    /// Temperature at which `saturation_current` is given, °C.
    pub nominal_temperature_c: f64,
    /// Band-gap energy for the saturation current's temperature law, eV.
    pub bandgap_ev: f64,
    /// Temperature exponent of the saturation current (XTI).
    pub saturation_current_exponent: f64,
    /// Flicker-noise coefficient of the base current, KF: `i_b² = KF·I_B^AF/f` (A²/Hz at
    /// 1 Hz when AF = 1); 0 = no flicker noise.
    pub flicker_coefficient: f64,
    /// Flicker-noise exponent of the base current, AF.
    pub flicker_exponent: f64,
}

impl Default for TransistorSpec {
    fn default() -> Self {
        TransistorSpec {
            saturation_current: 1e-16,
            beta: f64::INFINITY,
            early_voltage: f64::INFINITY,
            base_resistance: 0.0,
            transit_time: 0.0,
            emitter_junction_capacitance: 0.0,
            collector_junction_capacitance: 0.0,
            emitter_junction_potential: 0.75,
            emitter_grading: 0.33,
            collector_junction_potential: 0.75,
            collector_grading: 0.33,
            nominal_temperature_c: 27.0,
            bandgap_ev: 1.11,
            saturation_current_exponent: 3.0,
            flicker_coefficient: 0.0,
            flicker_exponent: 1.0,
        }
    }
}

/// P-over-M fractional differences of the matched parameters.
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
}

/// How the stage is driven.
#[derive(Debug, Clone, PartialEq)]
pub struct Drive {
    /// Peak differential input amplitudes per tone, V (ascending order as given).
    pub amplitudes: Vec<f64>,
    /// Signal frequencies, Hz.
    pub frequencies: Vec<f64>,
    /// Two-tone spacing, Hz, when the plan asks for two-tone analysis.
    pub two_tone_spacing: Option<f64>,
    /// THD sums harmonics 2 through this order.
    pub thd_harmonics: usize,
}

/// Monte Carlo settings.
#[derive(Debug, Clone, PartialEq)]
pub struct MonteCarloSpec {
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

/// A figure the budget can constrain.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Metric {
    /// The n-th harmonic, dBc (n ≥ 2).
    Harmonic(usize),
    /// Total harmonic distortion, dBc.
    Thd,
    /// Third-order intermodulation, dBc.
    Im3,
    /// Input third-order intercept, peak V per tone.
    Iip3,
    /// Output third-order intercept, peak V per tone.
    Oip3,
    /// Input 1 dB compression point, peak V.
    P1db,
    /// Small-signal differential voltage gain, dB.
    Gain,
    /// Input at which one side carries 95 % of the tail current, V.
    SteeringRange,
    /// White input-referred differential noise density, V/√Hz.
    InputNoise,
}

impl Metric {
    /// The name used in plans and reports.
    pub fn name(self) -> String {
        match self {
            Metric::Harmonic(n) => format!("hd{n}"),
            Metric::Thd => "thd".into(),
            Metric::Im3 => "im3".into(),
            Metric::Iip3 => "iip3".into(),
            Metric::Oip3 => "oip3".into(),
            Metric::P1db => "p1db".into(),
            Metric::Gain => "gain".into(),
            Metric::SteeringRange => "steering_range".into(),
            Metric::InputNoise => "input_noise".into(),
        }
    }

    /// Whether the metric is a level in dB (limits are plain numbers) rather than a quantity.
    pub fn is_decibel(self) -> bool {
        matches!(
            self,
            Metric::Harmonic(_) | Metric::Thd | Metric::Im3 | Metric::Gain
        )
    }

    /// Whether the metric depends on the drive amplitude (`at`).
    pub fn needs_amplitude(self) -> bool {
        matches!(self, Metric::Harmonic(_) | Metric::Thd | Metric::Im3)
    }

    /// The unit of the limit.
    pub fn unit(self) -> Unit {
        Unit::Volt
    }

    /// Unit label for reports.
    pub fn unit_label(self) -> &'static str {
        match self {
            Metric::Harmonic(_) | Metric::Thd | Metric::Im3 => "dBc",
            Metric::Gain => "dB",
            Metric::InputNoise => "V/√Hz",
            _ => "V",
        }
    }

    fn parse(text: &str) -> Option<Metric> {
        Some(match text {
            "thd" => Metric::Thd,
            "im3" => Metric::Im3,
            "iip3" => Metric::Iip3,
            "oip3" => Metric::Oip3,
            "p1db" => Metric::P1db,
            "gain" => Metric::Gain,
            "steering_range" => Metric::SteeringRange,
            "input_noise" => Metric::InputNoise,
            other => {
                let order: usize = other.strip_prefix("hd")?.parse().ok()?;
                if order < 2 {
                    return None;
                }
                Metric::Harmonic(order)
            }
        })
    }
}

/// Whether a budget line is an upper or a lower bound.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Limit {
    /// The value must not exceed this.
    Max(f64),
    /// The value must be at least this.
    Min(f64),
}

impl Limit {
    /// The limit's number.
    pub fn value(self) -> f64 {
        match self {
            Limit::Max(v) | Limit::Min(v) => v,
        }
    }
}

/// One budget line.
#[derive(Debug, Clone, PartialEq)]
pub struct BudgetLine {
    /// The constrained figure.
    pub metric: Metric,
    /// Input amplitude, V (amplitude-dependent metrics; default: the largest drive amplitude).
    pub at: Option<f64>,
    /// Frequency, Hz (default: the first drive frequency).
    pub frequency: Option<f64>,
    /// The bound.
    pub limit: Limit,
}

/// Degeneration sizing settings.
#[derive(Debug, Clone, PartialEq)]
pub struct SizingSpec {
    /// Lower end of the emitter-resistance search, Ω.
    pub from: f64,
    /// Upper end of the emitter-resistance search, Ω.
    pub to: f64,
    /// Rescale the load to hold the small-signal gain of the undegenerated stage.
    pub hold_gain: bool,
}

const TOP_KEYS: &[&str] = &[
    "name",
    "temperatures_c",
    "stages",
    "drive",
    "monte_carlo",
    "budget",
    "sizing",
    "noise_band",
    "reference_impedance",
    "corners",
];
const STAGE_KEYS: &[&str] = &[
    "name",
    "tail_current",
    "load_resistance",
    "emitter_resistance",
    "source_resistance",
    "tail_resistance",
    "load_capacitance",
    "tail_capacitance",
    "supply",
    "input_common_mode",
    "transistor",
    "mismatch",
    "mismatch_sigma",
    "tail_current_law",
];
const TRANSISTOR_KEYS: &[&str] = &[
    "saturation_current",
    "beta",
    "early_voltage",
    "base_resistance",
    "transit_time",
    "emitter_junction_capacitance",
    "collector_junction_capacitance",
    "emitter_junction_potential",
    "emitter_grading",
    "collector_junction_potential",
    "collector_grading",
    "nominal_temperature_c",
    "bandgap_ev",
    "saturation_current_exponent",
    "flicker_coefficient",
    "flicker_exponent",
];
const MISMATCH_KEYS: &[&str] = &[
    "saturation_current",
    "emitter_resistance",
    "load_resistance",
    "base_resistance",
    "beta",
];
const DRIVE_KEYS: &[&str] = &[
    "amplitudes",
    "frequencies",
    "two_tone_spacing",
    "thd_harmonics",
];
const SWEEP_KEYS: &[&str] = &["from", "to", "points", "spacing"];
const BUDGET_KEYS: &[&str] = &["metric", "at", "frequency", "max", "min"];
const METRIC_NAMES: &str =
    "hd2, hd3, hd5 (any hdN, N ≥ 2), thd, im3, iip3, oip3, p1db, gain, steering_range, input_noise";

/// Most amplitudes, frequencies or temperatures a plan may list or sweep before it is refused
/// (the list is held in memory); below this the whole-plan work limit of [`crate::workload`]
/// applies.
pub const MAX_LIST: u64 = 100_000;
/// Largest Monte Carlo run count read; the work limit normally refuses far fewer.
pub const MAX_RUNS: u64 = 1_000_000_000_000_000;

impl Plan {
    /// Reads and validates a plan file.
    pub fn load(path: &Path) -> Result<Plan, Error> {
        let shown = path.display().to_string();
        let meta = std::fs::metadata(path).map_err(|source| Error::ReadPlan {
            path: path.to_owned(),
            source,
        })?;
        if meta.len() > MAX_PLAN_BYTES {
            return Err(PlanError::at(
                0,
                0,
                "",
                format!("the plan file is {} bytes", meta.len()),
                format!("a plan of at most {MAX_PLAN_BYTES} bytes"),
            )
            .in_file(&shown, "")
            .into());
        }
        let text = std::fs::read_to_string(path).map_err(|source| Error::ReadPlan {
            path: path.to_owned(),
            source,
        })?;
        Plan::from_yaml(&text, &shown).map_err(Error::from)
    }

    /// Parses and validates plan text; `file` names it in errors.
    pub fn from_yaml(text: &str, file: &str) -> Result<Plan, PlanError> {
        let root = tree::parse_tree(text).map_err(|(message, line, column)| {
            PlanError::at(
                line,
                column,
                "",
                format!("the YAML cannot be read: {message}"),
                "a YAML mapping as described in specs/README.md",
            )
            .in_file(file, text)
        })?;
        Plan::from_tree(&root).map_err(|err| err.in_file(file, text))
    }

    fn from_tree(root: &tree::Node) -> Result<Plan, PlanError> {
        let top = At::root(root).map(TOP_KEYS)?;
        let name_at = top.required("name", "letters, digits, '-' and '_'")?;
        let name = name_at.text("letters, digits, '-' and '_'")?.to_owned();
        if name.is_empty()
            || name.len() > 100
            || !name
                .chars()
                .all(|c| c.is_ascii_alphanumeric() || c == '-' || c == '_')
        {
            return Err(name_at.error(
                format!("\"{name}\" cannot name an output folder"),
                "1 to 100 ASCII letters, digits, '-' and '_'",
            ));
        }

        let temperatures_c = match top.get("temperatures_c") {
            Some(at) => {
                let items = at.seq("temperatures in °C")?;
                check_list_len(&at, items.len(), "temperature")?;
                items
                    .iter()
                    .map(|item| item.quantity_where(Unit::Celsius, Range::Between(-273.15, 1000.0)))
                    .collect::<Result<Vec<_>, _>>()?
            }
            None => vec![27.0],
        };

        let stages_at = top.required("stages", "a list of one or more stages")?;
        let stage_items = stages_at.seq("stages")?;
        if stage_items.is_empty() {
            return Err(stages_at.error("the plan has no stages", "one or more stages"));
        }
        check_list_len(&stages_at, stage_items.len(), "stage")?;
        let mut stages = Vec::with_capacity(stage_items.len());
        for item in &stage_items {
            let stage = read_stage(item)?;
            if stages.iter().any(|s: &StageSpec| s.name == stage.name) {
                return Err(item.error(
                    format!("stage name `{}` is used twice", stage.name),
                    "a unique name for each stage",
                ));
            }
            stages.push(stage);
        }

        let drive =
            read_drive(&top.required("drive", "a mapping with amplitudes and frequencies")?)?;
        let monte_carlo = top
            .get("monte_carlo")
            .map(|at| read_monte_carlo(&at))
            .transpose()?;
        let budget = match top.get("budget") {
            Some(at) => at
                .seq("budget lines")?
                .iter()
                .map(|line| read_budget_line(line, &drive))
                .collect::<Result<Vec<_>, _>>()?,
            None => Vec::new(),
        };
        let sizing = top.get("sizing").map(|at| read_sizing(&at)).transpose()?;
        if let Some(sizing_at) = top.get("sizing") {
            if budget.is_empty() {
                return Err(sizing_at.error(
                    "sizing needs budget lines to meet",
                    "a `budget` list alongside `sizing`",
                ));
            }
        }
        let noise_band = top
            .get("noise_band")
            .map(|at| {
                let map = at.map(&["from", "to"])?;
                let from = map.quantity("from", Unit::Hertz, Range::NonNegative)?;
                let to = map.quantity("to", Unit::Hertz, Range::Positive)?;
                if to <= from {
                    return Err(at.error("`to` must exceed `from`", "a band with from < to"));
                }
                Ok(NoiseBand { from, to })
            })
            .transpose()?;
        let reference_impedance = top
            .get("reference_impedance")
            .map(|at| at.quantity_where(Unit::Ohm, Range::Positive))
            .transpose()?;

        let corners = crate::corner::read_corners(top.get("corners").as_ref())?;
        check_tail_laws(&stage_items, &stages, &temperatures_c)?;
        if let (Some(band), Some(band_at)) = (&noise_band, top.get("noise_band")) {
            if band.from == 0.0
                && stages
                    .iter()
                    .any(|s| s.transistor.flicker_coefficient > 0.0)
            {
                return Err(band_at.error(
                    "flicker noise integrated from 0 Hz is infinite",
                    "noise_band.from above 0 Hz when a stage has flicker_coefficient",
                ));
            }
        }

        Ok(Plan {
            corners,
            name,
            temperatures_c,
            stages,
            drive,
            monte_carlo,
            budget,
            sizing,
            noise_band,
            reference_impedance,
        })
    }
}

/// Refuses a tail-current law that would turn the tail current off at a plan temperature.
fn check_tail_laws(
    items: &[At],
    stages: &[StageSpec],
    temperatures_c: &[f64],
) -> Result<(), PlanError> {
    for (item, stage) in items.iter().zip(stages) {
        for &t in temperatures_c {
            let current = stage.tail_current_law.current_at(
                stage.tail_current,
                stage.transistor.nominal_temperature_c,
                t,
            );
            if current.is_nan() || current <= 0.0 {
                let at = item
                    .map(STAGE_KEYS)?
                    .get("tail_current_law")
                    .unwrap_or_else(|| item.clone());
                return Err(at.error(
                    format!("the tail current would be {current:e} A at {t} °C"),
                    "a temperature coefficient that keeps the tail current positive at every plan temperature",
                ));
            }
        }
    }
    Ok(())
}

fn check_list_len(at: &At, len: usize, what: &str) -> Result<(), PlanError> {
    if len as u64 > MAX_LIST {
        return Err(at.error(
            format!("{len} {what}s were listed"),
            format!("at most {MAX_LIST} {what}s"),
        ));
    }
    Ok(())
}

fn read_stage(at: &At) -> Result<StageSpec, PlanError> {
    let map = at.map(STAGE_KEYS)?;
    let name_at = map.required("name", "a unique stage name")?;
    let name = name_at.text("a stage name")?.to_owned();
    if name.is_empty() || name.len() > 100 || name.chars().any(|c| c.is_control()) {
        return Err(name_at.error(
            "the stage name is empty, too long or has control characters",
            "1 to 100 printable characters",
        ));
    }
    let supply = map.quantity_or("supply", Unit::Volt, Range::Positive, 5.0)?;
    let transistor = match map.get("transistor") {
        Some(t) => read_transistor(&t)?,
        None => TransistorSpec::default(),
    };
    let stage = StageSpec {
        name,
        tail_current: map.quantity("tail_current", Unit::Ampere, Range::Positive)?,
        load_resistance: map.quantity("load_resistance", Unit::Ohm, Range::Positive)?,
        emitter_resistance: map.quantity_or(
            "emitter_resistance",
            Unit::Ohm,
            Range::NonNegative,
            0.0,
        )?,
        source_resistance: map.quantity_or(
            "source_resistance",
            Unit::Ohm,
            Range::NonNegative,
            0.0,
        )?,
        tail_resistance: map.quantity_or(
            "tail_resistance",
            Unit::Ohm,
            Range::PositiveOrInfinite,
            f64::INFINITY,
        )?,
        load_capacitance: map.quantity_or(
            "load_capacitance",
            Unit::Farad,
            Range::NonNegative,
            0.0,
        )?,
        tail_capacitance: map.quantity_or(
            "tail_capacitance",
            Unit::Farad,
            Range::NonNegative,
            0.0,
        )?,
        supply,
        bias_defaulted: map.get("supply").is_none() || map.get("input_common_mode").is_none(),
        input_common_mode: map.quantity_or(
            "input_common_mode",
            Unit::Volt,
            Range::Finite,
            supply / 2.0,
        )?,
        transistor,
        mismatch: read_mismatch(&map, "mismatch", Range::Between(-0.9, 9.0))?,
        mismatch_sigma: read_mismatch(&map, "mismatch_sigma", Range::Between(-1e-300, 0.5))?,
        tail_current_law: map
            .get("tail_current_law")
            .map(|law| crate::tail::TailCurrentLaw::read(&law))
            .transpose()?
            .unwrap_or_default(),
    };
    Ok(stage)
}

fn read_transistor(at: &At) -> Result<TransistorSpec, PlanError> {
    let map = at.map(TRANSISTOR_KEYS)?;
    let d = TransistorSpec::default();
    Ok(TransistorSpec {
        saturation_current: map.quantity_or(
            "saturation_current",
            Unit::Ampere,
            Range::Positive,
            d.saturation_current,
        )?,
        beta: map.quantity_or("beta", Unit::Number, Range::PositiveOrInfinite, d.beta)?,
        early_voltage: map.quantity_or(
            "early_voltage",
            Unit::Volt,
            Range::PositiveOrInfinite,
            d.early_voltage,
        )?,
        base_resistance: map.quantity_or(
            "base_resistance",
            Unit::Ohm,
            Range::NonNegative,
            d.base_resistance,
        )?,
        transit_time: map.quantity_or(
            "transit_time",
            Unit::Second,
            Range::NonNegative,
            d.transit_time,
        )?,
        emitter_junction_capacitance: map.quantity_or(
            "emitter_junction_capacitance",
            Unit::Farad,
            Range::NonNegative,
            0.0,
        )?,
        collector_junction_capacitance: map.quantity_or(
            "collector_junction_capacitance",
            Unit::Farad,
            Range::NonNegative,
            0.0,
        )?,
        emitter_junction_potential: map.quantity_or(
            "emitter_junction_potential",
            Unit::Volt,
            Range::Between(0.1, 2.0),
            d.emitter_junction_potential,
        )?,
        emitter_grading: map.quantity_or(
            "emitter_grading",
            Unit::Number,
            Range::Between(0.0, 0.9),
            d.emitter_grading,
        )?,
        collector_junction_potential: map.quantity_or(
            "collector_junction_potential",
            Unit::Volt,
            Range::Between(0.1, 2.0),
            d.collector_junction_potential,
        )?,
        collector_grading: map.quantity_or(
            "collector_grading",
            Unit::Number,
            Range::Between(0.0, 0.9),
            d.collector_grading,
        )?,
        nominal_temperature_c: map.quantity_or(
            "nominal_temperature_c",
            Unit::Celsius,
            Range::Between(-273.15, 1000.0),
            d.nominal_temperature_c,
        )?,
        bandgap_ev: map.quantity_or(
            "bandgap_ev",
            Unit::ElectronVolt,
            Range::Between(0.1, 5.0),
            d.bandgap_ev,
        )?,
        saturation_current_exponent: map.quantity_or(
            "saturation_current_exponent",
            Unit::Number,
            Range::Between(-10.0, 10.0),
            d.saturation_current_exponent,
        )?,
        flicker_coefficient: map.quantity_or(
            "flicker_coefficient",
            Unit::Number,
            Range::NonNegative,
            d.flicker_coefficient,
        )?,
        flicker_exponent: map.quantity_or(
            "flicker_exponent",
            Unit::Number,
            Range::Between(0.5, 3.0),
            d.flicker_exponent,
        )?,
    })
}

fn read_mismatch(stage: &MapAt, key: &str, range: Range) -> Result<Mismatch, PlanError> {
    let Some(at) = stage.get(key) else {
        return Ok(Mismatch::default());
    };
    let map = at.map(MISMATCH_KEYS)?;
    Ok(Mismatch {
        saturation_current: map.quantity_or("saturation_current", Unit::Ratio, range, 0.0)?,
        emitter_resistance: map.quantity_or("emitter_resistance", Unit::Ratio, range, 0.0)?,
        load_resistance: map.quantity_or("load_resistance", Unit::Ratio, range, 0.0)?,
        base_resistance: map.quantity_or("base_resistance", Unit::Ratio, range, 0.0)?,
        beta: map.quantity_or("beta", Unit::Ratio, range, 0.0)?,
    })
}

/// Reads a list of quantities or a `{from, to, points, spacing}` sweep.
fn read_sweep(at: &At, unit: Unit, what: &str) -> Result<Vec<f64>, PlanError> {
    let values = match &at.node.value {
        tree::NodeValue::Map(_) => {
            let map = at.map(SWEEP_KEYS)?;
            let from = map.quantity("from", unit, Range::Positive)?;
            let to = map.quantity("to", unit, Range::Positive)?;
            let points_at = map.required("points", "a whole number of points")?;
            let points = points_at.count(1, u64::MAX)?;
            if points > MAX_LIST {
                return Err(points_at.error(
                    format!(
                        "{points} {what} would be about {:.1e} sample solves per stage and temperature \
                         (each point takes about {} samples) and would be held in memory",
                        points as f64 * crate::workload::SAMPLES_PER_TONE,
                        crate::workload::SAMPLES_PER_TONE
                    ),
                    format!(
                        "at most {MAX_LIST} points per sweep; split the plan, or coarsen the sweep \
                         (the whole-plan work limit is raised with `linbudget run --max-work`)"
                    ),
                ));
            }
            let points = points as usize;
            let log = match map.get("spacing") {
                None => true,
                Some(s) => match s.text("log or linear")? {
                    "log" => true,
                    "linear" => false,
                    other => {
                        return Err(s.error(format!("unknown spacing `{other}`"), "log or linear"))
                    }
                },
            };
            if points > 1 && to <= from {
                return Err(at.error(
                    "`to` must exceed `from`",
                    format!("a sweep of {what} with from < to"),
                ));
            }
            (0..points)
                .map(|i| {
                    let t = if points == 1 {
                        0.0
                    } else {
                        i as f64 / (points - 1) as f64
                    };
                    if log {
                        from * (to / from).powf(t)
                    } else {
                        from + (to - from) * t
                    }
                })
                .collect()
        }
        tree::NodeValue::Seq(_) => {
            let items = at.seq(what)?;
            check_list_len(at, items.len(), what)?;
            items
                .iter()
                .map(|item| item.quantity_where(unit, Range::Positive))
                .collect::<Result<Vec<_>, _>>()?
        }
        _ => vec![at.quantity_where(unit, Range::Positive)?],
    };
    if values.is_empty() {
        return Err(at.error(format!("no {what} given"), format!("one or more {what}")));
    }
    Ok(values)
}

fn read_drive(at: &At) -> Result<Drive, PlanError> {
    let map = at.map(DRIVE_KEYS)?;
    let amplitudes = read_sweep(
        &map.required(
            "amplitudes",
            "a list of peak differential amplitudes, e.g. [1 mV, 10 mV]",
        )?,
        Unit::Volt,
        "amplitudes",
    )?;
    let frequencies = match map.get("frequencies") {
        Some(f) => read_sweep(&f, Unit::Hertz, "frequencies")?,
        None => vec![1e3],
    };
    let two_tone_spacing = map
        .get("two_tone_spacing")
        .map(|s| s.quantity_where(Unit::Hertz, Range::Positive))
        .transpose()?;
    let thd_harmonics = match map.get("thd_harmonics") {
        Some(h) => h.count(2, 200)? as usize,
        None => 40,
    };
    Ok(Drive {
        amplitudes,
        frequencies,
        two_tone_spacing,
        thd_harmonics,
    })
}

fn read_monte_carlo(at: &At) -> Result<MonteCarloSpec, PlanError> {
    let map = at.map(&["runs", "seed"])?;
    Ok(MonteCarloSpec {
        // Runs are not held in memory, so the only cap here is representational; the work
        // estimate (crate::workload) refuses plans whose runs would take too long.
        runs: map
            .required("runs", "a whole number of runs")?
            .count(1, MAX_RUNS)?,
        seed: match map.get("seed") {
            Some(s) => s.count(0, u64::MAX)?,
            None => 1,
        },
    })
}

fn read_budget_line(at: &At, drive: &Drive) -> Result<BudgetLine, PlanError> {
    let map = at.map(BUDGET_KEYS)?;
    let metric_at = map.required("metric", METRIC_NAMES)?;
    let metric_name = metric_at.text(METRIC_NAMES)?;
    let metric = Metric::parse(metric_name)
        .ok_or_else(|| metric_at.error(format!("unknown metric `{metric_name}`"), METRIC_NAMES))?;
    if let Metric::Harmonic(order) = metric {
        if order > drive.thd_harmonics.max(9) {
            return Err(metric_at.error(
                format!("hd{order} is above the analysed orders"),
                format!(
                    "hd2 to hd{} (raise drive.thd_harmonics for more)",
                    drive.thd_harmonics.max(9)
                ),
            ));
        }
    }
    if metric == Metric::Im3 && drive.two_tone_spacing.is_none() {
        return Err(metric_at.error(
            "an im3 line needs two-tone drive",
            "drive.two_tone_spacing set, e.g. 100 kHz",
        ));
    }
    let at_amplitude = map
        .get("at")
        .map(|a| a.quantity_where(Unit::Volt, Range::Positive))
        .transpose()?;
    if at_amplitude.is_some() && !metric.needs_amplitude() {
        if let Some(a) = map.get("at") {
            return Err(a.error(
                format!("`at` does not apply to {}", metric.name()),
                "`at` only on hdN, thd and im3 lines",
            ));
        }
    }
    let frequency = map
        .get("frequency")
        .map(|f| f.quantity_where(Unit::Hertz, Range::Positive))
        .transpose()?;
    let read_limit = |key: &str| -> Result<Option<f64>, PlanError> {
        let Some(limit_at) = map.get(key) else {
            return Ok(None);
        };
        let value = if metric.is_decibel() {
            limit_at.quantity_where(Unit::Decibel, Range::Finite)?
        } else if metric == Metric::InputNoise {
            limit_at.quantity_where(Unit::Volt, Range::Positive)?
        } else {
            limit_at.quantity_where(metric.unit(), Range::Positive)?
        };
        Ok(Some(value))
    };
    let limit = match (read_limit("max")?, read_limit("min")?) {
        (Some(max), None) => Limit::Max(max),
        (None, Some(min)) => Limit::Min(min),
        _ => {
            return Err(at.error(
                "a budget line needs exactly one of `max` or `min`",
                "{metric: hd3, at: 100 mV, max: -60} or {metric: iip3, min: 300 mV}",
            ))
        }
    };
    Ok(BudgetLine {
        metric,
        at: at_amplitude,
        frequency,
        limit,
    })
}

fn read_sizing(at: &At) -> Result<SizingSpec, PlanError> {
    let map = at.map(&["emitter_resistance", "hold_gain"])?;
    let range_at = map.required("emitter_resistance", "{from: 0, to: 5k}")?;
    let range = range_at.map(&["from", "to"])?;
    let from = range.quantity("from", Unit::Ohm, Range::NonNegative)?;
    let to = range.quantity("to", Unit::Ohm, Range::Positive)?;
    if to <= from {
        return Err(range_at.error("`to` must exceed `from`", "a range with from < to"));
    }
    let hold_gain = match map.get("hold_gain") {
        Some(h) => h.boolean()?,
        None => false,
    };
    Ok(SizingSpec {
        from,
        to,
        hold_gain,
    })
}
