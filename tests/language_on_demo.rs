//! The language end to end: scripts on the demo case give the engine's
//! numbers, the field guide's check values come out through the language,
//! recipes save, reload and run, and errors render with their carets.

use std::path::{Path, PathBuf};
use std::sync::{Arc, OnceLock};

use baroc::diagnostics::{Case, Layer, ThicknessRoute};
use baroc::grid::{Field, Grid, TimeAxis};
use baroc::io::writer::{write_fields, WriteOptions};
use baroc::io::Dataset;
use baroc::lang::value::Value;
use baroc::session::Session;

fn directory() -> &'static PathBuf {
    static DIR: OnceLock<PathBuf> = OnceLock::new();
    DIR.get_or_init(|| {
        let dir = std::env::temp_dir().join(format!("baroc-language-tests-{}", std::process::id()));
        baroc::demo::write(&dir.join("baroc-demo")).expect("demo case writes");
        dir
    })
}

fn demo_file() -> PathBuf {
    directory().join("baroc-demo").join(baroc::demo::FILE_NAME)
}

fn session() -> Session {
    let mut s = Session::new();
    s.evaluator_mut().base_directory = directory().clone();
    s.evaluator_mut().recipe_folders = vec![directory().join("recipes")];
    s.run(&format!("open \"{}\"", demo_file().display()), None).expect("opens");
    s
}

fn value(session: &mut Session, code: &str) -> Value {
    match session.run(code, None) {
        Ok(_) => session.last_values.last().cloned().expect("a value"),
        Err(e) => panic!("{code}\n{}", e.rendered),
    }
}

fn scalar(v: Value) -> Arc<Field> {
    match v {
        Value::Scalar(f) => f,
        _ => panic!("expected a scalar field, got {}", v.kind()),
    }
}

fn number_at(v: Value) -> f64 {
    match v {
        Value::Series(s) => s.rows[0][0],
        _ => panic!("expected a table, got {}", v.kind()),
    }
}

#[test]
fn scripts_give_the_engine_numbers() {
    // The language is a thin layer: the same diagnostic through the language
    // and through the engine's functions must agree exactly.
    let case = Case::new(Arc::new(Dataset::open(&[demo_file()]).unwrap()));
    let layer = Layer::new(100000.0, 50000.0).0;
    let mut s = session();
    let direct = case.thickness(layer, ThicknessRoute::Temperature).unwrap();
    let through = scalar(value(&mut s, "thickness(1000 hPa to 500 hPa)"));
    assert_eq!(direct.data, through.data);
    let direct = case.thermal_wind(layer, ThicknessRoute::Geopotential).unwrap();
    match value(&mut s, "thermal_wind(500 hPa to 1000 hPa) with route thickness") {
        Value::Vector(w) => assert_eq!(w.eastward.data, direct.eastward.data),
        other => panic!("{}", other.kind()),
    }
    // The layer-mean temperature by the geopotential route is the engine's
    // (the checker once refused `route` here while the evaluator took it).
    let direct = case.layer_mean_temperature(layer, ThicknessRoute::Geopotential).unwrap();
    let through = scalar(value(&mut s, "layer_mean_temperature(1000 hPa to 500 hPa) with route geopotential"));
    assert_eq!(direct.data, through.data);
    // A variable named as it stands, taken in a box, is read in the box
    // (it was once left unread, and later read whole): every level, the
    // box's points, the same values as a level picked inside the box.
    let boxed = scalar(value(&mut s, "temperature in box(40 north to 60 north, 10 west to 20 east)"));
    let level = scalar(value(&mut s, "temperature at 500 hPa in box(40 north to 60 north, 10 west to 20 east)"));
    assert_eq!(boxed.levels.as_ref().map(|l| l.len()), Some(10));
    assert!(boxed.grid.latitudes.iter().all(|&y| (40.0..=60.0).contains(&y)));
    assert!(boxed.grid.longitudes.iter().all(|&x| (-10.0..=20.0).contains(&x)));
    let k = boxed.levels.as_ref().unwrap().iter().position(|&p| p == 50000.0).unwrap();
    assert_eq!(boxed.data.index_axis(ndarray::Axis(1), k), level.data.index_axis(ndarray::Axis(1), 0));
    let direct = case.layer_temperature_advection(layer).unwrap();
    let through = scalar(value(&mut s, "temperature_advection(1000 hPa to 500 hPa)"));
    assert_eq!(direct.data, through.data);
    // Conversion: K s-1 to K/day multiplies by 86400.
    let per_day = scalar(value(&mut s, "temperature_advection(1000 hPa to 500 hPa) as K/day"));
    let (a, b) = (direct.data[[0, 0, 30, 50]] as f64 * 86400.0, per_day.data[[0, 0, 30, 50]] as f64);
    assert!((a - b).abs() < 1e-3 * a.abs().max(1.0));
}

