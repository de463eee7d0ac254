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

/// What a vertical coordinate measures, recognised by its CF attributes
/// (CF conventions section 4.3 and appendix D): Baroc works on pressure
/// levels, and brings hybrid sigma-pressure model levels to pressure with
/// their coefficients (`io::model_levels`); every other vertical coordinate
/// is named in the trade's words when it is refused.
#[derive(Debug, Clone, PartialEq)]
pub enum VerticalKind {
    /// Pressure levels: standard_name air_pressure, or units of pressure.
    Pressure,
    /// `atmosphere_hybrid_sigma_pressure_coordinate` (appendix D): model
    /// levels, usable with their coefficients a (or ap), b, ps and p0.
    HybridSigmaPressure,
    /// Another dimensionless vertical coordinate of appendix D, by its
    /// standard_name (sigma, hybrid height, SLEVE, log-pressure, ocean).
    Parametric { standard_name: String },
    /// A height: above the ground, above sea level (altitude), or with no
    /// datum said.
    Height(HeightDatum),
    /// Geopotential height used as the vertical coordinate.
    GeopotentialHeight,
    /// A depth below the surface (positive down, a length).
    Depth,
    /// Potential temperature levels (isentropic levels).
    Isentropic,
    /// Model level numbers with no coefficients to make pressure of them.
    ModelLevelNumber,
    /// Recognised as vertical (axis Z or a positive attribute) but of no
    /// kind above; the units say what little is known.
    Other { units: String },
}

/// What a height is measured from.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum HeightDatum {
    Ground,
    SeaLevel,
    Unsaid,
}

/// The attributes of a coordinate that tell a vertical one, as plain text
/// (any reader can fill them).
#[derive(Debug, Clone, Default, PartialEq)]
pub struct VerticalAttributes {
    pub name: String,
    pub standard_name: Option<String>,
    pub units: Option<String>,
    pub positive: Option<String>,
    pub axis: Option<String>,
    pub formula_terms: Option<String>,
}

impl VerticalAttributes {
    /// The attributes of a NetCDF variable.
    pub fn of(variable: &netcdf::Variable) -> Self {
        VerticalAttributes {
            name: variable.name(),
            standard_name: attribute_text(variable, "standard_name"),
            units: attribute_text(variable, "units"),
            positive: attribute_text(variable, "positive"),
            axis: attribute_text(variable, "axis"),
            formula_terms: attribute_text(variable, "formula_terms"),
        }
    }
}

/// Dimensionless vertical coordinates of CF appendix D other than hybrid
/// sigma-pressure, with what each is in the trade's words.
const PARAMETRIC: [(&str, &str); 11] = [
    ("atmosphere_ln_pressure_coordinate", "log-pressure levels"),
    ("atmosphere_sigma_coordinate", "sigma levels"),
    ("atmosphere_hybrid_height_coordinate", "hybrid height model levels"),
    ("atmosphere_sleve_coordinate", "SLEVE (smooth level vertical) model levels"),
    ("ocean_sigma_coordinate", "ocean sigma levels"),
    ("ocean_s_coordinate", "ocean s-coordinate levels"),
    ("ocean_s_coordinate_g1", "ocean s-coordinate levels"),
    ("ocean_s_coordinate_g2", "ocean s-coordinate levels"),
    ("ocean_sigma_z_coordinate", "ocean sigma-z levels"),
    ("ocean_double_sigma_coordinate", "ocean double-sigma levels"),
    ("land_ice_sigma_coordinate", "land-ice sigma levels"),
];

const HEIGHT_ABOVE_GROUND: [&str; 2] = ["height", "height_above_ground"];
const HEIGHT_ABOVE_SEA_LEVEL: [&str; 6] =
    ["altitude", "height_above_mean_sea_level", "height_above_geopotential_datum", "height_above_reference_ellipsoid", "height_above_sea_floor", "geoid_height_above_reference_ellipsoid"];
const DEPTH: [&str; 3] = ["depth", "depth_below_geoid", "depth_below_sea_floor"];

/// Whether `units` are a length (m, km, ft...).
fn is_length(units: &str) -> bool {
    let (Ok(unit), Ok(metre)) = (crate::units::Unit::parse(units), crate::units::Unit::parse("m")) else { return false };
    unit.conversion_to(&metre).is_ok_and(|(_, offset)| offset == 0.0)
}

/// Whether `units` are a temperature (K, degC...).
fn is_temperature(units: &str) -> bool {
    let (Ok(unit), Ok(kelvin)) = (crate::units::Unit::parse(units), crate::units::Unit::parse("K")) else { return false };
    unit.conversion_to(&kelvin).is_ok()
}

