//! Checker tests: kinds and units inferred, mistakes found before any data
//! is read, scope carried from one notebook cell to the next.

mod support;

use baroc::lang::check::{check, check_source, normalise_time, Component, CurrentDataset, Environment, Levels, Type};
use baroc::lang::diagnostic::Severity;

fn report(source: &str) -> baroc::lang::check::CheckReport {
    match check_source(source, &support::environment()) {
        Ok((_, report)) => report,
        Err(errors) => panic!("{source:?} does not parse: {errors:?}"),
    }
}

fn errors(source: &str) -> Vec<String> {
    report(source).errors().map(|diagnostic| diagnostic.message.clone()).collect()
}

fn no_errors(source: &str) -> baroc::lang::check::CheckReport {
    let report = report(source);
    assert!(!report.has_errors(), "{source:?}: {:#?}", report.diagnostics);
    report
}

/// The kind of the last top-level statement.
fn last_kind(source: &str) -> Type {
    no_errors(source).kinds.last().expect("a statement with a value").kind.clone()
}

fn unit_of(kind: &Type) -> String {
    match kind {
        Type::Number { unit: Some(unit), .. } => unit.to_string(),
        Type::Field(field) => field.unit.as_ref().map(|unit| unit.to_string()).unwrap_or_default(),
        other => panic!("no unit: {other:?}"),
    }
}

#[test]
fn the_benchmark_recipe_checks_clean() {
    let source = include_str!("data/lower_troposphere_recipe.baroc");
    let report = no_errors(source);
    assert!(report.diagnostics.is_empty(), "{:#?}", report.diagnostics);
    // Its six outputs and every parameter are in the scope afterwards.
    for name in ["thermal_wind_map", "advection_map", "ratio", "profile", "mean_thermal_speed", "flags", "layer", "area"] {
        assert!(report.scope.bindings.contains_key(name), "{name}");
    }
}

#[test]
fn dataset_names_and_roles_are_fields_with_units_and_levels() {
    let Type::Field(field) = last_kind("temperature") else { panic!() };
    assert_eq!(field.component, Component::Scalar);
    assert_eq!(field.unit.unwrap().to_string(), "K");
    // Largest pressure first, whatever order the file has.
    assert_eq!(field.levels, Levels::Known(vec![100000.0, 92500.0, 85000.0, 70000.0, 50000.0, 30000.0]));
    assert!(field.time && field.horizontal);
    // The file's own name works too.
    assert!(matches!(last_kind("t"), Type::Field(_)));
    let Type::Field(wind) = last_kind("wind") else { panic!() };
    assert_eq!(wind.component, Component::Vector);
}

#[test]
fn selections_remove_dimensions() {
    let Type::Field(field) = last_kind("temperature at 500 hPa") else { panic!() };
    assert_eq!(field.levels, Levels::None);
    let Type::Field(field) = last_kind("temperature over 850 hPa to 500 hPa") else { panic!() };
    assert_eq!(field.levels, Levels::Known(vec![85000.0, 70000.0, 50000.0]));
    let Type::Field(field) = last_kind("temperature at point(52 north, 10 west) at \"2026-10-14 06:00\"") else { panic!() };
    assert!(!field.horizontal && !field.time);
    // Picked at a point, a field cannot be differentiated any more.
    assert_eq!(errors("gradient(temperature at 500 hPa at point(52 north, 10 west))"), vec!["`gradient` needs a field on the horizontal grid"]);
}

#[test]
fn units_are_inferred_through_operators() {
    assert_eq!(unit_of(&last_kind("thickness(1000 hPa to 500 hPa)")), "m");
    assert_eq!(unit_of(&last_kind("thickness(1000 hPa to 500 hPa) as dam")), "dam");
    assert_eq!(unit_of(&last_kind("temperature_advection(850 hPa) as K/day")), "K/day");
    let Type::Field(field) = last_kind("geostrophic_wind(geopotential_height at 500 hPa)") else { panic!() };
    assert_eq!((field.component, field.unit.unwrap().to_string()), (Component::Vector, "m/s".to_string()));
    // Vorticity of a wind is a rate: m s-1 per metre (dimension of s-1).
    let vorticity = last_kind("vorticity(wind at 500 hPa) as s-1");
    assert_eq!(unit_of(&vorticity), "s-1");
    // Temperature divided by a length converts to K/(100 km).
    assert_eq!(unit_of(&last_kind("((temperature at 500 hPa) / 100 km) as K/(100 km)")), "K/(100 km)");
    // `as` binds tighter than `/`: here it would convert 100 km to K/(100 km).
    assert_eq!(errors("(temperature at 500 hPa) / 100 km as K/(100 km)"), vec!["cannot express a length (km) in K/(100 km)"]);
    assert_eq!(unit_of(&last_kind("(speed(wind at 850 hPa) ^ 2) as m2 s-2")), "m2 s-2");
}

