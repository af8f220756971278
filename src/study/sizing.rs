//! Sizing: the emitter degeneration to build, the range of it that works, and what cannot work.
//!
//! Margins are not assumed monotonic in R_E (mismatch, Early effect and a finite tail can bend
//! them, and a gain line fails again at large R_E): the range is scanned on a uniform grid of
//! [`SCAN_POINTS`], and every change between a grid value that *holds* every line and one that
//! does not is refined — bisection to [`REFINE_RELATIVE`] of R_E, then two verified secant
//! steps on the worst margin — into the edges of the usable windows. A value *holds* when every
//! budget line passes with at least `guard_band_db` of margin (a `collector_base_margin` line,
//! whose margin is in volts, by its own limit; with `hold_gain`, the collector-base junction
//! keeps reverse bias). The R_E to build is the low edge of the first
//! window: the least value that holds. Windows narrower than one grid step can be missed; the
//! edges found are verified trial values, the insides of a window are grid values.
//!
//! With `hold_gain`, the load is rescaled at each R_E so the small-signal gain stays that of
//! the stage as planned (a load that saturates the stage at zero input holds no gain: scaling
//! stops there), and, unless the plan has a `collector_base_margin` line of its own, the
//! collector-base margin at the largest budget amplitude must stay at or above zero — an
//! implicit `{metric: collector_base_margin, min: 0 V}`. Every trial records the least
//! collector-base margin over every drive it evaluated (each line's, in each corner), so no
//! trial is judged on a drive whose operating region was not looked at. With process corners every trial is evaluated in every corner and each
//! line keeps its worst margin, so a value that holds does so in every corner.
//!
//! A line that no scanned value meets is *unreachable*: its best value and where it occurs are
//! kept, and the recommendation then sizes against the lines that can be met (the verdict names
//! the unreachable ones). When distortion and noise lines cannot be met together, the outcome
//! gives the least scanned R_E meeting the distortion lines, the greatest meeting the noise
//! lines, and the gap between them. Yield lines are not part of a trial (a Monte Carlo
//! population per trial value would cost thousands of solves each); they are judged on the
//! recommended design's full evaluation.

use crate::error::{Error, SolveFailure};
use crate::measure::budget::judge;
use crate::measure::small_signal::small_signal_gain;
use crate::measure::stage::StageMeasurements;
use crate::model::bias::{bias_problem, rest_collector_headroom_v, rest_point};
use crate::model::budget::{BudgetLine, Limit, Metric};
use crate::model::corner::TYPICAL;
use crate::model::plan::{Plan, SizingSettings};
use crate::model::stage::Stage;
use crate::solve::spectrum::{FftCache, ANALYSIS_FLOOR_DBC};
use crate::solve::transfer::junctions_reverse_biased;
use crate::study::case::measurements;
use rayon::prelude::*;
use std::sync::Arc;

/// Grid points of the initial scan.
pub const SCAN_POINTS: usize = 41;
/// Relative width of the bracket around each window edge before the secant steps.
pub const REFINE_RELATIVE: f64 = 1e-3;
/// Verified secant steps on the worst margin after the bisection.
pub const SECANT_STEPS: usize = 2;
/// Most windows whose edges are refined (further ones keep grid resolution).
pub const REFINED_WINDOWS: usize = 4;

/// Everything measured at one emitter resistance.
#[derive(Debug, Clone)]
pub struct Trial {
    /// Emitter resistance per side, Ω.
    pub emitter_resistance: f64,
    /// Load resistance used, Ω (rescaled with `hold_gain`).
    pub load_resistance: f64,
    /// Worst margin of each budget line across corners, dB (`None` for yield lines, which a
    /// trial does not judge).
    pub margins: Vec<Option<f64>>,
    /// Each line's value in the corner giving its worst margin.
    pub values: Vec<Option<f64>>,
    /// Whether each line passes in every corner (true for yield lines).
    pub passes: Vec<bool>,
    /// Corner giving each line's worst margin.
    pub corners: Vec<String>,
    /// Small-signal gain in the typical corner, dB.
    pub gain_db: f64,
    /// Steering range in the typical corner, V.
    pub steering_range_v: f64,
    /// Worst collector-base margin across corners at the largest budget amplitude, V
    /// (`hold_gain` without a `collector_base_margin` line of the plan's own).
    pub headroom_v: Option<f64>,
    /// Worst height of the tail node above the tail source's compliance at rest across
    /// corners, V (negative: the stage cannot bias at this value and was not solved).
    pub tail_headroom_v: f64,
    /// Whether the trial stage can bias in every corner (rest point within the model and
    /// the tail source's compliance, collectors above the bases); a trial that cannot is
    /// not solved and fails every line.
    pub biases: bool,
    /// Least collector-base margin over every drive the trial evaluated, V (negative: a
    /// junction was forward-biased).
    pub collector_base_margin_v: f64,
    /// Tail current of the trial, A.
    pub tail_current: f64,
    /// White input-referred noise density in the typical corner, V/√Hz.
    pub input_noise_v_rthz: f64,
}

/// What decided a sizing result.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Binding {
    /// The budget line with this index (in the plan) has the least margin, or cannot be met.
    Line(usize),
    /// The implicit collector-base margin of `hold_gain` (no saturation at the largest budget
    /// amplitude), not distortion.
    Headroom,
    /// The tail source's compliance: larger values cannot bias.
    TailCompliance,
    /// No budget line bounds the result.
    Nothing,
}

