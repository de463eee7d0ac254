//! A small stand-in for the crate's units module (`crate::units`), written
//! on another branch, with the same API so the checker builds and can be
//! tested now: `Unit::parse`, `Unit * Unit`, `Unit / Unit`, `powi`,
//! `dimension`, `conversion_to`, `Display`. When `crate::units` lands, the
//! checker's `use` of this module is switched to it and this file removed.
//!
//! It knows the units the language's design lists (Pa hPa millibar mb K degC
//! degree(s) m km dam s min hour h day m/s kt knot(s) ...), udunits-style
//! exponents (`m2 s-2`, `s-1`), `/`, `.` and space as joiners and a
//! parenthesised group with a scale (`K/(100 km)`). Scale factors: SI
//! definitions; 1 kt = 1852 m per hour (international nautical mile);
//! degC is K offset by 273.15 (SI brochure).

use std::fmt;
use std::ops::{Div, Mul};

/// Exponents of metre, kilogram, second, kelvin. Plane angle is
/// dimensionless, as in SI and udunits.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Default)]
pub struct Dimension([i32; 4]);

#[derive(Debug, Clone, PartialEq)]
pub struct Unit {
    /// value in SI = value * scale + offset
    scale: f64,
    offset: f64,
    dimension: Dimension,
    text: String,
}

#[derive(Debug, Clone, PartialEq)]
pub struct UnitError {
    pub message: String,
}

impl fmt::Display for UnitError {
    fn fmt(&self, formatter: &mut fmt::Formatter<'_>) -> fmt::Result {
        formatter.write_str(&self.message)
    }
}

impl std::error::Error for UnitError {}

const LENGTH: [i32; 4] = [1, 0, 0, 0];
const MASS: [i32; 4] = [0, 1, 0, 0];
const TIME: [i32; 4] = [0, 0, 1, 0];
const TEMPERATURE: [i32; 4] = [0, 0, 0, 1];
const NONE: [i32; 4] = [0, 0, 0, 0];
const PRESSURE: [i32; 4] = [-1, 1, -2, 0];
const SPEED: [i32; 4] = [1, 0, -1, 0];
const ENERGY: [i32; 4] = [2, 1, -2, 0];

/// (name, scale to SI, offset, dimension)
const ATOMS: &[(&str, f64, f64, [i32; 4])] = &[
    ("m", 1.0, 0.0, LENGTH),
    ("metre", 1.0, 0.0, LENGTH),
    ("meter", 1.0, 0.0, LENGTH),
    ("km", 1000.0, 0.0, LENGTH),
    ("dam", 10.0, 0.0, LENGTH),
    ("cm", 0.01, 0.0, LENGTH),
    ("mm", 0.001, 0.0, LENGTH),
    ("kg", 1.0, 0.0, MASS),
    ("g", 0.001, 0.0, MASS),
    ("s", 1.0, 0.0, TIME),
    ("second", 1.0, 0.0, TIME),
    ("seconds", 1.0, 0.0, TIME),
    ("min", 60.0, 0.0, TIME),
    ("minute", 60.0, 0.0, TIME),
    ("minutes", 60.0, 0.0, TIME),
    ("h", 3600.0, 0.0, TIME),
    ("hour", 3600.0, 0.0, TIME),
    ("hours", 3600.0, 0.0, TIME),
    ("day", 86400.0, 0.0, TIME),
    ("days", 86400.0, 0.0, TIME),
    ("K", 1.0, 0.0, TEMPERATURE),
    ("kelvin", 1.0, 0.0, TEMPERATURE),
    ("degC", 1.0, 273.15, TEMPERATURE),
    ("celsius", 1.0, 273.15, TEMPERATURE),
    ("Pa", 1.0, 0.0, PRESSURE),
    ("hPa", 100.0, 0.0, PRESSURE),
    ("kPa", 1000.0, 0.0, PRESSURE),
    ("millibar", 100.0, 0.0, PRESSURE),
    ("mbar", 100.0, 0.0, PRESSURE),
    ("mb", 100.0, 0.0, PRESSURE),
    ("bar", 100_000.0, 0.0, PRESSURE),
    ("kt", 1852.0 / 3600.0, 0.0, SPEED),
    ("knot", 1852.0 / 3600.0, 0.0, SPEED),
    ("knots", 1852.0 / 3600.0, 0.0, SPEED),
    ("J", 1.0, 0.0, ENERGY),
    ("rad", 1.0, 0.0, NONE),
    ("radian", 1.0, 0.0, NONE),
    ("radians", 1.0, 0.0, NONE),
    ("degree", std::f64::consts::PI / 180.0, 0.0, NONE),
    ("degrees", std::f64::consts::PI / 180.0, 0.0, NONE),
    ("degrees_north", std::f64::consts::PI / 180.0, 0.0, NONE),
    ("degrees_east", std::f64::consts::PI / 180.0, 0.0, NONE),
    ("percent", 0.01, 0.0, NONE),
    ("%", 0.01, 0.0, NONE),
    ("1", 1.0, 0.0, NONE),
];

