//! Harmonics versus amplitude: HD2, HD3, HD5 and THD in dBc against the input amplitude on a
//! log axis, every distortion budget line drawn as a limit mask, and the budget verdicts as
//! pass/fail markers.

use super::bench::{bench_legend, bench_marks, draw_bench, same, BenchMark};
use super::style::*;
use super::{DrawResult, Drawing, PlotKind};
use crate::report::{BudgetRecord, PointRecord, Report};
use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

/// One plotted metric: its key and how to read it from a point.
#[derive(Debug, Clone)]
pub(crate) struct Series {
    /// `hd2`, `thd`, `im3` …
    pub metric: String,
    /// Legend label.
    pub label: String,
    /// Which field of a point holds it.
    field: Field,
}

/// The point field a series reads.
#[derive(Debug, Clone, Copy)]
enum Field {
    Thd,
    Im3,
    Harmonic(usize),
    Other,
}

impl Series {
    /// The series of a metric key (`hd3`, `thd`, `im3` …).
    pub fn new(metric: String) -> Self {
        let field = match metric.as_str() {
            "thd" => Field::Thd,
            "im3" => Field::Im3,
            other => other
                .strip_prefix("hd")
                .and_then(|n| n.parse().ok())
                .map_or(Field::Other, Field::Harmonic),
        };
        Series {
            label: metric.to_uppercase(),
            metric,
            field,
        }
    }

    /// The metric's value at a point, dBc.
    pub fn value(&self, point: &PointRecord) -> Option<f64> {
        match self.field {
            Field::Thd => point.thd_dbc,
            Field::Im3 => point.im3_dbc.flatten(),
            Field::Harmonic(n) => point.harmonic(n),
            Field::Other => None,
        }
    }
}

/// Whether a budget line is drawn against amplitude in dBc.
pub(crate) fn is_amplitude_line(line: &BudgetRecord) -> bool {
    line.at_v.is_some() && line.unit == "dBc"
}

/// The harmonics figure of one stage.
pub struct HarmonicsPlot {
    stage: String,
    slug: String,
    frequency_hz: f64,
    temps: Vec<f64>,
    points: Vec<Row>,
    budget: Vec<BudgetRecord>,
    series: Vec<Series>,
    floor_dbc: f64,
    /// Bench values of the series' metrics at this frequency and the figure's temperatures.
    bench: Vec<BenchMark>,
}

/// What the figure reads of one drive point (a dense sweep has thousands: copying whole
/// records cost more than drawing them).
struct Row {
    temperature_c: f64,
    amplitude_v: f64,
    /// The value of each series, in series order.
    values: Vec<Option<f64>>,
}

impl HarmonicsPlot {
    /// The figure, if the stage has at least two drive points at its first frequency.
    pub fn new(report: &Report, stage: &str, slug: &str) -> Option<Self> {
        let frequency_hz = report
            .points
            .iter()
            .find(|p| p.stage == stage)?
            .frequency_hz;
        let budget: Vec<BudgetRecord> = report
            .budget
            .iter()
            .filter(|b| b.stage == stage && is_amplitude_line(b) && b.frequency_hz == frequency_hz)
            .cloned()
            .collect();
        let mut metrics: Vec<String> = ["hd2", "hd3", "hd5", "thd"].map(String::from).to_vec();
        for line in &budget {
            if !metrics.contains(&line.metric) {
                metrics.push(line.metric.clone());
            }
        }
        let series: Vec<Series> = metrics.into_iter().map(Series::new).collect();
        let points: Vec<Row> = report
            .points
            .iter()
            .filter(|p| p.stage == stage && p.frequency_hz == frequency_hz)
            .map(|p| Row {
                temperature_c: p.temperature_c,
                amplitude_v: p.amplitude_v,
                values: series.iter().map(|s| s.value(p)).collect(),
            })
            .collect();
        let temps: Vec<f64> = temperatures(report)
            .into_iter()
            .filter(|t| points.iter().any(|p| p.temperature_c == *t))
            .collect();
        let enough = temps
            .iter()
            .any(|t| points.iter().filter(|p| p.temperature_c == *t).count() >= 2);
        let bench = bench_marks(report, Some(stage))
            .into_iter()
            .filter(|b| {
                same(b.frequency_hz, frequency_hz)
                    && temps.contains(&b.temperature_c)
                    && series.iter().any(|s| s.metric == b.metric)
            })
            .collect();
        enough.then(|| HarmonicsPlot {
            bench,
            stage: stage.to_owned(),
            slug: slug.to_owned(),
            frequency_hz,
            temps,
            points,
            budget,
            series,
            floor_dbc: report.analysis.analysis_floor_dbc,
        })
    }
}

