//! The report layer: the records of `report.json`, built from a plan's typed evaluation
//! ([`build`], the one place warnings are worded), the queries figures and tables share
//! ([`queries`]), one table model for every Markdown and HTML table ([`table`]), and the
//! writers: JSON ([`json`]), CSV ([`csv`]), `summary.md` ([`summary`]) and the datasheet
//! report ([`datasheet`]).
//!
//! `report.json` is [`Report`] serialised; its field names and meanings are fixed by the
//! plan-and-report contract (see README). Extra fields are additions, never renames.

pub mod build;
pub mod correlation;
pub mod csv;
pub mod datasheet;
pub mod json;
pub mod queries;
pub mod sizing_region;
pub mod summary;
pub mod table;
pub mod text;

use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

/// Caution carried by every report.
pub const CAUTION: &str = "These figures are model predictions. Confirm them against measured silicon and the foundry's device models, following your local qualification practice, before committing a design or a datasheet limit.";

impl BudgetRecord {
    /// A limit or value of this line in its unit: SI-prefixed volts, a percentage for a
    /// yield, or dB to two decimals.
    pub fn quantity_text(&self, value: f64) -> String {
        quantity_text(&self.unit, value)
    }

    /// The margin as a table shows it: dB to two decimals (percentage points for a yield),
    /// with `≥` when it is only a lower bound.
    pub fn margin_text(&self) -> String {
        match self.margin {
            Some(m) if m.is_finite() => {
                let number = if self.unit == YIELD_UNIT {
                    format!("{:.2}", 100.0 * m)
                } else if self.margin_unit == "V" {
                    // Three significant figures with an SI prefix and a true minus (as
                    // `text::si_short`, which imports this module).
                    crate::units::format_si_trimmed(m, "V", 3).replace('-', "\u{2212}")
                } else {
                    format!("{m:.2}")
                };
                if self.margin_at_least {
                    format!("≥ {number}")
                } else {
                    number
                }
            }
            _ => "—".into(),
        }
    }
}

/// Unit label of a yield line's limit and value (a fraction of the runs).
pub const YIELD_UNIT: &str = "fraction";

/// A value in a budget unit: SI-prefixed volts, a percentage for a yield, or dB to two
/// decimals.
pub fn quantity_text(unit: &str, value: f64) -> String {
    if unit.starts_with('V') {
        crate::units::format_si(value, unit)
    } else if unit == YIELD_UNIT {
        format!("{:.2} %", 100.0 * value)
    } else {
        format!("{value:.2} {unit}")
    }
}

/// The whole result of a plan: what `report.json` holds.
///
/// ```
/// use linbudget::{Drive, Plan, Report, Stage};
///
/// let report: Report = Plan::new("r", vec![Stage::new("pair", 1e-3, 2e3)], Drive::new(vec![0.01]))
///     .evaluate()?;
/// let json = serde_json::to_string(&report).unwrap();
/// let back: Report = serde_json::from_str(&json).unwrap();
/// assert_eq!(back, report);
/// assert!(report.met()); // no budget: met
/// # Ok::<(), linbudget::Error>(())
/// ```
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct Report {
    /// Plan name.
    pub plan: String,
    /// Single-tone (and two-tone) results per stage, temperature, frequency and amplitude.
    pub points: Vec<PointRecord>,
    /// Intercepts, compression and small-signal figures per stage, temperature and frequency.
    pub intercepts: Vec<InterceptRecord>,
    /// Monte Carlo distributions per drive point and metric.
    pub monte_carlo: Vec<MonteCarloRecord>,
    /// Monte Carlo yield against the budget per stage and temperature.
    #[serde(rename = "yield")]
    pub yield_: Vec<YieldRecord>,
    /// Budget verdict per stage, temperature and line.
    pub budget: Vec<BudgetRecord>,
    /// Degeneration sizing per stage and temperature.
    pub sizing: Vec<SizingRecord>,
    /// Sizing over a region of several variables (tail current and emitter resistance), one
    /// per stage: the map of the region, the edges' binding lines and the Pareto fronts.
    #[serde(default)]
    pub sizing_region: Vec<RegionRecord>,
    /// Typical, minimum and maximum of each figure across the process corners.
    #[serde(default)]
    pub corner_spread: Vec<SpreadRecord>,
    /// Per-stage, per-temperature operating point and transfer figures.
    pub stages: Vec<StageRecord>,
    /// Every parameter of every stage fitted to bench data.
    #[serde(default)]
    pub fit: Vec<FitRecord>,
    /// How each fit went: residuals before and after, correlation matrix, convergence.
    #[serde(default)]
    pub fit_summary: Vec<FitSummaryRecord>,
    /// Every measured value next to the model's (nominal stage, and fitted stage when fitted).
    #[serde(default)]
    pub residuals: Vec<ResidualRecord>,
    /// Worst and rms residual per model stage and metric.
    #[serde(default)]
    pub residual_summary: Vec<ResidualSummaryRecord>,
    /// Analysis settings that qualify every figure.
    pub analysis: AnalysisRecord,
    /// Warnings raised while evaluating (also printed on standard error).
    pub warnings: Vec<String>,
    /// Whether the plan is met (see the exit-status rules): the same as `verdict.met`.
    pub met: bool,
    /// The verdicts on the design as planned and on the recommended design, and which one
    /// `met` is about.
    #[serde(default)]
    pub verdict: VerdictRecord,
    /// Caution to confirm against silicon.
    pub caution: String,
    /// The planned stages compared at equal tail current or equal input noise (plans with
    /// `comparison`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub scheme_comparison: Option<SchemeComparisonRecord>,
}

/// The planned stages compared at equal terms.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SchemeComparisonRecord {
    /// What is held equal: `tail_current` or `input_noise`.
    pub equal: String,
    /// The common value: A, or V/√Hz.
    pub value: f64,
    /// Temperature, °C.
    pub temperature_c: f64,
    /// Frequency, Hz.
    pub frequency_hz: f64,
    /// Amplitudes of the HD3 and IM3 lists, peak differential V.
    pub amplitudes_v: Vec<f64>,
    /// One row per planned stage.
    pub rows: Vec<SchemeRowRecord>,
}