#[test]
fn selections_read_only_what_is_asked() {
    let mut s = session();
    let f = scalar(value(&mut s, "temperature at 500 hPa in box(45 north to 55 north, 40 west to 20 west) at \"2026-10-14 12:00\""));
    assert_eq!(f.data.shape(), &[1, 1, 14, 27]);
    assert_eq!(f.times.as_ref().unwrap().labels(), vec!["2026-10-14T12:00:00".to_string()]);
    let series = value(&mut s, "temperature over 850 hPa to 500 hPa at point(51.5 north, 31 west) at time(0)");
    match series {
        Value::Series(t) => assert_eq!(t.rows.len(), 4, "{:?}", t.labels), // 850, 700, 600, 500
        other => panic!("{}", other.kind()),
    }
}

/// Writes a one-time, two-dimensional-in-space dataset of temperature and
/// geopotential height on standard levels, with the given profiles.
fn synthetic(path: &Path, latitudes: Vec<f64>, temperature: impl Fn(f64, f64) -> f64, height: impl Fn(f64, f64) -> f64) {
    let levels = vec![100000.0, 85000.0, 70000.0, 50000.0, 30000.0];
    let grid = Arc::new(Grid::new(latitudes.clone(), (0..9).map(|i| -4.0 + i as f64).collect()));
    let times = Some(TimeAxis { values: vec![0.0], units: "hours since 2026-10-01 00:00:00".into(), calendar: "standard".into() });
    let shape = (1, levels.len(), latitudes.len(), 9);
    let t = ndarray::Array4::from_shape_fn(shape, |(_, k, j, _)| temperature(levels[k], latitudes[j]) as f32);
    let z = ndarray::Array4::from_shape_fn(shape, |(_, k, j, _)| height(levels[k], latitudes[j]) as f32);
    let t = Field::new("t", "K", t, times.clone(), Some(levels.clone()), grid.clone()).unwrap().with_standard_name(Some("air_temperature"));
    let z = Field::new("zg", "m", z, times, Some(levels), grid).unwrap().with_standard_name(Some("geopotential_height"));
    write_fields(path, &[&t, &z], &WriteOptions::default()).unwrap();
}

fn scratch(name: &str) -> PathBuf {
    directory().join(name)
}

#[test]
fn field_guide_check_values_through_the_language() {
    let lats: Vec<f64> = (0..41).map(|j| 43.0 + 0.1 * j as f64).collect();
    let a = baroc::constants::EARTH_RADIUS;
    // Thermal wind worked value (field guide, derived): at 45 N a layer-mean
    // temperature falling 1 K per 100 km poleward over 1000-500 hPa gives
    // u_T ~ 19.3 m/s westerly.
    let falling = move |_: f64, lat: f64| 260.0 - 1.0e-5 * a * (lat - 45.0).to_radians();
    // Geostrophic worked value (derived): at 45 N a height fall of 60 m per
    // 500 km poleward gives u_g ~ 11.4 m/s.
    let heights = move |p: f64, lat: f64| 5500.0 * (100000.0f64 / p).ln() - 60.0 / 5.0e5 * a * (lat - 45.0).to_radians();
    let path = scratch("worked-values.nc");
    synthetic(&path, lats.clone(), falling, heights);
    let mut s = Session::new();
    s.run(&format!("open \"{}\"", path.display()), None).unwrap();
    let u_t = number_at(value(&mut s, "thermal_wind(1000 hPa to 500 hPa).eastward at point(45 north, 0 east)"));
    assert!((u_t - 19.3).abs() < 0.05, "thermal wind {u_t}");
    let u_g = number_at(value(&mut s, "geostrophic_wind(geopotential_height at 500 hPa).eastward at point(45 north, 0 east)"));
    assert!((u_g - 11.4).abs() < 0.05, "geostrophic wind {u_g}");

    // 20.3 m of 1000-500 hPa thickness per kelvin of layer mean (derived:
    // Rd ln 2 / g0).
    let warm = scratch("isothermal-261.nc");
    let cold = scratch("isothermal-260.nc");
    synthetic(&warm, lats.clone(), |_, _| 261.0, |_, _| 0.0);
    synthetic(&cold, lats.clone(), |_, _| 260.0, |_, _| 0.0);
    s.run(&format!("open \"{}\"\nlet warm = thickness(1000 hPa to 500 hPa)\nopen \"{}\"\nlet cold = thickness(1000 hPa to 500 hPa)", warm.display(), cold.display()), None).unwrap();
    let per_kelvin = number_at(value(&mut s, "(warm - cold) at point(45 north, 0 east)"));
    assert!((per_kelvin - 20.29).abs() < 0.02, "{per_kelvin}");

    // U.S. Standard Atmosphere 1976: 500 hPa stands at about 5574 m and
    // 1000 hPa at about 111 m (field guide, from memory), so the 1000-500 hPa
    // thickness of its temperature profile is about 5463 m.
    let standard = scratch("standard-atmosphere.nc");
    synthetic(&standard, lats, |p, _| baroc::physics::standard_atmosphere::temperature_at_pressure(p).unwrap(), |_, _| 0.0);
    s.run(&format!("open \"{}\"", standard.display()), None).unwrap();
    let dz = number_at(value(&mut s, "thickness(1000 hPa to 500 hPa) at point(45 north, 0 east)"));
    assert!((dz - (5574.0 - 111.0)).abs() < 5.0, "{dz}");
}