impl Drawing for HarmonicsPlot {
    fn kind(&self) -> PlotKind {
        PlotKind::Harmonics
    }
    fn slug(&self) -> Option<&str> {
        Some(&self.slug)
    }
    fn title(&self) -> String {
        format!("Harmonic distortion vs amplitude · {}", self.stage)
    }
    fn caption(&self) -> String {
        format!(
            "HDn and THD of the differential output of “{}” in dBc versus peak differential input at {}; shaded boxes are the budget's forbidden regions (a line applies up to its amplitude), round green markers pass, red crosses fail.{}",
            self.stage,
            si(self.frequency_hz, "Hz"),
            if self.bench.is_empty() {
                ""
            } else {
                " Open markers are bench measurements, drawn over the model's lines in the metric's colour."
            }
        )
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> DrawResult {
        let missing: Vec<String> = self
            .series
            .iter()
            .enumerate()
            .filter(|(k, _)| self.points.iter().all(|p| p.values[*k].is_none()))
            .map(|(_, s)| s.label.clone())
            .collect();
        let verdict = if self.budget.is_empty() {
            "no distortion budget lines".to_owned()
        } else {
            let failed = self.budget.iter().filter(|b| !b.pass).count();
            format!(
                "{} of {} budget checks pass",
                self.budget.len() - failed,
                self.budget.len()
            )
        };
        let mut subtitle = format!("f = {} · {}", si(self.frequency_hz, "Hz"), verdict);
        if !missing.is_empty() {
            subtitle.push_str(&format!(
                " · {} below the analysis floor ({} dBc) at every point",
                missing.join(", "),
                num(self.floor_dbc, 0)
            ));
        }
        let body = frame(root, &self.title(), &subtitle)?;

        let values = self
            .points
            .iter()
            .flat_map(|p| p.values.iter().flatten().copied())
            .chain(
                self.budget
                    .iter()
                    .flat_map(|b| [Some(b.limit), b.value])
                    .flatten(),
            )
            .chain(self.bench.iter().map(|b| b.bench));
        let (low, high) = values.fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), v| {
            (lo.min(v), hi.max(v))
        });
        if !low.is_finite() {
            return Ok(());
        }
        let (y_low, y_high) = db_span(
            (low - 8.0).max(self.floor_dbc),
            (high + 12.0).min(20.0).max(low + 20.0),
            20.0,
        );
        let amplitudes = self
            .points
            .iter()
            .map(|p| p.amplitude_v)
            .chain(self.budget.iter().filter_map(|b| b.at_v))
            .chain(self.bench.iter().map(|b| b.amplitude_v));
        let (a_low, a_high) = amplitudes.fold((f64::INFINITY, 0.0f64), |(lo, hi), a| {
            (lo.min(a), hi.max(a))
        });
        let (x_low, x_high) = log_span(a_low, a_high, 1.5);

        let mut chart = house_chart(&body, 48, 96)
            .build_cartesian_2d((x_low..x_high).log_scale(), y_low..y_high)?;
        mesh_style(&mut chart.configure_mesh())
            .x_desc("peak differential input per tone (log)")
            .y_desc("distortion (dBc)")
            .x_label_formatter(&|v| log_tick(*v, "V"))
            .y_label_formatter(&|v| num(*v, 0))
            .draw()?;

        // Limit masks: a `max` line forbids the region above its limit for every amplitude up
        // to its own; a `min` line forbids the region below.
        let mut drawn: Vec<(String, u64, u64, String)> = Vec::new();
        let mut mask_labels: Vec<(String, (i32, i32), RGBColor, bool)> = Vec::new();
        for line in &self.budget {
            let at = line.at_v.unwrap_or(x_high);
            let key = (
                line.metric.clone(),
                at.to_bits(),
                line.limit.to_bits(),
                line.kind.clone(),
            );
            if drawn.contains(&key) {
                continue;
            }
            drawn.push(key);
            let colour = metric_colour(&line.metric);
            let (from, to) = if line.kind == "max" {
                (line.limit, y_high)
            } else {
                (y_low, line.limit)
            };
            chart.draw_series(std::iter::once(Rectangle::new(
                [(x_low, from), (at, to)],
                colour.mix(0.10).filled(),
            )))?;
            chart.draw_series(std::iter::once(PathElement::new(
                vec![
                    (x_low, line.limit),
                    (at, line.limit),
                    (at, if line.kind == "max" { y_high } else { y_low }),
                ],
                colour.stroke_width(2),
            )))?;
            let sign = if line.kind == "max" { "≤" } else { "≥" };
            mask_labels.push((
                format!(
                    "{} {} {} dBc up to {}",
                    line.metric.to_uppercase(),
                    sign,
                    num(line.limit, 1),
                    si(at, "V")
                ),
                chart.backend_coord(&(x_low, line.limit)),
                colour,
                line.kind == "max",
            ));
        }

