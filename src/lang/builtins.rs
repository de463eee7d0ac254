//! The table of built-in operators, in one place: names, parameters with
//! their kinds, options, result kind and unit, which dataset roles each
//! needs, and a one-line documentation used by the checker, by inspection
//! and by completion. The evaluator dispatches on the same names.
//!
//! Result units follow from the formulas in the field guide: geostrophic
//! and thermal winds are speeds (m s-1), thickness a length (m), advection
//! of T a rate of temperature (K s-1), N^2 is s-2, the Eady growth rate s-1.

/// What an argument must be.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ParameterKind {
    /// A number with a pressure unit: `500 hPa`.
    Pressure,
    /// A pressure layer: `1000 hPa to 500 hPa`.
    Layer,
    /// Either of the two above.
    PressureOrLayer,
    /// A number with a length unit: `250 km`.
    Length,
    /// `52.5 north`
    Latitude,
    /// `20 west`
    Longitude,
    /// `40 north to 65 north`
    LatitudeRange,
    /// `50 west to 5 east`
    LongitudeRange,
    /// `box(...)`
    Region,
    ScalarField,
    VectorField,
    /// A scalar or vector field.
    Field,
    /// A scalar field of geopotential height (a length) or geopotential
    /// (m2 s-2).
    HeightOrGeopotential,
    /// A pressure level, or a scalar field of temperature.
    PressureOrTemperatureField,
    /// A whole number (the index of a time step) or a time string.
    IndexOrString,
}

impl ParameterKind {
    /// "a pressure such as 500 hPa": what the checker says was expected.
    pub fn describe(self) -> &'static str {
        match self {
            ParameterKind::Pressure => "a pressure such as 500 hPa",
            ParameterKind::Layer => "a pressure layer such as 1000 hPa to 500 hPa",
            ParameterKind::PressureOrLayer => "a pressure such as 500 hPa or a layer such as 1000 hPa to 500 hPa",
            ParameterKind::Length => "a length such as 250 km",
            ParameterKind::Latitude => "a latitude such as 52.5 north",
            ParameterKind::Longitude => "a longitude such as 20 west",
            ParameterKind::LatitudeRange => "a range of latitudes such as 40 north to 65 north",
            ParameterKind::LongitudeRange => "a range of longitudes such as 50 west to 5 east",
            ParameterKind::Region => "a region such as box(40 north to 65 north, 50 west to 5 east)",
            ParameterKind::ScalarField => "a scalar field such as temperature",
            ParameterKind::VectorField => "a vector field such as wind",
            ParameterKind::Field => "a field such as temperature or wind",
            ParameterKind::HeightOrGeopotential => "a field of geopotential height or geopotential",
            ParameterKind::PressureOrTemperatureField => "a pressure such as 500 hPa or a field of temperature",
            ParameterKind::IndexOrString => "a time step number such as 0 or a time such as \"2026-10-14 06:00\"",
        }
    }
}

#[derive(Debug, Clone, Copy)]
pub struct Parameter {
    pub name: &'static str,
    pub kind: ParameterKind,
    /// The operator differentiates horizontally, so the field must still be
    /// on a grid (not picked at a point or averaged over an area).
    pub needs_grid: bool,
}

/// What an option's value must be.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum OptionKind {
    /// One of these words, written as a bare name: `with route thickness`.
    Words(&'static [&'static str]),
    /// An angle in degrees: `with equator_band 10 degrees`.
    Angle,
    /// A length: `250 km`.
    Length,
    /// A speed: `4 m s-1`, `5 kt`.
    Speed,
}

#[derive(Debug, Clone, Copy)]
pub struct OptionSpec {
    pub name: &'static str,
    pub kind: OptionKind,
    pub documentation: &'static str,
}

/// What a call gives.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ResultKind {
    ScalarField,
    VectorField,
    /// The same kind of field as argument `i`.
    SameKindAs(usize),
    Number,
    Point,
    Region,
    Time,
}

