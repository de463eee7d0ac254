//! Many layers at once: the hypsometric thickness of every layer between
//! neighbouring data levels by either integration rule in one pass over the
//! levels, and (`layers_and_thermal_wind`) the thickness of many layers
//! together with their thermal wind in the same pass.
//!
//! The arithmetic is exactly that of the one-layer functions, so the values
//! are the same bits: each layer's thickness is the weighted sum of
//! `vertical::layer_integral_weights_by` for that layer, accumulated in f64
//! in the order of its terms from 0 (as `vertical::apply_weights` does), then
//! times Rd/g0 and rounded to f32. Only the order in
//! which memory is visited changes: bands of latitude rows small enough that
//! the few levels a layer's rule reaches stay in a core's cache while every
//! layer of the band is summed, so each input value comes from memory about
//! once instead of once per layer that uses it.
//!
//! Failures: as `vertical::layer_integral_weights_by` (fewer than two levels,
//! two equal pressures, a pressure not positive) and a level count that does
//! not match the data. A NaN on any level a layer's rule uses makes that
//! layer's thickness NaN there (no fallback to the trapezoid here: that
//! choice belongs to `diagnostics::Case`).

use ndarray::{Array4, ArrayView3, ArrayView4, ArrayViewMut3, ArrayViewMut4, Axis};
use rayon::prelude::*;

use super::differences::SphericalMetric;
use super::geostrophic::scale_over_coriolis;
use super::thermal_wind::thermal_wind_from_thickness;
use crate::constants::Constants;
use crate::grid::Grid;
use super::vertical::{layer_integral_weights_by, IntegrationRule, LevelWeights, VerticalError};

/// Latitude rows per parallel task: the four levels the quadratic rule
/// reaches, for a band of 8 rows of 1440 points, take 184 KB, within a
/// core's L2 cache.
const ROWS_PER_TASK: usize = 8;

/// Weights of every layer between neighbouring data levels (data order),
/// by `rule`.
pub fn adjacent_layer_weights(levels: &[f64], rule: IntegrationRule) -> Result<Vec<LevelWeights>, VerticalError> {
    if levels.len() < 2 {
        return Err(VerticalError::NoLevels);
    }
    if let Some(&bad) = levels.iter().find(|p| !(p.is_finite() && **p > 0.0)) {
        return Err(VerticalError::BadPressure(bad));
    }
    levels.windows(2).map(|pair| layer_integral_weights_by(levels, pair[0], pair[1], rule)).collect()
}

/// `factor` times the weighted sums of `layers` over the levels of `data`
/// ([time, level, lat, lon] -> [time, layer, lat, lon]), in one pass.
pub fn weighted_layers(data: ArrayView4<f32>, layers: &[LevelWeights], factor: f64) -> Array4<f32> {
    weighted_layers_with(data, None, layers, factor, identity)
}

/// `weighted_layers` of `transform(data, companion)` (companion 0 when there
/// is none): for each layer the same bits as `vertical::apply_weights_with`
/// with that layer's weights (virtual temperature from specific humidity).
pub fn weighted_layers_with<F>(data: ArrayView4<f32>, companion: Option<ArrayView4<f32>>, layers: &[LevelWeights], factor: f64, transform: F) -> Array4<f32>
where
    F: Fn(f64, f64) -> f64 + Sync,
{
    let (nt, _, ny, nx) = data.dim();
    let mut out: Array4<f32> = super::allocation::zeroed((nt, layers.len(), ny, nx));
    let data = data.as_standard_layout();
    let companion = companion.as_ref().map(|c| c.as_standard_layout());
    for (t, (time, out_time)) in data.outer_iter().zip(out.outer_iter_mut()).enumerate() {
        let companion_time = companion.as_ref().map(|c| c.index_axis(Axis(0), t));
        weighted_layers_into(time, companion_time, layers, factor, out_time, &transform);
    }
    out
}

/// One time step of `weighted_layers`: `data` (and `companion`) [level, lat,
/// lon] in standard layout, `out` [layer, lat, lon].
fn weighted_layers_into<F>(data: ArrayView3<f32>, companion: Option<ArrayView3<f32>>, layers: &[LevelWeights], factor: f64, mut out: ArrayViewMut3<f32>, transform: &F)
where
    F: Fn(f64, f64) -> f64 + Sync,
{
    let (nz, ny, nx) = data.dim();
    if out.is_empty() {
        return;
    }
    debug_assert!(layers.iter().all(|l| l.terms.iter().all(|&(k, _)| k < nz)));
    let flat = data.as_slice().expect("standard layout");
    let companion = companion.map(|c| c.to_slice().expect("standard layout"));
    out.axis_chunks_iter_mut(Axis(1), ROWS_PER_TASK).into_par_iter().enumerate().for_each(|(band, mut block)| {
        let rows = block.dim().1;
        let mut sum = vec![0.0f64; nx];
        for (layer, weights) in layers.iter().enumerate() {
            for r in 0..rows {
                let j = band * ROWS_PER_TASK + r;
                let mut out_row = block.slice_mut(ndarray::s![layer, r, ..]);
                let out_row = out_row.as_slice_mut().expect("rows of a standard-layout array are contiguous");
                layer_row(flat, companion, ny, nx, weights, factor, j, &mut sum, out_row, transform);
            }
        }
    });
}