/// One stage of the comparison, as compared.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SchemeRowRecord {
    /// The planned stage.
    pub stage: String,
    /// Its circuit form.
    pub topology: String,
    /// Its multi-tanh cell in words.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub cell: Option<String>,
    /// Impedance scale k applied (1 at equal current).
    pub impedance_scale: f64,
    /// Tail current as compared, A.
    pub tail_current_a: f64,
    /// Load per side as compared, Ω.
    pub load_resistance_ohm: f64,
    /// Emitter resistance per side (half the split tail's resistor) as compared, Ω.
    pub emitter_resistance_ohm: f64,
    /// Small-signal gain, dB.
    pub gain_db: f64,
    /// IIP3, peak V per tone (null where the IM3 slope is never 3:1).
    pub iip3_v: Option<f64>,
    /// White input noise, V/√Hz.
    pub input_noise_v_rthz: f64,
    /// Voltage across the tail source at zero input, V.
    pub tail_source_voltage_v: f64,
    /// Headroom the degeneration takes at zero input, V.
    pub degeneration_drop_v: f64,
    /// HD3 at each amplitude, dBc (null below the floor).
    pub hd3_dbc: Vec<Option<f64>>,
    /// IM3 at each amplitude, dBc (null below the floor or without two tones).
    pub im3_dbc: Vec<Option<f64>>,
}

impl Report {
    /// Whether the plan is met: every budget line passes for every stage (or there is no
    /// budget), or, where the plan asks for sizing, the recommended design (each stage with
    /// the emitter resistance to build) meets every line. `run --as-planned` judges the stages
    /// as written instead; `verdict` holds both answers.
    pub fn met(&self) -> bool {
        self.met
    }
}

/// The verdicts of a plan: the design as planned, the recommended design, and the answer.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq, Default)]
pub struct VerdictRecord {
    /// The overall answer (what the exit status says).
    pub met: bool,
    /// Which design `met` is about: `recommended` (plans with sizing) or `as_planned`.
    pub judged: String,
    /// The answer in one line, naming the design that met.
    pub summary: String,
    /// The stages as written in the plan.
    pub as_planned: DesignVerdictRecord,
    /// The recommended design: each stage with the emitter resistance (and load) to build,
    /// evaluated in full as a derived stage (plans with sizing).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub recommended: Option<RecommendedVerdictRecord>,
}

/// The verdict on one design.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq, Default)]
pub struct DesignVerdictRecord {
    /// Whether every check passes.
    pub met: bool,
    /// Checks made: budget lines × stages × temperatures × corners.
    pub checks: usize,
    /// The checks that fail.
    pub failing: Vec<FailingCheckRecord>,
}

/// One failing check, with the figures that decide it.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct FailingCheckRecord {
    /// Stage name (the derived stage's for the recommended design).
    pub stage: String,
    /// Temperature, °C.
    pub temperature_c: f64,
    /// Process corner.
    pub corner: String,
    /// Metric name.
    pub metric: String,
    /// Input amplitude the line applies at, V.
    pub at_v: Option<f64>,
    /// `max` or `min`.
    pub kind: String,
    /// The limit.
    pub limit: f64,
    /// The value (null: below the floor, unbounded, or not estimated).
    pub value: Option<f64>,
    /// The margin (negative), dB (a fraction for yield lines).
    pub margin: Option<f64>,
    /// Unit of `limit` and `value`.
    pub unit: String,
    /// The check in words.
    pub text: String,
}

/// The verdict on the recommended design.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq, Default)]
pub struct RecommendedVerdictRecord {
    /// Whether every check of the recommended design passes.
    pub met: bool,
    /// Checks made.
    pub checks: usize,
    /// The checks that fail.
    pub failing: Vec<FailingCheckRecord>,
    /// Per planned stage, the values to build.
    pub stages: Vec<RecommendedStageRecord>,
}

/// The values sizing recommends for one planned stage.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct RecommendedStageRecord {
    /// The planned stage.
    pub stage: String,
    /// The derived stage the recommended design is evaluated as (`<stage>@sized`): its
    /// records in `points`, `intercepts`, `budget`, `stages`, … carry this name.
    pub evaluated_as: String,
    /// Emitter resistance per side to build, Ω.
    pub emitter_resistance_ohm: f64,
    /// Load resistance per side to build, Ω (rescaled with `hold_gain`).
    pub load_resistance_ohm: f64,
    /// Tail current to build, A (the plan's unless sizing chooses it).
    #[serde(default)]
    pub tail_current_a: f64,
    /// The plan's emitter resistance, Ω.
    pub planned_emitter_resistance_ohm: f64,
    /// The plan's tail current, A.
    #[serde(default)]
    pub planned_tail_current_a: f64,
    /// Multi-tanh area ratio to build, when sizing chooses it (`null` otherwise).
    #[serde(default)]
    pub area_ratio: Option<f64>,
    /// The plan's multi-tanh area ratio, when sizing chooses it.
    #[serde(default)]
    pub planned_area_ratio: Option<f64>,
    /// The plan's load resistance, Ω.
    pub planned_load_resistance_ohm: f64,
    /// Whether sizing found a value holding every line (by the guard band) at every
    /// temperature.
    pub found: bool,
    /// How the value was found: `least_in_common_window`, `least_meeting_reachable_lines`,
    /// `best_worst_margin`, `least_in_common_window_meeting_yield`, or, for a region of
    /// several variables, `least_in_region`, `best_in_region`, `least_in_region_meeting_yield`.
    pub basis: String,
    /// Windows of R_E holding every line at every temperature, Ω.
    pub window_ohm: Vec<[f64; 2]>,
    /// Lines no value in the range meets, with their best value and where it occurs.
    pub unreachable: Vec<UnreachableRecord>,
    /// Advice about the sizing range.
    pub hints: Vec<String>,
}

/// A budget line that no emitter resistance in the sizing range meets at one temperature.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct UnreachableRecord {
    /// Stage name.
    pub stage: String,
    /// Temperature, °C.
    pub temperature_c: f64,
    /// Metric name.
    pub metric: String,
    /// Input amplitude the line applies at, V.
    pub at_v: Option<f64>,
    /// `max` or `min`.
    pub kind: String,
    /// The limit.
    pub limit: f64,
    /// Unit of `limit` and `best_value`.
    pub unit: String,
    /// The best value reached in the range (worst corner).
    pub best_value: Option<f64>,
    /// The margin there (negative), dB.
    pub best_margin: Option<f64>,
    /// Where the best value occurs, Ω.
    pub at_emitter_resistance_ohm: f64,
    /// The corner giving that value.
    pub corner: String,
    /// The line in words.
    pub text: String,
}

