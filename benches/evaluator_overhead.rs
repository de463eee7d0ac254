//! The language's overhead over calling the engine directly, on the demo
//! case: the same diagnostic through a notebook session (parse, check,
//! evaluate, no rendering) and through `diagnostics::Case`. Prints medians
//! and the ratio. Run with `cargo bench --bench evaluator_overhead`.
//! Target: the session within 10 percent of the direct call.

use std::sync::Arc;
use std::time::{Duration, Instant};

use baroc::diagnostics::{Case, Layer, ThicknessRoute};
use baroc::io::{Dataset, Selection};
use baroc::session::Session;

fn median(mut samples: Vec<Duration>) -> Duration {
    samples.sort();
    samples[samples.len() / 2]
}

fn main() {
    let dir = std::env::temp_dir().join(format!("baroc-overhead-{}", std::process::id()));
    let path = baroc::demo::write(&dir).expect("demo case");
    let dataset = Arc::new(Dataset::open(&[&path]).expect("opens"));
    let layer = Layer::new(100000.0, 50000.0).0;
    let runs = 30;
    println!("{:<52} {:>10} {:>10} {:>8}", "diagnostic on the demo case (5 times, 61 x 107)", "engine ms", "language ms", "ratio");
    let cases: [(&str, &dyn Fn(&Case)); 3] = [
        ("thermal_wind(1000 hPa to 500 hPa)", &|c: &Case| {
            std::hint::black_box(c.thermal_wind(layer, ThicknessRoute::Temperature).unwrap());
        }),
        ("thickness(1000 hPa to 500 hPa)", &|c: &Case| {
            std::hint::black_box(c.thickness(layer, ThicknessRoute::Temperature).unwrap());
        }),
        ("temperature_advection(1000 hPa to 500 hPa)", &|c: &Case| {
            std::hint::black_box(c.layer_temperature_advection(layer).unwrap());
        }),
    ];
    for (code, direct) in cases {
        let case = Case::new(dataset.clone()).with_selection(Selection::default());
        let mut session = Session::new();
        session.evaluator_mut().attach_dataset("data", dataset.clone());
        // Warm both paths (file cache, allocator).
        direct(&case);
        session.run(code, None).unwrap();
        let mut engine = Vec::new();
        let mut language = Vec::new();
        for _ in 0..runs {
            let t = Instant::now();
            direct(&case);
            engine.push(t.elapsed());
            let t = Instant::now();
            // Evaluate without drawing: the value, not its pictures.
            let text = format!("let result = {code}");
            let program = baroc::lang::parse(&text).unwrap();
            let evaluator = session.evaluator_mut();
            std::hint::black_box(evaluator.run(&program, &text).unwrap());
            language.push(t.elapsed());
        }
        let (e, l) = (median(engine).as_secs_f64() * 1e3, median(language).as_secs_f64() * 1e3);
        println!("{code:<52} {e:>10.2} {l:>10.2} {:>7.2}x", l / e);
    }
    println!("(the language path includes parsing; checking is timed by `cargo bench --bench lang_parse_check`)");

    // Many layers asked for by one program: with the run's shared store
    // the evaluator computes them in one pass (src/lang/eval_layers.rs);
    // with a store that keeps nothing, one layer at a time. The counts say
    // which path ran. The same adjacent layers in the program's own
    // selection, by the geopotential route, and in a region at one time.
    let levels = baroc::demo::LEVELS_HPA;
    let written = |pair: &[f64], call: &str, tail: &str| format!("{call}({} hPa to {} hPa){tail}", pair[0], pair[1]);
    let programs: [(&str, &str); 3] = [("", ""), (" with route geopotential", " (geopotential route)"), (" in box(40 north to 60 north, 30 west to 10 east) at time(2)", " (in a box at a time)")];
    for (tail, what) in programs {
        let mut program_text = String::new();
        for (k, pair) in levels.windows(2).enumerate() {
            // The thermal wind names the geopotential route `thickness`.
            let wind_tail = tail.replace("route geopotential", "route thickness");
            program_text.push_str(&format!("let thickness_{k} = {}\nlet thermal_{k} = {}\n", written(pair, "thickness", tail), written(pair, "thermal_wind", &wind_tail)));
        }
        let program = baroc::lang::parse(&program_text).unwrap();
        println!();
        println!("{:<52} {:>10} {:>34}", format!("thickness and thermal wind of {} adjacent layers{what}", levels.len() - 1), "ms", "path");
        for (label, keep) in [("one program, shared store (many-layer kernel)", true), ("one program, store keeping nothing", false)] {
            let mut session = Session::new();
            let evaluator = session.evaluator_mut();
            evaluator.attach_dataset("data", dataset.clone());
            evaluator.shared = Arc::new(if keep { baroc::sharing::SharedResults::default() } else { baroc::sharing::SharedResults::with_budget(0) });
            evaluator.run(&program, &program_text).unwrap();
            let before = (evaluator.shared.many_layer_counts(), evaluator.shared.one_layer_count());
            let mut times = Vec::new();
            for _ in 0..runs {
                let t = Instant::now();
                std::hint::black_box(evaluator.run(&program, &program_text).unwrap());
                times.push(t.elapsed());
            }
            let after = (evaluator.shared.many_layer_counts(), evaluator.shared.one_layer_count());
            let per_run = |a: u64, b: u64| (b - a) / runs as u64;
            let (passes, layers, one_layer) = (per_run(before.0 .0, after.0 .0), per_run(before.0 .1, after.0 .1), per_run(before.1, after.1));
            let path = match (passes, one_layer) {
                (0, _) => format!("{one_layer} one at a time"),
                (_, 0) => format!("{passes} pass(es), {layers} layers"),
                _ => format!("{passes} pass(es), {layers} + {one_layer} one at a time"),
            };
            println!("{label:<52} {:>10.2} {path:>34}", median(times).as_secs_f64() * 1e3);
        }
    }
}
