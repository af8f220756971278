//! The key beside every figure: the legend and the compact verdict table, drawn in a panel to
//! the right of the plot so neither ever covers data.
//!
//! Both are prepared as data ([`Key`]) before anything is drawn, so tests can read what a
//! figure will say (every legend label, every verdict row) and check that no two legend
//! swatches look alike.

use super::style::*;
use crate::plots::canvas::{DrawResult, PlotError};
use plotters::coord::Shift;
use plotters::element::DashedPathElement;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

/// Width of the key panel beside the plot, pixels.
pub const KEY_PX: u32 = 430;

/// How a legend entry or verdict row is drawn.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Swatch {
    /// A line sample with an optional marker.
    Line {
        /// Colour.
        colour: RGBColor,
        /// Opacity, 0–1.
        alpha: f64,
        /// Stroke width, px.
        width: u32,
        /// (dash, gap), px; see [`pattern`].
        pattern: (i32, i32),
        /// Marker drawn on the sample.
        marker: Option<Marker>,
    },
    /// A shaded area.
    Band {
        /// Colour.
        colour: RGBColor,
        /// Opacity, 0–1.
        alpha: f64,
    },
    /// A bar drawn as an outline in its full colour over a lighter fill (or none).
    Outline {
        /// Colour of the outline (and of the fill, at `fill` opacity).
        colour: RGBColor,
        /// Opacity of the fill, 0–1 (0: outline only).
        fill: f64,
    },
    /// A hatched forbidden region bounded by its limit line.
    Mask {
        /// Colour of the hatching and the limit line.
        colour: RGBColor,
    },
    /// A vertical bar (a Monte Carlo 5–95 % interval) with a median marker.
    Bar {
        /// Colour.
        colour: RGBColor,
        /// Opacity, 0–1.
        alpha: f64,
        /// (dash, gap), px.
        pattern: (i32, i32),
        /// Median marker.
        marker: Marker,
    },
    /// A verdict marker: a green disc (pass) or a red cross (fail).
    Verdict {
        /// Whether it marks a pass.
        pass: bool,
    },
    /// A hollow marker (a harmonic below the analysis floor).
    Hollow {
        /// Colour.
        colour: RGBColor,
    },
    /// A filled marker without a line.
    Dot {
        /// Colour.
        colour: RGBColor,
        /// Marker.
        marker: Marker,
    },
    /// A colour chip: what a colour names when no one line carries it (a stage in the
    /// comparison, a metric drawn only as bench markers).
    Chip {
        /// Colour.
        colour: RGBColor,
    },
    /// The intercept's ring.
    Ring,
    /// An open bench marker (ring, square, triangle, diamond outline by `index`).
    Open {
        /// Shape index (the temperature's).
        index: usize,
        /// Colour.
        colour: RGBColor,
    },
}

impl Swatch {
    /// A solid line of `colour`, `width` px, with an optional marker.
    pub fn line(colour: RGBColor, width: u32, marker: Option<Marker>) -> Swatch {
        Swatch::Line {
            colour,
            alpha: 1.0,
            width,
            pattern: pattern(0),
            marker,
        }
    }

    /// A line of the temperature key: muted, in the `index`-th temperature's pattern.
    pub fn temperature(index: usize) -> Swatch {
        Swatch::Line {
            colour: MUTED,
            alpha: 1.0,
            width: 3,
            pattern: pattern(index),
            marker: None,
        }
    }
}

/// One legend entry.
#[derive(Debug, Clone, PartialEq)]
pub struct LegendEntry {
    /// What is drawn.
    pub swatch: Swatch,
    /// What it means.
    pub label: String,
}

impl LegendEntry {
    /// An entry.
    pub fn new(swatch: Swatch, label: impl Into<String>) -> Self {
        LegendEntry {
            swatch,
            label: label.into(),
        }
    }
}

/// One row of the verdict table: a budget line and how it fares.
#[derive(Debug, Clone, PartialEq)]
pub struct VerdictRow {
    /// The line's symbol in the plot.
    pub swatch: Swatch,
    /// The line as read aloud: `HD3 ≤ −60 dBc at 20 mV`.
    pub line: String,
    /// The worst case and its margin, naming the temperature and corner.
    pub detail: String,
    /// `pass`, `FAIL`, or a short word for a line judged elsewhere.
    pub verdict: String,
    /// Whether the verdict is a pass.
    pub pass: bool,
}

