//! The Baroc language.
//!
//! text --[`parser::parse`]--> [`syntax::Program`] (spans on every node)
//! --[`check::check`]--> names, kinds and units checked before any data is
//! read --[`eval::Evaluator`]--> [`value::Value`]s, computed by the
//! diagnostics engine. Every mistake is a [`diagnostic::Diagnostic`],
//! rendered once by [`diagnostic::render`].
//!
//! - `grammar/baroc.pest` (crate root): the whole syntax.
//! - [`syntax`]: the tree (every node has a byte [`Span`]) and its canonical
//!   printer (`Display`); printing and parsing again gives the same tree.
//! - [`parser`]: `parse`, `parse_expression`, `is_complete`, with limits on
//!   length, nesting and parser work so hostile text is an error, not a crash.
//! - [`diagnostic`]: errors as data, one plain-text renderer, `did_you_mean`.
//! - [`builtins`]: the table of built-in operators and roles.
//! - [`mod@check`]: name resolution, kinds and units against an [`Environment`].
//! - [`eval`], [`builtins_eval`], [`value`], [`recipe`]: evaluation.

pub mod builtins;
pub mod builtins_eval;
pub mod check;
pub mod diagnostic;
pub mod eval;
pub mod parser;
pub mod recipe;
pub mod settings;
pub mod syntax;
pub mod value;

pub use check::{check, check_source, CheckReport, DatasetCatalog, DatasetInfo, Environment, Scope, Type};
pub use diagnostic::{did_you_mean, render, render_all, Diagnostic, RenderOptions, Severity};
pub use parser::{is_complete, parse, Completeness};
pub use syntax::{Expr, ExprKind, Program, Span, Statement, StatementKind};

/// True if `name` is a built-in operator.
pub fn builtins_lookup(name: &str) -> bool {
    builtins_eval::NAMES.contains(&name)
}

/// Every built-in operator's name.
pub fn builtin_names() -> impl Iterator<Item = &'static str> {
    builtins_eval::NAMES.iter().copied()
}

/// The built-in's name with a static lifetime, if it is one.
pub fn builtin_static_name(name: &str) -> Option<&'static str> {
    builtins_eval::NAMES.iter().copied().find(|n| *n == name)
}

/// Reads dataset headers for the checker (`open` statements), through the
/// same reader the evaluator uses.
pub struct NetcdfCatalog {
    pub base_directory: std::path::PathBuf,
}

impl DatasetCatalog for NetcdfCatalog {
    fn describe(&self, paths: &[String]) -> Result<DatasetInfo, String> {
        let resolved: Vec<std::path::PathBuf> = paths
            .iter()
            .map(|p| {
                let path = std::path::Path::new(p);
                if path.is_absolute() { path.to_path_buf() } else { self.base_directory.join(path) }
            })
            .collect();
        let dataset = crate::io::Dataset::open(&resolved).map_err(|e| e.to_string())?;
        Ok(dataset_info(&dataset, &paths.join(", ")))
    }
}

/// What the checker needs to know of an open dataset.
pub fn dataset_info(dataset: &crate::io::Dataset, name: &str) -> DatasetInfo {
    use check::{Axis, TimeAxis, VariableInfo};
    let variables = dataset
        .variables()
        .map(|v| {
            let mut dimensions = Vec::new();
            if v.times.is_some() {
                dimensions.push(Axis::Time);
            }
            // Model-level variables arrive on pressure levels
            // (io::model_level_source), so they have levels like any other.
            if v.levels.is_some() {
                dimensions.push(Axis::Level);
            }
            dimensions.push(Axis::Latitude);
            dimensions.push(Axis::Longitude);
            VariableInfo { name: v.name.clone(), units: v.units.clone(), dimensions, levels_pa: v.levels.clone().unwrap_or_default() }
        })
        .collect();
    let roles = dataset.roles().into_iter().map(|(r, v)| (r.name().to_string(), v)).collect();
    let times = dataset.variables().find_map(|v| v.times.clone()).map(|t| {
        let labels = t.labels();
        let short = |s: &String| s.replace('T', " ").chars().take(16).collect::<String>();
        TimeAxis { count: labels.len(), first: labels.first().map(short).unwrap_or_default(), last: labels.last().map(short).unwrap_or_default() }
    });
    let (latitude_range, longitude_range) = match dataset.variables().next() {
        Some(v) => {
            let (s, n, w, e) = v.grid.extent();
            (Some((s, n)), Some((w, e)))
        }
        None => (None, None),
    };
    let missing_notes = ["geopotential", "geopotential_height"]
        .iter()
        .filter_map(|role| {
            let note = dataset.sources().iter().find_map(|s| s.missing_note(role))?;
            Some((role.to_string(), note))
        })
        .collect();
    DatasetInfo { name: name.to_string(), variables, roles, times, latitude_range, longitude_range, missing_notes }
}

/// Checks a program before it runs (names, kinds, units), against what the
/// session already holds (earlier cells' definitions, the open dataset, the
/// recipe library). Returns the warnings and the checker's scope after the
/// program (to keep once the program has run), or the errors.
pub fn check_program(program: &Program, _source: &str, evaluator: &eval::Evaluator) -> Result<(Vec<Diagnostic>, Scope), Vec<Diagnostic>> {
    let catalog = NetcdfCatalog { base_directory: evaluator.base_directory.clone() };
    let mut scope = evaluator.check_scope.clone();
    if scope.current.is_none() {
        if let Some(d) = evaluator.current_dataset() {
            scope.current = Some(check::CurrentDataset::Known(dataset_info(d, &d.labels().join(", "))));
        }
    }
    let recipes = recipe::library(&evaluator.recipe_folders)
        .into_iter()
        .map(|(name, _, header)| check::RecipeInfo {
            name,
            parameters: header.parameters.iter().map(|p| p.name.clone()).collect(),
            outputs: header.outputs.iter().map(|o| o.name.clone()).collect(),
        })
        .collect();
    let environment = Environment { builtins: builtins::BUILTINS, catalog: Some(&catalog), recipes, scope };
    let report = check::check(program, &environment);
    if report.has_errors() {
        return Err(report.diagnostics);
    }
    Ok((report.diagnostics, report.scope))
}

/// Documentation of a built-in operator, for inspection.
pub fn builtin_documentation(name: &str) -> Option<String> {
    if let Some(b) = builtins::find(name) {
        return Some(format!("{}\n\n{}", b.signature(), b.documentation));
    }
    builtin_static_name(name).map(|n| format!("built-in operator `{n}` (pictures, tables, recipes)"))
}
