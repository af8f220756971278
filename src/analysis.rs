//! Evaluates a whole plan: every stage, temperature, frequency and amplitude, the budget and
//! the sizing, in parallel with a deterministic output order.

use crate::budget::{judge, line_amplitude, line_frequency, Figures};
use crate::engine::{engine_for, ResponseEngine};
use crate::error::{Error, SolveFailure};
use crate::metrics::{self, CUTOFF_FRACTION, STEERING_FRACTION};
use crate::plan::{Limit, Plan, StageSpec};
use crate::report::{
    AnalysisRecord, BudgetRecord, InterceptRecord, PointRecord, Report, StageRecord,
    TransferRecord, CAUTION,
};
use crate::sizing;
use crate::spectrum::{FftCache, ANALYSIS_FLOOR_DBC, CONVERGED_DB};
use crate::stage::StageCircuit;
use crate::units::format_si;
use rayon::prelude::*;
use std::collections::BTreeMap;
use std::sync::Arc;

/// Highest harmonic order given its own `hdN_dbc` field in each point.
pub const NAMED_HARMONICS: usize = 9;
/// Transfer-curve samples per stage and temperature.
pub const TRANSFER_POINTS: usize = 241;

/// Shared state of one evaluation.
pub struct Context {
    /// FFT plans shared by all workers.
    pub cache: Arc<FftCache>,
}

impl Default for Context {
    fn default() -> Self {
        Context {
            cache: Arc::new(FftCache::default()),
        }
    }
}

/// Builds the response engine of a stage at one temperature.
pub fn build_engine(
    spec: &StageSpec,
    temperature_c: f64,
    context: &Context,
) -> Result<Box<dyn ResponseEngine>, Error> {
    let circuit = StageCircuit::new(spec, temperature_c);
    engine_for(circuit, context.cache.clone()).map_err(|reason| Error::Solve {
        stage: spec.name.clone(),
        temperature_c,
        point: "engine set-up".into(),
        reason,
    })
}

/// Attributes a solver failure to its stage and temperature.
pub fn attribute(spec: &StageSpec, temperature_c: f64) -> impl Fn(SolveFailure) -> Error + '_ {
    move |failure| Error::Solve {
        stage: spec.name.clone(),
        temperature_c,
        point: failure.point,
        reason: failure.reason,
    }
}

