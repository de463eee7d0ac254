//! Hybrid sigma-pressure model levels: pressure on each level, geopotential
//! by hydrostatic integration, and interpolation to pressure levels.
//!
//! Pressure on level k (CF conventions, appendix D,
//! "atmosphere_hybrid_sigma_pressure_coordinate"):
//!   p(k) = a(k) p0 + b(k) ps   or   p(k) = ap(k) + b(k) ps.
//! Geopotential upward from the surface (hydrostatic balance with the ideal
//! gas law, field guide): dPhi = -Rd Tv d(ln p), integrated by the trapezoid
//! rule in ln p between levels; from the surface to the lowest level the
//! lowest level's Tv is used (no surface temperature is assumed). For an
//! isothermal column this is the exact hypsometric solution.
//! Interpolation to a pressure is linear in ln p between the two levels
//! that bracket it (field guide). A pressure below the lowest model level
//! (in particular below ground, p > ps) is NaN unless extrapolation with the
//! standard lapse rate is asked for: then, from the lowest level L,
//!   T(p) = T_L (p / p_L)^(Rd gamma / g0),
//!   Z(p) = Z_L + (T_L / gamma) (1 - (p / p_L)^(Rd gamma / g0)),
//! gamma = 6.5 K/km (U.S. Standard Atmosphere 1976, troposphere), and any
//! other quantity keeps its lowest-level value. A pressure above the top
//! level is always NaN.
//!
//! Layout: [time, level, y, x] for level data, [time, y, x] for surface
//! data; NaN is missing. Nothing here knows of files.

use ndarray::{Array4, ArrayView3, ArrayView4, Axis};
use rayon::prelude::*;

use super::vertical::virtual_temperature;
use crate::constants::Constants;

/// Standard-atmosphere tropospheric lapse rate, K per metre (U.S. Standard
/// Atmosphere 1976: 6.5 K/km from 0 to 11 km).
pub const STANDARD_LAPSE_RATE: f64 = 0.0065;

/// The hybrid coefficients of each level: p = a_pressure + b ps.
#[derive(Debug, Clone, PartialEq)]
pub struct HybridCoefficients {
    /// The pressure part of each level (Pa): ap, or a p0.
    pub a_pressure: Vec<f64>,
    /// The surface-pressure fraction of each level (dimensionless).
    pub b: Vec<f64>,
}

impl HybridCoefficients {
    /// From `ap` (Pa) and `b`. Fails when the lengths differ or a value is
    /// not finite.
    pub fn from_ap(ap: Vec<f64>, b: Vec<f64>) -> Result<Self, String> {
        if ap.len() != b.len() {
            return Err(format!("the hybrid coefficients have {} pressure terms (ap) but {} surface terms (b)", ap.len(), b.len()));
        }
        if ap.iter().chain(&b).any(|v| !v.is_finite()) {
            return Err("a hybrid coefficient is missing or not finite".into());
        }
        Ok(Self { a_pressure: ap, b })
    }

    /// From dimensionless `a`, `b` and the reference pressure `p0` (Pa).
    pub fn from_a_and_p0(a: Vec<f64>, b: Vec<f64>, p0: f64) -> Result<Self, String> {
        if !(p0.is_finite() && p0 > 0.0) {
            return Err(format!("the reference pressure p0 = {p0} is not a positive pressure"));
        }
        if a.len() != b.len() {
            return Err(format!("the hybrid coefficients have {} terms a but {} terms b", a.len(), b.len()));
        }
        Self::from_ap(a.iter().map(|v| v * p0).collect(), b)
    }

    pub fn len(&self) -> usize {
        self.b.len()
    }

    pub fn is_empty(&self) -> bool {
        self.b.is_empty()
    }

    /// Fails unless there is one coefficient pair per level.
    pub fn check_level_count(&self, levels: usize) -> Result<(), String> {
        if self.len() != levels {
            return Err(format!("the hybrid coefficients describe {} levels but the data have {levels} model levels", self.len()));
        }
        Ok(())
    }

