//! Sizing: the margin of each budget line versus emitter resistance, the chosen value marked,
//! and the small-signal gain it costs on a second axis.

use super::style::*;
use super::transfer::nice_ceiling;
use super::{DrawResult, Drawing, PlotKind};
use crate::report::{BudgetRecord, Report, SizingRecord};
use plotters::coord::Shift;
use plotters::prelude::*;

/// The sizing figure of one stage, every temperature overlaid.
pub struct SizingPlot {
    stage: String,
    slug: String,
    records: Vec<SizingRecord>,
    /// Budget lines in plan order (from the first temperature): labels of the margins.
    lines: Vec<BudgetRecord>,
    /// Ranges of R_E usable at every temperature, Ω (shaded).
    windows: Vec<[f64; 2]>,
}

impl SizingPlot {
    /// The figure, if the stage was sized and its scan kept.
    pub fn new(report: &Report, stage: &str, slug: &str) -> Option<Self> {
        let records: Vec<SizingRecord> = report
            .sizing
            .iter()
            .filter(|s| s.stage == stage && s.scan.len() > 1)
            .cloned()
            .collect();
        let first = records.first()?;
        let lines: Vec<BudgetRecord> = report
            .budget
            .iter()
            .filter(|b| b.stage == stage && b.temperature_c == first.temperature_c)
            .cloned()
            .collect();
        let windows = report
            .verdict
            .recommended
            .iter()
            .flat_map(|r| &r.stages)
            .filter(|s| s.stage == stage)
            .flat_map(|s| s.window_ohm.iter().copied())
            .collect();
        Some(SizingPlot {
            stage: stage.to_owned(),
            slug: slug.to_owned(),
            records,
            lines,
            windows,
        })
    }

    fn line_label(&self, index: usize) -> String {
        match self.lines.get(index) {
            Some(line) => {
                let at = line
                    .at_v
                    .map(|a| format!(" at {}", si(a, "V")))
                    .unwrap_or_default();
                format!(
                    "{}{} ({} {})",
                    line.metric.to_uppercase(),
                    at,
                    line.kind,
                    limit_text(line)
                )
            }
            None => format!("line {}", index + 1),
        }
    }
}

fn limit_text(line: &BudgetRecord) -> String {
    if line.unit == "V" {
        si(line.limit, "V")
    } else {
        format!("{} {}", num(line.limit, 1), line.unit)
    }
}

