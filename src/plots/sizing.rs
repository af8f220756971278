//! Sizing: the margin of each budget line versus emitter resistance, the chosen value marked,
//! and the small-signal gain it costs on a second axis.

use super::axis::{Axis, Ticked};
use super::key::{draw_key, split, Key, Swatch, VerdictRow};
use super::style::*;
use super::verdicts::{lines_of, LineChecks};
use super::{DrawResult, Drawing, PlotKind};
use crate::report::{BudgetRecord, Report, SizingRecord};
use plotters::coord::Shift;
use plotters::prelude::*;

/// Opacity of the band of values at which no temperature can bias: nothing is drawn inside it,
/// so it can be dark enough to tell from the usable band (CIE 1976 ΔE ≈ 24 on white).
const UNBIASED_ALPHA: f64 = 0.35;
/// Colour of the line where a temperature stops biasing: a dark brown no series, temperature
/// or verdict of this figure uses.
const BIAS_STOP: RGBColor = RGBColor(0x6b, 0x3e, 0x1f);

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
    /// Whether each line's margin is in volts (drawn in the lower panel on its own axis).
    volts: Vec<bool>,
    /// The volts panel's axis (mV), when a line's margin is in volts.
    y_volts: Option<Axis>,
    /// Yield lines, judged on the built design (`<stage>@sized`, or the stage as planned).
    yield_lines: Vec<LineChecks>,
    /// The stage the yield lines were judged on.
    yield_stage: String,
    /// R_E of the design to build, Ω (`None`: the yield lines are the planned stage's).
    built_ohm: Option<f64>,
}

const GAIN_COLOUR: RGBColor = RGBColor(0x7a, 0x80, 0x8a);
/// Opacity of the bars along the top that mark values at which the stage saturates.
const SATURATION_BAR_ALPHA: f64 = 0.55;
/// Width of those bars, px.
const SATURATION_BAR_PX: u32 = 7;
/// Share of the plot's height given to the volts panel.
const VOLTS_PANEL_SHARE: f64 = 0.28;

