//! The house style: palette, type sizes, the figure frame and the drawing helpers every
//! figure shares.

use crate::plots::canvas::{DrawResult, PlotError, HEIGHT_PX};
pub use crate::report::queries::{stage_names, temperatures, typical_temperature};
pub use crate::report::text::{
    celsius, level, limit_text, metric_label, num, si, si_exact, si_short,
};
use plotters::chart::MeshStyle;
use plotters::coord::Shift;
use plotters::element::DashedPathElement;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

/// Text and axes.
pub const INK: RGBColor = RGBColor(0x1b, 0x22, 0x30);
/// Secondary text (subtitles, footers, notes).
pub const MUTED: RGBColor = RGBColor(0x5b, 0x64, 0x72);
/// Major grid lines.
pub const GRID: RGBColor = RGBColor(0xdc, 0xe1, 0xe8);
/// Minor grid lines.
pub const GRID_MINOR: RGBColor = RGBColor(0xef, 0xf2, 0xf5);
/// The plot background.
pub const PAPER: RGBColor = RGBColor(0xff, 0xff, 0xff);
/// The accent bar beside each title.
pub const ACCENT: RGBColor = RGBColor(0x0e, 0x6e, 0x6a);
/// Passing budget points.
pub const PASS: RGBColor = RGBColor(0x1d, 0x8a, 0x4e);
/// Failing budget points and forbidden regions.
pub const FAIL: RGBColor = RGBColor(0xc4, 0x26, 0x3a);

/// Series colours, in order of use.
pub const SERIES: [RGBColor; 7] = [
    RGBColor(0x0e, 0x6e, 0x6a), // deep teal
    RGBColor(0xd2, 0x5a, 0x1e), // burnt orange
    RGBColor(0x3b, 0x4c, 0xa8), // indigo
    RGBColor(0xa8, 0x7d, 0x00), // mustard
    RGBColor(0x8c, 0x3b, 0x7e), // plum
    RGBColor(0x4f, 0x7f, 0x22), // moss
    RGBColor(0x4a, 0x5d, 0x6e), // slate
];

/// Colour of a named metric, the same in every figure.
pub fn metric_colour(metric: &str) -> RGBColor {
    match metric {
        "thd" => SERIES[0],
        "hd3" => SERIES[1],
        "hd2" => SERIES[2],
        "hd5" => SERIES[4],
        "im3" => SERIES[3],
        "gain" => RGBColor(0x1f, 0x8a, 0xc0),
        "iip3" => SERIES[5],
        "oip3" => RGBColor(0xa0, 0x52, 0x2d),
        "p1db" => RGBColor(0x6b, 0x4f, 0xa8),
        "input_noise" => RGBColor(0x7a, 0x52, 0x30),
        "steering_range" => SERIES[6],
        other => {
            let order: usize = other.trim_start_matches("hd").parse().unwrap_or(0);
            SERIES[order % SERIES.len()]
        }
    }
}

/// Title size, px.
pub const TITLE_PX: f64 = 34.0;
/// Subtitle size, px.
pub const SUBTITLE_PX: f64 = 21.0;
/// Axis description size, px.
pub const AXIS_PX: f64 = 23.0;
/// Tick label size, px.
pub const TICK_PX: f64 = 20.0;
/// Legend and annotation size, px.
pub const LEGEND_PX: f64 = 19.0;
/// Header height, px.
const HEADER_PX: u32 = 104;
/// Footer height, px.
const FOOTER_PX: u32 = 36;

pub use crate::plots::canvas::FAMILY;

/// A font of the house face.
pub fn font(size: f64) -> FontDesc<'static> {
    FontDesc::new(FontFamily::Name(FAMILY), size, FontStyle::Normal)
}

/// A bold font of the house face.
pub fn bold(size: f64) -> FontDesc<'static> {
    FontDesc::new(FontFamily::Name(FAMILY), size, FontStyle::Bold)
}

/// Marker of a named metric, the same in every figure.
pub fn metric_marker(metric: &str) -> Marker {
    match metric {
        "hd2" => Marker::Circle,
        "hd3" => Marker::Square,
        "thd" => Marker::Diamond,
        "im3" | "im2" => Marker::Triangle,
        other => {
            let order: usize = other.trim_start_matches("hd").parse().unwrap_or(0);
            Marker::nth(order)
        }
    }
}

/// The case a figure's lines are drawn for when the plan has process corners.
pub const TYPICAL_CORNER: &str = crate::model::corner::TYPICAL;

/// Whether a record's corner is the typical one (records without corners are typical).
pub fn is_typical(corner: &str) -> bool {
    corner.is_empty() || corner == TYPICAL_CORNER
}

/// Text style of a given size and colour.
pub fn text(size: f64, colour: RGBColor) -> TextStyle<'static> {
    font(size).color(&colour)
}

