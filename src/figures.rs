//! Pictures of language values: the bridge from fields (with coordinates
//! and metadata) to the renderers' plain-array specs.

use ndarray::{ArrayView2, Axis};

use crate::grid::{Field, VectorField};
use crate::lang::value::{FigureContent, FigureOption, FigureRequest, Value};
use crate::lang::Diagnostic;
use crate::mime::MimeBundle;
use crate::render::map::{ContourLayer, MapSpec, ShadedLayer, VectorLayer};
use crate::render::{FigureSize, RenderError};

/// Options every picture takes: its size in CSS pixels and the PNG's
/// resolution.
const PICTURE_OPTIONS: &[&str] = &["width", "height", "dpi"];

/// Checks that every option given is one the operator knows.
fn allow(operator: &str, options: &[FigureOption], allowed: &[&str]) -> Result<(), Diagnostic> {
    for option in options {
        if !allowed.contains(&option.name.as_str()) {
            let help = if allowed.is_empty() { format!("`{operator}` takes no options") } else { format!("its options are {}", crate::lang::diagnostic::list_words(allowed, "and")) };
            return Err(Diagnostic::error(format!("`{operator}` has no option `{}`", option.name), option.name_span).with_help(help));
        }
    }
    Ok(())
}

/// The figure size from `with width N, height N, dpi N` (CSS pixels and
/// dots per inch), each falling back to the default given.
fn figure_size(options: &[FigureOption], default: FigureSize) -> Result<FigureSize, Diagnostic> {
    let mut size = default;
    for option in options {
        let number = match &option.value {
            Value::Number { value, unit } if unit.is_dimensionless() && *value > 0.0 => *value,
            other => {
                if PICTURE_OPTIONS.contains(&option.name.as_str()) {
                    return Err(Diagnostic::error(format!("`{}` takes a plain positive number, found {}", option.name, other.kind()), option.value_span));
                }
                continue;
            }
        };
        match option.name.as_str() {
            "width" => size.width = number.round() as u32,
            "height" => size.height = number.round() as u32,
            "dpi" => size.dpi = number,
            _ => {}
        }
    }
    Ok(size)
}

/// Draws what a presentation operator asked for: interprets its options
/// (size, resolution, panel columns) and calls the renderers. Errors point
/// at the option or the call.
pub fn draw(request: &FigureRequest) -> Result<MimeBundle, Diagnostic> {
    let operator = request.operator.as_str();
    let options = &request.options;
    let failed = |e: FigureError| Diagnostic::error(e.to_string(), request.span);
    let rendered = |e: RenderError| Diagnostic::error(e.to_string(), request.span);
    match &request.content {
        FigureContent::FieldMap { .. } | FigureContent::VectorMap { .. } => allow(operator, options, &[PICTURE_OPTIONS, MAP_OPTIONS].concat())?,
        FigureContent::Panels { .. } => {}
        _ => allow(operator, options, PICTURE_OPTIONS)?,
    }
    match &request.content {
        FigureContent::FieldMap { field, vectors } => {
            field_map_on(field, vectors.as_deref(), &figure_size(options, FigureSize::default())?, request.dataset.as_deref(), &map_options(options)?).map_err(rendered)
        }
        FigureContent::VectorMap { vectors } => vector_map_on(vectors, &figure_size(options, FigureSize::default())?, request.dataset.as_deref(), &map_options(options)?).map_err(rendered),
        FigureContent::Hodograph { case, latitude, longitude } => hodograph(case, *latitude, *longitude, &figure_size(options, FigureSize::new(640, 640))?).map_err(failed),
        FigureContent::Profile { fields, latitude, longitude } => {
            let refs: Vec<&Field> = fields.iter().map(|f| &**f).collect();
            profile(&refs, *latitude, *longitude, &figure_size(options, FigureSize::new(520, 640))?).map_err(failed)
        }
        FigureContent::Section { field, wind, from, to } => section(field, wind.as_deref(), *from, *to, &figure_size(options, FigureSize::new(900, 520))?).map_err(failed),
        FigureContent::TimeSeries { series } => time_series(series, &figure_size(options, FigureSize::new(800, 420))?).map_err(failed),
        FigureContent::Audit { case, settings } => {
            let report = crate::audit::present::audit_case(case, settings).map_err(|e| Diagnostic::error(e.to_string(), request.span))?;
            let mut bundle = MimeBundle::plain(crate::audit::present::format(&report, crate::audit::present::AuditFormat::Text));
            bundle.insert_text("application/json", crate::audit::present::format(&report, crate::audit::present::AuditFormat::Json));
            Ok(bundle)
        }
        FigureContent::Panels { figures } => {
            allow(operator, options, &["columns"])?;
            let columns = match options.iter().find(|o| o.name == "columns") {
                Some(FigureOption { value: Value::Number { value, .. }, .. }) if *value >= 1.0 => *value as usize,
                Some(other) => return Err(Diagnostic::error(format!("`columns` takes a whole number of at least 1, found {}", other.value.kind()), other.name_span)),
                None => 2,
            };
            let drawn = figures.iter().map(draw).collect::<Result<Vec<_>, _>>()?;
            panels(&drawn, columns, "panels").map_err(failed)
        }
    }
}

