//! The parser of unit strings: a lexer, a recursive-descent grammar for
//! udunits/CF spellings (products, quotients, powers written `m2`, `m^2` or
//! `m**2`, scale factors, `since` references refused), and suggestions for
//! misspelt names. It builds `Unit`s through the algebra in the parent.

#[allow(unused_imports)]
use super::*;
#[allow(unused_imports)]
use std::ops::Range;

// ---------------------------------------------------------------------------
// Lexer
// ---------------------------------------------------------------------------

#[derive(Debug, Clone, PartialEq)]
pub(super) enum TokenKind {
    Number(f64),
    Name(String),
    Exponent(i32),
    /// `**` or `^`; the lexer guarantees an `Exponent` follows.
    Power,
    Times,
    Divide,
    Open,
    Close,
    /// `@`; the lexer guarantees a `Number` follows.
    Origin,
}

#[derive(Debug, Clone)]
pub(super) struct Token {
    pub(super) kind: TokenKind,
    pub(super) span: Range<usize>,
}

pub(super) fn is_name_char(c: char) -> bool {
    c.is_alphabetic() || c == '_' || c == '°' || c == '%'
}

/// Byte range of `word` (any letter case) standing as a whole name in `text`.
pub(super) fn find_word(text: &str, word: &str) -> Option<Range<usize>> {
    let mut start = None;
    for (i, c) in text
        .char_indices()
        .chain(std::iter::once((text.len(), ' ')))
    {
        if is_name_char(c) {
            start.get_or_insert(i);
        } else if let Some(s) = start.take() {
            if text[s..i].eq_ignore_ascii_case(word) {
                return Some(s..i);
            }
        }
    }
    None
}

pub(super) fn syntax_error(
    input: &str,
    span: Range<usize>,
    kind: SyntaxErrorKind,
    expected: &str,
    suggestion: Option<String>,
) -> UnitError {
    UnitError::Syntax(UnitSyntaxError {
        input: input.to_string(),
        span,
        kind,
        expected: expected.to_string(),
        suggestion,
    })
}

pub(super) struct Lexer<'a> {
    pub(super) input: &'a str,
    pub(super) position: usize,
}

impl<'a> Lexer<'a> {
    fn peek(&self) -> Option<char> {
        self.input[self.position..].chars().next()
    }

    fn peek_second(&self) -> Option<char> {
        let mut chars = self.input[self.position..].chars();
        chars.next();
        chars.next()
    }

    fn bump(&mut self) -> Option<char> {
        let c = self.peek()?;
        self.position += c.len_utf8();
        Some(c)
    }

    fn skip_whitespace(&mut self) {
        while self.peek().is_some_and(char::is_whitespace) {
            self.bump();
        }
    }

    fn digits(&mut self) {
        while self.peek().is_some_and(|c| c.is_ascii_digit()) {
            self.bump();
        }
    }

    fn at_signed_digit(&self) -> bool {
        match self.peek() {
            Some(c) if c.is_ascii_digit() => true,
            Some('+' | '-') => self.peek_second().is_some_and(|c| c.is_ascii_digit()),
            _ => false,
        }
    }

    /// [+-]digits as an i32 exponent.
    fn integer(&mut self) -> Result<Token, UnitError> {
        let start = self.position;
        if matches!(self.peek(), Some('+' | '-')) {
            self.bump();
        }
        self.digits();
        let text = &self.input[start..self.position];
        let value = text.parse::<i32>().map_err(|_| {
            syntax_error(
                self.input,
                start..self.position,
                SyntaxErrorKind::BadExponent(text.to_string()),
                "an integer exponent between -128 and 127",
                None,
            )
        })?;
        Ok(Token {
            kind: TokenKind::Exponent(value),
            span: start..self.position,
        })
    }

    /// [+-]digits[.digits][e[+-]digits] as a number.
    fn number(&mut self, signed: bool) -> Result<Token, UnitError> {
        let start = self.position;
        if signed && matches!(self.peek(), Some('+' | '-')) {
            self.bump();
        }
        self.digits();
        if self.peek() == Some('.') && !self.peek_second().is_some_and(is_name_char) {
            self.bump();
            self.digits();
        }
        if matches!(self.peek(), Some('e' | 'E')) {
            let mark = self.position;
            self.bump();
            if self.at_signed_digit() {
                if matches!(self.peek(), Some('+' | '-')) {
                    self.bump();
                }
                self.digits();
            } else {
                // Not an exponent: "2 eV"-like text; leave the 'e' for a name.
                self.position = mark;
            }
        }
        let text = &self.input[start..self.position];
        let value = text.parse::<f64>().map_err(|_| {
            syntax_error(
                self.input,
                start..self.position,
                SyntaxErrorKind::BadNumber(text.to_string()),
                "a number such as 100, 0.5 or 1e-5",
                None,
            )
        })?;
        if !value.is_finite() {
            return Err(syntax_error(
                self.input,
                start..self.position,
                SyntaxErrorKind::BadNumber(text.to_string()),
                "a finite number",
                None,
            ));
        }
        Ok(Token {
            kind: TokenKind::Number(value),
            span: start..self.position,
        })
    }
}

