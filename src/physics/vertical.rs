//! The vertical: interpolation and integration in ln p, hydrostatic
//! thickness, layer means, masking below ground.
//!
//! Every vertical operation here is linear in the level values, so it is
//! computed once as a set of weights on the data levels and then applied to
//! every column in parallel (`apply_weights`). This keeps the hot loop a
//! plain weighted sum and lets layer boundaries fall between data levels.
//!
//! Sources: hydrostatic balance with the ideal gas law, dPhi/d(ln p) = -Rd T;
//! hypsometric thickness dz = (Rd/g0) Tbar ln(p_b/p_t) with Tbar the
//! ln p-weighted layer mean (field guide, "Formulas"); trapezoid rule in ln p.

use ndarray::{Array3, Array4, ArrayView4, Axis, Zip};
use rayon::prelude::*;

/// A linear functional of a column: value = sum of weight * level value.
#[derive(Debug, Clone, PartialEq)]
pub struct LevelWeights {
    pub terms: Vec<(usize, f64)>,
}

/// Why a vertical operation cannot be done; each says what is available.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum VerticalError {
    #[error("{pressure} hPa is outside the data's levels ({lowest} to {highest} hPa); Baroc interpolates between levels but does not extrapolate")]
    OutsideLevels { pressure: f64, lowest: f64, highest: f64 },
    #[error("a layer needs two different pressures; got {bottom} hPa and {top} hPa")]
    EmptyLayer { bottom: f64, top: f64 },
    #[error("pressure must be positive and finite, got {0} Pa")]
    BadPressure(f64),
    #[error("no pressure levels in the data")]
    NoLevels,
    #[error("{levels} pressure levels given for data with {data} levels; they must match")]
    LevelCount { levels: usize, data: usize },
}

fn hpa(p: f64) -> f64 {
    (p / 100.0 * 1000.0).round() / 1000.0
}

/// Levels sorted by decreasing pressure, as (original index, pressure).
fn sorted_levels(levels: &[f64]) -> Vec<(usize, f64)> {
    let mut sorted: Vec<(usize, f64)> = levels.iter().copied().enumerate().collect();
    sorted.sort_by(|a, b| b.1.total_cmp(&a.1));
    sorted
}

fn check_pressure(levels: &[f64], pressure: f64) -> Result<(), VerticalError> {
    if !(pressure.is_finite() && pressure > 0.0) {
        return Err(VerticalError::BadPressure(pressure));
    }
    if levels.is_empty() {
        return Err(VerticalError::NoLevels);
    }
    let (lo, hi) = levels.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &p| (a.min(p), b.max(p)));
    // A relative tolerance lets 500 hPa match a level stored as 50000.0001 Pa.
    if pressure < lo * (1.0 - 1e-9) || pressure > hi * (1.0 + 1e-9) {
        return Err(VerticalError::OutsideLevels { pressure: hpa(pressure), lowest: hpa(lo), highest: hpa(hi) });
    }
    Ok(())
}

/// Weights for the value at `pressure`, linear in ln p between the two
/// neighbouring data levels (exactly the level's value on a data level).
/// Fails when the pressure is outside the levels (no extrapolation).
pub fn interpolation_weights(levels: &[f64], pressure: f64) -> Result<LevelWeights, VerticalError> {
    check_pressure(levels, pressure)?;
    let sorted = sorted_levels(levels);
    if let Some(&(k, _)) = sorted.iter().find(|(_, p)| (p - pressure).abs() <= 1e-9 * pressure) {
        return Ok(LevelWeights { terms: vec![(k, 1.0)] });
    }
    let lnp = pressure.ln();
    for pair in sorted.windows(2) {
        let ((kb, pb), (kt, pt)) = (pair[0], pair[1]);
        if pressure <= pb && pressure >= pt {
            let w = (pb.ln() - lnp) / (pb.ln() - pt.ln()); // weight of the upper level
            return Ok(LevelWeights { terms: vec![(kb, 1.0 - w), (kt, w)] });
        }
    }
    let (lo, hi) = (sorted[sorted.len() - 1].1, sorted[0].1);
    Err(VerticalError::OutsideLevels { pressure: hpa(pressure), lowest: hpa(lo), highest: hpa(hi) })
}

/// Weights of the integral of a column over ln p from `top` to `bottom`
/// (pressures in Pa, bottom > top), by the trapezoid rule on the data levels
/// inside the layer, with the boundaries interpolated linearly in ln p.
/// The result is in (column units) x (ln p units), e.g. K for temperature.
pub fn layer_integral_weights(levels: &[f64], bottom: f64, top: f64) -> Result<LevelWeights, VerticalError> {
    if (bottom - top).abs() <= 1e-9 * bottom.max(top) {
        return Err(VerticalError::EmptyLayer { bottom: hpa(bottom), top: hpa(top) });
    }
    let (bottom, top) = if bottom > top { (bottom, top) } else { (top, bottom) };
    check_pressure(levels, bottom)?;
    check_pressure(levels, top)?;
    // Nodes of the piecewise-linear (in ln p) profile inside the layer.
    let mut nodes: Vec<(f64, LevelWeights)> = vec![(bottom, interpolation_weights(levels, bottom)?)];
    for (k, p) in sorted_levels(levels) {
        if p < bottom * (1.0 - 1e-9) && p > top * (1.0 + 1e-9) {
            nodes.push((p, LevelWeights { terms: vec![(k, 1.0)] }));
        }
    }
    nodes.push((top, interpolation_weights(levels, top)?));
    let mut weights = vec![0.0; levels.len()];
    for pair in nodes.windows(2) {
        let d = pair[0].0.ln() - pair[1].0.ln();
        for node in pair {
            for &(k, w) in &node.1.terms {
                weights[k] += 0.5 * d * w;
            }
        }
    }
    Ok(LevelWeights { terms: weights.into_iter().enumerate().filter(|(_, w)| *w != 0.0).collect() })
}

