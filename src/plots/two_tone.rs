//! Two-tone: output fundamental (per tone) and IM3 versus input level in dBV, with the fitted
//! 1:1 and 3:1 lines meeting at the third-order intercept and the fit region shaded.

use super::bench::{bench_entries, bench_marks, draw_bench, same};
use super::style::*;
use super::{DrawResult, Drawing, PlotKind};
use crate::report::{BudgetRecord, InterceptRecord, PointRecord, Report};
use plotters::coord::Shift;
use plotters::prelude::*;

/// Peak volts to dBV (re 1 V peak, the report's convention for IIP3 in dBV).
pub fn dbv(volts: f64) -> f64 {
    20.0 * volts.log10()
}

/// The two-tone figure of one stage at its typical temperature and first frequency.
pub struct TwoTonePlot {
    stage: String,
    slug: String,
    temperature_c: f64,
    points: Vec<PointRecord>,
    intercept: InterceptRecord,
    others: Vec<InterceptRecord>,
    budget: Vec<BudgetRecord>,
    /// Bench IM3 products as (input dBV, output dBV): the measured IM3 on the measured
    /// output fundamental (`fundamental_v`, or the measured gain) of the same row.
    bench_im3: Vec<(f64, f64)>,
}

impl TwoTonePlot {
    /// The figure, if the plan ran two tones and an intercept was found.
    pub fn new(report: &Report, stage: &str, slug: &str) -> Option<Self> {
        let temps = temperatures(report);
        let typical = typical_temperature(&temps)?;
        let frequency_hz = report
            .points
            .iter()
            .find(|p| p.stage == stage)?
            .frequency_hz;
        let intercept = report
            .intercepts
            .iter()
            .find(|i| {
                i.stage == stage
                    && i.temperature_c == typical
                    && i.frequency_hz == frequency_hz
                    && i.iip3_v.is_some()
            })?
            .clone();
        let points: Vec<PointRecord> = report
            .points
            .iter()
            .filter(|p| {
                p.stage == stage && p.temperature_c == typical && p.frequency_hz == frequency_hz
            })
            .filter(|p| p.im3_dbc.is_some())
            .cloned()
            .collect();
        if points.is_empty() {
            return None;
        }
        let others = report
            .intercepts
            .iter()
            .filter(|i| {
                i.stage == stage && i.frequency_hz == frequency_hz && i.temperature_c != typical
            })
            .cloned()
            .collect();
        let budget = report
            .budget
            .iter()
            .filter(|b| b.stage == stage && b.temperature_c == typical && b.metric == "iip3")
            .cloned()
            .collect();
        let marks = bench_marks(report, Some(stage));
        let bench_im3 = marks
            .iter()
            .filter(|b| {
                b.metric == "im3"
                    && b.temperature_c == typical
                    && same(b.frequency_hz, frequency_hz)
            })
            .filter_map(|b| {
                let companion = |metric: &str| {
                    marks
                        .iter()
                        .find(|c| c.row == b.row && c.metric == metric)
                        .map(|c| c.bench)
                };
                let output = companion("fundamental")
                    .map(dbv)
                    .or_else(|| companion("gain").map(|g| dbv(b.amplitude_v) + g))?;
                Some((dbv(b.amplitude_v), output + b.bench))
            })
            .collect();
        Some(TwoTonePlot {
            bench_im3,
            stage: stage.to_owned(),
            slug: slug.to_owned(),
            temperature_c: typical,
            points,
            intercept,
            others,
            budget,
        })
    }
}

