//! Text to syntax tree.
//!
//! Three steps: a quick scan of the text (brackets, strings, how deeply it
//! nests) that refuses input nested too deeply before any recursive work
//! starts; the pest grammar (`grammar/baroc.pest`); and a builder that turns
//! pest's pairs into [`syntax`](super::syntax) nodes, ordering operators with
//! a Pratt parser. Every failure is a [`Diagnostic`] with a span.

use std::num::NonZeroUsize;
use std::sync::{LazyLock, Once};

use pest::error::{ErrorVariant, InputLocation};
use pest::iterators::{Pair, Pairs};
use pest::pratt_parser::{Assoc, Op, PrattParser};
use pest::Parser as _;

use super::diagnostic::Diagnostic;
use super::syntax::*;

mod grammar {
    #[derive(pest_derive::Parser)]
    #[grammar = "../grammar/baroc.pest"]
    pub struct BarocGrammar;
}

use grammar::{BarocGrammar, Rule};

/// Longest source accepted, in bytes. A recipe is a few kilobytes.
pub const MAX_SOURCE_BYTES: usize = 256 << 10;
/// Deepest nesting accepted: brackets, plus `if`, prefix `-`/`not` and `^`
/// chains that the parser handles by recursion (counted by a quick scan).
pub const MAX_NESTING: usize = 100;
/// Deepest syntax tree accepted (long operator chains build deep trees).
pub const MAX_TREE_DEPTH: u32 = 200;
/// Budget of grammar rule calls for one parse (pest counts every rule,
/// sequence and repetition entry). Ordinary text costs about 50 calls per
/// byte, so the longest accepted source fits twice over; the budget only
/// stops input built to make the parser backtrack.
pub const CALL_LIMIT: usize = 25_000_000;

static SET_CALL_LIMIT: Once = Once::new();

static PRATT: LazyLock<PrattParser<Rule>> = LazyLock::new(|| {
    // Lowest precedence first, as in the language design.
    PrattParser::new()
        .op(Op::infix(Rule::or_keyword, Assoc::Left))
        .op(Op::infix(Rule::and_keyword, Assoc::Left))
        .op(Op::prefix(Rule::not_keyword))
        .op(Op::infix(Rule::less, Assoc::Left)
            | Op::infix(Rule::less_equal, Assoc::Left)
            | Op::infix(Rule::greater, Assoc::Left)
            | Op::infix(Rule::greater_equal, Assoc::Left)
            | Op::infix(Rule::equal, Assoc::Left)
            | Op::infix(Rule::not_equal, Assoc::Left))
        .op(Op::infix(Rule::to_keyword, Assoc::Left))
        .op(Op::infix(Rule::add, Assoc::Left) | Op::infix(Rule::subtract, Assoc::Left))
        .op(Op::infix(Rule::multiply, Assoc::Left) | Op::infix(Rule::divide, Assoc::Left))
        .op(Op::prefix(Rule::negate))
        .op(Op::infix(Rule::power, Assoc::Right))
        .op(Op::postfix(Rule::conversion))
        .op(Op::postfix(Rule::selection))
        .op(Op::postfix(Rule::options))
        .op(Op::postfix(Rule::call_arguments) | Op::postfix(Rule::member_access))
});

/// Whether a text is a finished program, as a notebook or prompt asks
/// before running what was typed.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Completeness {
    /// Parses (it may still fail the checker).
    Complete,
    /// Could become valid with more lines: an open bracket, brace or string,
    /// a trailing operator, comma or word such as `to`, `at`, `with`.
    /// `indent` is a suggested indentation for the next line.
    Incomplete { indent: String },
    /// Wrong whatever follows.
    Invalid,
}

/// Parses a whole program.
pub fn parse(source: &str) -> Result<Program, Vec<Diagnostic>> {
    parse_with_scan(source, &scan(source)).map_err(|failure| failure.diagnostics)
}

/// Why a parse failed, with what `is_complete` needs to know.
struct Failure {
    diagnostics: Vec<Diagnostic>,
    /// Where the grammar stopped, for a syntax error (not for limits or
    /// errors found while building the tree).
    syntax_position: Option<usize>,
}

fn parse_with_scan(source: &str, scanned: &Scan) -> Result<Program, Failure> {
    let fail = |diagnostic: Diagnostic| Failure { diagnostics: vec![diagnostic], syntax_position: None };
    if source.len() > MAX_SOURCE_BYTES {
        return Err(fail(
            Diagnostic::error(
                format!("this text is too long to read ({} bytes; the limit is {MAX_SOURCE_BYTES})", source.len()),
                Span::new(0, 0),
            )
            .with_help("split it into several recipes or cells"),
        ));
    }
    if let Some(diagnostic) = scanned.nesting_error.clone() {
        return Err(fail(diagnostic));
    }
    SET_CALL_LIMIT.call_once(|| pest::set_call_limit(NonZeroUsize::new(CALL_LIMIT)));
    let mut pairs = match BarocGrammar::parse(Rule::program, source) {
        Ok(pairs) => pairs,
        Err(error) => {
            let position = match error.location {
                InputLocation::Pos(position) => position,
                InputLocation::Span((start, _)) => start,
            };
            // A limit of the parser (calls, stack) is not a place in the text.
            let limit_reached = matches!(&error.variant, ErrorVariant::CustomError { .. });
            return Err(Failure {
                diagnostics: vec![syntax_error(error, source, scanned)],
                syntax_position: (!limit_reached).then_some(position),
            });
        }
    };
    let program = pairs.next().expect("the program rule always yields one pair");
    let mut builder = Builder { errors: Vec::new() };
    let statements = builder.statements(program.into_inner());
    if builder.errors.is_empty() {
        Ok(Program { statements, span: Span::new(0, source.len()) })
    } else {
        Err(Failure { diagnostics: builder.errors, syntax_position: None })
    }
}

