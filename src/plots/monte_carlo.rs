//! Monte Carlo spread: for each distortion metric and drive amplitude, the 5 %–95 % interval
//! of the runs as a bar and the median as a marker, temperatures side by side in each group;
//! every distortion budget line of those metrics drawn as a hatched limit mask, so the line
//! that drives the yield is in the picture; the yield in the subtitle.

use super::axis::Axis;
use super::key::{draw_key, split, Key, Swatch, VerdictRow};
use super::style::*;
use super::verdicts::{draw_limit_masks, lines_of, LineChecks};
use super::{DrawResult, Drawing, PlotKind};
use crate::report::{MonteCarloRecord, Report, YieldRecord};
use plotters::coord::Shift;
use plotters::element::DashedPathElement;
use plotters::prelude::*;

/// The Monte Carlo figure of one stage.
pub struct MonteCarloPlot {
    stage: String,
    slug: String,
    frequency_hz: f64,
    temps: Vec<f64>,
    records: Vec<MonteCarloRecord>,
    yields: Vec<YieldRecord>,
    metrics: Vec<String>,
    lines: Vec<LineChecks>,
    x: Axis,
    y: Axis,
}

fn is_db_metric(metric: &str) -> bool {
    metric == "thd"
        || metric == "im3"
        || metric == "im2"
        || (metric.starts_with("hd") && metric[2..].parse::<usize>().is_ok())
}

/// Opacity of the `index`-th temperature's bars.
fn temperature_alpha(index: usize) -> f64 {
    [1.0, 0.7, 0.45, 0.3][index % 4]
}

