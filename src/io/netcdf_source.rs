//! A `DataSource` over one NetCDF file (NetCDF-3 classic or NetCDF-4),
//! through the netcdf crate. The file is opened read-only, scanned once for
//! coordinates and variables, and reopened for each read (cheap, and keeps
//! the source `Send + Sync`; the netcdf crate serialises netCDF-C calls
//! behind one lock, so reads run on one thread and the physics in parallel).

use std::path::{Path, PathBuf};
use std::sync::Arc;

use ndarray::{Array4, ArrayD, Axis as NdAxis, IxDyn};
use netcdf::Extent;

use super::cf::{self, Axis};
use super::{DataError, DataSource, Selection, VariableInfo};
use crate::grid::{Field, Grid, TimeAxis};

/// A read's selection: the variable (its index and name) and the indices
/// wanted along each canonical axis, with the longitudes of the ones
/// wanted made monotonic across the seam.
struct Plan {
    k: usize,
    name: String,
    time_indices: Vec<usize>,
    level_indices: Vec<usize>,
    lat_indices: Vec<usize>,
    lon_indices: Vec<usize>,
    out_lons: Vec<f64>,
}

impl Plan {
    fn indices(&self) -> [&[usize]; 4] {
        [&self.time_indices, &self.level_indices, &self.lat_indices, &self.lon_indices]
    }

    fn shape(&self) -> (usize, usize, usize, usize) {
        (self.time_indices.len(), self.level_indices.len(), self.lat_indices.len(), self.lon_indices.len())
    }
}

/// How one variable's dimensions map onto the canonical axes.
#[derive(Debug, Clone)]
struct Layout {
    /// For each file dimension of the variable: its axis, or None for a
    /// dimension of length 1 that Baroc ignores.
    axes: Vec<Option<Axis>>,
}

/// Unpacking and masking rules of one variable (CF section 8.1 and 2.5.1).
#[derive(Debug, Clone, Copy, Default)]
struct Packing {
    scale_factor: Option<f64>,
    add_offset: Option<f64>,
    fill_value: Option<f64>,
    missing_value: Option<f64>,
    valid_min: Option<f64>,
    valid_max: Option<f64>,
}

#[derive(Debug)]
pub struct NetcdfSource {
    path: PathBuf,
    variables: Vec<VariableInfo>,
    layouts: Vec<Layout>,
    packings: Vec<Packing>,
    /// Where each variable's values lie, for those read without netCDF-C
    /// (io::direct_read); None for the rest.
    storages: Vec<Option<super::direct_read::Storage>>,
    global_attributes: Vec<(String, String)>,
}

fn netcdf_error(path: &Path, e: impl std::fmt::Display) -> DataError {
    DataError::Netcdf { path: path.display().to_string(), message: e.to_string() }
}

/// A coordinate found in the file: its axis and values in canonical units.
#[derive(Debug, Clone)]
struct Coordinate {
    axis: Axis,
    values: Vec<f64>,
    units: String,
    calendar: String,
}

impl NetcdfSource {
    /// Opens `path` read-only and scans it. Fails if the file cannot be
    /// opened, or if it holds no variable on a recognisable latitude-longitude
    /// grid (the error names the dimensions found).
    pub fn open(path: impl AsRef<Path>) -> Result<Self, DataError> {
        let path = path.as_ref().to_path_buf();
        super::netcdf_thread::call(move || Self::open_here(path))
    }