/// Parses one expression (for tests and tools that evaluate a fragment).
pub fn parse_expression(source: &str) -> Result<Expr, Vec<Diagnostic>> {
    let program = parse(source)?;
    match program.statements.as_slice() {
        [Statement { kind: StatementKind::Expression(expr), .. }] => Ok(expr.clone()),
        _ => Err(vec![Diagnostic::error("expected one expression", program.span)]),
    }
}

/// Tells whether `source` is a finished program (see [`Completeness`]).
pub fn is_complete(source: &str) -> Completeness {
    if source.len() > MAX_SOURCE_BYTES {
        return Completeness::Invalid;
    }
    let scanned = scan(source);
    if scanned.stray_closer.is_some() || scanned.nesting_error.is_some() {
        return Completeness::Invalid;
    }
    if scanned.open_string.is_some() {
        // Indentation would become part of the string.
        return Completeness::Incomplete { indent: String::new() };
    }
    let indent = suggested_indent(source, &scanned);
    if !scanned.open_brackets.is_empty() {
        return Completeness::Incomplete { indent };
    }
    match parse_with_scan(source, &scanned) {
        Ok(_) => Completeness::Complete,
        // Stopped at the end of the text: more lines could finish it.
        Err(Failure { syntax_position: Some(position), .. }) if only_blank_after(source, position) => {
            Completeness::Incomplete { indent }
        }
        Err(_) => Completeness::Invalid,
    }
}

fn suggested_indent(source: &str, scanned: &Scan) -> String {
    if !scanned.open_brackets.is_empty() {
        return "    ".repeat(scanned.open_brackets.len());
    }
    // A continued line: one step deeper than the line the statement began on.
    let start = scanned.statement_start.min(source.len());
    let line_start = source[..start].rfind(['\n', '\r']).map_or(0, |index| index + 1);
    let base: String = source[line_start..].chars().take_while(|c| *c == ' ' || *c == '\t').collect();
    format!("{base}    ")
}

/// True when only spaces, line breaks and comments follow `position`.
fn only_blank_after(source: &str, position: usize) -> bool {
    let mut rest = source.get(position..).unwrap_or("");
    loop {
        let trimmed = rest.trim_start();
        if let Some(comment) = trimmed.strip_prefix('#') {
            rest = comment.find(['\n', '\r']).map_or("", |index| &comment[index..]);
        } else {
            return trimmed.is_empty();
        }
    }
}

// ------------------------------------------------------------------- scan

/// What a quick pass over the text finds, before the grammar runs.
#[derive(Debug, Default)]
struct Scan {
    /// Unclosed `(` and `{` with their offsets.
    open_brackets: Vec<(char, usize)>,
    /// A `)` or `}` that closes nothing or the wrong bracket.
    stray_closer: Option<usize>,
    /// Offset of an unclosed string's opening quote.
    open_string: Option<usize>,
    nesting_error: Option<Diagnostic>,
    /// Start of the last statement (for the indentation of a continued line).
    statement_start: usize,
}

#[derive(Debug, Clone, Copy, PartialEq)]
enum Previous {
    /// Nothing yet, or a token after which an expression cannot end.
    Continues,
    /// A token an expression can end with (a name, number, string, `)`, `}`).
    Ends,
}

const CONTINUING_WORDS: &[&str] = &[
    "let", "function", "open", "as", "at", "over", "in", "during", "to", "with", "if", "then", "else",
    "and", "or", "not", "recipe", "about", "parameter", "output", "setting",
];

