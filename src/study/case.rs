//! One stage at one temperature in one process corner, evaluated over the whole drive: every
//! drive point, the stage-wide figures, the operating point and the budget lines.

use crate::error::{Error, SolveFailure};
use crate::measure::budget::judge;
use crate::measure::large_signal::Intercept;
use crate::measure::noise::NoiseBreakdown;
use crate::measure::noise::{
    dynamic_range_db, sfdr_dbc, snr_db, third_order_sfdr_db, NoiseFigures,
};
use crate::measure::small_signal::{bias_nodes, BiasNodes};
use crate::measure::small_signal::{offset_voltage, transfer_curve, TransferSample};
use crate::measure::stage::{DriveSettings, StageMeasurements};
use crate::model::plan::Plan;
use crate::model::products::Product;
use crate::model::stage::Stage;
use crate::solve::response::{RegionCheck, ResponseEngine};
use crate::solve::spectrum::{FftCache, ANALYSIS_FLOOR_DBC};
use crate::solve::transfer::OperatingPoint;
use rayon::prelude::*;
use std::sync::Arc;

/// Transfer-curve samples per stage and temperature.
pub const TRANSFER_POINTS: usize = 241;

/// One stage at one temperature in one process corner, over the whole drive.
#[derive(Debug, Clone)]
pub struct CaseEvaluation {
    /// Index of the stage in the plan.
    pub stage_index: usize,
    /// The stage as built in this corner.
    pub stage: Stage,
    /// Temperature, °C.
    pub temperature_c: f64,
    /// Process corner name.
    pub corner: String,
    /// Drive points in frequency-major order.
    pub points: Vec<DrivePoint>,
    /// Figures per drive frequency, in plan order.
    pub frequencies: Vec<FrequencyFigures>,
    /// Operating point and stage-wide figures.
    pub operating: OperatingFigures,
    /// Budget lines in plan order.
    pub budget: Vec<LineResult>,
}

/// The measured figures of one drive point.
#[derive(Debug, Clone)]
pub struct DrivePoint {
    /// Frequency, Hz.
    pub frequency_hz: f64,
    /// Peak differential input per tone, V.
    pub amplitude_v: f64,
    /// Peak differential output fundamental, V.
    pub fundamental_v: f64,
    /// 20·log10(fundamental/amplitude), dB.
    pub gain_db: f64,
    /// HD2 upward (index 0 is HD2), dBc, `None` below the floor.
    pub harmonics_dbc: Vec<Option<f64>>,
    /// THD, dBc.
    pub thd_dbc: Option<f64>,
    /// Two-tone figures, when the plan asks for them.
    pub two_tone: Option<TwoToneFigures>,
    /// Fundamental of the P-side collector voltage, V.
    pub single_ended_fundamental_v: f64,
    /// HD2 of the P-side collector voltage, dBc.
    pub single_ended_hd2_dbc: Option<f64>,
    /// HD3 of the P-side collector voltage, dBc.
    pub single_ended_hd3_dbc: Option<f64>,
    /// Samples (or time steps) per period.
    pub samples: usize,
    /// The analysis floor of this point's harmonics, dBc: the engine's, or higher where the
    /// solve's precision is a sizeable part of a small fundamental.
    pub floor_dbc: f64,
    /// Whether the point was answered from the small-signal power series (a drive below the
    /// engine's direct floor, see `solve::small_drive`).
    pub from_series: bool,
    /// Operating region over the single-tone period.
    pub region: RegionCheck,
    /// Signal over band noise, dB (plans with a noise band).
    pub snr_db: Option<f64>,
    /// Fundamental over the largest spur, dBc.
    pub sfdr_dbc: Option<f64>,
    /// Signal over the larger of band noise and the largest spur, dB.
    pub dynamic_range_db: Option<f64>,
}

/// Two-tone figures of one drive point.
#[derive(Debug, Clone, Copy)]
pub struct TwoToneFigures {
    /// IM3, dBc (`None` below the floor).
    pub im3_dbc: Option<f64>,
    /// IM2, dBc (`None` below the floor).
    pub im2_dbc: Option<f64>,
    /// A·10^(−IM3/40), V.
    pub iip3_effective_v: Option<f64>,
    /// One tone's output fundamental, V.
    pub fundamental_v: f64,
    /// IM3's analysis floor at this point, dBc.
    pub im3_floor_dbc: f64,
    /// IM2's analysis floor at this point, dBc.
    pub im2_floor_dbc: f64,
    /// The product of higher order sharing IM3's frequency that sets its floor, if any.
    pub im3_limited_by: Option<Product>,
    /// The product of higher order sharing IM2's frequency that sets its floor, if any.
    pub im2_limited_by: Option<Product>,
    /// Operating region over the two-tone drive (its peak is twice one tone's).
    pub region: RegionCheck,
}