#[test]
fn recipes_save_reload_and_run_like_functions() {
    let mut s = session();
    s.run("parameter layer = 1000 hPa to 700 hPa \"The layer\"\noutput shear = speed(thermal_wind(layer)) \"Thermal-wind speed\"", None).unwrap();
    let first = scalar(value(&mut s, "shear"));
    value(&mut s, "save_recipe(\"lower-shear\")");
    let saved = std::fs::read_to_string(directory().join("recipes").join("lower-shear.baroc")).unwrap();
    assert!(saved.contains("parameter layer = 1000 hPa to 700 hPa") && !saved.contains("open "), "{saved}");
    // A new session loads it from the library and calls it.
    let mut fresh = session();
    let listing = value(&mut fresh, "recipes()");
    assert!(matches!(&listing, Value::Text(t) if t.contains("lower_shear(layer)")));
    let again = scalar(value(&mut fresh, "lower_shear()"));
    assert_eq!(first.data, again.data);
    let other_layer = scalar(value(&mut fresh, "lower_shear() with layer (850 hPa to 500 hPa)"));
    assert_ne!(first.data, other_layer.data);
}

#[test]
fn a_failed_cell_changes_nothing() {
    let mut s = session();
    s.run("let kept = 5 K", None).unwrap();
    let err = s.run("let kept = 7 K\nlet broken = temperature + wind", None).unwrap_err();
    assert!(err.rendered.contains('^'), "{}", err.rendered);
    match value(&mut s, "kept") {
        Value::Number { value, .. } => assert_eq!(value, 5.0),
        other => panic!("{}", other.kind()),
    }
}

#[test]
fn each_time_step_run_in_parallel_equals_one_run() {
    // The runner's step-by-step mode (parallel over time steps) must give
    // the same numbers as evaluating all times at once.
    let request = |each_time: bool| baroc::runner::RunRequest {
        source: "let dz = thickness(1000 hPa to 500 hPa)\nlet vt = thermal_wind(850 hPa to 300 hPa)".into(),
        origin: "test".into(),
        data_files: vec![demo_file()],
        overrides: Vec::new(),
        each_time,
        time_steps: None,
        progress: false,
        recipe_folders: Vec::new(),
    };
    let whole = baroc::runner::run(&request(false)).unwrap();
    let stepped = baroc::runner::run(&request(true)).unwrap();
    for (a, b) in whole.results.iter().zip(&stepped.results) {
        assert_eq!(a.name, b.name);
        match (&a.value, &b.value) {
            (Value::Scalar(x), Value::Scalar(y)) => {
                assert_eq!(x.data, y.data);
                assert_eq!(x.times, y.times);
            }
            (Value::Vector(x), Value::Vector(y)) => assert_eq!(x.eastward.data, y.eastward.data),
            _ => panic!("unexpected kinds"),
        }
    }
    assert_eq!(whole.results.len(), 2);
}

#[test]
fn pictures_and_reports_are_requests_the_session_carries_out() {
    // The language returns what to draw; the session draws it (with the
    // demo's coastline from its land-sea mask) and writes reports.
    let mut s = session();
    match value(&mut s, "map(temperature at 500 hPa) with width 500") {
        Value::Figure(request) => {
            assert_eq!(request.operator, "map");
            assert_eq!(request.options.len(), 1);
            assert_eq!(request.options[0].name, "width");
        }
        other => panic!("expected a figure request, found {}", other.kind()),
    }
    let out = s.run("map(temperature at 500 hPa) with width 500", None).unwrap();
    let picture = out.result.expect("a picture");
    assert!(picture.binary("image/png").is_some());
    assert!(picture.plain_text().contains("coastline from the land-sea mask"), "{}", picture.plain_text());
    // Options are read on the drawing side, and a wrong one still fails
    // the cell with a caret under the option.
    let err = s.run("map(temperature at 500 hPa) with colour 3", None).unwrap_err();
    assert!(err.message.contains("`map` has no option `colour`"), "{}", err.rendered);
    assert!(err.rendered.contains("its options are `width`, `height`, `dpi`, `speed_unit`, `reference` and `neutral_band`"), "{}", err.rendered);
    let err = s.run("panels(map(temperature at 500 hPa)) with columns \"two\"", None).unwrap_err();
    assert!(err.message.contains("`columns` takes a whole number"), "{}", err.rendered);
    // A report with no outputs is refused where it is asked for.
    let err = s.run("write_report(\"empty.html\")", None).unwrap_err();
    assert!(err.message.contains("no outputs to report"), "{}", err.rendered);
    s.run("output lower_thickness = thickness(1000 hPa to 500 hPa)", None).unwrap();
    let path = directory().join("requested-report.html");
    let _ = std::fs::remove_file(&path);
    let out = s.run("write_report(\"requested-report.html\")", None).unwrap();
    assert!(out.result.expect("a line").plain_text().starts_with("wrote the report to"));
    let html = std::fs::read_to_string(&path).expect("the report was written");
    assert!(html.contains("lower_thickness") && html.contains("not a warning service"));
}

