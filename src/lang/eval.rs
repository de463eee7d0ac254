//! The evaluator: walks a checked syntax tree and maps it onto the
//! diagnostics engine (`crate::diagnostics`) and field arithmetic.
//!
//! Selections push down: `E in R` and `E at "time"` evaluate `E` with the
//! region or time set in the context, so variables of a dataset are read
//! only for that part; `E at 500 hPa` reads only the levels needed. A value
//! already computed is cropped in memory instead.
//!
//! Every failure is a `Diagnostic` with the span of the expression that
//! failed; nothing here panics on user input (the session also catches
//! panics as a last line of defence).

use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;

use ndarray::{Array4, Axis, Zip};

use super::diagnostic::{did_you_mean, list_words, Diagnostic};
use super::syntax::{BinaryOperator, Expr, ExprKind, Hemisphere, Program, SelectHow, Span, Statement, StatementKind, UnaryOperator};
use super::value::{AngleAxis, DataRef, Series, UserFunction, Value, WindRef};
use crate::calendar::DateTime;
use crate::constants::Constants;
use crate::diagnostics::{self as engine, Case, DiagnosticError, Layer, ThicknessRoute};
use crate::grid::{Field, VectorField};
use crate::io::{Dataset, Role, Selection};
use crate::physics::geostrophic::{GeopotentialKind, DEFAULT_EQUATOR_BAND};
use crate::physics::sampling::Region;
use crate::units::{Dimension, Unit};
use crate::text::{format_latitude, format_longitude};

/// How deep user functions may call each other.
pub const MAX_CALL_DEPTH: usize = 64;

type Result<T> = std::result::Result<T, Diagnostic>;

/// What a recipe declares, collected while a program runs.
#[derive(Debug, Clone, Default, serde::Serialize, serde::Deserialize)]
pub struct RecipeHeader {
    pub title: Option<String>,
    pub about: Option<String>,
    pub parameters: Vec<ParameterInfo>,
    pub outputs: Vec<OutputInfo>,
}

#[derive(Debug, Clone, serde::Serialize, serde::Deserialize)]
pub struct ParameterInfo {
    pub name: String,
    /// The default as written in the recipe.
    pub default: String,
    /// The value used in this run, as written (the default or an override).
    pub value: String,
    pub documentation: Option<String>,
}

#[derive(Debug, Clone, serde::Serialize, serde::Deserialize)]
pub struct OutputInfo {
    pub name: String,
    pub expression: String,
    pub documentation: Option<String>,
}

/// Saved evaluator state (see `Evaluator::snapshot`).
#[derive(Clone)]
pub struct Snapshot {
    globals: HashMap<String, Value>,
    binding_order: Vec<String>,
    functions: HashMap<String, Arc<UserFunction>>,
    datasets: Vec<(String, Arc<Dataset>)>,
    current: Option<Arc<Dataset>>,
    recipe: RecipeHeader,
    outputs: Vec<(String, Value)>,
    definitions: Vec<(String, String)>,
    check_scope: super::check::Scope,
    below_ground: Option<crate::physics::model_levels::BelowLowestLevel>,
}

/// Selection state passed down an expression.
#[derive(Debug, Clone, Default)]
struct Context {
    selection: Selection,
}

/// Evaluator state that persists across cells of a session.
pub struct Evaluator {
    globals: HashMap<String, Value>,
    /// Bindings in the order they were made (for saving and listing).
    pub binding_order: Vec<String>,
    locals: Vec<HashMap<String, Value>>,
    functions: HashMap<String, Arc<UserFunction>>,
    datasets: Vec<(String, Arc<Dataset>)>,
    current: Option<Arc<Dataset>>,
    pub constants: Constants,
    /// Parameter values given from outside (`--set`, a recipe call), as
    /// source text or values.
    pub overrides: HashMap<String, Value>,
    pub recipe: RecipeHeader,
    /// Results named by `output` statements, in order.
    pub outputs: Vec<(String, Value)>,
    /// Directory that relative `open` paths start from.
    pub base_directory: PathBuf,
    /// Folders searched for recipes.
    pub recipe_folders: Vec<PathBuf>,
    /// The selection every statement starts from (the runner sets one time
    /// step here when it runs a recipe step by step).
    pub base_selection: Selection,
    depth: usize,
    interrupt: Option<Arc<AtomicBool>>,
    source: String,
    /// The checker's view of what earlier programs defined.
    pub check_scope: super::check::Scope,
    /// Source text of the top-level definitions made so far (bindings,
    /// functions, parameters, outputs), for saving them as a recipe.
    pub definitions: Vec<(String, String)>,
    /// How `print` writes a value. The language's own short description by
    /// default; front ends install their plain-text form (tables, field
    /// summaries), so the language need not know how values are displayed.
    pub describe: fn(&Value) -> String,
    /// Results shared between the expressions of one run (see
    /// `crate::sharing`); emptied at the start of every run, so nothing
    /// computed in one cell is served in another.
    pub shared: Arc<crate::sharing::SharedResults>,
    /// The program's `setting below_ground`, once made.
    pub below_ground: Option<crate::physics::model_levels::BelowLowestLevel>,
}

impl Default for Evaluator {
    fn default() -> Self {
        Self::new()
    }
}

fn error(message: impl Into<String>, span: Span) -> Diagnostic {
    Diagnostic::error(message, span)
}

/// An engine error as a diagnostic at `span`; the list of what is
/// available goes to the help line so the caret line stays short.
pub(crate) fn engine_error(e: DiagnosticError, span: Span) -> Diagnostic {
    let text = e.to_string();
    // The data errors already say what is available; split the list into
    // the help line so the caret line stays short.
    match text.split_once("; available") {
        Some((what, rest)) => error(what, span).with_help(format!("available{rest}")),
        None => match text.split_once("; roles found") {
            Some((what, rest)) => error(what, span).with_help(format!("roles found{rest}")),
            None => error(text, span),
        },
    }
}

fn unit(text: &str) -> Unit {
    Unit::parse(text).unwrap_or_else(|_| Unit::dimensionless())
}

fn pressure_unit() -> Unit {
    unit("Pa")
}

fn trim(x: f64) -> String {
    let s = format!("{x:.3}");
    s.trim_end_matches('0').trim_end_matches('.').to_string()
}

impl Evaluator {
    pub fn new() -> Self {
        Self {
            globals: HashMap::new(),
            binding_order: Vec::new(),
            locals: Vec::new(),
            functions: HashMap::new(),
            datasets: Vec::new(),
            current: None,
            constants: Constants::default(),
            overrides: HashMap::new(),
            recipe: RecipeHeader::default(),
            outputs: Vec::new(),
            base_directory: PathBuf::from("."),
            recipe_folders: Vec::new(),
            base_selection: Selection::default(),
            depth: 0,
            interrupt: None,
            source: String::new(),
            check_scope: super::check::Scope::default(),
            definitions: Vec::new(),
            describe: describe_value,
            shared: Arc::new(crate::sharing::SharedResults::default()),
            below_ground: None,
        }
    }

    /// The state a failed cell must not change (values are shared, so this
    /// copies names and handles, not data).
    pub fn snapshot(&self) -> Snapshot {
        Snapshot {
            globals: self.globals.clone(),
            binding_order: self.binding_order.clone(),
            functions: self.functions.clone(),
            datasets: self.datasets.clone(),
            current: self.current.clone(),
            recipe: self.recipe.clone(),
            outputs: self.outputs.clone(),
            definitions: self.definitions.clone(),
            check_scope: self.check_scope.clone(),
            below_ground: self.below_ground,
        }
    }

    /// Puts back the state of a snapshot.
    pub fn restore(&mut self, s: Snapshot) {
        self.globals = s.globals;
        self.binding_order = s.binding_order;
        self.functions = s.functions;
        self.datasets = s.datasets;
        self.current = s.current;
        self.recipe = s.recipe;
        self.outputs = s.outputs;
        self.definitions = s.definitions;
        self.check_scope = s.check_scope;
        self.below_ground = s.below_ground;
        self.locals.clear();
        self.depth = 0;
    }

    /// Sets the flag that stops a long evaluation (checked between steps).
    pub fn set_interrupt(&mut self, flag: Option<Arc<AtomicBool>>) {
        self.interrupt = flag;
    }

    /// Opens a dataset from outside the language (the CLI's file
    /// arguments); it becomes the current dataset.
    pub fn attach_dataset(&mut self, name: &str, dataset: Arc<Dataset>) {
        self.datasets.retain(|(n, _)| n != name);
        self.datasets.push((name.to_string(), dataset.clone()));
        self.current = Some(dataset);
    }

    /// The program's below-ground choice for model-level data (`setting
    /// below_ground ...`): datasets opened afterwards use it, and those
    /// already open are opened again with it where they hold model-level
    /// data read with the other choice.
    fn set_below_ground(&mut self, below: crate::physics::model_levels::BelowLowestLevel, span: Span) -> Result<()> {
        self.below_ground = Some(below);
        let mut reopened: Vec<(String, Arc<Dataset>)> = Vec::new();
        for (name, dataset) in &self.datasets {
            let again = dataset.reopened_with(below).map_err(|e| engine_error(e.into(), span))?;
            if !Arc::ptr_eq(&again, dataset) {
                reopened.push((name.clone(), again));
            }
        }
        for (name, again) in reopened {
            let old = self.datasets.iter().find(|(n, _)| *n == name).map(|(_, d)| d.clone());
            if let (Some(old), Some(current)) = (&old, &self.current) {
                if Arc::ptr_eq(old, current) {
                    self.current = Some(again.clone());
                }
            }
            if let Some(entry) = self.datasets.iter_mut().find(|(n, _)| *n == name) {
                entry.1 = again.clone();
            }
            if matches!(self.globals.get(&name), Some(Value::Dataset(_))) {
                self.globals.insert(name, Value::Dataset(again));
            }
        }
        Ok(())
    }

