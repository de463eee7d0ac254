//! Shared pieces of every chart: title block, axes with ticks, legends,
//! series colours and dashing.

use plotters::prelude::*;

use super::colour::{format_value, level_step, multiples_within, nice_step, ToRgba};
use super::painter::{Anchor, Painter, Pt, Rect, BLACK_INK, GREY_INK};
use super::RenderError;

/// Text sizes in CSS pixels.
pub(crate) const TITLE_SIZE: f64 = 17.0;
pub(crate) const SUBTITLE_SIZE: f64 = 12.0;
pub(crate) const LABEL_SIZE: f64 = 12.0;
pub(crate) const TICK_SIZE: f64 = 11.0;
pub(crate) const SMALL_SIZE: f64 = 10.0;

/// Colours for named series: the colour-universal-design set of Okabe and
/// Ito (2008), distinguishable with the common colour-vision deficiencies.
pub(crate) const SERIES_COLOURS: [RGBColor; 7] = [
    RGBColor(0, 114, 178),   // blue
    RGBColor(213, 94, 0),    // vermilion
    RGBColor(0, 158, 115),   // bluish green
    RGBColor(204, 121, 167), // reddish purple
    RGBColor(230, 159, 0),   // orange
    RGBColor(86, 180, 233),  // sky blue
    RGBColor(0, 0, 0),       // black
];

pub(crate) fn series_colour(i: usize) -> RGBAColor {
    SERIES_COLOURS[i % SERIES_COLOURS.len()].rgba()
}

/// Draw the title (and optional subtitle) at the top of the area; returns
/// the y below them in device pixels.
pub(crate) fn draw_title<DB: DrawingBackend>(
    p: &Painter<'_, DB>,
    title: &str,
    subtitle: &str,
) -> Result<f64, RenderError> {
    let (w, _) = p.size();
    let margin = p.px(10.0);
    let mut y = p.px(8.0);
    // Titles and subtitles wrap onto more lines rather than being cut.
    if !title.is_empty() {
        for text in p.wrap_text(title, TITLE_SIZE, w - 2.0 * margin) {
            p.bold_text(
                &text,
                (w / 2.0, y),
                TITLE_SIZE,
                BLACK_INK.rgba(),
                Anchor::TopCentre,
            )?;
            y += p.text_extent(&text, TITLE_SIZE).1 + p.px(5.0);
        }
    }
    if !subtitle.is_empty() {
        for text in p.wrap_text(subtitle, SUBTITLE_SIZE, w - 2.0 * margin) {
            p.text(
                &text,
                (w / 2.0, y),
                SUBTITLE_SIZE,
                GREY_INK.rgba(),
                Anchor::TopCentre,
            )?;
            y += p.text_extent(&text, SUBTITLE_SIZE).1 + p.px(4.0);
        }
    }
    Ok(y + p.px(4.0))
}

/// A caption of wrapped lines at the bottom of the area; returns the height used.
pub(crate) fn caption_height<DB: DrawingBackend>(
    p: &Painter<'_, DB>,
    caption: &str,
) -> (Vec<String>, f64) {
    if caption.trim().is_empty() {
        return (Vec::new(), 0.0);
    }
    let (w, _) = p.size();
    let lines = p.wrap_text(caption, SMALL_SIZE, w - p.px(24.0));
    let line_height = p.text_extent("Ag", SMALL_SIZE).1 + p.px(3.0);
    let h = lines.len() as f64 * line_height + p.px(6.0);
    (lines, h)
}

pub(crate) fn draw_caption<DB: DrawingBackend>(
    p: &Painter<'_, DB>,
    lines: &[String],
    top: f64,
) -> Result<(), RenderError> {
    let line_height = p.text_extent("Ag", SMALL_SIZE).1 + p.px(3.0);
    for (i, line) in lines.iter().enumerate() {
        p.text(
            line,
            (p.px(12.0), top + i as f64 * line_height),
            SMALL_SIZE,
            BLACK_INK.rgba(),
            Anchor::TopLeft,
        )?;
    }
    Ok(())
}

/// A series drawn as a line with a dot at each valid value, broken where a
/// value is missing (profiles and time series share it).
pub(crate) fn draw_marked_line<DB: DrawingBackend>(
    p: &Painter<'_, DB>,
    points: impl IntoIterator<Item = Option<Pt>>,
    colour: RGBAColor,
) -> Result<(), RenderError> {
    let mut run: Vec<Pt> = Vec::new();
    for point in points {
        match point {
            Some(at) => {
                p.circle(at, 2.5, colour, true, 1.0)?;
                run.push(at);
            }
            None => {
                p.polyline(&run, colour, 1.8)?;
                run.clear();
            }
        }
    }
    p.polyline(&run, colour, 1.8)
}