#[test]
fn map_options_reach_the_picture_and_bad_ones_say_what_is_valid() {
    // Knots by definition: 1 kt = 1852 m per hour (international nautical mile).
    let mut s = session();
    let knots = baroc::display::bundle(&value(&mut s, "map(geostrophic_wind(geopotential at 500 hPa)) with speed_unit kt"));
    let text = knots.text("image/svg+xml").expect("a picture");
    assert!(text.contains("(kt)"), "the colour bar is in knots");
    let metres = baroc::display::bundle(&value(&mut s, "map(geostrophic_wind(geopotential at 500 hPa))"));
    assert!(metres.text("image/svg+xml").unwrap().contains("(m s-1)"));
    let wrong = s.run("map(geostrophic_wind(geopotential at 500 hPa)) with speed_unit \"K\"", None).unwrap_err();
    assert!(wrong.rendered.contains("unit of speed"), "{}", wrong.rendered);
    let band = s.run("map(temperature_advection(1000 hPa to 500 hPa)) with neutral_band 0.9", None).unwrap_err();
    assert!(band.rendered.contains("from 0 to 0.5"), "{}", band.rendered);
}

#[test]
fn audit_in_the_language_gives_the_commands_verdict() {
    // The demo's heights are the hydrostatic integral of its virtual
    // temperature (hypsometric equation, field guide), so the audit passes;
    // a selection in time restricts what is audited.
    // The language asks for the audit; the session carries it out.
    let mut s = session();
    assert!(matches!(value(&mut s, "audit()"), Value::Figure(_)));
    let shown = |s: &mut baroc::session::Session, code: &str| s.run(code, None).unwrap().result.expect("a result").plain_text().to_string();
    let text = shown(&mut s, "audit()");
    assert!(text.contains("pass: heights and temperature agree hydrostatically"), "{text}");
    assert!(text.contains("not a warning service"));
    assert!(text.contains("2026-10-15T00:00:00"));
    let text = shown(&mut s, "audit() at time(0)");
    assert!(!text.contains("2026-10-15T00:00:00") && text.contains("2026-10-14T00:00:00"), "{text}");
    let err = s.run("audit() with integration simpson", None).unwrap_err();
    assert!(err.rendered.contains("trapezoid"), "{}", err.rendered);
}

#[test]
fn turning_takes_its_weak_wind_threshold_as_an_option() {
    // An angle between two winds is defined only where both winds and their
    // difference are strong enough (common practice, no single source; the
    // default 2.5 m s-1 is physics::thermal_wind::DEFAULT_WEAK_WIND). A
    // higher threshold can only leave more points missing, zero the fewest,
    // and the field records the threshold it used.
    let mut s = session();
    let missing = |s: &mut Session, code: &str| match value(s, code) {
        Value::Scalar(f) => (f.data.iter().filter(|x| x.is_nan()).count(), f.attributes.iter().find(|(k, _)| k == "weak_wind_threshold").map(|(_, v)| v.clone())),
        other => panic!("expected a field, found {}", other.kind()),
    };
    let (none, _) = missing(&mut s, "turning(1000 hPa to 500 hPa) with weak_wind 0 m s-1");
    let (default, recorded) = missing(&mut s, "turning(1000 hPa to 500 hPa)");
    let (strict, _) = missing(&mut s, "turning(1000 hPa to 500 hPa) with weak_wind 10 kt");
    assert!(none < default && default < strict, "{none} {default} {strict}");
    assert!(recorded.expect("the threshold is recorded").contains("2.5"));
    let err = s.run("turning(1000 hPa to 500 hPa) with weak_wind 3 K", None).unwrap_err();
    assert!(err.rendered.contains("must be a speed such as 2.5 m s-1"), "{}", err.rendered);
}
