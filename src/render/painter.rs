//! A thin drawing layer over plotters: device-pixel coordinates as `f64`,
//! sizes given in CSS pixels and multiplied by the scale, rounding and
//! de-duplication of vertices (which keeps the SVG small), filled regions
//! with holes, and text measurement with the embedded font.

use plotters::backend::RGBPixel;
use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};
use plotters::style::FontTransform;

use super::{drawing_error, font, RenderError};

/// A point in device pixels, y downward.
pub(crate) type Pt = (f64, f64);

/// An axis-aligned rectangle in device pixels.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct Rect {
    pub left: f64,
    pub top: f64,
    pub right: f64,
    pub bottom: f64,
}

impl Rect {
    pub fn new(left: f64, top: f64, right: f64, bottom: f64) -> Self {
        Rect {
            left,
            top,
            right,
            bottom,
        }
    }
    pub fn width(&self) -> f64 {
        self.right - self.left
    }
    pub fn height(&self) -> f64 {
        self.bottom - self.top
    }
    pub fn contains(&self, p: Pt) -> bool {
        p.0 >= self.left && p.0 <= self.right && p.1 >= self.top && p.1 <= self.bottom
    }
    pub fn overlaps(&self, other: &Rect) -> bool {
        self.left < other.right
            && other.left < self.right
            && self.top < other.bottom
            && other.top < self.bottom
    }
    pub fn inflate(&self, by: f64) -> Rect {
        Rect::new(
            self.left - by,
            self.top - by,
            self.right + by,
            self.bottom + by,
        )
    }
}

/// Where a text's reference point sits on the text box (the full set of
/// nine, though not every figure uses every one).
#[allow(dead_code)]
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) enum Anchor {
    TopLeft,
    TopCentre,
    TopRight,
    CentreLeft,
    Centre,
    CentreRight,
    BottomLeft,
    BottomCentre,
    BottomRight,
}

impl Anchor {
    fn pos(self) -> Pos {
        let (h, v) = match self {
            Anchor::TopLeft => (HPos::Left, VPos::Top),
            Anchor::TopCentre => (HPos::Center, VPos::Top),
            Anchor::TopRight => (HPos::Right, VPos::Top),
            Anchor::CentreLeft => (HPos::Left, VPos::Center),
            Anchor::Centre => (HPos::Center, VPos::Center),
            Anchor::CentreRight => (HPos::Right, VPos::Center),
            Anchor::BottomLeft => (HPos::Left, VPos::Bottom),
            Anchor::BottomCentre => (HPos::Center, VPos::Bottom),
            Anchor::BottomRight => (HPos::Right, VPos::Bottom),
        };
        Pos::new(h, v)
    }
}

pub(crate) const BLACK_INK: RGBColor = RGBColor(20, 20, 20);
pub(crate) const GREY_INK: RGBColor = RGBColor(110, 110, 110);

pub(crate) struct Painter<'a, DB: DrawingBackend> {
    area: &'a DrawingArea<DB, Shift>,
    /// Device pixels per CSS pixel.
    pub scale: f64,
    /// Drawing into a raster (PNG) rather than a vector (SVG) target.
    raster: bool,
}

pub(crate) const HATCH_BACKGROUND: RGBColor = RGBColor(226, 226, 226);
pub(crate) const HATCH_LINE: RGBColor = RGBColor(160, 160, 160);

fn round_points(points: &[Pt]) -> Vec<(i32, i32)> {
    let mut out: Vec<(i32, i32)> = Vec::with_capacity(points.len());
    for &(x, y) in points {
        if !(x.is_finite() && y.is_finite()) {
            continue;
        }
        let p = (x.round() as i32, y.round() as i32);
        if out.last() != Some(&p) {
            out.push(p);
        }
    }
    out
}

impl<'a, DB: DrawingBackend> Painter<'a, DB> {
    pub fn new(area: &'a DrawingArea<DB, Shift>, scale: f64, raster: bool) -> Self {
        Painter {
            area,
            scale,
            raster,
        }
    }