/// A colour bar beside a shaded chart (maps and cross-sections share it):
/// one box per band, pointed ends for values beyond the outermost levels,
/// numbers at the band edges (always including zero), the label wrapped.
pub(crate) struct ColourBar<'a> {
    pub levels: &'a [f64],
    pub colours: &'a [RGBAColor],
    pub label: &'a str,
    pub over: bool,
    pub under: bool,
}

impl ColourBar<'_> {
    /// The width the bar, its numbers and its wrapped label take beside a chart.
    pub(crate) fn width<DB: DrawingBackend>(&self, p: &Painter<'_, DB>, height: f64) -> f64 {
        if self.colours.is_empty() {
            return p.px(14.0);
        }
        let step = level_step(self.levels);
        let widest = self
            .levels
            .iter()
            .map(|l| p.text_extent(&format_value(*l, step), TICK_SIZE).0)
            .fold(0.0, f64::max);
        let lines = p.wrap_text(self.label, LABEL_SIZE, height).len().max(1) as f64;
        p.px(14.0 + 16.0 + 6.0) + widest + lines * (p.text_extent("0", LABEL_SIZE).1 + p.px(2.0)) + p.px(10.0)
    }

    /// Draw the bar in `bar` (the coloured strip), numbers and label to its right.
    pub(crate) fn draw<DB: DrawingBackend>(&self, p: &Painter<'_, DB>, bar: Rect) -> Result<(), RenderError> {
    let s = self;
    let n = s.colours.len();
    if n == 0 {
        return Ok(());
    }
    let ext = p.px(10.0);
    let top = bar.top + if s.over { ext } else { 0.0 };
    let bottom = bar.bottom - if s.under { ext } else { 0.0 };
    let box_h = (bottom - top) / n as f64;
    for (i, c) in s.colours.iter().enumerate() {
        let y1 = bottom - i as f64 * box_h;
        let y0 = y1 - box_h;
        p.fill_rect(Rect::new(bar.left, y0, bar.right, y1), *c)?;
    }
    // Pointed ends for values beyond the outermost levels.
    if s.over {
        let tri = [
            (bar.left, top),
            (bar.right, top),
            ((bar.left + bar.right) / 2.0, bar.top),
        ];
        p.polygon(&tri, s.colours[n - 1])?;
        p.polyline(&[tri[0], tri[2], tri[1]], BLACK_INK.rgba(), 1.0)?;
    }
    if s.under {
        let tri = [
            (bar.left, bottom),
            (bar.right, bottom),
            ((bar.left + bar.right) / 2.0, bar.bottom),
        ];
        p.polygon(&tri, s.colours[0])?;
        p.polyline(&[tri[0], tri[2], tri[1]], BLACK_INK.rgba(), 1.0)?;
    }
    p.stroke_rect(
        Rect::new(bar.left, top, bar.right, bottom),
        BLACK_INK.rgba(),
        1.0,
    )?;
    let step = level_step(s.levels);
    let label_h = p.text_extent("0", TICK_SIZE).1 + p.px(2.0);
    let every = ((label_h / box_h).ceil() as usize).max(1);
    let mut widest: f64 = 0.0;
    for (i, level) in s.levels.iter().enumerate() {
        let y = bottom - i as f64 * box_h;
        p.line(
            (bar.right, y),
            (bar.right + p.px(3.0), y),
            BLACK_INK.rgba(),
            1.0,
        )?;
        // Label every `every`-th level, always including zero for signed fields.
        let zero_index = s.levels.iter().position(|l| *l == 0.0);
        let anchor = zero_index.unwrap_or(0);
        if (i as i64 - anchor as i64).rem_euclid(every as i64) == 0 {
            let text = format_value(*level, step);
            widest = widest.max(p.text_extent(&text, TICK_SIZE).0);
            p.text(
                &text,
                (bar.right + p.px(5.0), y),
                TICK_SIZE,
                BLACK_INK.rgba(),
                Anchor::CentreLeft,
            )?;
        }
    }
    // The label is wrapped, never cut: one vertical line per piece.
    let line_h = p.text_extent("0", LABEL_SIZE).1 + p.px(2.0);
    let name_x = bar.right + p.px(10.0) + widest + line_h / 2.0;
    for (i, text) in p.wrap_text(s.label, LABEL_SIZE, bar.height()).iter().enumerate() {
        p.vertical_text(
            text,
            (name_x + i as f64 * line_h, (bar.top + bar.bottom) / 2.0),
            LABEL_SIZE,
            BLACK_INK.rgba(),
        )?;
    }
    Ok(())
    }
}


