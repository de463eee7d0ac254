//! Writing results as CF NetCDF.
//!
//! Every variable carries units and long_name, a standard_name only when a
//! real one was attached, and the dataset a `history` line saying what made
//! it. The file is written under a temporary name in the target directory
//! and renamed at the end, so no run leaves a half-written file.

use std::path::Path;

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
    super::netcdf_thread::call(|| write_into(&temporary, named, options).map_err(|e| e.to_string())).map_err(|e| write_error(path, e))?;
    crate::atomic::publish(temporary, path).map_err(|e| write_error(path, e))?;
    Ok(())
}

fn write_into(path: &Path, named: &[(&str, &Field)], options: &WriteOptions) -> Result<(), Box<dyn std::error::Error>> {
    let fields: Vec<&Field> = named.iter().map(|&(_, f)| f).collect();
    let mut file = match options.format {
        Format::Netcdf4 => netcdf::create(path)?,
        Format::Classic => netcdf::create_with(path, netcdf::Options::empty())?,
    };
    let grid = &fields[0].grid;
    file.add_attribute("Conventions", "CF-1.8")?;
    file.add_attribute("title", "Baroc diagnostics")?;
    file.add_attribute("source", format!("Baroc {}", env!("CARGO_PKG_VERSION")).as_str())?;
    file.add_attribute("history", options.history.as_str())?;
    file.add_attribute(
        "comment",
        "Baroc is an analysis tool, not a warning service. For forecasts and warnings, defer to your national meteorological service and local practice.",
    )?;
    for (k, v) in &options.global_attributes {
        file.add_attribute(k, v.as_str())?;
    }

    file.add_dimension("latitude", grid.latitudes.len())?;
    file.add_dimension("longitude", grid.longitudes.len())?;
    // Distinct level sets and time axes each get a dimension.
    let mut level_sets: Vec<Vec<f64>> = Vec::new();
    let mut time_axes: Vec<crate::grid::TimeAxis> = Vec::new();
    for f in &fields {
        if let Some(l) = &f.levels {
            if !level_sets.contains(l) {
                level_sets.push(l.clone());
            }
        }
        if let Some(t) = &f.times {
            if !time_axes.contains(t) {
                time_axes.push(t.clone());
            }
        }
    }
    let suffixed = |base: &str, i: usize| if i == 0 { base.to_string() } else { format!("{base}_{}", i + 1) };
    for (i, levels) in level_sets.iter().enumerate() {
        file.add_dimension(&suffixed("pressure", i), levels.len())?;
    }
    for (i, t) in time_axes.iter().enumerate() {
        file.add_dimension(&suffixed("time", i), t.values.len())?;
    }

    if let Some(projected) = &grid.projection {
        // A projected grid: its own y/x coordinates and a CF grid mapping
        // (io::projected reads them back). The dimensions keep their names.
        let angular = projected.projection.is_angular();
        for (name, standard_name, axis) in [
            ("latitude", if angular { "grid_latitude" } else { "projection_y_coordinate" }, "Y"),
            ("longitude", if angular { "grid_longitude" } else { "projection_x_coordinate" }, "X"),
        ] {
            let mut v = file.add_variable::<f64>(name, &[name])?;
            v.put_attribute("units", if angular { "degrees" } else { "m" })?;
            v.put_attribute("standard_name", standard_name)?;
            v.put_attribute("axis", axis)?;
        }
        let mut m = file.add_variable::<i32>("grid_mapping", &[])?;
        m.put_attribute("grid_mapping_name", projected.projection.cf_name())?;
        for (name, values) in projected.projection.cf_attributes() {
            m.put_attribute(name, values)?;
        }
    } else {
        {
            let mut v = file.add_variable::<f64>("latitude", &["latitude"])?;
            v.put_attribute("units", "degrees_north")?;
            v.put_attribute("standard_name", "latitude")?;
            v.put_attribute("long_name", "latitude")?;
            v.put_attribute("axis", "Y")?;
        }
        {
            let mut v = file.add_variable::<f64>("longitude", &["longitude"])?;
            v.put_attribute("units", "degrees_east")?;
            v.put_attribute("standard_name", "longitude")?;
            v.put_attribute("long_name", "longitude")?;
            v.put_attribute("axis", "X")?;
        }
    }
    for i in 0..level_sets.len() {
        let name = suffixed("pressure", i);
        let mut v = file.add_variable::<f64>(&name, &[&name])?;
        v.put_attribute("units", "Pa")?;
        v.put_attribute("standard_name", "air_pressure")?;
        v.put_attribute("long_name", "pressure level")?;
        v.put_attribute("positive", "down")?;
        v.put_attribute("axis", "Z")?;
    }
    for (i, t) in time_axes.iter().enumerate() {
        let name = suffixed("time", i);
        let mut v = file.add_variable::<f64>(&name, &[&name])?;
        v.put_attribute("units", t.units.as_str())?;
        v.put_attribute("calendar", t.calendar.as_str())?;
        v.put_attribute("standard_name", "time")?;
        v.put_attribute("long_name", "time")?;
        v.put_attribute("axis", "T")?;
    }
    let mut dims_of: Vec<Vec<String>> = Vec::new();
    for &(name, f) in named {
        let mut dims = Vec::new();
        if let Some(t) = &f.times {
            dims.push(suffixed("time", time_axes.iter().position(|x| x == t).expect("collected")));
        }
        if let Some(l) = &f.levels {
            dims.push(suffixed("pressure", level_sets.iter().position(|x| x == l).expect("collected")));
        }
        dims.push("latitude".into());
        dims.push("longitude".into());
        let dim_refs: Vec<&str> = dims.iter().map(String::as_str).collect();
        let mut v = file.add_variable::<f32>(name, &dim_refs)?;
        // Every value of the variable is written below, so netCDF's
        // pre-filling of its storage with the fill value would be written
        // only to be overwritten: no-fill mode. _FillValue is still set as
        // an attribute, so readers see the missing values as missing.
        // SAFETY (of set_nofill, which the netcdf crate marks unsafe because
        // unwritten parts of a no-fill variable read as whatever the disk
        // held): the loop below writes the whole variable before closing.
        unsafe { v.set_nofill()? };
        v.put_attribute("_FillValue", FILL_VALUE)?;
        v.put_attribute("units", crate::units::spelling(&f.units).as_str())?;
        v.put_attribute("long_name", f.long_name.as_str())?;
        if let Some(s) = &f.standard_name {
            v.put_attribute("standard_name", s.as_str())?;
        }
        if grid.projection.is_some() {
            v.put_attribute("grid_mapping", "grid_mapping")?;
        }
        for (k, value) in &f.attributes {
            v.put_attribute(k, value.as_str())?;
        }
        dims_of.push(dims);
    }
    if options.format == Format::Classic {
        // NetCDF-3 files leave define mode before data are written.
        file.enddef()?;
    }
    file.variable_mut("latitude").expect("defined").put_values(&grid.latitudes, ..)?;
    file.variable_mut("longitude").expect("defined").put_values(&grid.longitudes, ..)?;
    for (i, levels) in level_sets.iter().enumerate() {
        file.variable_mut(&suffixed("pressure", i)).expect("defined").put_values(levels, ..)?;
    }
    for (i, t) in time_axes.iter().enumerate() {
        file.variable_mut(&suffixed("time", i)).expect("defined").put_values(&t.values, ..)?;
    }
    for &(name, f) in named {
        let filled = f.data.mapv(|x| if x.is_nan() { FILL_VALUE } else { x });
        let mut v = file.variable_mut(name).expect("defined");
        match (f.times.is_some(), f.levels.is_some()) {
            (true, true) => v.put(filled.view(), ..)?,
            (true, false) => v.put(filled.index_axis(ndarray::Axis(1), 0), ..)?,
            (false, true) => v.put(filled.index_axis(ndarray::Axis(0), 0), ..)?,
            (false, false) => v.put(filled.index_axis(ndarray::Axis(0), 0).index_axis(ndarray::Axis(0), 0), ..)?,
        }
    }
    file.close()?;
    Ok(())
}
