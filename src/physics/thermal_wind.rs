//! Thermal wind, shear, ageostrophic wind, turning of the wind with height.
//!
//! Thermal wind of a layer (field guide, "Formulas"):
//!   V_T = V_g(p_t) - V_g(p_b) = (g0/f) k x grad(Z_t - Z_b)
//!       = (Rd/f) ln(p_b/p_t) k x grad(Tbar)
//! so both routes are `balanced_wind` with a different scale:
//!   thickness route        scale g0 applied to the thickness dz (m),
//!   mean-temperature route scale Rd ln(p_b/p_t) applied to Tbar (K).
//! Differential form: dV_g/d(ln p) = -(Rd/f) k x grad_p T (scale -Rd on T).

use ndarray::{Array3, ArrayView3, Zip};

use super::geostrophic::balanced_wind;
use crate::constants::Constants;
use crate::grid::Grid;

/// Thermal wind (u_T, v_T) of a layer from its thickness (m) on
/// [slice, lat, lon]. Masking as in `balanced_wind`.
pub fn thermal_wind_from_thickness(grid: &Grid, constants: &Constants, thickness: ArrayView3<f32>, equator_band: f64) -> (Array3<f32>, Array3<f32>) {
    balanced_wind(grid, constants, thickness, constants.gravity, equator_band)
}

/// Thermal wind of the layer bottom..top (Pa) from its layer-mean
/// temperature (K).
pub fn thermal_wind_from_mean_temperature(
    grid: &Grid,
    constants: &Constants,
    mean_temperature: ArrayView3<f32>,
    bottom: f64,
    top: f64,
    equator_band: f64,
) -> (Array3<f32>, Array3<f32>) {
    let scale = constants.dry_air_gas_constant * (bottom / top).ln().abs();
    balanced_wind(grid, constants, mean_temperature, scale, equator_band)
}

/// Per-level geostrophic shear dV_g/d(ln p) (m s-1 per unit ln p) from
/// temperature (K) on each slice: -(Rd/f) k x grad T. Negative values of the
/// eastward component mean westerlies strengthening upward (ln p decreases
/// upward).
pub fn geostrophic_shear_per_log_pressure(grid: &Grid, constants: &Constants, temperature: ArrayView3<f32>, equator_band: f64) -> (Array3<f32>, Array3<f32>) {
    balanced_wind(grid, constants, temperature, -constants.dry_air_gas_constant, equator_band)
}

/// Element-wise a - b (vector differences: shear, ageostrophic wind).
pub fn difference(a: ArrayView3<f32>, b: ArrayView3<f32>) -> Array3<f32> {
    let mut out = a.to_owned();
    Zip::from(&mut out).and(b).par_for_each(|x, &y| *x -= y);
    out
}

/// Signed turning angle (degrees) from the wind at the bottom of a layer to
/// the wind at its top. Positive = veering (clockwise with height), negative =
/// backing (anticlockwise). Veering and backing are defined by the sense of
/// rotation alone, in both hemispheres (fact of the trade); what they imply
/// for advection depends on the hemisphere (see `advection`). NaN where
/// either wind is missing or calm.
pub fn turning_angle(u_bottom: f32, v_bottom: f32, u_top: f32, v_top: f32) -> f32 {
    let (ub, vb, ut, vt) = (u_bottom as f64, v_bottom as f64, u_top as f64, v_top as f64);
    let cross = ub * vt - vb * ut; // k . (V_b x V_t): positive = anticlockwise
    let dot = ub * ut + vb * vt;
    if (ub == 0.0 && vb == 0.0) || (ut == 0.0 && vt == 0.0) || cross.is_nan() {
        return f32::NAN;
    }
    (-angle_of(cross, dot).to_degrees()) as f32
}

/// tan(pi/8): above it the argument of arctan is moved next to zero.
const TAN_PI_8: f64 = 0.414_213_562_373_095_03;

