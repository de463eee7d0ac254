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

/// Display cells of source text shown on one line at most: with the
/// gutter, a rendered line stays within about 120 characters.
const MAX_SHOWN_CELLS: usize = 100;
/// Cells of context kept before a span that is itself too long to show.
const CONTEXT_BEFORE_LONG_SPAN: usize = 12;
const ELLIPSIS: char = '\u{2026}';

/// A displayed line cut to fit: its text (with `…` on each cut side) and
/// the span's columns within that text.
#[derive(Debug, PartialEq)]
struct Window {
    text: String,
    from_column: usize,
    to_column: usize,
}

/// Cuts a displayed line (tabs already expanded) to at most `limit` display
/// cells around the columns `from..to` of a span, marking each cut side with
/// `…`, and moves the span's columns into the cut text. Whole characters
/// only: a wide character that would straddle an edge is left out. A line
/// that fits is returned as it is.
fn window_around(shown: &str, from: usize, to: usize, limit: usize) -> Window {
    let cells: Vec<(char, usize, usize)> = {
        let mut column = 0;
        shown
            .chars()
            .map(|c| {
                let width = c.width().unwrap_or(0);
                let cell = (c, column, width);
                column += width;
                cell
            })
            .collect()
    };
    let total = cells.last().map_or(0, |&(_, column, width)| column + width);
    if total <= limit {
        return Window { text: shown.to_string(), from_column: from, to_column: to };
    }
    // Room for the text between the two ellipses.
    let room = limit.saturating_sub(2).max(1);
    let span = to.saturating_sub(from);
    let wanted_start = if span + 2 * CONTEXT_BEFORE_LONG_SPAN <= room {
        // The span fits with context: centre it.
        from.saturating_sub((room - span) / 2)
    } else {
        from.saturating_sub(CONTEXT_BEFORE_LONG_SPAN)
    };
    let start = wanted_start.min(total.saturating_sub(room));
    let end = start + room;
    let mut text = String::new();
    let (mut first_column, mut last_column) = (None, start);
    for &(c, column, width) in &cells {
        if column >= start && column + width <= end {
            if first_column.is_none() {
                first_column = Some(column);
            }
            text.push(c);
            last_column = column + width;
        }
    }
    let first_column = first_column.unwrap_or(start);
    let cut_before = first_column > 0;
    let cut_after = last_column < total;
    let lead = usize::from(cut_before);
    let mut window = String::with_capacity(text.len() + 6);
    if cut_before {
        window.push(ELLIPSIS);
    }
    window.push_str(&text);
    if cut_after {
        window.push(ELLIPSIS);
    }
    // The span's columns, clipped to the shown text: an ellipsis stands for
    // the part of the span that is cut off.
    let clip = |column: usize| column.clamp(first_column, last_column) - first_column + lead;
    let from_column = if from < first_column { 0 } else { clip(from) };
    let to_column = if to > last_column { clip(last_column) + usize::from(cut_after) } else { clip(to) };
    let to_column = to_column.max(from_column + 1);
    Window { text: window, from_column, to_column }
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
        let from = if index == first { start - line.start } else { 0 };
        let to = if index == last { end.max(start) - line.start } else { text.len() };
        let from_column = column_at(&columns, from.min(text.len()));
        let mut to_column = column_at(&columns, to.min(text.len()));
        if to_column <= from_column {
            // An empty span (such as the end of input) still gets one caret.
            to_column = from_column + 1;
        }
        // A long line is shown as a window around the span.
        let window = window_around(&shown, from_column, to_column, MAX_SHOWN_CELLS);
        let (from_column, to_column) = (window.from_column, window.to_column);
        let number = format!("{:>gutter$}", index + 1);
        let _ = writeln!(out, "{} {bar} {}", style.paint("1;34", &number), window.text.trim_end());

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

    /// Every rendered line of a diagnostic, with the width of each in
    /// display cells.
    fn widths(text: &str) -> Vec<usize> {
        text.lines().map(|l| l.chars().map(|c| c.width().unwrap_or(0)).sum()).collect()
    }

    /// The text under the carets of a rendered diagnostic: the characters
    /// of the source line above it at the carets' columns.
    fn under_carets(text: &str) -> String {
        let lines: Vec<&str> = text.lines().collect();
        let caret_line = lines.iter().position(|l| l.contains('^')).expect("a caret line");
        let source_cells: Vec<char> = lines[caret_line - 1].chars().flat_map(|c| std::iter::repeat_n(c, c.width().unwrap_or(0))).collect();
        lines[caret_line].chars().enumerate().filter(|(_, c)| *c == '^').filter_map(|(i, _)| source_cells.get(i)).collect::<String>()
    }

    #[test]
    fn a_long_line_is_shown_as_a_window_around_the_span() {
        // A 10,000-term sum with a mistyped name near the end: the line is
        // about 40,000 characters; the rendered error stays within 120.
        let mut source = String::from("let total = ");
        source.push_str(&(0..10_000).map(|i| format!("{}", i % 10)).collect::<Vec<_>>().join(" + "));
        let start = source.len() - 200;
        source.insert_str(start, "tempreature + ");
        let diagnostic = Diagnostic::error("unknown name `tempreature`", Span::new(start, start + 11)).with_label("not defined");
        let text = render(&diagnostic, &source, &RenderOptions::default());
        assert!(widths(&text).iter().all(|&w| w <= 120), "{text}");
        let lines: Vec<&str> = text.lines().collect();
        assert_eq!(lines[1], format!(" --> line 1, column {}", start + 1));
        assert!(lines[3].starts_with("1 | \u{2026}") && lines[3].ends_with('\u{2026}'), "cut on both sides: {}", lines[3]);
        assert_eq!(under_carets(&text), "tempreature");
        assert!(lines[4].ends_with("^^^^^^^^^^^ not defined"), "{text}");
    }

    #[test]
    fn spans_at_the_ends_of_a_long_line_are_cut_on_one_side_only() {
        let source = format!("badname{}", " + 1".repeat(5000));
        let text = render(&Diagnostic::error("m", Span::new(0, 7)), &source, &RenderOptions::default());
        let lines: Vec<&str> = text.lines().collect();
        assert!(lines[3].starts_with("1 | badname + 1") && lines[3].ends_with('\u{2026}'), "{}", lines[3]);
        assert_eq!(under_carets(&text), "badname");
        let source = format!("{} + badname", "1 + ".repeat(5000));
        let start = source.len() - 7;
        let text = render(&Diagnostic::error("m", Span::new(start, source.len())), &source, &RenderOptions::default());
        let lines: Vec<&str> = text.lines().collect();
        assert!(lines[3].starts_with("1 | \u{2026}") && lines[3].ends_with("+ badname"), "{}", lines[3]);
        assert_eq!(under_carets(&text), "badname");
        assert!(widths(&text).iter().all(|&w| w <= 120));
    }

    #[test]
    fn a_span_longer_than_the_window_keeps_its_start_and_marks_the_cut() {
        // Deep nesting: the whole 20,000-character expression is the span.
        let source = format!("let a = {}1{}", "(".repeat(10_000), ")".repeat(9_990));
        let text = render(&Diagnostic::error("m", Span::new(8, source.len())).with_label("unclosed"), &source, &RenderOptions::default());
        assert!(widths(&text).iter().all(|&w| w <= 120), "{text}");
        let lines: Vec<&str> = text.lines().collect();
        assert!(lines[3].starts_with("1 | let a = ((((") && lines[3].ends_with('\u{2026}'), "{}", lines[3]);
        // The carets start under the first parenthesis and run to the cut,
        // over the ellipsis that stands for the rest of the span.
        let caret_start = lines[4].find('^').unwrap();
        assert_eq!(caret_start, "1 | let a = ".len());
        assert_eq!(lines[4].matches('^').count(), lines[3].chars().count() - "1 | let a = ".len());
    }

    #[test]
    fn windows_keep_carets_aligned_over_wide_characters_and_tabs() {
        // CJK characters are two cells wide (Unicode East Asian Width "W");
        // the window counts cells, not bytes or characters.
        let source = format!("\tlet {} = x_wrong + 1", "名".repeat(300));
        let start = source.find("x_wrong").unwrap();
        let text = render(&Diagnostic::error("m", Span::new(start, start + 7)), &source, &RenderOptions::default());
        assert!(widths(&text).iter().all(|&w| w <= 120), "{text}");
        assert_eq!(under_carets(&text), "x_wrong");
        // Column counts characters: the tab, "let ", 300 characters, " = ".
        assert!(text.contains(&format!("column {}", 1 + 4 + 300 + 3 + 1)), "{text}");
    }

    #[test]
    fn a_window_never_splits_a_wide_character() {
        let shown = "名".repeat(200);
        for from in [0, 1, 57, 201, 398] {
            let w = window_around(&shown, from, from + 2, 100);
            let cells: usize = w.text.chars().map(|c| c.width().unwrap_or(0)).sum();
            assert!(cells <= 100, "{from}: {cells}");
            assert!(w.text.chars().filter(|&c| c != ELLIPSIS).all(|c| c == '名'));
            assert!(w.to_column > w.from_column && w.to_column <= cells);
        }
        // A line that fits is left alone.
        assert_eq!(window_around("short", 1, 3, 100), Window { text: "short".into(), from_column: 1, to_column: 3 });
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
