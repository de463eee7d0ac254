//! Maps of scalar fields on latitude-longitude grids.
//!
//! A map has up to three kinds of layer: one shaded field (filled contours
//! with a colour bar), any number of contour-line fields (labelled, negative
//! values dashed), and one vector field (arrows or WMO wind barbs, thinned to
//! a readable density). The projection is equirectangular with the
//! longitude scale shrunk by cos(central latitude), so regional maps keep
//! their shapes; a global map is the plain latitude-longitude rectangle.
//! Missing values (NaN) show as a grey hatch, never as a value.

use ndarray::ArrayView2;
use plotters::prelude::*;

use super::barbs::{
    arrow_shape, barb_shape, place_barbs, BarbCandidate, Hemisphere, METRES_PER_SECOND_PER_KNOT,
};
use super::colour::{
    format_value, level_step, line_levels, nice_step, plan_shading, Levels, Palette, ShadingPlan,
    ToRgba,
};
use super::contouring::{FilledContours, GridField, Isolines, Path};
use super::frame::{self, dashes, SMALL_SIZE, TICK_SIZE};
use super::painter::{Anchor, Painter, Pt, Rect, BLACK_INK, GREY_INK};
use super::{bundle_of, Drawable, FigureSize, RenderError};
use crate::mime::MimeBundle;

/// A shaded (filled-contour) field, shape [latitude, longitude].
#[derive(Debug, Clone)]
pub struct ShadedLayer<'a> {
    pub values: ArrayView2<'a, f32>,
    pub name: String,
    pub units: String,
    pub levels: Levels,
    /// None: diverging (blue to copper) when the data take both signs,
    /// sequential (slate to straw) otherwise.
    pub palette: Option<Palette>,
    /// Half-width of the white band around zero of a signed field, as a
    /// fraction of the largest magnitude; None takes
    /// `colour::DEFAULT_NEUTRAL_FRACTION`.
    pub neutral_fraction: Option<f64>,
    /// What missing values mean here, for the legend ("missing data" when
    /// empty; "weak wind" where an angle between winds is undefined).
    pub missing_label: String,
}

impl<'a> ShadedLayer<'a> {
    pub fn new(
        values: ArrayView2<'a, f32>,
        name: impl Into<String>,
        units: impl Into<String>,
    ) -> Self {
        ShadedLayer {
            values,
            name: name.into(),
            units: units.into(),
            levels: Levels::Auto,
            palette: None,
            neutral_fraction: None,
            missing_label: String::new(),
        }
    }
    pub fn neutral_fraction(mut self, fraction: f64) -> Self {
        self.neutral_fraction = Some(fraction);
        self
    }
    pub fn missing_label(mut self, text: impl Into<String>) -> Self {
        self.missing_label = text.into();
        self
    }
    pub fn levels(mut self, levels: Levels) -> Self {
        self.levels = levels;
        self
    }
    pub fn palette(mut self, palette: Palette) -> Self {
        self.palette = Some(palette);
        self
    }
}

/// A contour-line field, shape [latitude, longitude].
#[derive(Debug, Clone)]
pub struct ContourLayer<'a> {
    pub values: ArrayView2<'a, f32>,
    pub name: String,
    pub units: String,
    /// E.g. `Levels::Interval(60.0)` for thickness every 60 m.
    pub levels: Levels,
    /// Line colour as RGB; None picks black for the first layer and a
    /// distinct dark colour for the others.
    pub colour: Option<(u8, u8, u8)>,
    /// Draw lines of negative values dashed (common practice for signed fields).
    pub dash_negative: bool,
    /// Write each line's value on it.
    pub labels: bool,
    /// Draw every line dashed (thickness lines, by the trade's habit).
    pub dash_all: bool,
    /// Colour lines about a reference value: (reference, colour at and
    /// above it, colour below it); the reference is named in the legend.
    pub reference: Option<(f64, (u8, u8, u8), (u8, u8, u8))>,
}

impl<'a> ContourLayer<'a> {
    pub fn new(
        values: ArrayView2<'a, f32>,
        name: impl Into<String>,
        units: impl Into<String>,
    ) -> Self {
        ContourLayer {
            values,
            name: name.into(),
            units: units.into(),
            levels: Levels::Auto,
            colour: None,
            dash_negative: true,
            labels: true,
            dash_all: false,
            reference: None,
        }
    }
    pub fn dashed(mut self) -> Self {
        self.dash_all = true;
        self
    }
    /// Warm colour for lines at and above `reference`, cold below.
    pub fn about(mut self, reference: f64, warm: (u8, u8, u8), cold: (u8, u8, u8)) -> Self {
        self.reference = Some((reference, warm, cold));
        self
    }
    pub fn every(mut self, interval: f64) -> Self {
        self.levels = Levels::Interval(interval);
        self
    }
    pub fn levels(mut self, levels: Levels) -> Self {
        self.levels = levels;
        self
    }
    pub fn colour(mut self, rgb: (u8, u8, u8)) -> Self {
        self.colour = Some(rgb);
        self
    }
}

/// The name a coastline layer carries (see `coastline_layer`): the map
/// lists it as a coastline, not as a field's lines.
pub const COASTLINE: &str = "coastline";

/// Coastlines drawn from a land-sea mask on the map's grid (1 land, 0 sea,
/// NaN unknown), shape [latitude, longitude]: the mask's 0.5 contour, a thin
/// dark unlabelled line. Add it with `MapSpec::contour_lines` after the
/// field's own lines; datasets with a land-sea mask get coastlines this way
/// without any map data shipped.
pub fn coastline_layer(mask: ArrayView2<'_, f32>) -> ContourLayer<'_> {
    ContourLayer {
        values: mask,
        name: COASTLINE.into(),
        units: String::new(),
        levels: Levels::Explicit(vec![0.5]),
        colour: Some((60, 60, 60)),
        dash_negative: false,
        dash_all: false,
        reference: None,
        labels: false,
    }
}

/// How vectors are drawn.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum VectorStyle {
    /// Arrows of length proportional to speed; `reference` (m/s) is the
    /// speed of the key arrow, None chooses a round value near the 90th
    /// percentile of the drawn speeds.
    Arrows { reference: Option<f64> },
    /// WMO wind barbs in knots (input still in m/s).
    Barbs,
}

/// A vector field (u eastward, v northward, m/s), shape [latitude, longitude].
#[derive(Debug, Clone)]
pub struct VectorLayer<'a> {
    pub u: ArrayView2<'a, f32>,
    pub v: ArrayView2<'a, f32>,
    pub name: String,
    pub style: VectorStyle,
    /// Minimum distance between drawn vectors in CSS pixels.
    pub spacing: f64,
    /// The unit the barb key also states its marks in, so barbs and the
    /// shading read on one scale: its spelling and how many m/s one of it
    /// is (e.g. ("m s-1", 1.0)); None states knots only.
    pub key_unit: Option<(String, f64)>,
}

impl<'a> VectorLayer<'a> {
    pub fn barbs(u: ArrayView2<'a, f32>, v: ArrayView2<'a, f32>, name: impl Into<String>) -> Self {
        VectorLayer {
            u,
            v,
            name: name.into(),
            style: VectorStyle::Barbs,
            spacing: 40.0,
            key_unit: None,
        }
    }
    pub fn arrows(u: ArrayView2<'a, f32>, v: ArrayView2<'a, f32>, name: impl Into<String>) -> Self {
        VectorLayer {
            u,
            v,
            name: name.into(),
            style: VectorStyle::Arrows { reference: None },
            spacing: 30.0,
            key_unit: None,
        }
    }
    pub fn spacing(mut self, css_pixels: f64) -> Self {
        self.spacing = css_pixels;
        self
    }
    pub fn key_unit(mut self, spelling: impl Into<String>, metres_per_second: f64) -> Self {
        self.key_unit = Some((spelling.into(), metres_per_second));
        self
    }
}

