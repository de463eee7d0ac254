//! Model-level data presented on pressure levels.
//!
//! A source that holds variables on hybrid sigma-pressure model levels (CF
//! `atmosphere_hybrid_sigma_pressure_coordinate`, GRIB2 fixed surface 105
//! with its vertical coordinate values) implements `ModelLevelStore`: it
//! lists those variables with their coefficients and reads chosen model
//! levels as stored. `OnPressureLevels` wraps such a store and is itself a
//! plain `DataSource`: every model-level variable appears under its own name
//! on pressure levels (the standard isobaric levels within the model's
//! range; a read may ask for any other pressure too), so every operator,
//! picture, recipe, the runner and the kernel use it unchanged. A read:
//!
//! 1. reads the surface pressure of the selection (times, region);
//! 2. computes which model levels can bracket the pressures asked for over
//!    the range of surface pressure found, and decodes only those (plus the
//!    lowest level when extrapolating);
//! 3. computes pressure on them, p = ap + b ps (CF appendix D), and
//!    interpolates linearly in ln p (`physics::model_levels`). Below the
//!    lowest model level, and so below ground, values are NaN unless the
//!    source was opened with `BelowLowestLevel::StandardLapseRate`; the
//!    choice is recorded in each field's `vertical_interpolation` attribute
//!    and in the source's global attributes.
//!
//! Where the data have no geopotential nor geopotential height (on any
//! levels) but have temperature on model levels and a surface geopotential
//! (CF `surface_geopotential`, or `surface_altitude` times g0), a variable
//! `hydrostatic_geopotential` is added: the hydrostatic integral upward
//! from the surface with virtual temperature (specific humidity on the
//! same model levels when present). When that is impossible, the source
//! says what is missing (`missing_note`), and the dataset adds that to the
//! error of a role not found.

use std::sync::Arc;

use ndarray::{Array3, Array4, Axis};

use super::{DataError, DataSource, Selection, VariableInfo};
use crate::constants::Constants;
use crate::grid::{Field, Grid};
use crate::physics::model_levels::{geopotential_on_levels, to_pressure_levels, BelowLowestLevel, HybridCoefficients, Quantity};
use crate::physics::sampling::Region;

/// The choice `Dataset::open` makes for model-level data below their
/// lowest level: 0 none made (missing, the default), 1 missing chosen, 2
/// the standard lapse rate. Set once by a front end (the CLI's
/// `--below-ground`); `Dataset::open_with` chooses per dataset, and a
/// program's `setting below_ground` must agree with a front end's choice.
static BELOW_LOWEST_LEVEL: std::sync::atomic::AtomicU8 = std::sync::atomic::AtomicU8::new(0);

pub fn set_below_lowest_level(below: BelowLowestLevel) {
    let code = match below {
        BelowLowestLevel::Missing => 1,
        BelowLowestLevel::StandardLapseRate => 2,
    };
    BELOW_LOWEST_LEVEL.store(code, std::sync::atomic::Ordering::Relaxed);
}

pub fn below_lowest_level() -> BelowLowestLevel {
    chosen_below_lowest_level().unwrap_or(BelowLowestLevel::Missing)
}

/// The front end's choice, if it made one.
pub fn chosen_below_lowest_level() -> Option<BelowLowestLevel> {
    match BELOW_LOWEST_LEVEL.load(std::sync::atomic::Ordering::Relaxed) {
        1 => Some(BelowLowestLevel::Missing),
        2 => Some(BelowLowestLevel::StandardLapseRate),
        _ => None,
    }
}

/// The standard isobaric levels (hPa) offered for model-level data, within
/// the model's range (common practice for isobaric output, no source).
pub const STANDARD_LEVELS_HPA: [f64; 26] = [
    1000.0, 975.0, 950.0, 925.0, 900.0, 850.0, 800.0, 750.0, 700.0, 650.0, 600.0, 550.0, 500.0, 450.0, 400.0, 350.0, 300.0, 250.0, 200.0, 150.0,
    100.0, 70.0, 50.0, 30.0, 20.0, 10.0,
];