#[test]
fn constants_are_known_before_evaluation() {
    // 1000 hPa = 100 000 Pa (SI prefix hecto).
    let Type::Number { value, .. } = last_kind("(1000 hPa to 500 hPa).bottom") else { panic!() };
    assert_eq!(value, Some(100_000.0));
    let Type::Number { value, .. } = last_kind("850 hPa as Pa") else { panic!() };
    assert_eq!(value, Some(85_000.0));
    // 0 degC is 273.15 K (SI definition of the Celsius scale).
    let Type::Number { value, .. } = last_kind("0 degC as K") else { panic!() };
    assert!((value.unwrap() - 273.15).abs() < 1e-9);
    let Type::Number { value, .. } = last_kind("500 hPa + 100 Pa") else { panic!() };
    assert_eq!(value, Some(501.0));
}

#[test]
fn layers_written_top_down_are_turned_round_with_a_warning() {
    let report = report("let l = 500 hPa to 1000 hPa\nl");
    assert!(!report.has_errors());
    assert_eq!(report.diagnostics.len(), 1);
    assert_eq!(report.diagnostics[0].severity, Severity::Warning);
    let Type::Layer { bottom, top } = report.kinds.last().unwrap().kind.clone() else { panic!() };
    assert_eq!((bottom, top), (Some(100_000.0), Some(50_000.0)));
    assert_eq!(errors("thickness(500 hPa to 500 hPa)"), vec!["a layer needs two different pressures"]);
}

#[test]
fn levels_and_layers_must_lie_within_the_data() {
    assert_eq!(errors("thickness(1050 hPa to 500 hPa)"), vec!["1050 hPa is below the lowest level of geopotential_height (1000 hPa)"]);
    assert_eq!(errors("temperature over 700 hPa to 250 hPa"), vec!["250 hPa is above the highest level of temperature (300 hPa)"]);
    assert_eq!(errors("interpolate(temperature, 100 hPa)"), vec!["100 hPa is above the highest level of temperature (300 hPa)"]);
    // Between data levels is fine: the evaluator interpolates in ln p.
    no_errors("temperature at 600 hPa");
}

#[test]
fn arithmetic_needs_matching_dimensions() {
    assert_eq!(errors("temperature + wind"), vec!["cannot add a scalar field and a vector field"]);
    assert_eq!(errors("500 hPa + 3 K"), vec!["cannot add a temperature (K) to a pressure (hPa)"]);
    assert_eq!(errors("temperature at 500 hPa - 2"), vec!["cannot subtract a pure number from a scalar field of temperature (K)"]);
    assert_eq!(errors("thickness(1000 hPa to 500 hPa) as K"), vec!["cannot express a scalar field of length (m) in K"]);
    assert_eq!(errors("wind * wind"), vec!["cannot multiply by a vector field"]);
    assert_eq!(errors("(temperature at 500 hPa) ^ (2 K)"), vec!["an exponent must be a pure number"]);
    // Same dimension, different units: fine (the evaluator converts).
    no_errors("temperature at 500 hPa + 1 degC");
    no_errors("thickness(1000 hPa to 500 hPa) - 5400 m");
    no_errors("2 * wind at 300 hPa");
}

#[test]
fn comparisons_give_booleans_and_if_chooses() {
    assert!(matches!(last_kind("1 K < 2 K"), Type::Bool));
    let Type::Field(field) = last_kind("speed(wind at 850 hPa) > 20 m/s") else { panic!() };
    assert_eq!(field.component, Component::Boolean);
    let kind = last_kind("if speed(wind at 850 hPa) > 20 kt then temperature at 850 hPa else 0 K");
    assert!(matches!(kind, Type::Field(_)));
    assert_eq!(errors("if 1 K then 1 else 2"), vec!["the condition of `if` must be true or false"]);
    assert_eq!(errors("if true then 1 K else 1 m"), vec!["the two branches of `if` give different kinds of value"]);
    assert_eq!(errors("1 K < 1 m"), vec!["cannot compare a temperature (K) with a length (m)"]);
}

