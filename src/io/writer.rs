//! Writing results as CF NetCDF.
//!
//! Every variable carries units and long_name, a standard_name only when a
//! real one was attached, and the dataset a `history` line saying what made
//! it. The file is written under a temporary name in the target directory
//! and renamed at the end, so no run leaves a half-written file.
//!
//! How the bytes reach the disk: a netCDF-4 output up to `IN_MEMORY_LIMIT` is built
//! by netCDF-C as an image in memory (`io::netcdf_raw`)
//! and written to the temporary file straight from HDF5's memory, past the
//! page cache (`atomic::write_all_direct_with_head`), because a new file written through the
//! page cache was found to cost several times the rest of a run on virtual
//! machines (first use of page-cache pages; figures in that function's
//! comment). Larger outputs are written by netCDF-C straight to the file,
//! so memory never holds a large output twice, as are netCDF-3 files (see
//! `io::netcdf_raw` for why). Both ways give the same
//! dimensions, variables, attributes and values, in the same order
//! (tests/writer_paths.rs).

use std::path::Path;

use super::netcdf_raw::{ImageRoute, ImageWritten, Kind, RawFile, GLOBAL};
use super::DataError;
use crate::grid::Field;

/// NetCDF's default fill for floats (netCDF-C `NC_FILL_FLOAT`), written as
/// _FillValue so readers see NaN data as missing.
pub const FILL_VALUE: f32 = 9.969_21e36;

/// File format of the output.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Format {
    /// NetCDF-4 (HDF5-based), the default.
    #[default]
    Netcdf4,
    /// NetCDF-3 classic, for old tools.
    Classic,
}

/// Options for `write_fields`.
#[derive(Debug, Clone, Default)]
pub struct WriteOptions {
    pub format: Format,
    /// The `history` line (what produced the file).
    pub history: String,
    /// Further global attributes (for example the recipe text).
    pub global_attributes: Vec<(String, String)>,
    /// NetCDF-4 outputs whose data take at most this many bytes are built in memory
    /// and written in one go; `None` means `IN_MEMORY_LIMIT`, `Some(0)`
    /// writes every output straight to its file.
    pub memory_image_limit: Option<usize>,
}

fn write_error(path: &Path, e: impl std::fmt::Display) -> DataError {
    DataError::Netcdf { path: path.display().to_string(), message: e.to_string() }
}

/// Writes fields that share one horizontal grid to `path`, atomically.
/// Fields may differ in levels and times: each distinct level set or time
/// axis gets its own dimension (`pressure`, `pressure_2`, ...). Fails, leaving
/// no file behind, on a grid mismatch, a duplicate name, or an I/O error.
pub fn write_fields(path: &Path, fields: &[&Field], options: &WriteOptions) -> Result<(), DataError> {
    let named: Vec<(&str, &Field)> = fields.iter().map(|f| (f.name.as_str(), *f)).collect();
    write_named_fields(path, &named, options)
}

/// As `write_fields`, each field written under the name given beside it
/// (the field itself is not renamed, so results are written without a copy).
pub fn write_named_fields(path: &Path, named: &[(&str, &Field)], options: &WriteOptions) -> Result<(), DataError> {
    let Some(&(first_name, first)) = named.first() else {
        return Err(DataError::Invalid("nothing to write: no fields".into()));
    };
    for &(name, f) in named {
        if f.grid != first.grid {
            return Err(DataError::GridMismatch {
                first: first_name.to_string(),
                first_grid: first.grid.describe(),
                second: name.to_string(),
                second_grid: f.grid.describe(),
            });
        }
    }
    for (i, (a, _)) in named.iter().enumerate() {
        if named[..i].iter().any(|(b, _)| b == a) {
            return Err(DataError::Invalid(format!("two results are both named `{a}`")));
        }
    }
    let temporary = crate::atomic::temporary_beside(path).map_err(|e| write_error(path, e))?;
    let netcdf4 = options.format == Format::Netcdf4;
    let data_bytes: usize = named.iter().map(|(_, f)| f.data.len() * std::mem::size_of::<f32>()).sum();
    if netcdf4 && data_bytes <= options.memory_image_limit.unwrap_or(IN_MEMORY_LIMIT) {
        // Built in memory, then written from HDF5's memory past the page
        // cache (`atomic::write_all_direct_with_head`): see the module comment.
        let started = std::time::Instant::now();
        let written = super::netcdf_thread::call(|| -> Result<ImageWritten, String> {
            let mut file = RawFile::create_in_memory(data_bytes + HEADER_ROOM)?;
            define_and_write(&mut file, named, options)?;
            file.close_into_file(&temporary)
        })
        .map_err(|e| write_error(path, e))?;
        let built = started.elapsed().saturating_sub(written.writing);
        super::timings::record_write(built, written.writing, written.bytes as u64, written.route == ImageRoute::DriverMemory);
    } else {
        super::netcdf_thread::call(|| -> Result<(), String> {
            let mut file = RawFile::create(&temporary, netcdf4)?;
            define_and_write(&mut file, named, options)?;
            file.close()
        })
        .map_err(|e| write_error(path, e))?;
    }
    crate::atomic::publish(temporary, path).map_err(|e| write_error(path, e))?;
    Ok(())
}

