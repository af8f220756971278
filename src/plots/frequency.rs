//! Versus frequency: HD2, HD3 and THD at the budget's (or the largest) amplitude, each
//! distortion budget line's metric at its own amplitude, and IIP3 on a second axis, against
//! signal frequency (plans with several frequencies). Each budget line is drawn as a hatched
//! limit bar at its frequency, its worst case as a pass/fail marker.

use super::axis::Axis;
use super::bench::{bench_key, bench_marks, draw_bench, same, BenchMark};
use super::key::{draw_key, hatch_pixels, split, verdict_marker, Key, Swatch};
use super::style::*;
use super::two_tone::dbv;
use super::verdicts::{lines_of, LineChecks};
use super::{DrawResult, Drawing, PlotKind};
use crate::report::{InterceptRecord, PointRecord, Report};
use plotters::coord::Shift;
use plotters::prelude::*;

/// One curve: a metric at one amplitude, per temperature.
struct Curve {
    metric: String,
    amplitude_v: f64,
    marker: Marker,
}

impl Curve {
    fn value(&self, p: &PointRecord) -> Option<f64> {
        match self.metric.as_str() {
            "thd" => p.thd_dbc,
            "im3" => p.im3_dbc.flatten(),
            other => other
                .strip_prefix("hd")
                .and_then(|n| n.parse().ok())
                .and_then(|n| p.harmonic(n)),
        }
    }
}

/// The frequency figure of one stage.
pub struct FrequencyPlot {
    stage: String,
    slug: String,
    temps: Vec<f64>,
    /// Typical-corner points of every drawn amplitude.
    points: Vec<PointRecord>,
    intercepts: Vec<InterceptRecord>,
    curves: Vec<Curve>,
    /// Distortion lines (dB axis) and intercept lines (right axis, dBV).
    lines: Vec<LineChecks>,
    corners: bool,
    /// Bench values of the drawn curves' metrics and amplitudes.
    bench: Vec<BenchMark>,
    x: Axis,
    y: Axis,
    y2: Axis,
}