/// How the figures were obtained.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct AnalysisRecord {
    /// Harmonics below this level are reported as null, dBc.
    pub analysis_floor_dbc: f64,
    /// THD sums harmonics 2 through this order.
    pub thd_harmonics: usize,
    /// Largest change of any figure accepted as converged when the sample count doubles, dB.
    pub convergence_db: f64,
    /// Fraction of the tail current defining the steering range.
    pub steering_fraction: f64,
    /// Tool version.
    pub version: String,
}

/// One drive point.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct PointRecord {
    /// Stage name.
    pub stage: String,
    /// Temperature, °C.
    pub temperature_c: f64,
    /// Signal frequency, Hz.
    pub frequency_hz: f64,
    /// Peak differential input per tone, V.
    pub amplitude_v: f64,
    /// Peak differential output fundamental, V.
    pub fundamental_v: f64,
    /// 20·log10(fundamental_v / amplitude_v), dB.
    pub gain_db: f64,
    /// hd2_dbc … hdN_dbc: harmonics of the differential output, dBc (null below the floor).
    #[serde(flatten)]
    pub harmonics: Harmonics,
    /// THD over harmonics 2 through thd_harmonics, dBc.
    pub thd_dbc: Option<f64>,
    /// Larger third-order product relative to one tone's output, dBc (two-tone plans only).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub im3_dbc: Option<Option<f64>>,
    /// Larger second-order product (f2−f1 or f1+f2) relative to one tone, dBc (two-tone only).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub im2_dbc: Option<Option<f64>>,
    /// Intercept extrapolated from this point alone: A·10^(−IM3/40), V (two-tone only).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub iip3_effective_v: Option<Option<f64>>,
    /// Peak differential output of one tone in the two-tone test, V (two-tone only).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub two_tone_fundamental_v: Option<f64>,
    /// Peak fundamental of the P-side collector voltage, V.
    pub single_ended_fundamental_v: f64,
    /// HD2 of the P-side collector voltage, dBc.
    pub single_ended_hd2_dbc: Option<f64>,
    /// HD3 of the P-side collector voltage, dBc.
    pub single_ended_hd3_dbc: Option<f64>,
    /// Samples per period used (converged).
    pub samples: usize,
    /// This point's analysis floor, dBc: harmonics below it are null. The analysis floor of
    /// the report, or higher for a small drive whose fundamental nears the solve's precision.
    #[serde(default = "default_floor_dbc")]
    pub floor_dbc: f64,
    /// True when the point was answered from the small-signal power series through two
    /// larger drives (a drive too small to solve directly to full precision).
    #[serde(default, skip_serializing_if = "std::ops::Not::not")]
    pub from_series: bool,
    /// IM3's floor at this point, dBc (two-tone only), when above `floor_dbc`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub im3_floor_dbc: Option<f64>,
    /// IM2's floor at this point, dBc (two-tone only), when above `floor_dbc`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub im2_floor_dbc: Option<f64>,
    /// The product of higher order that shares IM3's frequency and sets its floor
    /// (stages with capacitance), e.g. "8f1 − 7f2".
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub im3_limited_by: Option<String>,
    /// The product of higher order that shares IM2's frequency and sets its floor, e.g.
    /// "10f1 − 9f2".
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub im2_limited_by: Option<String>,
    /// Worst operating region of either transistor over the single-tone period.
    pub region: Region,
    /// The least collector-base reverse bias (intrinsic junction) over the single-tone
    /// period, V; negative when a junction is forward-biased.
    pub collector_base_margin_v: f64,
    /// Smallest collector current over the period relative to the tail current.
    pub min_current_fraction: f64,
    /// Worst operating region over the two-tone drive (two-tone plans only; its peak is
    /// twice one tone's).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub two_tone_region: Option<Region>,
    /// The least collector-base reverse bias over the two-tone drive, V (two-tone only).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub two_tone_collector_base_margin_v: Option<f64>,
    /// Process corner.
    #[serde(default)]
    pub corner: String,
    /// Signal (input sine, rms) over the input noise integrated across the plan's noise band, dB.
    #[serde(default)]
    pub snr_db: Option<f64>,
    /// Fundamental over the largest harmonic spur, dBc (null: no spur above the floor).
    #[serde(default)]
    pub sfdr_dbc: Option<f64>,
    /// Signal over the larger of the band noise and the largest spur, dB.
    #[serde(default)]
    pub dynamic_range_db: Option<f64>,
}

fn default_floor_dbc() -> f64 {
    crate::solve::spectrum::ANALYSIS_FLOOR_DBC
}

impl PointRecord {
    /// Harmonic `order` in dBc, if reported and above the floor.
    pub fn harmonic(&self, order: usize) -> Option<f64> {
        self.harmonics.get(order)
    }
}

/// The named harmonics of one drive point, HD2 upward without gaps: dBc of the differential
/// output, `None` below the analysis floor. Serialised as one field per order, `hd2_dbc`,
/// `hd3_dbc`, … (flattened into the point).
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Harmonics {
    /// Level of order `k` at index `k − 2`.
    levels: Vec<Option<f64>>,
}

impl Harmonics {
    /// Harmonics from HD2 upward (`levels[0]` is HD2).
    pub fn from_levels(levels: Vec<Option<f64>>) -> Self {
        Harmonics { levels }
    }

    /// Level of harmonic `order` in dBc, if named and above the floor.
    pub fn get(&self, order: usize) -> Option<f64> {
        order
            .checked_sub(2)
            .and_then(|i| self.levels.get(i))
            .copied()
            .flatten()
    }

    /// Highest order named (1 when none is).
    pub fn highest_order(&self) -> usize {
        self.levels.len() + 1
    }

