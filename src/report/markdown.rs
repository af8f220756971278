//! `summary.md`: the human tables — per stage the drive points, the intercepts, the budget
//! verdict and the sizing result.

use super::{Report, CAUTION};
use crate::units::format_si;
use std::fmt::Write;

fn db(value: Option<f64>) -> String {
    value.map(|v| format!("{v:.2}")).unwrap_or_else(|| "—".into())
}

fn volts(value: Option<f64>) -> String {
    value.map(|v| format_si(v, "V")).unwrap_or_else(|| "—".into())
}

/// Renders the summary tables as Markdown.
pub fn summary(report: &Report) -> String {
    let mut out = String::new();
    let _ = writeln!(out, "# {} — linearity summary\n", report.plan);
    let _ = writeln!(out, "> {CAUTION}\n");
    let _ = writeln!(
        out,
        "Harmonics are of the differential output in dBc; THD sums harmonics 2–{}; a dash is below the analysis floor ({} dBc) or not available.\n",
        report.analysis.thd_harmonics, report.analysis.analysis_floor_dbc
    );
    let mut stage_names: Vec<&str> = Vec::new();
    for s in &report.stages {
        if !stage_names.contains(&s.stage.as_str()) {
            stage_names.push(&s.stage);
        }
    }
    if stage_names.len() > 1 {
        let _ = writeln!(out, "## Stages side by side\n");
        let _ = writeln!(out, "| stage | T (°C) | gain (dB) | IIP3 | P1dB | steering range | noise (nV/√Hz) | budget |");
        let _ = writeln!(out, "|---|---:|---:|---:|---:|---:|---:|---|");
        for i in &report.intercepts {
            let verdict = verdict_of(report, &i.stage, i.temperature_c);
            let _ = writeln!(
                out,
                "| {} | {} | {:.2} | {} | {} | {} | {:.2} | {} |",
                i.stage,
                i.temperature_c,
                i.small_signal_gain_db,
                volts(i.iip3_v),
                volts(i.p1db_v),
                format_si(i.steering_range_v, "V"),
                i.input_noise_v_rthz * 1e9,
                verdict
            );
        }
        let _ = writeln!(out);
    }
    for name in stage_names {
        let _ = writeln!(out, "## Stage `{name}`\n");
        let _ = writeln!(out, "| T (°C) | f (Hz) | amplitude | fundamental | gain (dB) | HD2 | HD3 | HD5 | THD | IM3 | in forward-active |");
        let _ = writeln!(out, "|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|---|");
        for p in report.points.iter().filter(|p| p.stage == name) {
            let _ = writeln!(
                out,
                "| {} | {} | {} | {} | {:.2} | {} | {} | {} | {} | {} | {} |",
                p.temperature_c,
                p.frequency_hz,
                format_si(p.amplitude_v, "V"),
                format_si(p.fundamental_v, "V"),
                p.gain_db,
                db(p.harmonic(2)),
                db(p.harmonic(3)),
                db(p.harmonic(5)),
                db(p.thd_dbc),
                db(p.im3_dbc.flatten()),
                if p.forward_active { "yes" } else { "**no**" }
            );
        }
        let _ = writeln!(out);
        let _ = writeln!(out, "| T (°C) | f (Hz) | small-signal gain (dB) | IIP3 | OIP3 | P1dB | steering range | input noise (nV/√Hz) |");
        let _ = writeln!(out, "|---:|---:|---:|---:|---:|---:|---:|---:|");
        for i in report.intercepts.iter().filter(|i| i.stage == name) {
            let _ = writeln!(
                out,
                "| {} | {} | {:.2} | {} | {} | {} | {} | {:.3} |",
                i.temperature_c,
                i.frequency_hz,
                i.small_signal_gain_db,
                volts(i.iip3_v),
                volts(i.oip3_v),
                volts(i.p1db_v),
                format_si(i.steering_range_v, "V"),
                i.input_noise_v_rthz * 1e9
            );
        }
        let _ = writeln!(out);
        let lines: Vec<_> = report.budget.iter().filter(|b| b.stage == name).collect();
        if !lines.is_empty() {
            let _ = writeln!(out, "| T (°C) | metric | at | limit | value | margin (dB) | verdict |");
            let _ = writeln!(out, "|---:|---|---:|---:|---:|---:|---|");
            for b in lines {
                let _ = writeln!(
                    out,
                    "| {} | {} | {} | {} {} {} | {} | {} | {} |",
                    b.temperature_c,
                    b.metric,
                    volts(b.at_v),
                    b.kind,
                    b.limit,
                    b.unit,
                    b.value.map(|v| format!("{v:.4}")).unwrap_or_else(|| "—".into()),
                    db(b.margin),
                    if b.pass { "pass" } else { "**FAIL**" }
                );
            }
            let _ = writeln!(out);
        }
        for s in report.sizing.iter().filter(|s| s.stage == name) {
            let _ = writeln!(
                out,
                "Sizing at {} °C: {} R_E = {} (binding: {}, worst margin {:.2} dB, gain {} dB, gain cost {} dB, steering range {}, load {}){}\n",
                s.temperature_c,
                if s.met { "least" } else { "no value meets every line; best" },
                s.emitter_resistance_ohm.map(|r| format_si(r, "Ω")).unwrap_or_else(|| "—".into()),
                s.binding_metric,
                s.best_margin,
                db(s.gain_db),
                db(s.gain_cost_db),
                volts(s.steering_range_v),
                s.load_resistance_ohm.map(|r| format_si(r, "Ω")).unwrap_or_else(|| "—".into()),
                if s.headroom_binds { "; headroom, not distortion, binds" } else { "" }
            );
        }
    }
    if !report.warnings.is_empty() {
        let _ = writeln!(out, "## Warnings\n");
        for w in &report.warnings {
            let _ = writeln!(out, "- {w}");
        }
        let _ = writeln!(out);
    }
    let _ = writeln!(out, "Plan {}: **{}**", report.plan, if report.met { "met" } else { "not met" });
    out
}

fn verdict_of(report: &Report, stage: &str, temperature_c: f64) -> &'static str {
    let lines: Vec<_> = report
        .budget
        .iter()
        .filter(|b| b.stage == stage && b.temperature_c == temperature_c)
        .collect();
    if lines.is_empty() {
        "—"
    } else if lines.iter().all(|b| b.pass) {
        "pass"
    } else {
        "FAIL"
    }
}