/// Intercepts, compression and gain at one frequency.
#[derive(Debug, Clone, Copy)]
pub struct FrequencyFigures {
    /// Frequency, Hz.
    pub frequency_hz: f64,
    /// Third-order intercept found in the small-signal region.
    pub intercept: Option<Intercept>,
    /// Input 1 dB compression point, V.
    pub p1db_v: Option<f64>,
    /// Operating region of a single tone at the compression point (at the largest amplitude
    /// tried when it is unbounded).
    pub p1db_region: RegionCheck,
    /// Small-signal gain at this frequency, V/V (magnitude).
    pub gain: f64,
    /// Third-order spurious-free dynamic range against the band noise, dB.
    pub sfdr_db: Option<f64>,
}

/// The operating point and stage-wide figures of a case.
#[derive(Debug, Clone)]
pub struct OperatingFigures {
    /// Thermal voltage, V.
    pub thermal_voltage_v: f64,
    /// Small-signal gain at zero frequency, V/V.
    pub small_signal_gain: f64,
    /// Small-signal transconductance, S.
    pub transconductance_s: f64,
    /// Input offset, V.
    pub input_offset_v: f64,
    /// Inputs at the 5 % and 95 % steering points, V.
    pub steering_v: (f64, f64),
    /// Operating region at the steering points (static).
    pub steering_region: RegionCheck,
    /// Operating region at zero input: the bias point itself.
    pub rest_region: RegionCheck,
    /// 3φT + 0.9·I_tail·R_E, V.
    pub steering_rule_of_thumb_v: f64,
    /// Tail current at this temperature and corner, A.
    pub tail_current_a: f64,
    /// The circuit at zero input.
    pub zero_input: OperatingPoint,
    /// Transfer curve.
    pub transfer: Vec<TransferSample>,
    /// White input noise density, V/√Hz.
    pub noise_v_rthz: f64,
    /// White and flicker noise.
    pub noise: NoiseFigures,
    /// Input noise integrated over the plan's band, V rms.
    pub band_noise_v: Option<f64>,
    /// White input noise by source.
    pub noise_breakdown: NoiseBreakdown,
    /// Tail-source and emitter voltages at zero input.
    pub bias: BiasNodes,
}

/// One budget line checked on a case.
#[derive(Debug, Clone, Copy)]
pub struct LineResult {
    /// Index of the line in the plan's budget.
    pub line: usize,
    /// Frequency the line applies at, Hz.
    pub frequency_hz: f64,
    /// Amplitude the line applies at, V (amplitude-dependent metrics).
    pub amplitude_v: Option<f64>,
    /// The measured value (`None`: below the floor, or unbounded).
    pub value: Option<f64>,
    /// Margin, dB (a fraction for a yield line).
    pub margin: Option<f64>,
    /// Whether the line passes.
    pub pass: bool,
    /// The value is below the analysis floor and `margin` is only a lower bound.
    pub margin_at_least: bool,
    /// Whether the line is judged on this case: a yield line is judged on the Monte Carlo
    /// population, which is drawn in the typical corner only.
    pub judged: bool,
    /// For a yield line: the 95 % Wilson score interval of the pass fraction.
    pub interval: Option<(f64, f64)>,
    /// Operating region of the drive the value was measured at (for a yield line: the worst
    /// over the case's other lines, which every run must meet).
    pub region: RegionCheck,
}

impl LineResult {
    /// A yield line judged on a population's pass fraction (`None`: not estimated).
    pub fn judge_yield(
        &mut self,
        line: &crate::model::budget::BudgetLine,
        pass_fraction: Option<f64>,
        interval: Option<(f64, f64)>,
    ) {
        let judged = judge(line, pass_fraction, ANALYSIS_FLOOR_DBC);
        self.value = pass_fraction;
        self.margin = judged.margin;
        self.pass = judged.pass;
        self.margin_at_least = false;
        self.interval = interval;
    }
}

/// Measurements of a stage at a temperature, for the studies.
pub fn measurements(
    stage: &Stage,
    temperature_c: f64,
    plan: &Plan,
    cache: &Arc<FftCache>,
) -> StageMeasurements {
    StageMeasurements::of_stage(
        stage,
        temperature_c,
        cache.clone(),
        DriveSettings::of(&plan.drive),
    )
}

