//! Evaluation of the built-in operators: argument checking at run time
//! (the checker catches most mistakes earlier) and the mapping onto the
//! diagnostics engine.

use std::sync::Arc;

use super::diagnostic::{list_words, Diagnostic};
use super::eval::{engine_error, geopotential_kind, thickness_route, Evaluator};
use super::syntax::Span;
use super::value::{AngleAxis, FigureContent, FigureOption, FigureRequest, ReportRequest, Series, Value};
use crate::calendar::DateTime;
use crate::diagnostics::{self as engine, DiagnosticError, Layer};
use crate::grid::{Field, VectorField};
use crate::io::Selection;
use crate::physics::sampling::Region;
use crate::units::{Dimension, Unit};
use crate::text::{format_latitude, format_longitude};

type Result<T> = std::result::Result<T, Diagnostic>;

/// The built-in operators this evaluator knows, by name.
pub const NAMES: &[&str] = &[
    "geostrophic_wind",
    "thickness",
    "layer_mean_temperature",
    "thermal_wind",
    "geostrophic_shear",
    "wind_shear",
    "ageostrophic_wind",
    "ageostrophic_shear",
    "temperature_advection",
    "advection",
    "turning",
    "gradient",
    "divergence",
    "vorticity",
    "laplacian",
    "smooth",
    "potential_temperature",
    "static_stability",
    "eady_growth_rate",
    "area_mean",
    "interpolate",
    "speed",
    "direction",
    "dot",
    "cross_vertical",
    "vector",
    "point",
    "box",
    "time",
    "coriolis",
    "recipes",
    "save_recipe",
    "map",
    "hodograph",
    "profile",
    "section",
    "time_series",
    "panels",
    "write_report",
    "print",
    "clear_output",
    "audit",
];

pub use super::builtins::PRESENTATION;

fn error(message: impl Into<String>, span: Span) -> Diagnostic {
    Diagnostic::error(message, span)
}

struct Args<'a> {
    name: &'a str,
    values: Vec<(Value, Span)>,
    span: Span,
}

impl Args<'_> {
    fn count(&self, n: usize, signature: &str) -> Result<()> {
        if self.values.len() != n {
            return Err(error(format!("`{}` takes {n} argument{}, got {}", self.name, if n == 1 { "" } else { "s" }, self.values.len()), self.span)
                .with_help(format!("{}({signature})", self.name)));
        }
        Ok(())
    }

    fn get(&self, i: usize) -> &(Value, Span) {
        &self.values[i]
    }

    fn pressure(&self, i: usize) -> Result<f64> {
        let (v, span) = self.get(i);
        pressure_of(v).ok_or_else(|| wrong(self.name, v, *span, "a pressure such as 500 hPa"))
    }

    fn layer(&self, i: usize) -> Result<Layer> {
        let (v, span) = self.get(i);
        match v {
            Value::Layer(l) => Ok(*l),
            _ => Err(wrong(self.name, v, *span, "a pressure layer such as 1000 hPa to 500 hPa")),
        }
    }

    fn length(&self, i: usize) -> Result<f64> {
        let (v, span) = self.get(i);
        match v {
            Value::Number { value, unit } if unit.dimension() == Dimension::LENGTH => unit.convert(*value, &Unit::parse("m").expect("m")).map_err(|e| error(e.to_string(), *span)),
            _ => Err(wrong(self.name, v, *span, "a length such as 250 km")),
        }
    }
}

fn wrong(function: &str, v: &Value, span: Span, expected: &str) -> Diagnostic {
    error(format!("`{function}` expected {expected}, found {}", v.kind()), span).with_label(format!("{} here", v.kind()))
}

pub(crate) fn pressure_of(v: &Value) -> Option<f64> {
    match v {
        Value::Number { value, unit } if unit.dimension() == Dimension::PRESSURE => unit.convert(*value, &Unit::parse("Pa").ok()?).ok(),
        _ => None,
    }
}

struct Options {
    values: Vec<(String, Span, Value, Span)>,
}

