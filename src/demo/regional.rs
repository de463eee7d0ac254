//! The second demonstration case: a fictional regional model run over the
//! invented Saltmere Coast, 2 to 3 March 2031, written as GRIB2 by Baroc's
//! own writer (`io::grib2_writer`), so the demo needs no outside tool.
//!
//! Layout, as a regional model writes it: a Lambert conformal grid
//! (template 3.30; standard parallels 40 and 48 N, 30 x 26 points 25 km
//! apart) centred over open ocean in the middle of nowhere real, winds
//! along the grid's x and y (flag table 3.3 bit 5), and 18 hybrid
//! sigma-pressure model levels (fixed surface 105, the A and B of the 19
//! half levels in every message), with the surface pressure `sp` and the
//! surface geopotential `z_surface` on the ground.
//!
//! Physically consistent, with no outside data:
//! - sea-level pressure: a low off the coast drifting east-north-east and
//!   deepening, on a gentle southward rise; sea-level temperature colder to
//!   the north (a baroclinic zone along the coast);
//! - temperature falls at the standard lapse rate 6.5 K/km from sea level
//!   to 216.65 K and stays there above (U.S. Standard Atmosphere 1976
//!   shape), so heights on pressure surfaces are exact: below the
//!   tropopause Z(p) = (Ts / gamma) (1 - (p / psl)^(Rd gamma / g0)), above it
//!   isothermal (hypsometric equation, field guide);
//! - the terrain: the Saltmere Coast is land east of a wavy coastline
//!   rising to the Orrin Heights (1400 m); the surface pressure is the
//!   pressure of the same column at the terrain height, so model levels
//!   follow the terrain and pressures below it are underground;
//! - the land-sea mask: 1 east of the same coastline, 0 west of it (GRIB2
//!   discipline 2, category 0, number 0), so maps draw the coast;
//! - winds: the geostrophic wind of those heights on each model level's
//!   pressure, computed along the grid's x and y with the map factor and
//!   each point's Coriolis parameter (f = 2 Omega sin(latitude)).
//!
//! Place names are invented: Gullhaven (harbour), Cape Tarrow (headland),
//! Brindle Sound (offshore) and the Orrin Heights (upland). No real place,
//! event, model or institution is depicted.

use std::path::{Path, PathBuf};

use crate::constants::{DRY_AIR_GAS_CONSTANT as RD, EARTH_ROTATION_RATE, STANDARD_GRAVITY as G0};
use crate::io::grib2::{Earth, GridDefinition, LambertConformal as GribLambert};
use crate::io::grib2_writer::{write_file, Level, Message};
use crate::projection::{LambertConformal, Projection};

/// Name of the regional case file `baroc demo` writes.
pub const FILE_NAME: &str = "saltmere-coast-2031-03-02.grib2";
/// Grid size and spacing.
pub const NX: usize = 30;
pub const NY: usize = 26;
pub const SPACING: f64 = 25_000.0;
/// Standard parallels, orientation longitude and the latitude where the
/// spacing is true (the grid's centre lies on it and on the orientation).
pub const PARALLELS: (f64, f64) = (40.0, 48.0);
pub const ORIENTATION: f64 = -35.0;
pub const CENTRE_LATITUDE: f64 = 44.0;
/// Radius of the spherical earth of code table 3.2, shape 6.
const RADIUS: f64 = 6_371_229.0;
/// Model levels (full levels; the file holds their 19 half levels' A, B).
pub const MODEL_LEVELS: usize = 18;
/// Forecast hours written.
pub const HOURS: [u32; 3] = [0, 6, 12];
/// Reference time: 2031-03-02 00:00 UTC, in seconds since 1970.
pub const REFERENCE_TIME: i64 = 1_930_176_000;
/// The invented places (name, latitude, longitude).
pub const SITES: [(&str, f64, f64); 4] =
    [("Gullhaven", 44.2, -33.6), ("Cape Tarrow", 45.6, -34.6), ("Brindle Sound", 43.4, -37.0), ("Orrin Heights", 44.6, -31.8)];

