//! Property tests of the language front half.
//!
//! 1. Round trip: random syntax trees are printed as canonical source and
//!    parsed back; the tree must come back unchanged (spans aside).
//! 2. No panic: random text and mutations of valid programs go through
//!    `parse`, `is_complete`, `check` and the renderer; none may panic,
//!    whatever the input.
//!
//! The number of cases can be raised with `BAROC_PROPERTY_CASES`; each test
//! prints how many it ran.

mod support;

use proptest::prelude::*;
use proptest::strategy::ValueTree;
use proptest::test_runner::{Config, TestCaseError, TestRunner};

use baroc::lang::check::{check, Environment};
use baroc::lang::diagnostic::{render_all, RenderOptions};
use baroc::lang::parser::{is_complete, is_keyword, parse};
use baroc::lang::syntax::*;

fn cases(default: u32) -> u32 {
    std::env::var("BAROC_PROPERTY_CASES").ok().and_then(|text| text.parse().ok()).unwrap_or(default)
}

fn span() -> Span {
    Span::default()
}

// ------------------------------------------------------------ generators

fn identifier_text() -> impl Strategy<Value = String> {
    "[a-z_][a-z0-9_]{0,7}".prop_filter("not a keyword", |name| !is_keyword(name))
}

fn identifier() -> impl Strategy<Value = Identifier> {
    identifier_text().prop_map(|name| Identifier { name, span: span() })
}

/// Units in the normalised form the parser produces.
fn unit_text() -> impl Strategy<Value = UnitText> {
    prop::sample::select(vec![
        "hPa", "Pa", "K", "degC", "m", "km", "dam", "m/s", "kt", "s-1", "m2 s-2", "m s-1", "K/day", "K/(100 km)",
        "degrees", "K/s", "m.s-1", "%",
    ])
    .prop_map(|text| UnitText { text: text.to_string(), span: span() })
}

fn number_value() -> impl Strategy<Value = f64> {
    prop_oneof![
        (0u32..2000).prop_map(f64::from),
        (0u32..100_000).prop_map(|value| f64::from(value) / 100.0),
        (0.0f64..1e20),
        (1e-12f64..1e-3),
        prop::num::f64::POSITIVE | prop::num::f64::ZERO,
    ]
    .prop_filter("finite", |value| value.is_finite())
}

fn string_value() -> impl Strategy<Value = String> {
    prop_oneof!["[a-zA-Z0-9 .:_-]{0,12}", any::<String>().prop_map(|text| text.chars().take(12).collect()),]
}

fn hemisphere() -> impl Strategy<Value = Hemisphere> {
    prop::sample::select(vec![Hemisphere::North, Hemisphere::South, Hemisphere::East, Hemisphere::West])
}

fn binary_operator() -> impl Strategy<Value = BinaryOperator> {
    use BinaryOperator::*;
    prop::sample::select(vec![
        Or, And, Less, LessEqual, Greater, GreaterEqual, Equal, NotEqual, Add, Subtract, Multiply, Divide, Power,
    ])
}

fn select_how() -> impl Strategy<Value = SelectHow> {
    prop::sample::select(vec![SelectHow::At, SelectHow::Over, SelectHow::In, SelectHow::During])
}

fn expr(kind: ExprKind) -> Expr {
    Expr::new(kind, span())
}

fn leaf() -> impl Strategy<Value = Expr> {
    prop_oneof![
        (number_value(), prop::option::of(unit_text())).prop_map(|(value, unit)| expr(ExprKind::Number { value, unit })),
        (number_value(), hemisphere()).prop_map(|(value, hemisphere)| expr(ExprKind::Angle { value, hemisphere })),
        string_value().prop_map(|value| expr(ExprKind::String(value))),
        any::<bool>().prop_map(|value| expr(ExprKind::Bool(value))),
        identifier_text().prop_map(|name| expr(ExprKind::Name(name))),
        identifier_text().prop_map(|name| expr(ExprKind::Name(name))),
    ]
}

