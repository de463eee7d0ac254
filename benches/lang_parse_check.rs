//! Times parsing and checking a realistic 50-line recipe (no data read).
//! Run with `cargo bench --bench lang_parse_check`; it prints the median
//! of many runs. The target is well under a millisecond per parse+check.

#[path = "../tests/support/mod.rs"]
mod support;

use std::time::{Duration, Instant};

use baroc::lang::check::check;
use baroc::lang::parser::{is_complete, parse};

fn median(mut samples: Vec<Duration>) -> Duration {
    samples.sort();
    samples[samples.len() / 2]
}

fn main() {
    let source = include_str!("../tests/data/lower_troposphere_recipe.baroc");
    let environment = support::environment();
    // Fail loudly if the recipe stopped being valid: a benchmark of error
    // paths would measure something else.
    let program = parse(source).expect("the benchmark recipe parses");
    let report = check(&program, &environment);
    assert!(!report.has_errors(), "{:#?}", report.diagnostics);

    let runs = 2000;
    let mut parse_times = Vec::with_capacity(runs);
    let mut check_times = Vec::with_capacity(runs);
    let mut complete_times = Vec::with_capacity(runs);
    for _ in 0..runs {
        let start = Instant::now();
        let program = std::hint::black_box(parse(std::hint::black_box(source)).unwrap());
        let parsed = Instant::now();
        let report = std::hint::black_box(check(&program, &environment));
        let checked = Instant::now();
        std::hint::black_box(is_complete(source));
        let completed = Instant::now();
        assert!(!report.has_errors());
        parse_times.push(parsed - start);
        check_times.push(checked - parsed);
        complete_times.push(completed - checked);
    }
    let (parse_median, check_median) = (median(parse_times), median(check_times));
    println!(
        "recipe of {} lines, {} bytes: parse {:?}, check {:?}, parse+check {:?}, is_complete {:?} (medians of {runs} runs)",
        source.lines().count(),
        source.len(),
        parse_median,
        check_median,
        parse_median + check_median,
        median(complete_times),
    );
}
