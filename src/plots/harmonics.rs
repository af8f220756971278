//! Harmonics versus amplitude: HD2, HD3, HD5, THD (and IM3 or any harmonic the budget names)
//! in dBc against the input amplitude on a log axis, at the first drive frequency and at every
//! frequency a distortion budget line names. Each budget line is drawn as a hatched limit mask
//! and its worst case as a pass/fail marker; the verdicts are a compact table beside the plot.
//!
//! With process corners, the lines are the typical corner at every temperature and a light
//! band per metric spans every corner and temperature, so the corner that binds is never out
//! of the picture: the verdict table names it.

use super::axis::Axis;
use super::bench::{bench_key, bench_marks, draw_bench, same, BenchMark};
use super::key::{draw_key, split, verdict_marker, Key, Swatch};
use super::style::*;
use super::verdicts::{draw_limit_masks, is_amplitude_line, lines_of, LineChecks};
use super::{DrawResult, Drawing, PlotKind};
use crate::report::{PointRecord, Region, Report};
use plotters::coord::Shift;
use plotters::prelude::*;

/// One plotted metric: its key and how to read it from a point.
#[derive(Debug, Clone)]
pub(crate) struct Series {
    /// `hd2`, `thd`, `im3` …
    pub metric: String,
    /// Legend label.
    pub label: String,
    /// Which field of a point holds it.
    field: Field,
}

/// The point field a series reads.
#[derive(Debug, Clone, Copy)]
enum Field {
    Thd,
    Im3,
    Harmonic(usize),
    Other,
}

impl Series {
    /// The series of a metric key (`hd3`, `thd`, `im3` …).
    pub fn new(metric: String) -> Self {
        let field = match metric.as_str() {
            "thd" => Field::Thd,
            "im3" => Field::Im3,
            other => other
                .strip_prefix("hd")
                .and_then(|n| n.parse().ok())
                .map_or(Field::Other, Field::Harmonic),
        };
        Series {
            label: metric_label(&metric),
            metric,
            field,
        }
    }

    /// The metric's value at a point, dBc.
    pub fn value(&self, point: &PointRecord) -> Option<f64> {
        match self.field {
            Field::Thd => point.thd_dbc,
            Field::Im3 => point.im3_dbc.flatten(),
            Field::Harmonic(n) => point.harmonic(n),
            Field::Other => None,
        }
    }

    fn style(&self) -> (RGBColor, f64, u32) {
        let colour = metric_colour(&self.metric);
        if self.metric == "thd" {
            (colour, 0.45, 9)
        } else {
            (colour, 1.0, 3)
        }
    }

    fn swatch(&self) -> Swatch {
        let (colour, alpha, width) = self.style();
        Swatch::Line {
            colour,
            alpha,
            width,
            pattern: pattern(0),
            marker: Some(metric_marker(&self.metric)),
        }
    }
}

/// Opacity of a metric's band over every corner and temperature.
const CORNER_BAND_ALPHA: f64 = 0.16;

/// The harmonics figure of one stage at one frequency.
pub struct HarmonicsPlot {
    stage: String,
    slug: String,
    frequency_hz: f64,
    temps: Vec<f64>,
    /// Typical-corner rows.
    points: Vec<Row>,
    /// Per series, per amplitude: least and greatest over every corner and temperature
    /// (plans with corners only).
    bands: Vec<Vec<(f64, f64, f64)>>,
    corners: Vec<String>,
    lines: Vec<LineChecks>,
    /// Frequencies of distortion lines drawn in the stage's other harmonics figures.
    elsewhere: Vec<f64>,
    series: Vec<Series>,
    missing: Vec<String>,
    floor_dbc: f64,
    /// Bench values of the series' metrics at this frequency and the figure's temperatures.
    bench: Vec<BenchMark>,
    /// Operating region at rest (zero input) per temperature, typical corner.
    at_rest: Vec<Option<Region>>,
    x: Axis,
    y: Axis,
}