/// Row j of one layer's weighted sum: out[i] = (factor * sum_k w_k
/// transform(data[k, j, i], companion[k, j, i])) as f32 (companion 0 when
/// there is none), the f64 sum accumulated from 0 in the order of the terms,
/// as `vertical::apply_weights_with` does. `flat` (and `companion`) is one
/// time step [level, lat, lon] in standard layout; `sum` is scratch of `nx`
/// values. The one place this arithmetic is written here, so that every
/// kernel of this module gives the same bits.
#[inline(always)]
#[allow(clippy::too_many_arguments)]
fn layer_row<'a, F: Fn(f64, f64) -> f64>(flat: &'a [f32], companion: Option<&'a [f32]>, ny: usize, nx: usize, weights: &LevelWeights, factor: f64, j: usize, sum: &mut [f64], out: &mut [f32], transform: &F) {
    // Two to four terms (every layer between neighbouring levels, by either
    // rule): one pass over the row, the sum kept in a register, in the same
    // order of operations as the general loop below.
    let terms = &weights.terms;
    let row = |data: &'a [f32], k: usize| -> &'a [f32] { &data[(k * ny + j) * nx..(k * ny + j + 1) * nx] };
    if companion.is_none() && (2..=4).contains(&terms.len()) {
        let (mut rows, mut w): ([&[f32]; 4], [f64; 4]) = ([&[]; 4], [0.0; 4]);
        for (n, &(k, weight)) in terms.iter().enumerate() {
            (rows[n], w[n]) = (row(flat, k), weight);
        }
        #[cfg(target_arch = "x86_64")]
        if std::arch::is_x86_feature_detected!("avx2") {
            // SAFETY: the processor has AVX2 (checked just above).
            unsafe {
                match terms.len() {
                    2 => few_term_row_avx2::<2, F>(out, [rows[0], rows[1]], [w[0], w[1]], factor, transform),
                    3 => few_term_row_avx2::<3, F>(out, [rows[0], rows[1], rows[2]], [w[0], w[1], w[2]], factor, transform),
                    _ => few_term_row_avx2::<4, F>(out, [rows[0], rows[1], rows[2], rows[3]], [w[0], w[1], w[2], w[3]], factor, transform),
                }
            }
            return;
        }
        match terms.len() {
            2 => few_term_row::<2, F>(out, [rows[0], rows[1]], [w[0], w[1]], factor, transform),
            3 => few_term_row::<3, F>(out, [rows[0], rows[1], rows[2]], [w[0], w[1], w[2]], factor, transform),
            _ => few_term_row::<4, F>(out, [rows[0], rows[1], rows[2], rows[3]], [w[0], w[1], w[2], w[3]], factor, transform),
        }
        return;
    }
    sum.fill(0.0);
    for &(k, w) in &weights.terms {
        let start = (k * ny + j) * nx;
        match companion {
            None => {
                for (s, &v) in sum.iter_mut().zip(&flat[start..start + nx]) {
                    *s += w * transform(v as f64, 0.0);
                }
            }
            Some(c) => {
                for ((s, &v), &q) in sum.iter_mut().zip(&flat[start..start + nx]).zip(&c[start..start + nx]) {
                    *s += w * transform(v as f64, q as f64);
                }
            }
        }
    }
    for (o, &s) in out.iter_mut().zip(sum.iter()) {
        *o = (s * factor) as f32;
    }
}

/// out[i] = (factor * (((0 + w0 t(v0[i])) + w1 t(v1[i])) + ...)) as f32: the
/// general loop's arithmetic for N terms, with the sum in a register.
#[inline(always)]
fn few_term_row<const N: usize, F: Fn(f64, f64) -> f64>(out: &mut [f32], rows: [&[f32]; N], weights: [f64; N], factor: f64, transform: &F) {
    let n = out.len();
    let rows = rows.map(|r| &r[..n]);
    for i in 0..n {
        let mut s = 0.0f64;
        for k in 0..N {
            s += weights[k] * transform(rows[k][i] as f64, 0.0);
        }
        out[i] = (s * factor) as f32;
    }
}

/// `few_term_row` compiled with AVX2 (chosen at run time): wider vectors,
/// the same IEEE operations in the same order (the compiler never fuses a
/// multiply and an add on its own), so the same values.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
fn few_term_row_avx2<const N: usize, F: Fn(f64, f64) -> f64>(out: &mut [f32], rows: [&[f32]; N], weights: [f64; N], factor: f64, transform: &F) {
    few_term_row(out, rows, weights, factor, transform)
}

fn identity(value: f64, _: f64) -> f64 {
    value
}