impl MonteCarloPlot {
    /// The figure, if the report holds Monte Carlo distributions of a distortion metric.
    pub fn new(report: &Report, stage: &str, slug: &str) -> Option<Self> {
        let frequency_hz = report
            .monte_carlo
            .iter()
            .find(|m| m.stage == stage)?
            .frequency_hz;
        let records: Vec<MonteCarloRecord> = report
            .monte_carlo
            .iter()
            .filter(|m| {
                m.stage == stage
                    && m.frequency_hz == frequency_hz
                    && is_db_metric(&m.metric)
                    && m.median.is_some()
            })
            .cloned()
            .collect();
        if records.is_empty() {
            return None;
        }
        let mut metrics: Vec<String> = Vec::new();
        let mut temps: Vec<f64> = Vec::new();
        for r in &records {
            if !metrics.contains(&r.metric) {
                metrics.push(r.metric.clone());
            }
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
        // Distortion lines at this frequency on a metric the figure shows.
        let lines: Vec<LineChecks> = lines_of(report, stage)
            .into_iter()
            .filter(|l| {
                let b = l.line();
                b.at_v.is_some() && b.frequency_hz == frequency_hz && metrics.contains(&b.metric)
            })
            .collect();
        let values = records
            .iter()
            .flat_map(|r| [r.p05, r.median, r.p95])
            .flatten()
            .chain(lines.iter().map(|l| l.line().limit))
            .filter(|v| v.is_finite());
        let (low, high) = values.fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), v| {
            (lo.min(v), hi.max(v))
        });
        if !low.is_finite() {
            return None;
        }
        let y = Axis::linear_step(low - 6.0, high + 6.0, 10.0);
        let amplitudes: Vec<f64> = records
            .iter()
            .map(|r| r.amplitude_v)
            .chain(lines.iter().filter_map(|l| l.line().at_v))
            .collect();
        let x = Axis::log(&amplitudes, "V");
        Some(MonteCarloPlot {
            stage: stage.to_owned(),
            slug: slug.to_owned(),
            frequency_hz,
            temps,
            records,
            yields,
            metrics,
            lines,
            x,
            y,
        })
    }

    /// The row of a line: where the spread sits against its limit. For a `max` line the
    /// 95th percentile is the run-side that fails first.
    fn line_row(&self, line: &LineChecks) -> VerdictRow {
        let l = line.line();
        let at = l.at_v.unwrap_or(0.0);
        let mine = self
            .records
            .iter()
            .filter(|r| r.metric == l.metric && r.amplitude_v == at);
        let upper = l.kind == "max";
        let edge = |r: &MonteCarloRecord| if upper { r.p95 } else { r.p05 };
        let worst = mine
            .filter_map(|r| edge(r).map(|v| (v, r.temperature_c)))
            .reduce(|a, b| {
                if (upper && b.0 > a.0) || (!upper && b.0 < a.0) {
                    b
                } else {
                    a
                }
            });
        let (detail, clear) = match worst {
            Some((v, t)) => {
                let beyond = if upper { v > l.limit } else { v < l.limit };
                (
                    format!(
                        "{} of the runs {} at {}: {}",
                        if upper { "p95" } else { "p05" },
                        level(v, &l.unit),
                        celsius(t),
                        if beyond {
                            "beyond the limit, so this line drives the yield"
                        } else {
                            "inside the limit"
                        }
                    ),
                    !beyond,
                )
            }
            None => ("no percentile above the analysis floor".into(), true),
        };
        VerdictRow {
            swatch: Swatch::Mask {
                colour: metric_colour(&l.metric),
            },
            line: line.describe(),
            detail,
            verdict: if clear { "clear" } else { "limits yield" }.into(),
            pass: clear,
        }
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
            "Distribution over the Monte Carlo runs of “{}” at {}, typical corner: bars span the 5th to 95th percentile, markers are medians; temperatures are side by side in each group (left to right in plan order); hatched regions are the distortion budget's limits.",
            self.stage,
            si_exact(self.frequency_hz, "Hz")
        )
    }
    fn key(&self) -> Key {
        let mut key = Key::default();
        for metric in &self.metrics {
            key.entry(
                Swatch::Bar {
                    colour: metric_colour(metric),
                    alpha: 1.0,
                    pattern: pattern(0),
                    marker: metric_marker(metric),
                },
                format!("{} 5–95 % of runs, median marked", metric_label(metric)),
            );
        }
        if self.temps.len() > 1 {
            let last = self.temps.len() - 1;
            for (ti, t) in self.temps.iter().enumerate() {
                let place = match ti {
                    0 => "left bar of each group",
                    i if i == last => "right bar of each group",
                    _ => "middle bar",
                };
                key.entry(
                    Swatch::Bar {
                        colour: MUTED,
                        alpha: temperature_alpha(ti),
                        pattern: pattern(ti),
                        marker: Marker::Circle,
                    },
                    format!("{} ({place})", celsius(*t)),
                );
            }
        }
        if !self.lines.is_empty() {
            key.verdict_heading = "Budget lines against the spread".into();
            key.verdicts = self.lines.iter().map(|l| self.line_row(l)).collect();
        }
        for y in &self.yields {
            key.notes.push(format!(
                "Yield at {}: {} % of {} runs meet every budget line ({} % to {} %, 95 % interval).",
                celsius(y.temperature_c),
                num(100.0 * y.pass_fraction, 1),
                y.runs,
                num(100.0 * y.pass_fraction_low, 1),
                num(100.0 * y.pass_fraction_high, 1)
            ));
        }
        key
    }
    fn axes(&self) -> Vec<Axis> {
        vec![self.x.clone(), self.y.clone()]
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> DrawResult {
        let runs = self.records.iter().map(|r| r.runs).max().unwrap_or(0);
        let mut subtitle = format!("{runs} runs · {}", si_exact(self.frequency_hz, "Hz"));
        for y in &self.yields {
            subtitle.push_str(&format!(
                " · yield {} % at {}",
                num(100.0 * y.pass_fraction, 1),
                celsius(y.temperature_c)
            ));
        }
        let body = frame(root, &self.title(), &subtitle)?;
        let (plot, side) = split(&body);
        draw_key(&side, &self.key())?;
        let (x, y) = (&self.x, &self.y);
        let (y_low, y_high) = (y.low, y.high);
        let mut chart =
            house_chart(&plot, 36, 96).build_cartesian_2d(x.log_range(), y.linear_range())?;
        mesh_style(&mut chart.configure_mesh())
            .x_desc("peak differential input per tone (log)")
            .y_desc("distortion (dBc)")
            .x_label_formatter(&|v| x.label(*v))
            .y_label_formatter(&|v| y.label(*v))
            .draw()?;

        draw_limit_masks(
            root,
            &mut chart,
            &self.lines,
            (x.low, x.high),
            (y_low, y_high),
        )?;

        let slots = (self.metrics.len() * self.temps.len()).max(1) as f64;
        for (mi, metric) in self.metrics.iter().enumerate() {
            let colour = metric_colour(metric);
            for (ti, t) in self.temps.iter().enumerate() {
                let slot = (mi * self.temps.len() + ti) as f64 - (slots - 1.0) / 2.0;
                let factor = 1.04f64.powf(slot);
                let style = colour.mix(temperature_alpha(ti)).stroke_width(4);
                let (dash, gap) = pattern(ti);
                for r in self
                    .records
                    .iter()
                    .filter(|r| &r.metric == metric && r.temperature_c == *t)
                {
                    let x_at = r.amplitude_v * factor;
                    let lo = r.p05.unwrap_or(y_low).clamp(y_low, y_high);
                    let hi = r.p95.unwrap_or(y_low).clamp(y_low, y_high);
                    chart.draw_series(std::iter::once(DashedPathElement::new(
                        vec![(x_at, lo), (x_at, hi)],
                        dash.min(1000),
                        gap,
                        style,
                    )))?;
                    for cap in [lo, hi] {
                        chart.draw_series(std::iter::once(
                            EmptyElement::at((x_at, cap))
                                + PathElement::new(vec![(-7, 0), (7, 0)], style),
                        ))?;
                    }
                    if let Some(median) = r.median.filter(|m| *m >= y_low && *m <= y_high) {
                        chart.draw_series(std::iter::once(
                            EmptyElement::at((x_at, median))
                                + metric_marker(metric).element((0, 0), colour.mix(1.0))
                                + Circle::new((0, 0), 2, PAPER.filled()),
                        ))?;
                    }
                }
            }
        }
        Ok(())
    }
}