/// A figure's key: the legend, the verdict table and a closing note.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Key {
    /// Legend entries, in reading order.
    pub legend: Vec<LegendEntry>,
    /// Heading of the verdict table.
    pub verdict_heading: String,
    /// Verdict rows, one per budget line the figure shows.
    pub verdicts: Vec<VerdictRow>,
    /// Notes under the key (muted), e.g. what is not shown and where it is.
    pub notes: Vec<String>,
}

impl Key {
    /// Appends a legend entry.
    pub fn entry(&mut self, swatch: Swatch, label: impl Into<String>) {
        self.legend.push(LegendEntry::new(swatch, label));
    }

    /// Appends the temperature key (line patterns) when there are several temperatures.
    pub fn temperatures(&mut self, temps: &[f64]) {
        if temps.len() > 1 {
            for (i, t) in temps.iter().enumerate() {
                self.entry(Swatch::temperature(i), celsius(*t));
            }
        }
    }

    /// Pairs of legend entries a reader could confuse, by index (should be empty).
    ///
    /// Two entries are told apart by colour (CIE 1976 ΔE*ab of at least
    /// [`DISTINCT_DELTA_E`] after each is laid over the white paper at its opacity), by
    /// marker, by line pattern or by the kind of swatch. Lines drawn with markers (one
    /// metric each) must differ in marker; and two of different colours must differ clearly
    /// in colour too (the same colour is one metric at another amplitude, which the marker
    /// alone tells apart).
    pub fn look_alike(&self) -> Vec<(usize, usize)> {
        let mut pairs = Vec::new();
        for i in 0..self.legend.len() {
            for j in i + 1..self.legend.len() {
                let (a, b) = (&self.legend[i].swatch, &self.legend[j].swatch);
                if a == b || confusable(a, b) {
                    pairs.push((i, j));
                }
            }
        }
        pairs
    }
}

/// Least CIE 1976 colour difference between two legend entries told apart by colour: well
/// above the just-noticeable difference (about 2.3), since a swatch is small and a line thin.
pub const DISTINCT_DELTA_E: f64 = 20.0;

/// What a reader sees of a swatch: its kind, colour (on white, at its opacity), marker and
/// line pattern.
fn appearance(swatch: &Swatch) -> (u8, RGBColor, Option<Marker>, Option<(i32, i32)>, bool) {
    let on_paper = |c: RGBColor, alpha: f64| {
        let mix = |v: u8| (f64::from(v) * alpha + 255.0 * (1.0 - alpha)).round() as u8;
        RGBColor(mix(c.0), mix(c.1), mix(c.2))
    };
    match *swatch {
        Swatch::Line {
            colour,
            alpha,
            pattern,
            marker,
            ..
        } => (
            0,
            on_paper(colour, alpha),
            marker,
            Some(pattern),
            marker.is_some(),
        ),
        Swatch::Band { colour, alpha } => (1, on_paper(colour, alpha), None, None, false),
        Swatch::Mask { colour } => (2, colour, None, None, false),
        Swatch::Bar {
            colour,
            alpha,
            pattern,
            marker,
        } => (
            3,
            on_paper(colour, alpha),
            Some(marker),
            Some(pattern),
            false,
        ),
        Swatch::Verdict { pass } => (4, if pass { PASS } else { FAIL }, None, None, false),
        Swatch::Hollow { colour } => (5, colour, None, None, false),
        Swatch::Dot { colour, marker } => (13, colour, Some(marker), None, false),
        Swatch::Ring => (6, INK, None, None, false),
        Swatch::Chip { colour } => (11, colour, None, None, false),
        // The outline carries the colour; the fill's opacity is the pattern.
        Swatch::Outline { colour, fill } => (
            12,
            colour,
            None,
            Some(((fill * 100.0).round() as i32, 0)),
            false,
        ),
        Swatch::Open { index, colour } => (7 + (index % 4) as u8, colour, None, None, false),
    }
}

