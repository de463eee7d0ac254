//! Grammar tests: every construct parses to the expected tree, operators
//! bind as the language design's precedence table says, spans point at the
//! right characters, lines continue where a statement cannot end, and
//! adversarial nesting is refused with an error rather than a crash.

use baroc::lang::parser::{is_complete, parse, parse_expression, Completeness};
use baroc::lang::syntax::*;

/// A compact prefix form of a tree, to state expected shapes briefly.
fn sexpr(expr: &Expr) -> String {
    match &expr.kind {
        ExprKind::Number { value, unit: Some(unit) } => format!("{}[{}]", format_number(*value), unit.text),
        ExprKind::Number { value, unit: None } => format_number(*value),
        ExprKind::Angle { value, hemisphere } => format!("{}{}", format_number(*value), hemisphere.word()),
        ExprKind::String(value) => format!("{value:?}"),
        ExprKind::Bool(value) => value.to_string(),
        ExprKind::Name(name) => name.clone(),
        ExprKind::Call { callee, arguments, options } => {
            let mut parts = vec![sexpr(callee)];
            parts.extend(arguments.iter().map(sexpr));
            for option in options {
                parts.push(format!("{}={}", option.name.name, sexpr(&option.value)));
            }
            format!("(call {})", parts.join(" "))
        }
        ExprKind::Member { base, member } => format!("(. {} {})", sexpr(base), member.name),
        ExprKind::Unary { operator: UnaryOperator::Negate, operand } => format!("(neg {})", sexpr(operand)),
        ExprKind::Unary { operator: UnaryOperator::Not, operand } => format!("(not {})", sexpr(operand)),
        ExprKind::Binary { operator, left, right } => format!("({} {} {})", operator.symbol(), sexpr(left), sexpr(right)),
        ExprKind::Range { from, to } => format!("(to {} {})", sexpr(from), sexpr(to)),
        ExprKind::Select { base, how, selector } => format!("({} {} {})", how.word(), sexpr(base), sexpr(selector)),
        ExprKind::Convert { value, unit } => format!("(as {} {})", sexpr(value), unit.text),
        ExprKind::If { condition, then_branch, else_branch } => {
            format!("(if {} {} {})", sexpr(condition), sexpr(then_branch), sexpr(else_branch))
        }
        ExprKind::Block { statements } => {
            let parts: Vec<String> = statements.iter().map(statement_sexpr).collect();
            format!("(block {})", parts.join(" "))
        }
    }
}

fn statement_sexpr(statement: &Statement) -> String {
    match &statement.kind {
        StatementKind::Let { name, value } => format!("(let {} {})", name.name, sexpr(value)),
        StatementKind::Function { name, parameters, body } => {
            let names: Vec<&str> = parameters.iter().map(|parameter| parameter.name.as_str()).collect();
            format!("(function {} ({}) {})", name.name, names.join(" "), sexpr(body))
        }
        StatementKind::Open { paths, alias } => {
            let paths: Vec<String> = paths.iter().map(|path| format!("{:?}", path.value)).collect();
            match alias {
                Some(alias) => format!("(open {} as {})", paths.join(" "), alias.name),
                None => format!("(open {})", paths.join(" ")),
            }
        }
        StatementKind::Recipe { title } => format!("(recipe {:?})", title.value),
        StatementKind::About { text } => format!("(about {:?})", text.value),
        StatementKind::Parameter { name, default, documentation } => {
            format!("(parameter {} {} {:?})", name.name, sexpr(default), documentation.as_ref().map(|doc| &doc.value))
        }
        StatementKind::Output { name, value, documentation } => {
            format!("(output {} {} {:?})", name.name, sexpr(value), documentation.as_ref().map(|doc| &doc.value))
        }
        StatementKind::Setting { options } => {
            format!("(setting {})", options.iter().map(|o| format!("{} {}", o.name.name, sexpr(&o.value))).collect::<Vec<_>>().join(" "))
        }
        StatementKind::Expression(expr) => sexpr(expr),
    }
}

fn expression(source: &str) -> String {
    match parse_expression(source) {
        Ok(expr) => sexpr(&expr),
        Err(errors) => panic!("{source:?} did not parse: {errors:?}"),
    }
}

