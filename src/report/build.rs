//! From a plan's typed evaluation to the report: every record of `report.json`, and every
//! warning worded. This is the one place where study results become records and sentences.

use crate::error::Error;
use crate::measure::small_signal::STEERING_FRACTION;
use crate::model::budget::{BudgetLine, Limit, Metric};
use crate::model::corner::TYPICAL;
use crate::model::plan::{Plan, PlanCaution, SizingSettings, SizingVariable};
use crate::model::stage::Stage;
use crate::report::text::celsius;
use crate::report::{
    dbm, quantity_text, AnalysisRecord, BudgetRecord, DesignVerdictRecord, DistortionFrontRecord,
    FailingCheckRecord, FitRecord, FitSummaryRecord, FrontRecord, Harmonics, InterceptRecord,
    MonteCarloRecord, PointRecord, RecommendedStageRecord, RecommendedVerdictRecord, Region,
    RegionCellRecord, RegionRecord, RegionRowRecord, RegionSpanRecord, Report, ResidualRecord,
    ResidualSummaryRecord, SizingRecord, SizingScanRecord, SpreadRecord, StageRecord,
    TransferRecord, UnreachableRecord, VerdictRecord, YieldLineRecord, YieldRecord, CAUTION,
};
use crate::solve::response::{OperatingRegion, RegionCheck};
use crate::solve::spectrum::{ANALYSIS_FLOOR_DBC, CONVERGED_DB};
use crate::study::case::{CaseEvaluation, DrivePoint};
use crate::study::corners::{CornerSpread, SpreadFigure};
use crate::study::evaluate::{evaluate, PlanEvaluation, Progress, RecommendedStage};
use crate::study::fit::{BenchComparison, FitOutcome, FitTermination};
use crate::study::montecarlo::{Population, PopulationFigure};
use crate::study::region::{Axis, FrontPoint, RegionOutcome, RegionPoint};
use crate::study::sizing::{
    Basis, Binding, RangeEnd, RangeHint, SizingOutcome, Trial, Unreachable,
};
use crate::study::verdict::{DesignVerdict, FailingCheck, Judged, Verdict};
use crate::units::{format_si, short_number};

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

/// The report of an evaluated plan, its answer about the recommended design (plans with
/// sizing) or the design as planned.
pub fn build(plan: &Plan, evaluation: PlanEvaluation) -> Report {
    build_judged(plan, evaluation, Judged::Recommended)
}

/// The report of an evaluated plan, with the overall answer about the design `judged` asks
/// for.
pub fn build_judged(plan: &Plan, evaluation: PlanEvaluation, judged: Judged) -> Report {
    let verdict = evaluation.verdict();
    let PlanEvaluation {
        cases,
        spread,
        population,
        sizing,
        regions,
        recommended,
        fits,
        comparisons,
        schemes,
    } = evaluation;
    let verdict = verdict_record(plan, &verdict, &recommended, &sizing, &regions, judged);
    let met = verdict.met;
    let mut report = Report {
        plan: plan.name.clone(),
        points: Vec::new(),
        intercepts: Vec::new(),
        monte_carlo: Vec::new(),
        yield_: Vec::new(),
        budget: Vec::new(),
        sizing: Vec::new(),
        sizing_region: Vec::new(),
        corner_spread: spread.iter().map(|s| spread_record(plan, s)).collect(),
        stages: Vec::new(),
        fit: Vec::new(),
        fit_summary: Vec::new(),
        residuals: Vec::new(),
        residual_summary: Vec::new(),
        analysis: AnalysisRecord {
            analysis_floor_dbc: ANALYSIS_FLOOR_DBC,
            thd_harmonics: plan.drive.thd_harmonics,
            convergence_db: CONVERGED_DB,
            steering_fraction: STEERING_FRACTION,
            version: env!("CARGO_PKG_VERSION").to_owned(),
        },
        warnings: plan.cautions.iter().map(caution_warning).collect(),
        met,
        verdict,
        caution: CAUTION.to_owned(),
        scheme_comparison: schemes.as_ref().map(scheme_record),
    };
    let derived = recommended.iter().flat_map(|design| {
        let from = plan.stages[design.recommendation.stage_index].name.clone();
        design
            .cases
            .iter()
            .map(move |case| (case.clone(), Some(from.clone())))
    });
    for (case, derived_from) in cases.into_iter().map(|c| (c, None)).chain(derived) {
        let CaseRecords {
            points,
            intercepts,
            stage,
            budget,
            warnings,
        } = case_records(plan, case, derived_from);
        report.points.extend(points);
        report.intercepts.extend(intercepts);
        report.stages.push(stage);
        report.budget.extend(budget);
        report.warnings.extend(warnings);
    }
    report.corner_spread.extend(
        recommended
            .iter()
            .flat_map(|design| design.spread.iter().map(|s| spread_record(plan, s))),
    );
    if let Some(population) = population {
        let (distributions, yields) = population_records(plan, population);
        report.monte_carlo = distributions;
        report.yield_ = yields;
    }
    report.sizing = sizing.into_iter().map(|s| sizing_record(plan, s)).collect();
    for outcome in &regions {
        report.sizing.extend(region_sizing_records(plan, outcome));
        report.sizing_region.push(region_record(plan, outcome));
    }
    for fit in &fits {
        let (parameters, summary, warnings) = fit_records(fit);
        report.fit.extend(parameters);
        report.fit_summary.push(summary);
        report.warnings.extend(warnings);
    }
    for comparison in &comparisons {
        report.residuals.extend(residual_records(plan, comparison));
    }
    report.residual_summary = residual_summaries(&report.residuals);
    report
}

/// Re-judges a report: the overall answer (and `met`) about the design `judged` asks for. Both
/// verdicts are already in the report; only the answer and its summary change.
pub fn rejudge(report: &mut Report, judged: Judged) {
    judge_verdict(&mut report.verdict, judged);
    report.met = report.verdict.met;
}

/// Sets the answer of a verdict record (and its summary) to the design `judged` asks for.
fn judge_verdict(verdict: &mut VerdictRecord, judged: Judged) {
    verdict.judged = judged_name(judged, verdict.recommended.is_some()).into();
    verdict.met = match (&verdict.recommended, judged) {
        (Some(recommended), Judged::Recommended) => recommended.met,
        _ => verdict.as_planned.met,
    };
    verdict.summary = summary_line(verdict, judged);
}

fn judged_name(judged: Judged, has_recommended: bool) -> &'static str {
    match (judged, has_recommended) {
        (Judged::Recommended, true) => "recommended",
        _ => "as_planned",
    }
}

/// The cautions of a validated plan, in words (what `check` prints).
pub fn plan_warnings(plan: &Plan) -> Vec<String> {
    plan.cautions.iter().map(caution_warning).collect()
}

/// A caution about a plan value, in words.
fn caution_warning(caution: &PlanCaution) -> String {
    let show = |v: f64| {
        if caution.unit == "°C" {
            format!("{} °C", crate::report::text::num(v, 0))
        } else {
            format_si(v, caution.unit).trim_end().to_owned()
        }
    };
    let usual = match caution.usual {
        (low, high) if high.is_infinite() => format!("at least {}", show(low)),
        (low, high) if low <= 0.0 => format!("up to {}", show(high)),
        (low, high) => format!("{} to {}", show(low), show(high)),
    };
    format!(
        "{}: {}: {} is {} (usual: {usual}); accepted, but check the value",
        caution.location,
        caution.key_path,
        show(caution.value),
        caution.concern
    )
}