/// A map on a latitude-longitude grid. Latitudes may run either way;
/// longitudes must increase, allowing one wrap through 360 (e.g. 180..359,
/// 0..179). All arrays are [latitude, longitude].
#[derive(Debug, Clone)]
pub struct MapSpec<'a> {
    pub title: String,
    /// Second line under the title (e.g. the valid time); the layers are
    /// listed after it automatically.
    pub subtitle: String,
    pub latitudes: &'a [f64],
    pub longitudes: &'a [f64],
    pub shading: Option<ShadedLayer<'a>>,
    pub contours: Vec<ContourLayer<'a>>,
    pub vectors: Option<VectorLayer<'a>>,
    /// Text under the map.
    pub caption: String,
    /// Set for a map in a projection's own plane: `latitudes` and
    /// `longitudes` are then the grid's y and x coordinates.
    pub projected: Option<ProjectedFrame>,
}

/// A map drawn in a projection's own plane (Lambert conformal, polar
/// stereographic, rotated pole). The grid is regular in projection x and
/// y, so the layers are drawn on it as they are, x and y at one scale (the
/// projection keeps shapes; it is conformal); the graticule of true
/// meridians and parallels is drawn curved, labelled where it meets the
/// frame. Vectors must be given along the grid's x and y (a wind turned
/// from east/north by the projection's rotation angle), so a westerly barb
/// lies along the parallel.
#[derive(Debug, Clone)]
pub struct ProjectedFrame {
    /// The projection in words for the description ("Lambert conformal conic").
    pub name: String,
    /// True latitude of each grid point, row by row in the layers' order
    /// ([y, x]); it sets the side of each barb's feathers.
    pub latitudes: Vec<f64>,
    /// The meridians and parallels in projection coordinates
    /// (`render::graticule::graticule`).
    pub graticule: Vec<GraticuleLine>,
    /// True when x and y are rotated longitude and latitude in degrees (a
    /// rotated-pole grid): x is then drawn shrunk by the cosine of the
    /// middle rotated latitude, as a latitude-longitude map is.
    pub angular: bool,
}

impl<'a> MapSpec<'a> {
    pub fn new(title: impl Into<String>, latitudes: &'a [f64], longitudes: &'a [f64]) -> Self {
        MapSpec {
            title: title.into(),
            subtitle: String::new(),
            latitudes,
            longitudes,
            shading: None,
            contours: Vec::new(),
            vectors: None,
            caption: String::new(),
            projected: None,
        }
    }
    /// Draw in a projection's plane: the spec's latitudes and longitudes
    /// are the grid's y and x.
    pub fn projected(mut self, frame: ProjectedFrame) -> Self {
        self.projected = Some(frame);
        self
    }
    pub fn subtitle(mut self, text: impl Into<String>) -> Self {
        self.subtitle = text.into();
        self
    }
    pub fn shaded(mut self, layer: ShadedLayer<'a>) -> Self {
        self.shading = Some(layer);
        self
    }
    pub fn contour_lines(mut self, layer: ContourLayer<'a>) -> Self {
        self.contours.push(layer);
        self
    }
    pub fn vectors(mut self, layer: VectorLayer<'a>) -> Self {
        self.vectors = Some(layer);
        self
    }
    pub fn caption(mut self, text: impl Into<String>) -> Self {
        self.caption = text.into();
        self
    }
}

/// Render a map as SVG, PNG and a one-line description.
pub fn render_map(spec: &MapSpec<'_>, size: &FigureSize) -> Result<MimeBundle, RenderError> {
    let prepared = PreparedMap::new(
        spec,
        size.width as f64 * size.png_scale().max(1.0),
        size.height as f64 * size.png_scale().max(1.0),
    )?;
    bundle_of(&prepared, size)
}

/// How the input grid is reordered for drawing: latitude ascending,
/// longitude unwrapped to increase, and for a global grid one extra column
/// repeating the first so that contours close across the seam.
#[derive(Debug, Clone)]
struct GridPlan {
    lats: Vec<f64>,
    lons: Vec<f64>,
    lat_reversed: bool,
    wrap: bool,
}

impl GridPlan {
    /// A projected grid: y in either order, x increasing, both finite
    /// projection coordinates; never periodic.
    fn projected(y: &[f64], x: &[f64]) -> Result<Self, RenderError> {
        if y.len() < 2 || x.len() < 2 {
            return Err(RenderError::input("map grid", format!("needs at least 2 rows and 2 columns, got {} and {}", y.len(), x.len())));
        }
        if y.iter().chain(x).any(|v| !v.is_finite()) {
            return Err(RenderError::input("map grid", "projection coordinates must be finite numbers"));
        }
        let lat_reversed = y[0] > y[y.len() - 1];
        let mut lats = y.to_vec();
        if lat_reversed {
            lats.reverse();
        }
        if lats.windows(2).any(|w| w[1] <= w[0]) || x.windows(2).any(|w| w[1] <= w[0]) {
            return Err(RenderError::input("map grid", "projection y must be strictly monotonic and x strictly increasing"));
        }
        Ok(GridPlan { lats, lons: x.to_vec(), lat_reversed, wrap: false })
    }

    fn new(latitudes: &[f64], longitudes: &[f64]) -> Result<Self, RenderError> {
        if latitudes.len() < 2 || longitudes.len() < 2 {
            return Err(RenderError::input(
                "map grid",
                format!(
                    "needs at least 2 latitudes and 2 longitudes, got {} and {}",
                    latitudes.len(),
                    longitudes.len()
                ),
            ));
        }
        if latitudes.iter().chain(longitudes).any(|v| !v.is_finite()) {
            return Err(RenderError::input(
                "map grid",
                "coordinates must be finite numbers",
            ));
        }
        let lat_reversed = latitudes[0] > latitudes[latitudes.len() - 1];
        let mut lats = latitudes.to_vec();
        if lat_reversed {
            lats.reverse();
        }
        if lats.windows(2).any(|w| w[1] <= w[0])
            || lats[0] < -90.0 - 1e-9
            || lats[lats.len() - 1] > 90.0 + 1e-9
        {
            return Err(RenderError::input(
                "latitudes",
                "must be strictly monotonic (either order) and within -90..90 degrees",
            ));
        }
        let mut lons = longitudes.to_vec();
        let mut shift = 0.0;
        let mut wraps = 0;
        for i in 1..lons.len() {
            if longitudes[i] + shift <= lons[i - 1] {
                shift += 360.0;
                wraps += 1;
            }
            lons[i] = longitudes[i] + shift;
        }
        let span = lons[lons.len() - 1] - lons[0];
        if wraps > 1 || lons.windows(2).any(|w| w[1] <= w[0]) || span >= 360.0 {
            return Err(RenderError::input(
                "longitudes",
                "must increase (one wrap through 360 allowed) and cover less than 360 degrees",
            ));
        }
        let step = lons[1] - lons[0];
        let even = lons
            .windows(2)
            .all(|w| ((w[1] - w[0]) - step).abs() < 1e-6 * step.max(1.0) + 1e-9);
        let wrap = even && ((span + step) - 360.0).abs() < 0.1 * step;
        if wrap {
            lons.push(lons[lons.len() - 1] + step);
        }
        Ok(GridPlan {
            lats,
            lons,
            lat_reversed,
            wrap,
        })
    }

    fn nlat(&self) -> usize {
        self.lats.len()
    }

    /// Number of input longitudes (without the wrap column).
    fn nlon_input(&self) -> usize {
        if self.wrap {
            self.lons.len() - 1
        } else {
            self.lons.len()
        }
    }

