//! The balance audit: is a dataset itself in hydrostatic and geostrophic
//! balance, and are its values plausible for their levels? Statistics on
//! plain arrays (this module knows nothing of the language); `present`
//! turns the results into tables, pictures and an HTML report.
//!
//! For every adjacent layer and time:
//! - hydrostatic residual: thickness from the heights minus thickness from
//!   (virtual) temperature, dz = (Rd/g0) * integral of Tv d ln p (field
//!   guide, "Formulas": hypsometric thickness; Tv = T (1 + 0.608 q));
//! - thermal-wind residual: analysed shear (V_t - V_b) minus the thermal
//!   wind (Rd/f) ln(p_b/p_t) k x grad(Tbar), i.e. the ageostrophic shear
//!   (field guide, "Formulas"), by latitude band, the equatorial band left
//!   out (f -> 0 there; field guide, "Grids and numerics");
//! and for every level: the geostrophic departure V - V_g (field guide:
//! ageostrophic wind) and plausibility against the U.S. Standard
//! Atmosphere 1976 with generous named margins.
//!
//! When the hydrostatic residual is large, the audit tries the common
//! mistakes one at a time on a sample of columns (heights in decametres or
//! scaled by ten, temperature in degrees Celsius, dry-temperature heights,
//! heights from the neighbouring time step, one level's temperature swapped
//! with its neighbour's) and names the one that removes the residual.
//!
//! Failure: `audit` returns an `AuditError` naming what is missing or
//! inconsistent; missing values (NaN) are left out of every statistic and
//! counted.

pub mod present;

use ndarray::{Array2, Array3, ArrayView4, Axis};
use rayon::prelude::*;
use serde::Serialize;

use crate::constants::Constants;
use crate::grid::Grid;
use crate::physics::geostrophic::{geostrophic_wind, GeopotentialKind};
use crate::physics::standard_atmosphere;
use crate::physics::thermal_wind::thermal_wind_from_thickness;
use crate::physics::vertical::{self, IntegrationRule};

/// Plausible temperature: within this many kelvin of the U.S. Standard
/// Atmosphere 1976 at the same pressure (a generous margin: observed
/// tropospheric extremes lie within about 50 K of the standard; value from
/// memory).
pub const TEMPERATURE_MARGIN_KELVIN: f64 = 60.0;
/// Plausible geopotential height: within 800 m plus this fraction of the
/// standard height of the pressure level (U.S. Standard Atmosphere 1976;
/// margins common practice, generous on purpose).
pub const HEIGHT_MARGIN_FRACTION: f64 = 0.25;
pub const HEIGHT_MARGIN_METRES: f64 = 800.0;
/// Plausible wind speed at any level (m/s): the strongest jet-stream winds
/// analysed are a little over 100 m/s (value from memory); 150 is generous.
pub const MAXIMUM_WIND_SPEED: f64 = 150.0;
/// Latitude bands (degrees, poleward edges) of the thermal-wind residual,
/// starting at the equatorial band's edge.
const BAND_EDGES: [f64; 4] = [30.0, 45.0, 60.0, 90.0];
/// Columns per time step on which the common mistakes are tried.
const SAMPLE_COLUMNS: usize = 4096;
/// A tried mistake explains the residual when it cuts the RMS to this
/// fraction or less.
const EXPLAINS: f64 = 0.3;

/// What the audit reads, as arrays [time, level, lat, lon] in the data's
/// level order. Temperature in K, heights in metres (geopotential divided
/// by g0 beforehand), specific humidity in kg/kg, winds in m/s.
pub struct AuditInputs<'a> {
    pub grid: &'a Grid,
    /// Pressure (Pa) of each level, in the data's order.
    pub levels: Vec<f64>,
    pub temperature: ArrayView4<'a, f32>,
    pub heights: ArrayView4<'a, f32>,
    pub humidity: Option<ArrayView4<'a, f32>>,
    pub wind: Option<(ArrayView4<'a, f32>, ArrayView4<'a, f32>)>,
    pub time_labels: Vec<String>,
}

/// Limits above which `--strict` fails; each can be set by the user.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Thresholds {
    /// RMS hydrostatic residual of any layer (m).
    pub hydrostatic_rms_metres: f64,
    /// RMS thermal-wind residual of any layer and band (m/s).
    pub thermal_wind_rms: f64,
    /// RMS geostrophic departure at any level (m/s).
    pub geostrophic_rms: f64,
}

impl Default for Thresholds {
    /// Defaults (common practice, no single source): a few metres of
    /// thickness is what packing and differing vertical discretisations
    /// leave in a good analysis; ageostrophic winds of 10-20 m/s occur near
    /// jets and in the boundary layer, so the wind limits are generous.
    fn default() -> Self {
        Thresholds { hydrostatic_rms_metres: 3.0, thermal_wind_rms: 15.0, geostrophic_rms: 20.0 }
    }
}

#[derive(Debug, Clone, Copy)]
pub struct AuditSettings {
    pub constants: Constants,
    pub equator_band: f64,
    pub integration: IntegrationRule,
    pub thresholds: Thresholds,
}

impl Default for AuditSettings {
    fn default() -> Self {
        AuditSettings {
            constants: Constants::default(),
            equator_band: crate::physics::geostrophic::DEFAULT_EQUATOR_BAND,
            // The trapezoid by default: a layer's residual then depends on its
            // two levels only, so a bad level shows in the two layers touching
            // it and nowhere else, and a kink in the profile (the tropopause)
            // is not charged to the data as the curved rule's overshoot (about
            // 0.5 K of layer mean, 3 m, in the demo's 250-200 hPa layer).
            integration: IntegrationRule::Trapezoid,
            thresholds: Thresholds::default(),
        }
    }
}

#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum AuditError {
    #[error("the audit needs {0}")]
    Missing(String),
    #[error("{0}")]
    Inconsistent(String),
    #[error(transparent)]
    Vertical(#[from] vertical::VerticalError),
}