/// A metric's name as a reader expects it (`HD3`, `IIP3`, `P1dB`, `gain`).
fn metric_label(name: &str) -> String {
    match name {
        "p1db" => "P1dB".into(),
        "steering_range" => "steering range".into(),
        "input_noise" => "input noise".into(),
        "gain" | "yield" => name.into(),
        other => other.to_uppercase(),
    }
}

/// A budget line in words: `HD3 at 150 mV ≤ −55.00 dBc`.
fn line_text(line: &BudgetLine, at_v: Option<f64>) -> String {
    let unit = line.metric.unit_label();
    let at = at_v
        .map(|a| format!(" at {}", format_si(a, "V")))
        .unwrap_or_default();
    let sign = match line.limit {
        Limit::Max(_) => "≤",
        Limit::Min(_) => "≥",
    };
    format!(
        "{}{at} {sign} {}",
        metric_label(&line.metric.name()),
        quantity_text(unit, line.limit.value())
    )
}

/// Where a check is: `of `x@sized` at 27 °C` plus the corner when it is not the typical one.
fn place_text(stage: &str, temperature_c: f64, corner: &str) -> String {
    let corner = if corner.is_empty() || corner == TYPICAL {
        String::new()
    } else {
        format!(", {corner} corner")
    };
    format!("`{stage}` at {}{corner}", celsius(temperature_c))
}

fn failing_record(plan: &Plan, check: &FailingCheck) -> FailingCheckRecord {
    let line = &plan.budget[check.line];
    let unit = line.metric.unit_label();
    let value = match check.value {
        Some(v) => quantity_text(unit, v),
        None if line.metric.is_population() => "not estimated".into(),
        None => "no value".into(),
    };
    FailingCheckRecord {
        stage: check.stage.clone(),
        temperature_c: check.temperature_c,
        corner: check.corner.clone(),
        metric: line.metric.name(),
        at_v: check.amplitude_v,
        kind: line.limit.kind().into(),
        limit: line.limit.value(),
        value: check.value,
        margin: check.margin,
        unit: unit.into(),
        text: format!(
            "{} fails for {}: {value}",
            line_text(line, check.amplitude_v),
            place_text(&check.stage, check.temperature_c, &check.corner)
        ),
    }
}

fn design_verdict_record(plan: &Plan, verdict: &DesignVerdict) -> DesignVerdictRecord {
    DesignVerdictRecord {
        met: verdict.met,
        checks: verdict.checks,
        failing: verdict
            .failing
            .iter()
            .map(|c| failing_record(plan, c))
            .collect(),
    }
}

fn unreachable_record(
    plan: &Plan,
    settings: &SizingSettings,
    outcome: &SizingOutcome,
    unreachable: &Unreachable,
) -> UnreachableRecord {
    let line = &plan.budget[unreachable.line];
    let unit = line.metric.unit_label();
    let at_v = line
        .metric
        .needs_amplitude()
        .then(|| plan.drive.amplitude_of(line));
    let best = match (unreachable.best_value, line.limit) {
        (Some(v), Limit::Min(_)) => format!("the most is {}", quantity_text(unit, v)),
        (Some(v), Limit::Max(_)) => format!("the least is {}", quantity_text(unit, v)),
        (None, _) => "no value is reached".into(),
    };
    let corner = if unreachable.corner == TYPICAL || plan.corners.len() < 2 {
        String::new()
    } else {
        format!(" in the {} corner", unreachable.corner)
    };
    let advice = match unreachable.at_end {
        Some(RangeEnd::To) => "; it still improves at `to`: widen `to`".to_owned(),
        Some(RangeEnd::From) if settings.emitter_range().0 > 0.0 => {
            "; it still improves at `from`: lower `from`".to_owned()
        }
        Some(RangeEnd::From) => "; no degeneration at all is the best it gets".to_owned(),
        None => String::new(),
    };
    UnreachableRecord {
        stage: outcome.stage.clone(),
        temperature_c: outcome.temperature_c,
        metric: line.metric.name(),
        at_v,
        kind: line.limit.kind().into(),
        limit: line.limit.value(),
        unit: unit.into(),
        best_value: unreachable.best_value,
        best_margin: unreachable.best_margin,
        at_emitter_resistance_ohm: unreachable.at_emitter_resistance,
        corner: unreachable.corner.clone(),
        text: format!(
            "{} cannot be met at any R_E from {} to {} for `{}` at {}; {best} at {}{corner}{advice}",
            line_text(line, at_v),
            format_si(settings.emitter_range().0, "Ω"),
            format_si(settings.emitter_range().1, "Ω"),
            outcome.stage,
            celsius(outcome.temperature_c),
            format_si(unreachable.at_emitter_resistance, "Ω"),
        ),
    }
}

fn hint_text(settings: &SizingSettings, outcome: &SizingOutcome, hint: RangeHint) -> String {
    let at = celsius(outcome.temperature_c);
    match hint {
        RangeHint::AnswerAtFrom => format!(
            "{at}: the least value that holds is `from` itself ({}); a smaller one may hold too: lower `from`",
            format_si(settings.emitter_range().0, "Ω")
        ),
        RangeHint::AnswerNearTo => format!(
            "{at}: the only values that hold lie in the last scan step below `to` ({}): widen `to` to see how far the window extends",
            format_si(settings.emitter_range().1, "Ω")
        ),
        RangeHint::BestAt(RangeEnd::To) => format!(
            "{at}: no value holds every line, and the worst margin still improves at `to` ({}): widen `to`",
            format_si(settings.emitter_range().1, "Ω")
        ),
        RangeHint::BestAt(RangeEnd::From) => format!(
            "{at}: no value holds every line, and the worst margin still improves at `from` ({}): lower `from`",
            format_si(settings.emitter_range().0, "Ω")
        ),
    }
}

fn basis_name(basis: Basis) -> &'static str {
    match basis {
        Basis::CommonWindow => "least_in_common_window",
        Basis::ReachableLines => "least_meeting_reachable_lines",
        Basis::BestWorstMargin => "best_worst_margin",
        Basis::YieldInWindow => "least_in_common_window_meeting_yield",
        Basis::LeastInRegion => "least_in_region",
        Basis::BestInRegion => "best_in_region",
        Basis::YieldInRegion => "least_in_region_meeting_yield",
    }
}