/// The unit of the result.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ResultUnit {
    /// A fixed unit (a unit string for the units module).
    Fixed(&'static str),
    /// The unit of argument `i`.
    SameAs(usize),
    /// The unit of argument `i` divided by metre to the given power.
    PerLength(usize, i32),
    /// The unit of argument `i` per second.
    PerSecond(usize),
    /// The product of the units of arguments `i` and `j`.
    Product(usize, usize),
    /// No unit (points, regions, times).
    None,
}

/// Which dimensions the resulting field has.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ResultShape {
    /// A horizontal field on the dataset's grid (and its times): the
    /// operator works at one level or over one layer.
    Horizontal,
    /// The dimensions of argument `i`.
    SameAs(usize),
    /// Argument `i` without its level dimension (interpolated to one level).
    WithoutLevels(usize),
    /// Argument `i` without its horizontal dimensions (averaged).
    WithoutHorizontal(usize),
    /// Horizontal when argument `i` is a pressure, else as argument `i`.
    HorizontalIfPressure(usize),
    /// Not a field.
    NotAField,
}

/// When a requirement on the dataset applies.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum When {
    Always,
    /// The option is not given.
    OptionAbsent(&'static str),
    /// The option is given this word.
    OptionIs(&'static str, &'static str),
}

/// The current dataset must have at least one of these roles.
#[derive(Debug, Clone, Copy)]
pub struct Requirement {
    pub when: When,
    pub any_of: &'static [&'static str],
}

#[derive(Debug, Clone, Copy)]
pub struct Builtin {
    pub name: &'static str,
    pub parameters: &'static [Parameter],
    pub options: &'static [OptionSpec],
    pub result_kind: ResultKind,
    pub result_unit: ResultUnit,
    pub result_shape: ResultShape,
    pub requires: &'static [Requirement],
    pub documentation: &'static str,
}

impl Builtin {
    /// `thickness(layer) with route (temperature | virtual_temperature | geopotential)`
    pub fn signature(&self) -> String {
        let parameters: Vec<&str> = self.parameters.iter().map(|parameter| parameter.name).collect();
        let mut text = format!("{}({})", self.name, parameters.join(", "));
        for (index, option) in self.options.iter().enumerate() {
            text.push_str(if index == 0 { " with " } else { ", " });
            text.push_str(option.name);
            match option.kind {
                OptionKind::Words(words) => {
                    text.push_str(" (");
                    text.push_str(&words.join(" | "));
                    text.push(')');
                }
                OptionKind::Angle => text.push_str(" ANGLE"),
                OptionKind::Length => text.push_str(" LENGTH"),
                OptionKind::Speed => text.push_str(" SPEED"),
            }
        }
        text
    }

    pub fn option(&self, name: &str) -> Option<&'static OptionSpec> {
        self.options.iter().find(|option| option.name == name)
    }
}

const fn parameter(name: &'static str, kind: ParameterKind) -> Parameter {
    Parameter { name, kind, needs_grid: false }
}

const fn gridded(name: &'static str, kind: ParameterKind) -> Parameter {
    Parameter { name, kind, needs_grid: true }
}

const EQUATOR_BAND: OptionSpec = OptionSpec {
    name: "equator_band",
    kind: OptionKind::Angle,
    documentation: "half-width of the band around the equator where the Coriolis parameter is too small and results are left missing",
};

/// Below what speed an angle between two winds is not reported (see
/// `physics::thermal_wind::DEFAULT_WEAK_WIND`).
const WEAK_WIND: OptionSpec = OptionSpec {
    name: "weak_wind",
    kind: OptionKind::Speed,
    documentation: "leave the turning missing (\"weak wind\") where either wind or the shear between them is slower than this (default 2.5 m s-1; 0 reports every angle)",
};

/// How the hypsometric integral runs over ln p (see
/// `physics::vertical::IntegrationRule`).
const INTEGRATION: OptionSpec = OptionSpec {
    name: "integration",
    kind: OptionKind::Words(&["quadratic", "trapezoid"]),
    documentation: "integrate temperature over ln p through the piecewise-quadratic interpolant (the default) or by the trapezoid rule, as older results did",
};

const HEIGHTS: &[&str] = &["geopotential", "geopotential_height"];
const HEIGHTS_OR_TEMPERATURE: &[&str] = &["geopotential", "geopotential_height", "temperature"];
const TEMPERATURE: &[&str] = &["temperature"];
const EASTWARD: &[&str] = &["eastward_wind"];
const NORTHWARD: &[&str] = &["northward_wind"];

