//! The audit read from a case and shown: tables (text, CSV, JSON), the
//! per-layer residual profile, the map of the worst layer and the HTML
//! audit report. Pictures are drawn here, through the renderers, not by the
//! language's evaluator, so any front end (CLI, language, notebook) gets
//! the same audit.

use std::path::Path;
use std::sync::Arc;

use ndarray::Array4;

use super::{audit, AuditError, AuditInputs, AuditReport, AuditSettings, Severity};
use crate::diagnostics::Case;
use crate::grid::Field;
use crate::io::Role;
use crate::mime::MimeBundle;
use crate::render::profile::{render_profile, ProfileSeries, ProfileSpec};
use crate::render::report::Report;
use crate::render::table::{Cell, Column, TableSpec};
use crate::render::FigureSize;

/// Output formats of the audit's tables.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum AuditFormat {
    Text,
    Csv,
    Json,
}

fn missing(what: &str) -> AuditError {
    AuditError::Missing(what.to_string())
}

/// Converts a field's data to `target` units in place (e.g. degC to K, dam
/// to m); fails when the units are not of the same kind.
fn to_units(field: &mut Field, target: &str) -> Result<(), AuditError> {
    if field.units == target {
        return Ok(());
    }
    let from = crate::units::Unit::parse(&field.units).map_err(|e| AuditError::Inconsistent(format!("`{}` has units `{}` that Baroc cannot read: {e}", field.name, field.units)))?;
    let to = crate::units::Unit::parse(target).map_err(|e| AuditError::Inconsistent(e.to_string()))?;
    let (scale, offset) = from.conversion_to(&to).map_err(|_| AuditError::Inconsistent(format!("`{}` is in `{}`, which is not convertible to {target}", field.name, field.units)))?;
    if scale != 1.0 || offset != 0.0 {
        field.data.mapv_inplace(|x| (x as f64 * scale + offset) as f32);
    }
    field.units = target.into();
    Ok(())
}

/// Reads what the audit needs from a case (temperature, geopotential or
/// geopotential height, and where present specific humidity and wind, all
/// on the temperature's levels) and audits it.
pub fn audit_case(case: &Case, settings: &AuditSettings) -> Result<AuditReport, AuditError> {
    let dataset = &case.dataset;
    let t_info = dataset.find_role(Role::Temperature).ok_or_else(|| missing("temperature (standard_name air_temperature)"))?;
    let levels = t_info.levels.clone().ok_or_else(|| missing("temperature on pressure levels"))?;
    let read = |name: &str| dataset.read(name, &case.selection).map_err(|e| AuditError::Inconsistent(e.to_string()));
    let mut temperature = read(&t_info.name.clone())?;
    to_units(&mut temperature, "K")?;
    let (z_name, geopotential) = match (dataset.find_role(Role::GeopotentialHeight), dataset.find_role(Role::Geopotential)) {
        (Some(z), _) => (z.name.clone(), false),
        (None, Some(phi)) => (phi.name.clone(), true),
        _ => return Err(missing("geopotential height or geopotential")),
    };
    let mut heights = read(&z_name)?;
    if heights.levels.as_ref() != Some(&levels) {
        return Err(AuditError::Inconsistent(format!("`{}` and `{}` are not on the same pressure levels; the audit compares them level by level", t_info.name, z_name)));
    }
    if geopotential {
        to_units(&mut heights, "m2 s-2")?;
        let g = case.constants.gravity;
        heights.data.mapv_inplace(|x| (x as f64 / g) as f32);
    } else {
        to_units(&mut heights, "m")?;
    }
    let same_levels = |role: Role| dataset.find_role(role).filter(|v| v.levels.as_ref() == Some(&levels)).map(|v| v.name.clone());
    let humidity = match same_levels(Role::SpecificHumidity) {
        Some(name) => {
            let mut q = read(&name)?;
            to_units(&mut q, "1")?;
            Some(q)
        }
        None => None,
    };
    let wind = match (same_levels(Role::EastwardWind), same_levels(Role::NorthwardWind)) {
        (Some(u), Some(v)) => {
            let (mut u, mut v) = (read(&u)?, read(&v)?);
            to_units(&mut u, "m s-1")?;
            to_units(&mut v, "m s-1")?;
            Some((u, v))
        }
        _ => None,
    };
    let time_labels = temperature.times.as_ref().map(|t| t.labels()).unwrap_or_else(|| vec!["(no time)".into()]);
    let inputs = AuditInputs {
        grid: &temperature.grid,
        levels: levels.clone(),
        temperature: temperature.data.view(),
        heights: heights.data.view(),
        humidity: humidity.as_ref().map(|q| q.data.view()),
        wind: wind.as_ref().map(|(u, v)| (u.data.view(), v.data.view())),
        time_labels,
    };
    audit(&inputs, settings)
}