/// The global attribute that records how model levels became pressure
/// levels, written into run results.
pub const PROVENANCE_ATTRIBUTE: &str = "model_levels_to_pressure";

/// The name of the geopotential computed from the hydrostatic integral.
pub const HYDROSTATIC_GEOPOTENTIAL: &str = "hydrostatic_geopotential";

/// One variable on model levels, as its store holds it.
#[derive(Debug, Clone)]
pub struct ModelLevelVariable {
    /// As stored: `levels` is None; times and grid as read.
    pub info: VariableInfo,
    /// One pair per stored model level, in stored order.
    pub coefficients: HybridCoefficients,
    /// The store's variable holding surface pressure.
    pub surface_pressure: String,
    /// How the levels are described, for metadata ("model levels 1 to 3").
    pub description: String,
}

/// A source that also holds variables on hybrid model levels.
pub trait ModelLevelStore: DataSource {
    /// The variables on model levels (they may also appear, as stored, in
    /// `variables()`; the wrapper hides them there).
    fn model_level_variables(&self) -> &[ModelLevelVariable];
    /// Reads the given time and model-level indices of a model-level
    /// variable, [time, level, y, x] in the order asked, over the region.
    /// The field's `levels` hold the model level numbers or indices, not
    /// pressures (`levels` None would lose the level axis).
    fn read_model_levels(&self, name: &str, times: &[usize], levels: &[usize], region: Option<&Region>) -> Result<Field, DataError>;
}

/// How a presented variable is made.
#[derive(Debug, Clone)]
enum Making {
    /// Interpolated from the model-level variable with this index.
    Interpolated(usize),
    /// The hydrostatic integral: temperature and humidity indices, the
    /// surface geopotential variable, and whether it is an altitude (m,
    /// times the program's g0) rather than a geopotential.
    Hydrostatic { temperature: usize, humidity: Option<usize>, surface: String, altitude: bool },
}

/// A `ModelLevelStore` seen as a plain source on pressure levels.
pub struct OnPressureLevels {
    store: Box<dyn ModelLevelStore>,
    variables: Vec<VariableInfo>,
    making: Vec<Option<Making>>,
    below: BelowLowestLevel,
    constants: Constants,
    missing: Option<String>,
}

impl std::fmt::Debug for OnPressureLevels {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("OnPressureLevels").field("label", &self.store.label()).field("below", &self.below).finish()
    }
}

fn is_geopotential(info: &VariableInfo) -> bool {
    matches!(info.standard_name.as_deref(), Some("geopotential" | "geopotential_height"))
}

