//! A test double of the notebook kernel: the real protocol layer driven by
//! a toy session whose cells can sleep, print to both streams, display and
//! panic on demand, so the protocol tests (tests/python/test_kernel_protocol.py)
//! can provoke every message sequence. It installs as the kernelspec
//! `baroc-protocol-double`, beside the real `baroc` kernel. Not the product:
//! users run `baroc kernel`.
//!
//! Usage:
//!   baroc-kernel-dev kernel --connection-file FILE
//!   baroc-kernel-dev install [--user | --prefix DIR | --sys-prefix] [--display-name NAME]
//!   baroc-kernel-dev uninstall [--user | --prefix DIR | --sys-prefix]
//!
//! The toy language, one statement per line:
//!   1+2*(7-4)      integer arithmetic (+ - * / %), value of the last line is the result
//!   x = 6*7        assignment; names can be used in later lines and cells
//!   print text     text to stdout          eprint text   text to stderr
//!   sleep 2.5      waits, checking the interrupt flag every 10 ms
//!   display        shows a bundle with text/html and image/png
//!   panic          panics (to test that the kernel survives)

use std::collections::BTreeMap;
use std::path::PathBuf;
use std::process::ExitCode;
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::{Duration, Instant};

/// The kernelspec name of this double.
const DOUBLE_NAME: &str = "baroc-protocol-double";

use baroc::kernel::kernelspec::{
    install_kernelspec_named, uninstall_kernelspec_named, KernelspecLocation, DEFAULT_DISPLAY_NAME,
};
use baroc::kernel::session::byte_offset;
use baroc::kernel::{
    run_kernel, Completion, ExecuteOutcome, IsComplete, KernelError, KernelSession, LanguageInfo,
    Output, StreamName,
};
use baroc::mime::MimeBundle;
use clap::{Args, Parser, Subcommand};

#[derive(Parser)]
#[command(about = "Test double of the Baroc kernel: the real protocol with a toy language, for protocol tests")]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Run the kernel (Jupyter starts this from kernel.json).
    Kernel {
        #[arg(long)]
        connection_file: PathBuf,
    },
    /// Install the kernelspec.
    Install {
        #[command(flatten)]
        location: LocationArgs,
        #[arg(long, default_value = DEFAULT_DISPLAY_NAME)]
        display_name: String,
    },
    /// Remove the kernelspec.
    Uninstall {
        #[command(flatten)]
        location: LocationArgs,
    },
}

#[derive(Args)]
#[group(multiple = false)]
struct LocationArgs {
    /// The user's Jupyter data directory (the default).
    #[arg(long)]
    user: bool,
    /// <DIR>/share/jupyter/kernels.
    #[arg(long, value_name = "DIR")]
    prefix: Option<PathBuf>,
    /// The active Python environment's prefix.
    #[arg(long)]
    sys_prefix: bool,
}

impl LocationArgs {
    fn location(&self) -> KernelspecLocation {
        match (&self.prefix, self.sys_prefix) {
            (Some(prefix), _) => KernelspecLocation::Prefix(prefix.clone()),
            (None, true) => KernelspecLocation::SysPrefix,
            _ => KernelspecLocation::User,
        }
    }
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    let result = match cli.command {
        Command::Kernel { connection_file } => {
            run_kernel(&connection_file, || Box::new(ToySession::default()))
                .map_err(|error| error.to_string())
        }
        Command::Install {
            location,
            display_name,
        } => std::env::current_exe()
            .map_err(|error| error.to_string())
            .and_then(|exe| {
                install_kernelspec_named(&location.location(), DOUBLE_NAME, &display_name, &exe).map_err(|error| error.to_string())
            })
            .map(|dir| println!("installed the kernelspec in {}", dir.display()))
        ,
        Command::Uninstall { location } => match uninstall_kernelspec_named(&location.location(), DOUBLE_NAME) {
            Ok(Some(dir)) => {
                println!("removed the kernelspec from {}", dir.display());
                Ok(())
            }
            Ok(None) => {
                println!("no kernelspec was installed there");
                Ok(())
            }
            Err(error) => Err(error.to_string()),
        },
    };
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(message) => {
            eprintln!("baroc-kernel-dev: {message}");
            ExitCode::FAILURE
        }
    }
}

