//! The headless runner: evaluates a script or recipe against data files,
//! collects its named results, writes them as CF NetCDF (atomically) or
//! prints them as tables. The CLI's `run` and `table` commands and the
//! report are thin layers over this.

use std::path::{Path, PathBuf};
use std::sync::Arc;

use rayon::prelude::*;

use crate::grid::Field;
use crate::io::writer::{write_named_fields, WriteOptions};
use crate::io::{Dataset, Selection};
use crate::lang::eval::{Evaluator, RecipeHeader};
use crate::lang::value::{Series, Value};
use crate::lang::{self, RenderOptions};

/// What to run.
#[derive(Debug, Clone)]
pub struct RunRequest {
    /// The program text (a script, a recipe, or one expression).
    pub source: String,
    /// Where the text came from, for messages and provenance.
    pub origin: String,
    pub data_files: Vec<PathBuf>,
    /// Parameter overrides, each `name=value` with the value in Baroc syntax.
    pub overrides: Vec<(String, String)>,
    /// Run each time step separately (in parallel) and join the results.
    pub each_time: bool,
    /// Restrict the run to these time steps (indices into the data's times).
    pub time_steps: Option<Vec<usize>>,
    pub progress: bool,
    /// Folders searched for recipes.
    pub recipe_folders: Vec<PathBuf>,
}

/// A result with a name, ready to write or tabulate.
#[derive(Clone)]
pub struct NamedResult {
    pub name: String,
    pub value: Value,
}

/// The outcome of a run.
pub struct RunOutcome {
    pub results: Vec<NamedResult>,
    pub header: RecipeHeader,
    pub dataset: Option<Arc<Dataset>>,
}

/// A user error, rendered once with its caret.
#[derive(Debug, Clone, PartialEq)]
pub struct RunError(pub String);

impl std::fmt::Display for RunError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.0)
    }
}

fn rendered(diagnostics: &[lang::Diagnostic], source: &str) -> RunError {
    RunError(lang::render_all(diagnostics, source, &RenderOptions::default()))
}

fn parse_override(evaluator: &mut Evaluator, name: &str, text: &str) -> Result<Value, RunError> {
    let program = lang::parse(text).map_err(|d| RunError(format!("--set {name}: {}", lang::render_all(&d, text, &RenderOptions::default()))))?;
    let mut values = evaluator.run(&program, text).map_err(|d| RunError(format!("--set {name}: {}", lang::render(&d, text, &RenderOptions::default()))))?;
    values.pop().map(|(_, v)| v).ok_or_else(|| RunError(format!("--set {name}: expected a value, such as --set \"{name}=850 hPa to 500 hPa\"")))
}

fn evaluator_for(request: &RunRequest, dataset: Option<&Arc<Dataset>>) -> Result<Evaluator, RunError> {
    let mut evaluator = Evaluator::new();
    evaluator.describe = crate::display::plain;
    evaluator.recipe_folders = request.recipe_folders.clone();
    evaluator.base_directory = std::env::current_dir().unwrap_or_else(|_| PathBuf::from("."));
    if let Some(d) = dataset {
        evaluator.attach_dataset("data", d.clone());
    }
    evaluator.base_selection = Selection { times: request.time_steps.clone(), ..Selection::default() };
    for (name, text) in &request.overrides {
        let value = parse_override(&mut evaluator, name, text)?;
        evaluator.overrides.insert(name.clone(), value);
    }
    Ok(evaluator)
}

