//! Wind as forecasters read it: the direction a wind blows from.

/// Meteorological wind direction (degrees the wind blows FROM, 0 = north,
/// 90 = east), the WMO convention (WMO Manual on Codes, WMO-No. 306, wind
/// direction in degrees true); NaN for calm or missing.
pub fn direction_from(u: f64, v: f64) -> f64 {
    if !(u.is_finite() && v.is_finite()) || (u == 0.0 && v == 0.0) {
        return f64::NAN;
    }
    ((-u).atan2(-v).to_degrees() + 360.0) % 360.0
}

#[cfg(test)]
mod tests {
    use super::direction_from;

    #[test]
    fn compass_points_follow_the_from_convention() {
        // A westerly blows from the west (270), a southerly from the south
        // (180): the WMO convention (WMO-No. 306).
        assert!((direction_from(10.0, 0.0) - 270.0).abs() < 1e-9);
        assert!((direction_from(0.0, 10.0) - 180.0).abs() < 1e-9);
        assert!((direction_from(-10.0, 0.0) - 90.0).abs() < 1e-9);
        assert!(direction_from(0.0, -10.0).abs() < 1e-9);
        assert!((direction_from(5.0, 5.0) - 225.0).abs() < 1e-9);
        assert!(direction_from(0.0, 0.0).is_nan());
        assert!(direction_from(f64::NAN, 1.0).is_nan());
    }
}
