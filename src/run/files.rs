//! Every file of a report folder, rendered and written as independent tasks.

use crate::error::Error;
use crate::plots;
use crate::report::datasheet::{self, EmbeddedFigure};
use crate::report::{csv, json, summary, Report};
use crate::run::folder::Staging;
use rayon::prelude::*;

/// Renders every file of the report folder into `staging`, each written as soon as it is
/// ready: the tables (report.json, points.csv, summary.md), the figures (SVG and PNG) and the
/// report documents.
///
/// The pieces are independent tasks of very unequal cost (a dense sweep's harmonics raster
/// takes ten times its summary), so they are started longest first: with the workers
/// greedily taking the next task, the last one to finish is then a short one.
pub fn write_files(report: &Report, with_figures: bool, staging: &Staging) -> Result<(), Error> {
    let sketches = if with_figures {
        plots::sketches(report)
    } else {
        Vec::new()
    };
    type Task<'a> = Box<dyn FnOnce() -> Result<(), Error> + Send + 'a>;
    // (relative cost, task); the costs are rough shares of a dense sweep's run.
    let mut tasks: Vec<(u32, Task)> = Vec::new();
    for sketch in &sketches {
        tasks.push((
            sketch.raster_cost(),
            Box::new(move || staging.put(&format!("{}.png", sketch.stem()), &sketch.draw_png()?)),
        ));
    }
    tasks.push((
        5,
        Box::new(|| {
            staging.put_streamed("report.json", |file| {
                json::write_json(report, file).map_err(|e| e.to_string())
            })
        }),
    ));
    tasks.push((
        3,
        Box::new(|| {
            staging.put_streamed("points.csv", |file| {
                csv::write_points_csv(report, file).map_err(|e| e.to_string())
            })
        }),
    ));
    tasks.push((
        1 + sketches.len() as u32,
        Box::new(|| write_documents(report, &sketches, staging)),
    ));
    tasks.push((
        1,
        Box::new(|| staging.put("summary.md", summary::summary(report).as_bytes())),
    ));
    tasks.sort_by_key(|(cost, _)| std::cmp::Reverse(*cost));
    // When several tasks fail, report the one first in the list, whatever finished first.
    let failure: std::sync::Mutex<Option<(usize, Error)>> = std::sync::Mutex::new(None);
    rayon::scope_fifo(|scope| {
        for (index, (_, task)) in tasks.into_iter().enumerate() {
            let failure = &failure;
            scope.spawn_fifo(move |_| {
                if let Err(error) = task() {
                    let mut slot = failure
                        .lock()
                        .unwrap_or_else(|poisoned| poisoned.into_inner());
                    if slot.as_ref().is_none_or(|(first, _)| index < *first) {
                        *slot = Some((index, error));
                    }
                }
            });
        }
    });
    match failure
        .into_inner()
        .unwrap_or_else(|poisoned| poisoned.into_inner())
    {
        Some((_, error)) => Err(error),
        None => Ok(()),
    }
}

/// Draws the vector form of every figure and renders the two report documents into
/// `staging` (the SVGs inline in report.html). The PNGs are drawn and written separately.
fn write_documents(
    report: &Report,
    sketches: &[plots::Sketch],
    staging: &Staging,
) -> Result<(), Error> {
    let figures: Vec<EmbeddedFigure> = sketches
        .par_iter()
        .map(|sketch| {
            let svg = sketch.draw_svg()?;
            staging.put(&format!("{}.svg", sketch.stem()), svg.as_bytes())?;
            Ok(sketch.embedded(svg))
        })
        .collect::<Result<_, Error>>()?;
    let blocks = datasheet::blocks(report, &figures);
    staging.put(
        "report.md",
        datasheet::markdown(&blocks, &figures).as_bytes(),
    )?;
    staging.put(
        "report.html",
        datasheet::html(report, &blocks, &figures).as_bytes(),
    )
}
