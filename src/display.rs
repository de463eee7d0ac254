//! Turning language values into MIME bundles: plain text always, HTML
//! tables for tabular values, and pictures (through `render`) for fields.

use crate::grid::{Field, Statistics, VectorField};
use crate::lang::value::{Series, Value};
use crate::mime::MimeBundle;
use crate::render::table::{Cell, Column, TableSpec};

fn trim(x: f64) -> String {
    if !x.is_finite() {
        return "missing".into();
    }
    let magnitude = x.abs();
    if magnitude != 0.0 && !(1e-3..1e6).contains(&magnitude) {
        format!("{x:.4e}")
    } else {
        let s = format!("{x:.4}");
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    }
}

/// A one-paragraph description of a field: name, long name, units,
/// dimensions, coordinate ranges and statistics of the valid values.
pub fn describe_field(f: &Field) -> String {
    let Statistics { minimum, maximum, mean, valid, missing } = f.statistics();
    let dims: Vec<String> = f.dimensions().iter().map(|(n, l)| format!("{n} {l}")).collect();
    let units = crate::units::spelling(&f.units);
    let mut out = format!("{} [{units}]: {}\n  dimensions: {}\n  grid: {}\n", f.name, f.long_name, dims.join(", "), f.grid.describe());
    if let Some(levels) = &f.levels {
        out.push_str(&format!("  levels (hPa): {}\n", levels.iter().map(|p| trim(p / 100.0)).collect::<Vec<_>>().join(", ")));
    }
    for (k, v) in &f.attributes {
        if k == "pressure_level" || k == "layer" {
            out.push_str(&format!("  {}: {v}\n", k.replace('_', " ")));
        }
    }
    if let Some(t) = &f.times {
        let labels = t.labels();
        out.push_str(&format!("  times: {} ({} step{})\n", if labels.len() == 1 { labels[0].clone() } else { format!("{} to {}", labels[0], labels[labels.len() - 1]) }, labels.len(), if labels.len() == 1 { "" } else { "s" }));
    }
    out.push_str(&format!("  minimum {}  mean {}  maximum {} {units}  ({} valid, {} missing)", trim(minimum), trim(mean), trim(maximum), valid, missing));
    out
}

fn describe_vector(w: &VectorField) -> String {
    let speed = w.speed();
    let s = speed.statistics();
    let units = crate::units::spelling(&w.eastward.units);
    format!(
        "{} and {} [{units}]\n  {}\n  speed: mean {} maximum {} {units}",
        w.eastward.name,
        w.northward.name,
        w.eastward.long_name.replace("eastward ", ""),
        trim(s.mean),
        trim(s.maximum),
    )
}

/// The renderers' table of a series: a first column of row labels, then
/// one column per quantity with its unit in the header.
pub fn series_table(series: &Series) -> TableSpec {
    let mut columns = vec![Column::new("time / level", "")];
    for c in &series.columns {
        let (name, units) = match c.rsplit_once(" (") {
            Some((n, u)) => (n.to_string(), u.trim_end_matches(')').to_string()),
            None => (c.clone(), String::new()),
        };
        columns.push(Column::new(name, crate::units::spelling(&units)));
    }
    let mut table = TableSpec::new(series.title.clone(), columns);
    for (label, row) in series.labels.iter().zip(&series.rows) {
        let mut cells = vec![Cell::Text(label.clone())];
        cells.extend(row.iter().map(|&v| if v.is_finite() { Cell::Number(v) } else { Cell::Missing }));
        table.push_row(cells);
    }
    table
}

/// Aligned plain-text table of a series.
pub fn series_text(series: &Series) -> String {
    series_table(series).to_text()
}

/// The bundle of a value. Fields get a picture when the renderers can draw
/// one; everything has text/plain.
pub fn bundle(value: &Value) -> MimeBundle {
    bundle_from(value, None)
}

/// The bundle of a value from a dataset: maps of fields get coastlines from
/// its land-sea mask when it has one.
pub fn bundle_from(value: &Value, dataset: Option<&crate::io::Dataset>) -> MimeBundle {
    match value {
        Value::Series(s) => series_table(s).to_bundle().unwrap_or_else(|_| MimeBundle::plain(series_text(s))),
        Value::Figure(request) => crate::figures::draw(request).unwrap_or_else(|d| MimeBundle::plain(format!("the {} could not be drawn: {}", request.operator, d.message))),
        Value::Report(request) => MimeBundle::plain(format!("a report to write to {} (written when a session or run carries it out)", request.path.display())),
        Value::Scalar(f) => {
            let mut b = crate::figures::field_map_on(f, None, &crate::render::FigureSize::default(), dataset, &Default::default()).unwrap_or_default();
            b.insert_text("text/plain", describe_field(f));
            b
        }
        Value::Vector(w) => {
            let mut b = crate::figures::vector_map_on(w, &crate::render::FigureSize::default(), dataset, &Default::default()).unwrap_or_default();
            b.insert_text("text/plain", describe_vector(w));
            b
        }
        Value::Record(r) => {
            let mut text = format!("{}\n", r.title);
            for (name, v) in &r.entries {
                text.push_str(&format!("{name}: {}\n", bundle_from(v, dataset).plain_text()));
            }
            MimeBundle::plain(text)
        }
        other => MimeBundle::plain(plain(other)),
    }
}

/// The bundle of a value a front end shows: figures drawn, with an error
/// (pointing at the call or the option) if one cannot be.
pub fn present(value: &Value, dataset: Option<&crate::io::Dataset>) -> Result<MimeBundle, crate::lang::Diagnostic> {
    match value {
        Value::Figure(request) => crate::figures::draw(request),
        other => Ok(bundle_from(other, dataset)),
    }
}

/// Plain text of the simple values.
pub fn plain(value: &Value) -> String {
    match value {
        Value::Number { value, unit } => {
            let u = unit.to_string();
            if u.is_empty() || u == "1" { trim(*value) } else { format!("{} {u}", trim(*value)) }
        }
        Value::Bool(b) => b.to_string(),
        Value::Text(t) => t.clone(),
        Value::Angle { degrees, axis } => match axis {
            crate::lang::value::AngleAxis::Latitude => crate::text::format_latitude(*degrees),
            crate::lang::value::AngleAxis::Longitude => crate::text::format_longitude(*degrees),
        },
        Value::Layer(l) => format!("the {} layer", l.label()),
        Value::Point { latitude, longitude } => format!("point {} {}", crate::text::format_latitude(*latitude), crate::text::format_longitude(*longitude)),
        Value::Region(_) | Value::Range(..) => crate::lang::eval::describe_value(value),
        Value::Time(t) => t.to_string(),
        Value::TimeIndex(i) => format!("time step {i}"),
        Value::Data(d) => format!("{} (variable `{}` of the open dataset, not read yet: select a level, layer, region or time, or use it in an expression)", d.written, d.variable),
        Value::Wind(_) => "wind (the dataset's eastward and northward wind, not read yet)".into(),
        Value::Function(f) => f.source.clone(),
        Value::Builtin(name) => format!("built-in operator `{name}`"),
        Value::Dataset(d) => crate::io::describe(d),
        Value::Word(w) => w.clone(),
        Value::Scalar(f) => describe_field(f),
        Value::Vector(w) => describe_vector(w),
        Value::Series(s) => series_text(s),
        Value::Record(_) | Value::Figure(_) | Value::Report(_) => bundle(value).plain_text().to_string(),
    }
}