    /// `(order, level)` of every named harmonic, in increasing order.
    pub fn iter(&self) -> impl Iterator<Item = (usize, Option<f64>)> + '_ {
        self.levels.iter().enumerate().map(|(i, v)| (i + 2, *v))
    }

    /// The report field name of harmonic `order` (`hd3_dbc`).
    pub fn field_name(order: usize) -> std::borrow::Cow<'static, str> {
        const NAMES: [&str; 8] = [
            "hd2_dbc", "hd3_dbc", "hd4_dbc", "hd5_dbc", "hd6_dbc", "hd7_dbc", "hd8_dbc", "hd9_dbc",
        ];
        match order.checked_sub(2).and_then(|i| NAMES.get(i)) {
            Some(name) => (*name).into(),
            None => format!("hd{order}_dbc").into(),
        }
    }

    /// The order a field name stands for (`hd3_dbc` → 3).
    fn order_of(field: &str) -> Option<usize> {
        field
            .strip_prefix("hd")?
            .strip_suffix("_dbc")?
            .parse::<usize>()
            .ok()
            .filter(|k| (2..=MAX_NAMED_ORDER).contains(k))
    }
}

/// Where the transistors operate over a drive: the worst region either reached.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Region {
    /// Both collector-base junctions reverse-biased, no high-level injection.
    ForwardActive,
    /// High-level injection (the knee cut the transport current by more than 1 %).
    HighInjection,
    /// A collector-base junction forward-biased (saturation).
    Saturating,
}

impl Region {
    /// The name written in reports (`forward-active`, `high-injection`, `saturating`).
    pub fn name(self) -> &'static str {
        match self {
            Region::ForwardActive => "forward-active",
            Region::HighInjection => "high-injection",
            Region::Saturating => "saturating",
        }
    }

    /// Whether the drive stayed forward-active.
    pub fn is_forward_active(self) -> bool {
        self == Region::ForwardActive
    }

    /// Forward-active (the default of records written before a field existed).
    pub fn forward_active() -> Region {
        Region::ForwardActive
    }
}

/// Highest harmonic order read back from a report (a guard against absurd field names).
const MAX_NAMED_ORDER: usize = 1024;

impl Serialize for Harmonics {
    fn serialize<S: serde::Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        use serde::ser::SerializeMap;
        let mut map = serializer.serialize_map(Some(self.levels.len()))?;
        for (order, level) in self.iter() {
            map.serialize_entry(&*Harmonics::field_name(order), &level)?;
        }
        map.end()
    }
}

impl<'de> Deserialize<'de> for Harmonics {
    fn deserialize<D: serde::Deserializer<'de>>(deserializer: D) -> Result<Self, D::Error> {
        struct Fields;
        impl<'de> serde::de::Visitor<'de> for Fields {
            type Value = Harmonics;
            fn expecting(&self, f: &mut std::fmt::Formatter) -> std::fmt::Result {
                f.write_str("fields hd2_dbc, hd3_dbc, … holding dBc or null")
            }
            fn visit_map<A: serde::de::MapAccess<'de>>(
                self,
                mut map: A,
            ) -> Result<Harmonics, A::Error> {
                let mut found: BTreeMap<usize, Option<f64>> = BTreeMap::new();
                while let Some(key) = map.next_key::<String>()? {
                    match Harmonics::order_of(&key) {
                        Some(order) => {
                            found.insert(order, map.next_value()?);
                        }
                        None => {
                            map.next_value::<serde::de::IgnoredAny>()?;
                        }
                    }
                }
                let highest = found.keys().next_back().copied().unwrap_or(1);
                Ok(Harmonics::from_levels(
                    (2..=highest)
                        .map(|k| found.get(&k).copied().flatten())
                        .collect(),
                ))
            }
        }
        deserializer.deserialize_map(Fields)
    }
}

/// Intercepts and small-signal figures of one stage, temperature and frequency.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct InterceptRecord {
    /// Stage name.
    pub stage: String,
    /// Temperature, °C.
    pub temperature_c: f64,
    /// Frequency, Hz.
    pub frequency_hz: f64,
    /// Input third-order intercept, peak V per tone (null if IM3 vanishes).
    pub iip3_v: Option<f64>,
    /// Output third-order intercept, peak V per tone.
    pub oip3_v: Option<f64>,
    /// Input 1 dB compression point, peak V.
    pub p1db_v: Option<f64>,
    /// Input at which one side carries 95 % of the tail current, V.
    pub steering_range_v: f64,
    /// White input-referred differential noise density, V/√Hz.
    pub input_noise_v_rthz: f64,
    /// Small-signal differential gain, dB.
    pub small_signal_gain_db: f64,
    /// Input IIP3 in dBV (peak).
    pub iip3_dbv: Option<f64>,
    /// Input IIP3 in dBm into the plan's reference impedance, if given.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub iip3_dbm: Option<f64>,
    /// Amplitude per tone where IIP3 was extrapolated, V.
    pub iip3_fit_amplitude_v: Option<f64>,
    /// IM3 slope observed at the fit amplitude (3 in a clean small-signal region).
    pub im3_slope: Option<f64>,
    /// Input second-order intercept, peak V per tone (null for a perfectly matched pair).
    pub iip2_v: Option<f64>,
    /// Process corner.
    #[serde(default)]
    pub corner: String,
    /// Noise band of the plan, Hz (from, to).
    #[serde(default)]
    pub noise_band_hz: Option<[f64; 2]>,
    /// Input noise integrated over the band (white and flicker), V rms.
    #[serde(default)]
    pub integrated_noise_v: Option<f64>,
    /// Frequency where flicker noise equals white noise, Hz (null: no flicker noise).
    #[serde(default)]
    pub flicker_corner_hz: Option<f64>,
    /// Third-order spurious-free dynamic range (2/3)·(IIP3 − band noise), dB.
    #[serde(default)]
    pub spurious_free_dynamic_range_db: Option<f64>,
    /// Operating region of a single tone at the P1dB answer (at the largest amplitude tried
    /// when P1dB is unbounded).
    pub p1db_region: Region,
    /// The least collector-base reverse bias at the P1dB answer, V.
    pub p1db_collector_base_margin_v: f64,
    /// Operating region of the two tones at the IIP3 fit amplitude.
    pub iip3_fit_region: Option<Region>,
    /// The least collector-base reverse bias at the IIP3 fit amplitude, V.
    pub iip3_fit_collector_base_margin_v: Option<f64>,
}

