//! Two-tone: output fundamental (per tone) and IM3 versus input level in dBV, with the fitted
//! 1:1 and 3:1 lines meeting at the third-order intercept and the fit region shaded; IIP3 and
//! OIP3 budget lines as limit lines and IM3 lines as hatched limit bars at their amplitude.
//! One figure at the first frequency and one at every frequency an IM3 or intercept line names.

use super::axis::Axis;
use super::bench::{bench_marks, draw_bench, same};
use super::harmonics::{figure_frequencies, frequency_slug};
use super::key::{draw_key, hatch_pixels, split, verdict_marker, Key, Swatch};
use super::style::*;
use super::verdicts::{lines_of, LineChecks};
use super::{DrawResult, Drawing, PlotKind};
use crate::report::{BudgetRecord, InterceptRecord, PointRecord, Region, Report};
use plotters::coord::Shift;
use plotters::prelude::*;

/// Peak volts to dBV (re 1 V peak, the report's convention for IIP3 in dBV).
pub fn dbv(volts: f64) -> f64 {
    20.0 * volts.log10()
}

/// The two-tone figure of one stage at its typical temperature and one frequency.
pub struct TwoTonePlot {
    stage: String,
    slug: String,
    temperature_c: f64,
    points: Vec<PointRecord>,
    intercept: InterceptRecord,
    others: Vec<InterceptRecord>,
    lines: Vec<LineChecks>,
    /// Bench IM3 products as (input dBV, output dBV) at the drawn temperature.
    bench_im3: Vec<(f64, f64)>,
    /// Operating region at rest (zero input) at the drawn temperature, typical corner.
    at_rest: Option<Region>,
    x: Axis,
    y: Axis,
}

fn is_two_tone_line(b: &BudgetRecord) -> bool {
    matches!(b.metric.as_str(), "im3" | "iip3" | "oip3")
}

const FUNDAMENTAL: RGBColor = SERIES[0];
/// IM3 in its metric colour, as in every figure.
const IM3: RGBColor = SERIES[3];
/// The fit region's shade.
const FIT: RGBColor = SERIES[6];
/// Opacity of the bar along the top that marks an operating region (as in the sizing
/// figure): a band would look like the fit region's.
const REGION_BAR_ALPHA: f64 = 0.55;
/// Width of that bar, px.
const REGION_BAR_PX: u32 = 7;

/// The bar's pattern: solid for saturation, dashed for high-level injection.
fn region_pattern(region: Region) -> (i32, i32) {
    if region == Region::Saturating {
        pattern(0)
    } else {
        (16, 9)
    }
}

impl TwoTonePlot {
    /// The figures of a stage: at its first frequency and at each frequency an IM3, IIP3 or
    /// OIP3 line names (plans with two-tone drive whose intercept was found).
    pub fn all(report: &Report, stage: &str, slug: &str) -> Vec<Self> {
        figure_frequencies(report, stage, is_two_tone_line)
            .into_iter()
            .enumerate()
            .filter_map(|(i, f)| {
                let slug = if i == 0 {
                    slug.to_owned()
                } else {
                    format!("{slug}-{}", frequency_slug(f))
                };
                TwoTonePlot::at(report, stage, &slug, f)
            })
            .collect()
    }