#[test]
fn ranges_are_of_one_kind() {
    assert!(matches!(last_kind("40 north to 60 north"), Type::LatitudeRange));
    assert!(matches!(last_kind("30 west to 10 east"), Type::LongitudeRange));
    assert!(matches!(last_kind("\"2026-10-14 00:00\" to \"2026-10-14 12:00\""), Type::TimeRange));
    assert_eq!(errors("40 north to 10 east"), vec!["a range needs two latitudes or two longitudes"]);
    assert_eq!(errors("1000 hPa to 5 K"), vec!["the two ends of a range must be of the same kind"]);
    assert_eq!(errors("\"2026-10-15 00:00\" to \"2026-10-14 00:00\""), vec!["this time range ends before it starts"]);
}

#[test]
fn options_are_checked_by_kind() {
    no_errors("thermal_wind(1000 hPa to 500 hPa) with route mean_temperature, equator_band 10 degrees");
    assert_eq!(errors("thermal_wind(1000 hPa to 500 hPa) with equator_band 100 degrees"), vec!["the option `equator_band` must be between 0 and 90 degrees"]);
    assert_eq!(errors("thermal_wind(1000 hPa to 500 hPa) with equator_band 10"), vec!["the option `equator_band` needs the unit degrees"]);
    assert_eq!(errors("thermal_wind(1000 hPa to 500 hPa) with equator_band 10 km"), vec!["the option `equator_band` must be an angle such as 10 degrees"]);
    assert_eq!(errors("speed(wind at 500 hPa) with route thickness"), vec!["`speed` has no option `route`"]);
    // The layer-mean temperature takes the thickness's routes (it is the
    // thickness through the hypsometric equation).
    no_errors("layer_mean_temperature(1000 hPa to 500 hPa) with route geopotential, integration trapezoid");
    assert_eq!(
        errors("layer_mean_temperature(1000 hPa to 500 hPa) with route thickness"),
        vec!["the option `route` of `layer_mean_temperature` is one of `temperature`, `virtual_temperature` or `geopotential`"]
    );
    assert_eq!(
        errors("thermal_wind(1000 hPa to 500 hPa) with route thickness, route thickness"),
        vec!["the option `route` is given twice"]
    );
}

#[test]
fn operators_say_which_data_they_need() {
    // The winds-only file has no temperature or heights.
    let messages = errors("open \"winds_only.nc\"\nthickness(1000 hPa to 500 hPa)");
    assert_eq!(messages, vec!["`thickness` needs `geopotential`, `geopotential_height` or `temperature`, which the dataset winds_only.nc lacks"]);
    let messages = errors("thickness(1000 hPa to 500 hPa) with route virtual_temperature");
    assert_eq!(messages, vec!["`thickness` with route virtual_temperature needs `specific_humidity`, which the dataset skerry_case.nc lacks"]);
    // Without any dataset.
    let environment = Environment { catalog: Some(&support::CATALOG), ..Environment::default() };
    let (_, report) = check_source("thickness(1000 hPa to 500 hPa)", &environment).unwrap();
    assert_eq!(report.errors().next().unwrap().message, "`thickness` needs data, and no dataset is open");
}

#[test]
fn named_datasets_have_members() {
    let report = no_errors("open \"winds_only.nc\" as calm\ncalm.u at 300 hPa");
    assert!(matches!(report.scope.current, Some(CurrentDataset::Known(ref info)) if info.name == "calm (winds_only.nc)"));
    assert_eq!(errors("open \"winds_only.nc\" as calm\ncalm.temperature"), vec!["the dataset `calm` has no `temperature`"]);
}

#[test]
fn members_depend_on_the_kind() {
    assert!(matches!(last_kind("wind.eastward"), Type::Field(ref field) if field.component == Component::Scalar));
    assert!(matches!(last_kind("point(1 north, 2 east).latitude"), Type::Angle { .. }));
    assert!(matches!(last_kind("box(1 north to 2 north, 3 east to 4 east).longitude"), Type::LongitudeRange));
    assert_eq!(errors("temperature.eastward"), vec!["a scalar field of temperature (K) has no member `.eastward`"]);
    assert_eq!(errors("wind.eastwrd"), vec!["a vector field of wind (m s-1) has no member `.eastwrd`"]);
}