fn program(source: &str) -> Vec<String> {
    match parse(source) {
        Ok(program) => program.statements.iter().map(statement_sexpr).collect(),
        Err(errors) => panic!("{source:?} did not parse: {errors:?}"),
    }
}

fn text_of(source: &str, span: Span) -> &str {
    &source[span.start..span.end]
}

// ----------------------------------------------------------- precedence

#[test]
fn selections_bind_tighter_than_arithmetic() {
    // The design's example: the difference of two selected fields.
    assert_eq!(
        expression("temperature at 500 hPa - temperature at 850 hPa"),
        "(- (at temperature 500[hPa]) (at temperature 850[hPa]))"
    );
}

#[test]
fn negation_is_weaker_than_power() {
    assert_eq!(expression("-x^2"), "(neg (^ x 2))");
    assert_eq!(expression("(-x)^2"), "(^ (neg x) 2)");
    assert_eq!(expression("-x * y"), "(* (neg x) y)");
    assert_eq!(expression("a * -b"), "(* a (neg b))");
}

#[test]
fn power_is_right_associative_and_others_left() {
    assert_eq!(expression("a ^ b ^ c"), "(^ a (^ b c))");
    assert_eq!(expression("a - b - c"), "(- (- a b) c)");
    assert_eq!(expression("a / b / c"), "(/ (/ a b) c)");
    assert_eq!(expression("a + b * c ^ d"), "(+ a (* b (^ c d)))");
}

#[test]
fn ranges_sit_between_comparisons_and_sums() {
    assert_eq!(expression("1000 hPa to 500 hPa"), "(to 1000[hPa] 500[hPa])");
    assert_eq!(expression("p + 10 hPa to q"), "(to (+ p 10[hPa]) q)");
    assert_eq!(expression("a to b == c"), "(== (to a b) c)");
}

#[test]
fn logic_binds_loosest_and_not_is_above_comparison() {
    assert_eq!(expression("not a < b and c or d"), "(or (and (not (< a b)) c) d)");
    assert_eq!(expression("a or b and c"), "(or a (and b c))");
    assert_eq!(expression("if a > 1 K then x else y + 1"), "(if (> a 1[K]) x (+ y 1))");
    assert_eq!(expression("if c then if d then x else y else z"), "(if c (if d x y) z)");
}

#[test]
fn conversion_binds_between_power_and_selection() {
    assert_eq!(expression("thickness(lower) as dam"), "(as (call thickness lower) dam)");
    assert_eq!(expression("temperature at 500 hPa as degC"), "(as (at temperature 500[hPa]) degC)");
    assert_eq!(expression("-x as K"), "(neg (as x K))");
    assert_eq!(expression("a - b as K"), "(- a (as b K))");
    assert_eq!(expression("(a - b) as K/day"), "(as (- a b) K/day)");
    assert_eq!(expression("x as K/(100 km)"), "(as x K/(100 km))");
}

#[test]
fn selections_chain_left_to_right() {
    assert_eq!(
        expression("temperature at 500 hPa in box(40 north to 60 north, 30 west to 0 east)"),
        "(in (at temperature 500[hPa]) (call box (to 40north 60north) (to 30west 0east)))"
    );
    assert_eq!(
        expression("wind at point(52.5 north, 21.0 west) during \"2026-10-14 00:00\" to \"2026-10-15 00:00\""),
        "(during (at wind (call point 52.5north 21west)) (to \"2026-10-14 00:00\" \"2026-10-15 00:00\"))"
    );
    assert_eq!(expression("temperature over 1000 hPa to 500 hPa"), "(over temperature (to 1000[hPa] 500[hPa]))");
    assert_eq!(expression("temperature at \"2026-10-14 06:00\""), "(at temperature \"2026-10-14 06:00\")");
    assert_eq!(expression("x at layer.bottom"), "(at x (. layer bottom))");
}

#[test]
fn options_follow_calls() {
    assert_eq!(
        expression("geostrophic_wind(geopotential_height at 500 hPa) with equator_band 10 degrees"),
        "(call geostrophic_wind (at geopotential_height 500[hPa]) equator_band=10[degrees])"
    );
    assert_eq!(
        expression("thermal_wind(lower) with route mean_temperature, equator_band 5 degrees"),
        "(call thermal_wind lower route=mean_temperature equator_band=5[degrees])"
    );
    // Options bind tighter than selection and conversion.
    assert_eq!(
        expression("thermal_wind(lower) with route thickness in area as kt"),
        "(as (in (call thermal_wind lower route=thickness) area) kt)"
    );
    // Inside an argument list, a comma followed by something that is not
    // `name value` starts the next argument.
    assert_eq!(
        expression("f(g(x) with a 1, y)"),
        "(call f (call g x a=1) y)"
    );
}

