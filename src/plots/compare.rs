//! Stage comparison: the stages of the plan overlaid at the typical temperature, transfer
//! curves on the left, HD3 and THD versus amplitude on the right.

use super::axis::{nice_step, Axis};
use super::bench::{bench_marks, draw_bench, same, BenchMark};
use super::key::{draw_key, split, Key, Swatch};
use super::style::*;
use super::{DrawResult, Drawing, PlotKind};
use crate::report::{PointRecord, Report, StageRecord};
use plotters::coord::Shift;
use plotters::prelude::*;

/// The comparison figure (plans with two or more stages).
pub struct ComparisonPlot {
    temperature_c: f64,
    stages: Vec<String>,
    transfers: Vec<StageRecord>,
    points: Vec<PointRecord>,
    corners: bool,
    /// Bench HD3 and THD of the plan's stages at the drawn temperature and frequency.
    bench: Vec<BenchMark>,
    x_left: Axis,
    y_left: Axis,
    x_right: Axis,
    y_right: Axis,
}

impl ComparisonPlot {
    /// The figure, if the plan has several stages.
    pub fn new(report: &Report) -> Option<Self> {
        let stages = stage_names(report);
        if stages.len() < 2 {
            return None;
        }
        let temperature_c = typical_temperature(&temperatures(report))?;
        let frequency_hz = report.points.first().map(|p| p.frequency_hz);
        let corners = report.points.iter().any(|p| !is_typical(&p.corner));
        let transfers: Vec<StageRecord> = report
            .stages
            .iter()
            .filter(|s| {
                s.temperature_c == temperature_c && s.transfer.len() > 1 && is_typical(&s.corner)
            })
            .cloned()
            .collect();
        let points: Vec<PointRecord> = report
            .points
            .iter()
            .filter(|p| {
                p.temperature_c == temperature_c
                    && Some(p.frequency_hz) == frequency_hz
                    && is_typical(&p.corner)
            })
            .cloned()
            .collect();
        if transfers.len() < 2 && points.is_empty() {
            return None;
        }
        let bench: Vec<BenchMark> = bench_marks(report, None)
            .into_iter()
            .filter(|b| {
                b.temperature_c == temperature_c
                    && frequency_hz.is_some_and(|f| same(f, b.frequency_hz))
                    && (b.metric == "hd3" || b.metric == "thd")
            })
            .collect();
        // Every curve spans the left axis: its end is the least of the curves' reaches.
        let reach = transfers
            .iter()
            .map(|r| {
                r.transfer
                    .iter()
                    .map(|t| t.input_v.abs() * 1e3)
                    .fold(0.0, f64::max)
            })
            .fold(f64::INFINITY, f64::min);
        let reach = if reach.is_finite() && reach > 0.0 {
            reach
        } else {
            1.0
        };
        let step = nice_step(reach / 3.0);
        let end = ((reach / step).floor() * step).max(step.min(reach));
        let x_left = Axis::linear_exact(-end, end, 4);
        let y_left = Axis::linear_step(-1.2, 1.2, 0.4);
        let values = points
            .iter()
            .flat_map(|p| [p.harmonic(3), p.thd_dbc])
            .flatten();
        let (low, high) = values.fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), v| {
            (lo.min(v), hi.max(v))
        });
        let (low, high) = if low.is_finite() {
            (low, high)
        } else {
            (-100.0, 0.0)
        };
        let y_right = Axis::linear_step(
            (low - 8.0).max(report.analysis.analysis_floor_dbc),
            high + 8.0,
            20.0,
        );
        let amplitudes: Vec<f64> = points.iter().map(|p| p.amplitude_v).collect();
        let x_right = Axis::log(&amplitudes, "V").narrow(6);
        Some(ComparisonPlot {
            temperature_c,
            stages,
            transfers,
            points,
            corners,
            bench,
            x_left,
            y_left,
            x_right,
            y_right,
        })
    }

    fn colour(&self, stage: &str) -> RGBColor {
        let index = self.stages.iter().position(|s| s == stage).unwrap_or(0);
        SERIES[(index * 2) % SERIES.len()]
    }
}

