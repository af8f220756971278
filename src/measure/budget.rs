//! Judging a measured figure against a budget line.
//!
//! Margin convention (dB, positive = pass): `limit − value` for a `max` line in dB,
//! `value − limit` for a `min` line in dB, `20·log10(value/limit)` for a `min` line in volts,
//! `20·log10(limit/value)` for a `max` line in volts. A yield line's margin is the pass
//! fraction minus the limit (a fraction, not dB). For the collector-base margin, whose value is
//! negative in saturation, the margin is `value − limit` in volts.

use crate::model::budget::{BudgetLine, Limit, Metric};

/// The verdict of one measured value against one line.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Judgement {
    /// Margin, positive when the line passes (dB; a fraction for yield lines; volts for the
    /// collector-base margin). `None` when
    /// there is no finite margin (an unbounded intercept, a missing figure).
    pub margin: Option<f64>,
    /// Whether the line passes.
    pub pass: bool,
    /// The value is below the analysis floor: `margin` is a lower bound (the limit's distance
    /// to the floor), not a margin to a measured figure.
    pub margin_at_least: bool,
}

/// Margin, verdict and whether the margin is only a lower bound.
///
/// A value below the analysis floor (`None`) passes a `max` line in dB; its margin is at
/// least `limit − floor` and is marked so. An unbounded intercept or compression point
/// (`None`) passes a `min` line with no finite margin.
pub fn judge(line: &BudgetLine, value: Option<f64>, floor_dbc: f64) -> Judgement {
    if line.metric.margin_in_volts() {
        let margin = value.map(|v| match line.limit {
            Limit::Min(limit) => v - limit,
            Limit::Max(limit) => limit - v,
        });
        return Judgement {
            margin,
            pass: margin.is_some_and(|m| m >= 0.0),
            margin_at_least: false,
        };
    }
    let mut margin_at_least = false;
    let margin = match (line.limit, value, line.metric.is_decibel()) {
        (Limit::Min(limit), Some(v), _) if line.metric == Metric::Yield => Some(v - limit),
        (Limit::Max(limit), Some(v), _) if line.metric == Metric::Yield => Some(limit - v),
        (Limit::Max(limit), Some(v), true) => Some(limit - v),
        (Limit::Min(limit), Some(v), true) => Some(v - limit),
        (Limit::Max(limit), Some(v), false) => Some(20.0 * (limit / v).log10()),
        (Limit::Min(limit), Some(v), false) => Some(20.0 * (v / limit).log10()),
        (Limit::Max(limit), None, true) => {
            margin_at_least = true;
            Some(limit - floor_dbc)
        }
        (Limit::Min(_), None, _) | (Limit::Max(_), None, false) => None,
    };
    let pass = match (margin, line.limit, value) {
        (Some(m), _, _) => m >= 0.0,
        // An unbounded intercept passes any minimum; a missing dB figure (or a yield that
        // could not be estimated) fails.
        (None, Limit::Min(_), None) => !line.metric.is_decibel() && !line.metric.is_population(),
        (None, _, _) => false,
    };
    Judgement {
        margin,
        pass,
        margin_at_least,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn line(metric: Metric, limit: Limit) -> BudgetLine {
        BudgetLine::new(metric, limit)
    }

    #[test]
    fn margins_follow_the_contract() {
        let j = judge(
            &line(Metric::Harmonic(3), Limit::Max(-60.0)),
            Some(-36.6),
            -200.0,
        );
        assert!((j.margin.unwrap() + 23.4).abs() < 1e-12 && !j.pass && !j.margin_at_least);
        let j = judge(&line(Metric::Gain, Limit::Min(6.0)), Some(10.0), -200.0);
        assert!((j.margin.unwrap() - 4.0).abs() < 1e-12 && j.pass);
        let j = judge(&line(Metric::Iip3, Limit::Min(0.3)), Some(0.6), -200.0);
        assert!((j.margin.unwrap() - 20.0 * 2f64.log10()).abs() < 1e-12 && j.pass);
    }

    /// Below the floor the margin is only a lower bound, and says so.
    #[test]
    fn a_value_below_the_floor_gives_a_lower_bound_marked_as_such() {
        let j = judge(&line(Metric::Harmonic(2), Limit::Max(-80.0)), None, -200.0);
        assert!((j.margin.unwrap() - 120.0).abs() < 1e-12 && j.pass && j.margin_at_least);
    }

    #[test]
    fn a_yield_line_is_judged_on_the_fraction_and_fails_when_not_estimated() {
        let j = judge(&line(Metric::Yield, Limit::Min(0.99)), Some(0.49), -200.0);
        assert!((j.margin.unwrap() + 0.5).abs() < 1e-12 && !j.pass);
        let j = judge(&line(Metric::Yield, Limit::Min(0.99)), Some(0.995), -200.0);
        assert!(j.pass);
        let j = judge(&line(Metric::Yield, Limit::Min(0.99)), None, -200.0);
        assert!(!j.pass && j.margin.is_none());
    }
}
