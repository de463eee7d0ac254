//! The checker: finds a program's mistakes before any data is read.
//!
//! Given an [`Environment`] (what the current dataset holds: variables with
//! units, dimensions and pressure levels, which variable plays which role;
//! the built-in operators; what earlier cells defined), [`check`] resolves
//! every name, infers the kind and unit of every expression and reports
//! mistakes with spans: unknown names (with a suggestion and the list of
//! what exists), wrong arguments, unknown options, levels that are not
//! pressures or lie outside the data, incompatible units, selections a
//! field cannot take, recursion, and so on. It reads metadata only.
//!
//! User functions have no declared parameter kinds: a definition is checked
//! once with parameters of unknown kind (for names and structure) and again
//! at every call with the kinds of the arguments.

use std::collections::{BTreeMap, BTreeSet};
use std::fmt::Write as _;
use std::sync::LazyLock;

use super::builtins::{
    self, Builtin, OptionKind, ParameterKind, ResultKind, ResultShape, ResultUnit, When, BUILTINS,
};
use super::diagnostic::{did_you_mean, list_words, Diagnostic};
use super::syntax::*;
// The units module is written on another branch with this API; until it
// lands the checker uses a stand-in with the same API.
use crate::units::Unit;

// The checker by concern; each file adds methods to `Checker`.
mod calls;
mod kinds;
mod scope;
mod selections;

// ------------------------------------------------------------ environment

/// A dimension of a dataset variable.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Axis {
    Time,
    /// Pressure levels.
    Level,
    Latitude,
    Longitude,
    Other(String),
}

/// What the checker needs to know of one variable in a dataset.
#[derive(Debug, Clone, PartialEq)]
pub struct VariableInfo {
    /// The variable's own name in the file.
    pub name: String,
    /// Its `units` attribute (a udunits-style string).
    pub units: String,
    pub dimensions: Vec<Axis>,
    /// Its pressure levels in Pa, when it has a level dimension.
    pub levels_pa: Vec<f64>,
}

/// The time axis of a dataset.
#[derive(Debug, Clone, PartialEq)]
pub struct TimeAxis {
    pub count: usize,
    /// First and last time, written `YYYY-MM-DD HH:MM` (UTC).
    pub first: String,
    pub last: String,
}

/// The metadata of an opened dataset (one or several files combined).
#[derive(Debug, Clone, PartialEq, Default)]
pub struct DatasetInfo {
    /// How to call it in messages (a file name or the `as` name).
    pub name: String,
    pub variables: Vec<VariableInfo>,
    /// Role name (see [`builtins::ROLES`]) to the name of the variable that
    /// plays it. `wind` needs no entry: it is the two wind components.
    pub roles: Vec<(String, String)>,
    pub times: Option<TimeAxis>,
    /// Southern and northern edges of the grid, degrees north.
    pub latitude_range: Option<(f64, f64)>,
    /// Western and eastern edges of the grid, degrees east.
    pub longitude_range: Option<(f64, f64)>,
    /// Role name to why the data lack it, when the reader can tell (for
    /// example what computing geopotential on model levels would need).
    pub missing_notes: Vec<(String, String)>,
}

impl DatasetInfo {
    pub fn variable(&self, name: &str) -> Option<&VariableInfo> {
        self.variables.iter().find(|variable| variable.name == name)
    }

    /// The variable playing `role`.
    pub fn role(&self, role: &str) -> Option<&VariableInfo> {
        self.roles.iter().find(|(name, _)| name == role).and_then(|(_, variable)| self.variable(variable))
    }

    pub fn has_role(&self, role: &str) -> bool {
        if role == builtins::WIND_ROLE {
            return self.role("eastward_wind").is_some() && self.role("northward_wind").is_some();
        }
        self.role(role).is_some()
    }

    /// Role names present, `wind` included when both components are.
    pub fn role_names(&self) -> Vec<String> {
        let mut names: Vec<String> =
            self.roles.iter().filter(|(_, variable)| self.variable(variable).is_some()).map(|(role, _)| role.clone()).collect();
        if self.has_role(builtins::WIND_ROLE) {
            names.push(builtins::WIND_ROLE.to_string());
        }
        names
    }

    fn has_time(&self) -> bool {
        self.times.is_some() || self.variables.iter().any(|variable| variable.dimensions.contains(&Axis::Time))
    }
}

/// Reads a dataset's metadata for an `open` statement (headers only).
pub trait DatasetCatalog {
    /// Describes the dataset made of `paths`, or says why it cannot be opened.
    fn describe(&self, paths: &[String]) -> Result<DatasetInfo, String>;
}

/// A recipe known by name (from a recipe folder), callable with its
/// parameters as options.
#[derive(Debug, Clone, PartialEq)]
pub struct RecipeInfo {
    pub name: String,
    pub parameters: Vec<String>,
    pub outputs: Vec<String>,
}

/// The dataset the program works on.
#[derive(Debug, Clone, PartialEq)]
pub enum CurrentDataset {
    /// Its metadata are known.
    Known(DatasetInfo),
    /// Opened, but its metadata could not be read at check time (no
    /// catalog): names that are not otherwise defined are assumed to be its
    /// variables, and only the evaluator can tell.
    Opaque { name: String },
}

/// A user function's definition, kept so that calls can be checked.
#[derive(Debug, Clone, PartialEq)]
pub struct FunctionDefinition {
    pub name: String,
    pub parameters: Vec<Identifier>,
    pub body: Expr,
    pub span: Span,
}

/// A name bound by `let`, `parameter` or `output`.
#[derive(Debug, Clone)]
pub struct Binding {
    pub kind: Type,
    pub span: Span,
}