impl Unit {
    pub fn parse(text: &str) -> Result<Unit, UnitError> {
        let trimmed = text.trim();
        if trimmed.is_empty() {
            return Err(UnitError { message: "empty unit".to_string() });
        }
        let mut parser = UnitParser { text: trimmed, position: 0 };
        let (scale, offset, dimension) = parser.product()?;
        if parser.position < trimmed.len() {
            return Err(UnitError { message: format!("unexpected `{}` in unit `{trimmed}`", &trimmed[parser.position..]) });
        }
        Ok(Unit { scale, offset, dimension: Dimension(dimension), text: trimmed.to_string() })
    }

    pub fn dimension(&self) -> Dimension {
        self.dimension
    }

    pub fn powi(&self, exponent: i32) -> Unit {
        let mut dimension = self.dimension.0;
        for value in &mut dimension {
            *value *= exponent;
        }
        Unit {
            scale: self.scale.powi(exponent),
            offset: 0.0,
            dimension: Dimension(dimension),
            text: format!("({})^{exponent}", self.text),
        }
    }

    /// `(factor, offset)` with value_in_other = value * factor + offset.
    pub fn conversion_to(&self, other: &Unit) -> Result<(f64, f64), UnitError> {
        if self.dimension != other.dimension {
            return Err(UnitError { message: format!("cannot convert {} to {}", self.text, other.text) });
        }
        Ok((self.scale / other.scale, (self.offset - other.offset) / other.scale))
    }
}

impl Mul for Unit {
    type Output = Unit;
    fn mul(self, other: Unit) -> Unit {
        let mut dimension = self.dimension.0;
        for (value, add) in dimension.iter_mut().zip(other.dimension.0) {
            *value += add;
        }
        Unit {
            scale: self.scale * other.scale,
            offset: 0.0,
            dimension: Dimension(dimension),
            text: format!("{} {}", self.text, other.text),
        }
    }
}

impl Div for Unit {
    type Output = Unit;
    fn div(self, other: Unit) -> Unit {
        let mut dimension = self.dimension.0;
        for (value, subtract) in dimension.iter_mut().zip(other.dimension.0) {
            *value -= subtract;
        }
        let other_text = if other.text.contains([' ', '/']) { format!("({})", other.text) } else { other.text };
        Unit {
            scale: self.scale / other.scale,
            offset: 0.0,
            dimension: Dimension(dimension),
            text: format!("{}/{}", self.text, other_text),
        }
    }
}

impl fmt::Display for Unit {
    fn fmt(&self, formatter: &mut fmt::Formatter<'_>) -> fmt::Result {
        formatter.write_str(&self.text)
    }
}

struct UnitParser<'a> {
    text: &'a str,
    position: usize,
}

type Parsed = (f64, f64, [i32; 4]);