const KEYWORDS: [&str; 6] = ["print", "eprint", "sleep", "display", "panic", "help"];

/// The toy session: integers and names, nothing more.
#[derive(Default)]
struct ToySession {
    names: BTreeMap<String, i64>,
}

impl KernelSession for ToySession {
    fn execute(&mut self, code: &str, interrupt: &std::sync::Arc<AtomicBool>) -> ExecuteOutcome {
        let mut outcome = ExecuteOutcome::default();
        for (number, line) in code.lines().enumerate() {
            let statement = line.trim();
            if statement.is_empty() {
                continue;
            }
            outcome.result = None;
            match self.statement(statement, interrupt, &mut outcome.outputs) {
                Ok(value) => outcome.result = value,
                Err(failure) => {
                    outcome.error = Some(failure.into_error(number + 1, line));
                    return outcome;
                }
            }
        }
        outcome
    }

    fn complete(&self, code: &str, cursor_pos: usize) -> Completion {
        let end = byte_offset(code, cursor_pos);
        let start = code[..end]
            .char_indices()
            .rev()
            .take_while(|(_, c)| c.is_alphanumeric() || *c == '_')
            .last()
            .map(|(i, _)| i)
            .unwrap_or(end);
        let prefix = &code[start..end];
        let mut matches: Vec<String> = KEYWORDS
            .iter()
            .map(|k| k.to_string())
            .chain(self.names.keys().cloned())
            .filter(|word| word.starts_with(prefix))
            .collect();
        matches.sort();
        matches.dedup();
        Completion {
            matches,
            cursor_start: code[..start].chars().count(),
            cursor_end: cursor_pos,
        }
    }

    fn inspect(&self, code: &str, cursor_pos: usize, detail_level: u8) -> Option<MimeBundle> {
        let at = byte_offset(code, cursor_pos);
        let is_word = |c: char| c.is_alphanumeric() || c == '_';
        let start = code[..at]
            .rfind(|c: char| !is_word(c))
            .map(|i| i + 1)
            .unwrap_or(0);
        let end = code[at..]
            .find(|c: char| !is_word(c))
            .map(|i| at + i)
            .unwrap_or(code.len());
        let word = &code[start..end];
        let text = match word {
            "print" => "print TEXT: writes TEXT to standard output".to_string(),
            "eprint" => "eprint TEXT: writes TEXT to standard error".to_string(),
            "sleep" => "sleep SECONDS: waits; stops early when interrupted".to_string(),
            "display" => "display: shows an HTML and PNG bundle".to_string(),
            "panic" => "panic: makes the session panic".to_string(),
            name => format!("{name} = {}", self.names.get(name)?),
        };
        let text = if detail_level > 0 {
            format!("{text}\n(toy session)")
        } else {
            text
        };
        Some(MimeBundle::plain(text))
    }

    fn is_complete(&self, code: &str) -> IsComplete {
        let mut depth = 0i64;
        for c in code.chars() {
            match c {
                '(' => depth += 1,
                ')' => depth -= 1,
                _ => {}
            }
            if depth < 0 {
                return IsComplete::Invalid;
            }
        }
        let trimmed = code.trim_end();
        if depth > 0 || trimmed.ends_with(['+', '-', '*', '/', '%', '=']) {
            return IsComplete::Incomplete {
                indent: "  ".to_string(),
            };
        }
        if code.lines().any(|line| {
            let line = line.trim();
            !line.is_empty()
                && !starts_with_keyword(line)
                && line.chars().any(|c| "$#@!?;{}[]".contains(c))
        }) {
            return IsComplete::Invalid;
        }
        IsComplete::Complete
    }

    fn language_info(&self) -> LanguageInfo {
        LanguageInfo {
            name: "baroc".to_string(),
            version: env!("CARGO_PKG_VERSION").to_string(),
            mimetype: "text/x-baroc".to_string(),
            file_extension: ".baroc".to_string(),
            pygments_lexer: None,
            codemirror_mode: None,
        }
    }