    fn open_here(path: PathBuf) -> Result<Self, DataError> {
        // A truncated classic file opens, and reads its missing part as
        // zeros: refused before the library sees it. Other failures are
        // explained from the file's bytes (io::file_check).
        if let Some(finding) = super::file_check::before_open(&path) {
            return Err(DataError::Open { path: path.display().to_string(), message: finding.explain() });
        }
        let file = netcdf::open(&path).map_err(|e| DataError::Open { path: path.display().to_string(), message: super::file_check::explain_open_failure(&path, &e.to_string()) })?;
        // Coordinate variables: one-dimensional, named like their dimension.
        let mut coordinates: Vec<(String, Coordinate)> = Vec::new();
        let mut refused_verticals: Vec<(String, String)> = Vec::new();
        for variable in file.variables() {
            let dims = variable.dimensions();
            if dims.len() != 1 || dims[0].name() != variable.name() {
                continue;
            }
            // Hybrid model levels are read by io::model_levels, not as pressure.
            if super::model_levels::is_hybrid_coordinate(&variable) {
                continue;
            }
            // Vertical coordinates are recognised first (CF 4.3, appendix D),
            // so data on height, sigma or isentropic levels are refused in
            // those words rather than as a missing horizontal coordinate.
            if let Some(refusal) = cf::classify_vertical(&cf::VerticalAttributes::of(&variable)).and_then(|k| k.refusal(&variable.name())) {
                refused_verticals.push((variable.name(), refusal));
                continue;
            }
            let Some(axis) = cf::classify_coordinate(&variable) else { continue };
            let raw: Vec<f64> = variable.get_values::<f64, _>(..).map_err(|e| netcdf_error(&path, e))?;
            let units = cf::attribute_text(&variable, "units").unwrap_or_default();
            let values = match axis {
                Axis::Pressure => {
                    let factor = cf::pressure_factor(&units).ok_or_else(|| DataError::NotAPressure {
                        path: path.display().to_string(),
                        variable: variable.name(),
                        units: units.clone(),
                    })?;
                    raw.iter().map(|p| p * factor).collect()
                }
                // Projection coordinates in km become metres (io::projected).
                Axis::Latitude | Axis::Longitude if cf::attribute_text(&variable, "standard_name").is_some_and(|s| s.starts_with("projection_")) => {
                    let factor = super::projected::length_factor(&units);
                    raw.iter().map(|v| v * factor).collect()
                }
                _ => raw,
            };
            let calendar = cf::attribute_text(&variable, "calendar").unwrap_or_else(|| "standard".into());
            coordinates.push((variable.name(), Coordinate { axis, values, units, calendar }));
        }
        let find = |dim: &str| coordinates.iter().find(|(n, _)| n == dim).map(|(_, c)| c);

        let mut variables = Vec::new();
        let mut layouts = Vec::new();
        let mut packings = Vec::new();
        let mut rejected: Vec<String> = Vec::new();
        let mut on_refused_vertical: Vec<(String, String)> = Vec::new();
        let mut unknown_dimensions: Vec<(String, String, usize)> = Vec::new();
        let mut projected_grids = Vec::new();
        for variable in file.variables() {
            let name = variable.name();
            if coordinates.iter().any(|(n, _)| *n == name) || variable.dimensions().len() < 2 {
                continue;
            }
            let mut axes = Vec::new();
            let (mut lat, mut lon, mut lev, mut time) = (None, None, None, None);
            let mut usable = true;
            for dim in variable.dimensions() {
                match find(&dim.name()) {
                    Some(c) => {
                        match c.axis {
                            Axis::Latitude => lat = Some(c),
                            Axis::Longitude => lon = Some(c),
                            Axis::Pressure => lev = Some(c),
                            Axis::Time => time = Some(c),
                        }
                        axes.push(Some(c.axis));
                    }
                    None if dim.len() == 1 => axes.push(None),
                    None => {
                        match refused_verticals.iter().find(|(n, _)| *n == dim.name()) {
                            Some((_, refusal)) => on_refused_vertical.push((name.clone(), refusal.clone())),
                            None => unknown_dimensions.push((name.clone(), dim.name(), dim.len())),
                        }
                        usable = false;
                        break;
                    }
                }
            }
            let (Some(lat), Some(lon), true) = (lat, lon, usable) else {
                rejected.push(format!("{name}({})", variable.dimensions().iter().map(|d| d.name()).collect::<Vec<_>>().join(", ")));
                continue;
            };
            let grid = match super::projected::grid_for(&file, &variable, &lat.values, &lon.values, &path, &mut projected_grids)? {
                Some(grid) => grid,
                None => Arc::new(Grid::new(lat.values.clone(), lon.values.clone())),
            };
            let packing = Packing {
                scale_factor: cf::attribute_number(&variable, "scale_factor").and_then(|v| v.first().copied()),
                add_offset: cf::attribute_number(&variable, "add_offset").and_then(|v| v.first().copied()),
                fill_value: cf::attribute_number(&variable, "_FillValue").and_then(|v| v.first().copied()),
                missing_value: cf::attribute_number(&variable, "missing_value").and_then(|v| v.first().copied()),
                valid_min: cf::attribute_number(&variable, "valid_range")
                    .and_then(|v| v.first().copied())
                    .or_else(|| cf::attribute_number(&variable, "valid_min").and_then(|v| v.first().copied())),
                valid_max: cf::attribute_number(&variable, "valid_range")
                    .and_then(|v| v.get(1).copied())
                    .or_else(|| cf::attribute_number(&variable, "valid_max").and_then(|v| v.first().copied())),
            };
            variables.push(VariableInfo {
                name: name.clone(),
                long_name: cf::attribute_text(&variable, "long_name"),
                units: cf::attribute_text(&variable, "units").unwrap_or_default(),
                standard_name: cf::attribute_text(&variable, "standard_name"),
                levels: lev.map(|c| c.values.clone()),
                times: time.map(|c| TimeAxis { values: c.values.clone(), units: c.units.clone(), calendar: c.calendar.clone() }),
                grid,
                attributes: cf::all_attributes(&variable),
                packed: packing.scale_factor.is_some() || packing.add_offset.is_some(),
            });
            layouts.push(Layout { axes });
            packings.push(packing);
        }
        // Data on a vertical coordinate Baroc does not read, and nothing on
        // pressure levels besides: say what the coordinate is.
        if let Some((_, refusal)) = on_refused_vertical.first().filter(|_| variables.iter().all(|v| v.levels.is_none())) {
            let names: Vec<&str> = on_refused_vertical.iter().filter(|(_, r)| r == refusal).map(|(n, _)| n.as_str()).collect();
            return Err(DataError::Refused { path: path.display().to_string(), message: format!("{refusal}; variables on it: {}", names.join(", ")) });
        }
        let has = |axis: Axis| coordinates.iter().any(|(_, c)| c.axis == axis);
        if variables.is_empty() && has(Axis::Latitude) && has(Axis::Longitude) {
            if let Some((variable, dimension, length)) = unknown_dimensions.first() {
                return Err(DataError::Refused {
                    path: path.display().to_string(),
                    message: format!(
                        "variable `{variable}` has a dimension `{dimension}` ({length} long) that is not a coordinate Baroc recognises: pressure levels need a coordinate variable `{dimension}` with standard_name air_pressure or units of pressure (Pa, hPa), times one with units \"hours since ...\" (CF conventions 4.3, 4.4)"
                    ),
                });
            }
        }
        if variables.is_empty() {
            let dims: Vec<String> = file.dimensions().map(|d| format!("{} ({})", d.name(), d.len())).collect();
            let axis = if coordinates.iter().any(|(_, c)| c.axis == Axis::Latitude) { "longitude" } else { "latitude" };
            return Err(DataError::NoCoordinate {
                path: path.display().to_string(),
                variable: if rejected.is_empty() { "(any)".into() } else { rejected.join(", ") },
                axis: axis.into(),
                expected: if axis == "latitude" { "degrees_north".into() } else { "degrees_east".into() },
                dimensions: dims,
            });
        }
        let global_attributes = file
            .attributes()
            .filter_map(|a| {
                let value = a.value().ok()?;
                let text = match value {
                    netcdf::AttributeValue::Str(s) => s,
                    other => cf::attribute_numbers(&other)?.iter().map(|x| x.to_string()).collect::<Vec<_>>().join(" "),
                };
                Some((a.name().to_string(), text))
            })
            .collect();
        // HDF5 is asked where values lie once netCDF-C has let go of the
        // file (io::direct_read::storage_of).
        drop(file);
        let names: Vec<String> = variables.iter().map(|v| v.name.clone()).collect();
        let storages = super::direct_read::storage_of(&path, &names);
        Ok(Self { path, variables, layouts, packings, storages, global_attributes })
    }