const LAPSE_RATE: f64 = 0.0065;
const TROPOPAUSE_TEMPERATURE: f64 = 216.65;
const TOP_PRESSURE: f64 = 10_000.0;

/// The projection of the grid (as the GRIB2 reader builds it).
pub fn projection() -> Projection {
    Projection::LambertConformal(LambertConformal::new(PARALLELS, ORIENTATION, CENTRE_LATITUDE, 0.0, 0.0, RADIUS).expect("valid parameters"))
}

/// x and y (m) of column i and row j, the grid centred on the origin.
fn position(i: usize, j: usize) -> (f64, f64) {
    ((i as f64 - (NX - 1) as f64 / 2.0) * SPACING, (j as f64 - (NY - 1) as f64 / 2.0) * SPACING)
}

/// A and B of the half levels, top first: p_half = A + B ps, from 100 hPa
/// (pure pressure) to the surface (B = 1). With eta = sin(pi/2 k/N), thin
/// layers near the ground, B = eta^2 and
/// A = p_top (1 - eta) + 1000 hPa eta (1 - eta) >= 0.
pub fn half_levels() -> (Vec<f64>, Vec<f64>) {
    let eta: Vec<f64> = (0..=MODEL_LEVELS).map(|k| (std::f64::consts::FRAC_PI_2 * k as f64 / MODEL_LEVELS as f64).sin()).collect();
    let a = eta.iter().map(|e| TOP_PRESSURE * (1.0 - e) + 100_000.0 * e * (1.0 - e)).collect();
    let b = eta.iter().map(|e| e * e).collect();
    (a, b)
}

/// Sea-level pressure (Pa) at (x, y) and forecast hour: a low centred
/// offshore west of the coast, moving east-north-east at some 8 m/s and
/// deepening from 10 to 15 hPa (radius 400 km), on a rise of 2 hPa per
/// 500 km southward.
fn sea_level_pressure(x: f64, y: f64, hour: f64) -> f64 {
    let (cx, cy) = (-150_000.0 + 27_000.0 * hour, -50_000.0 + 9_000.0 * hour);
    let depth = 1000.0 + 40.0 * hour;
    let r2 = ((x - cx).powi(2) + (y - cy).powi(2)) / (400_000.0f64).powi(2);
    101_300.0 - depth * (-r2).exp() - 200.0 * y / 500_000.0
}

/// Sea-level temperature (K): 10 K colder across 1000 km northward, the
/// zone tilted along the coast.
fn sea_level_temperature(x: f64, y: f64) -> f64 {
    283.0 - 10.0 * (y - 0.3 * x) / 1_000_000.0
}

/// The coastline's x (m) at y: the Saltmere Coast is land east of it.
fn coast(y: f64) -> f64 {
    80_000.0 + 60_000.0 * (y / 180_000.0).sin()
}

/// Land cover: 1 on land (east of the coastline), 0 at sea.
pub fn land_cover(x: f64, y: f64) -> f32 {
    if x > coast(y) {
        1.0
    } else {
        0.0
    }
}

/// Terrain height (m): land east of a wavy coastline, rising inland to the
/// Orrin Heights.
pub fn terrain(x: f64, y: f64) -> f64 {
    let inland = x - coast(y);
    if inland <= 0.0 {
        return 0.0;
    }
    let ridge = (-((x - 230_000.0).powi(2) + (y - 40_000.0).powi(2)) / (120_000.0f64).powi(2)).exp();
    (inland / 100_000.0).min(1.0) * (250.0 + 1150.0 * ridge)
}

/// Height (m) of the pressure p (Pa) over a column with sea-level pressure
/// psl and temperature ts: the standard-lapse-rate troposphere, then
/// isothermal (hypsometric equation, field guide).
fn height(p: f64, psl: f64, ts: f64) -> f64 {
    let exponent = RD * LAPSE_RATE / G0;
    let p_tropopause = psl * (TROPOPAUSE_TEMPERATURE / ts).powf(1.0 / exponent);
    if p >= p_tropopause {
        ts / LAPSE_RATE * (1.0 - (p / psl).powf(exponent))
    } else {
        (ts - TROPOPAUSE_TEMPERATURE) / LAPSE_RATE + RD * TROPOPAUSE_TEMPERATURE / G0 * (p_tropopause / p).ln()
    }
}