fn expression() -> impl Strategy<Value = Expr> {
    leaf().prop_recursive(6, 48, 4, |inner| {
        let boxed = |expr: Expr| Box::new(expr);
        prop_oneof![
            // Calls, mostly of names, sometimes with options.
            (
                prop_oneof![3 => identifier_text().prop_map(|name| expr(ExprKind::Name(name))), 1 => inner.clone()],
                prop::collection::vec(inner.clone(), 0..3),
                prop::collection::vec((identifier(), inner.clone()), 0..3),
            )
                .prop_map(move |(callee, arguments, options)| expr(ExprKind::Call {
                    callee: boxed(callee),
                    arguments,
                    options: options.into_iter().map(|(name, value)| CallOption { name, value }).collect(),
                })),
            (inner.clone(), identifier()).prop_map(move |(base, member)| expr(ExprKind::Member { base: boxed(base), member })),
            (any::<bool>(), inner.clone()).prop_map(move |(not, operand)| expr(ExprKind::Unary {
                operator: if not { UnaryOperator::Not } else { UnaryOperator::Negate },
                operand: boxed(operand),
            })),
            (binary_operator(), inner.clone(), inner.clone()).prop_map(move |(operator, left, right)| expr(ExprKind::Binary {
                operator,
                left: boxed(left),
                right: boxed(right),
            })),
            (inner.clone(), inner.clone()).prop_map(move |(from, to)| expr(ExprKind::Range { from: boxed(from), to: boxed(to) })),
            (inner.clone(), select_how(), inner.clone()).prop_map(move |(base, how, selector)| expr(ExprKind::Select {
                base: boxed(base),
                how,
                selector: boxed(selector),
            })),
            (inner.clone(), unit_text()).prop_map(move |(value, unit)| expr(ExprKind::Convert { value: boxed(value), unit })),
            (inner.clone(), inner.clone(), inner.clone()).prop_map(move |(condition, then_branch, else_branch)| expr(ExprKind::If {
                condition: boxed(condition),
                then_branch: boxed(then_branch),
                else_branch: boxed(else_branch),
            })),
            prop::collection::vec(
                prop_oneof![
                    (identifier(), inner.clone()).prop_map(|(name, value)| StatementKind::Let { name, value }),
                    inner.clone().prop_map(StatementKind::Expression),
                ],
                0..3
            )
            .prop_map(|kinds| expr(ExprKind::Block {
                statements: kinds.into_iter().map(|kind| Statement { kind, span: span() }).collect(),
            })),
        ]
    })
}

fn string_literal() -> impl Strategy<Value = StringLiteral> {
    string_value().prop_map(|value| StringLiteral { value, span: span() })
}

fn statement() -> impl Strategy<Value = Statement> {
    prop_oneof![
        3 => expression().prop_map(StatementKind::Expression),
        2 => (identifier(), expression()).prop_map(|(name, value)| StatementKind::Let { name, value }),
        1 => (identifier(), prop::collection::vec(identifier(), 0..3), expression())
            .prop_map(|(name, parameters, body)| StatementKind::Function { name, parameters, body }),
        1 => (prop::collection::vec(string_literal(), 1..3), prop::option::of(identifier()))
            .prop_map(|(paths, alias)| StatementKind::Open { paths, alias }),
        1 => string_literal().prop_map(|title| StatementKind::Recipe { title }),
        1 => string_literal().prop_map(|text| StatementKind::About { text }),
        1 => (identifier(), expression(), prop::option::of(string_literal()))
            .prop_map(|(name, default, documentation)| StatementKind::Parameter { name, default, documentation }),
        1 => (identifier(), expression(), prop::option::of(string_literal()))
            .prop_map(|(name, value, documentation)| StatementKind::Output { name, value, documentation }),
    ]
    .prop_map(|kind| Statement { kind, span: span() })
}

fn program() -> impl Strategy<Value = Program> {
    prop::collection::vec(statement(), 0..5).prop_map(|statements| Program { statements, span: span() })
}

// ------------------------------------------------------------- round trip

