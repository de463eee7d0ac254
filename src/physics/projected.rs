//! Horizontal derivatives on projected grids (Lambert conformal, polar
//! stereographic, rotated pole).
//!
//! A projected grid is an orthogonal curvilinear grid: with grid coordinates
//! (xi, eta) and scale factors h_x, h_y (true length per grid unit),
//!   d/dx_earth = (1/h_x) d/dxi,  d/dy_earth = (1/h_y) d/deta.
//! For the conformal projections h_x = h_y = 1/m with m the map factor
//! (Snyder 1987, USGS PP 1395, eqs. 15-4 and 21-4), so d/dx_earth =
//! m d/dx_grid; for a rotated pole grid h_x = a cos(lat'), h_y = a (the
//! field guide's latitude-longitude metric on the rotated sphere).
//! Divergence and vorticity of a vector with grid components (u, v)
//! (textbook orthogonal curvilinear coordinates, e.g. Haltiner and Williams
//! 1980, "Numerical Prediction and Dynamic Meteorology", ch. 1):
//!   div  = 1/(h_x h_y) [d(h_y u)/dxi + d(h_x v)/deta],
//!   zeta = 1/(h_x h_y) [d(h_y v)/dxi - d(h_x u)/deta].
//!
//! Every vector in and out is eastward/northward: inputs are turned to the
//! grid's axes and results back with the angle of each point
//! (`ProjectedGrid::rotate_to_earth`), so callers above the physics never
//! see grid-relative components. The one-dimensional stencils are those of
//! `differences::stencils` (numpy.gradient, edge_order=2). The Coriolis
//! parameter uses each point's own latitude.

use ndarray::{Array3, ArrayView3, Axis};
use rayon::prelude::*;

use super::differences::{map_rows, stencils, Stencil};
use crate::constants::Constants;
use crate::projection::ProjectedGrid;

/// Stencils along the grid's two axes, weights per grid unit, the x weights
/// also as three arrays for contiguous row loops.
struct GridStencils {
    x: Vec<Stencil>,
    y: Vec<Stencil>,
    x_weights: [Vec<f64>; 3],
    /// The interior x weights when they are all the same (even spacing).
    uniform_x: Option<[f64; 3]>,
}

impl GridStencils {
    fn new(grid: &ProjectedGrid) -> Self {
        let (x, y) = grid.stencil_coordinates();
        let x = stencils(&x, None);
        let x_weights: [Vec<f64>; 3] = [0, 1, 2].map(|k| x.iter().map(|s| s.weight[k]).collect());
        let n = x.len();
        let uniform_x = (n >= 3).then(|| [0, 1, 2].map(|k| x_weights[k][1])).filter(|w| {
            (1..n - 1).all(|i| (0..3).all(|k| x_weights[k][i] == w[k]))
        });
        Self { x, y: stencils(&y, None), x_weights, uniform_x }
    }

    /// out[i] = d/dxi of a row times `scale[i]`.
    #[inline]
    fn d_dx_row(&self, row: &[f32], scale: &[f64], out: &mut [f64]) {
        let n = row.len();
        if n >= 3 {
            let [w0, w1, w2] = &self.x_weights;
            for i in 1..n - 1 {
                out[i] = scale[i] * (w0[i] * row[i - 1] as f64 + w1[i] * row[i] as f64 + w2[i] * row[i + 1] as f64);
            }
        }
        for i in [0, n.saturating_sub(1)] {
            if i < n {
                let s = &self.x[i];
                out[i] = scale[i] * (s.weight[0] * row[s.index[0]] as f64 + s.weight[1] * row[s.index[1]] as f64 + s.weight[2] * row[s.index[2]] as f64);
            }
        }
    }

    /// out[i] = d/deta at row j of a slice times `scale[i]`.
    #[inline]
    fn d_dy_row(&self, slice: &[f32], nx: usize, j: usize, scale: &[f64], out: &mut [f64]) {
        let s = &self.y[j];
        let row = |k: usize| &slice[s.index[k] * nx..(s.index[k] + 1) * nx];
        let (a, b, c) = (row(0), row(1), row(2));
        let [w0, w1, w2] = s.weight;
        for i in 0..nx {
            out[i] = scale[i] * (w0 * a[i] as f64 + w1 * b[i] as f64 + w2 * c[i] as f64);
        }
    }
}

