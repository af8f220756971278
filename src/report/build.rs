//! From a plan's typed evaluation to the report: every record of `report.json`, and every
//! warning worded. This is the one place where study results become records and sentences.

use crate::error::Error;
use crate::measure::small_signal::STEERING_FRACTION;
use crate::model::budget::Metric;
use crate::model::corner::TYPICAL;
use crate::model::plan::Plan;
use crate::model::stage::Stage;
use crate::report::{
    dbm, AnalysisRecord, BudgetRecord, Harmonics, InterceptRecord, MonteCarloRecord, PointRecord,
    Report, SizingRecord, SizingScanRecord, SpreadRecord, StageRecord, TransferRecord, YieldRecord,
    CAUTION,
};
use crate::solve::response::CUTOFF_FRACTION;
use crate::solve::spectrum::{ANALYSIS_FLOOR_DBC, CONVERGED_DB};
use crate::study::case::{CaseEvaluation, DrivePoint};
use crate::study::corners::{CornerSpread, SpreadFigure};
use crate::study::evaluate::{evaluate, PlanEvaluation, Progress};
use crate::study::montecarlo::{Population, PopulationFigure};
use crate::study::sizing::{Binding, SizingOutcome, Trial};
use crate::units::format_si;

/// Name of the yield interval written in the report.
pub const INTERVAL_NAME: &str = "Wilson score interval, 95 %";

impl Plan {
    /// Evaluates the plan as `linbudget run` does — every stage, temperature, corner, frequency
    /// and amplitude, the budget, Monte Carlo and sizing — without writing anything.
    ///
    /// ```
    /// use linbudget::{BudgetLine, Drive, Limit, Metric, Plan, Stage};
    ///
    /// let plan = Plan::new("check", vec![Stage::new("pair", 1e-3, 2e3).emitter_resistance(200.0)],
    ///                      Drive::new(vec![0.01, 0.05]))
    ///     .budget_line(BudgetLine::new(Metric::Harmonic(3), Limit::Max(-40.0)).at(0.05));
    /// let report = plan.evaluate()?;
    /// assert!(report.met());
    /// assert_eq!(report.points.len(), 2);
    /// assert!(report.budget[0].margin.unwrap() > 0.0);
    /// # Ok::<(), linbudget::Error>(())
    /// ```
    pub fn evaluate(&self) -> Result<Report, Error> {
        self.evaluate_with(&|_| {})
    }

    /// [`Plan::evaluate`], telling `progress` what is being done.
    pub fn evaluate_with(&self, progress: &(dyn Fn(Progress) + Sync)) -> Result<Report, Error> {
        Ok(build(self, evaluate(self, progress)?))
    }
}

/// The report of an evaluated plan.
pub fn build(plan: &Plan, evaluation: PlanEvaluation) -> Report {
    let met = evaluation.met(plan);
    let PlanEvaluation {
        cases,
        spread,
        population,
        sizing,
    } = evaluation;
    let mut report = Report {
        plan: plan.name.clone(),
        points: Vec::new(),
        intercepts: Vec::new(),
        monte_carlo: Vec::new(),
        yield_: Vec::new(),
        budget: Vec::new(),
        sizing: Vec::new(),
        corner_spread: spread.iter().map(|s| spread_record(plan, s)).collect(),
        stages: Vec::new(),
        analysis: AnalysisRecord {
            analysis_floor_dbc: ANALYSIS_FLOOR_DBC,
            thd_harmonics: plan.drive.thd_harmonics,
            convergence_db: CONVERGED_DB,
            steering_fraction: STEERING_FRACTION,
            version: env!("CARGO_PKG_VERSION").to_owned(),
        },
        warnings: Vec::new(),
        met,
        caution: CAUTION.to_owned(),
    };
    for case in cases {
        let CaseRecords {
            points,
            intercepts,
            stage,
            budget,
            warnings,
        } = case_records(plan, case);
        report.points.extend(points);
        report.intercepts.extend(intercepts);
        report.stages.push(stage);
        report.budget.extend(budget);
        report.warnings.extend(warnings);
    }
    if let Some(population) = population {
        let (distributions, yields, warnings) = population_records(population);
        report.monte_carlo = distributions;
        report.yield_ = yields;
        report.warnings.extend(warnings);
    }
    report.sizing = sizing.into_iter().map(|s| sizing_record(plan, s)).collect();
    report
}

struct CaseRecords {
    points: Vec<PointRecord>,
    intercepts: Vec<InterceptRecord>,
    stage: StageRecord,
    budget: Vec<BudgetRecord>,
    warnings: Vec<String>,
}