/// The map options among a request's options, interpreted; an error points
/// at the value that cannot be used and says what would do.
fn map_options(options: &[FigureOption]) -> Result<MapOptions, Diagnostic> {
    let mut out = MapOptions::default();
    for option in options.iter().filter(|o| MAP_OPTIONS.contains(&o.name.as_str())) {
        let value = match &option.value {
            Value::Number { value, unit } => OptionValue::Number { value: *value, unit: unit.clone() },
            Value::Word(w) | Value::Text(w) => OptionValue::Word(w.clone()),
            other => OptionValue::Word(other.kind().to_string()),
        };
        out.set(&option.name, &value).map_err(|message| Diagnostic::error(message, option.value_span))?;
    }
    Ok(out)
}

/// The first horizontal slice of a field, and a note of which it is.
fn first_slice(f: &Field) -> (ArrayView2<'_, f32>, String) {
    let slice = f.data.index_axis(Axis(0), 0).index_axis_move(Axis(0), 0);
    let mut note = Vec::new();
    if let Some(t) = &f.times {
        let labels = t.labels();
        note.push(if labels.len() > 1 { format!("{} (first of {} times)", labels[0], labels.len()) } else { labels[0].clone() });
    }
    if let Some(l) = &f.levels {
        note.push(if l.len() > 1 { format!("{} hPa (first of {} levels)", l[0] / 100.0, l.len()) } else { format!("{} hPa", l[0] / 100.0) });
    }
    for (k, v) in &f.attributes {
        if k == "pressure_level" {
            note.push(v.clone());
        }
    }
    (slice, note.join(", "))
}

/// Options of a map that the trade sets chart by chart. Every one has a
/// default, so `MapOptions::default()` draws the habitual chart.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct MapOptions {
    /// Speed unit for shading a wind and for its barb key ("kt", "m s-1",
    /// "km h-1"...); None keeps the field's own unit.
    pub speed_unit: Option<String>,
    /// Reference thickness (m) about which thickness lines are coloured
    /// warm (at and above) or cold (below); None takes
    /// `DEFAULT_REFERENCE_THICKNESS` for the 1000-500 hPa layer and no
    /// reference for other layers.
    pub reference_thickness: Option<f64>,
    /// Half-width of the white band around zero on signed fields, as a
    /// fraction of the largest magnitude; None takes
    /// `render::colour::DEFAULT_NEUTRAL_FRACTION`.
    pub neutral_band: Option<f64>,
}

/// The map options a user may set, by name (interpreted here, on the
/// drawing side; the language only passes them through).
pub const MAP_OPTIONS: &[&str] = &["speed_unit", "reference", "neutral_band"];

/// An option's value as written: a number with its unit, or a word.
#[derive(Debug, Clone, PartialEq)]
pub enum OptionValue {
    Number { value: f64, unit: crate::units::Unit },
    Word(String),
}

impl MapOptions {
    /// Set one option from what the user wrote; the error says what would
    /// be valid.
    /// - `speed_unit kt` (or any speed unit: `m s-1`, `km h-1`);
    /// - `reference 552 dam` (a thickness, any length unit);
    /// - `neutral_band 0.1` (a fraction of the largest magnitude, 0 to 0.5).
    pub fn set(&mut self, name: &str, value: &OptionValue) -> Result<(), String> {
        use crate::units::{Dimension, Unit};
        match (name, value) {
            ("speed_unit", OptionValue::Word(w)) => match Unit::parse(w) {
                Ok(u) if u.dimension() == Dimension::VELOCITY => {
                    self.speed_unit = Some(crate::units::spelling(w));
                    Ok(())
                }
                _ => Err(format!("`speed_unit` takes a unit of speed such as kt or m s-1, not `{w}`")),
            },
            ("reference", OptionValue::Number { value, unit }) if unit.dimension() == Dimension::LENGTH => {
                self.reference_thickness = Some(unit.to_si(*value));
                Ok(())
            }
            ("neutral_band", OptionValue::Number { value, unit }) if unit.is_dimensionless() && (0.0..=0.5).contains(value) => {
                self.neutral_band = Some(*value);
                Ok(())
            }
            ("speed_unit", _) => Err("`speed_unit` takes a unit of speed such as kt or m s-1".into()),
            ("reference", _) => Err("`reference` takes a thickness with its unit, such as 546 dam or 5460 m".into()),
            ("neutral_band", _) => Err("`neutral_band` takes a fraction of the largest magnitude from 0 to 0.5, such as 0.05".into()),
            (other, _) => Err(format!("maps have no option `{other}`; their options are {}", MAP_OPTIONS.join(", "))),
        }
    }
}

/// The 1000-500 hPa thickness about which forecasters split warm and cold
/// air masses by habit: 546 dam (common practice, no single source; the
/// 5460 m line is a long-standing rule-of-thumb rain/snow and air-mass
/// divide in mid-latitudes).
pub const DEFAULT_REFERENCE_THICKNESS: f64 = 5460.0;

/// Thickness is read in decametres, every 6 dam (common practice of
/// synoptic charts).
const THICKNESS_INTERVAL_DAM: f64 = 6.0;

/// Heights are contoured every 6 dam too (60 m; common practice).
const HEIGHT_INTERVAL_M: f64 = 60.0;

/// Warm and cold line colours of thickness charts: a copper and a blue from
/// the ends of our diverging table, dark enough to read over any shading.
const WARM_LINE: (u8, u8, u8) = (160, 50, 20);
const COLD_LINE: (u8, u8, u8) = (25, 60, 160);

fn is_length(units: &str) -> bool {
    crate::units::Unit::parse(units).map(|u| u.dimension() == crate::units::Dimension::LENGTH).unwrap_or(false)
}