#[test]
fn options_not_after_a_call_are_refused() {
    let errors = parse("x with a 1").unwrap_err();
    assert!(errors[0].message.contains("follow a call"), "{errors:?}");
    let errors = parse("f(x) with a 1 with b 2").unwrap_err();
    assert!(errors[0].message.contains("one `with`"), "{errors:?}");
}

#[test]
fn comparisons_and_ranges_do_not_chain() {
    let errors = parse("a < b < c").unwrap_err();
    assert_eq!(errors[0].message, "comparisons cannot be chained");
    assert_eq!(expression("(a < b) == c"), "(== (< a b) c)");
    let errors = parse("1 to 2 to 3").unwrap_err();
    assert_eq!(errors[0].message, "a range has two ends");
}

#[test]
fn postfix_calls_and_members() {
    assert_eq!(expression("thermal_wind(lower).eastward"), "(. (call thermal_wind lower) eastward)");
    assert_eq!(expression("point(1 north, 2 east).latitude"), "(. (call point 1north 2east) latitude)");
    assert_eq!(expression("f()"), "(call f)");
    assert_eq!(expression("f(a, b,)"), "(call f a b)");
}

#[test]
fn literals() {
    assert_eq!(expression("500 hPa"), "500[hPa]");
    assert_eq!(expression("10 m/s"), "10[m/s]");
    assert_eq!(expression("1.5e-4 s-1"), "0.00015[s-1]");
    assert_eq!(expression("3 m2 s-2"), "3[m2 s-2]");
    assert_eq!(expression("3  m2   s-2"), "3[m2 s-2]");
    assert_eq!(expression("60 m"), "60[m]");
    assert_eq!(expression("20 kt"), "20[kt]");
    assert_eq!(expression("7"), "7");
    assert_eq!(expression("500hPa"), "500[hPa]");
    assert_eq!(expression("52.5 north"), "52.5north");
    assert_eq!(expression("170 east"), "170east");
    assert_eq!(expression("10 south"), "10south");
    assert_eq!(expression("\"a \\\"quoted\\\" path\\n\""), "\"a \\\"quoted\\\" path\\n\"");
    assert_eq!(expression("true"), "true");
    assert_eq!(expression("false"), "false");
    // A spaced slash is division, a tight one is part of the unit.
    assert_eq!(expression("10 m / s"), "(/ 10[m] s)");
    // Words of the language end a unit.
    assert_eq!(expression("2 K to 3 K"), "(to 2[K] 3[K])");
    // `northern` is a name, not the keyword `north` plus a letter.
    assert_eq!(expression("northern"), "northern");
    assert_eq!(expression("interpolate(x, 500 hPa)"), "(call interpolate x 500[hPa])");
}

// ------------------------------------------------------------ statements

#[test]
fn every_statement_form() {
    let source = r#"
open "case.nc"                         # open a dataset
open "t.nc", "z.nc" as autumn
let lower = 1000 hPa to 500 hPa
function warm_push(layer) = temperature_advection(layer) as K/day
function shear_ratio(layer) {
    let t = thermal_wind(layer)
    speed(t) / speed(wind_shear(layer))
}
recipe "Lower-tropospheric thermal wind"
about "Free text documentation of the recipe"
parameter layer = 1000 hPa to 700 hPa  "The layer to diagnose"
parameter area  = box(40 north to 65 north, 50 west to 5 east) "Region"
output shear = thermal_wind(layer) in area  "Thermal wind of the layer"
output plain = thickness(layer)
thickness(lower) as dam
"#;
    assert_eq!(
        program(source),
        vec![
            "(open \"case.nc\")",
            "(open \"t.nc\" \"z.nc\" as autumn)",
            "(let lower (to 1000[hPa] 500[hPa]))",
            "(function warm_push (layer) (as (call temperature_advection layer) K/day))",
            "(function shear_ratio (layer) (block (let t (call thermal_wind layer)) (/ (call speed t) (call speed (call wind_shear layer)))))",
            "(recipe \"Lower-tropospheric thermal wind\")",
            "(about \"Free text documentation of the recipe\")",
            "(parameter layer (to 1000[hPa] 700[hPa]) Some(\"The layer to diagnose\"))",
            "(parameter area (call box (to 40north 65north) (to 50west 5east)) Some(\"Region\"))",
            "(output shear (in (call thermal_wind layer) area) Some(\"Thermal wind of the layer\"))",
            "(output plain (call thickness layer) None)",
            "(as (call thickness lower) dam)",
        ]
    );
}

