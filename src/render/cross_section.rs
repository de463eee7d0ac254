//! Cross-sections: a field on pressure levels along a line, shaded against
//! distance (km) and pressure on a logarithmic axis increasing downward,
//! optionally with contour lines of the wind normal to the section (positive
//! solid, negative dashed: into and out of the section).

use ndarray::ArrayView2;
use plotters::prelude::*;

use super::colour::{
    format_value, level_step, line_levels, plan_shading, Levels, Palette, ShadingPlan, ToRgba,
};
use super::contouring::{FilledContours, GridField, Isolines};
use super::frame::{self, Axis, TICK_SIZE};
use super::painter::{Anchor, Painter, Pt, Rect, BLACK_INK};
use super::{bundle_of, Drawable, FigureSize, RenderError};
use crate::mime::MimeBundle;

#[derive(Debug, Clone)]
pub struct CrossSectionSpec<'a> {
    pub title: String,
    pub subtitle: String,
    /// Distance along the section, km, increasing.
    pub distance_km: &'a [f64],
    /// Pressure of each level, Pa (either order).
    pub pressures: &'a [f64],
    /// The shaded field, shape [level, distance], NaN = missing (e.g. below ground).
    pub values: ArrayView2<'a, f32>,
    pub name: String,
    pub units: String,
    pub levels: Levels,
    pub palette: Option<Palette>,
    /// Wind normal to the section (m/s), [level, distance], drawn as lines.
    pub normal_wind: Option<ArrayView2<'a, f32>>,
    /// Interval of the normal-wind lines, m/s.
    pub normal_wind_every: f64,
    /// Names of the section's ends, shown under the axis.
    pub start_label: String,
    pub end_label: String,
    pub caption: String,
}

impl<'a> CrossSectionSpec<'a> {
    pub fn new(
        title: impl Into<String>,
        distance_km: &'a [f64],
        pressures: &'a [f64],
        values: ArrayView2<'a, f32>,
        name: impl Into<String>,
        units: impl Into<String>,
    ) -> Self {
        CrossSectionSpec {
            title: title.into(),
            subtitle: String::new(),
            distance_km,
            pressures,
            values,
            name: name.into(),
            units: units.into(),
            levels: Levels::Auto,
            palette: None,
            normal_wind: None,
            normal_wind_every: 5.0,
            start_label: String::new(),
            end_label: String::new(),
            caption: String::new(),
        }
    }
}

pub fn render_cross_section(
    spec: &CrossSectionSpec<'_>,
    size: &FigureSize,
) -> Result<MimeBundle, RenderError> {
    let prepared = PreparedCrossSection::new(spec)?;
    bundle_of(&prepared, size)
}

pub(crate) struct PreparedCrossSection {
    title: String,
    subtitle: String,
    label: String,
    x_range: (f64, f64),
    /// Pressures (hPa) at the bottom and the top.
    p_bottom: f64,
    p_top: f64,
    levels: Vec<f64>,
    colours: Vec<RGBAColor>,
    filled: FilledContours,
    wind: Vec<Isolines>,
    wind_step: f64,
    start_label: String,
    end_label: String,
    caption: String,
    description: String,
}

/// Field [level, distance] as row-major f64 with rows ordered by -ln(p)
/// increasing (bottom level first), and those y coordinates.
fn arrange(
    values: &ArrayView2<'_, f32>,
    order: &[usize],
    what: &str,
    shape: (usize, usize),
) -> Result<Vec<f64>, RenderError> {
    if values.dim() != shape {
        return Err(RenderError::input(
            what,
            format!("has shape {:?} but the section has {} levels and {} points; arrays are [level, distance]", values.dim(), shape.0, shape.1),
        ));
    }
    let mut out = Vec::with_capacity(shape.0 * shape.1);
    for &row in order {
        out.extend(values.row(row).iter().map(|&v| v as f64));
    }
    Ok(out)
}