    /// Values as row-major f64, latitude ascending, with the wrap column.
    fn arrange(&self, values: &ArrayView2<'_, f32>, what: &str) -> Result<Vec<f64>, RenderError> {
        let (ny, nx) = values.dim();
        if ny != self.nlat() || nx != self.nlon_input() {
            return Err(RenderError::input(
                what,
                format!(
                    "has shape [{ny}, {nx}] but the grid has {} latitudes and {} longitudes; arrays are [latitude, longitude]",
                    self.nlat(),
                    self.nlon_input()
                ),
            ));
        }
        let width = self.lons.len();
        let mut out = Vec::with_capacity(ny * width);
        for row in 0..ny {
            let source = if self.lat_reversed { ny - 1 - row } else { row };
            let r = values.row(source);
            out.extend(r.iter().map(|&v| v as f64));
            if self.wrap {
                out.push(r[0] as f64);
            }
        }
        Ok(out)
    }
}

/// Average blocks of `fy` x `fx` nodes (missing when more than half of a
/// block is missing), for drawing a grid finer than the screen.
fn coarsen(
    values: &[f64],
    x: &[f64],
    y: &[f64],
    fx: usize,
    fy: usize,
) -> (Vec<f64>, Vec<f64>, Vec<f64>) {
    if fx <= 1 && fy <= 1 {
        return (values.to_vec(), x.to_vec(), y.to_vec());
    }
    let (nx, ny) = (x.len(), y.len());
    // Keep the first and last node of each axis so the extent is unchanged.
    let starts = |n: usize, f: usize| -> Vec<(usize, usize)> {
        let mut v = Vec::new();
        let mut i = 0;
        while i < n {
            v.push((i, (i + f).min(n)));
            i += f;
        }
        v
    };
    let xs = starts(nx, fx);
    let ys = starts(ny, fy);
    let mean = |c: &[f64], (a, b): (usize, usize)| c[a..b].iter().sum::<f64>() / (b - a) as f64;
    let mut cx: Vec<f64> = xs.iter().map(|&r| mean(x, r)).collect();
    let mut cy: Vec<f64> = ys.iter().map(|&r| mean(y, r)).collect();
    cx[0] = x[0];
    *cx.last_mut().unwrap() = x[nx - 1];
    cy[0] = y[0];
    *cy.last_mut().unwrap() = y[ny - 1];
    let mut out = Vec::with_capacity(xs.len() * ys.len());
    for &(y0, y1) in &ys {
        for &(x0, x1) in &xs {
            let mut sum = 0.0;
            let mut count = 0usize;
            let mut total = 0usize;
            for iy in y0..y1 {
                for v in &values[iy * nx + x0..iy * nx + x1] {
                    total += 1;
                    if v.is_finite() {
                        sum += v;
                        count += 1;
                    }
                }
            }
            out.push(if count * 2 >= total && count > 0 {
                sum / count as f64
            } else {
                f64::NAN
            });
        }
    }
    // Coarse coordinates must still increase strictly.
    if cx.windows(2).any(|w| w[1] <= w[0]) || cy.windows(2).any(|w| w[1] <= w[0]) {
        return (values.to_vec(), x.to_vec(), y.to_vec());
    }
    (out, cx, cy)
}

struct PreparedShading {
    label: String,
    levels: Vec<f64>,
    colours: Vec<RGBAColor>,
    filled: FilledContours,
    missing: bool,
    missing_label: String,
    /// Half-width of the white band around zero, if any.
    neutral: Option<f64>,
    under: bool,
    over: bool,
}

struct PreparedLines {
    name: String,
    units: String,
    step: f64,
    isolines: Vec<Isolines>,
    colour: RGBAColor,
    dash_negative: bool,
    labels: bool,
    dash_all: bool,
    reference: Option<(f64, RGBAColor, RGBAColor)>,
}

struct PreparedVectors {
    name: String,
    style: VectorStyle,
    /// Latitude ascending, longitudes as the plan (without wrap column).
    u: Vec<f64>,
    v: Vec<f64>,
    spacing: f64,
    key_unit: Option<(String, f64)>,
}

/// The projected part of a prepared map: the graticule and each point's
/// true latitude (latitude ascending order of the plan).
struct PreparedProjection {
    graticule: Vec<GraticuleLine>,
    latitudes: Vec<f64>,
    angular: bool,
}

pub(crate) struct PreparedMap {
    title: String,
    subtitle: String,
    caption: String,
    plan: GridPlan,
    shading: Option<PreparedShading>,
    lines: Vec<PreparedLines>,
    vectors: Option<PreparedVectors>,
    projection: Option<PreparedProjection>,
    description: String,
}

const LINE_COLOURS: [(u8, u8, u8); 4] = [(15, 15, 15), (120, 40, 20), (30, 60, 140), (90, 90, 90)];