/// What is defined after a program: bindings, functions, datasets. A
/// notebook passes the scope of one cell to the next.
#[derive(Debug, Clone, Default)]
pub struct Scope {
    pub bindings: BTreeMap<String, Binding>,
    pub functions: BTreeMap<String, FunctionDefinition>,
    /// Datasets named with `open ... as name`.
    pub datasets: BTreeMap<String, DatasetInfo>,
    pub current: Option<CurrentDataset>,
}

/// Everything the checker may consult.
pub struct Environment<'a> {
    pub builtins: &'a [Builtin],
    pub catalog: Option<&'a dyn DatasetCatalog>,
    pub recipes: Vec<RecipeInfo>,
    /// What earlier programs (cells) defined, including the current dataset.
    pub scope: Scope,
}

impl Default for Environment<'_> {
    fn default() -> Self {
        Environment { builtins: BUILTINS, catalog: None, recipes: Vec::new(), scope: Scope::default() }
    }
}

impl<'a> Environment<'a> {
    /// An environment whose current dataset is `dataset`.
    pub fn with_dataset(dataset: DatasetInfo) -> Self {
        let mut environment = Environment::default();
        environment.scope.current = Some(CurrentDataset::Known(dataset));
        environment
    }
}

// ------------------------------------------------------------------ kinds

/// Latitude (north positive) or longitude (east positive).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum AngleAxis {
    Latitude,
    Longitude,
}

/// Scalar, vector, or true/false (from a comparison of fields).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Component {
    Scalar,
    Vector,
    Boolean,
}

/// Which pressure levels a field has.
#[derive(Debug, Clone, PartialEq)]
pub enum Levels {
    /// No level dimension (a single level, a layer property, a surface).
    None,
    /// These levels in Pa, largest pressure first.
    Known(Vec<f64>),
    /// A level dimension whose levels are not known.
    Unknown,
}

#[derive(Debug, Clone)]
pub struct FieldType {
    pub component: Component,
    /// `None` for a pure number (or a true/false field).
    pub unit: Option<Unit>,
    pub levels: Levels,
    pub time: bool,
    /// Still on the horizontal grid (not picked at a point or averaged).
    pub horizontal: bool,
    /// The dataset variable or role it came from, for messages.
    pub origin: Option<String>,
}

/// The kind of a value, as the checker infers it.
#[derive(Debug, Clone)]
pub enum Type {
    /// A number with its unit (`None`: a pure number) and its value when it
    /// is known before evaluation.
    Number { unit: Option<Unit>, value: Option<f64> },
    /// A pressure layer; bottom is the larger pressure (Pa) when known.
    Layer { bottom: Option<f64>, top: Option<f64> },
    Angle { axis: AngleAxis, degrees: Option<f64> },
    LatitudeRange,
    LongitudeRange,
    NumberRange { unit: Option<Unit> },
    Point,
    Region,
    Time { at: Option<String> },
    TimeRange,
    String(Option<String>),
    Bool,
    Field(FieldType),
    /// A built-in operator or user function.
    Function(String),
    Recipe(String),
    /// A dataset named with `as`.
    Dataset(String),
    /// The result of a mistake already reported, or of an opaque dataset:
    /// accepted everywhere so that one mistake gives one message.
    Unknown,
}

/// Reference units for naming dimensions in messages, with units to suggest.
struct NamedDimension {
    name: &'static str,
    unit: Unit,
    examples: &'static str,
}

static DIMENSIONS: LazyLock<Vec<NamedDimension>> = LazyLock::new(|| {
    [
        ("pressure", "Pa", "hPa or Pa"),
        ("length", "m", "m, km or dam"),
        ("speed", "m/s", "m/s or kt"),
        ("temperature", "K", "K or degC"),
        ("time", "s", "s, h or day"),
        ("rate", "s-1", "s-1 or day-1"),
        ("geopotential", "m2 s-2", "m2 s-2"),
        ("rate of temperature change", "K/s", "K/s or K/day"),
        ("temperature gradient", "K/m", "K/m or K/(100 km)"),
        ("acceleration", "m s-2", "m s-2"),
        ("squared frequency", "s-2", "s-2"),
        ("mass", "kg", "kg"),
    ]
    .into_iter()
    .filter_map(|(name, unit, examples)| Unit::parse(unit).ok().map(|unit| NamedDimension { name, unit, examples }))
    .collect()
});

static PASCAL: LazyLock<Option<Unit>> = LazyLock::new(|| Unit::parse("Pa").ok());
static METRE: LazyLock<Option<Unit>> = LazyLock::new(|| Unit::parse("m").ok());
static METRE_PER_SECOND: LazyLock<Option<Unit>> = LazyLock::new(|| Unit::parse("m s-1").ok());
static SECOND: LazyLock<Option<Unit>> = LazyLock::new(|| Unit::parse("s").ok());
static DEGREE: LazyLock<Option<Unit>> = LazyLock::new(|| Unit::parse("degrees").ok());
static DIMENSIONLESS: LazyLock<Option<Unit>> = LazyLock::new(|| Unit::parse("m/m").ok());

/// Units suggested when a unit is not known (the design's list).
const KNOWN_UNIT_WORDS: &[&str] = &[
    "Pa", "hPa", "millibar", "mb", "K", "degC", "degree", "degrees", "m", "km", "dam", "s", "min", "hour", "h",
    "day", "kt", "knot", "knots",
];

fn same_dimension(a: &Unit, b: &Unit) -> bool {
    a.dimension() == b.dimension()
}

fn is_dimensionless(unit: &Option<Unit>) -> bool {
    match (unit, DIMENSIONLESS.as_ref()) {
        (None, _) => true,
        (Some(unit), Some(reference)) => same_dimension(unit, reference),
        (Some(_), None) => false,
    }
}

