//! Versus frequency: HD2, HD3 and THD at one amplitude, and IIP3 on a second axis, against
//! signal frequency (plans with several frequencies).

use super::bench::{bench_legend, bench_marks, draw_bench, same, BenchMark};
use super::style::*;
use super::two_tone::dbv;
use super::{DrawResult, Drawing, PlotKind};
use crate::report::{InterceptRecord, PointRecord, Report};
use plotters::coord::Shift;
use plotters::prelude::*;

/// The frequency figure of one stage.
pub struct FrequencyPlot {
    stage: String,
    slug: String,
    amplitude_v: f64,
    temps: Vec<f64>,
    points: Vec<PointRecord>,
    intercepts: Vec<InterceptRecord>,
    /// Bench HD2, HD3 and THD at the figure's amplitude.
    bench: Vec<BenchMark>,
}

impl FrequencyPlot {
    /// The figure, if the stage was driven at two or more frequencies.
    pub fn new(report: &Report, stage: &str, slug: &str) -> Option<Self> {
        let mine: Vec<&PointRecord> = report.points.iter().filter(|p| p.stage == stage).collect();
        let mut freqs: Vec<f64> = mine.iter().map(|p| p.frequency_hz).collect();
        freqs.sort_by(f64::total_cmp);
        freqs.dedup();
        if freqs.len() < 2 {
            return None;
        }
        let target = report
            .budget
            .iter()
            .find(|b| b.stage == stage && b.unit == "dBc" && b.at_v.is_some())
            .and_then(|b| b.at_v);
        let amplitude_v = match target {
            Some(at) => mine
                .iter()
                .map(|p| p.amplitude_v)
                .min_by(|a, b| (a / at).ln().abs().total_cmp(&(b / at).ln().abs()))?,
            None => mine.iter().map(|p| p.amplitude_v).fold(0.0, f64::max),
        };
        let mut points: Vec<PointRecord> = mine
            .into_iter()
            .filter(|p| p.amplitude_v == amplitude_v)
            .cloned()
            .collect();
        points.sort_by(|a, b| a.frequency_hz.total_cmp(&b.frequency_hz));
        let mut intercepts: Vec<InterceptRecord> = report
            .intercepts
            .iter()
            .filter(|i| i.stage == stage)
            .cloned()
            .collect();
        intercepts.sort_by(|a, b| a.frequency_hz.total_cmp(&b.frequency_hz));
        let temps: Vec<f64> = temperatures(report)
            .into_iter()
            .filter(|t| points.iter().any(|p| p.temperature_c == *t))
            .collect();
        let bench = bench_marks(report, Some(stage))
            .into_iter()
            .filter(|b| {
                same(b.amplitude_v, amplitude_v)
                    && temps.contains(&b.temperature_c)
                    && ["hd2", "hd3", "thd"].contains(&b.metric.as_str())
            })
            .collect();
        Some(FrequencyPlot {
            bench,
            stage: stage.to_owned(),
            slug: slug.to_owned(),
            amplitude_v,
            temps,
            points,
            intercepts,
        })
    }
}