#[test]
fn user_functions_are_checked_at_each_call() {
    let source = "function depth(layer) = thickness(layer) as dam\ndepth(1000 hPa to 500 hPa)";
    assert_eq!(unit_of(&last_kind(source)), "dam");
    let source = "function depth(layer) = thickness(layer) as dam\ndepth(850 hPa)";
    assert_eq!(errors(source), vec!["the layer of `thickness` must be a pressure layer such as 1000 hPa to 500 hPa"]);
    assert_eq!(errors("function f(a) = a\nf(1, 2)"), vec!["`f` takes 1 argument but 2 were given"]);
    assert_eq!(errors("function f(a) = a\nf(1) with route x"), vec!["`f` takes no options"]);
    // A body's own mistakes are reported once, at the definition.
    let report = report("function f(a) = a + tempreature\nf(1 K)\nf(2 K)");
    assert_eq!(report.errors().count(), 1);
    // Parameters shadow dataset names; the body does not see the caller's bindings.
    no_errors("function g(temperature) = temperature + 1 K\ng(2 K)");
    assert_eq!(errors("function h(a) = a + local\nlet z = { let local = 1 K; h(local) }"), vec!["unknown name `local`"]);
}

#[test]
fn recursion_is_rejected_even_across_cells() {
    let environment = support::environment();
    let (_, first) = check_source("function a(x) = x", &environment).unwrap();
    assert!(!first.has_errors());
    let mut next = support::environment();
    next.scope = first.scope;
    let (_, second) = check_source("function b(x) = a(x)\nfunction a(x) = b(x)", &next).unwrap();
    let messages: Vec<_> = second.errors().map(|diagnostic| diagnostic.message.clone()).collect();
    assert_eq!(messages, vec!["`a` calls itself through `b`"]);
}

#[test]
fn a_cell_sees_what_earlier_cells_defined() {
    let environment = support::environment();
    let (_, first) = check_source("let lower = 1000 hPa to 500 hPa\nfunction depth(layer) = thickness(layer)", &environment).unwrap();
    let mut next = support::environment();
    next.scope = first.scope;
    let (_, second) = check_source("depth(lower) as dam", &next).unwrap();
    assert!(!second.has_errors(), "{:#?}", second.diagnostics);
    // A mistake inside a function from an earlier cell is shown at the call,
    // since the function's text is not in this cell.
    let (_, third) = check_source("depth(500 hPa)", &next).unwrap();
    let error = third.errors().next().unwrap();
    assert_eq!(error.message, "this call of `depth` fails inside the function");
    assert_eq!((error.span.start, error.span.end), (0, "depth(500 hPa)".len()));
}

#[test]
fn opaque_datasets_defer_to_the_evaluator() {
    // Without a catalog the checker cannot see inside the file: names it does
    // not know are assumed to be the file's.
    let environment = Environment::default();
    let (_, report) = check_source("open \"elsewhere.nc\"\nlet x = mystery_variable at 500 hPa\nthickness(1000 hPa to 500 hPa)", &environment).unwrap();
    assert!(!report.has_errors(), "{:#?}", report.diagnostics);
    // Without any dataset, names are unknown.
    let (_, report) = check_source("mystery_variable", &Environment::default()).unwrap();
    assert_eq!(report.errors().next().unwrap().message, "unknown name `mystery_variable`");
}

#[test]
fn names_and_calls_that_do_not_exist() {
    assert_eq!(errors("thermal_wnd(1000 hPa to 500 hPa)"), vec!["unknown function `thermal_wnd`"]);
    assert_eq!(report("thermal_wnd(1000 hPa to 500 hPa)").diagnostics[0].help.as_deref(), Some("did you mean `thermal_wind`?"));
    assert_eq!(errors("temperature(3)"), vec!["`temperature` is not a function"]);
    assert_eq!(errors("hPa"), vec!["unknown name `hPa`"]);
    let warnings = report("let speed = 3 m/s\nspeed");
    assert_eq!(warnings.diagnostics[0].severity, Severity::Warning);
}