/// An end of the sizing range.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum RangeEnd {
    /// `from`, the lower end.
    From,
    /// `to`, the upper end.
    To,
}

/// Advice about the range itself: the answer or the best margin sits at one of its ends.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum RangeHint {
    /// The least value that holds is `from` itself (above 0 Ω): a smaller one may hold too.
    AnswerAtFrom,
    /// The only usable values lie in the last grid step below `to`: the window may extend
    /// beyond it.
    AnswerNearTo,
    /// No value holds, and the best worst-line margin is at this end: the margins were still
    /// improving there.
    BestAt(RangeEnd),
}

/// A range of emitter resistance where every line holds.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Window {
    /// Least value that holds, Ω.
    pub low: f64,
    /// Greatest value that holds, Ω.
    pub high: f64,
    /// `low` is the range's `from` (the window may extend below it).
    pub low_at_end: bool,
    /// `high` is the range's `to` (the window may extend above it).
    pub high_at_end: bool,
}

/// A budget line that no scanned value meets.
#[derive(Debug, Clone, PartialEq)]
pub struct Unreachable {
    /// Index of the line in the plan's budget.
    pub line: usize,
    /// The best value it reaches (`None`: below the floor or unbounded).
    pub best_value: Option<f64>,
    /// The margin there (negative), dB.
    pub best_margin: Option<f64>,
    /// Where the best value occurs, Ω.
    pub at_emitter_resistance: f64,
    /// The corner giving that (worst-corner) value.
    pub corner: String,
    /// The best value is at an end of the range (`None`: inside it).
    pub at_end: Option<RangeEnd>,
}

/// The sizing of one stage at one temperature.
#[derive(Debug, Clone)]
pub struct SizingOutcome {
    /// Stage name.
    pub stage: String,
    /// Temperature, °C.
    pub temperature_c: f64,
    /// Whether a value holding every line was found.
    pub met: bool,
    /// The least value holding every line, or the best trial when none does.
    pub chosen: Trial,
    /// What decided it.
    pub binding: Binding,
    /// Worst line margin at the chosen value, dB.
    pub worst_margin: f64,
    /// Corner with the least margin at the chosen value.
    pub binding_corner: String,
    /// Small-signal gain at the lower end of the range, dB.
    pub reference_gain_db: f64,
    /// Whether headroom, not distortion, decided the result.
    pub headroom_binds: bool,
    /// The uniform scan.
    pub scan: Vec<Trial>,
    /// Least scanned R_E meeting every line except the noise lines, Ω.
    pub distortion_least: Option<f64>,
    /// Greatest scanned R_E meeting every noise line, Ω.
    pub noise_greatest: Option<f64>,
    /// When no value meets both: how far apart the two ranges are, Ω.
    pub conflict_gap: Option<f64>,
    /// The windows where every line holds, in increasing R_E.
    pub windows: Vec<Window>,
    /// Lines no scanned value meets.
    pub unreachable: Vec<Unreachable>,
    /// Advice about the range's ends.
    pub hints: Vec<RangeHint>,
    /// The guard band the windows were found with, dB.
    pub guard_band_db: f64,
}

/// Which lines a holding test counts, and with what guard band.
#[derive(Debug, Clone)]
pub(crate) struct Criterion {
    pub(crate) counted: Vec<bool>,
    guard_band_db: f64,
    /// Lines whose margin is in volts (collector-base margin): they hold by their own limit,
    /// not by the guard band in dB.
    pub(crate) volts: Vec<bool>,
}

impl Criterion {
    pub(crate) fn all(plan: &Plan, guard_band_db: f64) -> Self {
        Criterion {
            counted: plan
                .budget
                .iter()
                .map(|l| !l.metric.is_population())
                .collect(),
            guard_band_db,
            volts: volts_lines(plan),
        }
    }

    /// The guard band a line's margin must clear: the dB band, or zero for a margin in volts.
    pub(crate) fn band(&self, index: usize) -> f64 {
        if self.volts[index] {
            0.0
        } else {
            self.guard_band_db
        }
    }

    /// The same test with `lines` left out (a Pareto front's own axis).
    pub(crate) fn without(&self, lines: &[usize]) -> Criterion {
        let mut reduced = self.clone();
        for &line in lines {
            if let Some(c) = reduced.counted.get_mut(line) {
                *c = false;
            }
        }
        reduced
    }

    /// A line's margin for comparing lines: a margin in volts counts 10 mV as 1 dB (only the
    /// secant steps compare across lines; every edge they find is verified).
    pub(crate) fn comparable(&self, index: usize, margin: f64) -> f64 {
        if self.volts[index] {
            100.0 * margin
        } else {
            margin
        }
    }
}

/// Which lines have margins in volts.
fn volts_lines(plan: &Plan) -> Vec<bool> {
    plan.budget
        .iter()
        .map(|l| l.metric.margin_in_volts())
        .collect()
}

/// A margin as a number to compare: a missing margin sorts above everything when the line
/// passes (an unbounded intercept) and below everything when it fails.
pub(crate) fn margin_key(margin: Option<f64>, pass: bool) -> f64 {
    margin.unwrap_or(if pass {
        f64::INFINITY
    } else {
        f64::NEG_INFINITY
    })
}

impl Trial {
    /// Whether every counted line passes by the guard band, and headroom holds.
    pub(crate) fn holds(&self, criterion: &Criterion) -> bool {
        self.margins
            .iter()
            .zip(&self.passes)
            .enumerate()
            .filter(|(index, _)| criterion.counted[*index])
            .all(|(index, (margin, pass))| {
                *pass && margin.is_none_or(|m| m >= criterion.band(index))
            })
            && self.headroom_v.is_none_or(|h| h >= 0.0)
            && self.biases
    }

