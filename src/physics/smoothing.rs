//! Smoothing with a length scale in kilometres, so one recipe serves grids of
//! several resolutions (field guide, "Grids and numerics").
//!
//! A separable Gaussian filter with standard deviation `sigma` (metres):
//! first along latitude (spacing a dlat), then along each row (spacing
//! a cos(lat) dlon, so the stencil widens poleward in grid points and keeps
//! its width in kilometres). Truncated at 3 sigma. Missing values are left
//! out and the weights of the valid neighbours renormalised (a normalised
//! convolution), so a gap neither spreads NaN nor pulls values toward zero;
//! a point that was missing stays missing.

use ndarray::{Array3, ArrayView3, Axis};
use rayon::prelude::*;

use crate::grid::Grid;

fn gaussian_weights(half_width: usize, sigma_points: f64) -> Vec<f64> {
    (0..=half_width).map(|k| (-0.5 * (k as f64 / sigma_points).powi(2)).exp()).collect()
}

fn smooth_line(input: &[f32], output: &mut [f32], weights: &[f64], periodic: bool) {
    let n = input.len() as isize;
    let h = weights.len() as isize - 1;
    for i in 0..n {
        if input[i as usize].is_nan() {
            output[i as usize] = f32::NAN;
            continue;
        }
        let (mut sum, mut total) = (0.0f64, 0.0f64);
        for k in -h..=h {
            let mut idx = i + k;
            if periodic {
                idx = idx.rem_euclid(n);
            } else if idx < 0 || idx >= n {
                continue;
            }
            let v = input[idx as usize];
            if !v.is_nan() {
                let w = weights[k.unsigned_abs()];
                sum += w * v as f64;
                total += w;
            }
        }
        output[i as usize] = (sum / total) as f32;
    }
}

/// Gaussian smoothing of [slice, lat, lon] data with standard deviation
/// `sigma_metres`. A non-positive sigma returns the data unchanged.
pub fn smooth(grid: &Grid, radius: f64, data: ArrayView3<f32>, sigma_metres: f64) -> Array3<f32> {
    let mut out = data.as_standard_layout().into_owned();
    if !(sigma_metres > 0.0) {
        return out;
    }
    let (_, ny, nx) = out.dim();
    let dy = grid.latitude_spacing().to_radians() * radius;
    let dx_equator = grid.longitude_spacing().to_radians() * radius;
    out.axis_iter_mut(Axis(0)).into_par_iter().for_each(|mut slice| {
        // Along latitude.
        if ny > 1 && dy > 0.0 {
            let sigma = sigma_metres / dy;
            let weights = gaussian_weights((3.0 * sigma).ceil() as usize, sigma);
            let mut column = vec![0.0f32; ny];
            let mut result = vec![0.0f32; ny];
            for i in 0..nx {
                for j in 0..ny {
                    column[j] = slice[[j, i]];
                }
                smooth_line(&column, &mut result, &weights, false);
                for j in 0..ny {
                    slice[[j, i]] = result[j];
                }
            }
        }
        // Along each row, with the row's own spacing in metres.
        if nx > 1 && dx_equator > 0.0 {
            let mut result = vec![0.0f32; nx];
            for j in 0..ny {
                let dx = dx_equator * grid.latitudes[j].to_radians().cos();
                if dx <= 1e-3 {
                    continue; // a pole row is one point on the sphere
                }
                let sigma = sigma_metres / dx;
                let half = ((3.0 * sigma).ceil() as usize).min(nx);
                let weights = gaussian_weights(half, sigma);
                let mut row = slice.index_axis_mut(Axis(0), j);
                let input: Vec<f32> = row.iter().copied().collect();
                smooth_line(&input, &mut result, &weights, grid.global);
                row.iter_mut().zip(&result).for_each(|(o, &r)| *o = r);
            }
        }
    });
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn smoothing_keeps_constants_and_gaps() {
        let grid = Grid::new((0..11).map(|j| 40.0 + j as f64).collect(), (0..11).map(|i| i as f64).collect());
        let mut data = Array3::from_elem((1, 11, 11), 7.0f32);
        data[[0, 5, 5]] = f32::NAN;
        let out = smooth(&grid, 6.371e6, data.view(), 200e3);
        assert!(out[[0, 5, 5]].is_nan());
        assert!((out[[0, 3, 3]] - 7.0).abs() < 1e-5);
    }

    #[test]
    fn smoothing_damps_short_waves_more_than_long_waves() {
        // A Gaussian filter's response is exp(-(k sigma)^2 / 2) (its Fourier
        // transform): short waves are damped far more than long ones.
        let lons: Vec<f64> = (0..360).map(|i| i as f64).collect();
        let grid = Grid::new(vec![0.0], lons.clone());
        let wave = |n: f64| Array3::from_shape_fn((1, 1, 360), |(_, _, i)| (n * lons[i].to_radians()).sin() as f32);
        let sigma = 300e3;
        for n in [4.0, 20.0] {
            let out = smooth(&grid, 6.371e6, wave(n).view(), sigma);
            let amplitude = out.iter().fold(0.0f32, |m, v| m.max(v.abs())) as f64;
            let k = n / 6.371e6;
            let expected = (-(k * sigma).powi(2) / 2.0).exp();
            assert!((amplitude - expected).abs() < 0.02, "wavenumber {n}: {amplitude} vs {expected}");
        }
    }
}