    /// A painter for a sub-area (one panel of a multi-panel figure).
    pub fn sub<'b>(&self, area: &'b DrawingArea<DB, Shift>) -> Painter<'b, DB> {
        Painter {
            area,
            scale: self.scale,
            raster: self.raster,
        }
    }

    /// Fill `rect` with `base`, then with regions painted in order (each
    /// region a set of rings under the even-odd rule), then the missing-data
    /// region with a grey hatch. Vector output gets one polygon per region.
    /// Raster output is scan-converted here, sampling pixel centres with a
    /// half-open rule so that a vertex on a scan line is counted once, and
    /// the finished image is copied in one block: the drawing library's own
    /// polygon filler mis-pairs edges at such vertices on large polygons and
    /// leaves stray lines.
    pub fn filled_layer(
        &self,
        rect: Rect,
        base: RGBAColor,
        regions: &[(Vec<Vec<Pt>>, RGBAColor)],
        missing: &[Vec<Pt>],
    ) -> Result<(), RenderError> {
        if !self.raster {
            self.fill_rect(rect, base)?;
            for (rings, colour) in regions {
                self.region(rings, *colour)?;
            }
            if !missing.is_empty() {
                self.region(missing, HATCH_BACKGROUND.to_rgba())?;
                self.hatch_lines(rect, missing)?;
            }
            return Ok(());
        }
        let x0 = rect.left.round().max(0.0) as i64;
        let y0 = rect.top.round().max(0.0) as i64;
        let (aw, ah) = self.size();
        let x1 = (rect.right.round() as i64).min(aw as i64);
        let y1 = (rect.bottom.round() as i64).min(ah as i64);
        if x1 <= x0 || y1 <= y0 {
            return Ok(());
        }
        let (w, h) = ((x1 - x0) as usize, (y1 - y0) as usize);
        let mut image = Vec::with_capacity(w * h * 3);
        for _ in 0..w * h {
            image.extend_from_slice(&[base.0, base.1, base.2]);
        }
        let origin = (x0 as f64, y0 as f64);
        for (rings, colour) in regions {
            scan_fill(&mut image, w, h, origin, rings, |_, _| Some(*colour));
        }
        if !missing.is_empty() {
            let gap = (7.0 * self.scale).round().max(3.0) as i64;
            scan_fill(&mut image, w, h, origin, missing, |x, y| {
                // Lines rising to the right, in figure coordinates.
                let on = ((x as i64 + x0) + (y as i64 + y0)).rem_euclid(gap) == 0;
                Some(if on {
                    HATCH_LINE.to_rgba()
                } else {
                    HATCH_BACKGROUND.to_rgba()
                })
            });
        }
        let element = BitMapElement::<_, RGBPixel>::with_owned_buffer(
            (x0 as i32, y0 as i32),
            (w as u32, h as u32),
            image,
        )
        .ok_or_else(|| RenderError::Drawing("raster layer buffer has the wrong size".into()))?;
        self.area.draw(&element).map_err(drawing_error)
    }

    /// Diagonal hatch lines inside a region (even-odd rings) within `rect`.
    fn hatch_lines(&self, rect: Rect, rings: &[Vec<Pt>]) -> Result<(), RenderError> {
        let gap = self.px(7.0);
        let mut offset = -rect.height();
        while offset < rect.width() {
            let a = (rect.left + offset, rect.bottom);
            let b = (rect.left + offset + rect.height(), rect.top);
            // Parameters where the line crosses ring edges, paired inside-out.
            let mut ts: Vec<f64> = Vec::new();
            for ring in rings {
                let n = ring.len();
                for i in 0..n {
                    if let Some(t) = segment_crossing(a, b, ring[i], ring[(i + 1) % n]) {
                        ts.push(t);
                    }
                }
            }
            ts.sort_by(|x, y| x.total_cmp(y));
            for pair in ts.chunks_exact(2) {
                let p0 = (a.0 + pair[0] * (b.0 - a.0), a.1 + pair[0] * (b.1 - a.1));
                let p1 = (a.0 + pair[1] * (b.0 - a.0), a.1 + pair[1] * (b.1 - a.1));
                if let Some((p0, p1)) = clip_segment(p0, p1, &rect) {
                    self.line(p0, p1, HATCH_LINE.to_rgba(), 1.0)?;
                }
            }
            offset += gap;
        }
        Ok(())
    }

    /// Vector hatch: grey fill and diagonal lines clipped to the rectangle.
    pub fn hatch(&self, rect: Rect) -> Result<(), RenderError> {
        self.fill_rect(rect, HATCH_BACKGROUND.to_rgba())?;
        let gap = self.px(7.0);
        let mut offset = -rect.height();
        while offset < rect.width() {
            let a = (rect.left + offset, rect.bottom);
            let b = (rect.left + offset + rect.height(), rect.top);
            if let Some((a, b)) = clip_segment(a, b, &rect) {
                self.line(a, b, HATCH_LINE.to_rgba(), 1.0)?;
            }
            offset += gap;
        }
        Ok(())
    }

    /// CSS pixels to device pixels.
    pub fn px(&self, css: f64) -> f64 {
        css * self.scale
    }

    /// The drawing area's size in device pixels.
    pub fn size(&self) -> (f64, f64) {
        let (w, h) = self.area.dim_in_pixel();
        (w as f64, h as f64)
    }

    pub fn area(&self) -> &DrawingArea<DB, Shift> {
        self.area
    }

    fn stroke(&self, colour: RGBAColor, width_css: f64) -> ShapeStyle {
        let width = (width_css * self.scale).round().max(1.0) as u32;
        ShapeStyle {
            color: colour,
            filled: false,
            stroke_width: width,
        }
    }

    pub fn polyline(
        &self,
        points: &[Pt],
        colour: RGBAColor,
        width_css: f64,
    ) -> Result<(), RenderError> {
        if self.raster {
            return self.raster_polyline(points, colour, width_css);
        }
        let pts = round_points(points);
        if pts.len() < 2 {
            return Ok(());
        }
        self.area
            .draw(&PathElement::new(pts, self.stroke(colour, width_css)))
            .map_err(drawing_error)
    }

    pub fn line(&self, a: Pt, b: Pt, colour: RGBAColor, width_css: f64) -> Result<(), RenderError> {
        self.polyline(&[a, b], colour, width_css)
    }

    /// Raster strokes are drawn here rather than by the drawing library,
    /// whose line rasteriser drops pixels of short rising segments (contour
    /// lines made of one-pixel steps come out dotted). Each pixel gets the
    /// coverage of a round-capped stroke of the given width, the largest over
    /// the polyline's segments, so joints are not painted twice.
    fn raster_polyline(
        &self,
        points: &[Pt],
        colour: RGBAColor,
        width_css: f64,
    ) -> Result<(), RenderError> {
        let pts: Vec<Pt> = points
            .iter()
            .copied()
            .filter(|p| p.0.is_finite() && p.1.is_finite())
            .collect();
        if pts.len() < 2 {
            return Ok(());
        }
        let (aw, ah) = self.size();
        let half = (width_css * self.scale).max(1.0) / 2.0;
        let mut cover: Vec<(i64, i64, f64)> = Vec::new();
        for w in pts.windows(2) {
            let (a, b) = (w[0], w[1]);
            let x0 = (a.0.min(b.0) - half - 1.0).floor().max(0.0) as i64;
            let x1 = (a.0.max(b.0) + half + 1.0).ceil().min(aw - 1.0) as i64;
            let y0 = (a.1.min(b.1) - half - 1.0).floor().max(0.0) as i64;
            let y1 = (a.1.max(b.1) + half + 1.0).ceil().min(ah - 1.0) as i64;
            let (dx, dy) = (b.0 - a.0, b.1 - a.1);
            let len2 = dx * dx + dy * dy;
            for y in y0..=y1 {
                for x in x0..=x1 {
                    let (cx, cy) = (x as f64 + 0.5, y as f64 + 0.5);
                    let t = if len2 > 0.0 {
                        (((cx - a.0) * dx + (cy - a.1) * dy) / len2).clamp(0.0, 1.0)
                    } else {
                        0.0
                    };
                    let (px, py) = (a.0 + t * dx - cx, a.1 + t * dy - cy);
                    let d = (px * px + py * py).sqrt();
                    let c = (half + 0.5 - d).clamp(0.0, 1.0);
                    if c > 0.0 {
                        cover.push((y, x, c));
                    }
                }
            }
        }
        cover.sort_by(|p, q| (p.0, p.1).cmp(&(q.0, q.1)).then(q.2.total_cmp(&p.2)));
        cover.dedup_by(|later, first| later.0 == first.0 && later.1 == first.1);
        for (y, x, c) in cover {
            let shade = RGBAColor(colour.0, colour.1, colour.2, colour.3 * c);
            self.area
                .draw_pixel((x as i32, y as i32), &shade)
                .map_err(drawing_error)?;
        }
        Ok(())
    }

    /// Raster fill of rings by the even-odd rule, pixel by pixel.
    fn raster_fill(&self, rings: &[Vec<Pt>], colour: RGBAColor) -> Result<(), RenderError> {
        let (aw, ah) = self.size();
        let mut result = Ok(());
        scan_spans(
            aw as usize,
            ah as usize,
            (0.0, 0.0),
            rings,
            |row, from, to| {
                for x in from..to {
                    if result.is_ok() {
                        result = self
                            .area
                            .draw_pixel((x as i32, row as i32), &colour)
                            .map_err(drawing_error);
                    }
                }
            },
        );
        result
    }

    /// Fill one simple polygon.
    pub fn polygon(&self, points: &[Pt], colour: RGBAColor) -> Result<(), RenderError> {
        if self.raster {
            return self.raster_fill(&[points.to_vec()], colour);
        }
        let pts = round_points(points);
        if pts.len() < 3 {
            return Ok(());
        }
        self.area
            .draw(&Polygon::new(pts, colour.filled()))
            .map_err(drawing_error)
    }

    /// Fill a region given by all its boundary rings (outer boundaries and
    /// holes alike) under the even-odd rule. The rings are joined into one
    /// polygon by bridges from the first ring's first vertex to each other
    /// ring's first vertex and back; a bridge is traversed twice in opposite
    /// directions, so every scan line crosses it an even number of times and
    /// the parity (inside or outside) is unchanged everywhere. The PNG
    /// rasteriser fills by parity, and the SVG output sets
    /// `fill-rule="evenodd"`, so holes stay empty in both.
    pub fn region(&self, rings: &[Vec<Pt>], colour: RGBAColor) -> Result<(), RenderError> {
        if self.raster {
            return self.raster_fill(rings, colour);
        }
        let mut joined: Vec<(i32, i32)> = Vec::new();
        let mut anchor: Option<(i32, i32)> = None;
        for ring in rings {
            let mut pts = round_points(ring);
            if pts.len() > 1 && pts.first() == pts.last() {
                pts.pop();
            }
            if pts.len() < 3 {
                continue;
            }
            match anchor {
                None => {
                    anchor = Some(pts[0]);
                    joined.extend_from_slice(&pts);
                    joined.push(pts[0]);
                }
                Some(a) => {
                    joined.extend_from_slice(&pts);
                    joined.push(pts[0]);
                    joined.push(a);
                }
            }
        }
        if joined.len() < 3 {
            return Ok(());
        }
        self.area
            .draw(&Polygon::new(joined, colour.filled()))
            .map_err(drawing_error)
    }

    pub fn fill_rect(&self, rect: Rect, colour: RGBAColor) -> Result<(), RenderError> {
        let a = (rect.left.round() as i32, rect.top.round() as i32);
        let b = (rect.right.round() as i32, rect.bottom.round() as i32);
        self.area
            .draw(&Rectangle::new([a, b], colour.filled()))
            .map_err(drawing_error)
    }

    pub fn stroke_rect(
        &self,
        rect: Rect,
        colour: RGBAColor,
        width_css: f64,
    ) -> Result<(), RenderError> {
        let pts = [
            (rect.left, rect.top),
            (rect.right, rect.top),
            (rect.right, rect.bottom),
            (rect.left, rect.bottom),
            (rect.left, rect.top),
        ];
        self.polyline(&pts, colour, width_css)
    }

    pub fn circle(
        &self,
        centre: Pt,
        radius_css: f64,
        colour: RGBAColor,
        filled: bool,
        width_css: f64,
    ) -> Result<(), RenderError> {
        let c = (centre.0.round() as i32, centre.1.round() as i32);
        let r = (radius_css * self.scale).round().max(1.0) as i32;
        let style = if filled {
            colour.filled()
        } else {
            self.stroke(colour, width_css)
        };
        self.area
            .draw(&Circle::new(c, r, style))
            .map_err(drawing_error)
    }

    fn text_style(
        &self,
        size_css: f64,
        colour: RGBAColor,
        anchor: Anchor,
        vertical: bool,
        bold: bool,
    ) -> TextStyle<'static> {
        let style = if bold {
            FontStyle::Bold
        } else {
            FontStyle::Normal
        };
        let desc = FontDesc::new(FontFamily::Name(font::FAMILY), size_css * self.scale, style);
        let desc = if vertical {
            desc.transform(FontTransform::Rotate270)
        } else {
            desc
        };
        TextStyle {
            font: desc,
            color: colour.to_backend_color(),
            pos: anchor.pos(),
        }
    }

    pub fn text(
        &self,
        text: &str,
        at: Pt,
        size_css: f64,
        colour: RGBAColor,
        anchor: Anchor,
    ) -> Result<(), RenderError> {
        self.text_with(text, at, size_css, colour, anchor, false, false)
    }

    pub fn bold_text(
        &self,
        text: &str,
        at: Pt,
        size_css: f64,
        colour: RGBAColor,
        anchor: Anchor,
    ) -> Result<(), RenderError> {
        self.text_with(text, at, size_css, colour, anchor, false, true)
    }

    /// Text turned a quarter turn anticlockwise (for y-axis titles).
    pub fn vertical_text(
        &self,
        text: &str,
        at: Pt,
        size_css: f64,
        colour: RGBAColor,
    ) -> Result<(), RenderError> {
        self.text_with(text, at, size_css, colour, Anchor::Centre, true, false)
    }

    #[allow(clippy::too_many_arguments)]
    fn text_with(
        &self,
        text: &str,
        at: Pt,
        size_css: f64,
        colour: RGBAColor,
        anchor: Anchor,
        vertical: bool,
        bold: bool,
    ) -> Result<(), RenderError> {
        if text.is_empty() {
            return Ok(());
        }
        let style = self.text_style(size_css, colour, anchor, vertical, bold);
        self.area
            .draw_text(text, &style, (at.0.round() as i32, at.1.round() as i32))
            .map_err(drawing_error)
    }

    /// Width and height of a text in device pixels, measured with the
    /// embedded font (the same in SVG and PNG up to the viewer's font).
    pub fn text_extent(&self, text: &str, size_css: f64) -> (f64, f64) {
        let style = self.text_style(size_css, BLACK_INK.to_rgba(), Anchor::TopLeft, false, false);
        match self.area.estimate_text_size(text, &style) {
            Ok((w, h)) => (w as f64, h as f64),
            // Fall back to a typical sans-serif advance of 0.6 em.
            Err(_) => (
                text.chars().count() as f64 * 0.6 * size_css * self.scale,
                size_css * self.scale,
            ),
        }
    }

    /// The box a text occupies when drawn at `at` with `anchor`.
    pub fn text_box(&self, text: &str, at: Pt, size_css: f64, anchor: Anchor) -> Rect {
        let (w, h) = self.text_extent(text, size_css);
        let left = match anchor {
            Anchor::TopLeft | Anchor::CentreLeft | Anchor::BottomLeft => at.0,
            Anchor::TopCentre | Anchor::Centre | Anchor::BottomCentre => at.0 - w / 2.0,
            _ => at.0 - w,
        };
        let top = match anchor {
            Anchor::TopLeft | Anchor::TopCentre | Anchor::TopRight => at.1,
            Anchor::CentreLeft | Anchor::Centre | Anchor::CentreRight => at.1 - h / 2.0,
            _ => at.1 - h,
        };
        Rect::new(left, top, left + w, top + h)
    }

    /// Greedy word wrap to lines no wider than `max_width` device pixels.
    pub fn wrap_text(&self, text: &str, size_css: f64, max_width: f64) -> Vec<String> {
        let mut lines = Vec::new();
        for paragraph in text.lines() {
            let mut current = String::new();
            for word in paragraph.split_whitespace() {
                let candidate = if current.is_empty() {
                    word.to_string()
                } else {
                    format!("{current} {word}")
                };
                if self.text_extent(&candidate, size_css).0 > max_width && !current.is_empty() {
                    lines.push(std::mem::take(&mut current));
                    current = word.to_string();
                } else {
                    current = candidate;
                }
            }
            lines.push(current);
        }
        lines
    }
}

