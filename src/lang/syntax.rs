//! The syntax tree of a Baroc program and its canonical printer.
//!
//! Every node carries a [`Span`] of byte offsets into the source it was
//! parsed from, so that the checker and evaluator can point at the exact
//! characters a message is about. The printer (`Display`) writes a tree back
//! as canonical source: parsing what it prints gives the same tree again,
//! spans aside (see [`Program::without_spans`]).
//!
//! Numbers in a parsed tree are never negative: `-5` is a negation of `5`.

use std::fmt::{self, Write as _};

/// A range of bytes `start..end` in the source text.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Default, PartialOrd, Ord)]
pub struct Span {
    pub start: usize,
    pub end: usize,
}

impl Span {
    pub fn new(start: usize, end: usize) -> Self {
        Span { start, end }
    }

    /// The smallest span covering both.
    pub fn to(self, other: Span) -> Span {
        Span { start: self.start.min(other.start), end: self.end.max(other.end) }
    }

    pub fn len(&self) -> usize {
        self.end.saturating_sub(self.start)
    }

    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

/// A whole program (a file, a notebook cell, a recipe).
#[derive(Debug, Clone, PartialEq)]
pub struct Program {
    pub statements: Vec<Statement>,
    pub span: Span,
}

/// A name as written, with where it was written.
#[derive(Debug, Clone, PartialEq)]
pub struct Identifier {
    pub name: String,
    pub span: Span,
}

/// A string literal's decoded value and where it was written (quotes included).
#[derive(Debug, Clone, PartialEq)]
pub struct StringLiteral {
    pub value: String,
    pub span: Span,
}

/// A unit as written after a number or after `as` (spaces collapsed to one).
/// The units module gives it meaning.
#[derive(Debug, Clone, PartialEq)]
pub struct UnitText {
    pub text: String,
    pub span: Span,
}

#[derive(Debug, Clone, PartialEq)]
pub struct Statement {
    pub kind: StatementKind,
    pub span: Span,
}

#[derive(Debug, Clone, PartialEq)]
pub enum StatementKind {
    /// `let name = value`
    Let { name: Identifier, value: Expr },
    /// `function name(a, b) = expr` or `function name(a, b) { ... }`
    /// (the block form has an [`ExprKind::Block`] body).
    Function { name: Identifier, parameters: Vec<Identifier>, body: Expr },
    /// `open "a.nc", "b.nc" as name`
    Open { paths: Vec<StringLiteral>, alias: Option<Identifier> },
    /// `recipe "title"`
    Recipe { title: StringLiteral },
    /// `about "text"`
    About { text: StringLiteral },
    /// `parameter name = default "documentation"`
    Parameter { name: Identifier, default: Expr, documentation: Option<StringLiteral> },
    /// `output name = expr "documentation"`
    Output { name: Identifier, value: Expr, documentation: Option<StringLiteral> },
    /// `setting below_ground standard_lapse_rate`: choices for the whole
    /// program, written like a call's options.
    Setting { options: Vec<CallOption> },
    /// An expression whose value is shown.
    Expression(Expr),
}

#[derive(Debug, Clone, PartialEq)]
pub struct Expr {
    pub kind: ExprKind,
    pub span: Span,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Hemisphere {
    North,
    South,
    East,
    West,
}

impl Hemisphere {
    pub fn word(self) -> &'static str {
        match self {
            Hemisphere::North => "north",
            Hemisphere::South => "south",
            Hemisphere::East => "east",
            Hemisphere::West => "west",
        }
    }

