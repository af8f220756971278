//! The plan: what to evaluate, read in two stages.
//!
//! 1. [`tree`] parses YAML into positioned nodes (nothing numeric yet);
//! 2. this module validates every key into a [`Plan`] with SI values and defaults, so nothing
//!    numeric ever runs on an unvalidated plan. Every error names the file, line, column, key
//!    path, what is wrong and what is accepted.

pub(crate) mod bench;
pub(crate) mod input;
pub(crate) mod overrides;
pub(crate) mod reader;
pub(crate) mod tree;

mod corners;
mod physics;
mod plausibility;
mod tail;

use crate::error::{Error, PlanError};
use crate::model::bias::{temperature_supported, MODEL_TEMPERATURE_RANGE_C};
use crate::model::budget::{BudgetLine, Limit, Metric, METRIC_NAMES};
use crate::model::drive::{Drive, DEFAULT_THD_HARMONICS};
use crate::model::plan::{ComparisonBasis, ComparisonSettings};
use crate::model::plan::{
    MonteCarloSettings, NoiseBand, Plan, SizingSettings, SizingVariable, VariableRange,
};
use crate::model::stage::{Mismatch, Stage};
use crate::model::topology::{MultiTanh, MultiTanhForm, TanhPair, Topology};
use crate::model::transistor::Transistor;
use crate::units::{short_number, Unit};
use overrides::{override_location, parse_override, Override};
use reader::{At, MapAt, Range};
use std::path::Path;

const TOP_KEYS: &[&str] = &[
    "comparison",
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
    "measurements",
    "fit",
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
    "tail_compliance",
    "transistor",
    "mismatch",
    "mismatch_sigma",
    "tail_current_law",
    "topology",
    "multi_tanh",
    "tail_noise_current",
];
const MULTI_TANH_KEYS: &[&str] = &["form", "area_ratio", "centre_fraction", "pairs"];
const TANH_PAIR_KEYS: &[&str] = &["area_p", "area_m", "tail_fraction", "emitter_resistance"];
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
    "reverse_beta",
    "forward_knee_current",
    "reverse_knee_current",
    "collector_resistance",
    "reverse_transit_time",
    "reverse_early_voltage",
];
const MISMATCH_KEYS: &[&str] = &[
    "saturation_current",
    "emitter_resistance",
    "load_resistance",
    "base_resistance",
    "beta",
    "load_capacitance",
    "emitter_junction_capacitance",
    "collector_junction_capacitance",
    "transit_time",
    "tail_current",
];
const DRIVE_KEYS: &[&str] = &[
    "amplitudes",
    "frequencies",
    "two_tone_spacing",
    "thd_harmonics",
];
const SWEEP_KEYS: &[&str] = &["from", "to", "points", "spacing"];
const BUDGET_KEYS: &[&str] = &["metric", "at", "frequency", "max", "min"];
const SIZING_KEYS: &[&str] = &[
    "emitter_resistance",
    "tail_current",
    "area_ratio",
    "minimise",
    "hold_gain",
    "guard_band_db",
];

/// Tail currents a plan may name, A: refused outside (no single bipolar pair runs amperes, and
/// below a picoampere the junction leakage the model leaves out dominates).
pub const TAIL_CURRENT_RANGE_A: (f64, f64) = (1e-12, 1.0);
/// Load resistances a plan may name, Ω: refused outside (below an ohm the gain is lost in the
/// wiring; above 100 MΩ in the leakage and the next stage's input).
pub const LOAD_RESISTANCE_RANGE_OHM: (f64, f64) = (1.0, 1e8);

/// Most amplitudes, frequencies or temperatures a plan may list or sweep before it is refused
/// (the list is held in memory); below this the whole-plan work limit applies.
pub const MAX_LIST: u64 = 100_000;
/// Largest Monte Carlo run count read; the work limit normally refuses far fewer.
pub const MAX_RUNS: u64 = 1_000_000_000_000_000;

/// A plan file's text, the name it is shown by in messages, and any `--set` overrides.
pub struct PlanSource {
    /// The file's text.
    pub text: String,
    /// The path as given, for messages.
    pub shown: String,
    /// `--set KEY.PATH=VALUE` overrides, applied in order before validation.
    overrides: Vec<Override>,
}

impl PlanSource {
    /// Reads a plan file of at most [`input::MAX_PLAN_BYTES`] (a bounded read from a regular file
    /// only; see [`input`]).
    pub fn read(path: &Path) -> Result<PlanSource, Error> {
        let shown = path.display().to_string();
        let text = input::read_plan_text(path, &shown)?;
        Ok(PlanSource::from_text(text, shown))
    }

    /// A plan given as text; `shown` names it in messages.
    pub fn from_text(text: String, shown: String) -> PlanSource {
        PlanSource {
            text,
            shown,
            overrides: Vec::new(),
        }
    }

    /// Adds `--set KEY.PATH=VALUE` overrides (see [`overrides`]); a malformed argument is an
    /// error located at the argument.
    pub fn with_overrides(mut self, arguments: &[String]) -> Result<PlanSource, PlanError> {
        for argument in arguments {
            let index = self.overrides.len();
            self.overrides.push(parse_override(argument, index)?);
        }
        Ok(self)
    }

    /// Validates the text, with the overrides applied, into a plan.
    pub fn plan(&self) -> Result<Plan, PlanError> {
        read_plan(&self.text, &self.shown, &self.overrides)
    }