    pub fn path(&self) -> &Path {
        &self.path
    }

    /// Whether reads of variable `name` may bypass netCDF-C
    /// (io::direct_read: stored as one plain block of little-endian f32).
    pub fn reads_directly(&self, name: &str) -> bool {
        self.index_of(name).is_ok_and(|k| self.storages[k].is_some())
    }

    /// The same source with every read going through netCDF-C (for
    /// comparisons; `BAROC_DIRECT_READ=0` does the same for a whole run).
    pub fn through_netcdf_only(mut self) -> Self {
        self.storages.iter_mut().for_each(|s| *s = None);
        self
    }

    fn index_of(&self, name: &str) -> Result<usize, DataError> {
        self.variables.iter().position(|v| v.name == name).ok_or_else(|| DataError::MissingVariable {
            path: self.label(),
            name: name.to_string(),
            available: self.variables.iter().map(|v| v.name.clone()).collect(),
            suggestion: String::new(),
        })
    }
}

/// The position of an axis in the canonical order [time, level, latitude,
/// longitude].
fn canonical(axis: Axis) -> usize {
    match axis {
        Axis::Time => 0,
        Axis::Pressure => 1,
        Axis::Latitude => 2,
        Axis::Longitude => 3,
    }
}

/// The extents of a selection that one read delivers in canonical order:
/// every wanted index set is one increasing contiguous run, and the
/// variable's dimensions come in canonical order (ignored singleton
/// dimensions anywhere). None otherwise.
fn direct_extents(layout: &Layout, indices: [&[usize]; 4]) -> Option<Vec<Extent>> {
    let mut last = None;
    let mut extents = Vec::with_capacity(layout.axes.len());
    for axis in &layout.axes {
        match axis {
            None => extents.push(Extent::from(0..1)),
            Some(axis) => {
                let position = canonical(*axis);
                if last.is_some_and(|l| l >= position) {
                    return None;
                }
                last = Some(position);
                let wanted = indices[position];
                let first = *wanted.first()?;
                if wanted.windows(2).any(|w| w[1] != w[0] + 1) {
                    return None;
                }
                extents.push(Extent::from(first..first + wanted.len()));
            }
        }
    }
    Some(extents)
}

