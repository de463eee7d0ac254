//! Hybrid sigma-pressure model levels in CF NetCDF (CF conventions,
//! appendix D, `atmosphere_hybrid_sigma_pressure_coordinate`): the vertical
//! coordinate's `formula_terms` name the variables holding a (or ap), b, ps
//! and p0. This module reads them, checks them against the number of model
//! levels, and brings a variable on model levels to pressure levels through
//! `physics::model_levels` (ln-p interpolation, below ground missing unless
//! the standard-lapse-rate option is chosen, recorded in the metadata).
//! Every error names the file.
//!
//! `NetcdfModelLevels` is the `ModelLevelStore` of one NetCDF file: the
//! file's ordinary variables through `NetcdfSource`, and its variables on
//! a hybrid sigma-pressure coordinate ([time,] level, y, x, the horizontal
//! dimensions those of the surface pressure named by formula_terms), read
//! level by level as stored, which `model_level_source::OnPressureLevels`
//! presents on pressure levels.

use std::path::Path;
use std::sync::Arc;

use ndarray::{Array3, Array4, Ix3, Ix4};

use super::{cf, DataError, DataSource};
use crate::constants::Constants;
use crate::grid::{Field, Grid};
use crate::physics::model_levels::{to_pressure_levels, BelowLowestLevel, HybridCoefficients, Quantity};

pub const STANDARD_NAME: &str = "atmosphere_hybrid_sigma_pressure_coordinate";

/// True for a coordinate variable of hybrid sigma-pressure model levels.
pub fn is_hybrid_coordinate(variable: &netcdf::Variable) -> bool {
    cf::attribute_text(variable, "standard_name").as_deref() == Some(STANDARD_NAME)
}

/// The hybrid description of one vertical coordinate.
#[derive(Debug, Clone, PartialEq)]
pub struct HybridLevels {
    pub coordinate: String,
    pub coefficients: HybridCoefficients,
    /// The variable holding surface pressure (formula term ps).
    pub surface_pressure: String,
}

fn error(path: &Path, variable: &str, message: String) -> DataError {
    DataError::GridMapping { path: path.display().to_string(), variable: variable.into(), message }
}

/// Parses "a: hyam b: hybm ps: PS p0: P0" into (term, variable) pairs.
pub fn parse_formula_terms(text: &str) -> Vec<(String, String)> {
    let words: Vec<&str> = text.split_whitespace().collect();
    words.chunks(2).filter_map(|pair| Some((pair.first()?.strip_suffix(':')?.to_string(), pair.get(1)?.to_string()))).collect()
}

impl HybridLevels {
    /// Reads the hybrid coefficients of the vertical coordinate
    /// `coordinate` of an open file. Fails, naming the file, when the
    /// coordinate is not hybrid sigma-pressure, a term is missing, or the
    /// coefficients do not match the number of levels.
    pub fn read(file: &netcdf::File, path: &Path, coordinate: &str) -> Result<Self, DataError> {
        let variable = file.variable(coordinate).ok_or_else(|| error(path, coordinate, "no such vertical coordinate".into()))?;
        let standard_name = cf::attribute_text(&variable, "standard_name").unwrap_or_default();
        if standard_name != STANDARD_NAME {
            return Err(error(path, coordinate, format!("the standard_name is `{standard_name}`, not {STANDARD_NAME}")));
        }
        let terms_text = cf::attribute_text(&variable, "formula_terms")
            .ok_or_else(|| error(path, coordinate, "a hybrid sigma-pressure coordinate needs formula_terms (a or ap, b, ps, and p0 with a)".into()))?;
        let terms = parse_formula_terms(&terms_text);
        let term = |name: &str| terms.iter().find(|(t, _)| t == name).map(|(_, v)| v.clone());
        let values = |name: &str| -> Result<Option<Vec<f64>>, DataError> {
            let Some(var_name) = term(name) else { return Ok(None) };
            let v = file.variable(&var_name).ok_or_else(|| error(path, coordinate, format!("formula term {name} names `{var_name}`, which is not in the file")))?;
            v.get_values::<f64, _>(..).map(Some).map_err(|e| error(path, coordinate, format!("cannot read {var_name}: {e}")))
        };
        let levels = variable.dimensions().first().map_or(0, |d| d.len());
        let b = values("b")?.ok_or_else(|| error(path, coordinate, format!("formula_terms `{terms_text}` lack the term b")))?;
        let surface_pressure = term("ps").ok_or_else(|| error(path, coordinate, format!("formula_terms `{terms_text}` lack the term ps")))?;
        let coefficients = match (values("ap")?, values("a")?, values("p0")?) {
            (Some(ap), _, _) => HybridCoefficients::from_ap(ap, b),
            (None, Some(a), Some(p0)) => {
                let p0 = p0.first().copied().unwrap_or(f64::NAN);
                HybridCoefficients::from_a_and_p0(a, b, p0)
            }
            (None, Some(_), None) => return Err(error(path, coordinate, format!("formula_terms `{terms_text}` give a but no p0"))),
            (None, None, _) => return Err(error(path, coordinate, format!("formula_terms `{terms_text}` give neither a nor ap"))),
        }
        .map_err(|m| error(path, coordinate, m))?;
        coefficients.check_level_count(levels).map_err(|m| error(path, coordinate, m))?;
        Ok(Self { coordinate: coordinate.into(), coefficients, surface_pressure })
    }
}