impl Drawing for ComparisonPlot {
    fn kind(&self) -> PlotKind {
        PlotKind::StageComparison
    }
    fn slug(&self) -> Option<&str> {
        None
    }
    fn title(&self) -> String {
        "Stage comparison".into()
    }
    fn caption(&self) -> String {
        format!(
            "The plan's stages side by side at {}: normalised transfer curves (left) and HD3 (solid) and THD (dashed) versus amplitude (right).",
            celsius(self.temperature_c)
        ) + if self.corners { " Typical process corner." } else { "" }
    }
    fn key(&self) -> Key {
        let mut key = Key::default();
        // Colour names the stage, line and marker the curve: one entry per stage and one per
        // curve (a stage's HD3 and another's differ by colour alone, so they are not listed
        // as pairs a reader would have to tell apart).
        for stage in &self.stages {
            key.entry(
                Swatch::Chip {
                    colour: self.colour(stage),
                },
                stage.clone(),
            );
        }
        key.entry(Swatch::line(INK, 3, None), "transfer (left)");
        key.entry(Swatch::line(INK, 3, Some(Marker::Circle)), "HD3 (right)");
        key.entry(
            Swatch::Line {
                colour: INK,
                alpha: 1.0,
                width: 3,
                pattern: pattern(1),
                marker: Some(Marker::Square),
            },
            "THD (right)",
        );
        for (shape, metric) in ["hd3", "thd"].iter().enumerate() {
            if self.bench.iter().any(|b| b.metric == *metric) {
                key.entry(
                    Swatch::Open {
                        index: shape,
                        colour: INK,
                    },
                    format!("bench {} (lines: model)", metric_label(metric)),
                );
            }
        }
        key
    }
    fn axes(&self) -> Vec<Axis> {
        vec![
            self.x_left.clone(),
            self.y_left.clone(),
            self.x_right.clone(),
            self.y_right.clone(),
        ]
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> DrawResult {
        let subtitle = format!(
            "{} · {}",
            self.stages.join(" vs "),
            celsius(self.temperature_c)
        );
        let body = frame(root, &self.title(), &subtitle)?;
        let (plots, side) = split(&body);
        draw_key(&side, &self.key())?;
        let (width, _) = plots.dim_in_pixel();
        let (left, right) = plots.split_horizontally(width / 2);

        let (x, y) = (&self.x_left, &self.y_left);
        let y_range = (y.low, y.high);
        let mut chart =
            house_chart(&left, 24, 80).build_cartesian_2d(x.linear_range(), y.linear_range())?;
        mesh_style(&mut chart.configure_mesh())
            .x_desc("differential input (mV)")
            .y_desc("(I_CP − I_CM) / I_tail")
            .x_label_formatter(&|v| x.label(*v))
            .y_label_formatter(&|v| y.label(*v))
            .draw()?;
        for record in &self.transfers {
            let colour = self.colour(&record.stage);
            let data: Vec<(f64, Option<f64>)> = super::transfer::trim_x(
                &record
                    .transfer
                    .iter()
                    .map(|t| (t.input_v * 1e3, t.normalised_current))
                    .collect::<Vec<_>>(),
                x.low,
                x.high,
            )
            .into_iter()
            .map(|(a, b)| (a, Some(b)))
            .collect();
            draw_runs(
                &mut chart,
                &data,
                y_range,
                false,
                pattern(0),
                colour.stroke_width(3),
            )?;
        }

        let (x, y) = (&self.x_right, &self.y_right);
        let (y_low, y_high) = (y.low, y.high);
        let mut chart =
            house_chart(&right, 36, 80).build_cartesian_2d(x.log_range(), y.linear_range())?;
        mesh_style(&mut chart.configure_mesh())
            .x_desc("peak differential input (log)")
            .y_desc("distortion (dBc)")
            .x_label_formatter(&|v| x.label(*v))
            .y_label_formatter(&|v| y.label(*v))
            .draw()?;
        for stage in &self.stages {
            let colour = self.colour(stage);
            let mine: Vec<&PointRecord> =
                self.points.iter().filter(|p| &p.stage == stage).collect();
            let hd3: Vec<(f64, Option<f64>)> = mine
                .iter()
                .map(|p| (p.amplitude_v, p.harmonic(3)))
                .collect();
            let thd: Vec<(f64, Option<f64>)> =
                mine.iter().map(|p| (p.amplitude_v, p.thd_dbc)).collect();
            draw_runs(
                &mut chart,
                &hd3,
                (y_low, y_high),
                true,
                pattern(0),
                colour.stroke_width(3),
            )?;
            draw_markers(&mut chart, &hd3, (y_low, y_high), Marker::Circle, colour)?;
            draw_runs(
                &mut chart,
                &thd,
                (y_low, y_high),
                true,
                pattern(1),
                colour.stroke_width(3),
            )?;
            draw_markers(&mut chart, &thd, (y_low, y_high), Marker::Square, colour)?;
        }
        for (shape, metric) in ["hd3", "thd"].iter().enumerate() {
            let measured: Vec<(f64, f64)> = self
                .bench
                .iter()
                .filter(|b| b.metric == *metric)
                .map(|b| (b.amplitude_v, b.bench))
                .collect();
            if !measured.is_empty() {
                draw_bench(&mut chart, &measured, (y_low, y_high), shape, INK)?;
            }
        }
        Ok(())
    }
}
