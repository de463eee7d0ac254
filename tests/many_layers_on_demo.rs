//! The language reaching the many-layer kernel (src/lang/eval_layers.rs,
//! src/diagnostics/many_layers.rs): a program asking for the thickness or
//! thermal wind of several layers gets them from one pass over the levels,
//! with the same bits as the one-layer path.
//!
//! The reference for the bits is the same program run with a store that
//! keeps nothing, where every call takes the one-layer path (itself checked
//! against the field guide's worked values and the U.S. Standard
//! Atmosphere 1976 in tests/engine_on_demo.rs and tests/hydrostatic_atmosphere.rs).

use std::path::PathBuf;
use std::sync::{Arc, OnceLock};

use baroc::io::Dataset;
use baroc::lang::eval::Evaluator;
use baroc::lang::value::Value;
use baroc::sharing::SharedResults;

mod support;
use support::same::same_value;

fn demo_file() -> &'static PathBuf {
    static FILE: OnceLock<PathBuf> = OnceLock::new();
    FILE.get_or_init(|| {
        let dir = std::env::temp_dir().join(format!("baroc-many-layers-tests-{}", std::process::id()));
        baroc::demo::write(&dir.join("baroc-demo")).expect("demo case writes");
        dir.join("baroc-demo").join(baroc::demo::FILE_NAME)
    })
}

/// Runs `source` on the demo case; its bindings and the store's counts of
/// many-layer passes, the layers they computed, and the layers computed
/// one at a time.
fn run(source: &str, share: bool) -> (Vec<(String, Value)>, (u64, u64, u64)) {
    let mut evaluator = Evaluator::new();
    evaluator.shared = Arc::new(if share { SharedResults::default() } else { SharedResults::with_budget(0) });
    evaluator.attach_dataset("data", Arc::new(Dataset::open(&[demo_file().clone()]).expect("demo opens")));
    let program = baroc::lang::parse(source).expect("parses");
    baroc::lang::check_program(&program, source, &evaluator).expect("checks");
    evaluator.run(&program, source).unwrap_or_else(|d| panic!("{}", baroc::lang::render(&d, source, &Default::default())));
    let (passes, layers) = evaluator.shared.many_layer_counts();
    (evaluator.bindings(), (passes, layers, evaluator.shared.one_layer_count()))
}

/// Runs `source` both ways up to its first error (which must be the same
/// message both ways); the bindings made with the shared store, which must
/// be the same bits as without, and its many-layer counts.
fn run_both_ways_allowing_errors(source: &str) -> (Vec<(String, Value)>, (u64, u64), Option<String>) {
    let once = |share: bool| {
        let mut evaluator = Evaluator::new();
        evaluator.shared = Arc::new(if share { SharedResults::default() } else { SharedResults::with_budget(0) });
        evaluator.attach_dataset("data", Arc::new(Dataset::open(&[demo_file().clone()]).expect("demo opens")));
        let program = baroc::lang::parse(source).expect("parses");
        let error = evaluator.run(&program, source).err().map(|d| baroc::lang::render(&d, source, &Default::default()));
        (evaluator.bindings(), evaluator.shared.many_layer_counts(), error)
    };
    let (fast, counts, fast_error) = once(true);
    let (slow, _, slow_error) = once(false);
    assert_eq!(fast_error, slow_error, "the same error, at the same place, both ways");
    assert_eq!(fast.len(), slow.len());
    for ((name, a), (_, b)) in fast.iter().zip(&slow) {
        if matches!(a, Value::Scalar(_) | Value::Vector(_) | Value::Series(_)) {
            assert!(same_value(a, b), "`{name}` differs between the two paths");
        }
    }
    (fast, counts, fast_error)
}