impl Options {
    fn allow(&self, function: &str, allowed: &[&str]) -> Result<()> {
        for (name, span, _, _) in &self.values {
            if !allowed.contains(&name.as_str()) {
                let mut d = error(format!("`{function}` has no option `{name}`"), *span);
                d = if allowed.is_empty() { d.with_help(format!("`{function}` takes no options")) } else { d.with_help(format!("its options are {}", list_words(allowed, "and"))) };
                return Err(d);
            }
        }
        Ok(())
    }

    fn word(&self, name: &str) -> Option<(&str, Span)> {
        self.values.iter().find(|o| o.0 == name).and_then(|(_, _, v, s)| match v {
            Value::Word(w) | Value::Text(w) => Some((w.as_str(), *s)),
            _ => None,
        })
    }

    /// The weak-wind threshold of `turning` in m s-1 (`with weak_wind 4 m s-1`),
    /// else the default.
    fn weak_wind(&self) -> Result<f64> {
        match self.values.iter().find(|o| o.0 == "weak_wind") {
            None => Ok(crate::physics::thermal_wind::DEFAULT_WEAK_WIND),
            Some((_, _, Value::Number { value, unit }, span)) => {
                let metres_per_second = Unit::parse("m s-1").expect("m s-1");
                match unit.convert(*value, &metres_per_second) {
                    Ok(speed) if speed >= 0.0 && speed.is_finite() => Ok(speed),
                    Ok(_) => Err(error("the weak-wind threshold cannot be negative", *span).with_help("2.5 m s-1 is the default; 0 reports every angle")),
                    Err(_) => Err(error(format!("`weak_wind` takes a speed such as 2.5 m s-1, found a number in {unit}"), *span)),
                }
            }
            Some((_, _, other, span)) => Err(error(format!("`weak_wind` takes a speed such as 2.5 m s-1, found {}", other.kind()), *span)),
        }
    }

    fn equator_band(&self) -> Result<Option<f64>> {
        match self.values.iter().find(|o| o.0 == "equator_band") {
            None => Ok(None),
            Some((_, _, v, span)) => equator_band_degrees(v, *span).map(Some),
        }
    }

}

/// The half-width (degrees) an `equator_band` option's value gives (the
/// layer lookahead reads the option the same way).
pub(crate) fn equator_band_degrees(v: &Value, span: Span) -> Result<f64> {
    match v {
        Value::Number { value, unit } if unit.is_angle() || unit.is_dimensionless() => {
            let degrees = if unit.is_angle() { unit.convert(*value, &Unit::parse("degree").expect("degree")).unwrap_or(*value) } else { *value };
            if !(0.0..=45.0).contains(&degrees) {
                return Err(error("the equatorial band is given in degrees of latitude from 0 to 45", span));
            }
            Ok(degrees)
        }
        Value::Angle { degrees, .. } => Ok(degrees.abs()),
        other => Err(error(format!("`equator_band` takes an angle such as 10 degrees, found {}", other.kind()), span)),
    }
}

fn scalar(evaluator: &Evaluator, v: &Value, span: Span, selection: &Selection, function: &str) -> Result<Arc<Field>> {
    match evaluator.force_with(v.clone(), selection, span)? {
        Value::Scalar(f) => Ok(f),
        other => Err(wrong(function, &other, span, "a scalar field such as temperature at 500 hPa")),
    }
}

fn vector(evaluator: &Evaluator, v: &Value, span: Span, selection: &Selection, function: &str) -> Result<Arc<VectorField>> {
    match evaluator.force_with(v.clone(), selection, span)? {
        Value::Vector(w) => Ok(w),
        other => Err(wrong(function, &other, span, "a vector field such as wind at 500 hPa")),
    }
}