fn is_dimension(unit: &Option<Unit>, reference: &Option<Unit>) -> bool {
    match (unit, reference) {
        (Some(unit), Some(reference)) => same_dimension(unit, reference),
        _ => false,
    }
}

fn is_pressure(unit: &Option<Unit>) -> bool {
    is_dimension(unit, &PASCAL)
}

fn dimension_name(unit: &Unit) -> Option<&'static NamedDimension> {
    DIMENSIONS.iter().find(|named| same_dimension(&named.unit, unit))
}

/// "a pressure (hPa)", "a pure number", "a number in K m-2".
fn describe_quantity(unit: &Option<Unit>) -> String {
    match unit {
        None => "a pure number".to_string(),
        Some(unit) if is_dimensionless(&Some(unit.clone())) => {
            if unit.to_string().starts_with("deg") {
                format!("an angle ({unit})")
            } else {
                format!("a pure number ({unit})")
            }
        }
        Some(unit) => match dimension_name(unit) {
            Some(named) => format!("{} {} ({unit})", article(named.name), named.name),
            None => format!("a quantity in {unit}"),
        },
    }
}

fn article(word: &str) -> &'static str {
    if word.starts_with(['a', 'e', 'i', 'o', 'u']) { "an" } else { "a" }
}

/// Converts `value` in `unit` to Pa.
fn to_pascal(value: f64, unit: &Option<Unit>) -> Option<f64> {
    let (unit, pascal) = (unit.as_ref()?, PASCAL.as_ref()?);
    let (factor, offset) = unit.conversion_to(pascal).ok()?;
    Some(value * factor + offset)
}

/// "500 hPa" for a pressure in Pa.
fn format_pressure(pascal: f64) -> String {
    format!("{} hPa", format_number((pascal / 100.0 * 1000.0).round() / 1000.0))
}

fn format_levels(levels: &[f64]) -> String {
    let words: Vec<String> =
        levels.iter().map(|level| format_number((level / 100.0 * 1000.0).round() / 1000.0)).collect();
    format!("{} hPa", words.join(", "))
}

impl Type {
    fn number(unit: Option<Unit>) -> Type {
        Type::Number { unit, value: None }
    }

    fn is_unknown(&self) -> bool {
        matches!(self, Type::Unknown)
    }

    /// The unit of a number or field.
    fn unit(&self) -> Option<&Option<Unit>> {
        match self {
            Type::Number { unit, .. } => Some(unit),
            Type::Field(field) => Some(&field.unit),
            _ => None,
        }
    }

    fn is_pressure(&self) -> bool {
        matches!(self, Type::Number { unit, .. } if is_pressure(unit))
    }

    /// Words for messages: "a pressure (hPa)", "a vector field (m/s)".
    pub fn describe(&self) -> String {
        match self {
            Type::Number { unit, .. } => describe_quantity(unit),
            Type::Layer { .. } => "a pressure layer".to_string(),
            Type::Angle { axis: AngleAxis::Latitude, .. } => "a latitude".to_string(),
            Type::Angle { axis: AngleAxis::Longitude, .. } => "a longitude".to_string(),
            Type::LatitudeRange => "a range of latitudes".to_string(),
            Type::LongitudeRange => "a range of longitudes".to_string(),
            Type::NumberRange { .. } => "a range of numbers".to_string(),
            Type::Point => "a point".to_string(),
            Type::Region => "a region".to_string(),
            Type::Time { .. } => "a time".to_string(),
            Type::TimeRange => "a time range".to_string(),
            Type::String(_) => "a string".to_string(),
            Type::Bool => "a true/false value".to_string(),
            Type::Field(field) => {
                let what = match field.component {
                    Component::Scalar => "a scalar field",
                    Component::Vector => "a vector field",
                    Component::Boolean => return "a true/false field".to_string(),
                };
                match (&field.origin, &field.unit) {
                    (Some(origin), Some(unit)) => format!("{what} of {origin} ({unit})"),
                    (Some(origin), None) => format!("{what} of {origin}"),
                    (None, Some(unit)) => match dimension_name(unit) {
                        Some(named) => format!("{what} of {} ({unit})", named.name),
                        None => format!("{what} ({unit})"),
                    },
                    (None, None) => format!("{what} of pure numbers"),
                }
            }
            Type::Function(name) => format!("the function `{name}`"),
            Type::Recipe(name) => format!("the recipe `{name}`"),
            Type::Dataset(name) => format!("the dataset `{name}`"),
            Type::Unknown => "a value".to_string(),
        }
    }

    /// The short kind name used in inspection: "pressure", "scalar field".
    pub fn kind_name(&self) -> &'static str {
        match self {
            Type::Number { .. } => "number",
            Type::Layer { .. } => "pressure layer",
            Type::Angle { .. } => "angle",
            Type::LatitudeRange | Type::LongitudeRange | Type::NumberRange { .. } => "range",
            Type::Point => "point",
            Type::Region => "region",
            Type::Time { .. } => "time",
            Type::TimeRange => "time range",
            Type::String(_) => "string",
            Type::Bool => "boolean",
            Type::Field(field) => match field.component {
                Component::Scalar => "scalar field",
                Component::Vector => "vector field",
                Component::Boolean => "boolean field",
            },
            Type::Function(_) => "function",
            Type::Recipe(_) => "recipe",
            Type::Dataset(_) => "dataset",
            Type::Unknown => "unknown",
        }
    }
}

// ----------------------------------------------------------------- times

