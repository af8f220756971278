//! Evaluates a whole plan: every stage, temperature, frequency and amplitude, the budget and
//! the sizing, in parallel with a deterministic output order.

use crate::budget::{judge, line_amplitude, line_frequency, Figures};
use crate::engine::{engine_for, ResponseEngine};
use crate::error::{Error, SolveFailure};
use crate::metrics::{self, CUTOFF_FRACTION, STEERING_FRACTION};
use crate::plan::{Limit, Plan, StageSpec};
use crate::report::{
    AnalysisRecord, BudgetRecord, Harmonics, InterceptRecord, PointRecord, Report, StageRecord,
    TransferRecord, CAUTION,
};
use crate::sizing;
use crate::spectrum::{FftCache, ANALYSIS_FLOOR_DBC, CONVERGED_DB};
use crate::stage::StageCircuit;
use crate::units::format_si;
use rayon::prelude::*;
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
        if report.points.is_empty() {
            // One case (the usual single stage and temperature): take its points whole.
            report.points = corner.points;
        } else {
            report.points.extend(corner.points);
        }
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
    let mut warnings = Vec::new();

    let drive_points: Vec<(f64, f64)> = plan
        .drive
        .frequencies
        .iter()
        .flat_map(|f| plan.drive.amplitudes.iter().map(move |a| (*f, *a)))
        .collect();
    let engine_ref = engine.as_ref();
    // The stage-wide figures (gain, steering, noise, intercepts, compression) do not depend
    // on the drive points: work them out alongside, so no core waits for the other.
    let (points, figures) = rayon::join(
        || {
            drive_points
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
        },
        || {
            let figures = Figures::new(engine_ref, plan);
            figures.gain()?;
            figures.steering()?;
            figures.noise()?;
            for &frequency in &plan.drive.frequencies {
                figures.intercept(frequency)?;
                figures.p1db(frequency)?;
                figures.gain_at(frequency)?;
            }
            Ok::<_, SolveFailure>(figures)
        },
    );
    let points = points.map_err(&fail)?;
    let figures = figures.map_err(&fail)?;
    warnings.extend(forward_active_warnings(spec, temperature_c, &points));

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
            .iter()
            .map(|(_, level)| level)
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
                    "stage `{}` at {} °C, {}: every plan amplitude is above the small-signal region (IM3 slope 3:1 only below about {}); extrapolating an intercept from the plan's points would be wrong, so it was fitted at {}",
                    spec.name,
                    temperature_c,
                    format_si(frequency, "Hz"),
                    format_si(2.0 * i.fit_amplitude_v, "V"),
                    format_si(i.fit_amplitude_v, "V")
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

/// Largest number of amplitude ranges a forward-active warning lists one by one.
const LISTED_RANGES: usize = 4;