impl OnPressureLevels {
    /// Wraps a store. Fails when a model-level variable's coefficients give
    /// no usable pressure range.
    pub fn new(store: Box<dyn ModelLevelStore>, below: BelowLowestLevel) -> Result<Self, DataError> {
        let constants = Constants::default();
        let model = store.model_level_variables().to_vec();
        let hidden: Vec<&str> = model.iter().map(|m| m.info.name.as_str()).collect();
        let mut variables: Vec<VariableInfo> = Vec::new();
        let mut making: Vec<Option<Making>> = Vec::new();
        for info in store.variables() {
            if !hidden.contains(&info.name.as_str()) {
                variables.push(info.clone());
                making.push(None);
            }
        }
        for (k, m) in model.iter().enumerate() {
            let mut info = m.info.clone();
            info.levels = Some(presented_levels(&m.coefficients));
            info.attributes.push(("vertical_interpolation".into(), interpolation_note(&m.description, below)));
            variables.push(info);
            making.push(Some(Making::Interpolated(k)));
        }
        // Geopotential from the hydrostatic integral, where the data have none.
        let mut missing = None;
        let has_geopotential = variables.iter().any(is_geopotential);
        let temperature = model.iter().position(|m| m.info.standard_name.as_deref() == Some("air_temperature"));
        if !has_geopotential {
            if let Some(t) = temperature {
                let surface = store.variables().iter().find_map(|v| match v.standard_name.as_deref() {
                    Some("surface_geopotential") => Some((v.name.clone(), false)),
                    Some("surface_altitude") => Some((v.name.clone(), true)),
                    _ => None,
                });
                match surface {
                    Some((surface, altitude)) => {
                        let humidity = model.iter().position(|m| m.info.standard_name.as_deref() == Some("specific_humidity"));
                        let base = &model[t];
                        let mut info = base.info.clone();
                        info.name = HYDROSTATIC_GEOPOTENTIAL.into();
                        info.long_name = Some("geopotential from the hydrostatic integral on model levels".into());
                        info.units = "m2 s-2".into();
                        info.standard_name = Some("geopotential".into());
                        info.packed = false;
                        info.levels = Some(presented_levels(&base.coefficients));
                        info.attributes = vec![
                            (
                                "vertical_interpolation".into(),
                                interpolation_note(&base.description, below),
                            ),
                            (
                                "hydrostatic_integral".into(),
                                format!(
                                    "upward from the surface geopotential ({surface}) with {} temperature ({}), trapezoid rule in ln p; the lowest level's value from the surface to that level",
                                    if humidity.is_some() { "virtual" } else { "dry (no specific humidity on model levels)" },
                                    base.info.name
                                ),
                            ),
                        ];
                        variables.push(info);
                        making.push(Some(Making::Hydrostatic { temperature: t, humidity, surface, altitude }));
                    }
                    None => {
                        missing = Some(format!(
                            "geopotential on model levels is absent from {}; it comes from the hydrostatic integral when the data also hold a surface geopotential (CF standard_name surface_geopotential or surface_altitude; GRIB2 geopotential or geopotential height on the ground, fixed surface 1), which they do not",
                            store.label()
                        ));
                    }
                }
            }
        }
        Ok(Self { store, variables, making, below, constants, missing })
    }

    fn index_of(&self, name: &str) -> Result<usize, DataError> {
        self.variables.iter().position(|v| v.name == name).ok_or_else(|| DataError::MissingVariable {
            path: self.store.label(),
            name: name.to_string(),
            available: self.variables.iter().map(|v| v.name.clone()).collect(),
            suggestion: String::new(),
        })
    }

    /// Surface pressure (Pa), [time, y, x], for the selection.
    fn surface_pressure(&self, model: &ModelLevelVariable, times: &[usize], region: Option<&Region>) -> Result<(Array3<f32>, Arc<Grid>), DataError> {
        let info = self.store.variables().iter().find(|v| v.name == model.surface_pressure).ok_or_else(|| {
            DataError::Invalid(format!(
                "{}: `{}` is on hybrid model levels, whose pressure needs the surface pressure `{}`, which is not in the data",
                self.store.label(),
                model.info.name,
                model.surface_pressure
            ))
        })?;
        let selection = Selection { times: info.times.as_ref().map(|_| times.to_vec()), levels: None, region: region.copied() };
        let field = self.store.read(&model.surface_pressure, &selection)?;
        let logarithm = is_log_surface_pressure(info);
        let factor = if logarithm { Some(1.0) } else { super::cf::pressure_factor(&field.units) };
        let factor = factor.ok_or_else(|| DataError::NotAPressure {
            path: self.store.label(),
            variable: model.surface_pressure.clone(),
            units: field.units.clone(),
        })?;
        let mut ps = field.data.index_axis(Axis(1), 0).to_owned();
        if logarithm {
            // ps = exp(ln ps), ln ps of the pressure in Pa (WMO code table
            // 4.2, discipline 0, category 3, number 25).
            ps.mapv_inplace(|v| (v as f64).exp() as f32);
        } else if factor != 1.0 {
            ps.mapv_inplace(|v| (v as f64 * factor) as f32);
        }
        // A surface pressure without time serves every time.
        if ps.dim().0 == 1 && times.len() > 1 {
            ps = ndarray::concatenate(Axis(0), &vec![ps.view(); times.len()]).expect("same shapes");
        }
        Ok((ps, field.grid.clone()))
    }

