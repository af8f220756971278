//! `report.md` and `report.html`: the datasheet-ready report with its figures.
//!
//! Both documents are rendered from one list of blocks, so they say the same thing: the
//! conditions, a datasheet table per stage (typical at the temperature nearest 27 °C, minimum
//! and maximum across the plan's temperatures), the budget verdicts, the sizing result, the
//! figures, the model's assumptions and limits, and the caution. The HTML is self-contained
//! (figures inline as SVG, styles inline) so it reads offline and prints to PDF.

use super::queries::{
    frequencies, recommended_stage, stage_names, temperatures, typical_temperature,
};
use super::summary::{limit_cell, temperature_cell, value_cell};
use super::table::{
    html_inline, html_text, html_words, markdown_inline, markdown_text, Cell, Table,
};
use super::text::{celsius, metric_label, si_exact, si_short};
use super::{Region, Report, CAUTION};
use crate::model::corner::TYPICAL;
use std::fmt::Write;

/// A figure as the documents show it: the SVG inline in HTML, the PNG linked from Markdown.
#[derive(Debug, Clone)]
pub struct EmbeddedFigure {
    /// File stem (`<stem>.svg`, `<stem>.png`).
    pub stem: String,
    /// Title.
    pub title: String,
    /// One-sentence reading guide.
    pub caption: String,
    /// The SVG document.
    pub svg: String,
}

/// One block of the report.
#[derive(Debug, Clone)]
pub enum Block {
    /// Heading of level 1–3.
    Heading(u8, String),
    /// Paragraph of plain text.
    Paragraph(String),
    /// The caution, set apart.
    Caution(String),
    /// Bulleted list.
    Bullets(Vec<String>),
    /// Table.
    Table(Table),
    /// A figure: index into the figure list.
    Figure(usize),
}

/// Fixed-decimal number, or a dash when absent.
fn fixed(value: Option<f64>, decimals: usize) -> String {
    match value {
        Some(v) if v.is_finite() => {
            let text = format!("{v:.decimals$}");
            // A value that rounds to zero is zero, not "-0.00".
            match text.strip_prefix('-') {
                Some(rest) if rest.chars().all(|c| c == '0' || c == '.') => rest.to_owned(),
                _ => text,
            }
        }
        _ => "—".into(),
    }
}

/// One value of a figure in one case: (temperature, corner, value).
type CaseValue<'a> = (f64, &'a str, Option<f64>);

/// Minimum, typical (at `typical_c` in the typical corner) and maximum of a figure over the
/// cases, with where the minimum and maximum occur.
fn typ_min_max(
    values: &[CaseValue],
    typical_c: f64,
) -> (Option<f64>, Option<f64>, Option<f64>, String) {
    let present: Vec<&CaseValue> = values
        .iter()
        .filter(|(_, _, v)| v.is_some_and(f64::is_finite))
        .collect();
    let typical = values
        .iter()
        .find(|(t, c, _)| *t == typical_c && (c.is_empty() || *c == TYPICAL))
        .and_then(|(_, _, v)| *v);
    let value = |c: &&&CaseValue| c.2.unwrap_or(f64::NAN);
    let min = present.iter().min_by(|a, b| value(a).total_cmp(&value(b)));
    let max = present.iter().max_by(|a, b| value(a).total_cmp(&value(b)));
    let cases = values
        .iter()
        .map(|(t, c, _)| (t.to_bits(), *c))
        .collect::<std::collections::BTreeSet<_>>()
        .len();
    let corners = values
        .iter()
        .any(|(_, c, _)| !c.is_empty() && *c != TYPICAL);
    let place = |case: &&CaseValue| {
        if corners {
            format!("{}, {}", celsius(case.0), case.1)
        } else {
            celsius(case.0)
        }
    };
    let at = match (min, max) {
        (Some(lo), Some(hi)) if cases > 1 => format!("{} / {}", place(lo), place(hi)),
        _ => String::new(),
    };
    (min.and_then(|c| c.2), typical, max.and_then(|c| c.2), at)
}

