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
/// many-layer passes and layers.
fn run(source: &str, share: bool) -> (Vec<(String, Value)>, (u64, u64)) {
    let mut evaluator = Evaluator::new();
    evaluator.shared = Arc::new(if share { SharedResults::default() } else { SharedResults::with_budget(0) });
    evaluator.attach_dataset("data", Arc::new(Dataset::open(&[demo_file().clone()]).expect("demo opens")));
    let program = baroc::lang::parse(source).expect("parses");
    baroc::lang::check_program(&program, source, &evaluator).expect("checks");
    evaluator.run(&program, source).unwrap_or_else(|d| panic!("{}", baroc::lang::render(&d, source, &Default::default())));
    (evaluator.bindings(), evaluator.shared.many_layer_counts())
}

/// The bindings of `source` with the many-layer path and without; asserts
/// they are the same bits, returns the counts of the many-layer run.
fn assert_same_bits_both_paths(source: &str) -> (Vec<(String, Value)>, (u64, u64)) {
    let (fast, counts) = run(source, true);
    let (slow, none) = run(source, false);
    assert_eq!(none, (0, 0), "a store that keeps nothing takes the one-layer path");
    assert_eq!(fast.len(), slow.len());
    for ((name, a), (other, b)) in fast.iter().zip(&slow) {
        assert_eq!(name, other);
        if matches!(a, Value::Scalar(_) | Value::Vector(_)) {
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
    let (_, (passes, layers)) = assert_same_bits_both_paths(script);
    // Two passes (layers with a thermal wind, layers without), five layers.
    assert_eq!((passes, layers), (2, 5));
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
    let (values, (passes, layers)) = assert_same_bits_both_paths(script);
    // One pass by the trapezoid (four layers), one by the quadratic rule
    // with the thermal wind (two layers).
    assert_eq!((passes, layers), (2, 6));
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
fn calls_in_another_selection_or_route_stay_on_the_one_layer_path() {
    // Under `in` a region written out (not a name bound before), by the
    // geopotential route, with an equator band: nothing is computed ahead.
    let script = "\
let a = thickness(1000 hPa to 850 hPa) in box(40 north to 62 north, 50 west to 0 east)
let b = thickness(1000 hPa to 850 hPa) with route geopotential
let c = thermal_wind(850 hPa to 700 hPa) with equator_band 10 degrees
";
    let (_, counts) = assert_same_bits_both_paths(script);
    assert_eq!(counts, (0, 0));
}

#[test]
fn values_written_in_a_named_region_take_one_pass_in_that_region() {
    // A recipe's outputs are `... in area`: the pass runs in the region's
    // selection, as the calls do (a region written out, or nested in an
    // expression, is left to the one-layer path).
    let script = "\
let area = box(40 north to 60 north, 30 west to 10 east)
let a = thickness(1000 hPa to 500 hPa) in area
let b = thermal_wind(1000 hPa to 500 hPa) in area
let c = ageostrophic_shear(1000 hPa to 500 hPa) in area
let d = thickness(850 hPa to 700 hPa)
let e = thickness(850 hPa to 700 hPa) in box(40 north to 60 north, 30 west to 10 east)
";
    let (_, (passes, layers)) = assert_same_bits_both_paths(script);
    // One pass in the region (one layer, with its thermal wind), one in the
    // whole grid (one layer without).
    assert_eq!((passes, layers), (2, 2));
}
