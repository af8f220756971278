//! Compliance figures drawn from the report structs, each as SVG (text) and PNG (bytes).
//!
//! Every figure reads only [`Report`]: what the JSON says is what the figure shows. A figure
//! whose data is absent (no budget, no sizing, one frequency, no Monte Carlo) is skipped, not
//! drawn empty. Text in the PNG is rasterised from the DejaVu Sans font compiled into the
//! binary, so no system font or fontconfig is needed; the SVG names the same family
//! ([`canvas::FAMILY`]), so both forms look alike wherever DejaVu Sans is installed.
//!
//! Every figure is prepared before it is drawn: its axes ([`axis::Axis`], ticks at both ends)
//! and its key ([`key::Key`]: legend entries and the compact verdict table, drawn in a panel
//! beside the plot so no label covers data) are plain data a test can read.
//!
//! Conventions shared by all figures: colour names the metric (or the stage, where stages are
//! compared), the line pattern names the temperature (solid for the first one in the plan),
//! green round markers pass a budget line and red crosses fail it.

pub mod axis;
mod bench;
pub mod canvas;
mod compare;
mod frequency;
mod harmonics;
pub mod key;
mod monte_carlo;
mod region;
mod schemes;
mod sizing;
mod spectrum;
pub(crate) mod style;
mod transfer;
mod two_tone;
pub mod verdicts;

use crate::error::Error;
use crate::plots::axis::Axis;
pub use crate::plots::canvas::{DrawResult, PlotError, HEIGHT_PX, WIDTH_PX};
use crate::plots::key::Key;
use crate::report::datasheet::EmbeddedFigure;
use crate::report::queries::stage_names;
use crate::report::Report;
use plotters::coord::Shift;
use plotters::prelude::*;
use rayon::prelude::*;
use std::sync::Once;

/// The families of figures.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum PlotKind {
    /// Normalised output current and incremental transconductance versus differential input.
    Transfer,
    /// HDn and THD versus input amplitude with the budget's limit masks.
    Harmonics,
    /// Two-tone output fundamental and IM3 versus input level with the fitted intercept.
    TwoTone,
    /// Budget margins versus emitter resistance with the chosen value.
    Sizing,
    /// The map of tail current against emitter resistance: usable designs and the line
    /// closing each edge.
    SizingRegion,
    /// Pareto fronts of supply current against input noise and the binding distortion.
    SizingPareto,
    /// Harmonic stems at one drive point.
    Spectrum,
    /// Several stages overlaid.
    StageComparison,
    /// HDn, THD and IIP3 versus frequency.
    Frequency,
    /// The stages at equal tail current or equal input noise.
    Schemes,
    /// Monte Carlo spread of each metric.
    MonteCarlo,
    /// Every budget line's worst-case margin, whatever its metric and frequency.
    Margins,
}

impl PlotKind {
    /// File-name prefix of the family.
    pub fn prefix(self) -> &'static str {
        match self {
            PlotKind::Transfer => "transfer",
            PlotKind::Harmonics => "harmonics",
            PlotKind::TwoTone => "two-tone",
            PlotKind::Sizing => "sizing",
            PlotKind::SizingRegion => "sizing-region",
            PlotKind::SizingPareto => "sizing-pareto",
            PlotKind::Spectrum => "spectrum",
            PlotKind::StageComparison => "stage-comparison",
            PlotKind::Frequency => "frequency",
            PlotKind::Schemes => "schemes",
            PlotKind::MonteCarlo => "monte-carlo",
            PlotKind::Margins => "margins",
        }
    }
}

/// One rendered figure.
#[derive(Debug, Clone)]
pub struct Figure {
    /// Which family it belongs to.
    pub kind: PlotKind,
    /// File stem: the figure is written as `<stem>.svg` and `<stem>.png`.
    pub stem: String,
    /// Title as drawn on the figure.
    pub title: String,
    /// One-sentence reading guide for the report.
    pub caption: String,
    /// The SVG document.
    pub svg: String,
    /// The PNG file.
    pub png: Vec<u8>,
}

/// A figure that can draw itself on any plotters backend.
pub(crate) trait Drawing: Send + Sync {
    /// Family.
    fn kind(&self) -> PlotKind;
    /// File-name slug of the stage drawn; `None` for a figure across stages.
    fn slug(&self) -> Option<&str>;
    /// File stem: the family's prefix, then the stage's slug.
    fn stem(&self) -> String {
        match self.slug() {
            Some(slug) => format!("{}-{slug}", self.kind().prefix()),
            None => self.kind().prefix().to_owned(),
        }
    }
    /// Title.
    fn title(&self) -> String;
    /// Reading guide.
    fn caption(&self) -> String;
    /// The legend, verdict table and notes drawn beside the plot.
    fn key(&self) -> Key;
    /// Every axis, as drawn.
    fn axes(&self) -> Vec<Axis>;
    /// Draws the whole figure on `root`.
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> DrawResult;
}