/// The datasheet table of one stage.
pub fn datasheet_table(report: &Report, stage: &str) -> Table {
    let temps = temperatures(report);
    let typical = typical_temperature(&temps).unwrap_or(27.0);
    let frequency = report
        .points
        .iter()
        .find(|p| p.stage == stage)
        .map(|p| p.frequency_hz);
    let mut table = Table::new([
        ("parameter", false),
        ("symbol", false),
        ("conditions", false),
        ("min", true),
        ("typ", true),
        ("max", true),
        ("unit", false),
        ("min / max at", false),
    ]);
    let f_text = frequency
        .map(|f| format!("f = {}", si_exact(f, "Hz")))
        .unwrap_or_default();
    let mut row = |name: &str,
                   symbol: &str,
                   conditions: String,
                   values: Vec<CaseValue>,
                   decimals: usize,
                   unit: &str| {
        if values.iter().all(|(_, _, v)| v.is_none()) {
            return;
        }
        let (min, typ, max, at) = typ_min_max(&values, typical);
        table.push(vec![
            name.into(),
            Cell::symbol(symbol),
            conditions.into(),
            fixed(min, decimals).into(),
            fixed(typ, decimals).into(),
            fixed(max, decimals).into(),
            unit.into(),
            at.into(),
        ]);
    };
    let intercepts: Vec<_> = report
        .intercepts
        .iter()
        .filter(|i| i.stage == stage && Some(i.frequency_hz) == frequency)
        .collect();
    let stages: Vec<_> = report.stages.iter().filter(|s| s.stage == stage).collect();
    let by_t = |f: &dyn Fn(&crate::report::InterceptRecord) -> Option<f64>| -> Vec<CaseValue> {
        intercepts
            .iter()
            .map(|i| (i.temperature_c, i.corner.as_str(), f(i)))
            .collect()
    };
    row(
        "small-signal differential gain",
        "A_v",
        "v_d → 0".into(),
        by_t(&|i| Some(i.small_signal_gain_db)),
        2,
        "dB",
    );
    row(
        "transconductance",
        "g_m",
        "v_d = 0".into(),
        stages
            .iter()
            .map(|s| {
                (
                    s.temperature_c,
                    s.corner.as_str(),
                    Some(s.transconductance_s * 1e3),
                )
            })
            .collect(),
        3,
        "mS",
    );
    row(
        "input offset voltage",
        "V_OS",
        "from the plan's mismatch".into(),
        stages
            .iter()
            .map(|s| {
                (
                    s.temperature_c,
                    s.corner.as_str(),
                    Some(s.input_offset_v * 1e6),
                )
            })
            .collect(),
        2,
        "µV",
    );
    row(
        "steering range",
        "",
        format!(
            "{:.0} % of the emitter current on one side",
            100.0 * report.analysis.steering_fraction
        ),
        by_t(&|i| Some(i.steering_range_v * 1e3)),
        2,
        "mV",
    );
    row(
        "input noise density",
        "e_n",
        "white, differential".into(),
        by_t(&|i| Some(i.input_noise_v_rthz * 1e9)),
        3,
        "nV/√Hz",
    );
    // The drive an intercept or compression figure rests on, when it left forward-active
    // operation.
    let fit_note = region_note(
        intercepts
            .iter()
            .filter_map(|i| i.iip3_fit_region.map(|r| (i.temperature_c, r)))
            .collect(),
    );
    let p1db_note = region_note(
        intercepts
            .iter()
            .filter(|i| i.p1db_v.is_some())
            .map(|i| (i.temperature_c, i.p1db_region))
            .collect(),
    );
    row(
        "input third-order intercept",
        "IIP3",
        format!("per tone, peak, {f_text}{fit_note}"),
        by_t(&|i| i.iip3_dbv),
        2,
        "dBV",
    );
    // A row in volts reads in mV while every value is below 1 V, else in V (never 1251.1 mV).
    fn volts(values: Vec<CaseValue<'_>>) -> (Vec<CaseValue<'_>>, usize, &'static str) {
        let largest = values
            .iter()
            .filter_map(|(_, _, v)| *v)
            .fold(0.0f64, |m, v| m.max(v.abs()));
        if largest < 1.0 {
            let scaled = values
                .into_iter()
                .map(|(t, c, v)| (t, c, v.map(|v| v * 1e3)))
                .collect::<Vec<_>>();
            (scaled, 1, "mV")
        } else {
            (values, 3, "V")
        }
    }
    let (values, decimals, unit) = volts(by_t(&|i| i.iip3_v));
    row(
        "input third-order intercept",
        "IIP3",
        format!("per tone, peak, {f_text}{fit_note}"),
        values,
        decimals,
        unit,
    );
    let (values, decimals, unit) = volts(by_t(&|i| i.oip3_v));
    row(
        "output third-order intercept",
        "OIP3",
        format!("per tone, peak, {f_text}{fit_note}"),
        values,
        decimals,
        unit,
    );
    let (values, decimals, unit) = volts(by_t(&|i| i.p1db_v));
    row(
        "input 1 dB compression",
        "P1dB",
        format!("peak, {f_text}{p1db_note}"),
        values,
        decimals,
        unit,
    );

    // Distortion at the budget's amplitudes (those the plan drove) and at the largest drive.
    let points: Vec<_> = report
        .points
        .iter()
        .filter(|p| p.stage == stage && Some(p.frequency_hz) == frequency)
        .collect();
    let mut amplitudes: Vec<f64> = report
        .budget
        .iter()
        .filter(|b| b.stage == stage && b.unit == "dBc")
        .filter_map(|b| b.at_v)
        .filter(|a| points.iter().any(|p| p.amplitude_v == *a))
        .collect();
    if let Some(largest) = points.iter().map(|p| p.amplitude_v).reduce(f64::max) {
        amplitudes.push(largest);
    }
    amplitudes.sort_by(f64::total_cmp);
    amplitudes.dedup();
    for a in amplitudes {
        let at = points.iter().filter(|p| p.amplitude_v == a);
        let conditions = format!("v_d = {} peak, {f_text}", si_exact(a, "V"));
        // Figures of drives outside forward-active operation say so beside them: saturation
        // is distortion the figure includes, and a reader must see it.
        let single = region_note(at.clone().map(|p| (p.temperature_c, p.region)).collect());
        let two = region_note(
            at.clone()
                .filter_map(|p| p.two_tone_region.map(|r| (p.temperature_c, r)))
                .collect(),
        );
        for (name, symbol, get) in [
            (
                "second harmonic",
                "HD2",
                (|p: &crate::report::PointRecord| p.harmonic(2))
                    as fn(&crate::report::PointRecord) -> Option<f64>,
            ),
            ("third harmonic", "HD3", |p| p.harmonic(3)),
            ("total harmonic distortion", "THD", |p| p.thd_dbc),
            ("third-order intermodulation", "IM3", |p| {
                p.im3_dbc.flatten()
            }),
        ] {
            let note = if symbol == "IM3" { &two } else { &single };
            row(
                name,
                symbol,
                format!("{conditions}{note}"),
                at.clone()
                    .map(|p| (p.temperature_c, p.corner.as_str(), get(p)))
                    .collect(),
                2,
                "dBc",
            );
        }
    }
    table
}

/// "; saturating at 27 °C, 85 °C" when some of the temperatures' drives left forward-active
/// operation (the worst region named), empty otherwise.
fn region_note(regions: Vec<(f64, Region)>) -> String {
    let Some(worst) = regions.iter().map(|(_, r)| *r).max() else {
        return String::new();
    };
    if worst.is_forward_active() {
        return String::new();
    }
    let at: Vec<String> = regions
        .iter()
        .filter(|(_, r)| *r == worst)
        .map(|(t, _)| format!("{t} °C"))
        .collect();
    let when = if at.len() == regions.len() {
        "at every temperature".to_owned()
    } else {
        format!("at {}", at.join(", "))
    };
    format!("; {} {when}", worst.name())
}

