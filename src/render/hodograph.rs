//! Hodograph at a point: the tips of the wind vectors at successive
//! pressure levels, joined from the lowest level upward. The segment between
//! two levels' tips is that layer's shear vector; for the geostrophic wind it
//! is the layer's thermal wind (V_T = V_g(top) - V_g(bottom), field guide).
//! A trace turning clockwise with height is veering, anticlockwise backing;
//! the caption (passed in) says which and what advection it implies.

use plotters::prelude::*;

use super::colour::{format_value, nice_step, ToRgba};
use super::frame::{self, series_colour, Swatch, SMALL_SIZE, TICK_SIZE};

use super::painter::{clip_polyline, Anchor, Painter, Pt, Rect, BLACK_INK, GREY_INK};
use super::{bundle_of, Drawable, FigureSize, RenderError};
use crate::mime::MimeBundle;

/// The wind at one pressure level.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct HodographPoint {
    /// Pressure in Pa.
    pub pressure: f64,
    /// Eastward component, m/s.
    pub u: f64,
    /// Northward component, m/s.
    pub v: f64,
}

impl HodographPoint {
    pub fn new(pressure: f64, u: f64, v: f64) -> Self {
        HodographPoint { pressure, u, v }
    }
}

/// A hodograph of the geostrophic wind, optionally with the analysed wind.
#[derive(Debug, Clone, Default)]
pub struct HodographSpec {
    pub title: String,
    /// Where the profile is, e.g. "52.0°N 18.0°W" (shown under the title).
    pub location: String,
    pub geostrophic: Vec<HodographPoint>,
    pub analysed: Option<Vec<HodographPoint>>,
    /// Layers (bottom, top pressure in Pa) whose thermal wind is drawn as
    /// an arrow between the two levels' tips; empty draws one arrow per
    /// pair of neighbouring levels.
    pub thermal_layers: Vec<(f64, f64)>,
    /// Text under the figure: veering or backing and the implied advection.
    pub caption: String,
}

pub fn render_hodograph(
    spec: &HodographSpec,
    size: &FigureSize,
) -> Result<MimeBundle, RenderError> {
    let prepared = PreparedHodograph::new(spec)?;
    bundle_of(&prepared, size)
}

pub(crate) struct PreparedHodograph {
    title: String,
    location: String,
    geostrophic: Vec<HodographPoint>,
    analysed: Vec<HodographPoint>,
    layers: Vec<(HodographPoint, HodographPoint)>,
    explicit_layers: bool,
    caption: String,
    description: String,
}

fn checked(points: &[HodographPoint], what: &str) -> Result<Vec<HodographPoint>, RenderError> {
    if points
        .iter()
        .any(|p| !(p.pressure.is_finite() && p.pressure > 0.0))
    {
        return Err(RenderError::input(
            what,
            "pressures must be positive numbers in Pa",
        ));
    }
    // Lowest level (largest pressure) first; missing winds are left out.
    let mut v: Vec<HodographPoint> = points
        .iter()
        .copied()
        .filter(|p| p.u.is_finite() && p.v.is_finite())
        .collect();
    v.sort_by(|a, b| b.pressure.total_cmp(&a.pressure));
    Ok(v)
}

fn hpa(pa: f64) -> String {
    format_value(
        pa / 100.0,
        if (pa / 100.0).fract().abs() < 1e-9 {
            1.0
        } else {
            0.1
        },
    )
}