/// The bindings of `source` with the many-layer path and without; asserts
/// they are the same bits, returns the counts of the many-layer run.
fn assert_same_bits_both_paths(source: &str) -> (Vec<(String, Value)>, (u64, u64, u64)) {
    let (fast, counts) = run(source, true);
    let (slow, none) = run(source, false);
    assert_eq!((none.0, none.1), (0, 0), "a store that keeps nothing takes the one-layer path");
    assert!(none.2 > 0, "and computes its layers one at a time");
    assert_eq!(fast.len(), slow.len());
    for ((name, a), (other, b)) in fast.iter().zip(&slow) {
        assert_eq!(name, other);
        if matches!(a, Value::Scalar(_) | Value::Vector(_) | Value::Series(_)) {
            assert!(same_value(a, b), "`{name}` differs between the many-layer and the one-layer path");
        }
    }
    (fast, counts)
}

#[test]
fn adjacent_layers_on_data_levels_take_one_pass_with_the_same_bits() {
    // Virtual temperature (the demo has specific humidity), the quadratic
    // rule (the default): thickness and thermal wind of three adjacent
    // layers and a layer spanning four data levels, a layer-mean
    // temperature and an ageostrophic shear.
    let script = "\
let a = thickness(1000 hPa to 850 hPa)
let b = thickness(850 hPa to 700 hPa)
let c = thermal_wind(700 hPa to 500 hPa)
let d = thermal_wind(1000 hPa to 500 hPa)
let e = layer_mean_temperature(850 hPa to 700 hPa)
let f = ageostrophic_shear(700 hPa to 500 hPa)
let g = thickness(700 hPa to 500 hPa) + thickness(500 hPa to 300 hPa)
";
    let (_, (passes, layers, one_layer)) = assert_same_bits_both_paths(script);
    // Two passes (layers with a thermal wind, layers without), five layers.
    // (500-300 hPa: the quadratic rule reaches 250 hPa, where the demo has a
    // patch of missing data at its last time step, `demo::GAP`; the pass
    // falls back to the trapezoid there as the one-layer path does.)
    assert_eq!((passes, layers, one_layer), (2, 5, 0), "served from the passes, none computed one at a time");
}

#[test]
fn the_trapezoid_takes_its_own_pass_and_thicknesses_add_up() {
    let script = "\
let a = thickness(1000 hPa to 925 hPa) with integration trapezoid
let b = thickness(925 hPa to 850 hPa) with integration trapezoid
let c = thickness(850 hPa to 700 hPa) with integration trapezoid
let whole = thickness(1000 hPa to 700 hPa) with integration trapezoid
let named = thermal_wind(850 hPa to 700 hPa) with route mean_temperature
let named_again = thermal_wind(700 hPa to 500 hPa) with route mean_temperature
";
    let (values, (passes, layers, one_layer)) = assert_same_bits_both_paths(script);
    // One pass by the trapezoid (four layers), one by the quadratic rule
    // with the thermal wind (two layers).
    assert_eq!((passes, layers, one_layer), (2, 6, 0), "served from the passes, none computed one at a time");
    // The hypsometric integral over a layer is the sum of the integrals over
    // the layers that make it up (additivity of the integral; the trapezoid
    // rule on data levels composes exactly): a + b + c = whole to float32
    // rounding of a few thousand metres (1e-5 relative).
    let field = |name: &str| match values.iter().find(|(n, _)| n == name).map(|(_, v)| v) {
        Some(Value::Scalar(f)) => f.clone(),
        _ => panic!("{name} is not a field"),
    };
    let (a, b, c, whole) = (field("a"), field("b"), field("c"), field("whole"));
    for (((x, y), z), w) in a.data.iter().zip(b.data.iter()).zip(c.data.iter()).zip(whole.data.iter()) {
        let sum = *x as f64 + *y as f64 + *z as f64;
        assert!((sum - *w as f64).abs() <= 1e-5 * w.abs() as f64, "{sum} against {w}");
    }
}

