//! Budget lines as figures read them: the records of one line grouped across temperatures and
//! corners, the verdict row that names its worst case, and the margins figure that shows every
//! line of a stage whatever its metric and frequency.

use super::axis::Axis;
use super::key::{draw_key, hatch_pixels, split, wrap, Key, Swatch, VerdictRow};
use super::style::*;
use super::{DrawResult, Drawing, PlotKind};
use crate::report::{BudgetRecord, Report};
use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

/// One budget line of one stage, checked at every temperature and corner.
#[derive(Debug, Clone, PartialEq)]
pub struct LineChecks {
    /// The checks, in report order.
    pub records: Vec<BudgetRecord>,
}

/// Draws each line's limit mask on `chart` (x from `x.0` to the line's amplitude, the right
/// edge `x.1` when it has none): a `max` line hatches the region above its limit, a `min`
/// line the region below, bounded by the limit and amplitude in the metric's colour.
pub fn draw_limit_masks<'a, DB, X, Y>(
    root: &DrawingArea<DB, Shift>,
    chart: &mut ChartContext<'a, DB, Cartesian2d<X, Y>>,
    lines: &[LineChecks],
    x: (f64, f64),
    (y_low, y_high): (f64, f64),
) -> DrawResult
where
    DB: DrawingBackend + 'a,
    X: Ranged<ValueType = f64>,
    Y: Ranged<ValueType = f64>,
{
    for line in lines {
        let l = line.line();
        let at = l.at_v.unwrap_or(x.1);
        let colour = metric_colour(&l.metric);
        let limit = l.limit.clamp(y_low, y_high);
        let beyond = if l.kind == "max" { y_high } else { y_low };
        hatch_pixels(
            root,
            chart.backend_coord(&(x.0, limit)),
            chart.backend_coord(&(at, beyond)),
            colour,
        )?;
        chart.draw_series(std::iter::once(PathElement::new(
            vec![(x.0, limit), (at, limit), (at, beyond)],
            colour.stroke_width(2),
        )))?;
    }
    Ok(())
}

impl LineChecks {
    /// The first check (every check of a line shares its metric, limit, amplitude, frequency).
    pub fn line(&self) -> &BudgetRecord {
        &self.records[0]
    }

    /// The check with the least margin (a check without a margin counts as the most margin).
    pub fn worst(&self) -> &BudgetRecord {
        self.records
            .iter()
            .min_by(|a, b| {
                a.margin
                    .unwrap_or(f64::INFINITY)
                    .total_cmp(&b.margin.unwrap_or(f64::INFINITY))
            })
            .unwrap_or(&self.records[0])
    }

    /// Whether every check passes.
    pub fn pass(&self) -> bool {
        self.records.iter().all(|r| r.pass)
    }

    /// Whether the checks span process corners other than the typical one.
    pub fn has_corners(&self) -> bool {
        self.records.iter().any(|r| !is_typical(&r.corner))
    }

    /// The line as read aloud, without its frequency: `HD3 ≤ −60 dBc at 20 mV`, and for a
    /// line in dBm `IIP3 ≥ −10 dBm (100 mV)`.
    pub fn describe(&self) -> String {
        let line = self.line();
        let limit = match line.limit_dbm {
            Some(dbm) => format!(
                "{} ({})",
                limit_text(&line.kind, dbm, "dBm"),
                si_short(line.limit, &line.unit)
            ),
            None => limit_text(&line.kind, line.limit, &line.unit),
        };
        let at = line
            .at_v
            .map(|a| format!(" at {}", si_exact(a, "V")))
            .unwrap_or_default();
        format!("{} {limit}{at}", metric_label(&line.metric))
    }

    /// [`LineChecks::describe`] with the line's frequency.
    pub fn describe_with_frequency(&self) -> String {
        format!(
            "{}, {}",
            self.describe(),
            si_exact(self.line().frequency_hz, "Hz")
        )
    }

    /// Where a check was made: `−40 °C` or `−40 °C, fast corner`.
    pub fn case(&self, record: &BudgetRecord) -> String {
        if self.has_corners() {
            format!(
                "{}, {} corner",
                celsius(record.temperature_c),
                record.corner
            )
        } else {
            celsius(record.temperature_c)
        }
    }