/// Contiguous runs of indices, as (first index, length).
fn runs(indices: &[usize]) -> Vec<(usize, usize)> {
    let mut out: Vec<(usize, usize)> = Vec::new();
    for &i in indices {
        match out.last_mut() {
            Some((start, len)) if *start + *len == i => *len += 1,
            _ => out.push((i, 1)),
        }
    }
    out
}

/// Longitude indices of a region, ordered west to east, with the output
/// longitudes made monotonic across the seam.
pub(crate) fn longitude_selection(longitudes: &[f64], region: &crate::physics::sampling::Region) -> (Vec<usize>, Vec<f64>) {
    let inside: Vec<usize> = (0..longitudes.len()).filter(|&i| region.contains(0.5 * (region.south + region.north), longitudes[i])).collect();
    if inside.is_empty() {
        return (inside, Vec::new());
    }
    // If the selection wraps past the end of the file's axis, start after the
    // gap so the box reads west to east.
    let mut order = inside.clone();
    if let Some(gap) = inside.windows(2).position(|w| w[1] != w[0] + 1) {
        order = inside[gap + 1..].iter().chain(inside[..=gap].iter()).copied().collect();
    }
    let mut values: Vec<f64> = order.iter().map(|&i| longitudes[i]).collect();
    for k in 1..values.len() {
        while values[k] < values[k - 1] {
            values[k] += 360.0;
        }
    }
    // Prefer the convention that keeps the region's western edge.
    let west = region.west;
    while values[0] - 360.0 >= west - 1e-9 {
        values.iter_mut().for_each(|v| *v -= 360.0);
    }
    (order, values)
}