#[test]
fn calls_the_lookahead_cannot_know_stay_on_the_one_layer_path() {
    // A layer from a user function (its body runs only when called), under
    // an `if`, a layer named only after the part was prepared, an option
    // given twice (the call reads the first) and a time from a name bound to
    // data (which `time` refuses): nothing is computed ahead, and the values are the
    // one-layer path's.
    let script = "\
function upper(p) = p to p - 150 hPa
let a = thickness(upper(1000 hPa))
let b = if true then thickness(850 hPa to 700 hPa) else thickness(700 hPa to 500 hPa)
let later = 700 hPa to 500 hPa
let c = thermal_wind(later)
let twice = thermal_wind(850 hPa to 700 hPa) with integration trapezoid, integration quadratic
let d = thickness(1000 hPa to 850 hPa) at time(temperature)
";
    let (fast, counts, error) = run_both_ways_allowing_errors(script);
    assert_eq!(counts, (0, 0));
    assert!(fast.iter().any(|(n, _)| n == "c"), "the program ran up to `c`");
    assert!(error.is_some_and(|e| e.contains("time(temperature)")), "`time` refuses a field, with its span");
}

#[test]
fn errors_stay_those_of_the_one_layer_path() {
    // Beside a call computed ahead, a call that fails: a layer reaching
    // above the data, a time not in the data, a range of times with none,
    // a region not overlapping the enclosing one, an equatorial band out of
    // range, an option the operator refuses. The lookahead reports none of
    // them; the call does, as without it (same message, same place).
    let tails = [
        ("thickness(1000 hPa to 10 hPa)", 1),
        ("thickness(850 hPa to 700 hPa) at \"2030-01-01 00:00\"", 1),
        ("thickness(850 hPa to 700 hPa) during \"2030-01-01 00:00\" to \"2030-01-02 00:00\"", 1),
        ("(thickness(850 hPa to 700 hPa) in box(10 north to 20 north, 0 east to 10 east)) in box(40 north to 60 north, 30 west to 10 east)", 1),
        ("thermal_wind(850 hPa to 700 hPa) with equator_band 60 degrees", 1),
        ("thickness(850 hPa to 700 hPa) with equator_band 10 degrees", 1),
    ];
    for (tail, layers_ahead) in tails {
        let script = format!("let a = thickness(1000 hPa to 850 hPa)\nlet z = {tail}\n");
        let (values, (_, layers), error) = run_both_ways_allowing_errors(&script);
        assert!(error.is_some(), "`{tail}` fails");
        assert_eq!(layers, layers_ahead, "only `a` was computed ahead beside `{tail}`");
        assert!(values.iter().any(|(n, _)| n == "a") && !values.iter().any(|(n, _)| n == "z"));
    }
}

#[test]
fn values_written_in_a_named_region_take_one_pass_in_that_region() {
    // A recipe's outputs are `... in area`: the pass runs in the region's
    // selection, as the calls do; a region written out is its own.
    let script = "\
let area = box(40 north to 60 north, 30 west to 10 east)
let a = thickness(1000 hPa to 500 hPa) in area
let b = thermal_wind(1000 hPa to 500 hPa) in area
let c = ageostrophic_shear(1000 hPa to 500 hPa) in area
let d = thickness(850 hPa to 700 hPa)
let e = thickness(850 hPa to 700 hPa) in box(40 north to 60 north, 30 west to 10 east)
";
    let (_, (passes, layers, one_layer)) = assert_same_bits_both_paths(script);
    // In the region: 1000-500 hPa with its thermal wind, and 850-700 hPa
    // without (`e`, the same region written out): two passes. In the whole
    // grid: 850-700 hPa, one pass.
    assert_eq!((passes, layers, one_layer), (3, 3, 0), "served from the passes, none computed one at a time");
}

