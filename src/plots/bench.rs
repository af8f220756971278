//! Bench data drawn over the model: the measured values of a stage (from the report's
//! residual records) as open markers over the model's lines, with legend entries naming the
//! lines "model" and the markers "bench".

use crate::plots::canvas::DrawResult;
use crate::plots::key::{open_marker, Key, Swatch};
use crate::plots::style::*;
use crate::report::{Report, ResidualRecord};
use plotters::prelude::*;

/// One measured value to draw.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct BenchMark {
    /// Metric (`hd3`, `gain` …).
    pub metric: String,
    /// Temperature, °C.
    pub temperature_c: f64,
    /// Frequency, Hz.
    pub frequency_hz: f64,
    /// Peak differential input per tone, V.
    pub amplitude_v: f64,
    /// The measured value (dBc, dB or V).
    pub bench: f64,
    /// The bench file and row it comes from (values of one row belong together).
    pub row: (String, u64),
    /// Whether it is compared with the plan's own stage (not a fitted twin).
    pub nominal: bool,
}

/// Whether two drive conditions are the same (bench files round their numbers).
pub(crate) fn same(a: f64, b: f64) -> bool {
    (a - b).abs() <= 1e-3 * a.abs().max(b.abs())
}

/// The measured values compared with `stage` (the plan stage, or its fitted twin; `None`:
/// every plan stage's), once each.
pub(crate) fn bench_marks(report: &Report, stage: Option<&str>) -> Vec<BenchMark> {
    report
        .residuals
        .iter()
        .filter(|r: &&ResidualRecord| match stage {
            Some(stage) => r.stage == stage,
            None => r.stage == r.measured_stage,
        })
        .map(|r| BenchMark {
            metric: r.metric.clone(),
            temperature_c: r.temperature_c,
            frequency_hz: r.frequency_hz,
            amplitude_v: r.amplitude_v,
            bench: r.bench,
            row: (r.file.clone(), r.row),
            nominal: r.stage == r.measured_stage,
        })
        .collect()
}

/// Draws bench values as open markers (the shape names the temperature, the colour the
/// metric), each on a white ring so it stands off the model's line beneath.
pub(crate) fn draw_bench<
    'a,
    DB: DrawingBackend + 'a,
    X: Ranged<ValueType = f64>,
    Y: Ranged<ValueType = f64>,
>(
    chart: &mut ChartContext<'a, DB, Cartesian2d<X, Y>>,
    points: &[(f64, f64)],
    y_range: (f64, f64),
    temperature_index: usize,
    colour: RGBColor,
) -> DrawResult {
    let x_range = chart.x_range();
    chart.draw_series(
        points
            .iter()
            .filter(|(x, y)| {
                *y >= y_range.0 && *y <= y_range.1 && *x >= x_range.start && *x <= x_range.end
            })
            .map(move |&coord| {
                EmptyElement::at(coord)
                    + Circle::new((0, 0), 11, PAPER.mix(0.7).filled())
                    + open_marker(temperature_index, (0, 0), colour)
            }),
    )?;
    Ok(())
}

/// Key entries for the overlay: "model" (a line) and "bench" (an open marker; with several
/// temperatures, one entry per temperature's shape).
pub(crate) fn bench_key(key: &mut Key, temps: &[f64]) {
    key.entry(Swatch::line(INK, 3, None), "model (lines)");
    if temps.len() > 1 {
        for (i, t) in temps.iter().enumerate() {
            key.entry(
                Swatch::Open {
                    index: i,
                    colour: INK,
                },
                format!("bench, {}", celsius(*t)),
            );
        }
    } else {
        key.entry(
            Swatch::Open {
                index: 0,
                colour: INK,
            },
            "bench",
        );
    }
}