impl PreparedHodograph {
    pub(crate) fn new(spec: &HodographSpec) -> Result<Self, RenderError> {
        let geostrophic = checked(&spec.geostrophic, "geostrophic wind")?;
        if geostrophic.is_empty() {
            return Err(RenderError::input(
                "geostrophic wind",
                "needs at least one level with a wind",
            ));
        }
        let analysed = match &spec.analysed {
            Some(a) => checked(a, "analysed wind")?,
            None => Vec::new(),
        };
        let find = |p: f64| {
            geostrophic
                .iter()
                .find(|g| (g.pressure - p).abs() < 1.0)
                .copied()
        };
        let explicit_layers = !spec.thermal_layers.is_empty();
        let mut layers = Vec::new();
        if explicit_layers {
            for &(bottom, top) in &spec.thermal_layers {
                match (find(bottom), find(top)) {
                    (Some(b), Some(t)) => layers.push((b, t)),
                    _ => {
                        return Err(RenderError::input(
                            "thermal-wind layer",
                            format!(
                                "{}-{} hPa: both ends must be levels of the geostrophic wind ({})",
                                hpa(bottom),
                                hpa(top),
                                geostrophic
                                    .iter()
                                    .map(|g| hpa(g.pressure))
                                    .collect::<Vec<_>>()
                                    .join(", ")
                            ),
                        ))
                    }
                }
            }
        } else {
            for w in geostrophic.windows(2) {
                layers.push((w[0], w[1]));
            }
        }
        let bottom = geostrophic[0];
        let top = geostrophic[geostrophic.len() - 1];
        let shear = ((top.u - bottom.u).powi(2) + (top.v - bottom.v).powi(2)).sqrt();
        let description = format!(
            "Hodograph \"{}\"{}: geostrophic wind at {} levels from {} to {} hPa, {}-{} hPa shear {} m s-1{}.",
            spec.title,
            if spec.location.is_empty() { String::new() } else { format!(" at {}", spec.location) },
            geostrophic.len(),
            hpa(bottom.pressure),
            hpa(top.pressure),
            hpa(bottom.pressure),
            hpa(top.pressure),
            format_value(shear, 0.1),
            if analysed.is_empty() { String::new() } else { format!("; analysed wind at {} levels", analysed.len()) }
        );
        Ok(PreparedHodograph {
            title: spec.title.clone(),
            location: spec.location.clone(),
            geostrophic,
            analysed,
            layers,
            explicit_layers,
            caption: spec.caption.clone(),
            description,
        })
    }
}

impl Drawable for PreparedHodograph {
    fn describe(&self) -> String {
        self.description.clone()
    }

