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
            StatementKind::Expression(expr) => {
                let kind = self.expr(expr);
                Some(StatementKindInfo { span: statement.span, name: None, kind })
            }
        }
    }

    fn warn_if_hiding(&mut self, name: &Identifier) {
        if self.environment.builtins.iter().any(|builtin| builtin.name == name.name) {
            self.report(
                Diagnostic::warning(format!("`{}` hides the built-in operator of the same name", name.name), name.span)
                    .with_label("this name")
                    .with_help(format!("choose another name to keep calling `{}(...)`", name.name)),
            );
        }
    }

    fn open(&mut self, paths: &[StringLiteral], alias: Option<&Identifier>) {
        let Some(first) = paths.first() else { return };
        let span = first.span.to(paths.last().map_or(first.span, |path| path.span));
        let names: Vec<String> = paths.iter().map(|path| path.value.clone()).collect();
        let display = alias.map_or_else(|| names.join(", "), |alias| alias.name.clone());
        let described = match self.environment.catalog {
            Some(catalog) => match catalog.describe(&names) {
                Ok(mut info) => {
                    info.name = match (alias, info.name.is_empty()) {
                        (Some(alias), false) => format!("{} ({})", alias.name, info.name),
                        (Some(alias), true) => alias.name.clone(),
                        (None, true) => display.clone(),
                        (None, false) => info.name,
                    };
                    CurrentDataset::Known(info)
                }
                Err(message) => {
                    self.error(format!("cannot open {}", list_words(&names, "and")), span, message.clone())
                        .help = Some("check the path; it is read relative to the working folder".to_string());
                    CurrentDataset::Opaque { name: display.clone() }
                }
            },
            None => CurrentDataset::Opaque { name: display.clone() },
        };
        if let Some(alias) = alias {
            if let CurrentDataset::Known(info) = &described {
                self.scope.datasets.insert(alias.name.clone(), info.clone());
            }
            self.scope.bindings.insert(alias.name.clone(), Binding { kind: Type::Dataset(alias.name.clone()), span: alias.span });
        }
        self.scope.current = Some(described);
    }

    fn define_function(&mut self, name: &Identifier, parameters: &[Identifier], body: &Expr, span: Span) {
        if !self.locals.is_empty() {
            self.error("functions are defined at the top level", name.span, "inside a block")
                .help = Some("move the function definition out of the block".to_string());
            return;
        }
        let mut seen = BTreeSet::new();
        for parameter in parameters {
            if !seen.insert(parameter.name.as_str()) {
                self.error(format!("the parameter `{}` appears twice", parameter.name), parameter.span, "repeated")
                    .help = Some("give each parameter a different name".to_string());
            }
        }
        self.warn_if_hiding(name);
        // Recursion: follow calls from the body through the functions known.
        if let Some((call_span, path)) = self.find_recursion(&name.name, body) {
            let message = if path.len() == 1 {
                format!("`{}` calls itself", name.name)
            } else {
                format!("`{}` calls itself through {}", name.name, list_words(&path[1..], "and"))
            };
            self.error(message, call_span, "recursive call")
                .help = Some("recursion is not supported; write the steps out, or use a layer operator".to_string());
            // Keep it out of the scope so that calls do not loop.
            return;
        }
        // Check the body once with parameters of unknown kind.
        let frame: BTreeMap<String, Type> = parameters.iter().map(|parameter| (parameter.name.clone(), Type::Unknown)).collect();
        self.locals.push(frame);
        self.expr(body);
        self.locals.pop();
        self.local_functions.insert(name.name.clone());
        self.scope.functions.insert(
            name.name.clone(),
            FunctionDefinition { name: name.name.clone(), parameters: parameters.to_vec(), body: body.clone(), span },
        );
    }

    /// A call in `body` that leads back to `name`: its span and the chain of
    /// functions on the way.
    fn find_recursion(&self, name: &str, body: &Expr) -> Option<(Span, Vec<String>)> {
        let mut direct = Vec::new();
        collect_calls(body, &mut direct);
        for (callee, span) in direct {
            if callee == name {
                return Some((span, vec![name.to_string()]));
            }
            // Breadth-first over the known functions' bodies.
            let mut visited = BTreeSet::new();
            let mut queue = vec![(callee.clone(), vec![name.to_string(), callee.clone()])];
            while let Some((current, path)) = queue.pop() {
                if !visited.insert(current.clone()) {
                    continue;
                }
                let Some(definition) = self.scope.functions.get(&current) else { continue };
                let mut calls = Vec::new();
                collect_calls(&definition.body, &mut calls);
                for (next, _) in calls {
                    if next == name {
                        return Some((span, path));
                    }
                    let mut longer = path.clone();
                    longer.push(next.clone());
                    queue.push((next, longer));
                }
            }
        }
        None
    }

    fn block(&mut self, statements: &[Statement], span: Span) -> Type {
        self.locals.push(BTreeMap::new());
        let mut last = None;
        for statement in statements {
            last = None;
            match &statement.kind {
                StatementKind::Let { name, value } => {
                    let kind = self.expr(value);
                    if let Some(frame) = self.locals.last_mut() {
                        frame.insert(name.name.clone(), kind);
                    }
                }
                StatementKind::Expression(expr) => last = Some(self.expr(expr)),
                other => {
                    let word = match other {
                        StatementKind::Function { .. } => "function",
                        StatementKind::Open { .. } => "open",
                        StatementKind::Recipe { .. } => "recipe",
                        StatementKind::About { .. } => "about",
                        StatementKind::Parameter { .. } => "parameter",
                        _ => "output",
                    };
                    self.error(format!("`{word}` belongs at the top level, not inside a block"), statement.span, "inside a block")
                        .help = Some("a block holds `let` lines and ends with the expression that gives its value".to_string());
                }
            }
        }
        self.locals.pop();
        match last {
            Some(kind) => kind,
            None => {
                let end = Span::new(span.end.saturating_sub(1), span.end);
                self.error("a block must end with an expression that gives its value", end, "no value before `}`")
                    .help = Some("end the block with an expression, such as { let t = thermal_wind(layer); speed(t) }".to_string());
                Type::Unknown
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

    #[inline(never)]
    fn literal(&mut self, expr: &Expr) -> Type {
        match &expr.kind {
            ExprKind::Number { value, unit: None } => Type::Number { unit: None, value: Some(*value) },
            ExprKind::Number { value, unit: Some(text) } => match self.unit(text) {
                Some(unit) => Type::Number { unit: Some(unit), value: Some(*value) },
                None => Type::Unknown,
            },
            ExprKind::Angle { value, hemisphere } => {
                let (axis, limit) =
                    if hemisphere.is_latitude() { (AngleAxis::Latitude, 90.0) } else { (AngleAxis::Longitude, 360.0) };
                if *value > limit {
                    let what = if axis == AngleAxis::Latitude { "latitude" } else { "longitude" };
                    self.error(format!("a {what} is at most {} degrees", format_number(limit)), expr.span, "out of range")
                        .help = Some(if axis == AngleAxis::Latitude {
                        "latitudes run from 90 south to 90 north".to_string()
                    } else {
                        "longitudes run from 180 west to 180 east (or 0 to 360 east)".to_string()
                    });
                    return Type::Unknown;
                }
                let sign = if matches!(hemisphere, Hemisphere::South | Hemisphere::West) { -1.0 } else { 1.0 };
                Type::Angle { axis, degrees: Some(sign * value) }
            }
            _ => Type::Unknown,
        }
    }

    #[inline(never)]
    fn if_kind(
        &mut self,
        condition_kind: Type,
        then_kind: Type,
        else_kind: Type,
        condition: &Expr,
        then_branch: &Expr,
        else_branch: &Expr,
    ) -> Type {
        let is_field_condition = matches!(&condition_kind, Type::Field(field) if field.component == Component::Boolean);
        if !matches!(condition_kind, Type::Bool | Type::Unknown) && !is_field_condition {
            self.error("the condition of `if` must be true or false", condition.span, condition_kind.describe())
                .help = Some("compare something, such as if temperature > 273.15 K then ...".to_string());
        }
        if let Some(problem) = incompatible(&then_kind, &else_kind) {
            self.error("the two branches of `if` give different kinds of value", then_branch.span.to(else_branch.span), problem)
                .help = Some("make both branches the same kind, with units of the same dimension".to_string());
            return Type::Unknown;
        }
        match (&then_kind, is_field_condition) {
            (Type::Unknown, _) => else_kind,
            (Type::Number { unit, .. }, true) => Type::Field(FieldType {
                component: Component::Scalar,
                unit: unit.clone(),
                levels: Levels::Unknown,
                time: false,
                horizontal: true,
                origin: None,
            }),
            (Type::Number { unit, .. }, false) => Type::number(unit.clone()),
            _ => then_kind,
        }
    }

    fn unit(&mut self, text: &UnitText) -> Option<Unit> {
        match Unit::parse(&text.text) {
            Ok(unit) => Some(unit),
            Err(error) => {
                let first_word: String = text.text.chars().take_while(|c| c.is_alphanumeric() || *c == '_').collect();
                let mut help = format!(
                    "units are written like {}, with exponents such as m2 s-2 and K/(100 km)",
                    KNOWN_UNIT_WORDS[..8].join(", ")
                );
                if let Some(suggestion) = did_you_mean(&first_word, KNOWN_UNIT_WORDS.iter().copied()) {
                    help = format!("did you mean `{suggestion}`?");
                } else if self.name_exists(&first_word) {
                    help = format!("to multiply by `{first_word}`, write `*` between the number and the name");
                }
                let detail = error.to_string();
                let diagnostic = self.error(format!("unknown unit `{}`", text.text), text.span, "not a known unit");
                diagnostic.help = Some(help);
                if !detail.starts_with("unknown unit") {
                    diagnostic.notes.push(detail);
                }
                None
            }
        }
    }

    fn name_exists(&self, name: &str) -> bool {
        self.locals.iter().any(|frame| frame.contains_key(name))
            || self.scope.bindings.contains_key(name)
            || self.scope.functions.contains_key(name)
            || self.environment.builtins.iter().any(|builtin| builtin.name == name)
            || self.known_dataset().is_some_and(|info| info.variable(name).is_some() || info.has_role(name))
    }

    // ---------------------------------------------------------------- names

    fn lookup(&mut self, name: &str, span: Span) -> Type {
        for frame in self.locals.iter().rev() {
            if let Some(kind) = frame.get(name) {
                return kind.clone();
            }
        }
        if let Some(binding) = self.scope.bindings.get(name) {
            return binding.kind.clone();
        }
        if self.scope.functions.contains_key(name) {
            return Type::Function(name.to_string());
        }
        if self.environment.recipes.iter().any(|recipe| recipe.name == name) {
            return Type::Recipe(name.to_string());
        }
        if let Some(info) = self.known_dataset() {
            if let Some(kind) = dataset_name(info, name) {
                return kind;
            }
        }
        if self.environment.builtins.iter().any(|builtin| builtin.name == name) {
            return Type::Function(name.to_string());
        }
        if self.dataset_is_opaque() {
            return Type::Unknown;
        }
        self.unknown_name(name, span);
        Type::Unknown
    }

    fn all_names(&self) -> Vec<String> {
        let mut names: Vec<String> = Vec::new();
        for frame in &self.locals {
            names.extend(frame.keys().cloned());
        }
        names.extend(self.scope.bindings.keys().cloned());
        names.extend(self.scope.functions.keys().cloned());
        names.extend(self.environment.recipes.iter().map(|recipe| recipe.name.clone()));
        if let Some(info) = self.known_dataset() {
            names.extend(info.variables.iter().map(|variable| variable.name.clone()));
            names.extend(info.role_names());
        }
        names.extend(self.environment.builtins.iter().map(|builtin| builtin.name.to_string()));
        names
    }

    fn unknown_name(&mut self, name: &str, span: Span) {
        let is_role = name == builtins::WIND_ROLE || builtins::ROLES.iter().any(|role| role.name == name);
        let names = self.all_names();
        let suggestion = did_you_mean(name, names.iter().map(String::as_str));
        let exists = self.what_exists();
        if is_role {
            // A role the dataset does not have.
            let message = match &self.scope.current {
                Some(CurrentDataset::Known(info)) => format!("the dataset {} has no {name}", info.name),
                _ => format!("`{name}` needs an open dataset"),
            };
            let diagnostic = self.error(message, span, "not in the data");
            diagnostic.help = Some(exists);
            return;
        }
        if KNOWN_UNIT_WORDS.contains(&name) {
            let diagnostic = self.error(format!("unknown name `{name}`"), span, "a unit, not a name");
            diagnostic.help = Some(
                "a unit is written right after its number, without spaces around `/`: such as 500 hPa or 10 m/s".to_string(),
            );
            return;
        }
        let diagnostic = self.error(format!("unknown name `{name}`"), span, "not defined");
        match suggestion {
            Some(suggestion) => {
                diagnostic.help = Some(format!("did you mean `{suggestion}`?"));
                diagnostic.notes.push(exists);
            }
            None => diagnostic.help = Some(exists),
        }
    }

    // ---------------------------------------------------------------- calls

    /// A call: the target is resolved, the arguments (and option values
    /// that are expressions) are checked, then the call itself.
    fn call(&mut self, expr: &Expr, callee: &Expr, arguments: &[Expr], options: &[CallOption]) -> Type {
        let target = self.call_target(callee);
        let kinds: Vec<Type> = arguments.iter().map(|argument| self.expr(argument)).collect();
        let mut option_kinds: Vec<Option<Type>> = Vec::with_capacity(options.len());
        for option in options {
            let evaluated = match &target {
                CallTarget::Builtin(builtin) => {
                    builtin.option(&option.name.name).is_some_and(|spec| !matches!(spec.kind, OptionKind::Words(_)))
                }
                CallTarget::Recipe(_) => true,
                CallTarget::User(_) | CallTarget::Nothing => false,
            };
            option_kinds.push(if evaluated { Some(self.expr(&option.value)) } else { None });
        }
        match target {
            CallTarget::User(definition) => self.user_call(&definition, expr, kinds, arguments, options),
            CallTarget::Builtin(builtin) => self.builtin_call(builtin, expr, &kinds, arguments, options, &option_kinds),
            CallTarget::Recipe(name) => self.recipe_call(&name, arguments, options),
            CallTarget::Nothing => Type::Unknown,
        }
    }

    /// What a call calls; reports callees that cannot be called.
    #[inline(never)]
    fn call_target(&mut self, callee: &Expr) -> CallTarget<'e> {
        let ExprKind::Name(name) = &callee.kind else {
            let kind = self.expr(callee);
            if !kind.is_unknown() {
                self.error("only a named function can be called", callee.span, kind.describe())
                    .help = Some("call a built-in operator or a function defined with `function`".to_string());
            }
            return CallTarget::Nothing;
        };
        // A local binding or parameter shadows functions.
        let bound = self
            .locals
            .iter()
            .rev()
            .find_map(|frame| frame.get(name).cloned())
            .or_else(|| self.scope.bindings.get(name).map(|binding| binding.kind.clone()));
        let target = match bound {
            Some(Type::Function(target)) => target,
            Some(Type::Recipe(target)) => return CallTarget::Recipe(target),
            Some(Type::Unknown) => return CallTarget::Nothing,
            Some(kind) => {
                let diagnostic = self.error(format!("`{name}` is not a function"), callee.span, format!("this is {}", kind.describe()));
                diagnostic.help = Some(format!("`{name}` was given a value with `let`, `parameter` or `output`; only functions can be called"));
                return CallTarget::Nothing;
            }
            None => name.clone(),
        };
        if let Some(definition) = self.scope.functions.get(&target) {
            return CallTarget::User(Box::new(definition.clone()));
        }
        if self.environment.recipes.iter().any(|recipe| recipe.name == target) {
            return CallTarget::Recipe(target);
        }
        let environment: &'e Environment<'e> = self.environment;
        if let Some(builtin) = environment.builtins.iter().find(|builtin| builtin.name == target) {
            return CallTarget::Builtin(builtin);
        }
        // The operators for pictures, tables, printing and recipes take
        // values of any kind; their arguments were checked as expressions
        // above and the evaluator checks what each needs.
        if super::builtins::PRESENTATION.contains(&target.as_str()) {
            return CallTarget::Nothing;
        }
        // Calling a dataset variable or role.
        if let Some(info) = self.known_dataset() {
            if let Some(kind) = dataset_name(info, &target) {
                let diagnostic = self.error(format!("`{target}` is not a function"), callee.span, format!("this is {}", kind.describe()));
                diagnostic.help = Some(format!("select from it instead, such as {target} at 500 hPa"));
                return CallTarget::Nothing;
            }
        }
        if self.dataset_is_opaque() && self.environment.builtins.is_empty() {
            return CallTarget::Nothing;
        }
        let functions: Vec<String> = self
            .scope
            .functions
            .keys()
            .cloned()
            .chain(self.environment.builtins.iter().map(|builtin| builtin.name.to_string()))
            .collect();
        let suggestion = did_you_mean(&target, functions.iter().map(String::as_str));
        let diagnostic = self.error(format!("unknown function `{target}`"), callee.span, "not defined");
        diagnostic.help = Some(match suggestion {
            Some(suggestion) => format!("did you mean `{suggestion}`?"),
            None => "define it with `function`, or see the list of built-in operators".to_string(),
        });
        CallTarget::Nothing
    }

    #[inline(never)]
    fn recipe_call(&mut self, name: &str, arguments: &[Expr], options: &[CallOption]) -> Type {
        let Some(recipe) = self.environment.recipes.iter().find(|recipe| recipe.name == name).cloned() else {
            return Type::Unknown;
        };
        if let Some(first) = arguments.first() {
            let span = first.span.to(arguments.last().map_or(first.span, |last| last.span));
            self.error(format!("the recipe `{name}` takes its parameters as options"), span, "positional arguments")
                .help = Some(format!(
                "write {name}() with {} ...",
                recipe.parameters.first().map_or("parameter", String::as_str)
            ));
        }
        for option in options {
            if !recipe.parameters.contains(&option.name.name) {
                let suggestion = did_you_mean(&option.name.name, recipe.parameters.iter().map(String::as_str));
                let diagnostic = self.error(
                    format!("the recipe `{name}` has no parameter `{}`", option.name.name),
                    option.name.span,
                    "unknown parameter",
                );
                diagnostic.help = Some(match suggestion {
                    Some(suggestion) => format!("did you mean `{suggestion}`?"),
                    None => format!("its parameters are {}", list_words(&recipe.parameters, "and")),
                });
            }
        }
        Type::Unknown
    }

    fn user_call(
        &mut self,
        definition: &FunctionDefinition,
        expr: &Expr,
        argument_kinds: Vec<Type>,
        arguments: &[Expr],
        options: &[CallOption],
    ) -> Type {
        let Some(frame) = self.user_call_frame(definition, expr, argument_kinds, arguments, options) else {
            return Type::Unknown;
        };
        let foreign = !self.local_functions.contains(&definition.name);
        self.calls.push(CallFrame { name: definition.name.clone(), call_span: expr.span, call_text: expr.to_string(), foreign });
        // The body sees its parameters and the top-level scope, not the
        // caller's locals.
        let saved = std::mem::take(&mut self.locals);
        self.locals.push(frame);
        let result = self.expr(&definition.body);
        self.locals = saved;
        self.calls.pop();
        result
    }

    /// Checks a call of a user function; the parameters' kinds if it can be
    /// checked further.
    #[inline(never)]
    fn user_call_frame(
        &mut self,
        definition: &FunctionDefinition,
        expr: &Expr,
        argument_kinds: Vec<Type>,
        arguments: &[Expr],
        options: &[CallOption],
    ) -> Option<BTreeMap<String, Type>> {
        if let Some(first) = options.first() {
            self.error(format!("`{}` takes no options", definition.name), first.name.span, "option of a user function")
                .help = Some("functions defined with `function` take arguments only; add a parameter instead".to_string());
        }
        if arguments.len() != definition.parameters.len() {
            let names: Vec<&str> = definition.parameters.iter().map(|parameter| parameter.name.as_str()).collect();
            self.error(
                format!(
                    "`{}` takes {} but {} given",
                    definition.name,
                    count_words(names.len(), "argument"),
                    were_given(arguments.len())
                ),
                arguments_span(expr, arguments),
                "wrong number of arguments",
            )
            .help = Some(format!("call it as {}({})", definition.name, names.join(", ")));
            return None;
        }
        if self.calls.len() >= MAX_CALL_DEPTH {
            self.error("function calls are nested too deeply to check", expr.span, "too deep")
                .help = Some(format!("at most {MAX_CALL_DEPTH} functions may call one another in a chain"));
            return None;
        }
        if self.calls.iter().any(|frame| frame.name == definition.name) {
            // Recursion is rejected at definition; stop here regardless.
            return None;
        }
        Some(definition.parameters.iter().map(|parameter| parameter.name.clone()).zip(argument_kinds).collect())
    }

    #[inline(never)]
    fn builtin_call(
        &mut self,
        builtin: &Builtin,
        expr: &Expr,
        kinds: &[Type],
        arguments: &[Expr],
        options: &[CallOption],
        option_kinds: &[Option<Type>],
    ) -> Type {
        let mut failed = false;
        if arguments.len() != builtin.parameters.len() {
            let names: Vec<&str> = builtin.parameters.iter().map(|parameter| parameter.name).collect();
            self.error(
                format!(
                    "`{}` takes {} but {} given",
                    builtin.name,
                    count_words(names.len(), "argument"),
                    were_given(arguments.len())
                ),
                arguments_span(expr, arguments),
                "wrong number of arguments",
            )
            .help = Some(format!("{}: {}", builtin.signature(), builtin.documentation));
            failed = true;
        } else {
            for ((parameter, argument), kind) in builtin.parameters.iter().zip(arguments).zip(kinds) {
                if !self.argument(builtin, parameter, argument, kind) {
                    failed = true;
                }
            }
        }
        let chosen = self.options(builtin, options, option_kinds);
        if failed {
            return Type::Unknown;
        }
        self.requirements(builtin, &chosen, expr.span);
        self.level_ranges(builtin, arguments, kinds);
        if builtin.result_kind == ResultKind::Point {
            self.point_on_grid(kinds, expr.span);
        }
        result_kind(builtin, kinds, self.known_dataset().is_none_or(DatasetInfo::has_time))
    }

    /// Checks one argument against its parameter; false if it is wrong.
    fn argument(&mut self, builtin: &Builtin, parameter: &builtins::Parameter, argument: &Expr, kind: &Type) -> bool {
        if kind.is_unknown() {
            return true;
        }
        if accepts(parameter.kind, kind) {
            if parameter.needs_grid {
                if let Type::Field(field) = kind {
                    if !field.horizontal {
                        self.error(
                            format!("`{}` needs a field on the horizontal grid", builtin.name),
                            argument.span,
                            "no longer on the grid",
                        )
                        .help = Some(format!(
                            "`{}` differentiates across the grid; select the point or area after the call instead",
                            builtin.name
                        ));
                        return false;
                    }
                }
            }
            if parameter.kind == ParameterKind::IndexOrString {
                return self.time_argument(kind, argument.span);
            }
            return true;
        }
        let expected = parameter.kind.describe();
        let mut help = format!("{}: {}", builtin.signature(), builtin.documentation);
        match (parameter.kind, kind) {
            (ParameterKind::Layer, Type::Number { unit, .. }) if is_pressure(unit) => {
                help = "a layer has two pressures, such as 1000 hPa to 500 hPa".to_string();
            }
            (ParameterKind::Pressure, Type::Layer { .. }) => {
                help = "pick one level, such as 500 hPa".to_string();
            }
            (ParameterKind::Pressure | ParameterKind::PressureOrLayer | ParameterKind::Layer, Type::Number { unit: None, value }) => {
                help = format!("add the unit, such as {} hPa", value.map_or("500".to_string(), format_number));
            }
            (ParameterKind::Latitude | ParameterKind::Longitude, Type::Number { .. }) => {
                help = "write the hemisphere after the number, such as 52.5 north or 20 west".to_string();
            }
            (ParameterKind::LatitudeRange | ParameterKind::LongitudeRange, _) => {
                help = "write a range with `to`, such as 40 north to 65 north".to_string();
            }
            (ParameterKind::HeightOrGeopotential, Type::Field(_)) => {
                help = "give it geopotential_height (m) or geopotential (m2 s-2), such as geopotential_height at 500 hPa".to_string();
            }
            _ => {}
        }
        self.error(
            format!("the {} of `{}` must be {expected}", parameter.name.replace('_', " "), builtin.name),
            argument.span,
            format!("this is {}", kind.describe()),
        )
        .help = Some(help);
        false
    }

    /// Warns when a point lies outside the current dataset's grid (it may be
    /// meant for another dataset, so this is not an error).
    #[inline(never)]
    fn point_on_grid(&mut self, kinds: &[Type], span: Span) {
        let (Some(Type::Angle { degrees: Some(latitude), .. }), Some(Type::Angle { degrees: Some(longitude), .. })) =
            (kinds.first(), kinds.get(1))
        else {
            return;
        };
        let Some(info) = self.known_dataset() else { return };
        let (Some((south, north)), Some((west, east))) = (info.latitude_range, info.longitude_range) else { return };
        let tolerance = 1e-9;
        let inside_latitude = *latitude >= south - tolerance && *latitude <= north + tolerance;
        // Longitudes wrap: measure eastward from the western edge.
        let width = east - west;
        let inside_longitude =
            width >= 360.0 || (longitude - west).rem_euclid(360.0) <= width.rem_euclid(360.0) + tolerance;
        if inside_latitude && inside_longitude {
            return;
        }
        let name = info.name.clone();
        let angle = |value: f64, positive: &str, negative: &str| {
            format!("{} {}", format_number(value.abs()), if value < 0.0 { negative } else { positive })
        };
        let extent = format!(
            "{} to {}, {} to {}",
            angle(south, "north", "south"),
            angle(north, "north", "south"),
            angle(west, "east", "west"),
            angle(east, "east", "west")
        );
        self.report(
            Diagnostic::warning(format!("this point lies outside the grid of {name}"), span)
                .with_label("no data here")
                .with_help(format!("the grid covers {extent}")),
        );
    }

    /// A time step number within the data, or a time string.
    #[inline(never)]
    fn time_argument(&mut self, kind: &Type, span: Span) -> bool {
        match kind {
            Type::String(_) => self.time_of(kind, span).is_some(),
            Type::Number { value: Some(index), .. } => {
                let Some(axis) = self.known_dataset().and_then(|info| info.times.clone()) else { return true };
                if *index >= axis.count as f64 {
                    self.error(
                        format!("the data have no time step {}", format_number(*index)),
                        span,
                        "past the last time",
                    )
                    .help = Some(format!(
                        "the data have {} times, numbered 0 to {} ({} to {})",
                        axis.count,
                        axis.count.saturating_sub(1),
                        axis.first,
                        axis.last
                    ));
                    return false;
                }
                true
            }
            _ => true,
        }
    }

    /// Checks the options; returns the chosen words per option name.
    fn options(&mut self, builtin: &Builtin, options: &[CallOption], option_kinds: &[Option<Type>]) -> BTreeMap<&'static str, String> {
        let mut chosen = BTreeMap::new();
        let mut seen: BTreeMap<String, Span> = BTreeMap::new();
        for (index, option) in options.iter().enumerate() {
            let evaluated = option_kinds.get(index).cloned().flatten().unwrap_or(Type::Unknown);
            let name = &option.name.name;
            if seen.contains_key(name) {
                self.error(format!("the option `{name}` is given twice"), option.name.span, "given again")
                    .help = Some("give each option once".to_string());
                continue;
            }
            seen.insert(name.clone(), option.name.span);
            let Some(spec) = builtin.option(name) else {
                let valid: Vec<&str> = builtin.options.iter().map(|option| option.name).collect();
                let suggestion = did_you_mean(name, valid.iter().copied());
                let diagnostic = self.error(format!("`{}` has no option `{name}`", builtin.name), option.name.span, "unknown option");
                diagnostic.help = Some(match (suggestion, valid.is_empty()) {
                    (_, true) => format!("`{}` takes no options", builtin.name),
                    (Some(suggestion), false) => format!("did you mean `{suggestion}`?"),
                    (None, false) => format!("its options are {}", list_words(&valid, "and")),
                });
                if !valid.is_empty() {
                    diagnostic.notes.push(builtin.signature());
                }
                continue;
            };
            match spec.kind {
                OptionKind::Words(words) => {
                    let word = match &option.value.kind {
                        ExprKind::Name(word) => Some(word.clone()),
                        _ => None,
                    };
                    match word {
                        Some(word) if words.contains(&word.as_str()) => {
                            chosen.insert(spec.name, word);
                        }
                        _ => {
                            let suggestion = word.as_deref().and_then(|word| did_you_mean(word, words.iter().copied()));
                            let diagnostic = self.error(
                                format!("the option `{name}` of `{}` is one of {}", builtin.name, list_words(words, "or")),
                                option.value.span,
                                "not one of these words",
                            );
                            diagnostic.help = Some(match suggestion {
                                Some(suggestion) => format!("did you mean `{suggestion}`?"),
                                None => spec.documentation.to_string(),
                            });
                        }
                    }
                }
                OptionKind::Angle => {
                    let kind = evaluated.clone();
                    let ok = match &kind {
                        Type::Unknown => true,
                        Type::Number { unit, value } => {
                            let degrees = unit.as_ref().and_then(|unit| {
                                DEGREE.as_ref().and_then(|degree| unit.conversion_to(degree).ok())
                            });
                            match (unit, degrees, value) {
                                (Some(_), Some((factor, _)), Some(value)) => {
                                    let degrees = value * factor;
                                    if !(0.0..=90.0).contains(&degrees) {
                                        self.error(
                                            format!("the option `{name}` must be between 0 and 90 degrees"),
                                            option.value.span,
                                            "out of range",
                                        )
                                        .help = Some("5 to 15 degrees is usual".to_string());
                                    }
                                    true
                                }
                                (Some(_), Some(_), None) => true,
                                (None, _, _) => {
                                    self.error(
                                        format!("the option `{name}` needs the unit degrees"),
                                        option.value.span,
                                        "no unit",
                                    )
                                    .help = Some(format!(
                                        "write {} degrees",
                                        value.map_or("10".to_string(), format_number)
                                    ));
                                    true
                                }
                                _ => false,
                            }
                        }
                        _ => false,
                    };
                    if !ok {
                        self.error(
                            format!("the option `{name}` must be an angle such as 10 degrees"),
                            option.value.span,
                            format!("this is {}", kind.describe()),
                        )
                        .help = Some(spec.documentation.to_string());
                    }
                }
                OptionKind::Length => {
                    let kind = evaluated.clone();
                    let ok = match &kind {
                        Type::Unknown => true,
                        Type::Number { unit, .. } => is_dimension(unit, &METRE),
                        _ => false,
                    };
                    if !ok {
                        self.error(
                            format!("the option `{name}` must be a length such as 250 km"),
                            option.value.span,
                            format!("this is {}", kind.describe()),
                        )
                        .help = Some(spec.documentation.to_string());
                    }
                }
            }
        }
        chosen
    }

    /// Does the current dataset have what the operator needs?
    fn requirements(&mut self, builtin: &Builtin, chosen: &BTreeMap<&'static str, String>, span: Span) {
        if builtin.requires.is_empty() {
            return;
        }
        match &self.scope.current {
            None => {
                if !self.reported_no_dataset {
                    self.reported_no_dataset = true;
                    self.error(format!("`{}` needs data, and no dataset is open", builtin.name), span, "needs data")
                        .help = Some("open one first, such as open \"case.nc\"".to_string());
                }
            }
            Some(CurrentDataset::Opaque { .. }) => {}
            Some(CurrentDataset::Known(info)) => {
                let info = info.clone();
                for requirement in builtin.requires {
                    let applies = match requirement.when {
                        When::Always => true,
                        When::OptionAbsent(option) => !chosen.contains_key(option),
                        When::OptionIs(option, word) => chosen.get(option).is_some_and(|chosen| chosen == word),
                    };
                    if applies && !requirement.any_of.iter().any(|role| info.has_role(role)) {
                        let wanted = list_words(requirement.any_of, "or");
                        let route = match requirement.when {
                            When::OptionIs(option, word) => format!(" with {option} {word}"),
                            _ => String::new(),
                        };
                        self.error(
                            format!("`{}`{route} needs {wanted}, which the dataset {} lacks", builtin.name, info.name),
                            span,
                            "cannot be computed from this data",
                        )
                        .help = Some(describe_dataset(&info));
                    }
                }
            }
        }
    }

    /// Levels and layers given to an operator must lie within the data.
    fn level_ranges(&mut self, builtin: &Builtin, arguments: &[Expr], kinds: &[Type]) {
        for ((parameter, argument), kind) in builtin.parameters.iter().zip(arguments).zip(kinds) {
            let pressures: Vec<f64> = match kind {
                Type::Number { unit, value: Some(value) } if is_pressure(unit) => {
                    to_pascal(*value, unit).into_iter().collect()
                }
                Type::Layer { bottom, top } => bottom.iter().chain(top.iter()).copied().collect(),
                _ => continue,
            };
            if pressures.is_empty() {
                continue;
            }
            // Which levels: a field argument's, else the first role needed.
            let field_levels = kinds.iter().find_map(|kind| match kind {
                Type::Field(FieldType { levels: Levels::Known(levels), origin, .. }) => {
                    Some((levels.clone(), origin.clone().unwrap_or_else(|| "the field".to_string())))
                }
                _ => None,
            });
            let role_levels = || {
                let info = self.known_dataset()?;
                builtin.requires.iter().flat_map(|requirement| requirement.any_of.iter()).find_map(|role| {
                    let variable = info.role(role)?;
                    (!variable.levels_pa.is_empty()).then(|| (variable.levels_pa.clone(), role.to_string()))
                })
            };
            let Some((levels, origin)) = field_levels.or_else(role_levels) else { continue };
            let _ = parameter;
            for pressure in pressures {
                self.level_in_range(pressure, &levels, &origin, argument.span);
            }
        }
    }

    /// Reports a pressure outside `levels`; true when inside.
    fn level_in_range(&mut self, pressure: f64, levels: &[f64], origin: &str, span: Span) -> bool {
        let highest = levels.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        let lowest = levels.iter().copied().fold(f64::INFINITY, f64::min);
        if levels.is_empty() || (pressure <= highest * (1.0 + 1e-9) && pressure >= lowest * (1.0 - 1e-9)) {
            return true;
        }
        let message = if pressure > highest {
            format!("{} is below the lowest level of {origin} ({})", format_pressure(pressure), format_pressure(highest))
        } else {
            format!("{} is above the highest level of {origin} ({})", format_pressure(pressure), format_pressure(lowest))
        };
        self.error(message, span, "outside the data")
            .help = Some(format!("the levels of {origin} are {}", format_levels(levels)));
        false
    }

    // -------------------------------------------------------------- members

    #[inline(never)]
    fn member(&mut self, kind: Type, member: &Identifier) -> Type {
        let name = member.name.as_str();
        let members: &[(&str, &str)] = match &kind {
            Type::Unknown => return Type::Unknown,
            Type::Dataset(alias) => {
                let Some(info) = self.scope.datasets.get(alias).cloned() else { return Type::Unknown };
                if let Some(kind) = dataset_name(&info, name) {
                    return kind;
                }
                let names: Vec<String> = info.variables.iter().map(|variable| variable.name.clone()).chain(info.role_names()).collect();
                let suggestion = did_you_mean(name, names.iter().map(String::as_str));
                let diagnostic = self.error(format!("the dataset `{alias}` has no `{name}`"), member.span, "not in this dataset");
                diagnostic.help = Some(match suggestion {
                    Some(suggestion) => format!("did you mean `{suggestion}`?"),
                    None => describe_dataset(&info),
                });
                return Type::Unknown;
            }
            Type::Field(field) if field.component == Component::Vector => {
                let scalar = |unit: Option<Unit>| {
                    Type::Field(FieldType { component: Component::Scalar, unit, origin: None, ..field.clone() })
                };
                match name {
                    "eastward" | "northward" | "speed" => return scalar(field.unit.clone()),
                    "direction" => return scalar(DEGREE.clone()),
                    _ => builtins::VECTOR_MEMBERS,
                }
            }
            Type::Layer { bottom, top } => match name {
                "bottom" => return Type::Number { unit: PASCAL.clone(), value: *bottom },
                "top" => return Type::Number { unit: PASCAL.clone(), value: *top },
                _ => builtins::LAYER_MEMBERS,
            },
            Type::Point => match name {
                "latitude" => return Type::Angle { axis: AngleAxis::Latitude, degrees: None },
                "longitude" => return Type::Angle { axis: AngleAxis::Longitude, degrees: None },
                _ => builtins::POINT_MEMBERS,
            },
            Type::Region => match name {
                "latitude" => return Type::LatitudeRange,
                "longitude" => return Type::LongitudeRange,
                _ => builtins::REGION_MEMBERS,
            },
            _ => &[],
        };
        let names: Vec<&str> = members.iter().map(|(name, _)| *name).collect();
        let diagnostic = self.error(format!("{} has no member `.{name}`", kind.describe()), member.span, "no such member");
        diagnostic.help = Some(if names.is_empty() {
            "members exist on vector fields (.eastward, .northward, .speed, .direction), layers (.bottom, .top), points and regions (.latitude, .longitude)".to_string()
        } else {
            match did_you_mean(name, names.iter().copied()) {
                Some(suggestion) => format!("did you mean `.{suggestion}`?"),
                None => format!(
                    "its members are {}",
                    list_words(&names.iter().map(|name| format!(".{name}")).collect::<Vec<_>>(), "and")
                ),
            }
        });
        Type::Unknown
    }

    // ------------------------------------------------------------ operators

    #[inline(never)]
    fn unary(&mut self, operator: UnaryOperator, kind: Type, operand: &Expr, span: Span) -> Type {
        match operator {
            UnaryOperator::Negate => match kind {
                Type::Number { unit, value } => Type::Number { unit, value: value.map(|value| -value) },
                Type::Field(ref field) if field.component != Component::Boolean => kind,
                Type::Angle { axis, degrees } => Type::Angle { axis, degrees: degrees.map(|degrees| -degrees) },
                Type::Unknown => Type::Unknown,
                other => {
                    self.error(format!("cannot negate {}", other.describe()), span, "`-` needs a number or a field")
                        .help = Some("only numbers and fields have a negative".to_string());
                    Type::Unknown
                }
            },
            UnaryOperator::Not => match kind {
                Type::Bool | Type::Unknown => kind,
                Type::Field(ref field) if field.component == Component::Boolean => kind,
                other => {
                    self.error("`not` needs a true/false value", operand.span, format!("this is {}", other.describe()))
                        .help = Some("compare first, such as not (speed(wind) > 20 m/s)".to_string());
                    Type::Unknown
                }
            },
        }
    }

    #[inline(never)]
    fn binary(&mut self, operator: BinaryOperator, left_kind: Type, right_kind: Type, left: &Expr, right: &Expr, span: Span) -> Type {
        if left_kind.is_unknown() || right_kind.is_unknown() {
            return Type::Unknown;
        }
        use BinaryOperator::*;
        match operator {
            And | Or => {
                let boolean = |kind: &Type| {
                    matches!(kind, Type::Bool) || matches!(kind, Type::Field(field) if field.component == Component::Boolean)
                };
                for (kind, expr) in [(&left_kind, left), (&right_kind, right)] {
                    if !boolean(kind) {
                        self.error(format!("`{}` joins true/false values", operator.symbol()), expr.span, format!("this is {}", kind.describe()))
                            .help = Some("compare first, such as speed(wind) > 20 m/s and temperature < 273.15 K".to_string());
                        return Type::Unknown;
                    }
                }
                if let Type::Field(field) = &left_kind { Type::Field(field.clone()) } else { right_kind }
            }
            Less | LessEqual | Greater | GreaterEqual | Equal | NotEqual => {
                if let (Type::String(_), Type::String(_)) | (Type::Bool, Type::Bool) = (&left_kind, &right_kind) {
                    if matches!(operator, Equal | NotEqual) {
                        return Type::Bool;
                    }
                }
                let Some(unit) = self.same_quantity(operator, &left_kind, &right_kind, left, right, span) else {
                    return Type::Unknown;
                };
                let _ = unit;
                match field_of(&left_kind).or_else(|| field_of(&right_kind)) {
                    Some(field) => Type::Field(FieldType { component: Component::Boolean, unit: None, origin: None, ..field.clone() }),
                    None => Type::Bool,
                }
            }
            Add | Subtract => {
                if let (Some(a), Some(b)) = (component_of(&left_kind), component_of(&right_kind)) {
                    if a != b {
                        self.error(
                            format!("cannot {} a {} and a {}", if operator == Add { "add" } else { "subtract" }, component_word(a), component_word(b)),
                            span,
                            format!("{} and {}", left_kind.describe(), right_kind.describe()),
                        )
                        .help = Some("take a component (.eastward, .northward) or the speed of the vector first".to_string());
                        return Type::Unknown;
                    }
                }
                let Some(unit) = self.same_quantity(operator, &left_kind, &right_kind, left, right, span) else {
                    return Type::Unknown;
                };
                match (&left_kind, &right_kind) {
                    (Type::Number { value: Some(a), unit: left_unit }, Type::Number { value: Some(b), unit: right_unit }) => {
                        let b = convert_value(*b, right_unit, left_unit).unwrap_or(*b);
                        let value = if operator == Add { a + b } else { a - b };
                        Type::Number { unit, value: Some(value) }
                    }
                    (Type::Number { .. }, Type::Number { .. }) => Type::number(unit),
                    _ => combine_fields(&left_kind, &right_kind, unit),
                }
            }
            Multiply | Divide => {
                let (Some(left_unit), Some(right_unit)) = (left_kind.unit().cloned(), right_kind.unit().cloned()) else {
                    let culprit = if left_kind.unit().is_none() { (&left_kind, left) } else { (&right_kind, right) };
                    self.error(
                        format!("cannot {} {}", if operator == Multiply { "multiply" } else { "divide" }, culprit.0.describe()),
                        culprit.1.span,
                        "not a number or field",
                    )
                    .help = Some("arithmetic works on numbers and fields".to_string());
                    return Type::Unknown;
                };
                let (left_component, right_component) = (component_of(&left_kind), component_of(&right_kind));
                if left_component == Some(Component::Boolean) || right_component == Some(Component::Boolean) {
                    self.error("cannot do arithmetic on a true/false field", span, "true/false field")
                        .help = Some("use `if ... then ... else` to choose values".to_string());
                    return Type::Unknown;
                }
                let vector_right = right_component == Some(Component::Vector);
                let vector_left = left_component == Some(Component::Vector);
                if vector_right && (vector_left || operator == Divide) {
                    self.error(
                        format!("cannot {} by a vector field", if operator == Multiply { "multiply" } else { "divide" }),
                        right.span,
                        "a vector",
                    )
                    .help = Some(if operator == Multiply {
                        "for the dot product of two vectors use dot(a, b)".to_string()
                    } else {
                        "divide by its speed, such as speed(v)".to_string()
                    });
                    return Type::Unknown;
                }
                let unit = match (left_unit, right_unit) {
                    (None, None) => None,
                    (Some(unit), None) => Some(unit),
                    (None, Some(unit)) => Some(if operator == Multiply { unit } else { power(&unit, -1) }),
                    (Some(a), Some(b)) => Some(if operator == Multiply { times(&a, &b) } else { over(&a, &b) }),
                };
                match (&left_kind, &right_kind) {
                    (Type::Number { value: Some(a), .. }, Type::Number { value: Some(b), .. }) => {
                        let value = if operator == Multiply { a * b } else { a / b };
                        Type::Number { unit, value: value.is_finite().then_some(value) }
                    }
                    (Type::Number { .. }, Type::Number { .. }) => Type::number(unit),
                    _ => combine_fields(&left_kind, &right_kind, unit),
                }
            }
            Power => {
                let Some(base_unit) = left_kind.unit().cloned() else {
                    self.error(format!("cannot raise {} to a power", left_kind.describe()), left.span, "not a number or field");
                    return Type::Unknown;
                };
                if component_of(&left_kind) == Some(Component::Vector) {
                    self.error("cannot raise a vector field to a power", left.span, "a vector")
                        .help = Some("take its speed first, such as speed(v) ^ 2".to_string());
                    return Type::Unknown;
                }
                let exponent = match &right_kind {
                    Type::Number { unit, value } if is_dimensionless(unit) => *value,
                    other => {
                        self.error("an exponent must be a pure number", right.span, format!("this is {}", other.describe()));
                        return Type::Unknown;
                    }
                };
                let unit = match base_unit {
                    None => None,
                    Some(unit) if is_dimensionless(&Some(unit.clone())) => Some(unit),
                    Some(unit) => match exponent {
                        Some(exponent) if exponent.fract() == 0.0 && exponent.abs() <= 64.0 => Some(power(&unit, exponent as i32)),
                        _ => {
                            self.error(
                                "a quantity with a unit can only be raised to a whole number written in the program",
                                right.span,
                                "not a known whole number",
                            )
                            .help = Some(format!("write the exponent as a number, such as {}^2", left));
                            return Type::Unknown;
                        }
                    },
                };
                match (&left_kind, exponent) {
                    (Type::Number { value: Some(base), .. }, Some(exponent)) => {
                        let value = base.powf(exponent);
                        Type::Number { unit, value: value.is_finite().then_some(value) }
                    }
                    (Type::Number { .. }, _) => Type::number(unit),
                    _ => combine_fields(&left_kind, &right_kind, unit),
                }
            }
        }
    }

    /// For `+ - < ...`: both sides must have the same dimension. Returns the
    /// unit of the result (the left's) or `None` after reporting.
    fn same_quantity(
        &mut self,
        operator: BinaryOperator,
        left_kind: &Type,
        right_kind: &Type,
        left: &Expr,
        right: &Expr,
        span: Span,
    ) -> Option<Option<Unit>> {
        let verb = match operator {
            BinaryOperator::Add => "add",
            BinaryOperator::Subtract => "subtract",
            _ => "compare",
        };
        let (Some(left_unit), Some(right_unit)) = (left_kind.unit(), right_kind.unit()) else {
            let culprit = if left_kind.unit().is_none() { (left_kind, left) } else { (right_kind, right) };
            let diagnostic = self.error(format!("cannot {verb} {}", culprit.0.describe()), culprit.1.span, "not a number or field");
            diagnostic.help = Some(match culprit.0 {
                Type::Layer { .. } => "use .bottom or .top for the pressures of a layer".to_string(),
                Type::Angle { .. } => "angles name positions; use them in point(...) and box(...)".to_string(),
                _ => "arithmetic and comparison work on numbers and fields".to_string(),
            });
            return None;
        };
        let compatible = match (left_unit, right_unit) {
            (None, None) => true,
            (Some(a), Some(b)) => same_dimension(a, b),
            (None, Some(unit)) | (Some(unit), None) => is_dimensionless(&Some(unit.clone())),
        };
        if compatible {
            return Some(left_unit.clone().or_else(|| right_unit.clone()));
        }
        let (first, second) = (left_kind.describe(), right_kind.describe());
        let message = match operator {
            BinaryOperator::Add => format!("cannot add {second} to {first}"),
            BinaryOperator::Subtract => format!("cannot subtract {second} from {first}"),
            _ => format!("cannot compare {first} with {second}"),
        };
        let help = match (left_unit, right_unit) {
            (Some(unit), None) | (None, Some(unit)) => format!("write the number with its unit, such as 1 {unit}"),
            _ => "both sides need units of the same dimension".to_string(),
        };
        self.error(message, span, "units of different dimensions").help = Some(help);
        None
    }

    #[inline(never)]
    fn range(&mut self, first: Type, second: Type, from: &Expr, to: &Expr, span: Span) -> Type {
        match (&first, &second) {
            (Type::Unknown, _) | (_, Type::Unknown) => Type::Unknown,
            (Type::Number { unit: a, value: x }, Type::Number { unit: b, value: y }) if is_pressure(a) && is_pressure(b) => {
                let x = x.and_then(|x| to_pascal(x, a));
                let y = y.and_then(|y| to_pascal(y, b));
                match (x, y) {
                    (Some(x), Some(y)) if (x - y).abs() <= 1e-9 * x.abs().max(1.0) => {
                        self.error("a layer needs two different pressures", span, "the same pressure twice")
                            .help = Some("such as 1000 hPa to 500 hPa".to_string());
                        Type::Unknown
                    }
                    (Some(x), Some(y)) if x < y => {
                        self.report(
                            Diagnostic::warning("this layer is written from its top down", span)
                                .with_label(format!("taken as {} to {}", format_pressure(y), format_pressure(x)))
                                .with_note("a layer runs from its bottom (the larger pressure) up to its top"),
                        );
                        Type::Layer { bottom: Some(y), top: Some(x) }
                    }
                    (x, y) => Type::Layer { bottom: x, top: y },
                }
            }
            (Type::Angle { axis: a, .. }, Type::Angle { axis: b, .. }) if a == b => {
                if *a == AngleAxis::Latitude { Type::LatitudeRange } else { Type::LongitudeRange }
            }
            (Type::Angle { .. }, Type::Angle { .. }) => {
                self.error("a range needs two latitudes or two longitudes", span, "a latitude and a longitude")
                    .help = Some("such as 40 north to 65 north, or 50 west to 5 east".to_string());
                Type::Unknown
            }
            (Type::String(_) | Type::Time { .. }, Type::String(_) | Type::Time { .. }) => {
                let a = self.time_of(&first, from.span);
                let b = self.time_of(&second, to.span);
                match (a, b) {
                    (Some(Some(a)), Some(Some(b))) if a > b => {
                        self.error("this time range ends before it starts", span, "end before start")
                            .help = Some("write the earlier time first".to_string());
                        Type::Unknown
                    }
                    (Some(_), Some(_)) => Type::TimeRange,
                    _ => Type::Unknown,
                }
            }
            (Type::Number { unit: a, .. }, Type::Number { unit: b, .. }) => {
                let compatible = match (a, b) {
                    (None, None) => true,
                    (Some(a), Some(b)) => same_dimension(a, b),
                    _ => false,
                };
                if compatible {
                    Type::NumberRange { unit: a.clone() }
                } else {
                    self.error(
                        "the two ends of a range must be of the same kind",
                        span,
                        format!("{} and {}", first.describe(), second.describe()),
                    )
                    .help = Some("such as 1000 hPa to 500 hPa".to_string());
                    Type::Unknown
                }
            }
            _ => {
                self.error(
                    "the two ends of a range must be of the same kind",
                    span,
                    format!("{} and {}", first.describe(), second.describe()),
                )
                .help = Some("ranges are of pressures (a layer), latitudes, longitudes, times or numbers".to_string());
                Type::Unknown
            }
        }
    }

    /// A time value: `Some(Some(normalised))` when known, `Some(None)` when a
    /// time whose value is not known, `None` (reported) when not a time.
    fn time_of(&mut self, kind: &Type, span: Span) -> Option<Option<String>> {
        match kind {
            Type::Time { at } => Some(at.clone()),
            Type::String(Some(text)) => match normalise_time(text) {
                Some(time) => {
                    self.time_in_data(&time, span);
                    Some(Some(time))
                }
                None => {
                    self.error(format!("\"{text}\" is not a time"), span, "not a time")
                        .help = Some("write times as \"YYYY-MM-DD HH:MM\" (UTC), such as \"2026-10-14 06:00\"".to_string());
                    None
                }
            },
            Type::String(None) => Some(None),
            _ => None,
        }
    }

    fn time_in_data(&mut self, time: &str, span: Span) {
        let Some(axis) = self.known_dataset().and_then(|info| info.times.clone()) else { return };
        let (Some(first), Some(last)) = (normalise_time(&axis.first), normalise_time(&axis.last)) else { return };
        if time < first.as_str() || time > last.as_str() {
            self.error(format!("{} is outside the times of the data", &time[..16]), span, "no data at this time")
                .help = Some(format!("the data run from {} to {} ({} times)", axis.first, axis.last, axis.count));
        }
    }

    #[inline(never)]
    fn select(&mut self, base_kind: Type, selector_kind: Type, base: &Expr, how: SelectHow, selector: &Expr, span: Span) -> Type {
        let word = how.word();
        let field = match &base_kind {
            Type::Unknown => return Type::Unknown,
            Type::Field(field) => field.clone(),
            other => {
                self.error(format!("only a field can be selected with `{word}`"), base.span, format!("this is {}", other.describe()))
                    .help = Some("select from fields such as temperature or wind, or results of operators".to_string());
                return Type::Unknown;
            }
        };
        if selector_kind.is_unknown() {
            return Type::Unknown;
        }
        let what = field.origin.clone().map_or_else(|| "this field".to_string(), |origin| format!("`{origin}`"));
        let mut result = field.clone();
        result.origin = field.origin.clone();
        let wrong = |checker: &mut Self, expected: &str, help: String| {
            checker
                .error(format!("`{word}` needs {expected}"), selector.span, format!("this is {}", selector_kind.describe()))
                .help = Some(help);
            Type::Unknown
        };
        match how {
            SelectHow::At => match &selector_kind {
                Type::Number { unit, value } if is_pressure(unit) => {
                    match &field.levels {
                        Levels::None => {
                            self.error(format!("{what} has no pressure levels to select"), span, "no levels to select from")
                                .help = Some("it has no level dimension (it is on one level, of a layer, or at the surface); leave out the level".to_string());
                            return Type::Unknown;
                        }
                        Levels::Known(levels) => {
                            if let Some(pressure) = value.and_then(|value| to_pascal(value, unit)) {
                                let origin = field.origin.clone().unwrap_or_else(|| "this field".to_string());
                                if !self.level_in_range(pressure, levels, &origin, selector.span) {
                                    return Type::Unknown;
                                }
                            }
                        }
                        Levels::Unknown => {}
                    }
                    result.levels = Levels::None;
                    Type::Field(result)
                }
                Type::Number { unit: None, value } => wrong(
                    self,
                    "a pressure, a point or a time",
                    format!("add the unit of the level, such as {} hPa", value.map_or("500".to_string(), format_number)),
                ),
                Type::Layer { .. } => wrong(self, "one level", "to select a layer use `over`, such as temperature over 1000 hPa to 500 hPa".to_string()),
                Type::Point => {
                    if !field.horizontal {
                        self.error(format!("{what} is no longer on the horizontal grid"), span, "cannot pick a point")
                            .help = Some("pick the point before averaging or picking".to_string());
                        return Type::Unknown;
                    }
                    result.horizontal = false;
                    Type::Field(result)
                }
                Type::Time { .. } | Type::String(_) => {
                    if self.time_of(&selector_kind, selector.span).is_none() {
                        return Type::Unknown;
                    }
                    if !field.time {
                        self.error(format!("{what} has no time dimension"), span, "cannot pick a time")
                            .help = Some("it is already at one time".to_string());
                        return Type::Unknown;
                    }
                    result.time = false;
                    Type::Field(result)
                }
                Type::Region => wrong(self, "a level, a point or a time", "to select a region use `in`".to_string()),
                Type::TimeRange => wrong(self, "a level, a point or a time", "to select a time range use `during`".to_string()),
                _ => wrong(self, "a pressure such as 500 hPa, a point or a time", "such as temperature at 500 hPa".to_string()),
            },
            SelectHow::Over => match &selector_kind {
                Type::Layer { bottom, top } => {
                    match &field.levels {
                        Levels::None => {
                            self.error(format!("{what} has no pressure levels to select a layer from"), span, "no levels")
                                .help = Some("layer operators such as thickness(layer) take the layer as an argument".to_string());
                            return Type::Unknown;
                        }
                        Levels::Known(levels) => {
                            let origin = field.origin.clone().unwrap_or_else(|| "this field".to_string());
                            for pressure in bottom.iter().chain(top.iter()) {
                                if !self.level_in_range(*pressure, levels, &origin, selector.span) {
                                    return Type::Unknown;
                                }
                            }
                            if let (Some(bottom), Some(top)) = (bottom, top) {
                                let inside: Vec<f64> =
                                    levels.iter().copied().filter(|level| level <= bottom && level >= top).collect();
                                result.levels = Levels::Known(inside);
                            }
                        }
                        Levels::Unknown => {}
                    }
                    Type::Field(result)
                }
                Type::Number { unit, .. } if is_pressure(unit) => {
                    wrong(self, "a layer", "to pick one level use `at`; a layer is written 1000 hPa to 500 hPa".to_string())
                }
                _ => wrong(self, "a pressure layer such as 1000 hPa to 500 hPa", "such as temperature over 1000 hPa to 500 hPa".to_string()),
            },
            SelectHow::In => match &selector_kind {
                Type::Region => {
                    if !field.horizontal {
                        self.error(format!("{what} is no longer on the horizontal grid"), span, "cannot select a region")
                            .help = Some("select the region before averaging or picking a point".to_string());
                        return Type::Unknown;
                    }
                    Type::Field(result)
                }
                Type::Point => wrong(self, "a region", "to pick a point use `at`".to_string()),
                _ => wrong(self, "a region", "such as wind in box(40 north to 65 north, 50 west to 5 east)".to_string()),
            },
            SelectHow::During => match &selector_kind {
                Type::TimeRange => {
                    if !field.time {
                        self.error(format!("{what} has no time dimension"), span, "cannot select times")
                            .help = Some("it is already at one time".to_string());
                        return Type::Unknown;
                    }
                    Type::Field(result)
                }
                Type::Time { .. } | Type::String(_) => wrong(self, "a time range", "to pick one time use `at`".to_string()),
                _ => wrong(self, "a time range", "such as during \"2026-10-14 00:00\" to \"2026-10-15 00:00\"".to_string()),
            },
        }
    }

    #[inline(never)]
    fn convert(&mut self, kind: Type, value: &Expr, unit_text: &UnitText) -> Type {
        let Some(target) = self.unit(unit_text) else { return Type::Unknown };
        if kind.is_unknown() {
            return Type::Unknown;
        }
        let Some(source_unit) = kind.unit().cloned() else {
            self.error(format!("cannot express {} in {target}", kind.describe()), value.span, "has no unit")
                .help = Some("`as` converts numbers and fields that have units".to_string());
            return Type::Unknown;
        };
        // `a / 100 km as K/(100 km)` converts only `100 km`: say so.
        let binds_tight = matches!(value.kind, ExprKind::Number { .. } | ExprKind::Angle { .. })
            .then(|| format!("`as` binds tighter than arithmetic, so here it converts only `{value}`; to convert a whole expression, put it in parentheses: (...) as {target}"));
        let Some(source) = source_unit else {
            let diagnostic = self.error(format!("a pure number cannot be expressed in {target}"), value.span, "no unit to convert from");
            diagnostic.help = Some(format!("write the unit after the number instead, such as 5 {target}"));
            diagnostic.notes.extend(binds_tight);
            return Type::Unknown;
        };
        match source.conversion_to(&target) {
            Ok((factor, offset)) => match kind {
                Type::Number { value, .. } => Type::Number { unit: Some(target), value: value.map(|value| value * factor + offset) },
                Type::Field(mut field) => {
                    field.unit = Some(target);
                    Type::Field(field)
                }
                other => other,
            },
            Err(_) => {
                let expected = dimension_name(&source)
                    .map(|named| format!("`as` needs a unit of {}, such as {}", named.name, named.examples))
                    .unwrap_or_else(|| format!("`as` needs a unit convertible from {source}"));
                let diagnostic = self.error(format!("cannot express {} in {target}", kind.describe()), unit_text.span, "incompatible unit");
                diagnostic.help = Some(expected);
                diagnostic.notes.extend(binds_tight);
                Type::Unknown
            }
        }
    }
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
