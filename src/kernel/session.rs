//! The one seam between the notebook kernel and the language.
//!
//! The kernel knows sockets, signatures and message shapes; it knows nothing
//! of Baroc. Everything it needs from the language goes through
//! [`KernelSession`]. The kernel owns exactly one session at a time and calls
//! it from a single worker thread, one request after another, so an
//! implementation needs no locking of its own.
//!
//! Positions (`cursor_pos`, `cursor_start`, `cursor_end`) count Unicode code
//! points, as the messaging protocol (5.2 and later) prescribes, never bytes or
//! UTF-16 units. [`byte_offset`] converts one to a byte index into `code`.

use std::sync::atomic::AtomicBool;

use crate::mime::MimeBundle;

/// What the language provides to the notebook kernel.
///
/// `Send` because the session is built on the caller's thread and then moved
/// to the kernel's worker thread.
pub trait KernelSession: Send {
    /// Run one cell. `interrupt` turns true when the user asks to stop; a long
    /// computation should look at it often (every few milliseconds of work)
    /// and return an error outcome soon after it turns. The kernel clears the
    /// flag before each call.
    ///
    /// A panic in here does not end the kernel: it becomes an error reply and
    /// the same session serves the next cell.
    fn execute(&mut self, code: &str, interrupt: &std::sync::Arc<AtomicBool>) -> ExecuteOutcome;

    /// Run one cell, handing each output to `emit` as soon as it exists (the
    /// kernel publishes it at once), and return what is left: the result,
    /// the error, and any outputs not emitted. A session that cannot stream
    /// keeps this default, which emits nothing and returns everything at the
    /// end.
    fn execute_streaming(&mut self, code: &str, interrupt: &std::sync::Arc<AtomicBool>, emit: &mut dyn FnMut(Output)) -> ExecuteOutcome {
        let _ = emit;
        self.execute(code, interrupt)
    }

    /// Completions for the word at `cursor_pos` (code points into `code`).
    fn complete(&self, code: &str, cursor_pos: usize) -> Completion;

    /// Help for the name at `cursor_pos`; `detail_level` 0 is a summary, 1 or
    /// more asks for everything known. `None` when there is nothing to show.
    fn inspect(&self, code: &str, cursor_pos: usize, detail_level: u8) -> Option<MimeBundle>;

    /// Whether `code` is ready to run as typed (the console asks this to decide
    /// between running and opening a continuation line).
    fn is_complete(&self, code: &str) -> IsComplete;

    /// Static facts about the language, sent in kernel_info_reply.
    fn language_info(&self) -> LanguageInfo;

    /// The greeting a console shows when it connects.
    fn banner(&self) -> String;

    /// Links the notebook lists in its Help menu.
    fn help_links(&self) -> Vec<HelpLink> {
        Vec::new()
    }
}

/// Everything one cell produced, in the order the user should see it.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct ExecuteOutcome {
    /// Printed text and displayed values, in production order.
    pub outputs: Vec<Output>,
    /// The value of the cell (shown with the `Out[n]` prompt), if any.
    pub result: Option<MimeBundle>,
    /// Set when the cell failed; outputs produced before the failure are kept.
    pub error: Option<KernelError>,
}

impl ExecuteOutcome {
    /// A cell that produced only a value.
    pub fn value(result: MimeBundle) -> Self {
        Self {
            result: Some(result),
            ..Self::default()
        }
    }

    /// A cell that failed without output.
    pub fn failure(error: KernelError) -> Self {
        Self {
            error: Some(error),
            ..Self::default()
        }
    }
}

/// One piece of output produced while a cell ran.
#[derive(Debug, Clone, PartialEq)]
pub enum Output {
    /// Text written to standard output or standard error.
    Stream { name: StreamName, text: String },
    /// A rich value displayed mid-cell (a plot, a table).
    Display(MimeBundle),
    /// Statement `done + 1` of `total` is starting (`running` says which).
    /// The kernel turns these into one progress display that updates in place
    /// once a cell has run for a while, and into a summary at its end.
    Progress { done: usize, total: usize, running: String },
    /// Clear the cell's output so far (`wait`: when the next output arrives).
    Clear { wait: bool },
}

/// Which text stream a [`Output::Stream`] belongs to.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum StreamName {
    Stdout,
    Stderr,
}

impl StreamName {
    /// The name the protocol uses in `stream` messages.
    pub fn as_str(self) -> &'static str {
        match self {
            StreamName::Stdout => "stdout",
            StreamName::Stderr => "stderr",
        }
    }
}

/// A failed cell as the notebook shows it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct KernelError {
    /// Kind of failure, e.g. "UnitError" (shown in bold by front ends).
    pub ename: String,
    /// One-line description.
    pub evalue: String,
    /// Lines shown to the user, top to bottom; may carry ANSI colour codes.
    pub traceback: Vec<String>,
}

impl KernelError {
    pub fn new(
        ename: impl Into<String>,
        evalue: impl Into<String>,
        traceback: Vec<String>,
    ) -> Self {
        Self {
            ename: ename.into(),
            evalue: evalue.into(),
            traceback,
        }
    }
}

/// The answer to a completion request.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Completion {
    /// Replacement candidates for the text between `cursor_start` and `cursor_end`.
    pub matches: Vec<String>,
    /// Start of the text to replace, in code points.
    pub cursor_start: usize,
    /// End of the text to replace, in code points (usually the cursor).
    pub cursor_end: usize,
}

/// The answer to an is-complete request.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum IsComplete {
    /// Ready to run.
    Complete,
    /// More input expected; `indent` is the suggested start of the next line.
    Incomplete { indent: String },
    /// Cannot become valid by adding lines (running it will report the error).
    Invalid,
    /// The session cannot tell.
    Unknown,
}

/// Facts about the language for kernel_info_reply's `language_info`.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct LanguageInfo {
    /// Language name, e.g. "baroc".
    pub name: String,
    /// Language version (usually the crate version).
    pub version: String,
    /// MIME type of a source file, e.g. "text/x-baroc".
    pub mimetype: String,
    /// Extension of a source file including the dot, e.g. ".baroc".
    pub file_extension: String,
    /// Name of a syntax highlighter lexer for exported notebooks, if any.
    pub pygments_lexer: Option<String>,
    /// Editor mode name for the notebook's code cells, if any.
    pub codemirror_mode: Option<String>,
}

/// One entry of the notebook's Help menu.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct HelpLink {
    pub text: String,
    pub url: String,
}

/// Byte index in `code` of the code point at `codepoint_pos`; positions past
/// the end map to `code.len()`, so the result is always a valid slice bound.
pub fn byte_offset(code: &str, codepoint_pos: usize) -> usize {
    code.char_indices()
        .nth(codepoint_pos)
        .map(|(byte, _)| byte)
        .unwrap_or(code.len())
}

/// Number of code points in `code` (the protocol's unit for lengths).
pub fn codepoint_len(code: &str) -> usize {
    code.chars().count()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn byte_offset_counts_code_points_not_bytes() {
        // "é" is two bytes in UTF-8 and "🌀" four (Unicode 15, UTF-8 table):
        // code point 2 ("x") starts at byte 2 + 4 = 6.
        let code = "é🌀x";
        assert_eq!(byte_offset(code, 0), 0);
        assert_eq!(byte_offset(code, 1), 2);
        assert_eq!(byte_offset(code, 2), 6);
        assert_eq!(byte_offset(code, 3), code.len());
        assert_eq!(byte_offset(code, 99), code.len());
        assert_eq!(codepoint_len(code), 3);
    }
}