/// Evaluates the plan and returns the full report. `progress` receives short status lines.
pub fn evaluate(plan: &Plan, progress: &(dyn Fn(&str) + Sync)) -> Result<Report, Error> {
    let context = Context::default();
    // Every stage × temperature × process corner, in report order.
    let cases: Vec<(usize, f64, usize)> = plan
        .stages
        .iter()
        .enumerate()
        .flat_map(|(i, _)| {
            plan.temperatures_c
                .iter()
                .flat_map(move |t| (0..plan.corners.len()).map(move |k| (i, *t, k)))
        })
        .collect();
    let corners: Vec<(usize, f64)> = plan
        .stages
        .iter()
        .enumerate()
        .flat_map(|(i, _)| plan.temperatures_c.iter().map(move |t| (i, *t)))
        .collect();

    progress(&format!(
        "evaluating {} stage(s) × {} temperature(s) × {} corner(s) × {} frequency(ies) × {} amplitude(s)",
        plan.stages.len(),
        plan.temperatures_c.len(),
        plan.corners.len(),
        plan.drive.frequencies.len(),
        plan.drive.amplitudes.len()
    ));
    let per_corner: Vec<CornerResult> = cases
        .par_iter()
        .map(|(index, temperature, corner)| {
            let process = &plan.corners[*corner];
            let spec = process.apply(&plan.stages[*index]);
            let mut result = evaluate_corner(plan, &spec, *temperature, &context)?;
            result.label(&process.name);
            Ok(result)
        })
        .collect::<Result<Vec<_>, Error>>()?;
    let corner_spread = if plan.corners.len() > 1 {
        per_corner
            .chunks(plan.corners.len())
            .flat_map(|group| {
                let views: Vec<crate::corner::CornerView> = group
                    .iter()
                    .map(|r| crate::corner::CornerView {
                        corner: &r.stage.corner,
                        budget: &r.budget,
                        intercepts: &r.intercepts,
                    })
                    .collect();
                crate::corner::spread(
                    plan,
                    &group[0].stage.stage,
                    group[0].stage.temperature_c,
                    &views,
                )
            })
            .collect()
    } else {
        Vec::new()
    };

    let mut report = Report {
        plan: plan.name.clone(),
        points: Vec::new(),
        intercepts: Vec::new(),
        monte_carlo: Vec::new(),
        yield_: Vec::new(),
        budget: Vec::new(),
        sizing: Vec::new(),
        corner_spread,
        stages: Vec::new(),
        analysis: AnalysisRecord {
            analysis_floor_dbc: ANALYSIS_FLOOR_DBC,
            thd_harmonics: plan.drive.thd_harmonics,
            convergence_db: CONVERGED_DB,
            steering_fraction: STEERING_FRACTION,
            version: env!("CARGO_PKG_VERSION").to_owned(),
        },
        warnings: Vec::new(),
        met: true,
        caution: CAUTION.to_owned(),
    };
    for corner in per_corner {
        report.points.extend(corner.points);
        report.intercepts.extend(corner.intercepts);
        report.stages.push(corner.stage);
        report.budget.extend(corner.budget);
        report.warnings.extend(corner.warnings);
    }

    if let Some(spec) = &plan.monte_carlo {
        progress(&format!(
            "Monte Carlo: {} run(s) per stage and temperature",
            spec.runs
        ));
        let (distributions, yields, warnings) = crate::montecarlo::evaluate(plan, spec, &context)?;
        report.monte_carlo = distributions;
        report.yield_ = yields;
        report.warnings.extend(warnings);
    }

    if let Some(spec) = &plan.sizing {
        progress("sizing emitter degeneration");
        report.sizing = corners
            .par_iter()
            .map(|(index, temperature)| {
                sizing::size_stage(plan, &plan.stages[*index], *temperature, spec, &context)
            })
            .collect::<Result<Vec<_>, Error>>()?;
    }

    report.met = if plan.sizing.is_some() {
        report.sizing.iter().all(|s| s.met)
    } else {
        report.budget.iter().all(|b| b.pass)
    };
    Ok(report)
}

struct CornerResult {
    points: Vec<PointRecord>,
    intercepts: Vec<InterceptRecord>,
    stage: StageRecord,
    budget: Vec<BudgetRecord>,
    warnings: Vec<String>,
}

impl CornerResult {
    /// Names the process corner on every record (and in warnings when not typical).
    fn label(&mut self, corner: &str) {
        self.points
            .iter_mut()
            .for_each(|r| r.corner = corner.to_owned());
        self.intercepts
            .iter_mut()
            .for_each(|r| r.corner = corner.to_owned());
        self.budget
            .iter_mut()
            .for_each(|r| r.corner = corner.to_owned());
        self.stage.corner = corner.to_owned();
        if corner != crate::corner::TYPICAL {
            self.warnings
                .iter_mut()
                .for_each(|w| *w = format!("[{corner} corner] {w}"));
        }
    }
}

