//! Judging a measured figure against a budget line.
//!
//! Margin convention (dB, positive = pass): `limit − value` for a `max` line in dB,
//! `value − limit` for a `min` line in dB, `20·log10(value/limit)` for a `min` line in volts,
//! `20·log10(limit/value)` for a `max` line in volts; for the collector-base margin, whose value
//! is negative in saturation, `value − limit` in volts.

use crate::model::budget::{BudgetLine, Limit};

/// Margin (dB, positive = pass) and verdict of a measured value.
///
/// A value below the analysis floor (`None`) passes a `max` line in dB with its margin
/// measured from the floor, so the margin shown is a lower bound; an unbounded intercept or
/// compression point (`None`) passes a `min` line with no finite margin.
pub fn judge(line: &BudgetLine, value: Option<f64>, floor_dbc: f64) -> (Option<f64>, bool) {
    if line.metric.margin_in_volts() {
        let margin = value.map(|v| match line.limit {
            Limit::Min(limit) => v - limit,
            Limit::Max(limit) => limit - v,
        });
        return (margin, margin.is_some_and(|m| m >= 0.0));
    }
    let margin = match (line.limit, value, line.metric.is_decibel()) {
        (Limit::Max(limit), Some(v), true) => Some(limit - v),
        (Limit::Min(limit), Some(v), true) => Some(v - limit),
        (Limit::Max(limit), Some(v), false) => Some(20.0 * (limit / v).log10()),
        (Limit::Min(limit), Some(v), false) => Some(20.0 * (v / limit).log10()),
        (Limit::Max(limit), None, true) => Some(limit - floor_dbc),
        (Limit::Min(_), None, true) => None,
        (Limit::Min(_), None, false) => None,
        (Limit::Max(_), None, false) => None,
    };
    let pass = match (margin, line.limit, value) {
        (Some(m), _, _) => m >= 0.0,
        // An unbounded intercept passes any minimum; a missing dB figure fails a minimum.
        (None, Limit::Min(_), None) => !line.metric.is_decibel(),
        (None, _, _) => false,
    };
    (margin, pass)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::budget::Metric;

    fn line(metric: Metric, limit: Limit) -> BudgetLine {
        BudgetLine::new(metric, limit)
    }

    #[test]
    fn margins_follow_the_contract() {
        let (m, pass) = judge(
            &line(Metric::Harmonic(3), Limit::Max(-60.0)),
            Some(-36.6),
            -200.0,
        );
        assert!((m.unwrap() + 23.4).abs() < 1e-12 && !pass);
        let (m, pass) = judge(&line(Metric::Gain, Limit::Min(6.0)), Some(10.0), -200.0);
        assert!((m.unwrap() - 4.0).abs() < 1e-12 && pass);
        let (m, pass) = judge(&line(Metric::Iip3, Limit::Min(0.3)), Some(0.6), -200.0);
        assert!((m.unwrap() - 20.0 * 2f64.log10()).abs() < 1e-12 && pass);
        let (m, pass) = judge(&line(Metric::Harmonic(2), Limit::Max(-80.0)), None, -200.0);
        assert!((m.unwrap() - 120.0).abs() < 1e-12 && pass);
    }
}