/// The budget verdict table.
pub fn budget_table(report: &Report) -> Table {
    // A corner column only when the plan names process corners.
    let with_corner = report
        .budget
        .iter()
        .any(|b| !b.corner.is_empty() && b.corner != TYPICAL);
    let mut columns = vec![("stage", false), ("T (°C)", true)];
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
        ("operating region", false),
    ]);
    let mut table = Table::new(columns).unbroken("operating region");
    for b in &report.budget {
        // The region's name only: the collector-base margin behind it is in the note under
        // the table (the least one) and in report.json (every one).
        let region = b.region.name();
        let mut row: Vec<Cell> = vec![
            b.stage.as_str().into(),
            temperature_cell(b.temperature_c).into(),
        ];
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
            Cell::verdict(b.region.is_forward_active(), region, region),
        ]);
        table.push(row);
    }
    table
}

/// The note under the budget table: what the operating region column rests on and the
/// check nearest saturation (the least collector-base reverse bias), with where it is; every
/// check's own value is in report.json.
pub fn region_margin_note(report: &Report) -> Option<String> {
    let least = report
        .budget
        .iter()
        .filter(|b| b.collector_base_margin_v.is_finite())
        .min_by(|a, b| {
            a.collector_base_margin_v
                .total_cmp(&b.collector_base_margin_v)
        })?;
    let corner = if least.corner.is_empty() || least.corner == TYPICAL {
        String::new()
    } else {
        format!(", {} corner", least.corner)
    };
    Some(format!(
        "Operating region: of the drive each value rests on (forward-active, high-injection or saturating). The least collector-base reverse bias over these checks is {} ({} at {}{corner}, {}); every check's own value is in report.json (`collector_base_margin_v`).",
        si_short(least.collector_base_margin_v, "V"),
        least.stage,
        celsius(least.temperature_c),
        metric_label(&least.metric)
    ))
}

/// The sizing table.
pub fn sizing_table(report: &Report) -> Table {
    let corners = report
        .sizing
        .iter()
        .any(|s| !s.binding_corner.is_empty() && s.binding_corner != TYPICAL);
    let mut columns = vec![
        ("stage", false),
        ("T (°C)", true),
        ("R_E", true),
        ("I_tail", true),
        ("binding line", false),
    ];
    if corners {
        columns.push(("binding corner", false));
    }
    columns.extend([
        ("worst margin (dB)", true),
        ("gain (dB)", true),
        ("gain cost (dB)", true),
        ("steering range", true),
        ("load", true),
        ("usable R_E", false),
        ("result", false),
    ]);
    let mut table = Table::new(columns);
    let ohms = |v: Option<f64>| v.map(|r| si_short(r, "Ω")).unwrap_or_else(|| "—".into());
    for s in &report.sizing {
        let in_region = report.sizing_region.iter().any(|r| r.stage == s.stage);
        let windows = if in_region {
            "— (see the region)".to_owned()
        } else if s.window_ohm.is_empty() {
            "none".to_owned()
        } else {
            s.window_ohm
                .iter()
                .map(|[low, high]| format!("{} – {}", si_short(*low, "Ω"), si_short(*high, "Ω")))
                .collect::<Vec<_>>()
                .join(", ")
        };
        let mut row: Vec<Cell> = vec![
            s.stage.as_str().into(),
            temperature_cell(s.temperature_c).into(),
            ohms(s.emitter_resistance_ohm).into(),
            s.tail_current_a
                .map(|i| si_short(i, "A"))
                .unwrap_or_else(|| "—".into())
                .into(),
            metric_label(&s.binding_metric).into(),
        ];
        if corners {
            row.push(s.binding_corner.as_str().into());
        }
        row.extend([
            fixed(Some(s.best_margin), 2).into(),
            fixed(s.gain_db, 2).into(),
            fixed(s.gain_cost_db, 2).into(),
            s.steering_range_v
                .map(|v| si_short(v, "V"))
                .unwrap_or_else(|| "—".into())
                .into(),
            ohms(s.load_resistance_ohm).into(),
            windows.into(),
            Cell::verdict(s.met, "met", "not met"),
        ]);
        table.push(row);
    }
    table
}

use super::sizing_region::{line_name, region_tables};

/// A long sweep in a few words: `41 amplitudes, 1 mV … 1 V, log-spaced`; up to eight values
/// are listed in full. The JSON and CSV keep every value.
pub fn sweep_summary(values: &[f64], unit: &str, noun: &str) -> String {
    if values.len() <= 8 {
        return list_of(values, unit);
    }
    let mut values = values.to_vec();
    values.sort_by(f64::total_cmp);
    let values = values.as_slice();
    let steps = |f: &dyn Fn(f64, f64) -> f64| -> bool {
        let first = f(values[0], values[1]);
        values
            .windows(2)
            .all(|w| (f(w[0], w[1]) - first).abs() <= 1e-3 * first.abs())
    };
    let spacing = if values.iter().all(|v| *v > 0.0) && steps(&|a, b| (b / a).ln()) {
        ", log-spaced"
    } else if steps(&|a, b| b - a) {
        ", evenly spaced"
    } else {
        ""
    };
    format!(
        "{} {noun}, {} … {}{spacing}",
        values.len(),
        si_exact(values[0], unit),
        si_exact(values[values.len() - 1], unit)
    )
}

fn list_of(values: &[f64], unit: &str) -> String {
    values
        .iter()
        .map(|v| si_exact(*v, unit))
        .collect::<Vec<_>>()
        .join(", ")
}