impl DataSource for NetcdfSource {
    fn label(&self) -> String {
        self.path.display().to_string()
    }

    fn variables(&self) -> &[VariableInfo] {
        &self.variables
    }

    fn global_attributes(&self) -> Vec<(String, String)> {
        self.global_attributes.clone()
    }

    fn read(&self, name: &str, selection: &Selection) -> Result<Field, DataError> {
        // Only the raw read runs on the netCDF thread; unpacking runs here, in
        // parallel. (Parallel work on the netCDF thread could deadlock: rayon
        // workers may themselves be waiting for that thread.)
        let plan = self.plan(name, selection)?;
        // Plainly stored variables are read in parallel here, without
        // netCDF-C (io::direct_read); the rest on the netCDF thread.
        let data = match self.read_direct(&plan) {
            Some(data) => {
                super::timings::record_direct();
                data?
            }
            None => super::netcdf_thread::call(|| self.read_here(&plan))?,
        };
        let mut field = self.assemble(&plan, selection, data)?;
        unpack(&mut field.data, self.packings[plan.k]);
        Ok(field)
    }
}

impl NetcdfSource {
    /// What a read takes from the file: the variable and the indices wanted
    /// along each canonical axis (checked against its coordinates).
    fn plan(&self, name: &str, selection: &Selection) -> Result<Plan, DataError> {
        let k = self.index_of(name)?;
        let info = &self.variables[k];

        // Indices wanted along each canonical axis.
        let (time_indices, level_indices) = super::selected_indices(name, info, selection)?;
        let grid = &info.grid;
        let (lat_indices, lon_indices, out_lons) = match &selection.region {
            // A latitude-longitude box on a projected grid: the block of rows
            // and columns holding the cells inside it (inverse projection).
            Some(region) if grid.projection.is_some() => {
                let projected = grid.projection.as_ref().expect("checked");
                let (south, north, west, east) = (region.south, region.north, region.west, region.east);
                let (rows, cols) = super::projected::block_in_box(projected, south, north, west, east)
                    .ok_or_else(|| DataError::EmptyRegion { variable: name.into(), south, north, west, east, grid: grid.describe() })?;
                let cols: Vec<usize> = cols.collect();
                let xs = cols.iter().map(|&i| grid.longitudes[i]).collect();
                (rows.collect(), cols, xs)
            }
            Some(region) => {
                let lat: Vec<usize> = (0..grid.latitudes.len())
                    .filter(|&j| grid.latitudes[j] >= region.south - 1e-9 && grid.latitudes[j] <= region.north + 1e-9)
                    .collect();
                let (lon, lons) = longitude_selection(&grid.longitudes, region);
                if lat.is_empty() || lon.is_empty() {
                    let (south, north, west, east) = (region.south, region.north, region.west, region.east);
                    return Err(DataError::EmptyRegion { variable: name.into(), south, north, west, east, grid: grid.describe() });
                }
                (lat, lon, lons)
            }
            None => ((0..grid.latitudes.len()).collect(), (0..grid.longitudes.len()).collect(), grid.longitudes.clone()),
        };
        Ok(Plan { k, name: name.to_string(), time_indices, level_indices, lat_indices, lon_indices, out_lons })
    }

    /// The planned selection read by `io::direct_read`, when the variable
    /// is stored plainly and the selection is one block in canonical order;
    /// None to read through netCDF-C.
    fn read_direct(&self, plan: &Plan) -> Option<Result<Array4<f32>, DataError>> {
        let storage = self.storages[plan.k].as_ref()?;
        let layout = &self.layouts[plan.k];
        let indices = plan.indices();
        // File dimensions in canonical order only (else netCDF-C reorders).
        let positions: Vec<usize> = layout.axes.iter().flatten().map(|a| canonical(*a)).collect();
        if positions.windows(2).any(|w| w[1] <= w[0]) {
            return None;
        }
        let wanted: Vec<&[usize]> = layout.axes.iter().map(|axis| axis.map_or(&[0usize][..], |a| indices[canonical(a)])).collect();
        super::direct_read::read_block(&self.path, storage, &wanted, plan.shape()).map(|r| r.map_err(|e| netcdf_error(&self.path, format!("cannot read {}: {e}", plan.name))))
    }