/// Paints the background, the title block and the footer, and returns the area left for
/// the chart.
pub fn frame<DB: DrawingBackend>(
    root: &DrawingArea<DB, Shift>,
    title: &str,
    subtitle: &str,
) -> Result<DrawingArea<DB, Shift>, PlotError> {
    root.fill(&PAPER)?;
    let (header, rest) = root.split_vertically(HEADER_PX);
    let (body, footer) = rest.split_vertically(HEIGHT_PX - HEADER_PX - FOOTER_PX);
    header.draw(&Rectangle::new([(28, 26), (36, 88)], ACCENT.filled()))?;
    header.draw(&Text::new(
        title.to_owned(),
        (52, 22),
        bold(TITLE_PX).color(&INK),
    ))?;
    header.draw(&Text::new(
        subtitle.to_owned(),
        (52, 66),
        text(SUBTITLE_PX, MUTED),
    ))?;
    let (width, _) = footer.dim_in_pixel();
    footer.draw(&PathElement::new(
        vec![(28, 2), (width as i32 - 28, 2)],
        GRID.stroke_width(1),
    ))?;
    footer.draw(&Text::new(
        format!(
            "linbudget {} · model prediction, confirm against silicon",
            env!("CARGO_PKG_VERSION")
        ),
        (width as i32 - 28, 10),
        text(15.0, MUTED).pos(Pos::new(HPos::Right, VPos::Top)),
    ))?;
    Ok(body)
}

/// Line pattern of the `index`-th temperature: (dash, gap) in px; solid for the first.
pub fn pattern(index: usize) -> (i32, i32) {
    match index % 4 {
        0 => (1_000_000, 1),
        1 => (16, 9),
        2 => (4, 7),
        _ => (26, 8),
    }
}

/// A polyline in the given pattern (solid when the dash is longer than the figure).
pub fn dashed(
    points: Vec<(f64, f64)>,
    pattern: (i32, i32),
    style: ShapeStyle,
) -> DashedPathElement<std::vec::IntoIter<(f64, f64)>, i32> {
    DashedPathElement::new(points, pattern.0, pattern.1, style)
}

/// Splits a polyline where a value is absent and clips it to `y_low..=y_high`, interpolating
/// the crossing (in log x when `log_x`), so no line runs outside the plot.
pub fn clip_runs(
    points: &[(f64, Option<f64>)],
    y_low: f64,
    y_high: f64,
    log_x: bool,
) -> Vec<Vec<(f64, f64)>> {
    let mut runs: Vec<Vec<(f64, f64)>> = Vec::new();
    let mut current: Vec<(f64, f64)> = Vec::new();
    let to_x = |x: f64| if log_x { x.ln() } else { x };
    let from_x = |x: f64| if log_x { x.exp() } else { x };
    let inside = |y: f64| y >= y_low && y <= y_high;
    let mut previous: Option<(f64, f64)> = None;
    for &(x, y) in points {
        let Some(y) = y.filter(|y| y.is_finite()) else {
            if current.len() > 1 {
                runs.push(std::mem::take(&mut current));
            }
            current.clear();
            previous = None;
            continue;
        };
        if let Some((px, py)) = previous {
            let crossing = |edge: f64| {
                let t = (edge - py) / (y - py);
                (from_x(to_x(px) + t * (to_x(x) - to_x(px))), edge)
            };
            match (inside(py), inside(y)) {
                (true, true) => current.push((x, y)),
                (true, false) => {
                    current.push(crossing(if y > y_high { y_high } else { y_low }));
                    if current.len() > 1 {
                        runs.push(std::mem::take(&mut current));
                    }
                    current.clear();
                }
                (false, true) => {
                    current.push(crossing(if py > y_high { y_high } else { y_low }));
                    current.push((x, y));
                }
                (false, false) => {
                    if (py > y_high && y < y_low) || (py < y_low && y > y_high) {
                        let a = crossing(if py > y_high { y_high } else { y_low });
                        let b = crossing(if y > y_high { y_high } else { y_low });
                        runs.push(vec![a, b]);
                    }
                }
            }
        } else if inside(y) {
            current.push((x, y));
        }
        previous = Some((x, y));
    }
    if current.len() > 1 {
        runs.push(current);
    }
    runs
}

/// Draws a line in a cartesian chart as clipped runs; returns nothing to annotate.
pub fn draw_runs<
    'a,
    DB: DrawingBackend + 'a,
    X: Ranged<ValueType = f64>,
    Y: Ranged<ValueType = f64>,
>(
    chart: &mut ChartContext<'a, DB, Cartesian2d<X, Y>>,
    points: &[(f64, Option<f64>)],
    y_range: (f64, f64),
    log_x: bool,
    pattern: (i32, i32),
    style: ShapeStyle,
) -> DrawResult {
    for run in clip_runs(points, y_range.0, y_range.1, log_x) {
        chart.draw_series(std::iter::once(dashed(run, pattern, style)))?;
    }
    Ok(())
}