    pub fn current_dataset(&self) -> Option<&Arc<Dataset>> {
        self.current.as_ref()
    }

    /// The names bound at top level, in order, with their values.
    pub fn bindings(&self) -> Vec<(String, Value)> {
        self.binding_order.iter().filter_map(|n| self.globals.get(n).map(|v| (n.clone(), v.clone()))).collect()
    }

    pub fn lookup(&self, name: &str) -> Option<&Value> {
        self.globals.get(name)
    }

    pub fn functions(&self) -> impl Iterator<Item = &Arc<UserFunction>> {
        self.functions.values()
    }

    /// Runs a whole program; returns the value of each expression statement
    /// (what a notebook cell shows).
    pub fn run(&mut self, program: &Program, source: &str) -> Result<Vec<(Span, Value)>> {
        let mut shown = Vec::new();
        self.run_each(program, source, &mut |_, event| {
            if let StatementEvent::Finished { span, value: Some(value), .. } = event {
                shown.push((span, value));
            }
            Ok(())
        })?;
        Ok(shown)
    }

    /// Runs a whole program statement by statement, telling `on_event` when
    /// each statement starts and when it has finished (with its value, for
    /// an expression statement), so a front end can show each result as it
    /// completes instead of all at the end. `on_event` sees the evaluator as
    /// it stands after the statement (a front end carrying out a report
    /// request needs it) and may stop the run with an error. Stops at the
    /// first error, which is returned; events already sent stand.
    pub fn run_each(&mut self, program: &Program, source: &str, on_event: &mut dyn FnMut(&Evaluator, StatementEvent) -> Result<()>) -> Result<()> {
        self.source = source.to_string();
        // Shared results live for one run: emptied before (nothing from an
        // earlier cell is served) and after (nothing held between cells).
        self.shared.clear();
        let outcome = self.run_statements(program, on_event);
        self.shared.clear();
        outcome
    }

    fn run_statements(&mut self, program: &Program, on_event: &mut dyn FnMut(&Evaluator, StatementEvent) -> Result<()>) -> Result<()> {
        let total = program.statements.len();
        for (index, statement) in program.statements.iter().enumerate() {
            on_event(self, StatementEvent::Started { index, total, span: statement.span })?;
            let context = Context { selection: self.base_selection.clone() };
            self.prepare_layers(&program.statements, index, &context);
            let value = self.statement(statement, &context)?;
            self.remember_definition(statement);
            on_event(self, StatementEvent::Finished { index, total, span: statement.span, value })?;
        }
        Ok(())
    }

    fn remember_definition(&mut self, statement: &Statement) {
        let name = match &statement.kind {
            StatementKind::Let { name, .. } | StatementKind::Function { name, .. } | StatementKind::Parameter { name, .. } | StatementKind::Output { name, .. } => name.name.clone(),
            StatementKind::Recipe { .. } => "recipe".into(),
            StatementKind::About { .. } => "about".into(),
            StatementKind::Setting { options } => format!("setting {}", options.iter().map(|o| o.name.name.as_str()).collect::<Vec<_>>().join(" ")),
            StatementKind::Open { .. } | StatementKind::Expression(_) => return,
        };
        let text = self.text_of(statement.span);
        self.definitions.retain(|(n, _)| *n != name);
        self.definitions.push((name, text));
    }

    fn text_of(&self, span: Span) -> String {
        self.source.get(span.start..span.end).unwrap_or("").to_string()
    }

    fn check_interrupt(&self, span: Span) -> Result<()> {
        if self.interrupt.as_ref().is_some_and(|f| f.load(Ordering::Relaxed)) {
            return Err(error("interrupted", span).with_help("the cell was stopped; earlier results are kept"));
        }
        Ok(())
    }

    fn bind(&mut self, name: &str, value: Value) {
        if let Some(scope) = self.locals.last_mut() {
            scope.insert(name.to_string(), value);
        } else {
            if !self.globals.contains_key(name) {
                self.binding_order.push(name.to_string());
            }
            self.globals.insert(name.to_string(), value);
        }
    }

    fn statement(&mut self, statement: &Statement, context: &Context) -> Result<Option<Value>> {
        self.check_interrupt(statement.span)?;
        match &statement.kind {
            StatementKind::Let { name, value } => {
                let v = self.expr(value, context)?;
                self.bind(&name.name, v);
                Ok(None)
            }
            StatementKind::Function { name, parameters, body } => {
                if super::builtins_lookup(&name.name) {
                    return Err(error(format!("`{}` is a built-in operator and cannot be redefined", name.name), name.span)
                        .with_help("choose another name for your function"));
                }
                let function = UserFunction {
                    name: name.name.clone(),
                    parameters: parameters.iter().map(|p| p.name.clone()).collect(),
                    body: body.clone(),
                    source: self.text_of(statement.span),
                };
                self.functions.insert(name.name.clone(), Arc::new(function));
                Ok(None)
            }
            StatementKind::Open { paths, alias } => {
                let resolved: Vec<PathBuf> = paths.iter().map(|p| self.resolve_path(&p.value)).collect();
                let dataset = match self.below_ground {
                    Some(below) => Dataset::open_with(&resolved, below),
                    None => Dataset::open(&resolved),
                };
                let dataset = dataset.map_err(|e| {
                    let span = paths.first().map_or(statement.span, |p| p.span);
                    engine_error(e.into(), span)
                })?;
                let dataset = Arc::new(dataset);
                let name = alias.as_ref().map_or_else(|| "data".to_string(), |a| a.name.clone());
                self.attach_dataset(&name, dataset.clone());
                if let Some(a) = alias {
                    self.bind(&a.name, Value::Dataset(dataset));
                }
                Ok(None)
            }
            StatementKind::Recipe { title } => {
                self.recipe.title = Some(title.value.clone());
                Ok(None)
            }
            StatementKind::About { text } => {
                self.recipe.about = Some(text.value.clone());
                Ok(None)
            }
            StatementKind::Setting { options } => {
                for option in options {
                    let super::settings::Setting::BelowGround(below) = super::settings::read_setting(option)?;
                    super::settings::agree_with_front_end(option, below, crate::io::model_level_source::chosen_below_lowest_level())?;
                    self.set_below_ground(below, option.value.span)?;
                }
                Ok(None)
            }
            StatementKind::Parameter { name, default, documentation } => {
                let value = match self.overrides.get(&name.name) {
                    Some(v) => v.clone(),
                    None => self.expr(default, context)?,
                };
                let shown = if self.overrides.contains_key(&name.name) { describe_value(&value) } else { self.text_of(default.span) };
                self.recipe.parameters.retain(|p| p.name != name.name);
                self.recipe.parameters.push(ParameterInfo {
                    name: name.name.clone(),
                    default: self.text_of(default.span),
                    value: shown,
                    documentation: documentation.as_ref().map(|d| d.value.clone()),
                });
                self.bind(&name.name, value);
                Ok(None)
            }
            StatementKind::Output { name, value, documentation } => {
                // A variable named as it stands (`output t = temperature`) is
                // read here, every level under the context's times and region,
                // so that it is written like any computed field.
                let v = self.expr(value, context)?;
                let v = self.force(v, context, value.span)?;
                self.bind(&name.name, v.clone());
                self.outputs.retain(|(n, _)| *n != name.name);
                self.outputs.push((name.name.clone(), v));
                self.recipe.outputs.retain(|o| o.name != name.name);
                self.recipe.outputs.push(OutputInfo {
                    name: name.name.clone(),
                    expression: self.text_of(value.span),
                    documentation: documentation.as_ref().map(|d| d.value.clone()),
                });
                Ok(None)
            }
            StatementKind::Expression(expr) => Ok(Some(self.expr(expr, context)?)),
        }
    }

    fn resolve_path(&self, text: &str) -> PathBuf {
        let path = Path::new(text);
        if path.is_absolute() {
            path.to_path_buf()
        } else {
            self.base_directory.join(path)
        }
    }

    fn dataset(&self, span: Span) -> Result<Arc<Dataset>> {
        self.current.clone().ok_or_else(|| {
            error("no dataset is open", span).with_help("open one first, for example: open \"baroc-demo/marrowind-wave-2026-10-14.nc\"")
        })
    }

    fn case(&self, context: &Context, span: Span, equator_band: Option<f64>) -> Result<Case> {
        let mut case = Case::new(self.dataset(span)?).with_selection(context.selection.clone()).sharing(self.shared.clone());
        case.constants = self.constants;
        case.equator_band = equator_band.unwrap_or(DEFAULT_EQUATOR_BAND);
        Ok(case)
    }

    /// Names visible here, for "did you mean" and completion.
    pub fn visible_names(&self) -> Vec<String> {
        let mut names: Vec<String> = self.globals.keys().cloned().collect();
        for scope in &self.locals {
            names.extend(scope.keys().cloned());
        }
        names.extend(self.functions.keys().cloned());
        names.extend(super::builtin_names().map(str::to_string));
        if let Some(d) = &self.current {
            names.extend(d.variable_names());
            names.extend(d.roles().iter().map(|(r, _)| r.name().to_string()));
            if d.find_role(Role::EastwardWind).is_some() && d.find_role(Role::NorthwardWind).is_some() {
                names.push("wind".into());
            }
        }
        names.sort();
        names.dedup();
        names
    }

