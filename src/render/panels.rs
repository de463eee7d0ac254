//! One entry point for every figure kind, and multi-panel figures: several
//! figures in a grid in one image (e.g. maps of two layers side by side with
//! a hodograph and a profile).

use plotters::prelude::*;

use super::cross_section::{CrossSectionSpec, PreparedCrossSection};
use super::frame;
use super::hodograph::{HodographSpec, PreparedHodograph};
use super::map::{MapSpec, PreparedMap};
use super::painter::Painter;
use super::profile::{PreparedProfile, ProfileSpec};
use super::time_series::{PreparedTimeSeries, TimeSeriesSpec};
use super::{bundle_of, Drawable, FigureSize, RenderError};
use crate::mime::MimeBundle;

/// Any single figure.
#[derive(Debug, Clone)]
pub enum FigureSpec<'a> {
    Map(MapSpec<'a>),
    Hodograph(HodographSpec),
    Profile(ProfileSpec),
    CrossSection(CrossSectionSpec<'a>),
    TimeSeries(TimeSeriesSpec),
}

/// Several figures in a grid, filled row by row.
#[derive(Debug, Clone)]
pub struct PanelsSpec<'a> {
    pub title: String,
    /// Number of columns; rows follow from the number of panels.
    pub columns: usize,
    pub panels: Vec<FigureSpec<'a>>,
}

pub fn render_figure(spec: &FigureSpec<'_>, size: &FigureSize) -> Result<MimeBundle, RenderError> {
    let scale = size.png_scale().max(1.0);
    let prepared = Prepared::new(spec, size.width as f64 * scale, size.height as f64 * scale)?;
    bundle_of(&prepared, size)
}

pub fn render_panels(spec: &PanelsSpec<'_>, size: &FigureSize) -> Result<MimeBundle, RenderError> {
    if spec.panels.is_empty() {
        return Err(RenderError::input(
            "multi-panel figure",
            "needs at least one panel",
        ));
    }
    let columns = spec.columns.clamp(1, spec.panels.len());
    let rows = spec.panels.len().div_ceil(columns);
    let scale = size.png_scale().max(1.0);
    let (pw, ph) = (
        size.width as f64 * scale / columns as f64,
        size.height as f64 * scale / rows as f64,
    );
    let panels = spec
        .panels
        .iter()
        .enumerate()
        .map(|(i, p)| {
            Prepared::new(p, pw, ph)
                .map_err(|e| RenderError::input(format!("panel {}", i + 1), e.to_string()))
        })
        .collect::<Result<Vec<_>, _>>()?;
    let prepared = PreparedPanels {
        title: spec.title.clone(),
        columns,
        rows,
        panels,
    };
    bundle_of(&prepared, size)
}

pub(crate) enum Prepared {
    Map(Box<PreparedMap>),
    Hodograph(PreparedHodograph),
    Profile(PreparedProfile),
    CrossSection(Box<PreparedCrossSection>),
    TimeSeries(PreparedTimeSeries),
}

impl Prepared {
    fn new(spec: &FigureSpec<'_>, width_px: f64, height_px: f64) -> Result<Self, RenderError> {
        Ok(match spec {
            FigureSpec::Map(m) => {
                Prepared::Map(Box::new(PreparedMap::new(m, width_px, height_px)?))
            }
            FigureSpec::Hodograph(h) => Prepared::Hodograph(PreparedHodograph::new(h)?),
            FigureSpec::Profile(p) => Prepared::Profile(PreparedProfile::new(p)?),
            FigureSpec::CrossSection(c) => {
                Prepared::CrossSection(Box::new(PreparedCrossSection::new(c)?))
            }
            FigureSpec::TimeSeries(t) => Prepared::TimeSeries(PreparedTimeSeries::new(t)?),
        })
    }
}

impl Drawable for Prepared {
    fn draw<DB: DrawingBackend>(&self, p: &Painter<'_, DB>) -> Result<(), RenderError> {
        match self {
            Prepared::Map(x) => x.draw(p),
            Prepared::Hodograph(x) => x.draw(p),
            Prepared::Profile(x) => x.draw(p),
            Prepared::CrossSection(x) => x.draw(p),
            Prepared::TimeSeries(x) => x.draw(p),
        }
    }

