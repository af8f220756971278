//! Sizing over a region: the map of tail current against emitter resistance, each design
//! coloured by the line that limits it and every edge of the usable region drawn in the colour
//! of the line that closes it; and the Pareto fronts of supply current against input noise and
//! against the binding distortion figure.

use super::axis::Axis;
use super::key::{draw_key, split, Key, Swatch, VerdictRow};
use super::style::*;
use super::{DrawResult, Drawing, PlotKind};
use crate::report::{FrontRecord, RegionCellRecord, RegionRecord, Report};
use plotters::coord::Shift;
use plotters::prelude::*;

/// Colour of the line limiting a design: the metric's colour, the collector-base margin's
/// slate for headroom.
fn limit_colour(metric: &str) -> RGBColor {
    // The line colours of the other figures, with noise and headroom given their own.
    match metric {
        "input_noise" => SERIES[2],
        "collector_base_margin" => RGBColor(0x8a, 0x6d, 0x3b),
        "tail_compliance" => RGBColor(0x6b, 0x6b, 0x6b),
        "none" => MUTED,
        other => metric_colour(other),
    }
}

/// Boundaries of the cells around grid values: midpoints (geometric on a log axis); the end
/// cells are halves, so the map spans exactly the sizing range.
fn cell_edges(grid: &[f64], geometric: bool) -> Vec<f64> {
    let mid = |a: f64, b: f64| {
        if geometric {
            (a * b).sqrt()
        } else {
            0.5 * (a + b)
        }
    };
    let mut edges = Vec::with_capacity(grid.len() + 1);
    edges.extend(grid.first());
    edges.extend(grid.windows(2).map(|pair| mid(pair[0], pair[1])));
    edges.extend(grid.last());
    edges
}

/// A line's name in the figures' words (the collector-base margin spelt out).
fn line_label(metric: &str) -> String {
    match metric {
        "collector_base_margin" => "collector-base margin".into(),
        "none" => "no line".into(),
        other => metric_label(other),
    }
}

/// The verdict row of the design a region search recommends.
fn design_row(r: &RegionRecord) -> VerdictRow {
    VerdictRow {
        swatch: Swatch::Dot {
            colour: if r.met { PASS } else { FAIL },
            marker: Marker::Diamond,
        },
        line: format!(
            "I_tail = {}, R_E = {}",
            si_short(r.tail_current_a, "A"),
            si_short(r.emitter_resistance_ohm, "Ω")
        ),
        detail: format!(
            "{} {} at {}{}",
            if r.met {
                "least current; binding"
            } else {
                "best found; limited by"
            },
            line_label(&r.binding_metric),
            celsius(r.binding_temperature_c),
            r.excess_db
                .map(|e| format!(" · {} dB above the guard band", num(e, 2)))
                .unwrap_or_default()
        ),
        verdict: if r.met { "met" } else { "not met" }.into(),
        pass: r.met,
    }
}

/// The map of one stage's sizing region.
pub struct RegionPlot {
    stage: String,
    slug: String,
    record: RegionRecord,
    x: Axis,
    y: Axis,
    /// Limiting lines of the failing designs, in order of first appearance.
    metrics: Vec<String>,
}

impl RegionPlot {
    /// The figure, when the stage was sized over tail current and emitter resistance.
    pub fn new(report: &Report, stage: &str, slug: &str) -> Option<Self> {
        let record = report.sizing_region.iter().find(|r| r.stage == stage)?;
        let has = |v: &str| record.variables.iter().any(|n| n == v);
        if !(has("tail_current") && has("emitter_resistance")) {
            return None;
        }
        let grid = |v: &str| {
            record
                .variables
                .iter()
                .position(|n| n == v)
                .map(|i| record.grid[i].clone())
                .unwrap_or_default()
        };
        let currents = grid("tail_current");
        let resistances = grid("emitter_resistance");
        let (Some(&r_low), Some(&r_high)) = (resistances.first(), resistances.last()) else {
            return None;
        };
        let x = Axis::log(&currents, "A");
        let y = Axis::linear_exact(r_low, r_high, 6).in_unit("Ω");
        let mut metrics: Vec<String> = Vec::new();
        for cell in record.cells.iter().filter(|c| !c.holds) {
            if !metrics.contains(&cell.limiting_metric) {
                metrics.push(cell.limiting_metric.clone());
            }
        }
        Some(RegionPlot {
            stage: stage.to_owned(),
            slug: slug.to_owned(),
            record: record.clone(),
            x,
            y,
            metrics,
        })
    }

    fn grid_of(&self, variable: &str) -> &[f64] {
        self.record
            .variables
            .iter()
            .position(|v| v == variable)
            .map_or(&[], |i| &self.record.grid[i])
    }

