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
    // which path ran.
    let levels = baroc::demo::LEVELS_HPA;
    let mut program_text = String::new();
    for (k, pair) in levels.windows(2).enumerate() {
        program_text.push_str(&format!("let thickness_{k} = thickness({} hPa to {} hPa)\nlet thermal_{k} = thermal_wind({} hPa to {} hPa)\n", pair[0], pair[1], pair[0], pair[1]));
    }
    let program = baroc::lang::parse(&program_text).unwrap();
    println!();
    println!("{:<52} {:>10} {:>22}", format!("thickness and thermal wind of {} adjacent layers", levels.len() - 1), "ms", "path");
    for (label, keep) in [("one program, shared store (many-layer kernel)", true), ("one program, store keeping nothing", false)] {
        let mut session = Session::new();
        let evaluator = session.evaluator_mut();
        evaluator.attach_dataset("data", dataset.clone());
        evaluator.shared = Arc::new(if keep { baroc::sharing::SharedResults::default() } else { baroc::sharing::SharedResults::with_budget(0) });
        evaluator.run(&program, &program_text).unwrap();
        let before = evaluator.shared.many_layer_counts();
        let mut times = Vec::new();
        for _ in 0..runs {
            let t = Instant::now();
            std::hint::black_box(evaluator.run(&program, &program_text).unwrap());
            times.push(t.elapsed());
        }
        let after = evaluator.shared.many_layer_counts();
        let (passes, layers) = ((after.0 - before.0) / runs as u64, (after.1 - before.1) / runs as u64);
        let path = if passes > 0 { format!("{passes} pass(es), {layers} layers") } else { "one layer at a time".to_string() };
        println!("{label:<52} {:>10.2} {path:>22}", median(times).as_secs_f64() * 1e3);
    }
}
