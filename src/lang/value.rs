//! Values of the Baroc language: what expressions evaluate to.
//!
//! Fields hold `Arc`s so that binding, passing and selecting by time or
//! region share data instead of copying it; a computation makes a new field.

use std::sync::Arc;

use crate::calendar::DateTime;
use crate::diagnostics::{Case, Layer};
use crate::grid::{Field, VectorField};
use crate::io::Dataset;
use crate::physics::sampling::Region;
use crate::units::Unit;

use super::syntax::Span;

/// Whether an angle is a latitude, a longitude, or neither.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum AngleAxis {
    Latitude,
    Longitude,
}

/// A variable of an open dataset, not yet read: reading waits until the
/// selection (level, layer, region, time) is known, so only that part is read.
#[derive(Clone)]
pub struct DataRef {
    /// The variable's own name in the dataset (roles already resolved).
    pub variable: String,
    /// The name the user wrote (a role or the variable's name).
    pub written: String,
    pub dataset: Arc<Dataset>,
    /// Restricted to the levels of a layer (`over`), if any.
    pub layer: Option<Layer>,
}

/// The wind of an open dataset (the eastward and northward roles), unread.
#[derive(Clone)]
pub struct WindRef {
    pub eastward: DataRef,
    pub northward: DataRef,
}

/// Values sampled at a point or summarised over an area: one row per time
/// step (and level), ready for tables.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct Series {
    /// What was sampled, e.g. "temperature at 52.50 N 20.00 W".
    pub title: String,
    /// Column names, each with its unit in the header text.
    pub columns: Vec<String>,
    /// Row labels (times, levels).
    pub labels: Vec<String>,
    /// rows x columns; NaN for missing.
    pub rows: Vec<Vec<f64>>,
}

/// What a presentation operator asks to be drawn, with its inputs already
/// evaluated (fields read, points and tables made). The language only
/// gathers these; the drawing side (`figures`, `display`) interprets the
/// options and draws, so the language knows nothing of pictures.
#[derive(Clone)]
pub enum FigureContent {
    /// A map of a scalar field, optionally with vectors drawn on it.
    FieldMap { field: Arc<Field>, vectors: Option<Arc<VectorField>> },
    /// A map of a vector field (speed shaded, barbs or arrows).
    VectorMap { vectors: Arc<VectorField> },
    /// A hodograph of the case's balanced (and analysed) wind at a point.
    Hodograph { case: Arc<Case>, latitude: f64, longitude: f64 },
    /// Vertical profiles of fields with levels at a point.
    Profile { fields: Vec<Arc<Field>>, latitude: f64, longitude: f64 },
    /// A cross-section between two points (latitude, longitude), with the
    /// wind normal to it when given.
    Section { field: Arc<Field>, wind: Option<Arc<VectorField>>, from: (f64, f64), to: (f64, f64) },
    /// A time series of a table's first column.
    TimeSeries { series: Series },
    /// Several figures side by side.
    Panels { figures: Vec<FigureRequest> },
    /// The balance audit of the case (its times and region as selected):
    /// computed and tabulated by the front end, like a picture.
    Audit { case: Arc<Case>, settings: crate::audit::AuditSettings },
}

/// An option as written after `with`: its name and evaluated value, with
/// their spans so that the drawing side can point at a bad one.
#[derive(Clone)]
pub struct FigureOption {
    pub name: String,
    pub name_span: Span,
    pub value: Value,
    pub value_span: Span,
}

/// A figure to draw: which operator asked, what, with which options.
#[derive(Clone)]
pub struct FigureRequest {
    /// The operator's name (`map`, `hodograph`, ...), for messages.
    pub operator: String,
    pub content: FigureContent,
    pub options: Vec<FigureOption>,
    /// The call, for errors found while drawing.
    pub span: Span,
    /// The open dataset the figure's data came from, if any, for what the
    /// drawing side takes from it beyond the fields.
    pub dataset: Option<Arc<Dataset>>,
}

/// A report of the session's outputs to be written to `path`
/// (`write_report`): the front end that runs the program carries it out,
/// since it holds the session and knows how reports are made.
#[derive(Clone)]
pub struct ReportRequest {
    pub path: std::path::PathBuf,
    /// The file name argument, for errors found while writing.
    pub span: Span,
}

/// A user-defined function.
#[derive(Debug, Clone)]
pub struct UserFunction {
    pub name: String,
    pub parameters: Vec<String>,
    pub body: crate::lang::syntax::Expr,
    /// The function's source text, for recipes and inspection.
    pub source: String,
}

/// Outputs of a recipe call, by name.
#[derive(Clone)]
pub struct Record {
    pub title: String,
    pub entries: Vec<(String, Value)>,
}

#[derive(Clone)]
pub enum Value {
    Number { value: f64, unit: Unit },
    Bool(bool),
    Text(String),
    Angle { degrees: f64, axis: AngleAxis },
    /// A range of two values of one kind (angles, times, numbers), from `to`.
    Range(Box<Value>, Box<Value>),
    Layer(Layer),
    Point { latitude: f64, longitude: f64 },
    Region(Region),
    Time(DateTime),
    /// The index of a time step, from `time(2)`.
    TimeIndex(usize),
    Data(DataRef),
    Wind(WindRef),
    Scalar(Arc<Field>),
    Vector(Arc<VectorField>),
    Series(Series),
    Function(Arc<UserFunction>),
    Builtin(&'static str),
    Record(Record),
    Dataset(Arc<Dataset>),
    /// A word given as an option value (`with route mean_temperature`).
    Word(String),
    /// A picture (map, hodograph, profile, section, panels) to draw.
    Figure(FigureRequest),
    /// A report to write (`write_report`).
    Report(ReportRequest),
}

impl Value {
    /// The kind, as error messages name it.
    pub fn kind(&self) -> &'static str {
        match self {
            Value::Number { unit, .. } => {
                if unit.dimension() == crate::units::Dimension::PRESSURE {
                    "a pressure"
                } else {
                    "a number"
                }
            }
            Value::Bool(_) => "a truth value",
            Value::Text(_) => "a string",
            Value::Angle { axis: AngleAxis::Latitude, .. } => "a latitude",
            Value::Angle { axis: AngleAxis::Longitude, .. } => "a longitude",
            Value::Range(..) => "a range",
            Value::Layer(_) => "a pressure layer",
            Value::Point { .. } => "a point",
            Value::Region(_) => "a region",
            Value::Time(_) | Value::TimeIndex(_) => "a time",
            Value::Data(_) | Value::Scalar(_) => "a scalar field",
            Value::Wind(_) | Value::Vector(_) => "a vector field",
            Value::Series(_) => "a table of values",
            Value::Function(_) | Value::Builtin(_) => "a function",
            Value::Record(_) => "a recipe result",
            Value::Dataset(_) => "a dataset",
            Value::Word(_) => "a word",
            Value::Figure(_) => "a figure",
            Value::Report(_) => "a report request",
        }
    }

    pub fn number(value: f64, unit: Unit) -> Value {
        Value::Number { value, unit }
    }

    pub fn scalar(field: Field) -> Value {
        Value::Scalar(Arc::new(field))
    }

    pub fn vector(field: VectorField) -> Value {
        Value::Vector(Arc::new(field))
    }
}