/// Gradient (eastward, northward components, per metre) of a scalar on
/// [slice, y, x]. NaN inputs propagate to their neighbours' derivatives.
pub fn gradient(grid: &ProjectedGrid, scalar: ArrayView3<f32>) -> (Array3<f32>, Array3<f32>) {
    // east = sx cos(a) d/dxi + sy sin(a) d/deta, north = -sx sin(a) d/dxi + sy cos(a) d/deta.
    let coefficients = grid.gradient_coefficients.get_or_init(|| point_coefficients(grid, |_, sx, sy, c, s| [sx * c, sy * s, -sx * s, sy * c]));
    combine_derivatives(grid, scalar, coefficients)
}

/// (u, v) = (scale / f) k x grad(field), eastward and northward, with f at
/// each point's latitude; NaN where |latitude| < `equator_band` degrees.
pub fn balanced_wind(grid: &ProjectedGrid, constants: &Constants, field: ArrayView3<f32>, scale: f64, equator_band: f64) -> (Array3<f32>, Array3<f32>) {
    // u = -k north_gradient, v = k east_gradient, k = scale / f (NaN in the band).
    let make = || {
        point_coefficients(grid, |lat, sx, sy, c, s| {
            let k = if lat.abs() < equator_band { f64::NAN } else { scale / constants.coriolis(lat) };
            [k * sx * s, -k * sy * c, k * sx * c, k * sy * s]
        })
    };
    // Made once per grid and (rotation rate, scale, band): a run asks the
    // same few again and again, level after level, time after time.
    let key = [constants.rotation_rate.to_bits(), scale.to_bits(), equator_band.to_bits()];
    let cache = grid.balanced_coefficients.get_or_init(|| std::sync::Mutex::new(Vec::new()));
    let found = cache.lock().ok().and_then(|kept| kept.iter().find(|(k, _)| *k == key).map(|(_, c)| c.clone()));
    let coefficients = match found {
        Some(c) => c,
        None => {
            let made = std::sync::Arc::new(make());
            if let Ok(mut kept) = cache.lock() {
                if kept.len() >= 4 {
                    kept.remove(0);
                }
                kept.push((key, made.clone()));
            }
            made
        }
    };
    combine_derivatives(grid, field, &coefficients)
}

/// Per-point coefficients [a, b, c, d] of first = a d/dxi + b d/deta,
/// second = c d/dxi + d d/deta, as four arrays (row-major points), from
/// (latitude, inverse scale x, inverse scale y, cos, sin of the east angle).
/// Stored as f32: a relative rounding of 6e-8, far below the f32 results'
/// own, and half the memory traffic per point.
fn point_coefficients(grid: &ProjectedGrid, f: impl Fn(f64, f64, f64, f64, f64) -> [f64; 4]) -> [Vec<f32>; 4] {
    let n = grid.latitude.len();
    let mut out = [vec![0.0; n], vec![0.0; n], vec![0.0; n], vec![0.0; n]];
    for k in 0..n {
        let c = f(grid.latitude[k], grid.inverse_scale_x[k], grid.inverse_scale_y[k], grid.east_cos[k], grid.east_sin[k]);
        for m in 0..4 {
            out[m][k] = c[m] as f32;
        }
    }
    out
}

/// Rows per parallel task of `combine_derivatives`: the band's four
/// coefficient rows (16 rows of 560 points: 143 KB) stay in a core's L2
/// cache while every level of the band is done, and each level's output is
/// written as one contiguous block of the band's rows, not row by row at a
/// stride of a whole level (which defeats the processor's prefetching and,
/// on 4 KiB pages, its address translation cache).
const ROWS_PER_BAND: usize = 16;