/// Finds brackets, strings and the nesting depth. The depth is an upper
/// bound of the recursion the grammar and the Pratt parser will need: one
/// level per open bracket, plus one for every `if`, prefix `-` or `not` and
/// `^` inside the same bracket (their operands are parsed recursively).
fn scan(source: &str) -> Scan {
    let mut scan = Scan::default();
    // Recursive tokens counted per open bracket; index 0 is the top level.
    let mut frames: Vec<usize> = vec![0];
    // frames.len() - 1 + the sum of frames, kept up to date as they change.
    let mut depth = 0usize;
    let mut previous = Previous::Continues;
    let bytes = source.as_bytes();
    let mut index = 0;
    let mut nesting_reported = false;
    while index < bytes.len() {
        let byte = bytes[index];
        let token_start = index;
        let mut recursive = false;
        match byte {
            b' ' | b'\t' => {
                index += 1;
                continue;
            }
            b'\n' | b'\r' => {
                index += 1;
                if frames.len() == 1 && previous == Previous::Ends {
                    depth -= frames[0];
                    frames[0] = 0;
                    previous = Previous::Continues;
                    scan.statement_start = index;
                }
                continue;
            }
            b';' if frames.len() == 1 => {
                depth -= frames[0];
                frames[0] = 0;
                previous = Previous::Continues;
                index += 1;
                scan.statement_start = index;
                continue;
            }
            b'#' => {
                while index < bytes.len() && bytes[index] != b'\n' && bytes[index] != b'\r' {
                    index += 1;
                }
                continue;
            }
            b'"' => {
                index += 1;
                let mut closed = false;
                while index < bytes.len() {
                    match bytes[index] {
                        b'\\' => index += 2,
                        b'"' => {
                            index += 1;
                            closed = true;
                            break;
                        }
                        _ => index += 1,
                    }
                }
                if !closed {
                    scan.open_string = Some(token_start);
                    index = bytes.len();
                }
                previous = Previous::Ends;
            }
            b'(' | b'{' => {
                scan.open_brackets.push((byte as char, index));
                frames.push(0);
                depth += 1;
                index += 1;
                previous = Previous::Continues;
            }
            b')' | b'}' => {
                let expected = if byte == b')' { '(' } else { '{' };
                match scan.open_brackets.last() {
                    Some(&(open, _)) if open == expected => {
                        scan.open_brackets.pop();
                        if let Some(count) = frames.pop() {
                            depth -= count + 1;
                        }
                    }
                    _ => {
                        if scan.stray_closer.is_none() {
                            scan.stray_closer = Some(index);
                        }
                    }
                }
                index += 1;
                previous = Previous::Ends;
            }
            b'-' => {
                recursive = previous == Previous::Continues;
                index += 1;
                previous = Previous::Continues;
            }
            b'^' => {
                recursive = true;
                index += 1;
                previous = Previous::Continues;
            }
            _ if byte.is_ascii_alphabetic() || byte == b'_' => {
                while index < bytes.len() && (bytes[index].is_ascii_alphanumeric() || bytes[index] == b'_') {
                    index += 1;
                }
                let word = &source[token_start..index];
                recursive = word == "if" || word == "not";
                previous = if CONTINUING_WORDS.contains(&word) { Previous::Continues } else { Previous::Ends };
            }
            _ if byte.is_ascii_digit() => {
                while index < bytes.len() && (bytes[index].is_ascii_alphanumeric() || bytes[index] == b'.') {
                    index += 1;
                }
                previous = Previous::Ends;
            }
            _ => {
                // Operators and anything else: advance by one character.
                index += source[index..].chars().next().map_or(1, char::len_utf8);
                previous = Previous::Continues;
            }
        }
        if recursive {
            if let Some(last) = frames.last_mut() {
                *last += 1;
                depth += 1;
            }
        }
        if depth > MAX_NESTING && !nesting_reported {
            nesting_reported = true;
            let end = index.max(token_start + 1).min(source.len());
            scan.nesting_error = Some(
                Diagnostic::error(
                    format!("this is nested too deeply (more than {MAX_NESTING} levels)"),
                    Span::new(token_start, end),
                )
                .with_label("too deep here")
                .with_help("give inner parts names with `let` and use the names"),
            );
        }
    }
    scan
}

// ----------------------------------------------------------------- errors

/// Words for the rules that appear in "expected ..." messages.
fn describe_rule(rule: &Rule) -> String {
    use Rule::*;
    let text = match rule {
        EOI => "end of input",
        separator => "a new line",
        statement => "a statement",
        expression | option_value => "an expression",
        operand | negate | not_keyword => "a value",
        identifier => "a name",
        equals => "`=`",
        comma => "`,`",
        dot | member_access => "`.`",
        open_paren | call_arguments => "`(`",
        close_paren => "`)`",
        open_brace | block => "`{`",
        close_brace => "`}`",
        string | string_content => "a string in double quotes",
        unit => "a unit such as K, hPa or m/s",
        number | number_literal => "a number",
        hemisphere => "`north`, `south`, `east` or `west`",
        at_selector => "a level, point or time after `at` (such as 500 hPa)",
        over_selector => "a layer after `over` (such as 1000 hPa to 500 hPa)",
        in_selector => "a region after `in` (such as box(40 north to 60 north, 30 west to 0 east))",
        during_selector => "a time range after `during` (such as \"2026-10-14 00:00\" to \"2026-10-15 00:00\")",
        option => "an option name and value (such as route thickness)",
        options | with_keyword => "`with`",
        selection => "`at`, `over`, `in` or `during`",
        conversion | as_keyword => "`as`",
        parameter_list => "a list of parameter names in parentheses",
        or_keyword | and_keyword | less | less_equal | greater | greater_equal | equal | not_equal
        | to_keyword | add | subtract | multiply | divide | power => "an operator",
        then_keyword => "`then`",
        else_keyword => "`else`",
        if_keyword | if_expression => "`if`",
        let_keyword => "`let`",
        function_keyword => "`function`",
        open_keyword => "`open`",
        at_keyword => "`at`",
        over_keyword => "`over`",
        in_keyword => "`in`",
        during_keyword => "`during`",
        recipe_keyword => "`recipe`",
        about_keyword => "`about`",
        parameter_keyword => "`parameter`",
        output_keyword => "`output`",
        setting_keyword | setting_statement => "`setting`",
        true_keyword | false_keyword | boolean => "`true` or `false`",
        north_keyword | south_keyword | east_keyword | west_keyword => "`north`, `south`, `east` or `west`",
        parenthesized => "`(`",
        _ => "something else",
    };
    text.to_string()
}