    fn draw<DB: DrawingBackend>(&self, p: &Painter<'_, DB>) -> Result<(), RenderError> {
        let (w, h) = p.size();
        let top = frame::draw_title(p, &self.title, &self.location)?;
        let (caption_lines, caption_h) = frame::caption_height(p, &self.caption);
        let tick_h = p.text_extent("0", TICK_SIZE).1;
        let margin_bottom = caption_h + tick_h * 2.0 + p.px(18.0);
        let avail = Rect::new(p.px(64.0), top, w - p.px(20.0), h - margin_bottom);
        if avail.width() < p.px(40.0) || avail.height() < p.px(40.0) {
            return Err(RenderError::Size(
                "the figure is too small for a hodograph; make it at least 240 x 240 px".into(),
            ));
        }
        // The box of all wind tips and the origin, padded, then widened in
        // one direction so that both axes have the same scale (equal aspect).
        let mut u_lo: f64 = 0.0;
        let mut u_hi: f64 = 0.0;
        let mut v_lo: f64 = 0.0;
        let mut v_hi: f64 = 0.0;
        for q in self.geostrophic.iter().chain(&self.analysed) {
            u_lo = u_lo.min(q.u);
            u_hi = u_hi.max(q.u);
            v_lo = v_lo.min(q.v);
            v_hi = v_hi.max(q.v);
        }
        let span = (u_hi - u_lo).max(v_hi - v_lo).max(2.0);
        let pad = 0.12 * span;
        let (u_lo, u_hi, v_lo, v_hi) = (u_lo - pad, u_hi + pad, v_lo - pad, v_hi + pad);
        let per_unit = (avail.width() / (u_hi - u_lo)).min(avail.height() / (v_hi - v_lo));
        let (extra_u, extra_v) = (
            avail.width() / per_unit - (u_hi - u_lo),
            avail.height() / per_unit - (v_hi - v_lo),
        );
        let (u_lo, u_hi) = (u_lo - extra_u / 2.0, u_hi + extra_u / 2.0);
        let (v_lo, v_hi) = (v_lo - extra_v / 2.0, v_hi + extra_v / 2.0);
        let rect = avail;
        let position = |u: f64, v: f64| -> Pt {
            (
                rect.left + (u - u_lo) * per_unit,
                rect.bottom - (v - v_lo) * per_unit,
            )
        };
        let centre = position(0.0, 0.0);

        p.fill_rect(rect, WHITE.rgba())?;
        let grid = RGBAColor(0, 0, 0, 0.18);
        // Rings of speed about the origin, labelled on the diagonal farthest
        // from the mean wind so that labels stay clear of the trace.
        let far = [(u_lo, v_lo), (u_lo, v_hi), (u_hi, v_lo), (u_hi, v_hi)]
            .into_iter()
            .fold(0.0f64, |a, (u, v)| a.max((u * u + v * v).sqrt()));
        let ring_step = nice_step(far, 8);
        let (mean_u, mean_v) = {
            let n = self.geostrophic.len() as f64;
            (
                self.geostrophic.iter().map(|q| q.u).sum::<f64>() / n,
                self.geostrophic.iter().map(|q| q.v).sum::<f64>() / n,
            )
        };
        // Directions to try for ring labels, farthest from the mean wind first.
        let mut label_dirs: Vec<(f64, f64)> = (0..16)
            .map(|k| {
                let t = (k as f64 + 0.5) / 16.0 * std::f64::consts::TAU;
                (t.cos(), t.sin())
            })
            .collect();
        label_dirs.sort_by(|a, b| {
            (a.0 * mean_u + a.1 * mean_v).total_cmp(&(b.0 * mean_u + b.1 * mean_v))
        });
        let mut r = ring_step;
        while r <= far + 1e-9 {
            let steps = 180;
            let circle: Vec<Pt> = (0..=steps)
                .map(|i| {
                    let t = i as f64 / steps as f64 * std::f64::consts::TAU;
                    position(r * t.cos(), r * t.sin())
                })
                .collect();
            for run in clip_polyline(&circle, &rect) {
                p.polyline(&run, grid, 1.0)?;
            }
            let text = format!("{} m s-1", format_value(r, ring_step));
            for dir in &label_dirs {
                let at = position(r * dir.0, r * dir.1);
                let b = p.text_box(&text, at, SMALL_SIZE, Anchor::Centre);
                if rect.inflate(-p.px(4.0)).contains((b.left, b.top))
                    && rect.inflate(-p.px(4.0)).contains((b.right, b.bottom))
                {
                    p.fill_rect(b, RGBAColor(255, 255, 255, 0.85))?;
                    p.text(&text, at, SMALL_SIZE, GREY_INK.rgba(), Anchor::Centre)?;
                    break;
                }
            }
            r += ring_step;
        }
        p.line(
            (rect.left, centre.1),
            (rect.right, centre.1),
            RGBAColor(0, 0, 0, 0.45),
            1.0,
        )?;
        p.line(
            (centre.0, rect.top),
            (centre.0, rect.bottom),
            RGBAColor(0, 0, 0, 0.45),
            1.0,
        )?;
        let x_axis = frame::Axis::across(rect, u_lo, u_hi);
        let y_axis = frame::Axis::up(rect, v_lo, v_hi);
        let x_ticks = frame::linear_ticks(u_lo, u_hi, 8);
        let y_ticks = frame::linear_ticks(v_lo, v_hi, 8);
        frame::draw_axes(
            p,
            rect,
            &x_axis,
            &y_axis,
            &x_ticks,
            &y_ticks,
            "u, eastward (m s-1)",
            "v, northward (m s-1)",
            false,
        )?;

        let geo_colour = series_colour(0);
        let thermal_colour = series_colour(1);
        let analysed_colour = series_colour(2);

        if !self.analysed.is_empty() {
            let pts: Vec<Pt> = self.analysed.iter().map(|q| position(q.u, q.v)).collect();
            for run in frame::dashes(&pts, p.px(6.0), p.px(4.0)) {
                p.polyline(&run, analysed_colour, 1.5)?;
            }
            for q in &pts {
                let s = p.px(3.0);
                p.fill_rect(
                    Rect::new(q.0 - s, q.1 - s, q.0 + s, q.1 + s),
                    analysed_colour,
                )?;
            }
        }
        let pts: Vec<Pt> = self
            .geostrophic
            .iter()
            .map(|q| position(q.u, q.v))
            .collect();
        // The trace is wide and pale enough that the thermal-wind arrows
        // drawn along it on top stay distinct.
        p.polyline(
            &pts,
            RGBAColor(geo_colour.0, geo_colour.1, geo_colour.2, 0.55),
            4.0,
        )?;
        // Thermal wind of each layer: an arrow from the bottom tip to the top tip.
        for (b, t) in &self.layers {
            let a = position(b.u, b.v);
            let z = position(t.u, t.v);
            draw_arrow(p, a, z, thermal_colour, 1.4)?;
            if self.explicit_layers {
                let mid = ((a.0 + z.0) / 2.0, (a.1 + z.1) / 2.0);
                let text = format!("{}-{} hPa", hpa(b.pressure), hpa(t.pressure));
                p.text(
                    &text,
                    (mid.0 + p.px(6.0), mid.1),
                    SMALL_SIZE,
                    thermal_colour,
                    Anchor::CentreLeft,
                )?;
            }
        }
        // Points labelled by pressure, offset away from the trace.
        let mut placed: Vec<Rect> = Vec::new();
        for (i, q) in self.geostrophic.iter().enumerate() {
            let at = pts[i];
            p.circle(at, 3.5, geo_colour, true, 1.0)?;
            let prev = if i > 0 { pts[i - 1] } else { at };
            let next = if i + 1 < pts.len() { pts[i + 1] } else { at };
            // Perpendicular to the local direction of the trace.
            let (dx, dy) = (next.0 - prev.0, next.1 - prev.1);
            let len = (dx * dx + dy * dy).sqrt();
            let (nx, ny) = if len > 0.0 {
                (dy / len, -dx / len)
            } else {
                (
                    std::f64::consts::FRAC_1_SQRT_2,
                    -std::f64::consts::FRAC_1_SQRT_2,
                )
            };
            let text = hpa(q.pressure);
            let mut chosen = None;
            for sign in [1.0, -1.0] {
                let offset = p.px(13.0);
                let spot = (at.0 + sign * nx * offset, at.1 + sign * ny * offset);
                let b = p.text_box(&text, spot, SMALL_SIZE, Anchor::Centre);
                if !placed.iter().any(|o| o.overlaps(&b)) {
                    chosen = Some((spot, b));
                    break;
                }
            }
            if let Some((spot, b)) = chosen {
                placed.push(b);
                p.fill_rect(b.inflate(p.px(1.0)), RGBAColor(255, 255, 255, 0.8))?;
                p.text(&text, spot, SMALL_SIZE, BLACK_INK.rgba(), Anchor::Centre)?;
            }
        }
        let mut entries = vec![
            (
                "geostrophic wind (labels: hPa)".to_string(),
                geo_colour,
                Swatch::Line { dashed: false },
            ),
            (
                "thermal wind of each layer".to_string(),
                thermal_colour,
                Swatch::Line { dashed: false },
            ),
        ];
        if !self.analysed.is_empty() {
            entries.push((
                "analysed wind".to_string(),
                analysed_colour,
                Swatch::Line { dashed: true },
            ));
        }
        frame::draw_legend(p, rect, &entries, true)?;
        frame::draw_caption(p, &caption_lines, h - caption_h)?;
        Ok(())
    }
}