/// Evaluates one built-in call.
pub fn call_builtin(
    evaluator: &mut Evaluator,
    name: &str,
    name_span: Span,
    values: Vec<(Value, Span)>,
    options: Vec<(String, Span, Value, Span)>,
    selection: Selection,
    span: Span,
) -> Result<Value> {
    let args = Args { name, values, span };
    let options = Options { values: options };
    let case_of = |ev: &Evaluator, band: Option<f64>| ev.case_with(&selection, span, band);
    let sel = &selection;
    let ev = &*evaluator;
    let wrap = |r: std::result::Result<Field, DiagnosticError>| r.map(Value::scalar).map_err(|e| engine_error(e, span));
    let wrap_vector = |r: std::result::Result<VectorField, DiagnosticError>| r.map(Value::vector).map_err(|e| engine_error(e, span));
    // Results the run's store shares: the value holds the store's `Arc`,
    // no copy of the field.
    let wrap_shared = |r: std::result::Result<std::sync::Arc<Field>, DiagnosticError>| r.map(Value::Scalar).map_err(|e| engine_error(e, span));
    let wrap_shared_vector = |r: std::result::Result<std::sync::Arc<VectorField>, DiagnosticError>| r.map(Value::Vector).map_err(|e| engine_error(e, span));
    match name {
        "geostrophic_wind" => {
            options.allow(name, &["equator_band"])?;
            args.count(1, "geopotential_height at 500 hPa  or  500 hPa")?;
            let case = case_of(ev, options.equator_band()?)?;
            let (v, s) = args.get(0);
            if let Some(p) = pressure_of(v) {
                return wrap_shared_vector(case.geostrophic_wind_shared(p));
            }
            let f = scalar(ev, v, *s, sel, name)?;
            let kind = geopotential_kind(&f.units).ok_or_else(|| {
                error(format!("`geostrophic_wind` needs geopotential height (m) or geopotential (m2 s-2); `{}` is in `{}`", f.name, f.units), *s)
            })?;
            let at = f.attributes.iter().find(|(k, _)| k == "pressure_level").map(|(_, v)| format!("at {v}")).unwrap_or_default();
            wrap_vector(case.geostrophic_wind_of(&f, kind, &at))
        }
        "thickness" | "layer_mean_temperature" | "thermal_wind" | "ageostrophic_shear" => {
            let allowed: &[&str] = if name == "thermal_wind" || name == "ageostrophic_shear" { &["route", "equator_band", "integration"] } else { &["route", "integration"] };
            options.allow(name, allowed)?;
            args.count(1, "1000 hPa to 500 hPa")?;
            let layer = args.layer(0)?;
            let (word, word_span) = options.word("route").map_or((None, span), |(w, s)| (Some(w), s));
            let route = thickness_route(word, word_span)?;
            let mut case = case_of(ev, options.equator_band()?)?;
            case.integration = match options.word("integration") {
                None | Some(("quadratic", _)) => crate::physics::vertical::IntegrationRule::Quadratic,
                Some(("trapezoid", _)) => crate::physics::vertical::IntegrationRule::Trapezoid,
                Some((other, word_span)) => {
                    return Err(error(format!("`{other}` is not an integration rule"), word_span).with_help("integration rules: quadratic (the default), trapezoid"))
                }
            };
            match name {
                "thickness" => wrap_shared(case.thickness_shared(layer, route)),
                "layer_mean_temperature" => wrap(case.layer_mean_temperature(layer, route)),
                "thermal_wind" => wrap_shared_vector(case.thermal_wind_shared(layer, route)),
                _ => wrap_vector(case.ageostrophic_shear(layer, route)),
            }
        }
        "geostrophic_shear" | "ageostrophic_wind" => {
            options.allow(name, &["equator_band"])?;
            args.count(1, "500 hPa")?;
            let p = args.pressure(0)?;
            let case = case_of(ev, options.equator_band()?)?;
            if name == "geostrophic_shear" {
                wrap_vector(case.geostrophic_shear(p))
            } else {
                wrap_vector(case.ageostrophic_wind(p))
            }
        }
        "wind_shear" | "turning" | "static_stability" | "eady_growth_rate" => {
            options.allow(
                name,
                match name {
                    "wind_shear" | "static_stability" => &[],
                    "turning" => &["equator_band", "weak_wind"],
                    _ => &["equator_band"],
                },
            )?;
            args.count(1, "1000 hPa to 500 hPa")?;
            let layer = args.layer(0)?;
            let case = case_of(ev, options.equator_band()?)?;
            match name {
                "wind_shear" => wrap_vector(case.wind_shear(layer)),
                "turning" => wrap(case.turning_with(layer, options.weak_wind()?)),
                "static_stability" => wrap(case.static_stability(layer)),
                _ => wrap(case.eady_growth_rate(layer)),
            }
        }
        "temperature_advection" => {
            options.allow(name, &["equator_band"])?;
            args.count(1, "850 hPa  or  1000 hPa to 500 hPa")?;
            let case = case_of(ev, options.equator_band()?)?;
            match &args.get(0).0 {
                Value::Layer(l) => wrap_shared(case.layer_temperature_advection_shared(*l)),
                v => match pressure_of(v) {
                    Some(p) => wrap(case.temperature_advection(p)),
                    None => Err(wrong(name, v, args.get(0).1, "a pressure such as 850 hPa or a layer such as 1000 hPa to 500 hPa")),
                },
            }
        }
        "advection" => {
            options.allow(name, &[])?;
            args.count(2, "scalar, wind")?;
            let s = scalar(ev, &args.get(0).0, args.get(0).1, sel, name)?;
            let w = vector(ev, &args.get(1).0, args.get(1).1, sel, name)?;
            wrap(engine::advect(&s, &w, &ev.constants))
        }
        "gradient" | "laplacian" => {
            options.allow(name, &[])?;
            args.count(1, "scalar field")?;
            let s = scalar(ev, &args.get(0).0, args.get(0).1, sel, name)?;
            if name == "gradient" {
                wrap_vector(engine::gradient(&s, &ev.constants))
            } else {
                wrap(engine::laplacian(&s, &ev.constants))
            }
        }
        "divergence" | "vorticity" => {
            options.allow(name, &[])?;
            args.count(1, "vector field")?;
            let w = vector(ev, &args.get(0).0, args.get(0).1, sel, name)?;
            if name == "divergence" {
                wrap(engine::divergence(&w, &ev.constants))
            } else {
                wrap(engine::vorticity(&w, &ev.constants))
            }
        }
        "smooth" => {
            options.allow(name, &[])?;
            args.count(2, "field, 250 km")?;
            let sigma = args.length(1)?;
            match ev.force_with(args.get(0).0.clone(), sel, args.get(0).1)? {
                Value::Scalar(f) => wrap(engine::smooth(&f, &ev.constants, sigma)),
                Value::Vector(w) => {
                    let e = engine::smooth(&w.eastward, &ev.constants, sigma).map_err(|e| engine_error(e, span))?;
                    let n = engine::smooth(&w.northward, &ev.constants, sigma).map_err(|e| engine_error(e, span))?;
                    Ok(Value::vector(VectorField { eastward: e, northward: n }))
                }
                other => Err(wrong(name, &other, args.get(0).1, "a scalar or vector field")),
            }
        }
        "potential_temperature" => {
            options.allow(name, &[])?;
            args.count(1, "500 hPa")?;
            let p = args.pressure(0)?;
            wrap(case_of(ev, None)?.potential_temperature(p))
        }
        "interpolate" => {
            options.allow(name, &[])?;
            args.count(2, "field, 450 hPa")?;
            let p = args.pressure(1)?;
            let (v, s) = args.get(0);
            match v {
                Value::Data(d) => {
                    let case = case_of(ev, None)?;
                    wrap_shared(case.at_pressure_shared(&d.variable, p, false))
                }
                _ => {
                    let f = scalar(ev, v, *s, sel, name)?;
                    let levels = f.levels.clone().ok_or_else(|| error(format!("`{}` has no pressure levels", f.name), *s))?;
                    let w = crate::physics::vertical::interpolation_weights(&levels, p).map_err(|e| engine_error(e.into(), span))?;
                    let data = crate::physics::vertical::apply_weights(f.data.view(), &w, 1.0).insert_axis(ndarray::Axis(1));
                    let mut out = f.derived_without_levels(&f.name, &f.units, data).map_err(|e| error(e, span))?;
                    out.long_name = f.long_name.clone();
                    Ok(Value::scalar(out))
                }
            }
        }
        "speed" | "direction" => {
            options.allow(name, &[])?;
            args.count(1, "vector field")?;
            let w = vector(ev, &args.get(0).0, args.get(0).1, sel, name)?;
            if name == "speed" {
                Ok(Value::scalar(w.speed()))
            } else {
                let mut data = w.eastward.data.clone();
                ndarray::Zip::from(&mut data).and(&w.northward.data).par_for_each(|u, &v| *u = crate::physics::wind::direction_from(*u as f64, v as f64) as f32);
                let mut f = w.eastward.derived(&w.direction_name(), "degree", data).map_err(|e| error(e, span))?;
                f.long_name = format!("direction (from) of {}", w.eastward.long_name.replace("eastward ", ""));
                Ok(Value::scalar(f))
            }
        }
        "dot" => {
            options.allow(name, &[])?;
            args.count(2, "vector, vector")?;
            let a = vector(ev, &args.get(0).0, args.get(0).1, sel, name)?;
            let b = vector(ev, &args.get(1).0, args.get(1).1, sel, name)?;
            let units = Unit::parse(&a.eastward.units).and_then(|x| x.multiply(&Unit::parse(&b.eastward.units)?)).map(|u| u.to_string()).unwrap_or_else(|_| "1".into());
            let e = super::eval::zip_fields(&a.eastward, &b.eastward, "dot", &units, |x, y| x * y, span)?;
            let n = super::eval::zip_fields(&a.northward, &b.northward, "dot", &units, |x, y| x * y, span)?;
            let mut out = super::eval::zip_fields(&e, &n, "dot_product", &units, |x, y| x + y, span)?;
            out.long_name = "dot product".into();
            Ok(Value::scalar(out))
        }
        "cross_vertical" => {
            options.allow(name, &[])?;
            args.count(1, "vector field")?;
            let w = vector(ev, &args.get(0).0, args.get(0).1, sel, name)?;
            // k x (u, v) = (-v, u): the vector turned 90 degrees anticlockwise.
            let e = super::eval::map_field(&w.northward, "cross_vertical_eastward", &w.northward.units, |x| -x)?;
            let n = super::eval::map_field(&w.eastward, "cross_vertical_northward", &w.eastward.units, |x| x)?;
            Ok(Value::vector(VectorField { eastward: e, northward: n }))
        }
        "vector" => {
            options.allow(name, &[])?;
            args.count(2, "eastward, northward")?;
            let u = scalar(ev, &args.get(0).0, args.get(0).1, sel, name)?;
            let v = scalar(ev, &args.get(1).0, args.get(1).1, sel, name)?;
            Ok(Value::vector(VectorField::new((*u).clone(), (*v).clone()).map_err(|e| error(e, span))?))
        }
        "point" => {
            options.allow(name, &[])?;
            args.count(2, "52.5 north, 20 west")?;
            let lat = angle(&args, 0, AngleAxis::Latitude)?;
            let lon = angle(&args, 1, AngleAxis::Longitude)?;
            Ok(Value::Point { latitude: lat, longitude: lon })
        }
        "box" => {
            options.allow(name, &[])?;
            args.count(2, "40 north to 65 north, 50 west to 5 east")?;
            let (south, north) = angle_range(&args, 0, AngleAxis::Latitude)?;
            let (west, east) = angle_range(&args, 1, AngleAxis::Longitude)?;
            Ok(Value::Region(Region { south: south.min(north), north: south.max(north), west, east }))
        }
        "time" => {
            options.allow(name, &[])?;
            args.count(1, "2  or  \"2026-10-14 06:00\"")?;
            match &args.get(0).0 {
                Value::Number { value, unit } if unit.is_dimensionless() && value.fract() == 0.0 && *value >= 0.0 => Ok(Value::TimeIndex(*value as usize)),
                Value::Text(t) => DateTime::parse(t).map(Value::Time).map_err(|e| error(format!("`{t}` is not a time: {e}"), args.get(0).1)),
                other => Err(wrong(name, other, args.get(0).1, "a time step number or a time such as \"2026-10-14 06:00\"")),
            }
        }
        "coriolis" => {
            options.allow(name, &[])?;
            args.count(1, "45 north")?;
            let lat = angle(&args, 0, AngleAxis::Latitude)?;
            Ok(Value::number(ev.constants.coriolis(lat), Unit::parse("s-1").expect("s-1")))
        }
        "area_mean" => {
            options.allow(name, &[])?;
            args.count(2, "field, box(...)")?;
            let region = match &args.get(1).0 {
                Value::Region(r) => *r,
                other => return Err(wrong(name, other, args.get(1).1, "a region such as box(40 north to 65 north, 50 west to 5 east)")),
            };
            let inner = Selection { region: Some(region), ..selection.clone() };
            let f = scalar(ev, &args.get(0).0, args.get(0).1, &inner, name)?;
            let stats = engine::area_statistics(&f, &region).map_err(|e| engine_error(e, span))?;
            let labels: Vec<String> = {
                let times = f.times.as_ref().map(|t| t.labels()).unwrap_or_else(|| vec![String::new()]);
                let levels: Vec<String> = f.levels.as_ref().map(|l| l.iter().map(|p| format!("{} hPa", p / 100.0)).collect()).unwrap_or_else(|| vec![String::new()]);
                times.iter().flat_map(|t| levels.iter().map(move |l| format!("{t} {l}").trim().to_string())).collect()
            };
            let u = &f.units;
            Ok(Value::Series(Series {
                title: format!("{} over {} to {}, {} to {} (cos-latitude weighted)", f.long_name, format_latitude(region.south), format_latitude(region.north), format_longitude(region.west), format_longitude(region.east)),
                columns: vec![format!("mean ({u})"), format!("minimum ({u})"), format!("maximum ({u})"), "valid points".into(), "missing points".into()],
                labels,
                rows: stats.iter().map(|s| vec![s.weighted_mean, s.minimum, s.maximum, s.valid_points as f64, s.missing_points as f64]).collect(),
            }))
        }
        "audit" => {
            // The balance audit of the open dataset (times and region as
            // selected); the work and its presentation live in `crate::audit`.
            options.allow(name, &["integration"])?;
            args.count(0, "")?;
            let case = case_of(ev, None)?;
            let mut settings = crate::audit::AuditSettings { equator_band: case.equator_band, constants: case.constants, ..crate::audit::AuditSettings::default() };
            match options.word("integration") {
                None | Some(("trapezoid", _)) => {}
                Some(("quadratic", _)) => settings.integration = crate::physics::vertical::IntegrationRule::Quadratic,
                Some((other, word_span)) => return Err(error(format!("`{other}` is not an integration rule"), word_span).with_help("integration rules: trapezoid (the audit's default), quadratic")),
            }
            // A request: the front end computes and tabulates it (the
            // audit's tables are drawn by the renderers).
            let content = FigureContent::Audit { case: Arc::new(case), settings };
            Ok(Value::Figure(FigureRequest { operator: name.to_string(), content, options: Vec::new(), span, dataset: evaluator.current_dataset().cloned() }))
        }
        "recipes" => {
            options.allow(name, &[])?;
            args.count(0, "")?;
            Ok(Value::Text(super::recipe::library_listing(&evaluator.recipe_folders)))
        }
        "map" | "hodograph" | "profile" | "section" | "time_series" | "panels" => {
            let content = figure_content(evaluator, name, &args, &selection, span)?;
            let options = options.values.into_iter().map(|(name, name_span, value, value_span)| FigureOption { name, name_span, value, value_span }).collect();
            Ok(Value::Figure(FigureRequest { operator: name.to_string(), content, options, span, dataset: evaluator.current_dataset().cloned() }))
        }
        "write_report" => {
            options.allow(name, &[])?;
            args.count(1, "\"case-study.html\"")?;
            let path = match &args.get(0).0 {
                Value::Text(t) => evaluator.base_directory.join(t),
                other => return Err(wrong(name, other, args.get(0).1, "a file name such as \"case-study.html\"")),
            };
            if evaluator.outputs.is_empty() {
                return Err(error("no outputs to report: declare some with `output name = ...`", args.get(0).1));
            }
            Ok(Value::Report(ReportRequest { path, span: args.get(0).1 }))
        }
        "print" => {
            options.allow(name, &[])?;
            let mut parts = Vec::new();
            for (v, _) in &args.values {
                parts.push((evaluator.describe)(v));
            }
            super::eval::print_line(&parts.join(" "));
            Ok(Value::Text(String::new()))
        }
        "clear_output" => {
            // `with wait true` keeps the old output until new output arrives
            // (the messaging protocol's clear_output), so a cell that redraws
            // does not flicker.
            options.allow(name, &["wait"])?;
            args.count(0, "")?;
            let wait = match options.values.iter().find(|o| o.0 == "wait") {
                None => false,
                Some((_, _, Value::Bool(b), _)) => *b,
                Some((_, _, other, span)) => return Err(wrong(name, other, *span, "true or false")),
            };
            super::eval::request_clear_output(wait);
            Ok(Value::Text(String::new()))
        }
        "save_recipe" => {
            options.allow(name, &[])?;
            args.count(1, "\"my-recipe\"")?;
            let file = match &args.get(0).0 {
                Value::Text(t) => t.clone(),
                other => return Err(wrong(name, other, args.get(0).1, "a recipe name such as \"lower-shear\"")),
            };
            let path = super::recipe::save_session(evaluator, &file).map_err(|e| error(e, args.get(0).1))?;
            Ok(Value::Text(format!("saved the recipe to {}", path.display())))
        }
        _ => {
            if let Some(path) = evaluator.recipe_path(name) {
                return super::recipe::call_recipe(evaluator, &path, name, args.values, options.values, span);
            }
            let mut d = error(format!("unknown function `{name}`"), name_span);
            if let Some(s) = super::diagnostic::did_you_mean(name, NAMES.iter().copied()) {
                d = d.with_help(format!("did you mean `{s}`?"));
            }
            Err(d)
        }
    }
}