impl UnitParser<'_> {
    fn rest(&self) -> &str {
        &self.text[self.position..]
    }

    fn skip_spaces(&mut self) -> bool {
        let before = self.position;
        while self.rest().starts_with([' ', '\t']) {
            self.position += 1;
        }
        self.position > before
    }

    /// factor ((space | . | /) factor)*
    fn product(&mut self) -> Result<Parsed, UnitError> {
        let (mut scale, mut offset, mut dimension) = self.factor()?;
        loop {
            let spaced = self.skip_spaces();
            let divide = if self.rest().starts_with('/') {
                self.position += 1;
                true
            } else if self.rest().starts_with('.') {
                self.position += 1;
                false
            } else if spaced && !self.rest().is_empty() && !self.rest().starts_with(')') {
                false
            } else {
                break;
            };
            self.skip_spaces();
            let (factor_scale, _, factor_dimension) = self.factor()?;
            // An offset survives only on a unit used alone (degC), as in udunits.
            offset = 0.0;
            if divide {
                scale /= factor_scale;
                for (value, subtract) in dimension.iter_mut().zip(factor_dimension) {
                    *value -= subtract;
                }
            } else {
                scale *= factor_scale;
                for (value, add) in dimension.iter_mut().zip(factor_dimension) {
                    *value += add;
                }
            }
        }
        Ok((scale, offset, dimension))
    }

    /// atom exponent? | number | ( product )
    fn factor(&mut self) -> Result<Parsed, UnitError> {
        if self.rest().starts_with('(') {
            self.position += 1;
            self.skip_spaces();
            let inner = self.product()?;
            self.skip_spaces();
            if !self.rest().starts_with(')') {
                return Err(UnitError { message: format!("missing `)` in unit `{}`", self.text) });
            }
            self.position += 1;
            return Ok(inner);
        }
        let number_length =
            self.rest().find(|c: char| !(c.is_ascii_digit() || c == '.' || c == 'e')).unwrap_or(self.rest().len());
        if number_length > 0 && self.rest().starts_with(|c: char| c.is_ascii_digit()) {
            let number = &self.rest()[..number_length];
            let value: f64 = number
                .parse()
                .map_err(|_| UnitError { message: format!("bad number `{number}` in unit `{}`", self.text) })?;
            self.position += number_length;
            return Ok((value, 0.0, NONE));
        }
        let length = self
            .rest()
            .find(|c: char| !(c.is_alphabetic() || c == '_' || c == '%' || c == '°'))
            .unwrap_or(self.rest().len());
        if length == 0 {
            return Err(UnitError { message: format!("expected a unit name in `{}`", self.text) });
        }
        let name = &self.rest()[..length];
        let Some(&(_, scale, offset, dimension)) = ATOMS.iter().find(|(atom, ..)| *atom == name) else {
            return Err(UnitError { message: format!("unknown unit `{name}`") });
        };
        self.position += length;
        let rest = self.rest();
        let caret = usize::from(rest.starts_with('^'));
        let digits_start = caret + usize::from(rest[caret..].starts_with('-'));
        let digits = rest[digits_start..].find(|c: char| !c.is_ascii_digit()).unwrap_or(rest.len() - digits_start);
        if digits > 0 {
            let exponent: i32 = rest[caret..digits_start + digits]
                .parse()
                .map_err(|_| UnitError { message: format!("bad exponent in unit `{}`", self.text) })?;
            self.position += digits_start + digits;
            let mut powered = dimension;
            for value in &mut powered {
                *value *= exponent;
            }
            return Ok((scale.powi(exponent), 0.0, powered));
        }
        Ok((scale, offset, dimension))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn conversions_follow_the_definitions() {
        // 1 hPa = 100 Pa (SI prefix hecto).
        assert_eq!(Unit::parse("hPa").unwrap().conversion_to(&Unit::parse("Pa").unwrap()).unwrap(), (100.0, 0.0));
        // 0 degC = 273.15 K (SI brochure, definition of the Celsius scale).
        let (factor, offset) = Unit::parse("degC").unwrap().conversion_to(&Unit::parse("K").unwrap()).unwrap();
        assert_eq!((factor, offset), (1.0, 273.15));
        // 1 kt = 1852 m / 3600 s.
        let (factor, _) = Unit::parse("kt").unwrap().conversion_to(&Unit::parse("m/s").unwrap()).unwrap();
        assert!((factor - 0.514_444).abs() < 1e-6);
        // K/(100 km) is 1e-5 K/m.
        let (factor, _) = Unit::parse("K/(100 km)").unwrap().conversion_to(&Unit::parse("K m-1").unwrap()).unwrap();
        assert!((factor - 1e-5).abs() < 1e-18);
        assert_eq!(Unit::parse("m2 s-2").unwrap().dimension(), Unit::parse("J/kg").unwrap().dimension());
        assert!(Unit::parse("m").unwrap().conversion_to(&Unit::parse("K").unwrap()).is_err());
        assert!(Unit::parse("furlong").is_err());
    }
}