/// The font family every figure names (SVG) and embeds (PNG): DejaVu Sans first.
pub fn style_family() -> &'static str {
    canvas::FAMILY
}

static FONTS: Once = Once::new();

/// Registers the embedded DejaVu Sans faces with plotters (once per process).
pub fn register_fonts() {
    FONTS.call_once(|| {
        // The embedded faces are valid TrueType; a failure here would be a build defect and
        // surfaces later as a `FontUnavailable` drawing error naming the figure. They are
        // registered under the family name the SVG writes, so both forms name one face.
        let _ = plotters::style::register_font(
            canvas::FAMILY,
            FontStyle::Normal,
            dejavu::sans::regular(),
        );
        let _ =
            plotters::style::register_font(canvas::FAMILY, FontStyle::Bold, dejavu::sans::bold());
        let _ = plotters::style::register_font(
            canvas::FAMILY,
            FontStyle::Oblique,
            dejavu::sans::oblique(),
        );
    });
}

/// A figure prepared for drawing: its data gathered from the report, its vector and raster
/// forms not drawn yet (they are independent, so they can be drawn on different workers).
pub struct Sketch {
    kind: PlotKind,
    stem: String,
    title: String,
    caption: String,
    key: Key,
    axes: Vec<Axis>,
    svg: Box<dyn Fn() -> Result<String, Error> + Send + Sync>,
    png: Box<dyn Fn() -> Result<Vec<u8>, Error> + Send + Sync>,
}

impl Sketch {
    fn new<D: Drawing + Send + Sync + 'static>(drawing: D) -> Self {
        let drawing = std::sync::Arc::new(drawing);
        let for_png = drawing.clone();
        Sketch {
            kind: drawing.kind(),
            stem: drawing.stem(),
            title: drawing.title(),
            caption: drawing.caption(),
            key: drawing.key(),
            axes: drawing.axes(),
            png: Box::new(move || {
                CANVAS.with(|canvas| raster(&*for_png, &mut canvas.borrow_mut()))
            }),
            svg: Box::new(move || vector(&*drawing)),
        }
    }

    /// The family of the figure.
    pub fn kind(&self) -> PlotKind {
        self.kind
    }

    /// File stem: the figure is written as `<stem>.svg` and `<stem>.png`.
    pub fn stem(&self) -> &str {
        &self.stem
    }

    /// Title as drawn.
    pub fn title(&self) -> &str {
        &self.title
    }

    /// Reading guide.
    pub fn caption(&self) -> &str {
        &self.caption
    }

    /// The key drawn beside the plot: legend entries, verdict rows and notes.
    pub fn key(&self) -> &Key {
        &self.key
    }

    /// Every axis of the figure, as drawn (range, ticks and their labels).
    pub fn axes(&self) -> &[Axis] {
        &self.axes
    }

    /// The SVG document.
    pub fn draw_svg(&self) -> Result<String, Error> {
        (self.svg)()
    }

    /// The PNG file.
    pub fn draw_png(&self) -> Result<Vec<u8>, Error> {
        (self.png)()
    }

    /// Both forms, drawn side by side.
    pub fn draw(&self) -> Result<Figure, Error> {
        let (png, svg) = rayon::join(|| self.draw_png(), || self.draw_svg());
        Ok(self.figure(svg?, png?))
    }

    /// The figure from its drawn forms (`png` may be empty when it was written elsewhere).
    pub fn figure(&self, svg: String, png: Vec<u8>) -> Figure {
        Figure {
            kind: self.kind,
            stem: self.stem.clone(),
            title: self.title.clone(),
            caption: self.caption.clone(),
            svg,
            png,
        }
    }

    /// The figure as the report documents embed it, with its drawn SVG.
    pub fn embedded(&self, svg: String) -> EmbeddedFigure {
        EmbeddedFigure {
            stem: self.stem.clone(),
            title: self.title.clone(),
            caption: self.caption.clone(),
            svg,
        }
    }

    /// Rough relative cost of drawing the raster form, for scheduling the longest first: the
    /// figures drawing every drive point as thick lines cost most.
    pub fn raster_cost(&self) -> u32 {
        match self.kind {
            PlotKind::Harmonics | PlotKind::TwoTone => 8,
            PlotKind::Transfer => 6,
            PlotKind::StageComparison
            | PlotKind::Frequency
            | PlotKind::Sizing
            | PlotKind::Margins
            | PlotKind::Schemes => 5,
            PlotKind::MonteCarlo | PlotKind::SizingRegion => 4,
            PlotKind::Spectrum | PlotKind::SizingPareto => 3,
        }
    }
}

fn failure(stem: &str, what: &str, reason: String) -> Error {
    Error::Output {
        path: format!("{stem}.{what}").into(),
        reason,
    }
}

/// The SVG form of a drawing.
fn vector<D: Drawing>(drawing: &D) -> Result<String, Error> {
    register_fonts();
    let fail = |reason| failure(&drawing.stem(), "svg", reason);
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (WIDTH_PX, HEIGHT_PX)).into_drawing_area();
        drawing.draw(&root).map_err(|e| fail(e.0))?;
        root.present().map_err(|e| fail(e.to_string()))?;
    }
    Ok(svg)
}