impl Drawing for SizingPlot {
    fn kind(&self) -> PlotKind {
        PlotKind::Sizing
    }
    fn slug(&self) -> Option<&str> {
        Some(&self.slug)
    }
    fn title(&self) -> String {
        format!("Degeneration sizing · {}", self.stage)
    }
    fn caption(&self) -> String {
        format!(
            "Margin of each budget line of “{}” (left axis, dB, positive passes) and small-signal gain (right axis) versus emitter resistance per side; the vertical lines mark each temperature's least value, the green band the values usable at every temperature, and a grey band the values at which the stage cannot bias (not solved).",
            self.stage
        )
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> DrawResult {
        let temps: Vec<f64> = self.records.iter().map(|r| r.temperature_c).collect();
        let subtitle = self
            .records
            .iter()
            .map(|r| match (r.met, r.emitter_resistance_ohm) {
                (true, Some(re)) => format!(
                    "{}: R_E = {} (binding {})",
                    celsius(r.temperature_c),
                    si(re, "Ω"),
                    r.binding_metric.to_uppercase()
                ),
                (_, Some(re)) => format!(
                    "{}: not met, best R_E = {}",
                    celsius(r.temperature_c),
                    si(re, "Ω")
                ),
                _ => format!("{}: not met", celsius(r.temperature_c)),
            })
            .collect::<Vec<_>>()
            .join(" · ");
        let body = frame(root, &self.title(), &subtitle)?;

        let scans = self.records.iter().flat_map(|r| r.scan.iter());
        let (r_low, r_high) =
            scans
                .clone()
                .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), s| {
                    (
                        lo.min(s.emitter_resistance_ohm),
                        hi.max(s.emitter_resistance_ohm),
                    )
                });
        let margins = scans
            .clone()
            .flat_map(|s| s.margins.iter().flatten().copied())
            .filter(|m| m.is_finite());
        let (m_low, m_high) = margins.fold((0.0f64, 0.0f64), |(lo, hi), m| (lo.min(m), hi.max(m)));
        let (y_low, y_high) = db_span(m_low.max(-80.0) - 5.0, m_high.min(80.0) + 5.0, 10.0);
        let (g_low, g_high) = scans
            .flat_map(|s| s.gain_db)
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), g| {
                (lo.min(g), hi.max(g))
            });
        let (g_low, g_high) = if g_low <= g_high {
            (g_low, g_high)
        } else {
            (0.0, 1.0)
        };
        let g_pad = nice_ceiling(((g_high - g_low) * 0.1).max(1.0));
        let (g_low, g_high) = db_span(g_low - g_pad, g_high + g_pad, g_pad);

        let mut chart = house_chart(&body, 24, 96)
            .right_y_label_area_size(100)
            .build_cartesian_2d(r_low..r_high, y_low..y_high)?
            .set_secondary_coord(r_low..r_high, g_low..g_high);
        mesh_style(&mut chart.configure_mesh())
            .x_desc("emitter resistance per side R_E (Ω)")
            .y_desc("budget margin (dB)")
            .x_label_formatter(&|v| si(*v, "").trim().to_owned())
            .y_label_formatter(&|v| num(*v, 0))
            .draw()?;
        chart
            .configure_secondary_axes()
            .axis_style(INK.stroke_width(2))
            .label_style(text(TICK_PX, INK))
            .axis_desc_style(bold(AXIS_PX).color(&INK))
            .y_desc("small-signal gain (dB)")
            .y_label_formatter(&|v| num(*v, 0))
            .draw()?;

        chart.draw_series(std::iter::once(Rectangle::new(
            [(r_low, y_low), (r_high, 0.0)],
            FAIL.mix(0.05).filled(),
        )))?;
        chart.draw_series(std::iter::once(PathElement::new(
            vec![(r_low, 0.0), (r_high, 0.0)],
            INK.stroke_width(2),
        )))?;
        chart.draw_series(self.windows.iter().map(|[low, high]| {
            Rectangle::new([(*low, y_low), (*high, y_high)], PASS.mix(0.08).filled())
        }))?;
        // Values that cannot bias at some temperature (the tail node below the tail source's
        // compliance, or collectors below their bases with a held gain) were not solved: shade
        // them and say why the curves stop.
        let unbiased_from = self
            .records
            .iter()
            .filter_map(|r| {
                r.scan
                    .iter()
                    .find(|s| s.gain_db.is_none() || s.tail_headroom_v.is_some_and(|t| t < 0.0))
                    .map(|s| s.emitter_resistance_ohm)
            })
            .reduce(f64::min);
        if let Some(from) = unbiased_from {
            chart.draw_series(std::iter::once(Rectangle::new(
                [(from, y_low), (r_high, y_high)],
                INK.mix(0.07).filled(),
            )))?;
            chart.draw_series(std::iter::once(Text::new(
                "cannot bias: not solved",
                (
                    from + 0.01 * (r_high - r_low),
                    y_high - 0.03 * (y_high - y_low),
                ),
                bold(LEGEND_PX).color(&INK.mix(0.7)),
            )))?;
        }

        let line_count = self
            .records
            .iter()
            .flat_map(|r| r.scan.iter().map(|s| s.margins.len()))
            .max()
            .unwrap_or(0);
        let gain_colour = RGBColor(0x7a, 0x80, 0x8a);
        for (ti, record) in self.records.iter().enumerate() {
            for k in 0..line_count {
                let colour = self
                    .lines
                    .get(k)
                    .map(|l| metric_colour(&l.metric))
                    .unwrap_or(SERIES[k % SERIES.len()]);
                let data: Vec<(f64, Option<f64>)> = record
                    .scan
                    .iter()
                    .map(|s| {
                        (
                            s.emitter_resistance_ohm,
                            s.margins.get(k).copied().flatten(),
                        )
                    })
                    .collect();
                draw_runs(
                    &mut chart,
                    &data,
                    (y_low, y_high),
                    false,
                    pattern(ti),
                    colour.stroke_width(3),
                )?;
            }
            let gain: Vec<(f64, f64)> = record
                .scan
                .iter()
                .filter_map(|s| s.gain_db.map(|g| (s.emitter_resistance_ohm, g)))
                .collect();
            chart.draw_secondary_series(std::iter::once(dashed(
                gain,
                pattern(ti),
                gain_colour.mix(0.7).stroke_width(2),
            )))?;
            if let Some(re) = record.emitter_resistance_ohm {
                let colour = if record.met { PASS } else { FAIL };
                chart.draw_series(std::iter::once(PathElement::new(
                    vec![(re, y_low), (re, y_high)],
                    colour.stroke_width(3),
                )))?;
                if let Some(g) = record.gain_db {
                    chart.draw_secondary_series(std::iter::once(
                        EmptyElement::at((re, g))
                            + Circle::new((0, 0), 8, PAPER.filled())
                            + Circle::new((0, 0), 6, gain_colour.filled()),
                    ))?;
                }
                let top = chart.backend_coord(&(re, y_high));
                backed_label(
                    root,
                    &format!("R_E = {} at {}", si(re, "Ω"), celsius(record.temperature_c)),
                    (top.0 + 10, top.1 + 18 + 26 * ti as i32),
                    bold(LEGEND_PX).color(&colour),
                    false,
                )?;
            }
        }
        for k in 0..line_count {
            // A yield line has no margin per trial value: nothing drawn, nothing to label.
            if self.lines.get(k).is_some_and(|l| l.metric == "yield") {
                continue;
            }
            let colour = self
                .lines
                .get(k)
                .map(|l| metric_colour(&l.metric))
                .unwrap_or(SERIES[k % SERIES.len()]);
            legend_entry(
                &mut chart,
                &self.line_label(k),
                pattern(0),
                colour.stroke_width(3),
                None,
            )?;
        }
        legend_entry(
            &mut chart,
            "small-signal gain (right)",
            pattern(0),
            gain_colour.mix(0.7).stroke_width(2),
            Some(Marker::Circle),
        )?;
        temperature_key(&mut chart, &temps)?;
        legend(&mut chart, SeriesLabelPosition::LowerRight)?;
        Ok(())
    }
}