use OptionKind as O;
use ParameterKind as P;

/// How the thickness of a layer (and so its mean temperature) is found.
const THICKNESS_ROUTE: OptionSpec = OptionSpec {
    name: "route",
    kind: O::Words(&["temperature", "virtual_temperature", "geopotential"]),
    documentation: "integrate the hypsometric equation over temperature or virtual temperature, or difference the geopotential",
};

/// The data each thickness route needs.
const THICKNESS_REQUIRES: &[Requirement] = &[
    Requirement { when: When::OptionAbsent("route"), any_of: HEIGHTS_OR_TEMPERATURE },
    Requirement { when: When::OptionIs("route", "temperature"), any_of: TEMPERATURE },
    Requirement { when: When::OptionIs("route", "virtual_temperature"), any_of: TEMPERATURE },
    Requirement { when: When::OptionIs("route", "virtual_temperature"), any_of: &["specific_humidity"] },
    Requirement { when: When::OptionIs("route", "geopotential"), any_of: HEIGHTS },
];

/// Every built-in operator of the language.
pub static BUILTINS: &[Builtin] = &[
    Builtin {
        name: "geostrophic_wind",
        parameters: &[gridded("height_or_geopotential", P::HeightOrGeopotential)],
        options: &[EQUATOR_BAND],
        result_kind: ResultKind::VectorField,
        result_unit: ResultUnit::Fixed("m/s"),
        result_shape: ResultShape::SameAs(0),
        requires: &[],
        documentation: "geostrophic wind from geopotential height or geopotential on pressure levels",
    },
    Builtin {
        name: "thickness",
        parameters: &[parameter("layer", P::Layer)],
        options: &[THICKNESS_ROUTE, INTEGRATION],
        result_kind: ResultKind::ScalarField,
        result_unit: ResultUnit::Fixed("m"),
        result_shape: ResultShape::Horizontal,
        requires: THICKNESS_REQUIRES,
        documentation: "hydrostatic thickness of a pressure layer",
    },
    Builtin {
        name: "layer_mean_temperature",
        parameters: &[parameter("layer", P::Layer)],
        // The mean follows from the thickness by the hypsometric equation
        // (field guide), so it takes the thickness's routes.
        options: &[THICKNESS_ROUTE, INTEGRATION],
        result_kind: ResultKind::ScalarField,
        result_unit: ResultUnit::Fixed("K"),
        result_shape: ResultShape::Horizontal,
        requires: THICKNESS_REQUIRES,
        documentation: "ln p-weighted mean temperature of a pressure layer",
    },
    Builtin {
        name: "thermal_wind",
        parameters: &[parameter("layer", P::Layer)],
        options: &[
            OptionSpec {
                name: "route",
                kind: O::Words(&["thickness", "mean_temperature"]),
                documentation: "from the gradient of the layer's thickness or of its mean temperature",
            },
            EQUATOR_BAND,
            INTEGRATION,
        ],
        result_kind: ResultKind::VectorField,
        result_unit: ResultUnit::Fixed("m/s"),
        result_shape: ResultShape::Horizontal,
        requires: &[
            Requirement { when: When::OptionAbsent("route"), any_of: HEIGHTS_OR_TEMPERATURE },
            Requirement { when: When::OptionIs("route", "thickness"), any_of: HEIGHTS_OR_TEMPERATURE },
            Requirement { when: When::OptionIs("route", "mean_temperature"), any_of: TEMPERATURE },
        ],
        documentation: "thermal wind of a layer: the geostrophic wind at its top minus at its bottom",
    },
    Builtin {
        name: "geostrophic_shear",
        parameters: &[parameter("level", P::Pressure)],
        options: &[EQUATOR_BAND],
        result_kind: ResultKind::VectorField,
        result_unit: ResultUnit::Fixed("m/s"),
        result_shape: ResultShape::Horizontal,
        requires: &[Requirement { when: When::Always, any_of: TEMPERATURE }],
        documentation: "vertical shear of the geostrophic wind per unit ln p at one level, from the temperature gradient",
    },
    Builtin {
        name: "wind_shear",
        parameters: &[parameter("layer", P::Layer)],
        options: &[],
        result_kind: ResultKind::VectorField,
        result_unit: ResultUnit::Fixed("m/s"),
        result_shape: ResultShape::Horizontal,
        requires: &[
            Requirement { when: When::Always, any_of: EASTWARD },
            Requirement { when: When::Always, any_of: NORTHWARD },
        ],
        documentation: "analysed wind at the layer's top minus at its bottom",
    },
    Builtin {
        name: "ageostrophic_wind",
        parameters: &[parameter("level", P::Pressure)],
        options: &[EQUATOR_BAND],
        result_kind: ResultKind::VectorField,
        result_unit: ResultUnit::Fixed("m/s"),
        result_shape: ResultShape::Horizontal,
        requires: &[
            Requirement { when: When::Always, any_of: EASTWARD },
            Requirement { when: When::Always, any_of: NORTHWARD },
            Requirement { when: When::Always, any_of: HEIGHTS },
        ],
        documentation: "analysed wind minus geostrophic wind at one level",
    },
    Builtin {
        name: "ageostrophic_shear",
        parameters: &[parameter("layer", P::Layer)],
        options: &[EQUATOR_BAND],
        result_kind: ResultKind::VectorField,
        result_unit: ResultUnit::Fixed("m/s"),
        result_shape: ResultShape::Horizontal,
        requires: &[
            Requirement { when: When::Always, any_of: EASTWARD },
            Requirement { when: When::Always, any_of: NORTHWARD },
            Requirement { when: When::Always, any_of: HEIGHTS_OR_TEMPERATURE },
        ],
        documentation: "analysed wind shear of a layer minus its thermal wind",
    },
    Builtin {
        name: "temperature_advection",
        parameters: &[parameter("level_or_layer", P::PressureOrLayer)],
        options: &[EQUATOR_BAND],
        result_kind: ResultKind::ScalarField,
        result_unit: ResultUnit::Fixed("K/s"),
        result_shape: ResultShape::Horizontal,
        requires: &[Requirement { when: When::Always, any_of: HEIGHTS }],
        documentation: "geostrophic temperature advection at a level, or layer-mean over a layer",
    },
    Builtin {
        name: "advection",
        parameters: &[gridded("scalar", P::ScalarField), parameter("vector", P::VectorField)],
        options: &[],
        result_kind: ResultKind::ScalarField,
        result_unit: ResultUnit::PerSecond(0),
        result_shape: ResultShape::SameAs(0),
        requires: &[],
        documentation: "advection of a scalar field by a vector field: minus the vector dotted with the scalar's gradient",
    },
    Builtin {
        name: "turning",
        parameters: &[parameter("layer", P::Layer)],
        options: &[EQUATOR_BAND, WEAK_WIND],
        result_kind: ResultKind::ScalarField,
        result_unit: ResultUnit::Fixed("degrees"),
        result_shape: ResultShape::Horizontal,
        requires: &[
            Requirement { when: When::Always, any_of: EASTWARD },
            Requirement { when: When::Always, any_of: NORTHWARD },
        ],
        documentation: "turning of the wind from the layer's bottom to its top: veering positive, backing negative, in either hemisphere",
    },
    Builtin {
        name: "gradient",
        parameters: &[gridded("scalar", P::ScalarField)],
        options: &[],
        result_kind: ResultKind::VectorField,
        result_unit: ResultUnit::PerLength(0, 1),
        result_shape: ResultShape::SameAs(0),
        requires: &[],
        documentation: "horizontal gradient of a scalar field on the sphere",
    },
    Builtin {
        name: "divergence",
        parameters: &[gridded("vector", P::VectorField)],
        options: &[],
        result_kind: ResultKind::ScalarField,
        result_unit: ResultUnit::PerLength(0, 1),
        result_shape: ResultShape::SameAs(0),
        requires: &[],
        documentation: "horizontal divergence of a vector field on the sphere",
    },
    Builtin {
        name: "vorticity",
        parameters: &[gridded("vector", P::VectorField)],
        options: &[],
        result_kind: ResultKind::ScalarField,
        result_unit: ResultUnit::PerLength(0, 1),
        result_shape: ResultShape::SameAs(0),
        requires: &[],
        documentation: "relative vorticity (vertical component of the curl) of a vector field on the sphere",
    },
    Builtin {
        name: "laplacian",
        parameters: &[gridded("scalar", P::ScalarField)],
        options: &[],
        result_kind: ResultKind::ScalarField,
        result_unit: ResultUnit::PerLength(0, 2),
        result_shape: ResultShape::SameAs(0),
        requires: &[],
        documentation: "horizontal Laplacian of a scalar field on the sphere",
    },
    Builtin {
        name: "smooth",
        parameters: &[gridded("field", P::Field), parameter("length", P::Length)],
        options: &[],
        result_kind: ResultKind::SameKindAs(0),
        result_unit: ResultUnit::SameAs(0),
        result_shape: ResultShape::SameAs(0),
        requires: &[],
        documentation: "smooth a field over a length scale given in distance, not grid points",
    },
    Builtin {
        name: "potential_temperature",
        parameters: &[parameter("level_or_field", P::PressureOrTemperatureField)],
        options: &[],
        result_kind: ResultKind::ScalarField,
        result_unit: ResultUnit::Fixed("K"),
        result_shape: ResultShape::HorizontalIfPressure(0),
        requires: &[],
        documentation: "potential temperature referred to 1000 hPa, at a level or of a temperature field",
    },
    Builtin {
        name: "static_stability",
        parameters: &[parameter("layer", P::Layer)],
        options: &[],
        result_kind: ResultKind::ScalarField,
        result_unit: ResultUnit::Fixed("s-2"),
        result_shape: ResultShape::Horizontal,
        requires: &[Requirement { when: When::Always, any_of: TEMPERATURE }],
        documentation: "squared buoyancy frequency N^2 of a layer",
    },
    Builtin {
        name: "eady_growth_rate",
        parameters: &[parameter("layer", P::Layer)],
        options: &[EQUATOR_BAND],
        result_kind: ResultKind::ScalarField,
        result_unit: ResultUnit::Fixed("s-1"),
        result_shape: ResultShape::Horizontal,
        requires: &[Requirement { when: When::Always, any_of: TEMPERATURE }],
        documentation: "maximum Eady growth rate 0.31 f |dV/dz| / N of a layer",
    },
    Builtin {
        name: "area_mean",
        parameters: &[parameter("field", P::Field), parameter("region", P::Region)],
        options: &[],
        result_kind: ResultKind::SameKindAs(0),
        result_unit: ResultUnit::SameAs(0),
        result_shape: ResultShape::WithoutHorizontal(0),
        requires: &[],
        documentation: "mean of a field over a region, weighted by the cosine of latitude",
    },
    Builtin {
        name: "interpolate",
        parameters: &[parameter("field", P::Field), parameter("pressure", P::Pressure)],
        options: &[],
        result_kind: ResultKind::SameKindAs(0),
        result_unit: ResultUnit::SameAs(0),
        result_shape: ResultShape::WithoutLevels(0),
        requires: &[],
        documentation: "a field interpolated in ln p to one pressure",
    },
    Builtin {
        name: "speed",
        parameters: &[parameter("vector", P::VectorField)],
        options: &[],
        result_kind: ResultKind::ScalarField,
        result_unit: ResultUnit::SameAs(0),
        result_shape: ResultShape::SameAs(0),
        requires: &[],
        documentation: "magnitude of a vector field",
    },
    Builtin {
        name: "direction",
        parameters: &[parameter("vector", P::VectorField)],
        options: &[],
        result_kind: ResultKind::ScalarField,
        result_unit: ResultUnit::Fixed("degrees"),
        result_shape: ResultShape::SameAs(0),
        requires: &[],
        documentation: "direction a wind blows from, in degrees clockwise from north",
    },
    Builtin {
        name: "dot",
        parameters: &[parameter("a", P::VectorField), parameter("b", P::VectorField)],
        options: &[],
        result_kind: ResultKind::ScalarField,
        result_unit: ResultUnit::Product(0, 1),
        result_shape: ResultShape::SameAs(0),
        requires: &[],
        documentation: "dot product of two vector fields",
    },
    Builtin {
        name: "cross_vertical",
        parameters: &[parameter("vector", P::VectorField)],
        options: &[],
        result_kind: ResultKind::VectorField,
        result_unit: ResultUnit::SameAs(0),
        result_shape: ResultShape::SameAs(0),
        requires: &[],
        documentation: "the vertical unit vector crossed with a vector field (turns it 90 degrees to the left)",
    },
    Builtin {
        name: "vector",
        parameters: &[parameter("eastward", P::ScalarField), parameter("northward", P::ScalarField)],
        options: &[],
        result_kind: ResultKind::VectorField,
        result_unit: ResultUnit::SameAs(0),
        result_shape: ResultShape::SameAs(0),
        requires: &[],
        documentation: "a vector field from its eastward and northward components",
    },
    Builtin {
        name: "point",
        parameters: &[parameter("latitude", P::Latitude), parameter("longitude", P::Longitude)],
        options: &[],
        result_kind: ResultKind::Point,
        result_unit: ResultUnit::None,
        result_shape: ResultShape::NotAField,
        requires: &[],
        documentation: "a geographical point",
    },
    Builtin {
        name: "box",
        parameters: &[parameter("latitudes", P::LatitudeRange), parameter("longitudes", P::LongitudeRange)],
        options: &[],
        result_kind: ResultKind::Region,
        result_unit: ResultUnit::None,
        result_shape: ResultShape::NotAField,
        requires: &[],
        documentation: "a latitude-longitude box",
    },
    Builtin {
        name: "time",
        parameters: &[parameter("index_or_string", P::IndexOrString)],
        options: &[],
        result_kind: ResultKind::Time,
        result_unit: ResultUnit::None,
        result_shape: ResultShape::NotAField,
        requires: &[],
        documentation: "a time of the dataset, by step number from 0 or as \"YYYY-MM-DD HH:MM\"",
    },
    Builtin {
        name: "coriolis",
        parameters: &[parameter("latitude", P::Latitude)],
        options: &[],
        result_kind: ResultKind::Number,
        result_unit: ResultUnit::Fixed("s-1"),
        result_shape: ResultShape::NotAField,
        requires: &[],
        documentation: "Coriolis parameter 2 Omega sin(latitude)",
    },
];

