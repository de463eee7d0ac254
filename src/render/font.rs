//! The one embedded font.
//!
//! Pictures must carry readable text on machines that have no fonts at all
//! (headless servers, CI), so the renderers ship DejaVu Sans (Bitstream Vera
//! licence, see `assets/fonts/DejaVuSans-LICENSE.txt`) and register it with the
//! drawing library before the first figure is drawn. The SVG output names the
//! generic family `sans-serif`, which every viewer resolves; the PNG output
//! rasterises the embedded outlines.

use std::sync::OnceLock;

use super::RenderError;

/// DejaVu Sans, unmodified.
pub(crate) static FONT_BYTES: &[u8] = include_bytes!("../../assets/fonts/DejaVuSans.ttf");

/// The family name figures use for all text.
pub(crate) const FAMILY: &str = "sans-serif";

static REGISTERED: OnceLock<Result<(), String>> = OnceLock::new();

/// Register the embedded font once per process; later calls are free.
pub(crate) fn ensure_registered() -> Result<(), RenderError> {
    REGISTERED
        .get_or_init(|| {
            plotters::style::register_font(FAMILY, plotters::style::FontStyle::Normal, FONT_BYTES)
                .map_err(|_| "the embedded DejaVu Sans font could not be parsed".to_string())?;
            // Bold falls back to Normal inside the drawing library, but register it
            // explicitly so a bold title never looks up a missing face.
            plotters::style::register_font(FAMILY, plotters::style::FontStyle::Bold, FONT_BYTES)
                .map_err(|_| "the embedded DejaVu Sans font could not be parsed".to_string())
        })
        .clone()
        .map_err(RenderError::Font)
}
