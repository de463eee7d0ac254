//! Potential temperature, static stability and the Eady growth rate.
//!
//! theta = T (p0/p)^kappa, p0 = 1000 hPa   (Poisson's equation).
//! N^2 = (g0/theta) dtheta/dz with dz = -(Rd T/(g0 p)) dp (hydrostatic), so
//! N^2 = -(g0^2 / (Rd T theta)) dtheta/d(ln p).
//! Maximum Eady growth rate sigma = 0.31 (f/N) |dV/dz|
//! (Lindzen and Farrell 1980, J. Atmos. Sci. 37; Hoskins and Valdes 1990,
//! J. Atmos. Sci. 47).

use ndarray::{Array3, ArrayView3, Zip};

use crate::constants::{Constants, KAPPA, REFERENCE_PRESSURE};

/// Potential temperature (K) of temperature `t` (K) at pressure `p` (Pa).
#[inline]
pub fn potential_temperature(t: f64, p: f64) -> f64 {
    t * (REFERENCE_PRESSURE / p).powf(KAPPA)
}

/// Static stability N^2 (s-2) of the layer between `bottom` and `top` (Pa)
/// from the temperatures at its boundaries and its layer-mean temperature:
/// N^2 = (g0^2 / (Rd Tbar thetabar)) (theta_t - theta_b) / ln(p_b/p_t),
/// thetabar the mean of the boundary potential temperatures.
pub fn layer_static_stability(
    constants: &Constants,
    temperature_bottom: ArrayView3<f32>,
    temperature_top: ArrayView3<f32>,
    mean_temperature: ArrayView3<f32>,
    bottom: f64,
    top: f64,
) -> Array3<f32> {
    let g2 = constants.gravity * constants.gravity;
    let log_ratio = (bottom / top).ln();
    let mut out = Array3::<f32>::zeros(temperature_bottom.dim());
    Zip::from(&mut out).and(temperature_bottom).and(temperature_top).and(mean_temperature).par_for_each(|o, &tb, &tt, &tm| {
        let theta_b = potential_temperature(tb as f64, bottom);
        let theta_t = potential_temperature(tt as f64, top);
        let theta_mean = 0.5 * (theta_b + theta_t);
        *o = (g2 / (constants.dry_air_gas_constant * tm as f64 * theta_mean) * (theta_t - theta_b) / log_ratio) as f32;
    });
    out
}

/// Maximum Eady growth rate (s-1): 0.31 (|f| / N) |V_T| / dz, with the shear
/// |dV/dz| taken as the thermal-wind speed over the layer thickness dz (m).
/// NaN where N^2 <= 0 (statically unstable or neutral: the Eady estimate does
/// not apply) or the inputs are missing.
pub fn eady_growth_rate(
    constants: &Constants,
    latitudes: &[f64],
    static_stability: ArrayView3<f32>,
    thermal_u: ArrayView3<f32>,
    thermal_v: ArrayView3<f32>,
    thickness: ArrayView3<f32>,
) -> Array3<f32> {
    let mut out = Array3::<f32>::zeros(static_stability.dim());
    Zip::indexed(&mut out).and(static_stability).and(thermal_u).and(thermal_v).and(thickness).par_for_each(|(_, j, _), o, &n2, &u, &v, &dz| {
        let n2 = n2 as f64;
        *o = if n2 > 0.0 {
            let f = constants.coriolis(latitudes[j]).abs();
            (0.31 * f / n2.sqrt() * (u as f64).hypot(v as f64) / dz as f64) as f32
        } else {
            f32::NAN
        };
    });
    out
}

/// The maximum Eady growth rate on a projected grid, where each point has
/// its own latitude: `point_latitudes` holds the true latitude of every
/// point of a [lat, lon] slice, row by row (`ProjectedGrid::latitude`).
/// Same formula and failure as `eady_growth_rate`: sigma = 0.31 f |dV/dz|
/// / N (Lindzen and Farrell 1980), NaN where N^2 <= 0.
pub fn eady_growth_rate_at_points(
    constants: &Constants,
    point_latitudes: &[f64],
    static_stability: ArrayView3<f32>,
    thermal_u: ArrayView3<f32>,
    thermal_v: ArrayView3<f32>,
    thickness: ArrayView3<f32>,
) -> Array3<f32> {
    let nx = static_stability.dim().2;
    let mut out = Array3::<f32>::zeros(static_stability.dim());
    Zip::indexed(&mut out).and(static_stability).and(thermal_u).and(thermal_v).and(thickness).par_for_each(|(_, j, i), o, &n2, &u, &v, &dz| {
        let n2 = n2 as f64;
        *o = if n2 > 0.0 {
            let f = constants.coriolis(point_latitudes[j * nx + i]).abs();
            (0.31 * f / n2.sqrt() * (u as f64).hypot(v as f64) / dz as f64) as f32
        } else {
            f32::NAN
        };
    });
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::Array3;

    #[test]
    fn potential_temperature_at_reference_pressure_is_temperature() {
        assert_eq!(potential_temperature(280.0, 100000.0), 280.0);
        // 500 hPa, 250 K: theta = 250 * 2^0.2857 = 304.8 K (Poisson's equation,
        // worked by hand).
        assert!((potential_temperature(250.0, 50000.0) - 304.8).abs() < 0.1);
    }

    #[test]
    fn isothermal_layer_stability() {
        // An isothermal atmosphere has N^2 = g^2 / (cp T) (textbook result:
        // dtheta/dz = theta g/(cp T)). At 250 K: 9.80665^2/(1004.6*250) = 3.829e-4.
        let c = Constants::default();
        let t = Array3::from_elem((1, 1, 1), 250.0f32);
        let n2 = layer_static_stability(&c, t.view(), t.view(), t.view(), 85000.0, 70000.0);
        let expected = c.gravity * c.gravity / (crate::constants::DRY_AIR_SPECIFIC_HEAT * 250.0);
        assert!((n2[[0, 0, 0]] as f64 - expected).abs() < 0.01 * expected, "{}", n2[[0, 0, 0]]);
    }

    #[test]
    fn eady_rate_worked_value() {
        // 0.31 f/N dU/dz with f = 1.0313e-4 (45 N), N = 0.01 s-1, 20 m/s over
        // 5 km: 0.31 * 1.0313e-2 * 4e-3 = 1.279e-5 s-1, about 1.1 per day.
        let c = Constants::default();
        let one = |x: f32| Array3::from_elem((1, 1, 1), x);
        let sigma = eady_growth_rate(&c, &[45.0], one(1e-4).view(), one(20.0).view(), one(0.0).view(), one(5000.0).view());
        assert!((sigma[[0, 0, 0]] as f64 - 1.279e-5).abs() < 2e-8);
        let unstable = eady_growth_rate(&c, &[45.0], one(-1e-5).view(), one(20.0).view(), one(0.0).view(), one(5000.0).view());
        assert!(unstable[[0, 0, 0]].is_nan());
    }
}
