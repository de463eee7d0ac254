//! Renderers: plain arrays in, pictures and tables out, as MIME bundles.
//!
//! Every figure is drawn twice from one drawing routine: once as SVG (vector,
//! small: filled contours are polygons, never one shape per grid cell) and
//! once as PNG (raster with the embedded font, so text appears on machines
//! without fonts). Each bundle also carries a one-line `text/plain`
//! description. The renderers know nothing of the rest of Baroc: they take
//! slices of coordinates, `ndarray` views of values (NaN = missing) and
//! strings, gathered in small spec structs.
//!
//! Module map:
//! - [`map`]: scalar fields on latitude-longitude grids (filled contours,
//!   labelled contour lines, arrows or wind barbs, graticule, colour bar);
//! - [`hodograph`], [`profile`], [`cross_section`], [`time_series`];
//! - [`panels`]: several figures in a grid in one image;
//! - [`table`]: tables with units to HTML, aligned text, CSV and JSON;
//! - [`report`]: one self-contained HTML case-study report;
//! - [`evcxr`]: the display protocol of the evcxr Rust notebook;
//! - [`contouring`] and [`barbs`]: the pure geometry the figures rely on.

pub mod barbs;
pub mod colour;
pub mod contouring;
pub mod cross_section;
pub mod evcxr;
pub mod graticule;
mod font;
mod frame;
pub mod hodograph;
pub(crate) mod html;
pub mod map;
mod painter;
pub mod panels;
pub mod profile;
pub mod report;
pub mod table;
pub mod time_series;

use plotters::prelude::*;

use crate::mime::MimeBundle;

pub use barbs::{barb_decomposition, BarbCounts, Hemisphere};
pub use colour::{Levels, Palette};
pub use cross_section::{render_cross_section, CrossSectionSpec};
pub use evcxr::{evcxr_display, evcxr_display_string};
pub use hodograph::{render_hodograph, HodographPoint, HodographSpec};
pub use map::{render_map, ContourLayer, MapSpec, ShadedLayer, VectorLayer, VectorStyle};
pub use panels::{render_figure, render_panels, FigureSpec, PanelsSpec};
pub use profile::{render_profile, ProfileSeries, ProfileSpec};
pub use report::{Report, ReportBlock, CAUTION};
pub use table::{Cell, Column, TableSpec};
pub use time_series::{render_time_series, TimeSeries, TimeSeriesSpec};

/// What can go wrong while rendering. Each variant says what was expected.
#[derive(Debug, thiserror::Error)]
pub enum RenderError {
    /// Input arrays disagree in shape or are unusable.
    #[error("{what}: {problem}")]
    Input { what: String, problem: String },
    /// The figure size or resolution is out of range.
    #[error("figure size: {0}")]
    Size(String),
    /// The embedded font failed to load (a build problem, not user input).
    #[error("font: {0}")]
    Font(String),
    /// The drawing library reported an error.
    #[error("drawing failed: {0}")]
    Drawing(String),
    /// PNG encoding failed.
    #[error("PNG encoding failed: {0}")]
    Encode(String),
    /// Writing a file failed.
    #[error("writing {path}: {source}")]
    Io {
        path: String,
        #[source]
        source: std::io::Error,
    },
}

impl RenderError {
    pub(crate) fn input(what: impl Into<String>, problem: impl Into<String>) -> Self {
        RenderError::Input {
            what: what.into(),
            problem: problem.into(),
        }
    }
}

/// Size of a figure. `width` and `height` are in CSS pixels (1/96 inch), the
/// size of the SVG; the PNG has `width * dpi / 96` by `height * dpi / 96`
/// device pixels and records its resolution, so a 192-dpi PNG is sharp on a
/// high-density screen and prints at the same physical size.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FigureSize {
    pub width: u32,
    pub height: u32,
    pub dpi: f64,
}

impl Default for FigureSize {
    fn default() -> Self {
        FigureSize {
            width: 900,
            height: 600,
            dpi: 96.0,
        }
    }
}

impl FigureSize {
    pub fn new(width: u32, height: u32) -> Self {
        FigureSize {
            width,
            height,
            dpi: 96.0,
        }
    }

    pub fn with_dpi(mut self, dpi: f64) -> Self {
        self.dpi = dpi;
        self
    }

    /// Device pixels per CSS pixel in the PNG.
    pub fn png_scale(&self) -> f64 {
        self.dpi / 96.0
    }

