//! Case-study reports: one self-contained HTML file (images inline) from a
//! recipe run, with the figures and tables, the recipe text and its
//! parameters, the data's provenance (files, sizes, checksums, variables and
//! their attributes, time range), the software version and the date, and the
//! caution that Baroc is an analysis tool, not a warning service.

use std::io::Read;
use std::path::Path;

use sha2::{Digest, Sha256};

use crate::lang::value::Value;
use crate::render::report::Report;
use crate::runner::{RunOutcome, RunRequest};

/// The current time in UTC, ISO 8601, from the system clock.
pub fn utc_now() -> String {
    let seconds = std::time::SystemTime::now().duration_since(std::time::UNIX_EPOCH).map(|d| d.as_secs_f64()).unwrap_or(0.0);
    crate::calendar::CfTimeUnits::parse("seconds since 1970-01-01 00:00:00", "standard")
        .ok()
        .and_then(|u| u.decode(seconds.floor()).ok())
        .map(|t| format!("{t}Z"))
        .unwrap_or_else(|| format!("{seconds} seconds since 1970-01-01"))
}

/// SHA-256 of a file, hex; read in blocks so large files do not fill memory.
pub fn sha256_of(path: &Path) -> std::io::Result<String> {
    let mut file = std::fs::File::open(path)?;
    let mut hasher = Sha256::new();
    let mut buffer = vec![0u8; 1 << 20];
    loop {
        let n = file.read(&mut buffer)?;
        if n == 0 {
            break;
        }
        hasher.update(&buffer[..n]);
    }
    Ok(hasher.finalize().iter().map(|b| format!("{b:02x}")).collect())
}

/// Provenance rows of a run's data.
pub fn provenance(outcome: &RunOutcome, request: &RunRequest) -> Vec<(String, String)> {
    let mut rows = vec![
        ("software".to_string(), format!("Baroc {}", env!("CARGO_PKG_VERSION"))),
        ("report written".to_string(), utc_now()),
        ("recipe".to_string(), request.origin.clone()),
    ];
    for p in &request.data_files {
        let size = std::fs::metadata(p).map(|m| m.len()).unwrap_or(0);
        let digest = sha256_of(p).unwrap_or_else(|e| format!("unreadable: {e}"));
        rows.push((format!("file {}", p.display()), format!("{size} bytes, SHA-256 {digest}")));
    }
    if let Some(dataset) = &outcome.dataset {
        for v in dataset.variables() {
            let attributes: Vec<String> = v.attributes.iter().filter(|(k, _)| k != "_FillValue").map(|(k, val)| format!("{k}={val}")).collect();
            rows.push((format!("variable {}", v.name), format!("{}; {}", v.describe_dimensions(), attributes.join("; "))));
        }
        if let Some(t) = dataset.variables().find_map(|v| v.times.clone()) {
            let labels = t.labels();
            rows.push(("time range".into(), format!("{} to {} ({} step{})", labels.first().cloned().unwrap_or_default(), labels.last().cloned().unwrap_or_default(), labels.len(), if labels.len() == 1 { "" } else { "s" })));
        }
        for (source, attrs) in dataset.global_attributes() {
            if let Some((_, title)) = attrs.iter().find(|(k, _)| k == "title") {
                rows.push((format!("title of {source}"), title.clone()));
            }
        }
    }
    rows
}

/// Builds the report of a run.
pub fn build(outcome: &RunOutcome, request: &RunRequest, extra_figures: Vec<(crate::mime::MimeBundle, String)>) -> Report {
    let title = outcome.header.title.clone().unwrap_or_else(|| format!("Baroc run of {}", request.origin));
    let mut report = Report::new(title);
    if let Some(about) = &outcome.header.about {
        report = report.paragraph(about.clone());
    }
    if !outcome.header.parameters.is_empty() {
        let mut table = crate::render::table::TableSpec::new(
            "Parameters of this run",
            vec![crate::render::table::Column::new("parameter", ""), crate::render::table::Column::new("value", ""), crate::render::table::Column::new("default", ""), crate::render::table::Column::new("meaning", "")],
        );
        for p in &outcome.header.parameters {
            table.push_row(vec![p.name.clone().into(), p.value.clone().into(), p.default.clone().into(), p.documentation.clone().unwrap_or_default().into()]);
        }
        report = report.heading("Parameters").table(table);
    }
    report = report.heading("Results");
    for r in &outcome.results {
        let doc = outcome.header.outputs.iter().find(|o| o.name == r.name).and_then(|o| o.documentation.clone()).unwrap_or_default();
        let caption = if doc.is_empty() { r.name.clone() } else { format!("{}: {doc}", r.name) };
        match &r.value {
            Value::Series(s) => report = report.table(crate::display::series_table(s)),
            Value::Scalar(_) | Value::Vector(_) | Value::Figure(_) => {
                let bundle = crate::display::bundle_from(&r.value, outcome.dataset.as_deref());
                if bundle.binary("image/png").is_some() || bundle.text("image/svg+xml").is_some() {
                    report = report.figure(bundle, caption);
                } else {
                    report = report.paragraph(format!("{caption}: {}", bundle.plain_text()));
                }
            }
            other => report = report.paragraph(format!("{caption}: {}", crate::display::plain(other))),
        }
    }
    for (bundle, caption) in extra_figures {
        report = report.figure(bundle, caption);
    }
    report.heading("Recipe").recipe(request.source.clone()).heading("Provenance").provenance(provenance(outcome, request))
}

/// Writes a report of a session's recipe outputs (title, parameters,
/// outputs, the definitions as recipe text, provenance of the open data).
pub fn write_session_report(evaluator: &crate::lang::eval::Evaluator, path: &Path) -> Result<std::path::PathBuf, String> {
    if evaluator.outputs.is_empty() {
        return Err("no outputs to report: declare some with `output name = ...`".into());
    }
    let source: String = evaluator.definitions.iter().map(|(_, s)| format!("{}\n", s.trim())).collect();
    let dataset = evaluator.current_dataset().cloned();
    let request = RunRequest {
        source,
        origin: "a notebook session".into(),
        data_files: dataset.as_ref().map(|d| d.labels().into_iter().map(std::path::PathBuf::from).collect()).unwrap_or_default(),
        overrides: Vec::new(),
        each_time: false,
        time_steps: None,
        progress: false,
        recipe_folders: evaluator.recipe_folders.clone(),
    };
    let outcome = RunOutcome {
        results: evaluator.outputs.iter().map(|(n, v)| crate::runner::NamedResult { name: n.clone(), value: v.clone() }).collect(),
        header: evaluator.recipe.clone(),
        dataset,
    };
    build(&outcome, &request, Vec::new()).write(path).map_err(|e| e.to_string())?;
    Ok(path.to_path_buf())
}

/// Carries out the requests among a program's shown values: each
/// `write_report` is written now and becomes the line saying where. Front
/// ends (session, runner) call this after a program runs.
pub fn carry_out<'a>(evaluator: &crate::lang::eval::Evaluator, values: impl IntoIterator<Item = &'a mut Value>) -> Result<(), crate::lang::Diagnostic> {
    for value in values {
        if let Value::Report(request) = value {
            let path = write_session_report(evaluator, &request.path).map_err(|e| crate::lang::Diagnostic::error(e, request.span))?;
            *value = Value::Text(format!("wrote the report to {}", path.display()));
        }
    }
    Ok(())
}