impl PreparedMap {
    /// Contour everything once; `width_px` and `height_px` bound the finest
    /// resolution the figure is drawn at, which limits how fine the grid
    /// needs to be for contouring.
    pub(crate) fn new(
        spec: &MapSpec<'_>,
        width_px: f64,
        height_px: f64,
    ) -> Result<Self, RenderError> {
        let plan = match &spec.projected {
            Some(_) => GridPlan::projected(spec.latitudes, spec.longitudes)?,
            None => GridPlan::new(spec.latitudes, spec.longitudes)?,
        };
        let projection = match &spec.projected {
            None => None,
            Some(frame) => {
                let (ny, nx) = (plan.nlat(), plan.nlon_input());
                let view = ndarray::ArrayView2::from_shape((ny, nx), &frame.latitudes)
                    .map_err(|_| RenderError::input("projected map", format!("needs {} point latitudes, got {}", ny * nx, frame.latitudes.len())))?;
                let latitudes = plan.arrange(&view.mapv(|v| v as f32).view(), "point latitudes")?;
                Some(PreparedProjection { graticule: frame.graticule.clone(), latitudes, angular: frame.angular })
            }
        };
        let x = plan.lons.clone();
        let y = plan.lats.clone();
        // Contours through cells of about 1.5 device pixels are as smooth as
        // the eye can see (the polygons interpolate linearly within cells);
        // finer grids are averaged in blocks first, which keeps the time
        // and the SVG size bounded for quarter-degree global fields.
        let fx = ((x.len() as f64) * 1.5 / (width_px * 0.85)).floor().max(1.0) as usize;
        let fy = ((y.len() as f64) * 1.5 / (height_px * 0.75)).floor().max(1.0) as usize;
        let f = fx.min(fy).max(1);
        let mut described = Vec::new();

        let shading = match &spec.shading {
            None => None,
            Some(layer) => {
                let values =
                    plan.arrange(&layer.values, &format!("shaded field '{}'", layer.name))?;
                let (cv, cx, cy) = coarsen(&values, &x, &y, f, f);
                let field = GridField::new(&cv, &cx, &cy)?;
                let full = GridField::new(&values, &x, &y)?;
                let range = full.range();
                let missing = values.iter().any(|v| !v.is_finite());
                match range {
                    None => {
                        described.push(format!("shaded {} (all missing)", layer.name));
                        Some(PreparedShading {
                            label: label_of(&layer.name, &layer.units),
                            levels: Vec::new(),
                            colours: Vec::new(),
                            filled: field.filled(&[])?,
                            missing: true,
                            missing_label: missing_label_of(layer),
                            neutral: None,
                            under: false,
                            over: false,
                        })
                    }
                    Some((lo, hi)) => {
                        let ShadingPlan { levels, colours, palette, neutral } =
                            plan_shading(&layer.levels, lo, hi, layer.palette, layer.neutral_fraction);
                        let filled = field.filled(&levels)?;
                        let step = level_step(&levels);
                        described.push(format!(
                            "shaded {} from {} to {} {} ({} colour table)",
                            layer.name,
                            format_value(lo, step / 10.0),
                            format_value(hi, step / 10.0),
                            layer.units,
                            palette.name()
                        ));
                        Some(PreparedShading {
                            label: label_of(&layer.name, &layer.units),
                            under: lo < levels[0],
                            over: hi > levels[levels.len() - 1],
                            levels,
                            colours,
                            filled,
                            missing,
                            missing_label: missing_label_of(layer),
                            neutral,
                        })
                    }
                }
            }
        };

        let mut lines = Vec::new();
        for (i, layer) in spec.contours.iter().enumerate() {
            let values = plan.arrange(&layer.values, &format!("contour field '{}'", layer.name))?;
            let (cv, cx, cy) = coarsen(&values, &x, &y, f, f);
            let field = GridField::new(&cv, &cx, &cy)?;
            let Some((lo, hi)) = field.range() else {
                described.push(format!("lines of {} (all missing)", layer.name));
                continue;
            };
            let levels = line_levels(&layer.levels, lo, hi);
            let step = if let Levels::Interval(s) = layer.levels {
                s
            } else {
                level_step(&levels)
            };
            let isolines = field.isolines(&levels)?;
            if layer.name == COASTLINE {
                described.push("coastline from the land-sea mask".into());
            } else {
                described.push(format!(
                    "lines of {} every {} {}",
                    layer.name,
                    format_value(step, step),
                    layer.units
                ));
            }
            let (r, g, b) = layer.colour.unwrap_or(LINE_COLOURS[i % LINE_COLOURS.len()]);
            lines.push(PreparedLines {
                name: layer.name.clone(),
                units: layer.units.clone(),
                step,
                isolines,
                colour: RGBAColor(r, g, b, 1.0),
                dash_negative: layer.dash_negative,
                labels: layer.labels,
                dash_all: layer.dash_all,
                reference: layer.reference.map(|(r, w, c)| {
                    (r, RGBAColor(w.0, w.1, w.2, 1.0), RGBAColor(c.0, c.1, c.2, 1.0))
                }),
            });
        }

        let vectors = match &spec.vectors {
            None => None,
            Some(layer) => {
                let mut u =
                    plan.arrange(&layer.u, &format!("eastward component of '{}'", layer.name))?;
                let mut v = plan.arrange(
                    &layer.v,
                    &format!("northward component of '{}'", layer.name),
                )?;
                if plan.wrap {
                    // Drop the wrap column: a vector is drawn once.
                    let w = plan.lons.len();
                    let keep = |a: Vec<f64>| {
                        a.chunks(w)
                            .flat_map(|row| row[..w - 1].to_vec())
                            .collect::<Vec<_>>()
                    };
                    u = keep(u);
                    v = keep(v);
                }
                let kind = match layer.style {
                    VectorStyle::Barbs => "barbs",
                    VectorStyle::Arrows { .. } => "arrows",
                };
                described.push(format!("{kind} of {}", layer.name));
                Some(PreparedVectors {
                    name: layer.name.clone(),
                    style: layer.style,
                    u,
                    v,
                    spacing: layer.spacing.clamp(8.0, 400.0),
                    key_unit: layer.key_unit.clone(),
                })
            }
        };

        let layers = if described.is_empty() { "no layers".to_string() } else { described.join("; ") };
        let description = match (&spec.projected, &projection) {
            (Some(frame), Some(prepared)) => {
                let (lo, hi) = prepared.latitudes.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| (a.min(v), b.max(v)));
                let (scale, unit) = if frame.angular { (1.0, "degrees") } else { (1000.0, "km") };
                format!(
                    "Map \"{}\": {layers}; {} grid {} x {} ({} by {} {unit}, latitude {} to {}), drawn in its own projection with {} meridians and {} parallels.",
                    spec.title,
                    frame.name,
                    plan.nlat(),
                    plan.nlon_input(),
                    format_value((plan.lons[plan.nlon_input() - 1] - plan.lons[0]) / scale, 0.1),
                    format_value((plan.lats[plan.nlat() - 1] - plan.lats[0]) / scale, 0.1),
                    lat_label(lo, 0.01),
                    lat_label(hi, 0.01),
                    frame.graticule.iter().filter(|l| l.kind == GraticuleKind::Meridian).count(),
                    frame.graticule.iter().filter(|l| l.kind == GraticuleKind::Parallel).count(),
                )
            }
            _ => format!(
                "Map \"{}\": {}; grid {} x {} ({} to {}, {} to {}).",
                spec.title,
                layers,
                plan.nlat(),
                plan.nlon_input(),
                lat_label(plan.lats[0], 0.01),
                lat_label(plan.lats[plan.nlat() - 1], 0.01),
                lon_label(plan.lons[0], 0.01),
                lon_label(plan.lons[plan.nlon_input() - 1], 0.01),
            ),
        };
        let mut subtitle_parts = Vec::new();
        if !spec.subtitle.is_empty() {
            subtitle_parts.push(spec.subtitle.clone());
        }
        if let Some(s) = &shading {
            subtitle_parts.push(match s.neutral {
                Some(w) => format!(
                    "shaded: {}, white within ±{} {}",
                    s.label,
                    format_value(w, nice_step(w, 10)),
                    spec.shading.as_ref().map(|l| l.units.as_str()).unwrap_or("")
                )
                .trim()
                .to_string(),
                None => format!("shaded: {}", s.label),
            });
        }
        for l in lines.iter().filter(|l| l.name != COASTLINE) {
            subtitle_parts.push(
                format!(
                    "lines: {} every {} {}",
                    l.name,
                    format_value(l.step, l.step),
                    l.units
                )
                .trim()
                .to_string(),
            );
        }
        if let Some(v) = &vectors {
            subtitle_parts.push(match v.style {
                VectorStyle::Barbs => format!("barbs: {} (kt)", v.name),
                VectorStyle::Arrows { .. } => format!("arrows: {}", v.name),
            });
        }
        Ok(PreparedMap {
            title: spec.title.clone(),
            subtitle: subtitle_parts.join("  ·  "),
            caption: spec.caption.clone(),
            plan,
            shading,
            lines,
            vectors,
            projection,
            description,
        })
    }
}

fn missing_label_of(layer: &ShadedLayer<'_>) -> String {
    if layer.missing_label.trim().is_empty() {
        "missing data".to_string()
    } else {
        layer.missing_label.clone()
    }
}

fn label_of(name: &str, units: &str) -> String {
    if units.trim().is_empty() {
        name.to_string()
    } else {
        format!("{name} ({units})")
    }
}

/// "50°N", "0°", "30.5°S".
pub(crate) fn lat_label(lat: f64, step: f64) -> String {
    let text = format_value(lat.abs(), step);
    if lat.abs() < 1e-9 {
        "0°".to_string()
    } else if lat > 0.0 {
        format!("{text}°N")
    } else {
        format!("{text}°S")
    }
}

/// "20°W", "0°", "180°", "45°E", for any longitude (wrapped to -180..180).
pub(crate) fn lon_label(lon: f64, step: f64) -> String {
    let mut l = (lon + 180.0).rem_euclid(360.0) - 180.0;
    if (l + 180.0).abs() < 1e-9 {
        l = 180.0;
    }
    let text = format_value(l.abs(), step);
    if l.abs() < 1e-9 || (l.abs() - 180.0).abs() < 1e-9 {
        format!("{}°", format_value(l.abs(), step))
    } else if l > 0.0 {
        format!("{text}°E")
    } else {
        format!("{text}°W")
    }
}

use super::graticule::{graticule_step, GraticuleKind, GraticuleLine};