fn evaluate_corner(
    plan: &Plan,
    spec: &StageSpec,
    temperature_c: f64,
    context: &Context,
) -> Result<CornerResult, Error> {
    let engine = build_engine(spec, temperature_c, context)?;
    let fail = attribute(spec, temperature_c);
    let figures = Figures::new(engine.as_ref(), plan);
    let mut warnings = Vec::new();

    let drive_points: Vec<(f64, f64)> = plan
        .drive
        .frequencies
        .iter()
        .flat_map(|f| plan.drive.amplitudes.iter().map(move |a| (*f, *a)))
        .collect();
    let engine_ref = engine.as_ref();
    let points: Vec<PointRecord> = drive_points
        .par_iter()
        .map(|(frequency, amplitude)| {
            point_record(
                plan,
                spec,
                temperature_c,
                engine_ref,
                *frequency,
                *amplitude,
            )
            .map_err(|failure| at_drive_point(failure, *amplitude, *frequency))
        })
        .collect::<Result<Vec<_>, SolveFailure>>()
        .map_err(&fail)?;
    for point in &points {
        if !point.forward_active {
            let mut reasons = Vec::new();
            if point.max_base_collector_v > 0.0 {
                reasons.push(format!(
                    "collector-base forward-biased by {:.3} V",
                    point.max_base_collector_v
                ));
            }
            if point.min_current_fraction < CUTOFF_FRACTION {
                reasons.push(format!(
                    "a side cuts off ({:.1e} of the tail current)",
                    point.min_current_fraction.max(0.0)
                ));
            }
            warnings.push(format!(
                "stage `{}` at {} °C, {}, {}: leaves forward-active operation ({}); the model's validity ends there",
                spec.name,
                temperature_c,
                format_si(point.frequency_hz, "Hz"),
                format_si(point.amplitude_v, "V"),
                reasons.join(", ")
            ) + if spec.bias_defaulted {
                " — note that the supply or input common mode is the default (5 V, half the supply); set `supply` and `input_common_mode` to the design's bias"
            } else {
                ""
            });
        }
    }

    let gain = figures.gain().map_err(&fail)?;
    let (steer_low, steer_high) = figures.steering().map_err(&fail)?;
    let steering_range = 0.5 * (steer_high - steer_low);
    let noise = figures.noise().map_err(&fail)?;
    let solver = engine.static_solver();
    let circuit = solver.circuit();
    let noise_figures =
        crate::noise::NoiseFigures::measure(solver, &spec.transistor).map_err(&fail)?;
    let band_noise = plan
        .noise_band
        .map(|band| noise_figures.integrated_v(&band));
    let mut points = points;
    for point in &mut points {
        let spurs = point
            .harmonics
            .values()
            .copied()
            .chain([point.im3_dbc.flatten(), point.im2_dbc.flatten()]);
        point.sfdr_dbc = crate::noise::sfdr_dbc(spurs);
        if let Some(noise_rms) = band_noise {
            let snr = crate::noise::snr_db(point.amplitude_v, noise_rms);
            point.snr_db = Some(snr);
            point.dynamic_range_db = Some(crate::noise::dynamic_range_db(snr, point.sfdr_dbc));
        }
    }

    let mut intercepts = Vec::new();
    for &frequency in &plan.drive.frequencies {
        let intercept = figures.intercept(frequency).map_err(&fail)?;
        let p1db = figures.p1db(frequency).map_err(&fail)?;
        if intercept.is_none() {
            warnings.push(format!(
                "stage `{}` at {} °C, {} Hz: no small-signal region with a 3:1 IM3 slope was found; IIP3 is not reported",
                spec.name, temperature_c, frequency
            ));
        }
        if let Some(i) = intercept {
            let smallest = plan
                .drive
                .amplitudes
                .iter()
                .copied()
                .fold(f64::INFINITY, f64::min);
            if plan.drive.two_tone_spacing.is_some() && smallest > 2.0 * i.fit_amplitude_v {
                warnings.push(format!(
                    "stage `{}` at {} °C: every plan amplitude is above the small-signal region (IM3 slope 3:1 only below about {:.3e} V); extrapolating an intercept from the plan's points would be wrong, so it was fitted at {:.3e} V",
                    spec.name, temperature_c, 2.0 * i.fit_amplitude_v, i.fit_amplitude_v
                ));
            }
        }
        let iip3 = intercept.map(|i| i.iip3_v);
        let gain_here = figures.gain_at(frequency).map_err(&fail)?;
        intercepts.push(InterceptRecord {
            stage: spec.name.clone(),
            temperature_c,
            frequency_hz: frequency,
            iip3_v: iip3,
            oip3_v: iip3.map(|v| v * gain_here.abs()),
            p1db_v: p1db,
            steering_range_v: steering_range,
            input_noise_v_rthz: noise,
            small_signal_gain_db: 20.0 * gain_here.abs().log10(),
            iip3_dbv: iip3.map(|v| 20.0 * v.log10()),
            iip3_dbm: match (iip3, plan.reference_impedance) {
                // Peak differential volts into R: P = V²/(2R).
                (Some(v), Some(r)) => Some(10.0 * (v * v / (2.0 * r) / 1e-3).log10()),
                _ => None,
            },
            iip3_fit_amplitude_v: intercept.map(|i| i.fit_amplitude_v),
            im3_slope: intercept.map(|i| i.im3_slope),
            iip2_v: intercept.and_then(|i| i.iip2_v),
            corner: String::new(),
            noise_band_hz: plan.noise_band.map(|b| [b.from, b.to]),
            integrated_noise_v: band_noise,
            flicker_corner_hz: noise_figures.corner_hz(),
            spurious_free_dynamic_range_db: match (iip3, band_noise) {
                (Some(v), Some(n)) => Some(crate::noise::third_order_sfdr_db(v, n)),
                _ => None,
            },
        });
    }

    let zero = solver.solve_cold(0.0).map_err(&fail)?;
    let offset = offset_voltage(solver).map_err(&fail)?;
    let span = (2.0 * steer_high.abs().max(steer_low.abs())).max(4.0 * circuit.thermal_voltage);
    let transfer = metrics::transfer_curve(solver, span, TRANSFER_POINTS)
        .map_err(&fail)?
        .into_iter()
        .map(|s| TransferRecord {
            input_v: s.input_v,
            normalised_current: s.normalised_current,
            transconductance_s: s.transconductance_s,
            output_v: s.output_v,
        })
        .collect();
    let stage = StageRecord {
        stage: spec.name.clone(),
        temperature_c,
        thermal_voltage_v: circuit.thermal_voltage,
        small_signal_gain: gain,
        transconductance_s: gain / (0.5 * (circuit.p.load_resistance + circuit.m.load_resistance)),
        input_offset_v: offset,
        steering_low_v: steer_low,
        steering_high_v: steer_high,
        steering_rule_of_thumb_v: 3.0 * circuit.thermal_voltage
            + 0.9 * circuit.tail_current * spec.emitter_resistance,
        collector_currents_a: [zero.p.collector_current, zero.m.collector_current],
        collector_voltages_v: [zero.p.collector_voltage, zero.m.collector_voltage],
        tail_voltage_v: zero.tail_voltage,
        transfer,
        corner: String::new(),
        tail_current_a: circuit.tail_current,
    };

    let mut budget = Vec::new();
    for line in &plan.budget {
        let value = figures.measure(line).map_err(&fail)?;
        let (margin, pass) = judge(line, value, ANALYSIS_FLOOR_DBC);
        budget.push(BudgetRecord {
            stage: spec.name.clone(),
            temperature_c,
            metric: line.metric.name(),
            at_v: line
                .metric
                .needs_amplitude()
                .then(|| line_amplitude(line, plan)),
            frequency_hz: line_frequency(line, plan),
            limit: line.limit.value(),
            kind: match line.limit {
                Limit::Max(_) => "max".into(),
                Limit::Min(_) => "min".into(),
            },
            value,
            margin,
            pass,
            unit: line.metric.unit_label().into(),
            corner: String::new(),
        });
    }

    Ok(CornerResult {
        points,
        intercepts,
        stage,
        budget,
        warnings,
    })
}