/// Reads `YYYY-MM-DD`, `YYYY-MM-DD HH:MM`, `YYYY-MM-DDTHH:MM[:SS]` (UTC) and
/// returns it as `YYYY-MM-DD HH:MM:SS`, which sorts in time order.
pub fn normalise_time(text: &str) -> Option<String> {
    let text = text.trim().trim_end_matches('Z');
    let (date, clock) = match text.find([' ', 'T']) {
        Some(index) => (&text[..index], text[index + 1..].trim()),
        None => (text, "00:00"),
    };
    let date_parts: Vec<&str> = date.split('-').collect();
    let clock_parts: Vec<&str> = clock.split(':').collect();
    if date_parts.len() != 3 || !(2..=3).contains(&clock_parts.len()) {
        return None;
    }
    let number = |text: &str, digits: std::ops::RangeInclusive<usize>| -> Option<u32> {
        if digits.contains(&text.len()) && text.bytes().all(|byte| byte.is_ascii_digit()) {
            text.parse().ok()
        } else {
            None
        }
    };
    let year = number(date_parts[0], 4..=4)?;
    let month = number(date_parts[1], 1..=2)?;
    let day = number(date_parts[2], 1..=2)?;
    let hour = number(clock_parts[0], 1..=2)?;
    let minute = number(clock_parts[1], 2..=2)?;
    let second = if clock_parts.len() == 3 { number(clock_parts[2], 2..=2)? } else { 0 };
    // Gregorian calendar month lengths.
    let leap = (year % 4 == 0 && year % 100 != 0) || year % 400 == 0;
    let month_days = [31, if leap { 29 } else { 28 }, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31];
    if !(1..=12).contains(&month) || day == 0 || day > month_days[month as usize - 1] || hour > 23 || minute > 59 || second > 59 {
        return None;
    }
    Some(format!("{year:04}-{month:02}-{day:02} {hour:02}:{minute:02}:{second:02}"))
}

// ----------------------------------------------------------------- report

/// The kind of one top-level statement's value.
#[derive(Debug, Clone)]
pub struct StatementKindInfo {
    pub span: Span,
    /// The bound name for `let`, `parameter` and `output`.
    pub name: Option<String>,
    pub kind: Type,
}

/// What the checker found.
#[derive(Debug, Clone)]
pub struct CheckReport {
    /// Errors and warnings, in source order.
    pub diagnostics: Vec<Diagnostic>,
    /// Kinds of the top-level statements that have a value.
    pub kinds: Vec<StatementKindInfo>,
    /// What is defined after the program (for the next cell).
    pub scope: Scope,
}

impl CheckReport {
    pub fn has_errors(&self) -> bool {
        self.diagnostics.iter().any(Diagnostic::is_error)
    }

    pub fn errors(&self) -> impl Iterator<Item = &Diagnostic> {
        self.diagnostics.iter().filter(|diagnostic| diagnostic.is_error())
    }
}

/// Checks a parsed program against an environment.
pub fn check(program: &Program, environment: &Environment<'_>) -> CheckReport {
    let mut checker = Checker {
        environment,
        scope: environment.scope.clone(),
        locals: Vec::new(),
        diagnostics: Vec::new(),
        calls: Vec::new(),
        local_functions: BTreeSet::new(),
        reported_no_dataset: false,
        top_level_seen: TopLevel::default(),
        depth: 0,
        reported_depth: false,
    };
    let mut kinds = Vec::new();
    for (index, statement) in program.statements.iter().enumerate() {
        if let Some(info) = checker.top_statement(statement, index) {
            kinds.push(info);
        }
    }
    let mut diagnostics = checker.diagnostics;
    diagnostics.sort_by_key(|diagnostic| (diagnostic.span.start, diagnostic.span.end));
    CheckReport { diagnostics, kinds, scope: checker.scope }
}

/// Parses and checks; the parse errors or the checker's report.
pub fn check_source(source: &str, environment: &Environment<'_>) -> Result<(Program, CheckReport), Vec<Diagnostic>> {
    let program = super::parser::parse(source)?;
    let report = check(&program, environment);
    Ok((program, report))
}

// ---------------------------------------------------------------- checker

/// Deepest chain of user-function calls checked.
const MAX_CALL_DEPTH: usize = 32;
/// Deepest recursion of the checker over expressions, across calls.
const MAX_CHECK_DEPTH: usize = 400;

#[derive(Default)]
struct TopLevel {
    recipe: Option<Span>,
    about: Option<Span>,
    parameters: BTreeMap<String, Span>,
    outputs: BTreeMap<String, Span>,
}

/// What a call calls.
enum CallTarget<'e> {
    User(Box<FunctionDefinition>),
    Builtin(&'e Builtin),
    Recipe(String),
    /// Not callable (reported) or not known at check time.
    Nothing,
}

/// A user function being checked at a call.
struct CallFrame {
    name: String,
    call_span: Span,
    /// The call as canonical text, for notes.
    call_text: String,
    /// Defined in an earlier program: its spans point into another text.
    foreign: bool,
}

struct Checker<'e> {
    environment: &'e Environment<'e>,
    scope: Scope,
    /// Block and function-parameter scopes, innermost last.
    locals: Vec<BTreeMap<String, Type>>,
    diagnostics: Vec<Diagnostic>,
    calls: Vec<CallFrame>,
    /// Functions defined in this program (their spans are in this source).
    local_functions: BTreeSet<String>,
    reported_no_dataset: bool,
    top_level_seen: TopLevel,
    /// Current recursion depth of `expr`.
    depth: usize,
    reported_depth: bool,
}

impl<'e> Checker<'e> {
    // ------------------------------------------------------------ reporting

    fn report(&mut self, mut diagnostic: Diagnostic) {
        if let Some(frame) = self.calls.iter().find(|frame| frame.foreign) {
            // The span is in another text: show the call instead.
            let note = format!("inside `{}`: {}", frame.name, diagnostic.message);
            diagnostic.message = format!("this call of `{}` fails inside the function", frame.name);
            diagnostic.span = frame.call_span;
            diagnostic.label = "in this call".to_string();
            diagnostic.notes.insert(0, note);
        } else if let Some(frame) = self.calls.last() {
            diagnostic.notes.push(format!("found while checking the call {}", frame.call_text));
        }
        let duplicate = self.diagnostics.iter().any(|existing| {
            existing.span == diagnostic.span && existing.message == diagnostic.message && existing.severity == diagnostic.severity
        });
        if !duplicate {
            self.diagnostics.push(diagnostic);
        }
    }