/// The built-in operator called `name`.
pub fn find(name: &str) -> Option<&'static Builtin> {
    BUILTINS.iter().find(|builtin| builtin.name == name)
}

/// A role: what a dataset variable is, whatever the file calls it.
#[derive(Debug, Clone, Copy)]
pub struct RoleSpec {
    pub name: &'static str,
    /// CF standard name that identifies it (CF standard name table).
    pub standard_name: &'static str,
    /// A unit of its dimension, to check a variable's units against.
    pub unit: &'static str,
    pub documentation: &'static str,
}

/// The roles the language knows. `wind` is not a variable but the vector of
/// `eastward_wind` and `northward_wind`.
pub static ROLES: &[RoleSpec] = &[
    RoleSpec { name: "temperature", standard_name: "air_temperature", unit: "K", documentation: "air temperature" },
    RoleSpec { name: "geopotential", standard_name: "geopotential", unit: "m2 s-2", documentation: "geopotential" },
    RoleSpec {
        name: "geopotential_height",
        standard_name: "geopotential_height",
        unit: "m",
        documentation: "geopotential height",
    },
    RoleSpec { name: "eastward_wind", standard_name: "eastward_wind", unit: "m/s", documentation: "eastward wind component" },
    RoleSpec {
        name: "northward_wind",
        standard_name: "northward_wind",
        unit: "m/s",
        documentation: "northward wind component",
    },
    RoleSpec {
        name: "specific_humidity",
        standard_name: "specific_humidity",
        unit: "1",
        documentation: "specific humidity (kg/kg)",
    },
    RoleSpec {
        name: "surface_pressure",
        standard_name: "surface_air_pressure",
        unit: "Pa",
        documentation: "surface air pressure",
    },
];