fn case_records(plan: &Plan, case: CaseEvaluation) -> CaseRecords {
    let CaseEvaluation {
        stage,
        temperature_c,
        corner,
        points,
        frequencies,
        operating,
        budget,
        ..
    } = case;
    let name = &stage.name;
    let points: Vec<PointRecord> = points
        .into_iter()
        .map(|p| point_record(name, temperature_c, &corner, p))
        .collect();
    let mut warnings = forward_active_warnings(&stage, temperature_c, &points);
    let (steer_low, steer_high) = operating.steering_v;
    let steering_range = 0.5 * (steer_high - steer_low);
    let mut intercepts = Vec::with_capacity(frequencies.len());
    for figures in &frequencies {
        let frequency = figures.frequency_hz;
        let intercept = figures.intercept;
        if intercept.is_none() {
            warnings.push(format!(
                "stage `{}` at {} °C, {} Hz: no small-signal region with a 3:1 IM3 slope was found; IIP3 is not reported",
                name, temperature_c, frequency
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
                    name,
                    temperature_c,
                    format_si(frequency, "Hz"),
                    format_si(2.0 * i.fit_amplitude_v, "V"),
                    format_si(i.fit_amplitude_v, "V")
                ));
            }
        }
        let iip3 = intercept.map(|i| i.iip3_v);
        intercepts.push(InterceptRecord {
            stage: name.clone(),
            temperature_c,
            frequency_hz: frequency,
            iip3_v: iip3,
            oip3_v: iip3.map(|v| v * figures.gain),
            p1db_v: figures.p1db_v,
            steering_range_v: steering_range,
            input_noise_v_rthz: operating.noise_v_rthz,
            small_signal_gain_db: 20.0 * figures.gain.log10(),
            iip3_dbv: iip3.map(|v| 20.0 * v.log10()),
            iip3_dbm: match (iip3, plan.reference_impedance) {
                // Peak differential volts into R: P = V²/(2R).
                (Some(v), Some(r)) => Some(dbm(v, r)),
                _ => None,
            },
            iip3_fit_amplitude_v: intercept.map(|i| i.fit_amplitude_v),
            im3_slope: intercept.map(|i| i.im3_slope),
            iip2_v: intercept.and_then(|i| i.iip2_v),
            corner: corner.clone(),
            noise_band_hz: plan.noise_band.map(|b| [b.from, b.to]),
            integrated_noise_v: operating.band_noise_v,
            flicker_corner_hz: operating.noise.corner_hz(),
            spurious_free_dynamic_range_db: figures.sfdr_db,
        });
    }
    let zero = &operating.zero_input;
    let stage_record = StageRecord {
        stage: name.clone(),
        temperature_c,
        thermal_voltage_v: operating.thermal_voltage_v,
        small_signal_gain: operating.small_signal_gain,
        transconductance_s: operating.transconductance_s,
        input_offset_v: operating.input_offset_v,
        steering_low_v: steer_low,
        steering_high_v: steer_high,
        steering_rule_of_thumb_v: operating.steering_rule_of_thumb_v,
        collector_currents_a: [zero.p.collector_current, zero.m.collector_current],
        collector_voltages_v: [zero.p.collector_voltage, zero.m.collector_voltage],
        tail_voltage_v: zero.tail_voltage,
        transfer: operating
            .transfer
            .iter()
            .map(|s| TransferRecord {
                input_v: s.input_v,
                normalised_current: s.normalised_current,
                transconductance_s: s.transconductance_s,
                output_v: s.output_v,
            })
            .collect(),
        corner: corner.clone(),
        tail_current_a: operating.tail_current_a,
    };
    let budget = budget
        .iter()
        .map(|result| {
            let line = &plan.budget[result.line];
            BudgetRecord {
                stage: name.clone(),
                temperature_c,
                metric: line.metric.name(),
                at_v: result.amplitude_v,
                frequency_hz: result.frequency_hz,
                limit: line.limit.value(),
                kind: line.limit.kind().into(),
                value: result.value,
                margin: result.margin,
                pass: result.pass,
                unit: line.metric.unit_label().into(),
                corner: corner.clone(),
                limit_dbm: dbm_of(plan, line.metric, line.limit.value()),
                value_dbm: result.value.and_then(|v| dbm_of(plan, line.metric, v)),
            }
        })
        .collect();
    if corner != TYPICAL {
        warnings
            .iter_mut()
            .for_each(|w| *w = format!("[{corner} corner] {w}"));
    }
    CaseRecords {
        points,
        intercepts,
        stage: stage_record,
        budget,
        warnings,
    }
}

