//! Many layers at once: the hypsometric thickness of every layer between
//! neighbouring data levels by either integration rule in one pass over the
//! levels.
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

use ndarray::{Array4, ArrayView3, ArrayView4, ArrayViewMut3, Axis};
use rayon::prelude::*;

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
    let (nt, _, ny, nx) = data.dim();
    let mut out: Array4<f32> = super::allocation::zeroed((nt, layers.len(), ny, nx));
    let data = data.as_standard_layout();
    for (time, out_time) in data.outer_iter().zip(out.outer_iter_mut()) {
        weighted_layers_into(time, layers, factor, out_time);
    }
    out
}

/// One time step of `weighted_layers`: `data` [level, lat, lon] in standard
/// layout, `out` [layer, lat, lon].
fn weighted_layers_into(data: ArrayView3<f32>, layers: &[LevelWeights], factor: f64, mut out: ArrayViewMut3<f32>) {
    let (nz, ny, nx) = data.dim();
    if out.is_empty() {
        return;
    }
    debug_assert!(layers.iter().all(|l| l.terms.iter().all(|&(k, _)| k < nz)));
    let flat = data.as_slice().expect("standard layout");
    out.axis_chunks_iter_mut(Axis(1), ROWS_PER_TASK).into_par_iter().enumerate().for_each(|(band, mut block)| {
        let rows = block.dim().1;
        let mut sum = vec![0.0f64; nx];
        for (layer, weights) in layers.iter().enumerate() {
            for r in 0..rows {
                let j = band * ROWS_PER_TASK + r;
                sum.fill(0.0);
                for &(k, w) in &weights.terms {
                    let start = (k * ny + j) * nx;
                    for (s, &v) in sum.iter_mut().zip(&flat[start..start + nx]) {
                        *s += w * v as f64;
                    }
                }
                let mut out_row = block.slice_mut(ndarray::s![layer, r, ..]);
                let out_row = out_row.as_slice_mut().expect("rows of a standard-layout array are contiguous");
                for (o, &s) in out_row.iter_mut().zip(&sum) {
                    *o = (s * factor) as f32;
                }
            }
        }
    });
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
    use crate::physics::vertical::{adjacent_layer_thickness, thickness_from_temperature_by};

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

    #[test]
    fn bad_levels_are_refused() {
        let t = Array4::<f32>::zeros((1, 2, 1, 1));
        assert!(matches!(adjacent_layer_thickness_by(&[100000.0], t.view(), IntegrationRule::Quadratic, 287.0, 9.8), Err(VerticalError::NoLevels)));
        assert!(adjacent_layer_thickness_by(&[100000.0, 100000.0], t.view(), IntegrationRule::Quadratic, 287.0, 9.8).is_err());
        assert!(matches!(adjacent_layer_thickness_by(&[100000.0, 50000.0, 20000.0], t.view(), IntegrationRule::Quadratic, 287.0, 9.8), Err(VerticalError::LevelCount { .. })));
    }
}
