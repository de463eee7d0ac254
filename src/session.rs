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

use crate::lang::eval::{Evaluator, StatementEvent};
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

/// What a cell tells its front end while it runs
/// ([`Session::run_streaming`]).
#[derive(Debug, Clone)]
pub enum CellEvent {
    /// The checker's warnings and notes, rendered (a notebook shows them on
    /// standard error).
    Notes(String),
    /// Text the cell printed.
    Printed(String),
    /// The cell asked to clear what it has shown so far.
    ClearOutput { wait: bool },
    /// A statement's value, drawn; `last` when it is the cell's last
    /// statement (its value is the cell's result).
    Shown { bundle: MimeBundle, last: bool },
    /// Statement `done + 1` of `total` is starting; `running` is its first
    /// line.
    Progress { done: usize, total: usize, running: String },
}

/// The first line of a statement, shortened for a progress line.
fn first_line(text: &str) -> String {
    let line = text.lines().next().unwrap_or("").trim();
    if line.chars().count() > 60 {
        format!("{}…", line.chars().take(59).collect::<String>())
    } else if text.trim().lines().count() > 1 {
        format!("{line} …")
    } else {
        line.to_string()
    }
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

    /// Runs one cell and collects what it showed. On failure the session is
    /// as it was before the cell.
    pub fn run(&mut self, code: &str, interrupt: Option<Arc<AtomicBool>>) -> Result<CellOutput, CellError> {
        let mut bundles = Vec::new();
        let mut printed = String::new();
        let mut notes = String::new();
        self.run_streaming(code, interrupt, &mut |event| match event {
            CellEvent::Notes(text) => notes = text,
            CellEvent::Printed(text) => printed.push_str(&text),
            CellEvent::Shown { bundle, .. } => bundles.push(bundle),
            CellEvent::ClearOutput { .. } | CellEvent::Progress { .. } => {}
        })?;
        let result = bundles.pop();
        Ok(CellOutput { displays: bundles, result, notes, printed })
    }

    /// Runs one cell, telling `on_event` of each result as its statement
    /// completes (a notebook front end shows it at once), of printed text and
    /// clear requests in the order they happened, and of progress from
    /// statement to statement. On failure the session is as it was before
    /// the cell; what was already sent stands, as in any notebook.
    pub fn run_streaming(&mut self, code: &str, interrupt: Option<Arc<AtomicBool>>, on_event: &mut dyn FnMut(CellEvent)) -> Result<(), CellError> {
        let program = lang::parse(code).map_err(|d| self.fail(&d, code))?;
        let (warnings, scope) = crate::lang::check_program(&program, code, &self.evaluator).map_err(|d| self.fail(&d, code))?;
        if !warnings.is_empty() {
            on_event(CellEvent::Notes(lang::render_all(&warnings, code, &self.render_options)));
        }
        let saved = self.evaluator.snapshot();
        self.evaluator.set_interrupt(interrupt);
        // Left over from a cell that failed half-way (not ours to show).
        lang::eval::take_side_outputs();
        let mut values = Vec::new();
        let outcome = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| {
            self.evaluator.run_each(&program, code, &mut |evaluator, event| {
                for side in lang::eval::take_side_outputs() {
                    on_event(match side {
                        lang::eval::SideOutput::Printed(text) => CellEvent::Printed(text),
                        lang::eval::SideOutput::ClearOutput { wait } => CellEvent::ClearOutput { wait },
                    });
                }
                match event {
                    StatementEvent::Started { index, total, span } => {
                        let text = code.get(span.start..span.end).unwrap_or("");
                        on_event(CellEvent::Progress { done: index, total, running: first_line(text) });
                    }
                    // `print(...)` and `clear_output()` evaluate to empty
                    // text: what they did was sent above, not as a value.
                    StatementEvent::Finished { value: Some(Value::Text(t)), .. } if t.is_empty() => {}
                    // The language returns requests; carrying them out
                    // (writing reports, drawing figures) is the front end's
                    // part. A figure that cannot be drawn fails the cell like
                    // any other error.
                    StatementEvent::Finished { index, total, value: Some(mut value), .. } => {
                        crate::report::carry_out(evaluator, std::iter::once(&mut value))?;
                        let bundle = crate::display::present(&value, evaluator.current_dataset().map(|d| &**d))?;
                        on_event(CellEvent::Shown { bundle, last: index + 1 == total });
                        values.push(value);
                    }
                    StatementEvent::Finished { .. } => {}
                }
                Ok(())
            })
        }));
        self.evaluator.set_interrupt(None);
        for side in lang::eval::take_side_outputs() {
            if let lang::eval::SideOutput::Printed(text) = side {
                on_event(CellEvent::Printed(text));
            }
        }
        match outcome {
            Ok(Ok(())) => {}
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
        }
        self.evaluator.check_scope = scope;
        self.last_values = values;
        Ok(())
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
            text.push_str(&format!("  times: {} to {} ({} step{})\n", labels.first()?, labels.last()?, labels.len(), if labels.len() == 1 { "" } else { "s" }));
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
