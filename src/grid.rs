//! The data model: latitude-longitude grids, fields with named dimensions and
//! coordinates, and vector fields.
//!
//! Invariants (relied on by `physics` and `io`):
//! - a field's data are always 4-D in the canonical order
//!   [time, pressure level, latitude, longitude]; an absent dimension has
//!   length 1 and its coordinate is `None`;
//! - latitudes and longitudes keep the order of the source (either order);
//!   the physics uses the coordinate values, never an assumed direction;
//! - pressure levels are in Pa, in the source's order;
//! - missing data are NaN.

use std::sync::Arc;

use ndarray::{Array4, ArrayView3, ArrayView4, Axis};

/// Names of the four canonical dimensions, in storage order.
pub const DIMENSION_NAMES: [&str; 4] = ["time", "pressure", "latitude", "longitude"];

/// A horizontal latitude-longitude grid.
#[derive(Debug, Clone, PartialEq)]
pub struct Grid {
    /// Latitudes in degrees north, in source order (monotonic).
    pub latitudes: Vec<f64>,
    /// Longitudes in degrees east, in source order (monotonic, may be 0..360
    /// or -180..180).
    pub longitudes: Vec<f64>,
    /// True when the longitudes cover the whole circle: the grid is then
    /// periodic in longitude and has no edge there.
    pub global: bool,
    /// A projected grid (Lambert conformal, polar stereographic, rotated
    /// pole). Then `latitudes` holds the grid's y coordinates and
    /// `longitudes` its x coordinates (metres, or rotated degrees), and the
    /// true latitude, longitude, map factor and wind rotation of every
    /// point live here. The physics entry points (`physics::differences`,
    /// `physics::geostrophic`) take this branch themselves; every vector
    /// they return is eastward/northward.
    pub projection: Option<Arc<crate::projection::ProjectedGrid>>,
}

impl Grid {
    /// Builds a grid, deciding whether it is global: it is when the
    /// longitudes, spaced uniformly, close the circle (n * spacing = 360
    /// degrees within a tenth of a spacing). Common practice, no source.
    pub fn new(latitudes: Vec<f64>, longitudes: Vec<f64>) -> Self {
        let global = closes_circle(&longitudes);
        Self { latitudes, longitudes, global, projection: None }
    }

    /// A projected grid: the 1-D coordinates are the projection's y and x.
    pub fn projected(projected: crate::projection::ProjectedGrid) -> Self {
        Self { latitudes: projected.y.clone(), longitudes: projected.x.clone(), global: false, projection: Some(Arc::new(projected)) }
    }

    /// True latitude of the point at (row, column), in degrees.
    pub fn latitude_at(&self, row: usize, column: usize) -> f64 {
        match &self.projection {
            Some(p) => p.latitude[row * p.x.len() + column],
            None => self.latitudes[row],
        }
    }

    pub fn shape(&self) -> (usize, usize) {
        (self.latitudes.len(), self.longitudes.len())
    }

    /// True when latitude decreases along the array (north first).
    pub fn north_to_south(&self) -> bool {
        self.latitudes.len() > 1 && self.latitudes[0] > self.latitudes[self.latitudes.len() - 1]
    }

    /// Mean latitude spacing in degrees (absolute), 0 for one row.
    pub fn latitude_spacing(&self) -> f64 {
        mean_spacing(&self.latitudes)
    }

    /// Mean longitude spacing in degrees (absolute), 0 for one column.
    pub fn longitude_spacing(&self) -> f64 {
        mean_spacing(&self.longitudes)
    }

    /// (south, north, west, east) edges of the grid's points, in degrees.
    pub fn extent(&self) -> (f64, f64, f64, f64) {
        if let Some(p) = &self.projection {
            let (south, north) = min_max(&p.latitude);
            let (west, east) = min_max(&p.longitude);
            return (south, north, west, east);
        }
        let (south, north) = min_max(&self.latitudes);
        let (west, east) = min_max(&self.longitudes);
        (south, north, west, east)
    }

    /// One-line description for tables and errors.
    pub fn describe(&self) -> String {
        let (s, n, w, e) = self.extent();
        if let Some(p) = &self.projection {
            return format!(
                "{} x {} points on a {} grid, latitude {:.2} to {:.2}, longitude {:.2} to {:.2} ({})",
                self.latitudes.len(),
                self.longitudes.len(),
                p.projection.cf_name(),
                s,
                n,
                w,
                e,
                p.projection.describe()
            );
        }
        format!(
            "{} x {} points, latitude {:.2} to {:.2} ({}), longitude {:.2} to {:.2}{}, spacing {:.3} x {:.3} degrees",
            self.latitudes.len(),
            self.longitudes.len(),
            s,
            n,
            if self.north_to_south() { "north first" } else { "south first" },
            w,
            e,
            if self.global { " (global, periodic)" } else { "" },
            self.latitude_spacing(),
            self.longitude_spacing()
        )
    }
}