/// A value axis mapped onto a pixel interval.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Axis {
    /// Value at `start_px`.
    pub from: f64,
    /// Value at `end_px`.
    pub to: f64,
    pub start_px: f64,
    pub end_px: f64,
    /// Logarithmic (for pressure): the position is linear in ln(value).
    pub log: bool,
}

impl Axis {
    /// A linear axis along the chart's width, `from` at the left edge.
    pub fn across(rect: Rect, from: f64, to: f64) -> Axis {
        Axis { from, to, start_px: rect.left, end_px: rect.right, log: false }
    }

    /// A linear axis up the chart's height, `from` at the bottom edge.
    pub fn up(rect: Rect, from: f64, to: f64) -> Axis {
        Axis { from, to, start_px: rect.bottom, end_px: rect.top, log: false }
    }

    /// A pressure axis up the chart, logarithmic, the bottom pressure at the
    /// bottom edge (pressure increases downward, as the atmosphere stands).
    pub fn pressure(rect: Rect, bottom: f64, top: f64) -> Axis {
        Axis { from: bottom, to: top, start_px: rect.bottom, end_px: rect.top, log: true }
    }

    pub fn position(self, v: f64) -> f64 {
        let (a, b, x) = if self.log {
            (self.from.ln(), self.to.ln(), v.ln())
        } else {
            (self.from, self.to, v)
        };
        if b == a {
            return 0.5 * (self.start_px + self.end_px);
        }
        self.start_px + (x - a) / (b - a) * (self.end_px - self.start_px)
    }
}

#[derive(Debug, Clone)]
pub(crate) struct Tick {
    pub value: f64,
    pub label: String,
}

/// Nice linear ticks over [lo, hi].
pub(crate) fn linear_ticks(lo: f64, hi: f64, target: usize) -> Vec<Tick> {
    let (lo, hi) = if lo <= hi { (lo, hi) } else { (hi, lo) };
    let step = nice_step(hi - lo, target);
    multiples_within(lo, hi, step)
        .into_iter()
        .map(|v| Tick {
            value: v,
            label: format_value(v, step),
        })
        .collect()
}

/// Extend [lo, hi] outward to nice tick values, with a little padding when
/// the data touch the ends.
pub(crate) fn nice_range(lo: f64, hi: f64, target: usize) -> (f64, f64) {
    if !(lo.is_finite() && hi.is_finite()) {
        return (0.0, 1.0);
    }
    let (lo, hi) = if hi > lo {
        (lo, hi)
    } else {
        let pad = if lo == 0.0 { 1.0 } else { lo.abs() * 0.1 };
        (lo - pad, hi + pad)
    };
    let step = nice_step(hi - lo, target);
    ((lo / step).floor() * step, (hi / step).ceil() * step)
}

/// Pressure ticks (hPa) for a log axis between two pressures in hPa.
pub(crate) fn pressure_ticks(p_a: f64, p_b: f64) -> Vec<Tick> {
    let (lo, hi) = if p_a < p_b { (p_a, p_b) } else { (p_b, p_a) };
    const LEVELS: [f64; 19] = [
        1050.0, 1000.0, 925.0, 850.0, 700.0, 600.0, 500.0, 400.0, 300.0, 250.0, 200.0, 150.0,
        100.0, 70.0, 50.0, 30.0, 20.0, 10.0, 5.0,
    ];
    LEVELS
        .iter()
        .copied()
        .filter(|&p| p >= lo * (1.0 - 1e-9) && p <= hi * (1.0 + 1e-9))
        .map(|p| Tick {
            value: p,
            label: format!("{p}"),
        })
        .collect()
}

/// Keep ticks whose labels do not crowd: at least `min_gap` device pixels apart.
pub(crate) fn thin_ticks(ticks: Vec<Tick>, axis: &Axis, min_gap: f64) -> Vec<Tick> {
    let mut out: Vec<Tick> = Vec::new();
    let mut last: Option<f64> = None;
    for t in ticks {
        let pos = axis.position(t.value);
        if last.is_none_or(|l| (pos - l).abs() >= min_gap) {
            last = Some(pos);
            out.push(t);
        }
    }
    out
}