/// Two outputs, each a per-point combination of the derivatives along the
/// grid's axes. Parallel over bands of rows, every level of a band done in
/// turn, so that the band's coefficients are read from memory once, not
/// once per level.
fn combine_derivatives(grid: &ProjectedGrid, field: ArrayView3<f32>, coefficients: &[Vec<f32>; 4]) -> (Array3<f32>, Array3<f32>) {
    let st = GridStencils::new(grid);
    let (ns, ny, nx) = field.dim();
    debug_assert_eq!(ny * nx, grid.latitude.len());
    let data = field.as_standard_layout();
    let flat = data.as_slice().expect("standard layout");
    let mut first = super::allocation::zeroed((ns, ny, nx));
    let mut second = super::allocation::zeroed((ns, ny, nx));
    if first.is_empty() {
        return (first, second);
    }
    // Whether the coefficients are those of a rotation (see `interior`).
    let [a, b, c, d] = coefficients;
    let same_bits = |x: &[f32], y: &[f32], sign: f32| x.len() == y.len() && x.iter().zip(y).all(|(p, q)| p.to_bits() == (sign * *q).to_bits());
    let rotation = same_bits(a, d, 1.0) && same_bits(c, b, -1.0);
    first
        .axis_chunks_iter_mut(Axis(1), ROWS_PER_BAND)
        .into_par_iter()
        .zip(second.axis_chunks_iter_mut(Axis(1), ROWS_PER_BAND).into_par_iter())
        .enumerate()
        .for_each(|(band, (mut first_band, mut second_band))| {
            let rows_here = first_band.dim().1;
            for s in 0..ns {
                let slice = &flat[s * ny * nx..(s + 1) * ny * nx];
                for r in 0..rows_here {
                    let j = band * ROWS_PER_BAND + r;
                    let range = j * nx..(j + 1) * nx;
                    let [a, b, c, d] = coefficients.each_ref().map(|v| &v[range.clone()]);
                    let sy = &st.y[j];
                    let rows = [0, 1, 2].map(|k| &slice[sy.index[k] * nx..(sy.index[k] + 1) * nx]);
                    let out1 = first_band.slice_mut(ndarray::s![s, r, ..]).into_slice().expect("contiguous row");
                    let out2 = second_band.slice_mut(ndarray::s![s, r, ..]).into_slice().expect("contiguous row");
                    row_kernel(&st, &slice[range], rows, sy.weight, [a, b, c, d], rotation, out1, out2);
                }
            }
        });
    (first, second)
}

/// One row: the interior as one contiguous loop (vectorisable, and built
/// for AVX2 where the processor has it), the two edge columns with their
/// one-sided stencils.
#[allow(clippy::too_many_arguments)]
fn row_kernel(st: &GridStencils, row: &[f32], rows: [&[f32]; 3], y_weights: [f64; 3], coefficients: [&[f32]; 4], rotation: bool, out1: &mut [f32], out2: &mut [f32]) {
    let n = row.len();
    let point = |i: usize, dx: f64| {
        let dy = y_weights[0] * rows[0][i] as f64 + y_weights[1] * rows[1][i] as f64 + y_weights[2] * rows[2][i] as f64;
        ((coefficients[0][i] as f64 * dx + coefficients[1][i] as f64 * dy) as f32, (coefficients[2][i] as f64 * dx + coefficients[3][i] as f64 * dy) as f32)
    };
    for i in [0, n.saturating_sub(1)] {
        if i < n {
            let s = &st.x[i];
            let dx = s.weight[0] * row[s.index[0]] as f64 + s.weight[1] * row[s.index[1]] as f64 + s.weight[2] * row[s.index[2]] as f64;
            (out1[i], out2[i]) = point(i, dx);
        }
    }
    if n < 3 {
        return;
    }
    #[cfg(target_arch = "x86_64")]
    if std::arch::is_x86_feature_detected!("avx2") {
        // SAFETY: the processor has AVX2 (checked just above).
        unsafe { interior_avx2(st, row, rows, y_weights, coefficients, rotation, out1, out2) };
        return;
    }
    interior(st, row, rows, y_weights, coefficients, rotation, out1, out2);
}