#[test]
fn blocks_are_expressions() {
    assert_eq!(program("let x = { let a = 1; a + 2 }"), vec!["(let x (block (let a 1) (+ a 2)))"]);
    assert_eq!(program("function f() {\n}"), vec!["(function f () (block ))"]);
}

#[test]
fn statements_split_on_new_lines_and_semicolons() {
    assert_eq!(program("a; b\nc\n\n  ;; d"), vec!["a", "b", "c", "d"]);
    // A new line ends a statement where it can end, even before `-` or `(`.
    assert_eq!(program("let a = b\n-c"), vec!["(let a b)", "(neg c)"]);
    assert_eq!(program("let a = b\n(c)"), vec!["(let a b)", "c"]);
}

#[test]
fn lines_continue_after_operators_commas_brackets_and_words() {
    assert_eq!(program("let a = 1 +\n  2"), vec!["(let a (+ 1 2))"]);
    assert_eq!(program("let a =\n  2"), vec!["(let a 2)"]);
    assert_eq!(program("f(a,\n  b)"), vec!["(call f a b)"]);
    assert_eq!(program("f(\n  a\n)"), vec!["(call f a)"]);
    assert_eq!(program("x at\n 500 hPa"), vec!["(at x 500[hPa])"]);
    assert_eq!(program("1000 hPa to\n 500 hPa"), vec!["(to 1000[hPa] 500[hPa])"]);
    assert_eq!(program("x over 1000 hPa to\n 500 hPa"), vec!["(over x (to 1000[hPa] 500[hPa]))"]);
    assert_eq!(program("f(x) with\n  route a,\n  band 1"), vec!["(call f x route=a band=1)"]);
    assert_eq!(program("let y = if c\n  then a\n  else b"), vec!["(let y (if c a b))"]);
    // A comment may end a continued line.
    assert_eq!(program("let a = 1 + # more follows\n  2"), vec!["(let a (+ 1 2))"]);
}

#[test]
fn completeness() {
    let incomplete = |source: &str| matches!(is_complete(source), Completeness::Incomplete { .. });
    assert_eq!(is_complete("let a = 1"), Completeness::Complete);
    assert_eq!(is_complete(""), Completeness::Complete);
    assert_eq!(is_complete("# only a comment"), Completeness::Complete);
    for source in [
        "let a = 1 +",
        "f(a,",
        "f(",
        "function f(x) {",
        "function f(x) {\n  let a = 1",
        "x at",
        "x over 1000 hPa to",
        "x in",
        "x during",
        "f(x) with",
        "let s = \"unclosed",
        "if c then a",
        "let a = 1 + # comment",
        "x as",
    ] {
        assert!(incomplete(source), "{source:?} should be incomplete, is {:?}", is_complete(source));
    }
    for source in ["1 2", ")", "let = 3", "f(x))", "a < b < c", "}"] {
        assert_eq!(is_complete(source), Completeness::Invalid, "{source:?}");
    }
    assert_eq!(is_complete("function f(x) {"), Completeness::Incomplete { indent: "    ".to_string() });
    assert_eq!(is_complete("f(g(x,"), Completeness::Incomplete { indent: "        ".to_string() });
    assert_eq!(is_complete("  let a = 1 +"), Completeness::Incomplete { indent: "      ".to_string() });
    assert_eq!(is_complete("let s = \"abc"), Completeness::Incomplete { indent: String::new() });
}

// ----------------------------------------------------------------- spans