    /// The cell at current index `i` and resistance index `j`.
    fn cell(&self, i: usize, j: usize) -> Option<&RegionCellRecord> {
        let currents = self.grid_of("tail_current").len();
        let resistances = self.grid_of("emitter_resistance").len();
        if i >= currents || j >= resistances {
            return None;
        }
        // Cells are stored row by row: the minimised variable, then the other.
        let index = if self.record.minimise == "tail_current" {
            i * resistances + j
        } else {
            j * currents + i
        };
        self.record.cells.get(index)
    }
}

impl Drawing for RegionPlot {
    fn kind(&self) -> PlotKind {
        PlotKind::SizingRegion
    }
    fn slug(&self) -> Option<&str> {
        Some(&self.slug)
    }
    fn title(&self) -> String {
        format!("Usable designs · {}", self.stage)
    }
    fn caption(&self) -> String {
        format!(
            "Every design of the sizing grid of “{}”, tail current against emitter resistance: green where every budget line holds by the {} dB guard band at every temperature, otherwise tinted by the line that fails it worst; each edge of the green region is drawn in the colour of the line that closes it. The tints are the grid's designs; the ringed diamond is the design recommended, refined between grid points.",
            self.stage,
            num(self.record.guard_band_db, 1)
        )
    }
    fn key(&self) -> Key {
        let mut key = Key::default();
        key.entry(
            Swatch::Band {
                colour: PASS,
                alpha: 0.45,
            },
            "every line holds (grid design)",
        );
        for metric in &self.metrics {
            key.entry(
                Swatch::Line {
                    colour: limit_colour(metric),
                    alpha: 1.0,
                    width: 5,
                    pattern: pattern(0),
                    marker: None,
                },
                format!(
                    "{} fails worst (tint) and closes the edge",
                    line_label(metric)
                ),
            );
        }
        key.verdict_heading = "Recommended design".into();
        key.verdicts = vec![design_row(&self.record)];
        key.notes.push(format!(
            "{} designs evaluated at every temperature and corner",
            self.record.designs_evaluated
        ));
        key
    }
    fn axes(&self) -> Vec<Axis> {
        vec![self.x.clone(), self.y.clone()]
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> DrawResult {
        let r = &self.record;
        let subtitle = if r.met {
            format!(
                "least {}: I_tail = {}, R_E = {} · binding {} at {}",
                r.minimise.replace('_', " "),
                si_short(r.tail_current_a, "A"),
                si_short(r.emitter_resistance_ohm, "Ω"),
                line_label(&r.binding_metric),
                celsius(r.binding_temperature_c)
            )
        } else {
            format!(
                "no design holds every line; best: I_tail = {}, R_E = {}, limited by {}",
                si_short(r.tail_current_a, "A"),
                si_short(r.emitter_resistance_ohm, "Ω"),
                line_label(&r.binding_metric)
            )
        };
        let body = frame(root, &self.title(), &subtitle)?;
        let (plot, side) = split(&body);
        draw_key(&side, &self.key())?;
        let currents = self.grid_of("tail_current");
        let resistances = self.grid_of("emitter_resistance");
        let x_edges = cell_edges(currents, true);
        let y_edges = cell_edges(resistances, false);
        let (x, y) = (&self.x, &self.y);
        let mut chart =
            house_chart(&plot, 24, 110).build_cartesian_2d(x.log_range(), y.linear_range())?;
        mesh_style(&mut chart.configure_mesh())
            .disable_mesh()
            .x_desc("tail current I_tail, the pair's supply current (log)")
            .y_desc("emitter resistance per side R_E")
            .x_label_formatter(&|v| x.label(*v))
            .y_label_formatter(&|v| y.label(*v))
            .draw()?;

        for i in 0..currents.len() {
            for j in 0..resistances.len() {
                let Some(cell) = self.cell(i, j) else {
                    continue;
                };
                let fill = if cell.holds {
                    PASS.mix(0.45)
                } else {
                    limit_colour(&cell.limiting_metric).mix(0.22)
                };
                chart.draw_series(std::iter::once(Rectangle::new(
                    [(x_edges[i], y_edges[j]), (x_edges[i + 1], y_edges[j + 1])],
                    fill.filled(),
                )))?;
            }
        }
        // Edges of the usable region, in the colour of the line failing on the other side.
        let mut edges: Vec<(Vec<(f64, f64)>, RGBColor)> = Vec::new();
        for i in 0..currents.len() {
            for j in 0..resistances.len() {
                if !self.cell(i, j).is_some_and(|c| c.holds) {
                    continue;
                }
                let neighbours = [
                    (
                        i.wrapping_sub(1),
                        j,
                        vec![(x_edges[i], y_edges[j]), (x_edges[i], y_edges[j + 1])],
                    ),
                    (
                        i + 1,
                        j,
                        vec![
                            (x_edges[i + 1], y_edges[j]),
                            (x_edges[i + 1], y_edges[j + 1]),
                        ],
                    ),
                    (
                        i,
                        j.wrapping_sub(1),
                        vec![(x_edges[i], y_edges[j]), (x_edges[i + 1], y_edges[j])],
                    ),
                    (
                        i,
                        j + 1,
                        vec![
                            (x_edges[i], y_edges[j + 1]),
                            (x_edges[i + 1], y_edges[j + 1]),
                        ],
                    ),
                ];
                for (ni, nj, segment) in neighbours {
                    if let Some(other) = self.cell(ni, nj).filter(|c| !c.holds) {
                        edges.push((segment, limit_colour(&other.limiting_metric)));
                    }
                }
            }
        }
        for (segment, colour) in edges {
            chart.draw_series(std::iter::once(PathElement::new(
                segment,
                colour.stroke_width(5),
            )))?;
        }
        let chosen = (r.tail_current_a, r.emitter_resistance_ohm);
        let mark = if r.met { PASS } else { FAIL };
        chart.draw_series(std::iter::once(
            EmptyElement::at(chosen)
                + Circle::new((0, 0), 15, PAPER.filled())
                + Circle::new((0, 0), 15, INK.stroke_width(3))
                + Marker::Diamond.element((0, 0), mark.mix(1.0)),
        ))?;
        Ok(())
    }
}

/// The Pareto fronts of one stage's sizing region.
pub struct ParetoPlot {
    stage: String,
    slug: String,
    record: RegionRecord,
    x: Axis,
    noise_y: Axis,
    distortion_y: Option<Axis>,
}

/// Scale and unit of a distortion front's values as drawn (mV for volts).
fn distortion_scale(unit: &str) -> (f64, String) {
    if unit == "V" {
        (1e3, "mV".into())
    } else {
        (1.0, unit.to_owned())
    }
}

/// The noise line's limit, V/√Hz, from a front point's value and margin (margin =
/// 20·log10(limit / value) for a max line).
fn noise_limit(record: &RegionRecord) -> Option<f64> {
    record
        .noise_front
        .iter()
        .find_map(|p| p.margin.map(|m| p.value * 10f64.powf(m / 20.0)))
}

/// A value axis around `values` and an optional limit.
fn value_axis(values: impl Iterator<Item = f64>, limit: Option<f64>) -> Axis {
    let (mut low, mut high) = values.fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), v| {
        (lo.min(v), hi.max(v))
    });
    if let Some(l) = limit {
        low = low.min(l);
        high = high.max(l);
    }
    if !low.is_finite() {
        (low, high) = (0.0, 1.0);
    }
    let pad = ((high - low) * 0.12).max(0.5);
    Axis::linear(low - pad, high + pad, 6)
}

