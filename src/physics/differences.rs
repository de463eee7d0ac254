//! Finite differences on the sphere.
//!
//! Second-order centred differences inside, second-order one-sided
//! differences at open edges, periodic across the seam of a global grid.
//! The one-dimensional weights are those of numpy.gradient with
//! `edge_order=2` on non-uniform coordinates (Fornberg-style three-point
//! Lagrange derivative; numpy's documentation gives the same formulas), so
//! our derivative along an axis equals numpy's to rounding.
//!
//! Spherical metric terms (field guide, "Grids and numerics"):
//!   d/dx = (1 / (a cos lat)) d/dlon,   d/dy = (1 / a) d/dlat,
//! angles in radians. At the poles cos(lat) = 0: x-derivatives are NaN there,
//! never a division by zero.
//!
//! Projected grids (`Grid::projection`) branch to `physics::projected`,
//! which applies the map factor; the results mean the same (per metre,
//! eastward/northward).
//!
//! Layout: horizontal operators take `[slice, latitude, longitude]` arrays
//! (slices are time x level flattened) and run in parallel over slices and
//! rows with rayon.

use ndarray::{Array3, ArrayView3, Axis};
use rayon::prelude::*;

use crate::grid::Grid;

/// Three-point derivative weights for one position along an axis:
/// df/dx(i) = sum_k weight[k] * f(index[k]).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Stencil {
    pub index: [usize; 3],
    pub weight: [f64; 3],
}

/// Derivative stencils along a coordinate (values in any unit; the weights
/// are per that unit). `periodic` closes the axis over `period` (360 for
/// longitude in degrees). Fewer than three points: a two-point difference
/// (first order) for two points, and zero weights (derivative NaN-free 0)
/// for one point is meaningless, so a single point yields weights of NaN.
pub fn stencils(coordinate: &[f64], periodic: Option<f64>) -> Vec<Stencil> {
    let n = coordinate.len();
    let nan = f64::NAN;
    match n {
        0 => return Vec::new(),
        1 => return vec![Stencil { index: [0, 0, 0], weight: [nan, nan, nan] }],
        2 if periodic.is_none() => {
            let h = coordinate[1] - coordinate[0];
            let s = Stencil { index: [0, 1, 1], weight: [-1.0 / h, 1.0 / h, 0.0] };
            return vec![s, s];
        }
        _ => {}
    }
    let mut out = Vec::with_capacity(n);
    for i in 0..n {
        let interior = periodic.is_some() || (i > 0 && i < n - 1);
        if interior {
            let (prev, next) = ((i + n - 1) % n, (i + 1) % n);
            let mut h1 = coordinate[i] - coordinate[prev];
            let mut h2 = coordinate[next] - coordinate[i];
            if let Some(period) = periodic {
                // Across the seam the raw difference jumps by a period.
                h1 = wrap(h1, period);
                h2 = wrap(h2, period);
            }
            // numpy.gradient interior, non-uniform spacing.
            let a = -h2 / (h1 * (h1 + h2));
            let b = (h2 - h1) / (h1 * h2);
            let c = h1 / (h2 * (h1 + h2));
            out.push(Stencil { index: [prev, i, next], weight: [a, b, c] });
        } else if i == 0 {
            let h1 = coordinate[1] - coordinate[0];
            let h2 = coordinate[2] - coordinate[1];
            let a = -(2.0 * h1 + h2) / (h1 * (h1 + h2));
            let b = (h1 + h2) / (h1 * h2);
            let c = -h1 / (h2 * (h1 + h2));
            out.push(Stencil { index: [0, 1, 2], weight: [a, b, c] });
        } else {
            let h1 = coordinate[n - 2] - coordinate[n - 3];
            let h2 = coordinate[n - 1] - coordinate[n - 2];
            let a = h2 / (h1 * (h1 + h2));
            let b = -(h2 + h1) / (h1 * h2);
            let c = (2.0 * h2 + h1) / (h2 * (h1 + h2));
            out.push(Stencil { index: [n - 3, n - 2, n - 1], weight: [a, b, c] });
        }
    }
    out
}