    fn banner(&self) -> String {
        "Baroc development kernel (toy arithmetic session)".to_string()
    }
}

fn starts_with_keyword(line: &str) -> bool {
    let word = line.split_whitespace().next().unwrap_or("");
    KEYWORDS.contains(&word)
}

/// A failed statement: kind, message and the byte column it points at.
struct Failure {
    kind: &'static str,
    message: String,
    column: usize,
}

impl Failure {
    fn into_error(self, line_number: usize, line: &str) -> KernelError {
        let caret_column = line[..self.column.min(line.len())].chars().count();
        KernelError::new(
            self.kind,
            self.message.clone(),
            vec![
                format!("{}: {} (line {line_number})", self.kind, self.message),
                format!("  {line}"),
                format!("  {}^", " ".repeat(caret_column)),
            ],
        )
    }
}

impl ToySession {
    fn statement(
        &mut self,
        statement: &str,
        interrupt: &AtomicBool,
        outputs: &mut Vec<Output>,
    ) -> Result<Option<MimeBundle>, Failure> {
        let (word, rest) = match statement.split_once(char::is_whitespace) {
            Some((word, rest)) => (word, rest.trim()),
            None => (statement, ""),
        };
        match word {
            "print" | "eprint" => {
                let name = if word == "print" {
                    StreamName::Stdout
                } else {
                    StreamName::Stderr
                };
                outputs.push(Output::Stream {
                    name,
                    text: format!("{rest}\n"),
                });
                Ok(None)
            }
            "sleep" => {
                let seconds: f64 = rest
                    .parse()
                    .ok()
                    .filter(|s: &f64| s.is_finite() && *s >= 0.0)
                    .ok_or(Failure {
                        kind: "ToySyntaxError",
                        message: format!("sleep needs a number of seconds, found \"{rest}\""),
                        column: statement.len() - rest.len(),
                    })?;
                let deadline = Instant::now() + Duration::from_secs_f64(seconds.min(86_400.0));
                while Instant::now() < deadline {
                    if interrupt.load(Ordering::SeqCst) {
                        return Err(Failure {
                            kind: "Interrupted",
                            message: "the cell was interrupted".to_string(),
                            column: 0,
                        });
                    }
                    std::thread::sleep(Duration::from_millis(10));
                }
                Ok(None)
            }
            "panic" => panic!("the toy session was asked to panic"),
            "display" => {
                let mut bundle = MimeBundle::plain("<toy display: wind arrows>");
                bundle.insert_text("text/html", "<b>Toy display</b>: two wind arrows");
                let png = baroc::kernel::logo::logo_png(32).map_err(|error| Failure {
                    kind: "ToyDisplayError",
                    message: error.to_string(),
                    column: 0,
                })?;
                bundle.insert_binary("image/png", png);
                outputs.push(Output::Display(bundle));
                Ok(None)
            }
            _ => {
                if let Some((name, expression)) = statement.split_once('=') {
                    let name = name.trim();
                    if name.is_empty() || !name.chars().all(|c| c.is_alphanumeric() || c == '_') {
                        return Err(Failure {
                            kind: "ToySyntaxError",
                            message: "the left of \"=\" must be a name".to_string(),
                            column: 0,
                        });
                    }
                    let offset = statement.len() - expression.len();
                    let value = Evaluator::new(expression, offset, &self.names).parse()?;
                    self.names.insert(name.to_string(), value);
                    return Ok(None);
                }
                let value = Evaluator::new(statement, 0, &self.names).parse()?;
                Ok(Some(MimeBundle::plain(value.to_string())))
            }
        }
    }
}

/// Recursive-descent parser and evaluator for integer expressions:
/// expression = term (("+" | "-") term)*; term = factor (("*" | "/" | "%") factor)*;
/// factor = "-" factor | integer | name | "(" expression ")".
struct Evaluator<'a> {
    text: &'a str,
    position: usize,
    /// Byte offset of `text` in its line, for carets.
    offset: usize,
    names: &'a BTreeMap<String, i64>,
}