/// atan2(y, x) in radians, for the turning angle's output in float32
/// degrees: within 2e-12 rad of the correctly rounded value (the f32
/// spacing of a degree is 6e5 times coarser), and about four times quicker
/// than the system's `atan2`, which was a tenth of a budget run.
///
/// The method (textbook range reduction, e.g. Cody & Waite, Software
/// Manual for the Elementary Functions, 1980, ch. 11): the quotient of
/// the smaller by the larger magnitude, a in [0, 1]; above tan(pi/8),
/// arctan a = pi/4 + arctan((a - 1)/(a + 1)), which brings it to
/// |t| <= tan(pi/8); there the Taylor series of arctan to t^27 (the first
/// term left out is below tan(pi/8)^29/29 < 2e-13); then the octant and
/// quadrant back by symmetry. NaN, zeros, infinities (where the sign
/// conventions of IEEE 754 atan2 matter) and magnitudes above 1e300 go to
/// the system's `atan2` itself.
pub fn angle_of(y: f64, x: f64) -> f64 {
    let (ax, ay) = (x.abs(), y.abs());
    // (Magnitudes near the largest double would overflow low + high.)
    if !(ax < 1e300 && ay < 1e300) || (ax == 0.0 && ay == 0.0) {
        return y.atan2(x);
    }
    let steep = ay > ax;
    let (low, high) = if steep { (ax, ay) } else { (ay, ax) };
    // (a - 1)/(a + 1) with a = low/high is (low - high)/(low + high): one
    // division on either branch.
    let (t, base) = if low > TAN_PI_8 * high { ((low - high) / (low + high), std::f64::consts::FRAC_PI_4) } else { (low / high, 0.0) };
    let t2 = t * t;
    // arctan t = t (1 - t^2/3 + t^4/5 - ... - t^26/27), Horner in t^2.
    let mut series = -1.0 / 27.0;
    for n in (0..13).rev() {
        let term = 1.0 / (2 * n + 1) as f64;
        series = if n % 2 == 0 { term } else { -term } + t2 * series;
    }
    let mut r = base + t * series;
    if steep {
        r = std::f64::consts::FRAC_PI_2 - r;
    }
    if x < 0.0 {
        r = std::f64::consts::PI - r;
    }
    if y.is_sign_negative() {
        -r
    } else {
        r
    }
}

/// Turning angle on whole arrays; see `turning_angle`.
pub fn turning(u_bottom: ArrayView3<f32>, v_bottom: ArrayView3<f32>, u_top: ArrayView3<f32>, v_top: ArrayView3<f32>) -> Array3<f32> {
    let mut out = Array3::<f32>::zeros(u_bottom.dim());
    Zip::from(&mut out)
        .and(u_bottom)
        .and(v_bottom)
        .and(u_top)
        .and(v_top)
        .par_for_each(|o, &ub, &vb, &ut, &vt| *o = turning_angle(ub, vb, ut, vt));
    out
}

/// Below this speed (m s-1) a turning angle is not reported by default: the
/// direction of a wind of a few m s-1 is within the noise of an analysis,
/// and so is the angle between two such winds. Our choice, in line with
/// common practice of plotting light winds without a direction (about
/// 5 kt); no single source.
pub const DEFAULT_WEAK_WIND: f64 = 2.5;

/// Whether the turning across a layer is too weak to be defined: either wind
/// or the shear between them (the thermal wind for geostrophic winds) is
/// slower than `threshold` (m s-1), or any component is missing.
pub fn turning_is_weak(u_bottom: f32, v_bottom: f32, u_top: f32, v_top: f32, threshold: f64) -> bool {
    let (ub, vb, ut, vt) = (u_bottom as f64, v_bottom as f64, u_top as f64, v_top as f64);
    // |V| >= threshold compared as |V|^2 >= threshold^2: the components are
    // f32, so their squares are exact in f64 and the sum is rounded once
    // (no overflow is possible), and this avoids three `hypot` calls per
    // point, which were a tenth of a budget run's arithmetic. A threshold
    // of zero or below passes every wind that is not missing, as before.
    let squared = if threshold > 0.0 { threshold * threshold } else if threshold.is_nan() { f64::NAN } else { 0.0 };
    let slow = |u: f64, v: f64| !(u * u + v * v >= squared);
    slow(ub, vb) || slow(ut, vt) || slow(ut - ub, vt - vb)
}

