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

use ndarray::{Array3, ArrayView3};

use super::differences::{map_rows, map_rows_pair, stencils, Stencil};
use crate::constants::Constants;
use crate::projection::ProjectedGrid;

/// Stencils along the grid's two axes, weights per grid unit, the x weights
/// also as three arrays for contiguous row loops.
struct GridStencils {
    x: Vec<Stencil>,
    y: Vec<Stencil>,
    x_weights: [Vec<f64>; 3],
}

impl GridStencils {
    fn new(grid: &ProjectedGrid) -> Self {
        let (x, y) = grid.stencil_coordinates();
        let x = stencils(&x, None);
        let x_weights = [0, 1, 2].map(|k| x.iter().map(|s| s.weight[k]).collect());
        Self { x, y: stencils(&y, None), x_weights }
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
    balanced(grid, scalar, |_| 1.0, false)
}

/// (u, v) = (scale / f) k x grad(field), eastward and northward, with f at
/// each point's latitude; NaN where |latitude| < `equator_band` degrees.
pub fn balanced_wind(grid: &ProjectedGrid, constants: &Constants, field: ArrayView3<f32>, scale: f64, equator_band: f64) -> (Array3<f32>, Array3<f32>) {
    balanced(
        grid,
        field,
        |lat| if lat.abs() < equator_band { f64::NAN } else { scale / constants.coriolis(lat) },
        true,
    )
}

/// The shared kernel: the earth-relative gradient times `factor(latitude)`,
/// turned by 90 degrees (k x) when `cross` is set.
fn balanced(grid: &ProjectedGrid, field: ArrayView3<f32>, factor: impl Fn(f64) -> f64, cross: bool) -> (Array3<f32>, Array3<f32>) {
    let st = GridStencils::new(grid);
    let (ny, nx) = grid.shape();
    let k: Vec<f64> = grid.latitude.iter().map(|&lat| factor(lat)).collect();
    debug_assert_eq!(field.dim().1 * field.dim().2, ny * nx);
    map_rows_pair(field, |_, slice, j, east, north| {
        let range = j * nx..(j + 1) * nx;
        let row = &slice[range.clone()];
        let mut gx = vec![0.0f64; nx];
        let mut gy = vec![0.0f64; nx];
        st.d_dx_row(row, &grid.inverse_scale_x[range.clone()], &mut gx);
        st.d_dy_row(slice, nx, j, &grid.inverse_scale_y[range.clone()], &mut gy);
        let (c, s, k) = (&grid.east_cos[range.clone()], &grid.east_sin[range.clone()], &k[range]);
        for i in 0..nx {
            // Grid to earth: east = gx cos a + gy sin a, north = -gx sin a + gy cos a.
            let ge = gx[i] * c[i] + gy[i] * s[i];
            let gn = -gx[i] * s[i] + gy[i] * c[i];
            if cross {
                east[i] = (-k[i] * gn) as f32;
                north[i] = (k[i] * ge) as f32;
            } else {
                east[i] = ge as f32;
                north[i] = gn as f32;
            }
        }
    })
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