impl PreparedCrossSection {
    pub(crate) fn new(spec: &CrossSectionSpec<'_>) -> Result<Self, RenderError> {
        let (nl, nd) = (spec.pressures.len(), spec.distance_km.len());
        if spec.pressures.iter().any(|p| !(p.is_finite() && *p > 0.0)) {
            return Err(RenderError::input(
                "cross-section pressures",
                "must be positive numbers in Pa",
            ));
        }
        let mut order: Vec<usize> = (0..nl).collect();
        order.sort_by(|&a, &b| spec.pressures[b].total_cmp(&spec.pressures[a]));
        let y: Vec<f64> = order
            .iter()
            .map(|&i| -(spec.pressures[i] / 100.0).ln())
            .collect();
        let values = arrange(
            &spec.values,
            &order,
            &format!("cross-section field '{}'", spec.name),
            (nl, nd),
        )?;
        let field = GridField::new(&values, spec.distance_km, &y)?;
        let range = field.range();
        let (levels, colours, filled, summary) = match range {
            Some((lo, hi)) => {
                let ShadingPlan { levels, colours, .. } =
                    plan_shading(&spec.levels, lo, hi, spec.palette, None);
                let filled = field.filled(&levels)?;
                let step = level_step(&levels);
                (
                    levels,
                    colours,
                    filled,
                    format!(
                        "{} from {} to {} {}",
                        spec.name,
                        format_value(lo, step / 10.0),
                        format_value(hi, step / 10.0),
                        spec.units
                    ),
                )
            }
            None => (
                Vec::new(),
                Vec::new(),
                field.filled(&[])?,
                format!("{} (all missing)", spec.name),
            ),
        };
        let (wind, wind_step) = match &spec.normal_wind {
            Some(w) => {
                let wv = arrange(w, &order, "normal wind", (nl, nd))?;
                let wf = GridField::new(&wv, spec.distance_km, &y)?;
                let step = if spec.normal_wind_every.is_finite() && spec.normal_wind_every > 0.0 {
                    spec.normal_wind_every
                } else {
                    5.0
                };
                match wf.range() {
                    Some((lo, hi)) => (
                        wf.isolines(&line_levels(&Levels::Interval(step), lo, hi))?,
                        step,
                    ),
                    None => (Vec::new(), step),
                }
            }
            None => (Vec::new(), 0.0),
        };
        let p_max = spec.pressures.iter().fold(0.0f64, |a, &b| a.max(b)) / 100.0;
        let p_min = spec.pressures.iter().fold(f64::INFINITY, |a, &b| a.min(b)) / 100.0;
        let description = format!(
            "Cross-section \"{}\": {} over {} km, {} to {} hPa{}.",
            spec.title,
            summary,
            format_value(spec.distance_km[nd - 1] - spec.distance_km[0], 1.0),
            format_value(p_max, 1.0),
            format_value(p_min, 1.0),
            if spec.normal_wind.is_some() {
                format!(
                    "; normal wind every {} m s-1",
                    format_value(wind_step, wind_step)
                )
            } else {
                String::new()
            }
        );
        Ok(PreparedCrossSection {
            title: spec.title.clone(),
            subtitle: spec.subtitle.clone(),
            label: if spec.units.is_empty() {
                spec.name.clone()
            } else {
                format!("{} ({})", spec.name, spec.units)
            },
            x_range: (spec.distance_km[0], spec.distance_km[nd - 1]),
            p_bottom: p_max,
            p_top: p_min,
            levels,
            colours,
            filled,
            wind,
            wind_step,
            start_label: spec.start_label.clone(),
            end_label: spec.end_label.clone(),
            caption: spec.caption.clone(),
            description,
        })
    }
}

impl Drawable for PreparedCrossSection {
    fn describe(&self) -> String {
        self.description.clone()
    }