fn number(x: f64) -> Cell {
    if x.is_finite() {
        Cell::Number(x)
    } else {
        Cell::Missing
    }
}

/// The audit's tables, in reading order.
pub fn tables(report: &AuditReport) -> Vec<TableSpec> {
    let mut out = Vec::new();
    let mut h = TableSpec::new(
        "Hydrostatic residual: thickness from heights minus from (virtual) temperature",
        vec![
            Column::new("time", ""),
            Column::new("layer", "hPa"),
            Column::new("mean", "m").decimals(2),
            Column::new("RMS", "m").decimals(2),
            Column::new("mean", "%").decimals(3),
            Column::new("RMS", "%").decimals(3),
            Column::new("worst", "m").decimals(2),
            Column::new("worst at", ""),
            Column::new("virtual correction", "m").decimals(2),
            Column::new("missing points", ""),
        ],
    );
    for r in &report.hydrostatic {
        h.push_row(vec![
            Cell::Text(r.time.clone()),
            Cell::Text(format!("{}-{}", r.bottom_hpa, r.top_hpa)),
            number(r.mean_m),
            number(r.rms_m),
            number(r.mean_percent),
            number(r.rms_percent),
            number(r.worst_m),
            Cell::Text(super::place(r.worst_latitude, r.worst_longitude)),
            r.virtual_correction_m.map_or(Cell::Missing, number),
            Cell::Number(r.missing as f64),
        ]);
    }
    h.note = report.notes.first().cloned().unwrap_or_default();
    out.push(h);
    if !report.thermal_wind.is_empty() {
        let mut t = TableSpec::new(
            "Thermal-wind residual: analysed shear minus thermal wind (RMS by latitude band)",
            vec![Column::new("time", ""), Column::new("layer", "hPa"), Column::new("band", ""), Column::new("RMS", "m/s").decimals(2), Column::new("points", "")],
        );
        for r in &report.thermal_wind {
            t.push_row(vec![Cell::Text(r.time.clone()), Cell::Text(format!("{}-{}", r.bottom_hpa, r.top_hpa)), Cell::Text(r.band.clone()), number(r.rms_m_s), Cell::Number(r.points as f64)]);
        }
        t.note = report.notes.get(1).cloned().unwrap_or_default();
        out.push(t);
        let mut g = TableSpec::new(
            "Geostrophic departure: analysed minus geostrophic wind (RMS)",
            vec![Column::new("time", ""), Column::new("level", "hPa"), Column::new("RMS", "m/s").decimals(2), Column::new("points", "")],
        );
        for r in &report.geostrophic {
            g.push_row(vec![Cell::Text(r.time.clone()), Cell::Number(r.level_hpa), number(r.rms_m_s), Cell::Number(r.points as f64)]);
        }
        out.push(g);
    }
    let mut p = TableSpec::new(
        "Plausibility: values against the U.S. Standard Atmosphere 1976 with margins",
        vec![
            Column::new("time", ""),
            Column::new("level", "hPa"),
            Column::new("quantity", ""),
            Column::new("units", ""),
            Column::new("minimum", "").decimals(1),
            Column::new("maximum", "").decimals(1),
            Column::new("allowed from", "").decimals(0),
            Column::new("allowed to", "").decimals(0),
            Column::new("points outside", ""),
        ],
    );
    for r in &report.plausibility {
        p.push_row(vec![
            Cell::Text(r.time.clone()),
            Cell::Number(r.level_hpa),
            Cell::Text(r.quantity.clone()),
            Cell::Text(r.units.clone()),
            number(r.minimum),
            number(r.maximum),
            number(r.allowed_low),
            number(r.allowed_high),
            Cell::Number(r.outside as f64),
        ]);
    }
    p.note = report.notes.last().cloned().unwrap_or_default();
    out.push(p);
    out
}

