//! Units of measure as dimension vectors, read from udunits/CF-style strings.
//!
//! A [`Unit`] is a [`Dimension`] (integer exponents of the SI base quantities)
//! with a `scale` and an `offset`, so that
//!
//! ```text
//! value_in_si = value * scale + offset
//! ```
//!
//! The offset is non-zero only for temperatures with a shifted origin (degC,
//! degF). Such units are *absolute* temperatures: 20 degC is 293.15 K. A
//! temperature *difference* (a thickness-derived layer-mean change, a gradient,
//! a tendency, "5 degC warmer") has no origin: 5 degC of difference is 5 K.
//! [`Unit::as_difference`] gives the difference unit; convert absolute values
//! with the unit as parsed and differences with `as_difference()` on both sides.
//!
//! Strings follow udunits/CF spellings from a fixed table of unit names
//! (see [`Unit::parse`]); they are joined by whitespace, `.` or `*`
//! (multiplication) and `/` (division, left to right), grouped with `(...)`,
//! and raised to integer powers written as a trailing integer (`m2`, `s-1`) or
//! after `**` or `^`. A number is a scale factor (`100 km`, `1e-5 s-1`).
//!
//! Angles: radians and degrees are dimensionless in SI (rad = m/m), so they
//! convert to and from pure numbers, but a [`Dimension`] keeps a separate angle
//! exponent so that callers can tell an angle (`5 degrees`) from a ratio.

use std::fmt;
use std::ops::Range;
use std::str::FromStr;

// The parser of unit strings (lexer, grammar, suggestions) lives in its own
// file; this one holds the dimension algebra, the unit table and `Unit`.
mod parser;
#[allow(unused_imports)]
use parser::*;

// ---------------------------------------------------------------------------
// Dimension
// ---------------------------------------------------------------------------

/// Exponents of the SI base quantities a unit is made of, plus an angle
/// exponent (radian) that SI counts as dimensionless but that callers may want
/// to see.
#[derive(
    Debug, Clone, Copy, PartialEq, Eq, Hash, Default, serde::Serialize, serde::Deserialize,
)]
pub struct Dimension {
    pub length: i8,
    pub mass: i8,
    pub time: i8,
    pub temperature: i8,
    pub amount: i8,
    pub angle: i8,
}

/// Symbols of the base units, in the order canonical strings list them.
const BASE_SYMBOLS: [&str; 6] = ["kg", "m", "s", "K", "mol", "rad"];

impl Dimension {
    /// A pure number.
    pub const DIMENSIONLESS: Dimension = Dimension {
        length: 0,
        mass: 0,
        time: 0,
        temperature: 0,
        amount: 0,
        angle: 0,
    };
    pub const LENGTH: Dimension = Dimension {
        length: 1,
        ..Self::DIMENSIONLESS
    };
    pub const MASS: Dimension = Dimension {
        mass: 1,
        ..Self::DIMENSIONLESS
    };
    pub const TIME: Dimension = Dimension {
        time: 1,
        ..Self::DIMENSIONLESS
    };
    pub const TEMPERATURE: Dimension = Dimension {
        temperature: 1,
        ..Self::DIMENSIONLESS
    };
    pub const AMOUNT: Dimension = Dimension {
        amount: 1,
        ..Self::DIMENSIONLESS
    };
    pub const ANGLE: Dimension = Dimension {
        angle: 1,
        ..Self::DIMENSIONLESS
    };
    /// m s-1
    pub const VELOCITY: Dimension = Dimension {
        length: 1,
        time: -1,
        ..Self::DIMENSIONLESS
    };
    /// m s-2
    pub const ACCELERATION: Dimension = Dimension {
        length: 1,
        time: -2,
        ..Self::DIMENSIONLESS
    };
    /// kg m-1 s-2 (Pa)
    pub const PRESSURE: Dimension = Dimension {
        mass: 1,
        length: -1,
        time: -2,
        ..Self::DIMENSIONLESS
    };
    /// m2 s-2 (geopotential, specific energy)
    pub const SPECIFIC_ENERGY: Dimension = Dimension {
        length: 2,
        time: -2,
        ..Self::DIMENSIONLESS
    };
    /// kg m2 s-2 (J)
    pub const ENERGY: Dimension = Dimension {
        mass: 1,
        length: 2,
        time: -2,
        ..Self::DIMENSIONLESS
    };
    /// kg m s-2 (N)
    pub const FORCE: Dimension = Dimension {
        mass: 1,
        length: 1,
        time: -2,
        ..Self::DIMENSIONLESS
    };
    /// kg m2 s-3 (W)
    pub const POWER: Dimension = Dimension {
        mass: 1,
        length: 2,
        time: -3,
        ..Self::DIMENSIONLESS
    };
    /// s-1
    pub const FREQUENCY: Dimension = Dimension {
        time: -1,
        ..Self::DIMENSIONLESS
    };

    const fn from_exponents(e: [i8; 6]) -> Dimension {
        Dimension {
            mass: e[0],
            length: e[1],
            time: e[2],
            temperature: e[3],
            amount: e[4],
            angle: e[5],
        }
    }

    /// Exponents in the order of `BASE_SYMBOLS`.
    const fn exponents(&self) -> [i8; 6] {
        [
            self.mass,
            self.length,
            self.time,
            self.temperature,
            self.amount,
            self.angle,
        ]
    }

    /// The product of two dimensions; `None` if an exponent leaves the i8 range.
    pub fn checked_mul(self, other: Dimension) -> Option<Dimension> {
        let (a, b) = (self.exponents(), other.exponents());
        let mut out = [0i8; 6];
        for i in 0..6 {
            out[i] = a[i].checked_add(b[i])?;
        }
        Some(Self::from_exponents(out))
    }

    /// The quotient of two dimensions; `None` if an exponent leaves the i8 range.
    pub fn checked_div(self, other: Dimension) -> Option<Dimension> {
        let (a, b) = (self.exponents(), other.exponents());
        let mut out = [0i8; 6];
        for i in 0..6 {
            out[i] = a[i].checked_sub(b[i])?;
        }
        Some(Self::from_exponents(out))
    }

    /// The dimension raised to an integer power; `None` if an exponent leaves
    /// the i8 range.
    pub fn checked_powi(self, power: i32) -> Option<Dimension> {
        let a = self.exponents();
        let mut out = [0i8; 6];
        for i in 0..6 {
            out[i] = i8::try_from(i32::from(a[i]).checked_mul(power)?).ok()?;
        }
        Some(Self::from_exponents(out))
    }

    /// True when no physical exponent is set. The angle exponent is ignored,
    /// as in SI (degrees and radians are dimensionless).
    pub fn is_dimensionless(&self) -> bool {
        self.without_angle() == Self::DIMENSIONLESS
    }

    /// True for a plane angle (radian, degree, degrees_north ...).
    pub fn is_angle(&self) -> bool {
        *self == Self::ANGLE
    }

    /// True when values of the two dimensions convert into each other: equal
    /// exponents apart from the angle exponent, which SI counts as
    /// dimensionless (so rad s-1 converts to s-1).
    pub fn compatible_with(&self, other: &Dimension) -> bool {
        self.without_angle() == other.without_angle()
    }

    fn without_angle(&self) -> Dimension {
        Dimension { angle: 0, ..*self }
    }

    /// The name of the quantity, for the dimensions this trade meets often.
    pub fn quantity_name(&self) -> Option<&'static str> {
        let d = |length, mass, time, temperature, amount, angle| Dimension {
            length,
            mass,
            time,
            temperature,
            amount,
            angle,
        };
        let table: &[(Dimension, &'static str)] = &[
            (d(0, 0, 0, 0, 0, 0), "dimensionless"),
            (d(0, 0, 0, 0, 0, 1), "angle"),
            (d(1, 0, 0, 0, 0, 0), "length"),
            (d(2, 0, 0, 0, 0, 0), "area"),
            (d(3, 0, 0, 0, 0, 0), "volume"),
            (d(0, 1, 0, 0, 0, 0), "mass"),
            (d(0, 0, 1, 0, 0, 0), "time"),
            (d(0, 0, 0, 1, 0, 0), "temperature"),
            (d(0, 0, 0, 0, 1, 0), "amount of substance"),
            (d(1, 0, -1, 0, 0, 0), "velocity"),
            (d(1, 0, -2, 0, 0, 0), "acceleration"),
            (d(-1, 1, -2, 0, 0, 0), "pressure"),
            (d(-2, 1, -2, 0, 0, 0), "pressure gradient"),
            (d(-1, 1, -3, 0, 0, 0), "pressure tendency"),
            (d(2, 0, -2, 0, 0, 0), "specific energy (geopotential)"),
            (d(2, 1, -2, 0, 0, 0), "energy"),
            (d(1, 1, -2, 0, 0, 0), "force"),
            (d(2, 1, -3, 0, 0, 0), "power"),
            (d(0, 0, -1, 0, 0, 0), "frequency or rate"),
            (d(0, 0, -2, 0, 0, 0), "squared frequency"),
            (d(0, 0, -1, 0, 0, 1), "angular velocity"),
            (d(-3, 1, 0, 0, 0, 0), "density"),
            (d(-1, 0, 0, 1, 0, 0), "temperature gradient"),
            (d(0, 0, -1, 1, 0, 0), "temperature tendency"),
            (d(2, 0, -2, -1, 0, 0), "specific heat or gas constant"),
        ];
        table
            .iter()
            .find(|(dim, _)| dim == self)
            .map(|(_, name)| *name)
    }