    fn read_model(&self, model: &ModelLevelVariable, times: &[usize], levels: &[usize], region: Option<&Region>) -> Result<Array4<f32>, DataError> {
        let field = self.store.read_model_levels(&model.info.name, times, levels, region)?;
        // Temperature and humidity in the units the physics expects.
        let to = match model.info.standard_name.as_deref() {
            Some("air_temperature") => Some("K"),
            Some("specific_humidity") => Some("kg kg-1"),
            _ => None,
        };
        let mut data = field.data;
        if let Some(to) = to {
            let (scale, offset) = crate::units::Unit::parse(&field.units)
                .ok()
                .zip(crate::units::Unit::parse(to).ok())
                .and_then(|(a, b)| a.conversion_to(&b).ok())
                .ok_or_else(|| DataError::Invalid(format!("{}: `{}` has units `{}`, not convertible to {to}", self.store.label(), model.info.name, field.units)))?;
            if scale != 1.0 || offset != 0.0 {
                data.mapv_inplace(|v| (v as f64 * scale + offset) as f32);
            }
        }
        Ok(data)
    }
}

/// Whether a variable holds the natural logarithm of surface pressure (of
/// the pressure in Pa): GRIB2 discipline 0, category 3, number 25 (WMO
/// code table 4.2), or in CF NetCDF a variable named `lnsp` or whose
/// long_name says "logarithm of surface pressure" (CF has no standard name
/// for it). Serves as surface pressure, ps = exp(ln ps).
pub fn is_log_surface_pressure(info: &VariableInfo) -> bool {
    let attribute = |key: &str| info.attributes.iter().find(|(k, _)| k == key).map(|(_, v)| v.as_str());
    let grib = attribute("GRIB2_discipline") == Some("0") && attribute("GRIB2_parameter_category") == Some("3") && attribute("GRIB2_parameter_number") == Some("25");
    let long_name = info.long_name.as_deref().map(str::to_ascii_lowercase).unwrap_or_default();
    grib || info.name.eq_ignore_ascii_case("lnsp") || long_name.contains("logarithm of surface pressure")
}

/// The standard isobaric levels at or below the model's top (at a surface
/// pressure of 1013.25 hPa), in descending pressure.
pub fn presented_levels(coefficients: &HybridCoefficients) -> Vec<f64> {
    let top = (0..coefficients.len()).map(|k| coefficients.pressure(k, 101_325.0)).fold(f64::INFINITY, f64::min);
    STANDARD_LEVELS_HPA.iter().map(|p| p * 100.0).filter(|&p| p >= top * (1.0 - 1e-9)).collect()
}

fn interpolation_note(description: &str, below: BelowLowestLevel) -> String {
    format!("from hybrid sigma-pressure {description}, pressure p = ap + b ps, linearly in ln p; {}", below.note())
}

/// The model levels (indices) needed to interpolate to `targets` over
/// surface pressures in [ps_min, ps_max]: for each target, the levels that
/// can bracket it in some column, and the lowest level when extrapolating.
/// Every level whose pressure range over the columns overlaps the span
/// between the nearest levels above and below the target anywhere.
pub fn levels_needed(coefficients: &HybridCoefficients, ps_min: f64, ps_max: f64, targets: &[f64], below: BelowLowestLevel) -> Vec<usize> {
    let n = coefficients.len();
    if n == 0 {
        return Vec::new();
    }
    // Each level's pressure range over the columns (b >= 0 in practice,
    // but take both ends whatever its sign).
    let range: Vec<(f64, f64)> = (0..n)
        .map(|k| {
            let (a, b) = (coefficients.pressure(k, ps_min), coefficients.pressure(k, ps_max));
            (a.min(b), a.max(b))
        })
        .collect();
    let mut wanted = vec![false; n];
    for &p in targets {
        // The nearest level above p in every column and the nearest below
        // p in every column: every level between them can bracket p.
        // Strictly above and below, so a level exactly at p (which the f32
        // pressures may put a hair to either side) keeps both neighbours.
        let above = (0..n).filter(|&k| range[k].1 < p).max_by(|&a, &b| range[a].1.total_cmp(&range[b].1));
        let under = (0..n).filter(|&k| range[k].0 > p).min_by(|&a, &b| range[a].0.total_cmp(&range[b].0));
        let low = above.map_or(f64::NEG_INFINITY, |k| range[k].1);
        let high = under.map_or(f64::INFINITY, |k| range[k].0);
        for k in 0..n {
            if range[k].1 >= low && range[k].0 <= high {
                wanted[k] = true;
            }
        }
    }
    if below == BelowLowestLevel::StandardLapseRate {
        if let Some(lowest) = (0..n).max_by(|&a, &b| range[a].1.total_cmp(&range[b].1)) {
            wanted[lowest] = true;
        }
    }
    (0..n).filter(|&k| wanted[k]).collect()
}