impl<'a> Evaluator<'a> {
    fn new(text: &'a str, offset: usize, names: &'a BTreeMap<String, i64>) -> Self {
        Self {
            text,
            position: 0,
            offset,
            names,
        }
    }

    fn parse(mut self) -> Result<i64, Failure> {
        let value = self.expression()?;
        self.skip_spaces();
        if let Some(c) = self.peek() {
            return Err(self.syntax(format!(
                "unexpected \"{c}\"; expected an operator or the end of the line"
            )));
        }
        Ok(value)
    }

    fn peek(&self) -> Option<char> {
        self.text[self.position..].chars().next()
    }

    fn skip_spaces(&mut self) {
        while let Some(c) = self.peek().filter(|c| c.is_whitespace()) {
            self.position += c.len_utf8();
        }
    }

    fn syntax(&self, message: String) -> Failure {
        Failure {
            kind: "ToySyntaxError",
            message,
            column: self.offset + self.position,
        }
    }

    fn arithmetic(&self, message: &str, column: usize) -> Failure {
        Failure {
            kind: "ToyArithmeticError",
            message: message.to_string(),
            column: self.offset + column,
        }
    }

    fn expression(&mut self) -> Result<i64, Failure> {
        let mut value = self.term()?;
        loop {
            self.skip_spaces();
            let at = self.position;
            let combine: fn(i64, i64) -> Option<i64> = match self.peek() {
                Some('+') => i64::checked_add,
                Some('-') => i64::checked_sub,
                _ => return Ok(value),
            };
            self.position += 1;
            let right = self.term()?;
            value = combine(value, right).ok_or_else(|| self.arithmetic("integer overflow", at))?;
        }
    }

    fn term(&mut self) -> Result<i64, Failure> {
        let mut value = self.factor()?;
        loop {
            self.skip_spaces();
            let at = self.position;
            let operator = match self.peek() {
                Some(c @ ('*' | '/' | '%')) => c,
                _ => return Ok(value),
            };
            self.position += 1;
            let right = self.factor()?;
            value = match operator {
                '*' => value
                    .checked_mul(right)
                    .ok_or_else(|| self.arithmetic("integer overflow", at))?,
                _ if right == 0 => return Err(self.arithmetic("division by zero", at)),
                '/' => value
                    .checked_div(right)
                    .ok_or_else(|| self.arithmetic("integer overflow", at))?,
                _ => value
                    .checked_rem(right)
                    .ok_or_else(|| self.arithmetic("integer overflow", at))?,
            };
        }
    }

    fn factor(&mut self) -> Result<i64, Failure> {
        self.skip_spaces();
        let start = self.position;
        match self.peek() {
            Some('-') => {
                self.position += 1;
                let value = self.factor()?;
                value
                    .checked_neg()
                    .ok_or_else(|| self.arithmetic("integer overflow", start))
            }
            Some('(') => {
                self.position += 1;
                let value = self.expression()?;
                self.skip_spaces();
                if self.peek() != Some(')') {
                    return Err(self.syntax("expected \")\" to close the \"(\"".to_string()));
                }
                self.position += 1;
                Ok(value)
            }
            Some(c) if c.is_ascii_digit() => {
                while self.peek().is_some_and(|c| c.is_ascii_digit()) {
                    self.position += 1;
                }
                self.text[start..self.position]
                    .parse()
                    .map_err(|_| Failure {
                        kind: "ToyArithmeticError",
                        message: "integer too large".to_string(),
                        column: self.offset + start,
                    })
            }
            Some(c) if c.is_alphabetic() || c == '_' => {
                while self.peek().is_some_and(|c| c.is_alphanumeric() || c == '_') {
                    self.position += self.peek().map_or(1, char::len_utf8);
                }
                let name = &self.text[start..self.position];
                self.names.get(name).copied().ok_or(Failure {
                    kind: "ToyNameError",
                    message: format!("\"{name}\" is not defined"),
                    column: self.offset + start,
                })
            }
            Some(c) => Err(self.syntax(format!(
                "unexpected \"{c}\"; expected a number, a name or \"(\""
            ))),
            None => Err(self.syntax("the expression ends too early".to_string())),
        }
    }
}
