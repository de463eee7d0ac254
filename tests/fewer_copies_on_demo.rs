//! Results computed without the intermediates they used to hold give the
//! same bits as the step-by-step definitions, and values the run's store
//! shares reach the language without a copy.
//!
//! The step-by-step references are the engine's own public operations
//! (`Case::wind_shear`, `Case::thermal_wind`, `diagnostics::advect`) put
//! together as the definitions say (field guide, "Formulas": ageostrophic
//! shear = analysed shear - thermal wind; layer-mean geostrophic temperature
//! advection = -Vbar_g . grad(Tbar), Vbar_g the mean of the boundary
//! geostrophic winds, Tbar from the thickness of the same geopotential).
//! Equality is of bits: fusing a computation may not change one rounding.

use std::path::PathBuf;
use std::sync::{Arc, OnceLock};

use baroc::diagnostics::{advect, Case, Layer, ThicknessRoute};
use baroc::grid::{Field, VectorField};
use baroc::io::Dataset;
use baroc::lang::eval::Evaluator;
use baroc::lang::value::Value;
use baroc::sharing::SharedResults;

fn demo_file() -> &'static PathBuf {
    static FILE: OnceLock<PathBuf> = OnceLock::new();
    FILE.get_or_init(|| {
        let dir = std::env::temp_dir().join(format!("baroc-fewer-copies-tests-{}", std::process::id()));
        baroc::demo::write(&dir).expect("demo case writes");
        dir.join(baroc::demo::FILE_NAME)
    })
}

fn case(share: bool) -> Case {
    let dataset = Arc::new(Dataset::open(&[demo_file()]).expect("demo opens"));
    let case = Case::new(dataset);
    if share {
        case.sharing(Arc::new(SharedResults::default()))
    } else {
        case
    }
}

fn layer() -> Layer {
    Layer::new(100_000.0, 50_000.0).0
}

fn assert_same_bits(a: &Field, b: &Field) {
    assert_eq!(a.data.shape(), b.data.shape(), "{} and {}", a.name, b.name);
    let mut finite = 0;
    for (x, y) in a.data.iter().zip(b.data.iter()) {
        assert_eq!(x.to_bits(), y.to_bits(), "{} vs {} ({} and {})", x, y, a.name, b.name);
        finite += x.is_finite() as usize;
    }
    assert!(finite > a.data.len() / 2, "the comparison covers real values, not only missing ones");
}

#[test]
fn the_ageostrophic_shear_is_the_analysed_shear_less_the_thermal_wind_bit_for_bit() {
    for share in [false, true] {
        for route in [ThicknessRoute::Temperature, ThicknessRoute::Geopotential] {
            let case = case(share);
            let fused = case.ageostrophic_shear(layer(), route).expect("ageostrophic shear");
            let (shear, thermal) = (case.wind_shear(layer()).expect("shear"), case.thermal_wind(layer(), route).expect("thermal wind"));
            let by_steps = |s: &Field, t: &Field| s.derived(&s.name, &s.units, &s.data - &t.data).expect("same shape");
            assert_same_bits(&fused.eastward, &by_steps(&shear.eastward, &thermal.eastward));
            assert_same_bits(&fused.northward, &by_steps(&shear.northward, &thermal.northward));
            assert_eq!(fused.eastward.units, "m s-1");
            assert!(fused.eastward.levels.is_none(), "a layer result has no levels");
        }
    }
}

#[test]
fn the_layer_advection_is_the_advection_of_the_layer_mean_temperature_by_the_mean_wind_bit_for_bit() {
    for share in [false, true] {
        let case = case(share);
        let fused = case.layer_temperature_advection(layer()).expect("layer advection");
        let (bottom, top) = (case.geostrophic_wind(layer().bottom).expect("wind below"), case.geostrophic_wind(layer().top).expect("wind above"));
        let tbar = case.layer_mean_temperature(layer(), ThicknessRoute::Geopotential).expect("layer-mean temperature");
        let mean = |a: &Field, b: &Field| tbar.derived("mean", "m s-1", (&a.data + &b.data).mapv(|x| 0.5 * x)).expect("same shape");
        let wind = VectorField::new(mean(&bottom.eastward, &top.eastward), mean(&bottom.northward, &top.northward)).expect("a vector");
        let by_steps = advect(&tbar, &wind, &case.constants).expect("advection");
        assert_same_bits(&fused, &by_steps);
        assert_eq!(fused.units, by_steps.units);
        assert!(fused.attributes.iter().any(|(k, v)| k == "layer" && v == &layer().label()));
    }
}