    /// An error about the value at a dotted key path (`monte_carlo.runs`), located in the text
    /// where the key is found.
    pub fn error_at_key(
        &self,
        key_path: &str,
        problem: impl Into<String>,
        accepted: impl Into<String>,
    ) -> PlanError {
        let (line, column) = self
            .tree()
            .ok()
            .and_then(|root| locate(&root, key_path))
            .unwrap_or((0, 0));
        locate_error(
            PlanError::at(line, column, key_path, problem, accepted),
            &self.shown,
            &self.text,
            &self.overrides,
        )
    }

    /// The plan's tree with the overrides applied.
    fn tree(&self) -> Result<tree::Node, PlanError> {
        parse_with_overrides(&self.text, &self.shown, &self.overrides)
    }
}

/// Places an error: at the `--set` argument it came from, or at its line of the file.
fn locate_error(mut err: PlanError, file: &str, text: &str, overrides: &[Override]) -> PlanError {
    if !err.file.is_empty() {
        return err;
    }
    match override_location(err.line, overrides) {
        Some(location) => {
            err.file = location;
            err.line = 0;
            err.column = 0;
            err.source_line = None;
            err
        }
        None => err.in_file(file, text),
    }
}

/// Parses the text and applies the overrides in order.
fn parse_with_overrides(
    text: &str,
    file: &str,
    overrides: &[Override],
) -> Result<tree::Node, PlanError> {
    let mut root = tree::parse_tree(text).map_err(|(message, line, column)| {
        PlanError::at(
            line,
            column,
            "",
            format!("the YAML cannot be read: {message}"),
            "a YAML mapping as described in specs/README.md",
        )
        .in_file(file, text)
    })?;
    for (index, o) in overrides.iter().enumerate() {
        overrides::apply(&mut root, o, index)?;
    }
    Ok(root)
}

/// Reads and validates a plan: parse, override, validate; every error located.
fn read_plan(text: &str, file: &str, overrides: &[Override]) -> Result<Plan, PlanError> {
    let root = parse_with_overrides(text, file, overrides)?;
    let mut plan = Plan::from_tree(&root, Path::new(file).parent().unwrap_or(Path::new("")))
        .map_err(|err| locate_error(err, file, text, overrides))?;
    for caution in &mut plan.cautions {
        caution.location = override_location(caution.line, overrides)
            .unwrap_or_else(|| format!("{}:{}:{}", file, caution.line, caution.column));
    }
    Ok(plan)
}

/// Line and column of the value at a dotted key path in a plan's tree.
fn locate(root: &tree::Node, key_path: &str) -> Option<(u64, u64)> {
    let mut node = root;
    for key in key_path.split('.') {
        let tree::NodeValue::Map(entries) = &node.value else {
            return None;
        };
        node = entries
            .iter()
            .find(|(k, _)| matches!(&k.value, tree::NodeValue::Text(name) if name == key))
            .map(|(_, v)| v)?;
    }
    Some((node.line, node.column))
}

impl Plan {
    /// Reads and validates a plan file, with the same located errors as `linbudget check`
    /// (file, line, column, key path, what is wrong and what is accepted).
    ///
    /// ```
    /// use linbudget::Plan;
    ///
    /// let plan = Plan::from_file("specs/sensor-front-end.yaml")?;
    /// assert_eq!(plan.stages.len(), 2);
    /// let missing = Plan::from_file("specs/no-such-plan.yaml");
    /// assert!(missing.is_err());
    /// # Ok::<(), linbudget::Error>(())
    /// ```
    pub fn from_file(path: impl AsRef<Path>) -> Result<Plan, Error> {
        Ok(PlanSource::read(path.as_ref())?.plan()?)
    }

    /// Parses and validates plan text; `file` names it in errors, and bench files named in
    /// `measurements` are read relative to its folder.
    pub fn from_yaml(text: &str, file: &str) -> Result<Plan, PlanError> {
        read_plan(text, file, &[])
    }

