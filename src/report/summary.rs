//! `summary.md`: the human tables — per stage the drive points, the intercepts, the budget
//! verdict and the sizing result.

use super::queries::{recommended_stage, value_to_build};
use super::table::{markdown_text, Cell, Table};
use super::text::{limit_text, metric_label, num, si_exact, si_short};
use super::{BudgetRecord, PointRecord, Report, CAUTION};
use crate::model::corner::TYPICAL;
use std::fmt::Write;

/// A temperature cell: `27`, `−40` (the column title carries the unit).
pub fn temperature_cell(t: f64) -> String {
    num(t, if t.fract() == 0.0 { 0 } else { 1 })
}

/// Whether any record of the report comes from a process corner other than the typical one.
pub fn has_corners(report: &Report) -> bool {
    report
        .points
        .iter()
        .any(|p| !p.corner.is_empty() && p.corner != TYPICAL)
}

/// A budget line's limit: `≤ −60 dBc`, `≥ 300 mV`, and in dBm where the plan gives a
/// reference impedance: `≥ −10 dBm (100 mV)`.
pub fn limit_cell(b: &BudgetRecord) -> String {
    match b.limit_dbm {
        Some(dbm) => format!(
            "{} ({})",
            limit_text(&b.kind, dbm, "dBm"),
            si_short(b.limit, &b.unit)
        ),
        None => limit_text(&b.kind, b.limit, &b.unit),
    }
}

/// A budget line's value in its unit (dBm beside volts where the plan gives a reference
/// impedance), or why there is none.
pub fn value_cell(b: &BudgetRecord) -> String {
    if let (Some(v), Some([low, high])) = (b.value, b.interval) {
        let q = |x: f64| b.quantity_text(x);
        return format!("{} ({}–{})", q(v), q(low), q(high));
    }
    match (b.value, b.value_dbm) {
        (Some(v), Some(dbm)) => format!(
            "{} ({})",
            super::text::level(dbm, "dBm"),
            si_short(v, &b.unit)
        ),
        // Values to two decimals, as the margins: a trimmed "22 dB" for 21.97 dB would hide
        // how close a line is.
        (Some(v), None) if b.unit.starts_with("dB") => format!("{} {}", num(v, 2), b.unit),
        (Some(v), None) => super::text::level(v, &b.unit),
        (None, _) if b.unit == "dBc" || b.margin_at_least => "below floor".into(),
        (None, _) if b.unit == super::YIELD_UNIT => "not estimated".into(),
        (None, _) => "—".into(),
    }
}

fn db(value: Option<f64>) -> String {
    value
        .map(|v| format!("{v:.2}"))
        .unwrap_or_else(|| "—".into())
}

fn volts(value: Option<f64>) -> String {
    value
        .map(|v| si_short(v, "V"))
        .unwrap_or_else(|| "—".into())
}

