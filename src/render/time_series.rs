//! Time series: values of one or more named series against time labels
//! (evenly spaced, in the order given).

use plotters::prelude::*;

use super::colour::ToRgba;
use super::frame::{self, series_colour, Axis, Swatch, Tick, TICK_SIZE};
use super::painter::{Painter, Rect};
use super::{bundle_of, Drawable, FigureSize, RenderError};
use crate::mime::MimeBundle;

#[derive(Debug, Clone, Default)]
pub struct TimeSeries {
    pub name: String,
    /// One value per time label; NaN for missing.
    pub values: Vec<f64>,
}

impl TimeSeries {
    pub fn new(name: impl Into<String>, values: Vec<f64>) -> Self {
        TimeSeries {
            name: name.into(),
            values,
        }
    }
}

#[derive(Debug, Clone, Default)]
pub struct TimeSeriesSpec {
    pub title: String,
    pub subtitle: String,
    /// Labels of the times, e.g. "day 3 12 UTC" or ISO 8601 strings.
    pub times: Vec<String>,
    pub series: Vec<TimeSeries>,
    pub quantity: String,
    pub units: String,
    pub caption: String,
}

pub fn render_time_series(
    spec: &TimeSeriesSpec,
    size: &FigureSize,
) -> Result<MimeBundle, RenderError> {
    let prepared = PreparedTimeSeries::new(spec)?;
    bundle_of(&prepared, size)
}

pub(crate) struct PreparedTimeSeries {
    spec: TimeSeriesSpec,
    y_range: (f64, f64),
    description: String,
}

impl PreparedTimeSeries {
    pub(crate) fn new(spec: &TimeSeriesSpec) -> Result<Self, RenderError> {
        if spec.times.is_empty() || spec.series.is_empty() {
            return Err(RenderError::input(
                "time series",
                "needs at least one time and one series",
            ));
        }
        let mut lo = f64::INFINITY;
        let mut hi = f64::NEG_INFINITY;
        for s in &spec.series {
            if s.values.len() != spec.times.len() {
                return Err(RenderError::input(
                    format!("time series '{}'", s.name),
                    format!(
                        "has {} values for {} times",
                        s.values.len(),
                        spec.times.len()
                    ),
                ));
            }
            for &v in &s.values {
                if v.is_finite() {
                    lo = lo.min(v);
                    hi = hi.max(v);
                }
            }
        }
        let y_range = if lo.is_finite() {
            frame::nice_range(lo, hi, 6)
        } else {
            (0.0, 1.0)
        };
        let description = format!(
            "Time series \"{}\": {} ({}) of {} at {} times from {} to {}.",
            spec.title,
            spec.quantity,
            spec.units,
            spec.series
                .iter()
                .map(|s| s.name.as_str())
                .collect::<Vec<_>>()
                .join(", "),
            spec.times.len(),
            spec.times[0],
            spec.times[spec.times.len() - 1]
        );
        Ok(PreparedTimeSeries {
            spec: spec.clone(),
            y_range,
            description,
        })
    }
}

impl Drawable for PreparedTimeSeries {
    fn describe(&self) -> String {
        self.description.clone()
    }

    fn draw<DB: DrawingBackend>(&self, p: &Painter<'_, DB>) -> Result<(), RenderError> {
        let (w, h) = p.size();
        let top = frame::draw_title(p, &self.spec.title, &self.spec.subtitle)?;
        let (caption_lines, caption_h) = frame::caption_height(p, &self.spec.caption);
        let y_ticks = frame::linear_ticks(self.y_range.0, self.y_range.1, 6);
        let left = frame::left_margin(p, &y_ticks, true);
        let bottom = h - caption_h - frame::bottom_margin(p, false) - p.px(6.0);
        let rect = Rect::new(left, top, w - p.px(20.0), bottom);
        let n = self.spec.times.len();
        let pad = 0.5;
        let x_axis = Axis::across(rect, -pad, (n - 1) as f64 + pad);
        let y_axis = Axis::up(rect, self.y_range.0, self.y_range.1);
        // Label as many times as fit side by side.
        let widest = self
            .spec
            .times
            .iter()
            .map(|t| p.text_extent(t, TICK_SIZE).0)
            .fold(0.0, f64::max)
            + p.px(10.0);
        let slot = rect.width() / n as f64;
        let every = ((widest / slot).ceil() as usize).max(1);
        let x_ticks: Vec<Tick> = (0..n)
            .step_by(every)
            .map(|i| Tick {
                value: i as f64,
                label: self.spec.times[i].clone(),
            })
            .collect();
        p.fill_rect(rect, WHITE.rgba())?;
        let y_title = if self.spec.units.is_empty() {
            self.spec.quantity.clone()
        } else {
            format!("{} ({})", self.spec.quantity, self.spec.units)
        };
        frame::draw_axes(
            p, rect, &x_axis, &y_axis, &x_ticks, &y_ticks, "", &y_title, true,
        )?;
        let mut entries = Vec::new();
        for (si, s) in self.spec.series.iter().enumerate() {
            let colour = series_colour(si);
            let points = s.values.iter().enumerate().map(|(i, &v)| {
                v.is_finite().then(|| (x_axis.position(i as f64), y_axis.position(v)))
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
    fn time_series_renders_and_rejects_length_mismatch() {
        let times: Vec<String> = (0..9)
            .map(|i| format!("day {} {:02} UTC", 1 + i / 2, (i % 2) * 12))
            .collect();
        let spec = TimeSeriesSpec {
            title: "Area-mean 1000-500 hPa thermal wind (invented)".into(),
            times: times.clone(),
            series: vec![
                TimeSeries::new(
                    "Veltmar Basin",
                    vec![12.0, 14.5, 17.0, 21.0, 24.5, 23.0, f64::NAN, 18.0, 15.5],
                ),
                TimeSeries::new(
                    "Orrin Shelf",
                    vec![8.0, 8.5, 9.5, 11.0, 13.0, 15.0, 16.0, 15.0, 13.5],
                ),
            ],
            quantity: "speed".into(),
            units: "m s-1".into(),
            ..Default::default()
        };
        let bundle = render_time_series(&spec, &FigureSize::new(760, 420)).unwrap();
        roxmltree::Document::parse(bundle.text("image/svg+xml").unwrap()).unwrap();
        assert_eq!(decode_png(bundle.binary("image/png").unwrap()).0, 760);
        assert!(
            bundle
                .plain_text()
                .contains("9 times from day 1 00 UTC to day 5 00 UTC"),
            "{}",
            bundle.plain_text()
        );
        std::fs::write(
            check_dir().join("time-series.png"),
            bundle.binary("image/png").unwrap(),
        )
        .unwrap();
        let bad = TimeSeriesSpec {
            times: times[..3].to_vec(),
            ..spec
        };
        assert!(render_time_series(&bad, &FigureSize::default())
            .unwrap_err()
            .to_string()
            .contains("9 values for 3 times"));
    }
}