/// What the figure reads of one drive point (a dense sweep has thousands: copying whole
/// records cost more than drawing them).
struct Row {
    temperature_c: f64,
    amplitude_v: f64,
    /// Operating region over the single-tone period.
    region: Region,
    /// The value of each series, in series order.
    values: Vec<Option<f64>>,
}

/// The file-name suffix of a frequency: `20MHz`.
pub fn frequency_slug(frequency_hz: f64) -> String {
    si_exact(frequency_hz, "Hz").replace(' ', "")
}

/// The frequencies a family of per-frequency figures is drawn at: the stage's first drive
/// frequency, then each frequency a matching budget line names.
pub fn figure_frequencies(
    report: &Report,
    stage: &str,
    wanted: impl Fn(&crate::report::BudgetRecord) -> bool,
) -> Vec<f64> {
    let Some(first) = report.points.iter().find(|p| p.stage == stage) else {
        return Vec::new();
    };
    let mut list = vec![first.frequency_hz];
    for b in report
        .budget
        .iter()
        .filter(|b| b.stage == stage && wanted(b))
    {
        let driven = report
            .points
            .iter()
            .any(|p| p.stage == stage && p.frequency_hz == b.frequency_hz);
        if driven && !list.contains(&b.frequency_hz) {
            list.push(b.frequency_hz);
        }
    }
    list
}

impl HarmonicsPlot {
    /// The figures of a stage: one at its first frequency and one at each frequency a
    /// distortion budget line names.
    pub fn all(report: &Report, stage: &str, slug: &str) -> Vec<Self> {
        let frequencies = figure_frequencies(report, stage, is_amplitude_line);
        frequencies
            .iter()
            .enumerate()
            .filter_map(|(i, f)| {
                let slug = if i == 0 {
                    slug.to_owned()
                } else {
                    format!("{slug}-{}", frequency_slug(*f))
                };
                let others: Vec<f64> = frequencies.iter().copied().filter(|g| g != f).collect();
                HarmonicsPlot::at(report, stage, &slug, *f, others)
            })
            .collect()
    }

