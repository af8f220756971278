//! The tables of the correlation with bench data, shared by `summary.md`, `report.md` and
//! `report.html`: the fitted parameters with their standard errors, the correlation matrix
//! of each fit, and the residuals (model − bench) per model stage and metric, worst and rms.

use super::table::{Cell, Table};
use super::{FitRecord, FitSummaryRecord, Report};
use crate::units::format_si;

/// A fitted quantity in words: a percentage for mismatch fractions, SI-prefixed otherwise.
fn quantity(record: &FitRecord, value: f64) -> String {
    if record.parameter.starts_with("mismatch.") {
        format!("{:.4} %", 100.0 * value)
    } else if record.unit.is_empty() {
        format!("{value:.4}")
    } else {
        format_si(value, &record.unit)
    }
}

/// One row per fitted parameter: plan value, fitted value, standard error, bounds.
pub fn fit_table(report: &Report) -> Table {
    let mut table = Table::new([
        ("stage", false),
        ("parameter", false),
        ("start", true),
        ("fitted", true),
        ("std. error", true),
        ("bounds", false),
        ("note", false),
    ]);
    for record in &report.fit {
        let mut notes = Vec::new();
        if record.at_bound {
            notes.push("at a bound");
        }
        if record.standard_error.is_none() {
            notes.push("no effect");
        } else if !record.constrained {
            notes.push("hardly constrained");
        }
        table.push(vec![
            record.stage.as_str().into(),
            record.parameter.as_str().into(),
            quantity(record, record.start).into(),
            quantity(record, record.value).into(),
            record
                .standard_error
                .map_or_else(|| "—".into(), |se| quantity(record, se))
                .into(),
            format!(
                "{} to {}",
                quantity(record, record.from),
                quantity(record, record.to)
            )
            .into(),
            if notes.is_empty() {
                Cell::from("")
            } else {
                Cell::fail(notes.join(", "))
            },
        ]);
    }
    table
}

/// How each fit went: values fitted, rms before and after, residual scale, convergence.
pub fn fit_quality_table(report: &Report) -> Table {
    let mut table = Table::new([
        ("stage", false),
        ("fitted stage", false),
        ("metrics", false),
        ("values", true),
        ("weighted rms before", true),
        ("weighted rms after", true),
        ("evaluations", true),
        ("optimiser", false),
    ]);
    for s in &report.fit_summary {
        table.push(vec![
            s.stage.as_str().into(),
            s.fitted_stage.as_str().into(),
            s.metrics.join(", ").into(),
            s.residual_count.to_string().into(),
            format!("{:.3}", s.rms_before).into(),
            format!("{:.3}", s.rms_after).into(),
            s.evaluations.to_string().into(),
            Cell::verdict(s.converged, &s.termination, &s.termination),
        ]);
    }
    table
}

/// The correlation matrix of one fit.
pub fn correlation_table(summary: &FitSummaryRecord) -> Table {
    let mut columns: Vec<(&str, bool)> = vec![("", false)];
    columns.extend(summary.parameters.iter().map(|p| (p.as_str(), true)));
    let mut table = Table::new(columns);
    for (name, row) in summary.parameters.iter().zip(&summary.correlation) {
        let mut cells: Vec<Cell> = vec![name.as_str().into()];
        cells.extend(
            row.iter()
                .map(|c| c.map_or_else(|| "—".into(), |c| format!("{c:+.3}")).into()),
        );
        table.push(cells);
    }
    table
}

/// Model − bench per model stage and metric: values compared, rms, worst (with its row).
pub fn residual_table(report: &Report) -> Table {
    let mut table = Table::new([
        ("model stage", false),
        ("metric", false),
        ("fitted", false),
        ("values", true),
        ("rms", true),
        ("worst", true),
        ("worst at row", true),
        ("unit", false),
    ]);
    for s in &report.residual_summary {
        let number = |v: Option<f64>| v.map_or_else(|| "—".into(), |v| format!("{v:+.3}"));
        let mut values = s.points.to_string();
        if s.below_floor > 0 {
            values.push_str(&format!(" ({} below the floor)", s.below_floor));
        }
        table.push(vec![
            s.stage.as_str().into(),
            s.metric.as_str().into(),
            if s.in_fit { "yes" } else { "no" }.into(),
            values.into(),
            s.rms
                .map_or_else(|| "—".into(), |v| format!("{v:.3}"))
                .into(),
            number(s.worst).into(),
            s.worst_row
                .map_or_else(|| "—".into(), |r| r.to_string())
                .into(),
            s.unit.as_str().into(),
        ]);
    }
    table
}