/// Where a line's dB margins lie against the axis: all above, all below, or (partly) on it.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum OffScale {
    /// Every finite margin is above the axis's top.
    Above,
    /// Every finite margin is below the axis's bottom.
    Below,
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
        let line_count = scans.clone().map(|s| s.margins.len()).max().unwrap_or(0);
        let volts: Vec<bool> = (0..line_count)
            .map(|k| lines.get(k).is_some_and(|l| l.margin_unit == "V"))
            .collect();
        let margins_where = |in_volts: bool| {
            scans
                .clone()
                .flat_map(|s| {
                    s.margins
                        .iter()
                        .enumerate()
                        .filter(|(k, _)| volts.get(*k).copied().unwrap_or(false) == in_volts)
                        .filter_map(|(_, m)| *m)
                        .collect::<Vec<f64>>()
                })
                .filter(|m| m.is_finite())
                .fold((0.0f64, 0.0f64), |(lo, hi), m| (lo.min(m), hi.max(m)))
        };
        let (m_low, m_high) = margins_where(false);
        let y = Axis::linear_step(m_low.max(-80.0) - 5.0, m_high.min(80.0) + 5.0, 10.0);
        let y_volts = volts.iter().any(|v| *v).then(|| {
            let (v_low, v_high) = margins_where(true);
            let pad = 0.08 * (v_high - v_low).max(1e-3);
            Axis::linear(1e3 * (v_low - pad), 1e3 * (v_high + pad), 4)
        });
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
        let windows = report
            .verdict
            .recommended
            .iter()
            .flat_map(|r| &r.stages)
            .filter(|s| s.stage == stage)
            .flat_map(|s| s.window_ohm.iter().copied())
            .collect();
        // Yield is judged on the design to build (a sizing trial draws no population).
        let recommended = report
            .verdict
            .recommended
            .as_ref()
            .and_then(|r| r.stages.iter().find(|s| s.stage == stage))
            .filter(|r| report.budget.iter().any(|b| b.stage == r.evaluated_as));
        let built = recommended
            .map(|r| r.evaluated_as.clone())
            .unwrap_or_else(|| stage.to_owned());
        let built_ohm = recommended.map(|r| r.emitter_resistance_ohm);
        let yield_lines: Vec<LineChecks> = lines_of(report, &built)
            .into_iter()
            .filter(|l| l.line().metric == "yield")
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
            volts,
            y_volts,
            yield_lines,
            yield_stage: built,
            built_ohm,
        })
    }

    /// Where line `k`'s margins lie against the dB axis when none is on it (`None`: some or
    /// all of the line is drawn, or it is not a dB line).
    pub fn off_scale(&self, k: usize) -> Option<OffScale> {
        if self.volts.get(k).copied().unwrap_or(false) {
            return None;
        }
        let values: Vec<f64> = self
            .records
            .iter()
            .flat_map(|r| r.scan.iter())
            .filter_map(|s| s.margins.get(k).copied().flatten())
            .filter(|m| m.is_finite())
            .collect();
        if values.is_empty() {
            None
        } else if values.iter().all(|m| *m > self.y.high) {
            Some(OffScale::Above)
        } else if values.iter().all(|m| *m < self.y.low) {
            Some(OffScale::Below)
        } else {
            None
        }
    }

    /// The colour of a line whose margin is in volts: a series colour no other line of the
    /// figure uses (its metric's colour is a distortion metric's).
    fn volts_colour(&self) -> RGBColor {
        let taken: Vec<RGBColor> = (0..self.line_count)
            .filter(|k| !self.volts.get(*k).copied().unwrap_or(false))
            .map(|k| self.line_colour(k))
            .collect();
        [4usize, 5, 2, 3, 1, 0, 6]
            .into_iter()
            .map(|i| SERIES[i])
            .find(|c| !taken.contains(c))
            .unwrap_or(SERIES[4])
    }

    fn drawn_colour(&self, k: usize) -> RGBColor {
        if self.volts.get(k).copied().unwrap_or(false) {
            self.volts_colour()
        } else {
            self.line_colour(k)
        }
    }

    /// Per temperature (index), the least scanned R_E at which the stage cannot bias.
    fn unbiased_onsets(&self) -> Vec<(usize, f64)> {
        self.records
            .iter()
            .enumerate()
            .filter_map(|(ti, r)| {
                r.scan
                    .iter()
                    .find(|s| s.gain_db.is_none() || s.tail_headroom_v.is_some_and(|t| t < 0.0))
                    .map(|s| (ti, s.emitter_resistance_ohm))
            })
            .collect()
    }

    /// Per temperature (index), the runs of scanned R_E at which the stage saturates at some
    /// drive it was evaluated at (collector-base junction forward-biased), as `[from, to]`.
    pub fn saturating_runs(&self) -> Vec<(usize, Vec<[f64; 2]>)> {
        self.records
            .iter()
            .enumerate()
            .map(|(ti, r)| {
                let mut runs: Vec<[f64; 2]> = Vec::new();
                let mut open: Option<[f64; 2]> = None;
                for s in &r.scan {
                    let saturates = s.collector_base_margin_v.is_some_and(|m| m < 0.0);
                    match (saturates, open.as_mut()) {
                        (true, Some(run)) => run[1] = s.emitter_resistance_ohm,
                        (true, None) => {
                            open = Some([s.emitter_resistance_ohm, s.emitter_resistance_ohm])
                        }
                        (false, _) => runs.extend(open.take()),
                    }
                }
                runs.extend(open);
                (ti, runs)
            })
            .filter(|(_, runs)| !runs.is_empty())
            .collect()
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
                let scale = if line.margin_unit == "V" {
                    ", lower panel"
                } else {
                    ""
                };
                let off = match self.off_scale(index) {
                    Some(OffScale::Above) => format!(
                        " — off scale: above {} dB at every R_E",
                        num(self.y.high, 0)
                    ),
                    Some(OffScale::Below) => {
                        format!(" — off scale: below {} dB at every R_E", num(self.y.low, 0))
                    }
                    None => String::new(),
                };
                format!(
                    "{name}{suffix} ({}{at}{scale}){off}",
                    limit_text(&line.kind, line.limit, &line.unit),
                )
            }
            None => format!("line {}", index + 1),
        }
    }
}