/// Clip the segment a-b to a rectangle (Liang-Barsky); None when outside.
pub(crate) fn clip_segment(a: Pt, b: Pt, rect: &Rect) -> Option<(Pt, Pt)> {
    let (dx, dy) = (b.0 - a.0, b.1 - a.1);
    let mut t0 = 0.0f64;
    let mut t1 = 1.0f64;
    for (p, q) in [
        (-dx, a.0 - rect.left),
        (dx, rect.right - a.0),
        (-dy, a.1 - rect.top),
        (dy, rect.bottom - a.1),
    ] {
        if p == 0.0 {
            if q < 0.0 {
                return None;
            }
        } else {
            let r = q / p;
            if p < 0.0 {
                t0 = t0.max(r);
            } else {
                t1 = t1.min(r);
            }
        }
    }
    if t0 > t1 {
        return None;
    }
    Some((
        (a.0 + t0 * dx, a.1 + t0 * dy),
        (a.0 + t1 * dx, a.1 + t1 * dy),
    ))
}

/// Split a polyline into the runs inside a rectangle.
pub(crate) fn clip_polyline(points: &[Pt], rect: &Rect) -> Vec<Vec<Pt>> {
    let mut runs: Vec<Vec<Pt>> = Vec::new();
    let mut current: Vec<Pt> = Vec::new();
    for w in points.windows(2) {
        match clip_segment(w[0], w[1], rect) {
            Some((a, b)) => {
                if current.is_empty() {
                    current.push(a);
                } else if current.last() != Some(&a) {
                    runs.push(std::mem::take(&mut current));
                    current.push(a);
                }
                current.push(b);
                if b != w[1] {
                    runs.push(std::mem::take(&mut current));
                }
            }
            None => {
                if !current.is_empty() {
                    runs.push(std::mem::take(&mut current));
                }
            }
        }
    }
    if current.len() > 1 {
        runs.push(current);
    }
    runs.retain(|r| r.len() > 1);
    runs
}

