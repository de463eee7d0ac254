//! Physical constants, one place, each with its source.

/// Standard gravity g0 (m s-2). CGPM 1901; used by WMO and the U.S. Standard
/// Atmosphere 1976.
pub const STANDARD_GRAVITY: f64 = 9.80665;
/// Universal gas constant R* (J mol-1 K-1), the U.S. Standard Atmosphere 1976's
/// own value (it differs from CODATA's 8.314462...).
pub const UNIVERSAL_GAS_CONSTANT: f64 = 8.31432;
/// Mean molar mass of dry air M0 (kg mol-1). U.S. Standard Atmosphere 1976.
pub const DRY_AIR_MOLAR_MASS: f64 = 0.0289644;
/// Gas constant for dry air Rd (J kg-1 K-1) = R*/M0 = 287.053.
pub const DRY_AIR_GAS_CONSTANT: f64 = UNIVERSAL_GAS_CONSTANT / DRY_AIR_MOLAR_MASS;
/// Specific heat of dry air at constant pressure cp (J kg-1 K-1). Common
/// practice; textbooks use 1004 to 1005.
pub const DRY_AIR_SPECIFIC_HEAT: f64 = 1004.6;
/// Poisson exponent kappa = Rd / cp (about 0.2857).
pub const KAPPA: f64 = DRY_AIR_GAS_CONSTANT / DRY_AIR_SPECIFIC_HEAT;
/// Earth's angular velocity Omega (rad s-1). WGS 84 / IERS nominal value.
pub const EARTH_ROTATION_RATE: f64 = 7.292115e-5;
/// Earth's mean radius a (m). IUGG mean radius 6371.0088 km, rounded.
pub const EARTH_RADIUS: f64 = 6_371_000.0;
/// Ratio of the gas constants of dry air and water vapour, epsilon = Rd/Rv.
/// Common practice.
pub const EPSILON: f64 = 0.622;
/// Reference pressure for potential temperature (Pa): 1000 hPa, by convention.
pub const REFERENCE_PRESSURE: f64 = 100_000.0;

/// The constants a recipe may override (people do override the radius and Rd,
/// for idealised or other-planet runs).
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Constants {
    pub earth_radius: f64,
    pub dry_air_gas_constant: f64,
    pub gravity: f64,
    pub rotation_rate: f64,
}

impl Default for Constants {
    fn default() -> Self {
        Self {
            earth_radius: EARTH_RADIUS,
            dry_air_gas_constant: DRY_AIR_GAS_CONSTANT,
            gravity: STANDARD_GRAVITY,
            rotation_rate: EARTH_ROTATION_RATE,
        }
    }
}

impl Constants {
    /// Coriolis parameter f = 2 Omega sin(lat), latitude in degrees.
    pub fn coriolis(&self, latitude_degrees: f64) -> f64 {
        2.0 * self.rotation_rate * latitude_degrees.to_radians().sin()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn dry_air_gas_constant_matches_field_guide() {
        // R*/M0 = 287.053 (U.S. Standard Atmosphere 1976 constants).
        assert!((DRY_AIR_GAS_CONSTANT - 287.053).abs() < 1e-3);
    }

    #[test]
    fn coriolis_at_45_north() {
        // f = 2 Omega sin 45 = 1.0313e-4 s-1 (field guide worked value).
        let f = Constants::default().coriolis(45.0);
        assert!((f - 1.0313e-4).abs() < 1e-7, "{f}");
    }
}