/// Names of the results to keep: the recipe's outputs if it declares any,
/// otherwise every top-level binding holding a field, vector or table, and
/// the value of a final expression as `result`.
fn collect(evaluator: &Evaluator, shown: Vec<(lang::Span, Value)>) -> Vec<NamedResult> {
    let keep = |v: &Value| matches!(v, Value::Scalar(_) | Value::Vector(_) | Value::Series(_));
    let mut results: Vec<NamedResult> = if !evaluator.outputs.is_empty() {
        evaluator.outputs.iter().map(|(n, v)| NamedResult { name: n.clone(), value: v.clone() }).collect()
    } else {
        evaluator.bindings().into_iter().filter(|(_, v)| keep(v)).map(|(name, value)| NamedResult { name, value }).collect()
    };
    let shown: Vec<Value> = shown.into_iter().map(|(_, v)| v).filter(keep).collect();
    let count = shown.len();
    for (i, value) in shown.into_iter().enumerate() {
        let name = if count == 1 { "result".to_string() } else { format!("result_{}", i + 1) };
        if !results.iter().any(|r| r.name == name) {
            results.push(NamedResult { name, value });
        }
    }
    results
}

/// Runs a request. With `each_time`, every time step is evaluated on its
/// own (in parallel, two at a time on two cores) and the fields joined
/// along time; otherwise the whole program runs once.
pub fn run(request: &RunRequest) -> Result<RunOutcome, RunError> {
    run_opened(request, open_data(request)?)
}

/// Opens the request's data files as one dataset (None without files),
/// with the program's `setting below_ground`, if any, agreeing with the
/// command line's: the data are opened once, with that choice.
pub fn open_data(request: &RunRequest) -> Result<Option<Arc<Dataset>>, RunError> {
    if request.data_files.is_empty() {
        return Ok(None);
    }
    let program = lang::parse(&request.source).map_err(|d| rendered(&d, &request.source))?;
    let below = lang::settings::below_ground_of(&program, crate::io::model_level_source::chosen_below_lowest_level()).map_err(|d| rendered(&[d], &request.source))?;
    let opened = match below {
        Some(below) => Dataset::open_with(&request.data_files, below),
        None => Dataset::open(&request.data_files),
    };
    Ok(Some(Arc::new(opened.map_err(|e| RunError(format!("error: {e}")))?)))
}

/// `run` on the request's data already opened by `open_data` (so a caller
/// that opened them to size the run does not open them again).
pub fn run_opened(request: &RunRequest, dataset: Option<Arc<Dataset>>) -> Result<RunOutcome, RunError> {
    let program = lang::parse(&request.source).map_err(|d| rendered(&d, &request.source))?;
    let all_steps = dataset.as_ref().and_then(|d| d.variables().find_map(|v| v.times.as_ref().map(|t| t.values.len()))).unwrap_or(1);
    let step_list: Vec<usize> = request.time_steps.clone().unwrap_or_else(|| (0..all_steps).collect());
    let steps = step_list.len();
    if !request.each_time || steps <= 1 {
        let mut evaluator = evaluator_for(request, dataset.as_ref())?;
        lang::check_program(&program, &request.source, &evaluator).map_err(|d| rendered(&d, &request.source))?;
        let mut shown = evaluator.run(&program, &request.source).map_err(|d| rendered(&[d], &request.source))?;
        crate::report::carry_out(&evaluator, shown.iter_mut().map(|(_, v)| v)).map_err(|d| rendered(&[d], &request.source))?;
        let results = collect(&evaluator, shown);
        // Data the program opened itself (`open`) carry its provenance too.
        let dataset = dataset.or_else(|| evaluator.current_dataset().cloned());
        return Ok(RunOutcome { results, header: evaluator.recipe.clone(), dataset });
    }
    let bar = request.progress.then(|| {
        let b = indicatif::ProgressBar::new(steps as u64);
        b.set_style(indicatif::ProgressStyle::with_template("{prefix} [{bar:30}] {pos}/{len} time steps, {elapsed}").unwrap_or_else(|_| indicatif::ProgressStyle::default_bar()));
        b.set_prefix("running");
        b
    });
    {
        let evaluator = evaluator_for(request, dataset.as_ref())?;
        lang::check_program(&program, &request.source, &evaluator).map_err(|d| rendered(&d, &request.source))?;
    }
    let per_step: Vec<Result<(Vec<NamedResult>, RecipeHeader), RunError>> = step_list
        .par_iter()
        .map(|&t| {
            let mut evaluator = evaluator_for(request, dataset.as_ref())?;
            evaluator.base_selection = Selection { times: Some(vec![t]), ..Selection::default() };
            let shown = evaluator.run(&program, &request.source).map_err(|d| rendered(&[d], &request.source))?;
            if let Some(b) = &bar {
                b.inc(1);
            }
            Ok((collect(&evaluator, shown), evaluator.recipe.clone()))
        })
        .collect();
    if let Some(b) = bar {
        b.finish_and_clear();
    }
    let mut steps_out = Vec::new();
    let mut header = RecipeHeader::default();
    for r in per_step {
        let (results, h) = r?;
        header = h;
        steps_out.push(results);
    }
    let results = join_along_time(steps_out)?;
    Ok(RunOutcome { results, header, dataset })
}