/// Where the map sits on the figure and how coordinates map to pixels.
struct MapFrame {
    rect: Rect,
    lon0: f64,
    lat0: f64,
    kx: f64,
    ky: f64,
}

impl MapFrame {
    fn position(&self, lon: f64, lat: f64) -> Pt {
        (
            self.rect.left + (lon - self.lon0) * self.kx,
            self.rect.bottom - (lat - self.lat0) * self.ky,
        )
    }
    fn path_px(&self, path: &Path) -> Vec<Pt> {
        path.iter().map(|&(x, y)| self.position(x, y)).collect()
    }
}

impl Drawable for PreparedMap {
    fn describe(&self) -> String {
        self.description.clone()
    }

    fn draw<DB: DrawingBackend>(&self, p: &Painter<'_, DB>) -> Result<(), RenderError> {
        let (w, h) = p.size();
        let top = frame::draw_title(p, &self.title, &self.subtitle)?;
        let (caption_lines, caption_h) = frame::caption_height(p, &self.caption);
        let key_h = if self.vectors.is_some()
            || self.shading.as_ref().is_some_and(|s| s.missing)
            || self.lines.iter().any(|l| l.reference.is_some())
        {
            p.text_extent("Ag", SMALL_SIZE).1 + p.px(18.0)
        } else {
            0.0
        };
        let tick_h = p.text_extent("0", TICK_SIZE).1;
        let left_w = p.text_extent("88°N", TICK_SIZE).0 + p.px(14.0);
        let colour_bar = self.shading.as_ref().map(|s| frame::ColourBar {
            levels: &s.levels,
            colours: &s.colours,
            label: &s.label,
            over: s.over,
            under: s.under,
        });
        let colour_bar_w = match &colour_bar {
            Some(bar) => bar.width(p, (h - top - caption_h - key_h - tick_h) * 0.9),
            None => p.px(14.0),
        };
        // A projected map labels meridians on the top edge too, where they
        // leave the frame there.
        let top = if self.projection.is_some() { top + tick_h + p.px(8.0) } else { top };
        let avail = Rect::new(
            left_w,
            top,
            w - colour_bar_w,
            h - caption_h - key_h - tick_h - p.px(12.0),
        );
        if avail.width() < p.px(40.0) || avail.height() < p.px(30.0) {
            return Err(RenderError::Size(
                "the figure is too small for a map; make it at least 300 x 200 px".into(),
            ));
        }
        let lon0 = self.plan.lons[0];
        let lon1 = *self.plan.lons.last().unwrap();
        let lat0 = self.plan.lats[0];
        let lat1 = *self.plan.lats.last().unwrap();
        // Latitude-longitude and rotated grids shrink x by the cosine of the
        // middle latitude; a projection in metres is drawn at one scale.
        let central = match &self.projection {
            Some(pr) if !pr.angular => 1.0,
            _ => (0.5 * (lat0 + lat1)).to_radians().cos().max(0.2),
        };
        let k = (avail.width() / ((lon1 - lon0) * central)).min(avail.height() / (lat1 - lat0));
        let (mw, mh) = ((lon1 - lon0) * central * k, (lat1 - lat0) * k);
        let left = avail.left + (avail.width() - mw) / 2.0;
        let rect = Rect::new(left, avail.top, left + mw, avail.top + mh);
        let frame = MapFrame {
            rect,
            lon0,
            lat0,
            kx: central * k,
            ky: k,
        };

        // Filled contours: the lowest band everywhere, higher bands on top,
        // missing data hatched over all.
        if let Some(s) = &self.shading {
            let base = s.colours.first().copied().unwrap_or(WHITE.rgba());
            let mut regions: Vec<(Vec<Vec<Pt>>, RGBAColor)> = Vec::new();
            for (level, region) in &s.filled.at_least {
                let index = s.levels.iter().position(|l| l == level).unwrap_or(0);
                let colour = s.colours[index.min(s.colours.len() - 1)];
                regions.push((region.iter().map(|r| frame.path_px(r)).collect(), colour));
            }
            let missing: Vec<Vec<Pt>> = s
                .filled
                .missing_area
                .iter()
                .map(|r| frame.path_px(r))
                .collect();
            p.filled_layer(rect, base, &regions, &missing)?;
        } else {
            p.fill_rect(rect, WHITE.rgba())?;
        }

        // Graticule.
        let grid_colour = RGBAColor(40, 40, 40, 0.28);
        let mut graticule_pixels: Vec<(&GraticuleLine, Vec<Vec<Pt>>)> = Vec::new();
        if let Some(pr) = &self.projection {
            for line in &pr.graticule {
                let mut clipped = Vec::new();
                for run in &line.runs {
                    let pts: Vec<Pt> = run.iter().map(|&(x, y)| frame.position(x, y)).collect();
                    // A quarter pixel: the same picture, a smaller SVG.
                    let pieces = super::painter::clip_polyline(&pts, &rect);
                    clipped.extend(pieces.iter().map(|piece| super::graticule::simplify_polyline(piece, p.px(0.25))));
                }
                for piece in &clipped {
                    p.polyline(piece, grid_colour, 1.0)?;
                }
                graticule_pixels.push((line, clipped));
            }
        }
        let lat_step = graticule_step(lat1 - lat0, 6.0);
        let lon_step = graticule_step(lon1 - lon0, (6.0 * mw / mh.max(1.0)).clamp(3.0, 12.0));
        let (lats, lons) = if self.projection.is_some() {
            (Vec::new(), Vec::new())
        } else {
            (super::colour::multiples_within(lat0, lat1, lat_step), super::colour::multiples_within(lon0, lon1, lon_step))
        };
        for &lat in &lats {
            let y = frame.position(lon0, lat).1;
            p.line((rect.left, y), (rect.right, y), grid_colour, 1.0)?;
        }
        for &lon in &lons {
            let x = frame.position(lon, lat0).0;
            p.line((x, rect.top), (x, rect.bottom), grid_colour, 1.0)?;
        }

        // Contour lines, then their labels over all lines.
        let mut occupied: Vec<Rect> = Vec::new();
        let mut labels: Vec<(String, Pt, RGBAColor)> = Vec::new();
        for layer in &self.lines {
            for (li, iso) in layer.isolines.iter().enumerate() {
                let dashed = layer.dash_all || (layer.dash_negative && iso.level < 0.0);
                let (colour, width) = match layer.reference {
                    Some((r, warm, cold)) => (
                        if iso.level >= r { warm } else { cold },
                        if (iso.level - r).abs() < 1e-9 * r.abs().max(1.0) { 2.2 } else { 1.3 },
                    ),
                    None if iso.level == 0.0 && layer.dash_negative => (layer.colour, 1.8),
                    None => (layer.colour, 1.2),
                };
                for line in &iso.lines {
                    let pts = frame.path_px(line);
                    // Each line on a thin pale casing, so it reads over
                    // dark and light bands alike.
                    let casing = RGBAColor(255, 255, 255, 0.55);
                    if dashed {
                        for run in dashes(&pts, p.px(7.0), p.px(4.0)) {
                            p.polyline(&run, casing, width + 1.6)?;
                            p.polyline(&run, colour, width)?;
                        }
                    } else {
                        p.polyline(&pts, casing, width + 1.6)?;
                        p.polyline(&pts, colour, width)?;
                    }
                    if layer.labels {
                        let text = format_value(iso.level, layer.step);
                        for at in frame::label_positions(p, &pts, &text, rect, &mut occupied, li) {
                            labels.push((text.clone(), at, colour));
                        }
                    }
                }
            }
        }
        if let Some(v) = &self.vectors {
            let key_y = frame.rect.bottom + p.text_extent("0", TICK_SIZE).1 + p.px(20.0);
            self.draw_vectors(p, &frame, v, key_y)?;
        }
        // Labels last, on white boxes, so no vector crosses a number.
        for (text, at, colour) in &labels {
            let b = p
                .text_box(text, *at, SMALL_SIZE, Anchor::Centre)
                .inflate(p.px(1.5));
            p.fill_rect(b, RGBAColor(255, 255, 255, 0.82))?;
            p.text(text, *at, SMALL_SIZE, *colour, Anchor::Centre)?;
        }

        // Frame and graticule labels.
        p.stroke_rect(rect, BLACK_INK.rgba(), 1.0)?;
        if self.projection.is_some() {
            draw_edge_labels(p, rect, &graticule_pixels, self.shading.is_none())?;
        }
        let mut last_x = f64::NEG_INFINITY;
        for &lon in &lons {
            let x = frame.position(lon, lat0).0;
            let text = lon_label(lon, lon_step);
            let half = p.text_extent(&text, TICK_SIZE).0 / 2.0;
            if x - half < last_x + p.px(6.0) {
                continue;
            }
            last_x = x + half;
            p.line(
                (x, rect.bottom),
                (x, rect.bottom + p.px(4.0)),
                BLACK_INK.rgba(),
                1.0,
            )?;
            p.text(
                &text,
                (x, rect.bottom + p.px(5.0)),
                TICK_SIZE,
                BLACK_INK.rgba(),
                Anchor::TopCentre,
            )?;
        }
        for &lat in &lats {
            let y = frame.position(lon0, lat).1;
            p.line(
                (rect.left - p.px(4.0), y),
                (rect.left, y),
                BLACK_INK.rgba(),
                1.0,
            )?;
            p.text(
                &lat_label(lat, lat_step),
                (rect.left - p.px(6.0), y),
                TICK_SIZE,
                BLACK_INK.rgba(),
                Anchor::CentreRight,
            )?;
        }

        let mut key_x = rect.left;
        if let Some(s) = &self.shading {
            if let Some(bar) = &colour_bar {
                bar.draw(
                    p,
                    Rect::new(
                        rect.right + p.px(14.0),
                        rect.top,
                        rect.right + p.px(30.0),
                        rect.bottom,
                    ),
                )?;
            }
            if s.missing {
                let y = rect.bottom + tick_h + p.px(20.0);
                let swatch = Rect::new(
                    key_x,
                    y - p.px(6.0),
                    key_x + p.px(22.0),
                    y + p.px(6.0),
                );
                p.hatch(swatch)?;
                p.stroke_rect(swatch, GREY_INK.rgba(), 1.0)?;
                let at = (swatch.right + p.px(5.0), (swatch.top + swatch.bottom) / 2.0);
                p.text(&s.missing_label, at, SMALL_SIZE, BLACK_INK.rgba(), Anchor::CentreLeft)?;
                key_x = at.0 + p.text_extent(&s.missing_label, SMALL_SIZE).0 + p.px(14.0);
            }
        }
        // Lines coloured about a reference: a dashed swatch of each colour.
        for layer in &self.lines {
            if let Some((r, warm, cold)) = layer.reference {
                let y = rect.bottom + tick_h + p.px(20.0);
                let value = format_value(r, layer.step);
                for (colour, text) in [
                    (warm, format!("{value} {} and above", layer.units)),
                    (cold, format!("below {value} {}", layer.units)),
                ] {
                    for run in dashes(&[(key_x, y), (key_x + p.px(22.0), y)], p.px(7.0), p.px(4.0)) {
                        p.polyline(&run, colour, 1.6)?;
                    }
                    let at = (key_x + p.px(27.0), y);
                    p.text(&text, at, SMALL_SIZE, BLACK_INK.rgba(), Anchor::CentreLeft)?;
                    key_x = at.0 + p.text_extent(&text, SMALL_SIZE).0 + p.px(12.0);
                }
            }
        }
        frame::draw_caption(p, &caption_lines, h - caption_h)?;
        Ok(())
    }
}

