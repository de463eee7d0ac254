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
///
/// On a projected grid in metres (Lambert conformal, polar stereographic)
/// the grid is regular in the projection plane, where a grid length dx is
/// a true length dx / m (m the map factor, Snyder 1987, USGS PP 1395,
/// ch. 4); each column and row takes its sigma in grid points from its own
/// mean map factor, so the filter keeps its width in kilometres on the
/// earth. A rotated latitude-longitude grid is a latitude-longitude grid on
/// the rotated sphere and is smoothed as one (its rows' spacing shrinks
/// with the cosine of the rotated latitude).
pub fn smooth(grid: &Grid, radius: f64, data: ArrayView3<f32>, sigma_metres: f64) -> Array3<f32> {
    let mut out = data.as_standard_layout().into_owned();
    if !(sigma_metres > 0.0) {
        return out;
    }
    let (_, ny, nx) = out.dim();
    // Sigma in grid points along each column (y) and each row (x); zero
    // leaves the line unsmoothed (a single point, a pole row).
    let (column_sigma, row_sigma): (Vec<f64>, Vec<f64>) = match &grid.projection {
        Some(p) if !p.projection.is_angular() => {
            let (dx, dy) = (grid.longitude_spacing(), grid.latitude_spacing());
            let m = &p.map_factor;
            let column = (0..nx).map(|i| (0..ny).map(|j| m[j * nx + i]).sum::<f64>() / ny as f64).map(|mean| if dy > 0.0 { sigma_metres * mean / dy } else { 0.0 }).collect();
            let row = (0..ny).map(|j| m[j * nx..(j + 1) * nx].iter().sum::<f64>() / nx as f64).map(|mean| if dx > 0.0 { sigma_metres * mean / dx } else { 0.0 }).collect();
            (column, row)
        }
        _ => {
            let dy = grid.latitude_spacing().to_radians() * radius;
            let dx_equator = grid.longitude_spacing().to_radians() * radius;
            let column = vec![if dy > 0.0 { sigma_metres / dy } else { 0.0 }; nx];
            let row = grid
                .latitudes
                .iter()
                .map(|lat| {
                    let dx = dx_equator * lat.to_radians().cos();
                    if dx <= 1e-3 {
                        0.0 // a pole row is one point on the sphere
                    } else {
                        sigma_metres / dx
                    }
                })
                .collect();
            (column, row)
        }
    };
    out.axis_iter_mut(Axis(0)).into_par_iter().for_each(|mut slice| {
        // Along each column.
        if ny > 1 {
            let mut column = vec![0.0f32; ny];
            let mut result = vec![0.0f32; ny];
            for i in 0..nx {
                let sigma = column_sigma[i];
                if !(sigma > 0.0) {
                    continue;
                }
                let weights = gaussian_weights(((3.0 * sigma).ceil() as usize).min(ny), sigma);
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
        if nx > 1 {
            let mut result = vec![0.0f32; nx];
            for j in 0..ny {
                let sigma = row_sigma[j];
                if !(sigma > 0.0) {
                    continue;
                }
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

    #[test]
    fn smoothing_on_a_lambert_grid_keeps_its_width_in_true_kilometres() {
        // A wave along the grid's x with grid wavelength L has true
        // wavelength L / m (m the map factor, Snyder 1987 eq. 15-4), so a
        // Gaussian of sigma true metres damps it by exp(-(2 pi m sigma /
        // L)^2 / 2) (the filter's Fourier transform). One row at y = 0 near
        // 30 N, far from the standard parallels 50 and 60 N, where m is
        // about 1.1: the check tells the map factor apart from 1.
        use crate::projection::{LambertConformal, ProjectedGrid, Projection};
        let projection = Projection::LambertConformal(LambertConformal::new((50.0, 60.0), 0.0, 30.0, 0.0, 0.0, 6.371e6).unwrap());
        let spacing = 10e3;
        let x: Vec<f64> = (0..801).map(|i| (i as f64 - 400.0) * spacing).collect();
        let projected = ProjectedGrid::new(projection, x.clone(), vec![0.0]);
        let m = projected.map_factor[400];
        assert!(m > 1.05, "map factor {m}");
        let grid = Grid::projected(projected);
        let wavelength = 400e3;
        let wave = Array3::from_shape_fn((1, 1, 801), |(_, _, i)| (std::f64::consts::TAU * x[i] / wavelength).cos() as f32);
        let sigma = 60e3;
        let out = smooth(&grid, 6.371e6, wave.view(), sigma);
        let k = std::f64::consts::TAU * m / wavelength;
        let expected = (-(k * sigma).powi(2) / 2.0).exp();
        // At x = 0 the wave is at a crest; the map factor varies little
        // over the kernel's 3 sigma there.
        assert!((out[[0, 0, 400]] as f64 - expected).abs() < 0.01, "{} vs {expected}", out[[0, 0, 400]]);
        let constant = smooth(&grid, 6.371e6, Array3::from_elem((1, 1, 801), 3.0f32).view(), sigma);
        assert!(constant.iter().all(|v| (v - 3.0).abs() < 1e-5));
    }
}