fn is_left_line(metric: &str) -> bool {
    metric == "thd" || metric == "im3" || metric.starts_with("hd")
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
        let lines: Vec<LineChecks> = lines_of(report, stage)
            .into_iter()
            .filter(|l| {
                let m = l.line().metric.as_str();
                (is_left_line(m) && l.line().at_v.is_some()) || m == "iip3"
            })
            .collect();
        let nearest = |at: f64| {
            mine.iter()
                .map(|p| p.amplitude_v)
                .min_by(|a, b| (a / at).ln().abs().total_cmp(&(b / at).ln().abs()))
        };
        // The main amplitude: the largest a distortion line names, else the largest drive.
        let main = lines
            .iter()
            .filter_map(|l| l.line().at_v)
            .reduce(f64::max)
            .and_then(nearest)
            .unwrap_or_else(|| mine.iter().map(|p| p.amplitude_v).fold(0.0, f64::max));
        let mut curves: Vec<Curve> = Vec::new();
        let mut add = |metric: &str, amplitude_v: f64| {
            if !curves
                .iter()
                .any(|c| c.metric == metric && c.amplitude_v == amplitude_v)
            {
                // Its marker is settled once every curve is known (below).
                let marker = metric_marker(metric);
                curves.push(Curve {
                    metric: metric.to_owned(),
                    amplitude_v,
                    marker,
                });
            }
        };
        for metric in ["hd2", "hd3", "thd"] {
            add(metric, main);
        }
        for l in &lines {
            if let (true, Some(at)) = (is_left_line(&l.line().metric), l.line().at_v) {
                if let Some(a) = nearest(at) {
                    add(&l.line().metric, a);
                }
            }
        }
        // Each metric's first curve keeps the metric's own marker (as in every figure: IM3 a
        // triangle, never the intercept's plus); a second amplitude of a metric (same colour)
        // takes a shape no other curve nor the intercept has.
        let mut taken: Vec<Marker> = curves.iter().map(|c| c.marker).collect();
        taken.push(metric_marker("iip3"));
        for k in 0..curves.len() {
            if curves[..k].iter().any(|c| c.metric == curves[k].metric) {
                let spare = [
                    Marker::Circle,
                    Marker::Square,
                    Marker::Triangle,
                    Marker::Diamond,
                    Marker::Down,
                    Marker::Hexagon,
                ]
                .into_iter()
                .find(|m| !taken.contains(m));
                if let Some(m) = spare {
                    curves[k].marker = m;
                    taken.push(m);
                }
            }
        }
        let amplitudes: Vec<f64> = curves.iter().map(|c| c.amplitude_v).collect();
        let mut points: Vec<PointRecord> = mine
            .iter()
            .filter(|p| is_typical(&p.corner) && amplitudes.contains(&p.amplitude_v))
            .map(|p| (*p).clone())
            .collect();
        points.sort_by(|a, b| a.frequency_hz.total_cmp(&b.frequency_hz));
        let curves: Vec<Curve> = curves
            .into_iter()
            .filter(|c| {
                points
                    .iter()
                    .any(|p| p.amplitude_v == c.amplitude_v && c.value(p).is_some())
            })
            .collect();
        let mut intercepts: Vec<InterceptRecord> = report
            .intercepts
            .iter()
            .filter(|i| i.stage == stage && is_typical(&i.corner))
            .cloned()
            .collect();
        intercepts.sort_by(|a, b| a.frequency_hz.total_cmp(&b.frequency_hz));
        let temps: Vec<f64> = temperatures(report)
            .into_iter()
            .filter(|t| points.iter().any(|p| p.temperature_c == *t))
            .collect();
        let corners = mine.iter().any(|p| !is_typical(&p.corner));
        let bench: Vec<BenchMark> = bench_marks(report, Some(stage))
            .into_iter()
            .filter(|b| {
                temps.contains(&b.temperature_c)
                    && curves
                        .iter()
                        .any(|c| c.metric == b.metric && same(c.amplitude_v, b.amplitude_v))
            })
            .collect();

        let values = points
            .iter()
            .flat_map(|p| curves.iter().map(move |c| c.value(p)))
            .flatten()
            .chain(
                lines
                    .iter()
                    .filter(|l| is_left_line(&l.line().metric))
                    .flat_map(|l| &l.records)
                    .flat_map(|b| [Some(b.limit), b.value])
                    .flatten(),
            )
            .chain(bench.iter().map(|b| b.bench));
        let (low, high) = values.fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), v| {
            (lo.min(v), hi.max(v))
        });
        let (low, high) = if low.is_finite() {
            (low, high)
        } else {
            (-100.0, 0.0)
        };
        let y = Axis::linear_step(
            (low - 6.0).max(report.analysis.analysis_floor_dbc),
            high + 6.0,
            if high - low > 60.0 { 20.0 } else { 10.0 },
        );
        let iip3 = intercepts.iter().filter_map(|i| i.iip3_v.map(dbv)).chain(
            lines
                .iter()
                .filter(|l| l.line().metric == "iip3")
                .map(|l| dbv(l.line().limit)),
        );
        let (i_low, i_high) = iip3.fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), v| {
            (lo.min(v), hi.max(v))
        });
        let y2 = if i_low.is_finite() {
            Axis::linear_step(i_low - 4.0, i_high + 4.0, 5.0)
        } else {
            Axis::linear_step(-40.0, 20.0, 10.0)
        };
        let x = Axis::log(&freqs, "Hz");
        Some(FrequencyPlot {
            stage: stage.to_owned(),
            slug: slug.to_owned(),
            temps,
            points,
            intercepts,
            curves,
            lines,
            corners,
            bench,
            x,
            y,
            y2,
        })
    }

    fn curve_label(&self, curve: &Curve) -> String {
        format!(
            "{} at {}",
            metric_label(&curve.metric),
            si_exact(curve.amplitude_v, "V")
        )
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
            "Distortion of “{}” at the stated peak differential inputs (left axis, dBc) and IIP3 (right axis, dBV) versus signal frequency{}; each budget line is a hatched limit bar at its frequency with its worst case marked.",
            self.stage,
            if self.corners { ", typical corner" } else { "" }
        )
    }
    fn key(&self) -> Key {
        let mut key = Key::default();
        for curve in &self.curves {
            key.entry(
                Swatch::line(metric_colour(&curve.metric), 3, Some(curve.marker)),
                self.curve_label(curve),
            );
        }
        if self.intercepts.iter().any(|i| i.iip3_v.is_some()) {
            key.entry(
                Swatch::Line {
                    colour: metric_colour("iip3"),
                    alpha: 1.0,
                    width: 3,
                    pattern: pattern(0),
                    marker: Some(metric_marker("iip3")),
                },
                "IIP3 (right axis)",
            );
        }
        key.temperatures(&self.temps);
        if !self.bench.is_empty() {
            bench_key(&mut key, &self.temps);
        }
        if !self.lines.is_empty() {
            key.verdict_heading = "Budget lines".into();
            key.verdicts = self
                .lines
                .iter()
                .map(|l| {
                    l.row(
                        Swatch::Mask {
                            colour: metric_colour(&l.line().metric),
                        },
                        true,
                    )
                })
                .collect();
        }
        if self.corners {
            key.notes.push(
                "Lines are the typical process corner; the table gives each line's worst corner."
                    .into(),
            );
        }
        key
    }
    fn axes(&self) -> Vec<Axis> {
        vec![self.x.clone(), self.y.clone(), self.y2.clone()]
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> DrawResult {
        let mut amplitudes: Vec<f64> = self.curves.iter().map(|c| c.amplitude_v).collect();
        amplitudes.sort_by(f64::total_cmp);
        amplitudes.dedup();
        let failing = self.lines.iter().filter(|l| !l.pass()).count();
        let subtitle = format!(
            "input {} peak differential per tone · {}",
            amplitudes
                .iter()
                .map(|a| si_exact(*a, "V"))
                .collect::<Vec<_>>()
                .join(" and "),
            if self.lines.is_empty() {
                "no budget line drawn here".to_owned()
            } else {
                format!(
                    "{} of {} budget lines pass",
                    self.lines.len() - failing,
                    self.lines.len()
                )
            }
        );
        let body = frame(root, &self.title(), &subtitle)?;
        let (plot, side) = split(&body);
        draw_key(&side, &self.key())?;
        let (x, y, y2) = (&self.x, &self.y, &self.y2);
        let (y_low, y_high) = (y.low, y.high);

        let mut chart = house_chart(&plot, 24, 96)
            .right_y_label_area_size(100)
            .build_cartesian_2d(x.log_range(), y.linear_range())?
            .set_secondary_coord(x.log_range(), y2.linear_range());
        mesh_style(&mut chart.configure_mesh())
            .x_desc("signal frequency (log)")
            .y_desc("distortion (dBc)")
            .x_label_formatter(&|v| x.label(*v))
            .y_label_formatter(&|v| y.label(*v))
            .draw()?;
        chart
            .configure_secondary_axes()
            .axis_style(INK.stroke_width(2))
            .label_style(text(TICK_PX, INK))
            .axis_desc_style(bold(AXIS_PX).color(&INK))
            .y_desc("IIP3 (dBV, peak per tone)")
            .y_label_formatter(&|v| y2.label(*v))
            .draw()?;

        // Limit bars: a budget line applies at its own frequency only; lines sharing a
        // frequency share its bar side by side.
        for (index, line) in self.lines.iter().enumerate() {
            let l = line.line();
            let colour = metric_colour(&l.metric);
            let sharing: Vec<usize> = (0..self.lines.len())
                .filter(|k| self.lines[*k].line().frequency_hz == l.frequency_hz)
                .collect();
            let slot = sharing.iter().position(|k| *k == index).unwrap_or(0) as f64;
            let width = 1.25f64.ln() / sharing.len() as f64;
            let start = l.frequency_hz.ln() - 0.5 * 1.25f64.ln() + slot * width;
            let (from, to) = (start.exp().max(x.low), (start + width).exp().min(x.high));
            let left_axis = is_left_line(&l.metric);
            let (limit, beyond) = if left_axis {
                (
                    l.limit.clamp(y_low, y_high),
                    if l.kind == "max" { y_high } else { y_low },
                )
            } else {
                let limit = dbv(l.limit).clamp(y2.low, y2.high);
                (limit, if l.kind == "max" { y2.high } else { y2.low })
            };
            let (corner_a, corner_b) = if left_axis {
                (
                    chart.backend_coord(&(from, limit)),
                    chart.backend_coord(&(to, beyond)),
                )
            } else {
                (
                    chart.borrow_secondary().backend_coord(&(from, limit)),
                    chart.borrow_secondary().backend_coord(&(to, beyond)),
                )
            };
            hatch_pixels(root, corner_a, corner_b, colour)?;
            root.draw(&PathElement::new(
                vec![corner_a, (corner_b.0, corner_a.1)],
                colour.stroke_width(3),
            ))?;
        }

        for (ti, t) in self.temps.iter().enumerate() {
            for curve in &self.curves {
                let colour = metric_colour(&curve.metric);
                let data: Vec<(f64, Option<f64>)> = self
                    .points
                    .iter()
                    .filter(|p| p.temperature_c == *t && p.amplitude_v == curve.amplitude_v)
                    .map(|p| (p.frequency_hz, curve.value(p)))
                    .collect();
                draw_runs(
                    &mut chart,
                    &data,
                    (y_low, y_high),
                    true,
                    pattern(ti),
                    colour.stroke_width(3),
                )?;
                draw_markers(&mut chart, &data, (y_low, y_high), curve.marker, colour)?;
                let measured: Vec<(f64, f64)> = self
                    .bench
                    .iter()
                    .filter(|b| {
                        b.temperature_c == *t
                            && b.metric == curve.metric
                            && same(b.amplitude_v, curve.amplitude_v)
                    })
                    .map(|b| (b.frequency_hz, b.bench))
                    .collect();
                if !measured.is_empty() {
                    draw_bench(&mut chart, &measured, (y_low, y_high), ti, colour)?;
                }
            }
            let iip3: Vec<(f64, f64)> = self
                .intercepts
                .iter()
                .filter(|i| i.temperature_c == *t)
                .filter_map(|i| i.iip3_v.map(|v| (i.frequency_hz, dbv(v))))
                .collect();
            let colour = metric_colour("iip3");
            if iip3.len() > 1 {
                chart.draw_secondary_series(std::iter::once(dashed(
                    iip3.clone(),
                    pattern(ti),
                    colour.stroke_width(3),
                )))?;
            }
            chart.draw_secondary_series(iip3.into_iter().map(|c| {
                EmptyElement::at(c)
                    + metric_marker("iip3").element((0, 0), colour.mix(1.0))
                    + Circle::new((0, 0), 2, PAPER.filled())
            }))?;
        }

        for line in &self.lines {
            let l = line.line();
            let worst = line.worst();
            let position = if is_left_line(&l.metric) {
                chart.backend_coord(&(
                    l.frequency_hz,
                    worst.value.unwrap_or(y_low).clamp(y_low, y_high),
                ))
            } else {
                let v = worst
                    .value
                    .map(dbv)
                    .unwrap_or(y2.high)
                    .clamp(y2.low, y2.high);
                chart.borrow_secondary().backend_coord(&(l.frequency_hz, v))
            };
            verdict_marker(root, position, line.pass())?;
        }
        Ok(())
    }
}