impl SizingPlot {
    /// The least emitter resistance from which the stage cannot bias at any temperature
    /// (`None` when some temperature biases over the whole range).
    fn unbiased_everywhere_from(&self) -> Option<f64> {
        let onsets = self.unbiased_onsets();
        (onsets.len() == self.records.len())
            .then(|| onsets.iter().map(|o| o.1).reduce(f64::max))
            .flatten()
    }
}

/// A temperature's row detail: the binding line with its own margin (in its unit), the least
/// dB margin where that is another line's, the gain, and saturation at the chosen value.
pub fn per_temperature_detail(r: &SizingRecord, binding: &str) -> String {
    let own = match (r.binding_margin, r.binding_margin_unit.as_str()) {
        (Some(m), "V") => Some(format!("{} mV", num(m * 1e3, 1))),
        (Some(m), _) => Some(format!("{} dB", num(m, 1))),
        (None, _) => None,
    };
    let mut parts = match own {
        Some(own) => vec![format!("binds: {binding}, {own}")],
        None => vec![format!("binds: {binding}")],
    };
    let binding_in_db = r.binding_margin.is_some() && r.binding_margin_unit != "V";
    if !binding_in_db && r.best_margin.is_finite() {
        parts.push(format!("least dB margin {} dB", num(r.best_margin, 1)));
    }
    if let Some(g) = r.gain_db {
        parts.push(format!("gain {} dB", num(g, 1)));
    }
    if let Some(cb) = r.collector_base_margin_v.filter(|m| *m < 0.0) {
        parts.push(format!(
            "saturates (collector-base forward-biased by {} mV)",
            num(-cb * 1e3, 0)
        ));
    }
    parts.join(" · ")
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
            "Margin of each budget line of “{}” on the stage as planned with R_E swept (left axis, dB, positive passes; the worst corner at each value) and small-signal gain (right axis) versus emitter resistance per side; a margin in volts (collector-base margin) has a panel and axis of its own below; the vertical lines mark each temperature's least value, the green band the values usable at every temperature, the grey band the values at which the stage cannot bias at any temperature (the tail node below the tail source's compliance; not solved), a muted line where each temperature stops biasing, and bars along the top the values at which the stage saturates at a drive it was judged at.",
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
                Swatch::line(self.drawn_colour(k), 3, None),
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
        let onsets = self.unbiased_onsets();
        if !onsets.is_empty() {
            let each = onsets
                .iter()
                .map(|(ti, from)| format!("{} {}", celsius(temps[*ti]), si(*from, "Ω")))
                .collect::<Vec<_>>()
                .join(", ");
            if let Some(from) = self.unbiased_everywhere_from() {
                key.entry(
                    Swatch::Band {
                        colour: INK,
                        alpha: UNBIASED_ALPHA,
                    },
                    format!("from {} no temperature can bias: not solved", si(from, "Ω")),
                );
            }
            key.entry(
                Swatch::Line {
                    colour: BIAS_STOP,
                    alpha: 1.0,
                    width: 2,
                    pattern: pattern(0),
                    marker: None,
                },
                format!("stops biasing (curves end; line style per temperature): {each}"),
            );
        }
        let saturating = self.saturating_runs();
        if !saturating.is_empty() {
            key.entry(
                Swatch::Line {
                    colour: MUTED,
                    alpha: SATURATION_BAR_ALPHA,
                    width: SATURATION_BAR_PX,
                    pattern: pattern(0),
                    marker: None,
                },
                "top bars: the stage saturates, per temperature",
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
                        "{}, {} corner",
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
                    detail: per_temperature_detail(r, &binding),
                    verdict: if r.met { "met" } else { "not met" }.into(),
                    pass: r.met,
                }
            })
            .collect();
        for line in &self.yield_lines {
            let mut row = line.row(Swatch::Verdict { pass: line.pass() }, false);
            row.line = match self.built_ohm {
                Some(re) => format!("{} · built R_E = {}", row.line, si_short(re, "Ω")),
                None => format!("{} · as planned", row.line),
            };
            key.verdicts.push(row);
        }
        if !self.yield_lines.is_empty() {
            key.notes.push(format!(
                "Sizing trials draw no population: yield is judged on “{}” only.",
                self.yield_stage
            ));
        }
        key
    }
    fn axes(&self) -> Vec<Axis> {
        let mut axes = vec![self.x.clone(), self.y.clone(), self.y2.clone()];
        axes.extend(self.y_volts.clone());
        axes
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
        // A margin in volts gets a panel of its own under the dB panel, on the same R_E axis.
        let (main, lower) = match &self.y_volts {
            Some(_) => {
                let (_, height) = plot.dim_in_pixel();
                let (a, b) =
                    plot.split_vertically(((1.0 - VOLTS_PANEL_SHARE) * height as f64) as u32);
                (a, Some(b))
            }
            None => (plot.clone(), None),
        };

        let mut builder = house_chart(&main, 24, 96);
        if lower.is_some() {
            builder.x_label_area_size(14);
        }
        let mut chart = builder
            .right_y_label_area_size(100)
            .build_cartesian_2d(x.linear_range(), y.linear_range())?
            .set_secondary_coord(x.linear_range(), y2.linear_range());
        // With a lower panel the R_E ticks are labelled once, under it.
        let shared = lower.is_some();
        let x_label = |v: &f64| if shared { String::new() } else { x.label(*v) };
        mesh_style(&mut chart.configure_mesh())
            .x_desc(if shared {
                ""
            } else {
                "emitter resistance per side R_E"
            })
            .y_desc("budget margin (dB)")
            .x_label_formatter(&x_label)
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
        self.draw_r_marks(&mut chart, (y_low, y_high))?;

        for (ti, record) in self.records.iter().enumerate() {
            for k in 0..self.line_count {
                if self.volts.get(k).copied().unwrap_or(false) {
                    continue;
                }
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
            if let (Some(re), Some(g)) = (record.emitter_resistance_ohm, record.gain_db) {
                chart.draw_secondary_series(std::iter::once(
                    EmptyElement::at((re, g))
                        + Circle::new((0, 0), 8, PAPER.filled())
                        + Circle::new((0, 0), 6, GAIN_COLOUR.filled()),
                ))?;
            }
        }
        // Values at which the stage saturates: one bar per temperature along the top.
        let step = self.scan_step();
        for (ti, runs) in self.saturating_runs() {
            let level = y_high - (ti as f64 + 0.8) * 0.022 * (y_high - y_low);
            for [from, to] in runs {
                let (from, to) = if to > from {
                    (from, to)
                } else {
                    (from - 0.5 * step, to + 0.5 * step)
                };
                chart.draw_series(std::iter::once(dashed(
                    vec![(from.max(r_low), level), (to.min(r_high), level)],
                    pattern(ti),
                    MUTED
                        .mix(SATURATION_BAR_ALPHA)
                        .stroke_width(SATURATION_BAR_PX),
                )))?;
            }
        }

        if let (Some(lower), Some(yv)) = (lower, &self.y_volts) {
            // The right margin stands in for the gain axis above, so both panels share R_E.
            let mut volts = house_chart(&lower, 124, 96)
                .margin_top(10)
                .build_cartesian_2d(x.linear_range(), yv.linear_range())?;
            mesh_style(&mut volts.configure_mesh())
                .x_desc("emitter resistance per side R_E")
                .y_desc("margin (mV)")
                .x_label_formatter(&|v| x.label(*v))
                .y_label_formatter(&|v| yv.label(*v))
                .draw()?;
            let (v_low, v_high) = (yv.low, yv.high);
            volts.draw_series(std::iter::once(Rectangle::new(
                [(r_low, v_low), (r_high, 0.0f64.clamp(v_low, v_high))],
                FAIL.mix(0.05).filled(),
            )))?;
            if (v_low..=v_high).contains(&0.0) {
                volts.draw_series(std::iter::once(PathElement::new(
                    vec![(r_low, 0.0), (r_high, 0.0)],
                    INK.stroke_width(2),
                )))?;
            }
            self.draw_r_marks(&mut volts, (v_low, v_high))?;
            let colour = self.volts_colour();
            for (ti, record) in self.records.iter().enumerate() {
                for k in (0..self.line_count).filter(|k| self.volts[*k]) {
                    let data: Vec<(f64, Option<f64>)> = record
                        .scan
                        .iter()
                        .map(|s| {
                            (
                                s.emitter_resistance_ohm,
                                s.margins.get(k).copied().flatten().map(|m| 1e3 * m),
                            )
                        })
                        .collect();
                    draw_runs(
                        &mut volts,
                        &data,
                        (v_low, v_high),
                        false,
                        pattern(ti),
                        colour.stroke_width(3),
                    )?;
                }
            }
        }
        Ok(())
    }
}

