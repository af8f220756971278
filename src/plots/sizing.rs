//! Sizing: the margin of each budget line versus emitter resistance, the chosen value marked,
//! and the small-signal gain it costs on a second axis.

use super::axis::Axis;
use super::key::{draw_key, split, Key, Swatch, VerdictRow};
use super::style::*;
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
    line_count: usize,
    x: Axis,
    y: Axis,
    y2: Axis,
    /// Ranges of R_E usable at every temperature, Ω (shaded).
    windows: Vec<[f64; 2]>,
}

const GAIN_COLOUR: RGBColor = RGBColor(0x7a, 0x80, 0x8a);

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
            .filter(|b| {
                b.stage == stage && b.temperature_c == first.temperature_c && is_typical(&b.corner)
            })
            .cloned()
            .collect();
        let scans = records.iter().flat_map(|r| r.scan.iter());
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
        let y = Axis::linear_step(m_low.max(-80.0) - 5.0, m_high.min(80.0) + 5.0, 10.0);
        let (g_low, g_high) = scans
            .clone()
            .filter_map(|s| s.gain_db)
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), g| {
                (lo.min(g), hi.max(g))
            });
        // Every value unsolved (none biases): a unit span keeps the axis drawable.
        let (g_low, g_high) = if g_low <= g_high {
            (g_low, g_high)
        } else {
            (0.0, 1.0)
        };
        let y2 = Axis::linear(g_low - 1.0, g_high + 1.0, 6);
        let x = Axis::linear_exact(r_low, r_high, 6).in_unit("Ω");
        let line_count = scans.map(|s| s.margins.len()).max().unwrap_or(0);
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
            line_count,
            x,
            y,
            y2,
            windows,
        })
    }

    fn line_colour(&self, index: usize) -> RGBColor {
        self.lines
            .get(index)
            .map(|l| metric_colour(&l.metric))
            .unwrap_or(SERIES[index % SERIES.len()])
    }

    fn line_label(&self, index: usize) -> String {
        match self.lines.get(index) {
            Some(line) => {
                let at = line
                    .at_v
                    .map(|a| format!(" at {}", si_exact(a, "V")))
                    .unwrap_or_default();
                // A metric that is itself a margin is not called "… margin margin".
                let name = metric_label(&line.metric);
                let suffix = if name.ends_with("margin") {
                    ""
                } else {
                    " margin"
                };
                format!(
                    "{name}{suffix} ({}{at})",
                    limit_text(&line.kind, line.limit, &line.unit),
                )
            }
            None => format!("line {}", index + 1),
        }
    }
}