    /// The worst case in words: its value, where, its margin and how many checks pass.
    pub fn worst_text(&self) -> String {
        let worst = self.worst();
        let value = match (worst.value, worst.value_dbm) {
            (Some(v), Some(dbm)) => format!("{} ({})", level(dbm, "dBm"), si_short(v, &worst.unit)),
            (Some(v), None) => level(v, &worst.unit),
            (None, _) if worst.unit == "dBc" => "below the analysis floor".into(),
            (None, _) => "unbounded".into(),
        };
        let mut text = if self.records.len() > 1 {
            format!("worst {value} at {}", self.case(worst))
        } else {
            format!("{value} at {}", self.case(worst))
        };
        if let Some(words) = margin_words(worst) {
            text.push_str(&format!(" · {words}"));
        }
        if self.records.len() > 1 {
            let passing = self.records.iter().filter(|r| r.pass).count();
            text.push_str(&format!(
                " · {passing} of {} checks pass",
                self.records.len()
            ));
        }
        text
    }

    /// The verdict row of the line with `swatch` as its symbol.
    pub fn row(&self, swatch: Swatch, with_frequency: bool) -> VerdictRow {
        VerdictRow {
            swatch,
            line: if with_frequency {
                self.describe_with_frequency()
            } else {
                self.describe()
            },
            detail: self.worst_text(),
            verdict: if self.pass() { "pass" } else { "FAIL" }.into(),
            pass: self.pass(),
        }
    }
}

/// The budget lines of `stage`, each with its checks across temperatures and corners, in plan
/// order.
pub fn lines_of(report: &Report, stage: &str) -> Vec<LineChecks> {
    let mut lines: Vec<LineChecks> = Vec::new();
    for record in report.budget.iter().filter(|b| b.stage == stage) {
        let same = |l: &&mut LineChecks| {
            let first = l.line();
            first.metric == record.metric
                && first.kind == record.kind
                && first.limit == record.limit
                && first.at_v == record.at_v
                && first.frequency_hz == record.frequency_hz
        };
        match lines.iter_mut().find(|l| same(l)) {
            Some(line) => line.records.push(record.clone()),
            None => lines.push(LineChecks {
                records: vec![record.clone()],
            }),
        }
    }
    lines
}

/// Whether a line is drawn against amplitude in dBc (hdN, THD, IM3).
pub fn is_amplitude_line(line: &BudgetRecord) -> bool {
    line.at_v.is_some() && line.unit == "dBc"
}

/// Whether a record's margin is in dB (so it can share a dB axis with other lines).
pub fn margin_in_db(record: &BudgetRecord) -> bool {
    record.margin_unit == "dB"
}

/// A record's margin in words, in its own unit: `margin 1.5 dB`, `margin −594 mV`,
/// `margin −30.9 %-points` for a yield, with `≥` when it is only a lower bound.
pub fn margin_words(record: &BudgetRecord) -> Option<String> {
    let m = record.margin.filter(|m| m.is_finite())?;
    let value = match record.margin_unit.as_str() {
        "dB" => format!("{} dB", num(m, 1)),
        crate::report::YIELD_UNIT => format!("{} %-points", num(100.0 * m, 1)),
        unit => si_short(m, unit),
    };
    let bound = if record.margin_at_least { "≥ " } else { "" };
    Some(format!("margin {bound}{value}"))
}

/// Where a margin sits on the margins figure's dB axis. A dB margin is drawn as it is; a
/// margin in another unit (volts, a yield's fraction) is drawn on its own scale: its share of
/// the limit, the whole side of the axis standing for the whole limit (its true value and unit
/// are in the key).
pub fn margin_position(record: &BudgetRecord, margin: f64, axis: &Axis) -> f64 {
    if margin_in_db(record) {
        return margin.clamp(axis.low, axis.high);
    }
    let share = if record.limit.abs() > 0.0 {
        (margin / record.limit.abs()).clamp(-1.0, 1.0)
    } else {
        margin.signum()
    };
    if share < 0.0 {
        share * -axis.low
    } else {
        share * axis.high
    }
}

