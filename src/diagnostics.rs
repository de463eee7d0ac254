//! The diagnostics engine on fields: reads what a diagnostic needs from a
//! dataset (only the levels, times and region asked for), calls the plain
//! array functions of `physics`, and returns fields with coordinates, units
//! and metadata. The language's evaluator, the CLI and the demo all come
//! through here.

use std::sync::Arc;

use ndarray::{Array3, Array4, Zip};

use crate::constants::Constants;
use crate::grid::{Field, VectorField};
use crate::io::{DataError, Dataset, Role, Selection};
use crate::physics::geostrophic::{self, GeopotentialKind, DEFAULT_EQUATOR_BAND};
use crate::physics::sampling::{self, AreaStatistics, Region};
use crate::sharing::{Shared, SharedResults};
use crate::physics::{advection, differences, smoothing, stability, thermal_wind, vertical};

mod many_layers;
pub use many_layers::LayerRequest;

/// A pressure layer, bottom (larger pressure) to top, in Pa.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Layer {
    pub bottom: f64,
    pub top: f64,
}

impl Layer {
    /// Builds a layer from two pressures in either order; the flag says
    /// whether they were swapped to put the larger pressure at the bottom.
    pub fn new(first: f64, second: f64) -> (Layer, bool) {
        if first >= second {
            (Layer { bottom: first, top: second }, false)
        } else {
            (Layer { bottom: second, top: first }, true)
        }
    }

    /// ln(p_b / p_t).
    pub fn log_ratio(&self) -> f64 {
        (self.bottom / self.top).ln()
    }

    /// "1000-500 hPa".
    pub fn label(&self) -> String {
        format!("{}-{} hPa", trim(self.bottom / 100.0), trim(self.top / 100.0))
    }

    /// "1000_500hPa", for variable names.
    pub fn tag(&self) -> String {
        format!("{}_{}hPa", trim(self.bottom / 100.0), trim(self.top / 100.0)).replace('.', "p")
    }
}

/// The sharing keys of a layer's thickness and thermal wind.
fn thickness_key(layer: Layer, route: ThicknessRoute) -> String {
    format!("thickness {layer:?} {route:?}")
}

fn thermal_wind_key(layer: Layer, route: ThicknessRoute) -> String {
    format!("thermal_wind {layer:?} {route:?}")
}

/// The thickness field of `layer`, on `template`'s times and grid.
fn thickness_field(layer: Layer, template: &Field, data: Array3<f32>, method: String) -> Result<Field> {
    Ok(template
        .derived_without_levels(&format!("thickness_{}", layer.tag()), "m", expand(data))
        .map_err(DiagnosticError::Unsupported)?
        .with_long_name(format!("thickness of the {} layer", layer.label()))
        .with_attribute("layer", layer.label())
        .with_attribute("method", method))
}

/// Where the quadratic rule's thickness `data` is missing at a time step
/// and the trapezoid's `fallback` is not, the whole time step takes the
/// trapezoid (so that no map mixes the two rules), and `method` says so.
fn fall_back_where_missing(data: &mut Array3<f32>, fallback: &Array3<f32>, method: &mut String) {
    let mut steps = 0usize;
    for (mut slice, other) in data.outer_iter_mut().zip(fallback.outer_iter()) {
        if slice.iter().zip(other.iter()).any(|(d, f)| d.is_nan() && !f.is_nan()) {
            slice.assign(&other);
            steps += 1;
        }
    }
    if steps > 0 {
        method.push_str(&format!("; the trapezoid rule at {steps} time step(s) where a level the quadratic reaches beyond the layer is missing"));
    }
}

/// Geopotential (or its height) at `pressure`, `data` computed from the
/// levels of `z` as `how` says, named and described as `z`.
fn geopotential_field(z: &Field, data: Array3<f32>, pressure: f64, how: String) -> Result<Field> {
    let mut out = z.derived_without_levels(&z.name, &z.units, expand(data)).map_err(DiagnosticError::Unsupported)?;
    out.long_name = z.long_name.clone();
    out.standard_name = z.standard_name.clone();
    out.attributes.push(("pressure_level".into(), format!("{} hPa", trim(pressure / 100.0))));
    out.attributes.push(("vertical_interpolation".into(), how));
    Ok(out)
}

/// A layer's thickness by the geopotential route from the geopotential at
/// its boundaries: the data (m) and the `method` (the caller's `top` serves
/// as the template of `thickness_field`, which takes only its coordinates).
/// dz = (Phi_t - Phi_b) / g0, or Z_t - Z_b for heights (field guide,
/// "Formulas": thickness from geopotential), in f64 then rounded. Never
/// fails; missing values stay NaN.
fn geopotential_difference(top: &Field, bottom: &Field, kind: GeopotentialKind, c: &Constants) -> (Array3<f32>, String) {
    let to_metres = match kind {
        GeopotentialKind::Geopotential => 1.0 / c.gravity,
        GeopotentialKind::Height => 1.0,
    };
    let data = Zip::from(top.horizontal_slices()).and(bottom.horizontal_slices()).map_collect(|&a, &b| ((a as f64 - b as f64) * to_metres) as f32);
    let how = |f: &Field| f.attributes.iter().find(|(k, _)| k == "vertical_interpolation").map(|(_, v)| v.clone()).unwrap_or_default();
    let method = format!("difference of geopotential height at the layer boundaries (top: {}; bottom: {})", how(top), how(bottom));
    (data, method)
}

fn trim(x: f64) -> String {
    let s = format!("{x:.2}");
    s.trim_end_matches('0').trim_end_matches('.').to_string()
}

/// How thickness (and so the thermal wind) is obtained.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
pub enum ThicknessRoute {
    /// Hypsometric integral of temperature (virtual temperature when specific
    /// humidity is in the data).
    Temperature,
    /// Hypsometric integral of dry-bulb temperature, ignoring humidity.
    DryTemperature,
    /// Difference of geopotential (or geopotential height) at the boundaries.
    Geopotential,
}