/// The report as blocks.
pub fn blocks(report: &Report, figures: &[EmbeddedFigure]) -> Vec<Block> {
    let mut out = Vec::new();
    out.push(Block::Heading(
        1,
        format!("{} — linearity report", report.plan),
    ));
    out.push(Block::Caution(CAUTION.to_owned()));
    out.push(Block::Paragraph(format!(
        "Verdict: {}.",
        report.verdict.summary
    )));
    if let Some(recommended) = &report.verdict.recommended {
        out.push(Block::Paragraph(format!(
            "Two designs are judged. As planned: the stages as the plan writes them ({}). Recommended: each stage rebuilt with the emitter resistance sizing recommends, evaluated in full over every temperature, corner and drive point as a derived stage ({}); its datasheet, budget checks and figures are computed by the model like the planned ones, not measured. The overall answer is about the {} design{}.",
            if report.verdict.as_planned.met { "meets every line".to_owned() } else {
                format!("{} of {} checks fail", report.verdict.as_planned.failing.len(), report.verdict.as_planned.checks)
            },
            recommended
                .stages
                .iter()
                .map(|s| format!("{} = {} with R_E = {}{}", s.evaluated_as, s.stage,
                    si_short(s.emitter_resistance_ohm, "Ω"),
                    if (s.load_resistance_ohm / s.planned_load_resistance_ohm - 1.0).abs() > 1e-9 {
                        format!(" and R_L = {}", si_short(s.load_resistance_ohm, "Ω"))
                    } else { String::new() }))
                .collect::<Vec<_>>()
                .join("; "),
            if report.verdict.judged == "as_planned" { "planned" } else { "recommended" },
            if report.verdict.judged == "as_planned" { " (run with --as-planned)" } else { "" }
        )));
    }
    let failing: Vec<String> = match (&report.verdict.recommended, report.verdict.judged.as_str()) {
        (Some(r), "recommended") => r.failing.iter().map(|f| f.text.clone()).collect(),
        _ => report
            .verdict
            .as_planned
            .failing
            .iter()
            .map(|f| f.text.clone())
            .collect(),
    };
    if !failing.is_empty() {
        out.push(Block::Bullets(failing));
    }
    let corner_names: Vec<&str> = {
        let mut names: Vec<&str> = Vec::new();
        for i in &report.intercepts {
            if !i.corner.is_empty() && !names.contains(&i.corner.as_str()) {
                names.push(&i.corner);
            }
        }
        names
    };
    let spread = if corner_names.len() > 1 {
        format!(
            "temperatures and process corners ({})",
            corner_names.join(", ")
        )
    } else {
        "temperatures".to_owned()
    };

    let stages = stage_names(report);
    let temps = temperatures(report);
    let typical = typical_temperature(&temps).unwrap_or(27.0);
    let mut amplitudes: Vec<f64> = report.points.iter().map(|p| p.amplitude_v).collect();
    amplitudes.sort_by(f64::total_cmp);
    amplitudes.dedup();
    let two_tone = report.points.iter().any(|p| p.im3_dbc.is_some());
    out.push(Block::Heading(2, "Conditions".into()));
    out.push(Block::Bullets(vec![
        format!("Stages: {}", stages.join(", ")),
        format!(
            "Temperatures: {} (typical values are at {})",
            temps.iter().map(|t| celsius(*t)).collect::<Vec<_>>().join(", "),
            celsius(typical)
        ),
        format!(
            "Frequencies: {}",
            sweep_summary(&frequencies(report), "Hz", "frequencies")
        ),
        format!(
            "Drive amplitudes (peak differential, per tone): {}",
            sweep_summary(&amplitudes, "V", "amplitudes")
        ),
        format!("Two-tone test: {}", if two_tone { "yes (IM3 and IIP3 reported)" } else { "no" }),
        format!(
            "Analysis: THD over harmonics 2–{}; harmonics below {} dBc (−160 dBc for stages with capacitance, higher at drives small enough to meet the solve's precision: each point's floor_dbc) are reported as below the floor; FFT refined until every figure moves less than {} dB; linbudget {}",
            report.analysis.thd_harmonics, report.analysis.analysis_floor_dbc, report.analysis.convergence_db, report.analysis.version
        ),
    ]));

    for stage in &stages {
        let derived = recommended_stage(report, stage);
        out.push(Block::Heading(
            2,
            match derived {
                Some(_) => format!("Datasheet — {stage} (recommended design, derived)"),
                None => format!("Datasheet — {stage}"),
            },
        ));
        if let Some(d) = derived {
            out.push(Block::Paragraph(format!(
                "Derived stage: {} as planned, with R_E = {} per side (planned {}) and R_L = {} per side (planned {}){}, the values sizing recommends. Every figure below is the model's prediction for that design.",
                d.stage,
                si_short(d.emitter_resistance_ohm, "Ω"),
                si_short(d.planned_emitter_resistance_ohm, "Ω"),
                si_short(d.load_resistance_ohm, "Ω"),
                si_short(d.planned_load_resistance_ohm, "Ω"),
                match (d.area_ratio, d.planned_area_ratio) {
                    (Some(a), Some(planned)) => format!(", area ratio {a:.4} (planned {planned})"),
                    _ => String::new(),
                },
            )));
        }
        out.push(Block::Paragraph(format!(
            "Typical at {} in the typical process; min and max across the plan's {spread} at {}. A dash is a figure that is not available or below the analysis floor.",
            celsius(typical),
            temps.iter().map(|t| celsius(*t)).collect::<Vec<_>>().join(", ")
        )));
        out.push(Block::Table(datasheet_table(report, stage)));
    }

    out.push(Block::Heading(2, "Circuit forms".into()));
    out.push(Block::Paragraph(
        "How each stage linearises its pair, the voltage its tail source is left with at zero input, the headroom the degeneration takes there (the lowest emitter less the tail source), and its white input noise by source (they add in power); first temperature, typical corner.".into(),
    ));
    out.push(Block::Table(forms_table(report)));
    if let Some(c) = &report.scheme_comparison {
        out.push(Block::Heading(2, "Schemes at equal terms".into()));
        out.push(Block::Paragraph(format!(
            "Every planned stage {} at {} and {}: {}. IIP3 is “—” where the IM3 slope is never 3:1 (a multi-tanh cell at its cubic null).",
            if c.equal == "tail_current" { "set to the same tail current" } else { "impedance-scaled (current × k, its resistors ÷ k) to the same white input noise" },
            celsius_words(c.temperature_c),
            crate::units::format_si(c.frequency_hz, "Hz"),
            if c.equal == "tail_current" {
                format!("{} each, resistors as planned", crate::units::format_si(c.value, "A"))
            } else {
                format!("{}/√Hz each; the tail current column is what each scheme needs", crate::units::format_si(c.value, "V"))
            }
        )));
        out.push(Block::Table(schemes_table(c)));
    }

    if !report.budget.is_empty() {
        out.push(Block::Heading(2, "Budget verdict".into()));
        let failed = report.budget.iter().filter(|b| !b.pass).count();
        out.push(Block::Paragraph(format!(
            "{} of {} checks pass (stages as planned and, where sizing ran, the derived @sized stages of the recommended design). Margin is in dB and positive when the line passes (percentage points for a yield); “≥” marks a lower bound where the value is below the analysis floor.",
            report.budget.len() - failed,
            report.budget.len()
        )));
        out.push(Block::Table(budget_table(report)));
        if let Some(note) = region_margin_note(report) {
            out.push(Block::Paragraph(note));
        }
    }
    if !report.sizing.is_empty() {
        out.push(Block::Heading(2, "Degeneration sizing".into()));
        let guard = report
            .sizing
            .first()
            .map(|s| s.guard_band_db)
            .unwrap_or(0.0);
        out.push(Block::Paragraph(format!(
            "Per temperature, the least emitter resistance per side that holds every budget line{} (or the best found when none does), and the usable windows: every value inside holds every line. A stage whose tail current is sized too shows the design of least current instead (its region follows).",
            if guard > 0.0 { format!(" with {guard} dB of guard band") } else { String::new() }
        )));
        out.push(Block::Table(sizing_table(report)));
        if let Some(recommended) = &report.verdict.recommended {
            let mut advice: Vec<String> = Vec::new();
            for s in &recommended.stages {
                let windows: Vec<String> = s
                    .window_ohm
                    .iter()
                    .map(|[low, high]| {
                        format!("{} – {}", si_short(*low, "Ω"), si_short(*high, "Ω"))
                    })
                    .collect();
                let region_basis = s.basis.contains("in_region");
                let minimised = report
                    .sizing_region
                    .iter()
                    .find(|r| r.stage == s.stage)
                    .map(|r| r.minimise.replace('_', " "))
                    .unwrap_or_else(|| "tail current".into());
                let least_text =
                    format!("the least {minimised} holding every line at every temperature");
                let yield_text = format!(
                    "the least grid {minimised} above that whose Monte Carlo population meets the yield line too"
                );
                advice.push(if region_basis {
                    format!(
                        "{}: {} I_tail = {} and R_E = {} per side{} ({}).",
                        s.stage,
                        if recommended.met { "build" } else { "evaluated at" },
                        crate::units::format_si(s.tail_current_a, "A"),
                        crate::units::format_si(s.emitter_resistance_ohm, "Ω"),
                        if (s.load_resistance_ohm / s.planned_load_resistance_ohm - 1.0).abs() > 1e-9 {
                            format!(" with R_L = {}", crate::units::format_si(s.load_resistance_ohm, "Ω"))
                        } else {
                            String::new()
                        },
                        match s.basis.as_str() {
                            "least_in_region" => least_text.as_str(),
                            "least_in_region_meeting_yield" => yield_text.as_str(),
                            _ => "no design holds every line; the one with the best worst-line margin",
                        }
                    )
                } else if s.found {
                    format!(
                        "{}: {} R_E = {} ({}; usable at every temperature: {}).",
                        s.stage,
                        if recommended.met { "build" } else { "evaluated at" },
                        si_short(s.emitter_resistance_ohm, "Ω"),
                        if s.basis == "least_in_common_window_meeting_yield" {
                            "the least value in the usable windows whose Monte Carlo population meets the yield line too"
                        } else {
                            "the least value holding every line at every temperature"
                        },
                        windows.join(", ")
                    )
                } else {
                    format!(
                        "{}: no value in the range holds every line at every temperature; the recommended design is evaluated at R_E = {} ({}).",
                        s.stage,
                        si_short(s.emitter_resistance_ohm, "Ω"),
                        match s.basis.as_str() {
                            "least_meeting_reachable_lines" => "the least value meeting every line that can be met",
                            _ => "the value with the best worst-line margin",
                        }
                    )
                });
                advice.extend(s.unreachable.iter().map(|u| u.text.clone()));
                advice.extend(s.hints.iter().cloned());
            }
            out.push(Block::Bullets(advice));
        }
    }
    for region in &report.sizing_region {
        out.push(Block::Heading(
            2,
            format!(
                "Sizing {} · {}",
                region
                    .variables
                    .iter()
                    .map(|v| v.replace('_', " "))
                    .collect::<Vec<_>>()
                    .join(" and "),
                region.stage
            ),
        ));
        let ratio = region
            .area_ratio
            .map(|a| format!(", area ratio {a:.4}"))
            .unwrap_or_default();
        let si = crate::units::format_si;
        out.push(Block::Paragraph(if region.met {
            format!(
                "The least {} holding every budget line at every temperature{}: I_tail = {}, R_E = {} per side{ratio}, limited by {} at {} °C ({} designs evaluated). The map and the fronts below are on the search grid; the design itself is refined between grid values.",
                region.minimise.replace('_', " "),
                if region.guard_band_db > 0.0 {
                    format!(" with {} dB of guard band", region.guard_band_db)
                } else {
                    String::new()
                },
                si(region.tail_current_a, "A"),
                si(region.emitter_resistance_ohm, "Ω"),
                line_name(Some(&region.binding_metric)),
                region.binding_temperature_c,
                region.designs_evaluated
            )
        } else {
            format!(
                "No design in the ranges holds every budget line at every temperature; the best (I_tail = {}, R_E = {}{ratio}) is limited by {}.",
                si(region.tail_current_a, "A"),
                si(region.emitter_resistance_ohm, "Ω"),
                line_name(Some(&region.binding_metric))
            )
        }));
        for (text, table) in region_tables(region) {
            out.push(Block::Paragraph(text));
            out.push(Block::Table(table));
        }
        if !region.hints.is_empty() {
            out.push(Block::Bullets(region.hints.clone()));
        }
    }
    correlation_blocks(report, &mut out);
    if !report.yield_.is_empty() {
        out.push(Block::Heading(2, "Monte Carlo yield".into()));
        out.push(Block::Paragraph(format!(
            "The fraction of runs meeting every budget line, its {}, and per line the fraction of runs failing it (a run can fail several lines).",
            report.yield_.first().map(|y| y.interval.as_str()).unwrap_or("confidence interval")
        )));
        let mut table = Table::new([
            ("stage", false),
            ("corner", false),
            ("T (°C)", true),
            ("runs", true),
            ("yield", true),
            ("95 % interval", true),
            ("runs failing each line", false),
        ]);
        for y in &report.yield_ {
            let lines: Vec<String> = y
                .lines
                .iter()
                .map(|l| {
                    format!(
                        "{}{}: {:.2} %",
                        l.metric.to_uppercase(),
                        l.at_v
                            .map(|a| format!(" at {}", si_short(a, "V")))
                            .unwrap_or_default(),
                        100.0 * l.failing_fraction
                    )
                })
                .collect();
            table.push(vec![
                y.stage.as_str().into(),
                y.corner.as_str().into(),
                temperature_cell(y.temperature_c).into(),
                y.runs.to_string().into(),
                format!("{:.1} %", 100.0 * y.pass_fraction).into(),
                format!(
                    "{:.1} % to {:.1} %",
                    100.0 * y.pass_fraction_low,
                    100.0 * y.pass_fraction_high
                )
                .into(),
                lines.join("; ").into(),
            ]);
        }
        out.push(Block::Table(table));
    }

    if !figures.is_empty() {
        out.push(Block::Heading(2, "Figures".into()));
        for index in 0..figures.len() {
            out.push(Block::Figure(index));
        }
    }

    out.push(Block::Heading(2, "Model assumptions and limits".into()));
    out.push(Block::Bullets(vec![
        "Each stage is a bipolar emitter-coupled pair solved exactly at every instant with the Gummel–Poon core over the whole drive range: both junctions' transport currents, forward and reverse β, forward and reverse Early voltages, high-level injection above the knee currents, and series base, emitter, collector and source resistances, with a finite tail resistance where given. Saturation (a collector-base junction forward-biased, including quasi-saturation behind the collector resistance) is part of the figures, not outside them. Emitter-base breakdown, self-heating and package parasitics are not modelled.".into(),
        "Temperature enters through the thermal voltage kT/q and the saturation current's temperature law; resistors are taken as temperature-independent.".into(),
        "Without capacitance or transit time the stage is memoryless and the frequency only labels the points; with them, figures are the circuit's periodic steady state.".into(),
        "Harmonics come from an FFT of the exact periodic output; THD sums the harmonics listed under Conditions. IIP3 is extrapolated from the small-signal region where the IM3 slope is 3:1, not from the largest drive.".into(),
        "Min and max in the datasheet tables span the plan's temperatures and named process corners only; they are not a statistical spread (see Monte Carlo where the plan asks for it).".into(),
        "Every figure names the operating region of the drive it rests on (forward-active, high-injection or saturating) and the least collector-base reverse bias there; a collector_base_margin budget line forbids saturation with a margin.".into(),
    ]));
    if !report.warnings.is_empty() {
        out.push(Block::Heading(2, "Warnings".into()));
        out.push(Block::Bullets(report.warnings.clone()));
    }
    out
}