    /// The figure at one frequency, if the stage has at least two drive points there.
    fn at(
        report: &Report,
        stage: &str,
        slug: &str,
        frequency_hz: f64,
        other_frequencies: Vec<f64>,
    ) -> Option<Self> {
        let lines: Vec<LineChecks> = lines_of(report, stage)
            .into_iter()
            .filter(|l| is_amplitude_line(l.line()) && l.line().frequency_hz == frequency_hz)
            .collect();
        let elsewhere: Vec<f64> = other_frequencies
            .into_iter()
            .filter(|f| {
                report
                    .budget
                    .iter()
                    .any(|b| b.stage == stage && is_amplitude_line(b) && b.frequency_hz == *f)
            })
            .collect();
        let mut metrics: Vec<String> = ["hd2", "hd3", "hd5", "thd"].map(String::from).to_vec();
        for line in &lines {
            if !metrics.contains(&line.line().metric) {
                metrics.push(line.line().metric.clone());
            }
        }
        let series: Vec<Series> = metrics.into_iter().map(Series::new).collect();
        let here: Vec<&PointRecord> = report
            .points
            .iter()
            .filter(|p| p.stage == stage && p.frequency_hz == frequency_hz)
            .collect();
        let points: Vec<Row> = here
            .iter()
            .filter(|p| is_typical(&p.corner))
            .map(|p| Row {
                temperature_c: p.temperature_c,
                amplitude_v: p.amplitude_v,
                region: p.region,
                values: series.iter().map(|s| s.value(p)).collect(),
            })
            .collect();
        let mut corners: Vec<String> = Vec::new();
        for p in &here {
            if !corners.contains(&p.corner) {
                corners.push(p.corner.clone());
            }
        }
        let bands: Vec<Vec<(f64, f64, f64)>> = if corners.len() > 1 {
            series
                .iter()
                .map(|s| {
                    let mut amplitudes: Vec<f64> = here.iter().map(|p| p.amplitude_v).collect();
                    amplitudes.sort_by(f64::total_cmp);
                    amplitudes.dedup();
                    amplitudes
                        .into_iter()
                        .filter_map(|a| {
                            let values: Vec<f64> = here
                                .iter()
                                .filter(|p| p.amplitude_v == a)
                                .filter_map(|p| s.value(p))
                                .collect();
                            let lo = values.iter().copied().reduce(f64::min)?;
                            let hi = values.iter().copied().reduce(f64::max)?;
                            Some((a, lo, hi))
                        })
                        .collect()
                })
                .collect()
        } else {
            Vec::new()
        };
        let temps: Vec<f64> = temperatures(report)
            .into_iter()
            .filter(|t| points.iter().any(|p| p.temperature_c == *t))
            .collect();
        let enough = temps
            .iter()
            .any(|t| points.iter().filter(|p| p.temperature_c == *t).count() >= 2);
        if !enough {
            return None;
        }
        let missing: Vec<String> = series
            .iter()
            .enumerate()
            .filter(|(k, _)| points.iter().all(|p| p.values[*k].is_none()))
            .map(|(_, s)| s.label.clone())
            .collect();
        // The points' own floor (a stage with capacitance is analysed to a higher floor than
        // the plan-wide one); the highest applies to every point drawn.
        let floor_dbc = here
            .iter()
            .map(|p| p.floor_dbc)
            .reduce(f64::max)
            .unwrap_or(report.analysis.analysis_floor_dbc);
        let bench: Vec<BenchMark> = bench_marks(report, Some(stage))
            .into_iter()
            .filter(|b| {
                same(b.frequency_hz, frequency_hz)
                    && temps.contains(&b.temperature_c)
                    && series.iter().any(|s| s.metric == b.metric)
            })
            .collect();
        let values = points
            .iter()
            .flat_map(|p| p.values.iter().flatten().copied())
            .chain(
                bands
                    .iter()
                    .flatten()
                    .flat_map(|b: &(f64, f64, f64)| [b.1, b.2]),
            )
            .chain(
                lines
                    .iter()
                    .flat_map(|l| &l.records)
                    .flat_map(|b| [Some(b.limit), b.value])
                    .flatten(),
            )
            .chain(bench.iter().map(|b| b.bench));
        let (low, high) = values.fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), v| {
            (lo.min(v), hi.max(v))
        });
        let (low, high) = if low.is_finite() {
            (low, high)
        } else {
            (floor_dbc, 0.0)
        };
        let y_low = (low - 8.0).max(floor_dbc);
        let y_high = (high + 10.0).min(20.0).max(y_low + 20.0);
        let y = Axis::linear_step(
            y_low,
            y_high,
            if y_high - y_low > 100.0 { 20.0 } else { 10.0 },
        );
        let amplitudes: Vec<f64> = points
            .iter()
            .map(|p| p.amplitude_v)
            .chain(lines.iter().filter_map(|l| l.line().at_v))
            .chain(bench.iter().map(|b| b.amplitude_v))
            .collect();
        let x = Axis::log(&amplitudes, "V");
        let at_rest = temps
            .iter()
            .map(|t| {
                report
                    .stages
                    .iter()
                    .find(|s| s.stage == stage && s.temperature_c == *t && is_typical(&s.corner))
                    .map(|s| s.rest_region)
            })
            .collect();
        Some(HarmonicsPlot {
            at_rest,
            stage: stage.to_owned(),
            slug: slug.to_owned(),
            frequency_hz,
            temps,
            points,
            bands,
            corners,
            lines,
            elsewhere,
            series,
            missing,
            floor_dbc,
            bench,
            x,
            y,
        })
    }

    fn has_corners(&self) -> bool {
        self.corners.len() > 1
    }
}

/// Opacity of an operating-region band.
const REGION_ALPHA: f64 = 0.10;

/// Drives of one operating region beyond forward-active operation, as drawn.
struct RegionBand {
    region: Region,
    label: &'static str,
    colour: RGBColor,
    /// Least amplitude in the region at any temperature, V.
    first: f64,
    /// Right end of the band, V.
    end: f64,
    /// (temperature index, least amplitude in the region at that temperature).
    onsets: Vec<(usize, f64)>,
}