#[inline(always)]
#[allow(clippy::too_many_arguments)]
fn interior(st: &GridStencils, row: &[f32], rows: [&[f32]; 3], y_weights: [f64; 3], coefficients: [&[f32]; 4], rotation: bool, out1: &mut [f32], out2: &mut [f32]) {
    let m = row.len() - 2;
    let (left, centre, right) = (&row[..m], &row[1..m + 1], &row[2..m + 2]);
    let [w0, w1, w2] = st.x_weights.each_ref().map(|w| &w[1..m + 1]);
    let [r0, r1, r2] = rows.map(|r| &r[1..m + 1]);
    let [a, b, c, d] = coefficients.map(|v| &v[1..m + 1]);
    let (o1, o2) = (&mut out1[1..m + 1], &mut out2[1..m + 1]);
    let [v0, v1, v2] = y_weights;
    if let (Some([u0, u1, u2]), true) = (st.uniform_x, rotation) {
        // Evenly spaced x and coefficients of a rotation (a conformal
        // projection: c = -b, d = a at every point): two coefficient rows
        // instead of four, the same products and sums (c dx is -(b dx)
        // exactly), so the same values.
        for i in 0..m {
            let dx = u0 * left[i] as f64 + u1 * centre[i] as f64 + u2 * right[i] as f64;
            let dy = v0 * r0[i] as f64 + v1 * r1[i] as f64 + v2 * r2[i] as f64;
            let (a, b) = (a[i] as f64, b[i] as f64);
            o1[i] = (a * dx + b * dy) as f32;
            o2[i] = (-b * dx + a * dy) as f32;
        }
        return;
    }
    if let Some([u0, u1, u2]) = st.uniform_x {
        // Evenly spaced x (every projected file seen): one set of weights.
        for i in 0..m {
            let dx = u0 * left[i] as f64 + u1 * centre[i] as f64 + u2 * right[i] as f64;
            let dy = v0 * r0[i] as f64 + v1 * r1[i] as f64 + v2 * r2[i] as f64;
            o1[i] = (a[i] as f64 * dx + b[i] as f64 * dy) as f32;
            o2[i] = (c[i] as f64 * dx + d[i] as f64 * dy) as f32;
        }
        return;
    }
    for i in 0..m {
        let dx = w0[i] * left[i] as f64 + w1[i] * centre[i] as f64 + w2[i] * right[i] as f64;
        let dy = v0 * r0[i] as f64 + v1 * r1[i] as f64 + v2 * r2[i] as f64;
        o1[i] = (a[i] as f64 * dx + b[i] as f64 * dy) as f32;
        o2[i] = (c[i] as f64 * dx + d[i] as f64 * dy) as f32;
    }
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
#[allow(clippy::too_many_arguments)]
fn interior_avx2(st: &GridStencils, row: &[f32], rows: [&[f32]; 3], y_weights: [f64; 3], coefficients: [&[f32]; 4], rotation: bool, out1: &mut [f32], out2: &mut [f32]) {
    interior(st, row, rows, y_weights, coefficients, rotation, out1, out2)
}

/// Grid components divided by the matching inverse scale: (h_x u, h_x v)
/// and (h_y u, h_y v) as needed by div and curl.
fn to_grid_scaled(grid: &ProjectedGrid, eastward: ArrayView3<f32>, northward: ArrayView3<f32>) -> (Array3<f32>, Array3<f32>, Array3<f32>, Array3<f32>) {
    let mut u = eastward.as_standard_layout().into_owned();
    let mut v = northward.as_standard_layout().into_owned();
    grid.rotate_to_grid(u.as_slice_mut().expect("standard layout"), v.as_slice_mut().expect("standard layout"));
    let n = grid.inverse_scale_x.len().max(1);
    let scaled = |a: &Array3<f32>, s: &[f64]| {
        let mut out = a.clone();
        for (k, x) in out.as_slice_mut().expect("standard layout").iter_mut().enumerate() {
            *x = (*x as f64 / s[k % n]) as f32;
        }
        out
    };
    (scaled(&u, &grid.inverse_scale_y), scaled(&v, &grid.inverse_scale_y), scaled(&u, &grid.inverse_scale_x), scaled(&v, &grid.inverse_scale_x))
}

fn curl_or_divergence(grid: &ProjectedGrid, eastward: ArrayView3<f32>, northward: ArrayView3<f32>, curl: bool) -> Array3<f32> {
    let st = GridStencils::new(grid);
    let (ny, nx) = grid.shape();
    let (hy_u, hy_v, hx_u, hx_v) = to_grid_scaled(grid, eastward, northward);
    // div: d(h_y u)/dxi + d(h_x v)/deta; curl: d(h_y v)/dxi - d(h_x u)/deta.
    let (along_x, along_y, sign) = if curl { (hy_v, hx_u, -1.0) } else { (hy_u, hx_v, 1.0) };
    let along_x_flat = along_x.as_slice().expect("standard layout");
    let ones = vec![1.0f64; nx];
    map_rows(along_y.view(), |s, slice, j, out| {
        let range = j * nx..(j + 1) * nx;
        let x_slice = &along_x_flat[s * ny * nx..(s + 1) * ny * nx];
        let mut dx = vec![0.0f64; nx];
        let mut dy = vec![0.0f64; nx];
        st.d_dx_row(&x_slice[range.clone()], &ones, &mut dx);
        st.d_dy_row(slice, nx, j, &ones, &mut dy);
        for i in 0..nx {
            let k = j * nx + i;
            out[i] = (grid.inverse_scale_x[k] * grid.inverse_scale_y[k] * (dx[i] + sign * dy[i])) as f32;
        }
    })
}

/// Divergence (s-1) of an eastward/northward vector field.
pub fn divergence(grid: &ProjectedGrid, eastward: ArrayView3<f32>, northward: ArrayView3<f32>) -> Array3<f32> {
    curl_or_divergence(grid, eastward, northward, false)
}

/// Relative vorticity (s-1) of an eastward/northward vector field.
pub fn vorticity(grid: &ProjectedGrid, eastward: ArrayView3<f32>, northward: ArrayView3<f32>) -> Array3<f32> {
    curl_or_divergence(grid, eastward, northward, true)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::projection::{LambertConformal, PolarStereographic, Pole, Projection, RotatedPole};

    const A: f64 = 6_371_000.0;

    fn grids() -> Vec<ProjectedGrid> {
        let metres = |n: usize, d: f64| (0..n).map(|i| -(n as f64 - 1.0) / 2.0 * d + i as f64 * d).collect::<Vec<_>>();
        vec![
            ProjectedGrid::new(Projection::LambertConformal(LambertConformal::new((30.0, 60.0), -10.0, 50.0, 0.0, 0.0, A).unwrap()), metres(121, 25e3), metres(81, 25e3)),
            ProjectedGrid::new(
                Projection::PolarStereographic(PolarStereographic::with_standard_parallel(Pole::North, 0.0, 60.0, 0.0, -3.0e6, A).unwrap()),
                metres(101, 25e3),
                metres(101, 25e3),
            ),
            ProjectedGrid::new(
                Projection::RotatedPole(RotatedPole::new(40.0, -170.0, 0.0, A).unwrap()),
                (0..81).map(|i| -20.0 + 0.25 * i as f64).collect(),
                (0..81).map(|j| -10.0 + 0.25 * j as f64).collect(),
            ),
        ]
    }

    fn sample(g: &ProjectedGrid, f: impl Fn(f64, f64) -> f64) -> Array3<f32> {
        let (ny, nx) = g.shape();
        Array3::from_shape_fn((1, ny, nx), |(_, j, i)| {
            let k = j * nx + i;
            f(g.latitude[k].to_radians(), g.longitude[k].to_radians()) as f32
        })
    }

    fn interior(g: &ProjectedGrid) -> impl Iterator<Item = (usize, usize)> {
        let (ny, nx) = g.shape();
        (2..ny - 2).flat_map(move |j| (2..nx - 2).map(move |i| (j, i)))
    }

    #[test]
    fn the_two_coefficient_rows_of_a_rotation_give_the_bits_of_four() {
        // A conformal projection's gradient coefficients are a rotation
        // times the map factor (c = -b, d = a): the shorter loop must give
        // the general loop's values exactly.
        let g = &grids()[0];
        let (ny, nx) = g.shape();
        let st = GridStencils::new(g);
        let field = sample(g, |lat, lon| 1000.0 * lat.sin() + 50.0 * (3.0 * lon).cos());
        let flat = field.as_slice().unwrap();
        let coefficients = g.gradient_coefficients.get_or_init(|| point_coefficients(g, |_, sx, sy, c, s| [sx * c, sy * s, -sx * s, sy * c]));
        for j in [1, ny / 2, ny - 2] {
            let range = j * nx..(j + 1) * nx;
            let rows = [j - 1, j, j + 1].map(|k| &flat[k * nx..(k + 1) * nx]);
            let cs = coefficients.each_ref().map(|v| &v[range.clone()]);
            let (mut fast, mut general) = ((vec![0.0f32; nx], vec![0.0f32; nx]), (vec![0.0f32; nx], vec![0.0f32; nx]));
            super::interior(&st, &flat[range.clone()], rows, st.y[j].weight, cs, true, &mut fast.0, &mut fast.1);
            super::interior(&st, &flat[range.clone()], rows, st.y[j].weight, cs, false, &mut general.0, &mut general.1);
            let same = |a: &[f32], b: &[f32]| a.iter().zip(b).all(|(x, y)| x.to_bits() == y.to_bits());
            assert!(same(&fast.0, &general.0) && same(&fast.1, &general.1), "row {j}");
        }
    }

    #[test]
    fn each_level_gives_the_bits_it_gives_alone() {
        // Bands of rows across levels are a matter of memory order only:
        // three levels at once (81 rows: bands end inside the grid) give
        // each level's values as computing it alone does (the values
        // themselves are checked against analytic gradients below).
        let g = &grids()[0];
        let base = sample(g, |lat, lon| 1000.0 * lat.sin() + 50.0 * lon.cos());
        let levels = ndarray::concatenate(Axis(0), &[base.view(), (&base * 0.5).view(), (&base + 7.0).view()]).unwrap();
        let (all_e, all_n) = gradient(g, levels.view());
        for k in 0..3 {
            let (e, n) = gradient(g, levels.slice(ndarray::s![k..k + 1, .., ..]));
            let same = |a: &Array3<f32>, b: &Array3<f32>| a.index_axis(Axis(0), k).iter().zip(b.iter()).all(|(x, y)| x.to_bits() == y.to_bits());
            assert!(same(&all_e, &e) && same(&all_n, &n), "level {k}");
        }
    }

    #[test]
    fn gradient_of_sine_of_latitude_points_north() {
        // Analytic on the sphere: grad sin(lat) = (0, cos(lat)/a).
        for g in grids() {
            let s = sample(&g, |lat, _| 1000.0 * lat.sin());
            let (ge, gn) = gradient(&g, s.view());
            let (_, nx) = g.shape();
            let mut worst: f64 = 0.0;
            for (j, i) in interior(&g) {
                let expected = 1000.0 * g.latitude[j * nx + i].to_radians().cos() / A;
                worst = worst.max(((gn[[0, j, i]] as f64) - expected).abs() / expected).max((ge[[0, j, i]] as f64).abs() / expected);
            }
            assert!(worst < 2e-3, "{}: relative error {worst}", g.projection.cf_name());
        }
    }

    #[test]
    fn gradient_of_a_longitude_wave_is_eastward() {
        // grad of cos(lat) sin(lon) = (cos(lon)/a, -sin(lat) sin(lon)/a).
        for g in grids() {
            let s = sample(&g, |lat, lon| 1000.0 * lat.cos() * lon.sin());
            let (ge, gn) = gradient(&g, s.view());
            let (_, nx) = g.shape();
            for (j, i) in interior(&g) {
                let k = j * nx + i;
                let (lat, lon) = (g.latitude[k].to_radians(), g.longitude[k].to_radians());
                let (ee, en) = (1000.0 * lon.cos() / A, -1000.0 * lat.sin() * lon.sin() / A);
                let tol = 3e-3 * 1000.0 / A;
                assert!((ge[[0, j, i]] as f64 - ee).abs() < tol && (gn[[0, j, i]] as f64 - en).abs() < tol, "{} at {j},{i}", g.projection.cf_name());
            }
        }
    }

    #[test]
    fn vorticity_of_solid_body_rotation_and_no_divergence() {
        // u = U cos(lat), v = 0: zeta = 2 U sin(lat) / a, div = 0 (the same
        // textbook case as on the latitude-longitude grid).
        for g in grids() {
            let u = sample(&g, |lat, _| 20.0 * lat.cos());
            let v = Array3::<f32>::zeros(u.dim());
            let zeta = vorticity(&g, u.view(), v.view());
            let div = divergence(&g, u.view(), v.view());
            let (_, nx) = g.shape();
            for (j, i) in interior(&g) {
                let lat = g.latitude[j * nx + i].to_radians();
                let expected = 40.0 * lat.sin() / A;
                assert!((zeta[[0, j, i]] as f64 - expected).abs() < 2e-3 * 40.0 / A, "{} at {j},{i}: {} vs {expected}", g.projection.cf_name(), zeta[[0, j, i]]);
                assert!((div[[0, j, i]] as f64).abs() < 2e-3 * 40.0 / A);
            }
        }
    }

    #[test]
    fn geostrophic_wind_of_zonal_flow_uses_local_coriolis() {
        // Z = Z0 - K sin(lat) gives u_g = -(g0/f) dZ/dy = (g0/f) K cos(lat)/a,
        // v_g = 0 (field guide, geostrophic wind), f at each point's latitude.
        let c = Constants::default();
        for g in grids() {
            let z = sample(&g, |lat, _| 5500.0 - 600.0 * lat.sin());
            let (u, v) = balanced_wind(&g, &c, z.view(), c.gravity, 5.0);
            let (_, nx) = g.shape();
            for (j, i) in interior(&g) {
                let lat = g.latitude[j * nx + i];
                let expected = c.gravity / c.coriolis(lat) * 600.0 * lat.to_radians().cos() / A;
                assert!((u[[0, j, i]] as f64 - expected).abs() < 2e-3 * expected.abs() + 1e-3, "{}: {} vs {expected}", g.projection.cf_name(), u[[0, j, i]]);
                assert!((v[[0, j, i]] as f64).abs() < 2e-3 * expected.abs() + 1e-3);
            }
        }
    }
}