    /// Prose for messages: "pressure (kg m-1 s-2)", or just the base units
    /// when the quantity has no name here.
    pub fn describe(&self) -> String {
        match self.quantity_name() {
            Some("dimensionless") => "dimensionless (1)".to_string(),
            Some(name) => format!("{name} ({self})"),
            None => self.to_string(),
        }
    }

    fn base_pieces(&self) -> Vec<(&'static str, i32)> {
        BASE_SYMBOLS
            .iter()
            .zip(self.exponents())
            .filter(|(_, e)| *e != 0)
            .map(|(s, e)| (*s, i32::from(e)))
            .collect()
    }
}

/// Base units with exponents, CF style: "kg m-1 s-2", "m s-1", "1".
impl fmt::Display for Dimension {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let text = render_pieces(&self.base_pieces());
        if text.is_empty() {
            f.write_str("1")
        } else {
            f.write_str(&text)
        }
    }
}

/// "m2 s-2": positive exponents first, then negative, each group in the
/// order given; exponent 1 is not written.
fn render_pieces(pieces: &[(&str, i32)]) -> String {
    let positives = pieces.iter().filter(|(_, e)| *e > 0);
    let negatives = pieces.iter().filter(|(_, e)| *e < 0);
    positives
        .chain(negatives)
        .map(|(name, e)| {
            if *e == 1 {
                name.to_string()
            } else {
                format!("{name}{e}")
            }
        })
        .collect::<Vec<_>>()
        .join(" ")
}

// ---------------------------------------------------------------------------
// Errors
// ---------------------------------------------------------------------------

/// What went wrong in a unit string.
#[derive(Debug, Clone, PartialEq)]
pub enum SyntaxErrorKind {
    /// A name that is not in the unit table.
    UnknownName(String),
    /// A character that has no place in a unit string.
    UnexpectedCharacter(char),
    /// A token where another was needed (the `expected` field says which).
    UnexpectedToken(String),
    /// The string ended where more was needed.
    UnexpectedEnd,
    /// A `(` without its `)`.
    UnclosedParenthesis,
    /// A `)` without its `(`.
    UnmatchedParenthesis,
    /// An exponent that is missing, not an integer, or too large.
    BadExponent(String),
    /// A number that cannot be a scale factor (zero, infinite, unreadable).
    BadNumber(String),
    /// A unit with a shifted origin (degC, degF) inside a product, quotient
    /// or power, where the origin has no meaning.
    OffsetInCompound(String),
    /// A time unit with a reference date ("hours since ..."): that is a time
    /// coordinate, read by `crate::calendar`.
    TimeReference,
}

impl fmt::Display for SyntaxErrorKind {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::UnknownName(name) => write!(f, "unknown unit name {name:?}"),
            Self::UnexpectedCharacter(c) => write!(f, "unexpected character {c:?}"),
            Self::UnexpectedToken(t) => write!(f, "unexpected {t:?}"),
            Self::UnexpectedEnd => write!(f, "the unit ends too early"),
            Self::UnclosedParenthesis => write!(f, "'(' is never closed"),
            Self::UnmatchedParenthesis => write!(f, "')' has no matching '('"),
            Self::BadExponent(t) => write!(f, "bad exponent {t:?}"),
            Self::BadNumber(t) => write!(f, "bad scale factor {t:?}"),
            Self::OffsetInCompound(name) => {
                write!(f, "{name:?} has a shifted origin and cannot be multiplied, divided or raised to a power")
            }
            Self::TimeReference => {
                write!(f, "a reference time ('since') belongs to a time coordinate")
            }
        }
    }
}

/// A unit string that could not be read: the string, the byte range of the
/// problem in it, what was found and expected, and a corrected string where a
/// near miss is recognised.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("{kind} at bytes {}..{} of unit {input:?}; expected {expected}{}",
    .span.start, .span.end,
    .suggestion.as_ref().map(|s| format!("; did you mean {s:?}?")).unwrap_or_default())]
pub struct UnitSyntaxError {
    /// The whole string given to [`Unit::parse`].
    pub input: String,
    /// Byte range of the problem within `input`.
    pub span: Range<usize>,
    pub kind: SyntaxErrorKind,
    /// What would have been valid at that place.
    pub expected: String,
    /// The whole unit string corrected, for near misses ("hpa" -> "hPa").
    pub suggestion: Option<String>,
}

/// Errors of parsing, arithmetic and conversion of units.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum UnitError {
    #[error(transparent)]
    Syntax(#[from] UnitSyntaxError),
    /// The two units measure different quantities.
    #[error("cannot convert {from:?}, a {}, to {to:?}, a {}",
        .from_dimension.describe(), .to_dimension.describe())]
    IncompatibleDimensions {
        from: String,
        from_dimension: Dimension,
        to: String,
        to_dimension: Dimension,
    },
    /// Multiplication, division or a power of a unit with a shifted origin.
    #[error("cannot {operation} {unit:?}: it has a shifted origin (an absolute temperature); use its difference unit {difference:?} instead")]
    OffsetArithmetic {
        unit: String,
        operation: &'static str,
        difference: String,
    },
    /// An exponent beyond the supported range (-128..=127 per base quantity).
    #[error("exponents of {unit:?} raised to {power} leave the supported range -128..=127")]
    ExponentOverflow { unit: String, power: i32 },
    /// A scale that is zero, negative, infinite or NaN, or an offset that is
    /// not finite.
    #[error("a unit needs a positive finite scale and a finite offset; got scale {scale}, offset {offset}")]
    InvalidScale { scale: f64, offset: f64 },
}

// ---------------------------------------------------------------------------
// Unit table
// ---------------------------------------------------------------------------

/// The international knot, one nautical mile (1852 m, exact) per hour.
const KNOT: f64 = 1852.0 / 3600.0;
const DEGREE: f64 = std::f64::consts::PI / 180.0;
/// degC: T/K = t/degC + 273.15 (SI brochure, definition of the Celsius scale).
const CELSIUS_OFFSET: f64 = 273.15;
/// degF: T/K = (t/degF + 459.67) * 5/9 (NIST SP 811, appendix B).
const FAHRENHEIT_SCALE: f64 = 5.0 / 9.0;
const FAHRENHEIT_OFFSET: f64 = 459.67 * 5.0 / 9.0;

/// A spelling with a fixed meaning; no prefixes.
struct FixedName {
    names: &'static [&'static str],
    dimension: Dimension,
    scale: f64,
    offset: f64,
}

const fn fixed(names: &'static [&'static str], dimension: Dimension, scale: f64) -> FixedName {
    FixedName {
        names,
        dimension,
        scale,
        offset: 0.0,
    }
}

