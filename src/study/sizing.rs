//! Sizing: the least emitter degeneration that meets every budget line.
//!
//! Margins are not assumed monotonic in R_E (mismatch, Early effect and a finite tail can bend
//! them): the range is scanned on a uniform grid, the first passing grid value after a failing
//! one is taken as the crossing, and the crossing is refined by bisection until the bracket is
//! within 0.1 % of R_E. With `hold_gain`, the load is rescaled at each R_E so the small-signal
//! gain stays that of the stage as planned, and collector-base headroom at the largest budget
//! amplitude becomes a further constraint.
//!
//! With process corners every trial is evaluated in every corner and each line keeps its
//! worst margin, so the chosen R_E meets the budget in all corners. When noise lines and
//! distortion lines cannot be met together, the record gives the least scanned R_E meeting
//! the distortion lines, the greatest meeting the noise lines, and the gap between them.

use crate::error::{Error, SolveFailure};
use crate::measure::budget::judge;
use crate::measure::small_signal::small_signal_gain;
use crate::measure::stage::StageMeasurements;
use crate::model::budget::Metric;
use crate::model::corner::TYPICAL;
use crate::model::plan::{Plan, SizingSettings};
use crate::model::stage::Stage;
use crate::solve::spectrum::{FftCache, ANALYSIS_FLOOR_DBC};
use crate::study::case::measurements;
use rayon::prelude::*;
use std::sync::Arc;

/// Grid points of the initial scan.
pub const SCAN_POINTS: usize = 41;
/// Relative width of the final bracket around the crossing.
pub const REFINE_RELATIVE: f64 = 1e-3;

/// Everything measured at one emitter resistance.
#[derive(Debug, Clone)]
pub struct Trial {
    /// Emitter resistance per side, Ω.
    pub emitter_resistance: f64,
    /// Load resistance used, Ω (rescaled with `hold_gain`).
    pub load_resistance: f64,
    /// Worst margin of each budget line across corners, dB.
    pub margins: Vec<Option<f64>>,
    /// Whether each line passes in every corner.
    pub passes: Vec<bool>,
    /// Corner giving each line's worst margin.
    pub corners: Vec<String>,
    /// Small-signal gain in the typical corner, dB.
    pub gain_db: f64,
    /// Steering range in the typical corner, V.
    pub steering_range_v: f64,
    /// Worst collector-base headroom across corners, V (`hold_gain` only).
    pub headroom_v: Option<f64>,
}

/// What decided a sizing result.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Binding {
    /// The budget line with this index (in the plan) has the least margin.
    Line(usize),
    /// Collector-base headroom, not distortion (`hold_gain` only).
    Headroom,
    /// No budget line bounds the result.
    Nothing,
}

/// The sizing of one stage at one temperature.
#[derive(Debug, Clone)]
pub struct SizingOutcome {
    /// Stage name.
    pub stage: String,
    /// Temperature, °C.
    pub temperature_c: f64,
    /// Whether a value meeting every line was found.
    pub met: bool,
    /// The least value meeting every line, or the best trial when none does.
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
}

impl Trial {
    fn all_pass(&self) -> bool {
        self.passes.iter().all(|p| *p) && self.headroom_v.is_none_or(|h| h >= 0.0)
    }