fn is_operator_rule(rule: Rule) -> bool {
    use Rule::*;
    matches!(
        rule,
        or_keyword | and_keyword | less | less_equal | greater | greater_equal | equal | not_equal | to_keyword
            | add | subtract | multiply | divide | power
    )
}

/// Describes what stands at `position`, and its extent.
fn found_at(source: &str, position: usize) -> (String, Span) {
    let rest = source.get(position..).unwrap_or("");
    if only_blank_after(source, position) {
        return ("end of input".to_string(), Span::new(source.len(), source.len()));
    }
    let Some(first) = rest.chars().next() else {
        return ("end of input".to_string(), Span::new(position, position));
    };
    if first == '\n' || first == '\r' {
        return ("the end of the line".to_string(), Span::new(position, position));
    }
    if first.is_ascii_alphanumeric() || first == '_' {
        let length = rest.find(|c: char| !(c.is_ascii_alphanumeric() || c == '_' || c == '.')).unwrap_or(rest.len());
        let word = &rest[..length];
        return (format!("`{word}`"), Span::new(position, position + length));
    }
    if first == '"' {
        return ("a string".to_string(), Span::new(position, position + 1));
    }
    for symbol in ["<=", ">=", "==", "!="] {
        if rest.starts_with(symbol) {
            return (format!("`{symbol}`"), Span::new(position, position + 2));
        }
    }
    (format!("`{first}`"), Span::new(position, position + first.len_utf8()))
}

const KEYWORDS: &[&str] = &[
    "let", "function", "open", "as", "at", "over", "in", "during", "to", "with", "if", "then", "else",
    "and", "or", "not", "recipe", "about", "parameter", "output", "setting", "true", "false", "north", "south",
    "east", "west",
];

/// Is `word` one of the language's reserved words?
pub fn is_keyword(word: &str) -> bool {
    KEYWORDS.contains(&word)
}

/// The reserved words, which cannot name anything.
pub fn keywords() -> &'static [&'static str] {
    KEYWORDS
}

fn syntax_error(error: pest::error::Error<Rule>, source: &str, scanned: &Scan) -> Diagnostic {
    let position = match error.location {
        InputLocation::Pos(position) => position,
        InputLocation::Span((start, _)) => start,
    };
    let (found, found_span) = found_at(source, position);
    let positives = match &error.variant {
        ErrorVariant::ParsingError { positives, .. } => positives.clone(),
        ErrorVariant::CustomError { message } => {
            let stack = message.contains("stack");
            return Diagnostic::error(
                if stack { "this is nested too deeply to read" } else { "this text is too complex to read" },
                found_span,
            )
            .with_label("reading stopped here")
            .with_help("give inner parts names with `let` and use the names");
        }
    };

    // Where an operator may follow, postfix words are operators too: say
    // "an operator" once rather than listing `(`, `.`, `with`, `at`, `as`.
    let has_operator = positives.iter().any(|rule| is_operator_rule(*rule));
    let mut kept: Vec<Rule> = Vec::new();
    let mut seen: Vec<String> = Vec::new();
    for rule in positives {
        use Rule::*;
        let postfix = matches!(
            rule,
            call_arguments | open_paren | member_access | dot | options | with_keyword | selection | conversion | as_keyword
        );
        if has_operator && postfix {
            continue;
        }
        let description = describe_rule(&rule);
        if !seen.contains(&description) {
            seen.push(description);
            kept.push(rule);
        }
    }
    // Operators before the ends of lines and input read best.
    kept.sort_by_key(|rule| match rule {
        Rule::EOI => 3,
        Rule::separator => 2,
        rule if is_operator_rule(*rule) => 1,
        _ => 0,
    });
    let expected = if kept.is_empty() {
        "something else".to_string()
    } else {
        let renamed = pest::error::Error::new_from_pos(
            ErrorVariant::<Rule>::ParsingError { positives: kept.clone(), negatives: vec![] },
            pest::Position::new(source, position.min(source.len())).unwrap_or_else(|| pest::Position::from_start(source)),
        )
        .renamed_rules(describe_rule);
        match renamed.variant {
            ErrorVariant::CustomError { message } => message.trim_start_matches("expected ").to_string(),
            ErrorVariant::ParsingError { .. } => seen.join(", "),
        }
    };

    let mut diagnostic =
        Diagnostic::error(format!("unexpected {found}"), found_span).with_label(format!("expected {expected}"));

    let found_word = source.get(found_span.start..found_span.end).unwrap_or("");
    if kept.contains(&Rule::identifier) && is_keyword(found_word) {
        diagnostic = diagnostic.with_help(format!("`{found_word}` is a word of the language and cannot be used as a name"));
    } else if found_word.starts_with('=') && !found_word.starts_with("==") && has_operator {
        diagnostic = diagnostic.with_help("to compare two values write `==`; `=` only gives a name a value");
    } else if found_word == ":" {
        diagnostic = diagnostic.with_help("a layer or range is written with `to`, such as 1000 hPa to 500 hPa");
    } else if found_word == "'" {
        diagnostic = diagnostic.with_help("strings are written in double quotes, such as \"case.nc\"");
    } else if found_word == "[" || found_word == "]" {
        diagnostic = diagnostic.with_help("there are no square brackets; group with parentheses ( )");
    } else if found_word == "@" {
        diagnostic = diagnostic.with_help("a level is selected with `at`, such as temperature at 500 hPa");
    }
    // Name the bracket still open where reading stopped, if the text never
    // closes it: the likely cause.
    if !scanned.open_brackets.is_empty() {
        let mut cut = position.min(source.len());
        while !source.is_char_boundary(cut) {
            cut -= 1;
        }
        if let Some(&(bracket, offset)) = scan(&source[..cut]).open_brackets.last() {
            if scanned.open_brackets.iter().any(|&(_, open)| open == offset) {
                let (line, column) = line_and_column(source, offset);
                diagnostic = diagnostic.with_note(format!("the `{bracket}` at line {line}, column {column} is not closed"));
            }
        }
    }
    diagnostic
}