/// Hydrostatic residual of one layer at one time.
#[derive(Debug, Clone, Serialize)]
pub struct HydrostaticRow {
    pub time: String,
    pub bottom_hpa: f64,
    pub top_hpa: f64,
    pub mean_m: f64,
    pub rms_m: f64,
    pub mean_percent: f64,
    pub rms_percent: f64,
    pub worst_m: f64,
    pub worst_latitude: f64,
    pub worst_longitude: f64,
    /// Mean of thickness from virtual minus from dry temperature (m), when
    /// humidity is present.
    pub virtual_correction_m: Option<f64>,
    pub points: usize,
    pub missing: usize,
}

/// Thermal-wind residual of one layer, time and latitude band.
#[derive(Debug, Clone, Serialize)]
pub struct ThermalWindRow {
    pub time: String,
    pub bottom_hpa: f64,
    pub top_hpa: f64,
    pub band: String,
    pub rms_m_s: f64,
    pub points: usize,
}

/// Geostrophic departure at one level and time.
#[derive(Debug, Clone, Serialize)]
pub struct GeostrophicRow {
    pub time: String,
    pub level_hpa: f64,
    pub rms_m_s: f64,
    pub points: usize,
}

/// Range of one quantity at one level and time against its plausible range.
#[derive(Debug, Clone, Serialize)]
pub struct PlausibilityRow {
    pub time: String,
    pub level_hpa: f64,
    pub quantity: String,
    pub units: String,
    pub minimum: f64,
    pub maximum: f64,
    pub allowed_low: f64,
    pub allowed_high: f64,
    pub outside: usize,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Severity {
    Pass,
    Note,
    Fail,
}

/// One line of the audit's conclusion.
#[derive(Debug, Clone, Serialize)]
pub struct Verdict {
    pub severity: Severity,
    pub text: String,
}

/// The worst layer's residual field, for a map.
#[derive(Debug, Clone)]
pub struct WorstLayer {
    pub time_index: usize,
    pub time: String,
    pub bottom: f64,
    pub top: f64,
    /// Residual (m) on the grid, [lat, lon].
    pub residual: Array2<f32>,
}

#[derive(Debug, Clone, Serialize)]
pub struct AuditReport {
    pub hydrostatic: Vec<HydrostaticRow>,
    pub thermal_wind: Vec<ThermalWindRow>,
    pub geostrophic: Vec<GeostrophicRow>,
    pub plausibility: Vec<PlausibilityRow>,
    /// Points where height does not increase as pressure decreases.
    pub non_monotone_heights: usize,
    /// Points of negative specific humidity.
    pub negative_humidity: usize,
    pub verdicts: Vec<Verdict>,
    /// What passes a threshold (for `--strict`); empty when all pass.
    pub failures: Vec<String>,
    /// How the audit was made: methods, bands, what was left out.
    pub notes: Vec<String>,
    pub thresholds: Thresholds,
    #[serde(skip)]
    pub worst_layer: Option<WorstLayer>,
    #[serde(skip)]
    pub grid: Grid,
}

impl AuditReport {
    pub fn passed(&self) -> bool {
        self.failures.is_empty()
    }
}

fn hpa(p: f64) -> f64 {
    (p / 100.0 * 1000.0).round() / 1000.0
}

/// Each point's true latitude and longitude (degrees) and its area weight,
/// [lat, lon] flattened. On a latitude-longitude grid the coordinates are the
/// axes and the weight is cos(latitude) (field guide: area means on a
/// latitude-longitude grid weight by cos(lat)). On a projected grid the axes
/// are y and x in metres: the latitudes and longitudes are the projection's
/// (`ProjectedGrid`), and a cell of the grid's even spacing covers
/// dx dy / m^2 of the earth, m the map factor (the area scale of a conformal
/// projection is m^2, Snyder 1987, ch. 4), so the weight is 1/m^2.
struct PointGeometry {
    latitude: Vec<f64>,
    longitude: Vec<f64>,
    weight: Vec<f64>,
}

impl PointGeometry {
    fn of(grid: &Grid) -> Self {
        match &grid.projection {
            Some(p) => Self { latitude: p.latitude.clone(), longitude: p.longitude.clone(), weight: p.map_factor.iter().map(|m| 1.0 / (m * m)).collect() },
            None => {
                let nx = grid.longitudes.len();
                let each_row = |v: f64| std::iter::repeat_n(v, nx);
                Self {
                    latitude: grid.latitudes.iter().flat_map(|&lat| each_row(lat)).collect(),
                    longitude: grid.latitudes.iter().flat_map(|_| grid.longitudes.iter().copied()).collect(),
                    weight: grid.latitudes.iter().flat_map(|lat| each_row(lat.to_radians().cos().max(0.0))).collect(),
                }
            }
        }
    }
}

/// Weighted sums for a mean and an RMS.
#[derive(Debug, Clone, Copy, Default)]
struct Moments {
    weight: f64,
    sum: f64,
    squares: f64,
    count: usize,
}

impl Moments {
    fn add(&mut self, w: f64, x: f64) {
        self.weight += w;
        self.sum += w * x;
        self.squares += w * x * x;
        self.count += 1;
    }
    fn mean(&self) -> f64 {
        if self.weight > 0.0 {
            self.sum / self.weight
        } else {
            f64::NAN
        }
    }
    fn rms(&self) -> f64 {
        if self.weight > 0.0 {
            (self.squares / self.weight).sqrt()
        } else {
            f64::NAN
        }
    }
}

/// Virtual temperature (field guide: Tv = T (1 + 0.608 q)); where the
/// humidity is missing (often so aloft, where it is negligible) the
/// temperature itself.
#[inline]
fn virtual_or_dry(temperature: f64, specific_humidity: f64) -> f64 {
    if specific_humidity.is_finite() {
        vertical::virtual_temperature(temperature, specific_humidity)
    } else {
        temperature
    }
}

/// Minimum, maximum and count outside [low, high] of the finite values.
fn range_of(values: &[f32], low: f64, high: f64) -> (f64, f64, usize) {
    range_of_iter(values.iter().copied(), low, high)
}

/// `range_of` over values computed on the fly (no temporary array).
fn range_of_iter(values: impl Iterator<Item = f32>, low: f64, high: f64) -> (f64, f64, usize) {
    let (mut lo, mut hi, mut outside) = (f32::INFINITY, f32::NEG_INFINITY, 0usize);
    let (low, high) = (low as f32, high as f32);
    for x in values.filter(|x| x.is_finite()) {
        lo = lo.min(x);
        hi = hi.max(x);
        outside += usize::from(x < low || x > high);
    }
    (lo as f64, hi as f64, outside)
}

/// Row (t, k, j) of a standard-layout [time, level, lat, lon] view.
fn row<'a>(a: ArrayView4<'a, f32>, t: usize, k: usize, j: usize) -> &'a [f32] {
    let (_, nz, ny, nx) = a.dim();
    let flat = a.to_slice().expect("standard layout");
    let start = ((t * nz + k) * ny + j) * nx;
    &flat[start..start + nx]
}