type RChart<'a, DB> = ChartContext<
    'a,
    DB,
    Cartesian2d<
        Ticked<plotters::coord::types::RangedCoordf64>,
        Ticked<plotters::coord::types::RangedCoordf64>,
    >,
>;

impl SizingPlot {
    /// Spacing of the uniform scan, Ω (the width given to a single saturating value).
    fn scan_step(&self) -> f64 {
        self.records
            .iter()
            .find(|r| r.scan.len() > 1)
            .map(|r| (r.scan[1].emitter_resistance_ohm - r.scan[0].emitter_resistance_ohm).abs())
            .unwrap_or(0.0)
    }

    /// What both panels mark along R_E: the usable windows, the values that cannot bias, and
    /// each temperature's least value.
    fn draw_r_marks<DB: DrawingBackend>(
        &self,
        chart: &mut RChart<'_, DB>,
        (low, high): (f64, f64),
    ) -> DrawResult {
        let r_high = self.x.high;
        chart.draw_series(self.windows.iter().map(|[from, to]| {
            Rectangle::new([(*from, low), (*to, high)], PASS.mix(0.08).filled())
        }))?;
        // Values at which no temperature can bias (the tail node below the tail source's
        // compliance) were not solved: shaded; where each temperature stops, a muted line.
        if let Some(from) = self.unbiased_everywhere_from() {
            chart.draw_series(std::iter::once(Rectangle::new(
                [(from, low), (r_high, high)],
                INK.mix(UNBIASED_ALPHA).filled(),
            )))?;
        }
        for (ti, from) in self.unbiased_onsets() {
            chart.draw_series(std::iter::once(dashed(
                vec![(from, low), (from, high)],
                pattern(ti),
                BIAS_STOP.stroke_width(2),
            )))?;
        }
        for (ti, record) in self.records.iter().enumerate() {
            if let Some(re) = record.emitter_resistance_ohm {
                let colour = if record.met { PASS } else { FAIL };
                chart.draw_series(std::iter::once(dashed(
                    vec![(re, low), (re, high)],
                    pattern(ti),
                    colour.stroke_width(3),
                )))?;
            }
        }
        Ok(())
    }
}