    /// Least counted margin less the guard band (for the secant steps), dB.
    pub(crate) fn excess(&self, criterion: &Criterion) -> f64 {
        self.margins
            .iter()
            .zip(&self.passes)
            .enumerate()
            .filter(|(index, _)| criterion.counted[*index])
            .map(|(index, (margin, pass))| {
                criterion.comparable(index, margin_key(*margin, *pass) - criterion.band(index))
            })
            .fold(f64::INFINITY, f64::min)
    }

    /// Worst budget-line margin (dB) among the counted lines, its line, and the corner where
    /// it occurs. Margins in volts (collector-base margin lines, the hold-gain headroom) are
    /// judged separately: a failing one ranks below every dB margin, a passing one not at all.
    pub(crate) fn worst_with_corner(
        &self,
        counted: &[bool],
        volts: &[bool],
    ) -> ((f64, Binding), String) {
        let mut worst = (f64::INFINITY, Binding::Nothing);
        let mut corner = TYPICAL.to_owned();
        for (index, (margin, pass)) in self.margins.iter().zip(&self.passes).enumerate() {
            if !counted[index] {
                continue;
            }
            let m = match (volts[index], *pass) {
                (true, true) => f64::INFINITY,
                (true, false) => f64::NEG_INFINITY,
                (false, _) => margin_key(*margin, *pass),
            };
            if m < worst.0 {
                worst = (m, Binding::Line(index));
                corner = self.corners[index].clone();
            }
        }
        (worst, corner)
    }

    /// Whether every line of the chosen kind passes (noise lines or all the others).
    fn kind_passes(&self, plan: &Plan, noise: bool) -> bool {
        plan.budget
            .iter()
            .zip(&self.passes)
            .filter(|(line, _)| (line.metric == Metric::InputNoise) == noise)
            .all(|(_, pass)| *pass)
            && (noise || self.headroom_v.is_none_or(|h| h >= 0.0))
            && self.biases
    }
}

/// Whether `stage` can bias in every corner at `temperature_c`: the worst tail headroom
/// above the compliance, the worst collector-base headroom at rest, and whether every rest
/// point is one the model can solve with the collectors above the bases.
fn rest_feasibility(plan: &Plan, stage: &Stage, temperature_c: f64) -> (f64, f64, bool) {
    let mut tail = f64::INFINITY;
    let mut collector = f64::INFINITY;
    let mut biases = true;
    for corner in &plan.corners {
        let built = corner.apply(stage);
        let rest = rest_point(&built, temperature_c);
        tail = tail.min(rest.tail_node_v - rest.compliance_v);
        collector = collector.min(rest_collector_headroom_v(&built, temperature_c));
        biases &= bias_problem(&built, temperature_c).is_none();
    }
    (tail, collector, biases)
}

/// The stage at one emitter resistance, with the load rescaled to `target_gain` when given.
fn stage_at(
    plan: &Plan,
    base: &Stage,
    temperature_c: f64,
    emitter_resistance: f64,
    target_gain: Option<f64>,
    cache: &Arc<FftCache>,
) -> Result<Stage, SolveFailure> {
    let mut trial_stage = base.clone();
    trial_stage.emitter_resistance = emitter_resistance;
    if let Some(target) = target_gain {
        // Gain is proportional to the load without Early effect; a few fixed-point steps
        // settle it to 1e-12 otherwise. A stage that cannot bias (a tail node below its
        // compliance) ends the search: it is not solved, and the trial made of it fails. A
        // load that saturates the stage at zero input holds no gain: scaling stops there, and
        // the collector-base margin check fails the trial.
        for _ in 0..8 {
            if !rest_feasibility(plan, &trial_stage, temperature_c).2 {
                break;
            }
            let measured = measurements(&trial_stage, temperature_c, plan, cache);
            let solver = measured.engine().static_solver();
            if !junctions_reverse_biased(&solver.solve_cold(0.0)?) {
                break;
            }
            let gain = small_signal_gain(solver)?;
            let ratio = target / gain;
            if !(ratio.is_finite() && ratio > 0.0) {
                break;
            }
            trial_stage.load_resistance *= ratio;
            if (ratio - 1.0).abs() < 1e-12 {
                break;
            }
        }
    }
    Ok(trial_stage)
}

/// The planned stage's small-signal gain at `temperature_c` (the gain `hold_gain` holds), V/V.
pub fn planned_gain(
    plan: &Plan,
    stage: &Stage,
    temperature_c: f64,
    cache: &Arc<FftCache>,
) -> Result<f64, Error> {
    let measured = measurements(stage, temperature_c, plan, cache);
    small_signal_gain(measured.engine().static_solver())
        .map_err(|failure| Error::solve(&stage.name, temperature_c, failure))
}

/// The load that gives the planned stage's gain at `temperature_c` with `emitter_resistance`.
pub fn held_load(
    plan: &Plan,
    stage: &Stage,
    temperature_c: f64,
    emitter_resistance: f64,
    cache: &Arc<FftCache>,
) -> Result<f64, Error> {
    held_load_from(plan, stage, stage, temperature_c, emitter_resistance, cache)
}