    fn name(&mut self, name: &str, span: Span) -> Result<Value> {
        for scope in self.locals.iter().rev() {
            if let Some(v) = scope.get(name) {
                return Ok(v.clone());
            }
        }
        if let Some(v) = self.globals.get(name) {
            return Ok(v.clone());
        }
        if let Some(f) = self.functions.get(name) {
            return Ok(Value::Function(f.clone()));
        }
        if let Some(dataset) = &self.current {
            if name == "wind" {
                let (u, v) = (dataset.find_role(Role::EastwardWind), dataset.find_role(Role::NorthwardWind));
                if let (Some(u), Some(v)) = (u, v) {
                    let make = |var: &str, written: &str| DataRef { variable: var.to_string(), written: written.to_string(), dataset: dataset.clone(), layer: None };
                    return Ok(Value::Wind(WindRef { eastward: make(&u.name, "eastward_wind"), northward: make(&v.name, "northward_wind") }));
                }
            }
            if let Ok(info) = dataset.resolve(name) {
                return Ok(Value::Data(DataRef { variable: info.name.clone(), written: name.to_string(), dataset: dataset.clone(), layer: None }));
            }
        }
        if let Some(b) = super::builtin_static_name(name) {
            return Ok(Value::Builtin(b));
        }
        if self.recipe_path(name).is_some() {
            return Ok(Value::Text(format!("the recipe `{name}` from the library: call it as {name}(), with its parameters as options")));
        }
        let names = self.visible_names();
        let mut d = error(format!("unknown name `{name}`"), span).with_label("not defined here");
        if let Some(s) = did_you_mean(name, names.iter().map(String::as_str)) {
            d = d.with_help(format!("did you mean `{s}`?"));
        }
        if let Some(ds) = &self.current {
            d = d.with_note(format!(
                "the dataset has the variables {} and the roles {}",
                list_words(&ds.variable_names(), "and"),
                list_words(&ds.roles().iter().map(|(r, _)| r.name().to_string()).collect::<Vec<_>>(), "and")
            ));
        } else {
            d = d.with_note("no dataset is open: `open \"file.nc\"` makes its variables available");
        }
        Err(d)
    }

    fn expr(&mut self, expr: &Expr, context: &Context) -> Result<Value> {
        self.check_interrupt(expr.span)?;
        let span = expr.span;
        match &expr.kind {
            ExprKind::Number { value, unit: u } => match u {
                None => Ok(Value::number(*value, Unit::dimensionless())),
                Some(text) => {
                    let parsed = Unit::parse(&text.text).map_err(|e| error(format!("`{}` is not a unit Baroc knows: {e}", text.text), text.span))?;
                    if parsed.is_angle() {
                        return Ok(Value::number(*value, parsed));
                    }
                    Ok(Value::number(*value, parsed))
                }
            },
            ExprKind::Angle { value, hemisphere } => {
                let (degrees, axis) = match hemisphere {
                    Hemisphere::North => (*value, AngleAxis::Latitude),
                    Hemisphere::South => (-*value, AngleAxis::Latitude),
                    Hemisphere::East => (*value, AngleAxis::Longitude),
                    Hemisphere::West => (-*value, AngleAxis::Longitude),
                };
                if axis == AngleAxis::Latitude && !(-90.0..=90.0).contains(&degrees) {
                    return Err(error(format!("a latitude lies between 90 south and 90 north, not {}", trim(*value)), span));
                }
                Ok(Value::Angle { degrees, axis })
            }
            ExprKind::String(s) => Ok(Value::Text(s.clone())),
            ExprKind::Bool(b) => Ok(Value::Bool(*b)),
            ExprKind::Name(n) => self.name(n, span),
            ExprKind::Block { statements } => {
                self.locals.push(HashMap::new());
                let mut last = None;
                let mut failure = None;
                for s in statements {
                    match self.statement(s, context) {
                        Ok(v) => last = v,
                        Err(e) => {
                            failure = Some(e);
                            break;
                        }
                    }
                }
                self.locals.pop();
                if let Some(e) = failure {
                    return Err(e);
                }
                last.ok_or_else(|| error("this block has no value", span).with_help("end the block with an expression"))
            }
            ExprKind::Unary { operator, operand } => {
                let v = self.expr(operand, context)?;
                match operator {
                    UnaryOperator::Negate => self.negate(v, span),
                    UnaryOperator::Not => match v {
                        Value::Bool(b) => Ok(Value::Bool(!b)),
                        Value::Scalar(f) => Ok(Value::scalar(map_field(&f, "not", "1", |x| if x.is_nan() { x } else if x == 0.0 { 1.0 } else { 0.0 })?)),
                        other => Err(error(format!("`not` needs a truth value, found {}", other.kind()), span)),
                    },
                }
            }
            ExprKind::Binary { operator, left, right } => {
                let a = self.expr(left, context)?;
                let b = self.expr(right, context)?;
                self.binary(*operator, a, b, left.span, right.span, span, context)
            }
            ExprKind::Range { from, to } => {
                let a = self.expr(from, context)?;
                let b = self.expr(to, context)?;
                self.range(a, b, from.span, to.span, span)
            }
            ExprKind::Convert { value, unit: u } => {
                let v = self.expr(value, context)?;
                let target = Unit::parse(&u.text).map_err(|e| error(format!("`{}` is not a unit Baroc knows: {e}", u.text), u.span))?;
                self.convert(v, &target, &u.text, value.span, u.span)
            }
            ExprKind::If { condition, then_branch, else_branch } => {
                let c = self.expr(condition, context)?;
                match c {
                    Value::Bool(true) => self.expr(then_branch, context),
                    Value::Bool(false) => self.expr(else_branch, context),
                    Value::Scalar(mask) => {
                        let a = self.expr(then_branch, context)?;
                        let a = self.force(a, context, then_branch.span)?;
                        let b = self.expr(else_branch, context)?;
                        let b = self.force(b, context, else_branch.span)?;
                        self.select_where(&mask, a, b, span)
                    }
                    other => Err(error(format!("the condition of `if` must be true or false, or a field of them; found {}", other.kind()), condition.span)),
                }
            }
            ExprKind::Member { base, member } => {
                let v = self.expr(base, context)?;
                self.member(v, &member.name, member.span, context)
            }
            ExprKind::Select { base, how, selector } => self.select(base, *how, selector, context, span),
            ExprKind::Call { callee, arguments, options } => {
                let name = match &callee.kind {
                    ExprKind::Name(n) => n.clone(),
                    _ => return Err(error("only named functions can be called", callee.span)),
                };
                // Options first: they may change how arguments are read.
                let mut option_values = Vec::new();
                for o in options {
                    let v = match &o.value.kind {
                        ExprKind::Name(word) if self.is_option_word(&name, &o.name.name) => Value::Word(word.clone()),
                        _ => self.expr(&o.value, context)?,
                    };
                    option_values.push((o.name.name.clone(), o.name.span, v, o.value.span));
                }
                self.call(&name, callee.span, arguments, option_values, context, span)
            }
        }
    }

    fn is_option_word(&self, function: &str, option: &str) -> bool {
        matches!((function, option), (_, "route") | (_, "integration") | ("map", "speed_unit"))
    }

    // ----- arithmetic -------------------------------------------------------

    fn negate(&self, v: Value, span: Span) -> Result<Value> {
        match v {
            Value::Number { value, unit } => Ok(Value::Number { value: -value, unit }),
            Value::Scalar(f) => Ok(Value::scalar(map_field(&f, &f.name, &f.units, |x| -x)?)),
            Value::Vector(w) => Ok(Value::vector(VectorField {
                eastward: map_field(&w.eastward, &w.eastward.name, &w.eastward.units, |x| -x)?,
                northward: map_field(&w.northward, &w.northward.name, &w.northward.units, |x| -x)?,
            })),
            Value::Data(_) | Value::Wind(_) => Err(error("read this field at a level or over a layer first", span)),
            other => Err(error(format!("cannot negate {}", other.kind()), span)),
        }
    }

    #[allow(clippy::too_many_arguments)]
    fn binary(&mut self, op: BinaryOperator, a: Value, b: Value, left: Span, right: Span, span: Span, context: &Context) -> Result<Value> {
        use BinaryOperator::*;
        let a = self.force(a, context, left)?;
        let b = self.force(b, context, right)?;
        match op {
            And | Or => match (&a, &b) {
                (Value::Bool(x), Value::Bool(y)) => Ok(Value::Bool(if op == And { *x && *y } else { *x || *y })),
                (Value::Scalar(_), _) | (_, Value::Scalar(_)) => {
                    let (fa, fb) = (as_scalar_like(&a, &b, left)?, as_scalar_like(&b, &a, right)?);
                    Ok(Value::scalar(zip_fields(&fa, &fb, "mask", "1", |x, y| {
                        if x.is_nan() || y.is_nan() {
                            f32::NAN
                        } else if (op == And && x != 0.0 && y != 0.0) || (op == Or && (x != 0.0 || y != 0.0)) {
                            1.0
                        } else {
                            0.0
                        }
                    }, span)?))
                }
                _ => Err(error(format!("`{}` joins truth values, not {} and {}", op.symbol(), a.kind(), b.kind()), span)),
            },
            _ if op.is_comparison() => self.compare(op, a, b, left, right, span),
            Add | Subtract => self.add(op, a, b, left, right, span),
            Multiply | Divide => self.multiply(op, a, b, left, right, span),
            Power => match (&a, &b) {
                (Value::Number { value, unit }, Value::Number { value: p, unit: pu }) if pu.is_dimensionless() => {
                    let u = if p.fract() == 0.0 { unit.powi(*p as i32).map_err(|e| error(e.to_string(), span))? } else if unit.is_dimensionless() { unit.clone() } else {
                        return Err(error("a quantity with units can only be raised to a whole power", right));
                    };
                    Ok(Value::number(value.powf(*p), u))
                }
                (Value::Scalar(f), Value::Number { value: p, unit: pu }) if pu.is_dimensionless() => {
                    let u = unit(&f.units);
                    let ru = if p.fract() == 0.0 { u.powi(*p as i32).map_err(|e| error(e.to_string(), span))?.to_string() } else if u.is_dimensionless() { "1".into() } else {
                        return Err(error("a field with units can only be raised to a whole power", right));
                    };
                    let p = *p as f32;
                    Ok(Value::scalar(map_field(f, &f.name, &ru, |x| x.powf(p))?))
                }
                _ => Err(error(format!("`^` raises a number or field to a plain number, not {} to {}", a.kind(), b.kind()), span)),
            },
            _ => Err(error("unsupported operator", span)),
        }
    }

