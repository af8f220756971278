//! Monte Carlo spread: for each distortion metric and drive amplitude, the 5 %–95 % interval
//! of the runs as a bar and the median as a marker, with the yield in the subtitle.

use super::style::*;
use super::{DrawResult, Drawing, PlotKind};
use crate::report::{MonteCarloRecord, Report, YieldRecord};
use plotters::coord::Shift;
use plotters::prelude::*;

/// The Monte Carlo figure of one stage.
pub struct MonteCarloPlot {
    stage: String,
    slug: String,
    temps: Vec<f64>,
    records: Vec<MonteCarloRecord>,
    yields: Vec<YieldRecord>,
    metrics: Vec<String>,
}

fn is_db_metric(metric: &str) -> bool {
    metric == "thd"
        || metric == "im3"
        || metric == "im2"
        || (metric.starts_with("hd") && metric[2..].parse::<usize>().is_ok())
}

impl MonteCarloPlot {
    /// The figure, if the report holds Monte Carlo distributions of a distortion metric.
    pub fn new(report: &Report, stage: &str, slug: &str) -> Option<Self> {
        let first_frequency = report
            .monte_carlo
            .iter()
            .find(|m| m.stage == stage)?
            .frequency_hz;
        let records: Vec<MonteCarloRecord> = report
            .monte_carlo
            .iter()
            .filter(|m| {
                m.stage == stage
                    && m.frequency_hz == first_frequency
                    && is_db_metric(&m.metric)
                    && m.median.is_some()
            })
            .cloned()
            .collect();
        if records.is_empty() {
            return None;
        }
        let mut metrics: Vec<String> = Vec::new();
        for r in &records {
            if !metrics.contains(&r.metric) {
                metrics.push(r.metric.clone());
            }
        }
        let mut temps: Vec<f64> = Vec::new();
        for r in &records {
            if !temps.contains(&r.temperature_c) {
                temps.push(r.temperature_c);
            }
        }
        let yields = report
            .yield_
            .iter()
            .filter(|y| y.stage == stage)
            .cloned()
            .collect();
        Some(MonteCarloPlot {
            stage: stage.to_owned(),
            slug: slug.to_owned(),
            temps,
            records,
            yields,
            metrics,
        })
    }
}

impl Drawing for MonteCarloPlot {
    fn kind(&self) -> PlotKind {
        PlotKind::MonteCarlo
    }
    fn slug(&self) -> Option<&str> {
        Some(&self.slug)
    }
    fn title(&self) -> String {
        format!("Monte Carlo spread · {}", self.stage)
    }
    fn caption(&self) -> String {
        format!(
            "Distribution over the Monte Carlo runs of “{}”: bars span the 5th to 95th percentile, markers are medians; temperatures are drawn side by side at each amplitude.",
            self.stage
        )
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> DrawResult {
        let runs = self.records.iter().map(|r| r.runs).max().unwrap_or(0);
        let mut subtitle = format!("{runs} runs");
        for y in &self.yields {
            subtitle.push_str(&format!(
                " · yield {} % at {}",
                num(100.0 * y.pass_fraction, 1),
                celsius(y.temperature_c)
            ));
        }
        let body = frame(root, &self.title(), &subtitle)?;
        let values = self
            .records
            .iter()
            .flat_map(|r| [r.p05, r.median, r.p95])
            .flatten()
            .filter(|v| v.is_finite());
        let (low, high) = values.fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), v| {
            (lo.min(v), hi.max(v))
        });
        if !low.is_finite() {
            return Ok(());
        }
        let (y_low, y_high) = db_span(low - 8.0, high + 8.0, 10.0);
        let (a_low, a_high) = self
            .records
            .iter()
            .fold((f64::INFINITY, 0.0f64), |(lo, hi), r| {
                (lo.min(r.amplitude_v), hi.max(r.amplitude_v))
            });
        let (x_low, x_high) = log_span(a_low, a_high, 1.6);
        let mut chart = house_chart(&body, 48, 96)
            .build_cartesian_2d((x_low..x_high).log_scale(), y_low..y_high)?;
        mesh_style(&mut chart.configure_mesh())
            .x_desc("peak differential input per tone (log)")
            .y_desc("distortion (dBc)")
            .x_label_formatter(&|v| log_tick(*v, "V"))
            .y_label_formatter(&|v| num(*v, 0))
            .draw()?;
        let slots = (self.metrics.len() * self.temps.len()).max(1) as f64;
        for (mi, metric) in self.metrics.iter().enumerate() {
            let colour = metric_colour(metric);
            for (ti, t) in self.temps.iter().enumerate() {
                let slot = (mi * self.temps.len() + ti) as f64 - (slots - 1.0) / 2.0;
                let factor = 1.045f64.powf(slot);
                for r in self
                    .records
                    .iter()
                    .filter(|r| &r.metric == metric && r.temperature_c == *t)
                {
                    let x = r.amplitude_v * factor;
                    let lo = r.p05.unwrap_or(y_low).clamp(y_low, y_high);
                    let hi = r.p95.unwrap_or(y_low).clamp(y_low, y_high);
                    let style = if ti == 0 {
                        colour.stroke_width(4)
                    } else {
                        colour.mix(0.55).stroke_width(4)
                    };
                    chart.draw_series(std::iter::once(PathElement::new(
                        vec![(x, lo), (x, hi)],
                        style,
                    )))?;
                    for cap in [lo, hi] {
                        chart.draw_series(std::iter::once(
                            EmptyElement::at((x, cap))
                                + PathElement::new(vec![(-7, 0), (7, 0)], style),
                        ))?;
                    }
                    if let Some(median) = r.median.filter(|m| *m >= y_low && *m <= y_high) {
                        chart.draw_series(std::iter::once(
                            EmptyElement::at((x, median))
                                + Marker::nth(mi).element((0, 0), colour.mix(1.0))
                                + Circle::new((0, 0), 2, PAPER.filled()),
                        ))?;
                    }
                }
            }
            legend_entry(
                &mut chart,
                &format!("{} (5–95 %, median)", metric.to_uppercase()),
                pattern(0),
                colour.stroke_width(4),
                Some(Marker::nth(mi)),
            )?;
        }
        if self.temps.len() > 1 {
            for (ti, t) in self.temps.iter().enumerate() {
                let label = format!(
                    "{} ({})",
                    celsius(*t),
                    if ti == 0 { "solid" } else { "light" }
                );
                let style = if ti == 0 {
                    MUTED.stroke_width(4)
                } else {
                    MUTED.mix(0.55).stroke_width(4)
                };
                legend_entry(&mut chart, &label, pattern(0), style, None)?;
            }
        }
        legend(&mut chart, SeriesLabelPosition::LowerRight)?;
        Ok(())
    }
}