fn join_fields(parts: &[&Field]) -> Result<Field, RunError> {
    let views: Vec<_> = parts.iter().map(|f| f.data.view()).collect();
    let data = ndarray::concatenate(ndarray::Axis(0), &views).map_err(|e| RunError(format!("cannot join time steps: {e}")))?;
    let mut out = parts[0].clone();
    out.data = data;
    if let Some(first) = &parts[0].times {
        let mut values = Vec::new();
        for p in parts {
            values.extend(p.times.as_ref().map(|t| t.values.clone()).unwrap_or_default());
        }
        out.times = Some(crate::grid::TimeAxis { values, units: first.units.clone(), calendar: first.calendar.clone() });
    }
    Ok(out)
}

fn join_along_time(steps: Vec<Vec<NamedResult>>) -> Result<Vec<NamedResult>, RunError> {
    let Some(first) = steps.first() else { return Ok(Vec::new()) };
    let mut out = Vec::new();
    for (k, r) in first.iter().enumerate() {
        let same: Vec<&Value> = steps.iter().filter_map(|s| s.get(k).map(|x| &x.value)).collect();
        let value = match &r.value {
            Value::Scalar(_) => {
                let fields: Vec<&Field> = same.iter().filter_map(|v| if let Value::Scalar(f) = v { Some(&**f) } else { None }).collect();
                Value::scalar(join_fields(&fields)?)
            }
            Value::Vector(_) => {
                let u: Vec<&Field> = same.iter().filter_map(|v| if let Value::Vector(w) = v { Some(&w.eastward) } else { None }).collect();
                let v: Vec<&Field> = same.iter().filter_map(|v| if let Value::Vector(w) = v { Some(&w.northward) } else { None }).collect();
                Value::vector(crate::grid::VectorField { eastward: join_fields(&u)?, northward: join_fields(&v)? })
            }
            Value::Series(s) => {
                let mut joined = Series { title: s.title.clone(), columns: s.columns.clone(), labels: Vec::new(), rows: Vec::new() };
                for v in &same {
                    if let Value::Series(x) = v {
                        joined.labels.extend(x.labels.clone());
                        joined.rows.extend(x.rows.clone());
                    }
                }
                Value::Series(joined)
            }
            other => other.clone(),
        };
        out.push(NamedResult { name: r.name.clone(), value });
    }
    Ok(out)
}

/// Writes the field and vector results to one CF NetCDF file, a vector as
/// `<name>_eastward` and `<name>_northward`, with the script in `history`
/// and in a `baroc_script` attribute. Results on other grids than the first
/// are refused with the names of both.
pub fn write_results(path: &Path, outcome: &RunOutcome, request: &RunRequest) -> Result<Vec<String>, RunError> {
    write_results_with(path, outcome, request, Vec::new())
}

