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

/// The temperature ramp, coldest first: two blues and a sea green, a neutral charcoal for the
/// middle of the range, then amber, orange and brick (kept apart from the verdicts' red and
/// green). A figure that colours by temperature takes its colours from here through
/// [`temperature_colour`], so one temperature has one colour in every figure of a report.
pub const TEMPERATURE_RAMP: [RGBColor; 7] = [
    RGBColor(0x1f, 0x4e, 0x9c), // deep blue
    RGBColor(0x3f, 0x8f, 0xd2), // sky blue
    RGBColor(0x1f, 0x9a, 0x8a), // sea green
    RGBColor(0x4b, 0x4f, 0x58), // charcoal
    RGBColor(0xc9, 0x96, 0x10), // amber
    RGBColor(0xe0, 0x6a, 0x1b), // orange
    RGBColor(0x9a, 0x2e, 0x1a), // brick
];

/// Colour of temperature `t` among the report's temperatures `plan` (any order): its rank
/// from the coldest, spread evenly over [`TEMPERATURE_RAMP`] so the coldest is always the
/// deep blue and the hottest the brick (with one temperature, the charcoal). It depends only
/// on `t` and the report's list, never on which temperatures a figure happens to draw, so
/// the same temperature has the same colour in every figure kind. A temperature missing from
/// `plan` takes the rank of its nearest neighbour; past seven temperatures the ramp repeats.
pub fn temperature_colour(t: f64, plan: &[f64]) -> RGBColor {
    let mut sorted: Vec<f64> = plan.iter().copied().filter(|x| x.is_finite()).collect();
    sorted.sort_by(f64::total_cmp);
    sorted.dedup();
    let n = sorted.len();
    let last = TEMPERATURE_RAMP.len() - 1;
    if n <= 1 {
        return TEMPERATURE_RAMP[last / 2];
    }
    let rank = sorted
        .iter()
        .enumerate()
        .min_by(|a, b| (a.1 - t).abs().total_cmp(&(b.1 - t).abs()))
        .map_or(0, |(i, _)| i);
    let slot = if n <= TEMPERATURE_RAMP.len() {
        // Evenly spread, rounded to the nearest slot.
        (rank * last * 2 + (n - 1)) / (2 * (n - 1))
    } else {
        rank % TEMPERATURE_RAMP.len()
    };
    TEMPERATURE_RAMP[slot.min(last)]
}

/// CIE 1976 colour difference ΔE*ab between two sRGB colours (IEC 61966-2-1 transfer curve,
/// D65 white; CIE 15:2004 L*a*b*). About 2.3 is a just-noticeable difference; the key checks
/// ask for far more between entries told apart by colour.
pub fn colour_difference(a: RGBColor, b: RGBColor) -> f64 {
    fn lab(c: RGBColor) -> [f64; 3] {
        let linear = |v: u8| {
            let v = f64::from(v) / 255.0;
            if v <= 0.04045 {
                v / 12.92
            } else {
                ((v + 0.055) / 1.055).powf(2.4)
            }
        };
        let (r, g, b) = (linear(c.0), linear(c.1), linear(c.2));
        let x = (0.4124 * r + 0.3576 * g + 0.1805 * b) / 0.95047;
        let y = 0.2126 * r + 0.7152 * g + 0.0722 * b;
        let z = (0.0193 * r + 0.1192 * g + 0.9505 * b) / 1.08883;
        let f = |t: f64| {
            if t > 216.0 / 24389.0 {
                t.cbrt()
            } else {
                (24389.0 / 27.0 * t + 16.0) / 116.0
            }
        };
        let (fx, fy, fz) = (f(x), f(y), f(z));
        [116.0 * fy - 16.0, 500.0 * (fx - fy), 200.0 * (fy - fz)]
    }
    let (p, q) = (lab(a), lab(b));
    ((p[0] - q[0]).powi(2) + (p[1] - q[1]).powi(2) + (p[2] - q[2]).powi(2)).sqrt()
}

