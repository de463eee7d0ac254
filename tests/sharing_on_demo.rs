//! Results shared within a run (src/sharing.rs) change nothing but the
//! time a run takes: the recipes and scripts on the demo case give the same
//! bits with sharing and without, and nothing computed in one notebook cell
//! (or for one dataset) is served for another.
//!
//! The reference throughout is the same computation with sharing switched
//! off (a store that keeps nothing): equality of bits, since sharing may not
//! change a single rounding.

use std::path::PathBuf;
use std::sync::{Arc, OnceLock};

use baroc::grid::Field;
use baroc::io::writer::{write_fields, WriteOptions};
use baroc::io::{Dataset, Selection};
use baroc::lang::eval::Evaluator;
use baroc::lang::value::Value;
use baroc::session::Session;
use baroc::sharing::SharedResults;

mod support;
use support::same::same_value;

fn directory() -> &'static PathBuf {
    static DIR: OnceLock<PathBuf> = OnceLock::new();
    DIR.get_or_init(|| {
        let dir = std::env::temp_dir().join(format!("baroc-sharing-tests-{}", std::process::id()));
        baroc::demo::write(&dir.join("baroc-demo")).expect("demo case writes");
        write_warmer_copy(&dir.join("baroc-demo").join(baroc::demo::FILE_NAME), &dir.join("warmer.nc"));
        dir
    })
}

fn demo_file() -> PathBuf {
    directory().join("baroc-demo").join(baroc::demo::FILE_NAME)
}

fn warmer_file() -> PathBuf {
    directory().join("warmer.nc")
}

/// A second dataset: the demo's fields on levels, with the temperature
/// 3 K warmer aloft than below (a layer-dependent change, so that every
/// temperature-route thickness differs from the demo's).
fn write_warmer_copy(from: &std::path::Path, to: &std::path::Path) {
    let dataset = Dataset::open(&[from.to_path_buf()]).expect("demo opens");
    let names: Vec<String> = dataset.variables().filter(|v| v.levels.is_some()).map(|v| v.name.clone()).collect();
    let mut fields: Vec<Field> = names.iter().map(|n| dataset.read(n, &Selection::default()).expect("reads")).collect();
    for f in &mut fields {
        if f.standard_name.as_deref() == Some("air_temperature") {
            let levels = f.levels.clone().expect("levels");
            for (k, mut level) in f.data.axis_iter_mut(ndarray::Axis(1)).enumerate() {
                let warming = 3.0 * (1.0 - levels[k] / 100_000.0) as f32;
                level.mapv_inplace(|t| t + warming);
            }
        }
    }
    let refs: Vec<&Field> = fields.iter().collect();
    write_fields(to, &refs, &WriteOptions::default()).expect("writes the warmer copy");
}

/// Runs `source` on the demo case (optionally one time step) and returns
/// its outputs (or, for a script, its bindings) and the evaluator's store.
fn run(source: &str, share: bool, step: Option<usize>) -> (Vec<(String, Value)>, Arc<SharedResults>) {
    let mut evaluator = Evaluator::new();
    evaluator.shared = Arc::new(if share { SharedResults::default() } else { SharedResults::with_budget(0) });
    evaluator.attach_dataset("data", Arc::new(Dataset::open(&[demo_file()]).expect("demo opens")));
    evaluator.base_selection = Selection { times: step.map(|s| vec![s]), ..Selection::default() };
    let program = baroc::lang::parse(source).expect("parses");
    baroc::lang::check_program(&program, source, &evaluator).expect("checks");
    evaluator.run(&program, source).unwrap_or_else(|d| panic!("{}", baroc::lang::render(&d, source, &Default::default())));
    let results = if evaluator.outputs.is_empty() { evaluator.bindings() } else { evaluator.outputs.clone() };
    (results, evaluator.shared.clone())
}

fn assert_identical_with_and_without_sharing(source: &str, step: Option<usize>) -> (u64, u64) {
    let (shared, store) = run(source, true, step);
    let (fresh, off) = run(source, false, step);
    assert_eq!(off.counts().0, 0, "a store with no room serves nothing");
    assert_eq!(shared.len(), fresh.len());
    for ((name, a), (other, b)) in shared.iter().zip(&fresh) {
        assert_eq!(name, other);
        if !matches!(a, Value::Scalar(_) | Value::Vector(_) | Value::Series(_)) {
            continue; // layers, regions: not computed from data
        }
        assert!(same_value(a, b), "`{name}` differs with sharing");
    }
    assert_eq!(store.bytes(), 0, "nothing is held once the run is over");
    store.counts()
}