/// A line with a filled arrowhead at `to`.
pub(crate) fn draw_arrow<DB: DrawingBackend>(
    p: &Painter<'_, DB>,
    from: Pt,
    to: Pt,
    colour: RGBAColor,
    width: f64,
) -> Result<(), RenderError> {
    let (dx, dy) = (to.0 - from.0, to.1 - from.1);
    let len = (dx * dx + dy * dy).sqrt();
    if len < 1.0 {
        return Ok(());
    }
    let (ux, uy) = (dx / len, dy / len);
    let head = p.px(9.0).min(len * 0.6);
    let base = (to.0 - ux * head, to.1 - uy * head);
    p.line(from, base, colour, width)?;
    let half = head * 0.45;
    p.polygon(
        &[
            to,
            (base.0 - uy * half, base.1 + ux * half),
            (base.0 + uy * half, base.1 - ux * half),
        ],
        colour,
    )
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::render::test_support::{check_dir, decode_png};

    fn veering() -> HodographSpec {
        // Invented profile veering with height (warm advection in the
        // northern hemisphere, field guide).
        HodographSpec {
            title: "Hodograph at Port Lessing (invented)".into(),
            location: "52.0°N 18.0°W, synthetic day 3 12 UTC".into(),
            geostrophic: vec![
                HodographPoint::new(100000.0, 2.0, 8.0),
                HodographPoint::new(85000.0, 8.0, 12.0),
                HodographPoint::new(70000.0, 15.0, 13.0),
                HodographPoint::new(50000.0, 26.0, 10.0),
                HodographPoint::new(30000.0, 38.0, 4.0),
            ],
            analysed: Some(vec![
                HodographPoint::new(100000.0, 0.5, 6.0),
                HodographPoint::new(85000.0, 7.0, 10.5),
                HodographPoint::new(70000.0, 14.0, 12.0),
                HodographPoint::new(50000.0, 25.0, 9.0),
                HodographPoint::new(30000.0, 36.0, 5.0),
            ]),
            thermal_layers: vec![],
            caption: "The geostrophic wind veers (turns clockwise) with height through 1000-300 hPa: warm advection in the layer (northern hemisphere).".into(),
        }
    }

    #[test]
    fn hodograph_renders_and_describes_itself() {
        let bundle = render_hodograph(&veering(), &FigureSize::new(640, 700)).unwrap();
        roxmltree::Document::parse(bundle.text("image/svg+xml").unwrap()).unwrap();
        let (w, h, _, _) = decode_png(bundle.binary("image/png").unwrap());
        assert_eq!((w, h), (640, 700));
        assert!(
            bundle.plain_text().contains("1000 to 300 hPa"),
            "{}",
            bundle.plain_text()
        );
        // Points are labelled in hPa (850), not Pa (85000).
        let svg = bundle.text("image/svg+xml").unwrap();
        assert!(
            svg.contains(">\n850\n</text>") || svg.contains(">850</text>"),
            "no 850 label"
        );
        assert!(!svg.contains("85000"));
        std::fs::write(
            check_dir().join("hodograph.png"),
            bundle.binary("image/png").unwrap(),
        )
        .unwrap();
    }

    #[test]
    fn explicit_layer_must_name_existing_levels() {
        let mut spec = veering();
        spec.thermal_layers = vec![(100000.0, 40000.0)];
        let err = render_hodograph(&spec, &FigureSize::default())
            .unwrap_err()
            .to_string();
        assert!(err.contains("1000-400 hPa") && err.contains("850"), "{err}");
        spec.thermal_layers = vec![(100000.0, 50000.0)];
        let bundle = render_hodograph(&spec, &FigureSize::default()).unwrap();
        assert!(bundle
            .text("image/svg+xml")
            .unwrap()
            .contains("1000-500 hPa"));
    }
}