    fn error(&mut self, message: impl Into<String>, span: Span, label: impl Into<String>) -> &mut Diagnostic {
        self.report(Diagnostic::error(message, span).with_label(label));
        self.diagnostics.last_mut().expect("just reported")
    }

    fn known_dataset(&self) -> Option<&DatasetInfo> {
        match &self.scope.current {
            Some(CurrentDataset::Known(info)) => Some(info),
            _ => None,
        }
    }

    fn dataset_is_opaque(&self) -> bool {
        matches!(self.scope.current, Some(CurrentDataset::Opaque { .. }))
    }

    /// "the current dataset (case.nc) has: t (temperature), ..." or how to open one.
    fn what_exists(&self) -> String {
        match &self.scope.current {
            Some(CurrentDataset::Known(info)) => describe_dataset(info),
            Some(CurrentDataset::Opaque { name }) => format!("the dataset {name} could not be inspected"),
            None => "no dataset is open; write open \"case.nc\" first".to_string(),
        }
    }

    // ----------------------------------------------------------- statements

    fn top_statement(&mut self, statement: &Statement, index: usize) -> Option<StatementKindInfo> {
        match &statement.kind {
            StatementKind::Recipe { title } => {
                if self.top_level_seen.recipe.is_some() {
                    self.error("a recipe has one title", title.span, "second `recipe`")
                        .help = Some("keep one `recipe \"...\"` line at the top".to_string());
                } else if index > 0 {
                    self.report(
                        Diagnostic::warning("the recipe title usually comes first", statement.span)
                            .with_label("not the first statement")
                            .with_help("move `recipe \"...\"` to the top so readers see it first"),
                    );
                }
                self.top_level_seen.recipe = Some(statement.span);
                None
            }
            StatementKind::About { text } => {
                if self.top_level_seen.about.is_some() {
                    self.error("a recipe has one `about` text", text.span, "second `about`")
                        .help = Some("join the texts into one `about \"...\"`".to_string());
                }
                self.top_level_seen.about = Some(statement.span);
                None
            }
            StatementKind::Parameter { name, default, .. } => {
                if self.top_level_seen.parameters.contains_key(&name.name) {
                    self.error(format!("the parameter `{}` is already declared", name.name), name.span, "declared again")
                        .help = Some("give each parameter a different name".to_string());
                }
                self.top_level_seen.parameters.insert(name.name.clone(), name.span);
                let kind = self.expr(default);
                self.warn_if_hiding(name);
                self.scope.bindings.insert(name.name.clone(), Binding { kind: kind.clone(), span: name.span });
                Some(StatementKindInfo { span: statement.span, name: Some(name.name.clone()), kind })
            }
            StatementKind::Output { name, value, .. } => {
                if self.top_level_seen.outputs.contains_key(&name.name) {
                    self.error(format!("the output `{}` is already declared", name.name), name.span, "declared again")
                        .help = Some("give each output a different name".to_string());
                }
                self.top_level_seen.outputs.insert(name.name.clone(), name.span);
                let kind = self.expr(value);
                self.warn_if_hiding(name);
                self.scope.bindings.insert(name.name.clone(), Binding { kind: kind.clone(), span: name.span });
                Some(StatementKindInfo { span: statement.span, name: Some(name.name.clone()), kind })
            }
            StatementKind::Open { paths, alias } => {
                self.open(paths, alias.as_ref());
                None
            }
            StatementKind::Function { name, parameters, body } => {
                self.define_function(name, parameters, body, statement.span);
                None
            }
            StatementKind::Let { name, value } => {
                let kind = self.expr(value);
                self.warn_if_hiding(name);
                self.scope.bindings.insert(name.name.clone(), Binding { kind: kind.clone(), span: name.span });
                Some(StatementKindInfo { span: statement.span, name: Some(name.name.clone()), kind })
            }
            StatementKind::Setting { options } => {
                // The words are choices, not names: read them, never look
                // them up.
                for option in options {
                    if let Err(d) = super::settings::read_setting(option) {
                        self.report(d);
                    }
                }
                None
            }
            StatementKind::Expression(expr) => {
                let kind = self.expr(expr);
                Some(StatementKindInfo { span: statement.span, name: None, kind })
            }
        }
    }

    // ---------------------------------------------------------- expressions

    fn expr(&mut self, expr: &Expr) -> Type {
        // The parser bounds a tree's depth, but calls of user functions nest
        // their bodies: bound the checker's own recursion too.
        if self.depth >= MAX_CHECK_DEPTH {
            self.too_deep_to_check(expr.span);
            return Type::Unknown;
        }
        self.depth += 1;
        let kind = self.expr_unguarded(expr);
        self.depth -= 1;
        kind
    }

    /// The recursive step: evaluates the children, then hands their kinds
    /// to a function that does the checking without recursing. Keeping the
    /// heavy checks out of the recursive path keeps each level's stack frame
    /// small (debug builds give every local of a function its own slot).
    #[inline(never)]
    fn too_deep_to_check(&mut self, span: Span) {
        if !self.reported_depth {
            self.reported_depth = true;
            self.error("this is nested too deeply to check", span, "too deep")
                .help = Some("split long expressions with `let`, and long chains of functions calling functions".to_string());
        }
    }