#[test]
fn calls_under_at_during_and_in_take_one_pass_in_the_selection_they_run_in() {
    // The demo's times are 2026-10-14 00:00 to 2026-10-15 00:00 every six
    // hours. Each call below runs in the selection its `at`, `during` or
    // `in` gives (built as `select` builds it), and is served from the pass
    // made in that selection.
    let script = "\
let area = box(40 north to 60 north, 30 west to 10 east)
let a = thickness(1000 hPa to 850 hPa) at \"2026-10-14 06:00\"
let b = thermal_wind(1000 hPa to 850 hPa) at \"2026-10-14 06:00\"
let c = thickness(850 hPa to 700 hPa) at time(2)
let d = thickness(700 hPa to 500 hPa) during \"2026-10-14 06:00\" to \"2026-10-14 12:00\"
let e = (thermal_wind(500 hPa to 300 hPa) in area) at \"2026-10-14 12:00\"
let f = thickness(850 hPa to 700 hPa) at point(51.5 north, 31 west)
let g = (thickness(1000 hPa to 500 hPa) in box(45 north to 55 north, 20 west to 0 east)) / 1000
let h = (layer_mean_temperature(1000 hPa to 500 hPa) in box(45 north to 55 north, 20 west to 0 east)) in area
";
    let (values, (passes, layers, one_layer)) = assert_same_bits_both_paths(script);
    // One pass per selection: time step 1 (one layer with its thermal wind,
    // asked for twice), time step 2, time steps 1 and 2, time step 2 in the
    // area, the whole case (the value at a point is picked from it), the
    // box written out, and that box within the area (the same box: the
    // selection is the same, so `g` and `h` share one pass).
    assert_eq!((passes, layers, one_layer), (6, 6, 0), "served from the passes, none computed one at a time");
    let steps = |name: &str| match values.iter().find(|(n, _)| n == name).map(|(_, v)| v) {
        Some(Value::Scalar(f)) => f.data.shape()[0],
        Some(Value::Vector(w)) => w.eastward.data.shape()[0],
        _ => panic!("{name} is not a field"),
    };
    assert_eq!((steps("a"), steps("b"), steps("c"), steps("d"), steps("e")), (1, 1, 1, 2, 1));
}

#[test]
fn equator_bands_and_layers_written_as_expressions_take_one_pass() {
    // A layer computed from bound pressures and from another layer's ends,
    // thermal winds with an equatorial band (each band its own pass: the
    // band is part of every key), and the trapezoid with a band.
    let script = "\
let bottom = 1000 hPa
let depth = 150 hPa
let layer = 850 hPa to 700 hPa
let band = 10 degrees
let a = thermal_wind(1000 hPa to 850 hPa) with equator_band 10 degrees
let b = ageostrophic_shear(1000 hPa to 850 hPa) with equator_band band
let c = thermal_wind(bottom to bottom - depth)
let d = thickness(layer.bottom to layer.top)
let e = thermal_wind(700 hPa to 500 hPa) with equator_band 5 degrees, integration trapezoid
let f = thickness(layer) + thickness(700 hPa to 500 hPa)
";
    let (_, (passes, layers, one_layer)) = assert_same_bits_both_paths(script);
    // Band 10: one layer with its thermal wind. No band: 1000-850 hPa with
    // its thermal wind, 850-700 and 700-500 hPa without (two passes). Band
    // 5 by the trapezoid: one layer.
    assert_eq!((passes, layers, one_layer), (4, 5, 0), "served from the passes, none computed one at a time");
}

#[test]
fn the_geopotential_route_takes_its_boundaries_from_one_read() {
    // Thickness and thermal wind by the geopotential route (`route
    // thickness` is the same route), the layer-mean temperature a layer's
    // temperature advection starts from, with and without an equatorial
    // band; the turning and the geostrophic wind at a boundary start from
    // the boundaries' geopotential offered by the pass (the same bits). A layer with a
    // boundary between data levels (875 hPa: interpolated hydrostatically)
    // is left to the one-layer path.
    let script = "\
let a = thickness(1000 hPa to 850 hPa) with route geopotential
let b = thermal_wind(850 hPa to 700 hPa) with route thickness
let c = thermal_wind(1000 hPa to 850 hPa) with route thickness, equator_band 10 degrees
let d = temperature_advection(1000 hPa to 500 hPa)
let e = turning(1000 hPa to 500 hPa)
let f = thickness(925 hPa to 875 hPa) with route geopotential
let g = geostrophic_wind(geopotential at 850 hPa)
let h = temperature_advection(850 hPa)
";
    let (_, (passes, layers, one_layer)) = assert_same_bits_both_paths(script);
    // No band: 1000-850, 850-700 (with its thermal wind) and 1000-500 hPa in
    // one pass; band 10: 1000-850 hPa in another; 925-875 hPa one at a time.
    assert_eq!((passes, layers, one_layer), (2, 4, 1));
}

