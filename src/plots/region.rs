//! Sizing over a region: the map of tail current against emitter resistance, each design
//! coloured by the line that limits it and every edge of the usable region drawn in the colour
//! of the line that closes it; and the Pareto fronts of supply current against input noise and
//! against the binding distortion figure.

use super::style::*;
use super::{DrawResult, Drawing, PlotKind};
use crate::report::{FrontRecord, RegionCellRecord, RegionRecord, Report};
use plotters::coord::Shift;
use plotters::prelude::*;

/// Colour of the line limiting a design: the metric's colour, the collector-base margin's
/// slate for headroom.
fn limit_colour(metric: &str) -> RGBColor {
    match metric {
        "input_noise" => SERIES[2],
        "collector_base_margin" => RGBColor(0x8a, 0x6d, 0x3b),
        "none" => MUTED,
        other => metric_colour(other),
    }
}

/// A metric's name as drawn.
fn metric_label(metric: &str) -> String {
    match metric {
        "input_noise" => "input noise".into(),
        "collector_base_margin" => "collector-base margin".into(),
        "steering_range" => "steering range".into(),
        other => other.to_uppercase(),
    }
}

/// Boundaries of the cells around grid values: midpoints (geometric on a log axis), the
/// range's ends outside.
fn cell_edges(grid: &[f64], geometric: bool) -> Vec<f64> {
    let mut edges = Vec::with_capacity(grid.len() + 1);
    let mid = |a: f64, b: f64| {
        if geometric {
            (a * b).sqrt()
        } else {
            0.5 * (a + b)
        }
    };
    edges.push(match grid {
        [a, b, ..] => {
            if geometric {
                a * (a / b).sqrt()
            } else {
                a - 0.5 * (b - a)
            }
        }
        [a] => *a,
        [] => 0.0,
    });
    for pair in grid.windows(2) {
        edges.push(mid(pair[0], pair[1]));
    }
    edges.push(match grid {
        [.., a, b] => {
            if geometric {
                b * (b / a).sqrt()
            } else {
                b + 0.5 * (b - a)
            }
        }
        [a] => *a,
        [] => 0.0,
    });
    edges
}

/// The map of one stage's sizing region.
pub struct RegionPlot {
    stage: String,
    slug: String,
    record: RegionRecord,
}

