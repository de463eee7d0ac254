//! One spelling per unit in every output: the demo summary table, the
//! tables and figures of a recipe run, and the NetCDF file it writes all
//! spell their units as the one table in `units.rs` does (udunits-2 style,
//! as CF conventions 1.11 section 3.1 ask: "m s-1", "K day-1").

use std::path::PathBuf;
use std::sync::Arc;

use baroc::units::{spelling, SPELLINGS};

/// Forms the table replaces: slashes and Fortran-style powers (spellings
/// the udunits grammar reads but Baroc never writes).
const OTHER_FORMS: [&str; 5] = ["m/s", "K/day", "**", "deg N", "m s^-1"];

/// Every "(...)" in a text that reads as a unit must be spelt as the table
/// spells it; returns the units seen.
fn check_text(what: &str, text: &str) -> Vec<String> {
    for bad in OTHER_FORMS {
        assert!(!text.contains(bad), "{what}: `{bad}` in {text:.300}");
    }
    let mut seen = Vec::new();
    let mut rest = text;
    while let Some(open) = rest.find('(') {
        let after = &rest[open + 1..];
        let Some(close) = after.find(')') else { break };
        let mut inside = after[..close].trim();
        // A quantity such as "(25.7 m s-1)": its unit is what follows the number.
        if let Some((number, unit)) = inside.split_once(' ') {
            if number.replace('\u{2212}', "-").parse::<f64>().is_ok() {
                inside = unit.trim();
            }
        }
        let is_number = inside.parse::<f64>().is_ok();
        if !inside.is_empty() && !is_number && baroc::units::Unit::parse(inside).is_ok() {
            assert!(SPELLINGS.contains(&inside), "{what}: unit `({inside})` is not in the spelling table (it would be `{}`)", spelling(inside));
            seen.push(inside.to_string());
        }
        rest = &after[close..];
    }
    seen
}

fn demo_file() -> PathBuf {
    let dir = std::env::temp_dir().join(format!("baroc-spellings-{}", std::process::id()));
    baroc::demo::write(&dir).unwrap()
}

#[test]
fn summary_tables_figures_and_netcdf_spell_units_one_way() {
    let path = demo_file();
    // The demo summary.
    let dataset = Arc::new(baroc::io::Dataset::open(&[&path]).unwrap());
    let case = baroc::diagnostics::Case::new(dataset).with_selection(baroc::io::Selection { times: Some(vec![4]), ..Default::default() });
    let layer = baroc::diagnostics::Layer::new(100000.0, 50000.0).0;
    let rows = baroc::demo::summarise(&case, layer).unwrap();
    let summary = baroc::demo::format_summary(&rows, layer, "t");
    let seen = check_text("summary", &summary);
    for unit in ["dam", "K", "m s-1", "degree", "K day-1"] {
        assert!(seen.iter().any(|s| s == unit), "summary lacks ({unit}): {summary}");
    }

    // A recipe run: its figures and tables, and the NetCDF file it writes.
    let request = baroc::runner::RunRequest {
        source: baroc::demo::REPORT_RECIPE.to_string(),
        origin: "test".into(),
        data_files: vec![path.clone()],
        overrides: Vec::new(),
        each_time: false,
        time_steps: Some(vec![4]),
        progress: false,
        recipe_folders: Vec::new(),
    };
    let outcome = baroc::runner::run(&request).unwrap();
    let mut all = Vec::new();
    for r in &outcome.results {
        let bundle = baroc::display::bundle(&r.value);
        all.extend(check_text(&r.name, bundle.plain_text()));
        if let Some(svg) = bundle.text("image/svg+xml") {
            all.extend(check_text(&format!("{} (SVG)", r.name), svg));
        }
    }
    let table = baroc::runner::format_table(&baroc::runner::tabulate(&outcome, &[(51.5, -31.0)], &[]).unwrap(), baroc::runner::TableFormat::Text);
    all.extend(check_text("table", &table));
    assert!(all.iter().any(|s| s == "K day-1"), "the recipe's `as K/day` result is spelt K day-1: {all:?}");

    let out = path.with_file_name("results.nc");
    baroc::runner::write_results(&out, &outcome, &request).unwrap();
    let file = netcdf::open(&out).unwrap();
    let mut data_units = Vec::new();
    for v in file.variables() {
        let Some(attr) = v.attribute("units") else { continue };
        let Ok(netcdf::AttributeValue::Str(units)) = attr.value() else { continue };
        // Coordinates keep their CF forms (degrees_north, time units).
        if v.dimensions().len() <= 1 {
            continue;
        }
        assert!(SPELLINGS.contains(&units.as_str()), "NetCDF variable {} has units `{units}`", v.name());
        data_units.push(units);
    }
    assert!(data_units.iter().any(|u| u == "K day-1"), "{data_units:?}");
}
