//! Advection by a horizontal wind, and the link between the turning of the
//! geostrophic wind and layer-mean temperature advection.
//!
//! Advection of a scalar s by V: -V . grad(s)  (units of s per second).
//! Layer-mean geostrophic temperature advection (field guide):
//!   -Vbar_g . grad(Tbar) = -(f / (Rd ln(p_b/p_t))) k . (V_g,b x V_g,t)
//! which holds exactly when Vbar_g = (V_g,b + V_g,t)/2 and V_g,t - V_g,b is
//! the thermal wind (k . (V_b x V_t) = k . (V_b x V_T), and
//! grad Tbar = -(f/(Rd ln(p_b/p_t))) k x V_T). Veering with height (clockwise,
//! k . (V_b x V_t) < 0) is therefore warm advection where f > 0 (northern
//! hemisphere) and cold advection where f < 0 (southern), a fact of the trade.

use ndarray::{Array3, ArrayView3, Zip};

use super::differences::gradient;
use crate::constants::Constants;
use crate::grid::Grid;

/// -V . grad(scalar) on [slice, lat, lon] (scalar units per second). NaN where
/// any input is missing.
pub fn advection(grid: &Grid, radius: f64, scalar: ArrayView3<f32>, eastward: ArrayView3<f32>, northward: ArrayView3<f32>) -> Array3<f32> {
    let (dx, dy) = gradient(grid, radius, scalar);
    let mut out = dx;
    Zip::from(&mut out).and(&dy).and(eastward).and(northward).par_for_each(|o, &gy, &u, &v| {
        *o = -(u as f64 * *o as f64 + v as f64 * gy as f64) as f32;
    });
    out
}

/// -Vbar . grad(scalar) on [slice, lat, lon] with Vbar = (V_b + V_t)/2, the
/// mean of two winds (the layer-mean geostrophic wind of the field guide's
/// layer advection, from the winds at the layer's bottom and top). The
/// same bits as `advection` given the mean as two arrays computed in f32,
/// 0.5 * (bottom + top), which is how the mean is formed here, point by
/// point, so it is never held as whole fields. NaN where any input is
/// missing; never fails (the caller checks that the shapes agree; a
/// mismatch is a caller's error and panics).
pub fn advection_by_mean(
    grid: &Grid,
    radius: f64,
    scalar: ArrayView3<f32>,
    bottom: (ArrayView3<f32>, ArrayView3<f32>),
    top: (ArrayView3<f32>, ArrayView3<f32>),
) -> Array3<f32> {
    let (dx, dy) = gradient(grid, radius, scalar);
    let mut out = dx;
    Zip::from(&mut out).and(&dy).and(bottom.0).and(bottom.1).and(top.0).and(top.1).par_for_each(|o, &gy, &ub, &vb, &ut, &vt| {
        let (u, v) = (0.5 * (ub + ut), 0.5 * (vb + vt));
        *o = -(u as f64 * *o as f64 + v as f64 * gy as f64) as f32;
    });
    out
}

/// Layer-mean temperature advection (K s-1) from the geostrophic winds at the
/// layer's bottom and top alone: -(f / (Rd ln(p_b/p_t))) k . (V_b x V_t).
/// Rows inside the equatorial band are NaN (the winds are masked there).
pub fn advection_from_turning(
    grid: &Grid,
    constants: &Constants,
    bottom: (ArrayView3<f32>, ArrayView3<f32>),
    top: (ArrayView3<f32>, ArrayView3<f32>),
    bottom_pressure: f64,
    top_pressure: f64,
) -> Array3<f32> {
    let log_ratio = (bottom_pressure / top_pressure).ln().abs();
    let (ns, ny, nx) = bottom.0.dim();
    let mut out = Array3::<f32>::zeros((ns, ny, nx));
    Zip::indexed(&mut out).and(bottom.0).and(bottom.1).and(top.0).and(top.1).par_for_each(|(_, j, i), o, &ub, &vb, &ut, &vt| {
        let f = constants.coriolis(grid.latitude_at(j, i));
        let cross = ub as f64 * vt as f64 - vb as f64 * ut as f64;
        *o = (-(f / (constants.dry_air_gas_constant * log_ratio)) * cross) as f32;
    });
    out
}

/// What the turning of the wind implies for temperature advection, given the
/// turning angle (positive veering) and the latitude.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
pub enum ImpliedAdvection {
    Warm,
    Cold,
    Neutral,
}