impl HarmonicsPlot {
    /// The high-injection and saturation bands; high injection ends where saturation starts.
    fn region_bands(&self, x_high: f64) -> Vec<RegionBand> {
        let saturation_onset = self
            .points
            .iter()
            .filter(|p| p.region == Region::Saturating)
            .map(|p| p.amplitude_v)
            .reduce(f64::min);
        let mut bands = Vec::new();
        for (region, colour, label) in [
            (Region::HighInjection, SERIES[3], "high-level injection"),
            (
                Region::Saturating,
                MUTED,
                "saturating (collector-base junction forward-biased)",
            ),
        ] {
            let onsets: Vec<(usize, f64)> = self
                .temps
                .iter()
                .enumerate()
                .filter_map(|(ti, t)| {
                    self.points
                        .iter()
                        .filter(|p| p.temperature_c == *t && p.region == region)
                        .map(|p| p.amplitude_v)
                        .reduce(f64::min)
                        .map(|a| (ti, a))
                })
                .collect();
            let Some(first) = onsets.iter().map(|o| o.1).reduce(f64::min) else {
                continue;
            };
            let end = match (region, saturation_onset) {
                (Region::HighInjection, Some(onset)) => onset,
                _ => x_high,
            };
            bands.push(RegionBand {
                region,
                label,
                colour,
                first,
                end,
                onsets,
            });
        }
        bands
    }
}

impl HarmonicsPlot {
    /// A region band in words: from its onset, or at every amplitude where the stage is in
    /// that region already at rest (the smallest drive cannot leave it).
    fn at_rest_everywhere(&self, region: Region) -> bool {
        !self.at_rest.is_empty() && self.at_rest.iter().all(|r| *r == Some(region))
    }

    fn band_words(&self, band: &RegionBand) -> String {
        let at_rest: Vec<String> = self
            .temps
            .iter()
            .zip(&self.at_rest)
            .filter(|(_, r)| **r == Some(band.region))
            .map(|(t, _)| celsius(*t))
            .collect();
        if !at_rest.is_empty() && at_rest.len() == self.temps.len() {
            format!(
                "{} at every amplitude: already at bias{}; figures there include it",
                band.label,
                if self.temps.len() > 1 {
                    " at every temperature"
                } else {
                    ""
                }
            )
        } else if !at_rest.is_empty() {
            format!(
                "{} from {} (already at bias at {}; dashed: onset per temperature); figures there include it",
                band.label,
                si(band.first, "V"),
                at_rest.join(", ")
            )
        } else {
            format!(
                "{} from {} (dashed: onset per temperature); figures there include it",
                band.label,
                si(band.first, "V")
            )
        }
    }
}