/// Layers (planes of [time, layer]) per task of `layers_and_thermal_wind`.
/// A task owns whole planes of its three outputs and walks down them in
/// bands, each band of every one of its layers in turn. Two layers share a
/// level, so the temperature comes from memory 1.5 times per layer (three
/// levels for two layers) where one task per band of every layer read it
/// about once; in exchange each thread writes six output streams at a time
/// instead of 108, and every output page is written by one thread. Freshly
/// allocated outputs are faulted in and zeroed by the operating system on
/// first write (the larger part of this kernel's time, by a profile), and a
/// page written soon after it was zeroed is written while still in cache;
/// measured faster than the band-of-every-layer order (benches/engine.rs,
/// figures in the commit message), by a reasoned, not proven, cause.
const LAYERS_PER_FUSED_TASK: usize = 2;

/// Latitude rows per band of `layers_and_thermal_wind`: a band's rows of
/// the three temperature levels two layers reach (24 x 1440 float32 each,
/// 415 KB) and its thickness rows (138 KB per layer) stay in a core's L2
/// cache while the layers of the band are summed and differentiated.
const ROWS_PER_FUSED_BAND: usize = 24;

/// At least this many tasks per call of `layers_and_thermal_wind`, so that
/// two to a few cores share the work evenly (work stealing among many
/// tasks) even when the layers are few: with fewer groups of layers than
/// this, each plane is also split into parts of rows.
const MIN_FUSED_TASKS: usize = 16;

/// Thickness (m) of each layer in `layers` (weights over the levels of
/// `temperature`, [time, level, lat, lon]) and its thermal wind (m s-1),
/// eastward and northward, all [time, layer, lat, lon], in one pass: each
/// band of rows of a layer's thickness is computed once, straight into the
/// output, and differentiated while still in cache, so the thickness is
/// not read back from memory for the wind (the rows just outside a part of
/// rows, when planes are split among tasks, are summed twice instead).
/// Tasks: `LAYERS_PER_FUSED_TASK`.
///
/// Thermal wind from thickness (field guide, "Formulas"):
///   V_T = (g0/f) k x grad(dz),
/// the same operator as `thermal_wind::thermal_wind_from_thickness`.
///
/// The values are the same bits as the separate calls, `weighted_layers`
/// then `thermal_wind_from_thickness` on its result: the thickness rows are
/// the same arithmetic (`layer_row`), rounded to f32 before they are
/// differentiated, and the derivatives are the same row kernels
/// (`SphericalMetric`) with the same factors (`scale_over_coriolis`).
/// Masking as `geostrophic::balanced_wind` (equatorial band, poles, NaN
/// spreading to neighbours). On a projected grid the map-factor operator
/// runs on the finished thickness (the separate calls, same bits). Never
/// fails; an empty grid gives empty arrays.
pub fn layers_and_thermal_wind(grid: &Grid, constants: &Constants, temperature: ArrayView4<f32>, layers: &[LevelWeights], equator_band: f64) -> (Array4<f32>, Array4<f32>, Array4<f32>) {
    layers_and_thermal_wind_with(grid, constants, temperature, None, layers, equator_band, identity)
}

/// `layers_and_thermal_wind` integrating `transform(temperature, companion)`
/// (virtual temperature from specific humidity, as
/// `vertical::apply_weights_with` does): the same bits as
/// `weighted_layers_with` followed by `thermal_wind_from_thickness`.
pub fn layers_and_thermal_wind_with<F>(
    grid: &Grid,
    constants: &Constants,
    temperature: ArrayView4<f32>,
    companion: Option<ArrayView4<f32>>,
    layers: &[LevelWeights],
    equator_band: f64,
    transform: F,
) -> (Array4<f32>, Array4<f32>, Array4<f32>)
where
    F: Fn(f64, f64) -> f64 + Sync,
{
    let factor = constants.dry_air_gas_constant / constants.gravity;
    let (nt, _, ny, nx) = temperature.dim();
    let shape = (nt, layers.len(), ny, nx);
    if grid.projection.is_some() {
        let thickness = weighted_layers_with(temperature, companion, layers, factor, transform);
        let slices = thickness.view().into_shape_with_order((nt * layers.len(), ny, nx)).expect("a fresh array is contiguous");
        let (u, v) = thermal_wind_from_thickness(grid, constants, slices, equator_band);
        let as_layers = |a: ndarray::Array3<f32>| a.into_shape_with_order(shape).expect("same number of values");
        return (thickness, as_layers(u), as_layers(v));
    }
    let mut thickness: Array4<f32> = super::allocation::zeroed(shape);
    let mut eastward: Array4<f32> = super::allocation::zeroed(shape);
    let mut northward: Array4<f32> = super::allocation::zeroed(shape);
    let outputs = [thickness.view_mut(), eastward.view_mut(), northward.view_mut()];
    layers_and_thermal_wind_into(grid, constants, temperature, companion, layers, equator_band, transform, outputs);
    (thickness, eastward, northward)
}