impl SizingPlot {
    /// The least emitter resistance at which the stage cannot bias at some temperature.
    fn unbiased_from(&self) -> Option<f64> {
        self.records
            .iter()
            .filter_map(|r| {
                r.scan
                    .iter()
                    .find(|s| s.gain_db.is_none() || s.tail_headroom_v.is_some_and(|t| t < 0.0))
                    .map(|s| s.emitter_resistance_ohm)
            })
            .reduce(f64::min)
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
            "Margin of each budget line of “{}” on the stage as planned with R_E swept (left axis, dB, positive passes; the worst corner at each value) and small-signal gain (right axis) versus emitter resistance per side; the vertical lines mark each temperature's least value, the green band the values usable at every temperature, and a grey band the values at which the stage cannot bias (not solved).",
            self.stage
        )
    }
    fn key(&self) -> Key {
        let temps: Vec<f64> = self.records.iter().map(|r| r.temperature_c).collect();
        let mut key = Key::default();
        for k in 0..self.line_count {
            // A yield line has no margin per trial value: nothing drawn, nothing to label.
            if self.lines.get(k).is_some_and(|l| l.metric == "yield") {
                continue;
            }
            key.entry(
                Swatch::line(self.line_colour(k), 3, None),
                self.line_label(k),
            );
        }
        if !self.windows.is_empty() {
            key.entry(
                Swatch::Band {
                    colour: PASS,
                    alpha: 0.08,
                },
                "R_E usable at every temperature",
            );
        }
        if let Some(from) = self.unbiased_from() {
            key.entry(
                Swatch::Band {
                    colour: INK,
                    alpha: 0.07,
                },
                format!(
                    "from {}: the stage cannot bias (tail node below the source's compliance); not solved",
                    si(from, "Ω")
                ),
            );
        }
        key.entry(
            Swatch::Line {
                colour: GAIN_COLOUR,
                alpha: 0.7,
                width: 2,
                pattern: pattern(0),
                marker: Some(Marker::Circle),
            },
            "small-signal gain (right axis)",
        );
        key.temperatures(&temps);
        key.verdict_heading = "Least R_E per temperature".into();
        key.verdicts = self
            .records
            .iter()
            .enumerate()
            .map(|(ti, r)| {
                let colour = if r.met { PASS } else { FAIL };
                let binding = if r.binding_corner.is_empty() || is_typical(&r.binding_corner) {
                    metric_label(&r.binding_metric)
                } else {
                    format!(
                        "{} in the {} corner",
                        metric_label(&r.binding_metric),
                        r.binding_corner
                    )
                };
                VerdictRow {
                    swatch: Swatch::Line {
                        colour,
                        alpha: 1.0,
                        width: 3,
                        pattern: pattern(ti),
                        marker: None,
                    },
                    line: match r.emitter_resistance_ohm {
                        Some(re) => {
                            format!("{}: R_E = {}", celsius(r.temperature_c), si_short(re, "Ω"))
                        }
                        None => format!("{}: no value", celsius(r.temperature_c)),
                    },
                    detail: format!(
                        "binding {binding} · worst margin {} dB{}",
                        num(r.best_margin, 1),
                        r.gain_db
                            .map(|g| format!(" · gain {} dB", num(g, 1)))
                            .unwrap_or_default()
                    ),
                    verdict: if r.met { "met" } else { "not met" }.into(),
                    pass: r.met,
                }
            })
            .collect();
        key
    }
    fn axes(&self) -> Vec<Axis> {
        vec![self.x.clone(), self.y.clone(), self.y2.clone()]
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> DrawResult {
        let subtitle = self
            .records
            .iter()
            .map(|r| match (r.met, r.emitter_resistance_ohm) {
                (true, Some(re)) => {
                    format!("{}: R_E = {}", celsius(r.temperature_c), si(re, "Ω"))
                }
                (_, Some(re)) => format!(
                    "{}: not met, best R_E = {}",
                    celsius(r.temperature_c),
                    si(re, "Ω")
                ),
                _ => format!("{}: not met", celsius(r.temperature_c)),
            })
            .collect::<Vec<_>>()
            .join(" · ");
        // The binding line of each temperature is in the key's verdicts.
        let subtitle = format!("{subtitle} · binding lines in the key");
        let body = frame(root, &self.title(), &subtitle)?;
        let (plot, side) = split(&body);
        draw_key(&side, &self.key())?;
        let (x, y, y2) = (&self.x, &self.y, &self.y2);
        let (r_low, r_high, y_low, y_high) = (x.low, x.high, y.low, y.high);

        let mut chart = house_chart(&plot, 24, 96)
            .right_y_label_area_size(100)
            .build_cartesian_2d(x.linear_range(), y.linear_range())?
            .set_secondary_coord(x.linear_range(), y2.linear_range());
        mesh_style(&mut chart.configure_mesh())
            .x_desc("emitter resistance per side R_E")
            .y_desc("budget margin (dB)")
            .x_label_formatter(&|v| x.label(*v))
            .y_label_formatter(&|v| y.label(*v))
            .draw()?;
        chart
            .configure_secondary_axes()
            .axis_style(INK.stroke_width(2))
            .label_style(text(TICK_PX, INK))
            .axis_desc_style(bold(AXIS_PX).color(&INK))
            .y_desc("small-signal gain (dB)")
            .y_label_formatter(&|v| y2.label(*v))
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
        // compliance) were not solved: shade them; the key says why the curves stop.
        if let Some(from) = self.unbiased_from() {
            chart.draw_series(std::iter::once(Rectangle::new(
                [(from, y_low), (r_high, y_high)],
                INK.mix(0.07).filled(),
            )))?;
        }

        for (ti, record) in self.records.iter().enumerate() {
            for k in 0..self.line_count {
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
                    self.line_colour(k).stroke_width(3),
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
                GAIN_COLOUR.mix(0.7).stroke_width(2),
            )))?;
            if let Some(re) = record.emitter_resistance_ohm {
                let colour = if record.met { PASS } else { FAIL };
                chart.draw_series(std::iter::once(dashed(
                    vec![(re, y_low), (re, y_high)],
                    pattern(ti),
                    colour.stroke_width(3),
                )))?;
                if let Some(g) = record.gain_db {
                    chart.draw_secondary_series(std::iter::once(
                        EmptyElement::at((re, g))
                            + Circle::new((0, 0), 8, PAPER.filled())
                            + Circle::new((0, 0), 6, GAIN_COLOUR.filled()),
                    ))?;
                }
            }
        }
        Ok(())
    }
}