/// One adjacent layer: sorted positions (bottom, top) mapped to data
/// indices, and the integral weights of its thickness.
struct LayerPlan {
    bottom: usize,
    top: usize,
    weights: vertical::LevelWeights,
}

fn layer_plans(levels: &[f64], rule: IntegrationRule) -> Result<Vec<LayerPlan>, AuditError> {
    let mut order: Vec<usize> = (0..levels.len()).collect();
    order.sort_by(|&a, &b| levels[b].total_cmp(&levels[a]));
    order
        .windows(2)
        .map(|pair| Ok(LayerPlan { bottom: pair[0], top: pair[1], weights: vertical::layer_integral_weights_by(levels, levels[pair[0]], levels[pair[1]], rule)? }))
        .collect()
}

/// Audits arrays. See the module documentation for what is measured.
pub fn audit(inputs: &AuditInputs, settings: &AuditSettings) -> Result<AuditReport, AuditError> {
    let (nt, nz, ny, nx) = inputs.temperature.dim();
    if inputs.heights.dim() != inputs.temperature.dim() {
        return Err(AuditError::Inconsistent(format!(
            "temperature {:?} and heights {:?} are not on the same times, levels and grid",
            inputs.temperature.shape(),
            inputs.heights.shape()
        )));
    }
    if nz < 2 || inputs.levels.len() != nz {
        return Err(AuditError::Missing(format!("at least two pressure levels matching the data (got {} levels for {nz} in the data)", inputs.levels.len())));
    }
    if let Some(q) = &inputs.humidity {
        if q.dim() != inputs.temperature.dim() {
            return Err(AuditError::Inconsistent("specific humidity is not on the temperature's levels and grid".into()));
        }
    }
    if let Some((u, v)) = &inputs.wind {
        if u.dim() != inputs.heights.dim() || v.dim() != inputs.heights.dim() {
            return Err(AuditError::Inconsistent("the wind is not on the heights' levels and grid".into()));
        }
    }
    let c = &settings.constants;
    let plans = layer_plans(&inputs.levels, settings.integration)?;
    let layers = plans.len();
    let points = PointGeometry::of(inputs.grid);
    let weights = &points.weight;
    let factor = c.dry_air_gas_constant / c.gravity;
    let label = |t: usize| inputs.time_labels.get(t).cloned().unwrap_or_else(|| format!("step {t}"));
    let temperature = inputs.temperature.as_standard_layout();
    let heights = inputs.heights.as_standard_layout();
    let humidity = inputs.humidity.as_ref().map(|q| q.as_standard_layout());

    // Hydrostatic residual, and the thickness from temperature kept for the
    // thermal wind: one parallel task per (time, layer).
    let temperature_view = temperature.view();
    let heights_view = heights.view();
    let humidity_view = humidity.as_ref().map(|q| q.view());
    let mut thickness = Array3::<f32>::zeros((nt * layers, ny, nx));
    let rows: Vec<(HydrostaticRow, f64)> = thickness
        .axis_iter_mut(Axis(0))
        .into_par_iter()
        .enumerate()
        .map(|(task, mut out)| {
            let (t, l) = (task / layers, task % layers);
            let plan = &plans[l];
            let (mut residual, mut percent, mut correction) = (Moments::default(), Moments::default(), Moments::default());
            let (mut worst, mut worst_at, mut missing) = (0.0f64, (f64::NAN, f64::NAN), 0usize);
            // Row slices (contiguous, standard layout): the inner loop is a
            // plain walk along the row, vectorisable, no 4-D indexing.
            let mut virtual_row = vec![0.0f64; nx];
            let mut dry_row = vec![0.0f64; nx];
            for j in 0..ny {
                let weight_row = &weights[j * nx..(j + 1) * nx];
                virtual_row.iter_mut().for_each(|x| *x = 0.0);
                dry_row.iter_mut().for_each(|x| *x = 0.0);
                for &(k, wk) in &plan.weights.terms {
                    let temps = row(temperature_view.clone(), t, k, j);
                    match &humidity_view {
                        Some(q) => {
                            let qs = row(q.clone(), t, k, j);
                            for i in 0..nx {
                                let temp = temps[i] as f64;
                                dry_row[i] += wk * temp;
                                virtual_row[i] += wk * virtual_or_dry(temp, qs[i] as f64);
                            }
                        }
                        None => {
                            for i in 0..nx {
                                virtual_row[i] += wk * temps[i] as f64;
                            }
                        }
                    }
                }
                let (tops, bottoms) = (row(heights_view.clone(), t, plan.top, j), row(heights_view.clone(), t, plan.bottom, j));
                let out_row = out.row_mut(j).into_slice().expect("rows of a fresh array are contiguous");
                for i in 0..nx {
                    let w = weight_row[i];
                    let from_temperature = factor * virtual_row[i];
                    out_row[i] = from_temperature as f32;
                    let r = tops[i] as f64 - bottoms[i] as f64 - from_temperature;
                    if !r.is_finite() {
                        missing += 1;
                        continue;
                    }
                    residual.add(w, r);
                    percent.add(w, 100.0 * r / from_temperature);
                    if humidity_view.is_some() {
                        correction.add(w, from_temperature - factor * dry_row[i]);
                    }
                    if r.abs() > worst.abs() {
                        worst = r;
                        worst_at = (points.latitude[j * nx + i], points.longitude[j * nx + i]);
                    }
                }
            }
            let row = HydrostaticRow {
                time: label(t),
                bottom_hpa: hpa(inputs.levels[plan.bottom]),
                top_hpa: hpa(inputs.levels[plan.top]),
                mean_m: residual.mean(),
                rms_m: residual.rms(),
                mean_percent: percent.mean(),
                rms_percent: percent.rms(),
                worst_m: worst,
                worst_latitude: worst_at.0,
                worst_longitude: worst_at.1,
                virtual_correction_m: humidity.as_ref().map(|_| correction.mean()),
                points: residual.count,
                missing,
            };
            (row, correction.rms())
        })
        .collect();
    let correction_rms = rows.iter().map(|r| r.1).filter(|x| x.is_finite()).fold(0.0, f64::max);
    let hydrostatic: Vec<HydrostaticRow> = rows.into_iter().map(|r| r.0).collect();

    // Thermal-wind residual: analysed shear minus the thermal wind of the
    // thickness from temperature (thickness route of the field guide).
    let bands = latitude_bands(settings.equator_band);
    // Each point's band by its true latitude (usize::MAX: in none).
    let point_band: Vec<usize> = points.latitude.iter().map(|&lat| bands.iter().position(|band| band.contains(lat)).unwrap_or(usize::MAX)).collect();
    let mut thermal_wind_rows = Vec::new();
    let mut geostrophic_rows = Vec::new();
    if let Some((u, v)) = &inputs.wind {
        let (u, v) = (u.as_standard_layout(), v.as_standard_layout());
        // One layer's thermal wind at a time inside its task: no full-size
        // [time x layer] intermediates, each layer's pair dropped after use.
        let per_task: Vec<Vec<ThermalWindRow>> = (0..nt * layers)
            .into_par_iter()
            .map(|task| {
                let (t, l) = (task / layers, task % layers);
                let plan = &plans[l];
                let (ut, vt) = thermal_wind_from_thickness(inputs.grid, c, thickness.slice(ndarray::s![task..task + 1, .., ..]), settings.equator_band);
                let mut sums = vec![Moments::default(); bands.len()];
                for j in 0..ny {
                    let row_bands = &point_band[j * nx..(j + 1) * nx];
                    if row_bands.iter().all(|&b| b == usize::MAX) {
                        continue;
                    }
                    let (u_top, u_bottom) = (u.slice(ndarray::s![t, plan.top, j, ..]), u.slice(ndarray::s![t, plan.bottom, j, ..]));
                    let (v_top, v_bottom) = (v.slice(ndarray::s![t, plan.top, j, ..]), v.slice(ndarray::s![t, plan.bottom, j, ..]));
                    let (u_thermal, v_thermal) = (ut.slice(ndarray::s![0, j, ..]), vt.slice(ndarray::s![0, j, ..]));
                    let rows = [u_top, u_bottom, v_top, v_bottom, u_thermal, v_thermal].map(|r| r.to_slice().expect("contiguous rows"));
                    for i in 0..nx {
                        let du = rows[0][i] as f64 - rows[1][i] as f64 - rows[4][i] as f64;
                        let dv = rows[2][i] as f64 - rows[3][i] as f64 - rows[5][i] as f64;
                        let squared = du * du + dv * dv;
                        let b = row_bands[i];
                        if squared.is_finite() && b != usize::MAX {
                            sums[b].add(weights[j * nx + i], squared.sqrt());
                        }
                    }
                }
                bands
                    .iter()
                    .zip(sums)
                    .filter(|(_, m)| m.count > 0)
                    .map(|(band, m)| ThermalWindRow {
                        time: label(t),
                        bottom_hpa: hpa(inputs.levels[plan.bottom]),
                        top_hpa: hpa(inputs.levels[plan.top]),
                        band: band.label(),
                        rms_m_s: m.rms(),
                        points: m.count,
                    })
                    .collect()
            })
            .collect();
        thermal_wind_rows = per_task.into_iter().flatten().collect();

        // Geostrophic departure at each level.
        let slices = heights.view().into_shape_with_order((nt * nz, ny, nx)).map_err(|e| AuditError::Inconsistent(e.to_string()))?;
        geostrophic_rows = (0..nt * nz)
            .into_par_iter()
            .map(|task| {
                let (t, k) = (task / nz, task % nz);
                // This level's geostrophic wind only, dropped after use.
                let (ug, vg) = geostrophic_wind(inputs.grid, c, slices.slice(ndarray::s![task..task + 1, .., ..]), GeopotentialKind::Height, settings.equator_band);
                let mut m = Moments::default();
                for j in 0..ny {
                    let rows = [u.slice(ndarray::s![t, k, j, ..]), v.slice(ndarray::s![t, k, j, ..]), ug.slice(ndarray::s![0, j, ..]), vg.slice(ndarray::s![0, j, ..])]
                        .map(|r| r.to_slice().expect("contiguous rows"));
                    for i in 0..nx {
                        let (du, dv) = (rows[0][i] as f64 - rows[2][i] as f64, rows[1][i] as f64 - rows[3][i] as f64);
                        let squared = du * du + dv * dv;
                        if squared.is_finite() {
                            m.add(weights[j * nx + i], squared.sqrt());
                        }
                    }
                }
                GeostrophicRow { time: label(t), level_hpa: hpa(inputs.levels[k]), rms_m_s: m.rms(), points: m.count }
            })
            .collect();
    }

    // Plausibility, monotone heights, humidity.
    let wind_standard = inputs.wind.as_ref().map(|(u, v)| (u.as_standard_layout(), v.as_standard_layout()));
    let wind_views = wind_standard.as_ref().map(|(u, v)| (u.view(), v.view()));
    let plausibility_parts: Vec<(Vec<PlausibilityRow>, usize, usize)> = (0..nt * nz)
        .into_par_iter()
        .map(|task| {
            let (t, k) = (task / nz, task % nz);
            let p = inputs.levels[k];
            let mut rows = Vec::new();
            let standard_t = standard_atmosphere::temperature_at_pressure(p);
            let standard_z = standard_atmosphere::height_of_pressure(p);
            // The level's values borrowed in place (standard layout): no copy.
            fn level_slice<'v>(a: &ndarray::ArrayView4<'v, f32>, t: usize, k: usize) -> &'v [f32] {
                let (_, nz, ny, nx) = a.dim();
                let flat = a.to_slice().expect("standard layout");
                let start = (t * nz + k) * ny * nx;
                &flat[start..start + ny * nx]
            }
            if let Some(ts) = standard_t {
                let (low, high) = (ts - TEMPERATURE_MARGIN_KELVIN, ts + TEMPERATURE_MARGIN_KELVIN);
                let (lo, hi, outside) = range_of(level_slice(&temperature_view, t, k), low, high);
                rows.push(PlausibilityRow { time: label(t), level_hpa: hpa(p), quantity: "temperature".into(), units: "K".into(), minimum: lo, maximum: hi, allowed_low: low, allowed_high: high, outside });
            }
            if let Some(zs) = standard_z {
                let margin = HEIGHT_MARGIN_METRES + HEIGHT_MARGIN_FRACTION * zs.abs();
                let (low, high) = (zs - margin, zs + margin);
                let (lo, hi, outside) = range_of(level_slice(&heights_view, t, k), low, high);
                rows.push(PlausibilityRow { time: label(t), level_hpa: hpa(p), quantity: "geopotential height".into(), units: "m".into(), minimum: lo, maximum: hi, allowed_low: low, allowed_high: high, outside });
            }
            if let Some((u, v)) = &wind_views {
                // Squared speeds against the squared limit: no square root per point.
                let (us, vs) = (level_slice(u, t, k), level_slice(v, t, k));
                let (lo, hi, outside) = range_of_iter(us.iter().zip(vs).map(|(&a, &b)| a * a + b * b), 0.0, MAXIMUM_WIND_SPEED * MAXIMUM_WIND_SPEED);
                rows.push(PlausibilityRow { time: label(t), level_hpa: hpa(p), quantity: "wind speed".into(), units: "m/s".into(), minimum: lo.sqrt(), maximum: hi.sqrt(), allowed_low: 0.0, allowed_high: MAXIMUM_WIND_SPEED, outside });
            }
            let negative = humidity_view.as_ref().map_or(0, |q| level_slice(q, t, k).iter().filter(|&&x| x < 0.0).count());
            // Heights must increase upward: checked once per layer, by the
            // task of the layer's bottom level.
            let mut non_monotone = 0;
            if let Some(plan) = plans.iter().find(|plan| plan.bottom == k) {
                let (_, _, ny, nx) = heights_view.dim();
                let flat = heights_view.to_slice().expect("standard layout");
                let (bottom, top) = ((t * nz + plan.bottom) * ny * nx, (t * nz + plan.top) * ny * nx);
                non_monotone = flat[bottom..bottom + ny * nx].iter().zip(&flat[top..top + ny * nx]).filter(|(&b, &a)| a.is_finite() && b.is_finite() && a <= b).count();
            }
            (rows, non_monotone, negative)
        })
        .collect();
    let mut plausibility = Vec::new();
    let (mut non_monotone_heights, mut negative_humidity) = (0, 0);
    for (rows, a, b) in plausibility_parts {
        plausibility.extend(rows);
        non_monotone_heights += a;
        negative_humidity += b;
    }

    // The worst layer's residual field, for its map.
    let worst_layer = hydrostatic
        .iter()
        .enumerate()
        .filter(|(_, r)| r.rms_m.is_finite())
        .max_by(|a, b| a.1.rms_m.total_cmp(&b.1.rms_m))
        .map(|(task, _)| {
            let (t, l) = (task / layers, task % layers);
            let plan = &plans[l];
            let residual = Array2::from_shape_fn((ny, nx), |(j, i)| (heights[[t, plan.top, j, i]] - heights[[t, plan.bottom, j, i]]) - thickness[[task, j, i]]);
            WorstLayer { time_index: t, time: label(t), bottom: inputs.levels[plan.bottom], top: inputs.levels[plan.top], residual }
        });

    let mut report = AuditReport {
        hydrostatic,
        thermal_wind: thermal_wind_rows,
        geostrophic: geostrophic_rows,
        plausibility,
        non_monotone_heights,
        negative_humidity,
        verdicts: Vec::new(),
        failures: Vec::new(),
        notes: Vec::new(),
        thresholds: settings.thresholds,
        worst_layer,
        grid: inputs.grid.clone(),
    };
    report.notes = notes(inputs, settings, &bands);
    judge(&mut report, inputs, settings, &plans, correction_rms);
    Ok(report)
}

