//! Questions the tables and figures ask of a report: which stages, temperatures and
//! frequencies it covers, the typical temperature, and the emitter resistance to build.

use super::{Report, SizingRecord};

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

/// The emitter resistance to build for `stage`: the largest of its per-temperature least
/// values, offered only when sizing met the budget at every temperature (and corner) and every
/// scanned value between each least value and that largest one passed every line too.
pub fn value_to_build(report: &Report, stage: &str) -> Option<f64> {
    let records: Vec<&SizingRecord> = report.sizing.iter().filter(|s| s.stage == stage).collect();
    if records.is_empty() || !records.iter().all(|s| s.met) {
        return None;
    }
    let largest = records
        .iter()
        .filter_map(|s| s.emitter_resistance_ohm)
        .reduce(f64::max)?;
    let holds = records.iter().all(|s| {
        let least = s.emitter_resistance_ohm.unwrap_or(largest);
        s.scan
            .iter()
            .filter(|t| t.emitter_resistance_ohm >= least && t.emitter_resistance_ohm <= largest)
            .all(|t| {
                t.margins.iter().all(|m| m.is_none_or(|m| m >= 0.0))
                    && t.headroom_v.is_none_or(|h| h >= 0.0)
            })
    });
    holds.then_some(largest)
}