/// The correlation with bench data: the fit and the residual table.
fn correlation_blocks(report: &Report, out: &mut Vec<Block>) {
    use super::correlation::{correlation_table, fit_quality_table, fit_table, residual_table};
    if !report.fit.is_empty() {
        out.push(Block::Heading(2, "Fit to bench data".into()));
        out.push(Block::Paragraph(
            "Least squares in dB of the fitted figures (the offset in mV) over every measured value, by Levenberg–Marquardt within the bounds. Standard errors are the Gauss–Newton ones, s²·(JᵀJ)⁻¹ with s² the weighted residual variance; each fitted stage is evaluated through the whole plan as a stage of its own, named <stage>@fitted.".into(),
        ));
        out.push(Block::Table(fit_table(report)));
        out.push(Block::Table(fit_quality_table(report)));
        for summary in &report.fit_summary {
            if summary.parameters.len() > 1 {
                out.push(Block::Paragraph(format!(
                    "Correlation of the fitted parameters of {}:",
                    summary.stage
                )));
                out.push(Block::Table(correlation_table(summary)));
            }
        }
    }
    if !report.residual_summary.is_empty() {
        out.push(Block::Heading(2, "Model against bench".into()));
        out.push(Block::Paragraph(
            "Residual = model − bench for every measured value (dB; mV for the offset), per model stage and metric: the rms and the largest in size, with the bench row it comes from. Every value is in report.json under residuals.".into(),
        ));
        out.push(Block::Table(residual_table(report)));
    }
}

