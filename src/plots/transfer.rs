//! Transfer curve: normalised differential output current and incremental transconductance
//! versus differential input, one figure per stage, every temperature overlaid.

use super::axis::{nice_step, Axis};
use super::key::{draw_key, split, Key, Swatch};
use super::style::*;
use super::{DrawResult, Drawing, PlotKind};
use crate::report::{Report, StageRecord};
use plotters::coord::Shift;
use plotters::prelude::*;

/// The transfer figure of one stage.
pub struct TransferPlot {
    stage: String,
    slug: String,
    records: Vec<StageRecord>,
    steering_fraction: f64,
    corners: bool,
    x: Axis,
    y: Axis,
    y2: Axis,
}

const CURRENT: RGBColor = SERIES[0];
const GM: RGBColor = SERIES[1];
/// The emitter-current split, drawn where it parts from the collector-current curve.
const SPLIT: RGBColor = SERIES[2];

/// How far (on the normalised axis) the emitter split must part from the collector-current
/// curve before it is drawn as a line of its own: below this the two coincide to within a
/// line's width and the steering edges sit where the drawn curve crosses ±0.9.
const SPLIT_SHOWN_FROM: f64 = 0.02;

impl TransferPlot {
    /// The figure, if the report carries a transfer curve for the stage.
    pub fn new(report: &Report, stage: &str, slug: &str) -> Option<Self> {
        let corners = report.stages.iter().any(|s| !is_typical(&s.corner));
        let records: Vec<StageRecord> = report
            .stages
            .iter()
            .filter(|s| s.stage == stage && s.transfer.len() > 1 && is_typical(&s.corner))
            .cloned()
            .collect();
        if records.is_empty() {
            return None;
        }
        // The axis spans what every curve covers, so no curve stops short of its end.
        let x_max_mv = records
            .iter()
            .map(|r| {
                r.transfer
                    .iter()
                    .map(|t| t.input_v.abs() * 1e3)
                    .fold(0.0, f64::max)
            })
            .fold(f64::INFINITY, f64::min);
        let step = nice_step(x_max_mv / 8.0);
        let x_end = ((x_max_mv / step).floor() * step).max(step.min(x_max_mv));
        let x = Axis::linear_exact(-x_end, x_end, 8);
        let y = Axis::linear_step(-1.2, 1.2, 0.2);
        let gm_values = records
            .iter()
            .flat_map(|r| r.transfer.iter().map(|t| t.transconductance_s * 1e3));
        let gm_max = gm_values.clone().fold(0.0, f64::max);
        let gm_min = gm_values.fold(0.0, f64::min);
        let gm_bottom = if gm_min < -0.01 * gm_max {
            gm_min * 1.2
        } else {
            0.0
        };
        let y2 = Axis::linear(gm_bottom, gm_max * 1.08, 8);
        Some(TransferPlot {
            stage: stage.to_owned(),
            slug: slug.to_owned(),
            records,
            steering_fraction: report.analysis.steering_fraction,
            corners,
            x,
            y,
            y2,
        })
    }

    fn reference(&self) -> (f64, &StageRecord) {
        let temps: Vec<f64> = self.records.iter().map(|r| r.temperature_c).collect();
        let typical = typical_temperature(&temps).unwrap_or(temps[0]);
        let record = self
            .records
            .iter()
            .find(|r| r.temperature_c == typical)
            .unwrap_or(&self.records[0]);
        (typical, record)
    }
}

/// Dash pattern of the ±0.9 levels (the emitter split at the steering edges).
const LEVEL_PATTERN: (i32, i32) = (3, 6);

/// Opacity of the band where a side saturates.
const SATURATION_ALPHA: f64 = 0.13;

/// Whether the emitter-current split parts visibly from the collector-current curve within
/// `±x_end_mv` (a side saturates: its emitter current flows partly out of its base, so the
/// collector difference falls short of the split the steering range is defined on).
pub fn split_parts(transfer: &[crate::report::TransferRecord], x_end_mv: f64) -> bool {
    transfer
        .iter()
        .filter(|t| (t.input_v * 1e3).abs() <= x_end_mv)
        .any(|t| (t.emitter_split - t.normalised_current).abs() > SPLIT_SHOWN_FROM)
}

