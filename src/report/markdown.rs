//! `summary.md`: the human tables — per stage the drive points, the intercepts, the budget
//! verdict and the sizing result.

use super::{PointRecord, Report, CAUTION};
use crate::units::format_si;
use std::fmt::Write;

fn db(value: Option<f64>) -> String {
    value
        .map(|v| format!("{v:.2}"))
        .unwrap_or_else(|| "—".into())
}

fn volts(value: Option<f64>) -> String {
    value
        .map(|v| format_si(v, "V"))
        .unwrap_or_else(|| "—".into())
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
        let _ = writeln!(
            out,
            "|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|---|"
        );
        let of_stage: Vec<&PointRecord> =
            report.points.iter().filter(|p| p.stage == name).collect();
        let budget_amplitudes: Vec<f64> = report
            .budget
            .iter()
            .filter(|b| b.stage == name)
            .filter_map(|b| b.at_v)
            .collect();
        let shown = shown_points(&of_stage, &budget_amplitudes);
        for p in &shown {
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
        if shown.len() < of_stage.len() {
            let _ = writeln!(
                out,
                "\n{} of {} drive points shown: evenly spaced through each sweep{}. Every point is in `points.csv` and `report.json`.",
                shown.len(),
                of_stage.len(),
                if budget_amplitudes.is_empty() { "" } else { ", plus the amplitudes the budget names" }
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
            let with_corner = lines
                .iter()
                .any(|b| !b.corner.is_empty() && b.corner != crate::corner::TYPICAL);
            if !report.sizing.is_empty() {
                let _ = writeln!(
                    out,
                    "Budget lines checked on the stage as planned (before sizing):\n"
                );
            }
            let _ = writeln!(
                out,
                "| T (°C) |{} metric | at | limit | value | margin (dB) | verdict |",
                if with_corner { " corner |" } else { "" }
            );
            let _ = writeln!(
                out,
                "|---:|{}---|---:|---:|---:|---:|---|",
                if with_corner { "---|" } else { "" }
            );
            for b in lines {
                let quantity = |v: f64| b.quantity_text(v);
                let _ = writeln!(
                    out,
                    "| {} |{} {} | {} | {} {} | {} | {} | {} |",
                    b.temperature_c,
                    if with_corner {
                        format!(" {} |", b.corner)
                    } else {
                        String::new()
                    },
                    b.metric,
                    volts(b.at_v),
                    b.kind,
                    quantity(b.limit),
                    b.value.map(quantity).unwrap_or_else(|| "—".into()),
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
        if let Some(value) = super::value_to_build(report, name) {
            let _ = writeln!(
                out,
                "**R_E to build for `{name}`: {}** — the largest of the per-temperature least values; every scanned value from each temperature's least value up to it passed every line.\n",
                format_si(value, "Ω")
            );
        }
    }
    population_sections(report, &mut out);
    if !report.warnings.is_empty() {
        let _ = writeln!(out, "## Warnings\n");
        for w in &report.warnings {
            let _ = writeln!(out, "- {w}");
        }
        let _ = writeln!(out);
    }
    let _ = writeln!(
        out,
        "Plan {}: **{}**",
        report.plan,
        if report.met { "met" } else { "not met" }
    );
    out
}

/// Rows per temperature, corner and frequency above which a sweep is thinned in the table.
const ROWS_PER_SWEEP: usize = 41;

/// The points of one stage to tabulate: all of them for a short list of amplitudes; for a
/// longer sweep, `ROWS_PER_SWEEP` evenly spaced through each temperature, corner and
/// frequency (first and last included), plus the point nearest each budget amplitude.
fn shown_points<'a>(points: &[&'a PointRecord], budget_amplitudes: &[f64]) -> Vec<&'a PointRecord> {
    let mut shown = Vec::new();
    let mut start = 0;
    while start < points.len() {
        let first = points[start];
        let same_sweep = |p: &&PointRecord| {
            p.temperature_c == first.temperature_c
                && p.corner == first.corner
                && p.frequency_hz == first.frequency_hz
        };
        let length = points[start..].iter().take_while(|p| same_sweep(p)).count();
        let sweep = &points[start..start + length];
        if length <= ROWS_PER_SWEEP {
            shown.extend_from_slice(sweep);
        } else {
            let mut keep = vec![false; length];
            for i in 0..ROWS_PER_SWEEP {
                keep[(i * (length - 1) + (ROWS_PER_SWEEP - 1) / 2) / (ROWS_PER_SWEEP - 1)] = true;
            }
            for at in budget_amplitudes {
                let nearest = (0..length).min_by(|&a, &b| {
                    (sweep[a].amplitude_v - at)
                        .abs()
                        .total_cmp(&(sweep[b].amplitude_v - at).abs())
                });
                if let Some(i) = nearest {
                    keep[i] = true;
                }
            }
            shown.extend(
                sweep
                    .iter()
                    .zip(&keep)
                    .filter(|(_, k)| **k)
                    .map(|(p, _)| *p),
            );
        }
        start += length;
    }
    shown
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

fn figure(value: Option<f64>, unit: &str) -> String {
    match (value, unit) {
        (None, _) => "—".into(),
        (Some(v), "dBc" | "dB") => format!("{v:.2}"),
        (Some(v), "V/√Hz") => format!("{:.3} nV/√Hz", v * 1e9),
        (Some(v), u) => format_si(v, u),
    }
}

/// Corner spread, Monte Carlo distributions, yield and the noise-versus-distortion sizing gap.
fn population_sections(report: &Report, out: &mut String) {
    if !report.corner_spread.is_empty() {
        let _ = writeln!(out, "## Process corners (typical, minimum, maximum)\n");
        let _ = writeln!(
            out,
            "| stage | T (°C) | figure | at | typical | min (corner) | max (corner) |"
        );
        let _ = writeln!(out, "|---|---:|---|---:|---:|---:|---:|");
        for r in &report.corner_spread {
            let _ = writeln!(
                out,
                "| {} | {} | {} | {} | {} | {} ({}) | {} ({}) |",
                r.stage,
                r.temperature_c,
                r.metric,
                volts(r.at_v),
                figure(r.typical, &r.unit),
                figure(r.min, &r.unit),
                r.min_corner,
                figure(r.max, &r.unit),
                r.max_corner
            );
        }
        let _ = writeln!(out);
    }
    if !report.monte_carlo.is_empty() {
        let _ = writeln!(out, "## Monte Carlo mismatch\n");
        let _ = writeln!(
            out,
            "| stage | T (°C) | f (Hz) | amplitude | metric | runs | p05 | median | p95 |"
        );
        let _ = writeln!(out, "|---|---:|---:|---:|---|---:|---:|---:|---:|");
        for r in &report.monte_carlo {
            let _ = writeln!(
                out,
                "| {} | {} | {} | {} | {} | {} | {} | {} | {} |",
                r.stage,
                r.temperature_c,
                r.frequency_hz,
                format_si(r.amplitude_v, "V"),
                r.metric,
                r.runs,
                figure(r.p05, &r.unit),
                figure(r.median, &r.unit),
                figure(r.p95, &r.unit)
            );
        }
        let _ = writeln!(out);
        for y in &report.yield_ {
            let _ = writeln!(
                out,
                "Yield of `{}` at {} °C ({} corner): {:.1} % of {} runs meet every budget line ({}: {:.1} % to {:.1} %).\n",
                y.stage,
                y.temperature_c,
                y.corner,
                100.0 * y.pass_fraction,
                y.runs,
                y.interval,
                100.0 * y.pass_fraction_low,
                100.0 * y.pass_fraction_high
            );
        }
    }
    for s in report
        .sizing
        .iter()
        .filter(|s| s.conflict_gap_ohm.is_some())
    {
        let _ = writeln!(
            out,
            "Sizing of `{}` at {} °C: distortion needs R_E ≥ {} but noise allows at most {}; no value meets both (gap {}).\n",
            s.stage,
            s.temperature_c,
            s.distortion_least_emitter_resistance_ohm.map(|r| format_si(r, "Ω")).unwrap_or_default(),
            s.noise_greatest_emitter_resistance_ohm.map(|r| format_si(r, "Ω")).unwrap_or_default(),
            s.conflict_gap_ohm.map(|r| format_si(r, "Ω")).unwrap_or_default()
        );
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn point(amplitude_v: f64, frequency_hz: f64) -> PointRecord {
        serde_json::from_value(serde_json::json!({
            "stage": "s", "temperature_c": 27.0, "frequency_hz": frequency_hz,
            "amplitude_v": amplitude_v, "fundamental_v": 1.0, "gain_db": 0.0,
            "thd_dbc": null, "single_ended_fundamental_v": 0.5,
            "single_ended_hd2_dbc": null, "single_ended_hd3_dbc": null, "samples": 256,
            "forward_active": true, "max_base_collector_v": -1.0, "min_current_fraction": 0.1,
        }))
        .unwrap()
    }

    /// A long sweep is thinned to evenly spaced rows with both ends and the budget's
    /// amplitude; a short list of amplitudes is shown whole; each frequency separately.
    #[test]
    fn long_sweeps_are_thinned_short_lists_kept() {
        let mut points: Vec<PointRecord> = (0..1000).map(|i| point(i as f64 * 1e-3, 1e3)).collect();
        points.extend((0..5).map(|i| point(i as f64 * 1e-3, 1e6)));
        let refs: Vec<&PointRecord> = points.iter().collect();
        let shown = shown_points(&refs, &[0.4567]);
        let at_1k: Vec<f64> = shown
            .iter()
            .filter(|p| p.frequency_hz == 1e3)
            .map(|p| p.amplitude_v)
            .collect();
        assert_eq!(at_1k.len(), ROWS_PER_SWEEP + 1);
        assert_eq!(at_1k[0], 0.0);
        assert_eq!(*at_1k.last().unwrap(), 0.999);
        assert!(at_1k.contains(&0.457), "{at_1k:?}");
        assert!(at_1k.windows(2).all(|w| w[0] < w[1]));
        assert_eq!(shown.iter().filter(|p| p.frequency_hz == 1e6).count(), 5);
    }
}
