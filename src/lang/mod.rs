//! The Baroc language, front half: grammar, syntax tree, diagnostics and the
//! checker that finds mistakes before any data is read.
//!
//! text --[`parser::parse`]--> [`syntax::Program`] --[`check::check`]-->
//! kinds and units of every statement, or [`diagnostic::Diagnostic`]s,
//! rendered with [`diagnostic::render`].
//!
//! - `grammar/baroc.pest` (crate root): the whole syntax.
//! - [`syntax`]: the tree (every node has a byte [`Span`]) and its canonical
//!   printer (`Display`); printing and parsing again gives the same tree.
//! - [`parser`]: `parse`, `parse_expression`, `is_complete`, with limits on
//!   length, nesting and parser work so hostile text is an error, not a crash.
//! - [`diagnostic`]: errors as data, one plain-text renderer, `did_you_mean`.
//! - [`builtins`]: the table of built-in operators and roles.
//! - [`mod@check`]: name resolution, kinds and units against an [`Environment`].
//!
//! Until the crate's units module lands, the checker reads units through a
//! private stand-in (`units_stub`) with the same API; swapping it is one
//! `use` line in `check.rs` (and one in a `builtins` test).

pub mod builtins;
pub mod check;
pub mod diagnostic;
pub mod parser;
pub mod syntax;
mod units_stub;

pub use check::{check, check_source, CheckReport, DatasetCatalog, DatasetInfo, Environment, Scope, Type};
pub use diagnostic::{did_you_mean, render, render_all, Diagnostic, RenderOptions, Severity};
pub use parser::{is_complete, parse, Completeness};
pub use syntax::{Expr, ExprKind, Program, Span, Statement, StatementKind};