fn closes_circle(longitudes: &[f64]) -> bool {
    let n = longitudes.len();
    if n < 3 {
        return false;
    }
    let spacing = mean_spacing(longitudes);
    spacing > 0.0 && ((n as f64) * spacing - 360.0).abs() < 0.1 * spacing
}

fn mean_spacing(values: &[f64]) -> f64 {
    if values.len() < 2 {
        0.0
    } else {
        (values[values.len() - 1] - values[0]).abs() / (values.len() - 1) as f64
    }
}

fn min_max(values: &[f64]) -> (f64, f64) {
    values.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), &v| (lo.min(v), hi.max(v)))
}

/// The time coordinate as stored (CF: "hours since ..." and a calendar).
#[derive(Debug, Clone, PartialEq)]
pub struct TimeAxis {
    pub values: Vec<f64>,
    pub units: String,
    pub calendar: String,
}

impl TimeAxis {
    /// ISO-8601 labels of the times; a value that cannot be decoded is shown
    /// as the raw number with its units.
    pub fn labels(&self) -> Vec<String> {
        match crate::calendar::CfTimeUnits::parse(&self.units, &self.calendar) {
            Ok(units) => self
                .values
                .iter()
                .map(|&v| match units.decode(v) {
                    Ok(t) => t.to_string(),
                    Err(_) => format!("{v} {}", self.units),
                })
                .collect(),
            Err(_) => self.values.iter().map(|v| format!("{v} {}", self.units)).collect(),
        }
    }

    pub fn select(&self, indices: &[usize]) -> TimeAxis {
        TimeAxis {
            values: indices.iter().map(|&i| self.values[i]).collect(),
            units: self.units.clone(),
            calendar: self.calendar.clone(),
        }
    }
}

/// A scalar field: data with named dimensions, coordinates and metadata.
#[derive(Debug, Clone)]
pub struct Field {
    /// Short name (a NetCDF variable name).
    pub name: String,
    /// Human-readable description.
    pub long_name: String,
    /// udunits/CF unit string.
    pub units: String,
    /// A real CF standard name, only where one fits.
    pub standard_name: Option<String>,
    /// [time, level, latitude, longitude]; NaN marks missing data.
    pub data: Array4<f32>,
    /// Time coordinate, `None` when the field has no time dimension.
    pub times: Option<TimeAxis>,
    /// Pressure levels (Pa), `None` when the field has no vertical dimension
    /// (a layer result, a surface field).
    pub levels: Option<Vec<f64>>,
    pub grid: Arc<Grid>,
    /// Extra metadata written as NetCDF attributes (for example the width of
    /// the equatorial mask, or the layer a result belongs to).
    pub attributes: Vec<(String, String)>,
}

impl Field {
    /// Assembles a field, checking that the data's shape matches the
    /// coordinates. Fails with a message naming both shapes.
    pub fn new(
        name: impl Into<String>,
        units: impl Into<String>,
        data: Array4<f32>,
        times: Option<TimeAxis>,
        levels: Option<Vec<f64>>,
        grid: Arc<Grid>,
    ) -> Result<Self, String> {
        let shape = data.shape();
        let expected = [
            times.as_ref().map_or(1, |t| t.values.len()),
            levels.as_ref().map_or(1, |l| l.len()),
            grid.latitudes.len(),
            grid.longitudes.len(),
        ];
        if shape != expected {
            return Err(format!("data shape {shape:?} does not match coordinates {expected:?} (time, pressure, latitude, longitude)"));
        }
        let name = name.into();
        Ok(Self {
            long_name: name.clone(),
            name,
            units: units.into(),
            standard_name: None,
            data,
            times,
            levels,
            grid,
            attributes: Vec::new(),
        })
    }

    pub fn with_long_name(mut self, long_name: impl Into<String>) -> Self {
        self.long_name = long_name.into();
        self
    }

    pub fn with_standard_name(mut self, standard_name: Option<&str>) -> Self {
        self.standard_name = standard_name.map(str::to_string);
        self
    }

    pub fn with_attribute(mut self, key: impl Into<String>, value: impl Into<String>) -> Self {
        self.attributes.push((key.into(), value.into()));
        self
    }

    /// A new field on the same coordinates with other data and metadata.
    /// Fails if the shape differs.
    pub fn derived(&self, name: &str, units: &str, data: Array4<f32>) -> Result<Field, String> {
        Field::new(name, units, data, self.times.clone(), self.levels.clone(), self.grid.clone())
    }