fn finite_range(a: &Array3<f32>) -> Option<(f64, f64)> {
    let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
    for &v in a.iter().filter(|v| v.is_finite()) {
        lo = lo.min(v as f64);
        hi = hi.max(v as f64);
    }
    (lo <= hi).then_some((lo, hi))
}

impl DataSource for OnPressureLevels {
    fn label(&self) -> String {
        self.store.label()
    }

    fn variables(&self) -> &[VariableInfo] {
        &self.variables
    }

    fn global_attributes(&self) -> Vec<(String, String)> {
        let mut attributes = self.store.global_attributes();
        if !self.store.model_level_variables().is_empty() {
            attributes.push((PROVENANCE_ATTRIBUTE.into(), format!("linearly in ln p; {}", self.below.note())));
        }
        attributes
    }

    fn missing_note(&self, role: &str) -> Option<String> {
        matches!(role, "geopotential" | "geopotential_height").then(|| self.missing.clone()).flatten()
    }

    fn reads_any_pressure(&self, name: &str) -> bool {
        self.index_of(name).is_ok_and(|k| self.making[k].is_some())
    }

    fn below_lowest_level(&self) -> Option<BelowLowestLevel> {
        (!self.store.model_level_variables().is_empty()).then_some(self.below)
    }

    fn read(&self, name: &str, selection: &Selection) -> Result<Field, DataError> {
        self.read_with_constants(name, selection, &self.constants)
    }