    fn validate(&self) -> Result<(), RenderError> {
        if !(120..=8000).contains(&self.width) || !(100..=8000).contains(&self.height) {
            return Err(RenderError::Size(format!(
                "{} x {} px is out of range; width must be 120 to 8000 and height 100 to 8000",
                self.width, self.height
            )));
        }
        if !(self.dpi.is_finite() && (24.0..=600.0).contains(&self.dpi)) {
            return Err(RenderError::Size(format!(
                "resolution {} dpi is out of range; use 24 to 600 (96 is one CSS pixel per pixel)",
                self.dpi
            )));
        }
        let png_w = (self.width as f64 * self.png_scale()).round();
        let png_h = (self.height as f64 * self.png_scale()).round();
        if png_w * png_h > 64.0e6 {
            return Err(RenderError::Size(format!(
                "the PNG would have {png_w} x {png_h} pixels; keep width x height x (dpi/96)^2 under 64 million"
            )));
        }
        Ok(())
    }
}

/// A figure that can draw itself on any plotters backend, at a scale of
/// device pixels per CSS pixel.
pub(crate) trait Drawable {
    fn draw<DB: DrawingBackend>(
        &self,
        painter: &painter::Painter<'_, DB>,
    ) -> Result<(), RenderError>;
    /// One line of plain text saying what the figure shows.
    fn describe(&self) -> String;
}

/// Draw as SVG, PNG and plain text.
pub(crate) fn bundle_of<D: Drawable>(
    figure: &D,
    size: &FigureSize,
) -> Result<MimeBundle, RenderError> {
    let svg = render_svg(figure, size)?;
    let png = render_png(figure, size)?;
    let mut bundle = MimeBundle::plain(figure.describe());
    bundle.insert_text("image/svg+xml", svg);
    bundle.insert_binary("image/png", png);
    Ok(bundle)
}

pub(crate) fn render_svg<D: Drawable>(
    figure: &D,
    size: &FigureSize,
) -> Result<String, RenderError> {
    font::ensure_registered()?;
    size.validate()?;
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (size.width, size.height)).into_drawing_area();
        root.fill(&WHITE).map_err(drawing_error)?;
        let painter = painter::Painter::new(&root, 1.0, false);
        figure.draw(&painter)?;
        root.present().map_err(drawing_error)?;
    }
    // Filled contours with holes are drawn as one polygon per region whose rings
    // are joined by zero-width bridges; the even-odd rule makes the holes empty.
    // The SVG backend writes no fill rule (the SVG default is non-zero), so say it.
    Ok(svg.replace("<polygon ", "<polygon fill-rule=\"evenodd\" "))
}

pub(crate) fn render_png<D: Drawable>(
    figure: &D,
    size: &FigureSize,
) -> Result<Vec<u8>, RenderError> {
    font::ensure_registered()?;
    size.validate()?;
    let scale = size.png_scale();
    let width = (size.width as f64 * scale).round() as u32;
    let height = (size.height as f64 * scale).round() as u32;
    let mut pixels = vec![255u8; width as usize * height as usize * 3];
    {
        let root = BitMapBackend::with_buffer(&mut pixels, (width, height)).into_drawing_area();
        let painter = painter::Painter::new(&root, scale, true);
        figure.draw(&painter)?;
        root.present().map_err(drawing_error)?;
    }
    encode_png(&pixels, width, height, size.dpi)
}

/// Encode 8-bit RGB pixels as PNG, recording the resolution (pHYs chunk).
pub(crate) fn encode_png(
    rgb: &[u8],
    width: u32,
    height: u32,
    dpi: f64,
) -> Result<Vec<u8>, RenderError> {
    let mut out = Vec::new();
    {
        let mut encoder = png::Encoder::new(&mut out, width, height);
        encoder.set_color(png::ColorType::Rgb);
        encoder.set_depth(png::BitDepth::Eight);
        encoder.set_compression(png::Compression::Fast);
        // Pixels per metre: 1 inch = 0.0254 m exactly.
        let per_metre = (dpi / 0.0254).round() as u32;
        encoder.set_pixel_dims(Some(png::PixelDimensions {
            xppu: per_metre,
            yppu: per_metre,
            unit: png::Unit::Meter,
        }));
        let mut writer = encoder
            .write_header()
            .map_err(|e| RenderError::Encode(e.to_string()))?;
        writer
            .write_image_data(rgb)
            .map_err(|e| RenderError::Encode(e.to_string()))?;
        writer
            .finish()
            .map_err(|e| RenderError::Encode(e.to_string()))?;
    }
    Ok(out)
}

pub(crate) fn drawing_error<E: std::fmt::Debug>(error: E) -> RenderError {
    RenderError::Drawing(format!("{error:?}"))
}

#[cfg(test)]
pub(crate) mod test_support;