    /// Pressure (Pa) of level k over a surface pressure (Pa).
    #[inline]
    pub fn pressure(&self, k: usize, surface_pressure: f64) -> f64 {
        self.a_pressure[k] + self.b[k] * surface_pressure
    }

    /// Pressure on every level, [time, level, y, x], from surface pressure
    /// [time, y, x]. NaN where the surface pressure is missing.
    pub fn level_pressure(&self, surface_pressure: ArrayView3<f32>) -> Array4<f32> {
        let (nt, ny, nx) = surface_pressure.dim();
        Array4::from_shape_fn((nt, self.len(), ny, nx), |(t, k, j, i)| self.pressure(k, surface_pressure[[t, j, i]] as f64) as f32)
    }
}

/// What to do with pressures below the lowest model level.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum BelowLowestLevel {
    /// NaN (the default: never extrapolated silently).
    Missing,
    /// Extrapolated with the standard lapse rate (see the module comment).
    StandardLapseRate,
}

impl BelowLowestLevel {
    /// The metadata note for results made with this choice.
    pub fn note(self) -> &'static str {
        match self {
            BelowLowestLevel::Missing => "pressures below the lowest model level (and below ground) are missing",
            BelowLowestLevel::StandardLapseRate => {
                "pressures below the lowest model level extrapolated with the standard lapse rate 6.5 K/km (U.S. Standard Atmosphere 1976)"
            }
        }
    }
}