/// Frame, grid lines, ticks, tick labels and axis titles of a chart.
#[allow(clippy::too_many_arguments)]
pub(crate) fn draw_axes<DB: DrawingBackend>(
    p: &Painter<'_, DB>,
    rect: Rect,
    x_axis: &Axis,
    y_axis: &Axis,
    x_ticks: &[Tick],
    y_ticks: &[Tick],
    x_title: &str,
    y_title: &str,
    grid: bool,
) -> Result<(), RenderError> {
    let grid_colour = RGBAColor(0, 0, 0, 0.12);
    let tick = p.px(4.0);
    for t in x_ticks {
        let x = x_axis.position(t.value);
        if grid {
            p.line((x, rect.top), (x, rect.bottom), grid_colour, 1.0)?;
        }
        p.line(
            (x, rect.bottom),
            (x, rect.bottom + tick),
            BLACK_INK.rgba(),
            1.0,
        )?;
        p.text(
            &t.label,
            (x, rect.bottom + tick + p.px(2.0)),
            TICK_SIZE,
            BLACK_INK.rgba(),
            Anchor::TopCentre,
        )?;
    }
    let mut widest: f64 = 0.0;
    for t in y_ticks {
        let y = y_axis.position(t.value);
        if grid {
            p.line((rect.left, y), (rect.right, y), grid_colour, 1.0)?;
        }
        p.line((rect.left - tick, y), (rect.left, y), BLACK_INK.rgba(), 1.0)?;
        p.text(
            &t.label,
            (rect.left - tick - p.px(3.0), y),
            TICK_SIZE,
            BLACK_INK.rgba(),
            Anchor::CentreRight,
        )?;
        widest = widest.max(p.text_extent(&t.label, TICK_SIZE).0);
    }
    p.stroke_rect(rect, BLACK_INK.rgba(), 1.0)?;
    if !x_title.is_empty() {
        let y = rect.bottom + tick + p.px(4.0) + p.text_extent("0", TICK_SIZE).1;
        p.text(
            x_title,
            ((rect.left + rect.right) / 2.0, y),
            LABEL_SIZE,
            BLACK_INK.rgba(),
            Anchor::TopCentre,
        )?;
    }
    if !y_title.is_empty() {
        let x = rect.left - tick - p.px(8.0) - widest - p.text_extent("0", LABEL_SIZE).1 / 2.0;
        p.vertical_text(
            y_title,
            (x, (rect.top + rect.bottom) / 2.0),
            LABEL_SIZE,
            BLACK_INK.rgba(),
        )?;
    }
    Ok(())
}

/// Space needed left of a chart for y tick labels and the y title.
pub(crate) fn left_margin<DB: DrawingBackend>(
    p: &Painter<'_, DB>,
    y_ticks: &[Tick],
    has_title: bool,
) -> f64 {
    let widest = y_ticks
        .iter()
        .map(|t| p.text_extent(&t.label, TICK_SIZE).0)
        .fold(0.0, f64::max);
    let title = if has_title {
        p.text_extent("0", LABEL_SIZE).1 + p.px(8.0)
    } else {
        0.0
    };
    p.px(14.0) + widest + title
}

/// Space needed below a chart for x tick labels and the x title.
pub(crate) fn bottom_margin<DB: DrawingBackend>(p: &Painter<'_, DB>, has_title: bool) -> f64 {
    let tick = p.text_extent("0", TICK_SIZE).1;
    let title = if has_title {
        p.text_extent("0", LABEL_SIZE).1 + p.px(4.0)
    } else {
        0.0
    };
    p.px(10.0) + tick + title
}

/// How a legend entry is drawn.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) enum Swatch {
    Line { dashed: bool },
}