/// Colour of a named metric, the same in every figure.
pub fn metric_colour(metric: &str) -> RGBColor {
    match metric {
        "thd" => SERIES[0],
        "hd3" => SERIES[1],
        "hd2" => SERIES[2],
        "hd5" => SERIES[4],
        "im3" => SERIES[3],
        "gain" => RGBColor(0x1f, 0x8a, 0xc0),
        // Magenta: it shares the distortion-versus-frequency and two-tone figures with IM3's
        // mustard and THD's teal, and a green here read as IM3's colour.
        "iip3" => RGBColor(0xb5, 0x17, 0x7a),
        "oip3" => RGBColor(0xa0, 0x52, 0x2d),
        "p1db" => RGBColor(0x6b, 0x4f, 0xa8),
        "input_noise" => RGBColor(0x7a, 0x52, 0x30),
        "steering_range" => SERIES[6],
        // Navy and wine: a headroom or yield line sits beside THD's teal in the sizing figure.
        "collector_base_margin" => RGBColor(0x1b, 0x3a, 0x6b),
        "yield" => RGBColor(0x8b, 0x1e, 0x3f),
        other => match other
            .strip_prefix("hd")
            .and_then(|n| n.parse::<usize>().ok())
        {
            Some(order) => SERIES[order % SERIES.len()],
            None => SERIES[6],
        },
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
        "hd5" => Marker::Down,
        "iip3" | "oip3" => Marker::Plus,
        // HD4, HD7 and beyond (a budget names them rarely, and seldom two at once).
        _ => Marker::Hexagon,
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
    /// Filled triangle pointing down.
    Down,
    /// Filled plus sign (intercepts, so they never share a distortion metric's shape).
    Plus,
    /// Filled hexagon.
    Hexagon,
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
            Marker::Down => vec![(x, y + 7), (x + 7, y - 5), (x - 7, y - 5)],
            Marker::Plus => vec![
                (x - 3, y - 8),
                (x + 3, y - 8),
                (x + 3, y - 3),
                (x + 8, y - 3),
                (x + 8, y + 3),
                (x + 3, y + 3),
                (x + 3, y + 8),
                (x - 3, y + 8),
                (x - 3, y + 3),
                (x - 8, y + 3),
                (x - 8, y - 3),
                (x - 3, y - 3),
            ],
            Marker::Hexagon => (0..6)
                .map(|k| {
                    let a = k as f64 * std::f64::consts::TAU / 6.0;
                    (
                        x + (7.0 * a.cos()).round() as i32,
                        y + (7.0 * a.sin()).round() as i32,
                    )
                })
                .collect(),
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
    fn colour_difference_matches_published_lab_values() {
        // sRGB white is L* = 100, a* = b* = 0 and black L* = 0, so their ΔE*ab is 100
        // (CIE 15:2004 definition of L*); pure sRGB red is L* 53.24, a* 80.09, b* 67.20
        // (Lindbloom's sRGB/D65 tables, from memory), so red to black is 121.4 (±0.2).
        let white = RGBColor(255, 255, 255);
        let black = RGBColor(0, 0, 0);
        assert!((colour_difference(white, black) - 100.0).abs() < 0.01);
        let red_black = (53.24f64.powi(2) + 80.09f64.powi(2) + 67.20f64.powi(2)).sqrt();
        assert!((colour_difference(RGBColor(255, 0, 0), black) - red_black).abs() < 0.2);
    }

    #[test]
    fn temperatures_keep_their_colour_whatever_else_is_drawn() {
        let plan = [85.0, -40.0, 27.0];
        // Coldest blue, hottest brick, whatever order the plan lists them in.
        assert_eq!(temperature_colour(-40.0, &plan), TEMPERATURE_RAMP[0]);
        assert_eq!(temperature_colour(85.0, &plan), TEMPERATURE_RAMP[6]);
        assert_eq!(temperature_colour(27.0, &plan), TEMPERATURE_RAMP[3]);
        // Every pair of a report's temperatures is told apart by colour alone (up to seven).
        for n in 2..=TEMPERATURE_RAMP.len() {
            let temps: Vec<f64> = (0..n).map(|i| -40.0 + 20.0 * i as f64).collect();
            for i in 0..n {
                for j in i + 1..n {
                    let (a, b) = (
                        temperature_colour(temps[i], &temps),
                        temperature_colour(temps[j], &temps),
                    );
                    assert!(
                        colour_difference(a, b) > 20.0,
                        "{n} temperatures: {} and {} look alike",
                        temps[i],
                        temps[j]
                    );
                }
            }
        }
    }

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