/// Evaluates one stage (as built in its corner) at one temperature over the whole drive.
pub fn evaluate_case(
    plan: &Plan,
    stage_index: usize,
    stage: Stage,
    temperature_c: f64,
    corner: &str,
    cache: &Arc<FftCache>,
) -> Result<CaseEvaluation, Error> {
    let measured = measurements(&stage, temperature_c, plan, cache);
    let fail = |failure: SolveFailure| Error::solve(&stage.name, temperature_c, failure);

    let drive_points: Vec<(f64, f64)> = plan
        .drive
        .frequencies
        .iter()
        .flat_map(|f| plan.drive.amplitudes.iter().map(move |a| (*f, *a)))
        .collect();
    let engine = measured.engine();
    // The stage-wide figures (gain, steering, noise, intercepts, compression) do not depend
    // on the drive points: work them out alongside, so no core waits for the other.
    let (points, figures) = rayon::join(
        || {
            drive_points
                .par_iter()
                .map(|(frequency, amplitude)| {
                    drive_point(plan, engine, *frequency, *amplitude)
                        .map_err(|failure| at_drive_point(failure, *amplitude, *frequency))
                })
                .collect::<Result<Vec<_>, SolveFailure>>()
        },
        || {
            measured.gain()?;
            measured.steering()?;
            measured.noise()?;
            // Each frequency's searches are independent (and kept once computed): in
            // parallel, which for a stage with capacitance is most of the case's work.
            plan.drive
                .frequencies
                .par_iter()
                .try_for_each(|&frequency| {
                    measured.intercept(frequency)?;
                    measured.compression(frequency)?;
                    measured.gain_at(frequency)?;
                    Ok::<_, SolveFailure>(())
                })
        },
    );
    let mut points = points.map_err(fail)?;
    figures.map_err(fail)?;

    let gain = measured.gain().map_err(fail)?;
    let steering = measured.steering().map_err(fail)?;
    let noise_v_rthz = measured.noise().map_err(fail)?;
    let solver = engine.static_solver();
    let circuit = solver.circuit();
    let noise = NoiseFigures::measure(solver, &stage.transistor).map_err(fail)?;
    let band_noise_v = plan.noise_band.map(|band| noise.integrated_v(&band));
    for point in &mut points {
        let two = point.two_tone.as_ref();
        let spurs = point
            .harmonics_dbc
            .iter()
            .copied()
            .chain([two.and_then(|t| t.im3_dbc), two.and_then(|t| t.im2_dbc)]);
        point.sfdr_dbc = sfdr_dbc(spurs);
        if let Some(noise_rms) = band_noise_v {
            let snr = snr_db(point.amplitude_v, noise_rms);
            point.snr_db = Some(snr);
            point.dynamic_range_db = Some(dynamic_range_db(snr, point.sfdr_dbc));
        }
    }

    let mut frequencies = Vec::with_capacity(plan.drive.frequencies.len());
    for &frequency_hz in &plan.drive.frequencies {
        let intercept = measured.intercept(frequency_hz).map_err(fail)?;
        let iip3 = intercept.map(|i| i.iip3_v);
        let compression = measured.compression(frequency_hz).map_err(fail)?;
        frequencies.push(FrequencyFigures {
            frequency_hz,
            intercept,
            p1db_v: compression.input_v,
            p1db_region: compression.region,
            gain: measured.gain_at(frequency_hz).map_err(fail)?.abs(),
            sfdr_db: match (iip3, band_noise_v) {
                (Some(v), Some(n)) => Some(third_order_sfdr_db(v, n)),
                _ => None,
            },
        });
    }

    let zero_input = solver.solve_cold(0.0).map_err(fail)?;
    let operating_region = RegionCheck::of_point(&zero_input, circuit.tail_current);
    let input_offset_v = offset_voltage(solver).map_err(fail)?;
    let (steer_low, steer_high) = steering;
    let span = (2.0 * steer_high.abs().max(steer_low.abs())).max(4.0 * circuit.thermal_voltage);
    let transfer = transfer_curve(solver, span, TRANSFER_POINTS).map_err(fail)?;
    let operating = OperatingFigures {
        thermal_voltage_v: circuit.thermal_voltage,
        small_signal_gain: gain,
        transconductance_s: gain / (0.5 * (circuit.p.load_resistance + circuit.m.load_resistance)),
        input_offset_v,
        steering_v: steering,
        steering_region: measured.steering_region().map_err(fail)?,
        rest_region: measured.zero_input_region().map_err(fail)?,
        steering_rule_of_thumb_v: 3.0 * circuit.thermal_voltage
            + 0.9 * circuit.tail_current * stage.emitter_resistance,
        tail_current_a: circuit.tail_current,
        zero_input,
        transfer,
        noise_v_rthz,
        noise,
        band_noise_v,
        noise_breakdown: NoiseBreakdown::measure(solver).map_err(fail)?,
        bias: bias_nodes(solver).map_err(fail)?,
    };

    let mut budget = Vec::with_capacity(plan.budget.len());
    let typical = plan.corners.first().is_none_or(|c| c.name == corner);
    for (index, line) in plan.budget.iter().enumerate() {
        if line.metric.is_population() {
            // Filled in from the Monte Carlo population; until then it fails (a verdict never
            // rests on a figure that was not computed).
            budget.push(LineResult {
                line: index,
                frequency_hz: measured.line_frequency(line),
                amplitude_v: None,
                value: None,
                margin: None,
                pass: false,
                margin_at_least: false,
                judged: typical,
                interval: None,
                region: RegionCheck::new(),
            });
            continue;
        }
        let measured_line = measured.measure_checked(line).map_err(fail)?;
        let value = measured_line.value;
        let judged = judge(line, value, ANALYSIS_FLOOR_DBC);
        budget.push(LineResult {
            line: index,
            frequency_hz: measured.line_frequency(line),
            amplitude_v: line
                .metric
                .needs_amplitude()
                .then(|| measured.line_amplitude(line)),
            value,
            margin: judged.margin,
            pass: judged.pass,
            margin_at_least: judged.margin_at_least,
            judged: true,
            interval: None,
            region: measured_line.region,
        });
    }
    // A yield line rests on every other line of every run: it carries their worst region.
    let mut others = RegionCheck::new();
    for (result, line) in budget.iter().zip(&plan.budget) {
        if !line.metric.is_population() {
            others.merge(&result.region);
        }
    }
    for (result, line) in budget.iter_mut().zip(&plan.budget) {
        if line.metric.is_population() {
            result.region = if others.max_base_collector_v.is_finite() {
                others
            } else {
                operating_region
            };
        }
    }

    Ok(CaseEvaluation {
        stage_index,
        stage,
        temperature_c,
        corner: corner.to_owned(),
        points,
        frequencies,
        operating,
        budget,
    })
}