/// Operating point and transfer figures of one stage at one temperature.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct StageRecord {
    /// Stage name.
    pub stage: String,
    /// Temperature, °C.
    pub temperature_c: f64,
    /// Thermal voltage φT, V.
    pub thermal_voltage_v: f64,
    /// Small-signal differential gain, V/V.
    pub small_signal_gain: f64,
    /// Small-signal differential transconductance at zero input, S.
    pub transconductance_s: f64,
    /// Differential input that balances the collector currents, V (mismatch offset).
    pub input_offset_v: f64,
    /// Input where the P side carries 5 % of the tail current, V.
    pub steering_low_v: f64,
    /// Input where the P side carries 95 % of the tail current, V.
    pub steering_high_v: f64,
    /// Rule-of-thumb steering range 3φT + 0.9·I_tail·R_E, V, for comparison.
    pub steering_rule_of_thumb_v: f64,
    /// Worst operating region at the two steering points (static).
    pub steering_region: Region,
    /// The least collector-base reverse bias at the steering points, V.
    pub steering_collector_base_margin_v: f64,
    /// Operating region at zero input (the bias point): `high-injection` when the stage is
    /// already past the knee at rest, whatever the drive.
    #[serde(default = "Region::forward_active")]
    pub rest_region: Region,
    /// Collector currents at zero input, A.
    pub collector_currents_a: [f64; 2],
    /// Collector voltages at zero input, V.
    pub collector_voltages_v: [f64; 2],
    /// Tail-node voltage at zero input, V.
    pub tail_voltage_v: f64,
    /// Transfer curve samples.
    pub transfer: Vec<TransferRecord>,
    /// Process corner.
    #[serde(default)]
    pub corner: String,
    /// Tail current at this temperature and corner, A.
    #[serde(default)]
    pub tail_current_a: f64,
    /// Emitter resistance per side, Ω (as built in this corner).
    #[serde(default)]
    pub emitter_resistance_ohm: f64,
    /// Load resistance per side, Ω (as built in this corner).
    #[serde(default)]
    pub load_resistance_ohm: f64,
    /// For a derived stage (the recommended design), the planned stage it was derived from.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub derived_from: Option<String>,
    /// The circuit form: `emitter_resistors`, `split_tail` or `multi_tanh`.
    #[serde(default)]
    pub topology: String,
    /// The multi-tanh cell in words (`doublet, A = 3.73`), for `multi_tanh` stages.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub cell: Option<String>,
    /// Voltage across the tail source at zero input (the lowest, where there are several), V.
    #[serde(default)]
    pub tail_source_voltage_v: f64,
    /// Headroom the degeneration takes at zero input: the lowest emitter less the tail-source
    /// voltage, V (`I·R_E/2` for emitter resistors, 0 for a split tail).
    #[serde(default)]
    pub degeneration_drop_v: f64,
    /// White input noise by source, V/√Hz each (they add in power).
    #[serde(default)]
    pub noise_sources: NoiseSourcesRecord,
}

/// White input-referred noise by source, V/√Hz each; the squares add up to the total.
#[derive(Debug, Clone, Copy, Default, PartialEq, Serialize, Deserialize)]
pub struct NoiseSourcesRecord {
    /// Shot noise of the transistors and thermal noise of their base resistances.
    pub transistors_v_rthz: f64,
    /// Source resistances and the degeneration resistors.
    pub resistors_v_rthz: f64,
    /// Tail sources (`tail_noise_current`).
    pub tail_sources_v_rthz: f64,
    /// Loads.
    pub loads_v_rthz: f64,
}

/// One sample of the transfer curve.
#[derive(Debug, Clone, Copy, Serialize, Deserialize, PartialEq)]
pub struct TransferRecord {
    /// Differential input, V.
    pub input_v: f64,
    /// (I_CP − I_CM)/I_tail.
    pub normalised_current: f64,
    /// (I_EP − I_EM)/(I_EP + I_EM): how the emitter current divides, the quantity the
    /// steering range is defined on (±0.9 at its 95 % edges); it parts from
    /// `normalised_current` where a side saturates.
    #[serde(default)]
    pub emitter_split: f64,
    /// Incremental transconductance, S.
    pub transconductance_s: f64,
    /// Differential output voltage, V.
    pub output_v: f64,
    /// Intrinsic base-collector voltage of the P and M sides, V (positive: that side
    /// saturates).
    #[serde(default)]
    pub base_collector_v: [f64; 2],
}

/// Distribution of one metric over the Monte Carlo runs.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct MonteCarloRecord {
    /// Stage name.
    pub stage: String,
    /// Temperature, °C.
    pub temperature_c: f64,
    /// Frequency, Hz.
    pub frequency_hz: f64,
    /// Amplitude, V.
    pub amplitude_v: f64,
    /// Metric name.
    pub metric: String,
    /// Number of runs.
    pub runs: u64,
    /// Median.
    pub median: Option<f64>,
    /// 5th percentile.
    pub p05: Option<f64>,
    /// 95th percentile.
    pub p95: Option<f64>,
    /// Process corner the draws were made in.
    #[serde(default)]
    pub corner: String,
    /// Unit of the distribution (dBc, dB or V).
    #[serde(default)]
    pub unit: String,
    /// Runs whose figure was below the analysis floor (counted as below everything).
    #[serde(default)]
    pub below_floor_runs: u64,
}

/// Monte Carlo yield against the budget.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct YieldRecord {
    /// Stage name.
    pub stage: String,
    /// Temperature, °C.
    pub temperature_c: f64,
    /// Number of runs.
    pub runs: u64,
    /// Fraction of runs meeting every budget line.
    pub pass_fraction: f64,
    /// Process corner the draws were made in.
    #[serde(default)]
    pub corner: String,
    /// Runs meeting every budget line.
    #[serde(default)]
    pub passing_runs: u64,
    /// Lower end of the confidence interval of the pass fraction.
    #[serde(default)]
    pub pass_fraction_low: f64,
    /// Upper end of the confidence interval of the pass fraction.
    #[serde(default)]
    pub pass_fraction_high: f64,
    /// How the interval was computed.
    #[serde(default)]
    pub interval: String,
    /// The least collector-base reverse bias over every run and every drive a run evaluated,
    /// V (negative: some run saturates).
    #[serde(default)]
    pub least_collector_base_margin_v: f64,
    /// Runs in which some evaluated drive forward-biased a collector-base junction.
    #[serde(default)]
    pub saturating_runs: u64,
    /// Per budget line, the runs that fail it (a run may fail several).
    #[serde(default)]
    pub lines: Vec<YieldLineRecord>,
}