    /// The planned selection read through netCDF-C (on the netCDF thread).
    fn read_here(&self, plan: &Plan) -> Result<Array4<f32>, DataError> {
        let (name, layout) = (plan.name.as_str(), &self.layouts[plan.k]);
        let shape = plan.shape();
        let indices = plan.indices();
        let file = netcdf::open(&self.path).map_err(|e| netcdf_error(&self.path, e))?;
        let variable = file.variable(name).ok_or_else(|| netcdf_error(&self.path, format!("variable {name} vanished")))?;
        let data = match direct_extents(layout, indices) {
            // The common case: one block, dimensions in canonical order. The
            // library writes straight into the array's own buffer (never
            // zeroed), in the array's order: no second buffer, no copy.
            Some(extents) => {
                let values: Vec<f32> = variable.get_values::<f32, _>(extents).map_err(|e| netcdf_error(&self.path, e))?;
                Array4::from_shape_vec(shape, values).map_err(|e| netcdf_error(&self.path, e))?
            }
            None => self.read_blocks(&variable, layout, shape, indices)?,
        };
        Ok(data)
    }

    /// The field of a planned selection, from its values.
    fn assemble(&self, plan: &Plan, selection: &Selection, data: Array4<f32>) -> Result<Field, DataError> {
        let (name, info) = (plan.name.as_str(), &self.variables[plan.k]);
        let grid = &info.grid;
        let Plan { time_indices, level_indices, lat_indices, lon_indices, out_lons, .. } = plan;
        let times = info.times.as_ref().map(|t| t.select(time_indices));
        let levels = info.levels.as_ref().map(|l| level_indices.iter().map(|&i| l[i]).collect());
        let out_grid = if let (Some(_), Some(projected)) = (&selection.region, &grid.projection) {
            Arc::new(super::projected::sub_grid(projected, lat_indices, lon_indices))
        } else if selection.region.is_some() {
            Arc::new(Grid::new(lat_indices.iter().map(|&j| grid.latitudes[j]).collect(), out_lons.clone()))
        } else {
            grid.clone()
        };
        let mut field = Field::new(name, info.units.clone(), data, times, levels, out_grid).map_err(DataError::Invalid)?;
        field.long_name = info.long_name.clone().unwrap_or_else(|| name.to_string());
        field.standard_name = info.standard_name.clone();
        Ok(field)
    }