/// Whether two different swatches could be taken for one another (see [`Key::look_alike`]).
fn confusable(a: &Swatch, b: &Swatch) -> bool {
    let (kind_a, colour_a, marker_a, pattern_a, series_a) = appearance(a);
    let (kind_b, colour_b, marker_b, pattern_b, series_b) = appearance(b);
    let difference = colour_difference(colour_a, colour_b);
    if series_a && series_b {
        return marker_a == marker_b || (difference > 1.0 && difference < DISTINCT_DELTA_E);
    }
    kind_a == kind_b
        && marker_a == marker_b
        && pattern_a == pattern_b
        && difference < DISTINCT_DELTA_E
}

/// Splits the figure body into the plot (left) and the key panel (right).
pub fn split<DB: DrawingBackend>(
    body: &DrawingArea<DB, Shift>,
) -> (DrawingArea<DB, Shift>, DrawingArea<DB, Shift>) {
    let (width, _) = body.dim_in_pixel();
    body.split_horizontally(width.saturating_sub(KEY_PX))
}

/// Draws a swatch in a 44 × 20 px box whose left centre is `(x, y)`.
pub fn draw_swatch<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    swatch: Swatch,
    (x, y): (i32, i32),
) -> DrawResult {
    match swatch {
        Swatch::Line {
            colour,
            alpha,
            width,
            pattern,
            marker,
        } => {
            let sample = if pattern.0 > 1000 {
                (1000, 1)
            } else {
                (pattern.0.min(12), pattern.1.min(7))
            };
            area.draw(&DashedPathElement::new(
                vec![(x, y), (x + 44, y)],
                sample.0,
                sample.1,
                colour.mix(alpha).stroke_width(width),
            ))?;
            if let Some(m) = marker {
                area.draw(&m.element((x + 22, y), colour.mix(1.0)))?;
                area.draw(&Circle::new((x + 22, y), 2, PAPER.filled()))?;
            }
        }
        Swatch::Band { colour, alpha } => {
            area.draw(&Rectangle::new(
                [(x, y - 9), (x + 44, y + 9)],
                colour.mix(alpha).filled(),
            ))?;
        }
        Swatch::Outline { colour, fill } => {
            area.draw(&Rectangle::new(
                [(x, y - 9), (x + 44, y + 9)],
                colour.mix(fill).filled(),
            ))?;
            area.draw(&Rectangle::new(
                [(x + 1, y - 8), (x + 43, y + 8)],
                colour.stroke_width(2),
            ))?;
        }
        Swatch::Mask { colour } => {
            hatch_pixels(area, (x, y - 9), (x + 44, y + 9), colour)?;
            area.draw(&PathElement::new(
                vec![(x, y + 9), (x + 44, y + 9)],
                colour.stroke_width(2),
            ))?;
        }
        Swatch::Bar {
            colour,
            alpha,
            pattern,
            marker,
        } => {
            let style = colour.mix(alpha).stroke_width(4);
            area.draw(&DashedPathElement::new(
                vec![(x + 22, y - 11), (x + 22, y + 11)],
                pattern.0.min(6),
                pattern.1.min(4),
                style,
            ))?;
            for cap in [y - 11, y + 11] {
                area.draw(&PathElement::new(vec![(x + 15, cap), (x + 29, cap)], style))?;
            }
            area.draw(&marker.element((x + 22, y), colour.mix(1.0)))?;
            area.draw(&Circle::new((x + 22, y), 2, PAPER.filled()))?;
        }
        Swatch::Verdict { pass } => verdict_marker(area, (x + 22, y), pass)?,
        Swatch::Hollow { colour } => {
            area.draw(&TriangleMarker::new((x + 22, y), 7, colour.stroke_width(2)))?;
        }
        Swatch::Dot { colour, marker } => {
            area.draw(&marker.element((x + 22, y), colour.mix(1.0)))?;
        }
        Swatch::Open { index, colour } => {
            area.draw(&open_marker(index, (x + 22, y), colour))?;
        }
        Swatch::Chip { colour } => {
            area.draw(&Rectangle::new(
                [(x + 12, y - 8), (x + 32, y + 8)],
                colour.filled(),
            ))?;
        }
        Swatch::Ring => {
            area.draw(&Circle::new((x + 22, y), 9, INK.stroke_width(3)))?;
            area.draw(&Circle::new((x + 22, y), 3, INK.filled()))?;
        }
    }
    Ok(())
}