fn recommended_stage_record(
    plan: &Plan,
    settings: &SizingSettings,
    design: &RecommendedStage,
    sizing: &[SizingOutcome],
    regions: &[RegionOutcome],
) -> RecommendedStageRecord {
    let r = &design.recommendation;
    let planned = &plan.stages[r.stage_index];
    let outcomes: Vec<&SizingOutcome> = sizing.iter().filter(|o| o.stage == planned.name).collect();
    let mut hints: Vec<String> = Vec::new();
    for outcome in outcomes.iter().filter(|o| o.headroom_binds && !o.met) {
        hints.push(format!(
            "{}: every R_E whose distortion passes leaves the collector-base junction without reverse bias (hold_gain scales the load up): raise the supply, lower the input common mode or relax the gain to hold",
            celsius(outcome.temperature_c)
        ));
    }
    if r.yield_short {
        hints.push(
            "no value tried in the usable windows brings the Monte Carlo yield up to the yield line: the yield is limited by matching, not by degeneration (tighten mismatch_sigma or relax the line)".into(),
        );
    }
    if let Some(region) = regions.iter().find(|o| o.stage_index == r.stage_index) {
        hints.extend(region_hints(plan, region));
        if r.basis == Basis::YieldInRegion {
            hints.push(format!(
                "the least {} holding every other line falls short of the yield line; {} is the first value of the map above it whose Monte Carlo population meets it",
                region.primary.variable.key(),
                variable_text(region.primary.variable, variable_value(region.primary.variable, r))
            ));
        }
    }
    if r.basis == Basis::YieldInWindow {
        hints.push(format!(
            "the least value holding every other line falls short of the yield line; {} is the least value in the usable windows whose Monte Carlo population meets it",
            format_si(r.emitter_resistance, "Ω")
        ));
    }
    if outcomes.iter().all(|o| o.met) && !r.met {
        hints.push(
            "every temperature has usable values, but no single R_E is usable at all of them: the windows do not overlap".into(),
        );
    }
    for outcome in &outcomes {
        for hint in &outcome.hints {
            let text = hint_text(settings, outcome, *hint);
            if !hints.contains(&text) {
                hints.push(text);
            }
        }
    }
    RecommendedStageRecord {
        stage: planned.name.clone(),
        evaluated_as: design.stage.name.clone(),
        emitter_resistance_ohm: r.emitter_resistance,
        load_resistance_ohm: r.load_resistance,
        tail_current_a: r.tail_current,
        planned_emitter_resistance_ohm: planned.emitter_resistance,
        planned_tail_current_a: planned.tail_current,
        area_ratio: r.area_ratio,
        planned_area_ratio: r.area_ratio.map(|_| planned.multi_tanh.area_ratio),
        planned_load_resistance_ohm: planned.load_resistance,
        found: r.met,
        basis: basis_name(r.basis).into(),
        window_ohm: r.windows.iter().map(|&(low, high)| [low, high]).collect(),
        unreachable: outcomes
            .iter()
            .flat_map(|o| {
                o.unreachable
                    .iter()
                    .map(|u| unreachable_record(plan, settings, o, u))
            })
            .collect(),
        hints,
    }
}

fn verdict_record(
    plan: &Plan,
    verdict: &Verdict,
    recommended: &[RecommendedStage],
    sizing: &[SizingOutcome],
    regions: &[RegionOutcome],
    judged: Judged,
) -> VerdictRecord {
    let recommended_record = match (&verdict.recommended, &plan.sizing) {
        (Some(v), Some(settings)) => {
            let design = design_verdict_record(plan, v);
            Some(RecommendedVerdictRecord {
                met: design.met,
                checks: design.checks,
                failing: design.failing,
                stages: recommended
                    .iter()
                    .map(|d| recommended_stage_record(plan, settings, d, sizing, regions))
                    .collect(),
            })
        }
        _ => None,
    };
    let mut record = VerdictRecord {
        met: false,
        judged: String::new(),
        summary: String::new(),
        as_planned: design_verdict_record(plan, &verdict.as_planned),
        recommended: recommended_record,
    };
    judge_verdict(&mut record, judged);
    record
}

/// The values to build, in words: `R_E = 520 Ω` or `R_E = 119 Ω for a, 118 Ω for b`, with the
/// load where it differs from the plan's.
fn values_text(stages: &[RecommendedStageRecord]) -> String {
    let one = |s: &RecommendedStageRecord| {
        let mut extra = String::new();
        if (s.tail_current_a / s.planned_tail_current_a - 1.0).abs() > 1e-9 {
            extra.push_str(&format!(", I_tail = {}", format_si(s.tail_current_a, "A")));
        }
        if let Some(ratio) = s.area_ratio {
            extra.push_str(&format!(", area ratio A_E = {ratio:.4}"));
        }
        if (s.load_resistance_ohm / s.planned_load_resistance_ohm - 1.0).abs() > 1e-9 {
            extra.push_str(&format!(
                " and R_L = {}",
                format_si(s.load_resistance_ohm, "Ω")
            ));
        }
        (format_si(s.emitter_resistance_ohm, "Ω"), extra)
    };
    match stages {
        [single] => {
            let (r_e, extra) = one(single);
            format!("R_E = {r_e}{extra}")
        }
        _ => format!(
            "R_E = {}",
            stages
                .iter()
                .map(|s| {
                    let (r_e, extra) = one(s);
                    format!("{r_e}{extra} for `{}`", s.stage)
                })
                .collect::<Vec<_>>()
                .join(", ")
        ),
    }
}

fn failing_count(v: &DesignVerdictRecord) -> String {
    if v.met {
        if v.checks == 1 {
            "the 1 check passes".into()
        } else {
            format!("all {} checks pass", v.checks)
        }
    } else {
        format!("{} of {} checks fail", v.failing.len(), v.checks)
    }
}

/// The failing check a headline names: the first failing line in report order, and of its
/// checks (one stage, every temperature and corner) the one with the least margin — margins of
/// one line share a unit, so they compare.
fn worst_failure(failing: &[FailingCheckRecord]) -> Option<&FailingCheckRecord> {
    let first = failing.first()?;
    failing
        .iter()
        .filter(|f| {
            f.stage == first.stage
                && f.metric == first.metric
                && f.at_v == first.at_v
                && f.kind == first.kind
                && f.limit == first.limit
        })
        .min_by(|a, b| {
            a.margin
                .unwrap_or(f64::INFINITY)
                .total_cmp(&b.margin.unwrap_or(f64::INFINITY))
        })
}

/// The answer in one line, naming the design that met (or did not).
fn summary_line(v: &VerdictRecord, judged: Judged) -> String {
    let planned = &v.as_planned;
    let first_failure = |design: &DesignVerdictRecord| {
        worst_failure(&design.failing)
            .map(|f| format!(" — {}", f.text))
            .unwrap_or_default()
    };
    match (&v.recommended, judged) {
        (Some(r), Judged::Recommended) => {
            let values = values_text(&r.stages);
            let planned_part = if planned.met {
                format!("as planned: {} too", failing_count(planned))
            } else {
                format!("as planned: {}", failing_count(planned))
            };
            if r.met {
                format!("met with {values} ({planned_part})")
            } else {
                let reason = r
                    .stages
                    .iter()
                    .flat_map(|s| s.unreachable.first())
                    .next()
                    .map(|u| format!(" — {}", u.text))
                    .or_else(|| worst_failure(&r.failing).map(|f| format!(" — {}", f.text)))
                    .or_else(|| {
                        r.stages
                            .iter()
                            .flat_map(|s| s.hints.first())
                            .next()
                            .map(|h| format!(" — {h}"))
                    })
                    .unwrap_or_else(|| {
                        " — sizing found no value holding every line at every temperature".into()
                    });
                let count = if r.failing.is_empty() {
                    "every budget check passes, but not sizing's own constraints".to_owned()
                } else {
                    format!("{} of {} checks fail", r.failing.len(), r.checks)
                };
                format!("NOT met with {values}: {count}{reason} ({planned_part})")
            }
        }
        (recommended, _) => {
            let as_planned_words = if recommended.is_some() {
                " as planned"
            } else {
                ""
            };
            let head = if planned.checks == 0 {
                format!("met{as_planned_words} (no budget lines)")
            } else if planned.met {
                format!("met{as_planned_words}: {}", failing_count(planned))
            } else {
                format!(
                    "NOT met{as_planned_words}: {}{}",
                    failing_count(planned),
                    first_failure(planned)
                )
            };
            match recommended {
                Some(r) => format!(
                    "{head} (the recommended design, {}, {})",
                    values_text(&r.stages),
                    if r.met {
                        "meets every line".to_owned()
                    } else {
                        format!("fails {} of {} checks", r.failing.len(), r.checks)
                    }
                ),
                None => head,
            }
        }
    }
}