    fn describe(&self) -> String {
        match self {
            Prepared::Map(x) => x.describe(),
            Prepared::Hodograph(x) => x.describe(),
            Prepared::Profile(x) => x.describe(),
            Prepared::CrossSection(x) => x.describe(),
            Prepared::TimeSeries(x) => x.describe(),
        }
    }
}

struct PreparedPanels {
    title: String,
    columns: usize,
    rows: usize,
    panels: Vec<Prepared>,
}

impl Drawable for PreparedPanels {
    fn describe(&self) -> String {
        let parts: Vec<String> = self
            .panels
            .iter()
            .enumerate()
            .map(|(i, p)| format!("({}) {}", i + 1, p.describe().trim_end_matches('.')))
            .collect();
        format!(
            "Figure \"{}\" with {} panels: {}.",
            self.title,
            self.panels.len(),
            parts.join("; ")
        )
    }

    fn draw<DB: DrawingBackend>(&self, p: &Painter<'_, DB>) -> Result<(), RenderError> {
        let top = if self.title.is_empty() {
            0.0
        } else {
            frame::draw_title(p, &self.title, "")?
        };
        let (w, h) = p.size();
        let body = p.area().margin(top.round() as u32, 0, 0, 0);
        let _ = (w, h);
        let cells = body.split_evenly((self.rows, self.columns));
        for (panel, cell) in self.panels.iter().zip(cells.iter()) {
            let sub = p.sub(cell);
            panel.draw(&sub)?;
        }
        // Thin separators between panels.
        for r in 1..self.rows {
            let y = top + (h - top) * r as f64 / self.rows as f64;
            p.line((0.0, y), (w, y), RGBAColor(0, 0, 0, 0.15), 1.0)?;
        }
        for c in 1..self.columns {
            let x = w * c as f64 / self.columns as f64;
            p.line((x, top), (x, h), RGBAColor(0, 0, 0, 0.15), 1.0)?;
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::render::hodograph::HodographPoint;
    use crate::render::map::{ContourLayer, ShadedLayer, VectorLayer};
    use crate::render::profile::ProfileSeries;
    use crate::render::test_support::{check_dir, decode_png, regional};

    #[test]
    fn panels_share_one_image_and_list_every_panel() {
        let s = regional();
        let map = MapSpec::new("Thickness and thermal wind", &s.lats, &s.lons)
            .shaded(ShadedLayer::new(s.thickness.view(), "thickness", "m"))
            .contour_lines(ContourLayer::new(s.thickness.view(), "thickness", "m").every(60.0))
            .vectors(VectorLayer::barbs(s.u.view(), s.v.view(), "thermal wind"));
        let advection = MapSpec::new("Advection", &s.lats, &s.lons).shaded(ShadedLayer::new(
            s.signed.view(),
            "advection",
            "K/day",
        ));
        let hodo = HodographSpec {
            title: "Hodograph".into(),
            geostrophic: vec![
                HodographPoint::new(100000.0, 3.0, 5.0),
                HodographPoint::new(70000.0, 12.0, 9.0),
                HodographPoint::new(50000.0, 22.0, 8.0),
            ],
            ..Default::default()
        };
        let profile = ProfileSpec {
            title: "Wind speed".into(),
            quantity: "speed".into(),
            units: "m/s".into(),
            series: vec![ProfileSeries::new(
                "geostrophic",
                vec![100000.0, 70000.0, 50000.0],
                vec![5.8, 15.0, 23.4],
            )],
            ..Default::default()
        };
        let spec = PanelsSpec {
            title: "Case overview (invented)".into(),
            columns: 2,
            panels: vec![
                FigureSpec::Map(map),
                FigureSpec::Map(advection),
                FigureSpec::Hodograph(hodo),
                FigureSpec::Profile(profile),
            ],
        };
        let bundle = render_panels(&spec, &FigureSize::new(1200, 900)).unwrap();
        roxmltree::Document::parse(bundle.text("image/svg+xml").unwrap()).unwrap();
        assert_eq!(decode_png(bundle.binary("image/png").unwrap()).0, 1200);
        let text = bundle.plain_text();
        assert!(
            text.contains("4 panels") && text.contains("(3) Hodograph") && !text.contains('\n'),
            "{text}"
        );
        std::fs::write(
            check_dir().join("panels.png"),
            bundle.binary("image/png").unwrap(),
        )
        .unwrap();
    }
}