/// Engine errors: data errors, or a diagnostic that the data cannot support.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum DiagnosticError {
    #[error(transparent)]
    Data(#[from] DataError),
    #[error(transparent)]
    Vertical(#[from] vertical::VerticalError),
    #[error(transparent)]
    Sampling(#[from] sampling::SamplingError),
    #[error("{0}")]
    Unsupported(String),
}

type Result<T> = std::result::Result<T, DiagnosticError>;

/// A case: a dataset, the part of it under study (times and region) and the
/// settings diagnostics share.
pub struct Case {
    pub dataset: Arc<Dataset>,
    pub constants: Constants,
    /// Half-width (degrees) of the equatorial band where balanced winds are
    /// masked.
    pub equator_band: f64,
    /// Time steps and region to read; levels are chosen per diagnostic.
    pub selection: Selection,
    /// How the hypsometric integral runs over ln p (quadratic by default;
    /// the trapezoid for comparison with older results).
    pub integration: vertical::IntegrationRule,
    /// Results shared within a run (see `crate::sharing`); `None` computes
    /// everything afresh.
    pub shared: Option<Arc<SharedResults>>,
}

impl Case {
    pub fn new(dataset: Arc<Dataset>) -> Self {
        Self { dataset, constants: Constants::default(), equator_band: DEFAULT_EQUATOR_BAND, selection: Selection::default(), integration: vertical::IntegrationRule::default(), shared: None }
    }

    /// The same case restricted to other times or another region.
    pub fn with_selection(&self, selection: Selection) -> Case {
        Case { dataset: self.dataset.clone(), constants: self.constants, equator_band: self.equator_band, selection, integration: self.integration, shared: self.shared.clone() }
    }

    /// The same case sharing results through `shared` (see `crate::sharing`).
    pub fn sharing(mut self, shared: Arc<SharedResults>) -> Case {
        self.shared = Some(shared);
        self
    }

    /// Everything besides the operation and its arguments that a result
    /// depends on, written out in full (floats in their exact round-trip
    /// form), for the key of a shared result.
    fn sharing_context(&self) -> String {
        format!("{:?}|{:?}|{:?}|{:?}", self.selection, self.constants, self.equator_band, self.integration)
    }

    /// The key of `operation` in the shared store, for this case.
    fn shared_key(&self, operation: &str) -> String {
        SharedResults::key(&self.dataset, &self.sharing_context(), operation)
    }

    fn shared_value(&self, operation: String, compute: impl FnOnce() -> Result<Shared>) -> Result<Shared> {
        match &self.shared {
            None => compute(),
            Some(store) => store.get_or_compute(&self.dataset, SharedResults::key(&self.dataset, &self.sharing_context(), &operation), compute),
        }
    }

    /// The shared field for `operation`, or `compute()`'s (kept when the
    /// store has room), held with the store rather than copied. Fails as
    /// `compute`, or if the store holds a vector under the key (a key
    /// clash, an internal error).
    fn shared_field(&self, operation: String, compute: impl FnOnce() -> Result<Field>) -> Result<Arc<Field>> {
        self.shared_field_of(operation, || compute().map(Arc::new))
    }

    /// As `shared_field`, `compute` giving a field that may itself be
    /// shared (a value kept under another key too), not copied.
    fn shared_field_of(&self, operation: String, compute: impl FnOnce() -> Result<Arc<Field>>) -> Result<Arc<Field>> {
        match self.shared_value(operation, || compute().map(Shared::Field))? {
            Shared::Field(f) => Ok(f),
            Shared::Vector(_) => Err(DiagnosticError::Unsupported("internal: a shared result of the wrong kind".into())),
        }
    }

    /// As `shared_field`, for a vector field.
    fn shared_vector(&self, operation: String, compute: impl FnOnce() -> Result<VectorField>) -> Result<Arc<VectorField>> {
        match self.shared_value(operation, || compute().map(|v| Shared::Vector(Arc::new(v))))? {
            Shared::Vector(v) => Ok(v),
            Shared::Field(_) => Err(DiagnosticError::Unsupported("internal: a shared result of the wrong kind".into())),
        }
    }

    /// Reads through the run's store when sharing (the same variable and
    /// selection read once per run, `SharedResults::read_shared`, one copy
    /// for the store and the caller), else directly. Fails as
    /// `Dataset::read_with`.
    fn read_data(&self, name: &str, selection: &Selection) -> Result<Arc<Field>> {
        Ok(match &self.shared {
            // With this case's constants: model-level data use them in the
            // hydrostatic integral.
            Some(store) => store.read_shared(&self.dataset, name, selection, Some(&self.constants))?,
            None => Arc::new(self.dataset.read_with(name, selection, Some(&self.constants))?),
        })
    }

    fn selection_with_levels(&self, levels: Option<Vec<f64>>) -> Selection {
        Selection { levels, ..self.selection.clone() }
    }

    /// Reads a variable (by name or role) over all its levels.
    pub fn field(&self, name: &str) -> Result<Field> {
        Ok(Arc::unwrap_or_clone(self.read_data(name, &self.selection)?))
    }

    /// The levels of a variable with `extra` pressures inserted, when the
    /// data give any pressure straight from model levels (one ln-p
    /// interpolation from the model levels rather than two, through the
    /// presented standard levels); its own levels otherwise. `with` names
    /// variables read on the same levels, which must read any pressure too.
    fn levels_including(&self, name: &str, with: &[&str], extra: &[f64]) -> Result<Vec<f64>> {
        let mut levels = self.levels_of(name)?;
        if levels.len() < 2 || !self.dataset.reads_any_pressure(name) || !with.iter().all(|w| self.dataset.reads_any_pressure(w)) {
            return Ok(levels);
        }
        let descending = levels[0] > levels[levels.len() - 1];
        let (low, high) = levels.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &p| (a.min(p), b.max(p)));
        for &p in extra {
            if p >= low && p <= high && !levels.iter().any(|&l| (l - p).abs() <= 1e-6 * p) {
                levels.push(p);
            }
        }
        levels.sort_by(|a, b| if descending { b.total_cmp(a) } else { a.total_cmp(b) });
        Ok(levels)
    }

    /// The levels (Pa) of a variable, by name or role.
    pub fn levels_of(&self, name: &str) -> Result<Vec<f64>> {
        let info = self.dataset.resolve(name)?;
        info.levels.clone().ok_or_else(|| DiagnosticError::Data(crate::io::grib2_source::no_pressure_levels(info)))
    }

    /// Reads only the data levels that `weights` need, returning the field
    /// and the weights re-indexed onto the levels read.
    fn read_weighted(&self, name: &str, weights: &vertical::LevelWeights) -> Result<(Arc<Field>, vertical::LevelWeights)> {
        self.read_weighted_on(name, &self.levels_of(name)?, weights)
    }

    /// As `read_weighted`, the weights indexing `levels` (which may hold
    /// pressures besides the variable's own, see `levels_including`).
    fn read_weighted_on(&self, name: &str, levels: &[f64], weights: &vertical::LevelWeights) -> Result<(Arc<Field>, vertical::LevelWeights)> {
        let mut needed: Vec<usize> = weights.terms.iter().map(|t| t.0).collect();
        needed.sort_unstable();
        needed.dedup();
        let field = self.read_data(name, &self.selection_with_levels(Some(needed.iter().map(|&k| levels[k]).collect())))?;
        let remapped = vertical::LevelWeights {
            terms: weights.terms.iter().map(|&(k, w)| (needed.iter().position(|&n| n == k).expect("needed"), w)).collect(),
        };
        Ok((field, remapped))
    }

    /// A variable at one pressure (interpolated in ln p between data levels
    /// when it is not one); the level dimension is removed. Below-ground
    /// points are NaN when the data hold surface pressure and
    /// `mask_below_ground` is set.
    pub fn at_pressure(&self, name: &str, pressure: f64, mask_below_ground: bool) -> Result<Field> {
        self.at_pressure_shared(name, pressure, mask_below_ground).map(Arc::unwrap_or_clone)
    }

    /// As `at_pressure`, the field shared with the run's store (no copy).
    pub fn at_pressure_shared(&self, name: &str, pressure: f64, mask_below_ground: bool) -> Result<Arc<Field>> {
        self.shared_field_of(format!("at_pressure {name:?} {pressure:?} {mask_below_ground}"), || self.at_pressure_computed(name, pressure, mask_below_ground))
    }

    /// The geopotential at a pressure is `geopotential_at`'s field, the
    /// same one (shared under both keys, not copied); any other variable is
    /// interpolated in ln p. Fails as those do.
    fn at_pressure_computed(&self, name: &str, pressure: f64, mask_below_ground: bool) -> Result<Arc<Field>> {
        if let Ok((geopotential, _)) = self.geopotential_source() {
            if self.dataset.resolve(name)?.name == geopotential {
                return self.geopotential_at_shared(pressure, mask_below_ground);
            }
        }
        self.interpolated_in_ln_p(name, pressure, mask_below_ground).map(Arc::new)
    }

    /// A variable at one pressure, linear in ln p between the levels around
    /// it (for model-level data, straight from the model levels), masked
    /// below ground when asked; named and described as the variable, with a
    /// `pressure_level` attribute. Linear in ln p (field guide,
    /// "Formulas": interpolation between pressure levels); fails when the
    /// pressure lies outside the variable's levels or the read fails.
    ///
    /// At a data level (one term) the level is read on its own, not kept in
    /// the run's read store (the value at the pressure is kept instead), and
    /// becomes the result in place with `apply_weights`'s arithmetic for one
    /// term, ((0 + w x) * 1) in f64 rounded to f32: the same bits, without a
    /// second whole field.
    fn interpolated_in_ln_p(&self, name: &str, pressure: f64, mask_below_ground: bool) -> Result<Field> {
        let levels = self.levels_including(name, &[], &[pressure])?;
        let weights = vertical::interpolation_weights(&levels, pressure)?;
        let (field, mut data) = match weights.terms.as_slice() {
            &[(k, w)] => {
                let mut field = self.dataset.read_with(name, &self.selection_with_levels(Some(vec![levels[k]])), Some(&self.constants))?;
                let mut data = std::mem::take(&mut field.data).index_axis_move(ndarray::Axis(1), 0);
                data.par_mapv_inplace(|x| ((0.0 + w * x as f64) * 1.0) as f32);
                (Arc::new(field), data)
            }
            _ => {
                let (field, weights) = self.read_weighted_on(name, &levels, &weights)?;
                let data = vertical::apply_weights(field.data.view(), &weights, 1.0);
                (field, data)
            }
        };
        if mask_below_ground {
            if let Some(ps) = self.surface_pressure()? {
                vertical::mask_below_ground(&mut data, ps.data.index_axis(ndarray::Axis(1), 0), pressure);
            }
        }
        let mut out = field.derived_without_levels(&field.name, &field.units, expand(data)).map_err(DiagnosticError::Unsupported)?;
        out.long_name = field.long_name.clone();
        out.standard_name = field.standard_name.clone();
        out.attributes.push(("pressure_level".into(), format!("{} hPa", trim(pressure / 100.0))));
        // Model-level data say how they reached pressure (and whether below
        // ground was extrapolated): the value at one pressure keeps that.
        if let Some(how) = field.attributes.iter().find(|(k, _)| k == "vertical_interpolation") {
            out.attributes.push(how.clone());
        }
        Ok(out)
    }

    /// Geopotential (or geopotential height, whichever the data hold) at a
    /// pressure, interpolated hydrostatically between data levels: the
    /// hypsometric integral of (virtual) temperature from the nearest data
    /// level (field guide, "Formulas": dPhi/d(ln p) = -Rd Tv), or, without
    /// temperature on levels covering the pressure, the piecewise quadratic
    /// in ln p. The result's `vertical_interpolation` attribute says which.
    pub fn geopotential_at(&self, pressure: f64, mask_below_ground: bool) -> Result<Field> {
        self.geopotential_at_shared(pressure, mask_below_ground).map(Arc::unwrap_or_clone)
    }

    /// As `geopotential_at`, the field shared with the run's store.
    fn geopotential_at_shared(&self, pressure: f64, mask_below_ground: bool) -> Result<Arc<Field>> {
        self.shared_field(format!("geopotential_at {pressure:?} {mask_below_ground}"), || self.geopotential_at_computed(pressure, mask_below_ground))
    }

    fn geopotential_at_computed(&self, pressure: f64, mask_below_ground: bool) -> Result<Field> {
        let (name, kind) = self.geopotential_source()?;
        if self.dataset.reads_any_pressure(&name) {
            // Model-level data: the geopotential at any pressure comes
            // straight from the model levels (the hydrostatic integral or
            // the stored geopotential there, one ln-p interpolation).
            let mut out = self.interpolated_in_ln_p(&name, pressure, mask_below_ground)?;
            if !out.attributes.iter().any(|(k, _)| k == "vertical_interpolation") {
                out.attributes.push(("vertical_interpolation".into(), "straight from the model levels, linearly in ln p".into()));
            }
            return Ok(out);
        }
        let z_levels = self.levels_of(&name)?;
        let temperature = match self.dataset.find_role(Role::Temperature) {
            Some(t) => t.levels.clone().map(|l| (t.name.clone(), l)),
            None => None,
        };
        let plan = vertical::geopotential_plan(&z_levels, temperature.as_ref().map(|t| t.1.as_slice()), pressure, self.integration)?;
        let (z, zw) = self.read_weighted(&name, &plan.geopotential)?;
        let mut data = vertical::apply_weights(z.data.view(), &zw, 1.0);
        let mut method = plan.method.clone();
        if let (Some(weights), Some((t_name, t_levels))) = (&plan.temperature, &temperature) {
            let c = &self.constants;
            let per_kelvin = match kind {
                GeopotentialKind::Geopotential => c.dry_air_gas_constant,
                GeopotentialKind::Height => c.dry_air_gas_constant / c.gravity,
            };
            let q_name = match self.dataset.find_role(Role::SpecificHumidity) {
                Some(q) if q.levels.as_ref() == Some(t_levels) => Some(q.name.clone()),
                _ => None,
            };
            let integral_of = |weights: &vertical::LevelWeights| -> Result<Array3<f32>> {
                let (t, tw) = self.read_weighted(t_name, weights)?;
                Ok(match &q_name {
                    Some(q_name) => {
                        let q = self.read_weighted(q_name, weights)?.0;
                        vertical::apply_weights_with(t.data.view(), Some(q.data.view()), &tw, per_kelvin, vertical::virtual_temperature_where_known)
                    }
                    None => vertical::apply_weights(t.data.view(), &tw, per_kelvin),
                })
            };
            let mut integral = integral_of(weights)?;
            if integral.dim() != data.dim() {
                return Err(DiagnosticError::Unsupported(format!("`{name}` and `{t_name}` are not on the same grid and times, so heights cannot be interpolated hydrostatically")));
            }
            // As in `thickness`: where a level the quadratic reaches is
            // missing, the temperature linear in ln p between the bracketing
            // levels takes over for that time step.
            if self.integration == vertical::IntegrationRule::Quadratic && integral.iter().any(|x| x.is_nan()) {
                let linear = vertical::geopotential_plan(&z_levels, Some(t_levels), pressure, vertical::IntegrationRule::Trapezoid)?;
                if let Some(linear_weights) = &linear.temperature {
                    let fallback = integral_of(linear_weights)?;
                    for (mut slice, other) in integral.outer_iter_mut().zip(fallback.outer_iter()) {
                        if slice.iter().zip(other.iter()).any(|(d, f)| d.is_nan() && !f.is_nan()) {
                            slice.assign(&other);
                        }
                    }
                }
            }
            data += &integral;
            if let vertical::GeopotentialInterpolation::Hydrostatic { virtual_temperature, .. } = &mut method {
                *virtual_temperature = q_name.is_some();
            }
        }
        if mask_below_ground {
            if let Some(ps) = self.surface_pressure()? {
                vertical::mask_below_ground(&mut data, ps.data.index_axis(ndarray::Axis(1), 0), pressure);
            }
        }
        geopotential_field(&z, data, pressure, method.describe())
    }

    /// The surface pressure (Pa) of the selection, `None` when the data
    /// hold none; shared with the run's store unless its units needed
    /// converting. Fails as the read does.
    fn surface_pressure(&self) -> Result<Option<Arc<Field>>> {
        match self.dataset.find_role(Role::SurfacePressure) {
            None => Ok(None),
            Some(info) => {
                let name = info.name.clone();
                let field = self.read_data(&name, &self.selection)?;
                let factor = crate::io::cf::pressure_factor(&field.units).unwrap_or(1.0);
                if factor != 1.0 {
                    let mut field = Arc::unwrap_or_clone(field);
                    field.data.mapv_inplace(|p| (p as f64 * factor) as f32);
                    field.units = "Pa".into();
                    return Ok(Some(Arc::new(field)));
                }
                Ok(Some(field))
            }
        }
    }

    /// The variable carrying geopotential or geopotential height, and which.
    fn geopotential_source(&self) -> Result<(String, GeopotentialKind)> {
        if let Some(v) = self.dataset.find_role(Role::Geopotential) {
            return Ok((v.name.clone(), GeopotentialKind::Geopotential));
        }
        if let Some(v) = self.dataset.find_role(Role::GeopotentialHeight) {
            return Ok((v.name.clone(), GeopotentialKind::Height));
        }
        Err(DataError::MissingRole {
            role: "geopotential or geopotential_height".into(),
            sources: self.dataset.labels_with_note("geopotential"),
            found: self.dataset.roles().iter().map(|(r, v)| format!("{} ({v})", r.name())).collect(),
        }
        .into())
    }

    fn role_name(&self, role: Role) -> Result<String> {
        Ok(self.dataset.resolve(role.name())?.name.clone())
    }

    fn vector(&self, u: Field, v: Field) -> Result<VectorField> {
        VectorField::new(u, v).map_err(DiagnosticError::Unsupported)
    }

    /// Geostrophic wind at a pressure level (m s-1).
    pub fn geostrophic_wind(&self, pressure: f64) -> Result<VectorField> {
        self.geostrophic_wind_shared(pressure).map(Arc::unwrap_or_clone)
    }

    /// As `geostrophic_wind`, the field shared with the run's store.
    pub fn geostrophic_wind_shared(&self, pressure: f64) -> Result<Arc<VectorField>> {
        self.shared_vector(format!("geostrophic_wind {pressure:?}"), || self.geostrophic_wind_computed(pressure))
    }

    fn geostrophic_wind_computed(&self, pressure: f64) -> Result<VectorField> {
        let (name, kind) = self.geopotential_source()?;
        let z = self.at_pressure_shared(&name, pressure, false)?;
        self.geostrophic_wind_of(&z, kind, &format!("at {} hPa", trim(pressure / 100.0)))
    }

    /// Geostrophic wind of any geopotential or geopotential-height field.
    pub fn geostrophic_wind_of(&self, z: &Field, kind: GeopotentialKind, where_: &str) -> Result<VectorField> {
        let (u, v) = geostrophic::geostrophic_wind(&z.grid, &self.constants, z.horizontal_slices(), kind, self.equator_band);
        let band = format!("{} degrees", self.equator_band);
        let u = z
            .derived("geostrophic_eastward_wind", "m s-1", reshape_like(u, z))
            .map_err(DiagnosticError::Unsupported)?
            .with_long_name(format!("eastward geostrophic wind {where_}").trim())
            .with_attribute("equatorial_mask_half_width", band.clone());
        let v = z
            .derived("geostrophic_northward_wind", "m s-1", reshape_like(v, z))
            .map_err(DiagnosticError::Unsupported)?
            .with_long_name(format!("northward geostrophic wind {where_}").trim())
            .with_attribute("equatorial_mask_half_width", band);
        self.vector(u, v)
    }

    /// Hypsometric thickness (m) of a layer by the chosen route.
    pub fn thickness(&self, layer: Layer, route: ThicknessRoute) -> Result<Field> {
        self.thickness_shared(layer, route).map(Arc::unwrap_or_clone)
    }

    /// As `thickness`, the field shared with the run's store.
    pub fn thickness_shared(&self, layer: Layer, route: ThicknessRoute) -> Result<Arc<Field>> {
        self.shared_field(thickness_key(layer, route), || self.thickness_computed(layer, route))
    }

    fn thickness_computed(&self, layer: Layer, route: ThicknessRoute) -> Result<Field> {
        match &self.shared {
            Some(store) => store.note_one_layer(),
            None => crate::io::timings::record_one_layer(),
        }
        let c = &self.constants;
        let (data, template, method) = match route {
            ThicknessRoute::Temperature | ThicknessRoute::DryTemperature => {
                let t_name = self.role_name(Role::Temperature)?;
                let own_levels = self.levels_of(&t_name)?;
                let humidity_name = self.humidity_for(route, &own_levels);
                // Model-level data: the layer's bounds come straight from
                // the model levels when they are not presented levels.
                let along: Vec<&str> = humidity_name.iter().map(String::as_str).collect();
                let levels = self.levels_including(&t_name, &along, &[layer.bottom, layer.top])?;
                let factor = c.dry_air_gas_constant / c.gravity;
                // Reads the levels a rule needs and integrates over them.
                let integrate = |weights: &vertical::LevelWeights| -> Result<(Array3<f32>, Arc<Field>)> {
                    let (t, w) = self.read_weighted_on(&t_name, &levels, weights)?;
                    let data = match &humidity_name {
                        Some(q_name) => {
                            let q = self.read_weighted_on(q_name, &levels, weights)?.0;
                            vertical::apply_weights_with(t.data.view(), Some(q.data.view()), &w, factor, vertical::virtual_temperature)
                        }
                        None => vertical::apply_weights(t.data.view(), &w, factor),
                    };
                    Ok((data, t))
                };
                let weights = vertical::layer_integral_weights_by(&levels, layer.bottom, layer.top, self.integration)?;
                let (mut data, t) = integrate(&weights)?;
                let mut method = self.integral_method(humidity_name.is_some());
                // The quadratic rule reaches one level beyond the layer; where
                // that level is missing (humidity not reported aloft, a gap)
                // the trapezoid over the layer's own levels takes over, for
                // the whole time step so that no map mixes the two rules
                // (their small difference would show as a step).
                if self.integration == vertical::IntegrationRule::Quadratic && data.iter().any(|x| x.is_nan()) {
                    let (fallback, _) = integrate(&vertical::layer_integral_weights(&levels, layer.bottom, layer.top)?)?;
                    fall_back_where_missing(&mut data, &fallback, &mut method);
                }
                (data, t, method)
            }
            ThicknessRoute::Geopotential => {
                let (_, kind) = self.geopotential_source()?;
                let (top, bottom) = (self.geopotential_at_shared(layer.top, false)?, self.geopotential_at_shared(layer.bottom, false)?);
                let (data, method) = geopotential_difference(&top, &bottom, kind, c);
                (data, top, method)
            }
        };
        thickness_field(layer, &template, data, method)
    }

    /// The specific humidity that makes a temperature-route integral one of
    /// virtual temperature: on the temperature's own levels, and only for
    /// `ThicknessRoute::Temperature`.
    fn humidity_for(&self, route: ThicknessRoute, levels: &[f64]) -> Option<String> {
        match route {
            ThicknessRoute::Temperature => match self.dataset.find_role(Role::SpecificHumidity) {
                Some(q) if q.levels.as_ref().is_some_and(|l| *l == levels) => Some(q.name.clone()),
                _ => None,
            },
            _ => None,
        }
    }

    /// The `method` attribute of a temperature-route thickness.
    fn integral_method(&self, virtual_temperature: bool) -> String {
        let what = if virtual_temperature { "virtual temperature" } else { "temperature" };
        format!("hypsometric integral of {what} in ln p, {}", self.integration.describe())
    }

    /// Layer-mean (virtual) temperature (K) from thickness:
    /// Tbar = g0 dz / (Rd ln(p_b/p_t)).
    pub fn layer_mean_temperature(&self, layer: Layer, route: ThicknessRoute) -> Result<Field> {
        let dz = self.thickness_shared(layer, route)?;
        let factor = self.constants.gravity / (self.constants.dry_air_gas_constant * layer.log_ratio());
        let data = dz.data.mapv(|x| (x as f64 * factor) as f32);
        let mut out = dz.derived(&format!("mean_temperature_{}", layer.tag()), "K", data).map_err(DiagnosticError::Unsupported)?;
        out.long_name = format!("layer-mean temperature of the {} layer", layer.label());
        Ok(out)
    }

    /// Thermal wind of a layer (m s-1). `ThicknessRoute::Geopotential` takes
    /// the thickness route from geopotential; the temperature routes take the
    /// layer-mean temperature gradient.
    pub fn thermal_wind(&self, layer: Layer, route: ThicknessRoute) -> Result<VectorField> {
        self.thermal_wind_shared(layer, route).map(Arc::unwrap_or_clone)
    }

    /// As `thermal_wind`, the field shared with the run's store.
    pub fn thermal_wind_shared(&self, layer: Layer, route: ThicknessRoute) -> Result<Arc<VectorField>> {
        self.shared_vector(thermal_wind_key(layer, route), || self.thermal_wind_computed(layer, route))
    }

    fn thermal_wind_computed(&self, layer: Layer, route: ThicknessRoute) -> Result<VectorField> {
        let dz = self.thickness_shared(layer, route)?;
        let (u, v) = thermal_wind::thermal_wind_from_thickness(&dz.grid, &self.constants, dz.horizontal_slices(), self.equator_band);
        self.thermal_wind_field(layer, route, &dz, u, v)
    }

    /// The thermal wind's fields, named and described, from its components
    /// on the slices of the thickness `dz`.
    fn thermal_wind_field(&self, layer: Layer, route: ThicknessRoute, dz: &Field, u: Array3<f32>, v: Array3<f32>) -> Result<VectorField> {
        let how = match route {
            ThicknessRoute::Geopotential => "from the thickness gradient (geopotential)",
            _ => "from the layer-mean temperature gradient",
        };
        let label = layer.label();
        let make = |name: &str, component: &str, data: Array3<f32>| -> Result<Field> {
            Ok(dz
                .derived(&format!("{name}_{}", layer.tag()), "m s-1", reshape_like(data, dz))
                .map_err(DiagnosticError::Unsupported)?
                .with_long_name(format!("{component} thermal wind of the {label} layer {how}"))
                .with_attribute("equatorial_mask_half_width", format!("{} degrees", self.equator_band)))
        };
        self.vector(make("thermal_eastward_wind", "eastward", u)?, make("thermal_northward_wind", "northward", v)?)
    }

    /// Per-level geostrophic shear dV_g/d(ln p) from temperature at a level.
    pub fn geostrophic_shear(&self, pressure: f64) -> Result<VectorField> {
        let t = self.at_pressure_shared(&self.role_name(Role::Temperature)?, pressure, false)?;
        let (u, v) = thermal_wind::geostrophic_shear_per_log_pressure(&t.grid, &self.constants, t.horizontal_slices(), self.equator_band);
        let at = trim(pressure / 100.0);
        let u = t.derived("geostrophic_shear_eastward", "m s-1", reshape_like(u, &t)).map_err(DiagnosticError::Unsupported)?;
        let v = t.derived("geostrophic_shear_northward", "m s-1", reshape_like(v, &t)).map_err(DiagnosticError::Unsupported)?;
        self.vector(
            u.with_long_name(format!("eastward geostrophic shear per unit ln p at {at} hPa")),
            v.with_long_name(format!("northward geostrophic shear per unit ln p at {at} hPa")),
        )
    }

    /// The analysed wind at a pressure.
    pub fn wind(&self, pressure: f64) -> Result<VectorField> {
        let (u, v) = self.wind_components(pressure)?;
        self.vector(Arc::unwrap_or_clone(u), Arc::unwrap_or_clone(v))
    }

    /// The analysed wind's components at a pressure, shared with the run's
    /// store (for callers that only read them). Fails as `at_pressure`.
    fn wind_components(&self, pressure: f64) -> Result<(Arc<Field>, Arc<Field>)> {
        let u = self.at_pressure_shared(&self.role_name(Role::EastwardWind)?, pressure, false)?;
        let v = self.at_pressure_shared(&self.role_name(Role::NorthwardWind)?, pressure, false)?;
        Ok((u, v))
    }

    /// Analysed-wind shear across a layer: V(top) - V(bottom).
    pub fn wind_shear(&self, layer: Layer) -> Result<VectorField> {
        let ((bottom_u, bottom_v), (top_u, top_v)) = (self.wind_components(layer.bottom)?, self.wind_components(layer.top)?);
        self.vector(
            named_difference(&top_u, &bottom_u, &format!("wind_shear_eastward_{}", layer.tag()), &format!("eastward wind shear of the {} layer", layer.label()))?,
            named_difference(&top_v, &bottom_v, &format!("wind_shear_northward_{}", layer.tag()), &format!("northward wind shear of the {} layer", layer.label()))?,
        )
    }

    /// Ageostrophic wind V - V_g at a pressure.
    pub fn ageostrophic_wind(&self, pressure: f64) -> Result<VectorField> {
        let ((u, v), g) = (self.wind_components(pressure)?, self.geostrophic_wind_shared(pressure)?);
        let at = trim(pressure / 100.0);
        self.vector(
            named_difference(&u, &g.eastward, "ageostrophic_eastward_wind", &format!("eastward ageostrophic wind at {at} hPa"))?,
            named_difference(&v, &g.northward, "ageostrophic_northward_wind", &format!("northward ageostrophic wind at {at} hPa"))?,
        )
    }

    /// Ageostrophic shear (V_t - V_b) - V_T of a layer (field guide: the
    /// part of the analysed shear that thermal-wind balance leaves
    /// unexplained). Each component is computed in one pass,
    /// (top - bottom) - thermal in f32 in that order: the same bits as
    /// `wind_shear` minus `thermal_wind`, without the shear held as a
    /// whole field. Fails as `wind_shear` and `thermal_wind`, or when
    /// their grids differ.
    pub fn ageostrophic_shear(&self, layer: Layer, route: ThicknessRoute) -> Result<VectorField> {
        let ((bottom_u, bottom_v), (top_u, top_v)) = (self.wind_components(layer.bottom)?, self.wind_components(layer.top)?);
        let thermal = self.thermal_wind_shared(layer, route)?;
        self.vector(
            named_shear_less(&top_u, &bottom_u, &thermal.eastward, &format!("ageostrophic_shear_eastward_{}", layer.tag()), &format!("eastward ageostrophic shear of the {} layer", layer.label()))?,
            named_shear_less(&top_v, &bottom_v, &thermal.northward, &format!("ageostrophic_shear_northward_{}", layer.tag()), &format!("northward ageostrophic shear of the {} layer", layer.label()))?,
        )
    }

    /// Geostrophic temperature advection at a level (K s-1).
    pub fn temperature_advection(&self, pressure: f64) -> Result<Field> {
        let t = self.at_pressure_shared(&self.role_name(Role::Temperature)?, pressure, false)?;
        let g = self.geostrophic_wind_shared(pressure)?;
        let mut out = advect(&t, &g, &self.constants)?;
        out.name = "geostrophic_temperature_advection".into();
        out.long_name = format!("geostrophic temperature advection at {} hPa", trim(pressure / 100.0));
        Ok(out)
    }

    /// Layer-mean geostrophic temperature advection (K s-1):
    /// -Vbar_g . grad(Tbar), Vbar_g the mean of the boundary geostrophic winds
    /// and Tbar from the thickness of the same geopotential, so that it equals
    /// -(f/(Rd ln(p_b/p_t))) k . (V_b x V_t) (see physics::advection).
    pub fn layer_temperature_advection(&self, layer: Layer) -> Result<Field> {
        self.layer_temperature_advection_shared(layer).map(Arc::unwrap_or_clone)
    }

    /// As `layer_temperature_advection`, the field shared with the run's
    /// store.
    pub fn layer_temperature_advection_shared(&self, layer: Layer) -> Result<Arc<Field>> {
        self.shared_field(format!("layer_temperature_advection {layer:?}"), || self.layer_temperature_advection_computed(layer))
    }

    /// The mean wind (V_b + V_t)/2 is formed point by point inside the
    /// advection kernel (`advection::advection_by_mean`, the same f32
    /// arithmetic as the two mean fields it replaces), so it is never held
    /// as two whole fields. Fails as `geostrophic_wind` and `thickness`, or
    /// when the winds and the temperature are on different grids.
    fn layer_temperature_advection_computed(&self, layer: Layer) -> Result<Field> {
        let (b, t) = (self.geostrophic_wind_shared(layer.bottom)?, self.geostrophic_wind_shared(layer.top)?);
        let tbar = self.layer_mean_temperature(layer, ThicknessRoute::Geopotential)?;
        for wind in [&b.eastward, &b.northward, &t.eastward, &t.northward] {
            same_shape(&tbar, wind)?;
        }
        let a = advection::advection_by_mean(
            &tbar.grid,
            self.constants.earth_radius,
            tbar.horizontal_slices(),
            (b.eastward.horizontal_slices(), b.northward.horizontal_slices()),
            (t.eastward.horizontal_slices(), t.northward.horizontal_slices()),
        );
        let mut out = tbar.derived(&format!("advection_of_{}", tbar.name), &per_second(&tbar.units), reshape_like(a, &tbar)).map_err(DiagnosticError::Unsupported)?;
        out.standard_name = None;
        out.name = format!("layer_temperature_advection_{}", layer.tag());
        out.long_name = format!("layer-mean geostrophic temperature advection of the {} layer", layer.label());
        out.attributes.push(("layer".into(), layer.label()));
        Ok(out)
    }

    /// Turning of the geostrophic wind across a layer (degrees; veering, i.e.
    /// clockwise with height, positive; backing negative), NaN ("weak wind")
    /// where either wind or the shear is slower than the default threshold.
    pub fn turning(&self, layer: Layer) -> Result<Field> {
        self.turning_with(layer, thermal_wind::DEFAULT_WEAK_WIND)
    }

    /// As `turning`, with the weak-wind threshold in m s-1 (0 reports every
    /// angle that exists). The threshold is recorded in the field's
    /// `weak_wind_threshold` attribute so pictures and tables can say why a
    /// value is missing.
    pub fn turning_with(&self, layer: Layer, weak_wind: f64) -> Result<Field> {
        let (b, t) = (self.geostrophic_wind_shared(layer.bottom)?, self.geostrophic_wind_shared(layer.top)?);
        let angle = thermal_wind::turning_where_defined(b.eastward.horizontal_slices(), b.northward.horizontal_slices(), t.eastward.horizontal_slices(), t.northward.horizontal_slices(), weak_wind);
        Ok(b.eastward
            .derived(&format!("geostrophic_turning_{}", layer.tag()), "degree", reshape_like(angle, &b.eastward))
            .map_err(DiagnosticError::Unsupported)?
            .with_long_name(format!("turning of the geostrophic wind across the {} layer (veering positive)", layer.label()))
            .with_attribute("layer", layer.label())
            .with_attribute("weak_wind_threshold", format!("{} m s-1", weak_wind)))
    }

    /// Potential temperature (K) at a pressure.
    pub fn potential_temperature(&self, pressure: f64) -> Result<Field> {
        let t = self.at_pressure_shared(&self.role_name(Role::Temperature)?, pressure, false)?;
        let data = t.data.mapv(|x| stability::potential_temperature(x as f64, pressure) as f32);
        let mut out = t.derived("potential_temperature", "K", data).map_err(DiagnosticError::Unsupported)?;
        out.long_name = format!("potential temperature at {} hPa", trim(pressure / 100.0));
        out.standard_name = Some("air_potential_temperature".into());
        Ok(out)
    }

    /// Static stability N^2 (s-2) of a layer.
    pub fn static_stability(&self, layer: Layer) -> Result<Field> {
        let t_name = self.role_name(Role::Temperature)?;
        let (tb, tt) = (self.at_pressure_shared(&t_name, layer.bottom, false)?, self.at_pressure_shared(&t_name, layer.top, false)?);
        let tm = self.layer_mean_temperature(layer, ThicknessRoute::Temperature)?;
        let n2 = stability::layer_static_stability(&self.constants, tb.horizontal_slices(), tt.horizontal_slices(), tm.horizontal_slices(), layer.bottom, layer.top);
        Ok(tm
            .derived(&format!("static_stability_{}", layer.tag()), "s-2", reshape_like(n2, &tm))
            .map_err(DiagnosticError::Unsupported)?
            .with_long_name(format!("static stability N^2 of the {} layer", layer.label())))
    }

    /// Maximum Eady growth rate (s-1) of a layer.
    pub fn eady_growth_rate(&self, layer: Layer) -> Result<Field> {
        let n2 = self.static_stability(layer)?;
        let vt = self.thermal_wind_shared(layer, ThicknessRoute::Temperature)?;
        let dz = self.thickness_shared(layer, ThicknessRoute::Temperature)?;
        let sigma = match &n2.grid.projection {
            // A projected grid: the Coriolis parameter at each point's own
            // latitude; the thermal wind already has map-factor derivatives.
            Some(p) => stability::eady_growth_rate_at_points(
                &self.constants,
                &p.latitude,
                n2.horizontal_slices(),
                vt.eastward.horizontal_slices(),
                vt.northward.horizontal_slices(),
                dz.horizontal_slices(),
            ),
            None => stability::eady_growth_rate(
                &self.constants,
                &n2.grid.latitudes,
                n2.horizontal_slices(),
                vt.eastward.horizontal_slices(),
                vt.northward.horizontal_slices(),
                dz.horizontal_slices(),
            ),
        };
        Ok(n2
            .derived(&format!("eady_growth_rate_{}", layer.tag()), "s-1", reshape_like(sigma, &n2))
            .map_err(DiagnosticError::Unsupported)?
            .with_long_name(format!("maximum Eady growth rate of the {} layer", layer.label())))
    }
}

/// -V . grad(s) for fields on one grid.
pub fn advect(scalar: &Field, wind: &VectorField, constants: &Constants) -> Result<Field> {
    same_shape(scalar, &wind.eastward)?;
    let a = advection::advection(&scalar.grid, constants.earth_radius, scalar.horizontal_slices(), wind.eastward.horizontal_slices(), wind.northward.horizontal_slices());
    let mut out = scalar.derived(&format!("advection_of_{}", scalar.name), &per_second(&scalar.units), reshape_like(a, scalar)).map_err(DiagnosticError::Unsupported)?;
    out.long_name = format!("advection of {}", scalar.long_name);
    out.standard_name = None;
    Ok(out)
}

fn per_second(units: &str) -> String {
    match crate::units::Unit::parse(units).and_then(|u| u.divide(&crate::units::Unit::parse("s")?)) {
        Ok(u) => u.to_string(),
        Err(_) => format!("{units} s-1"),
    }
}

fn per_metre(units: &str) -> String {
    match crate::units::Unit::parse(units).and_then(|u| u.divide(&crate::units::Unit::parse("m")?)) {
        Ok(u) => u.to_string(),
        Err(_) => format!("{units} m-1"),
    }
}

fn same_shape(a: &Field, b: &Field) -> Result<()> {
    if a.data.shape() != b.data.shape() || a.grid != b.grid {
        return Err(DiagnosticError::Unsupported(format!(
            "`{}` {:?} and `{}` {:?} are not on the same grid",
            a.name,
            a.data.shape(),
            b.name,
            b.data.shape()
        )));
    }
    Ok(())
}

/// Horizontal gradient of a field, per metre.
pub fn gradient(field: &Field, constants: &Constants) -> Result<VectorField> {
    let (dx, dy) = differences::gradient(&field.grid, constants.earth_radius, field.horizontal_slices());
    let units = per_metre(&field.units);
    let mut u = field.derived(&format!("{}_gradient_eastward", field.name), &units, reshape_like(dx, field)).map_err(DiagnosticError::Unsupported)?;
    u.long_name = format!("eastward gradient of {}", field.long_name);
    u.standard_name = None;
    let mut v = field.derived(&format!("{}_gradient_northward", field.name), &units, reshape_like(dy, field)).map_err(DiagnosticError::Unsupported)?;
    v.long_name = format!("northward gradient of {}", field.long_name);
    v.standard_name = None;
    VectorField::new(u, v).map_err(DiagnosticError::Unsupported)
}

/// Divergence of a vector field.
pub fn divergence(wind: &VectorField, constants: &Constants) -> Result<Field> {
    let d = differences::divergence(&wind.eastward.grid, constants.earth_radius, wind.eastward.horizontal_slices(), wind.northward.horizontal_slices());
    let mut out = wind.eastward.derived("divergence", &per_metre(&wind.eastward.units), reshape_like(d, &wind.eastward)).map_err(DiagnosticError::Unsupported)?;
    out.long_name = format!("divergence of {}", wind.eastward.long_name.replace("eastward ", ""));
    out.standard_name = None;
    Ok(out)
}

/// Relative vorticity of a vector field.
pub fn vorticity(wind: &VectorField, constants: &Constants) -> Result<Field> {
    let z = differences::vorticity(&wind.eastward.grid, constants.earth_radius, wind.eastward.horizontal_slices(), wind.northward.horizontal_slices());
    let mut out = wind.eastward.derived("relative_vorticity", &per_metre(&wind.eastward.units), reshape_like(z, &wind.eastward)).map_err(DiagnosticError::Unsupported)?;
    out.long_name = format!("relative vorticity of {}", wind.eastward.long_name.replace("eastward ", ""));
    out.standard_name = None;
    Ok(out)
}

/// Laplacian of a field (units per square metre).
pub fn laplacian(field: &Field, constants: &Constants) -> Result<Field> {
    let l = differences::laplacian(&field.grid, constants.earth_radius, field.horizontal_slices());
    let mut out = field.derived(&format!("{}_laplacian", field.name), &per_metre(&per_metre(&field.units)), reshape_like(l, field)).map_err(DiagnosticError::Unsupported)?;
    out.long_name = format!("Laplacian of {}", field.long_name);
    out.standard_name = None;
    Ok(out)
}

/// Gaussian smoothing with standard deviation `sigma_metres`.
pub fn smooth(field: &Field, constants: &Constants, sigma_metres: f64) -> Result<Field> {
    let s = smoothing::smooth(&field.grid, constants.earth_radius, field.horizontal_slices(), sigma_metres);
    let mut out = field.derived(&field.name, &field.units, reshape_like(s, field)).map_err(DiagnosticError::Unsupported)?;
    out.long_name = format!("{} smoothed over {} km", field.long_name, trim(sigma_metres / 1000.0));
    Ok(out)
}

/// Value of each time/level slice at a point (bilinear).
pub fn point_values(field: &Field, latitude: f64, longitude: f64) -> Result<Vec<f32>> {
    let slices = field.horizontal_slices();
    slices
        .outer_iter()
        .map(|s| sampling::bilinear(&field.grid, s, latitude, longitude).map_err(DiagnosticError::from))
        .collect()
}

/// cos(lat)-weighted statistics of each time/level slice over a region.
pub fn area_statistics(field: &Field, region: &Region) -> Result<Vec<AreaStatistics>> {
    let slices = field.horizontal_slices();
    slices.outer_iter().map(|s| sampling::area_statistics(&field.grid, s, region).map_err(DiagnosticError::from)).collect()
}

/// a - b in f32, named as given, on a's coordinates. Fails when the two
/// are not on the same grid and shape.
fn named_difference(a: &Field, b: &Field, name: &str, long_name: &str) -> Result<Field> {
    same_shape(a, b)?;
    let data = &a.data - &b.data;
    let mut out = a.derived(name, &a.units, data).map_err(DiagnosticError::Unsupported)?;
    out.long_name = long_name.into();
    out.standard_name = None;
    Ok(out)
}

/// (top - bottom) - less in f32, in that order (the same bits as
/// `named_difference` of `named_difference(top, bottom)` and `less`), in
/// one pass with no intermediate field; named as given, on top's
/// coordinates. Fails when the three are not on the same grid and shape.
fn named_shear_less(top: &Field, bottom: &Field, less: &Field, name: &str, long_name: &str) -> Result<Field> {
    same_shape(top, bottom)?;
    same_shape(top, less)?;
    let data = Zip::from(&top.data).and(&bottom.data).and(&less.data).par_map_collect(|&t, &b, &l| (t - b) - l);
    let mut out = top.derived(name, &top.units, data).map_err(DiagnosticError::Unsupported)?;
    out.long_name = long_name.into();
    out.standard_name = None;
    Ok(out)
}

/// [time, lat, lon] -> [time, 1, lat, lon].
fn expand(data: Array3<f32>) -> Array4<f32> {
    data.insert_axis(ndarray::Axis(1))
}

/// [slices, lat, lon] -> the 4-D shape of `like`.
fn reshape_like(data: Array3<f32>, like: &Field) -> Array4<f32> {
    let shape = like.data.dim();
    data.into_shape_with_order(shape).expect("operators keep the slice count")
}