/// The load that gives the `planned` stage's gain at `temperature_c` to `base` (the planned
/// stage with other sized values, such as its tail current) with `emitter_resistance`.
pub fn held_load_from(
    plan: &Plan,
    planned: &Stage,
    base: &Stage,
    temperature_c: f64,
    emitter_resistance: f64,
    cache: &Arc<FftCache>,
) -> Result<f64, Error> {
    let target = planned_gain(plan, planned, temperature_c, cache)?;
    stage_at(
        plan,
        base,
        temperature_c,
        emitter_resistance,
        Some(target),
        cache,
    )
    .map(|s| s.load_resistance)
    .map_err(|failure| Error::solve(&planned.name, temperature_c, failure))
}

/// Every budget line measured on `base` with `emitter_resistance` (and the load `hold_gain`
/// asks for) at `temperature_c`, worst case over the process corners.
pub(crate) fn trial(
    plan: &Plan,
    base: &Stage,
    temperature_c: f64,
    emitter_resistance: f64,
    target_gain: Option<f64>,
    cache: &Arc<FftCache>,
) -> Result<Trial, Error> {
    let fail = |failure: SolveFailure| Error::solve(&base.name, temperature_c, failure);
    let trial_stage = stage_at(
        plan,
        base,
        temperature_c,
        emitter_resistance,
        target_gain,
        cache,
    )
    .map_err(fail)?;
    let lines = plan.budget.len();
    let (tail_headroom_v, collector_v, biases) =
        rest_feasibility(plan, &trial_stage, temperature_c);
    if !biases {
        return Ok(Trial {
            emitter_resistance,
            load_resistance: trial_stage.load_resistance,
            margins: vec![None; lines],
            values: vec![None; lines],
            passes: plan
                .budget
                .iter()
                .map(|l| l.metric.is_population())
                .collect(),
            corners: vec![TYPICAL.to_owned(); lines],
            // Held by construction with hold_gain; otherwise not solved.
            gain_db: target_gain.map_or(f64::NAN, |g| 20.0 * g.abs().log10()),
            steering_range_v: f64::NAN,
            headroom_v: target_gain.map(|_| collector_v),
            tail_headroom_v,
            biases: false,
            // Not solved: no drive was evaluated.
            collector_base_margin_v: f64::NAN,
            tail_current: trial_stage.tail_current,
            input_noise_v_rthz: f64::NAN,
        });
    }
    // Worst case over the process corners, line by line.
    let mut margins: Vec<Option<f64>> = vec![None; lines];
    let mut values: Vec<Option<f64>> = vec![None; lines];
    let mut passes = vec![true; lines];
    let mut corners = vec![TYPICAL.to_owned(); lines];
    let mut keys = vec![f64::INFINITY; lines];
    let mut headroom_worst: Option<f64> = None;
    let mut least_margin = f64::INFINITY;
    for (corner_index, corner) in plan.corners.iter().enumerate() {
        let in_corner = corner.apply(&trial_stage);
        let measured = measurements(&in_corner, temperature_c, plan, cache);
        for (index, line) in plan.budget.iter().enumerate() {
            if line.metric.is_population() {
                continue;
            }
            let checked = measured.measure_checked(line).map_err(fail)?;
            least_margin = least_margin.min(checked.region.collector_base_margin_v());
            let value = checked.value;
            let judged = judge(line, value, ANALYSIS_FLOOR_DBC);
            let k = margin_key(judged.margin, judged.pass);
            if corner_index == 0 || k < keys[index] {
                keys[index] = k;
                margins[index] = judged.margin;
                values[index] = value;
                corners[index] = corner.name.clone();
            }
            passes[index] &= judged.pass;
        }
        if let Some(h) = corner_headroom(&measured, plan, target_gain.is_some()).map_err(fail)? {
            least_margin = least_margin.min(h);
            headroom_worst = Some(headroom_worst.map_or(h, |w: f64| w.min(h)));
        }
    }
    let in_corner = plan.corners[0].apply(&trial_stage);
    let measured = measurements(&in_corner, temperature_c, plan, cache);
    let gain = measured.gain().map_err(fail)?;
    let steering = measured.steering_range().map_err(fail)?;
    let input_noise_v_rthz = measured.noise().map_err(fail)?;
    Ok(Trial {
        tail_current: trial_stage.tail_current,
        input_noise_v_rthz,
        emitter_resistance,
        load_resistance: trial_stage.load_resistance,
        margins,
        values,
        passes,
        corners,
        gain_db: 20.0 * gain.abs().log10(),
        steering_range_v: steering,
        headroom_v: headroom_worst,
        tail_headroom_v,
        biases,
        collector_base_margin_v: least_margin,
    })
}

/// The implicit line of `hold_gain`: no saturation at the largest budget amplitude, unless the
/// plan has a `collector_base_margin` line of its own.
pub fn implicit_headroom_line(plan: &Plan, measured: &StageMeasurements) -> Option<BudgetLine> {
    if plan
        .budget
        .iter()
        .any(|l| l.metric == Metric::CollectorBaseMargin)
    {
        return None;
    }
    let amplitude = plan
        .budget
        .iter()
        .filter(|l| l.metric.needs_amplitude())
        .map(|l| measured.line_amplitude(l))
        .fold(0.0, f64::max);
    let amplitude = if amplitude > 0.0 {
        amplitude
    } else {
        plan.drive.amplitudes.iter().copied().fold(0.0, f64::max)
    };
    let frequency = plan
        .budget
        .first()
        .map(|l| measured.line_frequency(l))
        .unwrap_or(plan.drive.frequencies[0]);
    Some(
        BudgetLine::new(Metric::CollectorBaseMargin, Limit::Min(0.0))
            .at(amplitude)
            .frequency(frequency),
    )
}