    /// True for north and south (an angle of latitude).
    pub fn is_latitude(self) -> bool {
        matches!(self, Hemisphere::North | Hemisphere::South)
    }
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum UnaryOperator {
    Negate,
    Not,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum BinaryOperator {
    Or,
    And,
    Less,
    LessEqual,
    Greater,
    GreaterEqual,
    Equal,
    NotEqual,
    Add,
    Subtract,
    Multiply,
    Divide,
    Power,
}

impl BinaryOperator {
    pub fn symbol(self) -> &'static str {
        match self {
            BinaryOperator::Or => "or",
            BinaryOperator::And => "and",
            BinaryOperator::Less => "<",
            BinaryOperator::LessEqual => "<=",
            BinaryOperator::Greater => ">",
            BinaryOperator::GreaterEqual => ">=",
            BinaryOperator::Equal => "==",
            BinaryOperator::NotEqual => "!=",
            BinaryOperator::Add => "+",
            BinaryOperator::Subtract => "-",
            BinaryOperator::Multiply => "*",
            BinaryOperator::Divide => "/",
            BinaryOperator::Power => "^",
        }
    }

    pub fn is_comparison(self) -> bool {
        matches!(
            self,
            BinaryOperator::Less
                | BinaryOperator::LessEqual
                | BinaryOperator::Greater
                | BinaryOperator::GreaterEqual
                | BinaryOperator::Equal
                | BinaryOperator::NotEqual
        )
    }

    /// Binding strength, as in the language design (higher binds tighter).
    pub fn precedence(self) -> u8 {
        match self {
            BinaryOperator::Or => precedence::OR,
            BinaryOperator::And => precedence::AND,
            BinaryOperator::Add | BinaryOperator::Subtract => precedence::SUM,
            BinaryOperator::Multiply | BinaryOperator::Divide => precedence::PRODUCT,
            BinaryOperator::Power => precedence::POWER,
            _ => precedence::COMPARISON,
        }
    }
}

/// How a selection picks part of a field.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum SelectHow {
    /// `at`: a level, a point or a time
    At,
    /// `over`: a layer
    Over,
    /// `in`: a region
    In,
    /// `during`: a time range
    During,
}

impl SelectHow {
    pub fn word(self) -> &'static str {
        match self {
            SelectHow::At => "at",
            SelectHow::Over => "over",
            SelectHow::In => "in",
            SelectHow::During => "during",
        }
    }
}

/// `name value` after `with`.
#[derive(Debug, Clone, PartialEq)]
pub struct CallOption {
    pub name: Identifier,
    pub value: Expr,
}

#[derive(Debug, Clone, PartialEq)]
pub enum ExprKind {
    /// `500 hPa`, `7`; the value is never negative.
    Number { value: f64, unit: Option<UnitText> },
    /// `52.5 north`; the value is never negative.
    Angle { value: f64, hemisphere: Hemisphere },
    String(String),
    Bool(bool),
    Name(String),
    Call { callee: Box<Expr>, arguments: Vec<Expr>, options: Vec<CallOption> },
    Member { base: Box<Expr>, member: Identifier },
    Unary { operator: UnaryOperator, operand: Box<Expr> },
    Binary { operator: BinaryOperator, left: Box<Expr>, right: Box<Expr> },
    /// `A to B`
    Range { from: Box<Expr>, to: Box<Expr> },
    /// `E at S`, `E over S`, `E in S`, `E during S`
    Select { base: Box<Expr>, how: SelectHow, selector: Box<Expr> },
    /// `E as UNIT`
    Convert { value: Box<Expr>, unit: UnitText },
    If { condition: Box<Expr>, then_branch: Box<Expr>, else_branch: Box<Expr> },
    /// `{ statements }`: the last statement, an expression, gives the value.
    Block { statements: Vec<Statement> },
}

/// Binding strengths of the design's precedence table (lowest first).
pub mod precedence {
    pub const IF: u8 = 1;
    pub const OR: u8 = 2;
    pub const AND: u8 = 3;
    pub const NOT: u8 = 4;
    pub const COMPARISON: u8 = 5;
    pub const RANGE: u8 = 6;
    pub const SUM: u8 = 7;
    pub const PRODUCT: u8 = 8;
    pub const NEGATE: u8 = 9;
    pub const POWER: u8 = 10;
    pub const CONVERT: u8 = 11;
    pub const SELECT: u8 = 12;
    pub const OPTIONS: u8 = 13;
    pub const POSTFIX: u8 = 14;
    pub const PRIMARY: u8 = 15;
}