    fn add(&self, op: BinaryOperator, a: Value, b: Value, left: Span, right: Span, span: Span) -> Result<Value> {
        let sign = if op == BinaryOperator::Add { 1.0 } else { -1.0 };
        let incompatible = |ua: &Unit, ub: &Unit| {
            error(format!("cannot {} {} and {}", if sign > 0.0 { "add" } else { "subtract" }, ua.dimension().describe(), ub.dimension().describe()), span)
                .with_label("units do not match")
                .with_help(format!("the left side is in `{ua}`, the right side in `{ub}`; both sides of `{}` need the same kind of unit", op.symbol()))
        };
        match (a, b) {
            (Value::Number { value: x, unit: ux }, Value::Number { value: y, unit: uy }) => {
                let (s, _) = uy.as_difference().conversion_to(&ux.as_difference()).map_err(|_| incompatible(&ux, &uy))?;
                Ok(Value::number(x + sign * (y * s), ux))
            }
            (Value::Layer(_), _) | (_, Value::Layer(_)) => Err(error("layers cannot be added; write a new layer with `to`", span)),
            (Value::Scalar(fa), Value::Scalar(fb)) => {
                let (ua, ub) = (unit(&fa.units), unit(&fb.units));
                let (s, _) = ub.as_difference().conversion_to(&ua.as_difference()).map_err(|_| incompatible(&ua, &ub))?;
                let (s, sign) = (s as f32, sign as f32);
                let name = if sign > 0.0 { "sum" } else { "difference" };
                let mut f = zip_fields(&fa, &fb, name, &fa.units, |x, y| x + sign * s * y, span)?;
                f.long_name = format!("{} {} {}", fa.long_name, op.symbol(), fb.long_name);
                Ok(Value::scalar(f))
            }
            (Value::Scalar(f), Value::Number { value, unit: u }) => {
                let uf = unit(&f.units);
                let (s, _) = u.as_difference().conversion_to(&uf.as_difference()).map_err(|_| incompatible(&uf, &u))?;
                let c = (sign * value * s) as f32;
                Ok(Value::scalar(map_field(&f, &f.name, &f.units, |x| x + c)?))
            }
            (Value::Number { value, unit: u }, Value::Scalar(f)) => {
                let uf = unit(&f.units);
                let (s, _) = uf.as_difference().conversion_to(&u.as_difference()).map_err(|_| incompatible(&u, &uf))?;
                let (s, sign, value) = (s as f32, sign as f32, value as f32);
                Ok(Value::scalar(map_field(&f, &f.name, &u.to_string(), |x| value + sign * s * x)?))
            }
            (Value::Vector(va), Value::Vector(vb)) => {
                let (ua, ub) = (unit(&va.eastward.units), unit(&vb.eastward.units));
                let (s, _) = ub.conversion_to(&ua).map_err(|_| incompatible(&ua, &ub))?;
                let k = (sign * s) as f32;
                let e = zip_fields(&va.eastward, &vb.eastward, &va.eastward.name, &va.eastward.units, |x, y| x + k * y, span)?;
                let n = zip_fields(&va.northward, &vb.northward, &va.northward.name, &va.northward.units, |x, y| x + k * y, span)?;
                Ok(Value::vector(VectorField { eastward: e, northward: n }))
            }
            (a, b) => Err(error(format!("cannot {} {} and {}", if sign > 0.0 { "add" } else { "subtract" }, a.kind(), b.kind()), span)
                .with_help(match (&a, &b) {
                    (Value::Vector(_), Value::Scalar(_)) | (Value::Scalar(_), Value::Vector(_)) => "take a component (`.eastward`) or the `speed` of the vector first".to_string(),
                    _ => "both sides must be numbers, scalar fields or vector fields with the same kind of unit".to_string(),
                })
                .with_note(format!("left: {}, right: {}", self.text_of(left), self.text_of(right)))),
        }
    }

    fn multiply(&self, op: BinaryOperator, a: Value, b: Value, _left: Span, right: Span, span: Span) -> Result<Value> {
        let divide = op == BinaryOperator::Divide;
        let combine = |ua: &Unit, ub: &Unit| -> Result<Unit> {
            let r = if divide { ua.divide(ub) } else { ua.multiply(ub) };
            r.map_err(|e| error(e.to_string(), span).with_help("convert temperatures in degC to K before multiplying or dividing"))
        };
        match (a, b) {
            (Value::Number { value: x, unit: ux }, Value::Number { value: y, unit: uy }) => {
                if divide && y == 0.0 {
                    return Err(error("division by zero", right));
                }
                Ok(Value::number(if divide { x / y } else { x * y }, combine(&ux, &uy)?))
            }
            (Value::Scalar(f), Value::Number { value, unit: u }) => {
                let ru = combine(&unit(&f.units), &u)?.to_string();
                let c = if divide { 1.0 / value } else { value } as f32;
                Ok(Value::scalar(map_field(&f, &f.name, &ru, |x| x * c)?))
            }
            (Value::Number { value, unit: u }, Value::Scalar(f)) => {
                let ru = combine(&u, &unit(&f.units))?.to_string();
                let c = value as f32;
                Ok(Value::scalar(map_field(&f, &f.name, &ru, |x| if divide { c / x } else { c * x })?))
            }
            (Value::Scalar(fa), Value::Scalar(fb)) => {
                let ru = combine(&unit(&fa.units), &unit(&fb.units))?.to_string();
                let mut f = zip_fields(&fa, &fb, if divide { "ratio" } else { "product" }, &ru, |x, y| if divide { x / y } else { x * y }, span)?;
                f.long_name = format!("{} {} {}", fa.long_name, op.symbol(), fb.long_name);
                Ok(Value::scalar(f))
            }
            (Value::Number { .. }, Value::Vector(_)) if divide => Err(error("a number cannot be divided by a vector", span)),
            (Value::Vector(v), Value::Number { value, unit: u }) | (Value::Number { value, unit: u }, Value::Vector(v)) => {
                let ru = combine(&unit(&v.eastward.units), &u)?.to_string();
                let c = if divide { 1.0 / value } else { value } as f32;
                Ok(Value::vector(VectorField {
                    eastward: map_field(&v.eastward, &v.eastward.name, &ru, |x| x * c)?,
                    northward: map_field(&v.northward, &v.northward.name, &ru, |x| x * c)?,
                }))
            }
            (Value::Vector(v), Value::Scalar(f)) | (Value::Scalar(f), Value::Vector(v)) => {
                let ru = combine(&unit(&v.eastward.units), &unit(&f.units))?.to_string();
                let e = zip_fields(&v.eastward, &f, &v.eastward.name, &ru, |x, y| if divide { x / y } else { x * y }, span)?;
                let n = zip_fields(&v.northward, &f, &v.northward.name, &ru, |x, y| if divide { x / y } else { x * y }, span)?;
                Ok(Value::vector(VectorField { eastward: e, northward: n }))
            }
            (a, b) => Err(error(format!("cannot {} {} by {}", if divide { "divide" } else { "multiply" }, a.kind(), b.kind()), span)
                .with_help("for two vectors use `dot(a, b)`")),
        }
    }

    fn compare(&self, op: BinaryOperator, a: Value, b: Value, _left: Span, _right: Span, span: Span) -> Result<Value> {
        use BinaryOperator::*;
        let test = move |x: f64, y: f64| match op {
            Less => x < y,
            LessEqual => x <= y,
            Greater => x > y,
            GreaterEqual => x >= y,
            Equal => x == y,
            _ => x != y,
        };
        let mismatch = |ua: &Unit, ub: &Unit| error(format!("cannot compare {} with {}", ua.dimension().describe(), ub.dimension().describe()), span);
        match (a, b) {
            (Value::Number { value: x, unit: ux }, Value::Number { value: y, unit: uy }) => {
                let y = uy.convert(y, &ux).map_err(|_| mismatch(&ux, &uy))?;
                Ok(Value::Bool(test(x, y)))
            }
            (Value::Scalar(f), Value::Number { value, unit: u }) => {
                let uf = unit(&f.units);
                let y = u.convert(value, &uf).map_err(|_| mismatch(&uf, &u))?;
                Ok(Value::scalar(map_field(&f, "mask", "1", |x| if x.is_nan() { f32::NAN } else if test(x as f64, y) { 1.0 } else { 0.0 })?))
            }
            (Value::Number { value, unit: u }, Value::Scalar(f)) => {
                let uf = unit(&f.units);
                let y = u.convert(value, &uf).map_err(|_| mismatch(&uf, &u))?;
                Ok(Value::scalar(map_field(&f, "mask", "1", |x| if x.is_nan() { f32::NAN } else if test(y, x as f64) { 1.0 } else { 0.0 })?))
            }
            (Value::Scalar(fa), Value::Scalar(fb)) => {
                let (ua, ub) = (unit(&fa.units), unit(&fb.units));
                let (s, o) = ub.conversion_to(&ua).map_err(|_| mismatch(&ua, &ub))?;
                Ok(Value::scalar(zip_fields(&fa, &fb, "mask", "1", |x, y| if x.is_nan() || y.is_nan() { f32::NAN } else if test(x as f64, y as f64 * s + o) { 1.0 } else { 0.0 }, span)?))
            }
            (Value::Text(x), Value::Text(y)) if matches!(op, Equal | NotEqual) => Ok(Value::Bool((x == y) == (op == Equal))),
            (a, b) => Err(error(format!("cannot compare {} with {}", a.kind(), b.kind()), span)),
        }
    }