/// Where the segment a-b (parameter t in 0..1) crosses the segment c-d,
/// with the half-open rule on c-d so that a crossing through a shared
/// vertex is counted once.
fn segment_crossing(a: Pt, b: Pt, c: Pt, d: Pt) -> Option<f64> {
    let r = (b.0 - a.0, b.1 - a.1);
    let s = (d.0 - c.0, d.1 - c.1);
    let denom = r.0 * s.1 - r.1 * s.0;
    if denom.abs() < 1e-12 {
        return None;
    }
    let q = (c.0 - a.0, c.1 - a.1);
    let t = (q.0 * s.1 - q.1 * s.0) / denom;
    let u = (q.0 * r.1 - q.1 * r.0) / denom;
    ((0.0..=1.0).contains(&t) && (0.0..1.0).contains(&u)).then_some(t)
}

/// Even-odd scan conversion of rings into an RGB image whose top-left pixel
/// is at `origin` in figure pixels, with the colour of each pixel given by
/// `paint(x, y)` (a pattern or a plain colour). A pixel is filled when its
/// centre is inside; an edge counts on a scan line when y0 <= yc < y1
/// (half-open), so shared vertices are counted exactly once. Partly
/// transparent colours are blended over what is there.
fn scan_fill(
    image: &mut [u8],
    w: usize,
    h: usize,
    origin: (f64, f64),
    rings: &[Vec<Pt>],
    paint: impl Fn(usize, usize) -> Option<RGBAColor>,
) {
    scan_spans(w, h, origin, rings, |row, from, to| {
        for x in from..to {
            let Some(colour) = paint(x, row) else {
                continue;
            };
            let alpha = colour.3.clamp(0.0, 1.0);
            let k = (row * w + x) * 3;
            if alpha >= 1.0 {
                image[k] = colour.0;
                image[k + 1] = colour.1;
                image[k + 2] = colour.2;
            } else {
                for (c, v) in [(0usize, colour.0), (1, colour.1), (2, colour.2)] {
                    image[k + c] =
                        (image[k + c] as f64 * (1.0 - alpha) + v as f64 * alpha).round() as u8;
                }
            }
        }
    });
}