impl Expr {
    pub fn new(kind: ExprKind, span: Span) -> Self {
        Expr { kind, span }
    }

    /// How tightly this expression binds when printed without parentheses.
    pub fn precedence(&self) -> u8 {
        use precedence::*;
        match &self.kind {
            ExprKind::If { .. } => IF,
            ExprKind::Unary { operator: UnaryOperator::Not, .. } => NOT,
            ExprKind::Unary { operator: UnaryOperator::Negate, .. } => NEGATE,
            ExprKind::Binary { operator, .. } => operator.precedence(),
            ExprKind::Range { .. } => RANGE,
            ExprKind::Convert { .. } => CONVERT,
            ExprKind::Select { .. } => SELECT,
            ExprKind::Call { options, .. } if !options.is_empty() => OPTIONS,
            ExprKind::Call { .. } | ExprKind::Member { .. } => POSTFIX,
            _ => PRIMARY,
        }
    }

    /// True for what the grammar calls a term: a primary with calls (without
    /// options) and members. Selectors and option values are terms.
    pub fn is_term(&self) -> bool {
        self.precedence() >= precedence::POSTFIX
    }
}

// ------------------------------------------------------------------ spans

impl Program {
    /// A copy with every span set to `0..0`, for comparing trees by shape.
    pub fn without_spans(&self) -> Program {
        let mut copy = self.clone();
        copy.span = Span::default();
        for statement in &mut copy.statements {
            clear_statement(statement);
        }
        copy
    }
}

impl Expr {
    /// A copy with every span set to `0..0`.
    pub fn without_spans(&self) -> Expr {
        let mut copy = self.clone();
        clear_expr(&mut copy);
        copy
    }
}

fn clear_statement(statement: &mut Statement) {
    statement.span = Span::default();
    match &mut statement.kind {
        StatementKind::Let { name, value } => {
            name.span = Span::default();
            clear_expr(value);
        }
        StatementKind::Function { name, parameters, body } => {
            name.span = Span::default();
            for parameter in parameters {
                parameter.span = Span::default();
            }
            clear_expr(body);
        }
        StatementKind::Open { paths, alias } => {
            for path in paths {
                path.span = Span::default();
            }
            if let Some(alias) = alias {
                alias.span = Span::default();
            }
        }
        StatementKind::Recipe { title } => title.span = Span::default(),
        StatementKind::About { text } => text.span = Span::default(),
        StatementKind::Parameter { name, default, documentation } => {
            name.span = Span::default();
            clear_expr(default);
            if let Some(documentation) = documentation {
                documentation.span = Span::default();
            }
        }
        StatementKind::Output { name, value, documentation } => {
            name.span = Span::default();
            clear_expr(value);
            if let Some(documentation) = documentation {
                documentation.span = Span::default();
            }
        }
        StatementKind::Setting { options } => {
            for option in options {
                option.name.span = Span::default();
                clear_expr(&mut option.value);
            }
        }
        StatementKind::Expression(expr) => clear_expr(expr),
    }
}