    fn select_where(&self, mask: &Field, a: Value, b: Value, span: Span) -> Result<Value> {
        let field_of = |v: &Value, other: &Value| -> Result<Arc<Field>> {
            match (v, other) {
                (Value::Scalar(f), _) => Ok(f.clone()),
                (Value::Number { value, unit }, Value::Scalar(o)) => {
                    let c = unit.convert(*value, &self::unit(&o.units)).map_err(|e| error(e.to_string(), span))? as f32;
                    Ok(Arc::new(map_field(o, &o.name, &o.units, |_| c)?))
                }
                (Value::Number { value, unit }, _) => Ok(Arc::new(map_field(mask, "value", &unit.to_string(), |_| *value as f32)?)),
                _ => Err(error(format!("`if` on a field chooses between numbers or scalar fields, not {}", v.kind()), span)),
            }
        };
        let fa = field_of(&a, &b)?;
        let fb = field_of(&b, &a)?;
        let (ua, ub) = (unit(&fa.units), unit(&fb.units));
        let (s, o) = ub.conversion_to(&ua).map_err(|_| error("the two branches of `if` have different kinds of unit", span))?;
        let template: &Field = if fa.data.len() >= fb.data.len() { &fa } else { &fb };
        if fa.grid != fb.grid || fa.grid != mask.grid {
            return Err(error("the condition and the branches of `if` are on different grids", span));
        }
        let mut data = template.data.clone();
        let shape = data.raw_dim();
        let m = mask.data.broadcast(shape.clone()).ok_or_else(|| error("the condition and the branches are on different grids", span))?;
        let bb = fb.data.broadcast(shape.clone()).ok_or_else(|| error("the branches are on different grids", span))?;
        let aa = fa.data.broadcast(shape).ok_or_else(|| error("the branches are on different grids", span))?;
        Zip::from(&mut data).and(&m).and(&aa).and(&bb).for_each(|d, &m, &x, &y| {
            *d = if m.is_nan() { f32::NAN } else if m != 0.0 { x } else { (y as f64 * s + o) as f32 };
        });
        let mut out = template.clone();
        out.units = fa.units.clone();
        out.data = data;
        out.standard_name = None;
        Ok(Value::scalar(out))
    }

    fn range(&self, a: Value, b: Value, left: Span, right: Span, span: Span) -> Result<Value> {
        match (&a, &b) {
            (Value::Number { value: x, unit: ux }, Value::Number { value: y, unit: uy })
                if ux.dimension() == Dimension::PRESSURE && uy.dimension() == Dimension::PRESSURE =>
            {
                let pa = pressure_unit();
                let (p1, p2) = (ux.convert(*x, &pa).map_err(|e| error(e.to_string(), left))?, uy.convert(*y, &pa).map_err(|e| error(e.to_string(), right))?);
                if p1 <= 0.0 || p2 <= 0.0 {
                    return Err(error("pressures of a layer must be positive", span));
                }
                if (p1 - p2).abs() < 1e-9 {
                    return Err(error("a layer needs two different pressures", span).with_help("for one level write `at 500 hPa`"));
                }
                // Written top first is fine (the checker notes it): the
                // larger pressure becomes the bottom.
                Ok(Value::Layer(Layer::new(p1, p2).0))
            }
            (Value::Number { unit: ux, .. }, Value::Number { unit: uy, .. }) if ux.dimension() == Dimension::PRESSURE || uy.dimension() == Dimension::PRESSURE => {
                Err(error("a layer runs from one pressure to another", span).with_help("write both ends as pressures, for example 1000 hPa to 500 hPa"))
            }
            (Value::Angle { axis: a1, .. }, Value::Angle { axis: a2, .. }) if a1 != a2 => {
                Err(error("a range of angles needs two latitudes or two longitudes", span).with_help("for example 40 north to 65 north"))
            }
            (Value::Angle { .. }, Value::Angle { .. }) | (Value::Text(_), Value::Text(_)) | (Value::Time(_), Value::Time(_)) | (Value::TimeIndex(_), Value::TimeIndex(_)) => {
                Ok(Value::Range(Box::new(a), Box::new(b)))
            }
            (Value::Number { unit: ux, .. }, Value::Number { unit: uy, .. }) if ux.dimension() == uy.dimension() => Ok(Value::Range(Box::new(a), Box::new(b))),
            _ => Err(error(format!("`to` joins two values of one kind, not {} and {}", a.kind(), b.kind()), span)),
        }
    }

    fn convert(&self, v: Value, target: &Unit, text: &str, value_span: Span, unit_span: Span) -> Result<Value> {
        // Results carry the one spelling of the unit ("K/day" becomes "K day-1").
        let spelled = crate::units::spelling(text);
        let text = spelled.as_str();
        let incompatible = |from: &Unit| {
            error(format!("cannot express {} in `{text}`", from.dimension().describe()), unit_span)
                .with_label(format!("{} expected", target.dimension().describe()))
                .with_help(format!("the value is in `{from}`"))
        };
        match v {
            Value::Number { value, unit: u } => Ok(Value::number(u.convert(value, target).map_err(|_| incompatible(&u))?, target.clone())),
            Value::Scalar(f) => {
                let from = unit(&f.units);
                let (s, o) = from.conversion_to(target).map_err(|_| incompatible(&from))?;
                Ok(Value::scalar(map_field(&f, &f.name, text, |x| (x as f64 * s + o) as f32)?))
            }
            Value::Vector(w) => {
                let from = unit(&w.eastward.units);
                let (s, _) = from.conversion_to(target).map_err(|_| incompatible(&from))?;
                Ok(Value::vector(VectorField {
                    eastward: map_field(&w.eastward, &w.eastward.name, text, |x| (x as f64 * s) as f32)?,
                    northward: map_field(&w.northward, &w.northward.name, text, |x| (x as f64 * s) as f32)?,
                }))
            }
            Value::Series(mut series) => {
                // Tables convert every column that shares the unit.
                for (c, column) in series.columns.clone().iter().enumerate() {
                    if let Some(u) = column.rsplit_once('(').and_then(|(_, r)| r.strip_suffix(')')).and_then(|u| Unit::parse(u).ok()) {
                        if let Ok((s, o)) = u.conversion_to(target) {
                            for row in &mut series.rows {
                                row[c] = row[c] * s + o;
                            }
                            series.columns[c] = format!("{} ({text})", column.rsplit_once(" (").map_or(column.as_str(), |x| x.0));
                        }
                    }
                }
                Ok(Value::Series(series))
            }
            Value::Layer(_) => Err(error("a layer has no single unit to convert", value_span).with_help("use `.bottom` or `.top` to get a pressure")),
            other => Err(error(format!("{} has no unit to convert", other.kind()), value_span)),
        }
    }

    /// Reads a lazy data reference (or wind) under the context: all levels
    /// (or those of its layer), the context's times and region.
    fn force(&self, v: Value, context: &Context, span: Span) -> Result<Value> {
        match v {
            Value::Data(d) => Ok(Value::Scalar(self.read_data(&d, context, span)?)),
            Value::Wind(w) => Ok(Value::vector(
                VectorField::new(Arc::unwrap_or_clone(self.read_data(&w.eastward, context, span)?), Arc::unwrap_or_clone(self.read_data(&w.northward, context, span)?)).map_err(|e| error(e, span))?,
            )),
            other => Ok(other),
        }
    }

    /// A variable read under the context's selection (and layer), shared
    /// with the run's store (no copy when the store keeps it). Fails when
    /// the variable is missing, has no level in the layer, or the read fails.
    fn read_data(&self, d: &DataRef, context: &Context, span: Span) -> Result<Arc<Field>> {
        let mut selection = context.selection.clone();
        if let Some(layer) = d.layer {
            let info = d.dataset.variable(&d.variable).ok_or_else(|| error(format!("`{}` is not in the dataset", d.variable), span))?;
            let levels = info.levels.clone().ok_or_else(|| error(format!("`{}` has no pressure levels, so it cannot be taken over a layer", d.written), span))?;
            let inside: Vec<f64> = levels.iter().copied().filter(|&p| p <= layer.bottom * (1.0 + 1e-9) && p >= layer.top * (1.0 - 1e-9)).collect();
            if inside.is_empty() {
                return Err(error(format!("no data level of `{}` lies in the {} layer", d.written, layer.label()), span)
                    .with_help(format!("levels (hPa): {}", levels.iter().map(|p| trim(p / 100.0)).collect::<Vec<_>>().join(", "))));
            }
            selection.levels = Some(inside);
        }
        // Through the run's store: a variable read again with the same
        // selection (by another statement, or by a diagnostic) is read once.
        self.shared.read_shared(&d.dataset, &d.variable, &selection, Some(&self.constants)).map_err(|e| engine_error(e.into(), span))
    }

    // ----- selection --------------------------------------------------------