pub fn implied_advection(veering_degrees: f64, latitude: f64) -> ImpliedAdvection {
    if veering_degrees.is_nan() || veering_degrees == 0.0 || latitude == 0.0 {
        return ImpliedAdvection::Neutral;
    }
    if (veering_degrees > 0.0) == (latitude > 0.0) {
        ImpliedAdvection::Warm
    } else {
        ImpliedAdvection::Cold
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::physics::geostrophic::{geostrophic_wind, GeopotentialKind};
    use crate::physics::thermal_wind::{thermal_wind_from_thickness, turning_angle};

    /// A two-level case on the sphere with an arbitrary analytic thickness and
    /// lower height field.
    fn case(latitude_shift: f64) -> (Grid, Array3<f32>, Array3<f32>) {
        let lats: Vec<f64> = (0..31).map(|j| 30.0 + j as f64 + latitude_shift).collect();
        let lons: Vec<f64> = (0..41).map(|i| -20.0 + i as f64).collect();
        let grid = Grid::new(lats.clone(), lons.clone());
        let z_bottom = Array3::from_shape_fn((1, 31, 41), |(_, j, i)| {
            (100.0 + 80.0 * (lons[i].to_radians() * 6.0).sin() * (lats[j].to_radians() * 4.0).cos()) as f32
        });
        let thickness = Array3::from_shape_fn((1, 31, 41), |(_, j, i)| {
            (5500.0 - 4.0 * (lats[j] - 45.0) + 30.0 * (lons[i].to_radians() * 5.0 + 0.4).cos()) as f32
        });
        (grid, z_bottom, thickness)
    }

    #[test]
    fn turning_identity_equals_mean_wind_advection() {
        // Field guide identity: -Vbar.grad(Tbar) = -(f/(Rd ln(pb/pt))) k.(Vb x Vt)
        // with Vbar = (Vb+Vt)/2 and Tbar = g0 dz / (Rd ln(pb/pt)).
        for shift in [0.0, -80.0] {
            let c = Constants::default();
            let (grid, z_bottom, dz) = case(shift);
            let z_top = &z_bottom + &dz;
            let (ub, vb) = geostrophic_wind(&grid, &c, z_bottom.view(), GeopotentialKind::Height, 5.0);
            let (ut, vt) = geostrophic_wind(&grid, &c, z_top.view(), GeopotentialKind::Height, 5.0);
            let (pb, pt) = (100000.0, 50000.0);
            let tbar = dz.mapv(|d| (c.gravity * d as f64 / (c.dry_air_gas_constant * 2f64.ln())) as f32);
            let umean = (&ub + &ut).mapv(|x| x / 2.0);
            let vmean = (&vb + &vt).mapv(|x| x / 2.0);
            let direct = advection(&grid, c.earth_radius, tbar.view(), umean.view(), vmean.view());
            let identity = advection_from_turning(&grid, &c, (ub.view(), vb.view()), (ut.view(), vt.view()), pb, pt);
            let scale = direct.iter().filter(|v| v.is_finite()).fold(0.0f32, |m, v| m.max(v.abs()));
            let mut compared = 0;
            for (a, b) in direct.iter().zip(identity.iter()) {
                if a.is_finite() && b.is_finite() {
                    assert!((a - b).abs() <= 2e-3 * scale, "{a} vs {b}");
                    compared += 1;
                }
            }
            assert!(compared > 1000);
            // The thermal wind is the difference of the geostrophic winds.
            let (u_t, _) = thermal_wind_from_thickness(&grid, &c, dz.view(), 5.0);
            assert!(((&ut - &ub)[[0, 15, 20]] - u_t[[0, 15, 20]]).abs() < 1e-3);
        }
    }

    #[test]
    fn advection_by_the_mean_wind_is_the_bits_of_advection_by_the_mean_fields() {
        // The fused kernel against its definition: `advection` given the
        // mean wind as whole arrays, each 0.5 * (bottom + top) in f32 (how
        // the layer advection formed it before the mean was fused in;
        // field guide, layer-mean geostrophic advection). Bits, with a
        // missing value and the equatorial band (NaN winds) in the case.
        for shift in [0.0, -45.0] {
            let c = Constants::default();
            let (grid, z_bottom, dz) = case(shift);
            let z_top = &z_bottom + &dz;
            let (ub, vb) = geostrophic_wind(&grid, &c, z_bottom.view(), GeopotentialKind::Height, 5.0);
            let (mut ut, vt) = geostrophic_wind(&grid, &c, z_top.view(), GeopotentialKind::Height, 5.0);
            ut[[0, 7, 9]] = f32::NAN;
            let tbar = dz.mapv(|d| (c.gravity * d as f64 / (c.dry_air_gas_constant * 2f64.ln())) as f32);
            let umean = (&ub + &ut).mapv(|x| 0.5 * x);
            let vmean = (&vb + &vt).mapv(|x| 0.5 * x);
            let separate = advection(&grid, c.earth_radius, tbar.view(), umean.view(), vmean.view());
            let fused = advection_by_mean(&grid, c.earth_radius, tbar.view(), (ub.view(), vb.view()), (ut.view(), vt.view()));
            assert_eq!(fused.dim(), separate.dim());
            assert!(fused[[0, 7, 9]].is_nan(), "a missing wind gives a missing advection");
            assert!(fused.iter().filter(|v| v.is_finite()).count() > 300);
            for (a, b) in fused.iter().zip(separate.iter()) {
                assert_eq!(a.to_bits(), b.to_bits(), "{a} vs {b}");
            }
        }
    }

    #[test]
    fn veering_means_warm_advection_in_the_north() {
        // Fact of the trade: veering with height = warm advection in the
        // northern hemisphere, cold in the southern.
        let c = Constants::default();
        let (grid, z_bottom, dz) = case(0.0);
        let z_top = &z_bottom + &dz;
        let (ub, vb) = geostrophic_wind(&grid, &c, z_bottom.view(), GeopotentialKind::Height, 5.0);
        let (ut, vt) = geostrophic_wind(&grid, &c, z_top.view(), GeopotentialKind::Height, 5.0);
        let adv = advection_from_turning(&grid, &c, (ub.view(), vb.view()), (ut.view(), vt.view()), 100000.0, 50000.0);
        let mut checked = 0;
        for j in 1..30 {
            for i in 1..40 {
                let angle = turning_angle(ub[[0, j, i]], vb[[0, j, i]], ut[[0, j, i]], vt[[0, j, i]]) as f64;
                if angle.abs() > 1.0 {
                    let expected = implied_advection(angle, grid.latitudes[j]);
                    let sign = if adv[[0, j, i]] > 0.0 { ImpliedAdvection::Warm } else { ImpliedAdvection::Cold };
                    assert_eq!(sign, expected, "at row {j}, column {i}: angle {angle}");
                    checked += 1;
                }
            }
        }
        assert!(checked > 100);
        assert_eq!(implied_advection(20.0, -40.0), ImpliedAdvection::Cold);
    }
}