/// Collector-base margin on the implicit line of `hold_gain`, V.
fn corner_headroom(
    measured: &StageMeasurements,
    plan: &Plan,
    hold_gain: bool,
) -> Result<Option<f64>, SolveFailure> {
    if !hold_gain {
        return Ok(None);
    }
    match implicit_headroom_line(plan, measured) {
        Some(line) => Ok(measured.measure_checked(&line)?.value),
        None => Ok(None),
    }
}

/// One stage at one temperature, with what each trial needs.
struct Search<'a> {
    plan: &'a Plan,
    stage: &'a Stage,
    temperature_c: f64,
    target_gain: Option<f64>,
    cache: &'a Arc<FftCache>,
    /// Absolute resolution below which an edge near 0 Ω is not refined further, Ω.
    floor_ohm: f64,
    /// Told after every trial (a progress count).
    trial_done: &'a (dyn Fn() + Sync),
}

impl Search<'_> {
    fn trial(&self, emitter_resistance: f64) -> Result<Trial, Error> {
        let outcome = trial(
            self.plan,
            self.stage,
            self.temperature_c,
            emitter_resistance,
            self.target_gain,
            self.cache,
        );
        (self.trial_done)();
        outcome
    }

    /// The edge between a value that holds and one that does not (in either order): bisection
    /// until the bracket is within [`REFINE_RELATIVE`] of R_E, then [`SECANT_STEPS`] secant
    /// steps on the worst margin, each verified. Returns the holding trial nearest the edge.
    fn edge(&self, holding: Trial, failing: Trial, criterion: &Criterion) -> Result<Trial, Error> {
        let (mut good, mut bad) = (holding, failing);
        let close = |good: &Trial, bad: &Trial| {
            let width = (good.emitter_resistance - bad.emitter_resistance).abs();
            width <= REFINE_RELATIVE * good.emitter_resistance.max(bad.emitter_resistance)
                || width <= self.floor_ohm
        };
        let mut steps = 0;
        while !close(&good, &bad) && steps < 64 {
            let mid = 0.5 * (good.emitter_resistance + bad.emitter_resistance);
            let probe = self.trial(mid)?;
            if probe.holds(criterion) {
                good = probe;
            } else {
                bad = probe;
            }
            steps += 1;
        }
        for _ in 0..SECANT_STEPS {
            let (f_good, f_bad) = (good.excess(criterion), bad.excess(criterion));
            if !(f_good.is_finite() && f_bad.is_finite() && f_good > f_bad) {
                break;
            }
            let (r_good, r_bad) = (good.emitter_resistance, bad.emitter_resistance);
            let r = r_good + f_good * (r_bad - r_good) / (f_good - f_bad);
            // Stay strictly inside the bracket.
            let inside = (r - r_good) * (r - r_bad) < 0.0;
            if !inside {
                break;
            }
            let probe = self.trial(r)?;
            if probe.holds(criterion) {
                good = probe;
            } else {
                bad = probe;
            }
        }
        Ok(good)
    }

    /// The windows of the scan where every counted line holds, their edges refined; with each
    /// window's low-edge trial.
    fn windows(
        &self,
        scan: &[Trial],
        criterion: &Criterion,
    ) -> Result<Vec<(Window, Trial)>, Error> {
        let holds: Vec<bool> = scan.iter().map(|t| t.holds(criterion)).collect();
        let last = scan.len() - 1;
        let mut runs: Vec<(usize, usize)> = Vec::new();
        let mut i = 0;
        while i <= last {
            if holds[i] {
                let start = i;
                while i < last && holds[i + 1] {
                    i += 1;
                }
                runs.push((start, i));
            }
            i += 1;
        }
        let mut windows = Vec::with_capacity(runs.len());
        for (n, &(start, end)) in runs.iter().enumerate() {
            let refine = n < REFINED_WINDOWS;
            let low = if start == 0 || !refine {
                scan[start].clone()
            } else {
                self.edge(scan[start].clone(), scan[start - 1].clone(), criterion)?
            };
            let high = if end == last || !refine {
                scan[end].emitter_resistance
            } else {
                self.edge(scan[end].clone(), scan[end + 1].clone(), criterion)?
                    .emitter_resistance
            };
            windows.push((
                Window {
                    low: low.emitter_resistance,
                    high,
                    low_at_end: start == 0,
                    high_at_end: end == last,
                },
                low,
            ));
        }
        Ok(windows)
    }
}

/// Which end of the range a grid index is at, if either.
fn end_of(index: usize, last: usize) -> Option<RangeEnd> {
    if index == 0 {
        Some(RangeEnd::From)
    } else if index == last {
        Some(RangeEnd::To)
    } else {
        None
    }
}

/// The lines no scanned value meets, with their best value and where it is.
fn unreachable_lines(plan: &Plan, scan: &[Trial]) -> Vec<Unreachable> {
    let last = scan.len() - 1;
    let mut out = Vec::new();
    for (index, line) in plan.budget.iter().enumerate() {
        if line.metric.is_population() || scan.iter().any(|t| t.passes[index]) {
            continue;
        }
        let best = (0..scan.len())
            .max_by(|&a, &b| {
                margin_key(scan[a].margins[index], false)
                    .total_cmp(&margin_key(scan[b].margins[index], false))
            })
            .unwrap_or(0);
        let trial = &scan[best];
        // Flat margins (a figure R_E does not change) have no best end.
        let flat = scan
            .iter()
            .all(|t| t.margins[index] == trial.margins[index]);
        out.push(Unreachable {
            line: index,
            best_value: trial.values[index],
            best_margin: trial.margins[index],
            at_emitter_resistance: trial.emitter_resistance,
            corner: trial.corners[index].clone(),
            at_end: if flat { None } else { end_of(best, last) },
        });
    }
    out
}