/// Renders the blocks as Markdown (figures as linked PNG images, SVG beside).
pub fn markdown(blocks: &[Block], figures: &[EmbeddedFigure]) -> String {
    let mut out = String::new();
    for block in blocks {
        match block {
            Block::Heading(level, text) => {
                let _ = writeln!(
                    out,
                    "{} {}\n",
                    "#".repeat(*level as usize),
                    markdown_text(text)
                );
            }
            Block::Paragraph(text) => {
                let _ = writeln!(out, "{}\n", markdown_inline(text));
            }
            Block::Caution(text) => {
                let _ = writeln!(out, "> **Caution.** {}\n", markdown_text(text));
            }
            Block::Bullets(items) => {
                for item in items {
                    let _ = writeln!(out, "- {}", markdown_inline(item));
                }
                let _ = writeln!(out);
            }
            Block::Table(table) => {
                let _ = writeln!(out, "{}", table.to_markdown());
            }
            Block::Figure(index) => {
                let figure = &figures[*index];
                let _ = writeln!(out, "### {}\n", markdown_text(&figure.title));
                let _ = writeln!(
                    out,
                    "![{}]({}.png)\n",
                    markdown_text(&figure.title),
                    figure.stem
                );
                let _ = writeln!(
                    out,
                    "{} Vector version: [{}.svg]({}.svg).\n",
                    markdown_text(&figure.caption),
                    figure.stem,
                    figure.stem
                );
            }
        }
    }
    out
}

