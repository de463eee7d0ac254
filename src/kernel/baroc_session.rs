//! The real kernel session: Baroc cells through `crate::session::Session`.

use std::sync::atomic::AtomicBool;
use std::sync::Arc;

use super::session::{Completion, ExecuteOutcome, HelpLink, IsComplete, KernelError, KernelSession, LanguageInfo, Output, StreamName};
use crate::lang::Completeness;
use crate::mime::MimeBundle;
use crate::session::{CellEvent, Session};

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
        let mut outputs = Vec::new();
        let mut outcome = self.execute_streaming(code, interrupt, &mut |output| outputs.push(output));
        outputs.append(&mut outcome.outputs);
        outcome.outputs = outputs;
        outcome
    }

    /// Each statement's value is emitted as it completes; only the value of
    /// a cell's last statement is held back as the cell's result (shown with
    /// `Out[n]`). Warnings go to standard error before anything runs.
    fn execute_streaming(&mut self, code: &str, interrupt: &Arc<AtomicBool>, emit: &mut dyn FnMut(Output)) -> ExecuteOutcome {
        let mut result = None;
        let outcome = self.session.run_streaming(code, Some(interrupt.clone()), &mut |event| match event {
            CellEvent::Notes(text) => emit(Output::Stream { name: StreamName::Stderr, text }),
            CellEvent::Printed(text) => emit(Output::Stream { name: StreamName::Stdout, text }),
            CellEvent::ClearOutput { wait } => emit(Output::Clear { wait }),
            CellEvent::Progress { done, total, running } => emit(Output::Progress { done, total, running }),
            CellEvent::Shown { bundle, last: true } => result = Some(bundle),
            CellEvent::Shown { bundle, last: false } => emit(Output::Display(bundle)),
        });
        match outcome {
            Ok(()) => ExecuteOutcome { outputs: Vec::new(), result, error: None },
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