    /// A new field on the same grid and times but with no vertical dimension.
    pub fn derived_without_levels(&self, name: &str, units: &str, data: Array4<f32>) -> Result<Field, String> {
        Field::new(name, units, data, self.times.clone(), None, self.grid.clone())
    }

    /// Number of time steps (1 when there is no time dimension).
    pub fn time_count(&self) -> usize {
        self.data.shape()[0]
    }

    /// Number of levels (1 when there is no vertical dimension).
    pub fn level_count(&self) -> usize {
        self.data.shape()[1]
    }

    /// The dimensions the field really has, by name, with their lengths.
    pub fn dimensions(&self) -> Vec<(&'static str, usize)> {
        let shape = self.data.shape();
        let mut dims = Vec::new();
        if self.times.is_some() {
            dims.push((DIMENSION_NAMES[0], shape[0]));
        }
        if self.levels.is_some() {
            dims.push((DIMENSION_NAMES[1], shape[1]));
        }
        dims.push((DIMENSION_NAMES[2], shape[2]));
        dims.push((DIMENSION_NAMES[3], shape[3]));
        dims
    }

    /// View as [time*level, latitude, longitude] slices: the shape the
    /// horizontal operators in `physics` take. Zero-copy for standard-layout
    /// data (the only layout Baroc constructs).
    pub fn horizontal_slices(&self) -> ArrayView3<'_, f32> {
        horizontal_slices(self.data.view())
    }

    /// Index of the level nearest `pressure` (Pa) if it is a data level
    /// (within 0.01 Pa).
    pub fn level_index(&self, pressure: f64) -> Option<usize> {
        self.levels.as_ref()?.iter().position(|&p| (p - pressure).abs() < 0.01)
    }

    /// Minimum, maximum and mean of the valid (non-NaN) values, and their
    /// count. The mean is accumulated in f64.
    pub fn statistics(&self) -> Statistics {
        Statistics::of(self.data.iter().copied())
    }

    /// The field at one time step index (keeping the time coordinate of that
    /// step). Fails with the number of steps when out of range.
    pub fn at_time_index(&self, index: usize) -> Result<Field, String> {
        if index >= self.time_count() {
            return Err(format!("time step {index} is out of range: the field has {} time steps", self.time_count()));
        }
        let data = self.data.slice_axis(Axis(0), ndarray::Slice::from(index..index + 1)).to_owned();
        let mut field = self.clone_with_data(data);
        field.times = self.times.as_ref().map(|t| t.select(&[index]));
        Ok(field)
    }

    /// The field on one data level (the level dimension removed, the level
    /// recorded as an attribute).
    pub fn at_level_index(&self, index: usize) -> Result<Field, String> {
        let levels = self.levels.as_ref().ok_or_else(|| format!("{} has no pressure levels", self.name))?;
        let pressure = *levels.get(index).ok_or_else(|| format!("level {index} out of range"))?;
        let data = self.data.slice_axis(Axis(1), ndarray::Slice::from(index..index + 1)).to_owned();
        let mut field = self.clone_with_data(data);
        field.levels = None;
        field.attributes.push(("pressure_level".into(), format!("{} hPa", pressure / 100.0)));
        Ok(field)
    }

    fn clone_with_data(&self, data: Array4<f32>) -> Field {
        Field {
            name: self.name.clone(),
            long_name: self.long_name.clone(),
            units: self.units.clone(),
            standard_name: self.standard_name.clone(),
            data,
            times: self.times.clone(),
            levels: self.levels.clone(),
            grid: self.grid.clone(),
            attributes: self.attributes.clone(),
        }
    }
}

/// Reshapes a standard-layout 4-D view into [time*level, latitude, longitude].
pub fn horizontal_slices(data: ArrayView4<'_, f32>) -> ArrayView3<'_, f32> {
    let (t, l, y, x) = data.dim();
    data.into_shape_with_order((t * l, y, x)).expect("fields are stored in standard layout")
}

/// Summary statistics of valid values; NaN values are counted as missing,
/// never averaged in.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct Statistics {
    pub minimum: f64,
    pub maximum: f64,
    pub mean: f64,
    pub valid: usize,
    pub missing: usize,
}

impl Statistics {
    pub fn of(values: impl Iterator<Item = f32>) -> Self {
        let (mut minimum, mut maximum, mut sum, mut valid, mut missing) = (f64::INFINITY, f64::NEG_INFINITY, 0.0f64, 0usize, 0usize);
        for v in values {
            if v.is_nan() {
                missing += 1;
            } else {
                let v = v as f64;
                minimum = minimum.min(v);
                maximum = maximum.max(v);
                sum += v;
                valid += 1;
            }
        }
        if valid == 0 {
            return Self { minimum: f64::NAN, maximum: f64::NAN, mean: f64::NAN, valid, missing };
        }
        Self { minimum, maximum, mean: sum / valid as f64, valid, missing }
    }
}