/// How a column is integrated over ln p between data levels.
///
/// `Quadratic` (the default) integrates the piecewise-quadratic interpolant
/// in ln p described at `curved_interpolation_weights`: on each interval
/// between data levels the mean of the two parabolas through that interval's
/// levels and one neighbour each side (one parabola at the ends of the
/// column, a straight line when there are only two levels). It is exact for
/// a profile quadratic in ln p on unevenly spaced levels, the Simpson-like
/// order the hypsometric integral wants (field guide, "Formulas": "integrate
/// in ln p (trapezoid at least)"). `Trapezoid` is the straight line between
/// neighbouring levels, kept to compare with older results.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, serde::Serialize, serde::Deserialize)]
pub enum IntegrationRule {
    #[default]
    Quadratic,
    Trapezoid,
}

impl IntegrationRule {
    /// The word the language uses: `with integration trapezoid`.
    pub fn word(self) -> &'static str {
        match self {
            IntegrationRule::Quadratic => "quadratic",
            IntegrationRule::Trapezoid => "trapezoid",
        }
    }

    /// What the rule does, for a result's metadata.
    pub fn describe(self) -> &'static str {
        match self {
            IntegrationRule::Quadratic => "piecewise-quadratic interpolant in ln p (exact for a profile quadratic in ln p)",
            IntegrationRule::Trapezoid => "trapezoid rule in ln p",
        }
    }
}

/// Three-point Gauss-Legendre nodes (in units of the half-interval) and
/// weights: exact for polynomials up to degree 5, so exact for the integral
/// of any quadratic interpolant (Abramowitz and Stegun 1964, table 25.4).
const GAUSS_NODES: [f64; 3] = [-0.774_596_669_241_483_4, 0.0, 0.774_596_669_241_483_4];
const GAUSS_WEIGHTS: [f64; 3] = [5.0 / 9.0, 8.0 / 9.0, 5.0 / 9.0];

/// Lagrange basis of the nodes `xs` at `x`: the weights of the node values
/// in the polynomial through them (textbook Lagrange interpolation).
fn lagrange(xs: &[f64], x: f64) -> Vec<f64> {
    (0..xs.len())
        .map(|i| (0..xs.len()).filter(|&j| j != i).map(|j| (x - xs[j]) / (xs[i] - xs[j])).product())
        .collect()
}

/// Weights (on sorted positions) of the piecewise-quadratic interpolant in
/// ln p at `x` = ln p inside sorted interval `s` (between sorted levels s
/// and s+1, pressures decreasing): the mean of the parabolas through
/// (s-1, s, s+1) and (s, s+1, s+2) where both exist, the one that exists at
/// the ends of the column, and the straight line with only two levels.
fn curved_on_interval(log_pressures: &[f64], s: usize, x: f64) -> Vec<(usize, f64)> {
    let n = log_pressures.len();
    let mut stencils: Vec<usize> = Vec::with_capacity(2);
    if s >= 1 && s + 1 < n {
        stencils.push(s - 1);
    }
    if s + 2 < n {
        stencils.push(s);
    }
    if stencils.is_empty() {
        let w = (log_pressures[s] - x) / (log_pressures[s] - log_pressures[s + 1]);
        return vec![(s, 1.0 - w), (s + 1, w)];
    }
    let share = 1.0 / stencils.len() as f64;
    let mut out: Vec<(usize, f64)> = Vec::with_capacity(4);
    for first in stencils {
        let xs = [log_pressures[first], log_pressures[first + 1], log_pressures[first + 2]];
        for (offset, w) in lagrange(&xs, x).into_iter().enumerate() {
            let k = first + offset;
            match out.iter_mut().find(|(kk, _)| *kk == k) {
                Some(entry) => entry.1 += share * w,
                None => out.push((k, share * w)),
            }
        }
    }
    out
}

/// Weights for the value at `pressure` from the piecewise-quadratic
/// interpolant in ln p (see `IntegrationRule::Quadratic`): honours the
/// curvature of a profile such as geopotential height, which a straight
/// line in ln p would cut across (it treats each layer as isothermal).
/// Exactly the level's value on a data level; fails outside the levels.
pub fn curved_interpolation_weights(levels: &[f64], pressure: f64) -> Result<LevelWeights, VerticalError> {
    check_pressure(levels, pressure)?;
    let sorted = sorted_levels(levels);
    if let Some(&(k, _)) = sorted.iter().find(|(_, p)| (p - pressure).abs() <= 1e-9 * pressure) {
        return Ok(LevelWeights { terms: vec![(k, 1.0)] });
    }
    let log_pressures: Vec<f64> = sorted.iter().map(|(_, p)| p.ln()).collect();
    for s in 0..sorted.len().saturating_sub(1) {
        if pressure <= sorted[s].1 && pressure >= sorted[s + 1].1 {
            let terms = curved_on_interval(&log_pressures, s, pressure.ln()).into_iter().map(|(position, w)| (sorted[position].0, w)).collect();
            return Ok(LevelWeights { terms });
        }
    }
    let (lo, hi) = (sorted[sorted.len() - 1].1, sorted[0].1);
    Err(VerticalError::OutsideLevels { pressure: hpa(pressure), lowest: hpa(lo), highest: hpa(hi) })
}