/// How many Monte Carlo runs fail one budget line.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct YieldLineRecord {
    /// Metric name.
    pub metric: String,
    /// Input amplitude the line applies at, V.
    pub at_v: Option<f64>,
    /// `max` or `min`.
    pub kind: String,
    /// The limit.
    pub limit: f64,
    /// Unit of the limit.
    pub unit: String,
    /// Runs failing this line.
    pub failing_runs: u64,
    /// Fraction of the runs failing this line.
    pub failing_fraction: f64,
}

/// One budget line checked for one stage and temperature.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct BudgetRecord {
    /// Stage name.
    pub stage: String,
    /// Temperature, °C.
    pub temperature_c: f64,
    /// Metric name.
    pub metric: String,
    /// Input amplitude the line applies at, V (amplitude-dependent metrics).
    pub at_v: Option<f64>,
    /// Frequency the line applies at, Hz.
    pub frequency_hz: f64,
    /// The limit (dB, or V for intercepts and ranges).
    pub limit: f64,
    /// `max` or `min`.
    pub kind: String,
    /// The measured value (null: below the analysis floor, or unbounded).
    pub value: Option<f64>,
    /// Margin, positive when the line passes: in dB, in volts for `collector_base_margin`, a
    /// fraction for `yield` (see `margin_unit`).
    pub margin: Option<f64>,
    /// Whether the line passes.
    pub pass: bool,
    /// Unit of `limit` and `value`.
    pub unit: String,
    /// Process corner.
    #[serde(default)]
    pub corner: String,
    /// Unit of `margin`: `dB`, `V` for `collector_base_margin` lines, or `fraction` for a
    /// yield line (the pass fraction less the limit: −0.05 is 5 percentage points short).
    pub margin_unit: String,
    /// Operating region of the drive the value rests on: the tone or two tones at `at_v`,
    /// the P1dB answer, the IIP3 fit point, the steering points, or the bias point for
    /// small-signal figures.
    pub region: Region,
    /// The least collector-base reverse bias over that drive, V.
    pub collector_base_margin_v: f64,
    /// The value is below the analysis floor: `margin` is only a lower bound (the limit's
    /// distance to the floor), not a margin to a computed figure.
    #[serde(default)]
    pub margin_at_least: bool,
    /// For a yield line: the 95 % Wilson score interval of the pass fraction.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub interval: Option<[f64; 2]>,
    /// The limit in dBm into the plan's reference impedance (IIP3, OIP3 and P1dB lines of a
    /// plan that gives `reference_impedance`); `limit` stays in volts.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub limit_dbm: Option<f64>,
    /// The value in dBm into the plan's reference impedance (as `limit_dbm`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub value_dbm: Option<f64>,
}

/// Peak volts (a sine) into `ohms` as dBm: `P = V²/(2R)` referred to 1 mW.
pub fn dbm(peak_v: f64, ohms: f64) -> f64 {
    10.0 * (peak_v * peak_v / (2.0 * ohms) / 1e-3).log10()
}

/// Sizing result for one stage and temperature.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct SizingRecord {
    /// Stage name.
    pub stage: String,
    /// Temperature, °C.
    pub temperature_c: f64,
    /// Least emitter resistance meeting every line (or the best found), Ω.
    pub emitter_resistance_ohm: Option<f64>,
    /// Tail current of the design, A (sized when the plan makes it a variable).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub tail_current_a: Option<f64>,
    /// The line with the least margin at the chosen value (or the one that cannot be met).
    pub binding_metric: String,
    /// Whether a value meeting every line was found.
    pub met: bool,
    /// Best worst-line margin reached anywhere in the range, dB.
    pub best_margin: f64,
    /// The binding line's own margin at the chosen value, in `binding_margin_unit` (`dB`, or
    /// `V` for a collector-base margin, the hold-gain headroom or the tail compliance); it
    /// differs from `best_margin` when a line in volts binds.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub binding_margin: Option<f64>,
    /// Unit of `binding_margin`.
    #[serde(default, skip_serializing_if = "String::is_empty")]
    pub binding_margin_unit: String,
    /// Small-signal gain at the chosen value, dB.
    pub gain_db: Option<f64>,
    /// Gain cost relative to the range's lower end, dB.
    pub gain_cost_db: Option<f64>,
    /// Steering range at the chosen value, V.
    pub steering_range_v: Option<f64>,
    /// Load resistance used at the chosen value, Ω (differs from the plan with hold_gain).
    pub load_resistance_ohm: Option<f64>,
    /// Whether the hold-gain collector-base margin (no saturation at the largest budget
    /// amplitude), not distortion, decided the result.
    pub headroom_binds: bool,
    /// Collector-base margin on the hold-gain check at the chosen value, V (hold_gain only;
    /// negative = saturates).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub best_headroom_v: Option<f64>,
    /// The least collector-base reverse bias over every drive evaluated at the chosen value
    /// (each budget line's, in each corner), V.
    #[serde(default)]
    pub collector_base_margin_v: Option<f64>,
    /// Scan of the worst margin and gain versus emitter resistance.
    pub scan: Vec<SizingScanRecord>,
    /// Process corner with the least margin at the chosen value (margins are worst-case).
    #[serde(default)]
    pub binding_corner: String,
    /// Least scanned R_E meeting every line except the noise lines, Ω.
    #[serde(default)]
    pub distortion_least_emitter_resistance_ohm: Option<f64>,
    /// Greatest scanned R_E meeting every noise line, Ω.
    #[serde(default)]
    pub noise_greatest_emitter_resistance_ohm: Option<f64>,
    /// When no value meets both: how far apart the two ranges are, Ω (to scan resolution).
    #[serde(default)]
    pub conflict_gap_ohm: Option<f64>,
    /// Margin every line keeps at the chosen value and inside the windows, dB.
    #[serde(default)]
    pub guard_band_db: f64,
    /// The windows of R_E where every line holds by the guard band, Ω (`[low, high]`).
    #[serde(default)]
    pub window_ohm: Vec<[f64; 2]>,
    /// Lines no value in the range meets, with their best value and where it occurs.
    #[serde(default)]
    pub unreachable: Vec<UnreachableRecord>,
    /// Advice about the range (the answer or the best margin at one of its ends).
    #[serde(default)]
    pub hints: Vec<String>,
}