fn verdict_lines(report: &AuditReport) -> Vec<String> {
    report
        .verdicts
        .iter()
        .map(|v| {
            let mark = match v.severity {
                Severity::Pass => "pass",
                Severity::Note => "note",
                Severity::Fail => "FAIL",
            };
            format!("{mark}: {}", v.text)
        })
        .collect()
}

/// The audit as text, CSV or JSON.
pub fn format(report: &AuditReport, format: AuditFormat) -> String {
    match format {
        AuditFormat::Text => {
            let mut out = String::new();
            for table in tables(report) {
                out.push_str(&table.to_text());
                out.push('\n');
            }
            out.push_str(&format!("Heights not increasing upward: {} points; negative specific humidity: {} points\n\n", report.non_monotone_heights, report.negative_humidity));
            out.push_str("Verdict\n");
            for line in verdict_lines(report) {
                out.push_str(&format!("  {line}\n"));
            }
            out.push_str(&format!("\n{}\n", crate::render::report::CAUTION));
            out
        }
        AuditFormat::Csv => {
            // One long table: what was checked, where, which statistic.
            let mut out = String::from("check,time,layer_or_level_hpa,band,statistic,value,units\r\n");
            let mut row = |check: &str, time: &str, place: &str, band: &str, statistic: &str, value: f64, units: &str| {
                let value = if value.is_finite() { format!("{value}") } else { String::new() };
                out.push_str(&format!("{check},{time},{place},{band},{statistic},{value},{units}\r\n"));
            };
            for r in &report.hydrostatic {
                let layer = format!("{}-{}", r.bottom_hpa, r.top_hpa);
                for (statistic, value, units) in [("mean", r.mean_m, "m"), ("rms", r.rms_m, "m"), ("mean", r.mean_percent, "%"), ("rms", r.rms_percent, "%"), ("worst", r.worst_m, "m")] {
                    row("hydrostatic_residual", &r.time, &layer, "", statistic, value, units);
                }
            }
            for r in &report.thermal_wind {
                row("thermal_wind_residual", &r.time, &format!("{}-{}", r.bottom_hpa, r.top_hpa), &r.band, "rms", r.rms_m_s, "m s-1");
            }
            for r in &report.geostrophic {
                row("geostrophic_departure", &r.time, &format!("{}", r.level_hpa), "", "rms", r.rms_m_s, "m s-1");
            }
            for r in &report.plausibility {
                let check = format!("plausible_{}", r.quantity.replace(' ', "_"));
                row(&check, &r.time, &format!("{}", r.level_hpa), "", "points_outside", r.outside as f64, "1");
            }
            for v in &report.verdicts {
                let severity = format!("{:?}", v.severity).to_lowercase();
                out.push_str(&format!("verdict,,,,{severity},\"{}\",\r\n", v.text.replace('"', "\"\"")));
            }
            out
        }
        AuditFormat::Json => {
            let mut value = serde_json::to_value(report).unwrap_or(serde_json::Value::Null);
            if let serde_json::Value::Object(map) = &mut value {
                map.insert("passed".into(), serde_json::Value::Bool(report.passed()));
                map.insert("caution".into(), serde_json::Value::String(crate::render::report::CAUTION.into()));
            }
            serde_json::to_string_pretty(&value).unwrap_or_default() + "\n"
        }
    }
}