/// The counts `BAROC_TIMINGS=1` prints on a `baroc run` of the budget
/// recipe: (layers by the one-pass kernel, passes, layers one at a time).
fn layer_paths_printed(sharing: bool) -> (u64, u64, u64) {
    let recipe = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("recipes/thermal-wind-budget.baroc");
    let out = demo_file().with_file_name(format!("budget-sharing-{sharing}.nc"));
    let mut command = std::process::Command::new(env!("CARGO_BIN_EXE_baroc"));
    command.args(["run", &recipe.display().to_string(), "-o", &out.display().to_string(), &demo_file().display().to_string()]).env("BAROC_TIMINGS", "1");
    if !sharing {
        command.env("BAROC_SHARING", "0");
    }
    let done = command.output().expect("baroc starts");
    let stderr = String::from_utf8_lossy(&done.stderr).to_string();
    assert!(done.status.success(), "{stderr}");
    let line = stderr.lines().find(|l| l.starts_with("timings: layers: ")).unwrap_or_else(|| panic!("no layer line in:\n{stderr}"));
    let numbers: Vec<u64> = line.split(|c: char| !c.is_ascii_digit()).filter(|w| !w.is_empty()).map(|w| w.parse().unwrap()).collect();
    assert_eq!(numbers.len(), 3, "{line}");
    (numbers[0], numbers[1], numbers[2])
}

#[test]
fn timings_say_which_path_the_layers_took() {
    // The budget recipe asks for one layer in its area by both routes (its
    // area mean is taken of the mapped advection): with the store, every
    // layer comes from a pass; without, one at a time.
    let (one_pass, passes, one_layer) = layer_paths_printed(true);
    assert!(one_pass >= 2 && passes >= 1 && one_layer == 0, "with sharing: {one_pass} in {passes} passes, {one_layer} one at a time");
    let (one_pass, passes, one_layer) = layer_paths_printed(false);
    assert!(one_pass == 0 && passes == 0 && one_layer >= 2, "without sharing: {one_pass} in {passes} passes, {one_layer} one at a time");
}

#[test]
fn layers_meeting_missing_levels_fall_back_in_the_pass_as_one_at_a_time() {
    // The demo reports no humidity at 200 hPa and has a patch of missing
    // temperature at 250 hPa in its last time step (`demo::GAP`): layers
    // whose quadratic rule reaches those levels take the trapezoid at the
    // time steps concerned, in the pass as on the one-layer path (the same
    // bits, and the same `method` attribute saying so).
    let script = "\
let a = thickness(300 hPa to 250 hPa)
let b = thermal_wind(300 hPa to 250 hPa)
let c = thermal_wind(500 hPa to 300 hPa)
let d = layer_mean_temperature(400 hPa to 300 hPa)
let e = thickness(250 hPa to 200 hPa)
";
    let (values, (passes, layers, one_layer)) = assert_same_bits_both_paths(script);
    // 300-250 hPa (with its thermal wind) and 500-300 hPa in one pass;
    // 400-300 and 250-200 hPa (missing wherever 200 hPa is: the trapezoid
    // needs it too, and the value stays missing) in the other.
    assert_eq!((passes, layers, one_layer), (2, 4, 0), "served from the passes, none computed one at a time");
    let Some((_, Value::Scalar(a))) = values.iter().find(|(n, _)| n == "a") else { panic!("a is a field") };
    let method = a.attributes.iter().find(|(k, _)| k == "method").map(|(_, v)| v.as_str()).unwrap_or("");
    // The quadratic for 300-250 hPa reaches 200 hPa at every time step.
    assert!(method.contains(&format!("the trapezoid rule at {} time step(s)", baroc::demo::TIME_STEPS)), "the fallback is said: {method}");
}