/// One figure across the process corners of a stage at one temperature.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct SpreadRecord {
    /// Stage name.
    pub stage: String,
    /// Temperature, °C.
    pub temperature_c: f64,
    /// Figure name (a budget metric, or `gain`, `iip3`, `p1db`, `input_noise`, `steering_range`).
    pub metric: String,
    /// Input amplitude, V (amplitude-dependent figures).
    pub at_v: Option<f64>,
    /// Unit of the values.
    pub unit: String,
    /// Value in the typical corner (null: below the floor or unbounded).
    pub typical: Option<f64>,
    /// Least value across corners.
    pub min: Option<f64>,
    /// Greatest value across corners.
    pub max: Option<f64>,
    /// Corner giving the least value.
    pub min_corner: String,
    /// Corner giving the greatest value.
    pub max_corner: String,
}

/// The sizing of one stage over a region of two variables.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct RegionRecord {
    /// Stage name.
    pub stage: String,
    /// The variable minimised (`tail_current`, `emitter_resistance` or `area_ratio`).
    pub minimise: String,
    /// The variables in map order: the minimised one, then the other (when two are sized).
    pub variables: Vec<String>,
    /// Unit of each variable (`A`, `Ω`; empty for the area ratio).
    pub units: Vec<String>,
    /// Grid values of each variable.
    pub grid: Vec<Vec<f64>>,
    /// Whether a design meeting every line by the guard band at every temperature was found.
    pub met: bool,
    /// The guard band, dB.
    pub guard_band_db: f64,
    /// The design found: tail current, A.
    pub tail_current_a: f64,
    /// The design found: emitter resistance per side, Ω.
    pub emitter_resistance_ohm: f64,
    /// The design found: multi-tanh area ratio, when it is one of the variables.
    #[serde(default)]
    pub area_ratio: Option<f64>,
    /// The design found: load resistance per side at the first temperature, Ω.
    pub load_resistance_ohm: f64,
    /// The line limiting the design found (metric name, or `collector_base_margin` for the
    /// implicit headroom of `hold_gain`).
    pub binding_metric: String,
    /// Index of that line in the plan's budget (`None`: the implicit headroom).
    pub binding_line: Option<usize>,
    /// Temperature where it is worst, °C.
    pub binding_temperature_c: f64,
    /// Its margin above the guard band, dB (`null`: unbounded).
    pub excess_db: Option<f64>,
    /// Designs evaluated (every temperature and corner each).
    pub designs_evaluated: usize,
    /// Every grid design, row by row (each value of the first variable, then the second).
    pub cells: Vec<RegionCellRecord>,
    /// The map row by row: where the second variable may lie and which line stops it.
    pub rows: Vec<RegionRowRecord>,
    /// Pareto front of supply (tail) current against input noise, among grid designs meeting
    /// every line but the noise lines.
    pub noise_front: Vec<FrontRecord>,
    /// Pareto front of supply current against the binding distortion line's figure.
    pub distortion_front: Option<DistortionFrontRecord>,
    /// Advice about the ranges.
    pub hints: Vec<String>,
}

/// One grid design of a sizing region.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct RegionCellRecord {
    /// Tail current, A.
    pub tail_current_a: f64,
    /// Emitter resistance per side, Ω.
    pub emitter_resistance_ohm: f64,
    /// Multi-tanh area ratio, when it is one of the variables (`null` otherwise).
    #[serde(default)]
    pub area_ratio: Option<f64>,
    /// Every line holds by the guard band at every temperature.
    pub holds: bool,
    /// The line with the least margin above the guard band (for a failing design, the one
    /// failing worst).
    pub limiting_metric: String,
    /// Index of that line in the plan's budget (`None`: the implicit headroom or no line).
    pub limiting_line: Option<usize>,
    /// Temperature where it is worst, °C.
    pub limiting_temperature_c: f64,
    /// Its margin above the guard band, dB (`null`: unbounded).
    pub excess_db: Option<f64>,
    /// Largest input noise density across temperatures, V/√Hz (`null`: the design cannot
    /// bias, so it was not solved).
    pub input_noise_v_rthz: Option<f64>,
    /// Small-signal gain at the first temperature, dB (`null`: not solved).
    pub gain_db: Option<f64>,
}

/// One value of the minimised variable: where the other may lie.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct RegionRowRecord {
    /// Value of the minimised variable.
    pub value: f64,
    /// Runs of holding grid values of the other variable, with the line failing each side.
    pub spans: Vec<RegionSpanRecord>,
    /// When nothing in the row holds: the line limiting its best design.
    pub limiting_metric: Option<String>,
}

/// A run of holding grid values of the second variable.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct RegionSpanRecord {
    /// Least holding grid value.
    pub low: f64,
    /// Greatest holding grid value.
    pub high: f64,
    /// The line failing the grid value just below (`None`: the range's end).
    pub below: Option<String>,
    /// The line failing the grid value just above (`None`: the range's end).
    pub above: Option<String>,
}

/// One point of a Pareto front.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct FrontRecord {
    /// Tail current, A.
    pub tail_current_a: f64,
    /// Emitter resistance per side, Ω.
    pub emitter_resistance_ohm: f64,
    /// The figure (input noise V/√Hz, or the distortion line's value in its unit).
    pub value: f64,
    /// Its margin against the line, dB (`None`: the plan has no such line).
    pub margin: Option<f64>,
}

/// The Pareto front against the binding distortion line.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct DistortionFrontRecord {
    /// Metric name of the line.
    pub metric: String,
    /// Index of the line in the plan's budget.
    pub line: usize,
    /// Input amplitude of the line, V.
    pub at_v: Option<f64>,
    /// Unit of the values (`dBc`, `V`).
    pub unit: String,
    /// The line's limit.
    pub limit: f64,
    /// The front, in increasing current.
    pub points: Vec<FrontRecord>,
}

/// One scanned emitter resistance.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct SizingScanRecord {
    /// Emitter resistance, Ω.
    pub emitter_resistance_ohm: f64,
    /// Margin of each budget line (in plan order), dB.
    pub margins: Vec<Option<f64>>,
    /// Small-signal gain, dB (null: the stage cannot bias at this value and was not solved).
    pub gain_db: Option<f64>,
    /// Collector-base margin on the hold-gain check, V (hold_gain only).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub headroom_v: Option<f64>,
    /// Height of the tail node above the tail source's compliance at rest, worst corner, V
    /// (negative: the stage cannot bias at this value).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub tail_headroom_v: Option<f64>,
    /// The least collector-base reverse bias over every drive evaluated at this value, V.
    #[serde(default)]
    pub collector_base_margin_v: Option<f64>,
}