thread_local! {
    /// Each worker thread's RGB canvas, reused from figure to figure: a fresh 4.5 MB buffer
    /// per figure cost more in page faults than drawing on it.
    static CANVAS: std::cell::RefCell<Vec<u8>> = const { std::cell::RefCell::new(Vec::new()) };
}

/// Draws `drawing` on `canvas` (resized to the figure) and encodes it as PNG.
fn raster<D: Drawing>(drawing: &D, canvas: &mut Vec<u8>) -> Result<Vec<u8>, Error> {
    register_fonts();
    let fail = |reason| failure(&drawing.stem(), "png", reason);
    canvas.resize((WIDTH_PX * HEIGHT_PX * 3) as usize, 0);
    {
        let root = BitMapBackend::with_buffer(canvas, (WIDTH_PX, HEIGHT_PX)).into_drawing_area();
        drawing.draw(&root).map_err(|e| fail(e.0))?;
        root.present().map_err(|e| fail(e.to_string()))?;
    }
    let mut png = Vec::new();
    use image::ImageEncoder;
    // One fixed Paeth filter with the fast deflate. Re-encoding the 140 figures of every demo
    // plan (one thread, best of 15, December 2026): Paeth 266 ms and 30.8 MB; the adaptive
    // choice per row 483 ms, 28.8 MB (7 % smaller, 1.8x the time); Up 194 ms but 47.4 MB
    // (+54 %); Sub 201 ms, 50.8 MB (+65 %); Avg 254 ms, 70.4 MB; no filter 610 ms, 336 MB
    // (the fast deflate finds little to match in unfiltered rows). On the wideband demo's 17
    // figures Up and Sub save 2-3 ms of 25 ms for files 62-72 % larger, so Paeth stays.
    image::codecs::png::PngEncoder::new_with_quality(
        &mut png,
        image::codecs::png::CompressionType::Fast,
        image::codecs::png::FilterType::Paeth,
    )
    .write_image(canvas, WIDTH_PX, HEIGHT_PX, image::ColorType::Rgb8)
    .map_err(|e| fail(e.to_string()))?;
    Ok(png)
}

/// Draws every figure the report has data for, in a fixed order (stage by stage, in plan
/// order, then the cross-stage figures).
pub fn render_all(report: &Report) -> Result<Vec<Figure>, Error> {
    sketches(report).par_iter().map(Sketch::draw).collect()
}

type Maker<'a> = Box<dyn Fn() -> Vec<Sketch> + Send + Sync + 'a>;

fn maker<'a, D: Drawing + Send + Sync + 'static, I: IntoIterator<Item = D>>(
    make: impl Fn() -> I + Send + Sync + 'a,
) -> Maker<'a> {
    Box::new(move || make().into_iter().map(Sketch::new).collect())
}

/// Every figure the report has data for, prepared (in parallel) but not drawn, in the fixed
/// order of [`render_all`].
pub fn sketches(report: &Report) -> Vec<Sketch> {
    let mut makers: Vec<Maker> = Vec::new();
    let mut stems: Vec<String> = Vec::new();
    for stage in stage_names(report) {
        let slug = unique_slug(&stage, &mut stems);
        let (stage, slug) = (std::sync::Arc::new(stage), std::sync::Arc::new(slug));
        macro_rules! per_stage {
            ($plot:path) => {{
                let (stage, slug) = (stage.clone(), slug.clone());
                makers.push(maker(move || $plot(report, &stage, &slug)));
            }};
        }
        per_stage!(verdicts::MarginsPlot::new);
        per_stage!(transfer::TransferPlot::new);
        per_stage!(harmonics::HarmonicsPlot::all);
        per_stage!(two_tone::TwoTonePlot::all);
        per_stage!(spectrum::SpectrumPlot::new);
        per_stage!(sizing::SizingPlot::new);
        per_stage!(region::RegionPlot::new);
        per_stage!(region::ParetoPlot::new);
        per_stage!(frequency::FrequencyPlot::new);
        per_stage!(monte_carlo::MonteCarloPlot::new);
    }
    makers.push(maker(move || compare::ComparisonPlot::new(report)));
    makers.push(maker(move || schemes::SchemesPlot::new(report)));
    makers
        .par_iter()
        .map(|make| make())
        .collect::<Vec<_>>()
        .into_iter()
        .flatten()
        .collect()
}

/// A file-name-safe form of a stage name, made unique among the stages already named.
fn unique_slug(stage: &str, taken: &mut Vec<String>) -> String {
    let mut slug: String = stage
        .chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || c == '-' || c == '_' {
                c
            } else {
                '-'
            }
        })
        .collect();
    if slug.is_empty() {
        slug = "stage".into();
    }
    let base = slug.clone();
    let mut n = 2;
    while taken.contains(&slug) {
        slug = format!("{base}-{n}");
        n += 1;
    }
    taken.push(slug.clone());
    slug
}