impl Drawing for TwoTonePlot {
    fn kind(&self) -> PlotKind {
        PlotKind::TwoTone
    }
    fn slug(&self) -> Option<&str> {
        Some(&self.slug)
    }
    fn title(&self) -> String {
        format!("Two-tone intercept · {}", self.stage)
    }
    fn caption(&self) -> String {
        format!(
            "Output fundamental of one tone and the larger IM3 product of “{}” versus input level per tone (dBV, peak) at {}; the fitted 1:1 and 3:1 lines (dashed) meet at the third-order intercept, extrapolated from the shaded small-signal fit region.",
            self.stage,
            celsius(self.temperature_c)
        )
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> DrawResult {
        let i = &self.intercept;
        let Some(iip3_v) = i.iip3_v else {
            return Ok(());
        };
        let x_ip = dbv(iip3_v);
        let gain = i.small_signal_gain_db;
        let y_ip = x_ip + gain;
        let mut subtitle = format!(
            "{} · {} · IIP3 {} dBV ({}) · OIP3 {} dBV",
            celsius(self.temperature_c),
            si(i.frequency_hz, "Hz"),
            num(x_ip, 1),
            si(iip3_v, "V"),
            num(y_ip, 1)
        );
        for other in &self.others {
            if let Some(v) = other.iip3_v {
                subtitle.push_str(&format!(
                    " · at {}: IIP3 {} dBV",
                    celsius(other.temperature_c),
                    num(dbv(v), 1)
                ));
            }
        }
        let body = frame(root, &self.title(), &subtitle)?;

        let measured: Vec<(f64, f64, Option<f64>)> = self
            .points
            .iter()
            .map(|p| {
                let fundamental = dbv(p.two_tone_fundamental_v.unwrap_or(p.fundamental_v));
                (
                    dbv(p.amplitude_v),
                    fundamental,
                    p.im3_dbc.flatten().map(|d| fundamental + d),
                )
            })
            .collect();
        let fit = i.iip3_fit_amplitude_v.map(dbv);
        let limits: Vec<f64> = self.budget.iter().map(|b| dbv(b.limit)).collect();
        let xs = measured
            .iter()
            .map(|m| m.0)
            .chain(fit)
            .chain([x_ip])
            .chain(limits.iter().copied());
        let (x_min, x_max) = xs.fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), x| {
            (lo.min(x), hi.max(x))
        });
        let (x_low, x_high) = db_span(x_min - 6.0, x_max + 8.0, 10.0);
        let ys = measured
            .iter()
            .flat_map(|m| [Some(m.1), m.2])
            .flatten()
            .chain([y_ip])
            .chain(self.bench_im3.iter().map(|b| b.1));
        let (y_min, y_max) = ys.fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), y| {
            (lo.min(y), hi.max(y))
        });
        let (y_low, y_high) = db_span((y_min - 10.0).max(y_max - 220.0), y_max + 12.0, 20.0);

        let mut chart =
            house_chart(&body, 48, 96).build_cartesian_2d(x_low..x_high, y_low..y_high)?;
        mesh_style(&mut chart.configure_mesh())
            .x_desc("input per tone (dBV, peak)")
            .y_desc("output per tone (dBV, peak)")
            .x_label_formatter(&|v| num(*v, 0))
            .y_label_formatter(&|v| num(*v, 0))
            .draw()?;

        if let Some(fit_lo) = fit {
            let fit_hi = fit_lo + dbv(2.0);
            chart
                .draw_series(std::iter::once(Rectangle::new(
                    [(fit_lo, y_low), (fit_hi, y_high)],
                    SERIES[3].mix(0.16).filled(),
                )))?
                .label("fit region (IM3 slope 3:1)")
                .legend(|(x, y)| {
                    Rectangle::new(
                        [(x - 2, y - 8), (x + 30, y + 8)],
                        SERIES[3].mix(0.3).filled(),
                    )
                });
        }
        for (line, x) in self.budget.iter().zip(&limits) {
            let colour = if line.pass { PASS } else { FAIL };
            // A line, not a shaded area: the whole plane left of it would read as "failing"
            // although only the intercept point is judged against it.
            chart
                .draw_series(std::iter::once(dashed(
                    vec![(*x, y_low), (*x, y_high)],
                    (14, 8),
                    colour.stroke_width(2),
                )))?
                .label(format!(
                    "IIP3 budget ≥ {} ({} dBV): the intercept must lie right of this line",
                    si(line.limit, "V"),
                    num(*x, 1)
                ))
                .legend(move |(lx, ly)| {
                    PathElement::new(vec![(lx - 2, ly), (lx + 30, ly)], colour.stroke_width(2))
                });
        }

        let fundamental_colour = SERIES[0];
        let im3_colour = SERIES[1];
        let fit_one: Vec<(f64, Option<f64>)> =
            vec![(x_low, Some(x_low + gain)), (x_high, Some(x_high + gain))];
        let fit_three: Vec<(f64, Option<f64>)> = vec![
            (x_low, Some(3.0 * x_low + gain - 2.0 * x_ip)),
            (x_high, Some(3.0 * x_high + gain - 2.0 * x_ip)),
        ];
        draw_runs(
            &mut chart,
            &fit_one,
            (y_low, y_high),
            false,
            (14, 8),
            fundamental_colour.mix(0.8).stroke_width(2),
        )?;
        draw_runs(
            &mut chart,
            &fit_three,
            (y_low, y_high),
            false,
            (14, 8),
            im3_colour.mix(0.8).stroke_width(2),
        )?;

        let fundamental: Vec<(f64, Option<f64>)> =
            measured.iter().map(|m| (m.0, Some(m.1))).collect();
        let im3: Vec<(f64, Option<f64>)> = measured.iter().map(|m| (m.0, m.2)).collect();
        draw_runs(
            &mut chart,
            &fundamental,
            (y_low, y_high),
            false,
            pattern(0),
            fundamental_colour.stroke_width(3),
        )?;
        draw_markers(
            &mut chart,
            &fundamental,
            (y_low, y_high),
            Marker::Circle,
            fundamental_colour,
        )?;
        draw_runs(
            &mut chart,
            &im3,
            (y_low, y_high),
            false,
            pattern(0),
            im3_colour.stroke_width(3),
        )?;
        draw_markers(
            &mut chart,
            &im3,
            (y_low, y_high),
            Marker::Triangle,
            im3_colour,
        )?;

        chart.draw_series(std::iter::once(
            EmptyElement::at((x_ip, y_ip))
                + Circle::new((0, 0), 12, INK.stroke_width(3))
                + Circle::new((0, 0), 4, INK.filled()),
        ))?;
        let anchor = chart.backend_coord(&(x_ip, y_ip));
        backed_label(
            root,
            &format!(
                "intercept: IIP3 {} dBV, OIP3 {} dBV",
                num(x_ip, 1),
                num(y_ip, 1)
            ),
            (anchor.0 - 20, anchor.1 - 26),
            bold(LEGEND_PX).color(&INK),
            true,
        )?;

        if !self.bench_im3.is_empty() {
            draw_bench(&mut chart, &self.bench_im3, (y_low, y_high), 0, im3_colour)?;
        }
        legend_entry(
            &mut chart,
            "output fundamental (model)",
            pattern(0),
            fundamental_colour.stroke_width(3),
            Some(Marker::Circle),
        )?;
        legend_entry(
            &mut chart,
            "IM3 product (model)",
            pattern(0),
            im3_colour.stroke_width(3),
            Some(Marker::Triangle),
        )?;
        legend_entry(
            &mut chart,
            "1:1 fit (small-signal gain)",
            (14, 8),
            fundamental_colour.stroke_width(2),
            None,
        )?;
        legend_entry(
            &mut chart,
            "3:1 fit through the intercept",
            (14, 8),
            im3_colour.stroke_width(2),
            None,
        )?;
        if !self.bench_im3.is_empty() {
            bench_entries(&mut chart, &[("IM3 product (bench)".to_owned(), 0)])?;
        }
        legend(&mut chart, SeriesLabelPosition::LowerRight)?;
        Ok(())
    }
}