/// Weights of the integral of a column over ln p from `top` to `bottom`
/// (Pa, either order) by the chosen rule. With `IntegrationRule::Trapezoid`
/// this is `layer_integral_weights`; with `Quadratic` each interval between
/// data levels (or the part of it inside the layer) is integrated exactly
/// over the piecewise-quadratic interpolant by three-point Gauss-Legendre
/// quadrature. Fails as `layer_integral_weights` does.
pub fn layer_integral_weights_by(levels: &[f64], bottom: f64, top: f64, rule: IntegrationRule) -> Result<LevelWeights, VerticalError> {
    if rule == IntegrationRule::Trapezoid {
        return layer_integral_weights(levels, bottom, top);
    }
    if (bottom - top).abs() <= 1e-9 * bottom.max(top) {
        return Err(VerticalError::EmptyLayer { bottom: hpa(bottom), top: hpa(top) });
    }
    let (bottom, top) = if bottom > top { (bottom, top) } else { (top, bottom) };
    check_pressure(levels, bottom)?;
    check_pressure(levels, top)?;
    let sorted = sorted_levels(levels);
    let log_pressures: Vec<f64> = sorted.iter().map(|(_, p)| p.ln()).collect();
    let (x_bottom, x_top) = (bottom.ln(), top.ln());
    let mut weights = vec![0.0; levels.len()];
    for s in 0..sorted.len().saturating_sub(1) {
        // The part of interval s inside the layer, in ln p.
        let hi = log_pressures[s].min(x_bottom);
        let lo = log_pressures[s + 1].max(x_top);
        if hi - lo <= 1e-12 {
            continue;
        }
        let (middle, half) = (0.5 * (hi + lo), 0.5 * (hi - lo));
        for (node, gauss) in GAUSS_NODES.iter().zip(GAUSS_WEIGHTS) {
            for (position, w) in curved_on_interval(&log_pressures, s, middle + half * node) {
                weights[sorted[position].0] += half * gauss * w;
            }
        }
    }
    Ok(LevelWeights { terms: weights.into_iter().enumerate().filter(|(_, w)| *w != 0.0).collect() })
}

/// How geopotential at a pressure between data levels was obtained, for a
/// result's metadata.
#[derive(Debug, Clone, PartialEq)]
pub enum GeopotentialInterpolation {
    /// The pressure is a data level: no interpolation.
    DataLevel,
    /// Hypsometric integral of (virtual) temperature from the nearest data
    /// level of geopotential (pressure in Pa).
    Hydrostatic { from_level: f64, rule: IntegrationRule, virtual_temperature: bool },
    /// Heights only: the piecewise-quadratic interpolant in ln p.
    Curved,
}

impl GeopotentialInterpolation {
    pub fn describe(&self) -> String {
        match self {
            GeopotentialInterpolation::DataLevel => "data level (no interpolation)".into(),
            GeopotentialInterpolation::Hydrostatic { from_level, rule, virtual_temperature } => format!(
                "hydrostatic: hypsometric integral of {} from the {} hPa level ({})",
                if *virtual_temperature { "virtual temperature" } else { "temperature" },
                hpa(*from_level),
                rule.describe()
            ),
            GeopotentialInterpolation::Curved => "quadratic in ln p through the neighbouring levels (no temperature to integrate)".into(),
        }
    }
}

/// The plan for geopotential (or height) at `pressure`: weights on the
/// geopotential's levels and, for the hydrostatic route, weights on the
/// temperature's levels of the hypsometric integral, in geopotential units
/// per kelvin times `gas_constant_per_unit` (Rd for geopotential, Rd/g0 for
/// height).
#[derive(Debug, Clone, PartialEq)]
pub struct GeopotentialPlan {
    pub geopotential: LevelWeights,
    pub temperature: Option<LevelWeights>,
    pub method: GeopotentialInterpolation,
}

/// Plans geopotential at `pressure` the way the trade does (hydrostatic
/// balance, dPhi/d(ln p) = -Rd Tv; field guide, "Formulas"):
/// Phi(p) = Phi(p_k) + Rd * integral from ln p to ln p_k of Tv d ln p, p_k
/// the nearest geopotential level in ln p, when temperature levels
/// (`temperature_levels`) cover p and p_k. Otherwise the heights-only
/// piecewise-quadratic interpolant. The temperature weights returned are
/// those of the integral in K (ln p units); the caller multiplies by Rd (or
/// Rd/g0 for heights). Fails when the pressure is outside the geopotential's
/// levels.
pub fn geopotential_plan(geopotential_levels: &[f64], temperature_levels: Option<&[f64]>, pressure: f64, rule: IntegrationRule) -> Result<GeopotentialPlan, VerticalError> {
    check_pressure(geopotential_levels, pressure)?;
    let sorted = sorted_levels(geopotential_levels);
    if let Some(&(k, _)) = sorted.iter().find(|(_, p)| (p - pressure).abs() <= 1e-9 * pressure) {
        return Ok(GeopotentialPlan { geopotential: LevelWeights { terms: vec![(k, 1.0)] }, temperature: None, method: GeopotentialInterpolation::DataLevel });
    }
    let &(k, p_k) = sorted
        .iter()
        .min_by(|a, b| (a.1.ln() - pressure.ln()).abs().total_cmp(&(b.1.ln() - pressure.ln()).abs()))
        .ok_or(VerticalError::NoLevels)?;
    if let Some(t_levels) = temperature_levels {
        if check_pressure(t_levels, pressure).is_ok() && check_pressure(t_levels, p_k).is_ok() {
            let mut integral = layer_integral_weights_by(t_levels, p_k, pressure, rule)?;
            // Above the anchor (p < p_k) the geopotential is larger.
            if pressure > p_k {
                for term in &mut integral.terms {
                    term.1 = -term.1;
                }
            }
            return Ok(GeopotentialPlan {
                geopotential: LevelWeights { terms: vec![(k, 1.0)] },
                temperature: Some(integral),
                method: GeopotentialInterpolation::Hydrostatic { from_level: p_k, rule, virtual_temperature: false },
            });
        }
    }
    Ok(GeopotentialPlan { geopotential: curved_interpolation_weights(geopotential_levels, pressure)?, temperature: None, method: GeopotentialInterpolation::Curved })
}