    /// Any pressure in `selection.levels` is interpolated straight from the
    /// model levels (one ln-p interpolation), whether or not it is one of
    /// the presented standard levels; `constants` (the program's) go into
    /// the hydrostatic integral and the standard-lapse-rate extrapolation.
    fn read_with_constants(&self, name: &str, selection: &Selection, constants: &Constants) -> Result<Field, DataError> {
        let k = self.index_of(name)?;
        let Some(making) = &self.making[k] else { return self.store.read(name, selection) };
        let info = &self.variables[k];
        let (times, _) = super::selected_indices(name, info, &Selection { levels: None, ..selection.clone() })?;
        let targets: Vec<f64> = selection.levels.clone().unwrap_or_else(|| info.levels.clone().unwrap_or_default());
        let models = self.store.model_level_variables();
        let region = selection.region.as_ref();
        let (data, grid) = match making {
            Making::Interpolated(m) => {
                let model = &models[*m];
                let (ps, grid) = self.surface_pressure(model, &times, region)?;
                let Some((ps_min, ps_max)) = finite_range(&ps) else {
                    let shape = (times.len(), targets.len(), ps.dim().1, ps.dim().2);
                    return self.finish(info, Array4::from_elem(shape, f32::NAN), grid, &targets, &times);
                };
                let needed = levels_needed(&model.coefficients, ps_min, ps_max, &targets, self.below);
                let coefficients = subset(&model.coefficients, &needed);
                let pressure = coefficients.level_pressure(ps.view());
                let data = self.read_model(model, &times, &needed, region)?;
                let temperature = match model.info.standard_name.as_deref() {
                    Some("geopotential" | "geopotential_height") if self.below == BelowLowestLevel::StandardLapseRate => {
                        let t = models.iter().find(|m| m.info.standard_name.as_deref() == Some("air_temperature")).ok_or_else(|| {
                            DataError::Invalid(format!(
                                "{}: extrapolating `{name}` below the lowest model level with the standard lapse rate needs temperature on the same model levels, which the data lack",
                                self.store.label()
                            ))
                        })?;
                        Some(self.read_model(t, &times, &needed, region)?)
                    }
                    _ => None,
                };
                let quantity = match (model.info.standard_name.as_deref(), &temperature) {
                    (Some("air_temperature"), _) => Quantity::Temperature,
                    (Some("geopotential_height"), Some(t)) => Quantity::Height { temperature: t.view() },
                    (Some("geopotential"), Some(t)) => Quantity::Geopotential { temperature: t.view() },
                    _ => Quantity::Other,
                };
                let out = to_pressure_levels(data.view(), pressure.view(), &targets, self.below, quantity, constants)
                    .map_err(|e| DataError::Invalid(format!("{}: `{name}`: {e}", self.store.label())))?;
                (out, grid)
            }
            Making::Hydrostatic { temperature, humidity, surface, altitude } => {
                let model = &models[*temperature];
                let (ps, grid) = self.surface_pressure(model, &times, region)?;
                let Some((ps_min, ps_max)) = finite_range(&ps) else {
                    let shape = (times.len(), targets.len(), ps.dim().1, ps.dim().2);
                    return self.finish(info, Array4::from_elem(shape, f32::NAN), grid, &targets, &times);
                };
                // The integral runs from the surface up: every level from
                // the highest one needed down to the lowest.
                let needed = levels_needed(&model.coefficients, ps_min, ps_max, &targets, self.below);
                let top = needed.iter().map(|&k| model.coefficients.pressure(k, ps_min)).fold(f64::INFINITY, f64::min);
                let column: Vec<usize> = (0..model.coefficients.len()).filter(|&k| model.coefficients.pressure(k, ps_min) >= top).collect();
                let coefficients = subset(&model.coefficients, &column);
                let pressure = coefficients.level_pressure(ps.view());
                let t = self.read_model(model, &times, &column, region)?;
                let q = humidity.map(|h| self.read_model(&models[h], &times, &column, region)).transpose()?;
                let surface_info = self.store.variables().iter().find(|v| v.name == *surface).expect("found when wrapped");
                // A surface geopotential given once serves every time.
                let surface_times = match &surface_info.times {
                    Some(t) if t.values.len() == 1 => Some(vec![0]),
                    Some(_) => Some(times.clone()),
                    None => None,
                };
                let surface_selection = Selection { times: surface_times, levels: None, region: region.copied() };
                let factor = if *altitude { constants.gravity } else { 1.0 };
                let zs = self.store.read(surface, &surface_selection)?.data.index_axis(Axis(1), 0).mapv(|v| (v as f64 * factor) as f32);
                let phi = geopotential_on_levels(zs.view(), ps.view(), pressure.view(), t.view(), q.as_ref().map(|q| q.view()), constants)
                    .map_err(|e| DataError::Invalid(format!("{}: {HYDROSTATIC_GEOPOTENTIAL}: {e}", self.store.label())))?;
                let quantity = Quantity::Geopotential { temperature: t.view() };
                let out = to_pressure_levels(phi.view(), pressure.view(), &targets, self.below, quantity, constants)
                    .map_err(|e| DataError::Invalid(format!("{}: {HYDROSTATIC_GEOPOTENTIAL}: {e}", self.store.label())))?;
                (out, grid)
            }
        };
        self.finish(info, data, grid, &targets, &times)
    }
}

impl OnPressureLevels {
    /// The field read: the presented variable's names and metadata on the
    /// pressures asked for.
    fn finish(&self, info: &VariableInfo, data: Array4<f32>, grid: Arc<Grid>, targets: &[f64], times: &[usize]) -> Result<Field, DataError> {
        let times = info.times.as_ref().map(|t| t.select(times));
        let mut field = Field::new(info.name.clone(), info.units.clone(), data, times, Some(targets.to_vec()), grid).map_err(DataError::Invalid)?;
        field.long_name = info.long_name.clone().unwrap_or_else(|| info.name.clone());
        field.standard_name = info.standard_name.clone();
        field.attributes = info.attributes.iter().filter(|(k, _)| k == "vertical_interpolation" || k == "hydrostatic_integral").cloned().collect();
        Ok(field)
    }
}