#[test]
fn the_turning_is_unchanged_by_reading_the_winds_in_place() {
    // The turning from the shared geostrophic winds against the physics
    // function on copies of them (how it was called before).
    let case = case(true);
    // No weak-wind threshold, so that nearly every angle exists.
    let angle = case.turning_with(layer(), 0.0).expect("turning");
    let (b, t) = (case.geostrophic_wind(layer().bottom).expect("below"), case.geostrophic_wind(layer().top).expect("above"));
    let copy = |f: &Field| f.horizontal_slices().to_owned();
    let reference = baroc::physics::thermal_wind::turning_where_defined(
        copy(&b.eastward).view(),
        copy(&b.northward).view(),
        copy(&t.eastward).view(),
        copy(&t.northward).view(),
        0.0,
    );
    let reference = angle.derived("reference", "degree", reference.into_shape_with_order(angle.data.dim()).expect("same count")).expect("shape");
    assert_same_bits(&angle, &reference);
}

/// Runs a script on the demo case with sharing and returns its bindings.
fn bindings(source: &str) -> Vec<(String, Value)> {
    let mut evaluator = Evaluator::new();
    evaluator.shared = Arc::new(SharedResults::default());
    evaluator.attach_dataset("data", Arc::new(Dataset::open(&[demo_file()]).expect("demo opens")));
    let program = baroc::lang::parse(source).expect("parses");
    baroc::lang::check_program(&program, source, &evaluator).expect("checks");
    evaluator.run(&program, source).unwrap_or_else(|d| panic!("{}", baroc::lang::render(&d, source, &Default::default())));
    evaluator.bindings()
}

fn binding<'a>(all: &'a [(String, Value)], name: &str) -> &'a Value {
    &all.iter().find(|(n, _)| n == name).unwrap_or_else(|| panic!("`{name}` is bound")).1
}

#[test]
fn shared_results_and_whole_area_crops_reach_the_language_without_a_copy() {
    let all = bindings(
        "let wind = thermal_wind(1000 hPa to 500 hPa)\n\
         let again = thermal_wind(1000 hPa to 500 hPa)\n\
         let whole = wind in box(89.5 south to 89.5 north, 180 west to 180 east)\n\
         let dz = thickness(1000 hPa to 500 hPa)\n\
         let dz_whole = dz in box(89.5 south to 89.5 north, 180 west to 180 east)\n\
         let part = dz in box(45 north to 50 north, 10 west to 0 east)\n",
    );
    let vector = |name: &str| match binding(&all, name) {
        Value::Vector(v) => v.clone(),
        other => panic!("`{name}` is {}", other.kind()),
    };
    let scalar = |name: &str| match binding(&all, name) {
        Value::Scalar(f) => f.clone(),
        other => panic!("`{name}` is {}", other.kind()),
    };
    // Served from the store: the very value computed first.
    assert!(Arc::ptr_eq(&vector("wind"), &vector("again")), "a shared result is handed out, not copied");
    // A region covering the whole grid cuts nothing and copies nothing.
    assert!(Arc::ptr_eq(&vector("wind"), &vector("whole")));
    assert!(Arc::ptr_eq(&scalar("dz"), &scalar("dz_whole")));
    // A real cut still cuts, keeping names, units and attributes.
    let (dz, part) = (scalar("dz"), scalar("part"));
    assert!(part.data.len() < dz.data.len() && !part.data.is_empty());
    assert_eq!((&part.name, &part.units, &part.attributes), (&dz.name, &dz.units, &dz.attributes));
    let j = dz.grid.latitudes.iter().position(|&l| l == part.grid.latitudes[0]).expect("a latitude of the grid");
    let i = dz.grid.longitudes.iter().position(|&l| l == part.grid.longitudes[0]).expect("a longitude of the grid");
    assert_eq!(part.data[[0, 0, 0, 0]].to_bits(), dz.data[[0, 0, j, i]].to_bits());
}

#[test]
fn a_variable_at_a_data_level_is_the_bits_of_the_weighted_sum_over_the_levels_read() {
    // At a data level the level becomes the result in place; the reference
    // is the general path, `apply_weights` of the interpolation weights
    // (linear in ln p: field guide, "Formulas") over every level read.
    use baroc::io::Role;
    use baroc::physics::vertical::{apply_weights, interpolation_weights};
    for share in [false, true] {
        let case = case(share);
        for role in [Role::EastwardWind, Role::Temperature] {
            let name = case.dataset.find_role(role).expect("the demo has the role").name.clone();
            let all = case.field(&name).expect("every level");
            let levels = all.levels.clone().expect("levels");
            for pressure in [levels[0], 50_000.0, 45_000.0] {
                let at = case.at_pressure(&name, pressure, false).expect("at a pressure");
                let weights = interpolation_weights(&levels, pressure).expect("within the levels");
                let reference = apply_weights(all.data.view(), &weights, 1.0);
                let reference = at.derived("reference", &at.units, reference.insert_axis(ndarray::Axis(1))).expect("shape");
                assert_same_bits(&at, &reference);
                assert!(at.attributes.iter().any(|(k, _)| k == "pressure_level"));
            }
        }
    }
}