/// Sizes one stage at one temperature: windows, the least value that holds, what cannot be met.
pub fn size_stage(
    plan: &Plan,
    stage: &Stage,
    temperature_c: f64,
    settings: &SizingSettings,
    cache: &Arc<FftCache>,
) -> Result<SizingOutcome, Error> {
    size_stage_observed(plan, stage, temperature_c, settings, cache, &|| {})
}

/// Trials a sizing is expected to take: the scan and about a dozen refinement steps. For a
/// progress display; the real count may differ.
pub const EXPECTED_TRIALS: usize = SCAN_POINTS + 12;

/// [`size_stage`], calling `trial_done` after every trial R_E (for a progress count).
pub fn size_stage_observed(
    plan: &Plan,
    stage: &Stage,
    temperature_c: f64,
    settings: &SizingSettings,
    cache: &Arc<FftCache>,
    trial_done: &(dyn Fn() + Sync),
) -> Result<SizingOutcome, Error> {
    let (from, to) = settings.emitter_range();
    let target_gain = if settings.hold_gain {
        Some(planned_gain(plan, stage, temperature_c, cache)?)
    } else {
        None
    };
    let search = Search {
        plan,
        stage,
        temperature_c,
        target_gain,
        cache,
        floor_ohm: 1e-6 * (to - from),
        trial_done,
    };
    let grid: Vec<f64> = (0..SCAN_POINTS)
        .map(|i| from + (to - from) * i as f64 / (SCAN_POINTS - 1) as f64)
        .collect();
    let scan: Vec<Trial> = grid
        .par_iter()
        .map(|r| search.trial(*r))
        .collect::<Result<Vec<_>, Error>>()?;
    let reference_gain_db = scan[0].gain_db;
    let last = scan.len() - 1;

    let every_line = Criterion::all(plan, settings.guard_band_db);
    let found = search.windows(&scan, &every_line)?;
    let unreachable = unreachable_lines(plan, &scan);
    let met = !found.is_empty();
    let windows: Vec<Window> = found.iter().map(|(w, _)| *w).collect();

    // Distortion and noise pull R_E in opposite directions: where does each allow it?
    let has_noise_lines = plan.budget.iter().any(|l| l.metric == Metric::InputNoise);
    let distortion_least = scan
        .iter()
        .find(|t| t.kind_passes(plan, false))
        .map(|t| t.emitter_resistance);
    let noise_greatest = if has_noise_lines {
        scan.iter()
            .rev()
            .find(|t| t.kind_passes(plan, true))
            .map(|t| t.emitter_resistance)
    } else {
        None
    };
    let conflict_gap = match (met, distortion_least, noise_greatest) {
        (false, Some(d), Some(n)) if d > n => Some(d - n),
        _ => None,
    };

    // The lines the result is judged on when nothing holds: those that can be met somewhere.
    let reachable = Criterion {
        counted: every_line
            .counted
            .iter()
            .enumerate()
            .map(|(i, c)| *c && !unreachable.iter().any(|u| u.line == i))
            .collect(),
        guard_band_db: settings.guard_band_db,
        volts: every_line.volts.clone(),
    };
    // When nothing holds and part of the range cannot bias, the bias limit met first (at the
    // least R_E that cannot bias) is what binds: the values that might meet the budget are out
    // of reach.
    let bias_limit = if met || scan.iter().all(|t| t.biases) {
        None
    } else {
        scan.iter().find(|t| !t.biases).map(|first| {
            if first.tail_headroom_v < 0.0 {
                Binding::TailCompliance
            } else {
                Binding::Headroom
            }
        })
    };
    let mut hints = Vec::new();
    let (chosen, headroom_binds) = match found.first() {
        Some((window, low)) => {
            if window.low_at_end && from > 0.0 {
                hints.push(RangeHint::AnswerAtFrom);
            }
            if found.len() == 1 && window.high_at_end && window.low > grid[last - 1] {
                hints.push(RangeHint::AnswerNearTo);
            }
            let headroom_binds = low.headroom_v.is_some_and(|h| {
                let distortion_worst = low
                    .margins
                    .iter()
                    .enumerate()
                    .filter(|(index, _)| !every_line.volts[*index])
                    .filter_map(|(_, m)| *m)
                    .fold(f64::INFINITY, f64::min);
                h < 0.05 && distortion_worst > 0.5 + settings.guard_band_db
            });
            (low.clone(), headroom_binds)
        }
        None => {
            // Distortion alone may be meetable while headroom fails everywhere (hold_gain):
            // then headroom binds, and the best headroom among those trials is reported.
            let without_headroom = |t: &Trial| {
                t.biases
                    && t.margins
                        .iter()
                        .zip(&t.passes)
                        .enumerate()
                        .filter(|(index, _)| reachable.counted[*index])
                        .all(|(index, (m, p))| *p && m.is_none_or(|m| m >= reachable.band(index)))
            };
            let distortion_ok: Vec<&Trial> = scan.iter().filter(|t| without_headroom(t)).collect();
            let headroom_binds = (target_gain.is_some()
                && !distortion_ok.is_empty()
                && !distortion_ok.iter().any(|t| t.holds(&reachable)))
                || bias_limit == Some(Binding::Headroom);
            let best = if let Some(least) = scan.iter().find(|t| t.holds(&reachable)) {
                // Every line that can be met is met here: the least such scanned value.
                least.clone()
            } else if headroom_binds {
                distortion_ok
                    .iter()
                    .max_by(|a, b| {
                        a.headroom_v
                            .unwrap_or(f64::NEG_INFINITY)
                            .total_cmp(&b.headroom_v.unwrap_or(f64::NEG_INFINITY))
                    })
                    .map(|t| (*t).clone())
                    .unwrap_or_else(|| scan[0].clone())
            } else {
                let best_index = (0..scan.len())
                    .max_by(|&a, &b| {
                        scan[a]
                            .worst_with_corner(&reachable.counted, &reachable.volts)
                            .0
                             .0
                            .total_cmp(
                                &scan[b]
                                    .worst_with_corner(&reachable.counted, &reachable.volts)
                                    .0
                                     .0,
                            )
                    })
                    .unwrap_or(0);
                if let Some(end) = end_of(best_index, last) {
                    if end == RangeEnd::To || from > 0.0 {
                        hints.push(RangeHint::BestAt(end));
                    }
                }
                scan[best_index].clone()
            };
            (best, headroom_binds)
        }
    };
    let counted_for_binding = if met {
        &every_line.counted
    } else {
        &reachable.counted
    };
    let ((worst_margin, mut worst_line), binding_corner) =
        chosen.worst_with_corner(counted_for_binding, &every_line.volts);
    // A collector-base margin line that nearly binds while every dB line has room is what
    // decides the result.
    if let Binding::Line(_) | Binding::Nothing = worst_line {
        let nearly = chosen
            .margins
            .iter()
            .enumerate()
            .filter(|(index, _)| every_line.volts[*index] && counted_for_binding[*index])
            .filter_map(|(index, m)| m.map(|m| (index, m)))
            .min_by(|a, b| a.1.total_cmp(&b.1));
        if let Some((index, margin)) = nearly {
            if margin < 0.05
                && (worst_margin > 0.5 + settings.guard_band_db || worst_line == Binding::Nothing)
            {
                worst_line = Binding::Line(index);
            }
        }
    }
    // Nothing holds: an unreachable line is what decides (the one furthest from its limit).
    let unreachable_binding = unreachable
        .iter()
        .min_by(|a, b| {
            margin_key(a.best_margin, false).total_cmp(&margin_key(b.best_margin, false))
        })
        .map(|u| Binding::Line(u.line));
    let binding = match (met, headroom_binds, bias_limit, unreachable_binding) {
        (_, true, _, _) => Binding::Headroom,
        (false, false, Some(limit), _) => limit,
        (false, false, None, Some(line)) => line,
        _ => worst_line,
    };
    // A value that cannot bias judges no line: when one is chosen (nothing holds anywhere),
    // the margin reported is the best that can be reached.
    let (worst_margin, binding_corner) = if worst_margin.is_finite() {
        (worst_margin, binding_corner)
    } else {
        match unreachable
            .iter()
            .map(|u| margin_key(u.best_margin, false))
            .reduce(f64::max)
        {
            Some(best) if best.is_finite() => (best, binding_corner),
            _ => (worst_margin, binding_corner),
        }
    };
    let (worst_margin, binding_corner) = match (met, binding, unreachable.first()) {
        (false, Binding::Line(index), Some(_)) => {
            match unreachable.iter().find(|u| u.line == index) {
                Some(u) => (margin_key(u.best_margin, false), u.corner.clone()),
                None => (worst_margin, binding_corner),
            }
        }
        _ => (worst_margin, binding_corner),
    };
    Ok(SizingOutcome {
        stage: stage.name.clone(),
        temperature_c,
        met,
        binding,
        worst_margin,
        binding_corner,
        reference_gain_db,
        headroom_binds,
        chosen,
        scan,
        distortion_least,
        noise_greatest,
        conflict_gap,
        windows,
        unreachable,
        hints,
        guard_band_db: settings.guard_band_db,
    })
}

