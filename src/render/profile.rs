//! Vertical profiles: values against pressure on a logarithmic axis that
//! increases downward (1000 hPa at the bottom), so that height increases
//! upward as in the atmosphere (z is roughly linear in ln p, hypsometric
//! equation, field guide).

use plotters::prelude::*;

use super::colour::ToRgba;
use super::frame::{self, series_colour, Axis, Swatch, TICK_SIZE};
use super::painter::{Painter, Rect};
use super::{bundle_of, Drawable, FigureSize, RenderError};
use crate::mime::MimeBundle;

/// One named profile: values at pressures (Pa).
#[derive(Debug, Clone, Default)]
pub struct ProfileSeries {
    pub name: String,
    pub pressures: Vec<f64>,
    pub values: Vec<f64>,
}

impl ProfileSeries {
    pub fn new(name: impl Into<String>, pressures: Vec<f64>, values: Vec<f64>) -> Self {
        ProfileSeries {
            name: name.into(),
            pressures,
            values,
        }
    }
}

#[derive(Debug, Clone, Default)]
pub struct ProfileSpec {
    pub title: String,
    /// Second line, e.g. the location and time.
    pub subtitle: String,
    /// What the values are, e.g. "temperature".
    pub quantity: String,
    pub units: String,
    pub series: Vec<ProfileSeries>,
    pub caption: String,
}

pub fn render_profile(spec: &ProfileSpec, size: &FigureSize) -> Result<MimeBundle, RenderError> {
    let prepared = PreparedProfile::new(spec)?;
    bundle_of(&prepared, size)
}

pub(crate) struct PreparedProfile {
    spec: ProfileSpec,
    p_bottom: f64,
    p_top: f64,
    x_range: (f64, f64),
    description: String,
}

impl PreparedProfile {
    pub(crate) fn new(spec: &ProfileSpec) -> Result<Self, RenderError> {
        if spec.series.is_empty() {
            return Err(RenderError::input("profile", "needs at least one series"));
        }
        let mut p_min = f64::INFINITY;
        let mut p_max = f64::NEG_INFINITY;
        let mut v_min = f64::INFINITY;
        let mut v_max = f64::NEG_INFINITY;
        for s in &spec.series {
            if s.pressures.len() != s.values.len() {
                return Err(RenderError::input(
                    format!("profile series '{}'", s.name),
                    format!(
                        "has {} pressures but {} values",
                        s.pressures.len(),
                        s.values.len()
                    ),
                ));
            }
            for (&p, &v) in s.pressures.iter().zip(&s.values) {
                if !(p.is_finite() && p > 0.0) {
                    return Err(RenderError::input(
                        format!("profile series '{}'", s.name),
                        "pressures must be positive numbers in Pa",
                    ));
                }
                p_min = p_min.min(p);
                p_max = p_max.max(p);
                if v.is_finite() {
                    v_min = v_min.min(v);
                    v_max = v_max.max(v);
                }
            }
        }
        if !p_min.is_finite() {
            return Err(RenderError::input("profile", "has no levels"));
        }
        // In hPa; the axis spans at least 1000 hPa to the top level.
        let p_bottom = (p_max / 100.0).max(1000.0);
        // A little room above the top level so its point is not on the frame.
        let p_top = (p_min / 100.0 * 0.95).min(p_bottom * 0.5);
        let x_range = if v_min.is_finite() {
            frame::nice_range(v_min, v_max, 6)
        } else {
            (0.0, 1.0)
        };
        let description = format!(
            "Vertical profile \"{}\": {} ({}) of {} from {} to {} hPa.",
            spec.title,
            spec.quantity,
            spec.units,
            spec.series
                .iter()
                .map(|s| s.name.as_str())
                .collect::<Vec<_>>()
                .join(", "),
            p_max / 100.0,
            p_min / 100.0
        );
        Ok(PreparedProfile {
            spec: spec.clone(),
            p_bottom,
            p_top,
            x_range,
            description,
        })
    }
}

impl Drawable for PreparedProfile {
    fn describe(&self) -> String {
        self.description.clone()
    }