    fn at(report: &Report, stage: &str, slug: &str, frequency_hz: f64) -> Option<Self> {
        let temps = temperatures(report);
        let typical = typical_temperature(&temps)?;
        let intercept = report
            .intercepts
            .iter()
            .find(|i| {
                i.stage == stage
                    && i.temperature_c == typical
                    && i.frequency_hz == frequency_hz
                    && is_typical(&i.corner)
                    && i.iip3_v.is_some()
            })?
            .clone();
        let points: Vec<PointRecord> = report
            .points
            .iter()
            .filter(|p| {
                p.stage == stage
                    && p.temperature_c == typical
                    && p.frequency_hz == frequency_hz
                    && is_typical(&p.corner)
                    && p.im3_dbc.is_some()
            })
            .cloned()
            .collect();
        if points.is_empty() {
            return None;
        }
        let others = report
            .intercepts
            .iter()
            .filter(|i| {
                i.stage == stage
                    && i.frequency_hz == frequency_hz
                    && i.temperature_c != typical
                    && is_typical(&i.corner)
            })
            .cloned()
            .collect();
        let lines: Vec<LineChecks> = lines_of(report, stage)
            .into_iter()
            .filter(|l| is_two_tone_line(l.line()) && l.line().frequency_hz == frequency_hz)
            .collect();

        let marks = bench_marks(report, Some(stage));
        let bench_im3: Vec<(f64, f64)> = marks
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
        let iip3_v = intercept.iip3_v?;
        let x_ip = dbv(iip3_v);
        let y_ip = x_ip + intercept.small_signal_gain_db;
        let measured = measured(&points);
        let fit = intercept.iip3_fit_amplitude_v.map(dbv);
        let limits_x = lines.iter().filter_map(|l| {
            let b = l.line();
            match b.metric.as_str() {
                "iip3" => Some(dbv(b.limit)),
                "im3" => b.at_v.map(dbv),
                _ => None,
            }
        });
        let xs = measured
            .iter()
            .map(|m| m.0)
            .chain(fit)
            .chain([x_ip])
            .chain(limits_x)
            .chain(bench_im3.iter().map(|b| b.0));
        let (x_min, x_max) = xs.fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), x| {
            (lo.min(x), hi.max(x))
        });
        let x = Axis::linear_step(x_min - 6.0, x_max + 6.0, 10.0);
        let limits_y = lines
            .iter()
            .filter(|l| l.line().metric == "oip3")
            .map(|l| dbv(l.line().limit));
        let ys = measured
            .iter()
            .flat_map(|m| [Some(m.1), m.2])
            .flatten()
            .chain([y_ip])
            .chain(limits_y)
            .chain(bench_im3.iter().map(|b| b.1));
        let (y_min, y_max) = ys.fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), y| {
            (lo.min(y), hi.max(y))
        });
        let y = Axis::linear_step((y_min - 10.0).max(y_max - 220.0), y_max + 10.0, 20.0);
        let at_rest = report
            .stages
            .iter()
            .find(|s| s.stage == stage && s.temperature_c == typical && is_typical(&s.corner))
            .map(|s| s.rest_region);
        Some(TwoTonePlot {
            at_rest,
            stage: stage.to_owned(),
            slug: slug.to_owned(),
            temperature_c: typical,
            points,
            intercept,
            others,
            lines,
            bench_im3,
            x,
            y,
        })
    }

    /// Operating regions beyond forward-active over the two-tone drive of the drawn points:
    /// (region, words, least input in dBV where it is reached). High injection ends where
    /// saturation starts, as in the harmonics figure.
    fn region_bands(&self) -> Vec<(Region, &'static str, f64)> {
        let onset = |region: Region| {
            self.points
                .iter()
                .filter(|p| p.two_tone_region.unwrap_or(p.region) == region)
                .map(|p| dbv(p.amplitude_v))
                .reduce(f64::min)
        };
        [
            (Region::HighInjection, "high-level injection"),
            (
                Region::Saturating,
                "saturating (collector-base junction forward-biased)",
            ),
        ]
        .into_iter()
        .filter_map(|(region, words)| onset(region).map(|x| (region, words, x)))
        .collect()
    }

    /// A region band in words, for the key.
    fn band_words(&self, region: Region, words: &str, onset_dbv: f64) -> String {
        if self.at_rest == Some(region) {
            format!("bar along the top: {words} over the two tones at every amplitude, already at bias; figures there include it")
        } else {
            format!(
                "bar along the top: {words} over the two tones from {} per tone (dashed: onset); figures there include it",
                si_short(10f64.powf(onset_dbv / 20.0), "V")
            )
        }
    }

    /// The IM3 product's output level (dBV) that an IM3 line allows at its amplitude, from the
    /// drawn fundamental there.
    fn im3_limit_dbv(&self, line: &BudgetRecord) -> Option<(f64, f64)> {
        let at = line.at_v?;
        let (fundamental, _) = self.fundamental_at(at)?;
        Some((dbv(at), fundamental + line.limit))
    }

    /// The output fundamental per tone (dBV) at an input amplitude, as drawn: the point's own
    /// at a sweep amplitude; between two sweep amplitudes, the drawn line between them (linear
    /// in dBV); below the sweep, the 1:1 small-signal line (exact where the stage is linear).
    /// Above the sweep nothing is drawn (`None`), the line's verdict is in the key.
    fn fundamental_at(&self, at_v: f64) -> Option<(f64, Placement)> {
        let drawn = measured(&self.points);
        if let Some(point) = drawn.iter().find(|m| m.0 == dbv(at_v)) {
            return Some((point.1, Placement::Sweep));
        }
        place_on(&drawn, dbv(at_v), self.intercept.small_signal_gain_db)
    }
}