struct CaseRecords {
    points: Vec<PointRecord>,
    intercepts: Vec<InterceptRecord>,
    stage: StageRecord,
    budget: Vec<BudgetRecord>,
    warnings: Vec<String>,
}

fn case_records(plan: &Plan, case: CaseEvaluation, derived_from: Option<String>) -> CaseRecords {
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
    let mut warnings = default_bias_saturation_warnings(&stage, temperature_c, &points);
    warnings.extend(small_drive_warnings(name, temperature_c, &points));
    warnings.extend(collision_warnings(name, temperature_c, &points));
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
            p1db_region: region(&figures.p1db_region),
            p1db_collector_base_margin_v: figures.p1db_region.collector_base_margin_v(),
            iip3_fit_region: intercept.map(|i| region(&i.fit_region)),
            iip3_fit_collector_base_margin_v: intercept
                .map(|i| i.fit_region.collector_base_margin_v()),
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
        steering_region: region(&operating.steering_region),
        rest_region: region(&operating.rest_region),
        steering_collector_base_margin_v: operating.steering_region.collector_base_margin_v(),
        collector_currents_a: [zero.p.collector_current, zero.m.collector_current],
        collector_voltages_v: [zero.p.collector_voltage, zero.m.collector_voltage],
        tail_voltage_v: zero.tail_voltage,
        transfer: operating
            .transfer
            .iter()
            .map(|s| TransferRecord {
                input_v: s.input_v,
                normalised_current: s.normalised_current,
                emitter_split: s.emitter_split,
                transconductance_s: s.transconductance_s,
                output_v: s.output_v,
                base_collector_v: s.base_collector_v,
            })
            .collect(),
        corner: corner.clone(),
        tail_current_a: operating.tail_current_a,
        emitter_resistance_ohm: stage.emitter_resistance,
        load_resistance_ohm: stage.load_resistance,
        derived_from,
        topology: stage.topology.name().into(),
        cell: cell_words(&stage),
        tail_source_voltage_v: operating.bias.tail_source_v,
        degeneration_drop_v: operating.bias.degeneration_drop_v(),
        noise_sources: crate::report::NoiseSourcesRecord {
            transistors_v_rthz: operating.noise_breakdown.transistors_v2.sqrt(),
            resistors_v_rthz: operating.noise_breakdown.resistors_v2.sqrt(),
            tail_sources_v_rthz: operating.noise_breakdown.tail_sources_v2.sqrt(),
            loads_v_rthz: operating.noise_breakdown.loads_v2.sqrt(),
        },
    };
    let budget = budget
        .iter()
        .filter(|result| result.judged)
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
                margin_unit: if line.metric.margin_in_volts() {
                    "V"
                } else if line.metric == Metric::Yield {
                    // A yield's margin is the pass fraction less the limit.
                    crate::report::YIELD_UNIT
                } else {
                    "dB"
                }
                .into(),
                region: region(&result.region),
                collector_base_margin_v: result.region.collector_base_margin_v(),
                limit_dbm: dbm_of(plan, line.metric, line.limit.value()),
                value_dbm: result.value.and_then(|v| dbm_of(plan, line.metric, v)),
                margin_at_least: result.margin_at_least,
                interval: result.interval.map(|(low, high)| [low, high]),
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

/// The report's name for the worst region of a drive.
fn region(check: &RegionCheck) -> Region {
    match check.region() {
        OperatingRegion::ForwardActive => Region::ForwardActive,
        OperatingRegion::HighInjection => Region::HighInjection,
        OperatingRegion::Saturating => Region::Saturating,
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
        floor_dbc: point.floor_dbc,
        from_series: point.from_series,
        im3_floor_dbc: two
            .map(|t| t.im3_floor_dbc)
            .filter(|floor| *floor > point.floor_dbc),
        im2_floor_dbc: two
            .map(|t| t.im2_floor_dbc)
            .filter(|floor| *floor > point.floor_dbc),
        im3_limited_by: two.and_then(|t| t.im3_limited_by).map(|p| p.to_string()),
        im2_limited_by: two.and_then(|t| t.im2_limited_by).map(|p| p.to_string()),
        region: region(&point.region),
        collector_base_margin_v: point.region.collector_base_margin_v(),
        min_current_fraction: point.region.min_current_fraction,
        two_tone_region: two.map(|t| region(&t.region)),
        two_tone_collector_base_margin_v: two.map(|t| t.region.collector_base_margin_v()),
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
        PopulationFigure::CollectorBaseMargin => ("collector_base_margin", "V"),
    }
}

fn population_records(
    plan: &Plan,
    population: Population,
) -> (Vec<MonteCarloRecord>, Vec<YieldRecord>) {
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
        let lines = plan
            .budget
            .iter()
            .zip(&estimate.failing_runs)
            .filter_map(|(line, failing)| {
                let failing = (*failing)?;
                Some(YieldLineRecord {
                    metric: line.metric.name(),
                    at_v: line
                        .metric
                        .needs_amplitude()
                        .then(|| plan.drive.amplitude_of(line)),
                    kind: line.limit.kind().into(),
                    limit: line.limit.value(),
                    unit: line.metric.unit_label().into(),
                    failing_runs: failing,
                    failing_fraction: failing as f64 / estimate.runs as f64,
                })
            })
            .collect();
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
            least_collector_base_margin_v: stage.least_collector_base_margin_v,
            saturating_runs: stage.saturating_runs,
            lines,
        });
    }
    (distributions, yields)
}

fn scan_record(trial: &Trial) -> SizingScanRecord {
    SizingScanRecord {
        emitter_resistance_ohm: trial.emitter_resistance,
        margins: trial.margins.clone(),
        gain_db: trial.gain_db.is_finite().then_some(trial.gain_db),
        headroom_v: trial.headroom_v,
        tail_headroom_v: Some(trial.tail_headroom_v),
        collector_base_margin_v: trial
            .collector_base_margin_v
            .is_finite()
            .then_some(trial.collector_base_margin_v),
    }
}

fn sizing_record(plan: &Plan, outcome: SizingOutcome) -> SizingRecord {
    let chosen = &outcome.chosen;
    let (binding_margin, binding_margin_unit) = binding_margin(plan, chosen, outcome.binding);
    SizingRecord {
        binding_margin,
        binding_margin_unit,
        stage: outcome.stage.clone(),
        temperature_c: outcome.temperature_c,
        emitter_resistance_ohm: Some(chosen.emitter_resistance),
        tail_current_a: Some(chosen.tail_current),
        binding_metric: match outcome.binding {
            Binding::Headroom => "collector_base_margin".into(),
            Binding::TailCompliance => "tail_compliance".into(),
            Binding::Line(index) => plan.budget[index].metric.name(),
            Binding::Nothing => "none".into(),
        },
        met: outcome.met,
        best_margin: outcome.worst_margin,
        gain_db: chosen.gain_db.is_finite().then_some(chosen.gain_db),
        gain_cost_db: (chosen.gain_db - outcome.reference_gain_db)
            .is_finite()
            .then_some(outcome.reference_gain_db - chosen.gain_db),
        steering_range_v: chosen
            .steering_range_v
            .is_finite()
            .then_some(chosen.steering_range_v),
        load_resistance_ohm: Some(chosen.load_resistance),
        headroom_binds: outcome.headroom_binds,
        best_headroom_v: chosen.headroom_v,
        collector_base_margin_v: Some(chosen.collector_base_margin_v),
        scan: outcome.scan.iter().map(scan_record).collect(),
        binding_corner: outcome.binding_corner.clone(),
        distortion_least_emitter_resistance_ohm: outcome.distortion_least,
        noise_greatest_emitter_resistance_ohm: outcome.noise_greatest,
        conflict_gap_ohm: outcome.conflict_gap,
        guard_band_db: outcome.guard_band_db,
        window_ohm: outcome.windows.iter().map(|w| [w.low, w.high]).collect(),
        unreachable: match &plan.sizing {
            Some(settings) => outcome
                .unreachable
                .iter()
                .map(|u| unreachable_record(plan, settings, &outcome, u))
                .collect(),
            None => Vec::new(),
        },
        hints: match &plan.sizing {
            Some(settings) => outcome
                .hints
                .iter()
                .map(|h| hint_text(settings, &outcome, *h))
                .collect(),
            None => Vec::new(),
        },
    }
}

