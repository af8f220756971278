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

use crate::analysis::{attribute, build_engine, Context};
use crate::budget::{judge, line_amplitude, line_frequency, Figures};
use crate::error::Error;
use crate::plan::{Metric, Plan, SizingSpec, StageSpec};
use crate::report::{SizingRecord, SizingScanRecord};
use crate::spectrum::ANALYSIS_FLOOR_DBC;
use rayon::prelude::*;

/// Grid points of the initial scan.
pub const SCAN_POINTS: usize = 41;
/// Relative width of the final bracket around the crossing.
pub const REFINE_RELATIVE: f64 = 1e-3;

/// Everything measured at one emitter resistance.
#[derive(Debug, Clone)]
struct Trial {
    emitter_resistance: f64,
    load_resistance: f64,
    margins: Vec<Option<f64>>,
    passes: Vec<bool>,
    corners: Vec<String>,
    gain_db: f64,
    steering_range_v: f64,
    headroom_v: Option<f64>,
}

impl Trial {
    fn all_pass(&self) -> bool {
        self.passes.iter().all(|p| *p) && self.headroom_v.is_none_or(|h| h >= 0.0)
    }

    /// Worst budget-line margin (dB), its line, and the corner where it occurs. Headroom is
    /// in volts and is judged separately.
    fn worst_with_corner(&self, plan: &Plan) -> ((f64, String), String) {
        let mut worst = (f64::INFINITY, String::from("none"));
        let mut corner = crate::corner::TYPICAL.to_owned();
        for (index, (line, (margin, pass))) in plan
            .budget
            .iter()
            .zip(self.margins.iter().zip(&self.passes))
            .enumerate()
        {
            let m = margin.unwrap_or(if *pass {
                f64::INFINITY
            } else {
                f64::NEG_INFINITY
            });
            if m < worst.0 {
                worst = (m, line.metric.name());
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
    base: &StageSpec,
    temperature_c: f64,
    emitter_resistance: f64,
    target_gain: Option<f64>,
    context: &Context,
) -> Result<Trial, Error> {
    let mut spec = base.clone();
    spec.emitter_resistance = emitter_resistance;
    let fail = attribute(base, temperature_c);
    if let Some(target) = target_gain {
        // Gain is proportional to the load without Early effect; a few fixed-point steps
        // settle it to 1e-12 otherwise.
        for _ in 0..8 {
            let engine = build_engine(&spec, temperature_c, context)?;
            let gain = crate::metrics::small_signal_gain(engine.static_solver()).map_err(&fail)?;
            let ratio = target / gain;
            spec.load_resistance *= ratio;
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
    let mut corners = vec![crate::corner::TYPICAL.to_owned(); plan.budget.len()];
    let mut keys = vec![f64::INFINITY; plan.budget.len()];
    let mut headroom_worst: Option<f64> = None;
    for (corner_index, corner) in plan.corners.iter().enumerate() {
        let corner_spec = corner.apply(&spec);
        let engine = build_engine(&corner_spec, temperature_c, context)?;
        let figures = Figures::new(engine.as_ref(), plan);
        for (index, line) in plan.budget.iter().enumerate() {
            let value = figures.measure(line).map_err(&fail)?;
            let (margin, pass) = judge(line, value, ANALYSIS_FLOOR_DBC);
            let k = key(margin, pass);
            if corner_index == 0 || k < keys[index] {
                keys[index] = k;
                margins[index] = margin;
                corners[index] = corner.name.clone();
            }
            passes[index] &= pass;
        }
        if let Some(h) =
            corner_headroom(plan, engine.as_ref(), target_gain.is_some()).map_err(&fail)?
        {
            headroom_worst = Some(headroom_worst.map_or(h, |w: f64| w.min(h)));
        }
    }
    let corner_spec = plan.corners[0].apply(&spec);
    let engine = build_engine(&corner_spec, temperature_c, context)?;
    let figures = Figures::new(engine.as_ref(), plan);
    let gain = figures.gain().map_err(&fail)?;
    let steering = figures.steering_range().map_err(&fail)?;
    Ok(Trial {
        emitter_resistance,
        load_resistance: spec.load_resistance,
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
    plan: &Plan,
    engine: &dyn crate::engine::ResponseEngine,
    hold_gain: bool,
) -> Result<Option<f64>, crate::error::SolveFailure> {
    if !hold_gain {
        return Ok(None);
    }
    let amplitude = plan
        .budget
        .iter()
        .filter(|l| l.metric.needs_amplitude())
        .map(|l| line_amplitude(l, plan))
        .fold(0.0, f64::max);
    let amplitude = if amplitude > 0.0 {
        amplitude
    } else {
        plan.drive.amplitudes.iter().copied().fold(0.0, f64::max)
    };
    let frequency = plan
        .budget
        .first()
        .map(|l| line_frequency(l, plan))
        .unwrap_or(plan.drive.frequencies[0]);
    let tone = engine.tone(amplitude, frequency, 3)?;
    Ok(Some(-tone.region.max_base_collector_v))
}

/// Finds the least emitter resistance for one stage at one temperature.
pub fn size_stage(
    plan: &Plan,
    stage: &StageSpec,
    temperature_c: f64,
    spec: &SizingSpec,
    context: &Context,
) -> Result<SizingRecord, Error> {
    let target_gain = if spec.hold_gain {
        let engine = build_engine(stage, temperature_c, context)?;
        Some(
            crate::metrics::small_signal_gain(engine.static_solver())
                .map_err(attribute(stage, temperature_c))?,
        )
    } else {
        None
    };
    let grid: Vec<f64> = (0..SCAN_POINTS)
        .map(|i| spec.from + (spec.to - spec.from) * i as f64 / (SCAN_POINTS - 1) as f64)
        .collect();
    let scan: Vec<Trial> = grid
        .par_iter()
        .map(|r| trial(plan, stage, temperature_c, *r, target_gain, context))
        .collect::<Result<Vec<_>, Error>>()?;
    let reference_gain = scan[0].gain_db;

    let chosen = match scan.iter().position(Trial::all_pass) {
        None => None,
        Some(0) => Some(scan[0].clone()),
        Some(index) => {
            let (mut low, mut high) = (scan[index - 1].emitter_resistance, scan[index].clone());
            while high.emitter_resistance - low > REFINE_RELATIVE * high.emitter_resistance {
                let mid = 0.5 * (low + high.emitter_resistance);
                let probe = trial(plan, stage, temperature_c, mid, target_gain, context)?;
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
    let scan_records = scan
        .iter()
        .map(|t| SizingScanRecord {
            emitter_resistance_ohm: t.emitter_resistance,
            margins: t.margins.clone(),
            gain_db: t.gain_db,
            headroom_v: t.headroom_v,
        })
        .collect();
    let record = match chosen {
        Some(t) => {
            let ((worst, binding), binding_corner) = t.worst_with_corner(plan);
            let headroom_binds = t.headroom_v.is_some_and(|h| {
                let distortion_worst = t
                    .margins
                    .iter()
                    .flatten()
                    .copied()
                    .fold(f64::INFINITY, f64::min);
                h < 0.05 && distortion_worst > 0.5
            });
            SizingRecord {
                stage: stage.name.clone(),
                temperature_c,
                emitter_resistance_ohm: Some(t.emitter_resistance),
                binding_metric: if headroom_binds {
                    "headroom".into()
                } else {
                    binding
                },
                met: true,
                best_margin: worst,
                gain_db: Some(t.gain_db),
                gain_cost_db: Some(reference_gain - t.gain_db),
                steering_range_v: Some(t.steering_range_v),
                load_resistance_ohm: Some(t.load_resistance),
                headroom_binds,
                best_headroom_v: t.headroom_v,
                scan: scan_records,
                binding_corner,
                distortion_least_emitter_resistance_ohm: distortion_least,
                noise_greatest_emitter_resistance_ohm: noise_greatest,
                conflict_gap_ohm: conflict_gap,
            }
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
                        a.worst_with_corner(plan)
                            .0
                             .0
                            .total_cmp(&b.worst_with_corner(plan).0 .0)
                    })
                    .cloned()
                    .unwrap_or_else(|| scan[0].clone())
            };
            let ((worst, binding), binding_corner) = best.worst_with_corner(plan);
            SizingRecord {
                stage: stage.name.clone(),
                temperature_c,
                emitter_resistance_ohm: Some(best.emitter_resistance),
                binding_metric: if headroom_binds {
                    "headroom".into()
                } else {
                    binding
                },
                met: false,
                best_margin: worst,
                gain_db: Some(best.gain_db),
                gain_cost_db: Some(reference_gain - best.gain_db),
                steering_range_v: Some(best.steering_range_v),
                load_resistance_ohm: Some(best.load_resistance),
                headroom_binds,
                best_headroom_v: best.headroom_v,
                scan: scan_records,
                binding_corner,
                distortion_least_emitter_resistance_ohm: distortion_least,
                noise_greatest_emitter_resistance_ohm: noise_greatest,
                conflict_gap_ohm: conflict_gap,
            }
        }
    };
    Ok(record)
}