    fn from_tree(root: &tree::Node, plan_dir: &Path) -> Result<Plan, PlanError> {
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
                    .map(read_temperature)
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
        for (index, item) in stage_items.iter().enumerate() {
            let stage = read_stage(item)?;
            if let Some(first) = stages.iter().position(|s: &Stage| s.name == stage.name) {
                return Err(item.error(
                    format!(
                        "stage name `{}` is used twice: stages[{first}] (line {}) and stages[{index}] (line {})",
                        stage.name, stage_items[first].node.line, item.node.line
                    ),
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
        let reference_impedance = top
            .get("reference_impedance")
            .map(|at| at.quantity_where(Unit::Ohm, Range::Positive))
            .transpose()?;
        let budget = match top.get("budget") {
            Some(at) => at
                .seq("budget lines")?
                .iter()
                .map(|line| {
                    read_budget_line(
                        line,
                        &drive,
                        top.get("monte_carlo").is_some(),
                        reference_impedance,
                    )
                })
                .collect::<Result<Vec<_>, _>>()?,
            None => Vec::new(),
        };
        let sizing = top.get("sizing").map(|at| read_sizing(&at)).transpose()?;
        if let (Some(sizing_at), Some(settings)) = (top.get("sizing"), &sizing) {
            if budget.is_empty() {
                return Err(sizing_at.error(
                    "sizing needs budget lines to meet",
                    "a `budget` list alongside `sizing`",
                ));
            }
            check_sizing_applies(&sizing_at, settings, &stages)?;
        }
        let noise_band = top
            .get("noise_band")
            .map(|at| {
                let map = at.map(&["from", "to"])?;
                let from = map.quantity("from", Unit::Hertz, Range::NonNegative)?;
                let to = map.quantity("to", Unit::Hertz, Range::NonNegative)?;
                if to <= from {
                    return Err(reversed(&map, "noise band", from, to, Unit::Hertz));
                }
                Ok(NoiseBand { from, to })
            })
            .transpose()?;

        let corners = corners::read_corners(top.get("corners").as_ref())?;
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

        let cautions =
            plausibility::cautions(&top, &stage_items, &temperatures_c, &stages, &drive)?;
        let measurements = match top.get("measurements") {
            Some(at) => bench::read_measurements(&at, plan_dir, &stages, &corners)?,
            None => Vec::new(),
        };
        let fit = top
            .get("fit")
            .map(|at| bench::read_fit(&at, &measurements, &stages))
            .transpose()?;

        let comparison = top
            .get("comparison")
            .map(|at| read_comparison(&at))
            .transpose()?;
        let plan = Plan {
            comparison,
            measurements,
            fit,
            cautions,
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
        };
        physics::check_bias(&stage_items, STAGE_KEYS, &plan, &plan.corners)?;
        let drive_map = top
            .required("drive", "a mapping with amplitudes and frequencies")?
            .map(DRIVE_KEYS)?;
        physics::check_two_tone(drive_map.get("two_tone_spacing").as_ref(), &plan)?;
        Ok(plan)
    }
}

/// A temperature the device model supports, °C (see [`MODEL_TEMPERATURE_RANGE_C`]).
fn read_temperature(at: &At) -> Result<f64, PlanError> {
    let value = at.quantity_where(Unit::Celsius, Range::Finite)?;
    if temperature_supported(value) {
        return Ok(value);
    }
    let (low, high) = MODEL_TEMPERATURE_RANGE_C;
    Err(at.error(
        format!(
            "{} °C is outside the temperatures the device model supports",
            short_number(value)
        ),
        format!(
            "a temperature from {} to {} °C: below, carriers freeze out and the exponential junction law and the band-gap law of the saturation current no longer hold (near −255 °C the saturation current is no longer a number a solver can use); above, silicon turns intrinsic",
            short_number(low),
            short_number(high)
        ),
    ))
}

/// Refuses a tail-current law that would turn the tail current off at a plan temperature.
fn check_tail_laws(
    items: &[At],
    stages: &[Stage],
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
                    format!(
                        "the tail current would be {} A at {} °C",
                        short_number(current),
                        short_number(t)
                    ),
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

fn read_stage(at: &At) -> Result<Stage, PlanError> {
    let map = at.map(STAGE_KEYS)?;
    let name_at = map.required("name", "a unique stage name")?;
    let name = name_at.text("a stage name")?.to_owned();
    if name.is_empty() || name.len() > 100 || name.chars().any(|c| c.is_control()) {
        return Err(name_at.error(
            "the stage name is empty, too long or has control characters",
            "1 to 100 printable characters",
        ));
    }
    let transistor = match map.get("transistor") {
        Some(t) => read_transistor(&t)?,
        None => Transistor::default(),
    };
    let stage = Stage {
        name,
        tail_current: map.quantity(
            "tail_current",
            Unit::Ampere,
            Range::Within(TAIL_CURRENT_RANGE_A.0, TAIL_CURRENT_RANGE_A.1),
        )?,
        load_resistance: map.quantity(
            "load_resistance",
            Unit::Ohm,
            Range::Within(LOAD_RESISTANCE_RANGE_OHM.0, LOAD_RESISTANCE_RANGE_OHM.1),
        )?,
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
        supply: map
            .get("supply")
            .map(|at| at.quantity_where(Unit::Volt, Range::Positive))
            .transpose()?,
        input_common_mode: map
            .get("input_common_mode")
            .map(|at| at.quantity_where(Unit::Volt, Range::Finite))
            .transpose()?,
        tail_compliance: map
            .get("tail_compliance")
            .map(|at| at.quantity_where(Unit::Volt, Range::NonNegative))
            .transpose()?,
        transistor,
        mismatch: read_mismatch(&map, "mismatch", Range::Between(-0.9, 9.0))?,
        mismatch_sigma: read_mismatch(&map, "mismatch_sigma", Range::FromUpTo(0.0, 0.5))?,
        tail_current_law: map
            .get("tail_current_law")
            .map(|law| tail::read_tail_law(&law))
            .transpose()?
            .unwrap_or_default(),
        topology: Topology::default(),
        multi_tanh: MultiTanh::default(),
        tail_noise_current: map.quantity_or(
            "tail_noise_current",
            Unit::Ampere,
            Range::NonNegative,
            0.0,
        )?,
    };
    let mut stage = stage;
    read_topology(&map, &mut stage)?;
    Ok(stage)
}

fn read_transistor(at: &At) -> Result<Transistor, PlanError> {
    let map = at.map(TRANSISTOR_KEYS)?;
    let d = Transistor::default();
    Ok(Transistor {
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
        nominal_temperature_c: match map.get("nominal_temperature_c") {
            Some(at) => read_temperature(&at)?,
            None => d.nominal_temperature_c,
        },
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
        reverse_beta: map.quantity_or(
            "reverse_beta",
            Unit::Number,
            Range::PositiveOrInfinite,
            d.reverse_beta,
        )?,
        forward_knee_current: map.quantity_or(
            "forward_knee_current",
            Unit::Ampere,
            Range::PositiveOrInfinite,
            d.forward_knee_current,
        )?,
        reverse_knee_current: map.quantity_or(
            "reverse_knee_current",
            Unit::Ampere,
            Range::PositiveOrInfinite,
            d.reverse_knee_current,
        )?,
        collector_resistance: map.quantity_or(
            "collector_resistance",
            Unit::Ohm,
            Range::NonNegative,
            d.collector_resistance,
        )?,
        reverse_transit_time: map.quantity_or(
            "reverse_transit_time",
            Unit::Second,
            Range::NonNegative,
            d.reverse_transit_time,
        )?,
        reverse_early_voltage: map.quantity_or(
            "reverse_early_voltage",
            Unit::Volt,
            Range::PositiveOrInfinite,
            d.reverse_early_voltage,
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
        load_capacitance: map.quantity_or("load_capacitance", Unit::Ratio, range, 0.0)?,
        emitter_junction_capacitance: map.quantity_or(
            "emitter_junction_capacitance",
            Unit::Ratio,
            range,
            0.0,
        )?,
        collector_junction_capacitance: map.quantity_or(
            "collector_junction_capacitance",
            Unit::Ratio,
            range,
            0.0,
        )?,
        transit_time: map.quantity_or("transit_time", Unit::Ratio, range, 0.0)?,
        tail_current: map.quantity_or("tail_current", Unit::Ratio, range, 0.0)?,
    })
}

/// Emitter-area ratios a multi-tanh pair may have: refused outside (beyond 1000:1 the offset
/// exceeds 7φT and the pair no longer overlaps its neighbours).
pub const AREA_RATIO_RANGE: (f64, f64) = (1.0, 1000.0);

/// Reads `topology` and `multi_tanh`, and refuses the combinations the engines do not solve.
fn read_topology(map: &MapAt, stage: &mut Stage) -> Result<(), PlanError> {
    if let Some(at) = map.get("topology") {
        let accepted = Topology::NAMES.join(", ");
        let name = at.text(&accepted)?;
        stage.topology = Topology::from_name(name).ok_or_else(|| {
            let hint = crate::plan::reader::closest(name, &Topology::NAMES)
                .map(|c| format!(" (did you mean `{c}`?)"))
                .unwrap_or_default();
            at.error(format!("unknown topology `{name}`{hint}"), accepted)
        })?;
    }
    let cell_at = map.get("multi_tanh");
    match (stage.topology, &cell_at) {
        (Topology::MultiTanh, None) => {
            return Err(map
                .required("multi_tanh", "a cell: {form: doublet, area_ratio: 3.73}")
                .unwrap_err())
        }
        (Topology::MultiTanh, Some(at)) => stage.multi_tanh = read_multi_tanh(at)?,
        (_, Some(at)) => {
            return Err(at.error(
                format!(
                    "multi_tanh is given but the topology is {}",
                    stage.topology.name()
                ),
                "multi_tanh only with topology: multi_tanh",
            ))
        }
        (_, None) => {}
    }
    match stage.topology {
        Topology::SplitTail if stage.tail_capacitance > 0.0 => {
            let at = map.get("tail_capacitance").expect("read above");
            Err(at.error(
                "a split tail's source capacitances are not modelled yet (the dynamic engine has one tail node)",
                "tail_capacitance 0 with topology: split_tail",
            ))
        }
        _ => Ok(()),
    }
}

const COMPARISON_KEYS: &[&str] = &["equal", "value"];

fn read_comparison(at: &At) -> Result<ComparisonSettings, PlanError> {
    let map = at.map(COMPARISON_KEYS)?;
    let equal = map.required("equal", "tail_current or input_noise")?;
    let basis = match equal.text("tail_current or input_noise")? {
        "tail_current" => ComparisonBasis::TailCurrent,
        "input_noise" => ComparisonBasis::InputNoise,
        other => {
            return Err(equal.error(
                format!("cannot compare at equal `{other}`"),
                "tail_current or input_noise",
            ))
        }
    };
    let value = match (basis, map.get("value")) {
        (_, None) => None,
        (ComparisonBasis::TailCurrent, Some(v)) => Some(v.quantity_where(
            Unit::Ampere,
            Range::Within(TAIL_CURRENT_RANGE_A.0, TAIL_CURRENT_RANGE_A.1),
        )?),
        // A noise density in V/√Hz: written as volts ("2 nV").
        (ComparisonBasis::InputNoise, Some(v)) => {
            Some(v.quantity_where(Unit::Volt, Range::Within(1e-12, 1e-6))?)
        }
    };
    Ok(ComparisonSettings { basis, value })
}

fn read_multi_tanh(at: &At) -> Result<MultiTanh, PlanError> {
    let map = at.map(MULTI_TANH_KEYS)?;
    if let Some(pairs_at) = map.get("pairs") {
        for key in ["form", "area_ratio", "centre_fraction"] {
            if let Some(other) = map.get(key) {
                return Err(other.error(
                    format!("`{key}` and `pairs` both describe the cell"),
                    "either form (with area_ratio, centre_fraction) or pairs",
                ));
            }
        }
        let items = pairs_at.seq("pairs")?;
        if items.is_empty() || items.len() > 16 {
            return Err(pairs_at.error(
                format!("{} pairs were listed", items.len()),
                "1 to 16 pairs",
            ));
        }
        let mut list = Vec::with_capacity(items.len());
        for item in &items {
            let pair = item.map(TANH_PAIR_KEYS)?;
            let area = Range::Within(1e-3, 1e3);
            list.push(TanhPair {
                area_p: pair.quantity_or("area_p", Unit::Number, area, 1.0)?,
                area_m: pair.quantity_or("area_m", Unit::Number, area, 1.0)?,
                tail_fraction: pair.quantity(
                    "tail_fraction",
                    Unit::Ratio,
                    Range::Within(1e-3, 1.0),
                )?,
                emitter_resistance: pair
                    .get("emitter_resistance")
                    .map(|r| r.quantity_where(Unit::Ohm, Range::NonNegative))
                    .transpose()?,
            });
        }
        let sum: f64 = list.iter().map(|p| p.tail_fraction).sum();
        if (sum - 1.0).abs() > 1e-6 {
            return Err(pairs_at.error(
                format!("the tail fractions add up to {sum}"),
                "tail fractions adding up to 1 (the stage's tail_current is the whole cell's)",
            ));
        }
        return Ok(MultiTanh::pairs_of(list));
    }
    let form_at = map.required("form", "doublet or triplet (or a `pairs` list)")?;
    let form = match form_at.text("doublet or triplet")? {
        "doublet" => MultiTanhForm::Doublet,
        "triplet" => MultiTanhForm::Triplet,
        other => {
            return Err(form_at.error(
                format!("unknown multi-tanh form `{other}`"),
                "doublet or triplet (or a `pairs` list)",
            ))
        }
    };
    let area_ratio = map.quantity(
        "area_ratio",
        Unit::Number,
        Range::Within(AREA_RATIO_RANGE.0, AREA_RATIO_RANGE.1),
    )?;
    let centre_fraction = match (form, map.get("centre_fraction")) {
        (MultiTanhForm::Doublet, Some(c)) => {
            return Err(c.error(
                "a doublet has no centre pair",
                "centre_fraction only with form: triplet",
            ))
        }
        (_, Some(c)) => c.quantity_where(Unit::Ratio, Range::Between(0.0, 1.0))?,
        (_, None) => 1.0 / 3.0,
    };
    Ok(MultiTanh {
        form,
        area_ratio,
        centre_fraction,
        list: Vec::new(),
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
                        "{points} {what} would be held in memory and each solved over whole periods, \
                         more sample solves than any run can finish"
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
                return Err(reversed(&map, &format!("sweep of {what}"), from, to, unit));
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
        None => DEFAULT_THD_HARMONICS,
    };
    Ok(Drive {
        amplitudes,
        frequencies,
        two_tone_spacing,
        thd_harmonics,
    })
}

fn read_monte_carlo(at: &At) -> Result<MonteCarloSettings, PlanError> {
    let map = at.map(&["runs", "seed"])?;
    Ok(MonteCarloSettings {
        // Runs are not held in memory, so the only cap here is representational; the work
        // estimate refuses plans whose runs would take too long.
        runs: map
            .required("runs", "a whole number of runs")?
            .count(1, MAX_RUNS)?,
        seed: match map.get("seed") {
            Some(s) => s.count(0, u64::MAX)?,
            None => 1,
        },
    })
}

/// The number of a limit written in dBm (`"-10 dBm"`), if it is written so.
fn dbm_number(at: &At) -> Option<Result<f64, PlanError>> {
    let text = at.text("").ok()?.trim();
    let number = text.strip_suffix("dBm")?.trim();
    Some(
        number
            .parse::<f64>()
            .ok()
            .filter(|v| v.is_finite())
            .ok_or_else(|| {
                at.error(
                    format!("\"{text}\" is not a level in dBm"),
                    "a number followed by dBm, e.g. \"-10 dBm\"",
                )
            }),
    )
}

fn read_budget_line(
    at: &At,
    drive: &Drive,
    monte_carlo: bool,
    reference_impedance: Option<f64>,
) -> Result<BudgetLine, PlanError> {
    let map = at.map(BUDGET_KEYS)?;
    let metric_at = map.required("metric", METRIC_NAMES)?;
    let metric_name = metric_at.text(METRIC_NAMES)?;
    let metric = Metric::from_name(metric_name)
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
    if metric == Metric::Yield && !monte_carlo {
        return Err(metric_at.error(
            "a yield line needs a Monte Carlo population to count",
            "a `monte_carlo: {runs: 2000, seed: 7}` section alongside the yield line",
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
                "`at` only on hdN, thd, im3 and collector_base_margin lines",
            ));
        }
    }
    if metric == Metric::Yield {
        if let Some(f) = map.get("frequency") {
            return Err(f.error(
                "`frequency` does not apply to a yield line: it counts the runs meeting every other line, each at its own frequency",
                "{metric: yield, min: 99%}",
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
        if let Some(dbm) = dbm_number(&limit_at) {
            let dbm = dbm?;
            let power_like = matches!(metric, Metric::Iip3 | Metric::Oip3 | Metric::P1db);
            return match (power_like, reference_impedance) {
                // P = V²/(2R) of a sine of peak V into R, referred to 1 mW.
                (true, Some(ohms)) => Ok(Some((2.0 * ohms * 1e-3 * 10f64.powf(dbm / 10.0)).sqrt())),
                (true, None) => Err(limit_at.error(
                    "a limit in dBm needs the plan's `reference_impedance`",
                    "reference_impedance: 50 (ohms) at the top of the plan, or the limit in volts, e.g. 300 mV",
                )),
                (false, _) => Err(limit_at.error(
                    format!("{} is not a power: dBm does not apply", metric.name()),
                    "dBm limits on iip3, oip3 and p1db lines only",
                )),
            };
        }
        let value = if metric == Metric::Yield {
            if key == "max" {
                return Err(limit_at.error(
                    "a yield line sets the least pass fraction, so it takes `min`",
                    "{metric: yield, min: 99%}",
                ));
            }
            let fraction = limit_at.quantity(Unit::Ratio)?;
            if !(fraction > 0.0 && fraction <= 1.0) {
                return Err(limit_at.error(
                    format!("a pass fraction of {fraction} is not a yield"),
                    "a fraction above 0 and at most 1, e.g. 99% or 0.99",
                ));
            }
            fraction
        } else if metric.is_dbc() {
            if key == "min" {
                return Err(limit_at.error(
                    format!(
                        "{} is a level relative to the fundamental; a budget bounds it from above",
                        metric.name()
                    ),
                    format!(
                        "`max` with a negative dBc figure, e.g. {{metric: {}, max: -60}}",
                        metric.name()
                    ),
                ));
            }
            let value = limit_at.quantity_where(Unit::Decibel, Range::Finite)?;
            if value > 0.0 {
                return Err(limit_at.error(
                    format!(
                        "a limit of {} dBc would allow {} above the fundamental itself; dBc counts down from the fundamental",
                        short_number(value),
                        metric.name()
                    ),
                    "a negative dBc figure (decibels below the fundamental), e.g. -60",
                ));
            }
            value
        } else if metric.is_decibel() {
            limit_at.quantity_where(Unit::Decibel, Range::Finite)?
        } else if metric == Metric::CollectorBaseMargin {
            // A least reverse bias: zero forbids forward bias, a negative value allows some.
            limit_at.quantity_where(Unit::Volt, Range::Finite)?
        } else {
            // Intercepts, compression, steering range and noise density are all in volts.
            limit_at.quantity_where(Unit::Volt, Range::Positive)?
        };
        Ok(Some(value))
    };
    if map.get("max").is_some() == map.get("min").is_some() {
        return Err(at.error(
            "a budget line needs exactly one of `max` or `min`",
            "{metric: hd3, at: 100 mV, max: -60} or {metric: iip3, min: 300 mV}",
        ));
    }
    if metric == Metric::CollectorBaseMargin {
        if let Some(max_at) = map.get("max") {
            return Err(max_at.error(
                "a collector_base_margin line sets the least reverse bias, with `min`",
                "{metric: collector_base_margin, at: 150 mV, min: 300 mV}",
            ));
        }
    }
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

/// Where a value was written, for a message naming two places: `line 5`, or `--set`.
fn written_at(at: &At) -> String {
    if at.node.line >= overrides::SET_LINE_BASE {
        "given with --set".to_owned()
    } else {
        format!("line {}", at.node.line)
    }
}

/// A `{from, to}` range whose ends are equal or the wrong way round, said in the plan's words
/// and naming where each end is written; located at `to`.
fn reversed(map: &MapAt, what: &str, from: f64, to: f64, unit: Unit) -> PlanError {
    let (Some(from_at), Some(to_at)) = (map.get("from"), map.get("to")) else {
        return PlanError::at(
            0,
            0,
            "",
            format!("the {what} has no `from` or `to`"),
            "{from, to}",
        );
    };
    let show = |v: f64| crate::units::format_si(v, unit.symbol());
    let problem = if from == to {
        format!(
            "the {what} is empty: `from` ({}) and `to` ({}) are both {}",
            written_at(&from_at),
            written_at(&to_at),
            show(from)
        )
    } else {
        format!(
            "the {what} is reversed: `from` is {} ({}) but `to` is {} ({}); `from` is the lower end",
            show(from),
            written_at(&from_at),
            show(to),
            written_at(&to_at)
        )
    };
    to_at.error(problem, "`from` below `to` (swap the two values)")
}

/// One sizing variable's `{from, to}` range, in its unit.
fn read_variable_range(
    map: &MapAt,
    variable: SizingVariable,
) -> Result<Option<VariableRange>, PlanError> {
    let Some(range_at) = map.get(variable.key()) else {
        return Ok(None);
    };
    let (unit, range_kind) = match variable {
        SizingVariable::EmitterResistance => (Unit::Ohm, Range::NonNegative),
        SizingVariable::TailCurrent => (Unit::Ampere, Range::Positive),
        SizingVariable::AreaRatio => (
            Unit::Number,
            Range::Within(AREA_RATIO_RANGE.0, AREA_RATIO_RANGE.1),
        ),
    };
    let range = range_at.map(&["from", "to"])?;
    let from = range.quantity("from", unit, range_kind)?;
    let to = range.quantity("to", unit, range_kind)?;
    if to <= from {
        let what = match variable {
            SizingVariable::EmitterResistance => "sizing range",
            SizingVariable::TailCurrent => "tail-current sizing range",
            SizingVariable::AreaRatio => "area-ratio sizing range",
        };
        return Err(reversed(&range, what, from, to, unit));
    }
    Ok(Some(VariableRange { variable, from, to }))
}

/// Refuses a sizing variable that some stage does not have (the area ratio of a stage that is
/// not a multi-tanh doublet or triplet), at the variable's key.
fn check_sizing_applies(
    sizing_at: &At,
    settings: &SizingSettings,
    stages: &[Stage],
) -> Result<(), PlanError> {
    let map = sizing_at.map(SIZING_KEYS)?;
    for range in &settings.variables {
        if let Some(stage) = stages.iter().find(|s| !range.variable.applies_to(s)) {
            let at = map.get(range.variable.key()).expect("read above");
            let what = match stage.topology {
                Topology::MultiTanh => format!(
                    "a multi-tanh cell of form `{}`",
                    stage.multi_tanh.form.name()
                ),
                other => format!("topology `{}`", other.name()),
            };
            return Err(at.error(
                format!(
                    "sizing `{}` needs every stage to have one, but stage `{}` is {what}",
                    range.variable.key(),
                    stage.name
                ),
                "area_ratio only when every stage is `topology: multi_tanh` with `form: doublet` or `form: triplet`",
            ));
        }
    }
    Ok(())
}

fn read_sizing(at: &At) -> Result<SizingSettings, PlanError> {
    let map = at.map(SIZING_KEYS)?;
    let mut variables = Vec::new();
    for variable in SizingVariable::ALL {
        if let Some(range) = read_variable_range(&map, variable)? {
            variables.push(range);
        }
    }
    let names = SizingVariable::ALL
        .iter()
        .map(|v| format!("`{}`", v.key()))
        .collect::<Vec<_>>()
        .join(" or ");
    if variables.len() > 2 {
        let third = map.get(variables[2].variable.key()).expect("read above");
        return Err(third.error(
            format!(
                "sizing searches at most two variables together, and `{}`, `{}` and `{}` are given",
                variables[0].variable.key(),
                variables[1].variable.key(),
                variables[2].variable.key()
            ),
            format!("one or two of {names}"),
        ));
    }
    if variables.is_empty() {
        return Err(at.error(
            "sizing names no variable to choose",
            format!(
                "at least one of {names}, each with {{from, to}}, e.g. `emitter_resistance: {{from: 0, to: 5k}}`"
            ),
        ));
    }
    let default_objective = if variables
        .iter()
        .any(|v| v.variable == SizingVariable::TailCurrent)
    {
        SizingVariable::TailCurrent
    } else {
        SizingVariable::EmitterResistance
    };
    let minimise = match map.get("minimise") {
        None => default_objective,
        Some(objective_at) => {
            let listed = variables
                .iter()
                .map(|v| format!("`{}`", v.variable.key()))
                .collect::<Vec<_>>()
                .join(" or ");
            let accepted = format!("one of the variables sizing chooses: {listed}");
            let name = objective_at.text(&accepted)?;
            match SizingVariable::from_key(name) {
                Some(v) if variables.iter().any(|r| r.variable == v) => v,
                Some(v) => {
                    return Err(objective_at.error(
                        format!(
                            "`minimise: {}` needs `{}` among the sizing variables (with a range)",
                            v.key(),
                            v.key()
                        ),
                        accepted,
                    ))
                }
                None => {
                    return Err(
                        objective_at.error(format!("`{name}` is not a sizing variable"), accepted)
                    )
                }
            }
        }
    };
    let hold_gain = match map.get("hold_gain") {
        Some(h) => h.boolean()?,
        None => false,
    };
    let guard_band_db = map.quantity_or(
        "guard_band_db",
        Unit::Decibel,
        Range::Within(0.0, 40.0),
        0.0,
    )?;
    Ok(SizingSettings {
        variables,
        minimise,
        hold_gain,
        guard_band_db,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::corner::TYPICAL;
    use crate::model::tail::TailCurrentLaw;

    const MINIMAL: &str =
        "name: p\nstages:\n  - {name: a, tail_current: 800 uA, load_resistance: 2.2k}\ndrive: {amplitudes: [100 mV]}\n";

    fn read(text: &str) -> Plan {
        Plan::from_yaml(text, "p.yaml").unwrap()
    }

    fn stage_with(keys: &str) -> Stage {
        let text = format!(
            "name: p\nstages:\n  - {{name: a, tail_current: 1 mA, load_resistance: 2k, {keys}}}\ndrive: {{amplitudes: [1 mV]}}\n"
        );
        read(&text).stages.remove(0)
    }

    /// A limit in dBm is read into peak volts with P = V²/(2R): 10 dBm into 50 Ω is 1 V
    /// peak (common practice); without `reference_impedance`, or on a dB metric, it is refused.
    #[test]
    fn dbm_limits_need_a_reference_impedance() {
        let with = |top: &str, line: &str| {
            format!("{MINIMAL}{top}budget:\n  - {line}\n").replace(
                "drive: {amplitudes: [100 mV]}",
                "drive: {amplitudes: [100 mV], two_tone_spacing: 1 kHz}",
            )
        };
        let plan = read(&with(
            "reference_impedance: 50\n",
            "{metric: iip3, min: \"10 dBm\"}",
        ));
        match plan.budget[0].limit {
            Limit::Min(v) => assert!((v - 1.0).abs() < 1e-12, "{v}"),
            other => panic!("{other:?}"),
        }
        let error = Plan::from_yaml(&with("", "{metric: iip3, min: \"10 dBm\"}"), "p.yaml")
            .unwrap_err()
            .to_string();
        assert!(error.contains("reference_impedance"), "{error}");
        let error = Plan::from_yaml(
            &with(
                "reference_impedance: 50\n",
                "{metric: hd3, max: \"-10 dBm\"}",
            ),
            "p.yaml",
        )
        .unwrap_err()
        .to_string();
        assert!(error.contains("dBm does not apply"), "{error}");
    }

    #[test]
    fn quantities_are_read_into_si_base_units() {
        let plan = read(MINIMAL);
        let stage = &plan.stages[0];
        assert!((stage.tail_current - 800e-6).abs() < 1e-18);
        assert!((stage.load_resistance - 2200.0).abs() < 1e-9);
        assert!((plan.drive.amplitudes[0] - 0.1).abs() < 1e-15);
        let stage =
            stage_with("emitter_resistance: 470 ohm, load_capacitance: 1 pF, supply: 3.3 V");
        assert_eq!(stage.emitter_resistance, 470.0);
        assert!((stage.load_capacitance - 1e-12).abs() < 1e-24);
        assert_eq!(stage.supply, Some(3.3));
    }

    #[test]
    fn absent_keys_take_their_documented_defaults() {
        let plan = read(MINIMAL);
        assert_eq!(plan.temperatures_c, vec![27.0]);
        assert_eq!(plan.drive.frequencies, vec![1e3]);
        assert_eq!(plan.drive.thd_harmonics, DEFAULT_THD_HARMONICS);
        assert_eq!(plan.drive.two_tone_spacing, None);
        assert_eq!(plan.corners.len(), 1);
        assert_eq!(plan.corners[0].name, TYPICAL);
        let stage = &plan.stages[0];
        assert_eq!(stage.supply, None);
        assert_eq!(stage.supply_v(), 5.0);
        assert_eq!(stage.input_common_mode_v(), 2.5);
        assert!(stage.bias_is_default());
        assert!(stage.tail_resistance.is_infinite());
        assert_eq!(stage.emitter_resistance, 0.0);
        assert_eq!(stage.transistor, Transistor::default());
        assert_eq!(stage.tail_current_law, TailCurrentLaw::Constant);
        let with_mc = read(&format!("{MINIMAL}monte_carlo: {{runs: 10}}\n"));
        assert_eq!(with_mc.monte_carlo.unwrap().seed, 1);
    }

    #[test]
    fn sweeps_are_log_spaced_unless_linear_and_include_both_ends() {
        let log = read(
            "name: p\nstages:\n  - {name: a, tail_current: 1 mA, load_resistance: 2k}\ndrive:\n  amplitudes: {from: 1 mV, to: 1 V, points: 4}\n",
        );
        let expected = [1e-3, 1e-2, 1e-1, 1.0];
        for (got, want) in log.drive.amplitudes.iter().zip(expected) {
            assert!((got / want - 1.0).abs() < 1e-12, "{got} vs {want}");
        }
        let linear = read(
            "name: p\nstages:\n  - {name: a, tail_current: 1 mA, load_resistance: 2k}\ndrive:\n  amplitudes: {from: 10 mV, to: 40 mV, points: 4, spacing: linear}\n",
        );
        for (got, want) in linear.drive.amplitudes.iter().zip([0.01, 0.02, 0.03, 0.04]) {
            assert!((got - want).abs() < 1e-15, "{got} vs {want}");
        }
    }

    #[test]
    fn percentages_and_fractions_both_read_as_fractions() {
        let stage = stage_with("mismatch: {saturation_current: 1%, beta: 0.02}");
        assert!((stage.mismatch.saturation_current - 0.01).abs() < 1e-15);
        assert!((stage.mismatch.beta - 0.02).abs() < 1e-15);
    }

    #[test]
    fn tail_laws_are_read_by_name_or_coefficient() {
        assert_eq!(
            stage_with("tail_current_law: ptat").tail_current_law,
            TailCurrentLaw::Ptat
        );
        assert_eq!(
            stage_with("tail_current_law: constant").tail_current_law,
            TailCurrentLaw::Constant
        );
        assert_eq!(
            stage_with("tail_current_law: {temperature_coefficient: 0.2%}").tail_current_law,
            TailCurrentLaw::Coefficient(0.002)
        );
        let text = "name: p\nstages:\n  - {name: a, tail_current: 1 mA, load_resistance: 2k, tail_current_law: ctat}\ndrive: {amplitudes: [1 mV]}\n";
        let err = Plan::from_yaml(text, "p.yaml").unwrap_err();
        assert_eq!(err.key_path, "stages[0].tail_current_law");
        assert!(err.problem.contains("unknown tail-current law `ctat`"));
        assert!(err.accepted.contains("ptat"));
    }

    #[test]
    fn a_misspelt_key_is_refused_with_the_nearest_name() {
        let text = "name: p\nstages:\n  - {name: a, tail_current: 1 mA, load_resistence: 2k}\ndrive: {amplitudes: [1 mV]}\n";
        let err = Plan::from_yaml(text, "p.yaml").unwrap_err();
        assert_eq!(err.key_path, "stages[0].load_resistence");
        assert_eq!((err.line, err.column), (3, 35));
        assert!(
            err.problem.contains("did you mean `load_resistance`?"),
            "{err}"
        );
    }

    #[test]
    fn a_quantity_with_the_wrong_unit_names_the_unit_it_needs() {
        let text = "name: p\nstages:\n  - {name: a, tail_current: 1 mV, load_resistance: 2k}\ndrive: {amplitudes: [1 mV]}\n";
        let err = Plan::from_yaml(text, "p.yaml").unwrap_err();
        assert_eq!(err.key_path, "stages[0].tail_current");
        assert!(err.accepted.contains("A"), "{err}");
    }

    #[test]
    fn temperatures_below_absolute_zero_are_refused() {
        let err =
            Plan::from_yaml(&format!("temperatures_c: [-300]\n{MINIMAL}"), "p.yaml").unwrap_err();
        assert_eq!(err.key_path, "temperatures_c[0]");
    }

    #[test]
    fn the_key_locator_finds_nested_values() {
        let source = PlanSource {
            text: format!("{MINIMAL}monte_carlo:\n  runs: 5\n"),
            shown: "p.yaml".into(),
            overrides: Vec::new(),
        };
        let err = source.error_at_key("monte_carlo.runs", "too many", "fewer");
        assert_eq!((err.line, err.column), (6, 9));
        assert_eq!(err.key_path, "monte_carlo.runs");
        let missing = source.error_at_key("no.such.key", "x", "y");
        assert_eq!(missing.line, 0);
    }
}
