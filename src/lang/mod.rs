//! The Baroc language.
//!
//! text --[`parser::parse`]--> [`syntax::Program`] (spans on every node)
//! --[`check`]--> names, kinds and units checked before any data is read
//! --[`eval::Evaluator`]--> [`value::Value`]s, computed by the diagnostics
//! engine. Every mistake is a [`diagnostic::Diagnostic`] rendered once.

pub mod builtins_eval;
pub mod diagnostic;
pub mod eval;
pub mod parser;
pub mod recipe;
pub mod syntax;
pub mod value;

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

/// Checks a program before it runs (names, kinds, units). Until the full
/// checker is in place this accepts every parsed program; the evaluator
/// reports the rest with spans.
pub fn check_program(_program: &Program, _source: &str, _evaluator: &eval::Evaluator) -> Result<(), Vec<Diagnostic>> {
    Ok(())
}

/// Documentation of a built-in operator, for inspection.
pub fn builtin_documentation(name: &str) -> Option<String> {
    builtin_static_name(name).map(|n| format!("built-in operator `{n}`"))
}
