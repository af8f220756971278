//! Axes prepared before drawing: the range and the values that carry a labelled tick.
//!
//! Every axis ends on a tick, so a reader sees the value at both ends of every range, and a
//! log axis of plan amplitudes or frequencies labels the values the plan drove (when there
//! are few) rather than round numbers between them.

use super::style::si_exact;
use plotters::coord::ranged1d::{DefaultFormatting, KeyPointHint, Ranged};

/// One axis: its range, its labelled ticks (both ends included) and its unlabelled minor
/// grid lines.
#[derive(Debug, Clone, PartialEq)]
pub struct Axis {
    /// Lower end of the range.
    pub low: f64,
    /// Upper end of the range.
    pub high: f64,
    /// Values that carry a labelled tick, ascending; the first is `low`, the last `high`.
    pub ticks: Vec<f64>,
    /// Values of unlabelled minor grid lines.
    pub minor: Vec<f64>,
    /// Whether the axis is logarithmic.
    pub log: bool,
    /// Unit of the tick labels (then SI-prefixed); empty for plain numbers.
    pub unit: String,
    /// Decimals of a linear axis's tick labels.
    pub decimals: usize,
}

/// Most distinct data values labelled one by one on a log axis.
const MOST_DATA_TICKS: usize = 8;

/// The smallest of 1, 2, 2.5, 5 and 10 times a power of ten at least `value`.
pub fn nice_step(value: f64) -> f64 {
    if value <= 0.0 || !value.is_finite() {
        return 1.0;
    }
    let decade = 10f64.powf(value.log10().floor());
    for step in [1.0, 2.0, 2.5, 5.0, 10.0] {
        if step * decade >= value * (1.0 - 1e-12) {
            return step * decade;
        }
    }
    10.0 * decade
}

fn decimals_of(step: f64) -> usize {
    let mut decimals = 0;
    while decimals < 6
        && ((step * 10f64.powi(decimals as i32)).round() - step * 10f64.powi(decimals as i32)).abs()
            > 1e-9
    {
        decimals += 1;
    }
    decimals
}

impl Axis {
    /// A linear axis from `low` to `high`, both rounded outwards to multiples of `step`,
    /// with a tick at every multiple.
    pub fn linear_step(low: f64, high: f64, step: f64) -> Axis {
        let step = if step > 0.0 && step.is_finite() {
            step
        } else {
            1.0
        };
        let (low, high) = if high > low {
            (low, high)
        } else {
            (low - step, low + step)
        };
        // A bound within rounding of a multiple is that multiple, not one step beyond it.
        let first = (low / step + 1e-9).floor() as i64;
        let mut last = (high / step - 1e-9).ceil() as i64;
        if last <= first {
            last = first + 1;
        }
        let ticks: Vec<f64> = (first..=last)
            .map(|k| snap(k as f64 * step, step))
            .collect();
        let minor = ticks.windows(2).map(|w| 0.5 * (w[0] + w[1])).collect();
        Axis {
            low: ticks[0],
            high: ticks[ticks.len() - 1],
            ticks,
            minor,
            log: false,
            unit: String::new(),
            decimals: decimals_of(step),
        }
    }

    /// A linear axis covering `low..high` with about `intervals` tick intervals of a nice step.
    pub fn linear(low: f64, high: f64, intervals: usize) -> Axis {
        let span = (high - low).abs().max(f64::MIN_POSITIVE);
        Axis::linear_step(low, high, nice_step(span / intervals.max(1) as f64))
    }

    /// A linear axis from `low` to `high` exactly, ticks at the multiples of a nice step inside
    /// it and at both ends (for a range fixed by the data, such as a transfer curve's span).
    pub fn linear_exact(low: f64, high: f64, intervals: usize) -> Axis {
        let step = nice_step((high - low).abs() / intervals.max(1) as f64);
        let mut ticks = vec![low];
        let first = (low / step + 1e-9).ceil() as i64;
        let last = (high / step - 1e-9).floor() as i64;
        for k in first..=last {
            let v = snap(k as f64 * step, step);
            // A multiple within a third of a step of an end would crowd its label.
            if (v - low).abs() > step / 3.0 && (high - v).abs() > step / 3.0 {
                ticks.push(v);
            }
        }
        ticks.push(high);
        Axis {
            low,
            high,
            minor: ticks.windows(2).map(|w| 0.5 * (w[0] + w[1])).collect(),
            ticks,
            log: false,
            unit: String::new(),
            decimals: decimals_of(step).max(decimals_of(high)),
        }
    }