impl ParetoPlot {
    /// The figure, when the stage's current was sized and a front has points.
    pub fn new(report: &Report, stage: &str, slug: &str) -> Option<Self> {
        let record = report.sizing_region.iter().find(|r| r.stage == stage)?;
        let distortion = record
            .distortion_front
            .as_ref()
            .filter(|f| !f.points.is_empty());
        if record.noise_front.is_empty() && distortion.is_none() {
            return None;
        }
        let currents: Vec<f64> = record
            .variables
            .iter()
            .position(|v| v == "tail_current")
            .and_then(|i| record.grid.get(i))
            .cloned()
            .unwrap_or_else(|| vec![record.tail_current_a / 2.0, record.tail_current_a * 2.0]);
        let x = Axis::log(&currents, "A");
        let noise_y = value_axis(
            record.noise_front.iter().map(|p| 1e9 * p.value),
            noise_limit(record).map(|l| 1e9 * l),
        );
        let distortion_y = distortion.map(|f| {
            let (scale, _) = distortion_scale(&f.unit);
            value_axis(
                f.points.iter().map(|p| scale * p.value),
                Some(scale * f.limit),
            )
        });
        Some(ParetoPlot {
            stage: stage.to_owned(),
            slug: slug.to_owned(),
            record: record.clone(),
            x,
            noise_y,
            distortion_y,
        })
    }
}

