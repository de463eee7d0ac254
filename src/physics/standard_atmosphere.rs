//! The U.S. Standard Atmosphere 1976 below 47 km geopotential altitude: the
//! reference profile for tests and for the demo case's base state.
//!
//! Layers by geopotential height H (field guide, "Check values"):
//! 0-11 km lapse 6.5 K/km from 288.15 K and 101325 Pa; 11-20 km isothermal
//! 216.65 K; 20-32 km +1.0 K/km; 32-47 km +2.8 K/km.
//! p = p_b (T_b / (T_b + L (H - H_b)))^(g0 M0 / (R* L)) for L != 0,
//! p = p_b exp(-g0 M0 (H - H_b) / (R* T_b)) for L = 0.

use crate::constants::{DRY_AIR_MOLAR_MASS as M0, STANDARD_GRAVITY as G0, UNIVERSAL_GAS_CONSTANT as R_STAR};

/// (base geopotential height m, lapse rate K/m) of each layer.
const LAYERS: [(f64, f64); 4] = [(0.0, -0.0065), (11_000.0, 0.0), (20_000.0, 0.001), (32_000.0, 0.0028)];
/// Top of the validity of this table (m).
pub const TOP: f64 = 47_000.0;

/// (base temperature K, base pressure Pa) of each layer, derived in order.
fn bases() -> [(f64, f64); 4] {
    let mut out = [(288.15, 101_325.0); 4];
    for k in 1..4 {
        let (h0, lapse) = LAYERS[k - 1];
        let (t0, p0) = out[k - 1];
        let h = LAYERS[k].0;
        out[k] = (t0 + lapse * (h - h0), pressure_in_layer(t0, p0, lapse, h - h0));
    }
    out
}

fn pressure_in_layer(t0: f64, p0: f64, lapse: f64, dh: f64) -> f64 {
    if lapse == 0.0 {
        p0 * (-G0 * M0 * dh / (R_STAR * t0)).exp()
    } else {
        p0 * (t0 / (t0 + lapse * dh)).powf(G0 * M0 / (R_STAR * lapse))
    }
}

/// Temperature (K) and pressure (Pa) at geopotential height `h` (m),
/// 0 <= h <= 47 km; None outside.
pub fn at_height(h: f64) -> Option<(f64, f64)> {
    if !(0.0..=TOP).contains(&h) {
        return None;
    }
    let b = bases();
    let k = (0..4).rev().find(|&k| h >= LAYERS[k].0)?;
    let (t0, p0) = b[k];
    let (h0, lapse) = LAYERS[k];
    Some((t0 + lapse * (h - h0), pressure_in_layer(t0, p0, lapse, h - h0)))
}

/// Geopotential height (m) of pressure `p` (Pa), found by bisection on
/// `at_height` (pressure falls monotonically with height). None outside the
/// table's range.
pub fn height_of_pressure(p: f64) -> Option<f64> {
    let (_, p_top) = at_height(TOP)?;
    if !(p_top..=101_325.0).contains(&p) {
        return None;
    }
    let (mut lo, mut hi) = (0.0, TOP);
    for _ in 0..100 {
        let mid = 0.5 * (lo + hi);
        if at_height(mid)?.1 > p {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    Some(0.5 * (lo + hi))
}

/// Temperature (K) at pressure `p` (Pa).
pub fn temperature_at_pressure(p: f64) -> Option<f64> {
    at_height(height_of_pressure(p)?).map(|(t, _)| t)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn table_values() {
        // U.S. Standard Atmosphere 1976 table values (field guide, from memory
        // and derivable from the formulas): 1000 m 89 874.6 Pa; 5000 m
        // 54 019.9 Pa and 255.65 K; 11 000 m 22 632.1 Pa.
        assert!((at_height(1000.0).unwrap().1 - 89_874.6).abs() < 1.0);
        let (t, p) = at_height(5000.0).unwrap();
        assert!((p - 54_019.9).abs() < 1.0 && (t - 255.65).abs() < 1e-9);
        assert!((at_height(11_000.0).unwrap().1 - 22_632.1).abs() < 1.0);
    }
}

#[cfg(test)]
mod hydrostatic_tests {
    use super::*;
    use crate::constants::{DRY_AIR_GAS_CONSTANT as RD, STANDARD_GRAVITY as G0};
    use crate::physics::vertical::{thickness_from_temperature, thickness_from_temperature_by, IntegrationRule};

    #[test]
    fn hydrostatic_integration_reproduces_standard_heights() {
        // U.S. Standard Atmosphere 1976 heights of pressure levels (field guide,
        // from memory): 850 ~ 1457 m, 700 ~ 3012 m, 500 ~ 5574 m, 300 ~ 9164 m,
        // 200 ~ 11 784 m, starting from 1000 hPa ~ 111 m. Integrating the
        // standard's temperature on the usual levels with Baroc's thickness
        // (trapezoid in ln p) must reproduce them to within a few metres.
        let levels = [100000.0, 92500.0, 85000.0, 70000.0, 60000.0, 50000.0, 40000.0, 30000.0, 25000.0, 20000.0];
        let t = ndarray::Array4::from_shape_fn((1, levels.len(), 1, 1), |(_, k, _, _)| temperature_at_pressure(levels[k]).unwrap() as f32);
        let base = height_of_pressure(100000.0).unwrap();
        assert!((base - 111.0).abs() < 1.0, "1000 hPa at {base} m");
        for (p, expected) in [(85000.0, 1457.0), (70000.0, 3012.0), (50000.0, 5574.0), (30000.0, 9164.0), (20000.0, 11784.0)] {
            let dz = thickness_from_temperature(&levels, t.view(), None, 100000.0, p, RD, G0).unwrap()[[0, 0, 0]] as f64;
            let height = base + dz;
            // The trapezoid assumes T linear in ln p; the tropopause kink at
            // 11 km (about 226 hPa) between the 250 and 200 hPa levels costs
            // about 9 m there. Below it the error is under 5 m.
            let tolerance = if p < 25000.0 { 10.0 } else { 5.0 };
            assert!((height - expected).abs() < tolerance, "{} hPa: {height:.1} m vs {expected} m", p / 100.0);
            // And against the standard's own exact height of that pressure.
            assert!((height - height_of_pressure(p).unwrap()).abs() < tolerance);
            // The higher-order rule (the default) does at least as well below
            // the tropopause; across the kink (a profile no polynomial in
            // ln p follows) it is held to the same 10 m as the trapezoid.
            let quadratic = base + thickness_from_temperature_by(&levels, t.view(), None, 100000.0, p, RD, G0, IntegrationRule::Quadratic).unwrap()[[0, 0, 0]] as f64;
            let exact = height_of_pressure(p).unwrap();
            assert!((quadratic - exact).abs() < tolerance, "{} hPa quadratic: {quadratic:.1} m vs {exact:.1} m", p / 100.0);
            if p >= 25000.0 {
                assert!((quadratic - exact).abs() <= (height - exact).abs() + 0.05, "{} hPa: quadratic {quadratic:.2} worse than trapezoid {height:.2} (exact {exact:.2})", p / 100.0);
            }
        }
    }
}