pub(super) fn lex(input: &str) -> Result<Vec<Token>, UnitError> {
    let mut lexer = Lexer { input, position: 0 };
    let mut tokens: Vec<Token> = Vec::new();
    // True right after a name or ')' with nothing in between: an integer here
    // is an exponent ("m2", "s-1", "(m s-1)2").
    let mut attached = false;
    while let Some(c) = lexer.peek() {
        let start = lexer.position;
        if c.is_whitespace() {
            lexer.skip_whitespace();
            attached = false;
            continue;
        }
        if attached && lexer.at_signed_digit() {
            tokens.push(lexer.integer()?);
            attached = false;
            continue;
        }
        let after_operand = matches!(
            tokens.last().map(|t| &t.kind),
            Some(
                TokenKind::Name(_)
                    | TokenKind::Close
                    | TokenKind::Number(_)
                    | TokenKind::Exponent(_)
            )
        );
        if c.is_ascii_digit()
            || (c == '.'
                && !after_operand
                && lexer.peek_second().is_some_and(|d| d.is_ascii_digit()))
        {
            tokens.push(lexer.number(false)?);
            attached = false;
            continue;
        }
        if is_name_char(c) {
            while lexer.peek().is_some_and(is_name_char) {
                lexer.bump();
            }
            let name = input[start..lexer.position].to_string();
            tokens.push(Token {
                kind: TokenKind::Name(name),
                span: start..lexer.position,
            });
            attached = true;
            continue;
        }
        lexer.bump();
        let single = |kind| Token {
            kind,
            span: start..start + c.len_utf8(),
        };
        match c {
            '(' => {
                tokens.push(single(TokenKind::Open));
                attached = false;
            }
            ')' => {
                tokens.push(single(TokenKind::Close));
                attached = true;
            }
            '*' if lexer.peek() != Some('*') => {
                tokens.push(single(TokenKind::Times));
                attached = false;
            }
            '*' | '^' => {
                if c == '*' {
                    lexer.bump();
                }
                let end = lexer.position;
                tokens.push(Token {
                    kind: TokenKind::Power,
                    span: start..end,
                });
                lexer.skip_whitespace();
                if !lexer.at_signed_digit() {
                    let here = lexer.position;
                    let found = lexer.peek();
                    let kind = match found {
                        Some(f) => SyntaxErrorKind::UnexpectedCharacter(f),
                        None => SyntaxErrorKind::UnexpectedEnd,
                    };
                    let span = here..here + found.map_or(0, char::len_utf8);
                    return Err(syntax_error(
                        input,
                        span,
                        kind,
                        &format!("an integer exponent after {:?}", &input[start..end]),
                        None,
                    ));
                }
                tokens.push(lexer.integer()?);
                attached = false;
            }
            '.' => {
                tokens.push(single(TokenKind::Times));
                attached = false;
            }
            '/' => {
                tokens.push(single(TokenKind::Divide));
                attached = false;
            }
            '@' => {
                tokens.push(single(TokenKind::Origin));
                lexer.skip_whitespace();
                let number_follows = lexer.at_signed_digit()
                    || (matches!(lexer.peek(), Some('+' | '-' | '.'))
                        && lexer
                            .peek_second()
                            .is_some_and(|d| d.is_ascii_digit() || d == '.'));
                if !number_follows {
                    let here = lexer.position;
                    let found = lexer.peek();
                    let kind = match found {
                        Some(f) => SyntaxErrorKind::UnexpectedCharacter(f),
                        None => SyntaxErrorKind::UnexpectedEnd,
                    };
                    let span = here..here + found.map_or(0, char::len_utf8);
                    return Err(syntax_error(
                        input,
                        span,
                        kind,
                        "a number after '@' (the origin, as in \"K @ 273.15\")",
                        None,
                    ));
                }
                tokens.push(lexer.number(true)?);
                attached = false;
            }
            '-' | '+' => {
                // "m s -1": an exponent separated from its name.
                let previous_is_operand = matches!(
                    tokens.last().map(|t| &t.kind),
                    Some(TokenKind::Name(_) | TokenKind::Close)
                );
                let suggestion =
                    if previous_is_operand && lexer.peek().is_some_and(|d| d.is_ascii_digit()) {
                        let before = input[..start].trim_end();
                        Some(format!("{before}{}", &input[start..]))
                    } else {
                        None
                    };
                return Err(syntax_error(
                    input,
                    start..lexer.position,
                    SyntaxErrorKind::UnexpectedCharacter(c),
                    "an exponent written right after its unit name (\"s-1\"), or a unit name, a number, '*', '.', '/' or '('",
                    suggestion,
                ));
            }
            other => {
                return Err(syntax_error(
                    input,
                    start..lexer.position,
                    SyntaxErrorKind::UnexpectedCharacter(other),
                    "a unit name, a number, an exponent, whitespace, '*', '.', '/', '^', '(' or ')'",
                    None,
                ));
            }
        }
    }
    Ok(tokens)
}

