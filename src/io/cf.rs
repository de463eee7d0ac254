//! CF conventions: recognising coordinates and reading attributes.
//!
//! Coordinates are found by `units` (degrees_north, degrees_east, Pa, hPa,
//! millibar), `standard_name` (latitude, longitude, air_pressure, time) and
//! `axis` (X, Y, Z, T); names alone are only the last resort (CF conventions
//! sections 4.1 to 4.4).

use netcdf::AttributeValue;

/// The role of a dimension of a variable.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Axis {
    Time,
    Pressure,
    Latitude,
    Longitude,
}

impl Axis {
    pub fn name(self) -> &'static str {
        match self {
            Axis::Time => "time",
            Axis::Pressure => "pressure",
            Axis::Latitude => "latitude",
            Axis::Longitude => "longitude",
        }
    }
}

/// Attributes of a variable as plain strings and numbers.
pub fn attribute_text(variable: &netcdf::Variable, name: &str) -> Option<String> {
    match variable.attribute_value(name)?.ok()? {
        AttributeValue::Str(s) => Some(s),
        AttributeValue::Strs(v) => Some(v.join(" ")),
        other => attribute_numbers(&other).map(|v| v.iter().map(|x| x.to_string()).collect::<Vec<_>>().join(" ")),
    }
}

/// Numeric attribute values as f64 (all CF numeric types).
pub fn attribute_numbers(value: &AttributeValue) -> Option<Vec<f64>> {
    Some(match value {
        AttributeValue::Uchar(x) => vec![*x as f64],
        AttributeValue::Uchars(x) => x.iter().map(|&v| v as f64).collect(),
        AttributeValue::Schar(x) => vec![*x as f64],
        AttributeValue::Schars(x) => x.iter().map(|&v| v as f64).collect(),
        AttributeValue::Ushort(x) => vec![*x as f64],
        AttributeValue::Ushorts(x) => x.iter().map(|&v| v as f64).collect(),
        AttributeValue::Short(x) => vec![*x as f64],
        AttributeValue::Shorts(x) => x.iter().map(|&v| v as f64).collect(),
        AttributeValue::Uint(x) => vec![*x as f64],
        AttributeValue::Uints(x) => x.iter().map(|&v| v as f64).collect(),
        AttributeValue::Int(x) => vec![*x as f64],
        AttributeValue::Ints(x) => x.iter().map(|&v| v as f64).collect(),
        AttributeValue::Ulonglong(x) => vec![*x as f64],
        AttributeValue::Ulonglongs(x) => x.iter().map(|&v| v as f64).collect(),
        AttributeValue::Longlong(x) => vec![*x as f64],
        AttributeValue::Longlongs(x) => x.iter().map(|&v| v as f64).collect(),
        AttributeValue::Float(x) => vec![*x as f64],
        AttributeValue::Floats(x) => x.iter().map(|&v| v as f64).collect(),
        AttributeValue::Double(x) => vec![*x],
        AttributeValue::Doubles(x) => x.clone(),
        AttributeValue::Str(_) | AttributeValue::Strs(_) => return None,
    })
}

pub fn attribute_number(variable: &netcdf::Variable, name: &str) -> Option<Vec<f64>> {
    attribute_numbers(&variable.attribute_value(name)?.ok()?)
}

/// All attributes of a variable as (name, text), for provenance.
pub fn all_attributes(variable: &netcdf::Variable) -> Vec<(String, String)> {
    variable
        .attributes()
        .filter_map(|a| {
            let name = a.name().to_string();
            let value = a.value().ok()?;
            let text = match value {
                AttributeValue::Str(s) => s,
                AttributeValue::Strs(v) => v.join(" "),
                other => attribute_numbers(&other)?.iter().map(|x| x.to_string()).collect::<Vec<_>>().join(" "),
            };
            Some((name, text))
        })
        .collect()
}

const LATITUDE_UNITS: [&str; 6] = ["degrees_north", "degree_north", "degree_n", "degrees_n", "degreen", "degreesn"];
const LONGITUDE_UNITS: [&str; 6] = ["degrees_east", "degree_east", "degree_e", "degrees_e", "degreee", "degreese"];

/// Factor that converts a pressure in `units` to Pa, if `units` is a
/// pressure unit (udunits spellings).
pub fn pressure_factor(units: &str) -> Option<f64> {
    let unit = crate::units::Unit::parse(units).ok()?;
    let pascal = crate::units::Unit::parse("Pa").ok()?;
    let (scale, offset) = unit.conversion_to(&pascal).ok()?;
    (offset == 0.0).then_some(scale)
}

/// Decides which axis a coordinate variable describes, in the order CF asks:
/// units, standard_name, axis, then the usual names.
pub fn classify_coordinate(variable: &netcdf::Variable) -> Option<Axis> {
    let units = attribute_text(variable, "units").unwrap_or_default();
    let lower_units = units.trim().to_ascii_lowercase();
    if LATITUDE_UNITS.contains(&lower_units.as_str()) {
        return Some(Axis::Latitude);
    }
    if LONGITUDE_UNITS.contains(&lower_units.as_str()) {
        return Some(Axis::Longitude);
    }
    if lower_units.contains(" since ") {
        return Some(Axis::Time);
    }
    let standard_name = attribute_text(variable, "standard_name").unwrap_or_default();
    match standard_name.as_str() {
        "latitude" => return Some(Axis::Latitude),
        "longitude" => return Some(Axis::Longitude),
        // Projected grids (io::projected): y and x play latitude and longitude.
        "projection_y_coordinate" | "grid_latitude" => return Some(Axis::Latitude),
        "projection_x_coordinate" | "grid_longitude" => return Some(Axis::Longitude),
        "air_pressure" => return Some(Axis::Pressure),
        "time" => return Some(Axis::Time),
        _ => {}
    }
    if !units.is_empty() && pressure_factor(&units).is_some() {
        return Some(Axis::Pressure);
    }
    match attribute_text(variable, "axis").unwrap_or_default().to_ascii_uppercase().as_str() {
        "X" => return Some(Axis::Longitude),
        "Y" => return Some(Axis::Latitude),
        "T" => return Some(Axis::Time),
        "Z" => return Some(Axis::Pressure),
        _ => {}
    }
    match variable.name().to_ascii_lowercase().as_str() {
        "lat" | "latitude" | "nav_lat" => Some(Axis::Latitude),
        "lon" | "longitude" | "nav_lon" => Some(Axis::Longitude),
        "time" | "t" | "valid_time" => Some(Axis::Time),
        "level" | "lev" | "plev" | "isobaric" | "pressure" | "pressure_level" | "isobaricinhpa" => Some(Axis::Pressure),
        _ => None,
    }
}