    fn select(&mut self, base: &Expr, how: SelectHow, selector: &Expr, context: &Context, span: Span) -> Result<Value> {
        let sel = self.expr(selector, context)?;
        match (how, sel) {
            (SelectHow::In, Value::Region(region)) => {
                let mut inner = context.clone();
                inner.selection.region = Some(match context.selection.region {
                    Some(outer) => intersect(&outer, &region).ok_or_else(|| error("this region does not overlap the enclosing one", selector.span))?,
                    None => region,
                });
                // A variable named as it stands is read here, inside the
                // region: left unread, it would be read later under the
                // enclosing selection and the region lost.
                let v = self.expr(base, &inner)?;
                let v = self.force(v, &inner, base.span)?;
                crop_value(v, &region, span)
            }
            (SelectHow::In, other) => Err(error(format!("`in` takes a region, found {}", other.kind()), selector.span)
                .with_help("for example: in box(40 north to 65 north, 50 west to 5 east)")),
            (SelectHow::At, Value::Number { value, unit: u }) if u.dimension() == Dimension::PRESSURE => {
                let p = u.convert(value, &pressure_unit()).map_err(|e| error(e.to_string(), selector.span))?;
                let v = self.expr(base, context)?;
                self.at_pressure(v, p, context, base.span, span)
            }
            (SelectHow::At, Value::Number { unit: u, .. }) => Err(error(format!("`at` takes a pressure, a point or a time; found {}", u.dimension().describe()), selector.span)
                .with_help("a level is written with a pressure unit, for example at 500 hPa")),
            (SelectHow::At, Value::Point { latitude, longitude }) => {
                let v = self.expr(base, context)?;
                let v = self.force(v, context, base.span)?;
                self.sample(v, latitude, longitude, base.span, span)
            }
            (SelectHow::At, Value::Text(text)) => {
                let time = DateTime::parse(&text).map_err(|e| error(format!("`{text}` is not a time Baroc can read: {e}"), selector.span).with_help("write times as \"2026-10-14 06:00\""))?;
                self.at_times(base, context, TimeWanted::Exact(time), selector.span)
            }
            (SelectHow::At, Value::Time(time)) => self.at_times(base, context, TimeWanted::Exact(time), selector.span),
            (SelectHow::At, Value::TimeIndex(i)) => self.at_times(base, context, TimeWanted::Index(i), selector.span),
            (SelectHow::At, Value::Layer(_)) => Err(error("`at` picks one level; a layer is taken with `over`", span).with_help("for example: temperature over 1000 hPa to 500 hPa")),
            (SelectHow::During, Value::Range(a, b)) => {
                let t = |v: &Value| -> Result<DateTime> {
                    match v {
                        Value::Text(s) => DateTime::parse(s).map_err(|e| error(format!("`{s}` is not a time: {e}"), selector.span)),
                        Value::Time(t) => Ok(t.clone()),
                        other => Err(error(format!("`during` takes a range of times, found {}", other.kind()), selector.span)),
                    }
                };
                let (from, to) = (t(&a)?, t(&b)?);
                self.at_times(base, context, TimeWanted::Between(from, to), selector.span)
            }
            (SelectHow::During, other) => Err(error(format!("`during` takes a range of times, found {}", other.kind()), selector.span)
                .with_help("for example: during \"2026-10-14 00:00\" to \"2026-10-14 12:00\"")),
            (SelectHow::Over, Value::Layer(layer)) => {
                let v = self.expr(base, context)?;
                match v {
                    Value::Data(mut d) => {
                        d.layer = Some(layer);
                        Ok(Value::Data(d))
                    }
                    Value::Wind(mut w) => {
                        w.eastward.layer = Some(layer);
                        w.northward.layer = Some(layer);
                        Ok(Value::Wind(w))
                    }
                    Value::Scalar(f) => Ok(Value::scalar(levels_within(&f, &layer, base.span)?)),
                    other => Err(error(format!("`over` restricts a field with levels to a layer, not {}", other.kind()), base.span)),
                }
            }
            (how, other) => Err(error(format!("`{}` cannot take {}", how.word(), other.kind()), selector.span)),
        }
    }

    fn at_pressure(&self, v: Value, p: f64, context: &Context, base_span: Span, span: Span) -> Result<Value> {
        match v {
            Value::Data(d) => {
                let case = self.case_for(&d.dataset, context);
                let f = case.at_pressure_shared(&d.variable, p, false).map_err(|e| engine_error(e, span))?;
                Ok(Value::Scalar(f))
            }
            Value::Wind(w) => {
                let case = self.case_for(&w.eastward.dataset, context);
                let u = case.at_pressure(&w.eastward.variable, p, false).map_err(|e| engine_error(e, span))?;
                let v = case.at_pressure(&w.northward.variable, p, false).map_err(|e| engine_error(e, span))?;
                Ok(Value::vector(VectorField::new(u, v).map_err(|e| error(e, span))?))
            }
            Value::Scalar(f) => Ok(Value::scalar(interpolate_field(&f, p, base_span)?)),
            Value::Vector(w) => Ok(Value::vector(VectorField { eastward: interpolate_field(&w.eastward, p, base_span)?, northward: interpolate_field(&w.northward, p, base_span)? })),
            other => Err(error(format!("{} has no levels to pick from", other.kind()), base_span)),
        }
    }

    fn case_for(&self, dataset: &Arc<Dataset>, context: &Context) -> Case {
        let mut case = Case::new(dataset.clone()).with_selection(context.selection.clone()).sharing(self.shared.clone());
        case.constants = self.constants;
        case
    }

    fn at_times(&mut self, base: &Expr, context: &Context, wanted: TimeWanted, span: Span) -> Result<Value> {
        let (inner, wanted_values) = self.time_context(context, &wanted, span)?;
        let value = self.expr(base, &inner)?;
        // A value computed before (a binding) is selected in memory.
        select_times_in_memory(value, &wanted_values, span)
    }

    /// The context a value selected at `wanted` times is evaluated in, and
    /// the time coordinates it keeps (the layer lookahead builds the same).
    fn time_context(&self, context: &Context, wanted: &TimeWanted, span: Span) -> Result<(Context, Vec<f64>)> {
        let dataset = self.dataset(span)?;
        let times = dataset.variables().find_map(|v| v.times.clone()).ok_or_else(|| error("the dataset has no time dimension", span))?;
        let labels = times.labels();
        let units = crate::calendar::CfTimeUnits::parse(&times.units, &times.calendar).map_err(|e| error(e.to_string(), span))?;
        let decoded: Vec<Option<DateTime>> = times.values.iter().map(|&t| units.decode(t).ok()).collect();
        let indices: Vec<usize> = match wanted {
            TimeWanted::Index(i) => {
                if *i >= labels.len() {
                    return Err(error(format!("time step {i} is out of range"), span).with_help(format!("the data have steps 0 to {}", labels.len() - 1)));
                }
                vec![*i]
            }
            TimeWanted::Exact(t) => match decoded.iter().position(|d| d.as_ref() == Some(t)) {
                Some(i) => vec![i],
                None => return Err(error(format!("{t} is not a time of the data"), span).with_help(format!("available times: {}", labels.join(", ")))),
            },
            TimeWanted::Between(a, b) => {
                let (a, b) = if a <= b { (a, b) } else { (b, a) };
                let idx: Vec<usize> = decoded.iter().enumerate().filter(|(_, d)| d.as_ref().is_some_and(|d| d >= a && d <= b)).map(|(i, _)| i).collect();
                if idx.is_empty() {
                    return Err(error(format!("no time of the data lies between {a} and {b}"), span).with_help(format!("available times: {}", labels.join(", "))));
                }
                idx
            }
        };
        // Within an outer time selection, indices refer to the full axis.
        let mut inner = context.clone();
        inner.selection.times = Some(match &context.selection.times {
            Some(outer) => indices.iter().copied().filter(|i| outer.contains(i)).collect(),
            None => indices.clone(),
        });
        let wanted_values: Vec<f64> = indices.iter().map(|&i| times.values[i]).collect();
        Ok((inner, wanted_values))
    }

    fn sample(&self, v: Value, latitude: f64, longitude: f64, base_span: Span, span: Span) -> Result<Value> {
        let place = format!("{} {}", format_latitude(latitude), format_longitude(longitude));
        let row_labels = |f: &Field| -> Vec<String> {
            let times = f.times.as_ref().map(|t| t.labels()).unwrap_or_else(|| vec![String::new()]);
            let levels: Vec<String> = f.levels.as_ref().map(|l| l.iter().map(|p| format!("{} hPa", trim(p / 100.0))).collect()).unwrap_or_else(|| vec![String::new()]);
            let mut out = Vec::new();
            for t in &times {
                for l in &levels {
                    out.push(format!("{t} {l}").trim().to_string());
                }
            }
            out
        };
        match v {
            Value::Scalar(f) => {
                let values = engine::point_values(&f, latitude, longitude).map_err(|e| engine_error(e, span))?;
                Ok(Value::Series(Series {
                    title: format!("{} at {place}", f.long_name),
                    columns: vec![format!("{} ({})", f.name, f.units)],
                    labels: row_labels(&f),
                    rows: values.iter().map(|&x| vec![x as f64]).collect(),
                }))
            }
            Value::Vector(w) => {
                let u = engine::point_values(&w.eastward, latitude, longitude).map_err(|e| engine_error(e, span))?;
                let v = engine::point_values(&w.northward, latitude, longitude).map_err(|e| engine_error(e, span))?;
                let units = &w.eastward.units;
                Ok(Value::Series(Series {
                    title: format!("{} at {place}", w.eastward.long_name.replace("eastward ", "")),
                    columns: vec![format!("eastward ({units})"), format!("northward ({units})"), format!("speed ({units})"), "from (degree)".into()],
                    labels: row_labels(&w.eastward),
                    rows: u.iter().zip(&v).map(|(&a, &b)| {
                        let (a, b) = (a as f64, b as f64);
                        vec![a, b, a.hypot(b), crate::physics::wind::direction_from(a, b)]
                    }).collect(),
                }))
            }
            other => Err(error(format!("only fields can be sampled at a point, not {}", other.kind()), base_span)),
        }
    }