/// Applies level weights to every column of a [time, level, lat, lon] array,
/// giving [time, lat, lon]; `factor` multiplies the result and `transform`
/// maps each level value first (identity for most uses). Sums in f64. A NaN
/// at any level with a non-zero weight makes the column's result NaN.
pub fn apply_weights(data: ArrayView4<f32>, weights: &LevelWeights, factor: f64) -> Array3<f32> {
    apply_weights_with(data, None, weights, factor, |t, _| t)
}

/// As `apply_weights`, combining each level value with a second array of the
/// same shape (`companion`, e.g. specific humidity for virtual temperature)
/// through `transform(value, companion_value)`.
pub fn apply_weights_with<F>(
    data: ArrayView4<f32>,
    companion: Option<ArrayView4<f32>>,
    weights: &LevelWeights,
    factor: f64,
    transform: F,
) -> Array3<f32>
where
    F: Fn(f64, f64) -> f64 + Sync,
{
    let (nt, _, ny, nx) = data.dim();
    let mut out: Array3<f32> = super::allocation::zeroed((nt, ny, nx));
    out.axis_iter_mut(Axis(0)).into_par_iter().enumerate().for_each(|(t, mut out_t)| {
        // Accumulate level by level over whole rows: contiguous, vectorisable.
        out_t.axis_iter_mut(Axis(0)).into_par_iter().enumerate().for_each(|(j, mut out_row)| {
            let mut sum = vec![0.0f64; nx];
            for &(k, w) in &weights.terms {
                let row = data.slice(ndarray::s![t, k, j, ..]);
                match companion {
                    None => Zip::from(&mut sum[..]).and(row).for_each(|s, &v| *s += w * transform(v as f64, 0.0)),
                    Some(c) => {
                        let crow = c.slice(ndarray::s![t, k, j, ..]);
                        Zip::from(&mut sum[..]).and(row).and(crow).for_each(|s, &v, &q| *s += w * transform(v as f64, q as f64))
                    }
                }
            }
            Zip::from(&mut out_row).and(&sum[..]).for_each(|o, &s| *o = (s * factor) as f32);
        });
    });
    out
}

/// Virtual temperature from temperature (K) and specific humidity (kg/kg):
/// Tv = T (1 + 0.608 q)   (field guide; 0.608 = (1 - epsilon)/epsilon).
#[inline]
pub fn virtual_temperature(temperature: f64, specific_humidity: f64) -> f64 {
    temperature * (1.0 + 0.608 * specific_humidity)
}

/// Virtual temperature where the humidity is known, the temperature itself
/// where it is missing (NaN): humidity is often not reported aloft, where
/// its effect (0.608 q T, a few hundredths of a kelvin) is negligible.
#[inline]
pub fn virtual_temperature_where_known(temperature: f64, specific_humidity: f64) -> f64 {
    if specific_humidity.is_finite() {
        virtual_temperature(temperature, specific_humidity)
    } else {
        temperature
    }
}

/// Virtual temperature from mixing ratio r (kg/kg):
/// Tv = T (1 + r/epsilon) / (1 + r)   (field guide).
#[inline]
pub fn virtual_temperature_from_mixing_ratio(temperature: f64, mixing_ratio: f64) -> f64 {
    temperature * (1.0 + mixing_ratio / crate::constants::EPSILON) / (1.0 + mixing_ratio)
}

/// Hypsometric thickness (m) of the layer from `bottom` to `top` (Pa) from
/// temperature on levels, [time, level, lat, lon] -> [time, lat, lon]; with
/// `specific_humidity` the virtual temperature is used.
/// dz = (Rd/g0) * integral of T d ln p.
pub fn thickness_from_temperature(
    levels: &[f64],
    temperature: ArrayView4<f32>,
    specific_humidity: Option<ArrayView4<f32>>,
    bottom: f64,
    top: f64,
    dry_air_gas_constant: f64,
    gravity: f64,
) -> Result<Array3<f32>, VerticalError> {
    thickness_from_temperature_by(levels, temperature, specific_humidity, bottom, top, dry_air_gas_constant, gravity, IntegrationRule::Trapezoid)
}

/// As `thickness_from_temperature` (which keeps the trapezoid rule, for
/// comparison with older results), by the chosen integration rule.
#[allow(clippy::too_many_arguments)]
pub fn thickness_from_temperature_by(
    levels: &[f64],
    temperature: ArrayView4<f32>,
    specific_humidity: Option<ArrayView4<f32>>,
    bottom: f64,
    top: f64,
    dry_air_gas_constant: f64,
    gravity: f64,
    rule: IntegrationRule,
) -> Result<Array3<f32>, VerticalError> {
    let weights = layer_integral_weights_by(levels, bottom, top, rule)?;
    let factor = dry_air_gas_constant / gravity;
    Ok(match specific_humidity {
        None => apply_weights(temperature, &weights, factor),
        Some(q) => apply_weights_with(temperature, Some(q), &weights, factor, virtual_temperature),
    })
}