/// Reads `name` (dimensions [time,] level, y/lat, x/lon, the level being a
/// hybrid sigma-pressure coordinate) from a CF NetCDF file and interpolates
/// it to `targets` (Pa). `grid` is the variable's horizontal grid (as the
/// dataset reader builds it). Temperature, geopotential height and
/// geopotential are extrapolated by their own laws when `below` asks for
/// it (the temperature variable, for heights, is found by standard name).
pub fn read_on_pressure_levels(
    path: &Path,
    name: &str,
    grid: Arc<Grid>,
    targets: &[f64],
    below: BelowLowestLevel,
    constants: &Constants,
) -> Result<Field, DataError> {
    let path = path.to_path_buf();
    let name = name.to_string();
    let targets = targets.to_vec();
    let constants = constants.clone();
    super::netcdf_thread::call(move || {
        let file = netcdf::open(&path).map_err(|e| DataError::Open { path: path.display().to_string(), message: e.to_string() })?;
        let variable = file.variable(&name).ok_or_else(|| error(&path, &name, "no such variable".into()))?;
        let dims: Vec<String> = variable.dimensions().iter().map(|d| d.name()).collect();
        let level_dim = dims
            .iter()
            .find(|d| file.variable(d).and_then(|v| cf::attribute_text(&v, "standard_name")).as_deref() == Some(STANDARD_NAME))
            .ok_or_else(|| error(&path, &name, format!("none of its dimensions ({}) is a hybrid sigma-pressure coordinate", dims.join(", "))))?
            .clone();
        let levels = HybridLevels::read(&file, &path, &level_dim)?;
        let read4 = |var_name: &str| -> Result<Array4<f32>, DataError> {
            let v = file.variable(var_name).ok_or_else(|| error(&path, var_name, "no such variable".into()))?;
            let raw = v.get::<f32, _>(..).map_err(|e| error(&path, var_name, e.to_string()))?;
            match raw.ndim() {
                3 => Ok(raw.into_dimensionality::<Ix3>().map_err(|e| error(&path, var_name, e.to_string()))?.insert_axis(ndarray::Axis(0))),
                4 => raw.into_dimensionality::<Ix4>().map_err(|e| error(&path, var_name, e.to_string())),
                n => Err(error(&path, var_name, format!("{n} dimensions; expected [time,] level, y, x"))),
            }
        };
        let data = read4(&name)?;
        let ps_var = file.variable(&levels.surface_pressure).ok_or_else(|| error(&path, &levels.surface_pressure, "the surface pressure named by formula_terms is not in the file".into()))?;
        let ps_units = cf::attribute_text(&ps_var, "units").unwrap_or_else(|| "Pa".into());
        let factor = cf::pressure_factor(&ps_units).ok_or_else(|| error(&path, &levels.surface_pressure, format!("units `{ps_units}` are not a pressure")))?;
        let ps_raw = ps_var.get::<f32, _>(..).map_err(|e| error(&path, &levels.surface_pressure, e.to_string()))?;
        let ps: Array3<f32> = match ps_raw.ndim() {
            2 => ps_raw.into_dimensionality::<ndarray::Ix2>().map_err(|e| error(&path, &name, e.to_string()))?.insert_axis(ndarray::Axis(0)),
            3 => ps_raw.into_dimensionality::<Ix3>().map_err(|e| error(&path, &name, e.to_string()))?,
            n => return Err(error(&path, &levels.surface_pressure, format!("{n} dimensions; expected [time,] y, x"))),
        }
        .mapv(|v| (v as f64 * factor) as f32);
        let (nt, nk, ny, nx) = data.dim();
        levels.coefficients.check_level_count(nk).map_err(|m| error(&path, &name, m))?;
        if ps.dim().1 != ny || ps.dim().2 != nx || (ps.dim().0 != nt && ps.dim().0 != 1) {
            return Err(error(&path, &name, format!("surface pressure {:?} does not match the data {:?}", ps.dim(), data.dim())));
        }
        let ps = if ps.dim().0 == nt { ps } else { ndarray::concatenate(ndarray::Axis(0), &vec![ps.view(); nt]).expect("same shapes") };
        let pressure = levels.coefficients.level_pressure(ps.view());
        let standard_name = cf::attribute_text(&variable, "standard_name").unwrap_or_default();
        let temperature = match standard_name.as_str() {
            "geopotential_height" | "geopotential" => {
                let t_name = file
                    .variables()
                    .find(|v| cf::attribute_text(v, "standard_name").as_deref() == Some("air_temperature"))
                    .map(|v| v.name());
                t_name.map(|t| read4(&t)).transpose()?
            }
            _ => None,
        };
        let quantity = match (standard_name.as_str(), &temperature) {
            ("air_temperature", _) => Quantity::Temperature,
            ("geopotential_height", Some(t)) => Quantity::Height { temperature: t.view() },
            ("geopotential", Some(t)) => Quantity::Geopotential { temperature: t.view() },
            _ => Quantity::Other,
        };
        let out = to_pressure_levels(data.view(), pressure.view(), &targets, below, quantity, &constants).map_err(|m| error(&path, &name, m))?;
        let units = cf::attribute_text(&variable, "units").unwrap_or_default();
        let mut field = Field::new(name.clone(), units, out, None, Some(targets.clone()), grid).map_err(DataError::Invalid)?;
        field.standard_name = (!standard_name.is_empty()).then_some(standard_name);
        field.long_name = cf::attribute_text(&variable, "long_name").unwrap_or_else(|| name.clone());
        field.attributes.push(("vertical_interpolation".into(), format!("from hybrid sigma-pressure model levels ({}) linearly in ln p; {}", level_dim, below.note())));
        Ok(field)
    })
}