impl PreparedMap {
    fn draw_vectors<DB: DrawingBackend>(
        &self,
        p: &Painter<'_, DB>,
        frame: &MapFrame,
        v: &PreparedVectors,
        key_y: f64,
    ) -> Result<(), RenderError> {
        let nx = self.plan.nlon_input();
        let ny = self.plan.nlat();
        let spacing = p.px(v.spacing);
        // Grid strides so that neighbouring vectors are `spacing` apart.
        let dx_px = frame.kx * (self.plan.lons[1] - self.plan.lons[0]).abs();
        let dy_px = frame.ky * (self.plan.lats[ny - 1] - self.plan.lats[0]) / (ny - 1) as f64;
        let sx = (spacing / dx_px.max(1e-9)).ceil().max(1.0) as usize;
        let sy = (spacing / dy_px.max(1e-9)).ceil().max(1.0) as usize;
        let mut samples = Vec::new();
        let inset = p.px(6.0);
        let inner = frame.rect.inflate(-inset);
        let mut iy = sy / 2;
        while iy < ny {
            let mut ix = sx / 2;
            while ix < nx {
                let (u, vv) = (v.u[iy * nx + ix], v.v[iy * nx + ix]);
                let at = frame.position(self.plan.lons[ix], self.plan.lats[iy]);
                // On a projected map the hemisphere is the point's true
                // latitude, not its y coordinate.
                let latitude = match &self.projection {
                    Some(pr) => pr.latitudes[iy * nx + ix],
                    None => self.plan.lats[iy],
                };
                if u.is_finite() && vv.is_finite() && inner.contains(at) {
                    samples.push((at, u, vv, latitude));
                }
                ix += sx;
            }
            iy += sy;
        }
        let ink = BLACK_INK.rgba();
        match v.style {
            VectorStyle::Barbs => {
                // Whole barbs only, inside the frame, none touching another.
                let length = spacing * 0.6;
                let candidates: Vec<BarbCandidate> = samples
                    .iter()
                    .map(|&(at, u, vv, lat)| BarbCandidate {
                        station: at,
                        u,
                        v: vv,
                        hemisphere: Hemisphere::of_latitude(lat),
                    })
                    .collect();
                let r = frame.rect.inflate(-p.px(1.0));
                for shape in place_barbs(&candidates, length, (r.left, r.top, r.right, r.bottom), spacing * 0.75, p.px(1.5)) {
                    draw_barb(p, &shape, ink)?;
                }
                // Key: a 65-kt example barb and the meaning of each mark, also
                // in the shading's unit when that is not knots.
                let text = match &v.key_unit {
                    Some((unit, per)) if *per > 0.0 && (per - METRES_PER_SECOND_PER_KNOT).abs() > 1e-9 => {
                        let in_unit = |kt: f64| format_value(kt * METRES_PER_SECOND_PER_KNOT / per, 0.1);
                        format!(
                            "barbs: pennant 50 kt ({} {unit}), full barb 10 kt ({} {unit}), half barb 5 kt ({} {unit})",
                            in_unit(50.0),
                            in_unit(10.0),
                            in_unit(5.0)
                        )
                    }
                    _ => "barbs in kt: pennant 50, full barb 10, half barb 5".to_string(),
                };
                let right = frame.rect.right;
                let tw = p.text_extent(&text, SMALL_SIZE).0;
                p.text(&text, (right, key_y), SMALL_SIZE, ink, Anchor::CentreRight)?;
                // A westerly: the staff runs west from the station, away from the text.
                let station = (right - tw - p.px(8.0), key_y);
                if let Some(shape) = barb_shape(
                    station,
                    65.0 * METRES_PER_SECOND_PER_KNOT,
                    0.0,
                    Hemisphere::North,
                    p.px(24.0),
                ) {
                    draw_barb(p, &shape, ink)?;
                }
            }
            VectorStyle::Arrows { reference } => {
                let mut speeds: Vec<f64> = samples
                    .iter()
                    .map(|s| (s.1 * s.1 + s.2 * s.2).sqrt())
                    .collect();
                speeds.sort_by(|a, b| a.total_cmp(b));
                let p90 = speeds
                    .get(speeds.len() * 9 / 10)
                    .copied()
                    .unwrap_or(10.0)
                    .max(1e-6);
                let reference = reference
                    .filter(|r| r.is_finite() && *r > 0.0)
                    .unwrap_or_else(|| {
                        let s = nice_step(p90, 1);
                        if s > p90 * 1.5 {
                            s / 2.0
                        } else {
                            s
                        }
                    });
                let per_unit = spacing * 0.9 / reference;
                for &(at, u, vv, _) in &samples {
                    if let Some(arrow) = arrow_shape(at, u, vv, per_unit) {
                        draw_arrow(p, arrow, ink)?;
                    }
                }
                let right = frame.rect.right;
                let label = format!(
                    "{} m s-1",
                    format_value(reference, reference / 10.0)
                        .trim_end_matches('0')
                        .trim_end_matches('.')
                );
                let tw = p.text_extent(&label, SMALL_SIZE).0;
                p.text(&label, (right, key_y), SMALL_SIZE, ink, Anchor::CentreRight)?;
                let centre = (right - tw - p.px(8.0) - reference * per_unit / 2.0, key_y);
                if let Some(arrow) = arrow_shape(centre, reference, 0.0, per_unit) {
                    draw_arrow(p, arrow, ink)?;
                }
            }
        }
        Ok(())
    }
}