/// A binding in the report's words: the metric name (`collector_base_margin` for the implicit
/// headroom of `hold_gain`, `none` for no line) and the line's index.
/// The binding line's own margin at a trial and its unit (`dB`, or `V` for a collector-base
/// margin, the hold-gain headroom and the tail compliance), which is not always the worst dB
/// margin: a volts line binds while every dB line has room.
fn binding_margin(plan: &Plan, trial: &Trial, binding: Binding) -> (Option<f64>, String) {
    match binding {
        Binding::Line(index) => {
            let margin = trial.margins.get(index).copied().flatten().and_then(finite);
            let unit = if plan.budget[index].metric.margin_in_volts() {
                "V"
            } else {
                "dB"
            };
            (margin, if margin.is_some() { unit } else { "" }.into())
        }
        Binding::Headroom => (trial.headroom_v.and_then(finite), "V".into()),
        Binding::TailCompliance => (finite(trial.tail_headroom_v), "V".into()),
        Binding::Nothing => (None, String::new()),
    }
}

fn binding_name(plan: &Plan, binding: Binding) -> (String, Option<usize>) {
    match binding {
        Binding::Line(index) => (plan.budget[index].metric.name(), Some(index)),
        Binding::Headroom => ("collector_base_margin".into(), None),
        Binding::TailCompliance => ("tail_compliance".into(), None),
        Binding::Nothing => ("none".into(), None),
    }
}

/// A sizing variable's value with its unit, SI-prefixed.
fn variable_text(variable: SizingVariable, value: f64) -> String {
    format_si(value, variable.unit_symbol())
}

/// A recommendation's value of `variable`.
fn variable_value(variable: SizingVariable, r: &crate::study::sizing::Recommendation) -> f64 {
    match variable {
        SizingVariable::EmitterResistance => r.emitter_resistance,
        SizingVariable::TailCurrent => r.tail_current,
        SizingVariable::AreaRatio => r.area_ratio.unwrap_or(f64::NAN),
    }
}

/// A margin that JSON can hold: `None` when unbounded.
fn finite(value: f64) -> Option<f64> {
    value.is_finite().then_some(value)
}

/// Advice about a region search's ranges, in words.
fn region_hints(plan: &Plan, region: &RegionOutcome) -> Vec<String> {
    let _ = plan;
    let key = region.primary.variable.key();
    let mut hints = Vec::new();
    if region.at_from {
        hints.push(format!(
            "the least {key} that holds is `from` itself ({}); a smaller one may hold too: lower `sizing.{key}.from`",
            variable_text(region.primary.variable, region.primary.from)
        ));
    }
    if region.near_to {
        hints.push(format!(
            "only the last grid step below `sizing.{key}.to` ({}) holds: widen `to` to see more of the region",
            variable_text(region.primary.variable, region.primary.to)
        ));
    }
    if !region.met {
        let (metric, _) = binding_name(plan, region.chosen.limiting);
        let other = region
            .secondary
            .as_ref()
            .map(|a| format!(" and {}", a.variable.key()))
            .unwrap_or_default();
        hints.push(format!(
            "no design in the ranges of {key}{other} holds every line by the guard band; the best one ({}) is limited by {} at {}",
            design_text(&region.chosen),
            metric.replace('_', " "),
            celsius(region.chosen.limiting_temperature_c)
        ));
    }
    hints
}

/// A region design in words: `I_tail = 1.2 mA, R_E = 350 Ω`.
fn design_text(point: &RegionPoint) -> String {
    format!(
        "I_tail = {}, R_E = {}",
        format_si(point.tail_current(), "A"),
        format_si(point.emitter_resistance(), "Ω")
    )
}

/// The sizing records of a region search: one per temperature, at the design found.
fn region_sizing_records(plan: &Plan, region: &RegionOutcome) -> Vec<SizingRecord> {
    let counted: Vec<bool> = plan
        .budget
        .iter()
        .map(|l| !l.metric.is_population())
        .collect();
    let volts: Vec<bool> = plan
        .budget
        .iter()
        .map(|l| l.metric.margin_in_volts())
        .collect();
    let reference = region.map.first();
    region
        .chosen
        .trials
        .iter()
        .enumerate()
        .map(|(k, trial)| {
            let ((worst, binding), corner) = trial.worst_with_corner(&counted, &volts);
            let binding = if trial.headroom_v.is_some_and(|h| h < 0.05) && worst > 0.5 {
                Binding::Headroom
            } else {
                binding
            };
            let reference_gain = reference.and_then(|p| p.trials.get(k)).map(|t| t.gain_db);
            let (binding_margin, binding_margin_unit) = binding_margin(plan, trial, binding);
            SizingRecord {
                binding_margin,
                binding_margin_unit,
                stage: region.stage.clone(),
                temperature_c: plan.temperatures_c[k],
                emitter_resistance_ohm: Some(trial.emitter_resistance),
                tail_current_a: Some(trial.tail_current),
                binding_metric: binding_name(plan, binding).0,
                met: region.met,
                best_margin: worst,
                gain_db: Some(trial.gain_db),
                gain_cost_db: reference_gain.map(|g| g - trial.gain_db),
                steering_range_v: Some(trial.steering_range_v),
                load_resistance_ohm: Some(trial.load_resistance),
                headroom_binds: binding == Binding::Headroom,
                best_headroom_v: trial.headroom_v,
                collector_base_margin_v: Some(trial.collector_base_margin_v),
                scan: Vec::new(),
                binding_corner: corner,
                distortion_least_emitter_resistance_ohm: None,
                noise_greatest_emitter_resistance_ohm: None,
                conflict_gap_ohm: None,
                guard_band_db: region.guard_band_db,
                window_ohm: Vec::new(),
                unreachable: Vec::new(),
                hints: Vec::new(),
            }
        })
        .collect()
}

fn front_record(point: &FrontPoint) -> FrontRecord {
    FrontRecord {
        tail_current_a: point.tail_current,
        emitter_resistance_ohm: point.emitter_resistance,
        value: point.value,
        margin: point.margin,
    }
}

