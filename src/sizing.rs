//! Sizing: the least emitter degeneration that meets every budget line.
//!
//! Margins are not assumed monotonic in R_E (mismatch, Early effect and a finite tail can bend
//! them): the range is scanned on a uniform grid, the first passing grid value after a failing
//! one is taken as the crossing, and the crossing is refined by bisection until the bracket is
//! within 0.1 % of R_E. With `hold_gain`, the load is rescaled at each R_E so the small-signal
//! gain stays that of the stage as planned, and collector-base headroom at the largest budget
//! amplitude becomes a further constraint.

use crate::analysis::{attribute, build_engine, Context};
use crate::budget::{judge, line_amplitude, line_frequency, Figures};
use crate::error::Error;
use crate::plan::{Plan, SizingSpec, StageSpec};
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
    gain_db: f64,
    steering_range_v: f64,
    headroom_v: Option<f64>,
}

impl Trial {
    fn all_pass(&self) -> bool {
        self.passes.iter().all(|p| *p) && self.headroom_v.is_none_or(|h| h >= 0.0)
    }

    /// Worst margin over the lines (and headroom, in dB of 1 V for ranking only).
    fn worst(&self, plan: &Plan) -> (f64, String) {
        let mut worst = (f64::INFINITY, String::from("none"));
        for (line, (margin, pass)) in plan.budget.iter().zip(self.margins.iter().zip(&self.passes)) {
            let m = margin.unwrap_or(if *pass { f64::INFINITY } else { f64::NEG_INFINITY });
            if m < worst.0 {
                worst = (m, line.metric.name());
            }
        }
        if let Some(h) = self.headroom_v {
            if h < 0.0 && worst.0 >= 0.0 {
                worst = (h, "headroom".into());
            }
        }
        worst
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
    let engine = build_engine(&spec, temperature_c, context)?;
    let figures = Figures::new(engine.as_ref(), plan);
    let mut margins = Vec::with_capacity(plan.budget.len());
    let mut passes = Vec::with_capacity(plan.budget.len());
    for line in &plan.budget {
        let value = figures.measure(line).map_err(&fail)?;
        let (margin, pass) = judge(line, value, ANALYSIS_FLOOR_DBC);
        margins.push(margin);
        passes.push(pass);
    }
    let gain = figures.gain().map_err(&fail)?;
    let steering = figures.steering_range().map_err(&fail)?;
    let headroom = if target_gain.is_some() {
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
        let tone = engine.tone(amplitude, frequency, 3).map_err(&fail)?;
        Some(-tone.region.max_base_collector_v)
    } else {
        None
    };
    Ok(Trial {
        emitter_resistance,
        load_resistance: spec.load_resistance,
        margins,
        passes,
        gain_db: 20.0 * gain.abs().log10(),
        steering_range_v: steering,
        headroom_v: headroom,
    })
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
            let (worst, binding) = t.worst(plan);
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
                binding_metric: if headroom_binds { "headroom".into() } else { binding },
                met: true,
                best_margin: worst,
                gain_db: Some(t.gain_db),
                gain_cost_db: Some(reference_gain - t.gain_db),
                steering_range_v: Some(t.steering_range_v),
                load_resistance_ohm: Some(t.load_resistance),
                headroom_binds,
                scan: scan_records,
            }
        }
        None => {
            let best = scan
                .iter()
                .max_by(|a, b| a.worst(plan).0.total_cmp(&b.worst(plan).0))
                .cloned()
                .unwrap_or_else(|| scan[0].clone());
            let (worst, binding) = best.worst(plan);
            let headroom_binds = best.headroom_v.is_some_and(|h| h < 0.0)
                && best.passes.iter().all(|p| *p);
            SizingRecord {
                stage: stage.name.clone(),
                temperature_c,
                emitter_resistance_ohm: Some(best.emitter_resistance),
                binding_metric: binding,
                met: false,
                best_margin: worst,
                gain_db: Some(best.gain_db),
                gain_cost_db: Some(reference_gain - best.gain_db),
                steering_range_v: Some(best.steering_range_v),
                load_resistance_ohm: Some(best.load_resistance),
                headroom_binds,
                scan: scan_records,
            }
        }
    };
    Ok(record)
}
