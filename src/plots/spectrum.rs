//! Output spectrum at one drive point: the fundamental and each harmonic as a stem in dBc.

use super::axis::Axis;
use super::key::{draw_key, split, Key, Swatch};
use super::style::*;
use super::{DrawResult, Drawing, PlotKind};
use crate::report::{PointRecord, Region, Report};
use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

/// The spectrum figure of one stage at the drive point a designer looks at first: the
/// amplitude of the first distortion budget line (the nearest plan amplitude), else the
/// largest amplitude.
pub struct SpectrumPlot {
    stage: String,
    slug: String,
    amplitude_v: f64,
    points: Vec<PointRecord>,
    highest_order: usize,
    floor_dbc: f64,
    corners: bool,
    /// The report's temperatures (they fix each temperature's colour).
    plan_temps: Vec<f64>,
    y: Axis,
}

/// A hollow triangle (outline only) centred at a pixel position.
fn hollow_triangle(centre: (i32, i32), colour: RGBColor) -> PathElement<(i32, i32)> {
    let (x, y) = centre;
    PathElement::new(
        vec![(x, y - 8), (x + 7, y + 5), (x - 7, y + 5), (x, y - 8)],
        colour.stroke_width(2),
    )
}

impl SpectrumPlot {
    /// The figure, if the stage has drive points with harmonics.
    pub fn new(report: &Report, stage: &str, slug: &str) -> Option<Self> {
        let first = report.points.iter().find(|p| p.stage == stage)?;
        let frequency_hz = first.frequency_hz;
        let candidates: Vec<&PointRecord> = report
            .points
            .iter()
            .filter(|p| p.stage == stage && p.frequency_hz == frequency_hz)
            .collect();
        let target = report
            .budget
            .iter()
            .find(|b| b.stage == stage && b.unit == "dBc" && b.metric != "im3" && b.at_v.is_some())
            .and_then(|b| b.at_v);
        let amplitude_v = match target {
            Some(at) => candidates
                .iter()
                .map(|p| p.amplitude_v)
                .min_by(|a, b| (a / at).ln().abs().total_cmp(&(b / at).ln().abs()))?,
            None => candidates.iter().map(|p| p.amplitude_v).fold(0.0, f64::max),
        };
        let corners = candidates.iter().any(|p| !is_typical(&p.corner));
        let points: Vec<PointRecord> = candidates
            .into_iter()
            .filter(|p| p.amplitude_v == amplitude_v && is_typical(&p.corner))
            .cloned()
            .collect();
        let highest_order = points.iter().map(|p| p.harmonics.highest_order()).max()?;
        // The points' own floor (higher than the plan-wide one for a stage with capacitance).
        let floor_dbc = points
            .iter()
            .map(|p| p.floor_dbc)
            .reduce(f64::max)
            .unwrap_or(report.analysis.analysis_floor_dbc);
        let lowest = points
            .iter()
            .flat_map(|p| (2..=highest_order).filter_map(|k| p.harmonic(k)))
            .fold(0.0f64, f64::min);
        let y = Axis::linear_step((lowest - 10.0).max(floor_dbc), 10.0, 20.0);
        (highest_order >= 2).then(|| SpectrumPlot {
            stage: stage.to_owned(),
            slug: slug.to_owned(),
            amplitude_v,
            points,
            highest_order,
            floor_dbc,
            corners,
            plan_temps: temperatures(report),
            y,
        })
    }
}

impl SpectrumPlot {
    /// The operating region of the drawn drive in words, when it is not forward-active at
    /// some temperature: `Operating region at 147 mV: saturating at 27 °C (…)`.
    pub fn region_words(&self) -> Option<String> {
        let mut parts: Vec<String> = Vec::new();
        for (region, words) in [
            (
                Region::Saturating,
                "saturating (a collector-base junction forward-biased by up to",
            ),
            (Region::HighInjection, "high-level injection"),
        ] {
            let here: Vec<&PointRecord> =
                self.points.iter().filter(|p| p.region == region).collect();
            if here.is_empty() {
                continue;
            }
            let temps = if here.len() == self.points.len() && self.points.len() > 1 {
                "every temperature".to_owned()
            } else {
                here.iter()
                    .map(|p| celsius(p.temperature_c))
                    .collect::<Vec<_>>()
                    .join(", ")
            };
            parts.push(match region {
                Region::Saturating => {
                    let worst = here
                        .iter()
                        .map(|p| -p.collector_base_margin_v)
                        .fold(0.0, f64::max);
                    format!("{words} {} mV) at {temps}", num(worst * 1e3, 0))
                }
                _ => format!("{words} at {temps}"),
            });
        }
        (!parts.is_empty()).then(|| {
            format!(
                "Operating region at {}: {}; the levels include it.",
                si_exact(self.amplitude_v, "V"),
                parts.join("; ")
            )
        })
    }
}