fn is_thickness(f: &Field) -> bool {
    f.name.starts_with("thickness") && is_length(&f.units)
}

fn attribute<'a>(f: &'a Field, key: &str) -> Option<&'a str> {
    f.attributes.iter().find(|(k, _)| k == key).map(|(_, v)| v.as_str())
}

/// "2.5 m/s" as "2.5 m s-1": the number kept, the unit in its one spelling.
fn quantity_spelled(text: &str) -> String {
    match text.trim().split_once(' ') {
        Some((number, unit)) if number.parse::<f64>().is_ok() => format!("{number} {}", crate::units::spelling(unit)),
        _ => text.trim().to_string(),
    }
}

/// Values of a slice converted from one unit to another (a copy).
fn converted(values: ArrayView2<'_, f32>, from: &str, to: &str) -> Option<ndarray::Array2<f32>> {
    let (a, b) = (crate::units::Unit::parse(from).ok()?, crate::units::Unit::parse(to).ok()?);
    let (scale, offset) = a.conversion_to(&b).ok()?;
    Some(values.mapv(|v| (v as f64 * scale + offset) as f32))
}

/// What a field is, in plain words for labels ("thickness 1000-500 hPa"
/// rather than the variable name); the unit is added by whoever shows it.
fn plain_words(f: &Field) -> String {
    let words = if is_thickness(f) {
        match attribute(f, "layer") {
            Some(layer) => format!("thickness {layer}"),
            None => "thickness".to_string(),
        }
    } else {
        f.long_name.clone()
    };
    words
}

/// The land-sea mask of a dataset (the variable with the CF standard name
/// `land_binary_mask`) on a map's grid, by nearest grid point; NaN where
/// the mask's grid does not reach. None when the dataset has no mask, it
/// cannot be read, or the map's area holds no coast.
pub fn land_mask_on(dataset: &crate::io::Dataset, latitudes: &[f64], longitudes: &[f64]) -> Option<ndarray::Array2<f32>> {
    let info = dataset.variables().find(|v| v.standard_name.as_deref() == Some("land_binary_mask"))?;
    let mask = dataset.read(&info.name.clone(), &crate::io::Selection::default()).ok()?;
    let (mask_lats, mask_lons) = (&mask.grid.latitudes, &mask.grid.longitudes);
    let values = mask.data.index_axis(Axis(0), 0).index_axis_move(Axis(0), 0);
    let step = |c: &[f64]| if c.len() > 1 { (c[1] - c[0]).abs() } else { 1.0 };
    let nearest = |coordinates: &[f64], x: f64, wrap: bool| -> Option<usize> {
        let distance = |c: f64| if wrap { ((c - x + 540.0).rem_euclid(360.0) - 180.0).abs() } else { (c - x).abs() };
        let (index, d) = coordinates.iter().enumerate().map(|(i, &c)| (i, distance(c))).min_by(|a, b| a.1.total_cmp(&b.1))?;
        (d <= 0.51 * step(coordinates)).then_some(index)
    };
    let rows: Vec<Option<usize>> = latitudes.iter().map(|&y| nearest(mask_lats, y, false)).collect();
    let columns: Vec<Option<usize>> = longitudes.iter().map(|&x| nearest(mask_lons, x, true)).collect();
    let out = ndarray::Array2::from_shape_fn((latitudes.len(), longitudes.len()), |(j, i)| match (rows[j], columns[i]) {
        (Some(r), Some(c)) => values[[r, c]],
        _ => f32::NAN,
    });
    let (land, sea) = out.iter().fold((false, false), |(l, s), &v| (l || v >= 0.5, s || (v.is_finite() && v < 0.5)));
    (land && sea).then_some(out)
}

/// The frame of a map on a projected grid (Lambert conformal, polar
/// stereographic, rotated pole), drawn in the data's own projection: each
/// point's true latitude and the graticule of meridians and parallels,
/// computed by projecting latitude-longitude polylines. None on a
/// latitude-longitude grid.
pub fn projected_frame(grid: &crate::grid::Grid) -> Option<crate::render::map::ProjectedFrame> {
    use crate::projection::Projection;
    let p = grid.projection.as_ref()?;
    let bounds = |v: &[f64]| v.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &c| (a.min(c), b.max(c)));
    let ((x0, x1), (y0, y1)) = (bounds(&p.x), bounds(&p.y));
    let projection = p.projection.clone();
    let forward = move |lat: f64, lon: f64| projection.forward(lat, lon);
    let graticule = crate::render::graticule::graticule(&p.latitude, &p.longitude, (x0, x1, y0, y1), &forward);
    let name = match &p.projection {
        Projection::LambertConformal(_) => "Lambert conformal",
        Projection::PolarStereographic(_) => "polar stereographic",
        Projection::RotatedPole(_) => "rotated-pole latitude-longitude",
    };
    Some(crate::render::map::ProjectedFrame { name: name.into(), latitudes: p.latitude.clone(), graticule, angular: p.projection.is_angular() })
}

/// Eastward and northward components turned to the grid's x and y
/// directions (the map's local east turned back by the projection's
/// rotation angle), so vectors drawn on a projected map point the way the
/// wind blows over the map: a westerly lies along the parallel. On a
/// latitude-longitude grid the components are returned as they are.
pub fn in_grid_directions(grid: &crate::grid::Grid, eastward: ArrayView2<'_, f32>, northward: ArrayView2<'_, f32>) -> (ndarray::Array2<f32>, ndarray::Array2<f32>) {
    let mut along_x = eastward.as_standard_layout().into_owned();
    let mut along_y = northward.as_standard_layout().into_owned();
    if let (Some(p), Some(x), Some(y)) = (&grid.projection, along_x.as_slice_mut(), along_y.as_slice_mut()) {
        p.rotate_to_grid(x, y);
    }
    (along_x, along_y)
}