    fn expr_unguarded(&mut self, expr: &Expr) -> Type {
        match &expr.kind {
            ExprKind::Number { .. } | ExprKind::Angle { .. } => self.literal(expr),
            ExprKind::String(value) => Type::String(Some(value.clone())),
            ExprKind::Bool(_) => Type::Bool,
            ExprKind::Name(name) => self.lookup(name, expr.span),
            ExprKind::Call { callee, arguments, options } => self.call(expr, callee, arguments, options),
            ExprKind::Block { statements } => self.block(statements, expr.span),
            _ => self.operator_node(expr),
        }
    }

    /// Operators: the operands first, then the operator's own check. One
    /// small function per operator, so that each level of recursion holds
    /// only its own operands' kinds.
    #[inline(never)]
    fn operator_node(&mut self, expr: &Expr) -> Type {
        match &expr.kind {
            ExprKind::Member { base, member } => self.member_node(base, member),
            ExprKind::Unary { operator, operand } => self.unary_node(*operator, operand, expr.span),
            ExprKind::Binary { operator, left, right } => self.binary_node(*operator, left, right, expr.span),
            ExprKind::Range { from, to } => self.range_node(from, to, expr.span),
            ExprKind::Select { base, how, selector } => self.select_node(base, *how, selector, expr.span),
            ExprKind::Convert { value, unit } => self.convert_node(value, unit),
            ExprKind::If { condition, then_branch, else_branch } => self.if_node(condition, then_branch, else_branch),
            _ => Type::Unknown,
        }
    }

    #[inline(never)]
    fn member_node(&mut self, base: &Expr, member: &Identifier) -> Type {
        let kind = self.expr(base);
        self.member(kind, member)
    }

    #[inline(never)]
    fn unary_node(&mut self, operator: UnaryOperator, operand: &Expr, span: Span) -> Type {
        let kind = self.expr(operand);
        self.unary(operator, kind, operand, span)
    }

    #[inline(never)]
    fn binary_node(&mut self, operator: BinaryOperator, left: &Expr, right: &Expr, span: Span) -> Type {
        let left_kind = self.expr(left);
        let right_kind = self.expr(right);
        self.binary(operator, left_kind, right_kind, left, right, span)
    }

    #[inline(never)]
    fn range_node(&mut self, from: &Expr, to: &Expr, span: Span) -> Type {
        let first = self.expr(from);
        let second = self.expr(to);
        self.range(first, second, from, to, span)
    }

    #[inline(never)]
    fn select_node(&mut self, base: &Expr, how: SelectHow, selector: &Expr, span: Span) -> Type {
        let base_kind = self.expr(base);
        let selector_kind = self.expr(selector);
        self.select(base_kind, selector_kind, base, how, selector, span)
    }

    #[inline(never)]
    fn convert_node(&mut self, value: &Expr, unit: &UnitText) -> Type {
        let kind = self.expr(value);
        self.convert(kind, value, unit)
    }

    #[inline(never)]
    fn if_node(&mut self, condition: &Expr, then_branch: &Expr, else_branch: &Expr) -> Type {
        let condition_kind = self.expr(condition);
        let then_kind = self.expr(then_branch);
        let else_kind = self.expr(else_branch);
        self.if_kind(condition_kind, then_kind, else_kind, condition, then_branch, else_branch)
    }

    // ---------------------------------------------------------------- names

    // ---------------------------------------------------------------- calls

    // -------------------------------------------------------------- members

    // ------------------------------------------------------------ operators

}

// ---------------------------------------------------------------- helpers

/// A name of the dataset (its own variable name or a role) as a field.
fn dataset_name(info: &DatasetInfo, name: &str) -> Option<Type> {
    if name == builtins::WIND_ROLE && info.variable(name).is_none() {
        let eastward = info.role("eastward_wind")?;
        info.role("northward_wind")?;
        let mut field = field_of_variable(eastward, info);
        field.component = Component::Vector;
        field.origin = Some(builtins::WIND_ROLE.to_string());
        return Some(Type::Field(field));
    }
    if let Some(variable) = info.variable(name) {
        let mut field = field_of_variable(variable, info);
        field.origin = Some(name.to_string());
        return Some(Type::Field(field));
    }
    let variable = info.role(name)?;
    let mut field = field_of_variable(variable, info);
    field.origin = Some(name.to_string());
    Some(Type::Field(field))
}

fn field_of_variable(variable: &VariableInfo, info: &DatasetInfo) -> FieldType {
    let levels = if variable.dimensions.contains(&Axis::Level) {
        if variable.levels_pa.is_empty() {
            Levels::Unknown
        } else {
            let mut levels = variable.levels_pa.clone();
            levels.sort_by(|a, b| b.total_cmp(a));
            Levels::Known(levels)
        }
    } else {
        Levels::None
    };
    let _ = info;
    FieldType {
        component: Component::Scalar,
        unit: Unit::parse(&variable.units).ok(),
        levels,
        time: variable.dimensions.contains(&Axis::Time),
        horizontal: variable.dimensions.contains(&Axis::Latitude) || variable.dimensions.contains(&Axis::Longitude),
        origin: None,
    }
}

/// "the dataset case.nc has t (temperature, K), ...".
fn describe_dataset(info: &DatasetInfo) -> String {
    let mut text = format!("the dataset {} has ", info.name);
    if info.variables.is_empty() {
        text.push_str("no variables");
        return text;
    }
    let parts: Vec<String> = info
        .variables
        .iter()
        .map(|variable| {
            let roles: Vec<&str> =
                info.roles.iter().filter(|(_, name)| *name == variable.name).map(|(role, _)| role.as_str()).collect();
            let mut part = format!("`{}`", variable.name);
            if roles.is_empty() || roles == [variable.name.as_str()] {
                let _ = write!(part, " ({})", variable.units);
            } else {
                let _ = write!(part, " ({}, {})", roles.join(", "), variable.units);
            }
            part
        })
        .collect();
    text.push_str(&parts.join(", "));
    if info.has_role(builtins::WIND_ROLE) {
        text.push_str(", and `wind` (the vector of the two components)");
    }
    let levels = info.variables.iter().find(|variable| !variable.levels_pa.is_empty());
    if let Some(variable) = levels {
        let mut levels = variable.levels_pa.clone();
        levels.sort_by(|a, b| b.total_cmp(a));
        let _ = write!(text, "; levels {}", format_levels(&levels));
    }
    text
}

