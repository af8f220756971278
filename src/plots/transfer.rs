//! Transfer curve: normalised differential output current and incremental transconductance
//! versus differential input, one figure per stage, every temperature overlaid.

use super::style::*;
use super::{DrawResult, Drawing, PlotKind};
use crate::report::{Report, StageRecord};
use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

/// The transfer figure of one stage.
pub struct TransferPlot {
    stage: String,
    slug: String,
    records: Vec<StageRecord>,
    steering_fraction: f64,
}

impl TransferPlot {
    /// The figure, if the report carries a transfer curve for the stage.
    pub fn new(report: &Report, stage: &str, slug: &str) -> Option<Self> {
        let records: Vec<StageRecord> = report
            .stages
            .iter()
            .filter(|s| s.stage == stage && s.transfer.len() > 1)
            .cloned()
            .collect();
        (!records.is_empty()).then(|| TransferPlot {
            stage: stage.to_owned(),
            slug: slug.to_owned(),
            records,
            steering_fraction: report.analysis.steering_fraction,
        })
    }
}

impl Drawing for TransferPlot {
    fn kind(&self) -> PlotKind {
        PlotKind::Transfer
    }
    fn slug(&self) -> Option<&str> {
        Some(&self.slug)
    }
    fn title(&self) -> String {
        format!("Transfer curve · {}", self.stage)
    }
    fn caption(&self) -> String {
        format!(
            "Normalised differential output current (left axis) and incremental transconductance (right axis) of “{}” versus differential input; the shaded band is the steering range, where each side carries between {:.0} % and {:.0} % of the tail current; grey hatching at either end marks inputs where that side saturates (its collector-base junction forward-biased) at the typical temperature.",
            self.stage,
            100.0 * (1.0 - self.steering_fraction),
            100.0 * self.steering_fraction
        )
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> DrawResult {
        let temps: Vec<f64> = self.records.iter().map(|r| r.temperature_c).collect();
        let typical = typical_temperature(&temps).unwrap_or(temps[0]);
        let reference = self
            .records
            .iter()
            .find(|r| r.temperature_c == typical)
            .unwrap_or(&self.records[0]);
        let subtitle = format!(
            "steering range {} to {} at {} · small-signal g_m {} · φT {}",
            si(reference.steering_low_v, "V"),
            si(reference.steering_high_v, "V"),
            celsius(typical),
            si(reference.transconductance_s, "S"),
            si(reference.thermal_voltage_v, "V"),
        );
        let body = frame(root, &self.title(), &subtitle)?;

        let x_max_mv = self
            .records
            .iter()
            .flat_map(|r| r.transfer.iter().map(|t| t.input_v.abs() * 1e3))
            .fold(0.0, f64::max);
        let gm_values = self
            .records
            .iter()
            .flat_map(|r| r.transfer.iter().map(|t| t.transconductance_s * 1e3));
        let gm_max = gm_values.clone().fold(0.0, f64::max);
        let gm_min = gm_values.fold(0.0, f64::min);
        let gm_top = nice_ceiling(gm_max * 1.08);
        let gm_bottom = if gm_min < -0.01 * gm_max {
            -nice_ceiling(-gm_min * 1.2)
        } else {
            0.0
        };
        let y_range = (-1.1, 1.1);

        let mut chart = house_chart(&body, 24, 96)
            .right_y_label_area_size(100)
            .build_cartesian_2d(-x_max_mv..x_max_mv, y_range.0..y_range.1)?
            .set_secondary_coord(-x_max_mv..x_max_mv, gm_bottom..gm_top);
        mesh_style(&mut chart.configure_mesh())
            .x_desc("differential input v_d (mV)")
            .y_desc("(I_CP − I_CM) / I_tail")
            .x_label_formatter(&|v| num(*v, if x_max_mv < 20.0 { 1 } else { 0 }))
            .y_label_formatter(&|v| num(*v, 1))
            .draw()?;
        chart
            .configure_secondary_axes()
            .axis_style(INK.stroke_width(2))
            .label_style(text(TICK_PX, INK))
            .axis_desc_style(bold(AXIS_PX).color(&INK))
            .y_desc("incremental g_m (mS)")
            .y_label_formatter(&|v| num(*v, if gm_top < 1.0 { 2 } else { 1 }))
            .draw()?;

        // Steering band of the typical temperature, boundaries of every temperature.
        chart.draw_series(std::iter::once(Rectangle::new(
            [
                (reference.steering_low_v * 1e3, y_range.0),
                (reference.steering_high_v * 1e3, y_range.1),
            ],
            ACCENT.mix(0.07).filled(),
        )))?;
        for (i, r) in self.records.iter().enumerate() {
            for edge in [r.steering_low_v, r.steering_high_v] {
                chart.draw_series(std::iter::once(dashed(
                    vec![(edge * 1e3, y_range.0), (edge * 1e3, y_range.1)],
                    if i == 0 { (8, 6) } else { pattern(i) },
                    MUTED.mix(0.8).stroke_width(1),
                )))?;
            }
        }
        // Where each side saturates (typical temperature): inputs with V_BC > 0 on that side,
        // from the first such sample out to the edge.
        for (side, name) in [(0usize, "P"), (1usize, "M")] {
            let saturated: Vec<f64> = reference
                .transfer
                .iter()
                .filter(|t| t.base_collector_v[side] > 0.0)
                .map(|t| t.input_v * 1e3)
                .collect();
            let (Some(lo), Some(hi)) = (
                saturated.iter().copied().reduce(f64::min),
                saturated.iter().copied().reduce(f64::max),
            ) else {
                continue;
            };
            let edge = if side == 0 { lo } else { hi };
            let outer = if side == 0 { x_max_mv } else { -x_max_mv };
            chart.draw_series(std::iter::once(Rectangle::new(
                [(edge, y_range.0), (outer, y_range.1)],
                MUTED.mix(0.13).filled(),
            )))?;
            chart.draw_series(std::iter::once(PathElement::new(
                vec![(edge, y_range.0), (edge, y_range.1)],
                MUTED.stroke_width(2),
            )))?;
            let (anchor, x) = if side == 0 {
                (HPos::Left, edge + 0.01 * x_max_mv)
            } else {
                (HPos::Right, edge - 0.01 * x_max_mv)
            };
            chart.draw_series(std::iter::once(Text::new(
                format!("{name} side saturates"),
                (x, -1.06),
                text(LEGEND_PX, MUTED).pos(Pos::new(anchor, VPos::Bottom)),
            )))?;
        }
        let level = 2.0 * self.steering_fraction - 1.0;
        for y in [-level, level] {
            chart.draw_series(std::iter::once(dashed(
                vec![(-x_max_mv, y), (x_max_mv, y)],
                (3, 6),
                MUTED.mix(0.7).stroke_width(1),
            )))?;
        }
        chart.draw_series(std::iter::once(Text::new(
            format!("steering range ({:.0} %)", 100.0 * self.steering_fraction),
            (reference.steering_high_v * 1e3, 1.06),
            text(LEGEND_PX, MUTED).pos(Pos::new(HPos::Right, VPos::Top)),
        )))?;

        let current_colour = SERIES[0];
        let gm_colour = SERIES[1];
        for (i, r) in self.records.iter().enumerate() {
            let current: Vec<(f64, Option<f64>)> = r
                .transfer
                .iter()
                .map(|t| (t.input_v * 1e3, Some(t.normalised_current)))
                .collect();
            draw_runs(
                &mut chart,
                &current,
                y_range,
                false,
                pattern(i),
                current_colour.stroke_width(3),
            )?;
            let gm: Vec<(f64, f64)> = r
                .transfer
                .iter()
                .map(|t| (t.input_v * 1e3, t.transconductance_s * 1e3))
                .collect();
            chart.draw_secondary_series(std::iter::once(dashed(
                gm,
                pattern(i),
                gm_colour.stroke_width(3),
            )))?;
        }
        legend_entry(
            &mut chart,
            "normalised output current (left)",
            (1_000_000, 1),
            current_colour.stroke_width(3),
            None,
        )?;
        legend_entry(
            &mut chart,
            "incremental g_m (right)",
            (1_000_000, 1),
            gm_colour.stroke_width(3),
            None,
        )?;
        temperature_key(&mut chart, &temps)?;
        legend(&mut chart, SeriesLabelPosition::UpperLeft)?;
        Ok(())
    }
}

/// Rounds up to 1, 2, 2.5 or 5 times a power of ten.
pub fn nice_ceiling(value: f64) -> f64 {
    if value <= 0.0 || !value.is_finite() {
        return 1.0;
    }
    let decade = 10f64.powf(value.log10().floor());
    for step in [1.0, 2.0, 2.5, 5.0, 10.0] {
        if step * decade >= value {
            return step * decade;
        }
    }
    10.0 * decade
}