/// Outputs up to this size (their data, in bytes) are built in memory and
/// written in one go; larger ones are written by netCDF-C straight to the
/// file, so the image never doubles a large output's memory.
pub const IN_MEMORY_LIMIT: usize = 1 << 30;

/// Room beyond the data for the header, coordinates and HDF5's own
/// structures, so the in-memory image seldom grows by copying.
const HEADER_ROOM: usize = 1 << 20;

/// Defines the file's dimensions, variables and attributes and writes all
/// values, NaN written as `FILL_VALUE`.
fn define_and_write(file: &mut RawFile, named: &[(&str, &Field)], options: &WriteOptions) -> Result<(), String> {
    let fields: Vec<&Field> = named.iter().map(|&(_, f)| f).collect();
    let grid = &fields[0].grid;
    file.put_text(GLOBAL, "Conventions", "CF-1.8")?;
    file.put_text(GLOBAL, "title", "Baroc diagnostics")?;
    file.put_text(GLOBAL, "source", &format!("Baroc {}", env!("CARGO_PKG_VERSION")))?;
    file.put_text(GLOBAL, "history", &options.history)?;
    file.put_text(
        GLOBAL,
        "comment",
        "Baroc is an analysis tool, not a warning service. For forecasts and warnings, defer to your national meteorological service and local practice.",
    )?;
    for (k, v) in &options.global_attributes {
        file.put_text(GLOBAL, k, v)?;
    }

    let latitude = file.add_dimension("latitude", grid.latitudes.len())?;
    let longitude = file.add_dimension("longitude", grid.longitudes.len())?;
    // Distinct level sets and time axes each get a dimension.
    let mut level_sets: Vec<&Vec<f64>> = Vec::new();
    let mut time_axes: Vec<&crate::grid::TimeAxis> = Vec::new();
    for f in &fields {
        if let Some(l) = &f.levels {
            if !level_sets.contains(&l) {
                level_sets.push(l);
            }
        }
        if let Some(t) = &f.times {
            if !time_axes.contains(&t) {
                time_axes.push(t);
            }
        }
    }
    let suffixed = |base: &str, i: usize| if i == 0 { base.to_string() } else { format!("{base}_{}", i + 1) };
    let mut level_dimensions = Vec::new();
    for (i, levels) in level_sets.iter().enumerate() {
        level_dimensions.push(file.add_dimension(&suffixed("pressure", i), levels.len())?);
    }
    let mut time_dimensions = Vec::new();
    for (i, t) in time_axes.iter().enumerate() {
        time_dimensions.push(file.add_dimension(&suffixed("time", i), t.values.len())?);
    }

    let latitude_variable;
    let longitude_variable;
    if let Some(projected) = &grid.projection {
        // A projected grid: its own y/x coordinates and a CF grid mapping
        // (io::projected reads them back). The dimensions keep their names.
        let angular = projected.projection.is_angular();
        let mut ids = [0; 2];
        for (id, (name, dimension, standard_name, axis)) in ids.iter_mut().zip([
            ("latitude", latitude, if angular { "grid_latitude" } else { "projection_y_coordinate" }, "Y"),
            ("longitude", longitude, if angular { "grid_longitude" } else { "projection_x_coordinate" }, "X"),
        ]) {
            let v = file.add_variable(name, Kind::Double, &[dimension])?;
            file.put_text(v, "units", if angular { "degrees" } else { "m" })?;
            file.put_text(v, "standard_name", standard_name)?;
            file.put_text(v, "axis", axis)?;
            *id = v;
        }
        [latitude_variable, longitude_variable] = ids;
        let m = file.add_variable("grid_mapping", Kind::Int, &[])?;
        file.put_text(m, "grid_mapping_name", projected.projection.cf_name())?;
        for (name, values) in projected.projection.cf_attributes() {
            file.put_doubles(m, name, &values)?;
        }
    } else {
        latitude_variable = file.add_variable("latitude", Kind::Double, &[latitude])?;
        for (k, v) in [("units", "degrees_north"), ("standard_name", "latitude"), ("long_name", "latitude"), ("axis", "Y")] {
            file.put_text(latitude_variable, k, v)?;
        }
        longitude_variable = file.add_variable("longitude", Kind::Double, &[longitude])?;
        for (k, v) in [("units", "degrees_east"), ("standard_name", "longitude"), ("long_name", "longitude"), ("axis", "X")] {
            file.put_text(longitude_variable, k, v)?;
        }
    }
    let mut level_variables = Vec::new();
    for (i, &dimension) in level_dimensions.iter().enumerate() {
        let v = file.add_variable(&suffixed("pressure", i), Kind::Double, &[dimension])?;
        for (k, value) in [("units", "Pa"), ("standard_name", "air_pressure"), ("long_name", "pressure level"), ("positive", "down"), ("axis", "Z")] {
            file.put_text(v, k, value)?;
        }
        level_variables.push(v);
    }
    let mut time_variables = Vec::new();
    for (i, (&dimension, t)) in time_dimensions.iter().zip(&time_axes).enumerate() {
        let v = file.add_variable(&suffixed("time", i), Kind::Double, &[dimension])?;
        file.put_text(v, "units", &t.units)?;
        file.put_text(v, "calendar", &t.calendar)?;
        for (k, value) in [("standard_name", "time"), ("long_name", "time"), ("axis", "T")] {
            file.put_text(v, k, value)?;
        }
        time_variables.push(v);
    }
    let mut variables = Vec::new();
    for &(name, f) in named {
        let mut dimensions = Vec::new();
        if let Some(t) = &f.times {
            dimensions.push(time_dimensions[time_axes.iter().position(|x| *x == t).expect("collected")]);
        }
        if let Some(l) = &f.levels {
            dimensions.push(level_dimensions[level_sets.iter().position(|x| *x == l).expect("collected")]);
        }
        dimensions.push(latitude);
        dimensions.push(longitude);
        let v = file.add_variable(name, Kind::Float, &dimensions)?;
        // Every value of the variable is written below, so netCDF's
        // pre-filling of its storage with the fill value would be written
        // only to be overwritten: no-fill mode. _FillValue is still set as
        // an attribute, so readers see the missing values as missing.
        file.set_no_fill(v)?;
        file.put_float(v, "_FillValue", FILL_VALUE)?;
        file.put_text(v, "units", &crate::units::spelling(&f.units))?;
        file.put_text(v, "long_name", &f.long_name)?;
        if let Some(s) = &f.standard_name {
            file.put_text(v, "standard_name", s)?;
        }
        if grid.projection.is_some() {
            file.put_text(v, "grid_mapping", "grid_mapping")?;
        }
        for (k, value) in &f.attributes {
            file.put_text(v, k, value)?;
        }
        variables.push(v);
    }
    // NetCDF-3 files leave define mode before data are written; netCDF-4
    // files may too, and writing the header once is cheaper.
    file.end_definitions()?;
    file.put_doubles_from_start(latitude_variable, "latitude", &grid.latitudes)?;
    file.put_doubles_from_start(longitude_variable, "longitude", &grid.longitudes)?;
    for (&v, levels) in level_variables.iter().zip(&level_sets) {
        file.put_doubles_from_start(v, "pressure", levels)?;
    }
    for (&v, t) in time_variables.iter().zip(&time_axes) {
        file.put_doubles_from_start(v, "time", &t.values)?;
    }
    // One horizontal slab at a time through a buffer reused for all, NaN
    // written as the fill value: no copy of a whole field.
    let (rows, columns) = (grid.latitudes.len(), grid.longitudes.len());
    let mut slab = vec![0f32; rows * columns];
    for (&(name, f), &v) in named.iter().zip(&variables) {
        let (times, levels) = (f.data.shape()[0], f.data.shape()[1]);
        for t in 0..times {
            for l in 0..levels {
                let values = f.data.index_axis(ndarray::Axis(0), t);
                let values = values.index_axis(ndarray::Axis(0), l);
                match values.as_slice() {
                    Some(contiguous) => {
                        for (out, &x) in slab.iter_mut().zip(contiguous) {
                            *out = if x.is_nan() { FILL_VALUE } else { x };
                        }
                    }
                    None => {
                        for (out, &x) in slab.iter_mut().zip(values.iter()) {
                            *out = if x.is_nan() { FILL_VALUE } else { x };
                        }
                    }
                }
                let (mut start, mut count) = (Vec::with_capacity(4), Vec::with_capacity(4));
                if f.times.is_some() {
                    start.push(t);
                    count.push(1);
                }
                if f.levels.is_some() {
                    start.push(l);
                    count.push(1);
                }
                start.extend([0, 0]);
                count.extend([rows, columns]);
                file.put_floats(v, name, &start, &count, &slab)?;
            }
        }
    }
    Ok(())
}