/// How model-level data were brought to pressure levels (and what below
/// ground gave), when the data had any (`io::model_level_source`).
fn model_level_provenance(dataset: Option<&Dataset>) -> Vec<(String, String)> {
    let mut out: Vec<(String, String)> = Vec::new();
    for (_, attributes) in dataset.map(|d| d.global_attributes()).unwrap_or_default() {
        for (key, value) in attributes {
            if key == crate::io::model_level_source::PROVENANCE_ATTRIBUTE && !out.iter().any(|(_, v)| *v == value) {
                out.push((key, value));
            }
        }
    }
    out
}

/// `write_results` with further global attributes (a shard's record).
pub fn write_results_with(path: &Path, outcome: &RunOutcome, request: &RunRequest, attributes: Vec<(String, String)>) -> Result<Vec<String>, RunError> {
    write_results_within(path, outcome, request, attributes, None)
}

/// `write_results_with`, building the file in memory only when its data
/// take at most `memory_image_limit` bytes (`io::writer::WriteOptions`; a
/// run bounded in memory passes a share of its limit).
pub fn write_results_within(
    path: &Path,
    outcome: &RunOutcome,
    request: &RunRequest,
    attributes: Vec<(String, String)>,
    memory_image_limit: Option<usize>,
) -> Result<Vec<String>, RunError> {
    // Each result is written under its name as it stands (no copy of the data).
    let mut fields: Vec<(String, &Field)> = Vec::new();
    for r in &outcome.results {
        match &r.value {
            Value::Scalar(f) => fields.push((r.name.clone(), &**f)),
            Value::Vector(w) => {
                for (component, f) in [("eastward", &w.eastward), ("northward", &w.northward)] {
                    fields.push((format!("{}_{component}", r.name), f));
                }
            }
            _ => {}
        }
    }
    if fields.is_empty() {
        return Err(RunError("error: the script produced no field to write (bind one with `let`, or declare an `output`)".into()));
    }
    let refs: Vec<(&str, &Field)> = fields.iter().map(|(name, f)| (name.as_str(), *f)).collect();
    let overrides: Vec<String> = request.overrides.iter().map(|(k, v)| format!("--set {k}={v}")).collect();
    let options = WriteOptions {
        history: format!(
            "{}: baroc {} run {} {} {}",
            crate::report::utc_now(),
            env!("CARGO_PKG_VERSION"),
            request.origin,
            overrides.join(" "),
            request.data_files.iter().map(|p| p.display().to_string()).collect::<Vec<_>>().join(" ")
        ),
        global_attributes: [("baroc_script".to_string(), request.source.clone()), (crate::shard::ATTRIBUTE_PARAMETERS.to_string(), overrides.join(" "))]
            .into_iter()
            .chain(attributes)
            .chain(model_level_provenance(outcome.dataset.as_deref()))
            .collect(),
        memory_image_limit,
        ..WriteOptions::default()
    };
    write_named_fields(path, &refs, &options).map_err(|e| RunError(format!("error: {e}")))?;
    Ok(fields.into_iter().map(|(name, _)| name).collect())
}

/// How tables are printed.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum TableFormat {
    #[default]
    Text,
    Csv,
    Json,
}

/// One table row: result, place, time/level label, then values.
#[derive(Debug, Clone, serde::Serialize)]
pub struct TableRow {
    pub result: String,
    pub place: String,
    pub label: String,
    pub columns: Vec<String>,
    pub values: Vec<f64>,
}