/// Geopotential (or height) at `pressure` by `geopotential_plan`, on whole
/// [time, level, lat, lon] arrays -> [time, lat, lon]. `per_kelvin` turns
/// the temperature integral (K) into the geopotential's units: Rd for
/// geopotential (m2 s-2), Rd/g0 for geopotential height (m). Temperature
/// (with optional specific humidity on the same levels, for virtual
/// temperature) is used only when the plan asks for it; a NaN on any level
/// used makes the point NaN. Returns the values and how they were obtained.
#[allow(clippy::too_many_arguments)]
pub fn geopotential_at_pressure(
    geopotential_levels: &[f64],
    geopotential: ArrayView4<f32>,
    temperature: Option<(&[f64], ArrayView4<f32>, Option<ArrayView4<f32>>)>,
    pressure: f64,
    per_kelvin: f64,
    rule: IntegrationRule,
) -> Result<(Array3<f32>, GeopotentialInterpolation), VerticalError> {
    let plan = geopotential_plan(geopotential_levels, temperature.as_ref().map(|t| t.0), pressure, rule)?;
    let mut out = apply_weights(geopotential, &plan.geopotential, 1.0);
    let mut method = plan.method;
    if let (Some(weights), Some((_, t, q))) = (&plan.temperature, temperature) {
        let integral = match q {
            None => apply_weights(t, weights, per_kelvin),
            Some(q) => apply_weights_with(t, Some(q), weights, per_kelvin, virtual_temperature),
        };
        out += &integral;
        if let GeopotentialInterpolation::Hydrostatic { virtual_temperature, .. } = &mut method {
            *virtual_temperature = q.is_some();
        }
    }
    Ok((out, method))
}

/// Latitude rows per parallel task of `adjacent_layer_thickness`: two levels
/// of a band of 8 rows of 1440 points (92 KB) stay in a core's cache.
const ROWS_PER_TASK: usize = 8;

/// Hypsometric thickness (m) of every layer between two adjacent data levels,
/// [time, level, lat, lon] -> [time, layer, lat, lon], layer k lying between
/// data levels k and k+1 in the data's own order (so either order of levels
/// works, and the thickness is positive either way).
///
/// dz_k = (Rd/g0) * (T_k + T_k+1)/2 * |ln(p_k / p_k+1)|: the hypsometric
/// equation with the trapezoid rule in ln p (field guide, "Formulas"), the
/// same value `thickness_from_temperature` gives for that layer (same
/// weights, same order of the f64 sums), computed by one pass over the two
/// levels instead of one general weighted sum per layer. A NaN at either
/// level makes the thickness NaN. Fails when there are fewer than two
/// levels, when the levels do not match the data's, when a pressure is not
/// positive, or when two adjacent levels have the same pressure.
pub fn adjacent_layer_thickness(levels: &[f64], temperature: ArrayView4<f32>, dry_air_gas_constant: f64, gravity: f64) -> Result<Array4<f32>, VerticalError> {
    if levels.len() < 2 {
        return Err(VerticalError::NoLevels);
    }
    if let Some(&bad) = levels.iter().find(|p| !(p.is_finite() && **p > 0.0)) {
        return Err(VerticalError::BadPressure(bad));
    }
    // Trapezoid weight of each level of a layer, as layer_integral_weights
    // computes it for a layer whose boundaries are data levels: 0.5 * d ln p.
    let mut half_log_ratio = Vec::with_capacity(levels.len() - 1);
    for pair in levels.windows(2) {
        let (bottom, top) = if pair[0] > pair[1] { (pair[0], pair[1]) } else { (pair[1], pair[0]) };
        if (bottom - top).abs() <= 1e-9 * bottom {
            return Err(VerticalError::EmptyLayer { bottom: hpa(bottom), top: hpa(top) });
        }
        half_log_ratio.push(0.5 * (bottom.ln() - top.ln()));
    }
    let (nt, nz, ny, nx) = temperature.dim();
    if nz != levels.len() {
        return Err(VerticalError::LevelCount { levels: levels.len(), data: nz });
    }
    let layers = nz - 1;
    let factor = dry_air_gas_constant / gravity;
    let data = temperature.as_standard_layout();
    let flat = data.as_slice().expect("standard layout");
    let mut out: Array4<f32> = super::allocation::zeroed((nt, layers, ny, nx));
    if out.is_empty() {
        return Ok(out);
    }
    // Parallel over bands of latitude rows; inside a band, layer after layer,
    // so the upper level of one layer is still in cache as the lower level of
    // the next: every input value comes from memory once, not twice.
    out.axis_chunks_iter_mut(Axis(2), ROWS_PER_TASK).into_par_iter().enumerate().for_each(|(band, mut block)| {
        let rows = block.dim().2;
        for t in 0..nt {
            for (layer, &w) in half_log_ratio.iter().enumerate() {
                for r in 0..rows {
                    let first = ((t * nz + layer) * ny + band * ROWS_PER_TASK + r) * nx;
                    let second = first + ny * nx;
                    let (lower, upper) = (&flat[first..first + nx], &flat[second..second + nx]);
                    let mut out_row = block.slice_mut(ndarray::s![t, layer, r, ..]);
                    let out_row = out_row.as_slice_mut().expect("rows of a fresh array are contiguous");
                    for ((o, &a), &b) in out_row.iter_mut().zip(lower).zip(upper) {
                        *o = ((w * a as f64 + w * b as f64) * factor) as f32;
                    }
                }
            }
        }
    });
    Ok(out)
}

/// Thickness (m) from geopotential (m2 s-2) or geopotential height (m):
/// (Phi(top) - Phi(bottom)) / g0, boundaries interpolated in ln p.
/// `to_metres` is 1/g0 for geopotential and 1 for geopotential height.
pub fn thickness_from_geopotential(levels: &[f64], geopotential: ArrayView4<f32>, bottom: f64, top: f64, to_metres: f64) -> Result<Array3<f32>, VerticalError> {
    let (bottom, top) = if bottom > top { (bottom, top) } else { (top, bottom) };
    let mut weights = interpolation_weights(levels, top)?;
    for (k, w) in interpolation_weights(levels, bottom)?.terms {
        weights.terms.push((k, -w));
    }
    Ok(apply_weights(geopotential, &weights, to_metres))
}