/// One warning per frequency for the drive points that leave forward-active operation,
/// naming the amplitude ranges where they do (in increasing amplitude) and the worst case,
/// rather than one line per point: a dense sweep into hard drive would otherwise print
/// hundreds of near-identical lines.
fn forward_active_warnings(
    spec: &StageSpec,
    temperature_c: f64,
    points: &[PointRecord],
) -> Vec<String> {
    let mut frequencies: Vec<f64> = Vec::new();
    for p in points {
        if !frequencies.contains(&p.frequency_hz) {
            frequencies.push(p.frequency_hz);
        }
    }
    let mut warnings = Vec::new();
    for frequency in frequencies {
        let mut here: Vec<&PointRecord> = points
            .iter()
            .filter(|p| p.frequency_hz == frequency)
            .collect();
        here.sort_by(|a, b| a.amplitude_v.total_cmp(&b.amplitude_v));
        // Runs of consecutive amplitudes outside forward-active operation: (first, last, count).
        let mut runs: Vec<(f64, f64, usize)> = Vec::new();
        let mut inside_run = false;
        for p in &here {
            match (p.forward_active, inside_run, runs.last_mut()) {
                (false, true, Some(run)) => {
                    run.1 = p.amplitude_v;
                    run.2 += 1;
                }
                (false, _, _) => runs.push((p.amplitude_v, p.amplitude_v, 1)),
                (true, _, _) => {}
            }
            inside_run = !p.forward_active;
        }
        if runs.is_empty() {
            continue;
        }
        let outside: Vec<&&PointRecord> = here.iter().filter(|p| !p.forward_active).collect();
        let mut reasons = Vec::new();
        let worst_forward_bias = outside
            .iter()
            .map(|p| p.max_base_collector_v)
            .fold(f64::NEG_INFINITY, f64::max);
        if worst_forward_bias > 0.0 {
            reasons.push(format!(
                "collector-base forward-biased by up to {:.3} V",
                worst_forward_bias
            ));
        }
        let least_current = outside
            .iter()
            .map(|p| p.min_current_fraction)
            .fold(f64::INFINITY, f64::min);
        if least_current < CUTOFF_FRACTION {
            reasons.push(format!(
                "a side cuts off, down to {:.1e} of the tail current",
                least_current.max(0.0)
            ));
        }
        let range_text = |&(first, last, count): &(f64, f64, usize)| {
            if count == 1 {
                format_si(first, "V")
            } else {
                format!("{} to {}", format_si(first, "V"), format_si(last, "V"))
            }
        };
        let place = match runs.as_slice() {
            [(first, _, 1)] if here.len() == 1 => format!(", {}", format_si(*first, "V")),
            [single] if single.2 > 1 => format!(" from {}", range_text(single)),
            _ => {
                let mut listed: Vec<String> =
                    runs.iter().take(LISTED_RANGES).map(range_text).collect();
                if runs.len() > LISTED_RANGES {
                    listed.push(format!("{} more ranges", runs.len() - LISTED_RANGES));
                }
                format!(" at {}", listed.join(", "))
            }
        };
        if here.len() > 1 {
            reasons.insert(0, format!("{} of {} amplitudes", outside.len(), here.len()));
        }
        let (point, span) = if here.len() == 1 {
            (place, String::new())
        } else {
            (String::new(), place)
        };
        warnings.push(
            format!(
                "stage `{}` at {} °C, {}{point}: leaves forward-active operation{span} ({}); the model's validity ends there",
                spec.name,
                temperature_c,
                format_si(frequency, "Hz"),
                reasons.join("; ")
            ) + if spec.bias_defaulted {
                " — note that the supply or input common mode is the default (5 V, half the supply); set `supply` and `input_common_mode` to the design's bias"
            } else {
                ""
            },
        );
    }
    warnings
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
    let named = Harmonics::from_levels(
        (2..=highest_named)
            .map(|k| tone.differential.harmonic_dbc(k, floor))
            .collect(),
    );
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

#[cfg(test)]
mod tests {
    use super::*;

    fn point(amplitude_v: f64, forward_active: bool) -> PointRecord {
        serde_json::from_value(serde_json::json!({
            "stage": "s", "temperature_c": 27.0, "frequency_hz": 1000.0,
            "amplitude_v": amplitude_v, "fundamental_v": 1.0, "gain_db": 0.0,
            "thd_dbc": null, "single_ended_fundamental_v": 0.5,
            "single_ended_hd2_dbc": null, "single_ended_hd3_dbc": null, "samples": 256,
            "forward_active": forward_active, "max_base_collector_v": -1.0,
            "min_current_fraction": if forward_active { 0.1 } else { 1e-9 },
        }))
        .unwrap()
    }

    fn spec() -> StageSpec {
        let text = "name: p\nstages: [{name: s, tail_current: 1 mA, load_resistance: 2k, supply: 5 V, input_common_mode: 2.5 V}]\ndrive: {amplitudes: [1 mV]}\n";
        Plan::from_yaml(text, "p.yaml").unwrap().stages.remove(0)
    }

    /// Points outside forward-active operation are summed up per frequency as amplitude
    /// ranges in increasing amplitude, whatever order the plan lists them in.
    #[test]
    fn forward_active_warnings_name_ranges_not_points() {
        let points: Vec<PointRecord> = [0.5, 0.1, 0.6, 0.2, 0.7, 0.3, 0.01]
            .iter()
            .map(|&a| point(a, a < 0.15 || (0.25..0.55).contains(&a)))
            .collect();
        let warnings = forward_active_warnings(&spec(), 27.0, &points);
        assert_eq!(warnings.len(), 1, "{warnings:?}");
        let w = &warnings[0];
        assert!(w.contains("at 200 mV, 600 mV to 700 mV"), "{w}");
        assert!(w.contains("3 of 7 amplitudes"), "{w}");
        assert!(w.contains("a side cuts off, down to 1.0e-9"), "{w}");
        let all_inside: Vec<PointRecord> = [0.1, 0.2].iter().map(|&a| point(a, true)).collect();
        assert!(forward_active_warnings(&spec(), 27.0, &all_inside).is_empty());
        let one = forward_active_warnings(&spec(), 27.0, &[point(0.4, false)]);
        assert!(
            one[0].contains("1.00 kHz, 400 mV: leaves forward-active operation ("),
            "{one:?}"
        );
    }
}