/// One parameter of a stage fitted to bench data.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct FitRecord {
    /// The plan stage fitted.
    pub stage: String,
    /// The fitted stage evaluated through the plan (`<stage>@fitted`).
    pub fitted_stage: String,
    /// The dotted stage key (`emitter_resistance`, `mismatch.saturation_current`).
    pub parameter: String,
    /// Fitted value, SI base units (a fraction for mismatch).
    pub value: f64,
    /// Standard error from the Gauss–Newton covariance s²·(JᵀJ)⁻¹ (null: the parameter has
    /// no effect on the fitted figures).
    pub standard_error: Option<f64>,
    /// Unit of `value` and `standard_error` (empty for fractions and plain numbers).
    pub unit: String,
    /// Where the fit started (the plan's value, moved inside the bounds).
    pub start: f64,
    /// Lower bound.
    pub from: f64,
    /// Upper bound.
    pub to: f64,
    /// Whether the value sits at a bound (the standard error then assumes it free).
    pub at_bound: bool,
    /// Whether the data locate it: an effect, and a standard error within a quarter of the
    /// bounds' span.
    pub constrained: bool,
}

/// How one stage's fit went.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct FitSummaryRecord {
    /// The plan stage fitted.
    pub stage: String,
    /// The fitted stage (`<stage>@fitted`).
    pub fitted_stage: String,
    /// The fitted parameters, in the order of `correlation`.
    pub parameters: Vec<String>,
    /// The figures fitted.
    pub metrics: Vec<String>,
    /// Correlation matrix of the fitted parameters (null where a standard error is).
    pub correlation: Vec<Vec<Option<f64>>>,
    /// Measured values in the fit.
    pub residual_count: usize,
    /// Root-mean-square weighted residual of the plan's stage, dB (offset in mV).
    pub rms_before: f64,
    /// Root-mean-square weighted residual of the fitted stage, dB.
    pub rms_after: f64,
    /// sqrt(Σ w·r²/(m − p)), the scale the standard errors carry.
    pub residual_scale: f64,
    /// Model evaluations over every measured point, Jacobians included.
    pub evaluations: usize,
    /// Whether the optimiser met its convergence tolerances.
    pub converged: bool,
    /// Why it stopped: `converged`, `out of evaluations` or `rounding limited`.
    pub termination: String,
}

/// One measured value next to one model stage's.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct ResidualRecord {
    /// The model stage compared (the plan stage, or `<stage>@fitted`).
    pub stage: String,
    /// The plan stage the bench part implements.
    pub measured_stage: String,
    /// Bench file, as named in the plan.
    pub file: String,
    /// Row of the file (the header is row 1).
    pub row: u64,
    /// Label of the part measured, if the file gives one.
    pub die: Option<String>,
    /// Process corner the part belongs to.
    pub corner: String,
    /// Temperature, °C.
    pub temperature_c: f64,
    /// Frequency, Hz.
    pub frequency_hz: f64,
    /// Peak differential input per tone, V.
    pub amplitude_v: f64,
    /// Figure (`hd3`, `gain`, `offset` …).
    pub metric: String,
    /// Unit of `bench` and `model` (dB, dBc or V).
    pub unit: String,
    /// The measured value.
    pub bench: f64,
    /// The model's value (null: below the analysis floor).
    pub model: Option<f64>,
    /// model − bench in `residual_unit` (20·log10 of the ratio for the fundamental).
    pub residual: Option<f64>,
    /// `dB`, or `mV` for the offset.
    pub residual_unit: String,
    /// Whether the value entered the fit.
    pub in_fit: bool,
}

/// Residuals of one model stage and metric, summed up.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct ResidualSummaryRecord {
    /// The model stage (the plan stage, or `<stage>@fitted`).
    pub stage: String,
    /// The plan stage measured.
    pub measured_stage: String,
    /// Figure.
    pub metric: String,
    /// Unit of the residuals (`dB` or `mV`).
    pub unit: String,
    /// Measured values compared.
    pub points: usize,
    /// Values where the model is below its analysis floor (left out of rms and worst).
    pub below_floor: usize,
    /// Root-mean-square residual.
    pub rms: Option<f64>,
    /// The residual largest in size, with its sign (model − bench).
    pub worst: Option<f64>,
    /// Bench row of the worst residual.
    pub worst_row: Option<u64>,
    /// Whether the metric was fitted.
    pub in_fit: bool,
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A drive point read back from its JSON keeps every `hdN_dbc` field (nulls included),
    /// ignores fields it does not know, and writes the same document again (serde_json is
    /// the reference reader).
    #[test]
    fn harmonic_fields_round_trip_through_json() {
        let text = r#"{"stage": "s", "temperature_c": 27.0, "frequency_hz": 1000.0,
            "amplitude_v": 0.01, "fundamental_v": 0.08, "gain_db": 18.0,
            "hd2_dbc": null, "hd3_dbc": -70.5, "hd4_dbc": null, "hd5_dbc": -120.25,
            "hd11_dbc": -150.0, "thd_dbc": -70.5, "single_ended_fundamental_v": 0.04,
            "single_ended_hd2_dbc": null, "single_ended_hd3_dbc": -70.5, "samples": 256,
            "region": "forward-active", "collector_base_margin_v": 1.0,
            "min_current_fraction": 0.4, "a_future_field": [1, 2]}"#;
        let point: PointRecord = serde_json::from_str(text).unwrap();
        assert_eq!(point.harmonic(2), None);
        assert_eq!(point.harmonic(3), Some(-70.5));
        assert_eq!(point.harmonic(5), Some(-120.25));
        assert_eq!(point.harmonic(7), None);
        assert_eq!(point.harmonic(11), Some(-150.0));
        assert_eq!(point.harmonics.highest_order(), 11);
        let again: serde_json::Value =
            serde_json::from_str(&serde_json::to_string(&point).unwrap()).unwrap();
        assert_eq!(again["hd5_dbc"], serde_json::json!(-120.25));
        assert_eq!(again["hd10_dbc"], serde_json::Value::Null);
        assert_eq!(again["hd11_dbc"], serde_json::json!(-150.0));
        let back: PointRecord = serde_json::from_value(again).unwrap();
        assert_eq!(back, point);
    }
}