/// One front panel: `points` (scaled) against current, with the limit and the recommended
/// current marked.
#[allow(clippy::too_many_arguments)]
fn front_panel<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    (x, y): (&Axis, &Axis),
    points: &[FrontRecord],
    scale: f64,
    y_desc: &str,
    limit: Option<f64>,
    chosen_current: f64,
    (colour, marker): (RGBColor, Marker),
) -> DrawResult {
    let mut chart =
        house_chart(area, 24, 96).build_cartesian_2d(x.log_range(), y.linear_range())?;
    mesh_style(&mut chart.configure_mesh())
        .x_desc("tail current (log)")
        .y_desc(y_desc)
        .x_label_formatter(&|v| x.label(*v))
        .y_label_formatter(&|v| y.label(*v))
        .draw()?;
    if let Some(l) = limit {
        let l = l * scale;
        chart.draw_series(std::iter::once(PathElement::new(
            vec![(x.low, l), (x.high, l)],
            FAIL.stroke_width(2),
        )))?;
    }
    let line: Vec<(f64, Option<f64>)> = points
        .iter()
        .map(|p| (p.tail_current_a, Some(p.value * scale)))
        .collect();
    draw_runs(
        &mut chart,
        &line,
        (y.low, y.high),
        true,
        pattern(0),
        colour.stroke_width(3),
    )?;
    draw_markers(&mut chart, &line, (y.low, y.high), marker, colour)?;
    chart.draw_series(std::iter::once(dashed(
        vec![(chosen_current, y.low), (chosen_current, y.high)],
        pattern(1),
        PASS.stroke_width(3),
    )))?;
    Ok(())
}

impl Drawing for ParetoPlot {
    fn kind(&self) -> PlotKind {
        PlotKind::SizingPareto
    }
    fn slug(&self) -> Option<&str> {
        Some(&self.slug)
    }
    fn title(&self) -> String {
        format!("What current buys · {}", self.stage)
    }
    fn caption(&self) -> String {
        format!(
            "Pareto fronts of “{}”: the least input noise (left) and the best binding distortion figure (right) reachable at each grid tail current among the designs meeting every other budget line (every non-distortion line, for the right panel); the dashed line is the recommended current.",
            self.stage
        )
    }
    fn key(&self) -> Key {
        let r = &self.record;
        let mut key = Key::default();
        if !r.noise_front.is_empty() {
            key.entry(
                Swatch::line(
                    limit_colour("input_noise"),
                    3,
                    Some(metric_marker("input_noise")),
                ),
                "input noise: least at each current (left)",
            );
        }
        if let Some(front) = r.distortion_front.as_ref().filter(|f| !f.points.is_empty()) {
            let at = front
                .at_v
                .map(|a| format!(" at {}", si_exact(a, "V")))
                .unwrap_or_default();
            key.entry(
                Swatch::line(
                    limit_colour(&front.metric),
                    3,
                    Some(metric_marker(&front.metric)),
                ),
                format!(
                    "{}{at}: best at each current (right)",
                    line_label(&front.metric)
                ),
            );
        }
        key.entry(Swatch::line(FAIL, 2, None), "budget limit");
        key.entry(
            Swatch::Line {
                colour: PASS,
                alpha: 1.0,
                width: 3,
                pattern: pattern(1),
                marker: None,
            },
            "recommended tail current",
        );
        key.verdict_heading = "Recommended design".into();
        key.verdicts = vec![design_row(r)];
        key
    }
    fn axes(&self) -> Vec<Axis> {
        let mut axes = vec![self.x.clone(), self.noise_y.clone()];
        axes.extend(self.distortion_y.clone());
        axes
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> DrawResult {
        let r = &self.record;
        let subtitle = format!(
            "supply current against input noise and against {}; guard band {} dB",
            r.distortion_front
                .as_ref()
                .map(|f| line_label(&f.metric))
                .unwrap_or_else(|| "distortion".into()),
            num(r.guard_band_db, 1)
        );
        let body = frame(root, &self.title(), &subtitle)?;
        let (plot, side) = split(&body);
        draw_key(&side, &self.key())?;
        let (width, _) = plot.dim_in_pixel();
        let (left, right) = plot.split_horizontally(width / 2);
        if !r.noise_front.is_empty() {
            front_panel(
                &left,
                (&self.x, &self.noise_y),
                &r.noise_front,
                1e9,
                "input noise density (nV/√Hz)",
                noise_limit(r),
                r.tail_current_a,
                (limit_colour("input_noise"), metric_marker("input_noise")),
            )?;
        }
        if let (Some(front), Some(y)) = (&r.distortion_front, &self.distortion_y) {
            let at = front
                .at_v
                .map(|a| format!(" at {}", si_exact(a, "V")))
                .unwrap_or_default();
            let (scale, unit) = distortion_scale(&front.unit);
            front_panel(
                &right,
                (&self.x, y),
                &front.points,
                scale,
                &format!("{}{at} ({unit})", line_label(&front.metric)),
                Some(front.limit),
                r.tail_current_a,
                (limit_colour(&front.metric), metric_marker(&front.metric)),
            )?;
        }
        Ok(())
    }
}