/// Spellings with a fixed meaning, looked up before any prefix is tried, so
/// "min" is a minute, "h" an hour, "d" a day, "mb" a millibar and "kt" a knot.
static FIXED_NAMES: &[FixedName] = &[
    fixed(
        &[
            "K",
            "kelvin",
            "kelvins",
            "degK",
            "deg_K",
            "degree_K",
            "degrees_K",
        ],
        Dimension::TEMPERATURE,
        1.0,
    ),
    FixedName {
        names: &[
            "degC",
            "deg_C",
            "degree_C",
            "degrees_C",
            "degree_Celsius",
            "degrees_Celsius",
            "celsius",
            "Celsius",
            "°C",
        ],
        dimension: Dimension::TEMPERATURE,
        scale: 1.0,
        offset: CELSIUS_OFFSET,
    },
    FixedName {
        names: &[
            "degF",
            "deg_F",
            "degree_F",
            "degrees_F",
            "degree_Fahrenheit",
            "degrees_Fahrenheit",
            "fahrenheit",
            "Fahrenheit",
            "°F",
        ],
        dimension: Dimension::TEMPERATURE,
        scale: FAHRENHEIT_SCALE,
        offset: FAHRENHEIT_OFFSET,
    },
    fixed(&["kg", "kilogram", "kilograms"], Dimension::MASS, 1.0),
    fixed(&["sec", "secs"], Dimension::TIME, 1.0),
    // Written out: the symbol "ms" is refused (see `lookup_name`).
    fixed(&["millisecond", "milliseconds"], Dimension::TIME, 1e-3),
    fixed(&["min", "minute", "minutes"], Dimension::TIME, 60.0),
    fixed(&["h", "hr", "hour", "hours"], Dimension::TIME, 3600.0),
    fixed(&["d", "day", "days"], Dimension::TIME, 86400.0),
    fixed(&["Hz", "hertz"], Dimension::FREQUENCY, 1.0),
    fixed(&["mb"], Dimension::PRESSURE, 100.0),
    // Geopotential metre: a height whose geopotential is g0 times it; as a unit
    // of height it is the metre (common practice in upper-air data).
    fixed(&["gpm"], Dimension::LENGTH, 1.0),
    fixed(&["kt", "kts", "knot", "knots"], Dimension::VELOCITY, KNOT),
    fixed(&["%", "percent"], Dimension::DIMENSIONLESS, 0.01),
    fixed(&["rad", "radian", "radians"], Dimension::ANGLE, 1.0),
    fixed(
        &[
            "degree",
            "degrees",
            "°",
            "degrees_north",
            "degree_north",
            "degree_N",
            "degrees_N",
            "degreeN",
            "degreesN",
            "degrees_east",
            "degree_east",
            "degree_E",
            "degrees_E",
            "degreeE",
            "degreesE",
        ],
        Dimension::ANGLE,
        DEGREE,
    ),
];

/// A unit that takes SI prefixes: its symbol (with symbol prefixes) and its
/// long names (with long prefixes and a plural "s").
struct PrefixedBase {
    symbol: &'static str,
    long_names: &'static [&'static str],
    dimension: Dimension,
    scale: f64,
    /// The prefix symbols this base accepts; their long forms go with the
    /// long names.
    prefixes: &'static [&'static str],
}

struct Prefix {
    symbol: &'static str,
    long: &'static [&'static str],
    factor: f64,
}

/// The SI prefixes this module knows (SI brochure, table 7), a deliberate
/// subset: the ones met on the quantities of this trade.
static PREFIXES: &[Prefix] = &[
    Prefix {
        symbol: "k",
        long: &["kilo"],
        factor: 1e3,
    },
    Prefix {
        symbol: "h",
        long: &["hecto"],
        factor: 1e2,
    },
    Prefix {
        symbol: "da",
        long: &["deca", "deka"],
        factor: 1e1,
    },
    Prefix {
        symbol: "d",
        long: &["deci"],
        factor: 1e-1,
    },
    Prefix {
        symbol: "c",
        long: &["centi"],
        factor: 1e-2,
    },
    Prefix {
        symbol: "m",
        long: &["milli"],
        factor: 1e-3,
    },
    Prefix {
        symbol: "u",
        long: &["micro"],
        factor: 1e-6,
    },
    Prefix {
        symbol: "µ",
        long: &[],
        factor: 1e-6,
    },
    Prefix {
        symbol: "μ",
        long: &[],
        factor: 1e-6,
    },
];

const ALL_PREFIXES: &[&str] = &["k", "h", "da", "d", "c", "m", "u", "µ", "μ"];

static PREFIXED_BASES: &[PrefixedBase] = &[
    PrefixedBase {
        symbol: "m",
        long_names: &["metre", "meter"],
        dimension: Dimension::LENGTH,
        scale: 1.0,
        prefixes: ALL_PREFIXES,
    },
    // "kg" is a fixed name (scale exactly 1); the other prefixes go here.
    PrefixedBase {
        symbol: "g",
        long_names: &["gram"],
        dimension: Dimension::MASS,
        scale: 1e-3,
        prefixes: &["h", "da", "d", "c", "m", "u", "µ", "μ"],
    },
    // Only micro on the symbol: "ms" would be a millisecond, but in this trade
    // "ms-1" is nearly always a mistyped "m s-1", so it is refused with that
    // suggestion ("millisecond" is a fixed name).
    PrefixedBase {
        symbol: "s",
        long_names: &["second"],
        dimension: Dimension::TIME,
        scale: 1.0,
        prefixes: &["u", "µ", "μ"],
    },
    PrefixedBase {
        symbol: "Pa",
        long_names: &["pascal"],
        dimension: Dimension::PRESSURE,
        scale: 1.0,
        prefixes: ALL_PREFIXES,
    },
    PrefixedBase {
        symbol: "bar",
        long_names: &["bar"],
        dimension: Dimension::PRESSURE,
        scale: 1e5,
        prefixes: ALL_PREFIXES,
    },
    PrefixedBase {
        symbol: "J",
        long_names: &["joule"],
        dimension: Dimension::ENERGY,
        scale: 1.0,
        prefixes: ALL_PREFIXES,
    },
    PrefixedBase {
        symbol: "W",
        long_names: &["watt"],
        dimension: Dimension::POWER,
        scale: 1.0,
        prefixes: ALL_PREFIXES,
    },
    PrefixedBase {
        symbol: "N",
        long_names: &["newton"],
        dimension: Dimension::FORCE,
        scale: 1.0,
        prefixes: ALL_PREFIXES,
    },
    PrefixedBase {
        symbol: "mol",
        long_names: &["mole"],
        dimension: Dimension::AMOUNT,
        scale: 1.0,
        prefixes: ALL_PREFIXES,
    },
];

/// What a name in the table stands for.
#[derive(Debug, Clone, Copy)]
struct NamedUnit {
    dimension: Dimension,
    scale: f64,
    offset: f64,
}

/// Look a single unit name up: fixed names first, then prefixed bases.
fn lookup_name(name: &str) -> Option<NamedUnit> {
    if let Some(entry) = FIXED_NAMES.iter().find(|e| e.names.contains(&name)) {
        return Some(NamedUnit {
            dimension: entry.dimension,
            scale: entry.scale,
            offset: entry.offset,
        });
    }
    for base in PREFIXED_BASES {
        let found = |factor: f64| {
            Some(NamedUnit {
                dimension: base.dimension,
                scale: factor * base.scale,
                offset: 0.0,
            })
        };
        if name == base.symbol {
            return found(1.0);
        }
        for prefix in PREFIXES
            .iter()
            .filter(|p| base.prefixes.contains(&p.symbol))
        {
            if name.strip_prefix(prefix.symbol) == Some(base.symbol) {
                return found(prefix.factor);
            }
        }
        let singular = name.strip_suffix('s');
        for candidate in std::iter::once(name).chain(singular) {
            for long in base.long_names {
                if candidate == *long {
                    return found(1.0);
                }
                for prefix in PREFIXES
                    .iter()
                    .filter(|p| base.prefixes.contains(&p.symbol))
                {
                    for long_prefix in prefix.long {
                        if candidate.strip_prefix(long_prefix) == Some(long) {
                            return found(prefix.factor);
                        }
                    }
                }
            }
        }
    }
    None
}

/// Every spelling the table accepts, for "did you mean" hints.
fn all_spellings() -> Vec<String> {
    let mut out: Vec<String> = FIXED_NAMES
        .iter()
        .flat_map(|e| e.names.iter().map(|n| n.to_string()))
        .collect();
    for base in PREFIXED_BASES {
        out.push(base.symbol.to_string());
        for prefix in PREFIXES
            .iter()
            .filter(|p| base.prefixes.contains(&p.symbol))
        {
            out.push(format!("{}{}", prefix.symbol, base.symbol));
        }
        for long in base.long_names {
            out.push(long.to_string());
            out.push(format!("{long}s"));
            for prefix in PREFIXES
                .iter()
                .filter(|p| base.prefixes.contains(&p.symbol))
            {
                for long_prefix in prefix.long {
                    out.push(format!("{long_prefix}{long}"));
                    out.push(format!("{long_prefix}{long}s"));
                }
            }
        }
    }
    out
}

const EXPECTED_UNIT: &str = "a unit name (such as K, degC, Pa, hPa, m, km, dam, s, h, day, kt, degrees, 1), a number or '('";

// ---------------------------------------------------------------------------
// Unit
// ---------------------------------------------------------------------------

/// A unit of measure: `value_in_si = value * scale + offset`.
///
/// Equality compares dimension, scale and offset exactly and ignores the
/// spelling, so `hPa == millibar`.
#[derive(Debug, Clone)]
pub struct Unit {
    dimension: Dimension,
    scale: f64,
    offset: f64,
    /// The string this unit was parsed from, kept for display.
    symbol: Option<String>,
}

impl PartialEq for Unit {
    fn eq(&self, other: &Self) -> bool {
        self.dimension == other.dimension
            && self.scale == other.scale
            && self.offset == other.offset
    }
}

