//! A fictional dataset for the language tests: an autumn case over the
//! invented Skerry Basin, on six pressure levels and five times. Only
//! metadata; the checker reads nothing else.

#![allow(dead_code)]

pub mod same;

use baroc::lang::check::{Axis, DatasetCatalog, DatasetInfo, Environment, TimeAxis, VariableInfo};

/// Pressure levels in Pa (1000 to 300 hPa), written top-down as some files do.
pub const LEVELS_PA: [f64; 6] = [30000.0, 50000.0, 70000.0, 85000.0, 92500.0, 100000.0];

fn variable(name: &str, units: &str, levels: bool) -> VariableInfo {
    let mut dimensions = vec![Axis::Time];
    if levels {
        dimensions.push(Axis::Level);
    }
    dimensions.extend([Axis::Latitude, Axis::Longitude]);
    VariableInfo {
        name: name.to_string(),
        units: units.to_string(),
        dimensions,
        levels_pa: if levels { LEVELS_PA.to_vec() } else { Vec::new() },
    }
}

/// `skerry_case.nc`: t, z, u, v on levels, ps at the surface.
pub fn case_dataset() -> DatasetInfo {
    DatasetInfo {
        name: "skerry_case.nc".to_string(),
        variables: vec![
            variable("t", "K", true),
            variable("z", "m", true),
            variable("u", "m s-1", true),
            variable("v", "m s-1", true),
            variable("ps", "Pa", false),
        ],
        roles: vec![
            ("temperature".to_string(), "t".to_string()),
            ("geopotential_height".to_string(), "z".to_string()),
            ("eastward_wind".to_string(), "u".to_string()),
            ("northward_wind".to_string(), "v".to_string()),
            ("surface_pressure".to_string(), "ps".to_string()),
        ],
        times: Some(TimeAxis { count: 5, first: "2026-10-14 00:00".to_string(), last: "2026-10-15 00:00".to_string() }),
        latitude_range: Some((30.0, 70.0)),
        longitude_range: Some((-60.0, 20.0)),
        missing_notes: Vec::new(),
    }
}

/// `winds_only.nc`: the wind components alone.
pub fn winds_dataset() -> DatasetInfo {
    DatasetInfo {
        name: "winds_only.nc".to_string(),
        variables: vec![variable("u", "m s-1", true), variable("v", "m s-1", true)],
        roles: vec![
            ("eastward_wind".to_string(), "u".to_string()),
            ("northward_wind".to_string(), "v".to_string()),
        ],
        times: None,
        latitude_range: Some((30.0, 70.0)),
        longitude_range: Some((-60.0, 20.0)),
        missing_notes: Vec::new(),
    }
}

pub struct Catalog;

impl DatasetCatalog for Catalog {
    fn describe(&self, paths: &[String]) -> Result<DatasetInfo, String> {
        match paths.first().map(String::as_str) {
            Some("skerry_case.nc") => Ok(case_dataset()),
            Some("winds_only.nc") => Ok(winds_dataset()),
            _ => Err("no such file".to_string()),
        }
    }
}

pub static CATALOG: Catalog = Catalog;

/// The environment of the tests: `skerry_case.nc` is the current dataset.
pub fn environment() -> Environment<'static> {
    let mut environment = Environment::with_dataset(case_dataset());
    environment.catalog = Some(&CATALOG);
    environment
}