fn temperature(p: f64, psl: f64, ts: f64) -> f64 {
    (ts * (p / psl).powf(RD * LAPSE_RATE / G0)).max(TROPOPAUSE_TEMPERATURE)
}

/// Surface pressure of a column with terrain height zs (inverse of
/// `height` in the troposphere).
fn surface_pressure(zs: f64, psl: f64, ts: f64) -> f64 {
    psl * (1.0 - LAPSE_RATE * zs / ts).powf(G0 / (RD * LAPSE_RATE))
}

/// The fields of one forecast hour, in scan order (rows south to north,
/// west to east): per model level temperature and grid-relative wind, and
/// the surface pressure. Public for tests.
pub struct Hour {
    pub temperature: Vec<Vec<f32>>,
    pub along_x: Vec<Vec<f32>>,
    pub along_y: Vec<Vec<f32>>,
    pub surface_pressure: Vec<f32>,
}

pub fn hour_fields(hour: f64) -> Hour {
    let projection = projection();
    let (a, b) = half_levels();
    let n = NX * NY;
    let mut out = Hour {
        temperature: vec![vec![0.0; n]; MODEL_LEVELS],
        along_x: vec![vec![0.0; n]; MODEL_LEVELS],
        along_y: vec![vec![0.0; n]; MODEL_LEVELS],
        surface_pressure: vec![0.0; n],
    };
    let z_at = |p: f64, x: f64, y: f64| height(p, sea_level_pressure(x, y, hour), sea_level_temperature(x, y));
    for j in 0..NY {
        for i in 0..NX {
            let (x, y) = position(i, j);
            let (latitude, longitude) = projection.inverse(x, y);
            let m = projection.map_factor(latitude, longitude);
            let f = 2.0 * EARTH_ROTATION_RATE * latitude.to_radians().sin();
            let (psl, ts) = (sea_level_pressure(x, y, hour), sea_level_temperature(x, y));
            let ps = surface_pressure(terrain(x, y), psl, ts);
            let k = j * NX + i;
            out.surface_pressure[k] = ps as f32;
            for level in 0..MODEL_LEVELS {
                let p = 0.5 * (a[level] + a[level + 1]) + 0.5 * (b[level] + b[level + 1]) * ps;
                out.temperature[level][k] = temperature(p, psl, ts) as f32;
                // Geostrophic wind along the grid axes on the isobaric
                // surface through this point: (g0/f) m dZ/d(grid axis).
                let h = 1000.0;
                let dzdx = (z_at(p, x + h, y) - z_at(p, x - h, y)) / (2.0 * h);
                let dzdy = (z_at(p, x, y + h) - z_at(p, x, y - h)) / (2.0 * h);
                out.along_x[level][k] = (-G0 / f * m * dzdy) as f32;
                out.along_y[level][k] = (G0 / f * m * dzdx) as f32;
            }
        }
    }
    out
}

/// The GRIB2 grid definition of the case.
pub fn grid_definition() -> GridDefinition {
    let (x0, y0) = position(0, 0);
    let (first_latitude, first_longitude) = projection().inverse(x0, y0);
    GridDefinition::LambertConformal(GribLambert {
        nx: NX,
        ny: NY,
        first_latitude,
        first_longitude,
        true_scale_latitude: CENTRE_LATITUDE,
        orientation_longitude: ORIENTATION,
        dx_metres: SPACING,
        dy_metres: SPACING,
        projection_centre_flag: 0,
        // Winds along the grid's x and y (flag table 3.3 bit 5).
        resolution_flags: 0x08,
        // Rows south to north, west to east (flag table 3.4 bit 2).
        scanning_mode: 0x40,
        first_standard_parallel: PARALLELS.0,
        second_standard_parallel: PARALLELS.1,
        south_pole_latitude: -90.0,
        south_pole_longitude: 0.0,
        earth: Earth { shape: 6, radius: None, major_axis: None, minor_axis: None },
    })
}