/// Where an IM3 line's amplitude falls on the drawn sweep.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Placement {
    /// A sweep amplitude.
    Sweep,
    /// Between two sweep amplitudes (input dBV of each).
    Between(f64, f64),
    /// Below the sweep: on the small-signal 1:1 line.
    BelowSweep,
}

/// The fundamental (dBV) at input `x` (dBV) on the drawn sweep `(input, fundamental, _)`:
/// linear between the two neighbouring points, the 1:1 line `x + gain_db` below the sweep,
/// nothing above it.
pub fn place_on(
    drawn: &[(f64, f64, Option<f64>)],
    x: f64,
    gain_db: f64,
) -> Option<(f64, Placement)> {
    let mut sorted: Vec<(f64, f64)> = drawn.iter().map(|m| (m.0, m.1)).collect();
    sorted.sort_by(|a, b| a.0.total_cmp(&b.0));
    let first = sorted.first()?;
    if x < first.0 {
        return Some((x + gain_db, Placement::BelowSweep));
    }
    let k = sorted.windows(2).position(|w| w[0].0 <= x && x <= w[1].0)?;
    let (a, b) = (sorted[k], sorted[k + 1]);
    let t = (x - a.0) / (b.0 - a.0);
    Some((a.1 + t * (b.1 - a.1), Placement::Between(a.0, b.0)))
}

/// (input dBV, fundamental output dBV, IM3 output dBV) of each drawn point.
fn measured(points: &[PointRecord]) -> Vec<(f64, f64, Option<f64>)> {
    points
        .iter()
        .map(|p| {
            let fundamental = dbv(p.two_tone_fundamental_v.unwrap_or(p.fundamental_v));
            (
                dbv(p.amplitude_v),
                fundamental,
                p.im3_dbc.flatten().map(|d| fundamental + d),
            )
        })
        .collect()
}