/// A band of latitudes, both hemispheres kept apart.
#[derive(Debug, Clone, Copy)]
struct Band {
    south: f64,
    north: f64,
}

impl Band {
    fn contains(&self, lat: f64) -> bool {
        lat >= self.south && lat < self.north || (self.north == 90.0 && lat == 90.0)
    }
    fn label(&self) -> String {
        let name = |x: f64| if x >= 0.0 { format!("{}N", x) } else { format!("{}S", -x) };
        if self.south >= 0.0 {
            format!("{}-{}", name(self.south), name(self.north))
        } else {
            format!("{}-{}", name(self.north), name(self.south))
        }
    }
}

fn latitude_bands(equator_band: f64) -> Vec<Band> {
    let mut edges = vec![equator_band];
    edges.extend(BAND_EDGES.iter().copied().filter(|&e| e > equator_band));
    let mut bands = Vec::new();
    for pair in edges.windows(2) {
        bands.push(Band { south: pair[0], north: pair[1] });
        bands.push(Band { south: -pair[1], north: -pair[0] });
    }
    bands
}

fn notes(inputs: &AuditInputs, settings: &AuditSettings, bands: &[Band]) -> Vec<String> {
    let mut notes = vec![format!(
        "hydrostatic residual = thickness from heights minus hypsometric thickness from {} ({}), cos-latitude weighted",
        if inputs.humidity.is_some() { "virtual temperature (temperature where humidity is missing)" } else { "temperature (no humidity in the data)" },
        settings.integration.describe()
    )];
    if inputs.wind.is_some() {
        notes.push(format!(
            "thermal-wind residual = analysed shear minus thermal wind of the temperature thickness, RMS of the vector difference by latitude band ({}); the equatorial band within {} degrees of the equator is excluded, where the Coriolis parameter vanishes",
            bands.iter().map(Band::label).collect::<Vec<_>>().join(", "),
            settings.equator_band
        ));
        notes.push("geostrophic departure = analysed wind minus geostrophic wind of the heights, RMS of the vector difference, equatorial band excluded".into());
    } else {
        notes.push("no wind in the data: thermal-wind residual and geostrophic departure not measured".into());
    }
    notes.push(format!(
        "plausible ranges: U.S. Standard Atmosphere 1976 at each level, temperature within {TEMPERATURE_MARGIN_KELVIN} K, height within {HEIGHT_MARGIN_METRES} m + {} % of the standard height, wind speed up to {MAXIMUM_WIND_SPEED} m/s; levels outside the standard's table are not range-checked",
        HEIGHT_MARGIN_FRACTION * 100.0
    ));
    notes
}