/// The record of a region search: map, rows with their edges' lines, Pareto fronts.
fn region_record(plan: &Plan, region: &RegionOutcome) -> RegionRecord {
    let axes: Vec<&Axis> = std::iter::once(&region.primary)
        .chain(region.secondary.as_ref())
        .collect();
    let name = |b: Binding| binding_name(plan, b).0;
    let (binding_metric, binding_line) = binding_name(plan, region.chosen.limiting);
    RegionRecord {
        stage: region.stage.clone(),
        minimise: region.primary.variable.key().into(),
        variables: axes.iter().map(|a| a.variable.key().to_owned()).collect(),
        units: axes
            .iter()
            .map(|a| a.variable.unit_symbol().to_owned())
            .collect(),
        grid: axes.iter().map(|a| a.grid.clone()).collect(),
        met: region.met,
        guard_band_db: region.guard_band_db,
        tail_current_a: region.chosen.tail_current(),
        emitter_resistance_ohm: region.chosen.emitter_resistance(),
        area_ratio: region.value_at(&region.chosen, SizingVariable::AreaRatio),
        load_resistance_ohm: region.chosen.load_resistance(),
        binding_metric,
        binding_line,
        binding_temperature_c: region.chosen.limiting_temperature_c,
        excess_db: finite(region.chosen.excess),
        designs_evaluated: region.designs_evaluated,
        cells: region
            .map
            .iter()
            .map(|p| {
                let (limiting_metric, limiting_line) = binding_name(plan, p.limiting);
                RegionCellRecord {
                    tail_current_a: p.tail_current(),
                    emitter_resistance_ohm: p.emitter_resistance(),
                    area_ratio: region.value_at(p, SizingVariable::AreaRatio),
                    holds: p.holds,
                    limiting_metric,
                    limiting_line,
                    limiting_temperature_c: p.limiting_temperature_c,
                    excess_db: finite(p.excess),
                    input_noise_v_rthz: finite(p.input_noise_v_rthz)
                        .filter(|_| p.trials.iter().all(|t| t.biases)),
                    gain_db: p.trials.first().and_then(|t| finite(t.gain_db)),
                }
            })
            .collect(),
        rows: region
            .rows
            .iter()
            .map(|row| RegionRowRecord {
                value: row.primary,
                spans: row
                    .spans
                    .iter()
                    .map(|span| RegionSpanRecord {
                        low: span.low,
                        high: span.high,
                        below: span.below.map(name),
                        above: span.above.map(name),
                    })
                    .collect(),
                limiting_metric: row.limiting.map(name),
            })
            .collect(),
        noise_front: region.noise_front.iter().map(front_record).collect(),
        distortion_front: region.distortion_line.map(|index| {
            let line = &plan.budget[index];
            DistortionFrontRecord {
                metric: line.metric.name(),
                line: index,
                at_v: line
                    .metric
                    .needs_amplitude()
                    .then(|| plan.drive.amplitude_of(line)),
                unit: line.metric.unit_label().into(),
                limit: line.limit.value(),
                points: region.distortion_front.iter().map(front_record).collect(),
            }
        }),
        hints: region_hints(plan, region),
    }
}

/// The distinct frequencies of some points, in order of appearance.
fn frequencies_of(points: &[PointRecord]) -> Vec<f64> {
    let mut frequencies: Vec<f64> = Vec::new();
    for p in points {
        if !frequencies.contains(&p.frequency_hz) {
            frequencies.push(p.frequency_hz);
        }
    }
    frequencies
}

/// One note per frequency for drives answered from the small-signal power series or with an
/// analysis floor raised by the solve's precision: which drives, and how high the floor went.
fn small_drive_warnings(stage: &str, temperature_c: f64, points: &[PointRecord]) -> Vec<String> {
    let mut notes = Vec::new();
    for frequency in frequencies_of(points) {
        let here: Vec<&PointRecord> = points
            .iter()
            .filter(|p| p.frequency_hz == frequency)
            .collect();
        let lowest_floor = here
            .iter()
            .map(|p| p.floor_dbc)
            .fold(f64::INFINITY, f64::min);
        // Worth a note when a figure a designer might read is affected: a point answered from
        // the series, or a floor raised above −150 dBc (each point's floor is in the JSON).
        let raised: Vec<&&PointRecord> = here
            .iter()
            .filter(|p| p.from_series || (p.floor_dbc > lowest_floor + 0.5 && p.floor_dbc > -150.0))
            .collect();
        let Some(highest) = raised.iter().map(|p| p.floor_dbc).reduce(f64::max) else {
            continue;
        };
        let largest = raised.iter().map(|p| p.amplitude_v).fold(0.0, f64::max);
        let series = raised.iter().filter(|p| p.from_series).count();
        let how = if series > 0 {
            format!(
                "; {series} of them, too small to solve directly to full precision, are answered from the small-signal power series through two larger drives (gain exact)"
            )
        } else {
            String::new()
        };
        notes.push(format!(
            "stage `{stage}` at {} °C, {}: {} drive(s) up to {} meet the solve's precision, so their analysis floor rises (to {:.1} dBc at most; each point's floor_dbc says where) and harmonics below it are null{how}",
            short_number(temperature_c),
            format_si(frequency, "Hz"),
            raised.len(),
            format_si(largest, "V"),
            highest
        ));
    }
    notes
}

/// One note per frequency and figure when a product of higher order shares IM3's or IM2's
/// frequency in the two tones' common period (stages with capacitance) and sets its floor.
fn collision_warnings(stage: &str, temperature_c: f64, points: &[PointRecord]) -> Vec<String> {
    let mut notes = Vec::new();
    for frequency in frequencies_of(points) {
        for (figure, limited, floor) in [
            (
                "IM3",
                (|p: &PointRecord| p.im3_limited_by.clone()) as fn(&PointRecord) -> Option<String>,
                (|p: &PointRecord| p.im3_floor_dbc) as fn(&PointRecord) -> Option<f64>,
            ),
            ("IM2", |p| p.im2_limited_by.clone(), |p| p.im2_floor_dbc),
        ] {
            let here: Vec<&PointRecord> = points
                .iter()
                .filter(|p| p.frequency_hz == frequency && limited(p).is_some())
                .collect();
            let Some(first) = here.first() else {
                continue;
            };
            let highest = here
                .iter()
                .filter_map(|p| floor(p))
                .fold(f64::NEG_INFINITY, f64::max);
            notes.push(format!(
                "stage `{stage}` at {} °C, {}: {} shares its frequency with the product {} in the two tones' common period, so {figure} is only resolved above that product's estimated level ({} of {} drive(s) limited, floor up to {:.1} dBc; each point's {}_floor_dbc says where); a spacing that makes frequency/spacing a ratio of larger integers moves it away",
                short_number(temperature_c),
                format_si(frequency, "Hz"),
                figure,
                limited(first).unwrap_or_default(),
                here.len(),
                points.iter().filter(|p| p.frequency_hz == frequency).count(),
                highest,
                figure.to_lowercase()
            ));
        }
    }
    notes
}

/// A fitted parameter's value in words: a percentage for mismatch fractions, SI-prefixed
/// with its unit otherwise.
fn parameter_text(key: &str, unit: &str, value: f64) -> String {
    if key.starts_with("mismatch.") {
        format!("{:.4} %", 100.0 * value)
    } else if unit.is_empty() {
        format!("{value:.4}")
    } else {
        format_si(value, unit)
    }
}