/// How the recommended value was found.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Basis {
    /// The least value holding every line at every temperature (the low end of the first
    /// window common to all temperatures).
    CommonWindow,
    /// No value holds every line at every temperature: the least scanned value holding every
    /// line that can be met at each temperature (the others are unreachable).
    ReachableLines,
    /// Not even that: the scanned value with the best worst-line margin across temperatures.
    BestWorstMargin,
    /// The least value in the common windows whose Monte Carlo population also meets every
    /// yield line (the least value holding the other lines did not).
    YieldInWindow,
    /// Sizing over a region of several variables: the least value of the minimised variable
    /// holding every line at every temperature, with the other variable where the worst
    /// margin is greatest (`study::region`).
    LeastInRegion,
    /// No design of the region holds every line: the design with the best worst margin.
    BestInRegion,
    /// The least grid value of the minimised variable above the region's answer whose best
    /// design's Monte Carlo population also meets every yield line.
    YieldInRegion,
}

/// The design sizing recommends for one stage: one emitter resistance (and, with `hold_gain`,
/// one load) for every temperature and corner.
#[derive(Debug, Clone, PartialEq)]
pub struct Recommendation {
    /// Index of the planned stage.
    pub stage_index: usize,
    /// Emitter resistance per side to build, Ω.
    pub emitter_resistance: f64,
    /// Tail current to build, A (the plan's, unless sizing chooses it).
    pub tail_current: f64,
    /// Load resistance per side to build, Ω (the plan's, or rescaled with `hold_gain` at the
    /// typical temperature).
    pub load_resistance: f64,
    /// Multi-tanh area ratio to build, when sizing chooses it.
    pub area_ratio: Option<f64>,
    /// Whether sizing found a value holding every line at every temperature.
    pub met: bool,
    /// The windows common to every temperature, Ω (`[low, high]`).
    pub windows: Vec<(f64, f64)>,
    /// How the value was found.
    pub basis: Basis,
    /// The yield lines fail at the least value holding the other lines, and at every value of
    /// the common windows tried above it.
    pub yield_short: bool,
}

