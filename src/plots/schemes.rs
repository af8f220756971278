//! The schemes at equal terms: HD3 (left) and IM3 (right) versus amplitude of every planned
//! stage, each made equal in tail current or input noise as the plan asks, with each stage's
//! current, noise and degeneration drop in its legend.

use super::style::*;
use super::{DrawResult, Drawing, PlotKind};
use crate::report::{Report, SchemeComparisonRecord};
use plotters::coord::Shift;
use plotters::prelude::*;

/// The comparison-of-schemes figure (plans with `comparison`).
pub struct SchemesPlot {
    comparison: SchemeComparisonRecord,
}

impl SchemesPlot {
    /// The figure, if the report has a comparison of schemes.
    pub fn new(report: &Report) -> Option<Self> {
        report
            .scheme_comparison
            .clone()
            .filter(|c| !c.rows.is_empty() && !c.amplitudes_v.is_empty())
            .map(|comparison| SchemesPlot { comparison })
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
            "The plan's stages at {} and {}: HD3 (left) and IM3 (right) versus peak input per tone; the legend gives each stage's tail current, white input noise and the headroom its degeneration takes at zero input.",
            self.basis_words(),
            celsius(self.comparison.temperature_c)
        )
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> DrawResult {
        let c = &self.comparison;
        let subtitle = format!("{} · {}", self.basis_words(), celsius(c.temperature_c));
        let body = frame(root, &self.title(), &subtitle)?;
        let (width, _) = body.dim_in_pixel();
        let (left, right) = body.split_horizontally(width / 2);
        let (a_low, a_high) = c
            .amplitudes_v
            .iter()
            .fold((f64::INFINITY, 0.0f64), |(lo, hi), a| {
                (lo.min(*a), hi.max(*a))
            });
        let (x_low, x_high) = log_span(a_low, a_high, 1.5);
        for (panel, metric, pick) in [(&left, "HD3", 0usize), (&right, "IM3", 1usize)] {
            let series = |row: &crate::report::SchemeRowRecord| -> Vec<(f64, Option<f64>)> {
                let values = if pick == 0 {
                    &row.hd3_dbc
                } else {
                    &row.im3_dbc
                };
                c.amplitudes_v
                    .iter()
                    .copied()
                    .zip(values.iter().copied())
                    .collect()
            };
            let all: Vec<f64> = c
                .rows
                .iter()
                .flat_map(|r| series(r).into_iter().filter_map(|(_, v)| v))
                .collect();
            if all.is_empty() {
                continue;
            }
            let (low, high) = all
                .iter()
                .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), v| {
                    (lo.min(*v), hi.max(*v))
                });
            let (y_low, y_high) = db_span(low - 8.0, high + 8.0, 20.0);
            let mut chart = house_chart(panel, 40, 90)
                .build_cartesian_2d((x_low..x_high).log_scale(), y_low..y_high)?;
            mesh_style(&mut chart.configure_mesh())
                .x_desc("peak differential input per tone (log)")
                .y_desc(format!("{metric} (dBc)"))
                .x_label_formatter(&|v| log_tick(*v, "V"))
                .y_label_formatter(&|v| num(*v, 0))
                .draw()?;
            for (index, row) in c.rows.iter().enumerate() {
                let colour = SERIES[(index * 2) % SERIES.len()];
                let data = series(row);
                draw_runs(
                    &mut chart,
                    &data,
                    (y_low, y_high),
                    true,
                    pattern(index % 3),
                    colour.stroke_width(3),
                )?;
                draw_markers(
                    &mut chart,
                    &data,
                    (y_low, y_high),
                    Marker::nth(index),
                    colour,
                )?;
                let label = if pick == 0 {
                    format!(
                        "{} ({}): {}, {}/√Hz, drop {}",
                        row.stage,
                        row.topology.replace('_', " "),
                        crate::units::format_si(row.tail_current_a, "A"),
                        crate::units::format_si(row.input_noise_v_rthz, "V"),
                        crate::units::format_si(row.degeneration_drop_v.max(0.0), "V"),
                    )
                } else {
                    format!(
                        "{}: IIP3 {}",
                        row.stage,
                        row.iip3_v
                            .map(|v| crate::units::format_si(v, "V"))
                            .unwrap_or_else(|| "— (no 3:1 region)".into())
                    )
                };
                legend_entry(
                    &mut chart,
                    &label,
                    pattern(index % 3),
                    colour.stroke_width(3),
                    Some(Marker::nth(index)),
                )?;
            }
            let corner = if pick == 0 {
                SeriesLabelPosition::UpperLeft
            } else {
                SeriesLabelPosition::LowerRight
            };
            legend(&mut chart, corner)?;
        }
        Ok(())
    }
}