/// The differential input at which the two collector currents are equal, V.
pub fn offset_voltage(solver: &crate::transfer::StaticSolver) -> Result<f64, SolveFailure> {
    let c = solver.circuit();
    let balance = |v: f64| -> f64 {
        solver
            .solve_cold(v)
            .map(|p| (p.p.collector_current - p.m.collector_current) / c.tail_current)
            .unwrap_or(f64::NAN)
    };
    let (low, high) = crate::roots::bracket_increasing(balance, 0.0, c.thermal_voltage, 60)
        .map_err(|e| SolveFailure {
            point: "offset search".into(),
            reason: e.reason,
        })?;
    crate::roots::safe_newton(
        |v| {
            let step = 1e-6 * c.thermal_voltage;
            (
                balance(v),
                (balance(v + step) - balance(v - step)) / (2.0 * step),
            )
        },
        low,
        high,
        0.0,
        crate::roots::Tolerance {
            relative: 1e-14,
            scale: c.thermal_voltage,
            max_iterations: 200,
        },
    )
    .map_err(|e| SolveFailure {
        point: "offset search".into(),
        reason: e.reason,
    })
}

/// Names the drive point (amplitude and frequency) in a solver failure inside it.
pub fn at_drive_point(failure: SolveFailure, amplitude_v: f64, frequency_hz: f64) -> SolveFailure {
    SolveFailure {
        point: format!(
            "drive {amplitude_v:e} V at {frequency_hz} Hz ({})",
            failure.point
        ),
        reason: failure.reason,
    }
}