/// Brings a coordinate difference into (-period/2, period/2].
fn wrap(difference: f64, period: f64) -> f64 {
    let mut d = difference % period;
    if d > period / 2.0 {
        d -= period;
    } else if d <= -period / 2.0 {
        d += period;
    }
    d
}

/// Precomputed metric and stencils of a grid: everything the horizontal
/// operators need, built once per call (cheap: O(nlat + nlon)).
#[derive(Debug, Clone)]
pub struct SphericalMetric {
    /// Stencils along latitude, weights per radian.
    pub latitude: Vec<Stencil>,
    /// Stencils along longitude, weights per radian.
    pub longitude: Vec<Stencil>,
    /// 1/a (per metre).
    pub inverse_radius: f64,
    /// 1/(a cos lat) for each row; NaN at the poles (|lat| within 1e-6 degrees
    /// of 90), where the x-derivative is undefined.
    pub inverse_x_scale: Vec<f64>,
    /// cos(lat) per row (0 at the poles).
    pub cos_latitude: Vec<f64>,
    /// The longitude stencils' weights as three arrays, weight k of column i
    /// at [k][i], so that whole rows run as contiguous, vectorisable loops
    /// (`scaled_d_dlon_row`).
    longitude_weights: [Vec<f64>; 3],
}

impl SphericalMetric {
    pub fn new(grid: &Grid, radius: f64) -> Self {
        let lat_rad: Vec<f64> = grid.latitudes.iter().map(|d| d.to_radians()).collect();
        let lon_rad: Vec<f64> = grid.longitudes.iter().map(|d| d.to_radians()).collect();
        let periodic = grid.global.then_some(std::f64::consts::TAU);
        let cos_latitude: Vec<f64> = grid
            .latitudes
            .iter()
            .map(|&lat| if (lat.abs() - 90.0).abs() < 1e-6 { 0.0 } else { lat.to_radians().cos() })
            .collect();
        let inverse_x_scale = cos_latitude.iter().map(|&c| if c == 0.0 { f64::NAN } else { 1.0 / (radius * c) }).collect();
        let longitude = stencils(&lon_rad, periodic);
        let longitude_weights = [0, 1, 2].map(|k| longitude.iter().map(|s| s.weight[k]).collect());
        Self {
            latitude: stencils(&lat_rad, None),
            longitude,
            inverse_radius: 1.0 / radius,
            inverse_x_scale,
            cos_latitude,
            longitude_weights,
        }
    }

    /// The rows (first, one past the last) that the latitude stencils of
    /// rows `rows` reach.
    pub fn latitude_rows_reached(&self, rows: std::ops::Range<usize>) -> (usize, usize) {
        let reached = self.latitude[rows].iter().flat_map(|s| s.index);
        let (first, last) = reached.fold((usize::MAX, 0), |(a, b), k| (a.min(k), b.max(k)));
        (first, last + 1)
    }

    /// d/dlon (per radian) at (row j, column i) of a 2-D slice given as rows.
    #[inline]
    pub fn d_dlon(&self, row: &[f32], i: usize) -> f64 {
        let s = &self.longitude[i];
        s.weight[0] * row[s.index[0]] as f64 + s.weight[1] * row[s.index[1]] as f64 + s.weight[2] * row[s.index[2]] as f64
    }

    /// d/dlat (per radian) at row j, column i, of a slice.
    #[inline]
    pub fn d_dlat(&self, slice: &[f32], nx: usize, j: usize, i: usize) -> f64 {
        let s = &self.latitude[j];
        s.weight[0] * slice[s.index[0] * nx + i] as f64
            + s.weight[1] * slice[s.index[1] * nx + i] as f64
            + s.weight[2] * slice[s.index[2] * nx + i] as f64
    }