/// The rows and columns of `grid` inside a latitude-longitude region, and
/// the grid they form (projected grids by inverse projection, as the
/// readers do). Without a region: everything.
pub fn region_indices(grid: &Arc<Grid>, region: Option<&Region>, variable: &str) -> Result<(Vec<usize>, Vec<usize>, Arc<Grid>), DataError> {
    let Some(region) = region else {
        return Ok(((0..grid.latitudes.len()).collect(), (0..grid.longitudes.len()).collect(), grid.clone()));
    };
    let (south, north, west, east) = (region.south, region.north, region.west, region.east);
    let empty = || DataError::EmptyRegion { variable: variable.into(), south, north, west, east, grid: grid.describe() };
    if let Some(projected) = &grid.projection {
        let (rows, cols) = super::projected::block_in_box(projected, south, north, west, east).ok_or_else(empty)?;
        let (rows, cols): (Vec<usize>, Vec<usize>) = (rows.collect(), cols.collect());
        let sub = Arc::new(super::projected::sub_grid(projected, &rows, &cols));
        return Ok((rows, cols, sub));
    }
    let rows: Vec<usize> = (0..grid.latitudes.len()).filter(|&j| grid.latitudes[j] >= south - 1e-9 && grid.latitudes[j] <= north + 1e-9).collect();
    let (cols, longitudes) = super::netcdf_source::longitude_selection(&grid.longitudes, region);
    if rows.is_empty() || cols.is_empty() {
        return Err(empty());
    }
    let sub = Arc::new(Grid::new(rows.iter().map(|&j| grid.latitudes[j]).collect(), longitudes));
    Ok((rows, cols, sub))
}

fn subset(coefficients: &HybridCoefficients, levels: &[usize]) -> HybridCoefficients {
    HybridCoefficients { a_pressure: levels.iter().map(|&k| coefficients.a_pressure[k]).collect(), b: levels.iter().map(|&k| coefficients.b[k]).collect() }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn only_the_bracketing_levels_are_needed() {
        // Pressure levels (hand computation, p = ap + b ps): with b = 0
        // the levels are 100, 200, ..., 1000 hPa whatever ps.
        let ap: Vec<f64> = (1..=10).map(|k| k as f64 * 10_000.0).collect();
        let c = HybridCoefficients::from_ap(ap, vec![0.0; 10]).unwrap();
        assert_eq!(levels_needed(&c, 90_000.0, 100_000.0, &[50_000.0], BelowLowestLevel::Missing), vec![3, 4, 5]);
        assert_eq!(levels_needed(&c, 90_000.0, 100_000.0, &[45_000.0], BelowLowestLevel::Missing), vec![3, 4]);
        assert_eq!(levels_needed(&c, 90_000.0, 100_000.0, &[45_000.0], BelowLowestLevel::StandardLapseRate), vec![3, 4, 9]);
        // Pure sigma levels (ap = 0): a level's pressure spans b ps over the
        // columns, so more levels can bracket 500 hPa when ps varies.
        let b: Vec<f64> = (1..=10).map(|k| k as f64 / 10.0).collect();
        let c = HybridCoefficients::from_ap(vec![0.0; 10], b).unwrap();
        // ps 700..1000 hPa: the level with b spans 700 b..1000 b hPa. Above
        // 500 hPa everywhere: b 0.4 (280..400); below everywhere: b 0.8
        // (560..800); so b 0.4 to 0.8 (indices 3 to 7) may bracket it
        // (at ps 700 hPa, 500 hPa lies between b 0.7 and b 0.8).
        assert_eq!(levels_needed(&c, 70_000.0, 100_000.0, &[50_000.0], BelowLowestLevel::Missing), vec![3, 4, 5, 6, 7]);
    }

    #[test]
    fn presented_levels_stop_at_the_model_top() {
        let c = HybridCoefficients::from_ap(vec![5_000.0, 20_000.0, 0.0], vec![0.0, 0.3, 1.0]).unwrap();
        let levels = presented_levels(&c);
        assert_eq!(levels.first(), Some(&100_000.0));
        assert_eq!(levels.last(), Some(&5_000.0));
    }
}