/// `layers_and_thermal_wind_with` into arrays the caller already holds
/// ([thickness, eastward, northward], each [time, layer, lat, lon] in
/// standard layout, every value overwritten): the same bits, without
/// allocating, for a caller that reuses its outputs from one time step to
/// the next (memory already faulted in: see `allocation`). On a projected
/// grid the separate calls run and their results are copied in. Panics if an
/// output's shape is not [time, layer, lat, lon] of the inputs or it is not
/// in standard layout (a caller's error, not the user's).
#[allow(clippy::too_many_arguments)]
pub fn layers_and_thermal_wind_into<F>(
    grid: &Grid,
    constants: &Constants,
    temperature: ArrayView4<f32>,
    companion: Option<ArrayView4<f32>>,
    layers: &[LevelWeights],
    equator_band: f64,
    transform: F,
    outputs: [ArrayViewMut4<f32>; 3],
) where
    F: Fn(f64, f64) -> f64 + Sync,
{
    let factor = constants.dry_air_gas_constant / constants.gravity;
    let (nt, nz, ny, nx) = temperature.dim();
    let shape = (nt, layers.len(), ny, nx);
    assert!(outputs.iter().all(|o| o.dim() == shape), "outputs of shape {shape:?} expected");
    if grid.projection.is_some() {
        let computed = layers_and_thermal_wind_with(grid, constants, temperature, companion, layers, equator_band, transform);
        for (mut output, values) in outputs.into_iter().zip([computed.0, computed.1, computed.2]) {
            output.assign(&values);
        }
        return;
    }
    if shape.0 * shape.1 * ny * nx == 0 {
        return;
    }
    debug_assert!(layers.iter().all(|l| l.terms.iter().all(|&(k, _)| k < nz)));
    let data = temperature.as_standard_layout();
    let flat = data.as_slice().expect("standard layout");
    let companion_data = companion.as_ref().map(|c| c.as_standard_layout());
    let companion_flat = companion_data.as_ref().map(|c| c.as_slice().expect("standard layout"));
    let metric = SphericalMetric::new(grid, constants.earth_radius);
    let over_f = scale_over_coriolis(grid, constants, constants.gravity, equator_band);
    let plane = ny * nx;
    let planes = nt * layers.len();
    let groups = planes.div_ceil(LAYERS_PER_FUSED_TASK);
    let rows_per_part = ny.div_ceil(MIN_FUSED_TASKS.div_ceil(groups).min(ny.div_ceil(ROWS_PER_FUSED_BAND)));
    let parts = ny.div_ceil(rows_per_part);
    // Task (group, part): planes LAYERS_PER_FUSED_TASK * group.. (at most
    // that many, the last group may hold fewer), rows rows_per_part * part..
    // of each, as one slice of that plane's rows per output.
    let mut tasks: Vec<Vec<PlaneRows>> = (0..groups * parts).map(|_| Vec::with_capacity(LAYERS_PER_FUSED_TASK)).collect();
    let outputs = outputs.map(|a| a.into_slice().expect("outputs in standard layout"));
    let [dz, u, v] = outputs.map(|a| a.chunks_exact_mut(plane).flat_map(|p| p.chunks_mut(rows_per_part * nx)));
    for (n, ((dz, u), v)) in dz.zip(u).zip(v).enumerate() {
        let (p, part) = (n / parts, n % parts);
        tasks[(p / LAYERS_PER_FUSED_TASK) * parts + part].push(PlaneRows { plane: p, first: part * rows_per_part, thickness: dz, eastward: u, northward: v });
    }
    tasks.into_par_iter().for_each(|mut task| {
        let mut sum = vec![0.0f64; nx];
        let Some(rows) = task.first().map(|p| p.first..p.first + p.thickness.len() / nx) else { return };
        // Rows just outside the part that its latitude derivative reaches
        // (none when the part is the whole plane, else one on either side
        // inside the grid, two below a last part of one row): computed
        // first, into `outside` (below the part first), per plane.
        let (lo, hi) = metric.latitude_rows_reached(rows.clone());
        let below = rows.start - lo;
        let outside_rows = (lo..rows.start).chain(rows.end..hi);
        let per_plane = outside_rows.clone().count() * nx;
        let mut outside = vec![0.0f32; per_plane * task.len()];
        for (n, plane_rows) in task.iter().enumerate() {
            let outside = &mut outside[n * per_plane..(n + 1) * per_plane];
            let (time, companion_time, weights) = step_of(flat, companion_flat, plane_rows.plane, layers, nz * plane);
            for (r, out) in outside_rows.clone().zip(outside.chunks_exact_mut(nx)) {
                layer_row(time, companion_time, ny, nx, weights, factor, r, &mut sum, out, &transform);
            }
        }
        // Down the part in bands: each band's thickness rows straight into
        // the output, then every row whose latitude stencil is now complete
        // differentiated from them (the derivative of the band's last row
        // waits for the next band's first).
        let mut derived = vec![rows.start; task.len()];
        for band in (rows.start..rows.end).step_by(ROWS_PER_FUSED_BAND) {
            let end = (band + ROWS_PER_FUSED_BAND).min(rows.end);
            for (n, (plane_rows, next)) in task.iter_mut().zip(derived.iter_mut()).enumerate() {
                let outside = &outside[n * per_plane..(n + 1) * per_plane];
                let (time, companion_time, weights) = step_of(flat, companion_flat, plane_rows.plane, layers, nz * plane);
                let PlaneRows { thickness: dz, eastward: u, northward: v, .. } = plane_rows;
                for (j, out) in (band..end).zip(dz[(band - rows.start) * nx..].chunks_exact_mut(nx)) {
                    layer_row(time, companion_time, ny, nx, weights, factor, j, &mut sum, out, &transform);
                }
                let dz: &[f32] = dz;
                let row = |k: usize| -> &[f32] {
                    let (buffer, r) = match k {
                        k if k < rows.start => (outside, k - lo),
                        k if k < rows.end => (dz, k - rows.start),
                        k => (outside, below + k - rows.end),
                    };
                    &buffer[r * nx..(r + 1) * nx]
                };
                let ready = |j: usize| metric.latitude[j].index.iter().all(|&k| k < end || k >= rows.end);
                while *next < rows.end && ready(*next) {
                    let j = *next;
                    *next += 1;
                    let r = j - rows.start;
                    let (u_row, v_row) = (&mut u[r * nx..(r + 1) * nx], &mut v[r * nx..(r + 1) * nx]);
                    let (k, kx) = (over_f[j], metric.inverse_x_scale[j]);
                    if !k.is_finite() || !kx.is_finite() {
                        u_row.fill(f32::NAN);
                        v_row.fill(f32::NAN);
                        continue;
                    }
                    // As balanced_wind: u = -k ky d/dlat, v = k kx d/dlon.
                    metric.scaled_d_dlat_row_of_rows(row, nx, j, -k * metric.inverse_radius, u_row);
                    metric.scaled_d_dlon_row(row(j), k * kx, v_row);
                }
            }
        }
        debug_assert!(derived.iter().all(|&n| n == rows.end));
    });
}