    // ----- members ----------------------------------------------------------

    fn member(&mut self, v: Value, member: &str, span: Span, context: &Context) -> Result<Value> {
        let v = match v {
            Value::Wind(_) if matches!(member, "eastward" | "northward" | "speed" | "direction") => self.force(v, context, span)?,
            other => other,
        };
        match (&v, member) {
            (Value::Vector(w), "eastward") => Ok(Value::scalar(w.eastward.clone())),
            (Value::Vector(w), "northward") => Ok(Value::scalar(w.northward.clone())),
            (Value::Vector(w), "speed") => Ok(Value::scalar(w.speed())),
            (Value::Vector(w), "direction") => Ok(Value::scalar(direction_field(w)?)),
            (Value::Layer(l), "bottom") => Ok(Value::number(l.bottom / 100.0, unit("hPa"))),
            (Value::Layer(l), "top") => Ok(Value::number(l.top / 100.0, unit("hPa"))),
            (Value::Point { latitude, .. }, "latitude") => Ok(Value::Angle { degrees: *latitude, axis: AngleAxis::Latitude }),
            (Value::Point { longitude, .. }, "longitude") => Ok(Value::Angle { degrees: *longitude, axis: AngleAxis::Longitude }),
            (Value::Region(r), "south") => Ok(Value::Angle { degrees: r.south, axis: AngleAxis::Latitude }),
            (Value::Region(r), "north") => Ok(Value::Angle { degrees: r.north, axis: AngleAxis::Latitude }),
            (Value::Region(r), "west") => Ok(Value::Angle { degrees: r.west, axis: AngleAxis::Longitude }),
            (Value::Region(r), "east") => Ok(Value::Angle { degrees: r.east, axis: AngleAxis::Longitude }),
            (Value::Record(r), name) => r.entries.iter().find(|(n, _)| n == name).map(|(_, v)| v.clone()).ok_or_else(|| {
                error(format!("the recipe result has no output `{name}`"), span).with_help(format!("its outputs are {}", list_words(&r.entries.iter().map(|(n, _)| n.clone()).collect::<Vec<_>>(), "and")))
            }),
            (other, name) => {
                let valid: &[&str] = match other {
                    Value::Vector(_) | Value::Wind(_) => &["eastward", "northward", "speed", "direction"],
                    Value::Layer(_) => &["bottom", "top"],
                    Value::Point { .. } => &["latitude", "longitude"],
                    Value::Region(_) => &["south", "north", "west", "east"],
                    _ => &[],
                };
                let mut d = error(format!("{} has no member `{name}`", other.kind()), span);
                if !valid.is_empty() {
                    d = d.with_help(format!("its members are {}", list_words(valid, "and")));
                }
                Err(d)
            }
        }
    }

    // ----- calls ------------------------------------------------------------

    fn call(&mut self, name: &str, name_span: Span, arguments: &[Expr], options: Vec<(String, Span, Value, Span)>, context: &Context, span: Span) -> Result<Value> {
        // User functions first: they may shadow nothing built in (checked at
        // definition), so the order only matters for clarity.
        if let Some(f) = self.functions.get(name).cloned() {
            if !options.is_empty() {
                return Err(error("user functions take no `with` options", options[0].1));
            }
            if arguments.len() != f.parameters.len() {
                return Err(error(format!("`{name}` takes {} argument{}, got {}", f.parameters.len(), if f.parameters.len() == 1 { "" } else { "s" }, arguments.len()), span)
                    .with_help(format!("{name}({})", f.parameters.join(", "))));
            }
            if self.depth >= MAX_CALL_DEPTH {
                return Err(error("functions call each other too deeply (is one calling itself?)", span));
            }
            let mut scope = HashMap::new();
            for (p, a) in f.parameters.iter().zip(arguments) {
                scope.insert(p.clone(), self.expr(a, context)?);
            }
            self.depth += 1;
            self.locals.push(scope);
            let result = self.expr(&f.body, context);
            self.locals.pop();
            self.depth -= 1;
            return result;
        }
        let mut args = Vec::with_capacity(arguments.len());
        for a in arguments {
            args.push((self.expr(a, context)?, a.span));
        }
        super::builtins_eval::call_builtin(self, name, name_span, args, options, context_selection(context), span)
    }

    // Used by the built-ins.
    pub(crate) fn case_with(&self, selection: &Selection, span: Span, equator_band: Option<f64>) -> Result<Case> {
        self.case(&Context { selection: selection.clone() }, span, equator_band)
    }

    pub(crate) fn force_with(&self, v: Value, selection: &Selection, span: Span) -> Result<Value> {
        self.force(v, &Context { selection: selection.clone() }, span)
    }

    pub(crate) fn recipe_path(&self, name: &str) -> Option<PathBuf> {
        let file = format!("{}.baroc", name.replace('_', "-"));
        self.recipe_folders.iter().map(|d| d.join(&file)).find(|p| p.is_file())
    }

    pub(crate) fn datasets(&self) -> &[(String, Arc<Dataset>)] {
        &self.datasets
    }
}

#[path = "eval_layers.rs"]
mod layers;

fn context_selection(context: &Context) -> Selection {
    context.selection.clone()
}

enum TimeWanted {
    Index(usize),
    Exact(DateTime),
    Between(DateTime, DateTime),
}

/// What a running program asked of whatever shows its output, besides
/// values: printed text (`print`) and a request to clear what the cell has
/// shown so far (`clear_output`). Kept in order, per thread.
#[derive(Debug, Clone, PartialEq)]
pub enum SideOutput {
    Printed(String),
    /// Clear the cell's output; `wait` keeps the old output until new output
    /// arrives (the messaging protocol's clear_output), which avoids flicker.
    ClearOutput { wait: bool },
}

thread_local! {
    static SIDE_OUTPUT: std::cell::RefCell<Vec<SideOutput>> = const { std::cell::RefCell::new(Vec::new()) };
}

/// Appends a line to what the current cell printed (`print`).
pub fn print_line(text: &str) {
    SIDE_OUTPUT.with(|queue| {
        let mut queue = queue.borrow_mut();
        match queue.last_mut() {
            Some(SideOutput::Printed(p)) => {
                p.push_str(text);
                p.push('\n');
            }
            _ => queue.push(SideOutput::Printed(format!("{text}\n"))),
        }
    });
}

/// Asks the front end to clear the cell's output (`clear_output`).
pub fn request_clear_output(wait: bool) {
    SIDE_OUTPUT.with(|queue| queue.borrow_mut().push(SideOutput::ClearOutput { wait }));
}

/// Takes what the cell asked for since the last call, in order.
pub fn take_side_outputs() -> Vec<SideOutput> {
    SIDE_OUTPUT.with(|queue| std::mem::take(&mut *queue.borrow_mut()))
}

/// Takes what the cell printed since the last call (clear requests are
/// dropped: for front ends that only collect text).
pub fn take_printed() -> String {
    take_side_outputs()
        .into_iter()
        .filter_map(|side| match side {
            SideOutput::Printed(text) => Some(text),
            SideOutput::ClearOutput { .. } => None,
        })
        .collect()
}

/// Progress of [`Evaluator::run_each`].
#[derive(Clone)]
pub enum StatementEvent {
    /// Statement `index` (of `total`) is about to run.
    Started { index: usize, total: usize, span: Span },
    /// Statement `index` finished; `value` is what an expression statement
    /// evaluated to.
    Finished { index: usize, total: usize, span: Span, value: Option<Value> },
}


pub(crate) fn describe_value(v: &Value) -> String {
    match v {
        Value::Number { value, unit } => format!("{} {unit}", trim(*value)),
        Value::Layer(l) => format!("{} hPa to {} hPa", trim(l.bottom / 100.0), trim(l.top / 100.0)),
        Value::Text(s) => format!("{s:?}"),
        Value::Bool(b) => b.to_string(),
        Value::Region(r) => format!("box({} to {}, {} to {})", format_latitude(r.south), format_latitude(r.north), format_longitude(r.west), format_longitude(r.east)),
        Value::Point { latitude, longitude } => format!("point({}, {})", format_latitude(*latitude), format_longitude(*longitude)),
        other => other.kind().to_string(),
    }
}

/// An element-wise map producing a new field with the same coordinates.
pub(crate) fn map_field(f: &Field, name: &str, units: &str, op: impl Fn(f32) -> f32 + Sync + Send) -> Result<Field> {
    let mut data = f.data.clone();
    data.par_mapv_inplace(op);
    let mut out = f.derived(name, units, data).map_err(|e| error(e, Span::default()))?;
    out.long_name = f.long_name.clone();
    out.attributes = f.attributes.clone();
    out.standard_name = if units == f.units { f.standard_name.clone() } else { None };
    Ok(out)
}

/// An element-wise combination of two fields on one grid, broadcasting
/// over a missing time or level dimension.
pub(crate) fn zip_fields(a: &Field, b: &Field, name: &str, units: &str, op: impl Fn(f32, f32) -> f32 + Sync + Send, span: Span) -> Result<Field> {
    if a.grid != b.grid {
        return Err(error("the two fields are on different grids", span).with_help(format!("left: {}; right: {}", a.grid.describe(), b.grid.describe())));
    }
    let (big, small, swapped) = if a.data.len() >= b.data.len() { (a, b, false) } else { (b, a, true) };
    let shape = big.data.raw_dim();
    let small_view = small.data.broadcast(shape).ok_or_else(|| {
        error("the two fields have different times or levels", span).with_help(format!("shapes (time, level, latitude, longitude): {:?} and {:?}", a.data.shape(), b.data.shape()))
    })?;
    if small.levels.is_some() && big.levels.is_some() && small.levels != big.levels {
        return Err(error("the two fields are on different pressure levels", span));
    }
    let mut data = Array4::<f32>::zeros(big.data.raw_dim());
    Zip::from(&mut data).and(&big.data).and(&small_view).par_for_each(|d, &x, &y| *d = if swapped { op(y, x) } else { op(x, y) });
    let mut out = big.derived(name, units, data).map_err(|e| error(e, span))?;
    out.standard_name = None;
    Ok(out)
}