/// Recognises a vertical coordinate by its attributes, in the order CF
/// gives them weight: standard_name, then formula_terms, then units with
/// `positive`, then `positive` or `axis = Z` alone. Coordinates that are
/// not vertical (latitude, longitude, time, projection x/y) give None, and
/// so does a coordinate with nothing vertical about it.
pub fn classify_vertical(a: &VerticalAttributes) -> Option<VerticalKind> {
    let standard_name = a.standard_name.as_deref().map(str::trim).unwrap_or("");
    let units = a.units.as_deref().map(str::trim).unwrap_or("");
    let positive = a.positive.as_deref().map(|p| p.trim().to_ascii_lowercase());
    let axis_z = a.axis.as_deref().is_some_and(|x| x.trim().eq_ignore_ascii_case("z"));
    match standard_name {
        "air_pressure" => return Some(VerticalKind::Pressure),
        super::model_levels::STANDARD_NAME => return Some(VerticalKind::HybridSigmaPressure),
        "model_level_number" => return Some(VerticalKind::ModelLevelNumber),
        "air_potential_temperature" => return Some(VerticalKind::Isentropic),
        "geopotential_height" => return Some(VerticalKind::GeopotentialHeight),
        s if HEIGHT_ABOVE_GROUND.contains(&s) => return Some(VerticalKind::Height(HeightDatum::Ground)),
        s if HEIGHT_ABOVE_SEA_LEVEL.contains(&s) => return Some(VerticalKind::Height(HeightDatum::SeaLevel)),
        s if DEPTH.contains(&s) => return Some(VerticalKind::Depth),
        s if PARAMETRIC.iter().any(|(n, _)| *n == s) => return Some(VerticalKind::Parametric { standard_name: s.to_string() }),
        // Latitude, longitude, time and the projection's axes are not vertical.
        "latitude" | "longitude" | "time" | "projection_x_coordinate" | "projection_y_coordinate" | "grid_latitude" | "grid_longitude" => return None,
        _ => {}
    }
    if a.formula_terms.is_some() {
        // A parametric coordinate without (or with an unknown) standard_name.
        return Some(VerticalKind::Parametric { standard_name: standard_name.to_string() });
    }
    if !units.is_empty() && pressure_factor(units).is_some() {
        return Some(VerticalKind::Pressure);
    }
    let vertical = positive.is_some() || axis_z;
    if !vertical {
        return None;
    }
    if is_length(units) {
        return Some(match positive.as_deref() {
            Some("down") => VerticalKind::Depth,
            _ => VerticalKind::Height(HeightDatum::Unsaid),
        });
    }
    if is_temperature(units) {
        return Some(VerticalKind::Isentropic);
    }
    Some(VerticalKind::Other { units: units.to_string() })
}

impl VerticalKind {
    /// Whether Baroc reads data on this coordinate (pressure levels, and
    /// hybrid sigma-pressure model levels with their coefficients).
    pub fn is_usable(&self) -> bool {
        matches!(self, VerticalKind::Pressure | VerticalKind::HybridSigmaPressure)
    }

    /// What this coordinate is, in the trade's words.
    pub fn describe(&self) -> String {
        match self {
            VerticalKind::Pressure => "pressure".into(),
            VerticalKind::HybridSigmaPressure => "hybrid sigma-pressure model levels".into(),
            VerticalKind::Parametric { standard_name } => match PARAMETRIC.iter().find(|(n, _)| n == standard_name) {
                Some((_, words)) => format!("on {words} ({standard_name})"),
                None if standard_name.is_empty() => "a parametric vertical coordinate (it has formula_terms) of no standard_name Baroc knows".into(),
                None => format!("a parametric vertical coordinate ({standard_name})"),
            },
            VerticalKind::Height(HeightDatum::Ground) => "height above ground".into(),
            VerticalKind::Height(HeightDatum::SeaLevel) => "height above sea level".into(),
            VerticalKind::Height(HeightDatum::Unsaid) => "a height".into(),
            VerticalKind::GeopotentialHeight => "geopotential height".into(),
            VerticalKind::Depth => "a depth below the surface".into(),
            VerticalKind::Isentropic => "potential temperature (isentropic levels)".into(),
            VerticalKind::ModelLevelNumber => "model level numbers without the coefficients that give their pressure".into(),
            VerticalKind::Other { units } if units.is_empty() => "a vertical coordinate with no units".into(),
            VerticalKind::Other { units } => format!("a vertical coordinate in units `{units}`"),
        }
    }