#[test]
fn spans_point_at_the_written_characters() {
    let source = "let upper = temperature at 500 hPa\nthickness((1000 hPa to 500 hPa)) as dam";
    let parsed = parse(source).unwrap();
    let StatementKind::Let { name, value } = &parsed.statements[0].kind else { panic!() };
    assert_eq!(text_of(source, name.span), "upper");
    assert_eq!(text_of(source, parsed.statements[0].span), "let upper = temperature at 500 hPa");
    assert_eq!(text_of(source, value.span), "temperature at 500 hPa");
    let ExprKind::Select { base, selector, .. } = &value.kind else { panic!() };
    assert_eq!(text_of(source, base.span), "temperature");
    assert_eq!(text_of(source, selector.span), "500 hPa");
    let ExprKind::Number { unit: Some(unit), .. } = &selector.kind else { panic!() };
    assert_eq!(text_of(source, unit.span), "hPa");

    let StatementKind::Expression(convert) = &parsed.statements[1].kind else { panic!() };
    assert_eq!(text_of(source, convert.span), "thickness((1000 hPa to 500 hPa)) as dam");
    let ExprKind::Convert { value, unit } = &convert.kind else { panic!() };
    assert_eq!(text_of(source, unit.span), "dam");
    let ExprKind::Call { arguments, .. } = &value.kind else { panic!() };
    // A parenthesised expression's span includes its parentheses.
    assert_eq!(text_of(source, arguments[0].span), "(1000 hPa to 500 hPa)");
    let ExprKind::Range { from, to } = &arguments[0].kind else { panic!() };
    assert_eq!(text_of(source, from.span), "1000 hPa");
    assert_eq!(text_of(source, to.span), "500 hPa");
}

#[test]
fn spans_of_options_members_and_strings() {
    let source = "thermal_wind(lower) with route thickness, equator_band 10 degrees\nwind.eastward\nopen \"é.nc\"";
    let parsed = parse(source).unwrap();
    let StatementKind::Expression(call) = &parsed.statements[0].kind else { panic!() };
    assert_eq!(text_of(source, call.span), "thermal_wind(lower) with route thickness, equator_band 10 degrees");
    let ExprKind::Call { options, .. } = &call.kind else { panic!() };
    assert_eq!(text_of(source, options[1].name.span), "equator_band");
    assert_eq!(text_of(source, options[1].value.span), "10 degrees");
    let StatementKind::Expression(member) = &parsed.statements[1].kind else { panic!() };
    let ExprKind::Member { member, .. } = &member.kind else { panic!() };
    assert_eq!(text_of(source, member.span), "eastward");
    let StatementKind::Open { paths, .. } = &parsed.statements[2].kind else { panic!() };
    assert_eq!(text_of(source, paths[0].span), "\"é.nc\"");
    assert_eq!(paths[0].value, "é.nc");
}

#[test]
fn error_spans_point_at_the_offending_token() {
    let source = "let a = f(1,\n  2 3)";
    let errors = parse(source).unwrap_err();
    assert_eq!(text_of(source, errors[0].span), "3");
    let source = "let x = 1e999";
    let errors = parse(source).unwrap_err();
    assert_eq!(text_of(source, errors[0].span), "1e999");
}

// -------------------------------------------------------------- printing

#[test]
fn printing_gives_canonical_source_that_parses_to_the_same_tree() {
    let sources = [
        "temperature at 500 hPa - temperature at 850 hPa",
        "-x ^ 2",
        "(-x) ^ 2",
        "a - (b - c)",
        "a ^ b ^ c",
        "(a ^ b) ^ c",
        "not (a and b)",
        "(if a then b else c) + 1",
        "(x at 500 hPa) to y",
        "f(g(x) with a 1, h(y))",
        "(5 m).eastward",
        "x at (p + 1 hPa)",
        "x at (a to b + c)",
        "let y = {\n    let a = 1\n    a\n}",
        "function f(a, b) = a + b",
        "function g(layer) {\n    speed(thermal_wind(layer))\n}",
        "open \"a.nc\", \"b.nc\" as pair",
        "parameter p = 500 hPa \"doc \\\"quoted\\\"\"",
        "output o = x \"d\"",
        "wind at point(52.5 north, 21 west) during \"2026-10-14 00:00\" to \"2026-10-15 00:00\"",
        "x as K/(100 km)",
        "1e-7 s-1 + 1e300",
        // Options ending a longer argument are grouped (found by scripts/fuzz).
        "a(-(b() with c 0), a(0))",
        "a(1 + (b() with c 0), d)",
    ];
    for source in sources {
        let first = parse(source).unwrap_or_else(|errors| panic!("{source}: {errors:?}"));
        let printed = first.to_string();
        let second = parse(&printed).unwrap_or_else(|errors| panic!("printed {printed:?}: {errors:?}"));
        assert_eq!(first.without_spans(), second.without_spans(), "{source} printed as {printed}");
        // Canonical text is a fixed point.
        assert_eq!(second.to_string(), printed);
    }
}