/// A volt figure of a power-like metric (IIP3, OIP3, P1dB) in dBm, when the plan gives a
/// reference impedance.
fn dbm_of(plan: &Plan, metric: Metric, volts: f64) -> Option<f64> {
    let power_like = matches!(metric, Metric::Iip3 | Metric::Oip3 | Metric::P1db);
    match plan.reference_impedance {
        Some(ohms) if power_like && volts > 0.0 && volts.is_finite() => Some(dbm(volts, ohms)),
        _ => None,
    }
}

fn point_record(stage: &str, temperature_c: f64, corner: &str, point: DrivePoint) -> PointRecord {
    let two = point.two_tone;
    PointRecord {
        stage: stage.to_owned(),
        temperature_c,
        frequency_hz: point.frequency_hz,
        amplitude_v: point.amplitude_v,
        fundamental_v: point.fundamental_v,
        gain_db: point.gain_db,
        harmonics: Harmonics::from_levels(point.harmonics_dbc),
        thd_dbc: point.thd_dbc,
        im3_dbc: two.map(|t| t.im3_dbc),
        im2_dbc: two.map(|t| t.im2_dbc),
        iip3_effective_v: two.map(|t| t.iip3_effective_v),
        two_tone_fundamental_v: two.map(|t| t.fundamental_v),
        single_ended_fundamental_v: point.single_ended_fundamental_v,
        single_ended_hd2_dbc: point.single_ended_hd2_dbc,
        single_ended_hd3_dbc: point.single_ended_hd3_dbc,
        samples: point.samples,
        forward_active: point.region.is_forward_active(),
        max_base_collector_v: point.region.max_base_collector_v,
        min_current_fraction: point.region.min_current_fraction,
        corner: corner.to_owned(),
        snr_db: point.snr_db,
        sfdr_dbc: point.sfdr_dbc,
        dynamic_range_db: point.dynamic_range_db,
    }
}

/// The name and unit of a spread figure.
fn spread_name(plan: &Plan, figure: SpreadFigure) -> (String, &'static str) {
    match figure {
        SpreadFigure::Line(index) => {
            let metric = plan.budget[index].metric;
            (metric.name(), metric.unit_label())
        }
        SpreadFigure::Gain => ("gain".into(), "dB"),
        SpreadFigure::Iip3 => ("iip3".into(), "V"),
        SpreadFigure::P1db => ("p1db".into(), "V"),
        SpreadFigure::SteeringRange => ("steering_range".into(), "V"),
        SpreadFigure::InputNoise => ("input_noise".into(), "V/√Hz"),
    }
}

fn spread_record(plan: &Plan, spread: &CornerSpread) -> SpreadRecord {
    let (metric, unit) = spread_name(plan, spread.figure);
    SpreadRecord {
        stage: spread.stage.clone(),
        temperature_c: spread.temperature_c,
        metric,
        at_v: spread.at_v,
        unit: unit.to_owned(),
        typical: spread.typical,
        min: spread.min,
        max: spread.max,
        min_corner: spread.min_corner.clone(),
        max_corner: spread.max_corner.clone(),
    }
}

/// The name and unit of a population figure.
fn population_name(figure: PopulationFigure) -> (&'static str, &'static str) {
    match figure {
        PopulationFigure::Hd2 => ("hd2", "dBc"),
        PopulationFigure::Hd3 => ("hd3", "dBc"),
        PopulationFigure::Thd => ("thd", "dBc"),
        PopulationFigure::Gain => ("gain", "dB"),
        PopulationFigure::Im2 => ("im2", "dBc"),
        PopulationFigure::Im3 => ("im3", "dBc"),
        PopulationFigure::Iip2 => ("iip2", "V"),
        PopulationFigure::Offset => ("offset", "V"),
    }
}

fn population_records(
    population: Population,
) -> (Vec<MonteCarloRecord>, Vec<YieldRecord>, Vec<String>) {
    let warnings = population
        .left_out_with_capacitance
        .iter()
        .map(|name| format!(
            "stage `{name}`: Monte Carlo left out because the stage has capacitance; mismatch statistics are drawn on memoryless stages (evaluate a copy without capacitance for the low-frequency spread)"
        ))
        .collect();
    let mut distributions = Vec::new();
    let mut yields = Vec::new();
    for stage in population.stages {
        for d in &stage.distributions {
            let (metric, unit) = population_name(d.figure);
            distributions.push(MonteCarloRecord {
                stage: stage.stage.clone(),
                temperature_c: stage.temperature_c,
                frequency_hz: d.frequency_hz,
                amplitude_v: d.amplitude_v,
                metric: metric.to_owned(),
                runs: stage.runs,
                median: d.median,
                p05: d.p05,
                p95: d.p95,
                corner: stage.corner.clone(),
                unit: unit.to_owned(),
                below_floor_runs: d.below_floor_runs,
            });
        }
        let estimate = stage.yield_estimate;
        yields.push(YieldRecord {
            stage: stage.stage.clone(),
            temperature_c: stage.temperature_c,
            runs: stage.runs,
            pass_fraction: estimate.pass_fraction(),
            corner: stage.corner.clone(),
            passing_runs: estimate.passing_runs,
            pass_fraction_low: estimate.low,
            pass_fraction_high: estimate.high,
            interval: INTERVAL_NAME.into(),
        });
    }
    (distributions, yields, warnings)
}