/// The land-sea mask on a map's grid, on either kind of grid: a projected
/// map takes each point's true latitude and longitude to the mask's
/// nearest cell (the mask itself on a latitude-longitude or projected
/// grid); a mask on exactly the map's grid is taken as it is.
pub fn land_mask_for(dataset: &crate::io::Dataset, grid: &crate::grid::Grid) -> Option<ndarray::Array2<f32>> {
    let Some(projected) = &grid.projection else {
        return land_mask_on(dataset, &grid.latitudes, &grid.longitudes);
    };
    let info = dataset.variables().find(|v| v.standard_name.as_deref() == Some("land_binary_mask"))?;
    let mask = dataset.read(&info.name.clone(), &crate::io::Selection::default()).ok()?;
    let values = mask.data.index_axis(Axis(0), 0).index_axis_move(Axis(0), 0);
    let (ny, nx) = grid.shape();
    let out = if *mask.grid == *grid {
        values.to_owned()
    } else {
        let nearest_on_mask = |lat: f64, lon: f64| -> Option<(usize, usize)> {
            match &mask.grid.projection {
                Some(m) => m.nearest_cell(lat, lon),
                None => {
                    let (lats, lons) = (&mask.grid.latitudes, &mask.grid.longitudes);
                    let step = |c: &[f64]| if c.len() > 1 { (c[1] - c[0]).abs() } else { 1.0 };
                    let pick = |c: &[f64], x: f64, wrap: bool| -> Option<usize> {
                        let d = |v: f64| if wrap { ((v - x + 540.0).rem_euclid(360.0) - 180.0).abs() } else { (v - x).abs() };
                        let (k, best) = c.iter().enumerate().map(|(k, &v)| (k, d(v))).min_by(|a, b| a.1.total_cmp(&b.1))?;
                        (best <= 0.51 * step(c)).then_some(k)
                    };
                    Some((pick(lats, lat, false)?, pick(lons, lon, true)?))
                }
            }
        };
        ndarray::Array2::from_shape_fn((ny, nx), |(j, i)| {
            let k = j * nx + i;
            nearest_on_mask(projected.latitude[k], projected.longitude[k]).map_or(f32::NAN, |(r, c)| values[[r, c]])
        })
    };
    let (land, sea) = out.iter().fold((false, false), |(l, s), &v| (l || v >= 0.5, s || (v.is_finite() && v < 0.5)));
    (land && sea).then_some(out)
}

/// A map of a scalar field: shaded, with labelled contour lines, and
/// optional vectors on top.
pub fn field_map_with(f: &Field, vectors: Option<&VectorField>, size: &FigureSize) -> Result<MimeBundle, RenderError> {
    field_map_on(f, vectors, size, None, &MapOptions::default())
}

/// A map of a scalar field as the trade reads it: thickness in decametres
/// with dashed lines every 6 dam coloured about a reference and bands from
/// the same interval; heights every 6 dam; turning on a cyclic scale with
/// weak-wind areas hatched; signed fields with a neutral band around zero;
/// coastlines from the dataset's land-sea mask when it has one.
pub fn field_map_on(f: &Field, vectors: Option<&VectorField>, size: &FigureSize, dataset: Option<&crate::io::Dataset>, options: &MapOptions) -> Result<MimeBundle, RenderError> {
    let (values, note) = first_slice(f);
    let thickness = is_thickness(f);
    let dam;
    let (values, units) = if thickness {
        dam = converted(values, &f.units, crate::units::spelled::DECAMETRES).ok_or_else(|| RenderError::input(&f.name, "thickness not convertible to dam"))?;
        (dam.view(), crate::units::spelled::DECAMETRES.to_string())
    } else {
        (values, crate::units::spelling(&f.units))
    };
    let label = plain_words(f);
    let title = if units.is_empty() || units == "1" { label.clone() } else { format!("{label} ({units})") };
    let mut spec = MapSpec::new(title, &f.grid.latitudes, &f.grid.longitudes).subtitle(note);
    let mut shaded = ShadedLayer::new(values, label.clone(), units.clone());
    if let Some(fraction) = options.neutral_band {
        shaded = shaded.neutral_fraction(fraction);
    }
    if let Some(threshold) = attribute(f, "weak_wind_threshold") {
        // An angle between two winds: the full circle on the cyclic table,
        // every 30 degrees, with undefined angles hatched as weak wind.
        let bands: Vec<f64> = (-6..=6).map(|k| k as f64 * 30.0).collect();
        shaded = shaded
            .palette(crate::render::Palette::Cyclic)
            .levels(crate::render::Levels::Explicit(bands))
            .missing_label(format!("weak wind (below {})", quantity_spelled(threshold)));
    }
    if thickness {
        shaded = shaded.levels(crate::render::Levels::Interval(THICKNESS_INTERVAL_DAM));
    }
    spec = spec.shaded(shaded);
    // Lines where the trade draws them (thickness and heights); other
    // fields are read from the shading and its colour bar, since lines on a
    // noisy signed field (advection, vorticity) clutter the map with small
    // rings around zero.
    if thickness {
        let mut lines = ContourLayer::new(values, label.clone(), units.clone()).every(THICKNESS_INTERVAL_DAM).dashed();
        let reference = options.reference_thickness.or_else(|| (attribute(f, "layer") == Some("1000-500 hPa")).then_some(DEFAULT_REFERENCE_THICKNESS));
        if let Some(r) = reference {
            lines = lines.about(r / 10.0, WARM_LINE, COLD_LINE);
        }
        spec = spec.contour_lines(lines);
    } else if is_length(&f.units) && f.standard_name.as_deref() == Some("geopotential_height") {
        spec = spec.contour_lines(ContourLayer::new(values, label.clone(), units.clone()).every(HEIGHT_INTERVAL_M));
    }
    let vector_slices;
    if let Some(w) = vectors {
        vector_slices = in_grid_directions(&w.eastward.grid, first_slice(&w.eastward).0, first_slice(&w.northward).0);
        spec = spec.vectors(VectorLayer::arrows(vector_slices.0.view(), vector_slices.1.view(), w.eastward.long_name.replace("eastward ", "")));
    }
    if let Some(frame) = projected_frame(&f.grid) {
        spec = spec.projected(frame);
    }
    let land = dataset.and_then(|d| land_mask_for(d, &f.grid));
    if let Some(mask) = &land {
        spec = spec.contour_lines(crate::render::map::coastline_layer(mask.view()));
    }
    spec = spec.caption("Baroc: an analysis tool, not a warning service.");
    crate::render::map::render_map(&spec, size)
}