    /// A log axis around the positive values `data`, in `unit`: the ends are the nearest
    /// 1-2-5 values outside the data (a margin of at least 15 %), the ticks are the data values
    /// themselves when there are few of them, otherwise the 1-2-5 values (decades on wide
    /// spans) inside the range.
    pub fn log(data: &[f64], unit: &str) -> Axis {
        let mut values: Vec<f64> = data
            .iter()
            .copied()
            .filter(|v| *v > 0.0 && v.is_finite())
            .collect();
        values.sort_by(f64::total_cmp);
        values.dedup_by(|a, b| (*a / *b - 1.0).abs() < 1e-9);
        let (least, most) = match (values.first(), values.last()) {
            (Some(l), Some(m)) => (*l, *m),
            _ => (1.0, 10.0),
        };
        let decades = (most / least).log10();
        let mantissas: &[f64] = if decades > 3.5 {
            &[1.0]
        } else {
            &[1.0, 2.0, 5.0]
        };
        let low = round_down(least / 1.15, mantissas);
        let high = round_up(most * 1.15, mantissas);
        let grid = log_grid(low, high, mantissas);
        let span = (high / low).log10();
        let inner: Vec<f64> = if values.len() <= MOST_DATA_TICKS {
            // The data values, each far enough from the ends and from each other to keep its
            // label clear (a twelfth of the axis, or a little less on a short axis).
            let gap = (span / 12.0).min(0.12);
            let mut kept: Vec<f64> = Vec::new();
            for v in &values {
                let clear_of = |t: f64| (v / t).log10().abs() >= gap;
                if clear_of(low) && clear_of(high) && kept.iter().all(|k| clear_of(*k)) {
                    kept.push(*v);
                }
            }
            kept
        } else {
            grid.iter()
                .copied()
                .filter(|v| *v > low * 1.0001 && *v < high / 1.0001)
                .collect()
        };
        let mut ticks = vec![low];
        ticks.extend(inner);
        ticks.push(high);
        let minor = log_grid(low, high, &[1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0, 9.0])
            .into_iter()
            .filter(|m| ticks.iter().all(|t| (m / t - 1.0).abs() > 1e-9))
            .collect();
        Axis {
            low,
            high,
            ticks,
            minor,
            log: true,
            unit: unit.to_owned(),
            decimals: 0,
        }
    }

    /// The same log axis for a narrow panel (half a figure's width or less): at most
    /// `most` labelled ticks — the ends and the decades between them, thinned to every other
    /// decade when still too many — so no two labels run into each other.
    #[must_use]
    pub fn narrow(mut self, most: usize) -> Axis {
        if !self.log || self.ticks.len() <= most {
            return self;
        }
        let (low, high) = (self.low, self.high);
        let span = (high / low).log10();
        // Labels need about a sixth of a narrow panel each.
        let gap = span / 6.0;
        let clear = |t: f64, of: f64| (t / of).log10().abs() >= gap;
        let decades: Vec<f64> = self
            .ticks
            .iter()
            .chain(self.minor.iter())
            .copied()
            .filter(|t| (t.log10() - t.log10().round()).abs() < 1e-9)
            .filter(|t| clear(*t, low) && clear(*t, high))
            .collect();
        let mut inner: Vec<f64> = Vec::new();
        for d in decades {
            if inner.iter().all(|k| clear(d, *k)) {
                inner.push(d);
            }
        }
        inner.sort_by(f64::total_cmp);
        let mut ticks = vec![low];
        ticks.extend(inner);
        ticks.push(high);
        let moved: Vec<f64> = self
            .ticks
            .iter()
            .copied()
            .filter(|t| ticks.iter().all(|k| (t / k - 1.0).abs() > 1e-9))
            .collect();
        self.minor.extend(moved);
        self.minor.sort_by(f64::total_cmp);
        self.ticks = ticks;
        self
    }

    /// The same axis with SI-prefixed tick labels in `unit`.
    #[must_use]
    pub fn in_unit(mut self, unit: &str) -> Axis {
        self.unit = unit.to_owned();
        self
    }

    /// The label of a tick.
    pub fn label(&self, value: f64) -> String {
        if self.log {
            si_exact(value, &self.unit)
        } else if !self.unit.is_empty() {
            super::style::si_short(value, &self.unit)
        } else {
            super::style::num(value, self.decimals)
        }
    }

    /// The label of every tick, in order.
    pub fn labels(&self) -> Vec<String> {
        self.ticks.iter().map(|t| self.label(*t)).collect()
    }

    /// The range as plotters takes it, with the ticks as its key points.
    pub fn linear_range(&self) -> Ticked<plotters::coord::types::RangedCoordf64> {
        Ticked {
            inner: (self.low..self.high).into(),
            ticks: self.ticks.clone(),
            minor: self.minor.clone(),
        }
    }

    /// The log range as plotters takes it, with the ticks as its key points.
    pub fn log_range(&self) -> Ticked<plotters::coord::combinators::LogCoord<f64>> {
        use plotters::coord::combinators::IntoLogRange;
        Ticked {
            inner: (self.low..self.high).log_scale().into(),
            ticks: self.ticks.clone(),
            minor: self.minor.clone(),
        }
    }
}