fn scan_record(trial: &Trial) -> SizingScanRecord {
    SizingScanRecord {
        emitter_resistance_ohm: trial.emitter_resistance,
        margins: trial.margins.clone(),
        gain_db: trial.gain_db,
        headroom_v: trial.headroom_v,
    }
}

fn sizing_record(plan: &Plan, outcome: SizingOutcome) -> SizingRecord {
    let chosen = &outcome.chosen;
    SizingRecord {
        stage: outcome.stage.clone(),
        temperature_c: outcome.temperature_c,
        emitter_resistance_ohm: Some(chosen.emitter_resistance),
        binding_metric: match outcome.binding {
            Binding::Headroom => "headroom".into(),
            Binding::Line(index) => plan.budget[index].metric.name(),
            Binding::Nothing => "none".into(),
        },
        met: outcome.met,
        best_margin: outcome.worst_margin,
        gain_db: Some(chosen.gain_db),
        gain_cost_db: Some(outcome.reference_gain_db - chosen.gain_db),
        steering_range_v: Some(chosen.steering_range_v),
        load_resistance_ohm: Some(chosen.load_resistance),
        headroom_binds: outcome.headroom_binds,
        best_headroom_v: chosen.headroom_v,
        scan: outcome.scan.iter().map(scan_record).collect(),
        binding_corner: outcome.binding_corner.clone(),
        distortion_least_emitter_resistance_ohm: outcome.distortion_least,
        noise_greatest_emitter_resistance_ohm: outcome.noise_greatest,
        conflict_gap_ohm: outcome.conflict_gap,
    }
}

/// Largest number of amplitude ranges a forward-active warning lists one by one.
const LISTED_RANGES: usize = 4;

/// One warning per frequency for the drive points that leave forward-active operation,
/// naming the amplitude ranges where they do (in increasing amplitude) and the worst case,
/// rather than one line per point: a dense sweep into hard drive would otherwise print
/// hundreds of near-identical lines.
fn forward_active_warnings(
    stage: &Stage,
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
                stage.name,
                temperature_c,
                format_si(frequency, "Hz"),
                reasons.join("; ")
            ) + if stage.bias_is_default() {
                " — note that the supply or input common mode is the default (5 V, half the supply); set `supply` and `input_common_mode` to the design's bias"
            } else {
                ""
            },
        );
    }
    warnings
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

    fn stage() -> Stage {
        Stage::new("s", 1e-3, 2e3)
            .supply(5.0)
            .input_common_mode(2.5)
    }

    /// Points outside forward-active operation are summed up per frequency as amplitude
    /// ranges in increasing amplitude, whatever order the plan lists them in.
    #[test]
    fn forward_active_warnings_name_ranges_not_points() {
        let points: Vec<PointRecord> = [0.5, 0.1, 0.6, 0.2, 0.7, 0.3, 0.01]
            .iter()
            .map(|&a| point(a, a < 0.15 || (0.25..0.55).contains(&a)))
            .collect();
        let warnings = forward_active_warnings(&stage(), 27.0, &points);
        assert_eq!(warnings.len(), 1, "{warnings:?}");
        let w = &warnings[0];
        assert!(w.contains("at 200 mV, 600 mV to 700 mV"), "{w}");
        assert!(w.contains("3 of 7 amplitudes"), "{w}");
        assert!(w.contains("a side cuts off, down to 1.0e-9"), "{w}");
        let all_inside: Vec<PointRecord> = [0.1, 0.2].iter().map(|&a| point(a, true)).collect();
        assert!(forward_active_warnings(&stage(), 27.0, &all_inside).is_empty());
        let one = forward_active_warnings(&stage(), 27.0, &[point(0.4, false)]);
        assert!(
            one[0].contains("1.00 kHz, 400 mV: leaves forward-active operation ("),
            "{one:?}"
        );
    }
}