/// The horizontal runs of pixels (row, from, to exclusive) inside rings by
/// the even-odd rule, within a w x h window whose top-left pixel is at
/// `origin`. A pixel is inside when its centre is; an edge counts on a scan
/// line when y0 <= yc < y1 (half-open), so shared vertices count once.
fn scan_spans(
    w: usize,
    h: usize,
    origin: (f64, f64),
    rings: &[Vec<Pt>],
    mut span: impl FnMut(usize, usize, usize),
) {
    // Edges as (ytop, ybottom, x at ytop, dx/dy), skipping horizontal ones.
    let mut edges: Vec<(f64, f64, f64, f64)> = Vec::new();
    for ring in rings {
        let n = ring.len();
        if n < 3 {
            continue;
        }
        for i in 0..n {
            let (ax, ay) = (ring[i].0 - origin.0, ring[i].1 - origin.1);
            let (bx, by) = (
                ring[(i + 1) % n].0 - origin.0,
                ring[(i + 1) % n].1 - origin.1,
            );
            if !(ax.is_finite() && ay.is_finite() && bx.is_finite() && by.is_finite()) || ay == by {
                continue;
            }
            let (top, bottom, xt, slope) = if ay < by {
                (ay, by, ax, (bx - ax) / (by - ay))
            } else {
                (by, ay, bx, (ax - bx) / (ay - by))
            };
            edges.push((top, bottom, xt, slope));
        }
    }
    if edges.is_empty() {
        return;
    }
    edges.sort_by(|a, b| a.0.total_cmp(&b.0));
    let first_row = edges[0].0.max(0.0).floor() as usize;
    let mut next = 0usize;
    let mut active: Vec<usize> = Vec::new();
    let mut xs: Vec<f64> = Vec::new();
    for row in first_row..h {
        let yc = row as f64 + 0.5;
        while next < edges.len() && edges[next].0 <= yc {
            active.push(next);
            next += 1;
        }
        active.retain(|&e| edges[e].1 > yc);
        if active.is_empty() && next >= edges.len() {
            break;
        }
        xs.clear();
        for &e in &active {
            let (top, _, xt, slope) = edges[e];
            xs.push(xt + (yc - top) * slope);
        }
        if xs.len() < 2 {
            continue;
        }
        xs.sort_by(|a, b| a.total_cmp(b));
        for pair in xs.chunks_exact(2) {
            // Pixel centres x + 0.5 in [pair[0], pair[1]).
            let from = (pair[0] - 0.5).ceil().max(0.0) as usize;
            let to = ((pair[1] - 0.5).ceil().min(w as f64)).max(0.0) as usize;
            if to > from {
                span(row, from, to.min(w));
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn scan_fill_leaves_holes_empty_and_counts_shared_vertices_once() {
        // A 10 x 10 square with a 4 x 4 hole: 100 - 16 = 84 pixels (analytic).
        let mut image = vec![0u8; 12 * 12 * 3];
        let outer = vec![(1.0, 1.0), (11.0, 1.0), (11.0, 11.0), (1.0, 11.0)];
        let hole = vec![(4.0, 4.0), (4.0, 8.0), (8.0, 8.0), (8.0, 4.0)];
        scan_fill(&mut image, 12, 12, (0.0, 0.0), &[outer, hole], |_, _| {
            Some(RGBAColor(255, 0, 0, 1.0))
        });
        let filled = image.chunks(3).filter(|p| p[0] == 255).count();
        assert_eq!(filled, 84);
        // A diamond whose left and right vertices sit exactly on a scan line
        // (y = 5.5): no stray span beyond the shape.
        let mut image = vec![0u8; 12 * 12 * 3];
        let diamond = vec![(6.0, 0.5), (11.0, 5.5), (6.0, 10.5), (1.0, 5.5)];
        scan_fill(&mut image, 12, 12, (0.0, 0.0), &[diamond], |_, _| {
            Some(RGBAColor(255, 0, 0, 1.0))
        });
        for row in 0..12 {
            for x in [0usize, 11] {
                assert_eq!(image[(row * 12 + x) * 3], 0, "stray pixel at ({x}, {row})");
            }
        }
    }

    #[test]
    fn clipping_keeps_the_inside_part_of_a_segment() {
        let r = Rect::new(0.0, 0.0, 10.0, 10.0);
        let (a, b) = clip_segment((-5.0, 5.0), (15.0, 5.0), &r).unwrap();
        assert_eq!((a, b), ((0.0, 5.0), (10.0, 5.0)));
        assert!(clip_segment((-5.0, -5.0), (-1.0, 20.0), &r).is_none());
    }
}