/// Names the drive point (amplitude and frequency) in a solver failure inside it.
pub fn at_drive_point(failure: SolveFailure, amplitude_v: f64, frequency_hz: f64) -> SolveFailure {
    SolveFailure {
        point: format!(
            "drive {} V at {} Hz ({})",
            crate::units::short_number(amplitude_v),
            crate::units::short_number(frequency_hz),
            failure.point
        ),
        reason: failure.reason,
    }
}

/// Evaluates one single-tone drive point (and its two-tone companion when asked for).
pub fn drive_point(
    plan: &Plan,
    engine: &dyn ResponseEngine,
    frequency_hz: f64,
    amplitude_v: f64,
) -> Result<DrivePoint, SolveFailure> {
    let settings = DriveSettings::of(&plan.drive);
    let tone = engine.tone(amplitude_v, frequency_hz, settings.tone_harmonics())?;
    let floor = tone.floor_dbc;
    let highest_named = plan
        .budget
        .iter()
        .filter_map(|line| match line.metric {
            crate::model::budget::Metric::Harmonic(order) => Some(order),
            _ => None,
        })
        .fold(crate::measure::stage::NAMED_HARMONICS, usize::max);
    let harmonics_dbc = (2..=highest_named)
        .map(|k| tone.differential.harmonic_dbc(k, floor))
        .collect();
    let thd = tone.differential.raw_thd_dbc(plan.drive.thd_harmonics);
    let two_tone = match plan.drive.two_tone_spacing {
        Some(spacing) => {
            let two = engine.two_tone(amplitude_v, frequency_hz, spacing)?;
            let im3_dbc = two.im3_resolved_dbc();
            let im2_dbc = two.im2_resolved_dbc();
            Some(TwoToneFigures {
                im3_dbc,
                im2_dbc,
                iip3_effective_v: im3_dbc.map(|d| amplitude_v * 10f64.powf(-d / 40.0)),
                fundamental_v: two.fundamental_v,
                im3_floor_dbc: two.im3_floor_dbc,
                im2_floor_dbc: two.im2_floor_dbc,
                im3_limited_by: two.im3_limited_by,
                im2_limited_by: two.im2_limited_by,
                region: two.region,
            })
        }
        None => None,
    };
    let fundamental_v = tone.differential.fundamental();
    Ok(DrivePoint {
        frequency_hz,
        amplitude_v,
        fundamental_v,
        gain_db: 20.0 * (fundamental_v / amplitude_v).log10(),
        harmonics_dbc,
        thd_dbc: (thd >= floor).then_some(thd),
        two_tone,
        single_ended_fundamental_v: tone.single_ended.fundamental(),
        single_ended_hd2_dbc: tone.single_ended.harmonic_dbc(2, floor),
        single_ended_hd3_dbc: tone.single_ended.harmonic_dbc(3, floor),
        samples: tone.samples,
        floor_dbc: floor,
        from_series: engine
            .direct_floor_v()
            .is_some_and(|reference| amplitude_v < reference),
        region: tone.region,
        snr_db: None,
        sfdr_dbc: None,
        dynamic_range_db: None,
    })
}