/// Evaluates one single-tone drive point (and its two-tone companion when asked for).
pub fn point_record(
    plan: &Plan,
    spec: &StageSpec,
    temperature_c: f64,
    engine: &dyn ResponseEngine,
    frequency_hz: f64,
    amplitude_v: f64,
) -> Result<PointRecord, SolveFailure> {
    let harmonics = plan.drive.thd_harmonics.max(NAMED_HARMONICS);
    let tone = engine.tone(amplitude_v, frequency_hz, harmonics)?;
    let floor = tone.floor_dbc;
    let highest_named = plan
        .budget
        .iter()
        .filter_map(|line| match line.metric {
            crate::plan::Metric::Harmonic(order) => Some(order),
            _ => None,
        })
        .fold(NAMED_HARMONICS, usize::max);
    let named: BTreeMap<String, Option<f64>> = (2..=highest_named)
        .map(|k| {
            (
                format!("hd{k}_dbc"),
                tone.differential.harmonic_dbc(k, floor),
            )
        })
        .collect();
    let thd = tone.differential.raw_thd_dbc(plan.drive.thd_harmonics);
    let (im3, im2, effective, two_tone_fundamental) = match plan.drive.two_tone_spacing {
        Some(spacing) => {
            let two = engine.two_tone(amplitude_v, frequency_hz, spacing)?;
            let im3 = two.im3_dbc();
            let im3 = (im3 >= floor).then_some(im3);
            let im2 = two.im2_dbc();
            let im2 = (im2 >= floor).then_some(im2);
            let effective = im3.map(|d| amplitude_v * 10f64.powf(-d / 40.0));
            (
                Some(im3),
                Some(im2),
                Some(effective),
                Some(two.fundamental_v),
            )
        }
        None => (None, None, None, None),
    };
    let fundamental = tone.differential.fundamental();
    let region = tone.region;
    Ok(PointRecord {
        stage: spec.name.clone(),
        temperature_c,
        frequency_hz,
        amplitude_v,
        fundamental_v: fundamental,
        gain_db: 20.0 * (fundamental / amplitude_v).log10(),
        harmonics: named,
        thd_dbc: (thd >= floor).then_some(thd),
        im3_dbc: im3,
        im2_dbc: im2,
        iip3_effective_v: effective,
        two_tone_fundamental_v: two_tone_fundamental,
        single_ended_fundamental_v: tone.single_ended.fundamental(),
        single_ended_hd2_dbc: tone.single_ended.harmonic_dbc(2, floor),
        single_ended_hd3_dbc: tone.single_ended.harmonic_dbc(3, floor),
        samples: tone.samples,
        forward_active: region.warnings().is_empty(),
        max_base_collector_v: region.max_base_collector_v,
        min_current_fraction: region.min_current_fraction,
        corner: crate::corner::TYPICAL.into(),
        snr_db: None,
        sfdr_dbc: None,
        dynamic_range_db: None,
    })
}