/// Failures of the arithmetic inside the parser, before they get a span.
enum ArithmeticProblem {
    Offset,
    ExponentOverflow,
    ScaleOutOfRange,
}

impl Unit {
    /// A unit from its parts.
    ///
    /// Fails with [`UnitError::InvalidScale`] unless `scale` is positive and
    /// finite and `offset` finite.
    pub fn new(dimension: Dimension, scale: f64, offset: f64) -> Result<Unit, UnitError> {
        if !(scale.is_finite() && scale > 0.0 && offset.is_finite()) {
            return Err(UnitError::InvalidScale { scale, offset });
        }
        Ok(Unit {
            dimension,
            scale,
            offset,
            symbol: None,
        })
    }

    /// The coherent SI unit of a dimension (scale 1, no offset), e.g. m s-1.
    pub fn si(dimension: Dimension) -> Unit {
        Unit {
            dimension,
            scale: 1.0,
            offset: 0.0,
            symbol: None,
        }
    }

    /// The pure number 1.
    pub fn dimensionless() -> Unit {
        Unit::si(Dimension::DIMENSIONLESS)
    }

    pub fn dimension(&self) -> Dimension {
        self.dimension
    }

    /// Multiply a value in this unit by this to get the SI value (before the
    /// offset is added).
    pub fn scale(&self) -> f64 {
        self.scale
    }

    /// SI value of this unit's zero (273.15 for degC, 0 for most units).
    pub fn offset(&self) -> f64 {
        self.offset
    }

    /// The spelling this unit was parsed from ("hPa", "m/s"); `None` for the
    /// results of arithmetic and for units built from parts.
    pub fn symbol(&self) -> Option<&str> {
        self.symbol.as_deref()
    }

    /// True for a shifted origin (degC, degF): an absolute temperature scale.
    pub fn has_offset(&self) -> bool {
        self.offset != 0.0
    }

    /// True for a plane angle (degrees, radians, degrees_north ...).
    pub fn is_angle(&self) -> bool {
        self.dimension.is_angle()
    }

    /// True when the unit converts to the pure number 1 (angles included,
    /// as in SI).
    pub fn is_dimensionless(&self) -> bool {
        self.dimension.is_dimensionless()
    }

    /// True when values convert between the two units (see
    /// [`Dimension::compatible_with`]).
    pub fn is_compatible(&self, other: &Unit) -> bool {
        self.dimension.compatible_with(&other.dimension)
    }

    /// The same unit for differences: the origin dropped (degC -> K,
    /// degF -> 5/9 K), everything else unchanged.
    ///
    /// Use it for temperature differences, gradients, tendencies and spreads
    /// (a change of 1 degC is a change of 1 K); convert absolute temperatures
    /// with the unit itself (20 degC is 293.15 K). A unit without an offset is
    /// returned as it is, spelling included.
    pub fn as_difference(&self) -> Unit {
        if self.offset == 0.0 {
            return self.clone();
        }
        Unit {
            dimension: self.dimension,
            scale: self.scale,
            offset: 0.0,
            symbol: None,
        }
    }

    /// Read a udunits/CF unit string.
    ///
    /// Accepted names (a fixed table, not every udunits name):
    /// K, kelvin, degK; degC, deg_C, degree_C, degree_Celsius, celsius, °C;
    /// degF, degree_Fahrenheit; Pa, hPa, kPa, bar, mbar, millibar, mb; m, km,
    /// dam, cm, mm, metre(s)/meter(s) with long prefixes, gpm (geopotential
    /// metre, as m); kg, g; s, sec, second(s), min, minute(s), h, hr, hour(s),
    /// d, day(s); kt, kts, knot(s); rad, radian(s), degree(s), °,
    /// degrees_north, degree_N, degreeN, degrees_east, degree_E, degreeE (and
    /// their other CF spellings); J, W, N, Hz, mol; %, percent; numbers.
    /// SI prefixes k, h, da, d, c, m, u (µ) go on m, g, Pa, bar, J, W, N and
    /// mol; only micro goes on the symbol s, because "ms-1" is nearly always
    /// a mistyped "m s-1" ("millisecond" is accepted written out).
    ///
    /// Grammar: factors joined by whitespace, `.` or `*` multiply, `/`
    /// divides the product so far (left to right, so "m/s/s" is m s-2 and
    /// "K/(100 km)" needs its parentheses); an integer exponent follows a name
    /// or `)` directly (`m2`, `s-1`) or after `**`/`^` (`s**-1`, `m^2`). The
    /// empty string and "1" are dimensionless. `U @ x` shifts the origin of
    /// U by x units (udunits notation, `K @ 273.15` is degC).
    ///
    /// Fails with [`UnitError::Syntax`] carrying the byte span and what was
    /// expected: unknown names (with a corrected string for near misses such
    /// as "hpa" or "ms-1"), stray characters, unbalanced parentheses, missing
    /// or out-of-range exponents, zero or infinite numbers, an offset unit
    /// (degC) inside a product or power, or a reference time ("hours since
    /// ...", which `crate::calendar` reads).
    pub fn parse(text: &str) -> Result<Unit, UnitError> {
        // Before lexing: the date after "since" would fail as a stray '-'.
        if let Some(span) = find_word(text, "since") {
            return Err(syntax_error(
                text,
                span,
                SyntaxErrorKind::TimeReference,
                "a unit without a reference time; time coordinates such as \"hours since 1900-01-01\" are read by the calendar module",
                None,
            ));
        }
        let tokens = lex(text)?;
        let mut parser = Parser {
            input: text,
            tokens,
            position: 0,
            offset_names: Vec::new(),
        };
        let mut unit = parser.parse_all()?;
        let trimmed = text.trim();
        unit.symbol = if trimmed.is_empty() {
            None
        } else {
            Some(trimmed.to_string())
        };
        Ok(unit)
    }

    /// The product of two units.
    ///
    /// Fails with [`UnitError::OffsetArithmetic`] if either has a shifted
    /// origin (degC), [`UnitError::ExponentOverflow`] if an exponent leaves
    /// the i8 range, [`UnitError::InvalidScale`] if the scale overflows.
    pub fn multiply(&self, other: &Unit) -> Result<Unit, UnitError> {
        combine(self, other, false).map_err(|p| self.arithmetic_error(p, other, "multiply", 1))
    }

    /// The quotient of two units. Fails as [`Unit::multiply`] does.
    pub fn divide(&self, other: &Unit) -> Result<Unit, UnitError> {
        combine(self, other, true).map_err(|p| self.arithmetic_error(p, other, "divide", -1))
    }

    /// The unit raised to an integer power (`power` 0 gives 1, 1 gives the
    /// unit itself even with an offset).
    ///
    /// Fails with [`UnitError::OffsetArithmetic`] for other powers of a unit
    /// with a shifted origin, [`UnitError::ExponentOverflow`] or
    /// [`UnitError::InvalidScale`] when the result leaves the supported range.
    pub fn powi(&self, power: i32) -> Result<Unit, UnitError> {
        raise(self, power).map_err(|p| self.arithmetic_error(p, self, "raise to a power", power))
    }

    fn arithmetic_error(
        &self,
        problem: ArithmeticProblem,
        other: &Unit,
        operation: &'static str,
        power: i32,
    ) -> UnitError {
        match problem {
            ArithmeticProblem::Offset => {
                let culprit = if self.has_offset() { self } else { other };
                UnitError::OffsetArithmetic {
                    unit: culprit.to_string(),
                    operation,
                    difference: culprit.as_difference().to_string(),
                }
            }
            ArithmeticProblem::ExponentOverflow => UnitError::ExponentOverflow {
                unit: self.to_string(),
                power,
            },
            ArithmeticProblem::ScaleOutOfRange => UnitError::InvalidScale {
                scale: if power < 0 {
                    self.scale / other.scale
                } else {
                    self.scale * other.scale
                },
                offset: 0.0,
            },
        }
    }

    /// The factor and offset that take a value in this unit to `to`:
    /// `value_in_to = value * factor + offset`. Meant for whole arrays
    /// (compute once, apply to every element; NaN stays NaN).
    ///
    /// Both units are taken as given: degC to K is (1, 273.15). For
    /// differences call [`Unit::as_difference`] on both first.
    ///
    /// Fails with [`UnitError::IncompatibleDimensions`] when the quantities
    /// differ (an angle converts to a pure number, as in SI).
    pub fn conversion_to(&self, to: &Unit) -> Result<(f64, f64), UnitError> {
        if !self.is_compatible(to) {
            return Err(UnitError::IncompatibleDimensions {
                from: self.to_string(),
                from_dimension: self.dimension,
                to: to.to_string(),
                to_dimension: to.dimension,
            });
        }
        // si = v * s1 + o1 and v2 = (si - o2) / s2.
        let factor = self.scale / to.scale;
        let offset = (self.offset - to.offset) / to.scale;
        Ok((factor, offset))
    }