/// The open marker of the `index`-th temperature: ring, square, triangle, diamond outlines.
pub fn open_marker(index: usize, centre: (i32, i32), colour: RGBColor) -> PathElement<(i32, i32)> {
    let (x, y) = centre;
    let points: Vec<(i32, i32)> = match index % 4 {
        0 => (0..=20)
            .map(|k| {
                let a = k as f64 * std::f64::consts::TAU / 20.0;
                (
                    x + (9.0 * a.cos()).round() as i32,
                    y + (9.0 * a.sin()).round() as i32,
                )
            })
            .collect(),
        1 => vec![
            (x - 8, y - 8),
            (x + 8, y - 8),
            (x + 8, y + 8),
            (x - 8, y + 8),
            (x - 8, y - 8),
        ],
        2 => vec![(x, y - 10), (x + 9, y + 7), (x - 9, y + 7), (x, y - 10)],
        _ => vec![
            (x, y - 10),
            (x + 10, y),
            (x, y + 10),
            (x - 10, y),
            (x, y - 10),
        ],
    };
    PathElement::new(points, colour.stroke_width(3))
}

/// The pass (green disc) or fail (red cross) marker at a pixel position.
pub fn verdict_marker<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    (x, y): (i32, i32),
    pass: bool,
) -> DrawResult {
    if pass {
        area.draw(&Circle::new((x, y), 10, PAPER.filled()))?;
        area.draw(&Circle::new((x, y), 8, PASS.filled()))?;
    } else {
        area.draw(&Circle::new((x, y), 11, PAPER.filled()))?;
        area.draw(&PathElement::new(
            vec![(x - 7, y - 7), (x + 7, y + 7)],
            FAIL.stroke_width(4),
        ))?;
        area.draw(&PathElement::new(
            vec![(x - 7, y + 7), (x + 7, y - 7)],
            FAIL.stroke_width(4),
        ))?;
    }
    Ok(())
}

/// Hatches the pixel rectangle between two corners with diagonal lines of `colour` (the
/// house mark of a region the budget forbids).
pub fn hatch_pixels<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    (x0, y0): (i32, i32),
    (x1, y1): (i32, i32),
    colour: RGBColor,
) -> DrawResult {
    let (left, right) = (x0.min(x1), x0.max(x1));
    let (top, bottom) = (y0.min(y1), y0.max(y1));
    if right - left < 1 || bottom - top < 1 {
        return Ok(());
    }
    area.draw(&Rectangle::new(
        [(left, top), (right, bottom)],
        colour.mix(0.06).filled(),
    ))?;
    const SPACING: i32 = 12;
    // Lines x − y = c, clipped to the rectangle, at a fixed phase so neighbouring masks align.
    let mut c = ((left - bottom).div_euclid(SPACING)) * SPACING;
    while c <= right - top {
        // Points with x = y + c inside [left, right] × [top, bottom].
        let y_start = top.max(left - c);
        let y_end = bottom.min(right - c);
        if y_end > y_start {
            area.draw(&PathElement::new(
                vec![(y_start + c, y_start), (y_end + c, y_end)],
                colour.mix(0.45).stroke_width(1),
            ))?;
        }
        c += SPACING;
    }
    Ok(())
}

/// Splits `text` into lines no wider than `width` px in `style` (a single word wider than
/// `width` keeps a line of its own).
pub fn wrap<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    text: &str,
    style: &TextStyle,
    width: i32,
) -> Result<Vec<String>, PlotError> {
    let mut lines = Vec::new();
    let mut current = String::new();
    for word in text.split(' ') {
        let candidate = if current.is_empty() {
            word.to_owned()
        } else {
            format!("{current} {word}")
        };
        let (w, _) = area.estimate_text_size(&candidate, style)?;
        if w as i32 > width && !current.is_empty() {
            lines.push(std::mem::replace(&mut current, word.to_owned()));
        } else {
            current = candidate;
        }
    }
    if !current.is_empty() {
        lines.push(current);
    }
    Ok(lines)
}

