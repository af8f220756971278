//! The schemes at equal terms: HD3 (left) and IM3 (right) versus amplitude of every planned
//! stage, each made equal in tail current or input noise as the plan asks; the key gives each
//! stage's current, noise, degeneration drop and IIP3.

use super::axis::Axis;
use super::key::{draw_key, split, Key, Swatch};
use super::style::*;
use super::{DrawResult, Drawing, PlotKind};
use crate::report::{Report, SchemeComparisonRecord, SchemeRowRecord};
use plotters::coord::Shift;
use plotters::prelude::*;

/// The comparison-of-schemes figure (plans with `comparison`).
pub struct SchemesPlot {
    comparison: SchemeComparisonRecord,
    x: Axis,
    y_hd3: Axis,
    y_im3: Option<Axis>,
}

fn values(row: &SchemeRowRecord, im3: bool) -> &[Option<f64>] {
    if im3 {
        &row.im3_dbc
    } else {
        &row.hd3_dbc
    }
}

fn db_axis(c: &SchemeComparisonRecord, im3: bool, floor: f64) -> Option<Axis> {
    let (low, high) = c
        .rows
        .iter()
        .flat_map(|r| values(r, im3).iter().flatten().copied())
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), v| {
            (lo.min(v), hi.max(v))
        });
    low.is_finite()
        .then(|| Axis::linear_step((low - 8.0).max(floor), high + 8.0, 20.0))
}

impl SchemesPlot {
    /// The figure, if the report has a comparison of schemes.
    pub fn new(report: &Report) -> Option<Self> {
        let comparison = report.scheme_comparison.clone()?;
        if comparison.rows.is_empty() || comparison.amplitudes_v.is_empty() {
            return None;
        }
        let floor = report.analysis.analysis_floor_dbc;
        let y_hd3 = db_axis(&comparison, false, floor)?;
        let y_im3 = db_axis(&comparison, true, floor);
        let x = Axis::log(&comparison.amplitudes_v, "V").narrow(6);
        Some(SchemesPlot {
            comparison,
            x,
            y_hd3,
            y_im3,
        })
    }

    fn basis_words(&self) -> String {
        let c = &self.comparison;
        if c.equal == "tail_current" {
            format!(
                "equal tail current {}",
                crate::units::format_si(c.value, "A")
            )
        } else {
            format!(
                "equal input noise {}/√Hz",
                crate::units::format_si(c.value, "V")
            )
        }
    }

    fn colour(index: usize) -> RGBColor {
        SERIES[(index * 2) % SERIES.len()]
    }
}

impl Drawing for SchemesPlot {
    fn kind(&self) -> PlotKind {
        PlotKind::Schemes
    }
    fn slug(&self) -> Option<&str> {
        None
    }
    fn title(&self) -> String {
        "Schemes at equal terms".into()
    }
    fn caption(&self) -> String {
        format!(
            "The plan's stages at {} and {}: HD3 (left) and IM3 (right) versus peak input per tone; the key gives each stage's tail current, white input noise, the headroom its degeneration takes at zero input, and IIP3.",
            self.basis_words(),
            celsius(self.comparison.temperature_c)
        )
    }
    fn key(&self) -> Key {
        let mut key = Key::default();
        for (index, row) in self.comparison.rows.iter().enumerate() {
            key.entry(
                Swatch::Line {
                    colour: Self::colour(index),
                    alpha: 1.0,
                    width: 3,
                    pattern: pattern(index % 3),
                    marker: Some(Marker::nth(index)),
                },
                format!(
                    "{} ({}): {}, {}/√Hz, drop {}, IIP3 {}",
                    row.stage,
                    row.topology.replace('_', " "),
                    crate::units::format_si(row.tail_current_a, "A"),
                    crate::units::format_si(row.input_noise_v_rthz, "V"),
                    crate::units::format_si(row.degeneration_drop_v.max(0.0), "V"),
                    row.iip3_v
                        .map(|v| crate::units::format_si(v, "V"))
                        .unwrap_or_else(|| "— (no 3:1 region)".into())
                ),
            );
        }
        key
    }
    fn axes(&self) -> Vec<Axis> {
        let mut axes = vec![self.x.clone(), self.y_hd3.clone()];
        if let Some(y) = &self.y_im3 {
            axes.push(self.x.clone());
            axes.push(y.clone());
        }
        axes
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> DrawResult {
        let c = &self.comparison;
        let subtitle = format!("{} · {}", self.basis_words(), celsius(c.temperature_c));
        let body = frame(root, &self.title(), &subtitle)?;
        let (plots, side) = split(&body);
        draw_key(&side, &self.key())?;
        let (width, _) = plots.dim_in_pixel();
        let (left, right) = plots.split_horizontally(width / 2);
        let panels = [
            (&left, false, Some(&self.y_hd3), "HD3 (dBc)"),
            (&right, true, self.y_im3.as_ref(), "IM3 (dBc)"),
        ];
        for (panel, im3, axis, label) in panels {
            let Some(y) = axis else { continue };
            let x = &self.x;
            let mut chart =
                house_chart(panel, 36, 80).build_cartesian_2d(x.log_range(), y.linear_range())?;
            mesh_style(&mut chart.configure_mesh())
                .x_desc("peak differential input per tone (log)")
                .y_desc(label)
                .x_label_formatter(&|v| x.label(*v))
                .y_label_formatter(&|v| y.label(*v))
                .draw()?;
            for (index, row) in c.rows.iter().enumerate() {
                let colour = Self::colour(index);
                let data: Vec<(f64, Option<f64>)> = c
                    .amplitudes_v
                    .iter()
                    .copied()
                    .zip(values(row, im3).iter().copied())
                    .collect();
                draw_runs(
                    &mut chart,
                    &data,
                    (y.low, y.high),
                    true,
                    pattern(index % 3),
                    colour.stroke_width(3),
                )?;
                draw_markers(
                    &mut chart,
                    &data,
                    (y.low, y.high),
                    Marker::nth(index),
                    colour,
                )?;
            }
        }
        Ok(())
    }
}