/// Writes the regional case into `directory` and returns its path.
pub fn write(directory: &Path) -> Result<PathBuf, String> {
    std::fs::create_dir_all(directory).map_err(|e| format!("cannot create {}: {e}", directory.display()))?;
    let grid = grid_definition();
    let (a, b) = half_levels();
    let pv: Vec<f64> = a.iter().chain(&b).copied().collect();
    let terrain_geopotential: Vec<f32> = (0..NY)
        .flat_map(|j| (0..NX).map(move |i| position(i, j)))
        .map(|(x, y)| (G0 * terrain(x, y)) as f32)
        .collect();
    let hours: Vec<(u32, Hour)> = HOURS.iter().map(|&h| (h, hour_fields(h as f64))).collect();
    let mut messages: Vec<Message> = Vec::new();
    for (hour, fields) in &hours {
        for level in 0..MODEL_LEVELS {
            let number = level as u32 + 1;
            for (category, parameter, values) in
                [(0u8, 0u8, &fields.temperature[level]), (2, 2, &fields.along_x[level]), (2, 3, &fields.along_y[level])]
            {
                messages.push(Message {
                    discipline: 0,
                    category,
                    number: parameter,
                    reference_time: REFERENCE_TIME,
                    forecast_hours: *hour,
                    level: Level::Hybrid { number, pv: pv.clone() },
                    grid: &grid,
                    values,
                    bits: 16,
                });
            }
        }
        messages.push(Message {
            discipline: 0,
            category: 3,
            number: 0,
            reference_time: REFERENCE_TIME,
            forecast_hours: *hour,
            level: Level::Ground,
            grid: &grid,
            values: &fields.surface_pressure,
            bits: 20,
        });
    }
    messages.push(Message {
        discipline: 0,
        category: 3,
        number: 4,
        reference_time: REFERENCE_TIME,
        forecast_hours: 0,
        level: Level::Ground,
        grid: &grid,
        values: &terrain_geopotential,
        bits: 16,
    });
    // The land-sea mask (GRIB2 discipline 2, category 0, number 0, "land
    // cover (1=land, 0=sea)"), from the same coastline as the terrain, so
    // maps of the case draw the coast.
    let land: Vec<f32> = (0..NY).flat_map(|j| (0..NX).map(move |i| position(i, j))).map(|(x, y)| land_cover(x, y)).collect();
    messages.push(Message {
        discipline: 2,
        category: 0,
        number: 0,
        reference_time: REFERENCE_TIME,
        forecast_hours: 0,
        level: Level::Ground,
        grid: &grid,
        values: &land,
        bits: 8,
    });
    let path = directory.join(FILE_NAME);
    write_file(&path, &messages)?;
    Ok(path)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_land_sea_mask_reads_back_as_the_coast_of_the_terrain() {
        let directory = std::env::temp_dir().join(format!("baroc-regional-mask-{}", std::process::id()));
        let path = write(&directory).unwrap();
        let dataset = crate::io::Dataset::open(&[&path]).unwrap();
        // Found as the land-sea mask by its GRIB2 parameter (WMO code table
        // 4.2, discipline 2, category 0, number 0: land cover, 1 = land,
        // 0 = sea), on the case's own Lambert grid.
        let info = dataset.variables().find(|v| v.standard_name.as_deref() == Some("land_binary_mask")).expect("a land-sea mask");
        assert_eq!(info.name, "lsm");
        assert!(info.grid.projection.is_some());
        let mask = dataset.read("lsm", &crate::io::Selection::default()).unwrap();
        let (mut land, mut sea) = (0, 0);
        for j in 0..NY {
            for i in 0..NX {
                let (x, y) = position(i, j);
                let value = mask.data[[0, 0, j, i]];
                // Land wherever the terrain stands above sea level; sea
                // has no terrain.
                if terrain(x, y) > 0.0 {
                    assert_eq!(value, 1.0, "row {j}, column {i}");
                }
                if value == 0.0 {
                    assert_eq!(terrain(x, y), 0.0);
                    sea += 1;
                } else {
                    assert_eq!(value, 1.0);
                    land += 1;
                }
            }
        }
        assert!(land > NX * NY / 10 && sea > NX * NY / 10, "{land} land and {sea} sea points");
        // The map of a field on the grid gets the coastline from it.
        let on_map = crate::figures::land_mask_for(&dataset, &mask.grid).expect("the mask on the map's grid");
        assert_eq!(on_map.iter().filter(|&&v| v == 1.0).count(), land);
        std::fs::remove_dir_all(&directory).ok();
    }

    #[test]
    fn the_written_case_reads_back_balanced_with_the_ground_respected() {
        let directory = std::env::temp_dir().join(format!("baroc-regional-{}", std::process::id()));
        let path = write(&directory).unwrap();
        let dataset = std::sync::Arc::new(crate::io::Dataset::open(&[&path]).unwrap());
        let case = crate::diagnostics::Case::new(dataset.clone())
            .with_selection(crate::io::Selection { times: Some(vec![2]), ..Default::default() });
        // The analysed wind (grid-relative, turned to east and north,
        // interpolated from model levels) against the geostrophic wind of
        // the hydrostatic geopotential at 500 hPa: the case is geostrophic
        // by construction, so they agree to a few per cent of the largest
        // speed over the open sea away from the edges (one-sided
        // differences) and the coast: there the trapezoid integral from the
        // ground carries errors of a metre or so that change with the
        // terrain, and g0/f turns 1 m per 25 km into some 4 m/s.
        let u = case.at_pressure("u_hybrid", 50_000.0, false).unwrap();
        let v = case.at_pressure("v_hybrid", 50_000.0, false).unwrap();
        let g = case.geostrophic_wind(50_000.0).unwrap();
        let (mut worst, mut fastest) = (0.0f32, 0.0f32);
        let open_sea = |j: usize, i: usize| {
            (j - 2..=j + 2).all(|jj| (i - 2..=i + 2).all(|ii| {
                let (x, y) = position(ii, jj);
                terrain(x, y) == 0.0
            }))
        };
        for j in 2..NY - 2 {
            for i in (2..NX - 2).filter(|&i| open_sea(j, i)) {
                let (du, dv) = (u.data[[0, 0, j, i]] - g.eastward.data[[0, 0, j, i]], v.data[[0, 0, j, i]] - g.northward.data[[0, 0, j, i]]);
                worst = worst.max(du.hypot(dv));
                fastest = fastest.max(u.data[[0, 0, j, i]].hypot(v.data[[0, 0, j, i]]));
            }
        }
        assert!(fastest > 15.0 && worst < 0.05 * fastest, "worst departure {worst} m/s, fastest wind {fastest} m/s");
        // Where 850 hPa lies below the lowest model level (under the Orrin
        // Heights, whose ground is near 850 hPa) it is missing; elsewhere
        // a temperature. The lowest level's pressure from the same formula
        // as the file (the mean of the two lowest half levels).
        let t = case.at_pressure("t_hybrid", 85_000.0, false).unwrap();
        let (a, b) = half_levels();
        let (mut below, mut above) = (0, 0);
        for j in 0..NY {
            for i in 0..NX {
                let (x, y) = position(i, j);
                let ps = surface_pressure(terrain(x, y), sea_level_pressure(x, y, 12.0), sea_level_temperature(x, y));
                let lowest = 0.5 * (a[MODEL_LEVELS - 1] + a[MODEL_LEVELS]) + 0.5 * (b[MODEL_LEVELS - 1] + b[MODEL_LEVELS]) * ps;
                let value = t.data[[0, 0, j, i]];
                if lowest < 84_900.0 {
                    assert!(value.is_nan(), "850 hPa below the lowest level ({lowest} Pa) must be missing, not {value}");
                    below += 1;
                } else if lowest > 85_100.0 {
                    assert!(value > 240.0 && value < 290.0, "{value} K");
                    above += 1;
                }
            }
        }
        assert!(below > 0 && above > 0, "{below} below, {above} above");
        let _ = std::fs::remove_dir_all(directory);
    }
}