    /// Worst budget-line margin (dB), its line, and the corner where it occurs. Headroom is
    /// in volts and is judged separately.
    fn worst_with_corner(&self) -> ((f64, Binding), String) {
        let mut worst = (f64::INFINITY, Binding::Nothing);
        let mut corner = TYPICAL.to_owned();
        for (index, (margin, pass)) in self.margins.iter().zip(&self.passes).enumerate() {
            let m = margin.unwrap_or(if *pass {
                f64::INFINITY
            } else {
                f64::NEG_INFINITY
            });
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
    }
}

fn trial(
    plan: &Plan,
    base: &Stage,
    temperature_c: f64,
    emitter_resistance: f64,
    target_gain: Option<f64>,
    cache: &Arc<FftCache>,
) -> Result<Trial, Error> {
    let mut trial_stage = base.clone();
    trial_stage.emitter_resistance = emitter_resistance;
    let fail = |failure: SolveFailure| Error::solve(&base.name, temperature_c, failure);
    if let Some(target) = target_gain {
        // Gain is proportional to the load without Early effect; a few fixed-point steps
        // settle it to 1e-12 otherwise.
        for _ in 0..8 {
            let measured = measurements(&trial_stage, temperature_c, plan, cache);
            let gain = small_signal_gain(measured.engine().static_solver()).map_err(fail)?;
            let ratio = target / gain;
            trial_stage.load_resistance *= ratio;
            if (ratio - 1.0).abs() < 1e-12 {
                break;
            }
        }
    }
    // Worst case over the process corners, line by line.
    let key = |margin: Option<f64>, pass: bool| {
        margin.unwrap_or(if pass {
            f64::INFINITY
        } else {
            f64::NEG_INFINITY
        })
    };
    let mut margins: Vec<Option<f64>> = vec![None; plan.budget.len()];
    let mut passes = vec![true; plan.budget.len()];
    let mut corners = vec![TYPICAL.to_owned(); plan.budget.len()];
    let mut keys = vec![f64::INFINITY; plan.budget.len()];
    let mut headroom_worst: Option<f64> = None;
    for (corner_index, corner) in plan.corners.iter().enumerate() {
        let in_corner = corner.apply(&trial_stage);
        let measured = measurements(&in_corner, temperature_c, plan, cache);
        for (index, line) in plan.budget.iter().enumerate() {
            let value = measured.measure(line).map_err(fail)?;
            let (margin, pass) = judge(line, value, ANALYSIS_FLOOR_DBC);
            let k = key(margin, pass);
            if corner_index == 0 || k < keys[index] {
                keys[index] = k;
                margins[index] = margin;
                corners[index] = corner.name.clone();
            }
            passes[index] &= pass;
        }
        if let Some(h) = corner_headroom(&measured, plan, target_gain.is_some()).map_err(fail)? {
            headroom_worst = Some(headroom_worst.map_or(h, |w: f64| w.min(h)));
        }
    }
    let in_corner = plan.corners[0].apply(&trial_stage);
    let measured = measurements(&in_corner, temperature_c, plan, cache);
    let gain = measured.gain().map_err(fail)?;
    let steering = measured.steering_range().map_err(fail)?;
    Ok(Trial {
        emitter_resistance,
        load_resistance: trial_stage.load_resistance,
        margins,
        passes,
        corners,
        gain_db: 20.0 * gain.abs().log10(),
        steering_range_v: steering,
        headroom_v: headroom_worst,
    })
}

/// Collector-base headroom at the largest budget amplitude (hold_gain only), V.
fn corner_headroom(
    measured: &StageMeasurements,
    plan: &Plan,
    hold_gain: bool,
) -> Result<Option<f64>, SolveFailure> {
    if !hold_gain {
        return Ok(None);
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
    let tone = measured.engine().tone(amplitude, frequency, 3)?;
    Ok(Some(-tone.region.max_base_collector_v))
}

/// Trials a sizing is expected to take: the scan and about ten bisection steps (from a scan
/// step down to 0.1 % of the value). For a progress display; the real count may differ.
pub const EXPECTED_TRIALS: usize = SCAN_POINTS + 10;

/// Finds the least emitter resistance for one stage at one temperature.
pub fn size_stage(
    plan: &Plan,
    stage: &Stage,
    temperature_c: f64,
    settings: &SizingSettings,
    cache: &Arc<FftCache>,
) -> Result<SizingOutcome, Error> {
    size_stage_observed(plan, stage, temperature_c, settings, cache, &|| {})
}

/// [`size_stage`], calling `trial_done` after every trial R_E (for a progress count).
pub fn size_stage_observed(
    plan: &Plan,
    stage: &Stage,
    temperature_c: f64,
    settings: &SizingSettings,
    cache: &Arc<FftCache>,
    trial_done: &(dyn Fn() + Sync),
) -> Result<SizingOutcome, Error> {
    let trial = |plan: &Plan,
                 stage: &Stage,
                 temperature_c: f64,
                 r: f64,
                 target_gain: Option<f64>,
                 cache: &Arc<FftCache>| {
        let outcome = trial(plan, stage, temperature_c, r, target_gain, cache);
        trial_done();
        outcome
    };
    let target_gain = if settings.hold_gain {
        let measured = measurements(stage, temperature_c, plan, cache);
        Some(
            small_signal_gain(measured.engine().static_solver())
                .map_err(|failure| Error::solve(&stage.name, temperature_c, failure))?,
        )
    } else {
        None
    };
    let grid: Vec<f64> = (0..SCAN_POINTS)
        .map(|i| {
            settings.from + (settings.to - settings.from) * i as f64 / (SCAN_POINTS - 1) as f64
        })
        .collect();
    let scan: Vec<Trial> = grid
        .par_iter()
        .map(|r| trial(plan, stage, temperature_c, *r, target_gain, cache))
        .collect::<Result<Vec<_>, Error>>()?;
    let reference_gain_db = scan[0].gain_db;

    let chosen = match scan.iter().position(Trial::all_pass) {
        None => None,
        Some(0) => Some(scan[0].clone()),
        Some(index) => {
            let (mut low, mut high) = (scan[index - 1].emitter_resistance, scan[index].clone());
            while high.emitter_resistance - low > REFINE_RELATIVE * high.emitter_resistance {
                let mid = 0.5 * (low + high.emitter_resistance);
                let probe = trial(plan, stage, temperature_c, mid, target_gain, cache)?;
                if probe.all_pass() {
                    high = probe;
                } else {
                    low = mid;
                }
            }
            Some(high)
        }
    };

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
    let conflict_gap = match (chosen.is_none(), distortion_least, noise_greatest) {
        (true, Some(d), Some(n)) if d > n => Some(d - n),
        _ => None,
    };
    let met = chosen.is_some();
    let (chosen, headroom_binds) = match chosen {
        Some(t) => {
            let headroom_binds = t.headroom_v.is_some_and(|h| {
                let distortion_worst = t
                    .margins
                    .iter()
                    .flatten()
                    .copied()
                    .fold(f64::INFINITY, f64::min);
                h < 0.05 && distortion_worst > 0.5
            });
            (t, headroom_binds)
        }
        None => {
            // Distortion alone may be meetable while headroom fails everywhere (hold_gain):
            // then headroom binds, and the best headroom among those trials is reported.
            let distortion_ok: Vec<&Trial> = scan
                .iter()
                .filter(|t| t.passes.iter().all(|p| *p))
                .collect();
            let headroom_binds = !distortion_ok.is_empty();
            let best = if headroom_binds {
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
                scan.iter()
                    .max_by(|a, b| {
                        a.worst_with_corner()
                            .0
                             .0
                            .total_cmp(&b.worst_with_corner().0 .0)
                    })
                    .cloned()
                    .unwrap_or_else(|| scan[0].clone())
            };
            (best, headroom_binds)
        }
    };
    let ((worst_margin, worst_line), binding_corner) = chosen.worst_with_corner();
    Ok(SizingOutcome {
        stage: stage.name.clone(),
        temperature_c,
        met,
        binding: if headroom_binds {
            Binding::Headroom
        } else {
            worst_line
        },
        worst_margin,
        binding_corner,
        reference_gain_db,
        headroom_binds,
        chosen,
        scan,
        distortion_least,
        noise_greatest,
        conflict_gap,
    })
}