    /// One value converted to `to`. Fails as [`Unit::conversion_to`] does.
    pub fn convert(&self, value: f64, to: &Unit) -> Result<f64, UnitError> {
        let (factor, offset) = self.conversion_to(to)?;
        Ok(value * factor + offset)
    }

    /// A value in this unit expressed in the coherent SI unit.
    pub fn to_si(&self, value: f64) -> f64 {
        value * self.scale + self.offset
    }

    /// A value in the coherent SI unit expressed in this unit.
    pub fn from_si(&self, value: f64) -> f64 {
        (value - self.offset) / self.scale
    }

    /// The canonical CF-style spelling, whatever the unit was parsed from:
    /// "m s-1", "m2 s-2", "K", "Pa", "hPa", "s-1", "K day-1", "1e-5 K m-1",
    /// "1". Base units come as kg m s K mol rad, positive exponents first; the
    /// derived names Pa, J, N, W and the common scaled names (hPa, km, dam,
    /// min, h, day, degree, kt, %) are used where they give a shorter string
    /// without a number; otherwise the scale is written as a leading number.
    /// Reading this string with [`Unit::parse`] gives the unit back (the
    /// scale to within about 1e-12 relative).
    pub fn canonical(&self) -> String {
        if self.offset != 0.0 {
            if let Some(entry) = FIXED_NAMES.iter().find(|e| {
                e.offset != 0.0
                    && e.scale == self.scale
                    && e.offset == self.offset
                    && e.dimension == self.dimension
            }) {
                return entry.names[0].to_string();
            }
            return format!(
                "{} @ {}",
                self.as_difference().canonical(),
                format_number(self.offset / self.scale)
            );
        }
        struct Candidate {
            number: Option<f64>,
            pieces: Vec<(&'static str, i32)>,
        }
        let needs_number = |scale: f64| {
            if (scale - 1.0).abs() <= 1e-12 {
                None
            } else {
                Some(scale)
            }
        };
        let mut best = Candidate {
            number: needs_number(self.scale),
            pieces: self.dimension.base_pieces(),
        };
        // No number, then fewest names, then (for ties such as "kg s-3"
        // against "W m-2") no kilogram, which derived names usually absorb.
        let score = |c: &Candidate| {
            (
                c.number.is_some(),
                c.pieces.len(),
                c.pieces.iter().any(|(n, _)| *n == "kg"),
            )
        };
        for lead in CANONICAL_LEADS {
            for power in [1, -1] {
                let Some(lead_dimension) = lead.dimension.checked_powi(power) else {
                    continue;
                };
                let Some(rest) = self.dimension.checked_div(lead_dimension) else {
                    continue;
                };
                // A scaled name against its own base ("m km-1" for 1e-3) says
                // nothing; coherent derived names may (W m-2).
                let opposed = lead_dimension
                    .exponents()
                    .iter()
                    .zip(rest.exponents())
                    .any(|(a, b)| i32::from(*a) * i32::from(b) < 0);
                if lead.scale != 1.0 && opposed {
                    continue;
                }
                let mut pieces = vec![(lead.name, power)];
                pieces.extend(rest.base_pieces());
                let candidate = Candidate {
                    number: needs_number(self.scale / lead.scale.powi(power)),
                    pieces,
                };
                // Strictly better only, so ties keep the plain base units.
                if score(&candidate) < score(&best) {
                    best = candidate;
                }
            }
        }
        let text = render_pieces(&best.pieces);
        match (best.number, text.is_empty()) {
            (None, true) => "1".to_string(),
            (None, false) => text,
            (Some(number), true) => format_number(number),
            (Some(number), false) => format!("{} {}", format_number(number), text),
        }
    }
}

/// Names the canonical spelling may lead with.
struct Lead {
    name: &'static str,
    dimension: Dimension,
    scale: f64,
}

static CANONICAL_LEADS: &[Lead] = &[
    Lead {
        name: "Pa",
        dimension: Dimension::PRESSURE,
        scale: 1.0,
    },
    Lead {
        name: "J",
        dimension: Dimension::ENERGY,
        scale: 1.0,
    },
    Lead {
        name: "N",
        dimension: Dimension::FORCE,
        scale: 1.0,
    },
    Lead {
        name: "W",
        dimension: Dimension::POWER,
        scale: 1.0,
    },
    Lead {
        name: "hPa",
        dimension: Dimension::PRESSURE,
        scale: 100.0,
    },
    Lead {
        name: "km",
        dimension: Dimension::LENGTH,
        scale: 1000.0,
    },
    Lead {
        name: "dam",
        dimension: Dimension::LENGTH,
        scale: 10.0,
    },
    Lead {
        name: "min",
        dimension: Dimension::TIME,
        scale: 60.0,
    },
    Lead {
        name: "h",
        dimension: Dimension::TIME,
        scale: 3600.0,
    },
    Lead {
        name: "day",
        dimension: Dimension::TIME,
        scale: 86400.0,
    },
    Lead {
        name: "degree",
        dimension: Dimension::ANGLE,
        scale: DEGREE,
    },
    Lead {
        name: "kt",
        dimension: Dimension::VELOCITY,
        scale: KNOT,
    },
    Lead {
        name: "%",
        dimension: Dimension::DIMENSIONLESS,
        scale: 0.01,
    },
];

/// The shorter of plain and exponent notation (both round-trip exactly).
fn format_number(x: f64) -> String {
    let plain = format!("{x}");
    let exponent = format!("{x:e}");
    if exponent.len() < plain.len() {
        exponent
    } else {
        plain
    }
}

fn checked_unit(dimension: Option<Dimension>, scale: f64) -> Result<Unit, ArithmeticProblem> {
    let dimension = dimension.ok_or(ArithmeticProblem::ExponentOverflow)?;
    if !(scale.is_finite() && scale > 0.0) {
        return Err(ArithmeticProblem::ScaleOutOfRange);
    }
    Ok(Unit {
        dimension,
        scale,
        offset: 0.0,
        symbol: None,
    })
}

fn combine(a: &Unit, b: &Unit, divide: bool) -> Result<Unit, ArithmeticProblem> {
    if a.has_offset() || b.has_offset() {
        return Err(ArithmeticProblem::Offset);
    }
    if divide {
        checked_unit(a.dimension.checked_div(b.dimension), a.scale / b.scale)
    } else {
        checked_unit(a.dimension.checked_mul(b.dimension), a.scale * b.scale)
    }
}

fn raise(a: &Unit, power: i32) -> Result<Unit, ArithmeticProblem> {
    if power == 1 {
        return Ok(Unit {
            symbol: None,
            ..a.clone()
        });
    }
    if a.has_offset() {
        return Err(ArithmeticProblem::Offset);
    }
    checked_unit(a.dimension.checked_powi(power), a.scale.powi(power))
}

/// The stored spelling if there is one, else the canonical one.
impl fmt::Display for Unit {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match &self.symbol {
            Some(symbol) => f.write_str(symbol),
            None => f.write_str(&self.canonical()),
        }
    }
}

impl FromStr for Unit {
    type Err = UnitError;
    fn from_str(text: &str) -> Result<Unit, UnitError> {
        Unit::parse(text)
    }
}

/// Serialised as its display string, read back with [`Unit::parse`].
impl serde::Serialize for Unit {
    fn serialize<S: serde::Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        serializer.serialize_str(&self.to_string())
    }
}

impl<'de> serde::Deserialize<'de> for Unit {
    fn deserialize<D: serde::Deserializer<'de>>(deserializer: D) -> Result<Unit, D::Error> {
        let text = String::deserialize(deserializer)?;
        Unit::parse(&text).map_err(serde::de::Error::custom)
    }
}

// ---------------------------------------------------------------------------
// Tests
// ---------------------------------------------------------------------------

/// The one spelling of each unit Baroc writes, in figures, tables, NetCDF
/// output and messages alike: udunits/CF style (space-separated factors,
/// signed integer exponents), as [`Unit::canonical`] writes them. Outputs
/// take their unit words from here or from [`spelling`], never from a
/// string of their own.
pub mod spelled {
    pub const METRES_PER_SECOND: &str = "m s-1";
    pub const KNOTS: &str = "kt";
    pub const KELVIN: &str = "K";
    pub const KELVIN_PER_DAY: &str = "K day-1";
    pub const KELVIN_PER_SECOND: &str = "K s-1";
    pub const METRES: &str = "m";
    pub const DECAMETRES: &str = "dam";
    pub const KILOMETRES: &str = "km";
    pub const HECTOPASCALS: &str = "hPa";
    pub const DEGREES: &str = "degree";
    pub const PER_SECOND: &str = "s-1";
    pub const PER_SECOND_SQUARED: &str = "s-2";
    pub const GEOPOTENTIAL: &str = "m2 s-2";
}