/// The evaluated inputs of a presentation operator: its arguments read
/// and checked (the options are left to the drawing side).
fn figure_content(evaluator: &Evaluator, name: &str, args: &Args, selection: &Selection, span: Span) -> Result<FigureContent> {
    let ev = evaluator;
    let sel = selection;
    let first_time = || Selection { times: Some(vec![selection.times.as_ref().and_then(|t| t.first().copied()).unwrap_or(0)]), ..selection.clone() };
    match name {
        "map" => {
            if args.values.is_empty() || args.values.len() > 2 {
                return Err(error("`map` takes a field to shade and, optionally, a vector field to draw on it", span).with_help("map(thickness(1000 hPa to 500 hPa), thermal_wind(1000 hPa to 500 hPa))"));
            }
            match ev.force_with(args.get(0).0.clone(), sel, args.get(0).1)? {
                Value::Scalar(field) => {
                    let vectors = match args.values.get(1) {
                        Some((v, s)) => Some(vector(ev, v, *s, sel, name)?),
                        None => None,
                    };
                    Ok(FigureContent::FieldMap { field, vectors })
                }
                Value::Vector(vectors) => Ok(FigureContent::VectorMap { vectors }),
                other => Err(wrong(name, &other, args.get(0).1, "a scalar or vector field")),
            }
        }
        "hodograph" => {
            args.count(1, "point(51.5 north, 31 west)")?;
            let (latitude, longitude) = point(args, 0)?;
            let case = ev.case_with(selection, span, None)?;
            Ok(FigureContent::Hodograph { case: Arc::new(case), latitude, longitude })
        }
        "profile" => {
            if args.values.len() < 2 {
                return Err(error("`profile` takes one or more fields with levels, then a point", span).with_help("profile(temperature, point(51.5 north, 31 west))"));
            }
            let last = args.values.len() - 1;
            let (latitude, longitude) = point(args, last)?;
            let mut fields = Vec::new();
            for (v, s) in &args.values[..last] {
                fields.push(scalar(ev, v, *s, &first_time(), name)?);
            }
            Ok(FigureContent::Profile { fields, latitude, longitude })
        }
        "section" => {
            if args.values.len() != 3 && args.values.len() != 4 {
                return Err(error("`section` takes a field with levels, optionally a wind, and two points", span).with_help("section(temperature, wind, point(40 north, 40 west), point(62 north, 20 west))"));
            }
            let field = scalar(ev, &args.get(0).0, args.get(0).1, &first_time(), name)?;
            let n = args.values.len();
            let wind = if n == 4 { Some(vector(ev, &args.get(1).0, args.get(1).1, &first_time(), name)?) } else { None };
            let (from, to) = (point(args, n - 2)?, point(args, n - 1)?);
            Ok(FigureContent::Section { field, wind, from, to })
        }
        "time_series" => {
            args.count(1, "thickness(1000 hPa to 500 hPa) at point(51.5 north, 31 west)")?;
            match &args.get(0).0 {
                Value::Series(series) => Ok(FigureContent::TimeSeries { series: series.clone() }),
                other => Err(wrong(name, other, args.get(0).1, "a table over time, such as a field at a point or an area_mean")),
            }
        }
        _ => {
            let mut figures = Vec::new();
            for (v, s) in &args.values {
                match v {
                    Value::Figure(request) => figures.push(request.clone()),
                    other => return Err(wrong(name, other, *s, "a figure such as map(...) or hodograph(...)")),
                }
            }
            if figures.is_empty() {
                return Err(error("`panels` needs at least one figure", span).with_help("panels(map(thickness(1000 hPa to 500 hPa)), hodograph(point(51.5 north, 31 west)))"));
            }
            Ok(FigureContent::Panels { figures })
        }
    }
}