// ---------------------------------------------------------------------------
// Parser
// ---------------------------------------------------------------------------

pub(super) struct Parser<'a> {
    pub(super) input: &'a str,
    pub(super) tokens: Vec<Token>,
    pub(super) position: usize,
    /// Offset units named in the string (span, scale), for the error and
    /// its suggestion.
    pub(super) offset_names: Vec<(Range<usize>, f64)>,
}

impl<'a> Parser<'a> {
    fn peek(&self) -> Option<&Token> {
        self.tokens.get(self.position)
    }

    fn next(&mut self) -> Option<Token> {
        let token = self.tokens.get(self.position).cloned();
        if token.is_some() {
            self.position += 1;
        }
        token
    }

    fn end_span(&self) -> Range<usize> {
        self.input.len()..self.input.len()
    }

    fn error(
        &self,
        span: Range<usize>,
        kind: SyntaxErrorKind,
        expected: &str,
        suggestion: Option<String>,
    ) -> UnitError {
        syntax_error(self.input, span, kind, expected, suggestion)
    }

    fn token_text(&self, token: &Token) -> String {
        self.input[token.span.clone()].to_string()
    }

    pub(super) fn parse_all(&mut self) -> Result<Unit, UnitError> {
        if self.tokens.is_empty() {
            return Ok(Unit::dimensionless());
        }
        let (mut unit, _) = self.parse_product()?;
        if let Some(Token {
            kind: TokenKind::Origin,
            ..
        }) = self.peek()
        {
            self.next();
            let Some(Token {
                kind: TokenKind::Number(origin),
                span,
            }) = self.next()
            else {
                // The lexer puts a number after every '@'; stay total anyway.
                return Err(self.error(
                    self.end_span(),
                    SyntaxErrorKind::UnexpectedEnd,
                    "a number after '@'",
                    None,
                ));
            };
            // U @ x: si = (v + x) * scale + offset.
            let offset = origin * unit.scale + unit.offset;
            if !offset.is_finite() {
                return Err(self.error(
                    span,
                    SyntaxErrorKind::BadNumber(origin.to_string()),
                    "a finite origin",
                    None,
                ));
            }
            unit.offset = offset;
        }
        if let Some(token) = self.peek().cloned() {
            let text = self.token_text(&token);
            return Err(match token.kind {
                TokenKind::Close => self.error(
                    token.span,
                    SyntaxErrorKind::UnmatchedParenthesis,
                    "an operator or the end of the unit",
                    None,
                ),
                _ => self.error(
                    token.span,
                    SyntaxErrorKind::UnexpectedToken(text),
                    "the end of the unit ('@ origin' may only come last, after the whole unit)",
                    None,
                ),
            });
        }
        Ok(unit)
    }

    fn parse_product(&mut self) -> Result<(Unit, Range<usize>), UnitError> {
        let (mut unit, mut span) = self.parse_power()?;
        loop {
            let divide = match self.peek().map(|t| &t.kind) {
                Some(TokenKind::Times) => {
                    self.next();
                    false
                }
                Some(TokenKind::Divide) => {
                    self.next();
                    true
                }
                Some(TokenKind::Number(_) | TokenKind::Name(_) | TokenKind::Open) => false,
                _ => break,
            };
            let (right, right_span) = self.parse_power()?;
            unit = combine(&unit, &right, divide)
                .map_err(|p| self.arithmetic_error(p, span.start..right_span.end))?;
            span.end = right_span.end;
        }
        Ok((unit, span))
    }

