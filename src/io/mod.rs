//! Reading and writing gridded data.
//!
//! File access sits behind the small `DataSource` trait, so a reader can be
//! swapped (for example for a pure-Rust one) without touching the physics.
//! `Dataset` combines several sources into one view (one variable per file,
//! or one time per file) and finds variables by name or by physical role.
//!
//! Invariants: inputs are opened read-only; the reader applies
//! scale_factor/add_offset and turns _FillValue, missing_value and values
//! outside valid_range into NaN, once, here; coordinates come out in the
//! canonical units (degrees, Pa) whatever the file used.

pub mod cf;
pub mod dataset;
pub mod direct_read;
pub mod file_check;
pub mod grib2;
pub mod grib2_source;
pub mod grib2_unpack;
pub mod grib2_writer;
pub mod netcdf_raw;
pub mod netcdf_source;
pub mod model_level_source;
pub mod model_levels;
pub mod netcdf_thread;
pub mod projected;
pub mod timings;
pub mod writer;

pub use dataset::{Dataset, Role};

use std::sync::Arc;

use crate::grid::{Field, Grid, TimeAxis};
use crate::physics::sampling::Region;

/// What a reader knows of one variable before reading any data.
#[derive(Debug, Clone)]
pub struct VariableInfo {
    pub name: String,
    pub long_name: Option<String>,
    pub units: String,
    pub standard_name: Option<String>,
    /// Pressure levels (Pa) in file order, if the variable has a vertical
    /// dimension.
    pub levels: Option<Vec<f64>>,
    pub times: Option<TimeAxis>,
    pub grid: Arc<Grid>,
    /// The variable's own attributes, for provenance.
    pub attributes: Vec<(String, String)>,
    /// True if stored as packed integers (scale_factor / add_offset).
    pub packed: bool,
}

impl VariableInfo {
    /// Dimensions by canonical name, with lengths, for messages.
    pub fn describe_dimensions(&self) -> String {
        let mut parts = Vec::new();
        if let Some(t) = &self.times {
            parts.push(format!("time {}", t.values.len()));
        }
        if let Some(l) = &self.levels {
            parts.push(format!("pressure {}", l.len()));
        }
        // A projected grid's axes are projection coordinates (CF
        // projection_y_coordinate / projection_x_coordinate), not latitude
        // and longitude: name them so.
        let (rows, columns) = if self.grid.projection.is_some() { ("y", "x") } else { ("latitude", "longitude") };
        parts.push(format!("{rows} {}", self.grid.latitudes.len()));
        parts.push(format!("{columns} {}", self.grid.longitudes.len()));
        parts.join(", ")
    }
}

/// Which part of a variable to read. `None` means all of that dimension.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Selection {
    /// Time step indices, in the order wanted.
    pub times: Option<Vec<usize>>,
    /// Pressure levels (Pa) that must be data levels.
    pub levels: Option<Vec<f64>>,
    /// A latitude-longitude box.
    pub region: Option<Region>,
}

/// A source of gridded variables (one file, for the NetCDF reader).
pub trait DataSource: Send + Sync {
    /// A label for messages and provenance (the path, for files).
    fn label(&self) -> String;
    fn variables(&self) -> &[VariableInfo];
    /// Reads a selection of one variable as a field.
    fn read(&self, variable: &str, selection: &Selection) -> Result<Field, DataError>;
    /// Global attributes, for provenance.
    fn global_attributes(&self) -> Vec<(String, String)>;
    /// Why a role is absent when the source can tell (for example what
    /// computing it would need), added to the error of a role not found.
    fn missing_note(&self, _role: &str) -> Option<String> {
        None
    }
    /// Reads as `read`, with the physical constants of the program asking
    /// (a source that computes from the data, such as the hydrostatic
    /// integral on model levels, uses them; stored data ignore them).
    fn read_with_constants(&self, variable: &str, selection: &Selection, _constants: &crate::constants::Constants) -> Result<Field, DataError> {
        self.read(variable, selection)
    }
    /// Whether a read may ask for any pressure within the variable's range,
    /// not only its listed levels, and get it from the data in one step
    /// (model-level data interpolated straight from the model levels).
    fn reads_any_pressure(&self, _variable: &str) -> bool {
        false
    }
    /// What model-level data give below their lowest level, for a source
    /// holding model-level data; None otherwise.
    fn below_lowest_level(&self) -> Option<crate::physics::model_levels::BelowLowestLevel> {
        None
    }
}