/// Every spelling of [`spelled`], for checks that outputs agree with it.
pub const SPELLINGS: &[&str] = &[
    spelled::METRES_PER_SECOND,
    spelled::KNOTS,
    spelled::KELVIN,
    spelled::KELVIN_PER_DAY,
    spelled::KELVIN_PER_SECOND,
    spelled::METRES,
    spelled::DECAMETRES,
    spelled::KILOMETRES,
    spelled::HECTOPASCALS,
    spelled::DEGREES,
    spelled::PER_SECOND,
    spelled::PER_SECOND_SQUARED,
    spelled::GEOPOTENTIAL,
];

/// The spelling Baroc writes for a unit given in any accepted form ("m/s",
/// "m s**-1", "meter second-1" all give "m s-1"); text that is not a unit
/// is returned trimmed, unchanged.
pub fn spelling(text: &str) -> String {
    match Unit::parse(text) {
        Ok(unit) if !text.trim().is_empty() => unit.canonical(),
        _ => text.trim().to_string(),
    }
}


#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    fn unit(text: &str) -> Unit {
        Unit::parse(text).unwrap_or_else(|e| panic!("{text:?} should parse: {e}"))
    }

    fn syntax(text: &str) -> UnitSyntaxError {
        match Unit::parse(text) {
            Err(UnitError::Syntax(e)) => e,
            other => panic!("{text:?} should fail to parse, got {other:?}"),
        }
    }

    fn convert(value: f64, from: &str, to: &str) -> f64 {
        unit(from).convert(value, &unit(to)).unwrap()
    }

    #[test]
    fn knot_is_one_nautical_mile_per_hour() {
        // International nautical mile = 1852 m exactly (SI brochure, 9th ed.,
        // table 8); 1 kt = 1852/3600 m s-1.
        for spelling in ["kt", "kts", "knot", "knots"] {
            assert_relative_eq!(
                convert(1.0, spelling, "m s-1"),
                1852.0 / 3600.0,
                max_relative = 1e-15
            );
        }
        assert_relative_eq!(
            convert(10.0, "m/s", "kt"),
            10.0 * 3600.0 / 1852.0,
            max_relative = 1e-15
        );
    }

    #[test]
    fn pressure_units() {
        // 1 hPa = 100 Pa (SI prefix hecto); 1 mbar = 1 hPa (WMO, the
        // millibar and the hectopascal are equal); 1 bar = 1e5 Pa (SI brochure).
        assert_eq!(convert(1.0, "hPa", "Pa"), 100.0);
        for spelling in ["millibar", "millibars", "mbar", "mb", "hectopascal"] {
            assert_eq!(unit(spelling), unit("hPa"), "{spelling}");
        }
        assert_eq!(convert(1.0, "bar", "Pa"), 1e5);
        assert_relative_eq!(
            convert(101.325, "kPa", "hPa"),
            1013.25,
            max_relative = 1e-15
        );
        assert_eq!(unit("Pa").dimension(), Dimension::PRESSURE);
        assert_eq!(unit("kg m-1 s-2"), unit("Pa"));
    }

    #[test]
    fn temperature_scales() {
        // 0 degC = 273.15 K: the definition of the Celsius scale (SI brochure).
        for spelling in [
            "degC",
            "degree_Celsius",
            "degrees_Celsius",
            "celsius",
            "deg_C",
            "°C",
        ] {
            assert_eq!(convert(0.0, spelling, "K"), 273.15, "{spelling}");
        }
        assert_relative_eq!(convert(300.0, "K", "degC"), 26.85, max_relative = 1e-12);
        // T/K = (t/degF + 459.67) * 5/9 (NIST SP 811): 32 degF freezes water
        // at 273.15 K, 212 degF boils at 100 degC.
        assert_relative_eq!(convert(32.0, "degF", "K"), 273.15, max_relative = 1e-12);
        assert_relative_eq!(convert(212.0, "degF", "degC"), 100.0, max_relative = 1e-12);
        assert_relative_eq!(convert(-40.0, "degC", "degF"), -40.0, max_relative = 1e-12);
        assert!(unit("degC").has_offset());
        assert!(!unit("K").has_offset());
    }

    #[test]
    fn temperature_differences_drop_the_origin() {
        // A change of 1 degC is a change of 1 K; 9 degF of difference is 5 K
        // (the scales' definitions above).
        let celsius = unit("degC").as_difference();
        assert_eq!(celsius.convert(1.0, &unit("K")).unwrap(), 1.0);
        assert_eq!(celsius, unit("K"));
        assert_eq!(celsius.to_string(), "K");
        let fahrenheit = unit("degF").as_difference();
        assert_relative_eq!(
            fahrenheit.convert(9.0, &unit("K")).unwrap(),
            5.0,
            max_relative = 1e-12
        );
        // Absolute conversion with the same numbers differs.
        assert_eq!(unit("degC").convert(1.0, &unit("K")).unwrap(), 274.15);
        // A unit without an offset keeps its spelling.
        assert_eq!(unit("hPa").as_difference().to_string(), "hPa");
    }

    #[test]
    fn lengths_and_geopotential() {
        // 1 dam = 10 m, 1 km = 1000 m (SI prefixes deca, kilo).
        assert_eq!(convert(1.0, "dam", "m"), 10.0);
        assert_eq!(convert(552.0, "dam", "m"), 5520.0);
        assert_eq!(convert(1.0, "km", "m"), 1000.0);
        for spelling in ["metre", "meters", "kilometres", "decametre", "dekameters"] {
            assert!(
                unit(spelling).dimension() == Dimension::LENGTH,
                "{spelling}"
            );
        }
        assert_eq!(unit("decametre"), unit("dam"));
        // Geopotential metre is a metre of height (common practice).
        assert_eq!(unit("gpm"), unit("m"));
        // Geopotential (m2 s-2) divided by gravity (m s-2) is a height (m).
        let height = unit("m2 s-2").divide(&unit("m s-2")).unwrap();
        assert_eq!(height, unit("m"));
        assert_eq!(height.to_string(), "m");
    }

    #[test]
    fn physics_dimensions_come_out_right() {
        // Hypsometric thickness dz = (Rd/g0) Tbar ln(p_b/p_t): J kg-1 K-1 * K
        // / (m s-2) = m (field guide, formulas).
        let thickness = unit("J kg-1 K-1")
            .multiply(&unit("K"))
            .unwrap()
            .divide(&unit("m s-2"))
            .unwrap();
        assert_eq!(thickness.dimension(), Dimension::LENGTH);
        // Thermal wind u_T = (Rd/f) ln(p_b/p_t) dTbar/dy: J kg-1 K-1 / s-1 *
        // K m-1 = m s-1.
        let thermal_wind = unit("J kg-1 K-1")
            .divide(&unit("s-1"))
            .unwrap()
            .multiply(&unit("K m-1"))
            .unwrap();
        assert_eq!(thermal_wind.dimension(), Dimension::VELOCITY);
        assert_eq!(thermal_wind.to_string(), "m s-1");
        // Static stability N^2 = (g0/theta) dtheta/dz: m s-2 / K * K m-1 = s-2.
        let stability = unit("m s-2")
            .divide(&unit("K"))
            .unwrap()
            .multiply(&unit("K/m"))
            .unwrap();
        assert_eq!(stability, unit("s-2"));
        assert_eq!(
            stability.dimension().quantity_name(),
            Some("squared frequency")
        );
        // Specific energy and gas constant.
        assert_eq!(unit("J kg-1").dimension(), Dimension::SPECIFIC_ENERGY);
        assert_eq!(
            unit("J kg-1 K-1").dimension().quantity_name(),
            Some("specific heat or gas constant")
        );
    }

    #[test]
    fn compound_spellings_agree() {
        let velocity = unit("m s-1");
        for spelling in [
            "m/s",
            "m s**-1",
            "m.s-1",
            "m*s^-1",
            "m s^-1",
            "m ** 1 s ** -1",
            "metre second-1",
        ] {
            assert_eq!(unit(spelling), velocity, "{spelling}");
        }
        assert_eq!(unit("m2 s-2"), unit("m^2/s^2"));
        assert_eq!(unit("m2 s-2"), unit("(m/s)2"));
        assert_eq!(unit("m2 s-2"), unit("(m/s)**2"));
        // "/" divides the product so far, left to right (udunits grammar).
        assert_eq!(unit("m/s/s"), unit("m s-2"));
        assert_eq!(unit("m/s K"), unit("m K s-1"));
        assert!(unit("kg kg-1").is_dimensionless());
        assert_eq!(unit("kg/kg"), unit("1"));
        assert_eq!(unit(""), Unit::dimensionless());
        assert_eq!(unit("  "), Unit::dimensionless());
        assert_eq!(
            unit("g kg-1").convert(5.0, &unit("kg kg-1")).unwrap(),
            0.005
        );
        assert_eq!(unit("%").convert(50.0, &unit("1")).unwrap(), 0.5);
        assert_eq!(unit("kg m-3").dimension().quantity_name(), Some("density"));
    }

    #[test]
    fn numbers_are_scale_factors() {
        // 1 K/(100 km) = 1e-5 K m-1.
        let gradient = unit("K/(100 km)");
        assert_relative_eq!(
            gradient.convert(1.0, &unit("K m-1")).unwrap(),
            1e-5,
            max_relative = 1e-15
        );
        assert_eq!(
            gradient.dimension().quantity_name(),
            Some("temperature gradient")
        );
        assert_eq!(unit("100 km").convert(1.0, &unit("m")).unwrap(), 1e5);
        assert_eq!(unit("1e-5 s-1").scale(), 1e-5);
        assert_eq!(unit("0.5 m").scale(), 0.5);
        assert_eq!(unit("100km"), unit("100 km"));
        // Without parentheses "/" takes only the number: K/100 km is K km/100,
        // a temperature times a length (udunits grammar).
        assert_eq!(
            unit("K/100 km").dimension(),
            Dimension {
                temperature: 1,
                length: 1,
                ..Dimension::DIMENSIONLESS
            }
        );
    }

    #[test]
    fn time_rates() {
        // 1 day = 86400 s, 1 h = 3600 s, 1 min = 60 s (SI brochure, table 8).
        assert_eq!(convert(1.0, "day", "s"), 86400.0);
        assert_eq!(convert(2.0, "hours", "min"), 120.0);
        assert_eq!(unit("h"), unit("hour"));
        assert_relative_eq!(
            convert(1.0, "K/day", "K s-1"),
            1.0 / 86400.0,
            max_relative = 1e-15
        );
        assert_relative_eq!(
            convert(1.0, "K s-1", "K/day"),
            86400.0,
            max_relative = 1e-15
        );
        assert_eq!(unit("s-1").dimension(), Dimension::FREQUENCY);
        assert_eq!(unit("Hz"), unit("s-1"));
    }

    #[test]
    fn angles() {
        // 180 degrees = pi rad (definition of the degree, SI brochure table 8).
        assert_relative_eq!(
            convert(180.0, "degrees", "rad"),
            std::f64::consts::PI,
            max_relative = 1e-15
        );
        for spelling in [
            "degree",
            "degrees_north",
            "degrees_east",
            "degree_N",
            "degreeE",
            "radian",
            "rad",
            "°",
        ] {
            assert!(unit(spelling).is_angle(), "{spelling}");
            // Dimensionless in SI, so convertible to a number.
            assert!(unit(spelling).is_dimensionless(), "{spelling}");
        }
        assert!(!unit("1").is_angle());
        // Earth rotation rate in rad s-1 converts to s-1 (SI: rad = 1).
        assert_eq!(convert(7.292115e-5, "rad s-1", "s-1"), 7.292115e-5);
        assert_eq!(
            unit("rad s-1").dimension().quantity_name(),
            Some("angular velocity")
        );
    }

    #[test]
    fn prefixes_are_a_table_not_a_rule() {
        assert_eq!(convert(1.0, "cm", "m"), 0.01);
        assert_eq!(convert(1.0, "mm", "m"), 0.001);
        assert_eq!(convert(1.0, "g", "kg"), 0.001);
        assert_eq!(convert(1.0, "dbar", "hPa"), 100.0);
        assert_eq!(convert(1.0, "us", "s"), 1e-6);
        assert_eq!(convert(1.0, "millisecond", "s"), 1e-3);
        // Fixed names win over prefixes.
        assert_eq!(unit("min"), unit("minute"));
        assert_eq!(unit("d"), unit("day"));
        assert_eq!(unit("mb"), unit("hPa"));
        // No prefix on K, kt, h and no milli on the symbol s.
        for text in ["kK", "mkt", "kh", "ms", "Mm", "GPa"] {
            assert!(Unit::parse(text).is_err(), "{text} should be refused");
        }
    }

    #[test]
    fn display_keeps_the_spelling_and_canonical_is_cf() {
        assert_eq!(unit("hPa").to_string(), "hPa");
        assert_eq!(unit("m/s").to_string(), "m/s");
        assert_eq!(unit("  knots ").to_string(), "knots");
        assert_eq!(unit("").to_string(), "1");
        assert_eq!(unit("m/s").canonical(), "m s-1");
        assert_eq!(unit("m^2/s^2").canonical(), "m2 s-2");
        assert_eq!(unit("kg m-1 s-2").canonical(), "Pa");
        assert_eq!(unit("millibar").canonical(), "hPa");
        assert_eq!(unit("1/s").canonical(), "s-1");
        assert_eq!(unit("K/s").canonical(), "K s-1");
        assert_eq!(unit("K/day").canonical(), "K day-1");
        assert_eq!(unit("kg/kg").canonical(), "1");
        assert_eq!(unit("J kg-1 K-1").canonical(), "m2 s-2 K-1");
        assert_eq!(unit("kg m-3").canonical(), "kg m-3");
        assert_eq!(unit("K m-1").canonical(), "K m-1");
        assert_eq!(unit("Pa/s").canonical(), "Pa s-1");
        assert_eq!(unit("W/m2").canonical(), "W m-2");
        assert_eq!(unit("K/(100 km)").canonical(), "1e-5 K m-1");
        assert_eq!(unit("degC").canonical(), "degC");
        assert_eq!(unit("celsius").canonical(), "degC");
        assert_eq!(unit("K @ 10").canonical(), "K @ 10");
        assert_eq!(unit("%").canonical(), "%");
        assert_eq!(unit("g kg-1").canonical(), "1e-3");
        assert_eq!(unit("knot").canonical(), "kt");
        assert_eq!(unit("degrees_north").canonical(), "degree");
        // Arithmetic results have no stored spelling.
        let product = unit("m").multiply(&unit("s-1")).unwrap();
        assert_eq!(product.symbol(), None);
        assert_eq!(product.to_string(), "m s-1");
        assert_eq!(Unit::si(Dimension::PRESSURE).to_string(), "Pa");
    }

    #[test]
    fn canonical_strings_read_back_to_the_same_unit() {
        for text in [
            "K",
            "degC",
            "degF",
            "Pa",
            "hPa",
            "millibar",
            "m",
            "km",
            "dam",
            "gpm",
            "s",
            "min",
            "h",
            "day",
            "m s-1",
            "m2 s-2",
            "kg kg-1",
            "1",
            "",
            "%",
            "s-1",
            "s-2",
            "K/day",
            "K s-1",
            "K m-1",
            "K/(100 km)",
            "knots",
            "degrees",
            "degrees_north",
            "rad",
            "J kg-1 K-1",
            "kg m-3",
            "g kg-1",
            "100 km",
            "1e-5 s-1",
            "rad s-1",
            "Pa s-1",
            "hPa/h",
            "kt/h",
            "K @ 10",
            "degree s-1",
            "W m-2",
            "N",
            "mol mol-1",
            "0.3 m",
        ] {
            let original = unit(text);
            let canonical = original.canonical();
            let back = Unit::parse(&canonical)
                .unwrap_or_else(|e| panic!("{text:?} -> {canonical:?}: {e}"));
            assert_eq!(
                back.dimension(),
                original.dimension(),
                "{text:?} -> {canonical:?}"
            );
            assert_relative_eq!(back.scale(), original.scale(), max_relative = 1e-12);
            assert_relative_eq!(back.offset(), original.offset(), max_relative = 1e-12);
        }
    }

    #[test]
    fn dimension_checks() {
        let error = unit("m").conversion_to(&unit("K")).unwrap_err();
        match &error {
            UnitError::IncompatibleDimensions {
                from_dimension,
                to_dimension,
                ..
            } => {
                assert_eq!(*from_dimension, Dimension::LENGTH);
                assert_eq!(*to_dimension, Dimension::TEMPERATURE);
            }
            other => panic!("{other:?}"),
        }
        assert!(error.to_string().contains("length"), "{error}");
        assert!(unit("hPa").convert(500.0, &unit("m")).is_err());
        assert!(unit("m s-1").convert(1.0, &unit("m2 s-2")).is_err());
        assert!(unit("m").is_compatible(&unit("gpm")));
        assert_eq!(Dimension::PRESSURE.describe(), "pressure (kg m-1 s-2)");
        assert_eq!(Dimension::DIMENSIONLESS.to_string(), "1");
    }

    #[test]
    fn conversion_factor_and_offset_for_arrays() {
        let (factor, offset) = unit("degC").conversion_to(&unit("K")).unwrap();
        assert_eq!((factor, offset), (1.0, 273.15));
        let (factor, offset) = unit("K").conversion_to(&unit("degC")).unwrap();
        assert_eq!((factor, offset), (1.0, -273.15));
        let (factor, offset) = unit("Pa").conversion_to(&unit("hPa")).unwrap();
        assert_eq!((factor, offset), (0.01, 0.0));
        // Missing data stay missing.
        assert!(unit("degC").convert(f64::NAN, &unit("K")).unwrap().is_nan());
        assert_eq!(unit("hPa").to_si(850.0), 85000.0);
        assert_eq!(unit("degC").from_si(273.15), 0.0);
    }

    #[test]
    fn arithmetic_refuses_offset_units() {
        let error = unit("degC").multiply(&unit("m")).unwrap_err();
        assert!(
            matches!(
                error,
                UnitError::OffsetArithmetic {
                    operation: "multiply",
                    ..
                }
            ),
            "{error:?}"
        );
        assert!(matches!(
            unit("m").divide(&unit("degC")),
            Err(UnitError::OffsetArithmetic { .. })
        ));
        assert!(matches!(
            unit("degF").powi(2),
            Err(UnitError::OffsetArithmetic { .. })
        ));
        assert_eq!(unit("degC").powi(1).unwrap(), unit("degC"));
        assert_eq!(unit("m").powi(0).unwrap(), Unit::dimensionless());
        assert_eq!(unit("km").powi(2).unwrap().scale(), 1e6);
        assert!(matches!(
            unit("m").powi(200),
            Err(UnitError::ExponentOverflow { .. })
        ));
        assert!(matches!(
            Unit::new(Dimension::LENGTH, 0.0, 0.0),
            Err(UnitError::InvalidScale { .. })
        ));
        assert!(matches!(
            Unit::new(Dimension::LENGTH, f64::NAN, 0.0),
            Err(UnitError::InvalidScale { .. })
        ));
    }

    #[test]
    fn near_misses_get_a_suggestion() {
        let e = syntax("hpa");
        assert_eq!(e.kind, SyntaxErrorKind::UnknownName("hpa".into()));
        assert_eq!(e.span, 0..3);
        assert_eq!(e.suggestion.as_deref(), Some("hPa"));
        let e = syntax("ms-1");
        assert_eq!(e.span, 0..2);
        assert_eq!(e.suggestion.as_deref(), Some("m s-1"));
        assert_eq!(syntax("kgkg-1").suggestion.as_deref(), Some("kg kg-1"));
        assert_eq!(syntax("K/Day").suggestion.as_deref(), Some("K/day"));
        assert_eq!(syntax("deg C").suggestion.as_deref(), Some("degC"));
        assert_eq!(
            syntax("degrees north").suggestion.as_deref(),
            Some("degrees_north")
        );
        assert_eq!(
            syntax("knts")
                .suggestion
                .as_deref()
                .map(|s| s == "knots" || s == "kts"),
            Some(true)
        );
        assert_eq!(syntax("m s -1").suggestion.as_deref(), Some("m s-1"));
        assert_eq!(
            syntax("m/s/(100 km").suggestion.as_deref(),
            Some("m/s/(100 km)")
        );
        // The message names the input, the place and what would be valid.
        let message = syntax("hpa").to_string();
        assert!(
            message.contains("\"hpa\"")
                && message.contains("did you mean \"hPa\"")
                && message.contains("expected"),
            "{message}"
        );
        // Far from anything: no suggestion, still an error.
        let e = syntax("furlong");
        assert_eq!(e.suggestion, None);
        assert_eq!(e.kind, SyntaxErrorKind::UnknownName("furlong".into()));
    }

    #[test]
    fn syntax_errors_carry_span_and_expectation() {
        let e = syntax("K/(100 km");
        assert_eq!(e.kind, SyntaxErrorKind::UnclosedParenthesis);
        assert_eq!(e.span, 2..9);
        let e = syntax("m s-1)");
        assert_eq!(e.kind, SyntaxErrorKind::UnmatchedParenthesis);
        assert_eq!(e.span, 5..6);
        let e = syntax("m^");
        assert_eq!(e.kind, SyntaxErrorKind::UnexpectedEnd);
        assert!(e.expected.contains("integer exponent"));
        let e = syntax("m**x");
        assert_eq!(e.kind, SyntaxErrorKind::UnexpectedCharacter('x'));
        assert_eq!(e.span, 3..4);
        let e = syntax("m/");
        assert_eq!(e.kind, SyntaxErrorKind::UnexpectedEnd);
        assert_eq!(e.span, 2..2);
        let e = syntax("m # s");
        assert_eq!(e.kind, SyntaxErrorKind::UnexpectedCharacter('#'));
        assert_eq!(e.span, 2..3);
        let e = syntax("0 m");
        assert!(matches!(e.kind, SyntaxErrorKind::BadNumber(_)));
        assert!(matches!(
            syntax("m99999999999").kind,
            SyntaxErrorKind::BadExponent(_)
        ));
        assert!(matches!(
            syntax("m127 m").kind,
            SyntaxErrorKind::BadExponent(_)
        ));
        assert!(matches!(
            syntax("()").kind,
            SyntaxErrorKind::UnexpectedToken(_)
        ));
        assert!(matches!(syntax("K @").kind, SyntaxErrorKind::UnexpectedEnd));
        assert!(matches!(
            syntax("K @ 1 m").kind,
            SyntaxErrorKind::UnexpectedToken(_)
        ));
    }

    #[test]
    fn offset_units_inside_compounds_are_refused_with_a_fix() {
        let e = syntax("degC/day");
        assert_eq!(e.kind, SyntaxErrorKind::OffsetInCompound("degC".into()));
        assert_eq!(e.span, 0..4);
        assert_eq!(e.suggestion.as_deref(), Some("K/day"));
        assert_eq!(
            syntax("degree_Celsius m-1").suggestion.as_deref(),
            Some("K m-1")
        );
        assert_eq!(syntax("degF/h").suggestion, None);
        assert!(matches!(
            syntax("degC2").kind,
            SyntaxErrorKind::OffsetInCompound(_)
        ));
        // Alone (and in parentheses) it is fine.
        assert_eq!(unit("(degC)"), unit("degC"));
    }

    #[test]
    fn reference_times_belong_to_the_calendar() {
        let e = syntax("hours since 1900-01-01 00:00:0.0");
        assert_eq!(e.kind, SyntaxErrorKind::TimeReference);
        assert_eq!(e.span, 6..11);
        assert!(e.expected.contains("calendar"));
    }

    #[test]
    fn origin_notation() {
        // "K @ 273.15" is degC in udunits notation.
        assert_eq!(unit("K @ 273.15"), unit("degC"));
        assert_eq!(unit("K @ -10").offset(), -10.0);
    }

    #[test]
    fn dimension_arithmetic_is_checked() {
        assert_eq!(
            Dimension::LENGTH.checked_mul(Dimension::LENGTH),
            Some(Dimension {
                length: 2,
                ..Dimension::DIMENSIONLESS
            })
        );
        assert_eq!(
            Dimension::VELOCITY.checked_div(Dimension::TIME),
            Some(Dimension::ACCELERATION)
        );
        assert_eq!(Dimension::LENGTH.checked_powi(128), None);
        assert_eq!(
            Dimension {
                length: 127,
                ..Dimension::DIMENSIONLESS
            }
            .checked_mul(Dimension::LENGTH),
            None
        );
        assert!(Dimension::ANGLE.compatible_with(&Dimension::DIMENSIONLESS));
        assert!(!Dimension::ANGLE.compatible_with(&Dimension::LENGTH));
    }

    #[test]
    fn serde_uses_the_unit_string() {
        let json = serde_json::to_string(&unit("hPa")).unwrap();
        assert_eq!(json, "\"hPa\"");
        let back: Unit = serde_json::from_str("\"m s-1\"").unwrap();
        assert_eq!(back, unit("m/s"));
        assert!(serde_json::from_str::<Unit>("\"hpa\"").is_err());
    }

    #[test]
    fn from_str_matches_parse() {
        let parsed: Unit = "K s-1".parse().unwrap();
        assert_eq!(parsed, unit("K/s"));
    }

    #[test]
    fn the_spelling_table_is_what_the_canonical_writer_gives() {
        // udunits-2 grammar (space-separated factors, integer exponents):
        // each spelling reads back as itself.
        for s in SPELLINGS {
            assert_eq!(&Unit::parse(s).unwrap().canonical(), s);
        }
        assert_eq!(spelling("m/s"), "m s-1");
        assert_eq!(spelling("m s**-1"), "m s-1");
        assert_eq!(spelling("K/day"), "K day-1");
        assert_eq!(spelling("degrees"), "degree");
    }
}