/// The records of one stage's fit, and its warnings worded: directions the data do not
/// determine, parameters they hardly constrain or that have no effect, values at a bound, a
/// fit that did not converge.
fn fit_records(fit: &FitOutcome) -> (Vec<FitRecord>, FitSummaryRecord, Vec<String>) {
    let name = &fit.stage;
    let twin = &fit.fitted.name;
    let mut warnings = Vec::new();
    let records: Vec<FitRecord> = fit
        .parameters
        .iter()
        .map(|p| FitRecord {
            stage: name.clone(),
            fitted_stage: twin.clone(),
            parameter: p.key.clone(),
            value: p.value,
            standard_error: p.standard_error,
            unit: p.unit.to_owned(),
            start: p.start,
            from: p.from,
            to: p.to,
            at_bound: p.at_bound,
            constrained: p.is_constrained(),
        })
        .collect();
    match fit.termination {
        FitTermination::Converged => {}
        FitTermination::OutOfEvaluations => warnings.push(format!(
            "stage `{name}`: the fit to the bench data did not converge within {} model evaluations; `{twin}` is the best point reached, not a minimum",
            fit.evaluations
        )),
        FitTermination::RoundingLimited => warnings.push(format!(
            "stage `{name}`: the fit stopped where rounding stops any further progress (rms residual {:.3} dB); `{twin}` is the best point reachable",
            fit.rms_after
        )),
    }
    let mut in_flat_direction: Vec<usize> = Vec::new();
    for direction in &fit.flat_directions {
        let involved: Vec<usize> = direction.components.iter().map(|(j, _)| *j).collect();
        in_flat_direction.extend(&involved);
        let names: Vec<String> = involved
            .iter()
            .map(|j| format!("`{}`", fit.parameters[*j].key))
            .collect();
        let combination: Vec<String> = direction
            .components
            .iter()
            .map(|(j, c)| format!("{c:+.2}·{}", fit.parameters[*j].key))
            .collect();
        let what = if names.len() > 1 {
            format!("{} separately", names.join(" and "))
        } else {
            names.join("")
        };
        warnings.push(format!(
            "stage `{name}`: the bench data do not determine {what}: the fit has a flat direction ({}, each in units of its own sensitivity; relative eigenvalue {:.1e}), so these fitted values are one point of a valley and their standard errors are large — add bench data that tells them apart or fit fewer parameters",
            combination.join(" "),
            direction.relative_eigenvalue
        ));
    }
    for (j, p) in fit.parameters.iter().enumerate() {
        let value = parameter_text(&p.key, p.unit, p.value);
        match p.standard_error {
            None => warnings.push(format!(
                "stage `{name}`: `{}` has no effect on the fitted figures ({}); it stays at {value}, with no standard error",
                p.key,
                fit_metric_names(fit)
            )),
            Some(se) if !p.is_constrained() && !in_flat_direction.contains(&j) => {
                let partner = fit.correlation[j]
                    .iter()
                    .enumerate()
                    .filter(|(k, _)| *k != j)
                    .filter_map(|(k, c)| c.map(|c| (k, c)))
                    .max_by(|a, b| a.1.abs().total_cmp(&b.1.abs()));
                warnings.push(format!(
                    "stage `{name}`: the bench data hardly constrain `{}`: {value} ± {}, more than a quarter of its bounds {} to {}{}",
                    p.key,
                    parameter_text(&p.key, p.unit, se),
                    parameter_text(&p.key, p.unit, p.from),
                    parameter_text(&p.key, p.unit, p.to),
                    partner
                        .map(|(k, c)| format!("; most correlated with `{}` (ρ = {c:+.3})", fit.parameters[k].key))
                        .unwrap_or_default()
                ));
            }
            _ => {}
        }
        if p.at_bound {
            warnings.push(format!(
                "stage `{name}`: `{}` was fitted to a bound of its range ({value}); the data pull it further, so widen `fit.parameters.{}` or question the model (its standard error assumes it free)",
                p.key, p.key
            ));
        }
    }
    let summary = FitSummaryRecord {
        stage: name.clone(),
        fitted_stage: twin.clone(),
        parameters: fit.parameters.iter().map(|p| p.key.clone()).collect(),
        metrics: fit.metrics.iter().map(|m| m.name()).collect(),
        correlation: fit.correlation.clone(),
        residual_count: fit.residual_count,
        rms_before: fit.rms_before,
        rms_after: fit.rms_after,
        residual_scale: fit.residual_scale,
        evaluations: fit.evaluations,
        converged: fit.termination == FitTermination::Converged,
        termination: match fit.termination {
            FitTermination::Converged => "converged",
            FitTermination::OutOfEvaluations => "out of evaluations",
            FitTermination::RoundingLimited => "rounding limited",
        }
        .into(),
    };
    (records, summary, warnings)
}

fn fit_metric_names(fit: &FitOutcome) -> String {
    fit.metrics
        .iter()
        .map(|m| m.name())
        .collect::<Vec<_>>()
        .join(", ")
}

/// Every measured value of one bench file next to one model stage's.
fn residual_records(plan: &Plan, comparison: &BenchComparison) -> Vec<ResidualRecord> {
    comparison
        .values
        .iter()
        .map(|value| {
            let point = &comparison.points[value.point];
            ResidualRecord {
                stage: comparison.model_stage.clone(),
                measured_stage: comparison.measured_stage.clone(),
                file: comparison.file.clone(),
                row: point.row,
                die: point.die.clone(),
                corner: point
                    .corner
                    .clone()
                    .unwrap_or_else(|| plan.corners[0].name.clone()),
                temperature_c: point.temperature_c,
                frequency_hz: point.frequency_hz,
                amplitude_v: point.amplitude_v,
                metric: value.figure.name(),
                unit: value.figure.unit_label().into(),
                bench: value.bench,
                model: value.model,
                residual: value.residual(),
                residual_unit: value.figure.residual_unit().into(),
                in_fit: value.in_fit,
            }
        })
        .collect()
}

/// The worst and rms residual per model stage and metric, in the order first met.
fn residual_summaries(records: &[ResidualRecord]) -> Vec<ResidualSummaryRecord> {
    let mut keys: Vec<(&str, &str)> = Vec::new();
    for r in records {
        if !keys.contains(&(r.stage.as_str(), r.metric.as_str())) {
            keys.push((&r.stage, &r.metric));
        }
    }
    keys.into_iter()
        .map(|(stage, metric)| {
            let mine: Vec<&ResidualRecord> = records
                .iter()
                .filter(|r| r.stage == stage && r.metric == metric)
                .collect();
            let residuals: Vec<(f64, u64)> = mine
                .iter()
                .filter_map(|r| r.residual.map(|value| (value, r.row)))
                .collect();
            let rms = (!residuals.is_empty()).then(|| {
                (residuals.iter().map(|(r, _)| r * r).sum::<f64>() / residuals.len() as f64).sqrt()
            });
            let worst = residuals
                .iter()
                .copied()
                .max_by(|a, b| a.0.abs().total_cmp(&b.0.abs()));
            ResidualSummaryRecord {
                stage: stage.to_owned(),
                measured_stage: mine[0].measured_stage.clone(),
                metric: metric.to_owned(),
                unit: mine[0].residual_unit.clone(),
                points: mine.len(),
                below_floor: mine.len() - residuals.len(),
                rms,
                worst: worst.map(|w| w.0),
                worst_row: worst.map(|w| w.1),
                in_fit: mine.iter().any(|r| r.in_fit),
            }
        })
        .collect()
}

/// Largest number of amplitude ranges a saturation note lists one by one.
const LISTED_RANGES: usize = 4;