#[test]
fn the_budget_recipe_gives_the_same_bits_with_and_without_sharing() {
    let recipe = include_str!("../recipes/thermal-wind-budget.baroc");
    // Over all five time steps and over one.
    let (served, computed) = assert_identical_with_and_without_sharing(recipe, None);
    // The recipe asks for the temperature-route thickness three times (the
    // thickness, the thermal wind, the ageostrophic shear) and for the
    // geostrophic wind at each boundary three times (advection twice,
    // turning): common practice of the recipe, counted here so that the
    // sharing is known to happen, not only to be harmless.
    assert!(served >= 6, "served {served}, computed {computed}");
    assert_identical_with_and_without_sharing(recipe, Some(4));
}

#[test]
fn scripts_on_the_demo_give_the_same_bits_with_and_without_sharing() {
    // Levels between data levels (interpolated, hydrostatically for
    // heights), both thickness routes, both integration rules, a region
    // pushed into the reads, the same quantity asked for twice.
    let script = "\
let region = box(40 north to 62 north, 50 west to 0 east)
let a = thickness(925 hPa to 550 hPa)
let b = thickness(925 hPa to 550 hPa) with route geopotential
let c = thermal_wind(850 hPa to 300 hPa) in region
let d = thermal_wind(850 hPa to 300 hPa) with route thickness in region
let e = ageostrophic_shear(850 hPa to 300 hPa) in region
let f = geostrophic_wind(geopotential at 650 hPa)
let g = temperature_advection(650 hPa) in region
let h = turning(1000 hPa to 650 hPa)
let i = temperature_advection(1000 hPa to 650 hPa)
let j = thickness(1000 hPa to 500 hPa) with integration trapezoid
let k = thickness(1000 hPa to 500 hPa)
let m = geopotential at 650 hPa
let n = static_stability(850 hPa to 500 hPa)
let o = area_mean(temperature_advection(1000 hPa to 650 hPa) as K/day, region)
";
    let (served, _) = assert_identical_with_and_without_sharing(script, None);
    assert!(served > 0);
}

fn thickness_in_fresh_session(file: &std::path::Path, layer: &str) -> Value {
    let mut s = Session::new();
    s.run(&format!("open \"{}\"", file.display()), None).expect("opens");
    s.run(&format!("thickness({layer})"), None).expect("runs");
    s.last_values.last().cloned().expect("a value")
}

fn cell(session: &mut Session, code: &str) -> Value {
    match session.run(code, None) {
        Ok(_) => session.last_values.last().cloned().expect("a value"),
        Err(e) => panic!("{code}\n{}", e.rendered),
    }
}

#[test]
fn no_value_is_served_stale_across_cells_or_datasets() {
    let mut session = Session::new();
    cell(&mut session, &format!("open \"{}\"\nlet layer = 1000 hPa to 500 hPa\n1", demo_file().display()));
    let first = cell(&mut session, "thickness(layer)");
    assert!(same_value(&first, &thickness_in_fresh_session(&demo_file(), "1000 hPa to 500 hPa")));

    // Rebinding the name the expression uses: the new layer's value.
    cell(&mut session, "let layer = 850 hPa to 500 hPa\n1");
    let rebound = cell(&mut session, "thickness(layer)");
    assert!(same_value(&rebound, &thickness_in_fresh_session(&demo_file(), "850 hPa to 500 hPa")));
    assert!(!same_value(&rebound, &first));

    // Opening another dataset: its value, not the first dataset's.
    cell(&mut session, &format!("open \"{}\"\n1", warmer_file().display()));
    let other = cell(&mut session, "thickness(layer)");
    assert!(same_value(&other, &thickness_in_fresh_session(&warmer_file(), "850 hPa to 500 hPa")));
    assert!(!same_value(&other, &rebound));

    // Within one cell: the same expression before and after another open
    // and another binding.
    let both = format!(
        "open \"{}\"\nlet before = thickness(layer)\nopen \"{}\"\nlet after = thickness(layer)\nlet layer = 1000 hPa to 500 hPa\nlet later = thickness(layer)\nlater",
        demo_file().display(),
        warmer_file().display()
    );
    cell(&mut session, &both);
    let evaluator = session.evaluator();
    let (before, after, later) = (evaluator.lookup("before").unwrap(), evaluator.lookup("after").unwrap(), evaluator.lookup("later").unwrap());
    assert!(same_value(before, &thickness_in_fresh_session(&demo_file(), "850 hPa to 500 hPa")));
    assert!(same_value(after, &thickness_in_fresh_session(&warmer_file(), "850 hPa to 500 hPa")));
    assert!(same_value(later, &thickness_in_fresh_session(&warmer_file(), "1000 hPa to 500 hPa")));
    // Nothing stays held between cells.
    assert_eq!(evaluator.shared.bytes(), 0);
}