/// One model-level variable of a NetCDF file: where its dimensions are.
#[derive(Debug, Clone)]
struct Stored {
    has_time: bool,
    scale_factor: f64,
    add_offset: f64,
    fill: Option<f32>,
    missing: Option<f32>,
}

/// A NetCDF file with variables on hybrid sigma-pressure levels.
pub struct NetcdfModelLevels {
    plain: super::netcdf_source::NetcdfSource,
    model: Vec<super::model_level_source::ModelLevelVariable>,
    stored: Vec<Stored>,
}

impl std::fmt::Debug for NetcdfModelLevels {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("NetcdfModelLevels").field("path", &self.plain.path()).field("model", &self.model.len()).finish()
    }
}

impl NetcdfModelLevels {
    /// The store of the file behind `plain` when it has a hybrid
    /// sigma-pressure coordinate (`Ok(Ok(store))`), else the plain source
    /// back (`Ok(Err(plain))`). Fails, naming the file, when the
    /// coordinate's formula terms or coefficients are wrong.
    pub fn open(plain: super::netcdf_source::NetcdfSource) -> Result<Result<Self, super::netcdf_source::NetcdfSource>, DataError> {
        let path = plain.path().to_path_buf();
        let found = {
            let path = path.clone();
            super::netcdf_thread::call(move || -> Result<Vec<(super::model_level_source::ModelLevelVariable, Stored)>, DataError> {
                let file = netcdf::open(&path).map_err(|e| DataError::Open { path: path.display().to_string(), message: e.to_string() })?;
                let coordinates: Vec<String> = file
                    .variables()
                    .filter(|v| cf::attribute_text(v, "standard_name").as_deref() == Some(STANDARD_NAME) && v.dimensions().len() == 1)
                    .map(|v| v.dimensions()[0].name())
                    .collect();
                let mut found = Vec::new();
                for level_dim in coordinates {
                    let levels = HybridLevels::read(&file, &path, &level_dim)?;
                    for variable in file.variables() {
                        let dims: Vec<String> = variable.dimensions().iter().map(|d| d.name()).collect();
                        let Some(position) = dims.iter().position(|d| *d == level_dim) else { continue };
                        if dims.len() < 3 || variable.name() == level_dim {
                            continue;
                        }
                        let time_dim = (position == 1).then(|| dims[0].clone());
                        if position > 1 || dims.len() != position + 3 {
                            return Err(error(&path, &variable.name(), format!(
                                "its dimensions ({}) are not [time,] {level_dim}, y, x, the order Baroc reads on hybrid levels",
                                dims.join(", ")
                            )));
                        }
                        let times = match &time_dim {
                            Some(t) => {
                                let coordinate = file.variable(t).ok_or_else(|| error(&path, &variable.name(), format!("its time dimension `{t}` has no coordinate variable")))?;
                                let values = coordinate.get_values::<f64, _>(..).map_err(|e| error(&path, t, e.to_string()))?;
                                Some(crate::grid::TimeAxis {
                                    values,
                                    units: cf::attribute_text(&coordinate, "units").unwrap_or_default(),
                                    calendar: cf::attribute_text(&coordinate, "calendar").unwrap_or_else(|| "standard".into()),
                                })
                            }
                            None => None,
                        };
                        let number = |key: &str| cf::attribute_number(&variable, key).and_then(|v| v.first().copied());
                        let stored = Stored {
                            has_time: time_dim.is_some(),
                            scale_factor: number("scale_factor").unwrap_or(1.0),
                            add_offset: number("add_offset").unwrap_or(0.0),
                            fill: number("_FillValue").map(|v| v as f32),
                            missing: number("missing_value").map(|v| v as f32),
                        };
                        let info = VariableInfoParts {
                            name: variable.name(),
                            long_name: cf::attribute_text(&variable, "long_name"),
                            units: cf::attribute_text(&variable, "units").unwrap_or_default(),
                            standard_name: cf::attribute_text(&variable, "standard_name"),
                            times,
                            attributes: cf::all_attributes(&variable),
                            packed: number("scale_factor").is_some() || number("add_offset").is_some(),
                        };
                        let count = levels.coefficients.len();
                        let model = super::model_level_source::ModelLevelVariable {
                            info: info.with_grid(Arc::new(Grid::new(Vec::new(), Vec::new()))),
                            coefficients: levels.coefficients.clone(),
                            surface_pressure: levels.surface_pressure.clone(),
                            description: format!("model levels ({level_dim}, {count} levels)"),
                        };
                        found.push((model, stored));
                    }
                }
                Ok(found)
            })?
        };
        if found.is_empty() {
            return Ok(Err(plain));
        }
        let mut model = Vec::new();
        let mut stored = Vec::new();
        for (mut m, s) in found {
            // The horizontal grid is the surface pressure's, as the plain
            // reader built it (lat-lon or projected).
            // Without the surface pressure formula_terms name, the log of
            // surface pressure serves (ps = exp(lnsp)), as ECMWF-style
            // files carry it.
            if !plain.variables().iter().any(|v| v.name == m.surface_pressure) {
                if let Some(log) = plain.variables().iter().find(|v| super::model_level_source::is_log_surface_pressure(v)) {
                    m.surface_pressure = log.name.clone();
                }
            }
            let ps = plain.variables().iter().find(|v| v.name == m.surface_pressure).ok_or_else(|| {
                error(&path, &m.info.name, format!("its hybrid coordinate names the surface pressure `{}`, which is not a variable on the file's grid", m.surface_pressure))
            })?;
            m.info.grid = ps.grid.clone();
            model.push(m);
            stored.push(s);
        }
        Ok(Ok(Self { plain, model, stored }))
    }
}