    /// Why data on the coordinate `name` cannot be read, in the trade's
    /// words; None for the usable kinds.
    pub fn refusal(&self, name: &str) -> Option<String> {
        if self.is_usable() {
            return None;
        }
        let what = self.describe();
        Some(format!(
            "the vertical coordinate `{name}` is {what}, not pressure: Baroc needs pressure levels (or hybrid sigma-pressure model levels with their coefficients, standard_name {})",
            super::model_levels::STANDARD_NAME
        ))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn attributes(name: &str, pairs: &[(&str, &str)]) -> VerticalAttributes {
        let get = |k: &str| pairs.iter().find(|(n, _)| *n == k).map(|(_, v)| v.to_string());
        VerticalAttributes { name: name.into(), standard_name: get("standard_name"), units: get("units"), positive: get("positive"), axis: get("axis"), formula_terms: get("formula_terms") }
    }

    #[test]
    fn every_cf_vertical_coordinate_is_recognised() {
        // CF conventions 1.11, section 4.3 (dimensional coordinates: units
        // of pressure, length or temperature, or `positive`) and appendix D
        // (dimensionless coordinates by standard_name with formula_terms).
        let cases: Vec<(VerticalAttributes, VerticalKind)> = vec![
            (attributes("plev", &[("standard_name", "air_pressure"), ("units", "Pa")]), VerticalKind::Pressure),
            (attributes("level", &[("units", "millibar")]), VerticalKind::Pressure),
            (attributes("lev", &[("standard_name", "atmosphere_hybrid_sigma_pressure_coordinate"), ("formula_terms", "a: hyam b: hybm p0: P0 ps: PS")]), VerticalKind::HybridSigmaPressure),
            (attributes("height", &[("standard_name", "height"), ("units", "m"), ("positive", "up")]), VerticalKind::Height(HeightDatum::Ground)),
            (attributes("alt", &[("standard_name", "altitude"), ("units", "km"), ("positive", "up")]), VerticalKind::Height(HeightDatum::SeaLevel)),
            (attributes("z", &[("units", "m"), ("positive", "up")]), VerticalKind::Height(HeightDatum::Unsaid)),
            (attributes("z", &[("units", "km"), ("axis", "Z")]), VerticalKind::Height(HeightDatum::Unsaid)),
            (attributes("depth", &[("units", "m"), ("positive", "down")]), VerticalKind::Depth),
            (attributes("sigma", &[("standard_name", "atmosphere_sigma_coordinate"), ("positive", "down"), ("formula_terms", "sigma: sigma ps: ps ptop: ptop")]), VerticalKind::Parametric { standard_name: "atmosphere_sigma_coordinate".into() }),
            (attributes("lev", &[("standard_name", "atmosphere_hybrid_height_coordinate"), ("units", "m"), ("positive", "up")]), VerticalKind::Parametric { standard_name: "atmosphere_hybrid_height_coordinate".into() }),
            (attributes("s", &[("formula_terms", "s: s eta: zeta depth: h")]), VerticalKind::Parametric { standard_name: String::new() }),
            (attributes("theta", &[("standard_name", "air_potential_temperature"), ("units", "K")]), VerticalKind::Isentropic),
            (attributes("theta", &[("units", "K"), ("positive", "up")]), VerticalKind::Isentropic),
            (attributes("gph", &[("standard_name", "geopotential_height"), ("units", "m")]), VerticalKind::GeopotentialHeight),
            (attributes("level", &[("standard_name", "model_level_number"), ("positive", "down")]), VerticalKind::ModelLevelNumber),
            (attributes("k", &[("axis", "Z")]), VerticalKind::Other { units: String::new() }),
        ];
        for (a, expected) in cases {
            assert_eq!(classify_vertical(&a), Some(expected.clone()), "{a:?}");
            assert_eq!(expected.refusal(&a.name).is_none(), expected.is_usable());
        }
        // Horizontal and time coordinates are not vertical, even with axis.
        for a in [
            attributes("lat", &[("standard_name", "latitude"), ("units", "degrees_north")]),
            attributes("lon", &[("units", "degrees_east"), ("axis", "X")]),
            attributes("time", &[("units", "hours since 2031-01-01")]),
            attributes("x", &[("standard_name", "projection_x_coordinate"), ("units", "km")]),
        ] {
            assert_eq!(classify_vertical(&a), None, "{a:?}");
        }
    }

    #[test]
    fn refusals_say_what_the_coordinate_is_in_the_trade_s_words() {
        let height = classify_vertical(&attributes("height", &[("standard_name", "height"), ("units", "m"), ("positive", "up")])).unwrap();
        assert_eq!(
            height.refusal("height").unwrap(),
            "the vertical coordinate `height` is height above ground, not pressure: Baroc needs pressure levels (or hybrid sigma-pressure model levels with their coefficients, standard_name atmosphere_hybrid_sigma_pressure_coordinate)"
        );
        let sigma = classify_vertical(&attributes("sigma", &[("standard_name", "atmosphere_sigma_coordinate"), ("formula_terms", "sigma: sigma ps: ps ptop: ptop")])).unwrap();
        assert!(sigma.refusal("sigma").unwrap().starts_with("the vertical coordinate `sigma` is on sigma levels (atmosphere_sigma_coordinate), not pressure: "));
    }
}