#[test]
fn printed_trees_parse_back_to_the_same_tree() {
    let count = cases(3000);
    let mut runner = TestRunner::new(Config { cases: count, failure_persistence: None, ..Config::default() });
    let ran = std::cell::Cell::new(0u32);
    let result = runner.run(&program(), |tree| {
        ran.set(ran.get() + 1);
        let printed = tree.to_string();
        let parsed = parse(&printed)
            .map_err(|errors| TestCaseError::fail(format!("printed text does not parse:\n{printed}\n{errors:#?}")))?;
        prop_assert_eq!(parsed.without_spans(), tree.clone(), "printed as:\n{}", printed);
        // The canonical text is a fixed point of printing.
        // And it goes through everything a front end does without a panic.
        exercise(&printed);
        prop_assert_eq!(parsed.to_string(), printed);
        Ok(())
    });
    eprintln!("round trip: {} generated programs printed, parsed back and checked", ran.get());
    if let Err(error) = result {
        panic!("{error}");
    }
    assert!(ran.get() >= count);
}

// --------------------------------------------------------------- no panic

/// Valid programs to mutate.
const SEEDS: &[&str] = &[
    include_str!("data/lower_troposphere_recipe.baroc"),
    "let lower = 1000 hPa to 500 hPa\nthickness(lower) as dam\n",
    "temperature at 500 hPa - temperature at 850 hPa",
    "function f(layer) {\n    let t = thermal_wind(layer)\n    speed(t) / speed(wind_shear(layer))\n}\nf(850 hPa to 500 hPa)",
    "wind at point(52.5 north, 21.0 west) during \"2026-10-14 00:00\" to \"2026-10-15 00:00\"",
    "geostrophic_wind(geopotential_height at 500 hPa) with equator_band 10 degrees",
    "if speed(wind at 850 hPa) > 20 m/s and not false then 1 K else -x^2 as degC",
    "open \"winds_only.nc\" as w\nw.u at 300 hPa in box(40 north to 65 north, 50 west to 5 east)",
];

/// Tokens spliced into mutated text: the language's own pieces, so that
/// mutations reach deep into the grammar and the checker.
const TOKENS: &[&str] = &[
    "(", ")", "{", "}", ",", ".", ";", "\n", " ", "\"", "\\", "#", "-", "+", "*", "/", "^", "<", "<=", "==", "!=", "=",
    "to", "at", "over", "in", "during", "with", "as", "if", "then", "else", "and", "or", "not", "let", "function",
    "open", "recipe", "about", "parameter", "output", "north", "south", "east", "west", "true", "false", "500",
    "1e999", "0.5", "hPa", "K/(100 km)", "m2 s-2", "temperature", "wind", "thickness", "thermal_wind", "speed",
    "box", "point", "time", "x", "é", "名", "\t", "\r\n", "1000 hPa to 500 hPa", "\"2026-10-14 06:00\"",
];

#[derive(Debug, Clone)]
enum Edit {
    Insert(usize, usize),
    Delete(usize, usize),
    Replace(usize, usize, usize),
    Duplicate(usize, usize),
}

fn edits() -> impl Strategy<Value = Vec<Edit>> {
    let position = any::<usize>();
    let token = 0..TOKENS.len();
    prop::collection::vec(
        prop_oneof![
            (position, token.clone()).prop_map(|(at, token)| Edit::Insert(at, token)),
            (position, 1usize..8).prop_map(|(at, length)| Edit::Delete(at, length)),
            (position, 1usize..6, token).prop_map(|(at, length, token)| Edit::Replace(at, length, token)),
            (position, 1usize..20).prop_map(|(at, length)| Edit::Duplicate(at, length)),
        ],
        1..6,
    )
}

fn boundary(text: &str, at: usize) -> usize {
    let mut at = if text.is_empty() { 0 } else { at % (text.len() + 1) };
    while !text.is_char_boundary(at) {
        at -= 1;
    }
    at
}