/// Layer-mean temperature (K) from thickness (m):
/// Tbar = g0 dz / (Rd ln(p_b/p_t))   (field guide).
pub fn mean_temperature_from_thickness(thickness: &Array3<f32>, bottom: f64, top: f64, dry_air_gas_constant: f64, gravity: f64) -> Array3<f32> {
    let factor = gravity / (dry_air_gas_constant * (bottom / top).ln().abs());
    thickness.mapv(|dz| (dz as f64 * factor) as f32)
}

/// Values at `pressure` (Pa) interpolated in ln p, [time, level, lat, lon] ->
/// [time, lat, lon]. With `surface_pressure` ([time, lat, lon], Pa), points
/// where the pressure is greater than the surface pressure are below ground
/// and become NaN.
pub fn interpolate_to_pressure(
    levels: &[f64],
    data: ArrayView4<f32>,
    pressure: f64,
    surface_pressure: Option<ndarray::ArrayView3<f32>>,
) -> Result<Array3<f32>, VerticalError> {
    let weights = interpolation_weights(levels, pressure)?;
    let mut out = apply_weights(data, &weights, 1.0);
    if let Some(ps) = surface_pressure {
        mask_below_ground(&mut out, ps, pressure);
    }
    Ok(out)
}

/// Sets to NaN the points of a [time, lat, lon] field at `pressure` that lie
/// below ground (pressure > surface pressure). Shapes must match; a surface
/// pressure with one time step applies to all.
pub fn mask_below_ground(values: &mut Array3<f32>, surface_pressure: ndarray::ArrayView3<f32>, pressure: f64) {
    let nt = values.dim().0;
    for t in 0..nt {
        let ts = if surface_pressure.dim().0 == 1 { 0 } else { t };
        Zip::from(values.index_axis_mut(Axis(0), t)).and(surface_pressure.index_axis(Axis(0), ts)).for_each(|v, &ps| {
            if (ps as f64) < pressure {
                *v = f32::NAN;
            }
        });
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::constants::{DRY_AIR_GAS_CONSTANT as RD, STANDARD_GRAVITY as G0};
    use ndarray::Array4;

    const LEVELS: [f64; 6] = [100000.0, 85000.0, 70000.0, 50000.0, 30000.0, 20000.0];

    #[test]
    fn isothermal_thickness_is_exact() {
        // dz = (Rd/g0) T ln(pb/pt) exactly for an isothermal column (hypsometric
        // equation); boundaries off the data levels included.
        let t = Array4::from_elem((1, 6, 1, 1), 250.0f32);
        let dz = thickness_from_temperature(&LEVELS, t.view(), None, 92500.0, 40000.0, RD, G0).unwrap();
        let expected = RD / G0 * 250.0 * (92500.0f64 / 40000.0).ln();
        assert!((dz[[0, 0, 0]] as f64 - expected).abs() < 1e-3, "{} vs {expected}", dz[[0, 0, 0]]);
    }

    #[test]
    fn one_kelvin_changes_1000_500_thickness_by_20_3_m() {
        // Field guide (derived): Rd ln 2 / g0 = 20.29 m per kelvin of layer mean.
        let warm = Array4::from_elem((1, 6, 1, 1), 261.0f32);
        let cold = Array4::from_elem((1, 6, 1, 1), 260.0f32);
        let a = thickness_from_temperature(&LEVELS, warm.view(), None, 100000.0, 50000.0, RD, G0).unwrap();
        let b = thickness_from_temperature(&LEVELS, cold.view(), None, 100000.0, 50000.0, RD, G0).unwrap();
        assert!(((a[[0, 0, 0]] - b[[0, 0, 0]]) as f64 - 20.29).abs() < 0.02);
    }

    #[test]
    fn levels_in_either_order_give_the_same_thickness() {
        let reversed: Vec<f64> = LEVELS.iter().rev().copied().collect();
        let profile = [288.0f32, 280.0, 272.0, 255.0, 230.0, 218.0];
        let t1 = Array4::from_shape_fn((1, 6, 1, 1), |(_, k, _, _)| profile[k]);
        let t2 = Array4::from_shape_fn((1, 6, 1, 1), |(_, k, _, _)| profile[5 - k]);
        let a = thickness_from_temperature(&LEVELS, t1.view(), None, 100000.0, 30000.0, RD, G0).unwrap();
        let b = thickness_from_temperature(&reversed, t2.view(), None, 30000.0, 100000.0, RD, G0).unwrap();
        assert!((a[[0, 0, 0]] - b[[0, 0, 0]]).abs() < 1e-3);
    }

    #[test]
    fn adjacent_layers_equal_the_general_layer_thickness() {
        // The direct two-level kernel must give what the general weighted sum
        // gives for each layer (same trapezoid weights, same f64 sums), in
        // either order of the levels. Values vary in every dimension so that
        // an indexing mistake shows.
        let t = Array4::from_shape_fn((2, 6, 3, 4), |(n, k, j, i)| 300.0 - 12.0 * k as f32 + 0.7 * j as f32 - 0.3 * i as f32 + 1.5 * n as f32);
        let reversed: Vec<f64> = LEVELS.iter().rev().copied().collect();
        let mut t_reversed = t.clone();
        t_reversed.invert_axis(Axis(1));
        for (levels, data) in [(LEVELS.to_vec(), t.view()), (reversed, t_reversed.view())] {
            let all = adjacent_layer_thickness(&levels, data, RD, G0).unwrap();
            assert_eq!(all.dim(), (2, 5, 3, 4));
            for k in 0..5 {
                let one = thickness_from_temperature(&levels, data, None, levels[k], levels[k + 1], RD, G0).unwrap();
                assert_eq!(all.index_axis(Axis(1), k), one, "layer {k}");
                assert!(one.iter().all(|&dz| dz > 0.0));
            }
        }
    }

    #[test]
    fn adjacent_layer_thickness_is_hypsometric_and_keeps_missing_data() {
        // Isothermal 1000-850 hPa: dz = (Rd/g0) T ln(1000/850) exactly
        // (hypsometric equation) = 29.2716 * 250 * 0.162519 = 1189.3 m.
        let mut t = Array4::from_elem((1, 6, 1, 2), 250.0f32);
        t[[0, 2, 0, 1]] = f32::NAN;
        let dz = adjacent_layer_thickness(&LEVELS, t.view(), RD, G0).unwrap();
        let expected = RD / G0 * 250.0 * (100000.0f64 / 85000.0).ln();
        assert!((dz[[0, 0, 0, 0]] as f64 - expected).abs() < 1e-3);
        assert!((expected - 1189.3).abs() < 0.1);
        // The missing value at 700 hPa spoils both layers that touch it only.
        assert!(dz[[0, 1, 0, 1]].is_nan() && dz[[0, 2, 0, 1]].is_nan());
        assert!(dz[[0, 0, 0, 1]].is_finite() && dz[[0, 3, 0, 1]].is_finite() && dz[[0, 1, 0, 0]].is_finite());
    }

    #[test]
    fn adjacent_layer_thickness_refuses_what_has_no_layers() {
        let t = Array4::from_elem((1, 3, 1, 1), 250.0f32);
        assert_eq!(adjacent_layer_thickness(&[85000.0], t.view(), RD, G0).unwrap_err(), VerticalError::NoLevels);
        assert_eq!(adjacent_layer_thickness(&[85000.0, 85000.0, 50000.0], t.view(), RD, G0).unwrap_err(), VerticalError::EmptyLayer { bottom: 850.0, top: 850.0 });
        assert_eq!(adjacent_layer_thickness(&[85000.0, -1.0, 50000.0], t.view(), RD, G0).unwrap_err(), VerticalError::BadPressure(-1.0));
        let err = adjacent_layer_thickness(&[85000.0, 50000.0], t.view(), RD, G0).unwrap_err();
        assert_eq!(err.to_string(), "2 pressure levels given for data with 3 levels; they must match");
    }

    #[test]
    fn virtual_temperature_raises_thickness() {
        // Tv = T(1 + 0.608 q): with q = 0.01, Tv exceeds T by 0.608 percent.
        assert!((virtual_temperature(300.0, 0.01) - 301.824).abs() < 1e-9);
        // Mixing-ratio form agrees with the specific-humidity form to first
        // order (q = r/(1+r)).
        let r = 0.01;
        assert!((virtual_temperature_from_mixing_ratio(300.0, r) - virtual_temperature(300.0, r / (1.0 + r))).abs() < 0.01);
    }

    #[test]
    fn outside_levels_is_an_error_naming_the_range() {
        let err = interpolation_weights(&LEVELS, 105000.0).unwrap_err();
        assert_eq!(err.to_string(), "1050 hPa is outside the data's levels (200 to 1000 hPa); Baroc interpolates between levels but does not extrapolate");
    }

    #[test]
    fn below_ground_points_are_masked() {
        let data = Array4::from_elem((1, 6, 1, 2), 5.0f32);
        let ps = ndarray::Array3::from_shape_vec((1, 1, 2), vec![98000.0f32, 101000.0]).unwrap();
        let out = interpolate_to_pressure(&LEVELS, data.view(), 100000.0, Some(ps.view())).unwrap();
        assert!(out[[0, 0, 0]].is_nan());
        assert_eq!(out[[0, 0, 1]], 5.0);
    }

    /// The analytic, exactly hydrostatic column used below (the project's
    /// own construction): temperature a power law in pressure plus a wave
    /// part decaying upward, T(p) = T0 (p/p0)^a + W (p/p0)^b, and height its
    /// exact hypsometric integral (dZ/d(ln p) = -(Rd/g0) T, field guide):
    /// Z(p) = Z0 + (Rd/g0) [T0 (1 - (p/p0)^a)/a + W (1 - (p/p0)^b)/b].
    /// a = 0.19 is about Rd * 6.5 K/km / g0, the standard tropospheric lapse.
    fn analytic_temperature(p: f64, wave: f64) -> f64 {
        288.0 * (p / 100000.0).powf(0.19) + wave * (p / 100000.0)
    }
    fn analytic_height(p: f64, wave: f64) -> f64 {
        let x = p / 100000.0;
        120.0 + RD / G0 * (288.0 * (1.0 - x.powf(0.19)) / 0.19 + wave * (1.0 - x))
    }
    const ANALYTIC_LEVELS: [f64; 7] = [100000.0, 85000.0, 70000.0, 50000.0, 30000.0, 25000.0, 20000.0];

    fn analytic_columns() -> (Array4<f32>, Array4<f32>, Vec<f64>) {
        let waves = vec![-12.0, 0.0, 7.5, 12.0];
        let t = Array4::from_shape_fn((1, 7, 1, waves.len()), |(_, k, _, i)| analytic_temperature(ANALYTIC_LEVELS[k], waves[i]) as f32);
        let z = Array4::from_shape_fn((1, 7, 1, waves.len()), |(_, k, _, i)| analytic_height(ANALYTIC_LEVELS[k], waves[i]) as f32);
        (t, z, waves)
    }

    #[test]
    fn quadratic_rule_is_exact_for_a_profile_quadratic_in_ln_p() {
        // Integral of c0 + c1 x + c2 x^2 over x = ln p in closed form
        // (elementary calculus), on uneven levels, boundaries on and off them.
        let f = |x: f64| 3.0 + 2.0 * x - 0.7 * x * x;
        let big_f = |x: f64| 3.0 * x + x * x - 0.7 * x * x * x / 3.0;
        let column = Array4::from_shape_fn((1, 6, 1, 1), |(_, k, _, _)| f(LEVELS[k].ln()) as f32);
        for (bottom, top) in [(100000.0, 20000.0), (92000.0, 41000.0), (85000.0, 70000.0), (60000.0, 55000.0)] {
            let w = layer_integral_weights_by(&LEVELS, bottom, top, IntegrationRule::Quadratic).unwrap();
            let got = apply_weights(column.view(), &w, 1.0)[[0, 0, 0]] as f64;
            let exact = big_f(f64::ln(bottom)) - big_f(f64::ln(top));
            assert!((got - exact).abs() < 1e-5 * exact.abs().max(1.0), "{bottom}-{top}: {got} vs {exact}");
        }
        // And the interpolant reproduces the quadratic between levels.
        let w = curved_interpolation_weights(&LEVELS, 40000.0).unwrap();
        let got = apply_weights(column.view(), &w, 1.0)[[0, 0, 0]] as f64;
        assert!((got - f(40000.0f64.ln())).abs() < 1e-4, "{got}");
    }

    #[test]
    fn analytic_atmosphere_thickness_by_both_routes_within_half_a_metre() {
        // On the analytic hydrostatic column above, levels 1000/850/700/500/
        // 300/250/200 hPa: thickness of layers on and off the data levels by
        // the temperature route (quadratic rule) and by the geopotential route
        // (hydrostatic interpolation of height to off-level boundaries) must
        // both be within 0.5 m of the exact hypsometric value.
        let (t, z, waves) = analytic_columns();
        for (bottom, top) in [(100000.0, 50000.0), (90000.0, 40000.0), (85000.0, 30000.0), (95000.0, 22000.0), (70000.0, 60000.0)] {
            let by_temperature = thickness_from_temperature_by(&ANALYTIC_LEVELS, t.view(), None, bottom, top, RD, G0, IntegrationRule::Quadratic).unwrap();
            let height = |p: f64| {
                geopotential_at_pressure(&ANALYTIC_LEVELS, z.view(), Some((&ANALYTIC_LEVELS, t.view(), None)), p, RD / G0, IntegrationRule::Quadratic).unwrap().0
            };
            let by_heights = height(top) - height(bottom);
            for (i, &wave) in waves.iter().enumerate() {
                let exact = analytic_height(top, wave) - analytic_height(bottom, wave);
                let a = by_temperature[[0, 0, i]] as f64;
                let b = by_heights[[0, 0, i]] as f64;
                assert!((a - exact).abs() < 0.5, "{bottom}-{top} temperature route {a} vs {exact}");
                assert!((b - exact).abs() < 0.5, "{bottom}-{top} geopotential route {b} vs {exact}");
            }
        }
    }

    #[test]
    fn quadratic_rule_beats_the_trapezoid_on_the_analytic_atmosphere() {
        // The trapezoid treats T as linear in ln p; this T is convex in ln p,
        // so over 1000-500 hPa (four levels) it is off by about a metre, and
        // the quadratic rule by a few centimetres (hypsometric equation).
        let (t, _, waves) = analytic_columns();
        let exact = analytic_height(50000.0, waves[1]) - analytic_height(100000.0, waves[1]);
        let by = |rule| thickness_from_temperature_by(&ANALYTIC_LEVELS, t.view(), None, 100000.0, 50000.0, RD, G0, rule).unwrap()[[0, 0, 1]] as f64;
        let (trapezoid, quadratic) = ((by(IntegrationRule::Trapezoid) - exact).abs(), (by(IntegrationRule::Quadratic) - exact).abs());
        assert!(trapezoid > 0.5, "trapezoid error {trapezoid}");
        assert!(quadratic < 0.2 && quadratic < trapezoid / 4.0, "quadratic error {quadratic} vs trapezoid {trapezoid}");
    }

    #[test]
    fn heights_only_interpolation_honours_curvature_and_says_so() {
        // Without temperature, height at 400 hPa from the piecewise quadratic
        // in ln p: much closer to the analytic value than the straight line
        // in ln p (which treats the layer as isothermal).
        let (t, z, waves) = analytic_columns();
        let exact = analytic_height(40000.0, waves[0]);
        let (curved, method) = geopotential_at_pressure(&ANALYTIC_LEVELS, z.view(), None, 40000.0, RD / G0, IntegrationRule::Quadratic).unwrap();
        assert_eq!(method, GeopotentialInterpolation::Curved);
        let linear = interpolate_to_pressure(&ANALYTIC_LEVELS, z.view(), 40000.0, None).unwrap();
        let (curved_error, linear_error) = ((curved[[0, 0, 0]] as f64 - exact).abs(), (linear[[0, 0, 0]] as f64 - exact).abs());
        assert!(linear_error > 10.0, "linear error {linear_error}");
        assert!(curved_error < linear_error / 5.0, "curved {curved_error} vs linear {linear_error}");
        // With temperature the method is hydrostatic from the nearest level
        // in ln p (500 hPa is nearer 400 hPa than 300 hPa is).
        let (_, method) = geopotential_at_pressure(&ANALYTIC_LEVELS, z.view(), Some((&ANALYTIC_LEVELS, t.view(), None)), 40000.0, RD / G0, IntegrationRule::Trapezoid).unwrap();
        assert_eq!(method, GeopotentialInterpolation::Hydrostatic { from_level: 50000.0, rule: IntegrationRule::Trapezoid, virtual_temperature: false });
        assert!(method.describe().contains("from the 500 hPa level"), "{}", method.describe());
        // On a data level nothing is interpolated.
        let (_, method) = geopotential_at_pressure(&ANALYTIC_LEVELS, z.view(), None, 50000.0, RD / G0, IntegrationRule::Quadratic).unwrap();
        assert_eq!(method, GeopotentialInterpolation::DataLevel);
    }
}
