//! What every figure shares before anything is drawn: its size, its face and how a drawing
//! fails. A leaf of the plots layer (it imports nothing from it), so the figure files, the
//! style and the key can all use it without an import circle.

use plotters::prelude::DrawingAreaErrorKind;

/// Width of every figure, pixels.
pub const WIDTH_PX: u32 = 1500;
/// Height of every figure, pixels.
pub const HEIGHT_PX: u32 = 1000;

/// The house face: DejaVu Sans, compiled into the binary for the PNG and named in the SVG
/// (with near relatives after it for a reader without DejaVu), so both forms look alike.
pub const FAMILY: &str = "DejaVu Sans, Bitstream Vera Sans, Verdana, sans-serif";

/// A drawing failure, kept as text (the backends' error types differ).
#[derive(Debug)]
pub struct PlotError(pub String);

impl std::fmt::Display for PlotError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.0)
    }
}

impl std::error::Error for PlotError {}

impl<E: std::error::Error + Send + Sync> From<DrawingAreaErrorKind<E>> for PlotError {
    fn from(error: DrawingAreaErrorKind<E>) -> Self {
        PlotError(error.to_string())
    }
}

/// Result of drawing one figure.
pub type DrawResult = Result<(), PlotError>;