/// Whether either side's collector-base junction is forward-biased anywhere on the curve.
fn reference_saturates(transfer: &[crate::report::TransferRecord]) -> bool {
    transfer
        .iter()
        .any(|t| t.base_collector_v.iter().any(|v| *v > 0.0))
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
            "Normalised differential output current (left axis) and incremental transconductance (right axis) of “{}” versus differential input; the shaded band is the steering range, where each side carries between {:.0} % and {:.0} % of the emitter current (the split (I_EP − I_EM)/(I_EP + I_EM) within ±{:.1}, dotted levels); where a side saturates the collector difference falls short of that split, which is then drawn as a line of its own; grey shading at either end marks inputs where that side saturates (its collector-base junction forward-biased) at the typical temperature.",
            self.stage,
            100.0 * (1.0 - self.steering_fraction),
            100.0 * self.steering_fraction,
            2.0 * self.steering_fraction - 1.0
        ) + if self.corners { " Typical process corner." } else { "" }
    }
    fn key(&self) -> Key {
        let temps: Vec<f64> = self.records.iter().map(|r| r.temperature_c).collect();
        let (typical, _) = self.reference();
        let mut key = Key::default();
        key.entry(
            Swatch::line(CURRENT, 3, None),
            "collector-current difference (I_CP − I_CM)/I_tail (left axis)",
        );
        key.entry(Swatch::line(GM, 3, None), "incremental g_m (right axis)");
        let level = 2.0 * self.steering_fraction - 1.0;
        if split_parts(&self.reference().1.transfer, self.x.high) {
            key.entry(
                Swatch::line(SPLIT, 2, None),
                format!(
                    "emitter-current split (I_EP − I_EM)/(I_EP + I_EM) at {} (left axis); the steering edges are where it crosses ±{level:.1}",
                    celsius(typical)
                ),
            );
        }
        key.entry(
            Swatch::Band {
                colour: ACCENT,
                alpha: 0.1,
            },
            format!(
                "steering range at {}: one side carries {:.0} % of the emitter current at its edges (dashed: each temperature's edges)",
                celsius(typical),
                100.0 * self.steering_fraction
            ),
        );
        key.entry(
            Swatch::Line {
                colour: MUTED,
                alpha: 0.7,
                width: 1,
                pattern: LEVEL_PATTERN,
                marker: None,
            },
            format!("±{level:.1}: the emitter split at the steering edges"),
        );
        if reference_saturates(&self.reference().1.transfer) {
            // Drawn as a light fill with a solid edge at the onset: the outlined swatch keeps it
            // apart from the steering band's plain fill.
            key.entry(
                Swatch::Outline {
                    colour: MUTED,
                    fill: SATURATION_ALPHA,
                },
                format!(
                    "a side saturates (collector-base junction forward-biased) at {}; solid edge at its onset",
                    celsius(typical)
                ),
            );
        }
        key.temperatures(&temps);
        if self.corners {
            key.notes
                .push("Typical process corner; the report's corner table gives the spread.".into());
        }
        key
    }
    fn axes(&self) -> Vec<Axis> {
        vec![self.x.clone(), self.y.clone(), self.y2.clone()]
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> DrawResult {
        let (typical, reference) = self.reference();
        let subtitle = format!(
            "steering range {} to {} at {} ({:.0} % of the emitter current) · small-signal g_m {} · φT {}",
            si_short(reference.steering_low_v, "V"),
            si_short(reference.steering_high_v, "V"),
            celsius(typical),
            100.0 * self.steering_fraction,
            si_short(reference.transconductance_s, "S"),
            si_short(reference.thermal_voltage_v, "V"),
        );
        let body = frame(root, &self.title(), &subtitle)?;
        let (plot, side) = split(&body);
        draw_key(&side, &self.key())?;
        let (x, y, y2) = (&self.x, &self.y, &self.y2);
        let (x_low, x_high) = (x.low, x.high);
        let y_range = (y.low, y.high);

        let mut chart = house_chart(&plot, 24, 96)
            .right_y_label_area_size(100)
            .build_cartesian_2d(x.linear_range(), y.linear_range())?
            .set_secondary_coord(x.linear_range(), y2.linear_range());
        mesh_style(&mut chart.configure_mesh())
            .x_desc("differential input v_d (mV)")
            .y_desc("(I_CP − I_CM) / I_tail")
            .x_label_formatter(&|v| x.label(*v))
            .y_label_formatter(&|v| y.label(*v))
            .draw()?;
        chart
            .configure_secondary_axes()
            .axis_style(INK.stroke_width(2))
            .label_style(text(TICK_PX, INK))
            .axis_desc_style(bold(AXIS_PX).color(&INK))
            .y_desc("incremental g_m (mS)")
            .y_label_formatter(&|v| y2.label(*v))
            .draw()?;

        // Steering band of the typical temperature, boundaries of every temperature.
        chart.draw_series(std::iter::once(Rectangle::new(
            [
                ((reference.steering_low_v * 1e3).max(x_low), y_range.0),
                ((reference.steering_high_v * 1e3).min(x_high), y_range.1),
            ],
            ACCENT.mix(0.1).filled(),
        )))?;
        for (i, r) in self.records.iter().enumerate() {
            for edge in [r.steering_low_v, r.steering_high_v] {
                let edge = (edge * 1e3).clamp(x_low, x_high);
                chart.draw_series(std::iter::once(dashed(
                    vec![(edge, y_range.0), (edge, y_range.1)],
                    if i == 0 { (8, 6) } else { pattern(i) },
                    MUTED.mix(0.8).stroke_width(1),
                )))?;
            }
        }
        // Where each side saturates (typical temperature): inputs with V_BC > 0 on that side,
        // from the first such sample out to the edge.
        for side in [0usize, 1] {
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
            let outer = if side == 0 { x_high } else { x_low };
            chart.draw_series(std::iter::once(Rectangle::new(
                [(edge, y_range.0), (outer, y_range.1)],
                MUTED.mix(SATURATION_ALPHA).filled(),
            )))?;
            chart.draw_series(std::iter::once(PathElement::new(
                vec![(edge, y_range.0), (edge, y_range.1)],
                MUTED.stroke_width(2),
            )))?;
        }
        let level = 2.0 * self.steering_fraction - 1.0;
        for y in [-level, level] {
            chart.draw_series(std::iter::once(dashed(
                vec![(x_low, y), (x_high, y)],
                LEVEL_PATTERN,
                MUTED.mix(0.7).stroke_width(1),
            )))?;
        }

        for (i, r) in self.records.iter().enumerate() {
            let current: Vec<(f64, Option<f64>)> = trim_x(
                &r.transfer
                    .iter()
                    .map(|t| (t.input_v * 1e3, t.normalised_current))
                    .collect::<Vec<_>>(),
                x_low,
                x_high,
            )
            .into_iter()
            .map(|(a, b)| (a, Some(b)))
            .collect();
            draw_runs(
                &mut chart,
                &current,
                y_range,
                false,
                pattern(i),
                CURRENT.stroke_width(3),
            )?;
            let gm = trim_x(
                &r.transfer
                    .iter()
                    .map(|t| (t.input_v * 1e3, t.transconductance_s * 1e3))
                    .collect::<Vec<_>>(),
                x_low,
                x_high,
            );
            chart.draw_secondary_series(std::iter::once(dashed(
                gm,
                pattern(i),
                GM.stroke_width(3),
            )))?;
        }
        // The split the steering range is defined on, where it parts from the drawn curve.
        if split_parts(&reference.transfer, x_high) {
            let split: Vec<(f64, Option<f64>)> = trim_x(
                &reference
                    .transfer
                    .iter()
                    .map(|t| (t.input_v * 1e3, t.emitter_split))
                    .collect::<Vec<_>>(),
                x_low,
                x_high,
            )
            .into_iter()
            .map(|(a, b)| (a, Some(b)))
            .collect();
            draw_runs(
                &mut chart,
                &split,
                y_range,
                false,
                pattern(0),
                SPLIT.stroke_width(2),
            )?;
        }
        Ok(())
    }
}