/// A map of a scalar field with the default size; None if it cannot be
/// drawn (a single point, all values missing).
pub fn field_map(f: &Field, vectors: Option<&VectorField>) -> Option<MimeBundle> {
    field_map_with(f, vectors, &FigureSize::default()).ok()
}

/// A map of a vector field: speed shaded, barbs for winds, arrows for other
/// vectors (gradients, shears).
pub fn vector_map_with(w: &VectorField, size: &FigureSize) -> Result<MimeBundle, RenderError> {
    vector_map_on(w, size, None, &MapOptions::default())
}

/// A map of a vector field with options: `speed_unit` shades a wind's speed
/// in that unit, and the barb key states its marks in the shading's unit,
/// so colours and barbs read on one scale; coastlines from the dataset's
/// land-sea mask when it has one.
pub fn vector_map_on(w: &VectorField, size: &FigureSize, dataset: Option<&crate::io::Dataset>, options: &MapOptions) -> Result<MimeBundle, RenderError> {
    let speed = w.speed();
    let (values, note) = first_slice(&speed);
    // Components along the grid's x and y (unchanged on a
    // latitude-longitude grid); the speed is the same either way.
    let grid = &w.eastward.grid;
    let (u_grid, v_grid) = in_grid_directions(grid, first_slice(&w.eastward).0, first_slice(&w.northward).0);
    let (u, v) = (u_grid.view(), v_grid.view());
    let name = w.eastward.long_name.replace("eastward ", "");
    let is_speed = crate::units::Unit::parse(&w.eastward.units).map(|u| u.dimension() == crate::units::Dimension::VELOCITY).unwrap_or(false);
    let own = crate::units::spelling(&w.eastward.units);
    let shown = match &options.speed_unit {
        Some(unit) if is_speed => crate::units::spelling(unit),
        _ => own.clone(),
    };
    let speed_shown;
    let values = if shown != own {
        speed_shown = converted(values, &own, &shown).ok_or_else(|| RenderError::input("speed_unit", format!("cannot show a speed in `{shown}`")))?;
        speed_shown.view()
    } else {
        values
    };
    // Barbs take m s-1 whatever the shading; the key names the shading's unit too.
    let metres_per_second = crate::units::spelled::METRES_PER_SECOND;
    let barb_winds = if is_speed {
        converted(u, &own, metres_per_second).zip(converted(v, &own, metres_per_second))
    } else {
        None
    };
    let layer = match &barb_winds {
        Some((u_ms, v_ms)) => {
            let per = crate::units::Unit::parse(&shown)
                .ok()
                .zip(crate::units::Unit::parse(metres_per_second).ok())
                .and_then(|(a, b)| a.conversion_to(&b).ok())
                .map(|c| c.0)
                .unwrap_or(1.0);
            VectorLayer::barbs(u_ms.view(), v_ms.view(), name.clone()).key_unit(shown.clone(), per)
        }
        None => VectorLayer::arrows(u, v, name.clone()),
    };
    let mut spec = MapSpec::new(format!("{name} ({shown})"), &w.eastward.grid.latitudes, &w.eastward.grid.longitudes)
        .subtitle(note)
        .shaded(ShadedLayer::new(values, format!("speed of {name}"), shown.clone()))
        .vectors(layer)
        .caption("Baroc: an analysis tool, not a warning service.");
    if let Some(frame) = projected_frame(grid) {
        spec = spec.projected(frame);
    }
    let land = dataset.and_then(|d| land_mask_for(d, grid));
    if let Some(mask) = &land {
        spec = spec.contour_lines(crate::render::map::coastline_layer(mask.view()));
    }
    crate::render::map::render_map(&spec, size)
}

pub fn vector_map(w: &VectorField) -> Option<MimeBundle> {
    vector_map_with(w, &FigureSize::default()).ok()
}

use crate::diagnostics::{point_values, Case, DiagnosticError};
use crate::physics::advection::{implied_advection, ImpliedAdvection};
use crate::physics::thermal_wind::turning_angle;
use crate::render::hodograph::{render_hodograph, HodographPoint, HodographSpec};