fn as_scalar_like(v: &Value, other: &Value, span: Span) -> Result<Field> {
    match (v, other) {
        (Value::Scalar(f), _) => Ok((**f).clone()),
        (Value::Bool(b), Value::Scalar(o)) => map_field(o, "mask", "1", |_| if *b { 1.0 } else { 0.0 }),
        _ => Err(error(format!("expected a truth value or a field of them, found {}", v.kind()), span)),
    }
}

fn direction_field(w: &VectorField) -> Result<Field> {
    let mut data = w.eastward.data.clone();
    Zip::from(&mut data).and(&w.northward.data).par_for_each(|u, &v| *u = crate::physics::wind::direction_from(*u as f64, v as f64) as f32);
    let mut out = w.eastward.derived(&w.direction_name(), "degree", data).map_err(|e| error(e, Span::default()))?;
    out.long_name = format!("direction (from) of {}", w.eastward.long_name.replace("eastward ", ""));
    out.standard_name = None;
    Ok(out)
}

fn interpolate_field(f: &Field, p: f64, span: Span) -> Result<Field> {
    let levels = f.levels.as_ref().ok_or_else(|| {
        let at = f.attributes.iter().find(|(k, _)| k == "pressure_level" || k == "layer").map(|(_, v)| format!(" (it is already at {v})")).unwrap_or_default();
        error(format!("`{}` has no pressure levels to pick from{at}", f.name), span)
    })?;
    let weights = crate::physics::vertical::interpolation_weights(levels, p).map_err(|e| engine_error(e.into(), span))?;
    let data = crate::physics::vertical::apply_weights(f.data.view(), &weights, 1.0).insert_axis(Axis(1));
    let mut out = f.derived_without_levels(&f.name, &f.units, data).map_err(|e| error(e, span))?;
    out.long_name = f.long_name.clone();
    out.standard_name = f.standard_name.clone();
    out.attributes.push(("pressure_level".into(), format!("{} hPa", trim(p / 100.0))));
    Ok(out)
}

fn levels_within(f: &Field, layer: &Layer, span: Span) -> Result<Field> {
    let levels = f.levels.as_ref().ok_or_else(|| error(format!("`{}` has no pressure levels", f.name), span))?;
    let idx: Vec<usize> = (0..levels.len()).filter(|&k| levels[k] <= layer.bottom * (1.0 + 1e-9) && levels[k] >= layer.top * (1.0 - 1e-9)).collect();
    if idx.is_empty() {
        return Err(error(format!("no level of `{}` lies in the {} layer", f.name, layer.label()), span));
    }
    let mut out = f.clone();
    out.data = f.data.select(Axis(1), &idx);
    out.levels = Some(idx.iter().map(|&k| levels[k]).collect());
    Ok(out)
}

fn intersect(a: &Region, b: &Region) -> Option<Region> {
    let south = a.south.max(b.south);
    let north = a.north.min(b.north);
    if south > north {
        return None;
    }
    // Longitudes: keep the inner box when it lies within the outer.
    Some(Region { south, north, west: b.west, east: b.east })
}

/// Crops a computed value to a region (values read under the region are
/// already inside it, so this only cuts what was computed before). A
/// field the region covers whole is handed back as it is, shared, not
/// copied (a global area over global data copies nothing); a cut field
/// takes only the selected points, its other parts (names, units,
/// coordinates, attributes) copied. Fails, naming the grid, when the
/// region holds no point of the field.
fn crop_value(v: Value, region: &Region, span: Span) -> Result<Value> {
    // The cut of one field, or `None` when the region covers it whole.
    let crop = |f: &Field| -> Result<Option<Field>> {
        if let Some(projected) = &f.grid.projection {
            return crop_projected(f, projected, region, span);
        }
        let lat: Vec<usize> = (0..f.grid.latitudes.len()).filter(|&j| f.grid.latitudes[j] >= region.south - 1e-9 && f.grid.latitudes[j] <= region.north + 1e-9).collect();
        let lon: Vec<usize> = (0..f.grid.longitudes.len()).filter(|&i| region.contains(region.south, f.grid.longitudes[i])).collect();
        if lat.len() == f.grid.latitudes.len() && lon.len() == f.grid.longitudes.len() {
            return Ok(None);
        }
        if lat.is_empty() || lon.is_empty() {
            return Err(error("the region holds no points of this field", span).with_help(f.grid.describe()));
        }
        let data = f.data.select(Axis(2), &lat).select(Axis(3), &lon);
        let grid = crate::grid::Grid::new(lat.iter().map(|&j| f.grid.latitudes[j]).collect(), lon.iter().map(|&i| f.grid.longitudes[i]).collect());
        Ok(Some(with_data_on(f, data, Arc::new(grid))))
    };
    match v {
        Value::Scalar(f) => Ok(match crop(&f)? {
            None => Value::Scalar(f),
            Some(cut) => Value::scalar(cut),
        }),
        Value::Vector(w) => match (crop(&w.eastward)?, crop(&w.northward)?) {
            (None, None) => Ok(Value::Vector(w)),
            (eastward, northward) => Ok(Value::vector(VectorField {
                eastward: eastward.unwrap_or_else(|| w.eastward.clone()),
                northward: northward.unwrap_or_else(|| w.northward.clone()),
            })),
        },
        other => Ok(other),
    }
}

/// `f` with other data on another grid: its names, units, times, levels
/// and attributes copied, its data not (the caller's replace them).
/// Never fails; the caller gives data of the new grid's shape.
fn with_data_on(f: &Field, data: Array4<f32>, grid: Arc<crate::grid::Grid>) -> Field {
    Field {
        name: f.name.clone(),
        long_name: f.long_name.clone(),
        units: f.units.clone(),
        standard_name: f.standard_name.clone(),
        data,
        times: f.times.clone(),
        levels: f.levels.clone(),
        grid,
        attributes: f.attributes.clone(),
    }
}

/// A latitude-longitude box on a projected grid: the smallest block of
/// grid rows and columns holding every cell whose centre (true latitude
/// and longitude) lies in the box, the same block the readers take
/// (`io::projected::block_in_box`). The block keeps the projection and
/// stays a regular grid, so derivatives and maps work on it; cells of the
/// block outside the box keep their values, and area statistics over the
/// box count exactly the cells inside (`physics::sampling::area_statistics`).
/// `None` when the block is the whole grid (nothing to cut); fails when the
/// box holds no cell.
fn crop_projected(f: &Field, projected: &crate::projection::ProjectedGrid, region: &Region, span: Span) -> Result<Option<Field>> {
    let Some((rows, columns)) = crate::io::projected::block_in_box(projected, region.south, region.north, region.west, region.east) else {
        return Err(error("the region holds no points of this field", span).with_help(f.grid.describe()));
    };
    let (ny, nx) = projected.shape();
    if rows.clone().count() == ny && columns.clone().count() == nx {
        return Ok(None);
    }
    let rows: Vec<usize> = rows.collect();
    let columns: Vec<usize> = columns.collect();
    let data = f.data.select(Axis(2), &rows).select(Axis(3), &columns);
    Ok(Some(with_data_on(f, data, Arc::new(crate::io::projected::sub_grid(projected, &rows, &columns)))))
}

fn select_times_in_memory(v: Value, wanted: &[f64], span: Span) -> Result<Value> {
    let pick = |f: &Field| -> Result<Field> {
        let Some(times) = &f.times else { return Ok(f.clone()) };
        if times.values.len() == wanted.len() && times.values.iter().zip(wanted).all(|(a, b)| a == b) {
            return Ok(f.clone());
        }
        let idx: Vec<usize> = wanted.iter().filter_map(|w| times.values.iter().position(|t| t == w)).collect();
        if idx.is_empty() {
            return Err(error("the field holds none of these times", span));
        }
        let mut out = f.clone();
        out.data = f.data.select(Axis(0), &idx);
        out.times = Some(times.select(&idx));
        Ok(out)
    };
    match v {
        Value::Scalar(f) => Ok(Value::scalar(pick(&f)?)),
        Value::Vector(w) => Ok(Value::vector(VectorField { eastward: pick(&w.eastward)?, northward: pick(&w.northward)? })),
        other => Ok(other),
    }
}

/// Which geopotential kind a field's units say it is.
pub(crate) fn geopotential_kind(units: &str) -> Option<GeopotentialKind> {
    let u = Unit::parse(units).ok()?;
    if u.dimension() == Dimension::LENGTH {
        Some(GeopotentialKind::Height)
    } else if u.dimension() == Dimension::SPECIFIC_ENERGY {
        Some(GeopotentialKind::Geopotential)
    } else {
        None
    }
}

pub(crate) fn thickness_route(word: Option<&str>, span: Span) -> Result<ThicknessRoute> {
    match word {
        None | Some("temperature") | Some("virtual_temperature") | Some("mean_temperature") => Ok(ThicknessRoute::Temperature),
        Some("dry_temperature") => Ok(ThicknessRoute::DryTemperature),
        Some("geopotential") | Some("thickness") => Ok(ThicknessRoute::Geopotential),
        Some(other) => Err(error(format!("`{other}` is not a route"), span)
            .with_help("routes: thickness (from geopotential), mean_temperature (from temperature, virtual when humidity is present), dry_temperature")),
    }
}