fn clear_expr(expr: &mut Expr) {
    expr.span = Span::default();
    match &mut expr.kind {
        ExprKind::Number { unit, .. } => {
            if let Some(unit) = unit {
                unit.span = Span::default();
            }
        }
        ExprKind::Angle { .. } | ExprKind::String(_) | ExprKind::Bool(_) | ExprKind::Name(_) => {}
        ExprKind::Call { callee, arguments, options } => {
            clear_expr(callee);
            for argument in arguments {
                clear_expr(argument);
            }
            for option in options {
                option.name.span = Span::default();
                clear_expr(&mut option.value);
            }
        }
        ExprKind::Member { base, member } => {
            clear_expr(base);
            member.span = Span::default();
        }
        ExprKind::Unary { operand, .. } => clear_expr(operand),
        ExprKind::Binary { left, right, .. } => {
            clear_expr(left);
            clear_expr(right);
        }
        ExprKind::Range { from, to } => {
            clear_expr(from);
            clear_expr(to);
        }
        ExprKind::Select { base, selector, .. } => {
            clear_expr(base);
            clear_expr(selector);
        }
        ExprKind::Convert { value, unit } => {
            clear_expr(value);
            unit.span = Span::default();
        }
        ExprKind::If { condition, then_branch, else_branch } => {
            clear_expr(condition);
            clear_expr(then_branch);
            clear_expr(else_branch);
        }
        ExprKind::Block { statements } => {
            for statement in statements {
                clear_statement(statement);
            }
        }
    }
}

// --------------------------------------------------------------- printing

const INDENT: &str = "    ";

/// Writes a number so that reading it back gives the same `f64`: whole
/// numbers without a fraction, others in Rust's shortest round-trip form.
pub fn format_number(value: f64) -> String {
    if value.is_finite() && value.fract() == 0.0 && value.abs() < 1e15 {
        format!("{}", value as i64)
    } else {
        // `{:?}` is the shortest representation that parses back exactly,
        // switching to an exponent for very large or small magnitudes.
        format!("{value:?}")
    }
}

/// Writes a string literal with the escapes the grammar reads back.
pub fn quote_string(value: &str) -> String {
    let mut out = String::with_capacity(value.len() + 2);
    out.push('"');
    for character in value.chars() {
        match character {
            '"' => out.push_str("\\\""),
            '\\' => out.push_str("\\\\"),
            '\n' => out.push_str("\\n"),
            '\t' => out.push_str("\\t"),
            '\r' => out.push_str("\\r"),
            other => out.push(other),
        }
    }
    out.push('"');
    out
}

struct Printer {
    out: String,
}

impl Printer {
    fn statements(&mut self, statements: &[Statement], level: usize) {
        for statement in statements {
            for _ in 0..level {
                self.out.push_str(INDENT);
            }
            self.statement(statement, level);
            self.out.push('\n');
        }
    }

    fn statement(&mut self, statement: &Statement, level: usize) {
        match &statement.kind {
            StatementKind::Let { name, value } => {
                let _ = write!(self.out, "let {} = ", name.name);
                self.expr(value, 0, level);
            }
            StatementKind::Function { name, parameters, body } => {
                let _ = write!(self.out, "function {}(", name.name);
                for (index, parameter) in parameters.iter().enumerate() {
                    if index > 0 {
                        self.out.push_str(", ");
                    }
                    self.out.push_str(&parameter.name);
                }
                self.out.push(')');
                if matches!(body.kind, ExprKind::Block { .. }) {
                    self.out.push(' ');
                } else {
                    self.out.push_str(" = ");
                }
                self.expr(body, 0, level);
            }
            StatementKind::Open { paths, alias } => {
                self.out.push_str("open ");
                for (index, path) in paths.iter().enumerate() {
                    if index > 0 {
                        self.out.push_str(", ");
                    }
                    self.out.push_str(&quote_string(&path.value));
                }
                if let Some(alias) = alias {
                    let _ = write!(self.out, " as {}", alias.name);
                }
            }
            StatementKind::Recipe { title } => {
                let _ = write!(self.out, "recipe {}", quote_string(&title.value));
            }
            StatementKind::About { text } => {
                let _ = write!(self.out, "about {}", quote_string(&text.value));
            }
            StatementKind::Parameter { name, default, documentation } => {
                let _ = write!(self.out, "parameter {} = ", name.name);
                self.expr(default, 0, level);
                if let Some(documentation) = documentation {
                    let _ = write!(self.out, " {}", quote_string(&documentation.value));
                }
            }
            StatementKind::Output { name, value, documentation } => {
                let _ = write!(self.out, "output {} = ", name.name);
                self.expr(value, 0, level);
                if let Some(documentation) = documentation {
                    let _ = write!(self.out, " {}", quote_string(&documentation.value));
                }
            }
            StatementKind::Setting { options } => {
                for (index, option) in options.iter().enumerate() {
                    self.out.push_str(if index == 0 { "setting " } else { ", " });
                    self.out.push_str(&option.name.name);
                    self.out.push(' ');
                    self.term(&option.value, false, level);
                }
            }
            StatementKind::Expression(expr) => self.expr(expr, 0, level),
        }
    }