impl Drawing for SpectrumPlot {
    fn kind(&self) -> PlotKind {
        PlotKind::Spectrum
    }
    fn slug(&self) -> Option<&str> {
        Some(&self.slug)
    }
    fn title(&self) -> String {
        format!(
            "Output spectrum · {} at {}",
            self.stage,
            si_exact(self.amplitude_v, "V")
        )
    }
    fn caption(&self) -> String {
        format!(
            "Harmonics of the differential output of “{}” in dBc at {} peak differential input{}; a hollow triangle on the bottom axis is a harmonic below the analysis floor.",
            self.stage,
            si_exact(self.amplitude_v, "V"),
            if self.corners { ", typical process corner" } else { "" }
        )
    }
    fn key(&self) -> Key {
        let mut key = Key::default();
        if let Some(words) = self.region_words() {
            key.notes.push(words);
        }
        for p in &self.points {
            key.entry(
                Swatch::Dot {
                    colour: temperature_colour(p.temperature_c, &self.plan_temps),
                    marker: Marker::Circle,
                },
                format!("{} (stem and level)", celsius(p.temperature_c)),
            );
        }
        key.entry(
            Swatch::Hollow { colour: MUTED },
            format!("below the analysis floor ({} dBc)", num(self.floor_dbc, 0)),
        );
        if self.points.len() > 1 {
            let temps: Vec<String> = self
                .points
                .iter()
                .map(|p| celsius(p.temperature_c))
                .collect();
            for order in 2..=self.highest_order.min(7) {
                let levels: Vec<String> = self
                    .points
                    .iter()
                    .map(|p| p.harmonic(order).map(|v| num(v, 1)).unwrap_or("—".into()))
                    .collect();
                if levels.iter().any(|l| l != "—") {
                    key.notes
                        .push(format!("HD{order}: {} dBc", levels.join(" / ")));
                }
            }
            key.notes.push(format!("(levels at {})", temps.join(" / ")));
        }
        key
    }
    fn axes(&self) -> Vec<Axis> {
        vec![self.y.clone()]
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> DrawResult {
        let f = self.points[0].frequency_hz;
        let thd: Vec<String> = self
            .points
            .iter()
            .map(|p| {
                format!(
                    "THD {} dBc at {}",
                    p.thd_dbc.map(|v| num(v, 1)).unwrap_or("below floor".into()),
                    celsius(p.temperature_c)
                )
            })
            .collect();
        let mut subtitle = format!("fundamental {} · {}", si_exact(f, "Hz"), thd.join(" · "));
        if self.points.iter().any(|p| p.region == Region::Saturating) {
            subtitle.push_str(" · saturating (see key)");
        } else if self
            .points
            .iter()
            .any(|p| p.region == Region::HighInjection)
        {
            subtitle.push_str(" · high-level injection (see key)");
        }
        let body = frame(root, &self.title(), &subtitle)?;
        let (plot, side) = split(&body);
        draw_key(&side, &self.key())?;
        let y = &self.y;
        let y_low = y.low;
        let x_high = self.highest_order as f64 + 0.6;
        let mut chart =
            house_chart(&plot, 36, 96).build_cartesian_2d(0.4..x_high, y.linear_range())?;
        mesh_style(&mut chart.configure_mesh())
            .disable_x_mesh()
            .x_labels(self.highest_order)
            .x_desc("harmonic order (multiple of the fundamental frequency)")
            .y_desc("level (dBc)")
            .x_label_formatter(&|v| {
                if (v - v.round()).abs() < 1e-6 {
                    format!("{}", v.round() as i64)
                } else {
                    String::new()
                }
            })
            .y_label_formatter(&|v| y.label(*v))
            .draw()?;

        let n = self.points.len();
        let width = 0.5 / n.max(1) as f64;
        for (ti, p) in self.points.iter().enumerate() {
            let colour = temperature_colour(p.temperature_c, &self.plan_temps);
            let shift = (ti as f64 - (n as f64 - 1.0) / 2.0) * width;
            for order in 1..=self.highest_order {
                let x = order as f64 + shift;
                let level = if order == 1 {
                    Some(0.0)
                } else {
                    p.harmonic(order)
                };
                match level {
                    Some(v) if v >= y_low => {
                        chart.draw_series(std::iter::once(PathElement::new(
                            vec![(x, y_low), (x, v)],
                            colour.stroke_width(5),
                        )))?;
                        chart.draw_series(std::iter::once(
                            EmptyElement::at((x, v)) + Circle::new((0, 0), 7, colour.filled()),
                        ))?;
                        // Levels are written only when one temperature is drawn: with
                        // several, neighbouring stems would crowd them (the key lists them).
                        if n == 1 {
                            chart.draw_series(std::iter::once(Text::new(
                                num(v, 1),
                                (x, v),
                                text(LEGEND_PX, INK).pos(Pos::new(HPos::Center, VPos::Bottom)),
                            )))?;
                        }
                    }
                    _ => {
                        let at = chart.backend_coord(&(x, y_low));
                        root.draw(&hollow_triangle((at.0, at.1 - 10), colour))?;
                    }
                }
            }
        }
        Ok(())
    }
}