/// A legend box in the top-right corner inside the chart.
pub(crate) fn draw_legend<DB: DrawingBackend>(
    p: &Painter<'_, DB>,
    rect: Rect,
    entries: &[(String, RGBAColor, Swatch)],
    corner_left: bool,
) -> Result<(), RenderError> {
    if entries.is_empty() {
        return Ok(());
    }
    let line_h = p.text_extent("Ag", SMALL_SIZE).1 + p.px(4.0);
    let swatch_w = p.px(22.0);
    let text_w = entries
        .iter()
        .map(|e| p.text_extent(&e.0, SMALL_SIZE).0)
        .fold(0.0, f64::max);
    let w = swatch_w + text_w + p.px(16.0);
    let h = entries.len() as f64 * line_h + p.px(6.0);
    let left = if corner_left {
        rect.left + p.px(8.0)
    } else {
        rect.right - w - p.px(8.0)
    };
    let top = rect.top + p.px(8.0);
    let boxed = Rect::new(left, top, left + w, top + h);
    p.fill_rect(boxed, RGBAColor(255, 255, 255, 0.88))?;
    p.stroke_rect(boxed, RGBAColor(0, 0, 0, 0.35), 1.0)?;
    for (i, (name, colour, swatch)) in entries.iter().enumerate() {
        let y = top + p.px(3.0) + (i as f64 + 0.5) * line_h;
        let x0 = left + p.px(5.0);
        match swatch {
            Swatch::Line { dashed } => {
                let pts = [(x0, y), (x0 + swatch_w - p.px(4.0), y)];
                if *dashed {
                    for run in dashes(&pts, p.px(5.0), p.px(3.0)) {
                        p.polyline(&run, *colour, 2.0)?;
                    }
                } else {
                    p.polyline(&pts, *colour, 2.0)?;
                }
            }
        }
        p.text(
            name,
            (x0 + swatch_w + p.px(2.0), y),
            SMALL_SIZE,
            BLACK_INK.rgba(),
            Anchor::CentreLeft,
        )?;
    }
    Ok(())
}

/// Cut a polyline into dashes of `on` pixels separated by `off` pixels.
pub(crate) fn dashes(points: &[Pt], on: f64, off: f64) -> Vec<Vec<Pt>> {
    let mut out = Vec::new();
    let mut current: Vec<Pt> = Vec::new();
    let mut drawing = true;
    let mut left = on;
    for w in points.windows(2) {
        let (mut a, b) = (w[0], w[1]);
        let mut seg = ((b.0 - a.0).powi(2) + (b.1 - a.1).powi(2)).sqrt();
        if drawing && current.is_empty() {
            current.push(a);
        }
        while seg > left {
            let t = left / seg;
            let c = (a.0 + t * (b.0 - a.0), a.1 + t * (b.1 - a.1));
            if drawing {
                current.push(c);
                out.push(std::mem::take(&mut current));
            } else {
                current.push(c);
            }
            drawing = !drawing;
            seg -= left;
            left = if drawing { on } else { off };
            a = c;
        }
        left -= seg;
        if drawing {
            current.push(b);
        } else {
            current.clear();
        }
    }
    if drawing && current.len() > 1 {
        out.push(current);
    }
    out
}

/// Choose where to write a contour value along a line: every ~240 CSS
/// pixels of length, on fairly straight stretches, inside the map and clear
/// of labels already placed.
pub(crate) fn label_positions<DB: DrawingBackend>(
    p: &Painter<'_, DB>,
    pts: &[Pt],
    text: &str,
    rect: Rect,
    occupied: &mut Vec<Rect>,
    stagger: usize,
) -> Vec<Pt> {
    let mut out = Vec::new();
    let total: f64 = pts
        .windows(2)
        .map(|w| ((w[1].0 - w[0].0).powi(2) + (w[1].1 - w[0].1).powi(2)).sqrt())
        .sum();
    let min_length = p.px(70.0);
    if total < min_length {
        return out;
    }
    let every = p.px(240.0);
    // Stagger neighbouring levels so their labels do not line up.
    let mut next = p.px(40.0) + (stagger % 4) as f64 * p.px(55.0);
    if next > total * 0.6 {
        next = total * 0.5;
    }
    let mut walked = 0.0;
    let inner = rect.inflate(-p.px(4.0));
    for w in pts.windows(2) {
        let seg = ((w[1].0 - w[0].0).powi(2) + (w[1].1 - w[0].1).powi(2)).sqrt();
        while walked + seg >= next {
            let t = (next - walked) / seg.max(1e-9);
            let at = (
                w[0].0 + t * (w[1].0 - w[0].0),
                w[0].1 + t * (w[1].1 - w[0].1),
            );
            let b = p
                .text_box(text, at, SMALL_SIZE, Anchor::Centre)
                .inflate(p.px(3.0));
            let inside = inner.contains((b.left, b.top)) && inner.contains((b.right, b.bottom));
            if inside && !occupied.iter().any(|o| o.overlaps(&b)) {
                occupied.push(b);
                out.push(at);
                next += every;
            } else {
                // Try again a little further along.
                next += p.px(25.0);
            }
        }
        walked += seg;
    }
    out
}