impl Recommendation {
    /// Sets the values to build on `stage` (a copy of the planned one).
    pub fn apply(&self, stage: &mut Stage) {
        stage.emitter_resistance = self.emitter_resistance;
        stage.tail_current = self.tail_current;
        stage.load_resistance = self.load_resistance;
        if let Some(ratio) = self.area_ratio {
            stage.multi_tanh.area_ratio = ratio;
        }
    }
}

/// Intersection of two lists of increasing, disjoint intervals.
fn intersect(a: &[(f64, f64)], b: &[(f64, f64)]) -> Vec<(f64, f64)> {
    let mut out = Vec::new();
    for &(a_low, a_high) in a {
        for &(b_low, b_high) in b {
            let (low, high) = (a_low.max(b_low), a_high.min(b_high));
            if low <= high {
                out.push((low, high));
            }
        }
    }
    out.sort_by(|x, y| x.0.total_cmp(&y.0));
    out
}

/// The temperature nearest 27 °C (room temperature, common practice).
pub fn typical_temperature(temperatures_c: &[f64]) -> f64 {
    temperatures_c
        .iter()
        .copied()
        .min_by(|a, b| (a - 27.0).abs().total_cmp(&(b - 27.0).abs()))
        .unwrap_or(27.0)
}

/// One value for every temperature from the per-temperature outcomes of one stage.
pub fn recommend(
    plan: &Plan,
    stage_index: usize,
    outcomes: &[&SizingOutcome],
    settings: &SizingSettings,
    cache: &Arc<FftCache>,
) -> Result<Recommendation, Error> {
    let stage = &plan.stages[stage_index];
    let mut common: Option<Vec<(f64, f64)>> = None;
    for outcome in outcomes {
        let here: Vec<(f64, f64)> = outcome.windows.iter().map(|w| (w.low, w.high)).collect();
        common = Some(match common {
            None => here,
            Some(so_far) => intersect(&so_far, &here),
        });
    }
    let windows = common.unwrap_or_default();
    let every_met = !outcomes.is_empty() && outcomes.iter().all(|o| o.met);
    let (emitter_resistance, basis) = match windows.first() {
        Some(&(low, _)) if every_met => (low, Basis::CommonWindow),
        _ => fallback(plan, outcomes, settings),
    };
    let load_resistance = if settings.hold_gain {
        held_load(
            plan,
            stage,
            typical_temperature(&plan.temperatures_c),
            emitter_resistance,
            cache,
        )?
    } else {
        stage.load_resistance
    };
    Ok(Recommendation {
        stage_index,
        emitter_resistance,
        tail_current: stage.tail_current,
        load_resistance,
        area_ratio: None,
        met: every_met && basis == Basis::CommonWindow,
        windows,
        basis,
        yield_short: false,
    })
}

/// The value to evaluate when no window is common to every temperature (all the outcomes
/// scanned the same grid).
fn fallback(plan: &Plan, outcomes: &[&SizingOutcome], settings: &SizingSettings) -> (f64, Basis) {
    let Some(first) = outcomes.first() else {
        return (settings.emitter_range().0, Basis::BestWorstMargin);
    };
    let counted: Vec<bool> = plan
        .budget
        .iter()
        .enumerate()
        .map(|(i, l)| {
            !l.metric.is_population()
                && !outcomes
                    .iter()
                    .any(|o| o.unreachable.iter().any(|u| u.line == i))
        })
        .collect();
    let criterion = Criterion {
        counted,
        guard_band_db: settings.guard_band_db,
        volts: volts_lines(plan),
    };
    let points = first.scan.len();
    if let Some(index) = (0..points).find(|&i| outcomes.iter().all(|o| o.scan[i].holds(&criterion)))
    {
        return (first.scan[index].emitter_resistance, Basis::ReachableLines);
    }
    let worst_at = |i: usize| {
        outcomes
            .iter()
            .map(|o| {
                o.scan[i]
                    .worst_with_corner(&criterion.counted, &criterion.volts)
                    .0
                     .0
            })
            .fold(f64::INFINITY, f64::min)
    };
    let best = (0..points)
        .max_by(|&a, &b| worst_at(a).total_cmp(&worst_at(b)))
        .unwrap_or(0);
    (first.scan[best].emitter_resistance, Basis::BestWorstMargin)
}

/// The name the recommended design of `stage` is evaluated under: `<stage>@sized`, made
/// unique among `taken`.
pub fn sized_name(stage: &str, taken: &[String]) -> String {
    let mut name = format!("{stage}@sized");
    let mut n = 2;
    while taken.contains(&name) {
        name = format!("{stage}@sized-{n}");
        n += 1;
    }
    name
}