/// The vector role made of the two wind components.
pub const WIND_ROLE: &str = "wind";

/// Members defined on each kind of value, with one line of documentation.
pub static VECTOR_MEMBERS: &[(&str, &str)] = &[
    ("eastward", "eastward component"),
    ("northward", "northward component"),
    ("speed", "magnitude"),
    ("direction", "direction the wind blows from, degrees clockwise from north"),
];
pub static LAYER_MEMBERS: &[(&str, &str)] =
    &[("bottom", "pressure at the bottom (the larger pressure)"), ("top", "pressure at the top")];
pub static POINT_MEMBERS: &[(&str, &str)] = &[("latitude", "latitude"), ("longitude", "longitude")];
pub static REGION_MEMBERS: &[(&str, &str)] =
    &[("latitude", "range of latitudes"), ("longitude", "range of longitudes")];

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_operator_of_the_design_is_listed_once() {
        // The list in the language design (lang-spec, "Names the checker knows").
        let design = [
            "geostrophic_wind", "thickness", "layer_mean_temperature", "thermal_wind", "geostrophic_shear",
            "wind_shear", "ageostrophic_wind", "ageostrophic_shear", "temperature_advection", "advection",
            "turning", "gradient", "divergence", "vorticity", "laplacian", "smooth", "potential_temperature",
            "static_stability", "eady_growth_rate", "area_mean", "interpolate", "speed", "direction", "dot",
            "cross_vertical", "vector", "point", "box", "time", "coriolis",
        ];
        for name in design {
            assert_eq!(BUILTINS.iter().filter(|builtin| builtin.name == name).count(), 1, "{name}");
        }
        assert_eq!(BUILTINS.len(), design.len());
    }

    #[test]
    fn result_units_parse_and_argument_indices_exist() {
        for builtin in BUILTINS {
            if let ResultUnit::Fixed(unit) = builtin.result_unit {
                assert!(crate::units::Unit::parse(unit).is_ok(), "{unit}");
            }
            let count = builtin.parameters.len();
            let indices: Vec<usize> = {
                {
                    let mut list = Vec::new();
                    match builtin.result_unit {
                        ResultUnit::SameAs(i) | ResultUnit::PerLength(i, _) | ResultUnit::PerSecond(i) => list.push(i),
                        ResultUnit::Product(i, j) => list.extend([i, j]),
                        _ => {}
                    }
                    match builtin.result_shape {
                        ResultShape::SameAs(i)
                        | ResultShape::WithoutLevels(i)
                        | ResultShape::WithoutHorizontal(i)
                        | ResultShape::HorizontalIfPressure(i) => list.push(i),
                        _ => {}
                    }
                    if let ResultKind::SameKindAs(i) = builtin.result_kind {
                        list.push(i);
                    }
                    list
                }
            };
            assert!(indices.iter().all(|index| *index < count), "{}", builtin.name);
            for requirement in builtin.requires {
                match requirement.when {
                    When::Always => {}
                    When::OptionAbsent(option) => assert!(builtin.option(option).is_some(), "{}: {option}", builtin.name),
                    When::OptionIs(option, word) => {
                        let spec = builtin.option(option).unwrap_or_else(|| panic!("{}: {option}", builtin.name));
                        let OptionKind::Words(words) = spec.kind else { panic!("{}: {option} takes words", builtin.name) };
                        assert!(words.contains(&word), "{}: {word}", builtin.name);
                    }
                }
                for role in requirement.any_of {
                    assert!(ROLES.iter().any(|spec| spec.name == *role), "{role}");
                }
            }
        }
    }

    #[test]
    fn signature_lists_options() {
        assert_eq!(
            find("thickness").unwrap().signature(),
            "thickness(layer) with route (temperature | virtual_temperature | geopotential), integration (quadratic | trapezoid)"
        );
    }
}

/// The operators that present rather than compute (pictures, tables,
/// printing, the recipe library, reports). They are not in the checker's
/// table of operators (`BUILTINS`): they accept values of many kinds and
/// check them when they run; pictures and reports become requests that the
/// drawing side and the front ends carry out.
pub const PRESENTATION: &[&str] = &["recipes", "save_recipe", "map", "hodograph", "profile", "section", "time_series", "panels", "write_report", "print", "clear_output", "audit"];
