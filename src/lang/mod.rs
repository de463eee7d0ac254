//! The Baroc language, front half: grammar, syntax tree, diagnostics and the
//! checker that finds mistakes before any data is read.
//!
//! text --[`parser::parse`]--> [`syntax::Program`] --[`check::check`]-->
//! kinds and units of every statement, or [`diagnostic::Diagnostic`]s.

pub mod builtins;
pub mod check;
pub mod diagnostic;
pub mod parser;
pub mod syntax;
mod units_stub;

pub use check::{check, check_source, CheckReport, DatasetInfo, Environment, Scope, Type};
pub use diagnostic::{did_you_mean, render, render_all, Diagnostic, RenderOptions, Severity};
pub use parser::{is_complete, parse, Completeness};
pub use syntax::{Expr, ExprKind, Program, Span, Statement, StatementKind};