impl Drawing for HarmonicsPlot {
    fn kind(&self) -> PlotKind {
        PlotKind::Harmonics
    }
    fn slug(&self) -> Option<&str> {
        Some(&self.slug)
    }
    fn title(&self) -> String {
        format!(
            "Harmonic distortion vs amplitude · {} at {}",
            self.stage,
            si_exact(self.frequency_hz, "Hz")
        )
    }
    fn caption(&self) -> String {
        let mut caption = format!(
            "HDn and THD of the differential output of “{}” in dBc versus peak differential input at {}",
            self.stage,
            si_exact(self.frequency_hz, "Hz")
        );
        if self.has_corners() {
            caption.push_str(
                "; lines are the typical process corner, the light band of each metric spans every corner and temperature",
            );
        }
        if !self.bench.is_empty() {
            caption.push_str("; open markers are bench measurements over the model's lines");
        }
        if self.lines.is_empty() {
            caption.push_str("; no distortion budget line applies at this frequency.");
        } else {
            caption.push_str("; hatched regions are forbidden by the budget (a line applies up to its amplitude), a green disc marks a line's worst case passing, a red cross failing; the table beside the plot names each worst case.");
        }
        caption
    }
    fn key(&self) -> Key {
        let mut key = Key::default();
        for (k, series) in self.series.iter().enumerate() {
            if self.missing.contains(&series.label) {
                continue;
            }
            let label = if self.has_corners() {
                format!("{} (typical corner)", series.label)
            } else {
                series.label.clone()
            };
            key.entry(series.swatch(), label);
            if self.bands.get(k).is_some_and(|b| !b.is_empty()) {
                let others: Vec<&str> = self
                    .corners
                    .iter()
                    .filter(|c| !is_typical(c))
                    .map(String::as_str)
                    .collect();
                key.entry(
                    Swatch::Outline {
                        colour: metric_colour(&series.metric),
                        fill: CORNER_BAND_ALPHA,
                    },
                    format!(
                        "{} over every corner ({}, typical) and temperature",
                        series.label,
                        others.join(", ")
                    ),
                );
            }
        }
        for band in self.region_bands(self.x.high) {
            // The pale fill with its onset edge in the full colour: two regions' fills alone
            // are too pale to tell apart.
            key.entry(
                Swatch::Outline {
                    colour: band.colour,
                    fill: REGION_ALPHA,
                },
                self.band_words(&band),
            );
        }
        key.temperatures(&self.temps);
        if !self.bench.is_empty() {
            bench_key(&mut key, &self.temps);
            // A metric drawn only as bench markers (its model value is below the floor at
            // every point) has no line to name its colour: a chip does.
            for series in &self.series {
                if self.missing.contains(&series.label)
                    && self.bench.iter().any(|b| b.metric == series.metric)
                {
                    key.entry(
                        Swatch::Chip {
                            colour: metric_colour(&series.metric),
                        },
                        format!(
                            "{}: bench only (the model's is below the analysis floor)",
                            series.label
                        ),
                    );
                }
            }
        }
        if !self.lines.is_empty() {
            key.verdict_heading = format!("Budget at {}", si_exact(self.frequency_hz, "Hz"));
            key.verdicts = self
                .lines
                .iter()
                .map(|l| {
                    l.row(
                        Swatch::Mask {
                            colour: metric_colour(&l.line().metric),
                        },
                        false,
                    )
                })
                .collect();
        }
        if !self.missing.is_empty() {
            key.notes.push(format!(
                "{} below the analysis floor ({} dBc) at every point.",
                self.missing.join(", "),
                num(self.floor_dbc, 0)
            ));
        }
        if !self.elsewhere.is_empty() {
            key.notes.push(format!(
                "Distortion budget lines at {} are drawn in the figures at those frequencies.",
                self.elsewhere
                    .iter()
                    .map(|f| si_exact(*f, "Hz"))
                    .collect::<Vec<_>>()
                    .join(", ")
            ));
        }
        key
    }
    fn axes(&self) -> Vec<Axis> {
        vec![self.x.clone(), self.y.clone()]
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> DrawResult {
        let verdict = if self.lines.is_empty() {
            "no distortion budget line at this frequency".to_owned()
        } else {
            let failed = self.lines.iter().filter(|l| !l.pass()).count();
            format!(
                "{} of {} budget lines pass",
                self.lines.len() - failed,
                self.lines.len()
            )
        };
        let mut subtitle = format!("f = {} · {verdict}", si_exact(self.frequency_hz, "Hz"));
        if self.has_corners() {
            subtitle.push_str(" · lines: typical corner; bands: every corner");
        }
        let body = frame(root, &self.title(), &subtitle)?;
        let (plot, side) = split(&body);
        draw_key(&side, &self.key())?;
        let (x, y) = (&self.x, &self.y);
        let (y_low, y_high) = (y.low, y.high);

        let mut chart =
            house_chart(&plot, 36, 96).build_cartesian_2d(x.log_range(), y.linear_range())?;
        mesh_style(&mut chart.configure_mesh())
            .x_desc("peak differential input per tone (log)")
            .y_desc("distortion (dBc)")
            .x_label_formatter(&|v| x.label(*v))
            .y_label_formatter(&|v| y.label(*v))
            .draw()?;

        // Corner bands under everything else.
        for (k, band) in self.bands.iter().enumerate() {
            if band.len() < 2 {
                continue;
            }
            let colour = metric_colour(&self.series[k].metric);
            let mut outline: Vec<(f64, f64)> = band
                .iter()
                .map(|(a, _, hi)| (*a, hi.clamp(y_low, y_high)))
                .collect();
            outline.extend(
                band.iter()
                    .rev()
                    .map(|(a, lo, _)| (*a, lo.clamp(y_low, y_high))),
            );
            chart.draw_series(std::iter::once(Polygon::new(
                outline.clone(),
                colour.mix(CORNER_BAND_ALPHA).filled(),
            )))?;
            // Edged in the metric's colour: pale fills alone look alike where they overlap.
            outline.push(outline[0]);
            chart.draw_series(std::iter::once(PathElement::new(
                outline,
                colour.mix(0.8).stroke_width(1),
            )))?;
        }

        // Limit masks: a `max` line forbids the region above its limit for every amplitude up
        // to its own; a `min` line forbids the region below.
        draw_limit_masks(
            root,
            &mut chart,
            &self.lines,
            (x.low, x.high),
            (y_low, y_high),
        )?;

        // Operating-region bands: from the least amplitude in the region to the right edge
        // (high injection stops where saturation starts), with a dashed onset per temperature;
        // the key names them.
        for band in self.region_bands(x.high) {
            // In the region already at rest: the whole axis, not only from the least drive.
            let from = if self.at_rest_everywhere(band.region) {
                x.low
            } else {
                band.first
            };
            chart.draw_series(std::iter::once(Rectangle::new(
                [(from, y_low), (band.end, y_high)],
                band.colour.mix(REGION_ALPHA).filled(),
            )))?;
            for (ti, onset) in &band.onsets {
                chart.draw_series(std::iter::once(dashed(
                    vec![(*onset, y_low), (*onset, y_high)],
                    pattern(*ti),
                    band.colour.mix(0.8).stroke_width(2),
                )))?;
            }
        }

        for (ti, t) in self.temps.iter().enumerate() {
            let at_t: Vec<&Row> = self
                .points
                .iter()
                .filter(|p| p.temperature_c == *t)
                .collect();
            // THD first and wide, so the harmonic that dominates it stays visible on top.
            let mut order: Vec<usize> = (0..self.series.len()).collect();
            order.sort_by_key(|&k| self.series[k].metric != "thd");
            for k in order {
                let series = &self.series[k];
                let (colour, alpha, width) = series.style();
                let data: Vec<(f64, Option<f64>)> =
                    at_t.iter().map(|p| (p.amplitude_v, p.values[k])).collect();
                draw_runs(
                    &mut chart,
                    &data,
                    (y_low, y_high),
                    true,
                    pattern(ti),
                    colour.mix(alpha).stroke_width(width),
                )?;
                draw_markers(
                    &mut chart,
                    &data,
                    (y_low, y_high),
                    metric_marker(&series.metric),
                    colour,
                )?;
            }
        }

        // Bench values over the model's lines: the shape names the temperature.
        for (ti, t) in self.temps.iter().enumerate() {
            for series in &self.series {
                let measured: Vec<(f64, f64)> = self
                    .bench
                    .iter()
                    .filter(|b| b.temperature_c == *t && b.metric == series.metric)
                    .map(|b| (b.amplitude_v, b.bench))
                    .collect();
                if !measured.is_empty() {
                    draw_bench(
                        &mut chart,
                        &measured,
                        (y_low, y_high),
                        ti,
                        metric_colour(&series.metric),
                    )?;
                }
            }
        }

        // One verdict marker per line, at its worst case.
        for line in &self.lines {
            let worst = line.worst();
            // A value below the analysis floor has no place on the axis: the table says so.
            let (Some(at), Some(value)) = (worst.at_v, worst.value) else {
                continue;
            };
            let value = value.clamp(y_low, y_high);
            verdict_marker(root, chart.backend_coord(&(at, value)), line.pass())?;
        }
        Ok(())
    }
}