    /// Reads a selection made of several blocks (a box across the seam of
    /// the longitudes, levels that are not neighbours) or stored in another
    /// order than [time, level, latitude, longitude]: one read per block,
    /// each placed into the array at its offsets.
    fn read_blocks(&self, variable: &netcdf::Variable, layout: &Layout, shape: (usize, usize, usize, usize), indices: [&[usize]; 4]) -> Result<Array4<f32>, DataError> {
        let mut data = Array4::<f32>::zeros(shape);
        let wanted = |axis: Axis| -> &[usize] { indices[canonical(axis)] };
        // The runs along each file dimension, and the Cartesian product of
        // them: one read per block.
        let dim_runs: Vec<Vec<(usize, usize)>> = layout.axes.iter().map(|a| a.map_or(vec![(0, 1)], |a| runs(wanted(a)))).collect();
        let mut block = vec![0usize; dim_runs.len()];
        loop {
            let extents: Vec<Extent> = block
                .iter()
                .zip(&dim_runs)
                .map(|(&b, r)| {
                    let (start, len) = r[b];
                    Extent::from(start..start + len)
                })
                .collect();
            let raw: ArrayD<f32> = variable.get::<f32, _>(extents).map_err(|e| netcdf_error(&self.path, e))?;
            // Output offsets of this block along each canonical axis.
            let mut offsets = [0usize; 4];
            for (d, axis) in layout.axes.iter().enumerate() {
                if let Some(axis) = axis {
                    offsets[canonical(*axis)] = dim_runs[d][..block[d]].iter().map(|r| r.1).sum();
                }
            }
            // Drop ignored singleton dims, then order the axes canonically.
            let mut view = raw.view();
            let mut present: Vec<usize> = Vec::new();
            for (d, axis) in layout.axes.iter().enumerate().rev() {
                match axis {
                    None => view = view.index_axis_move(NdAxis(d), 0),
                    Some(a) => present.insert(0, canonical(*a)),
                }
            }
            let mut order: Vec<usize> = (0..present.len()).collect();
            order.sort_by_key(|&i| present[i]);
            let mut view = view.permuted_axes(IxDyn(&order));
            let sorted_present: Vec<usize> = order.iter().map(|&i| present[i]).collect();
            for c in 0..4 {
                if !sorted_present.contains(&c) {
                    view = view.insert_axis(NdAxis(c));
                }
            }
            let view = view.into_dimensionality::<ndarray::Ix4>().map_err(|e| netcdf_error(&self.path, e))?;
            let (a, b, c, d) = view.dim();
            data.slice_mut(ndarray::s![
                offsets[0]..offsets[0] + a,
                offsets[1]..offsets[1] + b,
                offsets[2]..offsets[2] + c,
                offsets[3]..offsets[3] + d
            ])
            .assign(&view);
            // Next block (odometer over the runs).
            let mut d = block.len();
            loop {
                if d == 0 {
                    break;
                }
                d -= 1;
                block[d] += 1;
                if block[d] < dim_runs[d].len() {
                    break;
                }
                block[d] = 0;
            }
            if block.iter().all(|&b| b == 0) {
                break;
            }
        }
        Ok(data)
    }
}

/// Applies CF unpacking and masking in place: stored values equal to
/// _FillValue or missing_value, or outside valid_min/valid_max (compared in
/// stored units, as CF section 2.5.1 asks), become NaN; the rest become
/// stored * scale_factor + add_offset (CF section 8.1), computed in f64.
fn unpack(data: &mut Array4<f32>, packing: Packing) {
    let scale = packing.scale_factor.unwrap_or(1.0);
    let offset = packing.add_offset.unwrap_or(0.0);
    let fill = packing.fill_value.map(|v| v as f32);
    let missing = packing.missing_value.map(|v| v as f32);
    let (lo, hi) = (packing.valid_min.unwrap_or(f64::NEG_INFINITY), packing.valid_max.unwrap_or(f64::INFINITY));
    let trivial = scale == 1.0 && offset == 0.0;
    if trivial && fill.is_none() && missing.is_none() && lo == f64::NEG_INFINITY && hi == f64::INFINITY {
        // Nothing to unpack or mask: every value would map to itself.
        return;
    }
    data.par_mapv_inplace(|raw| {
        if Some(raw) == fill || Some(raw) == missing || (raw as f64) < lo || (raw as f64) > hi {
            f32::NAN
        } else if trivial {
            raw
        } else {
            (raw as f64 * scale + offset) as f32
        }
    });
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn runs_split_at_gaps() {
        assert_eq!(runs(&[0, 1, 2, 5, 6, 9]), vec![(0, 3), (5, 2), (9, 1)]);
    }

    #[test]
    fn longitude_box_across_the_seam_reads_west_to_east() {
        let lons: Vec<f64> = (0..36).map(|i| i as f64 * 10.0).collect();
        let region = crate::physics::sampling::Region { south: 0.0, north: 10.0, west: -20.0, east: 20.0 };
        let (idx, values) = longitude_selection(&lons, &region);
        assert_eq!(idx, vec![34, 35, 0, 1, 2]);
        assert_eq!(values, vec![-20.0, -10.0, 0.0, 10.0, 20.0]);
    }
}