/// 1-based line and character column of a byte offset.
pub fn line_and_column(source: &str, offset: usize) -> (usize, usize) {
    let mut offset = offset.min(source.len());
    while !source.is_char_boundary(offset) {
        offset -= 1;
    }
    let before = &source[..offset];
    let line = before.matches('\n').count() + 1;
    let line_start = before.rfind('\n').map_or(0, |index| index + 1);
    (line, before[line_start..].chars().count() + 1)
}

// ---------------------------------------------------------------- builder

fn span_of(pair: &Pair<'_, Rule>) -> Span {
    let span = pair.as_span();
    Span::new(span.start(), span.end())
}

/// An expression while it is being built: whether it was written in
/// parentheses (so `(a < b) < c` is allowed while `a < b < c` is not) and
/// how deep its tree is.
struct Node {
    expr: Expr,
    grouped: bool,
    depth: u32,
}

type Built = Result<Node, Diagnostic>;

struct Builder {
    errors: Vec<Diagnostic>,
}

fn too_deep(span: Span) -> Diagnostic {
    Diagnostic::error(format!("this expression is nested too deeply (more than {MAX_TREE_DEPTH} levels)"), span)
        .with_label("too deep")
        .with_help("give inner parts names with `let` and use the names")
}

fn node(expr: Expr, depth: u32) -> Built {
    if depth > MAX_TREE_DEPTH {
        return Err(too_deep(expr.span));
    }
    Ok(Node { expr, grouped: false, depth })
}

impl Builder {
    /// Statements of a program or block; errors are collected per statement.
    fn statements(&mut self, pairs: Pairs<'_, Rule>) -> Vec<Statement> {
        let mut statements = Vec::new();
        for pair in pairs {
            if pair.as_rule() == Rule::statement {
                match self.statement(pair) {
                    Ok((statement, _)) => statements.push(statement),
                    Err(error) => self.errors.push(error),
                }
            }
        }
        statements
    }

    fn block_statements(&mut self, pair: Pair<'_, Rule>) -> Result<(Vec<Statement>, u32), Diagnostic> {
        let mut statements = Vec::new();
        let mut depth = 0;
        for inner in pair.into_inner() {
            if inner.as_rule() == Rule::statement {
                let (statement, statement_depth) = self.statement(inner)?;
                depth = depth.max(statement_depth);
                statements.push(statement);
            }
        }
        Ok((statements, depth))
    }

