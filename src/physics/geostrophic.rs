//! Geostrophic balance: V_g = (1/f) k x grad(Phi).
//!
//! u_g = -(1/f) dPhi/dy,  v_g = (1/f) dPhi/dx   (field guide, "Formulas"),
//! with Phi the geopotential (m2 s-2); for geopotential height Z (m),
//! Phi = g0 Z. The same operator with another scale gives the thermal wind
//! from thickness (scale g0) or from layer-mean temperature
//! (scale Rd ln(p_b/p_t)), and the per-level shear dV_g/dln p (scale -Rd).

use ndarray::{Array3, ArrayView3};

use super::differences::{map_rows_pair, SphericalMetric};
use crate::constants::Constants;
use crate::grid::Grid;

/// Default half-width of the equatorial band where geostrophic and thermal
/// winds are masked, in degrees of latitude (common practice: 5; 10 to 15 is
/// also common).
pub const DEFAULT_EQUATOR_BAND: f64 = 5.0;

/// Computes (u, v) = (scale/f) k x grad(field) on [slice, lat, lon] arrays.
///
/// Rows with |latitude| < `equator_band` (degrees) are NaN, because f -> 0
/// there and balance is undefined; so are the poles, where the eastward
/// derivative is undefined. NaN inputs propagate to their neighbours'
/// derivatives. Never fails; an empty grid gives empty arrays.
pub fn balanced_wind(
    grid: &Grid,
    constants: &Constants,
    field: ArrayView3<f32>,
    scale: f64,
    equator_band: f64,
) -> (Array3<f32>, Array3<f32>) {
    if let Some(projected) = &grid.projection {
        // Map factor and Coriolis at each point (physics::projected).
        return super::projected::balanced_wind(projected, constants, field, scale, equator_band);
    }
    let metric = SphericalMetric::new(grid, constants.earth_radius);
    let nx = grid.longitudes.len();
    let over_f = scale_over_coriolis(grid, constants, scale, equator_band);
    map_rows_pair(field, |_, slice, j, u, v| {
        let k = over_f[j];
        let kx = metric.inverse_x_scale[j];
        if !k.is_finite() || !kx.is_finite() {
            u.fill(f32::NAN);
            v.fill(f32::NAN);
            return;
        }
        let row = &slice[j * nx..(j + 1) * nx];
        // Row kernels: u[i] = (-k ky d/dlat) and v[i] = (k kx d/dlon) with the
        // factors multiplied in the same order as element by element.
        metric.scaled_d_dlat_row(slice, nx, j, -k * metric.inverse_radius, u);
        metric.scaled_d_dlon_row(row, k * kx, v);
    })
}

/// scale / f for each latitude row of a latitude-longitude grid, NaN inside
/// the equatorial band (|latitude| < `equator_band` degrees), where balance
/// is undefined: the factor `balanced_wind` applies, for kernels that fuse
/// it with other work (`layers::layers_and_thermal_wind`).
pub fn scale_over_coriolis(grid: &Grid, constants: &Constants, scale: f64, equator_band: f64) -> Vec<f64> {
    grid.latitudes.iter().map(|&lat| if lat.abs() < equator_band { f64::NAN } else { scale / constants.coriolis(lat) }).collect()
}

/// What a geostrophic-wind input holds.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum GeopotentialKind {
    /// Geopotential Phi in m2 s-2.
    Geopotential,
    /// Geopotential height Z in m (Phi = g0 Z).
    Height,
}

/// Geostrophic wind from geopotential or geopotential height on every slice.
/// See `balanced_wind` for masking and failure behaviour.
pub fn geostrophic_wind(
    grid: &Grid,
    constants: &Constants,
    input: ArrayView3<f32>,
    kind: GeopotentialKind,
    equator_band: f64,
) -> (Array3<f32>, Array3<f32>) {
    let scale = match kind {
        GeopotentialKind::Geopotential => 1.0,
        GeopotentialKind::Height => constants.gravity,
    };
    balanced_wind(grid, constants, input, scale, equator_band)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn worked_value_60_m_per_500_km_at_45_north() {
        // Field guide worked value (derived): at 45 N, a height fall of 60 m per
        // 500 km poleward gives u_g ~ 11.4 m/s.
        // u_g = -(g0/f) dZ/dy = 9.80665 / 1.0313e-4 * 60 / 5e5 = 11.41 m/s.
        let c = Constants::default();
        let lats: Vec<f64> = (0..21).map(|j| 40.0 + 0.5 * j as f64).collect();
        let lons: Vec<f64> = (0..11).map(|i| -5.0 + i as f64).collect();
        let grid = Grid::new(lats.clone(), lons);
        let per_radian = -60.0 / 5.0e5 * c.earth_radius; // dZ/dlat in m per radian
        let z = ndarray::Array3::from_shape_fn((1, 21, 11), |(_, j, _)| (5500.0 + per_radian * (lats[j] - 45.0).to_radians()) as f32);
        let (u, v) = geostrophic_wind(&grid, &c, z.view(), GeopotentialKind::Height, DEFAULT_EQUATOR_BAND);
        let j45 = 10;
        assert!((u[[0, j45, 5]] - 11.4).abs() < 0.05, "u_g = {}", u[[0, j45, 5]]);
        assert!(v[[0, j45, 5]].abs() < 1e-4);
    }

    #[test]
    fn equatorial_band_is_masked_and_configurable() {
        let c = Constants::default();
        let lats: Vec<f64> = (0..41).map(|j| -20.0 + j as f64).collect();
        let grid = Grid::new(lats.clone(), (0..5).map(|i| i as f64).collect());
        let z = ndarray::Array3::from_shape_fn((1, 41, 5), |(_, j, _)| (lats[j] * 10.0) as f32);
        let (u, _) = geostrophic_wind(&grid, &c, z.view(), GeopotentialKind::Height, 5.0);
        assert!(u[[0, 20, 2]].is_nan() && u[[0, 24, 2]].is_nan()); // 0 and 4 degrees
        assert!(u[[0, 25, 2]].is_finite()); // 5 degrees
        let (u, _) = geostrophic_wind(&grid, &c, z.view(), GeopotentialKind::Height, 12.0);
        assert!(u[[0, 31, 2]].is_nan() && u[[0, 32, 2]].is_finite()); // 11 and 12 degrees
    }
}