/// One task's share of one [time, layer] plane of the three outputs of
/// `layers_and_thermal_wind`: rows `first..` of plane number `plane`.
struct PlaneRows<'a> {
    plane: usize,
    first: usize,
    thickness: &'a mut [f32],
    eastward: &'a mut [f32],
    northward: &'a mut [f32],
}

/// The time step (and its companion) that plane number `plane` of [time,
/// layer] comes from, `step` values each, and the plane's layer weights.
fn step_of<'a, 'b>(flat: &'a [f32], companion: Option<&'a [f32]>, plane: usize, layers: &'b [LevelWeights], step: usize) -> (&'a [f32], Option<&'a [f32]>, &'b LevelWeights) {
    let t = plane / layers.len();
    (&flat[t * step..(t + 1) * step], companion.map(|c| &c[t * step..(t + 1) * step]), &layers[plane % layers.len()])
}

/// Thickness and thermal wind of every layer between neighbouring data
/// levels by `rule` (see `layers_and_thermal_wind`): the same bits as
/// `adjacent_layer_thickness_by` followed by `thermal_wind_from_thickness`.
pub fn adjacent_layer_thickness_and_thermal_wind(
    grid: &Grid,
    constants: &Constants,
    levels: &[f64],
    temperature: ArrayView4<f32>,
    rule: IntegrationRule,
    equator_band: f64,
) -> Result<(Array4<f32>, Array4<f32>, Array4<f32>), VerticalError> {
    let layers = adjacent_layer_weights(levels, rule)?;
    if temperature.dim().1 != levels.len() {
        return Err(VerticalError::LevelCount { levels: levels.len(), data: temperature.dim().1 });
    }
    Ok(layers_and_thermal_wind(grid, constants, temperature, &layers, equator_band))
}