    /// A whole row of `scale * d/dlon`: out[i] = (scale * d_dlon(row, i)) as
    /// f32, the same values in the same order of operations. Every interior
    /// column's stencil is (i-1, i, i+1) (see `stencils`), so the interior
    /// runs as one contiguous loop without index look-ups, which the compiler
    /// vectorises; the two edge columns (periodic wrap or one-sided
    /// differences) take the general stencil.
    pub fn scaled_d_dlon_row(&self, row: &[f32], scale: f64, out: &mut [f32]) {
        let n = row.len();
        assert_eq!(n, self.longitude.len(), "row length differs from the number of longitudes");
        assert_eq!(out.len(), n, "output row length differs from the input row");
        if n < 3 {
            for (i, o) in out.iter_mut().enumerate() {
                *o = (scale * self.d_dlon(row, i)) as f32;
            }
            return;
        }
        out[0] = (scale * self.d_dlon(row, 0)) as f32;
        out[n - 1] = (scale * self.d_dlon(row, n - 1)) as f32;
        let m = n - 2;
        let (left, centre, right) = (&row[..m], &row[1..m + 1], &row[2..]);
        let [w0, w1, w2] = &self.longitude_weights;
        let (w0, w1, w2) = (&w0[1..m + 1], &w1[1..m + 1], &w2[1..m + 1]);
        let out = &mut out[1..m + 1];
        #[cfg(target_arch = "x86_64")]
        if std::arch::is_x86_feature_detected!("avx2") {
            // SAFETY: the processor has AVX2 (checked just above).
            unsafe { varying_weighted_sum_avx2(out, [left, centre, right], [w0, w1, w2], scale) };
            return;
        }
        varying_weighted_sum(out, [left, centre, right], [w0, w1, w2], scale);
    }

    /// A whole row j of `scale * d/dlat` of a slice (rows of `nx` values):
    /// out[i] = (scale * d_dlat(slice, nx, j, i)) as f32, the same values in
    /// the same order of operations. The latitude stencil is fixed along a
    /// row, so this is a contiguous three-row weighted sum.
    pub fn scaled_d_dlat_row(&self, slice: &[f32], nx: usize, j: usize, scale: f64, out: &mut [f32]) {
        self.scaled_d_dlat_row_of_band(slice, 0, nx, j, scale, out)
    }

    /// `scaled_d_dlat_row` on a band of rows: `rows` holds the slice's rows
    /// `first_row..`, enough of them for row j's stencil (the rows
    /// `latitude_rows_reached` gives). Same values, same order of
    /// operations; used by kernels that compute a band of a field and
    /// differentiate it while it is still in cache.
    pub fn scaled_d_dlat_row_of_band(&self, rows: &[f32], first_row: usize, nx: usize, j: usize, scale: f64, out: &mut [f32]) {
        self.scaled_d_dlat_row_of_rows(|k| &rows[(k - first_row) * nx..(k - first_row + 1) * nx], nx, j, scale, out)
    }

    /// `scaled_d_dlat_row` with the slice's rows given one by one: `row(k)`
    /// is row k (`nx` values), asked only for the rows of row j's stencil.
    /// Same values, same order of operations; for kernels whose rows live in
    /// more than one buffer (a band written straight into its output, the
    /// rows just outside it in a scratch buffer).
    pub fn scaled_d_dlat_row_of_rows<'a>(&self, row: impl Fn(usize) -> &'a [f32], nx: usize, j: usize, scale: f64, out: &mut [f32]) {
        let s = &self.latitude[j];
        let (a, b, c) = (&row(s.index[0])[..nx], &row(s.index[1])[..nx], &row(s.index[2])[..nx]);
        let [w0, w1, w2] = s.weight;
        let out = &mut out[..nx];
        #[cfg(target_arch = "x86_64")]
        if std::arch::is_x86_feature_detected!("avx2") {
            // SAFETY: the processor has AVX2 (checked just above).
            unsafe { fixed_weighted_sum_avx2(out, [a, b, c], [w0, w1, w2], scale) };
            return;
        }
        fixed_weighted_sum(out, [a, b, c], [w0, w1, w2], scale);
    }
}

// The loops of the row kernels. Each is compiled twice: for the baseline
// instruction set and, on x86-64, with AVX2 (chosen at run time), which
// doubles the width of the f64 vectors. The arithmetic is the same IEEE
// operations in the same order either way (the compiler never fuses a
// multiply and an add on its own), so both give identical values.