/// A `VariableInfo` but its grid.
struct VariableInfoParts {
    name: String,
    long_name: Option<String>,
    units: String,
    standard_name: Option<String>,
    times: Option<crate::grid::TimeAxis>,
    attributes: Vec<(String, String)>,
    packed: bool,
}

impl VariableInfoParts {
    fn with_grid(self, grid: Arc<Grid>) -> super::VariableInfo {
        super::VariableInfo {
            name: self.name,
            long_name: self.long_name,
            units: self.units,
            standard_name: self.standard_name,
            levels: None,
            times: self.times,
            grid,
            attributes: self.attributes,
            packed: self.packed,
        }
    }
}

impl super::DataSource for NetcdfModelLevels {
    fn label(&self) -> String {
        self.plain.label()
    }

    fn variables(&self) -> &[super::VariableInfo] {
        self.plain.variables()
    }

    fn read(&self, variable: &str, selection: &super::Selection) -> Result<Field, DataError> {
        self.plain.read(variable, selection)
    }

    fn global_attributes(&self) -> Vec<(String, String)> {
        self.plain.global_attributes()
    }
}

impl super::model_level_source::ModelLevelStore for NetcdfModelLevels {
    fn model_level_variables(&self) -> &[super::model_level_source::ModelLevelVariable] {
        &self.model
    }