/// Samples every result at the points and summarises it over the regions.
pub fn tabulate(outcome: &RunOutcome, points: &[(f64, f64)], regions: &[crate::physics::sampling::Region]) -> Result<Vec<TableRow>, RunError> {
    use crate::diagnostics::{area_statistics, point_values};
    let mut rows = Vec::new();
    let fail = |e: crate::diagnostics::DiagnosticError| RunError(format!("error: {e}"));
    let labels = |f: &Field| -> Vec<String> {
        let times = f.times.as_ref().map(|t| t.labels()).unwrap_or_else(|| vec![String::new()]);
        let levels: Vec<String> = f.levels.as_ref().map(|l| l.iter().map(|p| format!("{} hPa", p / 100.0)).collect()).unwrap_or_else(|| vec![String::new()]);
        times.iter().flat_map(|t| levels.iter().map(move |l| format!("{t} {l}").trim().to_string())).collect()
    };
    for r in &outcome.results {
        let components: Vec<(String, &Field)> = match &r.value {
            Value::Scalar(f) => vec![(r.name.clone(), &**f)],
            Value::Vector(w) => vec![(format!("{}_eastward", r.name), &w.eastward), (format!("{}_northward", r.name), &w.northward)],
            Value::Series(s) => {
                for (label, values) in s.labels.iter().zip(&s.rows) {
                    rows.push(TableRow { result: r.name.clone(), place: s.title.clone(), label: label.clone(), columns: s.columns.clone(), values: values.clone() });
                }
                continue;
            }
            _ => continue,
        };
        for (name, f) in components {
            for &(lat, lon) in points {
                let values = point_values(f, lat, lon).map_err(fail)?;
                for (label, v) in labels(f).into_iter().zip(values) {
                    rows.push(TableRow {
                        result: name.clone(),
                        place: format!("{} {}", crate::text::format_latitude(lat), crate::text::format_longitude(lon)),
                        label,
                        columns: vec![format!("value ({})", crate::units::spelling(&f.units))],
                        values: vec![v as f64],
                    });
                }
            }
            for region in regions {
                let stats = area_statistics(f, region).map_err(fail)?;
                for (label, s) in labels(f).into_iter().zip(stats) {
                    rows.push(TableRow {
                        result: name.clone(),
                        place: format!("box {}..{}, {}..{}", region.south, region.north, region.west, region.east),
                        label,
                        columns: { let u = crate::units::spelling(&f.units); vec![format!("mean ({u})"), format!("minimum ({u})"), format!("maximum ({u})"), "valid points".into()] },
                        values: vec![s.weighted_mean, s.minimum, s.maximum, s.valid_points as f64],
                    });
                }
            }
        }
    }
    Ok(rows)
}

/// Formats table rows.
pub fn format_table(rows: &[TableRow], format: TableFormat) -> String {
    match format {
        TableFormat::Json => serde_json::to_string_pretty(rows).unwrap_or_default() + "\n",
        TableFormat::Csv => {
            let mut out = String::from("result,place,time_or_level,quantity,value\n");
            for r in rows {
                for (c, v) in r.columns.iter().zip(&r.values) {
                    let q = |s: &str| if s.contains(',') || s.contains('"') { format!("\"{}\"", s.replace('"', "\"\"")) } else { s.to_string() };
                    out.push_str(&format!("{},{},{},{},{}\n", q(&r.result), q(&r.place), q(&r.label), q(c), v));
                }
            }
            out
        }
        TableFormat::Text => {
            let mut table: Vec<Vec<String>> = vec![vec!["result".into(), "place".into(), "time / level".into(), "quantity".into(), "value".into()]];
            for r in rows {
                for (c, v) in r.columns.iter().zip(&r.values) {
                    table.push(vec![r.result.clone(), r.place.clone(), r.label.clone(), c.clone(), if v.is_finite() { format!("{v:.4}") } else { "missing".into() }]);
                }
            }
            let widths: Vec<usize> = (0..5).map(|c| table.iter().map(|r| r[c].chars().count()).max().unwrap_or(0)).collect();
            let mut out = String::new();
            for (n, r) in table.iter().enumerate() {
                let cells: Vec<String> = r.iter().enumerate().map(|(c, x)| if c == 4 { format!("{x:>w$}", w = widths[c]) } else { format!("{x:<w$}", w = widths[c]) }).collect();
                out.push_str(cells.join("  ").trim_end());
                out.push('\n');
                if n == 0 {
                    out.push_str(&"-".repeat(widths.iter().sum::<usize>() + 8));
                    out.push('\n');
                }
            }
            out
        }
    }
}