/// A plotters coordinate whose labelled key points are exactly an [`Axis`]'s ticks (and its
/// light grid lines the minor values).
pub struct Ticked<R: Ranged<ValueType = f64>> {
    inner: R,
    ticks: Vec<f64>,
    minor: Vec<f64>,
}

impl<R: Ranged<ValueType = f64>> Ranged for Ticked<R> {
    type ValueType = f64;
    type FormatOption = DefaultFormatting;

    fn range(&self) -> std::ops::Range<f64> {
        self.inner.range()
    }

    fn map(&self, value: &f64, limit: (i32, i32)) -> i32 {
        self.inner.map(value, limit)
    }

    fn key_points<H: KeyPointHint>(&self, hint: H) -> Vec<f64> {
        if hint.weight().allow_light_points() {
            self.minor.clone()
        } else {
            self.ticks.clone()
        }
    }

    fn axis_pixel_range(&self, limit: (i32, i32)) -> std::ops::Range<i32> {
        self.inner.axis_pixel_range(limit)
    }
}

/// Removes the rounding dust of `k·step` (so 0.30000000000000004 prints, and compares, as 0.3):
/// rounds to the step's own decimals.
fn snap(value: f64, step: f64) -> f64 {
    let scale = 10f64.powi(decimals_of(step) as i32);
    let snapped = (value * scale).round() / scale;
    if snapped == 0.0 {
        0.0
    } else {
        snapped
    }
}

/// Every `mantissa × 10^k` from `low` to `high`.
fn log_grid(low: f64, high: f64, mantissas: &[f64]) -> Vec<f64> {
    let mut out = Vec::new();
    let mut decade = 10f64.powf(low.log10().floor());
    while decade <= high * 1.0001 {
        for m in mantissas {
            let v = m * decade;
            if v >= low / 1.0001 && v <= high * 1.0001 {
                out.push(v);
            }
        }
        decade *= 10.0;
    }
    out
}

fn round_down(value: f64, mantissas: &[f64]) -> f64 {
    let decade = 10f64.powf(value.log10().floor());
    mantissas
        .iter()
        .rev()
        .map(|m| m * decade)
        .find(|v| *v <= value * (1.0 + 1e-12))
        .unwrap_or(decade)
}

fn round_up(value: f64, mantissas: &[f64]) -> f64 {
    let decade = 10f64.powf(value.log10().floor());
    mantissas
        .iter()
        .map(|m| m * decade)
        .chain([10.0 * decade])
        .find(|v| *v >= value * (1.0 - 1e-12))
        .unwrap_or(10.0 * decade)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_linear_axis_ends_on_labelled_ticks() {
        let axis = Axis::linear_step(-63.0, -21.0, 10.0);
        assert_eq!((axis.low, axis.high), (-70.0, -20.0));
        assert_eq!(axis.ticks, vec![-70.0, -60.0, -50.0, -40.0, -30.0, -20.0]);
        assert_eq!(axis.labels().first().unwrap(), "\u{2212}70");
        let axis = Axis::linear(0.0, 0.93, 5);
        assert_eq!(axis.high, 1.0);
        assert_eq!(axis.labels().last().unwrap(), "1.0");
        // A bound on a multiple of the step is that multiple, not a step beyond it.
        assert_eq!(Axis::linear_step(-200.0, -40.0, 20.0).low, -200.0);
    }

    /// The strain logger's two amplitudes (2 mV and 20 mV): both are labelled, and so are the
    /// two ends (the lowest amplitude's label was missing before).
    #[test]
    fn a_log_axis_of_few_amplitudes_labels_each_and_both_ends() {
        let axis = Axis::log(&[0.002, 0.02, 0.002], "V");
        assert_eq!(axis.labels(), vec!["1 mV", "2 mV", "20 mV", "50 mV"]);
        let axis = Axis::log(&[1e-3, 3e-3, 10e-3, 30e-3, 100e-3], "V");
        assert_eq!(axis.ticks.first(), Some(&0.0005));
        assert_eq!(axis.ticks.last(), Some(&0.2));
        assert!(axis.labels().contains(&"3 mV".to_owned()));
    }

    #[test]
    fn a_dense_log_sweep_is_labelled_at_one_two_five() {
        let sweep: Vec<f64> = (0..100)
            .map(|i| 1e-3 * 300f64.powf(i as f64 / 99.0))
            .collect();
        let axis = Axis::log(&sweep, "V");
        assert_eq!(axis.low, 0.0005);
        assert_eq!(axis.high, 0.5);
        assert!(axis.labels().contains(&"10 mV".to_owned()));
        assert!(axis.ticks.windows(2).all(|w| w[0] < w[1]));
    }

    #[test]
    fn an_exact_axis_keeps_the_data_span_and_labels_its_ends() {
        let axis = Axis::linear_exact(-185.0, 185.0, 8);
        assert_eq!(axis.ticks.first(), Some(&-185.0));
        assert_eq!(axis.ticks.last(), Some(&185.0));
        assert!(axis.ticks.contains(&0.0));
    }
}