fn line_colour(line: &BudgetRecord) -> RGBColor {
    match line.metric.as_str() {
        "im3" => metric_colour("im3"),
        "oip3" => metric_colour("oip3"),
        _ => metric_colour("iip3"),
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
        format!(
            "Two-tone intercept · {} at {}",
            self.stage,
            si_exact(self.intercept.frequency_hz, "Hz")
        )
    }
    fn caption(&self) -> String {
        format!(
            "Model output fundamental of one tone and the larger IM3 product of “{}” versus input level per tone (dBV, peak) at {} and {}, typical corner; the fitted 1:1 and 3:1 lines (dashed) meet at the third-order intercept, extrapolated from the shaded small-signal fit region; budget lines are drawn as limit lines (IIP3, OIP3) or hatched limit bars at their amplitude (IM3).",
            self.stage,
            celsius(self.temperature_c),
            si_exact(self.intercept.frequency_hz, "Hz")
        )
    }
    fn key(&self) -> Key {
        let mut key = Key::default();
        key.entry(
            Swatch::line(FUNDAMENTAL, 3, Some(Marker::Circle)),
            "output fundamental per tone (model)",
        );
        key.entry(
            Swatch::line(IM3, 3, Some(Marker::Triangle)),
            "IM3 product (model)",
        );
        key.entry(
            Swatch::Line {
                colour: FUNDAMENTAL,
                alpha: 0.8,
                width: 2,
                pattern: (14, 8),
                marker: None,
            },
            "1:1 fit (small-signal gain)",
        );
        key.entry(
            Swatch::Line {
                colour: IM3,
                alpha: 0.8,
                width: 2,
                pattern: (14, 8),
                marker: None,
            },
            "3:1 fit through the intercept",
        );
        if self.intercept.iip3_fit_amplitude_v.is_some() {
            key.entry(
                Swatch::Band {
                    colour: FIT,
                    alpha: 0.14,
                },
                "fit region (IM3 slope 3:1)",
            );
        }
        key.entry(Swatch::Ring, "third-order intercept");
        for (region, words, onset) in self.region_bands() {
            key.entry(
                Swatch::Line {
                    colour: MUTED,
                    alpha: REGION_BAR_ALPHA,
                    width: REGION_BAR_PX,
                    pattern: region_pattern(region),
                    marker: None,
                },
                self.band_words(region, words, onset),
            );
        }
        if !self.bench_im3.is_empty() {
            key.entry(
                Swatch::Open {
                    index: 0,
                    colour: IM3,
                },
                "IM3 product (bench)",
            );
        }
        if !self.lines.is_empty() {
            key.verdict_heading =
                format!("Budget at {}", si_exact(self.intercept.frequency_hz, "Hz"));
            key.verdicts = self
                .lines
                .iter()
                .map(|l| {
                    let colour = line_colour(l.line());
                    let swatch = if l.line().metric == "im3" {
                        Swatch::Mask { colour }
                    } else {
                        Swatch::Line {
                            colour,
                            alpha: 1.0,
                            width: 3,
                            pattern: (14, 8),
                            marker: None,
                        }
                    };
                    l.row(swatch, false)
                })
                .collect();
            key.notes.push(format!(
                "Markers show the drawn case ({}, typical corner); the table gives each line's worst case.",
                celsius(self.temperature_c)
            ));
            for l in &self.lines {
                let line = l.line();
                let Some(at) = line.at_v.filter(|_| line.metric == "im3") else {
                    continue;
                };
                let name = format!("The IM3 line at {}", si_exact(at, "V"));
                match self.fundamental_at(at).map(|f| f.1) {
                    Some(Placement::Sweep) => {}
                    Some(Placement::Between(a, b)) => key.notes.push(format!(
                        "{name} is not a sweep amplitude: its bar and marker stand on the fundamental drawn between {} and {}; its value is the report's, solved at {}.",
                        si_short(10f64.powf(a / 20.0), "V"),
                        si_short(10f64.powf(b / 20.0), "V"),
                        si_exact(at, "V")
                    )),
                    Some(Placement::BelowSweep) => key.notes.push(format!(
                        "{name} is below the sweep: its bar and marker stand on the 1:1 small-signal line; its value is the report's, solved at {}.",
                        si_exact(at, "V")
                    )),
                    None => key.notes.push(format!(
                        "{name} is above the sweep and not drawn; its verdict is in the table."
                    )),
                }
            }
        }
        key
    }
    fn axes(&self) -> Vec<Axis> {
        vec![self.x.clone(), self.y.clone()]
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
            "{} · IIP3 {} dBV ({}) · OIP3 {} dBV",
            celsius(self.temperature_c),
            num(x_ip, 1),
            si_short(iip3_v, "V"),
            num(y_ip, 1)
        );
        if let Some(dbm) = i.iip3_dbm {
            subtitle.push_str(&format!(" · IIP3 {} dBm", num(dbm, 1)));
        }
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
        let (plot, side) = split(&body);
        draw_key(&side, &self.key())?;
        let (x, y) = (&self.x, &self.y);
        let (x_low, x_high, y_low, y_high) = (x.low, x.high, y.low, y.high);

        let mut chart =
            house_chart(&plot, 36, 96).build_cartesian_2d(x.linear_range(), y.linear_range())?;
        mesh_style(&mut chart.configure_mesh())
            .x_desc("input per tone (dBV, peak)")
            .y_desc("output per tone (dBV, peak)")
            .x_label_formatter(&|v| x.label(*v))
            .y_label_formatter(&|v| y.label(*v))
            .draw()?;

        if let Some(fit_lo) = i.iip3_fit_amplitude_v.map(dbv) {
            let fit_hi = fit_lo + dbv(2.0);
            chart.draw_series(std::iter::once(Rectangle::new(
                [(fit_lo.max(x_low), y_low), (fit_hi.min(x_high), y_high)],
                FIT.mix(0.14).filled(),
            )))?;
        }
        // Operating-region bands from their onset to the right edge (high injection stops
        // where saturation starts), with a dashed onset; the key names them.
        let bands = self.region_bands();
        let saturation_onset = bands
            .iter()
            .find(|b| b.0 == Region::Saturating)
            .map(|b| b.2);
        let bar_y = y_high - 0.02 * (y_high - y_low);
        for (region, _, onset) in &bands {
            let end = match (region, saturation_onset) {
                (Region::HighInjection, Some(s)) => s,
                _ => x_high,
            };
            let from = if self.at_rest == Some(*region) {
                x_low
            } else {
                onset.max(x_low)
            };
            chart.draw_series(std::iter::once(dashed(
                vec![(from, bar_y), (end.min(x_high), bar_y)],
                region_pattern(*region),
                MUTED.mix(REGION_BAR_ALPHA).stroke_width(REGION_BAR_PX),
            )))?;
            chart.draw_series(std::iter::once(dashed(
                vec![(from, y_low), (from, y_high)],
                (6, 6),
                MUTED.mix(0.8).stroke_width(2),
            )))?;
        }
        for line in &self.lines {
            let l = line.line();
            let colour = line_colour(l);
            match l.metric.as_str() {
                "iip3" => {
                    let at = dbv(l.limit).clamp(x_low, x_high);
                    chart.draw_series(std::iter::once(dashed(
                        vec![(at, y_low), (at, y_high)],
                        (14, 8),
                        colour.stroke_width(3),
                    )))?;
                }
                "oip3" => {
                    let at = dbv(l.limit).clamp(y_low, y_high);
                    chart.draw_series(std::iter::once(dashed(
                        vec![(x_low, at), (x_high, at)],
                        (14, 8),
                        colour.stroke_width(3),
                    )))?;
                }
                _ => {
                    if let Some((x_at, limit)) = self.im3_limit_dbv(l) {
                        let limit = limit.clamp(y_low, y_high);
                        let (from, to) = ((x_at - 2.5).max(x_low), (x_at + 2.5).min(x_high));
                        let beyond = if l.kind == "max" { y_high } else { y_low };
                        hatch_pixels(
                            root,
                            chart.backend_coord(&(from, limit)),
                            chart.backend_coord(&(to, beyond)),
                            colour,
                        )?;
                        chart.draw_series(std::iter::once(PathElement::new(
                            vec![(from, limit), (to, limit)],
                            colour.stroke_width(3),
                        )))?;
                    }
                }
            }
        }

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
            FUNDAMENTAL.mix(0.8).stroke_width(2),
        )?;
        draw_runs(
            &mut chart,
            &fit_three,
            (y_low, y_high),
            false,
            (14, 8),
            IM3.mix(0.8).stroke_width(2),
        )?;

        let measured = measured(&self.points);
        let fundamental: Vec<(f64, Option<f64>)> =
            measured.iter().map(|m| (m.0, Some(m.1))).collect();
        let im3: Vec<(f64, Option<f64>)> = measured.iter().map(|m| (m.0, m.2)).collect();
        for (data, colour, marker) in [
            (&fundamental, FUNDAMENTAL, Marker::Circle),
            (&im3, IM3, Marker::Triangle),
        ] {
            draw_runs(
                &mut chart,
                data,
                (y_low, y_high),
                false,
                pattern(0),
                colour.stroke_width(3),
            )?;
            draw_markers(&mut chart, data, (y_low, y_high), marker, colour)?;
        }

        if !self.bench_im3.is_empty() {
            draw_bench(&mut chart, &self.bench_im3, (y_low, y_high), 0, IM3)?;
        }
        chart.draw_series(std::iter::once(
            EmptyElement::at((x_ip, y_ip))
                + Circle::new((0, 0), 12, INK.stroke_width(3))
                + Circle::new((0, 0), 4, INK.filled()),
        ))?;
        // Verdict markers of the drawn case: IM3 at its amplitude, intercepts at the intercept.
        for line in &self.lines {
            let l = line.line();
            let drawn = line
                .records
                .iter()
                .find(|r| r.temperature_c == self.temperature_c && is_typical(&r.corner));
            let Some(record) = drawn else { continue };
            let position = match l.metric.as_str() {
                "im3" => {
                    let Some(at) = l.at_v else { continue };
                    let Some((fundamental, _)) = self.fundamental_at(at) else {
                        continue;
                    };
                    record.value.map(|v| (dbv(at), fundamental + v))
                }
                "iip3" | "oip3" => Some((x_ip, y_ip)),
                _ => None,
            };
            if let Some((px, py)) = position {
                // Beside the intercept's ring, not on it.
                let (dx, dy) = match l.metric.as_str() {
                    "iip3" => (30, 0),
                    "oip3" => (0, -30),
                    _ => (0, 0),
                };
                let at = chart.backend_coord(&(px.clamp(x_low, x_high), py.clamp(y_low, y_high)));
                verdict_marker(root, (at.0 + dx, at.1 + dy), record.pass)?;
            }
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::{place_on, Placement};

    /// A sweep whose fundamental is a straight line in dBV (a linear stage, gain 20 dB):
    /// linear interpolation is exact on it, below the sweep the 1:1 line is the same line,
    /// and above the sweep nothing is placed (no extrapolation into compression).
    #[test]
    fn an_amplitude_between_sweep_points_lands_on_the_drawn_line() {
        let drawn: Vec<(f64, f64, Option<f64>)> = [-46.0, -28.0, -16.5]
            .iter()
            .map(|x| (*x, x + 20.0, None))
            .collect();
        let (y, placed) = place_on(&drawn, -21.9, 20.0).unwrap();
        assert!((y - (-1.9)).abs() < 1e-12);
        assert_eq!(placed, Placement::Between(-28.0, -16.5));
        let (y, placed) = place_on(&drawn, -60.0, 20.0).unwrap();
        assert_eq!((y, placed), (-40.0, Placement::BelowSweep));
        assert_eq!(place_on(&drawn, -10.0, 20.0), None);
    }
}