    /// Prints `expr`, in parentheses when it binds less tightly than `minimum`.
    fn expr(&mut self, expr: &Expr, minimum: u8, level: usize) {
        let own = expr.precedence();
        let grouped = own < minimum;
        if grouped {
            self.out.push('(');
        }
        self.bare(expr, own, level);
        if grouped {
            self.out.push(')');
        }
    }

    /// A selector or option value: a term, or `term to term` for selectors.
    fn term(&mut self, expr: &Expr, allow_range: bool, level: usize) {
        if allow_range {
            if let ExprKind::Range { from, to } = &expr.kind {
                if from.is_term() && to.is_term() {
                    self.bare(from, from.precedence(), level);
                    self.out.push_str(" to ");
                    self.bare(to, to.precedence(), level);
                    return;
                }
            }
        }
        self.expr(expr, precedence::POSTFIX, level);
    }

    fn bare(&mut self, expr: &Expr, own: u8, level: usize) {
        match &expr.kind {
            ExprKind::Number { value, unit } => {
                self.out.push_str(&format_number(*value));
                if let Some(unit) = unit {
                    self.out.push(' ');
                    self.out.push_str(&unit.text);
                }
            }
            ExprKind::Angle { value, hemisphere } => {
                let _ = write!(self.out, "{} {}", format_number(*value), hemisphere.word());
            }
            ExprKind::String(value) => self.out.push_str(&quote_string(value)),
            ExprKind::Bool(value) => self.out.push_str(if *value { "true" } else { "false" }),
            ExprKind::Name(name) => self.out.push_str(name),
            ExprKind::Call { callee, arguments, options } => {
                self.expr(callee, precedence::POSTFIX, level);
                self.out.push('(');
                for (index, argument) in arguments.iter().enumerate() {
                    if index > 0 {
                        self.out.push_str(", ");
                    }
                    // `f(g(x) with a 1, h(y))` would read `h (y)` as a second
                    // option, so a call with options is grouped unless last.
                    // The same holds when the options end a longer
                    // argument: `f(-g() with a 1, h(y))`.
                    if ends_with_options(argument) && index + 1 < arguments.len() {
                        self.out.push('(');
                        self.bare(argument, argument.precedence(), level);
                        self.out.push(')');
                    } else {
                        self.expr(argument, 0, level);
                    }
                }
                self.out.push(')');
                for (index, option) in options.iter().enumerate() {
                    self.out.push_str(if index == 0 { " with " } else { ", " });
                    self.out.push_str(&option.name.name);
                    self.out.push(' ');
                    self.term(&option.value, false, level);
                }
            }
            ExprKind::Member { base, member } => {
                // `5 m.x` would read `.x` as part of the unit.
                if matches!(&base.kind, ExprKind::Number { unit: Some(_), .. }) {
                    self.out.push('(');
                    self.bare(base, base.precedence(), level);
                    self.out.push(')');
                } else {
                    self.expr(base, precedence::POSTFIX, level);
                }
                self.out.push('.');
                self.out.push_str(&member.name);
            }
            ExprKind::Unary { operator, operand } => {
                match operator {
                    UnaryOperator::Negate => self.out.push('-'),
                    UnaryOperator::Not => self.out.push_str("not "),
                }
                self.expr(operand, own, level);
            }
            ExprKind::Binary { operator, left, right } => {
                let (left_minimum, right_minimum) = match operator {
                    // right-associative
                    BinaryOperator::Power => (own + 1, own),
                    // non-associative
                    _ if operator.is_comparison() => (own + 1, own + 1),
                    // left-associative
                    _ => (own, own + 1),
                };
                self.expr(left, left_minimum, level);
                let _ = write!(self.out, " {} ", operator.symbol());
                self.expr(right, right_minimum, level);
            }
            ExprKind::Range { from, to } => {
                // In `x at a to b` the selection takes the whole range, so a
                // range starting with a selection groups it: `(x at a) to b`.
                if ends_with_selection(from) {
                    self.out.push('(');
                    self.bare(from, from.precedence(), level);
                    self.out.push(')');
                } else {
                    self.expr(from, own + 1, level);
                }
                self.out.push_str(" to ");
                self.expr(to, own + 1, level);
            }
            ExprKind::Select { base, how, selector } => {
                self.expr(base, own, level);
                let _ = write!(self.out, " {} ", how.word());
                self.term(selector, true, level);
            }
            ExprKind::Convert { value, unit } => {
                self.expr(value, own, level);
                let _ = write!(self.out, " as {}", unit.text);
            }
            ExprKind::If { condition, then_branch, else_branch } => {
                self.out.push_str("if ");
                self.expr(condition, 0, level);
                self.out.push_str(" then ");
                self.expr(then_branch, 0, level);
                self.out.push_str(" else ");
                self.expr(else_branch, 0, level);
            }
            ExprKind::Block { statements } => {
                self.out.push_str("{\n");
                self.statements(statements, level + 1);
                for _ in 0..level {
                    self.out.push_str(INDENT);
                }
                self.out.push('}');
            }
        }
    }
}

