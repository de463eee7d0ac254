//! Errors as data, and the one renderer that turns them into text.
//!
//! A [`Diagnostic`] says what is wrong (`message`), where (`span`, byte
//! offsets into the source), a short `label` written under the caret, what
//! would be valid (`help`) and extra context (`notes`). [`render`] prints it
//! with the source line, a line-number gutter and carets under the span.
//! Columns are counted in display cells, so tabs (expanded to the next
//! multiple of four) and wide characters keep the carets aligned. Colour is
//! added only when asked for.

use std::fmt::Write as _;

use unicode_width::UnicodeWidthChar;

use super::syntax::Span;

#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Severity {
    Error,
    Warning,
}

impl Severity {
    pub fn word(self) -> &'static str {
        match self {
            Severity::Error => "error",
            Severity::Warning => "warning",
        }
    }
}

#[derive(Debug, Clone, PartialEq)]
pub struct Diagnostic {
    pub severity: Severity,
    /// What is wrong, in one sentence without a final full stop.
    pub message: String,
    /// Byte offsets of the characters the message is about.
    pub span: Span,
    /// A few words written under the caret.
    pub label: String,
    /// What would be valid: the expected kind, a suggestion, the list of
    /// available names.
    pub help: Option<String>,
    /// Further context (where something was defined, what was assumed).
    pub notes: Vec<String>,
}

impl Diagnostic {
    pub fn error(message: impl Into<String>, span: Span) -> Self {
        Diagnostic {
            severity: Severity::Error,
            message: message.into(),
            span,
            label: String::new(),
            help: None,
            notes: Vec::new(),
        }
    }

    pub fn warning(message: impl Into<String>, span: Span) -> Self {
        Diagnostic { severity: Severity::Warning, ..Diagnostic::error(message, span) }
    }

    pub fn with_label(mut self, label: impl Into<String>) -> Self {
        self.label = label.into();
        self
    }

    pub fn with_help(mut self, help: impl Into<String>) -> Self {
        self.help = Some(help.into());
        self
    }

    pub fn with_note(mut self, note: impl Into<String>) -> Self {
        self.notes.push(note.into());
        self
    }

    pub fn is_error(&self) -> bool {
        self.severity == Severity::Error
    }
}

/// How to render.
#[derive(Debug, Clone, Default)]
pub struct RenderOptions {
    /// Name shown in the location line (`--> name:3:7`); `None` shows only
    /// line and column.
    pub source_name: Option<String>,
    /// ANSI colours. Off unless asked for.
    pub color: bool,
}

const TAB_WIDTH: usize = 4;
/// Lines of a multi-line span shown before eliding the middle.
const MAX_SPAN_LINES: usize = 6;

struct Style {
    on: bool,
}

impl Style {
    fn paint(&self, code: &str, text: &str) -> String {
        if self.on && !text.is_empty() {
            format!("\x1b[{code}m{text}\x1b[0m")
        } else {
            text.to_string()
        }
    }
}

/// One line of the source: its byte range without the line break.
struct Line {
    start: usize,
    end: usize,
}

fn lines_of(source: &str) -> Vec<Line> {
    let mut lines = Vec::new();
    let bytes = source.as_bytes();
    let mut start = 0;
    let mut index = 0;
    while index < bytes.len() {
        match bytes[index] {
            b'\n' => {
                lines.push(Line { start, end: index });
                index += 1;
                start = index;
            }
            b'\r' => {
                lines.push(Line { start, end: index });
                index += if bytes.get(index + 1) == Some(&b'\n') { 2 } else { 1 };
                start = index;
            }
            _ => index += 1,
        }
    }
    lines.push(Line { start, end: bytes.len() });
    lines
}