        for (ti, t) in self.temps.iter().enumerate() {
            let at_t: Vec<&Row> = self
                .points
                .iter()
                .filter(|p| p.temperature_c == *t)
                .collect();
            // THD first and wide, so the harmonic that dominates it stays visible on top.
            let mut order: Vec<usize> = (0..self.series.len()).collect();
            order.sort_by_key(|&k| self.series[k].metric != "thd");
            for si_ in order {
                let series = &self.series[si_];
                let colour = metric_colour(&series.metric);
                let data: Vec<(f64, Option<f64>)> = at_t
                    .iter()
                    .map(|p| (p.amplitude_v, p.values[si_]))
                    .collect();
                let style = if series.metric == "thd" {
                    colour.mix(0.45).stroke_width(9)
                } else {
                    colour.stroke_width(3)
                };
                draw_runs(&mut chart, &data, (y_low, y_high), true, pattern(ti), style)?;
                draw_markers(&mut chart, &data, (y_low, y_high), Marker::nth(si_), colour)?;
            }
        }

        for (ti, t) in self.temps.iter().enumerate() {
            for series in &self.series {
                let measured: Vec<(f64, f64)> = self
                    .bench
                    .iter()
                    .filter(|b| b.temperature_c == *t && b.metric == series.metric)
                    .map(|b| (b.amplitude_v, b.bench))
                    .collect();
                if !measured.is_empty() {
                    draw_bench(
                        &mut chart,
                        &measured,
                        (y_low, y_high),
                        ti,
                        metric_colour(&series.metric),
                    )?;
                }
            }
        }

        // Verdicts: one marker per budget check, its margin in a label beside it.
        let mut verdict_labels: Vec<(String, (i32, i32), RGBColor)> = Vec::new();
        for line in &self.budget {
            let (Some(at), Some(value)) = (line.at_v, line.value) else {
                continue;
            };
            let y = value.clamp(y_low, y_high);
            let label = format!(
                "{} {} at {}{}",
                line.metric.to_uppercase(),
                if line.pass { "pass" } else { "FAIL" },
                celsius(line.temperature_c),
                line.margin
                    .map(|m| format!(", margin {} dB", num(m, 1)))
                    .unwrap_or_default()
            );
            if line.pass {
                chart.draw_series(std::iter::once(
                    EmptyElement::at((at, y))
                        + Circle::new((0, 0), 11, PAPER.filled())
                        + Circle::new((0, 0), 9, PASS.filled()),
                ))?;
            } else {
                chart.draw_series(std::iter::once(
                    EmptyElement::at((at, y))
                        + Circle::new((0, 0), 12, PAPER.filled())
                        + PathElement::new(vec![(-8, -8), (8, 8)], FAIL.stroke_width(4))
                        + PathElement::new(vec![(-8, 8), (8, -8)], FAIL.stroke_width(4)),
                ))?;
            }
            verdict_labels.push((
                label,
                chart.backend_coord(&(at, y)),
                if line.pass { PASS } else { FAIL },
            ));
        }
        let (top, bottom) = (
            chart.backend_coord(&(x_low, y_high)).1,
            chart.backend_coord(&(x_low, y_low)).1,
        );
        let wanted: Vec<i32> = mask_labels
            .iter()
            .map(|(_, p, _, above)| if *above { p.1 - 14 } else { p.1 + 14 })
            .collect();
        for ((label, pos, colour, _), y) in
            mask_labels
                .iter()
                .zip(spread_labels(&wanted, 24, top + 12, bottom - 12))
        {
            backed_label(
                root,
                label,
                (pos.0 + 12, y),
                bold(LEGEND_PX).color(colour),
                false,
            )?;
        }
        let wanted: Vec<i32> = verdict_labels.iter().map(|(_, p, _)| p.1).collect();
        for ((label, pos, colour), y) in
            verdict_labels
                .iter()
                .zip(spread_labels(&wanted, 24, top + 12, bottom - 12))
        {
            backed_label(
                root,
                label,
                (pos.0 - 20, y),
                bold(LEGEND_PX).color(colour),
                true,
            )?;
        }

        for (si_, series) in self.series.iter().enumerate() {
            if !missing.contains(&series.label) {
                let colour = metric_colour(&series.metric);
                let style = if series.metric == "thd" {
                    colour.mix(0.6).stroke_width(7)
                } else {
                    colour.stroke_width(3)
                };
                legend_entry(
                    &mut chart,
                    &series.label,
                    (1_000_000, 1),
                    style,
                    Some(Marker::nth(si_)),
                )?;
            }
        }
        temperature_key(&mut chart, &self.temps)?;
        if !self.bench.is_empty() {
            bench_legend(&mut chart, &self.temps)?;
        }
        legend(&mut chart, SeriesLabelPosition::LowerRight)?;
        chart.draw_series(std::iter::once(Text::new(
            "shaded: forbidden by the budget".to_owned(),
            (x_high / 1.05, y_high),
            text(LEGEND_PX, MUTED).pos(Pos::new(HPos::Right, VPos::Top)),
        )))?;
        Ok(())
    }
}