fn apply(seed: &str, edits: &[Edit]) -> String {
    let mut text = seed.to_string();
    for edit in edits {
        match *edit {
            Edit::Insert(at, token) => {
                let at = boundary(&text, at);
                text.insert_str(at, TOKENS[token]);
            }
            Edit::Delete(at, length) | Edit::Replace(at, length, _) => {
                let start = boundary(&text, at);
                let end = boundary(&text, start + length);
                let end = end.max(start);
                text.replace_range(start..end, if let Edit::Replace(_, _, token) = edit { TOKENS[*token] } else { "" });
            }
            Edit::Duplicate(at, length) => {
                let start = boundary(&text, at);
                let end = boundary(&text, start + length).max(start);
                let piece = text[start..end].to_string();
                text.insert_str(end, &piece);
            }
        }
    }
    text
}

/// Everything a front end does with text; must never panic.
fn exercise(source: &str) {
    let environments = [support::environment(), Environment::default()];
    let _ = is_complete(source);
    match parse(source) {
        Ok(program) => {
            for environment in &environments {
                let report = check(&program, environment);
                let _ = render_all(&report.diagnostics, source, &RenderOptions::default());
            }
            // What parses also prints and parses again.
            let printed = program.to_string();
            let again = parse(&printed).unwrap_or_else(|errors| panic!("{source:?} printed as {printed:?}: {errors:?}"));
            assert_eq!(again.without_spans(), program.without_spans(), "{source:?}");
        }
        Err(errors) => {
            assert!(!errors.is_empty());
            for error in &errors {
                assert!(error.span.start <= error.span.end && error.span.end <= source.len(), "{source:?}: {error:?}");
            }
            let _ = render_all(&errors, source, &RenderOptions { color: true, ..Default::default() });
        }
    }
}

#[test]
fn mutated_programs_never_panic() {
    let count = cases(6000);
    let mut runner = TestRunner::new(Config { cases: count, failure_persistence: None, ..Config::default() });
    let ran = std::cell::Cell::new(0u32);
    let parsed = std::cell::Cell::new(0u32);
    let strategy = (0..SEEDS.len(), edits());
    let result = runner.run(&strategy, |(seed, edits)| {
        ran.set(ran.get() + 1);
        let source = apply(SEEDS[seed], &edits);
        if parse(&source).is_ok() {
            parsed.set(parsed.get() + 1);
        }
        exercise(&source);
        Ok(())
    });
    eprintln!("no panic: {} mutated programs ({} of them still parse)", ran.get(), parsed.get());
    if let Err(error) = result {
        panic!("{error}");
    }
    assert!(ran.get() >= count);
}

#[test]
fn random_text_never_panics() {
    let count = cases(5000);
    let mut runner = TestRunner::new(Config { cases: count, failure_persistence: None, ..Config::default() });
    let ran = std::cell::Cell::new(0u32);
    let pieces = prop::collection::vec(
        prop_oneof![
            3 => prop::sample::select(TOKENS.to_vec()).prop_map(str::to_string),
            1 => any::<char>().prop_map(|character| character.to_string()),
            1 => "[ -~]{1,6}",
        ],
        0..40,
    );
    let result = runner.run(&pieces, |pieces| {
        ran.set(ran.get() + 1);
        exercise(&pieces.join(" "));
        exercise(&pieces.concat());
        Ok(())
    });
    eprintln!("no panic: {} random texts, each tried with and without spaces between pieces", ran.get());
    if let Err(error) = result {
        panic!("{error}");
    }
    assert!(ran.get() >= count);
}

#[test]
fn the_generators_produce_what_they_should() {
    // A generator that could only make leaves would test little: check that
    // deep trees and every statement kind come out.
    let mut runner = TestRunner::deterministic();
    let strategy = program();
    let mut deepest = 0;
    let mut kinds = std::collections::HashSet::new();
    for _ in 0..300 {
        let tree = strategy.new_tree(&mut runner).unwrap().current();
        for statement in &tree.statements {
            kinds.insert(std::mem::discriminant(&statement.kind));
            let text = statement.to_string();
            deepest = deepest.max(text.matches('(').count());
        }
    }
    assert_eq!(kinds.len(), 8, "every statement kind is generated");
    assert!(deepest >= 5, "nested expressions are generated (deepest {deepest})");
}