/// Index of the line holding byte `offset` (a line break belongs to the line it ends).
fn line_index(lines: &[Line], offset: usize) -> usize {
    match lines.binary_search_by(|line| {
        if offset < line.start {
            std::cmp::Ordering::Greater
        } else if offset > line.end {
            std::cmp::Ordering::Less
        } else {
            std::cmp::Ordering::Equal
        }
    }) {
        Ok(index) => index,
        // Between two lines: inside the first one's line break.
        Err(index) => index.saturating_sub(1).min(lines.len() - 1),
    }
}

/// Clamps an offset into the source and onto a character boundary.
fn clamp(source: &str, offset: usize) -> usize {
    let mut offset = offset.min(source.len());
    while !source.is_char_boundary(offset) {
        offset -= 1;
    }
    offset
}

/// The line's text as displayed (tabs expanded, control characters shown
/// as spaces) and the display column of every byte offset in it.
fn display_line(text: &str) -> (String, Vec<(usize, usize)>) {
    let mut shown = String::with_capacity(text.len());
    let mut columns = Vec::with_capacity(text.len() + 1);
    let mut column = 0;
    for (offset, character) in text.char_indices() {
        columns.push((offset, column));
        if character == '\t' {
            let width = TAB_WIDTH - column % TAB_WIDTH;
            shown.extend(std::iter::repeat_n(' ', width));
            column += width;
        } else if character.is_control() {
            shown.push(' ');
            column += 1;
        } else {
            shown.push(character);
            column += character.width().unwrap_or(0);
        }
    }
    columns.push((text.len(), column));
    (shown, columns)
}

fn column_at(columns: &[(usize, usize)], offset: usize) -> usize {
    match columns.binary_search_by_key(&offset, |&(byte, _)| byte) {
        Ok(index) => columns[index].1,
        Err(index) => columns[index.min(columns.len() - 1)].1,
    }
}

/// Renders one diagnostic as plain text (coloured only if asked).
pub fn render(diagnostic: &Diagnostic, source: &str, options: &RenderOptions) -> String {
    let style = Style { on: options.color };
    let severity_code = match diagnostic.severity {
        Severity::Error => "1;31",
        Severity::Warning => "1;33",
    };
    let mut out = String::new();
    let _ = writeln!(
        out,
        "{}: {}",
        style.paint(severity_code, diagnostic.severity.word()),
        style.paint("1", &diagnostic.message)
    );

    let lines = lines_of(source);
    let start = clamp(source, diagnostic.span.start);
    let end = clamp(source, diagnostic.span.end.max(diagnostic.span.start));
    let first = line_index(&lines, start);
    // A span ending right after a line break ends on the line before.
    let last = if end > start { line_index(&lines, end - 1) } else { first };

    let first_line = &lines[first];
    let character_column = source[first_line.start..start.clamp(first_line.start, first_line.end)].chars().count() + 1;
    let gutter = (last + 1).to_string().len();
    let pad = " ".repeat(gutter);
    let bar = style.paint("1;34", "|");

    let location = match &options.source_name {
        Some(name) => format!("{name}:{}:{}", first + 1, character_column),
        None => format!("line {}, column {}", first + 1, character_column),
    };
    let _ = writeln!(out, "{pad}{} {location}", style.paint("1;34", "-->"));
    let _ = writeln!(out, "{pad} {bar}");

    let label = if diagnostic.label.is_empty() { String::new() } else { format!(" {}", diagnostic.label) };
    let shown_lines: Vec<usize> = if last - first < MAX_SPAN_LINES {
        (first..=last).collect()
    } else {
        let mut shown: Vec<usize> = (first..first + MAX_SPAN_LINES / 2).collect();
        shown.extend(last + 1 - MAX_SPAN_LINES / 2..=last);
        shown
    };

    let mut previous: Option<usize> = None;
    for &index in &shown_lines {
        if let Some(previous) = previous {
            if index > previous + 1 {
                let _ = writeln!(out, "{} {bar} ...", " ".repeat(gutter));
            }
        }
        previous = Some(index);
        let line = &lines[index];
        let text = &source[line.start..line.end];
        let (shown, columns) = display_line(text);
        let number = format!("{:>gutter$}", index + 1);
        let _ = writeln!(out, "{} {bar} {}", style.paint("1;34", &number), shown.trim_end());

        let from = if index == first { start - line.start } else { 0 };
        let to = if index == last { end.max(start) - line.start } else { text.len() };
        let from_column = column_at(&columns, from.min(text.len()));
        let mut to_column = column_at(&columns, to.min(text.len()));
        if to_column <= from_column {
            // An empty span (such as the end of input) still gets one caret.
            to_column = from_column + 1;
        }
        let carets = "^".repeat(to_column - from_column);
        let under = format!("{}{}", " ".repeat(from_column), style.paint(severity_code, &carets));
        let tail = if index == last { style.paint(severity_code, &label) } else { String::new() };
        let _ = writeln!(out, "{pad} {bar} {under}{tail}");
    }

    let mut closing = false;
    if let Some(help) = &diagnostic.help {
        if !closing {
            let _ = writeln!(out, "{pad} {bar}");
            closing = true;
        }
        write_wrapped(&mut out, &pad, &style.paint("1", "help"), help);
    }
    for note in &diagnostic.notes {
        if !closing {
            let _ = writeln!(out, "{pad} {bar}");
            closing = true;
        }
        write_wrapped(&mut out, &pad, &style.paint("1", "note"), note);
    }
    out
}