/// The common mistakes tried on the sampled columns.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Mistake {
    HeightsInDecametres,
    HeightsTimesTen,
    TemperatureInCelsius,
    DryTemperatureHeights,
    HeightsOneStepLater,
    HeightsOneStepEarlier,
    /// Temperature of the layer's two levels (data indices) exchanged.
    SwappedTemperature(usize, usize),
}

/// Columns sampled on a regular stride from every time step.
struct Sample {
    points: Vec<(usize, usize)>,
}

fn sample(ny: usize, nx: usize) -> Sample {
    let stride = ((ny * nx) as f64 / SAMPLE_COLUMNS as f64).sqrt().ceil().max(1.0) as usize;
    let points = (0..ny).step_by(stride).flat_map(|j| (0..nx).step_by(stride).map(move |i| (j, i))).collect();
    Sample { points }
}

/// RMS hydrostatic residual (m) over the sample with a mistake undone;
/// None when the mistake cannot apply (e.g. one time step only).
fn residual_undone(inputs: &AuditInputs, settings: &AuditSettings, plans: &[LayerPlan], sample: &Sample, mistake: Option<Mistake>) -> Option<f64> {
    let nt = inputs.temperature.dim().0;
    let factor = settings.constants.dry_air_gas_constant / settings.constants.gravity;
    let (height_scale, temperature_offset) = match mistake {
        Some(Mistake::HeightsInDecametres) => (10.0, 0.0),
        Some(Mistake::HeightsTimesTen) => (0.1, 0.0),
        Some(Mistake::TemperatureInCelsius) => (1.0, 273.15),
        _ => (1.0, 0.0),
    };
    let dry = mistake == Some(Mistake::DryTemperatureHeights);
    if dry && inputs.humidity.is_none() {
        return None;
    }
    let shift: isize = match mistake {
        Some(Mistake::HeightsOneStepLater) => 1,
        Some(Mistake::HeightsOneStepEarlier) => -1,
        _ => 0,
    };
    if shift != 0 && nt < 2 {
        return None;
    }
    let swap = |k: usize| match mistake {
        Some(Mistake::SwappedTemperature(a, b)) if k == a => b,
        Some(Mistake::SwappedTemperature(a, b)) if k == b => a,
        _ => k,
    };
    let mut m = Moments::default();
    for t in 0..nt {
        // Heights at t paired with temperature at t + shift.
        let tt = t as isize + shift;
        if tt < 0 || tt >= nt as isize {
            continue;
        }
        let tt = tt as usize;
        for &(j, i) in &sample.points {
            for plan in plans {
                let mut sum = 0.0;
                for &(k, w) in &plan.weights.terms {
                    let kk = swap(k);
                    let temp = inputs.temperature[[tt, kk, j, i]] as f64 + temperature_offset;
                    sum += w * match (&inputs.humidity, dry) {
                        (Some(q), false) => virtual_or_dry(temp, q[[tt, kk, j, i]] as f64),
                        _ => temp,
                    };
                }
                let dz = height_scale * (inputs.heights[[t, plan.top, j, i]] as f64 - inputs.heights[[t, plan.bottom, j, i]] as f64);
                let r = dz - factor * sum;
                if r.is_finite() {
                    m.add(1.0, r);
                }
            }
        }
    }
    (m.count > 0).then(|| m.rms())
}