/// Hypsometric thickness (m) of every layer between neighbouring data levels
/// by `rule`, [time, level, lat, lon] -> [time, layer, lat, lon]: the same
/// bits as `vertical::thickness_from_temperature_by` for each layer, in one
/// pass. With the trapezoid rule, the same bits as
/// `vertical::adjacent_layer_thickness`.
pub fn adjacent_layer_thickness_by(levels: &[f64], temperature: ArrayView4<f32>, rule: IntegrationRule, dry_air_gas_constant: f64, gravity: f64) -> Result<Array4<f32>, VerticalError> {
    let layers = adjacent_layer_weights(levels, rule)?;
    if temperature.dim().1 != levels.len() {
        return Err(VerticalError::LevelCount { levels: levels.len(), data: temperature.dim().1 });
    }
    Ok(weighted_layers(temperature, &layers, dry_air_gas_constant / gravity))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::constants::Constants;
    use crate::physics::vertical::{adjacent_layer_thickness, layer_integral_weights_by, thickness_from_temperature_by};

    /// An invented column on uneven levels with horizontal structure, some
    /// missing values, on a small grid.
    fn case() -> (Vec<f64>, Array4<f32>) {
        let levels: Vec<f64> = vec![100000.0, 92500.0, 85000.0, 70000.0, 50000.0, 40000.0, 30000.0, 20000.0];
        let mut t = Array4::from_shape_fn((2, levels.len(), 37, 72), |(n, k, j, i)| {
            let s = (100000.0 / levels[k]).ln();
            (288.0 - 40.0 * s + 3.0 * s * s + 10.0 * ((j as f64) * 0.17 + (i as f64) * 0.09 + n as f64).sin()) as f32
        });
        t[[1, 3, 10, 20]] = f32::NAN;
        (levels, t)
    }

    #[test]
    fn one_pass_gives_the_bits_of_one_layer_at_a_time() {
        // The definition: each layer as the general one-layer function
        // computes it (same weights, same order of sums).
        let (levels, t) = case();
        let c = Constants::default();
        for rule in [IntegrationRule::Quadratic, IntegrationRule::Trapezoid] {
            let all = adjacent_layer_thickness_by(&levels, t.view(), rule, c.dry_air_gas_constant, c.gravity).unwrap();
            for k in 0..levels.len() - 1 {
                let one = thickness_from_temperature_by(&levels, t.view(), None, levels[k], levels[k + 1], c.dry_air_gas_constant, c.gravity, rule).unwrap();
                let same = all.index_axis(Axis(1), k).iter().zip(one.iter()).all(|(a, b)| a.to_bits() == b.to_bits());
                assert!(same, "layer {k} by {rule:?}");
            }
        }
        let trapezoid = adjacent_layer_thickness_by(&levels, t.view(), IntegrationRule::Trapezoid, c.dry_air_gas_constant, c.gravity).unwrap();
        let kernel = adjacent_layer_thickness(&levels, t.view(), c.dry_air_gas_constant, c.gravity).unwrap();
        assert!(trapezoid.iter().zip(kernel.iter()).all(|(a, b)| a.to_bits() == b.to_bits()));
        // A missing value reaches the layers whose rule uses its level: two
        // by the trapezoid, up to four by the quadratic rule.
        assert!(trapezoid[[1, 2, 10, 20]].is_nan() && trapezoid[[1, 3, 10, 20]].is_nan() && !trapezoid[[1, 1, 10, 20]].is_nan());
    }

    fn same_bits(a: &Array4<f32>, b: ndarray::ArrayView4<f32>) -> bool {
        a.shape() == b.shape() && a.iter().zip(b.iter()).all(|(x, y)| x.to_bits() == y.to_bits())
    }

    #[test]
    fn fused_thickness_and_thermal_wind_give_the_bits_of_the_separate_calls() {
        // The definition: the thickness of every layer (one pass), then the
        // thermal wind of that thickness (`thermal_wind_from_thickness`).
        // A global grid with both poles and the equator (masked rows), 37
        // rows so that bands end inside the grid, a missing value, two
        // time steps, both rules; and a layer spanning several levels.
        let (levels, mut t) = case();
        let t = {
            let lats: Vec<f64> = (0..37).map(|j| 90.0 - 5.0 * j as f64).collect();
            let grid = Grid::new(lats, (0..72).map(|i| 5.0 * i as f64).collect());
            t[[0, 5, 0, 3]] = f32::NAN;
            (grid, t)
        };
        let (grid, t) = t;
        assert!(grid.global);
        let c = Constants::default();
        for rule in [IntegrationRule::Quadratic, IntegrationRule::Trapezoid] {
            let mut layers = adjacent_layer_weights(&levels, rule).unwrap();
            layers.push(layer_integral_weights_by(&levels, 92500.0, 30000.0, rule).unwrap());
            let (dz, u, v) = layers_and_thermal_wind(&grid, &c, t.view(), &layers, 5.0);
            let separate = weighted_layers(t.view(), &layers, c.dry_air_gas_constant / c.gravity);
            assert!(same_bits(&dz, separate.view()), "thickness by {rule:?}");
            let (nt, nl, ny, nx) = separate.dim();
            let slices = separate.view().into_shape_with_order((nt * nl, ny, nx)).unwrap();
            let (su, sv) = thermal_wind_from_thickness(&grid, &c, slices, 5.0);
            assert!(same_bits(&u, su.view().into_shape_with_order((nt, nl, ny, nx)).unwrap()), "eastward by {rule:?}");
            assert!(same_bits(&v, sv.view().into_shape_with_order((nt, nl, ny, nx)).unwrap()), "northward by {rule:?}");
            // Masks as balanced_wind: the equator row (18) and the poles.
            assert!(u[[0, 0, 18, 5]].is_nan() && v[[0, 0, 0, 5]].is_nan() && u[[0, 0, 10, 5]].is_finite());
        }
    }

    #[test]
    fn fused_bands_ending_in_a_single_row_give_the_bits_of_the_separate_calls() {
        // Enough layers for whole planes per task (17 layers x 2 time steps
        // = 34 planes, 17 tasks of two: no split into parts of rows), on a
        // regional grid of 2 * ROWS_PER_FUSED_BAND + 1 rows: two full bands
        // whose last rows are differentiated only once the next band is
        // summed, and a last band of one row, the grid's edge, with its
        // one-sided latitude stencil. Crosses the equator (masked rows).
        // Then one layer of one time step (a single task, split into parts
        // of rows that each sum the rows just outside them).
        let levels: Vec<f64> = (0..18).map(|k| 100000.0 - 5000.0 * k as f64).collect();
        let ny = 2 * ROWS_PER_FUSED_BAND + 1;
        assert!(2 * (levels.len() - 1) >= LAYERS_PER_FUSED_TASK * MIN_FUSED_TASKS);
        let lats: Vec<f64> = (0..ny).map(|j| 60.0 - 2.0 * j as f64).collect();
        let grid = Grid::new(lats, (0..40).map(|i| 100.0 + 0.5 * i as f64).collect());
        let t = Array4::from_shape_fn((2, levels.len(), ny, 40), |(n, k, j, i)| {
            (250.0 + 0.4 * k as f64 + 8.0 * ((j as f64) * 0.21 - (i as f64) * 0.13 + n as f64).cos()) as f32
        });
        let c = Constants::default();
        let few = t.slice(ndarray::s![0..1, 0..3, .., ..]);
        for (t, levels) in [(t.view(), &levels[..]), (few, &levels[..3])] {
            for rule in [IntegrationRule::Quadratic, IntegrationRule::Trapezoid] {
                let mut layers = adjacent_layer_weights(levels, rule).unwrap();
                layers.truncate(if t.dim().0 == 1 { 1 } else { layers.len() });
                let (dz, u, v) = layers_and_thermal_wind(&grid, &c, t, &layers, 5.0);
                let separate = weighted_layers(t, &layers, c.dry_air_gas_constant / c.gravity);
                let (nt, nl, _, nx) = separate.dim();
                let (su, sv) = thermal_wind_from_thickness(&grid, &c, separate.view().into_shape_with_order((nt * nl, ny, nx)).unwrap(), 5.0);
                assert!(same_bits(&dz, separate.view()), "thickness by {rule:?}, {nl} layers");
                assert!(same_bits(&u, su.view().into_shape_with_order((nt, nl, ny, nx)).unwrap()), "eastward by {rule:?}, {nl} layers");
                assert!(same_bits(&v, sv.view().into_shape_with_order((nt, nl, ny, nx)).unwrap()), "northward by {rule:?}, {nl} layers");
                // The last row has a wind (one-sided difference), the equator none.
                assert!(u[[nt - 1, 0, ny - 1, 7]].is_finite() && v[[nt - 1, 0, ny - 1, 7]].is_finite() && u[[nt - 1, 0, 30, 7]].is_nan());
            }
        }
    }

    #[test]
    fn fused_pair_into_held_outputs_overwrites_every_value_with_the_same_bits() {
        // Outputs the caller holds, full of old values (a previous time
        // step's, here 7 and NaN): every value is overwritten with the bits
        // of the allocating call, on a global grid (parts of rows: 8 layers
        // x 2 time steps) and on a projected one.
        let (levels, t) = case();
        let c = Constants::default();
        let global = Grid::new((0..37).map(|j| 90.0 - 5.0 * j as f64).collect(), (0..72).map(|i| 5.0 * i as f64).collect());
        use crate::projection::{LambertConformal, ProjectedGrid, Projection};
        let projection = Projection::LambertConformal(LambertConformal::new((35.0, 55.0), -10.0, 45.0, 0.0, 0.0, c.earth_radius).unwrap());
        let projected = Grid::projected(ProjectedGrid::new(projection, (0..72).map(|i| -7.0e5 + 2.0e4 * i as f64).collect(), (0..37).map(|j| -3.0e5 + 2.0e4 * j as f64).collect()));
        let layers = adjacent_layer_weights(&levels, IntegrationRule::Quadratic).unwrap();
        for grid in [global, projected] {
            let fresh = layers_and_thermal_wind(&grid, &c, t.view(), &layers, 5.0);
            let shape = fresh.0.dim();
            let mut held = [Array4::from_elem(shape, 7.0f32), Array4::from_elem(shape, f32::NAN), Array4::from_elem(shape, 7.0f32)];
            let [a, b, d] = &mut held;
            layers_and_thermal_wind_into(&grid, &c, t.view(), None, &layers, 5.0, identity, [a.view_mut(), b.view_mut(), d.view_mut()]);
            assert!(same_bits(&held[0], fresh.0.view()) && same_bits(&held[1], fresh.1.view()) && same_bits(&held[2], fresh.2.view()));
        }
    }

    #[test]
    fn virtual_temperature_layers_give_the_bits_of_one_layer_at_a_time() {
        // The definition: `apply_weights_with` of each layer with the
        // virtual temperature (field guide: Tv = T (1 + 0.608 q)), and the
        // fused pair the bits of the separate calls.
        let (levels, t) = case();
        let q = t.mapv(|x| (x - 200.0) * 1.0e-4);
        let c = Constants::default();
        let factor = c.dry_air_gas_constant / c.gravity;
        let layers = adjacent_layer_weights(&levels, IntegrationRule::Quadratic).unwrap();
        let all = weighted_layers_with(t.view(), Some(q.view()), &layers, factor, crate::physics::vertical::virtual_temperature);
        for (k, weights) in layers.iter().enumerate() {
            let one = crate::physics::vertical::apply_weights_with(t.view(), Some(q.view()), weights, factor, crate::physics::vertical::virtual_temperature);
            assert!(all.index_axis(Axis(1), k).iter().zip(one.iter()).all(|(a, b)| a.to_bits() == b.to_bits()), "layer {k}");
        }
        let grid = Grid::new((0..37).map(|j| 80.0 - 2.0 * j as f64).collect(), (0..72).map(|i| i as f64).collect());
        let (dz, u, _) = layers_and_thermal_wind_with(&grid, &c, t.view(), Some(q.view()), &layers, 5.0, crate::physics::vertical::virtual_temperature);
        assert!(same_bits(&dz, all.view()));
        let (nt, nl, ny, nx) = all.dim();
        let (su, _) = thermal_wind_from_thickness(&grid, &c, all.view().into_shape_with_order((nt * nl, ny, nx)).unwrap(), 5.0);
        assert!(same_bits(&u, su.view().into_shape_with_order((nt, nl, ny, nx)).unwrap()));
        // Humidity makes the layer warmer in the mean, so thicker.
        let dry = weighted_layers(t.view(), &layers, factor);
        assert!(all[[0, 2, 5, 5]] > dry[[0, 2, 5, 5]]);
    }

    #[test]
    fn fused_thermal_wind_meets_the_worked_value() {
        // Field guide worked value (derived from the thermal wind equation):
        // at 45 N (f = 1.0313e-4 s-1), a layer-mean temperature falling 1 K
        // per 100 km poleward over 1000-500 hPa gives
        // u_T = (Rd/f) ln 2 * 1e-5 = 19.29 m s-1 westerly, v_T = 0.
        // An isothermal-in-height column at each point: T the same on both
        // levels, so the trapezoid layer mean is T itself.
        let c = Constants::default();
        let lats: Vec<f64> = (0..21).map(|j| 46.0 - 0.1 * j as f64).collect();
        let grid = Grid::new(lats.clone(), (0..7).map(|i| i as f64 * 0.1).collect());
        let per_radian = -1.0 / 1.0e5 * c.earth_radius;
        let t = Array4::from_shape_fn((1, 2, 21, 7), |(_, _, j, _)| (260.0 + per_radian * (lats[j] - 45.0).to_radians()) as f32);
        let (dz, u, v) = adjacent_layer_thickness_and_thermal_wind(&grid, &c, &[100000.0, 50000.0], t.view(), IntegrationRule::Trapezoid, 5.0).unwrap();
        // Hypsometric thickness of 260 K over 1000-500 hPa: (Rd/g0) 260 ln 2.
        assert!((dz[[0, 0, 10, 3]] as f64 - c.dry_air_gas_constant / c.gravity * 260.0 * 2f64.ln()).abs() < 0.01);
        assert!((u[[0, 0, 10, 3]] - 19.29).abs() < 0.05, "u_T = {}", u[[0, 0, 10, 3]]);
        assert!(v[[0, 0, 10, 3]].abs() < 1e-3);
    }

    #[test]
    fn fused_pair_on_a_projected_grid_is_the_separate_calls() {
        let (levels, t) = case();
        let c = Constants::default();
        use crate::projection::{LambertConformal, ProjectedGrid, Projection};
        let projection = Projection::LambertConformal(LambertConformal::new((35.0, 55.0), -10.0, 45.0, 0.0, 0.0, c.earth_radius).unwrap());
        let grid = Grid::projected(ProjectedGrid::new(projection, (0..72).map(|i| -7.0e5 + 2.0e4 * i as f64).collect(), (0..37).map(|j| -3.0e5 + 2.0e4 * j as f64).collect()));
        let layers = adjacent_layer_weights(&levels, IntegrationRule::Quadratic).unwrap();
        let (dz, u, _) = layers_and_thermal_wind(&grid, &c, t.view(), &layers, 5.0);
        let separate = weighted_layers(t.view(), &layers, c.dry_air_gas_constant / c.gravity);
        let (nt, nl, ny, nx) = separate.dim();
        let (su, _) = thermal_wind_from_thickness(&grid, &c, separate.view().into_shape_with_order((nt * nl, ny, nx)).unwrap(), 5.0);
        assert!(same_bits(&dz, separate.view()));
        assert!(same_bits(&u, su.view().into_shape_with_order((nt, nl, ny, nx)).unwrap()));
    }

    #[test]
    fn bad_levels_are_refused() {
        let t = Array4::<f32>::zeros((1, 2, 1, 1));
        assert!(matches!(adjacent_layer_thickness_by(&[100000.0], t.view(), IntegrationRule::Quadratic, 287.0, 9.8), Err(VerticalError::NoLevels)));
        assert!(adjacent_layer_thickness_by(&[100000.0, 100000.0], t.view(), IntegrationRule::Quadratic, 287.0, 9.8).is_err());
        assert!(matches!(adjacent_layer_thickness_by(&[100000.0, 50000.0, 20000.0], t.view(), IntegrationRule::Quadratic, 287.0, 9.8), Err(VerticalError::LevelCount { .. })));
    }
}
