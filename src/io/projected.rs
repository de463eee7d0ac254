//! Projected grids in CF NetCDF: the `grid_mapping` attribute of a data
//! variable names a variable whose attributes describe the projection (CF
//! conventions, section 5.6 and appendix F); the grid's x and y coordinates
//! carry the standard names projection_x_coordinate / projection_y_coordinate
//! (or grid_longitude / grid_latitude for a rotated pole).
//!
//! Also: grid-relative wind components (standard names x_wind / y_wind or
//! grid_eastward_wind / grid_northward_wind) turned to eastward/northward
//! with the angle of each point (`ProjectedGrid::rotate_to_earth`).

use std::path::Path;
use std::sync::Arc;

use super::cf;
use super::DataError;
use crate::grid::{Field, Grid};
use crate::projection::{ProjectedGrid, Projection};

/// Standard names of grid-relative components and their partners.
pub const GRID_RELATIVE_X: [&str; 2] = ["x_wind", "grid_eastward_wind"];
pub const GRID_RELATIVE_Y: [&str; 2] = ["y_wind", "grid_northward_wind"];

/// Factor to metres of a projection coordinate's units (m or km); 1 for
/// units that are not lengths (rotated grids use degrees).
pub fn length_factor(units: &str) -> f64 {
    match units.trim() {
        "km" | "kilometre" | "kilometer" | "kilometres" | "kilometers" => 1000.0,
        _ => 1.0,
    }
}

/// The projected grid of `variable`, when it names a grid mapping that is
/// not plain latitude-longitude. `y` and `x` are its coordinate values
/// (metres or rotated degrees). Grids are cached by mapping name and size,
/// as every variable of a file usually shares one. Errors name the file,
/// the variable and the missing or invalid parameter.
pub fn grid_for(
    file: &netcdf::File,
    variable: &netcdf::Variable,
    y: &[f64],
    x: &[f64],
    path: &Path,
    cache: &mut Vec<(String, usize, usize, Arc<Grid>)>,
) -> Result<Option<Arc<Grid>>, DataError> {
    let Some(mapping_name) = cf::attribute_text(variable, "grid_mapping") else { return Ok(None) };
    // CF 1.7 also allows "name: coordinates ..."; the first word names the variable.
    let mapping_name = mapping_name.split_whitespace().next().unwrap_or_default().trim_end_matches(':').to_string();
    let error = |message: String| DataError::GridMapping { path: path.display().to_string(), variable: variable.name(), message };
    if let Some((_, _, _, grid)) = cache.iter().find(|(n, ny, nx, _)| *n == mapping_name && *ny == y.len() && *nx == x.len()) {
        return Ok(Some(grid.clone()));
    }
    let mapping = file
        .variable(&mapping_name)
        .ok_or_else(|| error(format!("its grid_mapping names `{mapping_name}`, which is not a variable of the file")))?;
    let kind = cf::attribute_text(&mapping, "grid_mapping_name")
        .ok_or_else(|| error(format!("the grid mapping `{mapping_name}` has no grid_mapping_name attribute")))?;
    if kind == "latitude_longitude" {
        return Ok(None);
    }
    let number = |name: &str| cf::attribute_number(&mapping, name);
    let (projection, notes) = Projection::from_cf(&kind, &number, crate::constants::EARTH_RADIUS).map_err(|e| error(e.to_string()))?;
    let _ = notes;
    let grid = Arc::new(Grid::projected(ProjectedGrid::new(projection, x.to_vec(), y.to_vec())));
    cache.push((mapping_name, y.len(), x.len(), grid.clone()));
    Ok(Some(grid))
}

/// Rows and columns (inclusive ranges) of the smallest block of a projected
/// grid holding every cell whose centre lies in a latitude-longitude box.
pub fn block_in_box(grid: &ProjectedGrid, south: f64, north: f64, west: f64, east: f64) -> Option<(std::ops::RangeInclusive<usize>, std::ops::RangeInclusive<usize>)> {
    let cells = grid.cells_in_box(south, north, west, east);
    let rows = cells.iter().map(|c| c.0);
    let cols = cells.iter().map(|c| c.1);
    Some((rows.clone().min()?..=rows.max()?, cols.clone().min()?..=cols.max()?))
}

/// The sub-grid of rows and columns of a projected grid.
pub fn sub_grid(grid: &ProjectedGrid, rows: &[usize], columns: &[usize]) -> Grid {
    let x = columns.iter().map(|&i| grid.x[i]).collect();
    let y = rows.iter().map(|&j| grid.y[j]).collect();
    Grid::projected(ProjectedGrid::new(grid.projection.clone(), x, y))
}

/// Turns a grid-relative component to earth-relative using its partner
/// (both read with the same selection): returns the eastward component when
/// `component` is along x, the northward one when along y. The angle range
/// is recorded in the field's attributes.
pub fn rotate_component(component: Field, partner: &Field, along_x: bool) -> Result<Field, String> {
    let projected = component.grid.projection.clone().ok_or_else(|| format!("{} is grid-relative but its grid has no projection", component.name))?;
    if partner.data.shape() != component.data.shape() {
        return Err(format!("the grid-relative components {} and {} differ in shape", component.name, partner.name));
    }
    let (mut gx, mut gy) = if along_x { (component.data.clone(), partner.data.clone()) } else { (partner.data.clone(), component.data.clone()) };
    projected.rotate_to_earth(gx.as_slice_mut().ok_or("layout")?, gy.as_slice_mut().ok_or("layout")?);
    let angles: Vec<f64> = projected.east_cos.iter().zip(&projected.east_sin).map(|(c, s)| s.atan2(*c).to_degrees()).collect();
    let (lo, hi) = angles.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| (a.min(v), b.max(v)));
    let mut field = component;
    field.data = if along_x { gx } else { gy };
    field.standard_name = Some(if along_x { "eastward_wind" } else { "northward_wind" }.into());
    field.attributes.push((
        "wind_rotation".into(),
        format!(
            "rotated from grid-relative ({} and {}) to earth-relative by the angle between grid and earth axes, {lo:.4} to {hi:.4} degrees ({})",
            if along_x { &field.name } else { &partner.name },
            if along_x { &partner.name } else { &field.name },
            projected.projection.cf_name()
        ),
    ));
    Ok(field)
}
