//! Text of coordinates as every part of Baroc writes them (tables, titles,
//! captions, the language's own descriptions): two decimals and a
//! hemisphere letter.

/// A latitude such as `52.50°N` or `10.00°S`.
pub fn format_latitude(lat: f64) -> String {
    format!("{:.2}°{}", lat.abs(), if lat >= 0.0 { "N" } else { "S" })
}

/// A longitude such as `20.00°W`, wrapped into -180..180 first.
pub fn format_longitude(lon: f64) -> String {
    let lon = ((lon + 180.0).rem_euclid(360.0)) - 180.0;
    format!("{:.2}°{}", lon.abs(), if lon >= 0.0 { "E" } else { "W" })
}

/// A point as `latitude longitude`.
pub fn format_place(latitude: f64, longitude: f64) -> String {
    format!("{} {}", format_latitude(latitude), format_longitude(longitude))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn hemispheres_and_wrapping() {
        assert_eq!(format_latitude(52.5), "52.50°N");
        assert_eq!(format_latitude(-10.0), "10.00°S");
        assert_eq!(format_longitude(-20.0), "20.00°W");
        // 340 east is 20 west.
        assert_eq!(format_longitude(340.0), "20.00°W");
        assert_eq!(format_place(45.0, 5.0), "45.00°N 5.00°E");
    }
}