/// Saturation is distortion the figures include, not a warning; but a stage that saturates
/// with the default supply or input common mode is most likely not biased as designed. One
/// warning per frequency names the amplitude ranges where it saturates (in increasing
/// amplitude) and the worst forward bias, rather than one line per point.
fn default_bias_saturation_warnings(
    stage: &Stage,
    temperature_c: f64,
    points: &[PointRecord],
) -> Vec<String> {
    if !stage.bias_is_default() {
        return Vec::new();
    }
    let mut frequencies: Vec<f64> = Vec::new();
    for p in points {
        if !frequencies.contains(&p.frequency_hz) {
            frequencies.push(p.frequency_hz);
        }
    }
    let saturating = |p: &PointRecord| p.region == Region::Saturating;
    let mut warnings = Vec::new();
    for frequency in frequencies {
        let mut here: Vec<&PointRecord> = points
            .iter()
            .filter(|p| p.frequency_hz == frequency)
            .collect();
        here.sort_by(|a, b| a.amplitude_v.total_cmp(&b.amplitude_v));
        // Runs of consecutive saturating amplitudes: (first, last, count).
        let mut runs: Vec<(f64, f64, usize)> = Vec::new();
        let mut inside_run = false;
        for p in &here {
            match (saturating(p), inside_run, runs.last_mut()) {
                (true, true, Some(run)) => {
                    run.1 = p.amplitude_v;
                    run.2 += 1;
                }
                (true, _, _) => runs.push((p.amplitude_v, p.amplitude_v, 1)),
                (false, _, _) => {}
            }
            inside_run = saturating(p);
        }
        if runs.is_empty() {
            continue;
        }
        let count = here.iter().filter(|p| saturating(p)).count();
        let worst_forward_bias = here
            .iter()
            .map(|p| -p.collector_base_margin_v)
            .fold(f64::NEG_INFINITY, f64::max);
        let range_text = |&(first, last, count): &(f64, f64, usize)| {
            if count == 1 {
                format_si(first, "V")
            } else {
                format!("{} to {}", format_si(first, "V"), format_si(last, "V"))
            }
        };
        let mut listed: Vec<String> = runs.iter().take(LISTED_RANGES).map(range_text).collect();
        if runs.len() > LISTED_RANGES {
            listed.push(format!("{} more ranges", runs.len() - LISTED_RANGES));
        }
        let share = if here.len() > 1 {
            format!("{count} of {} amplitudes, ", here.len())
        } else {
            String::new()
        };
        warnings.push(format!(
            "stage `{}` at {} °C, {}: saturates at {} ({share}collector-base forward-biased by up to {:.3} V; the figures include it) with the default supply or input common mode (5 V, half the supply); set `supply` and `input_common_mode` to the design's bias",
            stage.name,
            temperature_c,
            format_si(frequency, "Hz"),
            listed.join(", "),
            worst_forward_bias,
        ));
    }
    warnings
}

/// A multi-tanh cell in words: `doublet, A = 3.73`, `triplet, A = 10, centre 30 %`, or the
/// listed pairs as `P:M areas × current share`.
pub fn cell_words(stage: &Stage) -> Option<String> {
    use crate::model::topology::{MultiTanhForm, Topology};
    if stage.topology != Topology::MultiTanh {
        return None;
    }
    let cell = &stage.multi_tanh;
    Some(match cell.form {
        MultiTanhForm::Doublet => format!("doublet, A = {:.4}", cell.area_ratio),
        MultiTanhForm::Triplet => format!(
            "triplet, A = {:.4}, centre {:.0} %",
            cell.area_ratio,
            100.0 * cell.centre_fraction
        ),
        MultiTanhForm::Pairs => cell
            .list
            .iter()
            .map(|p| {
                format!(
                    "{}:{} × {:.0} %",
                    p.area_p,
                    p.area_m,
                    100.0 * p.tail_fraction
                )
            })
            .collect::<Vec<_>>()
            .join(", "),
    })
}

/// The comparison of schemes as a record.
fn scheme_record(
    c: &crate::study::schemes::SchemeComparison,
) -> crate::report::SchemeComparisonRecord {
    crate::report::SchemeComparisonRecord {
        equal: c.basis.name().into(),
        value: c.value,
        temperature_c: c.temperature_c,
        frequency_hz: c.frequency_hz,
        amplitudes_v: c.amplitudes_v.clone(),
        rows: c
            .rows
            .iter()
            .map(|r| crate::report::SchemeRowRecord {
                stage: r.stage.clone(),
                topology: r.topology.name().into(),
                cell: cell_words(&r.compared),
                impedance_scale: r.scale,
                tail_current_a: r.tail_current_a,
                load_resistance_ohm: r.compared.load_resistance,
                emitter_resistance_ohm: r.compared.emitter_resistance,
                gain_db: r.gain_db,
                iip3_v: r.iip3_v,
                input_noise_v_rthz: r.input_noise_v_rthz,
                tail_source_voltage_v: r.bias.tail_source_v,
                degeneration_drop_v: r.bias.degeneration_drop_v(),
                hd3_dbc: r.hd3_dbc.clone(),
                im3_dbc: r.im3_dbc.clone(),
            })
            .collect(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn point(amplitude_v: f64, saturating: bool) -> PointRecord {
        serde_json::from_value(serde_json::json!({
            "stage": "s", "temperature_c": 27.0, "frequency_hz": 1000.0,
            "amplitude_v": amplitude_v, "fundamental_v": 1.0, "gain_db": 0.0,
            "thd_dbc": null, "single_ended_fundamental_v": 0.5,
            "single_ended_hd2_dbc": null, "single_ended_hd3_dbc": null, "samples": 256,
            "region": if saturating { "saturating" } else { "forward-active" },
            "collector_base_margin_v": if saturating { -amplitude_v } else { 0.5 },
            "min_current_fraction": 0.1,
        }))
        .unwrap()
    }

    /// Saturating points of a stage on the default bias are summed up per frequency as
    /// amplitude ranges in increasing amplitude, whatever order the plan lists them in; a
    /// stage with its own bias gets no such warning.
    #[test]
    fn default_bias_saturation_warnings_name_ranges_not_points() {
        let stage = Stage::new("s", 1e-3, 2e3);
        let points: Vec<PointRecord> = [0.5, 0.1, 0.6, 0.2, 0.7, 0.3, 0.01]
            .iter()
            .map(|&a| point(a, !(a < 0.15 || (0.25..0.55).contains(&a))))
            .collect();
        let warnings = default_bias_saturation_warnings(&stage, 27.0, &points);
        assert_eq!(warnings.len(), 1, "{warnings:?}");
        let w = &warnings[0];
        assert!(w.contains("at 200 mV, 600 mV to 700 mV"), "{w}");
        assert!(w.contains("3 of 7 amplitudes"), "{w}");
        assert!(w.contains("forward-biased by up to 0.700 V"), "{w}");
        let biased = stage.clone().supply(5.0).input_common_mode(2.5);
        assert!(default_bias_saturation_warnings(&biased, 27.0, &points).is_empty());
        let none: Vec<PointRecord> = [0.1, 0.2].iter().map(|&a| point(a, false)).collect();
        assert!(default_bias_saturation_warnings(&stage, 27.0, &none).is_empty());
    }

    #[test]
    fn the_headline_names_the_failing_check_with_the_least_margin_of_its_line() {
        // A check fails by its margin: of one line's failing checks, the worst is the one
        // furthest past the limit (common practice), not the first in temperature order.
        let check = |t: f64, metric: &str, value: f64, margin: f64| FailingCheckRecord {
            stage: "pair".into(),
            temperature_c: t,
            corner: TYPICAL.into(),
            metric: metric.into(),
            at_v: Some(0.1),
            kind: "max".into(),
            limit: -45.0,
            value: Some(value),
            margin: Some(margin),
            unit: "dBc".into(),
            text: format!("{metric} at {t}"),
        };
        let failing = [
            check(27.0, "hd3", -44.82, -0.18),
            check(85.0, "hd3", -44.73, -0.27),
            check(27.0, "thd", -30.0, -5.0),
        ];
        let worst = worst_failure(&failing).unwrap();
        assert_eq!((worst.metric.as_str(), worst.temperature_c), ("hd3", 85.0));
        assert!(worst_failure(&[]).is_none());
    }
}