/// Every budget line of a stage as a horizontal bar of its margin (dB) per temperature and
/// corner, the limit at zero: the one figure where each line appears whatever its metric and
/// frequency.
pub struct MarginsPlot {
    stage: String,
    slug: String,
    lines: Vec<LineChecks>,
    /// The cases (temperature, corner) in report order.
    cases: Vec<(f64, String)>,
    /// The report's temperatures (they fix each temperature's colour).
    plan_temps: Vec<f64>,
    axis: Axis,
}

/// Margins beyond this are drawn to the axis end (their value is in the table).
const MARGIN_CLIP_DB: f64 = 60.0;
/// Gap between a row label and the plot, px.
const LABEL_GAP_PX: u32 = 12;
/// Narrowest row-label column, px.
const MIN_LABEL_PX: u32 = 200;
/// Line pitch of a row label, px.
const LABEL_LINE_PX: i32 = 23;

impl MarginsPlot {
    /// The figure, if the stage has budget lines.
    pub fn new(report: &Report, stage: &str, slug: &str) -> Option<Self> {
        let lines = lines_of(report, stage);
        if lines.is_empty() {
            return None;
        }
        let mut cases: Vec<(f64, String)> = Vec::new();
        for r in lines.iter().flat_map(|l| &l.records) {
            let case = (r.temperature_c, r.corner.clone());
            if !cases.contains(&case) {
                cases.push(case);
            }
        }
        let margins = lines
            .iter()
            .flat_map(|l| &l.records)
            .filter(|r| margin_in_db(r))
            .filter_map(|r| r.margin)
            .map(|m| m.clamp(-MARGIN_CLIP_DB, MARGIN_CLIP_DB));
        let (low, high) = margins.fold((0.0f64, 0.0f64), |(lo, hi), m| (lo.min(m), hi.max(m)));
        let span = (high - low).max(10.0);
        let axis = Axis::linear(low - 0.08 * span, high + 0.08 * span, 8);
        Some(MarginsPlot {
            stage: stage.to_owned(),
            slug: slug.to_owned(),
            lines,
            cases,
            plan_temps: temperatures(report),
            axis,
        })
    }

    fn has_corners(&self) -> bool {
        self.cases.iter().any(|(_, c)| !is_typical(c))
    }

    fn case_label(&self, (t, corner): &(f64, String)) -> String {
        if self.has_corners() {
            format!("{}, {corner}", celsius(*t))
        } else {
            celsius(*t)
        }
    }

    /// How a case's bars look: the colour names the temperature (the report-wide temperature
    /// colour every figure uses); with corners, the fill names the corner (solid for the
    /// first, then a light fill with an outline, then an outline alone), so a colour never
    /// has to be told apart from a paler copy of another.
    fn case_look(&self, index: usize) -> CaseLook {
        let (t, corner) = &self.cases[index];
        let colour = temperature_colour(*t, &self.plan_temps);
        let mut corners: Vec<&str> = Vec::new();
        for (_, cc) in &self.cases {
            if !corners.contains(&cc.as_str()) {
                corners.push(cc);
            }
        }
        let ci = if self.has_corners() {
            corners.iter().position(|c| c == corner).unwrap_or(0)
        } else {
            0
        };
        let (fill, outlined) = [(0.85, false), (0.3, true), (0.0, true), (0.6, true)][ci % 4];
        CaseLook {
            colour,
            fill,
            outlined,
        }
    }
}

/// How the bars of one case (temperature and corner) are drawn.
#[derive(Debug, Clone, Copy)]
struct CaseLook {
    colour: RGBColor,
    /// Opacity of the fill.
    fill: f64,
    /// Whether the bar has an outline in the full colour.
    outlined: bool,
}

impl CaseLook {
    fn swatch(self) -> Swatch {
        if self.outlined {
            Swatch::Outline {
                colour: self.colour,
                fill: self.fill,
            }
        } else {
            Swatch::Band {
                colour: self.colour,
                alpha: self.fill,
            }
        }
    }
}