/// RMS hydrostatic residual of each layer against the layer's middle
/// pressure (geometric mean of its bounds), one line per time step.
pub fn residual_profile(report: &AuditReport) -> Result<MimeBundle, crate::render::RenderError> {
    let mut times: Vec<String> = report.hydrostatic.iter().map(|r| r.time.clone()).collect();
    times.dedup();
    let series = times
        .iter()
        .map(|time| {
            let rows: Vec<_> = report.hydrostatic.iter().filter(|r| &r.time == time && r.rms_m.is_finite()).collect();
            ProfileSeries::new(time.clone(), rows.iter().map(|r| 100.0 * (r.bottom_hpa * r.top_hpa).sqrt()).collect(), rows.iter().map(|r| r.rms_m).collect())
        })
        .filter(|s| !s.values.is_empty())
        .collect();
    let spec = ProfileSpec {
        title: "Hydrostatic residual by layer".into(),
        subtitle: "RMS of thickness from heights minus from (virtual) temperature".into(),
        quantity: "RMS residual".into(),
        units: "m".into(),
        series,
        caption: "Baroc: an analysis tool, not a warning service.".into(),
    };
    render_profile(&spec, &FigureSize::new(520, 640))
}

/// The map of the worst layer's residual (m).
pub fn worst_layer_map(report: &AuditReport) -> Option<Result<MimeBundle, crate::render::RenderError>> {
    let worst = report.worst_layer.as_ref()?;
    let (ny, nx) = worst.residual.dim();
    let data: Array4<f32> = worst.residual.clone().into_shape_with_order((1, 1, ny, nx)).ok()?;
    let field = Field::new("hydrostatic_residual", "m", data, None, None, Arc::new(report.grid.clone())).ok()?.with_long_name(format!(
        "hydrostatic residual of the {}-{} hPa layer at {}",
        super::hpa(worst.bottom),
        super::hpa(worst.top),
        worst.time
    ));
    Some(crate::figures::field_map_with(&field, None, &FigureSize::default()))
}

/// The HTML audit report: verdict, tables, profile, map, provenance; the
/// renderer adds the caution that Baroc is an analysis tool, not a warning
/// service.
pub fn html_report(report: &AuditReport, files: &[String], settings: &AuditSettings) -> Report {
    let mut html = Report::new("Balance audit");
    html = html.paragraph(if report.passed() { "The dataset passes the audit." } else { "The dataset fails the audit: see the verdict." });
    html = html.heading("Verdict");
    for line in verdict_lines(report) {
        html = html.paragraph(line);
    }
    if let Ok(profile) = residual_profile(report) {
        html = html.figure(profile, "RMS hydrostatic residual of each layer, plotted at the layer's middle pressure.");
    }
    if let Some(Ok(map)) = worst_layer_map(report) {
        html = html.figure(map, "Residual of the layer with the largest RMS residual.");
    }
    for table in tables(report) {
        html = html.heading(table.title.clone()).table(table);
    }
    let mut provenance: Vec<(String, String)> = files.iter().map(|f| ("input".to_string(), f.clone())).collect();
    provenance.push(("integration".into(), settings.integration.describe().into()));
    provenance.push(("thresholds".into(), format!(
        "hydrostatic {} m RMS, thermal wind {} m/s RMS, geostrophic {} m/s RMS",
        settings.thresholds.hydrostatic_rms_metres, settings.thresholds.thermal_wind_rms, settings.thresholds.geostrophic_rms
    )));
    provenance.push(("baroc".into(), env!("CARGO_PKG_VERSION").into()));
    provenance.push(("written".into(), crate::report::utc_now()));
    html.provenance(provenance)
}

/// Writes the HTML audit report (atomically, by the report renderer).
pub fn write_html_report(report: &AuditReport, files: &[String], settings: &AuditSettings, path: &Path) -> Result<(), String> {
    html_report(report, files, settings).write(path).map_err(|e| format!("cannot write the audit report {}: {e}", path.display()))
}