    fn statement(&mut self, pair: Pair<'_, Rule>) -> Result<(Statement, u32), Diagnostic> {
        let span = span_of(&pair);
        let inner = pair.into_inner().next().expect("a statement has one alternative");
        let rule = inner.as_rule();
        let mut parts = inner.into_inner().filter(|part| {
            !matches!(
                part.as_rule(),
                Rule::equals | Rule::comma | Rule::open_paren | Rule::close_paren
            )
        });
        let mut depth = 0;
        let kind = match rule {
            Rule::let_statement => {
                parts.next(); // `let`
                let name = identifier(parts.next().expect("let has a name"));
                let value = self.expression(parts.next().expect("let has a value"))?;
                depth = value.depth;
                StatementKind::Let { name, value: value.expr }
            }
            Rule::function_statement => {
                parts.next(); // `function`
                let name = identifier(parts.next().expect("function has a name"));
                let parameters = parts
                    .next()
                    .expect("function has parameters")
                    .into_inner()
                    .filter(|part| part.as_rule() == Rule::identifier)
                    .map(identifier)
                    .collect();
                let body = parts.next().expect("function has a body");
                let body = if body.as_rule() == Rule::block {
                    let body_span = span_of(&body);
                    let (statements, block_depth) = self.block_statements(body)?;
                    depth = block_depth + 1;
                    Expr::new(ExprKind::Block { statements }, body_span)
                } else {
                    let value = self.expression(body)?;
                    depth = value.depth;
                    value.expr
                };
                StatementKind::Function { name, parameters, body }
            }
            Rule::open_statement => {
                let mut paths = Vec::new();
                let mut alias = None;
                for part in parts {
                    match part.as_rule() {
                        Rule::string => paths.push(self.string_literal(part)?),
                        Rule::identifier => alias = Some(identifier(part)),
                        _ => {}
                    }
                }
                StatementKind::Open { paths, alias }
            }
            Rule::recipe_statement => {
                parts.next();
                StatementKind::Recipe { title: self.string_literal(parts.next().expect("recipe has a title"))? }
            }
            Rule::about_statement => {
                parts.next();
                StatementKind::About { text: self.string_literal(parts.next().expect("about has a text"))? }
            }
            Rule::parameter_statement | Rule::output_statement => {
                parts.next();
                let name = identifier(parts.next().expect("a name"));
                let value = self.expression(parts.next().expect("a value"))?;
                depth = value.depth;
                let documentation = match parts.next() {
                    Some(part) => Some(self.string_literal(part)?),
                    None => None,
                };
                if rule == Rule::parameter_statement {
                    StatementKind::Parameter { name, default: value.expr, documentation }
                } else {
                    StatementKind::Output { name, value: value.expr, documentation }
                }
            }
            Rule::setting_statement => {
                parts.next(); // `setting`
                let mut options = Vec::new();
                for option in parts.filter(|part| part.as_rule() == Rule::option) {
                    let mut pieces = option.into_inner();
                    let name = identifier(pieces.next().expect("a setting has a name"));
                    let value = self.term(pieces.next().expect("a setting has a value").into_inner())?;
                    depth = depth.max(value.depth);
                    options.push(CallOption { name, value: value.expr });
                }
                StatementKind::Setting { options }
            }
            Rule::expression_statement => {
                let value = self.expression(parts.next().expect("an expression"))?;
                depth = value.depth;
                StatementKind::Expression(value.expr)
            }
            other => unreachable!("statement alternative {other:?}"),
        };
        if depth + 1 > MAX_TREE_DEPTH {
            return Err(too_deep(span));
        }
        Ok((Statement { kind, span }, depth + 1))
    }

    fn string_literal(&mut self, pair: Pair<'_, Rule>) -> Result<StringLiteral, Diagnostic> {
        let span = span_of(&pair);
        let content = pair.into_inner().next().expect("a string has content");
        let value = decode_string(content.as_str(), content.as_span().start())?;
        Ok(StringLiteral { value, span })
    }

    /// An `expression` pair: operators ordered by the Pratt parser.
    fn expression(&mut self, pair: Pair<'_, Rule>) -> Built {
        // The closures below need `self` mutably; they only build nodes, so a
        // separate builder collects nothing and errors travel in `Built`.
        let mut inner_builder = Builder { errors: Vec::new() };
        let result = PRATT
            .map_primary(|operand| {
                let primary = operand.into_inner().next().expect("an operand has a primary");
                Builder { errors: Vec::new() }.primary(primary)
            })
            .map_prefix(|operator, operand| {
                let operand = operand?;
                let span = span_of(&operator).to(operand.expr.span);
                let operator = if operator.as_rule() == Rule::negate { UnaryOperator::Negate } else { UnaryOperator::Not };
                node(
                    Expr::new(ExprKind::Unary { operator, operand: Box::new(operand.expr) }, span),
                    operand.depth + 1,
                )
            })
            .map_postfix(|base, operator| inner_builder.postfix(base?, operator))
            .map_infix(|left, operator, right| infix(left?, operator, right?))
            .parse(pair.into_inner());
        result
    }