fn describe_mistake(mistake: Mistake, levels: &[f64], before: f64, after: f64, correction: f64) -> String {
    let change = format!("undone, the RMS hydrostatic residual falls from {before:.1} m to {after:.1} m");
    match mistake {
        Mistake::HeightsInDecametres => format!("heights in decametres labelled metres: multiplied by ten they agree with the temperature ({change})"),
        Mistake::HeightsTimesTen => format!("heights ten times too large (scaled by ten, e.g. metres labelled decametres and converted): divided by ten they agree with the temperature ({change})"),
        Mistake::TemperatureInCelsius => format!("temperature in degrees Celsius labelled K: with 273.15 added it agrees with the heights ({change})"),
        Mistake::DryTemperatureHeights => format!(
            "heights look like dry-temperature integrals on a moist case: the residual matches the virtual-temperature correction (up to {correction:.1} m RMS in a layer); against dry temperature the heights agree ({change})"
        ),
        Mistake::HeightsOneStepLater => format!("temperature and heights disagree by one time step: the heights at each time agree with the temperature of the next step ({change})"),
        Mistake::HeightsOneStepEarlier => format!("temperature and heights disagree by one time step: the heights at each time agree with the temperature of the previous step ({change})"),
        Mistake::SwappedTemperature(a, b) => format!(
            "temperature at {} hPa and {} hPa look swapped with each other: exchanged, they agree with the heights ({change})",
            hpa(levels[a]),
            hpa(levels[b])
        ),
    }
}