impl Drawing for MarginsPlot {
    fn kind(&self) -> PlotKind {
        PlotKind::Margins
    }
    fn slug(&self) -> Option<&str> {
        Some(&self.slug)
    }
    fn title(&self) -> String {
        format!("Budget margins · {}", self.stage)
    }
    fn caption(&self) -> String {
        let own_scale = self.lines.iter().any(|l| !margin_in_db(l.line()));
        format!(
            "Margin of every budget line of “{}” in dB (positive passes; zero is the limit), one bar per temperature{}; margins beyond ±{} dB are drawn to the axis end, an arrow marks a margin that is only a lower bound (the value is below the analysis floor){}.",
            self.stage,
            if self.has_corners() { " and process corner" } else { "" },
            MARGIN_CLIP_DB,
            if own_scale {
                "; a hatched bar is a margin not in dB (volts, a yield's percentage points) drawn as its share of the limit, the whole side of the axis being the whole limit, its value in the key"
            } else {
                ""
            }
        )
    }
    fn key(&self) -> Key {
        let mut key = Key::default();
        for (i, case) in self.cases.iter().enumerate() {
            key.entry(self.case_look(i).swatch(), self.case_label(case));
        }
        if self.lines.iter().any(|l| !margin_in_db(l.line())) {
            key.notes.push(
                "Hatched: margin not in dB, drawn as a share of its limit (value in its row)."
                    .into(),
            );
        }
        key.verdict_heading = "Budget lines (worst case)".into();
        key.verdicts = self
            .lines
            .iter()
            .map(|l| l.row(Swatch::Verdict { pass: l.pass() }, true))
            .collect();
        key
    }
    fn axes(&self) -> Vec<Axis> {
        vec![self.axis.clone()]
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> DrawResult {
        let failing = self.lines.iter().filter(|l| !l.pass()).count();
        let subtitle = format!(
            "{} budget lines · {} · every temperature{}",
            self.lines.len(),
            if failing == 0 {
                "all pass".to_owned()
            } else {
                format!("{failing} fail")
            },
            if self.has_corners() {
                " and corner"
            } else {
                ""
            }
        );
        let body = frame(root, &self.title(), &subtitle)?;
        let (plot, side) = split(&body);
        draw_key(&side, &self.key())?;
        let rows = self.lines.len() as f64;
        let axis = &self.axis;
        // The row labels' column: as wide as the longest label needs, up to a share of the
        // plot; a label wider than that wraps onto further lines rather than run off the edge.
        let label_style = bold(LEGEND_PX).color(&INK);
        let widest = self
            .lines
            .iter()
            .map(|l| plot.estimate_text_size(&l.describe(), &label_style))
            .collect::<Result<Vec<_>, _>>()?
            .into_iter()
            .map(|(w, _)| w)
            .max()
            .unwrap_or(0);
        let most = plot.dim_in_pixel().0 * 2 / 5;
        let label_px = (widest + LABEL_GAP_PX + 8).clamp(MIN_LABEL_PX, most);
        let mut chart = house_chart(&plot, 24, label_px)
            .build_cartesian_2d(axis.linear_range(), -0.5..rows - 0.5)?;
        mesh_style(&mut chart.configure_mesh())
            .disable_y_mesh()
            .y_labels(0)
            .x_desc("margin (dB), positive passes")
            .x_label_formatter(&|v| axis.label(*v))
            .draw()?;
        chart.draw_series(std::iter::once(Rectangle::new(
            [(axis.low, -0.5), (0.0, rows - 0.5)],
            FAIL.mix(0.05).filled(),
        )))?;
        chart.draw_series(std::iter::once(PathElement::new(
            vec![(0.0, -0.5), (0.0, rows - 0.5)],
            INK.stroke_width(2),
        )))?;
        let cases = self.cases.len().max(1) as f64;
        let band = 0.72 / cases;
        for (row, line) in self.lines.iter().enumerate() {
            // First line at the top.
            let centre = rows - 1.0 - row as f64;
            let own_scale = !margin_in_db(line.line());
            let bar_top = |record: &BudgetRecord| {
                self.cases
                    .iter()
                    .position(|c| c.0 == record.temperature_c && c.1 == record.corner)
                    .map(|index| (index, centre + 0.36 - index as f64 * band))
            };
            for record in &line.records {
                let Some((index, top)) = bar_top(record) else {
                    continue;
                };
                let margin = margin_position(record, record.margin.unwrap_or(MARGIN_CLIP_DB), axis);
                let look = self.case_look(index);
                let (colour, alpha) = (look.colour, look.fill.max(0.6));
                let bottom = top - band * 0.85;
                if own_scale {
                    // Not in dB: a light bar with a hatched face and an outline.
                    chart.draw_series(std::iter::once(Rectangle::new(
                        [(0.0, top), (margin, bottom)],
                        colour.mix(alpha * 0.3).filled(),
                    )))?;
                    let steps = 12;
                    let hatch = (0..steps).map(|k| {
                        let x = margin * k as f64 / steps as f64;
                        let next = margin * (k as f64 + 0.5) / steps as f64;
                        PathElement::new(
                            vec![(x, bottom), (next, top)],
                            colour.mix(alpha).stroke_width(1),
                        )
                    });
                    chart.draw_series(hatch)?;
                    chart.draw_series(std::iter::once(Rectangle::new(
                        [(0.0, top), (margin, bottom)],
                        colour.mix(alpha).stroke_width(1),
                    )))?;
                } else {
                    chart.draw_series(std::iter::once(Rectangle::new(
                        [(0.0, top), (margin, bottom)],
                        colour.mix(look.fill).filled(),
                    )))?;
                    if look.outlined {
                        chart.draw_series(std::iter::once(Rectangle::new(
                            [(0.0, top), (margin, bottom)],
                            colour.stroke_width(2),
                        )))?;
                    }
                }
                if record.margin_at_least {
                    // Only a lower bound: an arrow pointing on past the bar's end.
                    let tip = chart.backend_coord(&(margin, (top + bottom) / 2.0));
                    let half = ((band * 0.85) * f64::from(chart.plotting_area().dim_in_pixel().1)
                        / (rows + 0.0)
                        / 2.0)
                        .clamp(3.0, 9.0) as i32;
                    root.draw(&Polygon::new(
                        vec![
                            (tip.0 + 2 * half, tip.1),
                            (tip.0, tip.1 - half - 2),
                            (tip.0, tip.1 + half + 2),
                        ],
                        INK.filled(),
                    ))?;
                }
            }
            let worst = line.worst();
            if let (Some(m), Some((_, top))) = (worst.margin, bar_top(worst)) {
                // On the worst case's own bar.
                let at = chart
                    .backend_coord(&(margin_position(worst, m, axis), top - band * 0.85 / 2.0));
                super::key::verdict_marker(root, (at.0, at.1), line.pass())?;
            }
            let label_at = chart.backend_coord(&(axis.low, centre));
            let room = label_px as i32 - LABEL_GAP_PX as i32 - 8;
            let head = wrap(root, &line.describe(), &label_style, room)?;
            let frequency = si_exact(line.line().frequency_hz, "Hz");
            let detail_style = text(LEGEND_PX - 2.0, MUTED);
            let detail = wrap(
                root,
                &if own_scale {
                    format!("{frequency} · bar: share of limit")
                } else {
                    frequency
                },
                &detail_style,
                room,
            )?;
            // The block of lines centred on the row, the head above its detail.
            let count = (head.len() + detail.len()) as i32;
            let mut y = label_at.1 - (count - 1) * LABEL_LINE_PX / 2;
            let x = label_at.0 - LABEL_GAP_PX as i32;
            for words in head {
                root.draw(&Text::new(
                    words,
                    (x, y),
                    label_style.pos(Pos::new(HPos::Right, VPos::Center)),
                ))?;
                y += LABEL_LINE_PX;
            }
            for words in detail {
                root.draw(&Text::new(
                    words,
                    (x, y),
                    detail_style.pos(Pos::new(HPos::Right, VPos::Center)),
                ))?;
                y += LABEL_LINE_PX;
            }
        }
        Ok(())
    }
}