/// `= help: text`, with continuation lines of a multi-line text aligned.
fn write_wrapped(out: &mut String, pad: &str, head: &str, text: &str) {
    let mut lines = text.lines();
    let first = lines.next().unwrap_or("");
    let _ = writeln!(out, "{pad} = {head}: {first}");
    let indent = " ".repeat(pad.len() + 3 + "help".len() + 2);
    for line in lines {
        let _ = writeln!(out, "{indent}{line}");
    }
}

/// Renders several diagnostics, separated by blank lines, in source order.
pub fn render_all(diagnostics: &[Diagnostic], source: &str, options: &RenderOptions) -> String {
    let mut sorted: Vec<&Diagnostic> = diagnostics.iter().collect();
    sorted.sort_by_key(|diagnostic| (diagnostic.span.start, diagnostic.span.end));
    let mut out = String::new();
    for (index, diagnostic) in sorted.iter().enumerate() {
        if index > 0 {
            out.push('\n');
        }
        out.push_str(&render(diagnostic, source, options));
    }
    out
}

/// The closest candidate to a mistyped name, if one is close enough to be a
/// likely typo: the optimal-string-alignment distance (Damerau-Levenshtein
/// with adjacent transpositions) is at most a third of the name's length
/// (at least 1, at most 3). Case differences alone count as distance 0.
pub fn did_you_mean<'a, I>(name: &str, candidates: I) -> Option<String>
where
    I: IntoIterator<Item = &'a str>,
{
    let name_lower = name.to_lowercase();
    let limit = (name.chars().count() / 3).clamp(1, 3);
    let mut best: Option<(usize, &str)> = None;
    for candidate in candidates {
        if candidate == name {
            continue;
        }
        let distance = strsim::osa_distance(&name_lower, &candidate.to_lowercase());
        let case_only = candidate.eq_ignore_ascii_case(name);
        let distance = if case_only { 0 } else { distance };
        if distance <= limit && best.is_none_or(|(best_distance, best_name)| {
            distance < best_distance || (distance == best_distance && candidate < best_name)
        }) {
            best = Some((distance, candidate));
        }
    }
    best.map(|(_, candidate)| candidate.to_string())
}

