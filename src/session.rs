//! A notebook session: the language's state across cells, shared by the
//! Jupyter kernel, the evcxr hook and the CLI.
//!
//! Invariants: a failed cell changes nothing that existed before it (the
//! evaluator's state is restored); every error is rendered once, as plain
//! text with a caret under the source; a panic inside evaluation becomes an
//! error, never a dead session.

use std::path::PathBuf;
use std::sync::atomic::AtomicBool;
use std::sync::Arc;

use crate::lang::eval::Evaluator;
use crate::lang::value::Value;
use crate::lang::{self, Completeness, Diagnostic, RenderOptions};
use crate::mime::MimeBundle;

/// What a cell produced.
#[derive(Debug, Clone, Default)]
pub struct CellOutput {
    /// One bundle per expression statement but the last.
    pub displays: Vec<MimeBundle>,
    /// The value of the last expression statement, if the cell ends in one.
    pub result: Option<MimeBundle>,
    /// Notes and warnings, rendered (empty if none).
    pub notes: String,
    /// What `print` wrote.
    pub printed: String,
}

/// A cell that failed: the rendered diagnostic (caret included) and its
/// first line.
#[derive(Debug, Clone, PartialEq)]
pub struct CellError {
    pub message: String,
    pub rendered: String,
}

/// Language state across cells.
pub struct Session {
    evaluator: Evaluator,
    pub render_options: RenderOptions,
    /// Values of the last cell, for front ends that want more than bundles.
    pub last_values: Vec<Value>,
}

impl Default for Session {
    fn default() -> Self {
        Self::new()
    }
}

impl Session {
    /// A session whose relative paths start in the current directory and
    /// whose recipe library is `./recipes` then the user's configuration
    /// folder.
    pub fn new() -> Self {
        let mut evaluator = Evaluator::new();
        evaluator.describe = crate::display::plain;
        let cwd = std::env::current_dir().unwrap_or_else(|_| PathBuf::from("."));
        evaluator.recipe_folders = lang::recipe::default_folders(Some(&cwd.join("recipes")));
        evaluator.base_directory = cwd;
        Self { evaluator, render_options: RenderOptions::default(), last_values: Vec::new() }
    }

    pub fn evaluator(&self) -> &Evaluator {
        &self.evaluator
    }

    pub fn evaluator_mut(&mut self) -> &mut Evaluator {
        &mut self.evaluator
    }

    fn fail(&self, diagnostics: &[Diagnostic], source: &str) -> CellError {
        CellError {
            message: diagnostics.first().map(|d| d.message.clone()).unwrap_or_else(|| "error".into()),
            rendered: lang::render_all(diagnostics, source, &self.render_options),
        }
    }