    fn postfix(&mut self, base: Node, operator: Pair<'_, Rule>) -> Built {
        let operator_span = span_of(&operator);
        if base.depth >= MAX_TREE_DEPTH {
            return Err(too_deep(operator_span));
        }
        let span = base.expr.span.to(operator_span);
        match operator.as_rule() {
            Rule::call_arguments => {
                let mut arguments = Vec::new();
                let mut depth = base.depth;
                for part in operator.into_inner() {
                    if part.as_rule() == Rule::expression {
                        let argument = self.expression(part)?;
                        depth = depth.max(argument.depth);
                        arguments.push(argument.expr);
                    }
                }
                node(
                    Expr::new(ExprKind::Call { callee: Box::new(base.expr), arguments, options: Vec::new() }, span),
                    depth + 1,
                )
            }
            Rule::member_access => {
                let member = identifier(
                    operator.into_inner().find(|part| part.as_rule() == Rule::identifier).expect("a member has a name"),
                );
                node(Expr::new(ExprKind::Member { base: Box::new(base.expr), member }, span), base.depth + 1)
            }
            Rule::options => {
                let Expr { kind: ExprKind::Call { callee, arguments, options }, span: call_span } = base.expr else {
                    return Err(Diagnostic::error("options with `with` follow a call", operator_span)
                        .with_label("this `with` does not follow a call")
                        .with_help("write the options right after the call's parentheses, such as thickness(lower) with route temperature"));
                };
                if !options.is_empty() {
                    return Err(Diagnostic::error("a call takes one `with`", operator_span)
                        .with_label("second `with`")
                        .with_help("separate several options with commas: with route thickness, equator_band 10 degrees"));
                }
                let mut built = Vec::new();
                let mut depth = base.depth;
                for option in operator.into_inner().filter(|part| part.as_rule() == Rule::option) {
                    let mut parts = option.into_inner();
                    let name = identifier(parts.next().expect("an option has a name"));
                    let value = self.term(parts.next().expect("an option has a value").into_inner())?;
                    depth = depth.max(value.depth);
                    built.push(CallOption { name, value: value.expr });
                }
                node(
                    Expr::new(ExprKind::Call { callee, arguments, options: built }, call_span.to(operator_span)),
                    depth + 1,
                )
            }
            Rule::selection => {
                let mut parts = operator.into_inner();
                let how = match parts.next().expect("a selection word").as_rule() {
                    Rule::at_keyword => SelectHow::At,
                    Rule::over_keyword => SelectHow::Over,
                    Rule::in_keyword => SelectHow::In,
                    _ => SelectHow::During,
                };
                let selector = self.selector(parts.next().expect("a selector"))?;
                let depth = base.depth.max(selector.depth) + 1;
                node(
                    Expr::new(
                        ExprKind::Select { base: Box::new(base.expr), how, selector: Box::new(selector.expr) },
                        span,
                    ),
                    depth,
                )
            }
            Rule::conversion => {
                let unit_pair =
                    operator.into_inner().find(|part| part.as_rule() == Rule::unit).expect("a conversion has a unit");
                let unit = unit_text(&unit_pair);
                node(Expr::new(ExprKind::Convert { value: Box::new(base.expr), unit }, span), base.depth + 1)
            }
            other => unreachable!("postfix operator {other:?}"),
        }
    }

    /// `term` or `term to term` after a selection word.
    fn selector(&mut self, pair: Pair<'_, Rule>) -> Built {
        let parts: Vec<Pair<'_, Rule>> = pair.into_inner().collect();
        let split = parts.iter().position(|part| part.as_rule() == Rule::to_keyword);
        match split {
            None => self.term(parts.into_iter()),
            Some(index) => {
                let mut parts = parts.into_iter();
                let first: Vec<_> = parts.by_ref().take(index).collect();
                parts.next(); // `to`
                let from = self.term(first.into_iter())?;
                let to = self.term(parts)?;
                let span = from.expr.span.to(to.expr.span);
                let depth = from.depth.max(to.depth) + 1;
                node(Expr::new(ExprKind::Range { from: Box::new(from.expr), to: Box::new(to.expr) }, span), depth)
            }
        }
    }

    /// A primary followed by calls and members.
    fn term<'i>(&mut self, mut parts: impl Iterator<Item = Pair<'i, Rule>>) -> Built {
        let first = parts.next().expect("a term has a primary");
        let mut current = self.primary(first)?;
        for part in parts {
            current = self.postfix(current, part)?;
        }
        Ok(current)
    }

    fn primary(&mut self, pair: Pair<'_, Rule>) -> Built {
        let span = span_of(&pair);
        match pair.as_rule() {
            Rule::number_literal => {
                let mut parts = pair.into_inner();
                let number = parts.next().expect("a number");
                let value = parse_number(&number)?;
                let kind = match parts.next() {
                    Some(word) if word.as_rule() == Rule::hemisphere => {
                        let hemisphere = match word.into_inner().next().map(|word| word.as_rule()) {
                            Some(Rule::north_keyword) => Hemisphere::North,
                            Some(Rule::south_keyword) => Hemisphere::South,
                            Some(Rule::east_keyword) => Hemisphere::East,
                            _ => Hemisphere::West,
                        };
                        ExprKind::Angle { value, hemisphere }
                    }
                    Some(unit) => ExprKind::Number { value, unit: Some(unit_text(&unit)) },
                    None => ExprKind::Number { value, unit: None },
                };
                node(Expr::new(kind, span), 1)
            }
            Rule::string => {
                let literal = self.string_literal(pair)?;
                node(Expr::new(ExprKind::String(literal.value), span), 1)
            }
            Rule::boolean => {
                let value = pair.into_inner().next().map(|word| word.as_rule()) == Some(Rule::true_keyword);
                node(Expr::new(ExprKind::Bool(value), span), 1)
            }
            Rule::identifier => node(Expr::new(ExprKind::Name(pair.as_str().to_string()), span), 1),
            Rule::parenthesized => {
                let inner = pair.into_inner().find(|part| part.as_rule() == Rule::expression).expect("an expression");
                let mut built = self.expression(inner)?;
                built.expr.span = span;
                built.grouped = true;
                Ok(built)
            }
            Rule::block => {
                let (statements, depth) = self.block_statements(pair)?;
                node(Expr::new(ExprKind::Block { statements }, span), depth + 1)
            }
            Rule::if_expression => {
                let mut branches = Vec::with_capacity(3);
                let mut depth = 0;
                for part in pair.into_inner().filter(|part| part.as_rule() == Rule::expression) {
                    let built = self.expression(part)?;
                    depth = depth.max(built.depth);
                    branches.push(built.expr);
                }
                let else_branch = branches.pop().expect("else");
                let then_branch = branches.pop().expect("then");
                let condition = branches.pop().expect("condition");
                node(
                    Expr::new(
                        ExprKind::If {
                            condition: Box::new(condition),
                            then_branch: Box::new(then_branch),
                            else_branch: Box::new(else_branch),
                        },
                        span,
                    ),
                    depth + 1,
                )
            }
            other => unreachable!("primary {other:?}"),
        }
    }
}