impl Drawing for FrequencyPlot {
    fn kind(&self) -> PlotKind {
        PlotKind::Frequency
    }
    fn slug(&self) -> Option<&str> {
        Some(&self.slug)
    }
    fn title(&self) -> String {
        format!("Distortion vs frequency · {}", self.stage)
    }
    fn caption(&self) -> String {
        format!(
            "HD2, HD3 and THD of “{}” at {} peak differential input (left axis) and IIP3 (right axis, dBV) versus signal frequency.",
            self.stage,
            si(self.amplitude_v, "V")
        )
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> DrawResult {
        let subtitle = format!(
            "input {} peak differential per tone",
            si(self.amplitude_v, "V")
        );
        let body = frame(root, &self.title(), &subtitle)?;
        let metrics = ["hd2", "hd3", "thd"];
        let value = |p: &PointRecord, m: &str| match m {
            "thd" => p.thd_dbc,
            "hd2" => p.harmonic(2),
            _ => p.harmonic(3),
        };
        let values = self
            .points
            .iter()
            .flat_map(|p| metrics.map(|m| value(p, m)))
            .flatten()
            .chain(self.bench.iter().map(|b| b.bench));
        let (low, high) = values.fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), v| {
            (lo.min(v), hi.max(v))
        });
        if !low.is_finite() {
            return Ok(());
        }
        let (y_low, y_high) = db_span(low - 8.0, high + 8.0, 10.0);
        let (f_low, f_high) = self
            .points
            .iter()
            .fold((f64::INFINITY, 0.0f64), |(lo, hi), p| {
                (lo.min(p.frequency_hz), hi.max(p.frequency_hz))
            });
        let (x_low, x_high) = log_span(f_low, f_high, 1.3);
        let iip3: Vec<f64> = self
            .intercepts
            .iter()
            .filter_map(|i| i.iip3_v.map(dbv))
            .collect();
        let (i_low, i_high) = iip3
            .iter()
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), v| {
                (lo.min(*v), hi.max(*v))
            });
        let (i_low, i_high) = if i_low.is_finite() {
            db_span(i_low - 5.0, i_high + 5.0, 5.0)
        } else {
            (-40.0, 20.0)
        };

        let mut chart = house_chart(&body, 24, 96)
            .right_y_label_area_size(100)
            .build_cartesian_2d((x_low..x_high).log_scale(), y_low..y_high)?
            .set_secondary_coord((x_low..x_high).log_scale(), i_low..i_high);
        mesh_style(&mut chart.configure_mesh())
            .x_desc("signal frequency (log)")
            .y_desc("distortion (dBc)")
            .x_label_formatter(&|v| log_tick(*v, "Hz"))
            .y_label_formatter(&|v| num(*v, 0))
            .draw()?;
        chart
            .configure_secondary_axes()
            .axis_style(INK.stroke_width(2))
            .label_style(text(TICK_PX, INK))
            .axis_desc_style(bold(AXIS_PX).color(&INK))
            .y_desc("IIP3 (dBV, peak per tone)")
            .y_label_formatter(&|v| num(*v, 0))
            .draw()?;
        for (ti, t) in self.temps.iter().enumerate() {
            let at_t: Vec<&PointRecord> = self
                .points
                .iter()
                .filter(|p| p.temperature_c == *t)
                .collect();
            for (k, m) in metrics.iter().enumerate() {
                let colour = metric_colour(m);
                let data: Vec<(f64, Option<f64>)> =
                    at_t.iter().map(|p| (p.frequency_hz, value(p, m))).collect();
                draw_runs(
                    &mut chart,
                    &data,
                    (y_low, y_high),
                    true,
                    pattern(ti),
                    colour.stroke_width(3),
                )?;
                draw_markers(&mut chart, &data, (y_low, y_high), Marker::nth(k), colour)?;
            }
            let iip3: Vec<(f64, f64)> = self
                .intercepts
                .iter()
                .filter(|i| i.temperature_c == *t)
                .filter_map(|i| i.iip3_v.map(|v| (i.frequency_hz, dbv(v))))
                .collect();
            if iip3.len() > 1 {
                chart.draw_secondary_series(std::iter::once(dashed(
                    iip3,
                    pattern(ti),
                    metric_colour("iip3").stroke_width(3),
                )))?;
            }
        }
        for (ti, t) in self.temps.iter().enumerate() {
            for m in metrics {
                let measured: Vec<(f64, f64)> = self
                    .bench
                    .iter()
                    .filter(|b| b.temperature_c == *t && b.metric == m)
                    .map(|b| (b.frequency_hz, b.bench))
                    .collect();
                if !measured.is_empty() {
                    draw_bench(&mut chart, &measured, (y_low, y_high), ti, metric_colour(m))?;
                }
            }
        }
        for (k, m) in metrics.iter().enumerate() {
            legend_entry(
                &mut chart,
                &m.to_uppercase(),
                pattern(0),
                metric_colour(m).stroke_width(3),
                Some(Marker::nth(k)),
            )?;
        }
        legend_entry(
            &mut chart,
            "IIP3 (right)",
            pattern(0),
            metric_colour("iip3").stroke_width(3),
            None,
        )?;
        temperature_key(&mut chart, &self.temps)?;
        if !self.bench.is_empty() {
            bench_legend(&mut chart, &self.temps)?;
        }
        legend(&mut chart, SeriesLabelPosition::UpperLeft)?;
        Ok(())
    }
}