    fn read_model_levels(&self, name: &str, times: &[usize], levels: &[usize], region: Option<&crate::physics::sampling::Region>) -> Result<Field, DataError> {
        let path = self.plain.path().to_path_buf();
        let k = self.model.iter().position(|m| m.info.name == name).ok_or_else(|| error(&path, name, "not on hybrid model levels".into()))?;
        let (model, stored) = (&self.model[k], self.stored[k].clone());
        let grid = model.info.grid.clone();
        let (rows, cols, out_grid) = super::model_level_source::region_indices(&grid, region, name)?;
        let level_count = model.coefficients.len();
        if let Some(&bad) = levels.iter().find(|&&l| l >= level_count) {
            return Err(error(&path, name, format!("has {level_count} model levels; level index {bad} asked for")));
        }
        let time_count = model.info.times.as_ref().map_or(1, |t| t.values.len());
        if let Some(&bad) = times.iter().find(|&&t| t >= time_count) {
            return Err(DataError::TimeOutOfRange { variable: name.into(), index: bad, last: time_count.saturating_sub(1) });
        }
        let times_wanted: Vec<usize> = if stored.has_time { times.to_vec() } else { vec![0] };
        // The block of rows the region needs and every column (a region
        // across the seam of a global grid wraps in columns).
        let nx = grid.longitudes.len();
        let (row_start, row_end) = (rows.iter().copied().min().unwrap_or(0), rows.iter().copied().max().unwrap_or(0) + 1);
        let (col_start, col_end) = (0usize, nx);
        let levels_wanted = levels.to_vec();
        let name_owned = name.to_string();
        // Raw slabs on the netCDF thread: one read per time and level.
        let slabs: Vec<ndarray::ArrayD<f32>> = {
            let path = path.clone();
            super::netcdf_thread::call(move || -> Result<Vec<ndarray::ArrayD<f32>>, DataError> {
                let file = netcdf::open(&path).map_err(|e| DataError::Open { path: path.display().to_string(), message: e.to_string() })?;
                let variable = file.variable(&name_owned).ok_or_else(|| error(&path, &name_owned, "vanished from the file".into()))?;
                let mut out = Vec::new();
                for &t in &times_wanted {
                    for &l in &levels_wanted {
                        let mut extents: Vec<netcdf::Extent> = Vec::new();
                        if stored.has_time {
                            extents.push((t..t + 1).into());
                        }
                        extents.push((l..l + 1).into());
                        extents.push((row_start..row_end).into());
                        extents.push((col_start..col_end).into());
                        out.push(variable.get::<f32, _>(extents).map_err(|e| error(&path, &name_owned, e.to_string()))?);
                    }
                }
                Ok(out)
            })?
        };
        let shape = (times.len(), levels.len(), rows.len(), cols.len());
        let mut data = Array4::<f32>::from_elem(shape, f32::NAN);
        let nl = levels.len();
        for t in 0..times.len() {
            let source_t = if stored.has_time { t } else { 0 };
            for l in 0..nl {
                let slab = &slabs[source_t * nl + l];
                let slab = slab.view().into_shape_with_order((row_end - row_start, col_end - col_start)).map_err(|e| error(&path, name, e.to_string()))?;
                for (jo, &j) in rows.iter().enumerate() {
                    for (io, &i) in cols.iter().enumerate() {
                        let raw = slab[[j - row_start, i - col_start]];
                        data[[t, l, jo, io]] = if Some(raw) == stored.fill || Some(raw) == stored.missing || raw.is_nan() {
                            f32::NAN
                        } else {
                            (raw as f64 * stored.scale_factor + stored.add_offset) as f32
                        };
                    }
                }
            }
        }
        let out_times = model.info.times.as_ref().map(|t| t.select(times));
        let level_numbers = levels.iter().map(|&l| l as f64).collect();
        let mut field = Field::new(name, model.info.units.clone(), data, out_times, Some(level_numbers), out_grid).map_err(DataError::Invalid)?;
        field.standard_name = model.info.standard_name.clone();
        Ok(field)
    }
}