fn place(latitude: f64, longitude: f64) -> String {
    crate::text::format_place(latitude, longitude)
}

fn time_label(f: &Field) -> String {
    f.times.as_ref().map(|t| t.labels()[0].clone()).unwrap_or_default()
}

/// Why a figure could not be made.
#[derive(Debug, thiserror::Error)]
pub enum FigureError {
    #[error(transparent)]
    Engine(#[from] DiagnosticError),
    #[error(transparent)]
    Render(#[from] RenderError),
    #[error("{0}")]
    Data(String),
}

/// Hodograph of the geostrophic (and analysed, when present) wind at a
/// point, at the first time of the case: each level's wind joined in order,
/// each layer's thermal wind the segment between its ends; the caption says
/// whether the wind veers or backs from the lowest to the highest level and
/// which advection that implies (hemisphere-aware).
pub fn hodograph(case: &Case, latitude: f64, longitude: f64, size: &FigureSize) -> Result<MimeBundle, FigureError> {
    let first = crate::io::Selection { times: Some(vec![case.selection.times.as_ref().and_then(|t| t.first().copied()).unwrap_or(0)]), ..case.selection.clone() };
    let case = case.with_selection(first);
    let (name, kind) = match (case.dataset.find_role(crate::io::Role::Geopotential), case.dataset.find_role(crate::io::Role::GeopotentialHeight)) {
        (Some(v), _) => (v.name.clone(), crate::physics::geostrophic::GeopotentialKind::Geopotential),
        (None, Some(v)) => (v.name.clone(), crate::physics::geostrophic::GeopotentialKind::Height),
        _ => return Err(FigureError::Data("a hodograph needs geopotential or geopotential height on pressure levels".into())),
    };
    let z = case.field(&name)?;
    let levels = z.levels.clone().ok_or_else(|| FigureError::Data(format!("`{name}` has no pressure levels")))?;
    let wind = case.geostrophic_wind_of(&z, kind, "")?;
    let u = point_values(&wind.eastward, latitude, longitude)?;
    let v = point_values(&wind.northward, latitude, longitude)?;
    let mut order: Vec<usize> = (0..levels.len()).collect();
    order.sort_by(|&a, &b| levels[b].total_cmp(&levels[a]));
    let geostrophic: Vec<HodographPoint> = order.iter().map(|&k| HodographPoint::new(levels[k], u[k] as f64, v[k] as f64)).filter(|p| p.u.is_finite() && p.v.is_finite()).collect();
    let analysed = match (case.dataset.find_role(crate::io::Role::EastwardWind), case.dataset.find_role(crate::io::Role::NorthwardWind)) {
        (Some(ue), Some(vn)) => {
            let (ue, vn) = (ue.name.clone(), vn.name.clone());
            let (uf, vf) = (case.field(&ue)?, case.field(&vn)?);
            let (ua, va) = (point_values(&uf, latitude, longitude)?, point_values(&vf, latitude, longitude)?);
            let wl = uf.levels.clone().unwrap_or_default();
            let mut points: Vec<HodographPoint> = (0..wl.len()).map(|k| HodographPoint::new(wl[k], ua[k] as f64, va[k] as f64)).filter(|p| p.u.is_finite() && p.v.is_finite()).collect();
            points.sort_by(|a, b| b.pressure.total_cmp(&a.pressure));
            Some(points)
        }
        _ => None,
    };
    let caption = match (geostrophic.first(), geostrophic.last()) {
        (Some(b), Some(t)) if geostrophic.len() > 1 && crate::physics::thermal_wind::turning_is_weak(b.u as f32, b.v as f32, t.u as f32, t.v as f32, crate::physics::thermal_wind::DEFAULT_WEAK_WIND) => format!(
            "From {} to {} hPa: weak wind (a wind or the shear below {} {}), so no turning is given.",
            b.pressure / 100.0,
            t.pressure / 100.0,
            crate::physics::thermal_wind::DEFAULT_WEAK_WIND,
            crate::units::spelled::METRES_PER_SECOND
        ),
        (Some(b), Some(t)) if geostrophic.len() > 1 => {
            let angle = turning_angle(b.u as f32, b.v as f32, t.u as f32, t.v as f32) as f64;
            let sense = if angle > 0.0 { "veers" } else { "backs" };
            let advection = match implied_advection(angle, latitude) {
                ImpliedAdvection::Warm => "warm advection",
                ImpliedAdvection::Cold => "cold advection",
                ImpliedAdvection::Neutral => "no advection",
            };
            format!(
                "From {} to {} hPa the geostrophic wind {sense} by {:.0} degrees: {advection} in the layer ({} hemisphere).",
                b.pressure / 100.0,
                t.pressure / 100.0,
                angle.abs(),
                if latitude >= 0.0 { "northern" } else { "southern" }
            )
        }
        _ => String::new(),
    };
    let spec = HodographSpec {
        title: "Hodograph of the geostrophic wind".into(),
        location: format!("{}  {}", place(latitude, longitude), time_label(&z)),
        geostrophic,
        analysed,
        thermal_layers: Vec::new(),
        caption,
    };
    Ok(render_hodograph(&spec, size)?)
}

/// Vertical profile at a point of one or more fields with levels.
pub fn profile(fields: &[&Field], latitude: f64, longitude: f64, size: &FigureSize) -> Result<MimeBundle, FigureError> {
    use crate::render::profile::{render_profile, ProfileSeries, ProfileSpec};
    let mut series = Vec::new();
    for f in fields {
        let levels = f.levels.clone().ok_or_else(|| FigureError::Data(format!("`{}` has no pressure levels to draw a profile of", f.name)))?;
        let values = point_values(f, latitude, longitude)?;
        series.push(ProfileSeries::new(f.long_name.clone(), levels.clone(), values[..levels.len()].iter().map(|&v| v as f64).collect()));
    }
    let first = fields.first().ok_or_else(|| FigureError::Data("nothing to draw".into()))?;
    let spec = ProfileSpec {
        title: format!("Profile of {}", first.long_name),
        subtitle: format!("{}  {}", place(latitude, longitude), time_label(first)),
        quantity: first.long_name.clone(),
        units: crate::units::spelling(&first.units),
        series,
        caption: String::new(),
    };
    Ok(render_profile(&spec, size)?)
}

/// Cross-section of a field with levels along the great circle between two
/// points, against distance and log pressure; with a wind, the component
/// normal to the section drawn as lines.
pub fn section(field: &Field, wind: Option<&VectorField>, from: (f64, f64), to: (f64, f64), size: &FigureSize) -> Result<MimeBundle, FigureError> {
    use crate::render::cross_section::{render_cross_section, CrossSectionSpec};
    let levels = field.levels.clone().ok_or_else(|| FigureError::Data(format!("`{}` has no pressure levels to draw a section of", field.name)))?;
    let n = 61;
    let (p1, l1) = (from.0.to_radians(), from.1.to_radians());
    let (p2, l2) = (to.0.to_radians(), to.1.to_radians());
    // Great-circle interpolation (spherical linear interpolation of unit vectors).
    let v1 = [p1.cos() * l1.cos(), p1.cos() * l1.sin(), p1.sin()];
    let v2 = [p2.cos() * l2.cos(), p2.cos() * l2.sin(), p2.sin()];
    let omega = (v1[0] * v2[0] + v1[1] * v2[1] + v1[2] * v2[2]).clamp(-1.0, 1.0).acos();
    if omega < 1e-9 {
        return Err(FigureError::Data("the two ends of the section are the same point".into()));
    }
    let radius = crate::constants::EARTH_RADIUS / 1000.0;
    let mut points = Vec::new();
    let mut distance = Vec::new();
    for k in 0..n {
        let t = k as f64 / (n - 1) as f64;
        let (a, b) = (((1.0 - t) * omega).sin() / omega.sin(), (t * omega).sin() / omega.sin());
        let v = [a * v1[0] + b * v2[0], a * v1[1] + b * v2[1], a * v1[2] + b * v2[2]];
        points.push((v[2].atan2(v[0].hypot(v[1])).to_degrees(), v[1].atan2(v[0]).to_degrees()));
        distance.push(t * omega * radius);
    }
    let mut values = ndarray::Array2::<f32>::from_elem((levels.len(), n), f32::NAN);
    let mut normal = wind.map(|_| ndarray::Array2::<f32>::from_elem((levels.len(), n), f32::NAN));
    for (i, &(lat, lon)) in points.iter().enumerate() {
        let column = point_values(field, lat, lon)?;
        for k in 0..levels.len() {
            values[[k, i]] = column[k];
        }
        if let (Some(w), Some(nm)) = (wind, normal.as_mut()) {
            // Unit normal to the section: the along-section direction turned
            // 90 degrees to the left.
            let (next_lat, next_lon) = points[(i + 1).min(n - 1)];
            let (prev_lat, prev_lon) = points[i.saturating_sub(1)];
            let dx = (next_lon - prev_lon).to_radians() * lat.to_radians().cos();
            let dy = (next_lat - prev_lat).to_radians();
            let norm = dx.hypot(dy).max(1e-12);
            let (nx, ny) = (-dy / norm, dx / norm);
            let u = point_values(&w.eastward, lat, lon)?;
            let v = point_values(&w.northward, lat, lon)?;
            for k in 0..levels.len().min(u.len()) {
                nm[[k, i]] = (u[k] as f64 * nx + v[k] as f64 * ny) as f32;
            }
        }
    }
    let mut spec = CrossSectionSpec::new(format!("Section of {}", field.long_name), &distance, &levels, values.view(), field.long_name.clone(), crate::units::spelling(&field.units));
    spec.subtitle = time_label(field);
    spec.start_label = place(from.0, from.1);
    spec.end_label = place(to.0, to.1);
    if let Some(nm) = &normal {
        spec.normal_wind = Some(nm.view());
        spec.caption = "Lines: wind component normal to the section (m s-1, positive to the left looking along it).".into();
    }
    Ok(render_cross_section(&spec, size)?)
}

/// Time series of a table's first column (point values or area means).
pub fn time_series(series: &crate::lang::value::Series, size: &FigureSize) -> Result<MimeBundle, FigureError> {
    use crate::render::time_series::{render_time_series, TimeSeries, TimeSeriesSpec};
    let column = series.columns.first().cloned().unwrap_or_default();
    let (quantity, units) = match column.rsplit_once(" (") {
        Some((q, u)) => (q.to_string(), u.trim_end_matches(')').to_string()),
        None => (column.clone(), String::new()),
    };
    let spec = TimeSeriesSpec {
        title: series.title.clone(),
        subtitle: String::new(),
        times: series.labels.clone(),
        series: vec![TimeSeries::new(quantity.clone(), series.rows.iter().map(|r| r[0]).collect())],
        quantity,
        units: crate::units::spelling(&units),
        caption: String::new(),
    };
    Ok(render_time_series(&spec, size)?)
}

/// Several finished figures side by side in one, `columns` to a row: the
/// PNGs tiled on a white canvas (each at its own resolution, scaled to the
/// first's), the SVGs nested as positioned `<svg>` elements.
pub fn panels(figures: &[MimeBundle], columns: usize, title: &str) -> Result<MimeBundle, FigureError> {
    use base64::Engine;
    if figures.is_empty() {
        return Err(FigureError::Data("`panels` needs at least one figure".into()));
    }
    let columns = columns.clamp(1, figures.len());
    let decoded: Vec<(u32, u32, Vec<u8>)> = figures
        .iter()
        .map(|b| {
            let bytes = b.binary("image/png").ok_or_else(|| FigureError::Data("a panel has no PNG picture".into()))?;
            let mut reader = png::Decoder::new(std::io::Cursor::new(bytes)).read_info().map_err(|e| FigureError::Data(e.to_string()))?;
            let mut buffer = vec![0; reader.output_buffer_size().unwrap_or(0)];
            let info = reader.next_frame(&mut buffer).map_err(|e| FigureError::Data(e.to_string()))?;
            let channels = info.color_type.samples();
            // To RGB.
            let rgb: Vec<u8> = buffer[..info.width as usize * info.height as usize * channels]
                .chunks(channels)
                .flat_map(|p| if channels >= 3 { [p[0], p[1], p[2]] } else { [p[0], p[0], p[0]] })
                .collect();
            Ok((info.width, info.height, rgb))
        })
        .collect::<Result<_, FigureError>>()?;
    let cell_w = decoded.iter().map(|d| d.0).max().unwrap_or(1);
    let cell_h = decoded.iter().map(|d| d.1).max().unwrap_or(1);
    let rows = figures.len().div_ceil(columns);
    let (width, height) = (cell_w * columns as u32, cell_h * rows as u32);
    if (width as u64) * (height as u64) > 64_000_000 {
        return Err(FigureError::Data(format!("{} panels of {cell_w} x {cell_h} pixels make too large a picture", figures.len())));
    }
    let mut canvas = vec![255u8; width as usize * height as usize * 3];
    for (k, (w, h, rgb)) in decoded.iter().enumerate() {
        let (x0, y0) = ((k % columns) as u32 * cell_w, (k / columns) as u32 * cell_h);
        for y in 0..*h {
            let src = &rgb[(y * w * 3) as usize..((y + 1) * w * 3) as usize];
            let start = (((y0 + y) * width + x0) * 3) as usize;
            canvas[start..start + src.len()].copy_from_slice(src);
        }
    }
    let mut png_bytes = Vec::new();
    {
        let mut encoder = png::Encoder::new(&mut png_bytes, width, height);
        encoder.set_color(png::ColorType::Rgb);
        encoder.set_depth(png::BitDepth::Eight);
        let mut writer = encoder.write_header().map_err(|e| FigureError::Data(e.to_string()))?;
        writer.write_image_data(&canvas).map_err(|e| FigureError::Data(e.to_string()))?;
    }
    let mut bundle = MimeBundle::plain(format!("{title}: {} panels", figures.len()));
    // SVG: each panel's own SVG placed in a grid, sized by its CSS size.
    let sizes: Vec<(f64, f64)> = figures.iter().map(|b| b.text("image/svg+xml").map(svg_size).unwrap_or((cell_w as f64, cell_h as f64))).collect();
    let (sw, sh) = (sizes.iter().map(|s| s.0).fold(0.0, f64::max), sizes.iter().map(|s| s.1).fold(0.0, f64::max));
    let mut svg = format!("<svg xmlns=\"http://www.w3.org/2000/svg\" width=\"{}\" height=\"{}\" viewBox=\"0 0 {} {}\">", sw * columns as f64, sh * rows as f64, sw * columns as f64, sh * rows as f64);
    for (k, b) in figures.iter().enumerate() {
        let (x, y) = ((k % columns) as f64 * sw, (k / columns) as f64 * sh);
        match b.text("image/svg+xml") {
            Some(child) => {
                let body = child.trim_start().strip_prefix("<?xml").map(|r| r.split_once("?>").map_or(r, |x| x.1)).unwrap_or(child).trim_start();
                // A nested <svg> is positioned by x and y (SVG 1.1, 7.9).
                let positioned = body.replacen("<svg", &format!("<svg x=\"{x}\" y=\"{y}\""), 1);
                svg.push_str(&positioned);
            }
            None => svg.push_str(&format!(
                "<image x=\"{x}\" y=\"{y}\" width=\"{sw}\" height=\"{sh}\" href=\"data:image/png;base64,{}\"/>",
                base64::engine::general_purpose::STANDARD.encode(b.binary("image/png").unwrap_or_default())
            )),
        }
    }
    svg.push_str("</svg>");
    bundle.insert_text("image/svg+xml", svg);
    bundle.insert_binary("image/png", png_bytes);
    Ok(bundle)
}

/// The CSS width and height an SVG declares (its first width= and height=).
fn svg_size(svg: &str) -> (f64, f64) {
    let attribute = |name: &str| -> Option<f64> {
        let start = svg.find(&format!("{name}=\""))? + name.len() + 2;
        svg[start..].split('"').next()?.trim_end_matches("px").parse().ok()
    };
    (attribute("width").unwrap_or(900.0), attribute("height").unwrap_or(600.0))
}