fn accepts(kind: ParameterKind, value: &Type) -> bool {
    use ParameterKind as P;
    let field = |component: Option<Component>| match value {
        Type::Field(field) => component.is_none_or(|component| field.component == component) && field.component != Component::Boolean,
        _ => false,
    };
    match kind {
        P::Pressure => value.is_pressure(),
        P::Layer => matches!(value, Type::Layer { .. }),
        P::PressureOrLayer => value.is_pressure() || matches!(value, Type::Layer { .. }),
        P::Length => matches!(value, Type::Number { unit, .. } if is_dimension(unit, &METRE)),
        P::Latitude => matches!(value, Type::Angle { axis: AngleAxis::Latitude, .. }),
        P::Longitude => matches!(value, Type::Angle { axis: AngleAxis::Longitude, .. }),
        P::LatitudeRange => matches!(value, Type::LatitudeRange),
        P::LongitudeRange => matches!(value, Type::LongitudeRange),
        P::Region => matches!(value, Type::Region),
        P::ScalarField => field(Some(Component::Scalar)),
        P::VectorField => field(Some(Component::Vector)),
        P::Field => field(None),
        P::HeightOrGeopotential => {
            field(Some(Component::Scalar))
                && match value {
                    Type::Field(field) => {
                        field.unit.is_none()
                            || is_dimension(&field.unit, &METRE)
                            || is_dimension(&field.unit, &Unit::parse("m2 s-2").ok())
                    }
                    _ => false,
                }
        }
        P::PressureOrTemperatureField => {
            value.is_pressure()
                || (field(Some(Component::Scalar))
                    && matches!(value, Type::Field(field) if field.unit.is_none() || is_dimension(&field.unit, &Unit::parse("K").ok())))
        }
        P::IndexOrString => match value {
            Type::Number { unit, value } => is_dimensionless(unit) && value.is_none_or(|value| value.fract() == 0.0 && value >= 0.0),
            Type::String(_) => true,
            _ => false,
        },
    }
}

fn result_kind(builtin: &Builtin, kinds: &[Type], dataset_has_time: bool) -> Type {
    let unit_of = |index: usize| -> Option<Option<Unit>> { kinds.get(index).and_then(|kind| kind.unit().cloned()) };
    let unit = match builtin.result_unit {
        ResultUnit::Fixed(text) => Some(Unit::parse(text).ok()),
        ResultUnit::SameAs(index) => unit_of(index),
        ResultUnit::PerLength(index, power) => unit_of(index).map(|unit| match (unit, METRE.clone()) {
            (Some(unit), Some(metre)) => Some(over(&unit, &self::power(&metre, power))),
            (None, Some(metre)) => Some(self::power(&metre, -power)),
            _ => None,
        }),
        ResultUnit::PerSecond(index) => unit_of(index).map(|unit| match (unit, SECOND.clone()) {
            (Some(unit), Some(second)) => Some(over(&unit, &second)),
            (None, Some(second)) => Some(power(&second, -1)),
            _ => None,
        }),
        ResultUnit::Product(first, second) => match (unit_of(first), unit_of(second)) {
            (Some(Some(a)), Some(Some(b))) => Some(Some(times(&a, &b))),
            (Some(a), Some(b)) => Some(a.or(b)),
            _ => None,
        },
        ResultUnit::None => Some(None),
    };
    let Some(unit) = unit else { return Type::Unknown };
    let component = match builtin.result_kind {
        ResultKind::ScalarField => Component::Scalar,
        ResultKind::VectorField => Component::Vector,
        ResultKind::SameKindAs(index) => match kinds.get(index) {
            Some(Type::Field(field)) => field.component,
            _ => return Type::Unknown,
        },
        ResultKind::Number => return Type::number(unit),
        ResultKind::Point => return Type::Point,
        ResultKind::Region => return Type::Region,
        ResultKind::Time => {
            let at = match kinds.first() {
                Some(Type::String(Some(text))) => normalise_time(text),
                _ => None,
            };
            return Type::Time { at };
        }
    };
    let horizontal = FieldType {
        component,
        unit: unit.clone(),
        levels: Levels::None,
        time: dataset_has_time,
        horizontal: true,
        origin: None,
    };
    let like = |index: usize| match kinds.get(index) {
        Some(Type::Field(field)) => Some(FieldType { component, unit: unit.clone(), origin: None, ..field.clone() }),
        _ => None,
    };
    let field = match builtin.result_shape {
        ResultShape::Horizontal | ResultShape::NotAField => Some(horizontal),
        ResultShape::SameAs(index) => like(index),
        ResultShape::WithoutLevels(index) => like(index).map(|field| FieldType { levels: Levels::None, ..field }),
        ResultShape::WithoutHorizontal(index) => like(index).map(|field| FieldType { horizontal: false, ..field }),
        ResultShape::HorizontalIfPressure(index) => {
            if kinds.get(index).is_some_and(Type::is_pressure) { Some(horizontal) } else { like(index) }
        }
    };
    field.map_or(Type::Unknown, Type::Field)
}

fn field_of(kind: &Type) -> Option<&FieldType> {
    match kind {
        Type::Field(field) => Some(field),
        _ => None,
    }
}