fn angle(args: &Args, i: usize, axis: AngleAxis) -> Result<f64> {
    let (v, span) = args.get(i);
    let expected = if axis == AngleAxis::Latitude { "a latitude such as 52.5 north" } else { "a longitude such as 20 west" };
    match v {
        Value::Angle { degrees, axis: a } if *a == axis => Ok(*degrees),
        _ => Err(wrong(args.name, v, *span, expected)),
    }
}

fn point(args: &Args, i: usize) -> Result<(f64, f64)> {
    match &args.get(i).0 {
        Value::Point { latitude, longitude } => Ok((*latitude, *longitude)),
        other => Err(wrong(args.name, other, args.get(i).1, "a point such as point(51.5 north, 31 west)")),
    }
}

fn angle_range(args: &Args, i: usize, axis: AngleAxis) -> Result<(f64, f64)> {
    let (v, span) = args.get(i);
    let expected = if axis == AngleAxis::Latitude { "a range of latitudes such as 40 north to 65 north" } else { "a range of longitudes such as 50 west to 5 east" };
    match v {
        Value::Range(a, b) => match (&**a, &**b) {
            (Value::Angle { degrees: x, axis: ax }, Value::Angle { degrees: y, axis: ay }) if *ax == axis && *ay == axis => Ok((*x, *y)),
            _ => Err(wrong(args.name, v, *span, expected)),
        },
        _ => Err(wrong(args.name, v, *span, expected)),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_evaluator_and_the_checker_know_the_same_operators() {
        // One list of names the evaluator dispatches on, one table the checker
        // and inspection read: they must agree.
        for b in crate::lang::builtins::BUILTINS {
            assert!(NAMES.contains(&b.name), "`{}` is in the checker's table but the evaluator cannot run it", b.name);
        }
        for n in NAMES {
            assert!(
                crate::lang::builtins::BUILTINS.iter().any(|b| b.name == *n) || PRESENTATION.contains(n),
                "`{n}` runs but the checker does not know it"
            );
        }
    }
}