/// Renders the summary tables as Markdown.
pub fn summary(report: &Report) -> String {
    let mut out = String::new();
    let _ = writeln!(
        out,
        "# {} — linearity summary\n",
        markdown_text(&report.plan)
    );
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
    let corners = has_corners(report);
    let corner_column = |columns: &mut Vec<(&'static str, bool)>| {
        if corners {
            columns.push(("corner", false));
        }
    };
    if stage_names.len() > 1 {
        let _ = writeln!(out, "## Stages side by side\n");
        let mut columns = vec![("stage", false)];
        corner_column(&mut columns);
        columns.extend([
            ("T (°C)", true),
            ("f", true),
            ("gain (dB)", true),
            ("IIP3", true),
            ("P1dB", true),
            ("steering range", true),
            ("input noise (nV/√Hz)", true),
            ("budget", false),
        ]);
        let mut table = Table::new(columns);
        for i in &report.intercepts {
            let mut row: Vec<Cell> = vec![i.stage.as_str().into()];
            if corners {
                row.push(i.corner.as_str().into());
            }
            row.extend([
                temperature_cell(i.temperature_c).into(),
                si_exact(i.frequency_hz, "Hz").into(),
                format!("{:.2}", i.small_signal_gain_db).into(),
                volts(i.iip3_v).into(),
                volts(i.p1db_v).into(),
                si_short(i.steering_range_v, "V").into(),
                format!("{:.2}", i.input_noise_v_rthz * 1e9).into(),
                verdict_of(report, &i.stage, i.temperature_c, &i.corner),
            ]);
            table.push(row);
        }
        let _ = writeln!(out, "{}", table.to_markdown());
    }
    for name in stage_names {
        let _ = writeln!(out, "## Stage {}\n", markdown_text(name));
        let mut columns = Vec::new();
        corner_column(&mut columns);
        columns.extend([
            ("T (°C)", true),
            ("f", true),
            ("amplitude", true),
            ("fundamental", true),
            ("gain (dB)", true),
            ("HD2", true),
            ("HD3", true),
            ("HD5", true),
            ("THD", true),
            ("IM3", true),
            ("region (collector-base margin)", false),
        ]);
        let mut table = Table::new(columns);
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
            let mut row: Vec<Cell> = Vec::new();
            if corners {
                row.push(p.corner.as_str().into());
            }
            row.extend([
                temperature_cell(p.temperature_c).into(),
                si_exact(p.frequency_hz, "Hz").into(),
                si_exact(p.amplitude_v, "V").into(),
                si_short(p.fundamental_v, "V").into(),
                format!("{:.2}", p.gain_db).into(),
                db(p.harmonic(2)).into(),
                db(p.harmonic(3)).into(),
                db(p.harmonic(5)).into(),
                db(p.thd_dbc).into(),
                db(p.im3_dbc.flatten()).into(),
                {
                    let text = format!(
                        "{} ({})",
                        p.region.name(),
                        si_short(p.collector_base_margin_v, "V")
                    );
                    Cell::verdict(p.region.is_forward_active(), &text, &text)
                },
            ]);
            table.push(row);
        }
        let _ = write!(out, "{}", table.to_markdown());
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
        let mut columns = Vec::new();
        corner_column(&mut columns);
        columns.extend([
            ("T (°C)", true),
            ("f", true),
            ("small-signal gain (dB)", true),
            ("IIP3", true),
            ("OIP3", true),
            ("P1dB", true),
            ("steering range", true),
            ("input noise (nV/√Hz)", true),
        ]);
        let mut table = Table::new(columns);
        for i in report.intercepts.iter().filter(|i| i.stage == name) {
            let mut row: Vec<Cell> = Vec::new();
            if corners {
                row.push(i.corner.as_str().into());
            }
            row.extend([
                temperature_cell(i.temperature_c).into(),
                si_exact(i.frequency_hz, "Hz").into(),
                format!("{:.2}", i.small_signal_gain_db).into(),
                volts(i.iip3_v).into(),
                volts(i.oip3_v).into(),
                volts(i.p1db_v).into(),
                si_short(i.steering_range_v, "V").into(),
                format!("{:.3}", i.input_noise_v_rthz * 1e9).into(),
            ]);
            table.push(row);
        }
        let _ = writeln!(out, "{}", table.to_markdown());
        let lines: Vec<_> = report.budget.iter().filter(|b| b.stage == name).collect();
        if !lines.is_empty() {
            let with_corner = lines
                .iter()
                .any(|b| !b.corner.is_empty() && b.corner != TYPICAL);
            match recommended_stage(report, name) {
                Some(d) => {
                    let _ = writeln!(
                        out,
                        "Budget lines checked on the recommended design (derived: `{}` with R_E = {}, R_L = {}{}):\n",
                        markdown_text(&d.stage),
                        si_short(d.emitter_resistance_ohm, "Ω"),
                        si_short(d.load_resistance_ohm, "Ω"),
                        area_ratio_text(d.area_ratio)
                    );
                }
                None if !report.sizing.is_empty() => {
                    let _ = writeln!(
                        out,
                        "Budget lines checked on the stage as planned (before sizing):\n"
                    );
                }
                None => {}
            }
            let mut columns = vec![("T (°C)", true)];
            if with_corner {
                columns.push(("corner", false));
            }
            columns.extend([
                ("metric", false),
                ("at", true),
                ("f", true),
                ("limit", true),
                ("value", true),
                ("margin (dB)", true),
                ("verdict", false),
            ]);
            let mut table = Table::new(columns);
            for b in lines {
                let mut row: Vec<Cell> = vec![temperature_cell(b.temperature_c).into()];
                if with_corner {
                    row.push(b.corner.as_str().into());
                }
                row.extend([
                    metric_label(&b.metric).into(),
                    b.at_v
                        .map(|a| si_exact(a, "V"))
                        .unwrap_or_else(|| "—".into())
                        .into(),
                    si_exact(b.frequency_hz, "Hz").into(),
                    limit_cell(b).into(),
                    value_cell(b).into(),
                    b.margin_text().into(),
                    Cell::verdict(b.pass, "pass", "FAIL"),
                ]);
                table.push(row);
            }
            let _ = writeln!(out, "{}", table.to_markdown());
        }
        for s in report.sizing.iter().filter(|s| s.stage == name) {
            let binding = if s.binding_corner.is_empty() || s.binding_corner == TYPICAL {
                metric_label(&s.binding_metric)
            } else {
                format!(
                    "{} in the {} corner",
                    metric_label(&s.binding_metric),
                    s.binding_corner
                )
            };
            let _ = writeln!(
                out,
                "Sizing at {} °C: {} R_E = {}{} (binding: {}, worst margin {:.2} dB, gain {} dB, gain cost {} dB, steering range {}, load {}){}\n",
                temperature_cell(s.temperature_c),
                match (s.met, report.sizing_region.iter().any(|r| r.stage == s.stage)) {
                    (true, false) => "least",
                    (true, true) => "the design found has",
                    (false, _) => "no value meets every line; best",
                },
                s.emitter_resistance_ohm.map(|r| si_short(r, "Ω")).unwrap_or_else(|| "—".into()),
                s.tail_current_a.map(|i| format!(", I_tail = {}", si_short(i, "A"))).unwrap_or_default(),
                markdown_text(&binding),
                s.best_margin,
                db(s.gain_db),
                db(s.gain_cost_db),
                volts(s.steering_range_v),
                s.load_resistance_ohm.map(|r| si_short(r, "Ω")).unwrap_or_else(|| "—".into()),
                if s.headroom_binds { "; headroom, not distortion, binds" } else { "" }
            );
        }
        for s in report.sizing.iter().filter(|s| s.stage == name) {
            for text in s.unreachable.iter().map(|u| &u.text).chain(&s.hints) {
                let _ = writeln!(out, "- {}", markdown_text(text));
            }
        }
        if let Some(region) = report.sizing_region.iter().find(|r| r.stage == *name) {
            let planned = report
                .verdict
                .recommended
                .iter()
                .flat_map(|r| &r.stages)
                .find(|s| s.stage == *name);
            if let Some(stage) = planned {
                let _ = writeln!(
                    out,
                    "\n**{} for {}: I_tail = {}, R_E = {}{}** — {}; binding: {}.\n",
                    if region.met {
                        "To build"
                    } else {
                        "Best found (not met)"
                    },
                    markdown_text(name),
                    si_short(stage.tail_current_a, "A"),
                    si_short(stage.emitter_resistance_ohm, "Ω"),
                    area_ratio_text(stage.area_ratio),
                    if region.met {
                        format!(
                            "the least {} holding every line at every temperature",
                            region.minimise.replace('_', " ")
                        )
                    } else {
                        "no design in the ranges holds every line".to_owned()
                    },
                    markdown_text(&metric_label(&region.binding_metric))
                );
            }
            for (text, table) in super::sizing_region::region_tables(region) {
                let _ = writeln!(out, "{}\n\n{}", markdown_text(&text), table.to_markdown());
            }
        } else if let Some(value) = value_to_build(report, name) {
            let windows = report
                .verdict
                .recommended
                .iter()
                .flat_map(|r| &r.stages)
                .filter(|s| s.stage == name)
                .flat_map(|s| &s.window_ohm)
                .map(|[low, high]| format!("{} – {}", si_short(*low, "Ω"), si_short(*high, "Ω")))
                .collect::<Vec<_>>()
                .join(", ");
            let _ = writeln!(
                out,
                "\n**R_E to build for {}: {}** — the least value holding every line at every temperature (usable at every temperature: {}); the recommended design, evaluated in full, meets every line.\n",
                markdown_text(name),
                si_short(value, "Ω"),
                windows
            );
        }
    }
    population_sections(report, &mut out);
    if !report.fit.is_empty() {
        let _ = writeln!(out, "## Fit to bench data\n");
        let _ = writeln!(
            out,
            "{}\n{}",
            super::correlation::fit_table(report).to_markdown(),
            super::correlation::fit_quality_table(report).to_markdown()
        );
    }
    if !report.residual_summary.is_empty() {
        let _ = writeln!(out, "## Model against bench (model − bench)\n");
        let _ = writeln!(
            out,
            "{}",
            super::correlation::residual_table(report).to_markdown()
        );
    }
    if !report.warnings.is_empty() {
        let _ = writeln!(out, "## Warnings\n");
        for w in &report.warnings {
            let _ = writeln!(out, "- {}", super::table::markdown_inline(w));
        }
        let _ = writeln!(out);
    }
    let _ = writeln!(
        out,
        "Plan {}: **{}**",
        markdown_text(&report.plan),
        markdown_text(&report.verdict.summary)
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

fn verdict_of(report: &Report, stage: &str, temperature_c: f64, corner: &str) -> Cell {
    let lines: Vec<_> = report
        .budget
        .iter()
        .filter(|b| b.stage == stage && b.temperature_c == temperature_c && b.corner == corner)
        .collect();
    if lines.is_empty() {
        "—".into()
    } else {
        Cell::verdict(lines.iter().all(|b| b.pass), "pass", "FAIL")
    }
}

fn figure(value: Option<f64>, unit: &str) -> String {
    match (value, unit) {
        (None, _) => "—".into(),
        (Some(v), "dBc" | "dB") => format!("{v:.2}"),
        (Some(v), "V/√Hz") => format!("{:.3} nV/√Hz", v * 1e9),
        (Some(v), u) => si_short(v, u),
    }
}

/// Corner spread, Monte Carlo distributions, yield and the noise-versus-distortion sizing gap.
fn population_sections(report: &Report, out: &mut String) {
    if !report.corner_spread.is_empty() {
        let _ = writeln!(out, "## Process corners (typical, minimum, maximum)\n");
        let mut table = Table::new([
            ("stage", false),
            ("T (°C)", true),
            ("figure", false),
            ("at", true),
            ("typical", true),
            ("min (corner)", true),
            ("max (corner)", true),
        ]);
        for r in &report.corner_spread {
            table.push(vec![
                r.stage.as_str().into(),
                temperature_cell(r.temperature_c).into(),
                metric_label(&r.metric).into(),
                r.at_v
                    .map(|a| si_exact(a, "V"))
                    .unwrap_or_else(|| "—".into())
                    .into(),
                figure(r.typical, &r.unit).into(),
                format!("{} ({})", figure(r.min, &r.unit), r.min_corner).into(),
                format!("{} ({})", figure(r.max, &r.unit), r.max_corner).into(),
            ]);
        }
        let _ = writeln!(out, "{}", table.to_markdown());
    }
    if !report.monte_carlo.is_empty() {
        let _ = writeln!(out, "## Monte Carlo mismatch\n");
        let mut table = Table::new([
            ("stage", false),
            ("corner", false),
            ("T (°C)", true),
            ("f", true),
            ("amplitude", true),
            ("metric", false),
            ("runs", true),
            ("p05", true),
            ("median", true),
            ("p95", true),
        ]);
        for r in &report.monte_carlo {
            table.push(vec![
                r.stage.as_str().into(),
                r.corner.as_str().into(),
                temperature_cell(r.temperature_c).into(),
                si_exact(r.frequency_hz, "Hz").into(),
                if r.metric == "offset" {
                    "—".to_owned()
                } else {
                    si_exact(r.amplitude_v, "V")
                }
                .into(),
                metric_label(&r.metric).into(),
                r.runs.to_string().into(),
                figure(r.p05, &r.unit).into(),
                figure(r.median, &r.unit).into(),
                figure(r.p95, &r.unit).into(),
            ]);
        }
        let _ = writeln!(out, "{}", table.to_markdown());
        for y in &report.yield_ {
            let failing: Vec<String> = y
                .lines
                .iter()
                .filter(|l| l.failing_runs > 0)
                .map(|l| {
                    format!(
                        "{}{} {:.1} %",
                        l.metric,
                        l.at_v
                            .map(|a| format!(" at {}", si_exact(a, "V")))
                            .unwrap_or_default(),
                        100.0 * l.failing_fraction
                    )
                })
                .collect();
            let _ = writeln!(
                out,
                "Yield of {} at {} °C ({} corner): {:.1} % of {} runs meet every budget line ({}: {:.1} % to {:.1} %){}.\n",
                markdown_text(&y.stage),
                temperature_cell(y.temperature_c),
                markdown_text(&y.corner),
                100.0 * y.pass_fraction,
                y.runs,
                y.interval,
                100.0 * y.pass_fraction_low,
                100.0 * y.pass_fraction_high,
                if failing.is_empty() {
                    String::new()
                } else {
                    format!("; runs failing each line: {}", markdown_text(&failing.join(", ")))
                }
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
            "Sizing of {} at {} °C: distortion needs R_E ≥ {} but noise allows at most {}; no value meets both (gap {}).\n",
            markdown_text(&s.stage),
            temperature_cell(s.temperature_c),
            s.distortion_least_emitter_resistance_ohm.map(|r| si_short(r, "Ω")).unwrap_or_default(),
            s.noise_greatest_emitter_resistance_ohm.map(|r| si_short(r, "Ω")).unwrap_or_default(),
            s.conflict_gap_ohm.map(|r| si_short(r, "Ω")).unwrap_or_default()
        );
    }
}

/// `, area ratio A_E = 4.28` when sizing chose a multi-tanh cell's area ratio.
fn area_ratio_text(ratio: Option<f64>) -> String {
    ratio
        .map(|a| format!(", area ratio A_E = {a:.3}"))
        .unwrap_or_default()
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
            "region": "forward-active", "collector_base_margin_v": 1.0, "min_current_fraction": 0.1,
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