/// out[i] = (scale * (w0[i] v0[i] + w1[i] v1[i] + w2[i] v2[i])) as f32.
#[inline(always)]
fn varying_weighted_sum(out: &mut [f32], values: [&[f32]; 3], weights: [&[f64]; 3], scale: f64) {
    let m = out.len();
    let ([v0, v1, v2], [w0, w1, w2]) = (values.map(|v| &v[..m]), weights.map(|w| &w[..m]));
    for i in 0..m {
        out[i] = (scale * (w0[i] * v0[i] as f64 + w1[i] * v1[i] as f64 + w2[i] * v2[i] as f64)) as f32;
    }
}

/// out[i] = (scale * (w0 v0[i] + w1 v1[i] + w2 v2[i])) as f32.
#[inline(always)]
fn fixed_weighted_sum(out: &mut [f32], values: [&[f32]; 3], weights: [f64; 3], scale: f64) {
    let m = out.len();
    let ([v0, v1, v2], [w0, w1, w2]) = (values.map(|v| &v[..m]), weights);
    for i in 0..m {
        out[i] = (scale * (w0 * v0[i] as f64 + w1 * v1[i] as f64 + w2 * v2[i] as f64)) as f32;
    }
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
fn varying_weighted_sum_avx2(out: &mut [f32], values: [&[f32]; 3], weights: [&[f64]; 3], scale: f64) {
    varying_weighted_sum(out, values, weights, scale)
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
fn fixed_weighted_sum_avx2(out: &mut [f32], values: [&[f32]; 3], weights: [f64; 3], scale: f64) {
    fixed_weighted_sum(out, values, weights, scale)
}

/// Runs `kernel(slice_index, slice_data, row_index, output_row)` over every row of every
/// slice in parallel, producing a new [slice, lat, lon] array. The input must
/// be standard layout (Baroc's fields are).
pub fn map_rows<F>(input: ArrayView3<f32>, kernel: F) -> Array3<f32>
where
    F: Fn(usize, &[f32], usize, &mut [f32]) + Sync,
{
    let (ns, ny, nx) = input.dim();
    let data = input.as_standard_layout();
    let flat = data.as_slice().expect("standard layout");
    let mut out = super::allocation::zeroed((ns, ny, nx));
    out.as_slice_mut()
        .expect("fresh array")
        .par_chunks_mut(nx.max(1))
        .enumerate()
        .for_each(|(row_number, out_row)| {
            let (s, j) = (row_number / ny, row_number % ny);
            kernel(s, &flat[s * ny * nx..(s + 1) * ny * nx], j, out_row);
        });
    out
}

/// Like `map_rows` but producing two outputs at once (vector results).
pub fn map_rows_pair<F>(input: ArrayView3<f32>, kernel: F) -> (Array3<f32>, Array3<f32>)
where
    F: Fn(usize, &[f32], usize, &mut [f32], &mut [f32]) + Sync,
{
    let (ns, ny, nx) = input.dim();
    let data = input.as_standard_layout();
    let flat = data.as_slice().expect("standard layout");
    let mut first = super::allocation::zeroed((ns, ny, nx));
    let mut second = super::allocation::zeroed((ns, ny, nx));
    first
        .as_slice_mut()
        .expect("fresh array")
        .par_chunks_mut(nx.max(1))
        .zip(second.as_slice_mut().expect("fresh array").par_chunks_mut(nx.max(1)))
        .enumerate()
        .for_each(|(row_number, (a, b))| {
            let (s, j) = (row_number / ny, row_number % ny);
            kernel(s, &flat[s * ny * nx..(s + 1) * ny * nx], j, a, b);
        });
    (first, second)
}

/// Horizontal gradient (d/dx, d/dy) of a scalar, per metre.
pub fn gradient(grid: &Grid, radius: f64, scalar: ArrayView3<f32>) -> (Array3<f32>, Array3<f32>) {
    if let Some(projected) = &grid.projection {
        return super::projected::gradient(projected, scalar);
    }
    let metric = SphericalMetric::new(grid, radius);
    let nx = grid.longitudes.len();
    map_rows_pair(scalar, |_, slice, j, dx, dy| {
        let row = &slice[j * nx..(j + 1) * nx];
        metric.scaled_d_dlon_row(row, metric.inverse_x_scale[j], dx);
        metric.scaled_d_dlat_row(slice, nx, j, metric.inverse_radius, dy);
    })
}

/// Divergence of a horizontal vector field on the sphere:
/// div = (1/(a cos lat)) (du/dlon + d(v cos lat)/dlat)   (field guide).
pub fn divergence(grid: &Grid, radius: f64, eastward: ArrayView3<f32>, northward: ArrayView3<f32>) -> Array3<f32> {
    if let Some(projected) = &grid.projection {
        return super::projected::divergence(projected, eastward, northward);
    }
    let metric = SphericalMetric::new(grid, radius);
    let v_cos = weighted_by_cos(&metric, northward);
    let nx = grid.longitudes.len();
    let u = eastward.as_standard_layout();
    let u_flat = u.as_slice().expect("standard layout");
    let ny = grid.latitudes.len();
    map_rows(v_cos.view(), |s, slice, j, out| {
        let u_slice = &u_flat[s * ny * nx..(s + 1) * ny * nx];
        let row = &u_slice[j * nx..(j + 1) * nx];
        let k = metric.inverse_x_scale[j];
        for i in 0..nx {
            out[i] = (k * (metric.d_dlon(row, i) + metric.d_dlat(slice, nx, j, i))) as f32;
        }
    })
}

/// Relative vorticity on the sphere:
/// zeta = (1/(a cos lat)) (dv/dlon - d(u cos lat)/dlat)   (field guide).
pub fn vorticity(grid: &Grid, radius: f64, eastward: ArrayView3<f32>, northward: ArrayView3<f32>) -> Array3<f32> {
    if let Some(projected) = &grid.projection {
        return super::projected::vorticity(projected, eastward, northward);
    }
    let metric = SphericalMetric::new(grid, radius);
    let u_cos = weighted_by_cos(&metric, eastward);
    let nx = grid.longitudes.len();
    let ny = grid.latitudes.len();
    let v = northward.as_standard_layout();
    let v_flat = v.as_slice().expect("standard layout");
    map_rows(u_cos.view(), |s, slice, j, out| {
        let v_slice = &v_flat[s * ny * nx..(s + 1) * ny * nx];
        let row = &v_slice[j * nx..(j + 1) * nx];
        let k = metric.inverse_x_scale[j];
        for i in 0..nx {
            out[i] = (k * (metric.d_dlon(row, i) - metric.d_dlat(slice, nx, j, i))) as f32;
        }
    })
}

/// Laplacian of a scalar on the sphere, as the divergence of its gradient
/// (the same spherical divergence as above, applied to the gradient).
pub fn laplacian(grid: &Grid, radius: f64, scalar: ArrayView3<f32>) -> Array3<f32> {
    let (dx, dy) = gradient(grid, radius, scalar);
    divergence(grid, radius, dx.view(), dy.view())
}

fn weighted_by_cos(metric: &SphericalMetric, field: ArrayView3<f32>) -> Array3<f32> {
    let mut out = field.as_standard_layout().into_owned();
    out.axis_iter_mut(Axis(0)).into_par_iter().for_each(|mut slice| {
        for (j, mut row) in slice.axis_iter_mut(Axis(0)).enumerate() {
            let c = metric.cos_latitude[j] as f32;
            row.mapv_inplace(|v| v * c);
        }
    });
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::Array3;

    fn grid(dlat: f64, dlon: f64, south: f64, north: f64, west: f64, east: f64) -> Grid {
        let ny = ((north - south) / dlat).round() as usize + 1;
        let nx = ((east - west) / dlon).round() as usize + 1;
        Grid::new((0..ny).map(|j| south + j as f64 * dlat).collect(), (0..nx).map(|i| west + i as f64 * dlon).collect())
    }

    fn sample(grid: &Grid, f: impl Fn(f64, f64) -> f64) -> Array3<f32> {
        let (ny, nx) = grid.shape();
        Array3::from_shape_fn((1, ny, nx), |(_, j, i)| f(grid.latitudes[j].to_radians(), grid.longitudes[i].to_radians()) as f32)
    }

    #[test]
    fn stencils_are_exact_for_quadratics() {
        // A three-point, second-order formula differentiates a quadratic
        // exactly (Taylor's theorem), on any spacing and at the edges.
        let x = [0.0, 0.7, 1.5, 2.1, 3.4];
        let f = |x: f64| 2.0 * x * x - 3.0 * x + 1.0;
        for (i, s) in stencils(&x, None).iter().enumerate() {
            let d: f64 = (0..3).map(|k| s.weight[k] * f(x[s.index[k]])).sum();
            assert!((d - (4.0 * x[i] - 3.0)).abs() < 1e-12, "point {i}: {d}");
        }
    }

    #[test]
    fn row_kernels_equal_the_element_stencils_exactly() {
        // The vectorised row loops must reproduce the element-by-element
        // stencil sums bit for bit: on a periodic global grid, on an open
        // regional grid with non-uniform spacing (edges one-sided), and on
        // rows too short for an interior.
        let periodic = grid(3.0, 7.5, -60.0, 60.0, 0.0, 352.5);
        assert!(periodic.global);
        let uneven = Grid::new(vec![10.0, 11.0, 13.5, 14.0, 17.0], vec![-3.0, -2.2, 0.0, 0.4, 2.9, 3.0, 6.0]);
        let short = Grid::new(vec![40.0, 41.0, 42.0], vec![5.0, 6.0]);
        for g in [periodic, uneven, short] {
            let metric = SphericalMetric::new(&g, 6.371e6);
            let s = sample(&g, |lat, lon| 5000.0 + 300.0 * (2.0 * lon).sin() * lat.cos() + 40.0 * lat * lat);
            let (ny, nx) = g.shape();
            let slice = s.as_slice().unwrap();
            let (mut along_lon, mut along_lat) = (vec![0.0f32; nx], vec![0.0f32; nx]);
            for j in 0..ny {
                let row = &slice[j * nx..(j + 1) * nx];
                metric.scaled_d_dlon_row(row, -1.7e-3, &mut along_lon);
                metric.scaled_d_dlat_row(slice, nx, j, 2.3e-2, &mut along_lat);
                for i in 0..nx {
                    assert_eq!(along_lon[i].to_bits(), ((-1.7e-3 * metric.d_dlon(row, i)) as f32).to_bits(), "row {j} column {i}");
                    assert_eq!(along_lat[i].to_bits(), ((2.3e-2 * metric.d_dlat(slice, nx, j, i)) as f32).to_bits(), "row {j} column {i}");
                }
            }
        }
    }

    #[test]
    fn both_builds_of_the_row_loops_agree_bit_for_bit() {
        // The baseline loops and, where the processor has it, their AVX2
        // build must give identical values (same IEEE operations in the same
        // order); odd lengths exercise the vector remainders.
        let n = 1001;
        let values: Vec<Vec<f32>> = (0..3).map(|k| (0..n).map(|i| 5000.0 + ((i * 7 + k * 13) % 97) as f32 * 1.37).collect()).collect();
        let weights: Vec<Vec<f64>> = (0..3).map(|k| (0..n).map(|i| ((i + k) % 11) as f64 * 0.173 - 0.9).collect()).collect();
        let v = [&values[0][..], &values[1][..], &values[2][..]];
        let w = [&weights[0][..], &weights[1][..], &weights[2][..]];
        let (mut plain, mut other) = (vec![0.0f32; n], vec![0.0f32; n]);
        varying_weighted_sum(&mut plain, v, w, -3.1e-4);
        for i in 0..n {
            let expected = (-3.1e-4 * (w[0][i] * v[0][i] as f64 + w[1][i] * v[1][i] as f64 + w[2][i] * v[2][i] as f64)) as f32;
            assert_eq!(plain[i].to_bits(), expected.to_bits(), "element {i}");
        }
        #[cfg(target_arch = "x86_64")]
        if std::arch::is_x86_feature_detected!("avx2") {
            unsafe { varying_weighted_sum_avx2(&mut other, v, w, -3.1e-4) };
            assert!(plain.iter().zip(&other).all(|(a, b)| a.to_bits() == b.to_bits()));
            fixed_weighted_sum(&mut plain, v, [0.3, -1.7, 1.4], 2.2e-3);
            unsafe { fixed_weighted_sum_avx2(&mut other, v, [0.3, -1.7, 1.4], 2.2e-3) };
            assert!(plain.iter().zip(&other).all(|(a, b)| a.to_bits() == b.to_bits()));
        }
    }

    #[test]
    fn gradient_of_sine_of_latitude_is_cos_over_radius() {
        // Analytic: d/dy sin(lat) = cos(lat)/a; d/dx = 0.
        let a = 6.371e6;
        let g = grid(1.0, 1.0, 20.0, 60.0, -30.0, 10.0);
        let s = sample(&g, |lat, _| 1000.0 * lat.sin());
        let (dx, dy) = gradient(&g, a, s.view());
        for j in 0..g.latitudes.len() {
            let expected = 1000.0 * g.latitudes[j].to_radians().cos() / a;
            assert!(((dy[[0, j, 5]] as f64) - expected).abs() < 1e-3 * expected, "row {j}");
            assert!(dx[[0, j, 5]].abs() < 1e-9);
        }
    }

    #[test]
    fn halving_the_spacing_quarters_the_error() {
        // Second-order convergence (field guide): error(h) / error(h/2) ~ 4.
        let a = 6.371e6;
        let exact_dx = |lat: f64, lon: f64| 3.0 * (3.0 * lon).cos() * lat.cos() / (a * lat.cos());
        let max_error = |d: f64| {
            let g = grid(d, d, 30.0, 60.0, -40.0, 40.0);
            let s = sample(&g, |lat, lon| (3.0 * lon).sin() * lat.cos());
            let (dx, _) = gradient(&g, a, s.view());
            let mut worst: f64 = 0.0;
            for j in 0..g.latitudes.len() {
                for i in 0..g.longitudes.len() {
                    let e = (dx[[0, j, i]] as f64 - exact_dx(g.latitudes[j].to_radians(), g.longitudes[i].to_radians())).abs();
                    worst = worst.max(e);
                }
            }
            worst
        };
        let ratio = max_error(2.0) / max_error(1.0);
        assert!(ratio > 3.5 && ratio < 4.5, "convergence ratio {ratio}");
    }

    #[test]
    fn periodic_seam_matches_interior() {
        // On a global grid the derivative at the seam uses the wrapped
        // neighbours, so it equals the analytic value as well as the interior.
        let a = 6.371e6;
        let g = grid(2.0, 2.5, -80.0, 80.0, 0.0, 357.5);
        assert!(g.global);
        let s = sample(&g, |lat, lon| lon.sin() * lat.cos());
        let (dx, _) = gradient(&g, a, s.view());
        let j = 40; // latitude 0
        let exact = |lon: f64| lon.cos() / a;
        let nx = g.longitudes.len();
        for &i in &[0usize, 1, nx / 2, nx - 1] {
            let e = (dx[[0, j, i]] as f64 - exact(g.longitudes[i].to_radians())).abs();
            assert!(e < 2e-3 / a, "column {i}: error {e}");
        }
    }

    #[test]
    fn vorticity_of_solid_body_rotation() {
        // u = U cos(lat), v = 0 is solid-body rotation: zeta = 2 U sin(lat) / a
        // (textbook result, e.g. from the spherical curl formula above).
        let a = 6.371e6;
        let g = grid(1.0, 1.0, 10.0, 80.0, 0.0, 30.0);
        let u = sample(&g, |lat, _| 20.0 * lat.cos());
        let v = Array3::<f32>::zeros(u.dim());
        let zeta = vorticity(&g, a, u.view(), v.view());
        let div = divergence(&g, a, u.view(), v.view());
        for j in 0..g.latitudes.len() {
            let expected = 2.0 * 20.0 * g.latitudes[j].to_radians().sin() / a;
            assert!((zeta[[0, j, 10]] as f64 - expected).abs() < 1e-3 * expected.abs() + 1e-12, "row {j}");
            assert!(div[[0, j, 10]].abs() < 1e-12);
        }
    }

    #[test]
    fn poles_give_nan_not_infinity() {
        let g = grid(5.0, 10.0, 60.0, 90.0, 0.0, 350.0);
        let s = sample(&g, |lat, lon| lon.sin() * lat.cos());
        let (dx, dy) = gradient(&g, 6.371e6, s.view());
        let last = g.latitudes.len() - 1;
        assert!(dx[[0, last, 3]].is_nan());
        assert!(dy[[0, last, 3]].is_finite());
    }
}