    /// Runs one cell. On failure the session is as it was before the cell.
    pub fn run(&mut self, code: &str, interrupt: Option<Arc<AtomicBool>>) -> Result<CellOutput, CellError> {
        let program = lang::parse(code).map_err(|d| self.fail(&d, code))?;
        let (warnings, scope) = crate::lang::check_program(&program, code, &self.evaluator).map_err(|d| self.fail(&d, code))?;
        let saved = self.evaluator.snapshot();
        self.evaluator.set_interrupt(interrupt);
        let outcome = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| self.evaluator.run(&program, code)));
        self.evaluator.set_interrupt(None);
        let notes = warnings;
        let printed = lang::eval::take_printed();
        let shown = match outcome {
            Ok(Ok(shown)) => shown,
            Ok(Err(d)) => {
                self.evaluator.restore(saved);
                return Err(self.fail(&[d], code));
            }
            Err(panic) => {
                self.evaluator.restore(saved);
                let what = panic.downcast_ref::<String>().cloned().or_else(|| panic.downcast_ref::<&str>().map(|s| s.to_string())).unwrap_or_default();
                let d = Diagnostic::error(format!("internal error while evaluating this cell: {what}"), lang::Span::new(0, code.len()))
                    .with_help("this is a bug in Baroc; the session is unchanged and still usable");
                return Err(self.fail(&[d], code));
            }
        };
        self.evaluator.check_scope = scope;
        // `print(...)` shows its text on stdout, not as a value.
        let shown: Vec<_> = shown.into_iter().filter(|(_, v)| !matches!(v, Value::Text(t) if t.is_empty())).collect();
        // The language returns requests; carrying them out (writing reports,
        // drawing figures) is the front end's part. A figure that cannot be
        // drawn fails the cell like any other error.
        let mut values: Vec<Value> = shown.into_iter().map(|(_, v)| v).collect();
        let presented = crate::report::carry_out(&self.evaluator, values.iter_mut()).and_then(|()| values.iter().map(|v| crate::display::present(v, self.evaluator.current_dataset().map(|d| &**d))).collect::<Result<Vec<MimeBundle>, Diagnostic>>());
        let mut bundles = match presented {
            Ok(bundles) => bundles,
            Err(d) => {
                self.evaluator.restore(saved);
                return Err(self.fail(&[d], code));
            }
        };
        self.last_values = values;
        let result = bundles.pop();
        Ok(CellOutput { displays: bundles, result, notes: if notes.is_empty() { String::new() } else { lang::render_all(&notes, code, &self.render_options) }, printed })
    }

    /// Whether the text is a finished cell.
    pub fn is_complete(&self, code: &str) -> Completeness {
        lang::is_complete(code)
    }

    /// Completions at a cursor (in Unicode code points): the word being typed
    /// and the names that continue it (bindings, functions, built-ins,
    /// keywords, the open dataset's variables and roles).
    pub fn complete(&self, code: &str, cursor: usize) -> (Vec<String>, usize, usize) {
        let chars: Vec<char> = code.chars().collect();
        let cursor = cursor.min(chars.len());
        let mut start = cursor;
        while start > 0 && (chars[start - 1].is_alphanumeric() || chars[start - 1] == '_') {
            start -= 1;
        }
        let prefix: String = chars[start..cursor].iter().collect();
        let mut names = self.evaluator.visible_names();
        names.extend(lang::parser::keywords().iter().map(|k| k.to_string()));
        names.sort();
        names.dedup();
        let matches: Vec<String> = names.into_iter().filter(|n| n.starts_with(&prefix) && !prefix.is_empty() || prefix.is_empty()).collect();
        (matches, start, cursor)
    }

    /// Documentation of the name under the cursor: a built-in's signature and
    /// units, a user function's source, a bound value's description, a
    /// dataset variable's dimensions, units and coordinate ranges.
    pub fn inspect(&self, code: &str, cursor: usize) -> Option<String> {
        let chars: Vec<char> = code.chars().collect();
        let cursor = cursor.min(chars.len());
        let (mut start, mut end) = (cursor, cursor);
        while start > 0 && (chars[start - 1].is_alphanumeric() || chars[start - 1] == '_') {
            start -= 1;
        }
        while end < chars.len() && (chars[end].is_alphanumeric() || chars[end] == '_') {
            end += 1;
        }
        let word: String = chars[start..end].iter().collect();
        if word.is_empty() {
            return None;
        }
        if let Some(doc) = crate::lang::builtin_documentation(&word) {
            return Some(doc);
        }
        if let Some(f) = self.evaluator.functions().find(|f| f.name == word) {
            return Some(format!("user function {}({})\n{}", f.name, f.parameters.join(", "), f.source));
        }
        if let Some(v) = self.evaluator.lookup(&word) {
            return Some(crate::display::plain(v));
        }
        let dataset = self.evaluator.current_dataset()?;
        let info = dataset.resolve(&word).ok()?;
        let (s, n, w, e) = info.grid.extent();
        let mut text = format!(
            "{}: {} [{}]\n  dimensions: {}\n  latitude {s:.2} to {n:.2}, longitude {w:.2} to {e:.2}\n",
            info.name,
            info.long_name.clone().unwrap_or_default(),
            info.units,
            info.describe_dimensions()
        );
        if let Some(l) = &info.levels {
            text.push_str(&format!("  levels (hPa): {}\n", l.iter().map(|p| format!("{}", p / 100.0)).collect::<Vec<_>>().join(", ")));
        }
        if let Some(t) = &info.times {
            let labels = t.labels();
            text.push_str(&format!("  times: {} to {} ({} steps)\n", labels.first()?, labels.last()?, labels.len()));
        }
        text.push_str(&format!("  source: {}", dataset.labels().join(", ")));
        Some(text)
    }
}

/// What `Session::show` returns: a cell's output or its error, shown inline
/// by the evcxr Rust kernel through its display protocol (the
/// `evcxr_display` method evcxr calls on a cell's final value).
#[derive(Debug, Clone)]
pub enum Shown {
    Output(CellOutput),
    Error(CellError),
}

impl Shown {
    /// Prints every bundle of the cell between evcxr's content markers.
    pub fn evcxr_display(&self) {
        print!("{}", self.evcxr_text());
    }

    /// The text `evcxr_display` prints (for tests).
    pub fn evcxr_text(&self) -> String {
        match self {
            Shown::Output(out) => {
                let mut text = String::new();
                if !out.printed.is_empty() {
                    text.push_str(&crate::render::evcxr::evcxr_display_string(&MimeBundle::plain(out.printed.clone())));
                }
                for b in out.displays.iter().chain(out.result.iter()) {
                    text.push_str(&crate::render::evcxr::evcxr_display_string(b));
                }
                text
            }
            Shown::Error(e) => crate::render::evcxr::evcxr_display_string(&MimeBundle::plain(e.rendered.clone())),
        }
    }
}

impl Session {
    /// Runs a cell for a Rust notebook: the result displays itself inline
    /// in evcxr (`session.show("thickness(1000 hPa to 500 hPa)")`).
    pub fn show(&mut self, code: &str) -> Shown {
        match self.run(code, None) {
            Ok(out) => Shown::Output(out),
            Err(e) => Shown::Error(e),
        }
    }
}