impl RegionPlot {
    /// The figure, when the stage was sized over tail current and emitter resistance.
    pub fn new(report: &Report, stage: &str, slug: &str) -> Option<Self> {
        let record = report.sizing_region.iter().find(|r| r.stage == stage)?;
        let has = |v: &str| record.variables.iter().any(|n| n == v);
        (has("tail_current") && has("emitter_resistance")).then(|| RegionPlot {
            stage: stage.to_owned(),
            slug: slug.to_owned(),
            record: record.clone(),
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
            "Every design of the sizing grid of “{}”: green where every budget line holds by the {} dB guard band at every temperature, otherwise tinted by the line that fails it worst; each edge of the green region is drawn in the colour of the line that closes it. The tints are the grid's designs; the ringed diamond is the design recommended, refined between grid points.",
            self.stage,
            num(self.record.guard_band_db, 1)
        )
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> DrawResult {
        let r = &self.record;
        let subtitle = if r.met {
            format!(
                "least {}: I_tail = {}, R_E = {} · binding {} at {}",
                r.minimise.replace('_', " "),
                si(r.tail_current_a, "A"),
                si(r.emitter_resistance_ohm, "Ω"),
                metric_label(&r.binding_metric),
                celsius(r.binding_temperature_c)
            )
        } else {
            format!(
                "no design holds every line; best: I_tail = {}, R_E = {}, limited by {}",
                si(r.tail_current_a, "A"),
                si(r.emitter_resistance_ohm, "Ω"),
                metric_label(&r.binding_metric)
            )
        };
        let body = frame(root, &self.title(), &subtitle)?;
        let currents = self.grid_of("tail_current");
        let resistances = self.grid_of("emitter_resistance");
        let x_edges = cell_edges(currents, true);
        let y_edges = cell_edges(resistances, false);
        let (x_low, x_high) = (x_edges[0], x_edges[x_edges.len() - 1]);
        let (y_low, y_high) = (y_edges[0], y_edges[y_edges.len() - 1]);
        let mut chart = house_chart(&body, 40, 110)
            .build_cartesian_2d((x_low..x_high).log_scale(), y_low..y_high)?;
        mesh_style(&mut chart.configure_mesh())
            .disable_mesh()
            .x_desc("tail current I_tail (supply current of the pair, log)")
            .y_desc("emitter resistance per side R_E (Ω)")
            .x_label_formatter(&|v| log_tick(*v, "A"))
            .y_label_formatter(&|v| si(*v, "").trim().to_owned())
            .draw()?;

        let mut metrics: Vec<String> = Vec::new();
        for i in 0..currents.len() {
            for j in 0..resistances.len() {
                let Some(cell) = self.cell(i, j) else {
                    continue;
                };
                let fill = if cell.holds {
                    PASS.mix(0.45)
                } else {
                    if !metrics.contains(&cell.limiting_metric) {
                        metrics.push(cell.limiting_metric.clone());
                    }
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
        let at = chart.backend_coord(&chosen);
        let label = format!(
            "{} · {}",
            si(r.tail_current_a, "A"),
            si(r.emitter_resistance_ohm, "Ω")
        );
        let (width, _) = root.dim_in_pixel();
        let right = at.0 > width as i32 - 420;
        backed_label(
            root,
            &label,
            (if right { at.0 - 24 } else { at.0 + 24 }, at.1),
            bold(LEGEND_PX).color(&INK),
            right,
        )?;

        legend_entry(
            &mut chart,
            "every line holds",
            pattern(0),
            PASS.mix(0.6).filled(),
            Some(Marker::Square),
        )?;
        for metric in &metrics {
            legend_entry(
                &mut chart,
                &format!("{} fails worst · the edge it closes", metric_label(metric)),
                pattern(0),
                limit_colour(metric).stroke_width(5),
                Some(Marker::Square),
            )?;
        }
        legend_entry(
            &mut chart,
            "recommended design",
            pattern(0),
            mark.stroke_width(0),
            Some(Marker::Diamond),
        )?;
        legend(&mut chart, SeriesLabelPosition::UpperRight)?;
        Ok(())
    }
}

/// The Pareto fronts of one stage's sizing region.
pub struct ParetoPlot {
    stage: String,
    slug: String,
    record: RegionRecord,
}

impl ParetoPlot {
    /// The figure, when the stage's current was sized and a front has points.
    pub fn new(report: &Report, stage: &str, slug: &str) -> Option<Self> {
        let record = report.sizing_region.iter().find(|r| r.stage == stage)?;
        let distortion = record
            .distortion_front
            .as_ref()
            .is_some_and(|f| !f.points.is_empty());
        (!record.noise_front.is_empty() || distortion).then(|| ParetoPlot {
            stage: stage.to_owned(),
            slug: slug.to_owned(),
            record: record.clone(),
        })
    }
}

/// One front panel: `values` against current with the chosen current and the limit marked.
#[allow(clippy::too_many_arguments)]
fn front_panel<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    points: &[FrontRecord],
    scale: f64,
    y_desc: &str,
    unit: &str,
    limit: Option<f64>,
    chosen_current: f64,
    currents: (f64, f64),
    colour: RGBColor,
    name: &str,
) -> DrawResult {
    let values: Vec<(f64, f64)> = points
        .iter()
        .map(|p| (p.tail_current_a, p.value * scale))
        .collect();
    if values.is_empty() {
        return Ok(());
    }
    let (mut low, mut high) = values
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), (_, v)| {
            (lo.min(*v), hi.max(*v))
        });
    if let Some(l) = limit {
        low = low.min(l * scale);
        high = high.max(l * scale);
    }
    let pad = ((high - low) * 0.12).max(0.5);
    let (y_low, y_high) = (low - pad, high + pad);
    let (x_low, x_high) = log_span(currents.0, currents.1, 1.1);
    let mut chart =
        house_chart(area, 24, 96).build_cartesian_2d((x_low..x_high).log_scale(), y_low..y_high)?;
    mesh_style(&mut chart.configure_mesh())
        .x_desc("tail current (supply current, log)")
        .y_desc(y_desc)
        .x_label_formatter(&|v| log_tick(*v, "A"))
        .y_label_formatter(&|v| num(*v, 1))
        .draw()?;
    if let Some(l) = limit {
        let l = l * scale;
        chart.draw_series(std::iter::once(PathElement::new(
            vec![(x_low, l), (x_high, l)],
            FAIL.stroke_width(2),
        )))?;
        legend_entry(
            &mut chart,
            &format!("budget limit {} {unit}", num(l, 1)),
            pattern(0),
            FAIL.stroke_width(2),
            None,
        )?;
    }
    let line: Vec<(f64, Option<f64>)> = values.iter().map(|(c, v)| (*c, Some(*v))).collect();
    draw_runs(
        &mut chart,
        &line,
        (y_low, y_high),
        true,
        pattern(0),
        colour.stroke_width(3),
    )?;
    draw_markers(&mut chart, &line, (y_low, y_high), Marker::Circle, colour)?;
    legend_entry(
        &mut chart,
        &format!("{name}: Pareto front of the grid"),
        pattern(0),
        colour.stroke_width(3),
        Some(Marker::Circle),
    )?;
    chart.draw_series(std::iter::once(dashed(
        vec![(chosen_current, y_low), (chosen_current, y_high)],
        pattern(1),
        PASS.stroke_width(3),
    )))?;
    legend_entry(
        &mut chart,
        &format!("recommended I_tail = {}", si(chosen_current, "A")),
        pattern(1),
        PASS.stroke_width(3),
        None,
    )?;
    legend(&mut chart, SeriesLabelPosition::UpperRight)?;
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

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> DrawResult {
        let r = &self.record;
        let subtitle = format!(
            "supply current I_tail against input noise and against {}; guard band {} dB",
            r.distortion_front
                .as_ref()
                .map(|f| metric_label(&f.metric))
                .unwrap_or_else(|| "distortion".into()),
            num(r.guard_band_db, 1)
        );
        let body = frame(root, &self.title(), &subtitle)?;
        let currents = r
            .variables
            .iter()
            .position(|v| v == "tail_current")
            .and_then(|i| r.grid.get(i))
            .and_then(|g| Some((*g.first()?, *g.last()?)))
            .unwrap_or((r.tail_current_a / 2.0, r.tail_current_a * 2.0));
        let (width, _) = body.dim_in_pixel();
        let (left, right) = body.split_horizontally(width / 2);
        front_panel(
            &left,
            &r.noise_front,
            1e9,
            "input noise density (nV/√Hz)",
            "nV/√Hz",
            r.noise_front
                .iter()
                .find_map(|p| p.margin.map(|m| p.value * 10f64.powf(m / 20.0))),
            r.tail_current_a,
            currents,
            limit_colour("input_noise"),
            "input noise",
        )?;
        if let Some(front) = &r.distortion_front {
            let at = front
                .at_v
                .map(|a| format!(" at {}", si(a, "V")))
                .unwrap_or_default();
            let (scale, unit) = if front.unit == "V" {
                (1e3, "mV")
            } else {
                (1.0, front.unit.as_str())
            };
            front_panel(
                &right,
                &front.points,
                scale,
                &format!("{}{at} ({unit})", metric_label(&front.metric)),
                unit,
                Some(front.limit),
                r.tail_current_a,
                currents,
                limit_colour(&front.metric),
                &metric_label(&front.metric),
            )?;
        }
        Ok(())
    }
}
