//! The real kernel session: Baroc cells through `crate::session::Session`.

use std::sync::atomic::AtomicBool;
use std::sync::Arc;

use super::session::{Completion, ExecuteOutcome, HelpLink, IsComplete, KernelError, KernelSession, LanguageInfo, Output, StreamName};
use crate::lang::Completeness;
use crate::mime::MimeBundle;
use crate::session::Session;

/// Baroc's notebook session behind the kernel protocol.
pub struct BarocKernelSession {
    session: Session,
}

impl BarocKernelSession {
    pub fn new() -> Self {
        Self { session: Session::new() }
    }
}

impl Default for BarocKernelSession {
    fn default() -> Self {
        Self::new()
    }
}

impl KernelSession for BarocKernelSession {
    fn execute(&mut self, code: &str, interrupt: &Arc<AtomicBool>) -> ExecuteOutcome {
        match self.session.run(code, Some(interrupt.clone())) {
            Ok(out) => {
                let mut outputs: Vec<Output> = out.displays.into_iter().map(Output::Display).collect();
                if !out.printed.is_empty() {
                    outputs.insert(0, Output::Stream { name: StreamName::Stdout, text: out.printed });
                }
                if !out.notes.is_empty() {
                    outputs.insert(0, Output::Stream { name: StreamName::Stderr, text: out.notes });
                }
                ExecuteOutcome { outputs, result: out.result, error: None }
            }
            Err(e) => {
                let ename = if e.message == "interrupted" { "KeyboardInterrupt" } else { "BarocError" };
                ExecuteOutcome::failure(KernelError::new(ename, e.message.clone(), e.rendered.lines().map(str::to_string).collect()))
            }
        }
    }

    fn complete(&self, code: &str, cursor_pos: usize) -> Completion {
        let (matches, cursor_start, cursor_end) = self.session.complete(code, cursor_pos);
        Completion { matches, cursor_start, cursor_end }
    }

    fn inspect(&self, code: &str, cursor_pos: usize, _detail_level: u8) -> Option<MimeBundle> {
        self.session.inspect(code, cursor_pos).map(MimeBundle::plain)
    }

    fn is_complete(&self, code: &str) -> IsComplete {
        match self.session.is_complete(code) {
            Completeness::Complete => IsComplete::Complete,
            Completeness::Incomplete { indent } => IsComplete::Incomplete { indent },
            Completeness::Invalid => IsComplete::Invalid,
        }
    }

    fn language_info(&self) -> LanguageInfo {
        LanguageInfo {
            name: "baroc".into(),
            version: env!("CARGO_PKG_VERSION").into(),
            mimetype: "text/x-baroc".into(),
            file_extension: ".baroc".into(),
            pygments_lexer: None,
            codemirror_mode: None,
        }
    }

    fn banner(&self) -> String {
        format!(
            "Baroc {}: thermal-wind and balance diagnostics on pressure levels.\nBaroc is an analysis tool, not a warning service; defer to your national meteorological service and local practice.",
            env!("CARGO_PKG_VERSION")
        )
    }

    fn help_links(&self) -> Vec<HelpLink> {
        Vec::new()
    }
}