/// True when the printed text of `expr` may end with a call's options, which
/// a following `, name value` would extend. Errs towards true: a needless
/// pair of parentheses reads back as the same tree.
fn ends_with_options(expr: &Expr) -> bool {
    match &expr.kind {
        ExprKind::Call { options, .. } => !options.is_empty(),
        ExprKind::Unary { operand, .. } => ends_with_options(operand),
        ExprKind::Binary { right, .. } => ends_with_options(right),
        ExprKind::Range { to, .. } => ends_with_options(to),
        ExprKind::Select { selector, .. } => ends_with_options(selector),
        ExprKind::If { else_branch, .. } => ends_with_options(else_branch),
        _ => false,
    }
}

/// True when the printed text of `expr` ends with a selector that a
/// following `to` would extend.
fn ends_with_selection(expr: &Expr) -> bool {
    match &expr.kind {
        ExprKind::Select { .. } => true,
        ExprKind::Binary { right, .. } => right.precedence() >= expr.precedence() && ends_with_selection(right),
        ExprKind::Unary { operand, .. } => operand.precedence() >= expr.precedence() && ends_with_selection(operand),
        _ => false,
    }
}

impl fmt::Display for Program {
    fn fmt(&self, formatter: &mut fmt::Formatter<'_>) -> fmt::Result {
        let mut printer = Printer { out: String::new() };
        printer.statements(&self.statements, 0);
        formatter.write_str(&printer.out)
    }
}

impl fmt::Display for Statement {
    fn fmt(&self, formatter: &mut fmt::Formatter<'_>) -> fmt::Result {
        let mut printer = Printer { out: String::new() };
        printer.statement(self, 0);
        formatter.write_str(&printer.out)
    }
}

impl fmt::Display for Expr {
    fn fmt(&self, formatter: &mut fmt::Formatter<'_>) -> fmt::Result {
        let mut printer = Printer { out: String::new() };
        printer.expr(self, 0, 0);
        formatter.write_str(&printer.out)
    }
}