/// How a quantity continues below the lowest level when extrapolating.
#[derive(Debug, Clone, Copy)]
pub enum Quantity<'a> {
    /// Temperature (K): T_L (p/p_L)^(Rd gamma/g0).
    Temperature,
    /// Geopotential height (m), with the temperature (K) on the same levels.
    Height { temperature: ArrayView4<'a, f32> },
    /// Geopotential (m2 s-2), with the temperature (K) on the same levels.
    Geopotential { temperature: ArrayView4<'a, f32> },
    /// Anything else: the lowest level's value.
    Other,
}

/// Interpolates `data` on model levels, with `pressure` (Pa) on the same
/// levels, to the `targets` pressures (Pa), linearly in ln p:
/// [time, level, y, x] -> [time, target, y, x]. Levels may come in either
/// order. NaN where a bracketing value is missing, above the top level, and
/// below the lowest level unless `below` asks for extrapolation.
pub fn to_pressure_levels(
    data: ArrayView4<f32>,
    pressure: ArrayView4<f32>,
    targets: &[f64],
    below: BelowLowestLevel,
    quantity: Quantity,
    constants: &Constants,
) -> Result<Array4<f32>, String> {
    if data.dim() != pressure.dim() {
        return Err(format!("the data {:?} and the level pressures {:?} differ in shape", data.dim(), pressure.dim()));
    }
    let temperature = match quantity {
        Quantity::Height { temperature } | Quantity::Geopotential { temperature } => {
            if temperature.dim() != data.dim() {
                return Err(format!("the temperature {:?} and the data {:?} differ in shape", temperature.dim(), data.dim()));
            }
            Some(temperature)
        }
        _ => None,
    };
    let (nt, nk, ny, nx) = data.dim();
    let exponent = constants.dry_air_gas_constant * STANDARD_LAPSE_RATE / constants.gravity;
    let mut out = Array4::<f32>::from_elem((nt, targets.len(), ny, nx), f32::NAN);
    // One task per (time, row): each writes its own row of every target.
    let mut rows: Vec<(usize, usize, Vec<f32>)> = (0..nt).flat_map(|t| (0..ny).map(move |j| (t, j, vec![f32::NAN; targets.len() * nx]))).collect();
    rows.par_iter_mut().for_each(|(t, j, row)| {
        let mut column: Vec<(f64, f64, f64)> = Vec::with_capacity(nk);
        for i in 0..nx {
            column.clear();
            for k in 0..nk {
                let p = pressure[[*t, k, *j, i]] as f64;
                let temp = temperature.map_or(f64::NAN, |tt| tt[[*t, k, *j, i]] as f64);
                column.push((p, data[[*t, k, *j, i]] as f64, temp));
            }
            if column.iter().any(|c| !(c.0 > 0.0)) {
                continue; // surface pressure missing: the column stays NaN
            }
            // Ascending pressure: top first.
            column.sort_by(|a, b| a.0.total_cmp(&b.0));
            let (top, lowest) = (column[0], column[nk - 1]);
            for (n, &target) in targets.iter().enumerate() {
                let value = if target < top.0 {
                    f64::NAN
                } else if target > lowest.0 {
                    match below {
                        BelowLowestLevel::Missing => f64::NAN,
                        BelowLowestLevel::StandardLapseRate => {
                            let ratio = (target / lowest.0).powf(exponent);
                            match quantity {
                                Quantity::Temperature => lowest.1 * ratio,
                                Quantity::Height { .. } => lowest.1 + lowest.2 / STANDARD_LAPSE_RATE * (1.0 - ratio),
                                Quantity::Geopotential { .. } => lowest.1 + constants.gravity * lowest.2 / STANDARD_LAPSE_RATE * (1.0 - ratio),
                                Quantity::Other => lowest.1,
                            }
                        }
                    }
                } else {
                    // First level at or below the target (pressure >= target).
                    let upper = column.partition_point(|c| c.0 < target).min(nk - 1);
                    let (lo, hi) = (column[upper.saturating_sub(1)], column[upper]);
                    if hi.0 == target || lo.0 == hi.0 {
                        hi.1
                    } else {
                        let w = (target.ln() - lo.0.ln()) / (hi.0.ln() - lo.0.ln());
                        lo.1 + w * (hi.1 - lo.1)
                    }
                };
                row[n * nx + i] = value as f32;
            }
        }
    });
    for (t, j, row) in rows {
        for n in 0..targets.len() {
            out.index_axis_mut(Axis(0), t).index_axis_mut(Axis(0), n).row_mut(j).assign(&ndarray::ArrayView1::from(&row[n * nx..(n + 1) * nx]));
        }
    }
    Ok(out)
}

/// Geopotential (m2 s-2) on model levels by the hydrostatic integral upward
/// from the surface geopotential [time or 1, y, x] (m2 s-2), with virtual
/// temperature from `specific_humidity` when given (field guide:
/// dPhi = -Rd Tv d ln p). `pressure` and `temperature` are [time, level, y, x]
/// on the same levels, either order. NaN where any input of the column
/// below a level is missing. A surface field with one time serves all times.
pub fn geopotential_on_levels(
    surface_geopotential: ArrayView3<f32>,
    surface_pressure: ArrayView3<f32>,
    pressure: ArrayView4<f32>,
    temperature: ArrayView4<f32>,
    specific_humidity: Option<ArrayView4<f32>>,
    constants: &Constants,
) -> Result<Array4<f32>, String> {
    let (nt, nk, ny, nx) = temperature.dim();
    if pressure.dim() != temperature.dim() || specific_humidity.is_some_and(|q| q.dim() != temperature.dim()) {
        return Err("the level pressure, temperature and humidity differ in shape".into());
    }
    let surface_ok = |a: &ArrayView3<f32>| (a.dim().0 == nt || a.dim().0 == 1) && a.dim().1 == ny && a.dim().2 == nx;
    if !surface_ok(&surface_geopotential) || !surface_ok(&surface_pressure) {
        return Err(format!(
            "the surface fields {:?} and {:?} do not match the levels' grid and times ({nt}, {ny}, {nx})",
            surface_geopotential.dim(),
            surface_pressure.dim()
        ));
    }
    let rd = constants.dry_air_gas_constant;
    let mut out = Array4::<f32>::from_elem((nt, nk, ny, nx), f32::NAN);
    let mut rows: Vec<(usize, usize, Vec<f32>)> = (0..nt).flat_map(|t| (0..ny).map(move |j| (t, j, vec![f32::NAN; nk * nx]))).collect();
    rows.par_iter_mut().for_each(|(t, j, row)| {
        let ts = |a: &ArrayView3<f32>| if a.dim().0 == 1 { 0 } else { *t };
        let mut order: Vec<usize> = (0..nk).collect();
        for i in 0..nx {
            let tv = |k: usize| {
                let temp = temperature[[*t, k, *j, i]] as f64;
                match specific_humidity {
                    Some(q) => virtual_temperature(temp, q[[*t, k, *j, i]] as f64),
                    None => temp,
                }
            };
            let p = |k: usize| pressure[[*t, k, *j, i]] as f64;
            // Lowest level first (largest pressure).
            order.sort_by(|&a, &b| p(b).total_cmp(&p(a)));
            let mut phi = surface_geopotential[[ts(&surface_geopotential), *j, i]] as f64;
            let mut below_p = surface_pressure[[ts(&surface_pressure), *j, i]] as f64;
            let mut below_tv = f64::NAN;
            for (n, &k) in order.iter().enumerate() {
                let (pk, tk) = (p(k), tv(k));
                // Surface to the lowest level: the lowest level's Tv alone.
                let mean = if n == 0 { tk } else { 0.5 * (below_tv + tk) };
                phi += rd * mean * (below_p / pk).ln();
                row[k * nx + i] = phi as f32;
                below_p = pk;
                below_tv = tk;
            }
        }
    });
    for (t, j, row) in rows {
        for k in 0..nk {
            out.index_axis_mut(Axis(0), t).index_axis_mut(Axis(0), k).row_mut(j).assign(&ndarray::ArrayView1::from(&row[k * nx..(k + 1) * nx]));
        }
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::{Array3, Array4};

    #[test]
    fn level_pressure_equals_a_hand_computation() {
        // CF appendix D: p = a p0 + b ps. By hand, with p0 = 1000 hPa and
        // ps = 980 hPa: level (a 0.2, b 0) -> 200 hPa; (a 0.1, b 0.5) ->
        // 100 + 490 = 590 hPa; (a 0, b 1) -> 980 hPa.
        let c = HybridCoefficients::from_a_and_p0(vec![0.2, 0.1, 0.0], vec![0.0, 0.5, 1.0], 100_000.0).unwrap();
        let ps = Array3::from_elem((1, 1, 1), 98_000.0f32);
        let p = c.level_pressure(ps.view());
        assert_eq!(p.iter().copied().collect::<Vec<_>>(), vec![20_000.0, 59_000.0, 98_000.0]);
        // ap form: ap = 5000 Pa, b = 0.9, ps = 1010 hPa -> 5000 + 90900 = 95900 Pa.
        let c = HybridCoefficients::from_ap(vec![5000.0], vec![0.9]).unwrap();
        assert_eq!(c.pressure(0, 101_000.0), 95_900.0);
    }

    #[test]
    fn mismatched_coefficients_are_refused() {
        assert!(HybridCoefficients::from_ap(vec![1.0, 2.0], vec![0.5]).unwrap_err().contains("2 pressure terms"));
        let c = HybridCoefficients::from_ap(vec![1.0, 2.0], vec![0.5, 0.6]).unwrap();
        assert!(c.check_level_count(3).unwrap_err().contains("3 model levels"));
        assert!(HybridCoefficients::from_a_and_p0(vec![0.1], vec![0.5], f64::NAN).is_err());
    }

    /// Hybrid levels, top first, a mountain in column 1 (ps 700 hPa).
    fn column_case() -> (HybridCoefficients, Array3<f32>, Array3<f32>) {
        let n = 30;
        let a: Vec<f64> = (0..n).map(|k| 5000.0 * (1.0 - k as f64 / (n - 1) as f64)).collect();
        let b: Vec<f64> = (0..n).map(|k| (k as f64 / (n - 1) as f64).powf(1.5) * 0.997).collect();
        let coefficients = HybridCoefficients::from_ap(a, b).unwrap();
        let ps = Array3::from_shape_vec((1, 1, 2), vec![101_000.0f32, 70_000.0]).unwrap();
        let zs = Array3::from_shape_vec((1, 1, 2), vec![0.0f32, 9.80665 * 3000.0]).unwrap();
        (coefficients, ps, zs)
    }

    #[test]
    fn isothermal_column_gives_the_hypsometric_heights() {
        // Exact hypsometric solution for T = T0 (field guide):
        // Z(p) = Zs + (Rd T0 / g0) ln(ps / p).
        let constants = Constants::default();
        let t0 = 250.0;
        let (coefficients, ps, zs) = column_case();
        let pressure = coefficients.level_pressure(ps.view());
        let temperature = Array4::from_elem(pressure.dim(), t0 as f32);
        let phi = geopotential_on_levels(zs.view(), ps.view(), pressure.view(), temperature.view(), None, &constants).unwrap();
        let h = constants.dry_air_gas_constant * t0 / constants.gravity;
        for i in 0..2 {
            for k in 0..coefficients.len() {
                let p = pressure[[0, k, 0, i]] as f64;
                let expected = zs[[0, 0, i]] as f64 / constants.gravity + h * (ps[[0, 0, i]] as f64 / p).ln();
                assert!((phi[[0, k, 0, i]] as f64 / constants.gravity - expected).abs() < 0.05, "column {i} level {k}");
            }
        }
        // Interpolated to pressure levels; 850 hPa is below ground at the
        // mountain (ps = 700 hPa) and must be missing there.
        let targets = [85_000.0, 50_000.0, 20_000.0];
        let heights = phi.mapv(|v| v / constants.gravity as f32);
        let z = to_pressure_levels(heights.view(), pressure.view(), &targets, BelowLowestLevel::Missing, Quantity::Other, &constants).unwrap();
        for (n, &p) in targets.iter().enumerate() {
            let expected = h * (101_000.0 / p).ln();
            assert!((z[[0, n, 0, 0]] as f64 - expected).abs() < 0.05, "{p} Pa: {} vs {expected}", z[[0, n, 0, 0]]);
        }
        assert!(z[[0, 0, 0, 1]].is_nan(), "850 hPa under a 700 hPa surface must be missing");
        let expected = 3000.0 + h * (70_000.0f64 / 50_000.0).ln();
        assert!((z[[0, 1, 0, 1]] as f64 - expected).abs() < 0.05);
    }

    #[test]
    fn linear_in_log_pressure_is_reproduced_and_the_lapse_rate_option_extrapolates() {
        let constants = Constants::default();
        let (coefficients, ps, zs) = column_case();
        let pressure = coefficients.level_pressure(ps.view());
        // T = 200 + 10 ln(p / 100 hPa): linear in ln p, so interpolation is exact.
        let temperature = pressure.mapv(|p| (200.0 + 10.0 * (p as f64 / 10_000.0).ln()) as f32);
        let targets = [85_000.0, 30_000.0, 100.0];
        let t = to_pressure_levels(temperature.view(), pressure.view(), &targets, BelowLowestLevel::Missing, Quantity::Temperature, &constants).unwrap();
        assert!((t[[0, 1, 0, 0]] as f64 - (200.0 + 10.0 * 3f64.ln())).abs() < 1e-3);
        assert!(t[[0, 2, 0, 0]].is_nan(), "above the top level");
        assert!(t[[0, 0, 0, 1]].is_nan(), "below ground");
        // With the option, below ground follows T_L (p/p_L)^(Rd gamma/g0).
        let t = to_pressure_levels(temperature.view(), pressure.view(), &targets, BelowLowestLevel::StandardLapseRate, Quantity::Temperature, &constants).unwrap();
        let lowest_p = pressure[[0, coefficients.len() - 1, 0, 1]] as f64;
        let lowest_t = temperature[[0, coefficients.len() - 1, 0, 1]] as f64;
        let exponent = constants.dry_air_gas_constant * STANDARD_LAPSE_RATE / constants.gravity;
        let expected = lowest_t * (85_000.0 / lowest_p).powf(exponent);
        assert!((t[[0, 0, 0, 1]] as f64 - expected).abs() < 1e-3);
        assert!(expected > lowest_t, "warmer below the surface");
        let _ = zs;
    }
}