fn infix(left: Node, operator: Pair<'_, Rule>, right: Node) -> Built {
    let operator_span = span_of(&operator);
    let span = left.expr.span.to(right.expr.span);
    let depth = left.depth.max(right.depth) + 1;
    if depth > MAX_TREE_DEPTH {
        return Err(too_deep(operator_span));
    }
    let operator = match operator.as_rule() {
        Rule::to_keyword => {
            if !left.grouped && matches!(left.expr.kind, ExprKind::Range { .. }) {
                return Err(Diagnostic::error("a range has two ends", operator_span)
                    .with_label("a third end")
                    .with_help("write one range, such as 1000 hPa to 500 hPa"));
            }
            return node(Expr::new(ExprKind::Range { from: Box::new(left.expr), to: Box::new(right.expr) }, span), depth);
        }
        Rule::or_keyword => BinaryOperator::Or,
        Rule::and_keyword => BinaryOperator::And,
        Rule::less => BinaryOperator::Less,
        Rule::less_equal => BinaryOperator::LessEqual,
        Rule::greater => BinaryOperator::Greater,
        Rule::greater_equal => BinaryOperator::GreaterEqual,
        Rule::equal => BinaryOperator::Equal,
        Rule::not_equal => BinaryOperator::NotEqual,
        Rule::add => BinaryOperator::Add,
        Rule::subtract => BinaryOperator::Subtract,
        Rule::multiply => BinaryOperator::Multiply,
        Rule::divide => BinaryOperator::Divide,
        Rule::power => BinaryOperator::Power,
        other => unreachable!("infix operator {other:?}"),
    };
    if operator.is_comparison() {
        if let ExprKind::Binary { operator: previous, .. } = &left.expr.kind {
            if previous.is_comparison() && !left.grouped {
                return Err(Diagnostic::error("comparisons cannot be chained", operator_span)
                    .with_label("second comparison")
                    .with_help(format!(
                        "join two comparisons with `and`, such as a {} b and b {} c",
                        previous.symbol(),
                        operator.symbol()
                    )));
            }
        }
    }
    node(Expr::new(ExprKind::Binary { operator, left: Box::new(left.expr), right: Box::new(right.expr) }, span), depth)
}

fn identifier(pair: Pair<'_, Rule>) -> Identifier {
    Identifier { name: pair.as_str().to_string(), span: span_of(&pair) }
}

fn unit_text(pair: &Pair<'_, Rule>) -> UnitText {
    // One space between atoms, whatever was typed.
    let text = pair.as_str().split([' ', '\t']).filter(|part| !part.is_empty()).collect::<Vec<_>>().join(" ");
    let text = text.replace("( ", "(").replace(" )", ")");
    UnitText { text, span: span_of(pair) }
}

fn parse_number(pair: &Pair<'_, Rule>) -> Result<f64, Diagnostic> {
    let span = span_of(pair);
    match pair.as_str().parse::<f64>() {
        Ok(value) if value.is_finite() => Ok(value),
        _ => Err(Diagnostic::error("this number is too large", span)
            .with_label("beyond the largest number (about 1.8e308)")),
    }
}

fn decode_string(content: &str, offset: usize) -> Result<String, Diagnostic> {
    let mut value = String::with_capacity(content.len());
    let mut characters = content.char_indices();
    while let Some((index, character)) = characters.next() {
        if character != '\\' {
            value.push(character);
            continue;
        }
        match characters.next() {
            Some((_, '"')) => value.push('"'),
            Some((_, '\\')) => value.push('\\'),
            Some((_, 'n')) => value.push('\n'),
            Some((_, 't')) => value.push('\t'),
            Some((_, 'r')) => value.push('\r'),
            Some((next_index, other)) => {
                return Err(Diagnostic::error(
                    format!("unknown escape `\\{other}` in a string"),
                    Span::new(offset + index, offset + next_index + other.len_utf8()),
                )
                .with_label("not an escape")
                .with_help("the escapes are \\\" \\\\ \\n \\t and \\r; write \\\\ for a backslash"));
            }
            None => value.push('\\'),
        }
    }
    Ok(value)
}