const CSS: &str = "
:root { --ink: #1b2230; --muted: #5b6472; --rule: #dce1e8; --accent: #0e6e6a; --pass: #1d8a4e; --fail: #c4263a; }
* { box-sizing: border-box; }
body { font-family: 'DejaVu Sans', 'Segoe UI', Helvetica, Arial, sans-serif; color: var(--ink); margin: 0 auto; max-width: 1080px; padding: 32px 28px 64px; line-height: 1.45; font-size: 15px; }
h1 { font-size: 28px; border-left: 8px solid var(--accent); padding-left: 14px; margin: 0 0 18px; }
h2 { font-size: 21px; margin: 34px 0 10px; padding-bottom: 4px; border-bottom: 2px solid var(--rule); }
h3 { font-size: 17px; margin: 26px 0 8px; }
.caution { border: 1px solid #e8c5a0; background: #fdf6ee; padding: 10px 14px; border-radius: 4px; }
.verdict-met { color: var(--pass); font-weight: bold; }
.verdict-not { color: var(--fail); font-weight: bold; }
table { border-collapse: collapse; width: 100%; margin: 8px 0 16px; font-size: 13.5px; }
th, td { padding: 5px 9px; border-bottom: 1px solid var(--rule); text-align: left; vertical-align: top; }
th { background: #f3f5f8; font-weight: 600; }
td.num, th.num { text-align: right; font-variant-numeric: tabular-nums; }
td.num, td.unbroken { white-space: nowrap; }
td.fail { color: var(--fail); font-weight: bold; }
td.pass { color: var(--pass); }
figure { margin: 18px 0 28px; page-break-inside: avoid; break-inside: avoid; }
figure svg { width: 100%; height: auto; display: block; border: 1px solid var(--rule); }
figcaption { color: var(--muted); font-size: 13.5px; margin-top: 6px; }
code { font-family: 'DejaVu Sans Mono', Menlo, Consolas, monospace; font-size: 0.92em; background: #f3f5f8; padding: 0 3px; border-radius: 3px; }
a { color: var(--accent); }
@media print {
  body { max-width: none; padding: 0; font-size: 11pt; }
  h2 { break-after: avoid; page-break-after: avoid; }
  table, tr { break-inside: avoid; page-break-inside: avoid; }
  figure { page-break-before: auto; }
}
";

/// Renders the blocks as a self-contained HTML page with the figures inline as SVG.
pub fn html(report: &Report, blocks: &[Block], figures: &[EmbeddedFigure]) -> String {
    let mut out = String::new();
    let _ = writeln!(
        out,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">"
    );
    let _ = writeln!(
        out,
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
    );
    let _ = writeln!(
        out,
        "<title>{} — linearity report</title>",
        html_text(&report.plan)
    );
    let _ = writeln!(out, "<style>{CSS}</style>\n</head>\n<body>");
    for block in blocks {
        match block {
            Block::Heading(level, text) => {
                let _ = writeln!(out, "<h{level}>{}</h{level}>", html_words(text));
            }
            Block::Paragraph(text) => {
                let class = if text.starts_with("Verdict:") {
                    if report.met {
                        " class=\"verdict-met\""
                    } else {
                        " class=\"verdict-not\""
                    }
                } else {
                    ""
                };
                let _ = writeln!(out, "<p{class}>{}</p>", html_inline(text));
            }
            Block::Caution(text) => {
                let _ = writeln!(
                    out,
                    "<p class=\"caution\"><strong>Caution.</strong> {}</p>",
                    html_text(text)
                );
            }
            Block::Bullets(items) => {
                let _ = writeln!(out, "<ul>");
                for item in items {
                    let _ = writeln!(out, "<li>{}</li>", html_inline(item));
                }
                let _ = writeln!(out, "</ul>");
            }
            Block::Table(table) => {
                out.push_str(&table.to_html());
            }
            Block::Figure(index) => {
                let figure = &figures[*index];
                let _ = writeln!(out, "<figure id=\"{}\">", html_text(&figure.stem));
                let _ = writeln!(out, "<h3>{}</h3>", html_words(&figure.title));
                let svg = figure.svg.replacen(
                    "<svg ",
                    &format!(
                        "<svg role=\"img\" aria-label=\"{}\" ",
                        html_text(&figure.title)
                    ),
                    1,
                );
                let _ = writeln!(out, "{}", svg.trim());
                let _ = writeln!(
                    out,
                    "<figcaption>{} Files: <a href=\"{}.svg\">{}.svg</a>, <a href=\"{}.png\">{}.png</a>.</figcaption>",
                    html_words(&figure.caption),
                    figure.stem,
                    figure.stem,
                    figure.stem,
                    figure.stem
                );
                let _ = writeln!(out, "</figure>");
            }
        }
    }
    let _ = writeln!(out, "</body>\n</html>");
    out
}

fn celsius_words(t: f64) -> String {
    format!("{t} °C")
}

/// Each stage's circuit form, bias headroom and noise by source.
pub fn forms_table(report: &Report) -> Table {
    let mut table = Table::new([
        ("stage", false),
        ("topology", false),
        ("cell", false),
        ("tail source (V)", true),
        ("degeneration drop (V)", true),
        ("transistors (nV/√Hz)", true),
        ("resistors (nV/√Hz)", true),
        ("tail sources (nV/√Hz)", true),
        ("loads (nV/√Hz)", true),
    ]);
    let first = report
        .stages
        .first()
        .map(|s| (s.temperature_c, s.corner.clone()));
    for s in report.stages.iter().filter(|s| {
        first
            .as_ref()
            .is_some_and(|(t, c)| s.temperature_c == *t && &s.corner == c)
    }) {
        let n = &s.noise_sources;
        table.push(vec![
            s.stage.as_str().into(),
            s.topology.replace('_', " ").into(),
            s.cell.clone().unwrap_or_else(|| "—".into()).into(),
            format!("{:.3}", s.tail_source_voltage_v).into(),
            format!("{:.3}", s.degeneration_drop_v.max(0.0)).into(),
            format!("{:.3}", n.transistors_v_rthz * 1e9).into(),
            format!("{:.3}", n.resistors_v_rthz * 1e9).into(),
            format!("{:.3}", n.tail_sources_v_rthz * 1e9).into(),
            format!("{:.3}", n.loads_v_rthz * 1e9).into(),
        ]);
    }
    table
}

/// The stages at equal terms: one row per stage, HD3 and IM3 at the plan's amplitudes.
pub fn schemes_table(c: &crate::report::SchemeComparisonRecord) -> Table {
    let mut columns: Vec<(String, bool)> = vec![
        ("stage".into(), false),
        ("topology".into(), false),
        ("tail current".into(), true),
        ("R_L, R_E".into(), true),
        ("gain (dB)".into(), true),
        ("IIP3".into(), true),
        ("noise (nV/√Hz)".into(), true),
        ("tail source (V)".into(), true),
        ("drop (V)".into(), true),
    ];
    // At most four amplitudes in the table (first, last and two between); the JSON has all.
    let picks = amplitude_picks(c.amplitudes_v.len());
    for &i in &picks {
        columns.push((
            format!("HD3 @ {}", crate::units::format_si(c.amplitudes_v[i], "V")),
            true,
        ));
    }
    let two_tone = c.rows.iter().any(|r| r.im3_dbc.iter().any(Option::is_some));
    if two_tone {
        for &i in &picks {
            columns.push((
                format!("IM3 @ {}", crate::units::format_si(c.amplitudes_v[i], "V")),
                true,
            ));
        }
    }
    let mut table = Table::new(columns.iter().map(|(n, r)| (n.as_str(), *r)));
    for r in &c.rows {
        let mut row: Vec<Cell> = vec![
            r.stage.as_str().into(),
            r.topology.as_str().into(),
            crate::units::format_si(r.tail_current_a, "A").into(),
            format!(
                "{}, {}",
                crate::units::format_si(r.load_resistance_ohm, "Ω"),
                crate::units::format_si(r.emitter_resistance_ohm, "Ω")
            )
            .into(),
            format!("{:.2}", r.gain_db).into(),
            r.iip3_v
                .map(|v| crate::units::format_si(v, "V"))
                .unwrap_or_else(|| "—".into())
                .into(),
            format!("{:.3}", r.input_noise_v_rthz * 1e9).into(),
            format!("{:.3}", r.tail_source_voltage_v).into(),
            format!("{:.3}", r.degeneration_drop_v.max(0.0)).into(),
        ];
        for &i in &picks {
            row.push(fixed(r.hd3_dbc[i], 1).into());
        }
        if two_tone {
            for &i in &picks {
                row.push(fixed(r.im3_dbc[i], 1).into());
            }
        }
        table.push(row);
    }
    table
}

fn amplitude_picks(n: usize) -> Vec<usize> {
    if n <= 4 {
        return (0..n).collect();
    }
    let mut picks: Vec<usize> = (0..4).map(|k| k * (n - 1) / 3).collect();
    picks.dedup();
    picks
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A figure that rounds to zero reads "0.00", never "-0.00" (a perfectly matched pair's
    /// offset is zero, not negative); other values keep their sign and decimals.
    #[test]
    fn a_rounded_zero_has_no_sign() {
        assert_eq!(fixed(Some(-1e-9), 2), "0.00");
        assert_eq!(fixed(Some(-0.004), 2), "0.00");
        assert_eq!(fixed(Some(-0.006), 2), "-0.01");
        assert_eq!(fixed(Some(12.345), 1), "12.3");
        assert_eq!(fixed(None, 2), "—");
    }

    /// More than eight values become count, ends and spacing; a few are listed in full.
    #[test]
    fn long_sweeps_are_summarised() {
        let log: Vec<f64> = (0..13).map(|k| 1e-3 * 10f64.powf(k as f64 / 4.0)).collect();
        assert_eq!(
            sweep_summary(&log, "V", "amplitudes"),
            "13 amplitudes, 1 mV … 1 V, log-spaced"
        );
        let even: Vec<f64> = (1..=10).map(|k| 0.01 * k as f64).collect();
        assert_eq!(
            sweep_summary(&even, "V", "amplitudes"),
            "10 amplitudes, 10 mV … 100 mV, evenly spaced"
        );
        assert_eq!(
            sweep_summary(&[1e-3, 2e-3], "V", "amplitudes"),
            "1 mV, 2 mV"
        );
    }
}