/// Which edge of the frame a graticule line meets.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Edge {
    Bottom,
    Top,
    Left,
    Right,
}

/// Labels of a projected map's graticule where its lines meet the frame:
/// meridians preferably on the bottom edge, then the top, then the sides;
/// parallels on the left edge, else the right (when no colour bar stands
/// there). A label that would overlap one
/// already placed is left out, so the edge reads cleanly.
fn draw_edge_labels<DB: DrawingBackend>(
    p: &Painter<'_, DB>,
    rect: Rect,
    lines: &[(&GraticuleLine, Vec<Vec<Pt>>)],
    right_free: bool,
) -> Result<(), RenderError> {
    let tolerance = p.px(0.5);
    let edge_of = |q: Pt| -> Option<Edge> {
        if (q.1 - rect.bottom).abs() < tolerance {
            Some(Edge::Bottom)
        } else if (q.1 - rect.top).abs() < tolerance {
            Some(Edge::Top)
        } else if (q.0 - rect.left).abs() < tolerance {
            Some(Edge::Left)
        } else if (q.0 - rect.right).abs() < tolerance {
            Some(Edge::Right)
        } else {
            None
        }
    };
    let mut placed: Vec<Rect> = Vec::new();
    let gap = p.px(5.0);
    for (line, pieces) in lines {
        let order: &[Edge] = match line.kind {
            GraticuleKind::Meridian => &[Edge::Bottom, Edge::Top, Edge::Left, Edge::Right],
            // A parallel's label on the top or bottom edge would sit among
            // the meridians' and read as one of them: sides only.
            GraticuleKind::Parallel => &[Edge::Left, Edge::Right],
        };
        let crossings: Vec<(Edge, Pt)> = pieces
            .iter()
            .flat_map(|piece| [piece[0], piece[piece.len() - 1]])
            .filter_map(|q| edge_of(q).map(|e| (e, q)))
            .collect();
        'edges: for &edge in order {
            if edge == Edge::Right && !right_free {
                continue;
            }
            let mut here: Vec<Pt> = crossings.iter().filter(|c| c.0 == edge).map(|c| c.1).collect();
            // Nearest the middle of the edge first, so a line that meets an
            // edge twice is labelled where it reads best.
            let middle = ((rect.left + rect.right) / 2.0, (rect.top + rect.bottom) / 2.0);
            here.sort_by(|a, b| (a.0 - middle.0).abs().hypot((a.1 - middle.1).abs()).total_cmp(&(b.0 - middle.0).abs().hypot((b.1 - middle.1).abs())));
            for q in here {
                let (at, anchor, tick_end) = match edge {
                    Edge::Bottom => ((q.0, rect.bottom + gap), Anchor::TopCentre, (q.0, rect.bottom + p.px(4.0))),
                    Edge::Top => ((q.0, rect.top - gap), Anchor::BottomCentre, (q.0, rect.top - p.px(4.0))),
                    Edge::Left => ((rect.left - p.px(6.0), q.1), Anchor::CentreRight, (rect.left - p.px(4.0), q.1)),
                    Edge::Right => ((rect.right + p.px(6.0), q.1), Anchor::CentreLeft, (rect.right + p.px(4.0), q.1)),
                };
                let b = p.text_box(&line.label, at, TICK_SIZE, anchor).inflate(p.px(2.0));
                if placed.iter().any(|o| o.overlaps(&b)) {
                    continue;
                }
                placed.push(b);
                p.line(q, tick_end, BLACK_INK.rgba(), 1.0)?;
                p.text(&line.label, at, TICK_SIZE, BLACK_INK.rgba(), anchor)?;
                break 'edges;
            }
        }
    }
    Ok(())
}

fn draw_barb<DB: DrawingBackend>(
    p: &Painter<'_, DB>,
    shape: &super::barbs::BarbShape,
    ink: RGBAColor,
) -> Result<(), RenderError> {
    if let Some((a, b)) = shape.staff {
        p.line(a, b, ink, 1.0)?;
        for (a, b) in &shape.feathers {
            p.line(*a, *b, ink, 1.0)?;
        }
        for tri in &shape.pennants {
            p.polygon(tri, ink)?;
        }
    } else if let Some(radius) = shape.calm_radius {
        // Calm: an open circle around the station.
        p.circle(shape.station, radius / p.scale, ink, false, 1.0)?;
    }
    Ok(())
}