/// Everything that can go wrong getting data; every message says what would
/// be valid.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum DataError {
    #[error("cannot open {path}: {message}")]
    Open { path: String, message: String },
    #[error("{path}: variable `{variable}`: {message}")]
    GridMapping { path: String, variable: String, message: String },
    #[error("{path}: variable `{name}` not found{suggestion}; available variables: {}", available.join(", "))]
    MissingVariable { path: String, name: String, available: Vec<String>, suggestion: String },
    #[error("no variable plays the role `{role}` in {sources}; roles found: {}", if found.is_empty() { "none".to_string() } else { found.join(", ") })]
    MissingRole { role: String, sources: String, found: Vec<String> },
    #[error("{path}: variable `{variable}` has no recognisable {axis} coordinate (looked for units {expected}, standard_name, axis, and the usual names); its dimensions are: {}", dimensions.join(", "))]
    NoCoordinate { path: String, variable: String, axis: String, expected: String, dimensions: Vec<String> },
    #[error("{path}: `{variable}` has units `{units}`, which is not a pressure (expected Pa, hPa or millibar)")]
    NotAPressure { path: String, variable: String, units: String },
    #[error("{variable}: {requested} hPa is not a data level; available levels (hPa): {}", available.iter().map(|p| format!("{p}")).collect::<Vec<_>>().join(", "))]
    LevelNotInData { variable: String, requested: f64, available: Vec<f64> },
    #[error("{variable} has no pressure levels, so a level cannot be selected")]
    NoLevels { variable: String },
    #[error("{variable}: time step {index} is out of range (0 to {last})")]
    TimeOutOfRange { variable: String, index: usize, last: usize },
    #[error("the region {south}..{north} N, {west}..{east} E holds no grid points of {variable} (grid: {grid})")]
    EmptyRegion { variable: String, south: f64, north: f64, west: f64, east: f64, grid: String },
    #[error("grids do not match: {first} has {first_grid}, but {second} has {second_grid}")]
    GridMismatch { first: String, first_grid: String, second: String, second_grid: String },
    #[error("{path}: {message}")]
    Netcdf { path: String, message: String },
    /// A file Baroc understands but cannot use, with the reason in the
    /// trade's words (a vertical coordinate other than pressure, a
    /// dimension with no coordinate).
    #[error("{path}: {message}")]
    Refused { path: String, message: String },
    #[error("{0}")]
    Invalid(String),
}

/// A plain-text description of a dataset: sources, variables with roles,
/// units and dimensions, grid, levels and times.
/// The time and level indices a selection asks of a variable, in the
/// variable's own order: every time and level when the selection names
/// none; a variable without a time axis has the one index 0 whatever is
/// asked. Levels match within a relative 1e-6 (a pressure read as hPa and
/// compared in Pa). Errors name the variable and what is available.
pub(crate) fn selected_indices(name: &str, info: &VariableInfo, selection: &Selection) -> Result<(Vec<usize>, Vec<usize>), DataError> {
    let time_count = info.times.as_ref().map_or(1, |t| t.values.len());
    let time_indices: Vec<usize> = match &selection.times {
        Some(wanted) if info.times.is_some() => {
            for &i in wanted {
                if i >= time_count {
                    return Err(DataError::TimeOutOfRange { variable: name.into(), index: i, last: time_count - 1 });
                }
            }
            wanted.clone()
        }
        _ => (0..time_count).collect(),
    };
    let level_indices: Vec<usize> = match (&selection.levels, &info.levels) {
        (Some(wanted), Some(levels)) => wanted
            .iter()
            .map(|&p| {
                levels.iter().position(|&l| (l - p).abs() <= 1e-6 * p.abs().max(1.0)).ok_or_else(|| DataError::LevelNotInData {
                    variable: name.into(),
                    requested: p / 100.0,
                    available: levels.iter().map(|l| l / 100.0).collect(),
                })
            })
            .collect::<Result<_, _>>()?,
        (Some(_), None) => return Err(DataError::NoLevels { variable: name.into() }),
        (None, levels) => (0..levels.as_ref().map_or(1, |l| l.len())).collect(),
    };
    Ok((time_indices, level_indices))
}

pub fn describe(dataset: &Dataset) -> String {
    let mut out = String::new();
    out.push_str(&format!("sources: {}\n", dataset.labels().join(", ")));
    let roles = dataset.roles();
    out.push_str("variables:\n");
    for v in dataset.variables() {
        let role = roles.iter().find(|(_, name)| *name == v.name).map(|(r, _)| format!(" [{}]", r.name())).unwrap_or_default();
        let long_name = v.long_name.as_deref().map(str::trim).filter(|l| !l.is_empty()).map(|l| format!("{l} ")).unwrap_or_default();
        out.push_str(&format!(
            "  {}{}: {}({}){}; {}\n",
            v.name,
            role,
            long_name,
            v.units,
            if v.packed { ", packed" } else { "" },
            v.describe_dimensions()
        ));
    }
    if let Some(v) = dataset.variables().next() {
        out.push_str(&format!("grid: {}\n", v.grid.describe()));
    }
    if let Some(levels) = dataset.variables().find_map(|v| v.levels.clone()) {
        out.push_str(&format!("levels (hPa): {}\n", levels.iter().map(|p| format!("{}", p / 100.0)).collect::<Vec<_>>().join(", ")));
    }
    if let Some(times) = dataset.variables().find_map(|v| v.times.clone()) {
        let labels = times.labels();
        out.push_str(&format!("times: {} step{}, {} to {}\n", labels.len(), if labels.len() == 1 { "" } else { "s" }, labels.first().cloned().unwrap_or_default(), labels.last().cloned().unwrap_or_default()));
    }
    out
}