/// Draws the key in its panel: legend, verdict table, notes. What does not fit is summed up
/// in a last line pointing to the report's tables.
pub fn draw_key<DB: DrawingBackend>(area: &DrawingArea<DB, Shift>, key: &Key) -> DrawResult {
    let (width, height) = area.dim_in_pixel();
    let (width, height) = (width as i32, height as i32);
    let left = 18;
    let text_left = left + 56;
    let text_width = width - text_left - 14;
    let bottom = height - 8;
    let label_style = text(LEGEND_PX, INK);
    let line_height = 23;
    let mut y = 14;
    let mut skipped = 0usize;
    let fits = |y: i32, lines: usize| y + lines as i32 * line_height <= bottom - line_height;

    if !key.legend.is_empty() {
        area.draw(&Text::new(
            "Key",
            (left, y),
            bold(LEGEND_PX)
                .color(&MUTED)
                .pos(Pos::new(HPos::Left, VPos::Top)),
        ))?;
        y += 30;
        for entry in &key.legend {
            let lines = wrap(area, &entry.label, &label_style, text_width)?;
            if !fits(y, lines.len()) {
                skipped += 1;
                continue;
            }
            draw_swatch(area, entry.swatch, (left, y + line_height / 2 - 2))?;
            for line in &lines {
                area.draw(&Text::new(
                    line.clone(),
                    (text_left, y),
                    label_style.pos(Pos::new(HPos::Left, VPos::Top)),
                ))?;
                y += line_height;
            }
            y += 5;
        }
    }
    if !key.verdicts.is_empty() {
        y += 10;
        area.draw(&PathElement::new(
            vec![(left, y), (width - 14, y)],
            GRID.stroke_width(1),
        ))?;
        y += 10;
        area.draw(&Text::new(
            key.verdict_heading.clone(),
            (left, y),
            bold(LEGEND_PX)
                .color(&MUTED)
                .pos(Pos::new(HPos::Left, VPos::Top)),
        ))?;
        y += 30;
        let detail_style = text(LEGEND_PX - 2.0, MUTED);
        for row in &key.verdicts {
            let verdict_style = bold(LEGEND_PX).color(if row.pass { &PASS } else { &FAIL });
            let (verdict_w, _) = area.estimate_text_size(&row.verdict, &verdict_style)?;
            let head = wrap(
                area,
                &row.line,
                &bold(LEGEND_PX).color(&INK),
                text_width - verdict_w as i32 - 10,
            )?;
            let detail = wrap(area, &row.detail, &detail_style, text_width)?;
            if !fits(y, head.len() + detail.len()) {
                skipped += 1;
                continue;
            }
            draw_swatch(area, row.swatch, (left, y + line_height / 2 - 2))?;
            area.draw(&Text::new(
                row.verdict.clone(),
                (width - 14, y),
                verdict_style.pos(Pos::new(HPos::Right, VPos::Top)),
            ))?;
            for line in &head {
                area.draw(&Text::new(
                    line.clone(),
                    (text_left, y),
                    bold(LEGEND_PX)
                        .color(&INK)
                        .pos(Pos::new(HPos::Left, VPos::Top)),
                ))?;
                y += line_height;
            }
            for line in &detail {
                area.draw(&Text::new(
                    line.clone(),
                    (text_left, y),
                    detail_style.pos(Pos::new(HPos::Left, VPos::Top)),
                ))?;
                y += line_height - 2;
            }
            y += 8;
        }
    }
    let mut notes: Vec<String> = key.notes.clone();
    if skipped > 0 {
        notes.push(format!(
            "{skipped} more entries than fit here: see the report's tables."
        ));
    }
    if !notes.is_empty() {
        y += 6;
        let note_style = text(LEGEND_PX - 2.0, MUTED);
        for note in &notes {
            for line in wrap(area, note, &note_style, width - left - 14)? {
                if y + line_height > bottom {
                    break;
                }
                area.draw(&Text::new(
                    line,
                    (left, y),
                    note_style.pos(Pos::new(HPos::Left, VPos::Top)),
                ))?;
                y += line_height - 2;
            }
            y += 4;
        }
    }
    Ok(())
}