/// Verdict lines and strict failures.
fn judge(report: &mut AuditReport, inputs: &AuditInputs, settings: &AuditSettings, plans: &[LayerPlan], correction_rms: f64) {
    let th = settings.thresholds;
    let (ny, nx) = (inputs.temperature.dim().2, inputs.temperature.dim().3);
    let worst = report.hydrostatic.iter().filter(|r| r.rms_m.is_finite()).max_by(|a, b| a.rms_m.total_cmp(&b.rms_m)).cloned();
    let mut verdicts = Vec::new();
    let mut failures = Vec::new();

    // Plausibility first: a unit mistake shows there before anywhere else.
    let implausible: Vec<&PlausibilityRow> = report.plausibility.iter().filter(|r| r.outside > 0).collect();
    for quantity in ["temperature", "geopotential height", "wind speed"] {
        let rows: Vec<&&PlausibilityRow> = implausible.iter().filter(|r| r.quantity == quantity).collect();
        if let Some(first) = rows.first() {
            let levels: Vec<String> = {
                let mut l: Vec<f64> = rows.iter().map(|r| r.level_hpa).collect();
                l.sort_by(|a, b| b.total_cmp(a));
                l.dedup();
                l.iter().map(|x| format!("{x}")).collect()
            };
            let text = format!(
                "{quantity} outside its plausible range at {} hPa (e.g. {} to {} {} at {} hPa, allowed {:.0} to {:.0})",
                levels.join(", "),
                fmt(first.minimum),
                fmt(first.maximum),
                first.units,
                first.level_hpa,
                first.allowed_low,
                first.allowed_high
            );
            failures.push(text.clone());
            verdicts.push(Verdict { severity: Severity::Fail, text });
        }
    }
    if report.non_monotone_heights > 0 {
        let text = format!("heights do not increase upward at {} points (height must grow as pressure falls)", report.non_monotone_heights);
        failures.push(text.clone());
        verdicts.push(Verdict { severity: Severity::Fail, text });
    }
    if report.negative_humidity > 0 {
        let text = format!("specific humidity negative at {} points", report.negative_humidity);
        failures.push(text.clone());
        verdicts.push(Verdict { severity: Severity::Fail, text });
    }

    // Hydrostatic balance, with the likely cause when it fails.
    if let Some(w) = &worst {
        if w.rms_m > th.hydrostatic_rms_metres {
            let text = format!(
                "hydrostatic residual too large: RMS {:.1} m ({:.2} %) in the {}-{} hPa layer at {}, worst {:.1} m at {} (limit {} m RMS)",
                w.rms_m,
                w.rms_percent,
                w.bottom_hpa,
                w.top_hpa,
                w.time,
                w.worst_m,
                place(w.worst_latitude, w.worst_longitude),
                th.hydrostatic_rms_metres
            );
            failures.push(text.clone());
            verdicts.push(Verdict { severity: Severity::Fail, text });
            let columns = sample(ny, nx);
            if let Some(before) = residual_undone(inputs, settings, plans, &columns, None) {
                let mut candidates = vec![
                    Mistake::HeightsInDecametres,
                    Mistake::HeightsTimesTen,
                    Mistake::TemperatureInCelsius,
                    Mistake::DryTemperatureHeights,
                    Mistake::HeightsOneStepLater,
                    Mistake::HeightsOneStepEarlier,
                ];
                candidates.extend(plans.iter().map(|p| Mistake::SwappedTemperature(p.bottom, p.top)));
                let best = candidates
                    .par_iter()
                    .filter_map(|&m| residual_undone(inputs, settings, plans, &columns, Some(m)).map(|r| (m, r)))
                    .min_by(|a, b| a.1.total_cmp(&b.1));
                match best {
                    Some((mistake, after)) if after <= EXPLAINS * before => {
                        verdicts.push(Verdict { severity: Severity::Fail, text: format!("likely cause: {}", describe_mistake(mistake, &inputs.levels, before, after, correction_rms)) })
                    }
                    _ => verdicts.push(Verdict {
                        severity: Severity::Note,
                        text: "no single common mistake (units, time step, humidity, a swapped level) explains the residual: temperature and heights may come from different analyses or vertical discretisations".into(),
                    }),
                }
            }
        } else {
            verdicts.push(Verdict {
                severity: Severity::Pass,
                text: format!(
                    "heights and temperature agree hydrostatically: RMS residual at most {:.2} m ({:.3} %) per layer, worst point {:.2} m (limit {} m RMS)",
                    w.rms_m,
                    w.rms_percent,
                    report.hydrostatic.iter().map(|r| r.worst_m.abs()).filter(|x| x.is_finite()).fold(0.0, f64::max),
                    th.hydrostatic_rms_metres
                ),
            });
        }
    }

    // Wind against the mass field.
    if let Some(w) = report.thermal_wind.iter().filter(|r| r.rms_m_s.is_finite()).max_by(|a, b| a.rms_m_s.total_cmp(&b.rms_m_s)) {
        let text = format!("thermal-wind residual (ageostrophic shear) at most {:.1} m/s RMS, in the {}-{} hPa layer, {} band, at {} (limit {} m/s)", w.rms_m_s, w.bottom_hpa, w.top_hpa, w.band, w.time, th.thermal_wind_rms);
        if w.rms_m_s > th.thermal_wind_rms {
            let text = format!("{text}: the wind shear does not follow the temperature gradient; wind and temperature may come from different times or analyses");
            failures.push(text.clone());
            verdicts.push(Verdict { severity: Severity::Fail, text });
        } else {
            verdicts.push(Verdict { severity: Severity::Pass, text });
        }
    }
    if let Some(w) = report.geostrophic.iter().filter(|r| r.rms_m_s.is_finite()).max_by(|a, b| a.rms_m_s.total_cmp(&b.rms_m_s)) {
        let text = format!("geostrophic departure at most {:.1} m/s RMS, at {} hPa at {} (limit {} m/s)", w.rms_m_s, w.level_hpa, w.time, th.geostrophic_rms);
        if w.rms_m_s > th.geostrophic_rms {
            let text = format!("{text}: the wind does not follow the height gradient; wind and heights may come from different times or analyses, or heights be scaled");
            failures.push(text.clone());
            verdicts.push(Verdict { severity: Severity::Fail, text });
        } else {
            verdicts.push(Verdict { severity: Severity::Pass, text });
        }
    }
    report.verdicts = verdicts;
    report.failures = failures;
}