    fn parse_power(&mut self) -> Result<(Unit, Range<usize>), UnitError> {
        let (base, mut span) = self.parse_base()?;
        let power = match self.peek().map(|t| &t.kind) {
            Some(TokenKind::Exponent(_)) => self.next(),
            Some(TokenKind::Power) => {
                self.next();
                self.next()
            }
            _ => return Ok((base, span)),
        };
        let Some(Token {
            kind: TokenKind::Exponent(power),
            span: power_span,
        }) = power
        else {
            return Err(self.error(
                self.end_span(),
                SyntaxErrorKind::UnexpectedEnd,
                "an integer exponent",
                None,
            ));
        };
        span.end = power_span.end;
        let unit = raise(&base, power).map_err(|p| self.arithmetic_error(p, span.clone()))?;
        Ok((unit, span))
    }

    fn parse_base(&mut self) -> Result<(Unit, Range<usize>), UnitError> {
        let Some(token) = self.next() else {
            return Err(self.error(
                self.end_span(),
                SyntaxErrorKind::UnexpectedEnd,
                EXPECTED_UNIT,
                None,
            ));
        };
        match token.kind {
            TokenKind::Number(value) => {
                if value <= 0.0 {
                    let text = self.token_text(&token);
                    return Err(self.error(
                        token.span,
                        SyntaxErrorKind::BadNumber(text),
                        "a positive scale factor",
                        None,
                    ));
                }
                Ok((
                    Unit {
                        dimension: Dimension::DIMENSIONLESS,
                        scale: value,
                        offset: 0.0,
                        symbol: None,
                    },
                    token.span,
                ))
            }
            TokenKind::Name(ref name) => match lookup_name(name) {
                Some(named) => {
                    if named.offset != 0.0 {
                        self.offset_names.push((token.span.clone(), named.scale));
                    }
                    let unit = Unit {
                        dimension: named.dimension,
                        scale: named.scale,
                        offset: named.offset,
                        symbol: None,
                    };
                    Ok((unit, token.span))
                }
                None => {
                    let suggestion = suggest_name(self.input, token.span.clone(), name);
                    Err(self.error(
                        token.span,
                        SyntaxErrorKind::UnknownName(name.clone()),
                        EXPECTED_UNIT,
                        suggestion,
                    ))
                }
            },
            TokenKind::Open => {
                if let Some(Token {
                    kind: TokenKind::Close,
                    span,
                }) = self.peek().cloned()
                {
                    return Err(self.error(
                        span,
                        SyntaxErrorKind::UnexpectedToken(")".into()),
                        EXPECTED_UNIT,
                        None,
                    ));
                }
                let (unit, _) = self.parse_product()?;
                match self.next() {
                    Some(Token {
                        kind: TokenKind::Close,
                        span,
                    }) => Ok((unit, token.span.start..span.end)),
                    Some(other) => {
                        let text = self.token_text(&other);
                        Err(self.error(
                            other.span,
                            SyntaxErrorKind::UnexpectedToken(text),
                            "')' or an operator",
                            None,
                        ))
                    }
                    None => Err(self.error(
                        token.span.start..self.input.len(),
                        SyntaxErrorKind::UnclosedParenthesis,
                        "')' to close the group",
                        Some(format!("{})", self.input.trim_end())),
                    )),
                }
            }
            TokenKind::Close => Err(self.error(
                token.span,
                SyntaxErrorKind::UnmatchedParenthesis,
                EXPECTED_UNIT,
                None,
            )),
            _ => {
                let text = self.token_text(&token);
                Err(self.error(
                    token.span,
                    SyntaxErrorKind::UnexpectedToken(text),
                    EXPECTED_UNIT,
                    None,
                ))
            }
        }
    }

    fn arithmetic_error(&self, problem: ArithmeticProblem, span: Range<usize>) -> UnitError {
        match problem {
            ArithmeticProblem::Offset => {
                let (name_span, _) = self
                    .offset_names
                    .last()
                    .cloned()
                    .unwrap_or((span.clone(), 1.0));
                // degC and its spellings differ from K only by the origin, so
                // the compound means the same with K; degF has no such twin.
                let suggestion = if self.offset_names.iter().all(|(_, scale)| *scale == 1.0)
                    && !self.offset_names.is_empty()
                {
                    let mut text = self.input.to_string();
                    for (range, _) in self.offset_names.iter().rev() {
                        text.replace_range(range.clone(), "K");
                    }
                    Some(text.trim().to_string())
                } else {
                    None
                };
                let name = self.input[name_span.clone()].to_string();
                self.error(
                    name_span,
                    SyntaxErrorKind::OffsetInCompound(name),
                    "a temperature-difference unit such as K inside products, quotients and powers",
                    suggestion,
                )
            }
            ArithmeticProblem::ExponentOverflow => {
                let text = self.input[span.clone()].to_string();
                self.error(
                    span,
                    SyntaxErrorKind::BadExponent(text),
                    "exponents between -128 and 127 for each base quantity",
                    None,
                )
            }
            ArithmeticProblem::ScaleOutOfRange => {
                let text = self.input[span.clone()].to_string();
                self.error(
                    span,
                    SyntaxErrorKind::BadNumber(text),
                    "a scale that stays finite and non-zero",
                    None,
                )
            }
        }
    }
}