    fn draw<DB: DrawingBackend>(&self, p: &Painter<'_, DB>) -> Result<(), RenderError> {
        let (w, h) = p.size();
        let top = frame::draw_title(p, &self.title, &self.subtitle)?;
        let (caption_lines, caption_h) = frame::caption_height(p, &self.caption);
        let y_ticks_all = frame::pressure_ticks(self.p_top, self.p_bottom);
        let left = frame::left_margin(p, &y_ticks_all, true);
        let colour_bar = frame::ColourBar {
            levels: &self.levels,
            colours: &self.colours,
            label: &self.label,
            over: false,
            under: false,
        };
        let bar_w = colour_bar.width(p, h * 0.6);
        let ends_h = if self.start_label.is_empty() && self.end_label.is_empty() {
            0.0
        } else {
            p.text_extent("0", TICK_SIZE).1 + p.px(4.0)
        };
        let bottom = h - caption_h - frame::bottom_margin(p, true) - ends_h - p.px(4.0);
        let rect = Rect::new(left, top, w - bar_w, bottom);
        let x_axis = Axis::across(rect, self.x_range.0, self.x_range.1);
        let y_axis = Axis::pressure(rect, self.p_bottom, self.p_top);
        // Grid y is -ln(p in hPa).
        let position =
            |&(d, y): &(f64, f64)| -> Pt { (x_axis.position(d), y_axis.position((-y).exp())) };
        let base = self.colours.first().copied().unwrap_or(WHITE.rgba());
        let regions: Vec<(Vec<Vec<Pt>>, RGBAColor)> = self
            .filled
            .at_least
            .iter()
            .map(|(level, rings)| {
                let index = self
                    .levels
                    .iter()
                    .position(|l| l == level)
                    .unwrap_or(0)
                    .min(self.colours.len().saturating_sub(1));
                (
                    rings
                        .iter()
                        .map(|r| r.iter().map(position).collect())
                        .collect(),
                    self.colours[index],
                )
            })
            .collect();
        let missing: Vec<Vec<Pt>> = self
            .filled
            .missing_area
            .iter()
            .map(|r| r.iter().map(position).collect())
            .collect();
        p.filled_layer(rect, base, &regions, &missing)?;
        let mut occupied = Vec::new();
        for (li, iso) in self.wind.iter().enumerate() {
            let pts_of =
                |line: &Vec<(f64, f64)>| -> Vec<Pt> { line.iter().map(position).collect() };
            for line in &iso.lines {
                let pts = pts_of(line);
                if iso.level < 0.0 {
                    for run in frame::dashes(&pts, p.px(6.0), p.px(4.0)) {
                        p.polyline(&run, BLACK_INK.rgba(), 1.2)?;
                    }
                } else {
                    p.polyline(
                        &pts,
                        BLACK_INK.rgba(),
                        if iso.level == 0.0 { 0.8 } else { 1.2 },
                    )?;
                }
                let text = format_value(iso.level, self.wind_step);
                for at in frame::label_positions(p, &pts, &text, rect, &mut occupied, li) {
                    let b = p
                        .text_box(&text, at, frame::SMALL_SIZE, Anchor::Centre)
                        .inflate(p.px(1.5));
                    p.fill_rect(b, RGBAColor(255, 255, 255, 0.8))?;
                    p.text(
                        &text,
                        at,
                        frame::SMALL_SIZE,
                        BLACK_INK.rgba(),
                        Anchor::Centre,
                    )?;
                }
            }
        }
        let x_ticks = frame::linear_ticks(self.x_range.0, self.x_range.1, 7);
        let y_ticks =
            frame::thin_ticks(y_ticks_all, &y_axis, p.text_extent("0", TICK_SIZE).1 * 1.3);
        frame::draw_axes(
            p,
            rect,
            &x_axis,
            &y_axis,
            &x_ticks,
            &y_ticks,
            "distance along the section (km)",
            "pressure (hPa)",
            false,
        )?;
        let ends_y = bottom + frame::bottom_margin(p, true);
        p.text(
            &self.start_label,
            (rect.left, ends_y),
            TICK_SIZE,
            BLACK_INK.rgba(),
            Anchor::TopLeft,
        )?;
        p.text(
            &self.end_label,
            (rect.right, ends_y),
            TICK_SIZE,
            BLACK_INK.rgba(),
            Anchor::TopRight,
        )?;
        colour_bar.draw(
            p,
            Rect::new(rect.right + p.px(14.0), rect.top, rect.right + p.px(30.0), rect.bottom),
        )?;
        frame::draw_caption(p, &caption_lines, h - caption_h)?;
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::render::test_support::{check_dir, decode_png};
    use ndarray::Array2;

    #[test]
    fn cross_section_renders_with_missing_levels_and_normal_wind() {
        // Invented section across a front: potential temperature rising with
        // height and towards the warm end, a jet core near 300 hPa.
        let distance: Vec<f64> = (0..=40).map(|i| i as f64 * 50.0).collect();
        let pressures: [f64; 10] = [
            100000.0, 92500.0, 85000.0, 70000.0, 60000.0, 50000.0, 40000.0, 30000.0, 25000.0,
            20000.0,
        ];
        let theta = Array2::from_shape_fn((pressures.len(), distance.len()), |(k, i)| {
            let p = pressures[k] / 100.0;
            let warm = 8.0 * (((distance[i] - 1000.0) / 300.0).tanh());
            // theta = T (p0 / p)^kappa with kappa = 0.2857 (field guide) and
            // an invented temperature falling 6.5 K per 100 hPa upward.
            let temperature = 288.0 - 0.065 * (1000.0 - p) - 30.0 * (1.0 - p / 1000.0).powi(2);
            let value = temperature * (1000.0 / p).powf(0.2857) + warm;
            // Below ground at the first points near the surface (an invented ridge).
            if p > 900.0 && i < 4 {
                f32::NAN
            } else {
                value as f32
            }
        });
        let wind = Array2::from_shape_fn((pressures.len(), distance.len()), |(k, i)| {
            let p = pressures[k] / 100.0;
            (45.0
                * (-((p - 300.0) / 180.0).powi(2)).exp()
                * (-((distance[i] - 1000.0) / 500.0).powi(2)).exp()
                - 5.0) as f32
        });
        let mut spec = CrossSectionSpec::new(
            "Section across the Veltmar front (invented)",
            &distance,
            &pressures,
            theta.view(),
            "potential temperature",
            "K",
        );
        spec.normal_wind = Some(wind.view());
        spec.start_label = "Cape Orrin".into();
        spec.end_label = "Hallow Bank".into();
        spec.caption = "Normal wind every 5 m s-1; negative dashed.".into();
        let bundle = render_cross_section(&spec, &FigureSize::new(800, 520)).unwrap();
        roxmltree::Document::parse(bundle.text("image/svg+xml").unwrap()).unwrap();
        let (w, h, _, _) = decode_png(bundle.binary("image/png").unwrap());
        assert_eq!((w, h), (800, 520));
        assert!(
            bundle.plain_text().contains("2000 km"),
            "{}",
            bundle.plain_text()
        );
        assert!(
            bundle.plain_text().contains("1000 to 200 hPa"),
            "{}",
            bundle.plain_text()
        );
        std::fs::write(
            check_dir().join("cross-section.png"),
            bundle.binary("image/png").unwrap(),
        )
        .unwrap();
    }
}