fn fmt(x: f64) -> String {
    if x.abs() >= 100.0 {
        format!("{x:.0}")
    } else {
        format!("{x:.1}")
    }
}

/// "51.5N 31W".
pub fn place(latitude: f64, longitude: f64) -> String {
    if !latitude.is_finite() || !longitude.is_finite() {
        return "-".into();
    }
    let lon = ((longitude + 180.0).rem_euclid(360.0)) - 180.0;
    format!(
        "{}{} {}{}",
        trim(latitude.abs()),
        if latitude >= 0.0 { "N" } else { "S" },
        trim(lon.abs()),
        if lon >= 0.0 { "E" } else { "W" }
    )
}

fn trim(x: f64) -> String {
    let s = format!("{x:.2}");
    s.trim_end_matches('0').trim_end_matches('.').to_string()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::constants::{DRY_AIR_GAS_CONSTANT as RD, STANDARD_GRAVITY as G0};
    use ndarray::Array4;

    const LEVELS: [f64; 6] = [100000.0, 85000.0, 70000.0, 50000.0, 30000.0, 20000.0];

    /// An isothermal-by-layer hydrostatic atmosphere: T = 260 K everywhere
    /// plus a small horizontal pattern, heights its exact hypsometric
    /// integral (dz = (Rd/g0) T ln(p_b/p_t), field guide) from 100 m.
    fn balanced() -> (Grid, Array4<f32>, Array4<f32>) {
        let grid = Grid::new((0..21).map(|j| 70.0 - 2.0 * j as f64).collect(), (0..30).map(|i| -30.0 + 2.0 * i as f64).collect());
        let t = Array4::from_shape_fn((2, 6, 21, 30), |(n, _, j, i)| 260.0 + 0.1 * j as f32 + 0.05 * i as f32 + n as f32);
        let mut z = Array4::<f32>::zeros((2, 6, 21, 30));
        for n in 0..2 {
            for j in 0..21 {
                for i in 0..30 {
                    let temp = t[[n, 0, j, i]] as f64;
                    for k in 0..6 {
                        z[[n, k, j, i]] = (100.0 + RD / G0 * temp * (100000.0 / LEVELS[k]).ln()) as f32;
                    }
                }
            }
        }
        (grid, t, z)
    }

    fn run(grid: &Grid, t: &Array4<f32>, z: &Array4<f32>) -> AuditReport {
        let inputs = AuditInputs {
            grid,
            levels: LEVELS.to_vec(),
            temperature: t.view(),
            heights: z.view(),
            humidity: None,
            wind: None,
            time_labels: vec!["first".into(), "second".into()],
        };
        audit(&inputs, &AuditSettings::default()).unwrap()
    }

    #[test]
    fn a_balanced_atmosphere_passes_with_tiny_residuals() {
        let (grid, t, z) = balanced();
        let report = run(&grid, &t, &z);
        assert_eq!(report.hydrostatic.len(), 2 * 5);
        assert!(report.hydrostatic.iter().all(|r| r.rms_m < 0.01), "{:?}", report.hydrostatic[0]);
        assert!(report.passed(), "{:?}", report.failures);
        assert_eq!(report.non_monotone_heights, 0);
    }

    #[test]
    fn a_warm_bias_in_one_level_shows_in_the_layers_touching_it() {
        // 2 K added to 700 hPa temperature: the 850-700 and 700-500 layers
        // get thicker from temperature, so the residual is negative there.
        let (grid, mut t, z) = balanced();
        t.slice_mut(ndarray::s![.., 2, .., ..]).mapv_inplace(|x| x + 2.0);
        let report = run(&grid, &t, &z);
        let layer = |b: f64| report.hydrostatic.iter().find(|r| r.bottom_hpa == b && r.time == "first").unwrap().mean_m;
        assert!(layer(850.0) < -1.0 && layer(700.0) < -1.0, "{} {}", layer(850.0), layer(700.0));
        assert!(layer(1000.0).abs() < 0.5 && layer(300.0).abs() < 0.01);
        assert!(!report.passed());
    }

    #[test]
    fn heights_in_decametres_are_named() {
        let (grid, t, z) = balanced();
        let report = run(&grid, &t, &z.mapv(|x| x / 10.0));
        let text: Vec<&str> = report.verdicts.iter().map(|v| v.text.as_str()).collect();
        assert!(text.iter().any(|v| v.contains("heights in decametres labelled metres")), "{text:?}");
        assert!(report.plausibility.iter().any(|r| r.quantity == "geopotential height" && r.outside > 0));
    }

    #[test]
    fn latitude_bands_leave_out_the_equator() {
        let bands = latitude_bands(5.0);
        assert!(bands.iter().all(|b| !b.contains(0.0) && !b.contains(4.9) && !b.contains(-4.9)));
        assert!(bands.iter().any(|b| b.contains(5.0)) && bands.iter().any(|b| b.contains(90.0)) && bands.iter().any(|b| b.contains(-90.0)));
        assert_eq!(bands[0].label(), "5N-30N");
        assert_eq!(bands[1].label(), "5S-30S");
    }
}
