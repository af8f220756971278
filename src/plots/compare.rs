//! Stage comparison: the stages of the plan overlaid at the typical temperature, transfer
//! curves on the left, HD3 and THD versus amplitude on the right.

use super::bench::{bench_entries, bench_marks, draw_bench, same, BenchMark};
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
    /// Bench HD3 and THD of the measured stages at this temperature and frequency.
    bench: Vec<BenchMark>,
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
        let transfers: Vec<StageRecord> = report
            .stages
            .iter()
            .filter(|s| s.temperature_c == temperature_c && s.transfer.len() > 1)
            .cloned()
            .collect();
        let points: Vec<PointRecord> = report
            .points
            .iter()
            .filter(|p| p.temperature_c == temperature_c && Some(p.frequency_hz) == frequency_hz)
            .cloned()
            .collect();
        let bench = bench_marks(report, None)
            .into_iter()
            .filter(|b| {
                b.temperature_c == temperature_c
                    && frequency_hz.is_some_and(|f| same(f, b.frequency_hz))
                    && (b.metric == "hd3" || b.metric == "thd")
            })
            .collect();
        (transfers.len() >= 2 || !points.is_empty()).then_some(ComparisonPlot {
            bench,
            temperature_c,
            stages,
            transfers,
            points,
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
        )
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> DrawResult {
        let subtitle = format!(
            "{} · {}",
            self.stages.join(" vs "),
            celsius(self.temperature_c)
        );
        let body = frame(root, &self.title(), &subtitle)?;
        let (width, _) = body.dim_in_pixel();
        let (left, right) = body.split_horizontally(width / 2);

        let x_max = self
            .transfers
            .iter()
            .flat_map(|r| r.transfer.iter().map(|t| t.input_v.abs() * 1e3))
            .fold(1.0, f64::max);
        let y_range = (-1.1, 1.1);
        let mut chart =
            house_chart(&left, 24, 90).build_cartesian_2d(-x_max..x_max, y_range.0..y_range.1)?;
        mesh_style(&mut chart.configure_mesh())
            .x_desc("differential input (mV)")
            .y_desc("(I_CP − I_CM) / I_tail")
            .x_labels(7)
            .x_label_formatter(&|v| num(*v, 0))
            .y_label_formatter(&|v| num(*v, 1))
            .draw()?;
        for record in &self.transfers {
            let colour = self.colour(&record.stage);
            let data: Vec<(f64, Option<f64>)> = record
                .transfer
                .iter()
                .map(|t| (t.input_v * 1e3, Some(t.normalised_current)))
                .collect();
            draw_runs(
                &mut chart,
                &data,
                y_range,
                false,
                pattern(0),
                colour.stroke_width(3),
            )?;
            legend_entry(
                &mut chart,
                &record.stage,
                pattern(0),
                colour.stroke_width(3),
                None,
            )?;
        }
        legend(&mut chart, SeriesLabelPosition::UpperLeft)?;

        let values = self
            .points
            .iter()
            .flat_map(|p| [p.harmonic(3), p.thd_dbc])
            .flatten()
            .chain(self.bench.iter().map(|b| b.bench));
        let (low, high) = values.fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), v| {
            (lo.min(v), hi.max(v))
        });
        if !low.is_finite() {
            return Ok(());
        }
        let (y_low, y_high) = db_span(low - 8.0, high + 8.0, 20.0);
        let (a_low, a_high) = self
            .points
            .iter()
            .fold((f64::INFINITY, 0.0f64), |(lo, hi), p| {
                (lo.min(p.amplitude_v), hi.max(p.amplitude_v))
            });
        let (x_low, x_high) = log_span(a_low, a_high, 1.5);
        let mut chart = house_chart(&right, 40, 90)
            .build_cartesian_2d((x_low..x_high).log_scale(), y_low..y_high)?;
        mesh_style(&mut chart.configure_mesh())
            .x_desc("peak differential input (log)")
            .y_desc("distortion (dBc)")
            .x_label_formatter(&|v| log_tick(*v, "V"))
            .y_label_formatter(&|v| num(*v, 0))
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
            legend_entry(
                &mut chart,
                &format!("{stage} HD3"),
                pattern(0),
                colour.stroke_width(3),
                Some(Marker::Circle),
            )?;
            legend_entry(
                &mut chart,
                &format!("{stage} THD"),
                pattern(1),
                colour.stroke_width(3),
                Some(Marker::Square),
            )?;
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
                bench_entries(
                    &mut chart,
                    &[(
                        format!("bench {} (lines: model)", metric.to_uppercase()),
                        shape,
                    )],
                )?;
            }
        }
        legend(&mut chart, SeriesLabelPosition::LowerRight)?;
        Ok(())
    }
}