// ------------------------------------------------------- hostile input

fn deep_in_small_stack(source: String) -> Result<(), String> {
    // A 2 MiB stack, as test threads get by default: an overflow here would
    // abort the process, which is the failure this test exists to catch.
    std::thread::Builder::new()
        .stack_size(2 << 20)
        .spawn(move || {
            let result = parse(&source);
            let _ = is_complete(&source);
            if let Ok(program) = &result {
                let _ = program.to_string();
                let environment = baroc::lang::check::Environment::default();
                let _ = baroc::lang::check::check(program, &environment);
            }
            result.map(|_| ()).map_err(|errors| errors[0].message.clone())
        })
        .unwrap()
        .join()
        .unwrap()
}

#[test]
fn very_deep_nesting_is_an_error_not_a_crash() {
    let parentheses = format!("{}x{}", "(".repeat(10_000), ")".repeat(10_000));
    assert!(deep_in_small_stack(parentheses).unwrap_err().contains("nested too deeply"));
    let braces = format!("{}x{}", "{".repeat(10_000), "}".repeat(10_000));
    assert!(deep_in_small_stack(braces).is_err());
    let negations = format!("{}x", "-".repeat(10_000));
    assert!(deep_in_small_stack(negations).is_err());
    let nots = format!("{}x", "not ".repeat(10_000));
    assert!(deep_in_small_stack(nots).is_err());
    let powers = format!("x{}", "^x".repeat(10_000));
    assert!(deep_in_small_stack(powers).is_err());
    let ifs = format!("{}x{}", "if c then ".repeat(5_000), " else y".repeat(5_000));
    assert!(deep_in_small_stack(ifs).is_err());
    // A long flat chain builds a deep tree; refused by the tree depth limit.
    let source = format!("x{}", " + x".repeat(10_000));
    let errors = parse(&source).unwrap_err();
    assert!(errors[0].message.contains("nested too deeply"), "{errors:?}");
    // Pointed at the operator where the limit was passed: the 200th `+`.
    assert_eq!(errors[0].span.start, "x".len() + 199 * " + x".len() + 1);
    assert!(deep_in_small_stack(source).is_err());
    let too_long = format!("x{}", " + x".repeat(100_000));
    assert!(deep_in_small_stack(too_long).unwrap_err().contains("too long"));
    // Negations over many lines still count as one statement.
    let continued = format!("{}x", "-\n".repeat(10_000));
    assert!(deep_in_small_stack(continued).is_err());
    let unclosed = "(".repeat(100_000);
    assert!(deep_in_small_stack(unclosed).is_err());
}

#[test]
fn nesting_just_under_the_limits_is_accepted_in_a_small_stack() {
    let parentheses = format!("{}x + 1{}", "(".repeat(99), ")".repeat(99));
    deep_in_small_stack(parentheses).unwrap();
    let mixed = format!("{}x{}", "f(-(".repeat(30), "))".repeat(30));
    deep_in_small_stack(mixed).unwrap();
    let sum = format!("x{}", " + x".repeat(150));
    deep_in_small_stack(sum).unwrap();
}

#[test]
fn a_setting_is_written_like_the_options_of_a_call() {
    // `setting` takes name-value pairs as `with` does after a call, and
    // prints back the same way.
    assert_eq!(program("setting below_ground standard_lapse_rate"), vec!["(setting below_ground standard_lapse_rate)"]);
    let source = "setting below_ground missing\nlet t = temperature at 900 hPa";
    let parsed = parse(source).unwrap();
    assert_eq!(parsed.to_string().trim_end(), source);
    // `setting` is a reserved word.
    assert!(parse("let setting = 1").is_err());
}