/// The part of a polyline (ascending in x) between `low` and `high`, with the ends
/// interpolated onto the bounds so the line reaches both ends of the axis.
pub fn trim_x(points: &[(f64, f64)], low: f64, high: f64) -> Vec<(f64, f64)> {
    let at = |x: f64| -> Option<(f64, f64)> {
        let k = points.windows(2).position(|w| w[0].0 <= x && x <= w[1].0)?;
        let (a, b) = (points[k], points[k + 1]);
        let t = if b.0 > a.0 {
            (x - a.0) / (b.0 - a.0)
        } else {
            0.0
        };
        Some((x, a.1 + t * (b.1 - a.1)))
    };
    let mut out: Vec<(f64, f64)> = at(low).into_iter().collect();
    out.extend(points.iter().copied().filter(|p| p.0 > low && p.0 < high));
    out.extend(at(high));
    out
}

#[cfg(test)]
mod tests {
    use super::trim_x;

    /// A straight line trimmed to a range keeps its exact values at both ends (linear
    /// interpolation is exact on a line), so a curve reaches both ends of its axis.
    #[test]
    fn a_trimmed_curve_reaches_both_ends_of_the_axis() {
        let line: Vec<(f64, f64)> = (-20..=20)
            .map(|k| (k as f64 * 9.7, k as f64 * 9.7 * 0.5))
            .collect();
        let trimmed = trim_x(&line, -150.0, 150.0);
        assert_eq!(trimmed.first(), Some(&(-150.0, -75.0)));
        assert_eq!(trimmed.last(), Some(&(150.0, 75.0)));
    }
}