    fn draw<DB: DrawingBackend>(&self, p: &Painter<'_, DB>) -> Result<(), RenderError> {
        let (w, h) = p.size();
        let top = frame::draw_title(p, &self.spec.title, &self.spec.subtitle)?;
        let (caption_lines, caption_h) = frame::caption_height(p, &self.spec.caption);
        let y_ticks_all = frame::pressure_ticks(self.p_top, self.p_bottom);
        let left = frame::left_margin(p, &y_ticks_all, true);
        let bottom = h - caption_h - frame::bottom_margin(p, true) - p.px(4.0);
        let rect = Rect::new(left, top, w - p.px(16.0), bottom);
        let x_axis = Axis::across(rect, self.x_range.0, self.x_range.1);
        let y_axis = Axis::pressure(rect, self.p_bottom, self.p_top);
        let x_ticks = frame::linear_ticks(self.x_range.0, self.x_range.1, 6);
        let y_ticks =
            frame::thin_ticks(y_ticks_all, &y_axis, p.text_extent("0", TICK_SIZE).1 * 1.3);
        p.fill_rect(rect, WHITE.rgba())?;
        let x_title = if self.spec.units.is_empty() {
            self.spec.quantity.clone()
        } else {
            format!("{} ({})", self.spec.quantity, self.spec.units)
        };
        frame::draw_axes(
            p,
            rect,
            &x_axis,
            &y_axis,
            &x_ticks,
            &y_ticks,
            &x_title,
            "pressure (hPa)",
            true,
        )?;
        let mut entries = Vec::new();
        for (i, s) in self.spec.series.iter().enumerate() {
            let colour = series_colour(i);
            // Sorted from the bottom up; a missing value breaks the line.
            let mut levels: Vec<(f64, f64)> = s
                .pressures
                .iter()
                .copied()
                .zip(s.values.iter().copied())
                .collect();
            levels.sort_by(|a, b| b.0.total_cmp(&a.0));
            let points = levels.into_iter().map(|(pr, v)| {
                v.is_finite().then(|| (x_axis.position(v), y_axis.position(pr / 100.0)))
            });
            frame::draw_marked_line(p, points, colour)?;
            entries.push((s.name.clone(), colour, Swatch::Line { dashed: false }));
        }
        frame::draw_legend(p, rect, &entries, false)?;
        frame::draw_caption(p, &caption_lines, h - caption_h)?;
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::render::test_support::{check_dir, decode_png};

    #[test]
    fn pressure_axis_is_logarithmic_and_increases_downward() {
        let axis = Axis {
            from: 1000.0,
            to: 100.0,
            start_px: 500.0,
            end_px: 0.0,
            log: true,
        };
        assert!(
            (axis.position(1000.0) - 500.0).abs() < 1e-9,
            "1000 hPa at the bottom"
        );
        assert!((axis.position(100.0) - 0.0).abs() < 1e-9);
        // ln(1000/316.23) = ln(316.23/100): 316.23 hPa halfway up (log axis).
        assert!((axis.position(1000.0 / 10f64.sqrt()) - 250.0).abs() < 1e-6);
        assert!(axis.position(850.0) < axis.position(1000.0));
    }

    #[test]
    fn profile_renders_several_series() {
        // Invented temperatures near the U.S. Standard Atmosphere 1976 (288.15 K
        // at the surface, 6.5 K/km) and a colder profile.
        let pressures = vec![100000.0, 85000.0, 70000.0, 50000.0, 30000.0, 20000.0];
        let spec = ProfileSpec {
            title: "Temperature profiles (invented)".into(),
            subtitle: "warm side and cold side of the zone".into(),
            quantity: "temperature".into(),
            units: "K".into(),
            series: vec![
                ProfileSeries::new(
                    "warm side",
                    pressures.clone(),
                    vec![287.4, 278.0, 269.0, 252.7, 228.5, 216.6],
                ),
                ProfileSeries::new(
                    "cold side",
                    pressures.clone(),
                    vec![276.0, 266.5, f64::NAN, 241.0, 220.0, 214.0],
                ),
            ],
            caption: "A missing value (700 hPa, cold side) breaks its line.".into(),
        };
        let bundle = render_profile(&spec, &FigureSize::new(520, 620)).unwrap();
        roxmltree::Document::parse(bundle.text("image/svg+xml").unwrap()).unwrap();
        let (w, _, _, _) = decode_png(bundle.binary("image/png").unwrap());
        assert_eq!(w, 520);
        assert!(bundle.plain_text().contains("warm side, cold side"));
        std::fs::write(
            check_dir().join("profile.png"),
            bundle.binary("image/png").unwrap(),
        )
        .unwrap();
        let bad = ProfileSpec {
            series: vec![ProfileSeries::new("x", vec![1.0], vec![])],
            ..spec
        };
        assert!(render_profile(&bad, &FigureSize::default())
            .unwrap_err()
            .to_string()
            .contains("1 pressures but 0 values"));
    }
}