/// Marker shapes used for data points.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Marker {
    /// Filled circle.
    Circle,
    /// Filled square.
    Square,
    /// Filled triangle.
    Triangle,
    /// Filled diamond.
    Diamond,
}

impl Marker {
    /// The marker of the `index`-th series.
    pub fn nth(index: usize) -> Marker {
        [
            Marker::Circle,
            Marker::Square,
            Marker::Triangle,
            Marker::Diamond,
        ][index % 4]
    }

    /// The marker as a polygon in pixel coordinates around `centre`.
    pub fn element(self, centre: (i32, i32), colour: RGBAColor) -> Polygon<(i32, i32)> {
        let (x, y) = centre;
        let points = match self {
            Marker::Circle => (0..16)
                .map(|k| {
                    let a = k as f64 * std::f64::consts::TAU / 16.0;
                    (
                        x + (6.0 * a.cos()).round() as i32,
                        y + (6.0 * a.sin()).round() as i32,
                    )
                })
                .collect(),
            Marker::Square => vec![
                (x - 5, y - 5),
                (x + 5, y - 5),
                (x + 5, y + 5),
                (x - 5, y + 5),
            ],
            Marker::Triangle => vec![(x, y - 7), (x + 7, y + 5), (x - 7, y + 5)],
            Marker::Diamond => vec![(x, y - 7), (x + 7, y), (x, y + 7), (x - 7, y)],
        };
        Polygon::new(points, colour.filled())
    }
}

/// Most markers drawn along one series (see [`draw_markers`]).
pub const MAX_MARKERS: usize = 64;

/// Draws point markers of one series (thinned to at most [`MAX_MARKERS`]).
pub fn draw_markers<
    'a,
    DB: DrawingBackend + 'a,
    X: Ranged<ValueType = f64>,
    Y: Ranged<ValueType = f64>,
>(
    chart: &mut ChartContext<'a, DB, Cartesian2d<X, Y>>,
    points: &[(f64, Option<f64>)],
    y_range: (f64, f64),
    marker: Marker,
    colour: RGBColor,
) -> DrawResult {
    // A dense sweep is read from its line; markers on every point would only blot it (and
    // make the files large), so at most about MAX_MARKERS evenly spaced points are marked.
    let stride = points.len().div_ceil(MAX_MARKERS).max(1);
    chart.draw_series(
        points
            .iter()
            .step_by(stride)
            .filter_map(|(x, y)| {
                y.filter(|y| *y >= y_range.0 && *y <= y_range.1)
                    .map(|y| (*x, y))
            })
            .map(move |coord| {
                EmptyElement::at(coord)
                    + marker.element((0, 0), colour.mix(1.0))
                    + Circle::new((0, 0), 2, PAPER.filled())
            }),
    )?;
    Ok(())
}

/// Applies the house mesh style to a chart.
pub fn mesh_style<'a, 'b, DB: DrawingBackend, X: Ranged, Y: Ranged>(
    mesh: &'b mut MeshStyle<'a, 'b, X, Y, DB>,
) -> &'b mut MeshStyle<'a, 'b, X, Y, DB> {
    mesh.axis_style(INK.stroke_width(2))
        .bold_line_style(GRID.stroke_width(1))
        .light_line_style(GRID_MINOR.stroke_width(1))
        .max_light_lines(4)
        .label_style(text(TICK_PX, INK))
        .axis_desc_style(bold(AXIS_PX).color(&INK))
}

/// The house chart frame: standard margins and label areas around a plot body, with the right
/// margin (wider when a second axis is drawn) and the left label width given.
pub fn house_chart<'a, 'b, DB: DrawingBackend>(
    area: &'a DrawingArea<DB, Shift>,
    margin_right: u32,
    y_label_width: u32,
) -> ChartBuilder<'a, 'b, DB> {
    let mut builder = ChartBuilder::on(area);
    builder
        .margin_left(24)
        .margin_right(margin_right)
        .margin_top(8)
        .x_label_area_size(70)
        .y_label_area_size(y_label_width);
    builder
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn clipping_interpolates_the_crossing_and_splits_at_gaps() {
        // A straight line y = x from -10 to 10 clipped to 0..5 crosses at exactly 0 and 5
        // (linear interpolation, exact for a straight line).
        let line: Vec<(f64, Option<f64>)> = vec![(-10.0, Some(-10.0)), (10.0, Some(10.0))];
        let runs = clip_runs(&line, 0.0, 5.0, false);
        assert_eq!(runs, vec![vec![(0.0, 0.0), (5.0, 5.0)]]);
        let gapped: Vec<(f64, Option<f64>)> = vec![
            (1.0, Some(1.0)),
            (2.0, Some(2.0)),
            (3.0, None),
            (4.0, Some(4.0)),
            (5.0, Some(4.5)),
        ];
        assert_eq!(clip_runs(&gapped, 0.0, 5.0, false).len(), 2);
    }
}