#[test]
fn blocks_scope_their_bindings() {
    assert_eq!(unit_of(&last_kind("let s = { let t = thermal_wind(1000 hPa to 500 hPa); speed(t) }\ns")), "m/s");
    assert_eq!(errors("let s = { let inner = 1 K; inner }\ninner"), vec!["unknown name `inner`"]);
    assert_eq!(errors("let s = { let t = 1 K }"), vec!["a block must end with an expression that gives its value"]);
}

#[test]
fn recipes_are_checked_for_their_shape() {
    assert_eq!(errors("parameter a = 1\nparameter a = 2"), vec!["the parameter `a` is already declared"]);
    assert_eq!(errors("output a = 1\noutput a = 2"), vec!["the output `a` is already declared"]);
    assert_eq!(errors("recipe \"a\"\nrecipe \"b\""), vec!["a recipe has one title"]);
    let late = report("let a = 1\nrecipe \"late title\"");
    assert_eq!(late.diagnostics[0].severity, Severity::Warning);
}

#[test]
fn times_are_read_in_one_format() {
    assert_eq!(normalise_time("2026-10-14 06:00").as_deref(), Some("2026-10-14 06:00:00"));
    assert_eq!(normalise_time("2026-10-14T06:00:30Z").as_deref(), Some("2026-10-14 06:00:30"));
    assert_eq!(normalise_time("2026-10-14").as_deref(), Some("2026-10-14 00:00:00"));
    // 2028 is a leap year, 2026 is not (Gregorian rule).
    assert!(normalise_time("2028-02-29 00:00").is_some());
    assert!(normalise_time("2026-02-29 00:00").is_none());
    assert!(normalise_time("2026-13-01 00:00").is_none());
    assert!(normalise_time("2026-10-14 24:00").is_none());
    assert!(normalise_time("tomorrow").is_none());
    assert!(matches!(last_kind("time(3)"), Type::Time { .. }));
    assert!(matches!(last_kind("time(\"2026-10-14 12:00\")"), Type::Time { at: Some(_) }));
    // The case has five times, numbered 0 to 4.
    assert_eq!(errors("time(5)"), vec!["the data have no time step 5"]);
    assert_eq!(errors("time(\"noon\")"), vec!["\"noon\" is not a time"]);
    assert_eq!(errors("time(\"2026-11-01 00:00\")"), vec!["2026-11-01 00:00 is outside the times of the data"]);
    assert_eq!(errors("time(1.5)"), vec!["the index or string of `time` must be a time step number such as 0 or a time such as \"2026-10-14 06:00\""]);
}

#[test]
fn checking_an_empty_program_reports_nothing() {
    let program = baroc::lang::parser::parse("").unwrap();
    let report = check(&program, &support::environment());
    assert!(report.diagnostics.is_empty() && report.kinds.is_empty());
}

#[test]
fn long_chains_of_functions_are_refused_without_exhausting_the_stack() {
    // Thirty functions, each a 190-term sum that calls the previous one:
    // every tree is within the parser's limits, but checking a call nests
    // all the bodies. A 2 MiB stack (a test thread's) must be enough.
    let mut source = String::from("function f0(a) = a\n");
    for index in 1..30 {
        source.push_str(&format!("function f{index}(a) = f{}(a){}\n", index - 1, " + a".repeat(190)));
    }
    source.push_str("f29(1 K)\n");
    let messages = std::thread::Builder::new()
        .stack_size(2 << 20)
        .spawn(move || {
            let (_, report) = check_source(&source, &support::environment()).unwrap();
            report.errors().map(|diagnostic| diagnostic.message.clone()).collect::<Vec<_>>()
        })
        .unwrap()
        .join()
        .unwrap();
    assert_eq!(messages, vec!["this is nested too deeply to check"]);
}

#[test]
fn points_off_the_grid_are_warned_about() {
    // The case covers 30 to 70 north and 60 west to 20 east.
    no_errors("wind at point(52.5 north, 21 west)");
    let outside = report("wind at point(80 north, 21 west)");
    assert!(!outside.has_errors());
    assert_eq!(outside.diagnostics[0].message, "this point lies outside the grid of skerry_case.nc");
    assert_eq!(outside.diagnostics[0].help.as_deref(), Some("the grid covers 30 north to 70 north, 60 west to 20 east"));
    // 340 east is 20 west: inside, once longitudes wrap.
    assert!(report("wind at point(50 north, 340 east)").diagnostics.is_empty());
    assert_eq!(report("wind at point(50 north, 100 east)").diagnostics.len(), 1);
}