/// Turning angle on whole arrays, NaN where `turning_is_weak` says the
/// angle is not defined (see `turning_angle` for the sign).
pub fn turning_where_defined(
    u_bottom: ArrayView3<f32>,
    v_bottom: ArrayView3<f32>,
    u_top: ArrayView3<f32>,
    v_top: ArrayView3<f32>,
    threshold: f64,
) -> Array3<f32> {
    let mut out = Array3::<f32>::zeros(u_bottom.dim());
    Zip::from(&mut out).and(u_bottom).and(v_bottom).and(u_top).and(v_top).par_for_each(|o, &ub, &vb, &ut, &vt| {
        *o = if turning_is_weak(ub, vb, ut, vt, threshold) { f32::NAN } else { turning_angle(ub, vb, ut, vt) }
    });
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::constants::DRY_AIR_GAS_CONSTANT as RD;

    #[test]
    fn worked_value_1_k_per_100_km_at_45_north() {
        // Field guide worked value (derived): at 45 N (f ~ 1.0313e-4 s-1), a
        // layer-mean temperature falling 1 K per 100 km poleward over 1000-500
        // hPa gives u_T = (Rd/f) ln 2 * 1e-5 = 19.29 m/s westerly.
        let c = Constants::default();
        let lats: Vec<f64> = (0..21).map(|j| 44.0 + 0.1 * j as f64).collect();
        let grid = Grid::new(lats.clone(), (0..7).map(|i| i as f64 * 0.1).collect());
        let per_radian = -1.0 / 1.0e5 * c.earth_radius;
        let tbar = Array3::from_shape_fn((1, 21, 7), |(_, j, _)| (260.0 + per_radian * (lats[j] - 45.0).to_radians()) as f32);
        let (u, v) = thermal_wind_from_mean_temperature(&grid, &c, tbar.view(), 100000.0, 50000.0, 5.0);
        assert!((u[[0, 10, 3]] - 19.3).abs() < 0.05, "u_T = {}", u[[0, 10, 3]]);
        assert!(v[[0, 10, 3]].abs() < 1e-3);
        // Same case through the thickness route: dz = (Rd/g0) ln2 Tbar.
        let dz = tbar.mapv(|t| (RD / c.gravity * 2f64.ln() * t as f64) as f32);
        let (u2, _) = thermal_wind_from_thickness(&grid, &c, dz.view(), 5.0);
        assert!((u2[[0, 10, 3]] - u[[0, 10, 3]]).abs() < 0.01);
    }

    #[test]
    fn veering_and_backing_signs() {
        // South-westerly below (wind from SW, blowing toward NE: u>0, v>0) and
        // westerly above: the wind turns clockwise with height, i.e. veers.
        assert!((turning_angle(1.0, 1.0, 1.0, 0.0) - 45.0).abs() < 1e-4);
        // Westerly below, south-westerly above: anticlockwise, backing.
        assert!((turning_angle(1.0, 0.0, 1.0, 1.0) + 45.0).abs() < 1e-4);
        assert!(turning_angle(0.0, 0.0, 1.0, 0.0).is_nan());
    }

    #[test]
    fn angle_of_is_atan2_to_two_picoradians() {
        // Against the system's atan2 (IEEE 754 atan2, glibc: correctly
        // rounded in practice) over all octants, ratios from 1e-12 to 1e12,
        // the reduction's seam at tan(pi/8) and 1, signed zeros, infinities
        // and NaN (which must agree exactly, sign of zero included).
        let mut worst = 0.0f64;
        let mut state = 0x2545_f491_4f6c_dd1du64;
        let mut next = || {
            state ^= state << 13;
            state ^= state >> 7;
            state ^= state << 17;
            (state >> 11) as f64 / (1u64 << 53) as f64
        };
        let mut pairs: Vec<(f64, f64)> = Vec::new();
        for _ in 0..200_000 {
            let magnitude = 10f64.powf(24.0 * next() - 12.0);
            let angle = std::f64::consts::TAU * next();
            pairs.push((magnitude * angle.sin(), angle.cos()));
        }
        for a in [TAN_PI_8, 1.0, 0.0, 1e-300, 1e300, 1.7e308] {
            for eps in [-1e-15, 0.0, 1e-15] {
                for (sy, sx) in [(1.0, 1.0), (1.0, -1.0), (-1.0, 1.0), (-1.0, -1.0)] {
                    pairs.push((sy * (a + eps).abs(), sx));
                    pairs.push((sy, sx * (a + eps).abs()));
                }
            }
        }
        for &(y, x) in &pairs {
            let difference = (angle_of(y, x) - y.atan2(x)).abs();
            worst = worst.max(difference);
        }
        assert!(worst < 2e-12, "largest difference {worst:e} rad");
        for (y, x) in [(0.0, 0.0), (-0.0, 0.0), (0.0, -0.0), (-0.0, -0.0), (0.0, 3.0), (-0.0, 3.0), (0.0, -3.0), (-0.0, -3.0), (2.0, 0.0), (2.0, -0.0), (-2.0, 0.0), (f64::INFINITY, 1.0), (1.0, f64::NEG_INFINITY), (f64::INFINITY, f64::INFINITY), (-1.0, f64::NEG_INFINITY)] {
            assert_eq!(angle_of(y, x).to_bits(), y.atan2(x).to_bits(), "atan2({y}, {x})");
        }
        assert!(angle_of(f64::NAN, 1.0).is_nan() && angle_of(1.0, f64::NAN).is_nan());
        // The turning angle (f32 degrees) moves by at most one f32 step.
        for &(y, x) in pairs.iter().step_by(7) {
            let ours = (-angle_of(y, x).to_degrees()) as f32;
            let system = (-y.atan2(x).to_degrees()) as f32;
            assert!((ours.to_bits() as i64 - system.to_bits() as i64).abs() <= 1, "{y} {x}: {ours} vs {system}");
        }
    }

    #[test]
    fn weak_winds_are_those_slower_than_the_threshold_by_hypot() {
        // The squared comparison against the definition |V| = hypot(u, v)
        // (IEEE 754 hypot, correctly rounded enough to be monotonic), on
        // f32 winds swept across the threshold at many angles, exact
        // thresholds and awkward ones, and missing or zero thresholds.
        let slower = |u: f64, v: f64, t: f64| !(u.hypot(v) >= t);
        let reference = |u: f32, v: f32, t: f64| slower(u as f64, v as f64, t);
        for threshold in [2.5, 0.1, 1.0 / 3.0, 7.77, 0.0, -1.0, f64::NAN] {
            for k in 0..2000 {
                let angle = k as f64 * 0.0123;
                let speed = threshold.abs() * (0.999 + 0.002 * (k % 97) as f64 / 97.0);
                let (u, v) = ((speed * angle.cos()) as f32, (speed * angle.sin()) as f32);
                for (u, v) in [(u, v), (f32::from_bits(u.to_bits() + 1), v), (u, f32::NAN)] {
                    // Top winds whose shear from (u, v) sweeps the threshold too.
                    let (ut, vt) = (u + u * 1.0001, v + v * 1.0001);
                    let ours = turning_is_weak(u, v, ut, vt, threshold);
                    let shear = slower(ut as f64 - u as f64, vt as f64 - v as f64, threshold);
                    let expected = reference(u, v, threshold) || reference(ut, vt, threshold) || shear;
                    assert_eq!(ours, expected, "u {u} v {v} threshold {threshold}");
                }
            }
        }
    }

    #[test]
    fn turning_is_undefined_where_either_wind_or_the_shear_is_weak() {
        // Analytic case: a westerly of 10 m s-1 at the bottom everywhere; at
        // the top the same speed turned 30 degrees clockwise (veering:
        // u = 10 cos 30, v = -10 sin 30) except
        // in a calm region (top wind 1 m s-1) and a region where the top
        // wind equals the bottom wind plus 1 m s-1 (weak shear).
        // Expected: 30 degrees outside, NaN in both regions (definition of
        // the angle between two vectors; threshold 2.5 m s-1).
        let n = 12;
        let ub = ndarray::Array3::<f32>::from_elem((1, n, n), 10.0);
        let vb = ndarray::Array3::<f32>::zeros((1, n, n));
        let mut ut = ndarray::Array3::<f32>::from_elem((1, n, n), 10.0 * 30f32.to_radians().cos());
        let mut vt = ndarray::Array3::<f32>::from_elem((1, n, n), -10.0 * 30f32.to_radians().sin());
        for j in 0..4 {
            for i in 0..4 {
                ut[[0, j, i]] = 1.0; // calm region at the top
                vt[[0, j, i]] = 0.0;
                ut[[0, j + 8, i + 8]] = 11.0; // weak shear: speeds up by 1 m s-1
                vt[[0, j + 8, i + 8]] = 0.0;
            }
        }
        let angle = turning_where_defined(ub.view(), vb.view(), ut.view(), vt.view(), DEFAULT_WEAK_WIND);
        for j in 0..n {
            for i in 0..n {
                let masked = (j < 4 && i < 4) || (j >= 8 && i >= 8);
                let a = angle[[0, j, i]];
                if masked {
                    assert!(a.is_nan(), "({j}, {i}) should be undefined, got {a}");
                } else {
                    assert!((a - 30.0).abs() < 1e-3, "({j}, {i}): {a}");
                }
            }
        }
        // Just above the threshold the angle is defined again.
        assert!(!turning_is_weak(2.6, 0.0, 0.0, 2.6, 2.5));
        assert!(turning_is_weak(2.4, 0.0, 0.0, 10.0, 2.5));
        assert!(turning_is_weak(10.0, 0.0, f32::NAN, 10.0, 2.5));
    }
}