// ---------------------------------------------------------------------------
// Suggestions
// ---------------------------------------------------------------------------

/// A corrected unit string for an unknown name at `span`, trying in turn: the
/// same name in other letter case ("hpa" -> "hPa"), the name joined to the
/// next word ("deg C" -> "degC", "degrees north" -> "degrees_north"), the name
/// split in two known names ("ms-1" -> "m s-1", "kgkg-1" -> "kg kg-1"), and a
/// name one or two edits away ("knts" -> "knots"). Joining also looks back
/// ("degrees north" -> "degrees_north").
pub(super) fn suggest_name(input: &str, span: Range<usize>, name: &str) -> Option<String> {
    let spellings = all_spellings();
    let replace =
        |with: &str, end: usize| format!("{}{}{}", &input[..span.start], with, &input[end..]);
    let lower = name.to_lowercase();
    if let Some(found) = spellings.iter().find(|s| s.to_lowercase() == lower) {
        return Some(replace(found, span.end));
    }
    let before = &input[..span.start];
    let before_trimmed = before.trim_end();
    if before_trimmed.len() < before.len() {
        let word_len: usize = before_trimmed
            .chars()
            .rev()
            .take_while(|c| is_name_char(*c))
            .map(char::len_utf8)
            .sum();
        if word_len > 0 {
            let word_start = before_trimmed.len() - word_len;
            let word = &input[word_start..before_trimmed.len()];
            for joined in [format!("{word}{name}"), format!("{word}_{name}")] {
                let joined_lower = joined.to_lowercase();
                if let Some(found) = spellings.iter().find(|s| s.to_lowercase() == joined_lower) {
                    return Some(format!(
                        "{}{}{}",
                        &input[..word_start],
                        found,
                        &input[span.end..]
                    ));
                }
            }
        }
    }
    let rest = &input[span.end..];
    let after_space = rest.trim_start();
    if after_space.len() < rest.len() {
        let word_start = span.end + (rest.len() - after_space.len());
        let word_len: usize = after_space
            .chars()
            .take_while(|c| is_name_char(*c))
            .map(char::len_utf8)
            .sum();
        if word_len > 0 {
            let word = &input[word_start..word_start + word_len];
            for joined in [format!("{name}{word}"), format!("{name}_{word}")] {
                let joined_lower = joined.to_lowercase();
                if let Some(found) = spellings.iter().find(|s| s.to_lowercase() == joined_lower) {
                    return Some(replace(found, word_start + word_len));
                }
            }
        }
    }
    for (split, _) in name.char_indices().skip(1) {
        let (left, right) = name.split_at(split);
        if lookup_name(left).is_some() && lookup_name(right).is_some() {
            return Some(replace(&format!("{left} {right}"), span.end));
        }
    }
    let length = name.chars().count();
    let allowed = if length >= 6 {
        2
    } else if length >= 3 {
        1
    } else {
        0
    };
    spellings
        .iter()
        .map(|s| (edit_distance(&lower, &s.to_lowercase()), s))
        .filter(|(distance, _)| *distance <= allowed)
        .min_by_key(|(distance, _)| *distance)
        .map(|(_, s)| replace(s, span.end))
}

/// Levenshtein distance over characters.
pub(super) fn edit_distance(a: &str, b: &str) -> usize {
    let b: Vec<char> = b.chars().collect();
    let mut previous: Vec<usize> = (0..=b.len()).collect();
    for (i, ca) in a.chars().enumerate() {
        let mut current = vec![i + 1; b.len() + 1];
        for (j, cb) in b.iter().enumerate() {
            let substitution = previous[j] + usize::from(ca != *cb);
            current[j + 1] = substitution.min(previous[j + 1] + 1).min(current[j] + 1);
        }
        previous = current;
    }
    previous[b.len()]
}