/// `a`, `a or b`, `a, b or c` with each item in backticks.
pub fn list_words<S: AsRef<str>>(words: &[S], conjunction: &str) -> String {
    let quoted: Vec<String> = words.iter().map(|word| format!("`{}`", word.as_ref())).collect();
    match quoted.len() {
        0 => String::new(),
        1 => quoted[0].clone(),
        _ => format!("{} {conjunction} {}", quoted[..quoted.len() - 1].join(", "), quoted[quoted.len() - 1]),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn caret_under_a_word() {
        let source = "let a = 1\nlet b = tempreature at 500 hPa\n";
        let start = source.find("tempreature").unwrap();
        let diagnostic = Diagnostic::error("unknown name `tempreature`", Span::new(start, start + 11))
            .with_label("not defined")
            .with_help("did you mean `temperature`?");
        let text = render(&diagnostic, source, &RenderOptions::default());
        let expected = "\
error: unknown name `tempreature`
 --> line 2, column 9
  |
2 | let b = tempreature at 500 hPa
  |         ^^^^^^^^^^^ not defined
  |
  = help: did you mean `temperature`?
";
        assert_eq!(text, expected);
    }

    #[test]
    fn tabs_and_wide_characters_keep_carets_aligned() {
        // A tab expands to the next multiple of four columns; the CJK
        // character is two cells wide (Unicode East Asian Width "W").
        let source = "\tlet 名 = x + y";
        let start = source.find('x').unwrap();
        let diagnostic = Diagnostic::error("m", Span::new(start, start + 5));
        let text = render(&diagnostic, source, &RenderOptions::default());
        let lines: Vec<&str> = text.lines().collect();
        assert_eq!(lines[3], "1 |     let 名 = x + y");
        assert_eq!(lines[4], "  |              ^^^^^");
        // The location counts characters, not bytes: the tab, "let ", the
        // character, " = " put `x` at character 10.
        assert_eq!(lines[1], " --> line 1, column 10");
    }

    #[test]
    fn span_over_several_lines_marks_each_line() {
        let source = "let a = f(1,\n    2,\n    3)\n";
        let start = source.find('f').unwrap();
        let end = source.find(')').unwrap() + 1;
        let text = render(&Diagnostic::error("m", Span::new(start, end)).with_label("here"), source, &RenderOptions::default());
        let expected = "\
error: m
 --> line 1, column 9
  |
1 | let a = f(1,
  |         ^^^^
2 |     2,
  | ^^^^^^
3 |     3)
  | ^^^^^^ here
";
        assert_eq!(text, expected);
    }

    #[test]
    fn empty_span_at_end_of_input_gets_one_caret() {
        let source = "let a = 1 +";
        let text = render(&Diagnostic::error("m", Span::new(11, 11)), source, &RenderOptions::default());
        assert!(text.contains("1 | let a = 1 +\n  |            ^\n"), "{text}");
    }

    #[test]
    fn no_colour_unless_asked() {
        let diagnostic = Diagnostic::error("m", Span::new(0, 1));
        assert!(!render(&diagnostic, "x", &RenderOptions::default()).contains('\x1b'));
        let coloured = RenderOptions { color: true, ..Default::default() };
        assert!(render(&diagnostic, "x", &coloured).contains("\x1b[1;31m"));
    }

    #[test]
    fn spans_past_the_end_or_inside_a_character_do_not_panic() {
        let source = "é\r\nb";
        for start in 0..8 {
            for end in 0..8 {
                let _ = render(&Diagnostic::error("m", Span::new(start, end)), source, &RenderOptions::default());
            }
        }
        let _ = render(&Diagnostic::error("m", Span::new(0, 0)), "", &RenderOptions::default());
    }

    #[test]
    fn suggestions() {
        let names = ["temperature", "geopotential_height", "wind", "speed"];
        assert_eq!(did_you_mean("tempreature", names).as_deref(), Some("temperature"));
        assert_eq!(did_you_mean("Temperature", names).as_deref(), Some("temperature"));
        assert_eq!(did_you_mean("geopotential_hieght", names).as_deref(), Some("geopotential_height"));
        assert_eq!(did_you_mean("pressure", names), None);
        assert_eq!(did_you_mean("x", names), None);
    }
}
