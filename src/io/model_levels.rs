//! Hybrid sigma-pressure model levels in CF NetCDF (CF conventions,
//! appendix D, `atmosphere_hybrid_sigma_pressure_coordinate`): the vertical
//! coordinate's `formula_terms` name the variables holding a (or ap), b, ps
//! and p0. This module reads them, checks them against the number of model
//! levels, and brings a variable on model levels to pressure levels through
//! `physics::model_levels` (ln-p interpolation, below ground missing unless
//! the standard-lapse-rate option is chosen, recorded in the metadata).
//! Every error names the file.

use std::path::Path;
use std::sync::Arc;

use ndarray::{Array3, Array4, Ix3, Ix4};

use super::{cf, DataError};
use crate::constants::Constants;
use crate::grid::{Field, Grid};
use crate::physics::model_levels::{to_pressure_levels, BelowLowestLevel, HybridCoefficients, Quantity};

pub const STANDARD_NAME: &str = "atmosphere_hybrid_sigma_pressure_coordinate";

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