fn component_of(kind: &Type) -> Option<Component> {
    field_of(kind).map(|field| field.component)
}

fn component_word(component: Component) -> &'static str {
    match component {
        Component::Scalar => "scalar field",
        Component::Vector => "vector field",
        Component::Boolean => "true/false field",
    }
}

/// The field resulting from an operation on a field and a number or two
/// fields: the richer of the two shapes, with the given unit.
fn combine_fields(left: &Type, right: &Type, unit: Option<Unit>) -> Type {
    let (a, b) = (field_of(left), field_of(right));
    let base = match (a, b) {
        (Some(a), Some(b)) => {
            let component = if a.component == Component::Vector || b.component == Component::Vector {
                Component::Vector
            } else {
                a.component
            };
            let levels = match (&a.levels, &b.levels) {
                (Levels::None, other) | (other, Levels::None) => other.clone(),
                (Levels::Known(x), Levels::Known(_)) => Levels::Known(x.clone()),
                _ => Levels::Unknown,
            };
            FieldType {
                component,
                unit: None,
                levels,
                time: a.time || b.time,
                horizontal: a.horizontal || b.horizontal,
                origin: None,
            }
        }
        (Some(field), None) | (None, Some(field)) => FieldType { origin: None, ..field.clone() },
        (None, None) => return Type::number(unit),
    };
    Type::Field(FieldType { unit, ..base })
}

fn convert_value(value: f64, from: &Option<Unit>, to: &Option<Unit>) -> Option<f64> {
    let (from, to) = (from.as_ref()?, to.as_ref()?);
    let (factor, offset) = from.conversion_to(to).ok()?;
    Some(value * factor + offset)
}

/// Why two branch kinds do not match, if they do not.
fn incompatible(a: &Type, b: &Type) -> Option<String> {
    if a.is_unknown() || b.is_unknown() {
        return None;
    }
    let same = match (a, b) {
        (Type::Number { unit: x, .. } | Type::Field(FieldType { unit: x, .. }), Type::Number { unit: y, .. } | Type::Field(FieldType { unit: y, .. })) => {
            let components = (component_of(a), component_of(b));
            let vector_mismatch = matches!(components, (Some(Component::Vector), Some(Component::Scalar)) | (Some(Component::Scalar), Some(Component::Vector)));
            !vector_mismatch
                && match (x, y) {
                    (None, None) => true,
                    (Some(x), Some(y)) => same_dimension(x, y),
                    (None, Some(unit)) | (Some(unit), None) => is_dimensionless(&Some(unit.clone())),
                }
        }
        _ => std::mem::discriminant(a) == std::mem::discriminant(b),
    };
    (!same).then(|| format!("{} and {}", a.describe(), b.describe()))
}

/// Calls to named functions in an expression, with their spans.
fn collect_calls(expr: &Expr, out: &mut Vec<(String, Span)>) {
    match &expr.kind {
        ExprKind::Call { callee, arguments, options } => {
            if let ExprKind::Name(name) = &callee.kind {
                out.push((name.clone(), callee.span));
            } else {
                collect_calls(callee, out);
            }
            for argument in arguments {
                collect_calls(argument, out);
            }
            for option in options {
                collect_calls(&option.value, out);
            }
        }
        ExprKind::Member { base, .. } => collect_calls(base, out),
        ExprKind::Unary { operand, .. } => collect_calls(operand, out),
        ExprKind::Binary { left, right, .. } => {
            collect_calls(left, out);
            collect_calls(right, out);
        }
        ExprKind::Range { from, to } => {
            collect_calls(from, out);
            collect_calls(to, out);
        }
        ExprKind::Select { base, selector, .. } => {
            collect_calls(base, out);
            collect_calls(selector, out);
        }
        ExprKind::Convert { value, .. } => collect_calls(value, out),
        ExprKind::If { condition, then_branch, else_branch } => {
            collect_calls(condition, out);
            collect_calls(then_branch, out);
            collect_calls(else_branch, out);
        }
        ExprKind::Block { statements } => {
            for statement in statements {
                match &statement.kind {
                    StatementKind::Let { value, .. } | StatementKind::Expression(value) => collect_calls(value, out),
                    _ => {}
                }
            }
        }
        ExprKind::Number { .. } | ExprKind::Angle { .. } | ExprKind::String(_) | ExprKind::Bool(_) | ExprKind::Name(_) => {}
    }
}

fn count_words(count: usize, noun: &str) -> String {
    match count {
        0 => format!("no {noun}s"),
        1 => format!("1 {noun}"),
        _ => format!("{count} {noun}s"),
    }
}

fn were_given(count: usize) -> String {
    match count {
        0 => "none were".to_string(),
        1 => "1 was".to_string(),
        _ => format!("{count} were"),
    }
}

/// The span of a call's arguments, or of its parentheses when there are none.
fn arguments_span(call: &Expr, arguments: &[Expr]) -> Span {
    match (arguments.first(), arguments.last()) {
        (Some(first), Some(last)) => first.span.to(last.span),
        _ => call.span,
    }
}

// Unit arithmetic for the checker. Offsets (degC) are dropped first, since
// a product or quotient of temperatures is one of differences; an exponent
// that overflows the dimension vector (adversarial input only) gives a
// plain number rather than a panic, and the evaluator reports it.
fn times(a: &Unit, b: &Unit) -> Unit {
    a.as_difference().multiply(&b.as_difference()).unwrap_or_else(|_| Unit::dimensionless())
}

fn over(a: &Unit, b: &Unit) -> Unit {
    a.as_difference().divide(&b.as_difference()).unwrap_or_else(|_| Unit::dimensionless())
}

fn power(a: &Unit, exponent: i32) -> Unit {
    a.as_difference().powi(exponent).unwrap_or_else(|_| Unit::dimensionless())
}