/// A horizontal vector field: eastward and northward components on one grid.
#[derive(Debug, Clone)]
pub struct VectorField {
    pub eastward: Field,
    pub northward: Field,
}

impl VectorField {
    /// Pairs two components; fails unless they share grid, levels and times.
    pub fn new(eastward: Field, northward: Field) -> Result<Self, String> {
        if eastward.data.shape() != northward.data.shape() || eastward.grid != northward.grid || eastward.levels != northward.levels {
            return Err(format!(
                "the components {} {:?} and {} {:?} are not on the same grid",
                eastward.name,
                eastward.data.shape(),
                northward.name,
                northward.data.shape()
            ));
        }
        Ok(Self { eastward, northward })
    }

    /// Speed sqrt(u^2 + v^2), NaN where either component is missing.
    pub fn speed(&self) -> Field {
        let mut data = self.eastward.data.clone();
        ndarray::Zip::from(&mut data).and(&self.northward.data).par_for_each(|u, &v| *u = u.hypot(v));
        let mut field = self.eastward.clone_with_data(data);
        field.name = format!("{}_speed", self.name());
        field.long_name = format!("speed of {}", strip_component(&self.eastward.long_name));
        field.standard_name = None;
        field
    }

    /// The vector's own name, from its components' names without the
    /// component word: `thermal_eastward_wind_1000_500hPa` and
    /// `thermal_northward_wind_1000_500hPa` make `thermal_wind_1000_500hPa`,
    /// `eastward_wind` makes `wind`, `shear_eastward` makes `shear`. Speed
    /// and direction take this name, so they say what vector they measure.
    pub fn name(&self) -> String {
        let east = without_component(&self.eastward.name, "eastward");
        let north = without_component(&self.northward.name, "northward");
        match (east, north) {
            (Some(e), Some(n)) if e == n => e,
            (Some(e), _) => e,
            _ => self.eastward.name.clone(),
        }
    }

    /// The name of the vector's direction (the direction it blows from).
    pub fn direction_name(&self) -> String {
        format!("{}_direction", self.name())
    }
}

/// `name` without the word `component` (as a whole `_`-separated word);
/// None when the word is not in it or nothing would be left.
fn without_component(name: &str, component: &str) -> Option<String> {
    let words: Vec<&str> = name.split('_').collect();
    let position = words.iter().position(|w| *w == component)?;
    let rest: Vec<&str> = words.iter().enumerate().filter(|(i, _)| *i != position).map(|(_, w)| *w).collect();
    let joined = rest.join("_");
    (!joined.is_empty()).then_some(joined)
}

fn strip_component(long_name: &str) -> String {
    long_name.replace("eastward component of ", "").replace("eastward ", "")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn global_grid_is_detected() {
        let lons: Vec<f64> = (0..144).map(|i| i as f64 * 2.5).collect();
        assert!(Grid::new(vec![0.0, 1.0], lons).global);
        let regional: Vec<f64> = (0..40).map(|i| -60.0 + i as f64).collect();
        assert!(!Grid::new(vec![0.0, 1.0], regional).global);
    }

    #[test]
    fn speed_and_direction_take_the_vector_name() {
        // Names as the trade says them: the speed of the thermal wind is the
        // thermal wind speed, not the speed of its eastward component
        // (common practice, no source).
        let grid = std::sync::Arc::new(Grid::new(vec![0.0, 1.0], vec![0.0, 1.0]));
        let field = |name: &str| Field::new(name, "m s-1", ndarray::Array4::zeros((1, 1, 2, 2)), None, None, grid.clone()).unwrap();
        for (east, north, name) in [
            ("thermal_eastward_wind_1000_500hPa", "thermal_northward_wind_1000_500hPa", "thermal_wind_1000_500hPa"),
            ("eastward_wind", "northward_wind", "wind"),
            ("geostrophic_eastward_wind", "geostrophic_northward_wind", "geostrophic_wind"),
            ("shear_eastward", "shear_northward", "shear"),
            ("u", "v", "u"),
        ] {
            let w = VectorField::new(field(east), field(north)).unwrap();
            assert_eq!(w.name(), name);
            assert_eq!(w.speed().name, format!("{name}_speed"));
            assert_eq!(w.direction_name(), format!("{name}_direction"));
        }
    }

    #[test]
    fn statistics_skip_missing_values() {
        let s = Statistics::of([1.0f32, f32::NAN, 3.0].into_iter());
        assert_eq!((s.minimum, s.maximum, s.mean, s.valid, s.missing), (1.0, 3.0, 2.0, 2, 1));
    }
}