fn draw_arrow<DB: DrawingBackend>(
    p: &Painter<'_, DB>,
    (tail, head, left, right): (Pt, Pt, Pt, Pt),
    ink: RGBAColor,
) -> Result<(), RenderError> {
    p.line(tail, head, ink, 1.2)?;
    p.polygon(&[head, left, right], ink)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::render::test_support::{check_dir, decode_png, global_quarter_degree, regional};

    fn example_map<'a>(s: &'a crate::render::test_support::Synthetic, barbs: bool) -> MapSpec<'a> {
        let vectors = if barbs {
            VectorLayer::barbs(s.u.view(), s.v.view(), "1000-500 hPa thermal wind")
        } else {
            VectorLayer::arrows(s.u.view(), s.v.view(), "1000-500 hPa thermal wind")
        };
        MapSpec::new("Baroclinic zone over the Veltmar Basin (invented)", &s.lats, &s.lons)
            .subtitle("synthetic case, day 3 12 UTC")
            .shaded(ShadedLayer::new(s.signed.view(), "thickness advection", "K/day"))
            .contour_lines(ContourLayer::new(s.thickness.view(), "1000-500 hPa thickness", "m").every(60.0))
            .vectors(vectors)
            .caption("Thickness every 60 m (black); thermal-wind barbs from the thickness gradient. Invented data.")
    }

    #[test]
    fn map_bundle_has_svg_png_and_a_one_line_description() {
        let s = regional();
        let bundle = render_map(&example_map(&s, true), &FigureSize::default()).unwrap();
        let svg = bundle.text("image/svg+xml").unwrap();
        roxmltree::Document::parse(svg).expect("SVG is well-formed XML");
        let (w, h, _, _) = decode_png(bundle.binary("image/png").unwrap());
        assert_eq!((w, h), (900, 600));
        let text = bundle.plain_text();
        assert!(!text.contains('\n') && text.contains("thickness"), "{text}");
        std::fs::write(
            check_dir().join("map-barbs.png"),
            bundle.binary("image/png").unwrap(),
        )
        .unwrap();
        std::fs::write(check_dir().join("map-barbs.svg"), svg).unwrap();
        let arrows = render_map(
            &example_map(&s, false),
            &FigureSize::default().with_dpi(144.0),
        )
        .unwrap();
        let (w, h, _, _) = decode_png(arrows.binary("image/png").unwrap());
        assert_eq!(
            (w, h),
            (1350, 900),
            "144 dpi is 1.5 device pixels per CSS pixel"
        );
        std::fs::write(
            check_dir().join("map-arrows.png"),
            arrows.binary("image/png").unwrap(),
        )
        .unwrap();
    }

    #[test]
    fn svg_filled_contours_are_few_polygons_not_cells() {
        let s = regional();
        let spec = MapSpec::new("t", &s.lats, &s.lons).shaded(ShadedLayer::new(
            s.thickness.view(),
            "thickness",
            "m",
        ));
        let bundle = render_map(&spec, &FigureSize::default()).unwrap();
        let svg = bundle.text("image/svg+xml").unwrap();
        let polygons = svg.matches("<polygon").count();
        // One polygon per band region (plus colour-bar boxes are rects), far
        // fewer than the 61 x 101 grid cells.
        assert!(polygons < 60, "{polygons} polygons");
        assert!(svg.contains("fill-rule=\"evenodd\""));
    }

    #[test]
    fn missing_values_are_hatched_not_coloured_as_a_value() {
        let s = regional();
        let mut field = s.thickness.clone();
        // Mask a block (e.g. below ground over an invented plateau).
        for i in 20..30 {
            for j in 40..60 {
                field[[i, j]] = f32::NAN;
            }
        }
        let spec = MapSpec::new("masked", &s.lats, &s.lons).shaded(ShadedLayer::new(
            field.view(),
            "thickness",
            "m",
        ));
        let bundle = render_map(&spec, &FigureSize::default()).unwrap();
        assert!(bundle
            .text("image/svg+xml")
            .unwrap()
            .contains("missing data"));
        let (w, _, rgb, ch) = decode_png(bundle.binary("image/png").unwrap());
        // Count pixels of the hatch's grey background right of the latitude
        // labels: the 10 x 20 node block covers about 3 % of the map, so
        // there must be some, but far fewer than a quarter of the image.
        let mut grey = 0;
        let mut total = 0;
        for (k, px) in rgb.chunks(ch).enumerate() {
            if (k as u32 % w) < 60 {
                continue;
            }
            total += 1;
            if px[0] == 226 && px[1] == 226 && px[2] == 226 {
                grey += 1;
            }
        }
        assert!(
            grey > 500 && grey < total / 4,
            "hatched pixels: {grey} of {total}"
        );
        std::fs::write(
            check_dir().join("map-missing.png"),
            bundle.binary("image/png").unwrap(),
        )
        .unwrap();
        std::fs::write(
            check_dir().join("map-missing.svg"),
            bundle.text("image/svg+xml").unwrap(),
        )
        .unwrap();
    }

    #[test]
    fn title_area_has_text_pixels_from_the_embedded_font() {
        let s = regional();
        let spec = MapSpec::new("Title text must show", &s.lats, &s.lons);
        let bundle = render_map(&spec, &FigureSize::new(600, 400)).unwrap();
        let (w, _, rgb, ch) = decode_png(bundle.binary("image/png").unwrap());
        // The top 30 px hold only the title: count dark pixels there.
        let dark = rgb
            .chunks(ch)
            .take(w as usize * 30)
            .filter(|px| (px[0] as u32 + px[1] as u32 + px[2] as u32) < 300)
            .count();
        assert!(dark > 100, "only {dark} dark pixels in the title area");
    }

    #[test]
    fn labels_read_as_degrees_north_south_east_west() {
        assert_eq!(lat_label(50.0, 10.0), "50°N");
        assert_eq!(lat_label(-30.0, 10.0), "30°S");
        assert_eq!(lat_label(0.0, 10.0), "0°");
        assert_eq!(lon_label(-20.0, 10.0), "20°W");
        assert_eq!(lon_label(340.0, 10.0), "20°W");
        assert_eq!(lon_label(180.0, 10.0), "180°");
        assert_eq!(lon_label(45.0, 15.0), "45°E");
    }

    #[test]
    fn shape_mismatch_is_an_error_that_names_the_layer() {
        let s = regional();
        let wrong = ndarray::Array2::<f32>::zeros((3, 3));
        let spec = MapSpec::new("t", &s.lats, &s.lons).shaded(ShadedLayer::new(
            wrong.view(),
            "advection",
            "K/day",
        ));
        let err = render_map(&spec, &FigureSize::default())
            .unwrap_err()
            .to_string();
        assert!(
            err.contains("advection") && err.contains("[latitude, longitude]"),
            "{err}"
        );
    }

    #[test]
    fn global_grid_closes_across_the_seam() {
        let lats: Vec<f64> = (0..=36).map(|i| 90.0 - 5.0 * i as f64).collect();
        let lons: Vec<f64> = (0..72).map(|j| 5.0 * j as f64).collect();
        let plan = GridPlan::new(&lats, &lons).unwrap();
        assert!(plan.wrap);
        assert_eq!(plan.lons.last(), Some(&360.0));
        let lons_wrapped: Vec<f64> = (0..72).map(|j| ((180 + 5 * j) % 360) as f64).collect();
        let plan = GridPlan::new(&lats, &lons_wrapped).unwrap();
        assert_eq!(plan.lons[36], 360.0, "unwrapped through 360");
    }

    /// Timing of the benchmark-sized case; run with
    /// `cargo test --release --lib render::map -- --ignored --nocapture`.
    #[test]
    #[ignore]
    fn timing_global_quarter_degree_with_vectors() {
        let s = global_quarter_degree();
        let spec = MapSpec::new("Global quarter-degree synthetic field", &s.lats, &s.lons)
            .shaded(ShadedLayer::new(s.signed.view(), "advection", "K/day"))
            .contour_lines(ContourLayer::new(s.thickness.view(), "thickness", "m").every(60.0))
            .vectors(VectorLayer::barbs(s.u.view(), s.v.view(), "thermal wind"));
        let size = FigureSize::new(1200, 700);
        let t0 = std::time::Instant::now();
        let prepared = PreparedMap::new(&spec, 1200.0, 700.0).unwrap();
        let t_prep = t0.elapsed();
        let t1 = std::time::Instant::now();
        let svg = crate::render::render_svg(&prepared, &size).unwrap();
        let t_svg = t1.elapsed();
        let t2 = std::time::Instant::now();
        let png = crate::render::render_png(&prepared, &size).unwrap();
        let t_png = t2.elapsed();
        let t3 = std::time::Instant::now();
        let bundle = render_map(&spec, &size).unwrap();
        let t_all = t3.elapsed();
        println!(
            "global 1440x721: contouring {:.3} s; SVG draw {:.3} s, {} bytes; PNG draw+encode {:.3} s, {} bytes; full bundle {:.3} s",
            t_prep.as_secs_f64(),
            t_svg.as_secs_f64(),
            svg.len(),
            t_png.as_secs_f64(),
            png.len(),
            t_all.as_secs_f64()
        );
        std::fs::write(
            check_dir().join("map-global.png"),
            bundle.binary("image/png").unwrap(),
        )
        .unwrap();
    }
}
