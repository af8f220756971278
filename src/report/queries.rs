//! Questions the tables and figures ask of a report: which stages, temperatures and
//! frequencies it covers, the typical temperature, and the emitter resistance to build.

use super::{RecommendedStageRecord, Report};

/// Ordered, distinct stage names as they appear in the report.
pub fn stage_names(report: &Report) -> Vec<String> {
    let mut names: Vec<String> = Vec::new();
    let all = report
        .stages
        .iter()
        .map(|s| &s.stage)
        .chain(report.points.iter().map(|p| &p.stage))
        .chain(report.sizing.iter().map(|s| &s.stage));
    for name in all {
        if !names.contains(name) {
            names.push(name.clone());
        }
    }
    names
}

/// Ordered, distinct temperatures of the report.
pub fn temperatures(report: &Report) -> Vec<f64> {
    let mut temps: Vec<f64> = Vec::new();
    let all = report
        .stages
        .iter()
        .map(|s| s.temperature_c)
        .chain(report.points.iter().map(|p| p.temperature_c))
        .chain(report.sizing.iter().map(|s| s.temperature_c));
    for t in all {
        if !temps.contains(&t) {
            temps.push(t);
        }
    }
    temps
}

/// Ordered, distinct frequencies of the report's drive points.
pub fn frequencies(report: &Report) -> Vec<f64> {
    let mut list: Vec<f64> = Vec::new();
    for p in &report.points {
        if !list.contains(&p.frequency_hz) {
            list.push(p.frequency_hz);
        }
    }
    list
}

/// The typical temperature: the one nearest 27 °C (room temperature, common practice).
pub fn typical_temperature(temps: &[f64]) -> Option<f64> {
    temps
        .iter()
        .copied()
        .min_by(|a, b| (a - 27.0).abs().total_cmp(&(b - 27.0).abs()))
}

/// The emitter resistance to build for `stage`: the recommended design's, offered only when
/// sizing found a value holding every line at every temperature (and corner) and the
/// recommended design, evaluated in full, meets every line.
pub fn value_to_build(report: &Report, stage: &str) -> Option<f64> {
    let recommended = report.verdict.recommended.as_ref()?;
    if !recommended.met {
        return None;
    }
    recommended
        .stages
        .iter()
        .find(|s| s.stage == stage && s.found)
        .map(|s| s.emitter_resistance_ohm)
}

/// The recommended design a derived stage stands for (`None` for a planned stage).
pub fn recommended_stage<'a>(
    report: &'a Report,
    stage: &str,
) -> Option<&'a RecommendedStageRecord> {
    report
        .verdict
        .recommended
        .as_ref()?
        .stages
        .iter()
        .find(|s| s.evaluated_as == stage)
}
