//! Output spectrum at one drive point: the fundamental and each harmonic as a stem in dBc.

use super::style::*;
use super::{DrawResult, Drawing, PlotKind};
use crate::report::{PointRecord, Report};
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
        let points: Vec<PointRecord> = candidates
            .into_iter()
            .filter(|p| p.amplitude_v == amplitude_v)
            .cloned()
            .collect();
        let highest_order = points.iter().map(|p| p.harmonics.highest_order()).max()?;
        (highest_order >= 2).then(|| SpectrumPlot {
            stage: stage.to_owned(),
            slug: slug.to_owned(),
            amplitude_v,
            points,
            highest_order,
            floor_dbc: report.analysis.analysis_floor_dbc,
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
            si(self.amplitude_v, "V")
        )
    }
    fn caption(&self) -> String {
        format!(
            "Harmonics of the differential output of “{}” in dBc at {} peak differential input; a hollow marker on the bottom axis is a harmonic below the analysis floor.",
            self.stage,
            si(self.amplitude_v, "V")
        )
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
        let subtitle = format!("fundamental {} · {}", si(f, "Hz"), thd.join(" · "));
        let body = frame(root, &self.title(), &subtitle)?;

        let lowest = self
            .points
            .iter()
            .flat_map(|p| (2..=self.highest_order).filter_map(|k| p.harmonic(k)))
            .fold(0.0f64, f64::min);
        let (y_low, _) = db_span((lowest - 10.0).max(self.floor_dbc), 0.0, 20.0);
        let y_high = 10.0;
        let x_high = self.highest_order as f64 + 0.6;
        let mut chart =
            house_chart(&body, 48, 96).build_cartesian_2d(0.4..x_high, y_low..y_high)?;
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
            .y_label_formatter(&|v| num(*v, 0))
            .draw()?;

        let n = self.points.len();
        let width = 0.5 / n.max(1) as f64;
        for (ti, p) in self.points.iter().enumerate() {
            let colour = SERIES[(ti * 2) % SERIES.len()];
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
                        if ti == 0 || n == 1 {
                            chart.draw_series(std::iter::once(Text::new(
                                num(v, 1),
                                (x, v),
                                text(LEGEND_PX, INK).pos(Pos::new(HPos::Center, VPos::Bottom)),
                            )))?;
                        }
                    }
                    _ => {
                        chart.draw_series(std::iter::once(
                            EmptyElement::at((x, y_low))
                                + TriangleMarker::new((0, -8), 7, colour.stroke_width(2)),
                        ))?;
                    }
                }
            }
            chart
                .draw_series(std::iter::empty::<Circle<(f64, f64), i32>>())?
                .label(celsius(p.temperature_c))
                .legend(move |(x, y)| {
                    EmptyElement::at((x + 14, y)) + Circle::new((0, 0), 7, colour.filled())
                });
        }
        chart
            .draw_series(std::iter::empty::<Circle<(f64, f64), i32>>())?
            .label(format!("below the floor ({} dBc)", num(self.floor_dbc, 0)))
            .legend(|(x, y)| {
                EmptyElement::at((x + 14, y))
                    + TriangleMarker::new((0, 0), 7, MUTED.stroke_width(2))
            });
        legend(&mut chart, SeriesLabelPosition::UpperRight)?;
        Ok(())
    }
}
