//! The demonstration case: a fictional autumn baroclinic zone with a
//! developing wave over the invented Marrowind Basin, 14-15 October 2026.
//!
//! Everything here is synthetic but physically consistent:
//! - temperature on 10 pressure levels = the U.S. Standard Atmosphere 1976
//!   profile plus a frontal zone (colder poleward) that tilts poleward with
//!   height and meanders in a wave whose amplitude grows with time;
//! - geopotential integrated hydrostatically from the virtual temperature
//!   (trapezoid in ln p), upward from a 1000 hPa height field holding a
//!   deepening low on the wave and a subtropical high;
//! - winds = geostrophic wind of that geopotential plus a small ageostrophic
//!   part (frictional turning toward low pressure near the surface, a weak
//!   divergent wind aloft);
//! - specific humidity from a relative humidity that is higher on the warm
//!   side (saturation vapour pressure after Bolton 1980, Mon. Wea. Rev. 108);
//! - surface pressure from the 1000 hPa height by the hypsometric equation
//!   (the basin is open ocean: the surface is at sea level).
//!
//! The file is plain CF 1.8 in Baroc's own choice of names: full-word
//! variable names, every coordinate labelled with standard_name and axis,
//! udunits unit strings (`m s-1`, `m2 s-2`), time in hours since the case's
//! first analysis. Levels run from 1000 hPa down and latitude from north to
//! south; a gap of missing temperatures and humidity not reported at 200 hPa
//! (both as _FillValue) exercise missing data. A land-sea mask (CF
//! `land_binary_mask`) draws an invented coastline: a mainland to the east,
//! a southern shore, and the islands of the scenario's sites, all flat
//! lowland, so the surface stays at sea level. No real place or event is
//! depicted; files in other layouts are read alike (see the reader's tests).

pub mod regional;

use std::path::{Path, PathBuf};

use ndarray::{s, Array2, Array3, Array4, Axis};

use crate::constants::{Constants, DRY_AIR_GAS_CONSTANT as RD, EPSILON, STANDARD_GRAVITY as G0};
use crate::grid::Grid;
use crate::physics::geostrophic::{geostrophic_wind, GeopotentialKind, DEFAULT_EQUATOR_BAND};
use crate::physics::standard_atmosphere;
use crate::physics::wind::direction_from;

/// Name of the case file `baroc demo` writes.
pub const FILE_NAME: &str = "marrowind-wave-2026-10-14.nc";
/// Pressure levels (hPa), in the order the file stores them.
pub const LEVELS_HPA: [f64; 10] = [1000.0, 925.0, 850.0, 700.0, 600.0, 500.0, 400.0, 300.0, 250.0, 200.0];
/// Time units of the file (CF).
pub const TIME_UNITS: &str = "hours since 2026-10-14 00:00:00";
/// First analysis time and step.
pub const START: &str = "2026-10-14 00:00";
pub const STEP_HOURS: f64 = 6.0;
pub const TIME_STEPS: usize = 5;

/// Invented observing sites of the scenario, (name, latitude, longitude).
pub const SITES: [(&str, f64, f64); 4] = [
    ("Port Tallowmere", 51.5, -31.0),
    ("Skerrin Light", 58.0, -20.0),
    ("Hollin Bank", 44.0, -42.0),
    ("Wrenfold Isle", 62.0, -6.0),
];

/// The generated arrays, canonical order [time, level, lat, lon].
pub struct DemoFields {
    pub grid: Grid,
    pub levels_pa: Vec<f64>,
    pub hours: Vec<f64>,
    pub temperature: Array4<f32>,
    pub height: Array4<f32>,
    pub eastward_wind: Array4<f32>,
    pub northward_wind: Array4<f32>,
    pub specific_humidity: Array4<f32>,
    pub surface_pressure: Array3<f32>,
    /// Land (1) or sea (0), [latitude, longitude].
    pub land: Array2<f32>,
}

/// The scenario's invented coastline as a land-sea mask (1 land, 0 sea):
/// a mainland east of a wavy coast near the prime meridian that recedes
/// eastward in the south, a shore along the southern edge in the west that
/// turns south out of the grid, and three islands carrying the sites Port
/// Tallowmere, Skerrin Light and Wrenfold Isle (ellipses, semi-axes in
/// degrees of latitude and longitude).
pub fn land_mask(grid: &Grid) -> Array2<f32> {
    const ISLANDS: [(f64, f64, f64, f64); 3] = [(52.0, -30.2, 1.6, 2.6), (58.3, -19.5, 1.1, 1.8), (62.2, -6.6, 1.3, 2.4)];
    Array2::from_shape_fn((grid.latitudes.len(), grid.longitudes.len()), |(j, i)| {
        let (lat, lon) = (grid.latitudes[j], grid.longitudes[i]);
        let coast = -1.5 + 2.0 * ((lat - 40.0) / 3.0).sin() + 1.2 * (38.0 - lat).max(0.0);
        let mainland = lon > coast;
        let southern_shore = lat < 30.5 + 1.5 * ((lon + 50.0) / 4.0).sin() - 0.35 * (lon + 42.0).max(0.0);
        let island = ISLANDS.iter().any(|&(y, x, a, b)| ((lat - y) / a).powi(2) + ((lon - x) / b).powi(2) <= 1.0);
        if mainland || southern_shore || island { 1.0 } else { 0.0 }
    })
}

/// Saturation specific humidity (kg/kg): e_s = 611.2 exp(17.67 Tc / (Tc + 243.5))
/// Pa (Bolton 1980), q_s = epsilon e_s / (p - (1 - epsilon) e_s).
fn saturation_specific_humidity(t: f64, p: f64) -> f64 {
    let tc = t - 273.15;
    let es = 611.2 * (17.67 * tc / (tc + 243.5)).exp();
    EPSILON * es / (p - (1.0 - EPSILON) * es)
}

/// Generates the case. Deterministic: the same arrays every time.
pub fn generate() -> DemoFields {
    let latitudes: Vec<f64> = (0..61).map(|j| 70.0 - 0.75 * j as f64).collect();
    let longitudes: Vec<f64> = (0..107).map(|i| -65.0 + 0.75 * i as f64).collect();
    let grid = Grid::new(latitudes.clone(), longitudes.clone());
    let levels_pa: Vec<f64> = LEVELS_HPA.iter().map(|p| p * 100.0).collect();
    let start_hours = start_hours();
    let hours: Vec<f64> = (0..TIME_STEPS).map(|k| start_hours + STEP_HOURS * k as f64).collect();
    let (nt, nl, ny, nx) = (TIME_STEPS, levels_pa.len(), latitudes.len(), longitudes.len());

    // Temperature: standard profile + frontal zone.
    let base: Vec<f64> = levels_pa.iter().map(|&p| standard_atmosphere::temperature_at_pressure(p).expect("tropospheric levels")).collect();
    let mut temperature = Array4::<f32>::zeros((nt, nl, ny, nx));
    for t in 0..nt {
        let hours_since_start = STEP_HOURS * t as f64;
        let amplitude = 2.5 + 0.12 * hours_since_start; // degrees of latitude: the wave grows
        let phase_speed = 0.55; // degrees of longitude per hour eastward
        for k in 0..nl {
            let p = levels_pa[k];
            // Contrast across the zone, strongest low down, vanishing near the
            // tropopause (K).
            let contrast = 14.0 * ((p / 20000.0).ln() / 5f64.ln()).clamp(0.0, 1.0);
            // The zone tilts poleward with height, and the wave tilts westward
            // with height (the growing baroclinic wave's structure).
            let tilt = 3.0 * (100000.0 / p).ln();
            let westward_shift = 6.0 * (100000.0 / p).ln();
            for j in 0..ny {
                for i in 0..nx {
                    let (lat, lon) = (latitudes[j], longitudes[i]);
                    let x = lon + 25.0 - phase_speed * hours_since_start + westward_shift;
                    let front = 48.0 + tilt + amplitude * (x.to_radians() * 360.0 / 40.0).sin();
                    let zone = -0.5 * contrast * ((lat - front) / 5.0).tanh();
                    let background = -0.35 * (lat - 47.5);
                    temperature[[t, k, j, i]] = (base[k] + zone + background) as f32;
                }
            }
        }
    }

    // Humidity: relative humidity 85 % on the warm side, 45 % on the cold.
    let mut specific_humidity = Array4::<f32>::zeros((nt, nl, ny, nx));
    ndarray::Zip::indexed(&mut specific_humidity).and(&temperature).for_each(|(t, k, j, i), q, &temp| {
        let warm_side = 0.5 * (1.0 + ((temp as f64 - base[k]) / 4.0).tanh());
        let rh = (0.45 + 0.40 * warm_side) * (levels_pa[k] / 100000.0).powf(0.6);
        let _ = (t, j, i);
        *q = (rh * saturation_specific_humidity(temp as f64, levels_pa[k])) as f32;
    });

    // 1000 hPa height: mean 110 m, a deepening low on the wave, a high south.
    let mut height = Array4::<f32>::zeros((nt, nl, ny, nx));
    for t in 0..nt {
        let h = STEP_HOURS * t as f64;
        let (low_lat, low_lon) = (50.0 + 0.08 * h, -40.0 + 0.6 * h);
        let depth = 90.0 + 4.0 * h;
        for j in 0..ny {
            for i in 0..nx {
                let (lat, lon) = (latitudes[j], longitudes[i]);
                let r2 = ((lat - low_lat) / 7.0).powi(2) + ((lon - low_lon) * lat.to_radians().cos() / 7.0).powi(2);
                let high = 90.0 * (-(((lat - 34.0) / 8.0).powi(2) + ((lon + 30.0) / 25.0).powi(2))).exp();
                height[[t, 0, j, i]] = (110.0 - depth * (-r2).exp() + high) as f32;
            }
        }
        // Hydrostatic integration upward with virtual temperature, trapezoid in
        // ln p: the same discretisation as Baroc's thickness.
        for k in 1..nl {
            let log_ratio = (levels_pa[k - 1] / levels_pa[k]).ln();
            for j in 0..ny {
                for i in 0..nx {
                    let tv = |kk: usize| crate::physics::vertical::virtual_temperature(temperature[[t, kk, j, i]] as f64, specific_humidity[[t, kk, j, i]] as f64);
                    let dz = RD / G0 * 0.5 * (tv(k - 1) + tv(k)) * log_ratio;
                    height[[t, k, j, i]] = (height[[t, k - 1, j, i]] as f64 + dz) as f32;
                }
            }
        }
    }

    // Winds: geostrophic + ageostrophic.
    let constants = Constants::default();
    let (ug, vg) = {
        let view = height.view().into_shape_with_order((nt * nl, ny, nx)).expect("standard layout");
        geostrophic_wind(&grid, &constants, view, GeopotentialKind::Height, DEFAULT_EQUATOR_BAND)
    };
    let ug = ug.into_shape_with_order((nt, nl, ny, nx)).expect("shape");
    let vg = vg.into_shape_with_order((nt, nl, ny, nx)).expect("shape");
    let mut eastward_wind = ug.clone();
    let mut northward_wind = vg.clone();
    for t in 0..nt {
        for k in 0..nl {
            let p = levels_pa[k];
            // Friction near the surface: the wind turns toward low pressure
            // (anticlockwise in the northern hemisphere) and slows.
            let (turn, keep) = match LEVELS_HPA[k] as i32 {
                1000 => (22.0f64, 0.70),
                925 => (14.0, 0.82),
                850 => (7.0, 0.92),
                _ => (0.0, 1.0),
            };
            let (c, s_) = (turn.to_radians().cos(), turn.to_radians().sin());
            for j in 0..ny {
                for i in 0..nx {
                    let (u, v) = (ug[[t, k, j, i]] as f64, vg[[t, k, j, i]] as f64);
                    let mut ua = keep * (c * u - s_ * v);
                    let mut va = keep * (s_ * u + c * v);
                    if p <= 30000.0 {
                        // A weak divergent part near the jet.
                        let x = (longitudes[i] + 25.0 - 0.55 * STEP_HOURS * t as f64).to_radians() * 9.0;
                        ua += 1.2 * x.cos();
                        va += 1.8 * x.sin();
                    }
                    eastward_wind[[t, k, j, i]] = ua as f32;
                    northward_wind[[t, k, j, i]] = va as f32;
                }
            }
        }
    }

    // Surface pressure at sea level from the 1000 hPa height (hypsometric).
    let mut surface_pressure = Array3::<f32>::zeros((nt, ny, nx));
    for t in 0..nt {
        for j in 0..ny {
            for i in 0..nx {
                let tv = crate::physics::vertical::virtual_temperature(temperature[[t, 0, j, i]] as f64, specific_humidity[[t, 0, j, i]] as f64);
                surface_pressure[[t, j, i]] = (100000.0 * (G0 * height[[t, 0, j, i]] as f64 / (RD * tv)).exp()) as f32;
            }
        }
    }

    let land = land_mask(&grid);
    DemoFields { grid, levels_pa, hours, temperature, height, eastward_wind, northward_wind, specific_humidity, surface_pressure, land }
}

fn start_hours() -> f64 {
    let units = crate::calendar::CfTimeUnits::parse(TIME_UNITS, "standard").expect("valid CF units");
    let start = crate::calendar::DateTime::parse(START).expect("valid date");
    units.encode(&start).expect("encodable date")
}

/// Where the demo case writes a gap of missing temperature (last time step,
/// 250 hPa, the north-western corner: "a failed data stream").
pub const GAP: (usize, usize, std::ops::Range<usize>, std::ops::Range<usize>) = (TIME_STEPS - 1, 8, 0..3, 0..4);

fn demo_error(path: &Path, e: impl std::fmt::Display) -> crate::io::DataError {
    crate::io::DataError::Netcdf { path: path.display().to_string(), message: e.to_string() }
}

/// Writes the case into `directory` (atomically) and returns the file's path.
pub fn write(directory: &Path) -> Result<PathBuf, crate::io::DataError> {
    let path = directory.join(FILE_NAME);
    let fields = generate();
    std::fs::create_dir_all(directory).map_err(|e| {
        let why = if directory.exists() && !directory.is_dir() { "it is a file, not a folder".to_string() } else { crate::atomic::plain_os_error(&e).to_lowercase() };
        crate::io::DataError::Invalid(format!("cannot create the folder {}: {why}", directory.display()))
    })?;
    crate::atomic::check_writable(&path).map_err(|why| crate::io::DataError::Invalid(format!("cannot write the demonstration case into {}: {why}", directory.display())))?;
    let temporary = crate::atomic::temporary_beside(&path).map_err(|e| demo_error(&path, e))?;
    crate::io::netcdf_thread::call(|| write_file(&temporary, &fields).map_err(|e| e.to_string())).map_err(|e| demo_error(&path, e))?;
    crate::atomic::publish(temporary, &path).map_err(|e| demo_error(&path, e))?;
    Ok(path)
}

fn write_file(path: &Path, d: &DemoFields) -> Result<(), Box<dyn std::error::Error>> {
    let mut file = netcdf::create(path)?;
    file.add_attribute("Conventions", "CF-1.8")?;
    file.add_attribute("title", "Marrowind Basin autumn wave, 14-15 October 2026 (synthetic demonstration case)")?;
    file.add_attribute("institution", "none: invented scenario")?;
    file.add_attribute("source", format!("Baroc {} demo generator: synthetic, hydrostatically and geostrophically consistent fields", env!("CARGO_PKG_VERSION")).as_str())?;
    file.add_attribute("history", "written by `baroc demo`")?;
    file.add_attribute(
        "comment",
        "Fictional case for learning and testing. Baroc is an analysis tool, not a warning service; defer to your national meteorological service and local practice.",
    )?;
    let (nt, nl, ny, nx) = d.temperature.dim();
    file.add_unlimited_dimension("time")?;
    file.add_dimension("pressure", nl)?;
    file.add_dimension("latitude", ny)?;
    file.add_dimension("longitude", nx)?;
    {
        let mut v = file.add_variable::<f64>("time", &["time"])?;
        v.put_attribute("units", TIME_UNITS)?;
        v.put_attribute("calendar", "standard")?;
        v.put_attribute("standard_name", "time")?;
        v.put_attribute("axis", "T")?;
        v.put_attribute("long_name", "time of analysis")?;
        v.put_values(&d.hours, 0..nt)?;
    }
    {
        let mut v = file.add_variable::<f32>("pressure", &["pressure"])?;
        v.put_attribute("units", "hPa")?;
        v.put_attribute("standard_name", "air_pressure")?;
        v.put_attribute("axis", "Z")?;
        v.put_attribute("long_name", "pressure of the level")?;
        v.put_attribute("positive", "down")?;
        let hpa: Vec<f32> = d.levels_pa.iter().map(|p| (p / 100.0) as f32).collect();
        v.put_values(&hpa, ..)?;
    }
    {
        let mut v = file.add_variable::<f32>("latitude", &["latitude"])?;
        v.put_attribute("units", "degrees_north")?;
        v.put_attribute("standard_name", "latitude")?;
        v.put_attribute("axis", "Y")?;
        v.put_attribute("long_name", "latitude")?;
        v.put_values(&d.grid.latitudes.iter().map(|&x| x as f32).collect::<Vec<_>>(), ..)?;
    }
    {
        let mut v = file.add_variable::<f32>("longitude", &["longitude"])?;
        v.put_attribute("units", "degrees_east")?;
        v.put_attribute("standard_name", "longitude")?;
        v.put_attribute("axis", "X")?;
        v.put_attribute("long_name", "longitude")?;
        v.put_values(&d.grid.longitudes.iter().map(|&x| x as f32).collect::<Vec<_>>(), ..)?;
    }
    let dims4 = ["time", "pressure", "latitude", "longitude"];
    let float_var = |file: &mut netcdf::FileMut, name: &str, standard: &str, long: &str, units: &str, data: &Array4<f32>, fill: Option<(&str, f32)>| -> Result<(), Box<dyn std::error::Error>> {
        let mut v = file.add_variable::<f32>(name, &dims4)?;
        if let Some((attribute, value)) = fill {
            if attribute == "_FillValue" {
                v.set_fill_value(value)?;
            } else {
                v.put_attribute(attribute, value)?;
            }
        }
        v.put_attribute("standard_name", standard)?;
        v.put_attribute("long_name", long)?;
        v.put_attribute("units", units)?;
        let stored = data.mapv(|x| if x.is_nan() { fill.map_or(x, |f| f.1) } else { x });
        v.put(stored.view(), ..)?;
        Ok(())
    };
    let mut temperature = d.temperature.clone();
    let (gt, gk, gy, gx) = GAP;
    temperature.slice_mut(s![gt, gk, gy, gx]).fill(f32::NAN);
    float_var(&mut file, "temperature", "air_temperature", "air temperature", "K", &temperature, Some(("_FillValue", -9999.0)))?;
    float_var(&mut file, "eastward_wind", "eastward_wind", "eastward wind", "m s-1", &d.eastward_wind, None)?;
    float_var(&mut file, "northward_wind", "northward_wind", "northward wind", "m s-1", &d.northward_wind, None)?;
    let mut q = d.specific_humidity.clone();
    q.index_axis_mut(Axis(1), nl - 1).fill(f32::NAN); // not reported at 200 hPa
    float_var(&mut file, "specific_humidity", "specific_humidity", "specific humidity", "kg kg-1", &q, Some(("_FillValue", -9999.0)))?;
    let geopotential = d.height.mapv(|z| (z as f64 * G0) as f32);
    float_var(&mut file, "geopotential", "geopotential", "geopotential", "m2 s-2", &geopotential, None)?;
    {
        let mut v = file.add_variable::<f32>("surface_pressure", &["time", "latitude", "longitude"])?;
        v.put_attribute("standard_name", "surface_air_pressure")?;
        v.put_attribute("long_name", "surface pressure")?;
        v.put_attribute("units", "Pa")?;
        v.put(d.surface_pressure.view(), ..)?;
    }
    {
        let mut v = file.add_variable::<f32>("land_sea_mask", &["latitude", "longitude"])?;
        v.put_attribute("standard_name", "land_binary_mask")?;
        v.put_attribute("long_name", "land (1) or sea (0)")?;
        v.put_attribute("units", "1")?;
        v.put(d.land.view(), ..)?;
    }
    file.close()?;
    Ok(())
}

/// One row of the demo's summary table.
#[derive(Debug, Clone, serde::Serialize)]
pub struct SiteSummary {
    pub site: String,
    pub latitude: f64,
    pub longitude: f64,
    /// 1000-500 hPa thickness (m), from temperature (virtual).
    pub thickness: f64,
    /// Layer-mean virtual temperature (K).
    pub mean_temperature: f64,
    /// Thermal wind speed (m/s) and direction (degrees from), mean-temperature route.
    pub thermal_wind_speed: f64,
    pub thermal_wind_direction: f64,
    /// Difference of the thermal-wind speed between the two routes (m/s).
    pub route_difference: f64,
    /// Turning of the geostrophic wind (degrees, veering positive); NaN
    /// where it is not defined.
    pub turning: f64,
    /// The turning is undefined because a wind or the shear is weak (below
    /// the default threshold), not because data are missing.
    pub weak_wind: bool,
    /// Layer-mean geostrophic temperature advection (K per day).
    pub advection_per_day: f64,
    /// Analysed-wind shear minus thermal wind, magnitude (m/s).
    pub ageostrophic_shear: f64,
}

/// Computes the summary rows for the sites at one time step of a case,
/// for a layer.
pub fn summarise(case: &crate::diagnostics::Case, layer: crate::diagnostics::Layer) -> Result<Vec<SiteSummary>, crate::diagnostics::DiagnosticError> {
    use crate::diagnostics::{point_values, ThicknessRoute};
    let dz = case.thickness(layer, ThicknessRoute::Temperature)?;
    let tbar = case.layer_mean_temperature(layer, ThicknessRoute::Temperature)?;
    let vt = case.thermal_wind(layer, ThicknessRoute::Temperature)?;
    let vz = case.thermal_wind(layer, ThicknessRoute::Geopotential)?;
    let turning = case.turning(layer)?;
    // The same angle without the weak-wind mask, to tell "weak wind" from missing data.
    let turning_unmasked = case.turning_with(layer, 0.0)?;
    let advection = case.layer_temperature_advection(layer)?;
    let ageo = case.ageostrophic_shear(layer, ThicknessRoute::Geopotential)?;
    let mut rows = Vec::new();
    for (name, lat, lon) in SITES {
        let at = |f: &crate::grid::Field| -> Result<f64, crate::diagnostics::DiagnosticError> { Ok(point_values(f, lat, lon)?[0] as f64) };
        let (u, v) = (at(&vt.eastward)?, at(&vt.northward)?);
        let (uz, vz_) = (at(&vz.eastward)?, at(&vz.northward)?);
        rows.push(SiteSummary {
            site: name.to_string(),
            latitude: lat,
            longitude: lon,
            thickness: at(&dz)?,
            mean_temperature: at(&tbar)?,
            thermal_wind_speed: u.hypot(v),
            thermal_wind_direction: direction_from(u, v),
            route_difference: uz.hypot(vz_) - u.hypot(v),
            turning: at(&turning)?,
            weak_wind: at(&turning)?.is_nan() && at(&turning_unmasked)?.is_finite(),
            advection_per_day: at(&advection)? * 86400.0,
            ageostrophic_shear: at(&ageo.eastward)?.hypot(at(&ageo.northward)?),
        });
    }
    Ok(rows)
}

/// The summary as an aligned plain-text table with units in the header.
pub fn format_summary(rows: &[SiteSummary], layer: crate::diagnostics::Layer, time_label: &str) -> String {
    let mut out = format!("Marrowind Basin wave, {time_label}: thermal-wind diagnostics of the {} layer\n", layer.label());
    out.push_str(&format!(
        "(turning is given only where both winds and the shear reach {} {}; elsewhere \"weak wind\")\n",
        crate::physics::thermal_wind::DEFAULT_WEAK_WIND,
        crate::units::spelled::METRES_PER_SECOND
    ));
    let header = [
        "site", "latitude", "longitude", "thickness (dam)", "mean temperature (K)", "thermal wind (m s-1)", "from (degree)", "routes differ (m s-1)",
        "turning (degree)", "", "advection (K day-1)", "ageostrophic shear (m s-1)",
    ];
    let mut table: Vec<Vec<String>> = vec![header.iter().map(|s| s.to_string()).collect()];
    for r in rows {
        use crate::physics::advection::{implied_advection, ImpliedAdvection};
        // No sense of turning on an angle that is not defined.
        let turn = if r.turning > 0.0 { "veers" } else { "backs" };
        let sense = if !r.turning.is_finite() {
            String::new()
        } else {
            match implied_advection(r.turning, r.latitude) {
                ImpliedAdvection::Warm => format!("{turn}: warm"),
                ImpliedAdvection::Cold => format!("{turn}: cold"),
                ImpliedAdvection::Neutral => String::new(),
            }
        };
        let turning = if r.weak_wind {
            "weak wind".to_string()
        } else if r.turning.is_finite() {
            format!("{:+.1}", r.turning)
        } else {
            "missing".to_string()
        };
        table.push(vec![
            r.site.clone(),
            crate::text::format_latitude(r.latitude),
            crate::text::format_longitude(r.longitude),
            format!("{:.1}", r.thickness / 10.0),
            format!("{:.2}", r.mean_temperature),
            format!("{:.1}", r.thermal_wind_speed),
            format!("{:.0}", r.thermal_wind_direction),
            format!("{:+.2}", r.route_difference),
            turning,
            sense,
            format!("{:+.2}", r.advection_per_day),
            format!("{:.1}", r.ageostrophic_shear),
        ]);
    }
    let widths: Vec<usize> = (0..header.len()).map(|c| table.iter().map(|row| row[c].chars().count()).max().unwrap_or(0)).collect();
    for (n, row) in table.iter().enumerate() {
        let cells: Vec<String> = row
            .iter()
            .enumerate()
            .map(|(c, cell)| if c == 0 || c == 9 { format!("{cell:<w$}", w = widths[c]) } else { format!("{cell:>w$}", w = widths[c]) })
            .collect();
        out.push_str(cells.join("  ").trim_end());
        out.push('\n');
        if n == 0 {
            out.push_str(&"-".repeat(widths.iter().sum::<usize>() + 2 * (widths.len() - 1)));
            out.push('\n');
        }
    }
    out
}

/// The recipe the demo runs for its report (the project's own library copy).
pub const REPORT_RECIPE: &str = include_str!("../recipes/thermal-wind-budget.baroc");

/// Runs the thermal-wind budget recipe on the demo case at one time step and
/// writes the case-study report (with hodographs at the sites) beside it.
pub fn write_report(directory: &Path, case_file: &Path, step: usize) -> Result<PathBuf, String> {
    let request = crate::runner::RunRequest {
        source: REPORT_RECIPE.to_string(),
        origin: "recipes/thermal-wind-budget.baroc (built in)".into(),
        data_files: vec![case_file.to_path_buf()],
        overrides: Vec::new(),
        each_time: false,
        time_steps: Some(vec![step]),
        progress: false,
        recipe_folders: Vec::new(),
    };
    let mut outcome = crate::runner::run(&request).map_err(|e| e.0)?;
    outcome.header.about = Some(format!(
        "{} Fictional demonstration case: the Marrowind Basin autumn wave, time step {step}.",
        outcome.header.about.clone().unwrap_or_default()
    ));
    let path = directory.join("marrowind-report.html");
    let pictures = vertical_pictures(case_file, step)?;
    crate::report::build(&outcome, &request, pictures).write(&path).map_err(|e| e.to_string())?;
    Ok(path)
}

/// The report's pictures of the vertical: a hodograph and a temperature
/// profile at the first site, and a section of temperature with the wind
/// across it, through the wave from its warm side to its cold side.
pub fn vertical_pictures(case_file: &Path, step: usize) -> Result<Vec<(crate::mime::MimeBundle, String)>, String> {
    use crate::io::Role;
    use crate::render::FigureSize;
    let dataset = std::sync::Arc::new(crate::io::Dataset::open(&[case_file]).map_err(|e| e.to_string())?);
    let case = crate::diagnostics::Case::new(dataset.clone()).with_selection(crate::io::Selection { times: Some(vec![step]), ..Default::default() });
    let name_of = |role: Role| dataset.find_role(role).map(|v| v.name.clone()).ok_or_else(|| format!("the demo file has no {role:?} variable"));
    let (site, latitude, longitude) = SITES[0];
    let hodograph = crate::figures::hodograph(&case, latitude, longitude, &FigureSize::new(560, 560)).map_err(|e| e.to_string())?;
    let temperature = case.field(&name_of(Role::Temperature)?).map_err(|e| e.to_string())?;
    let profile = crate::figures::profile(&[&temperature], latitude, longitude, &FigureSize::new(480, 560)).map_err(|e| e.to_string())?;
    let wind = crate::grid::VectorField::new(
        case.field(&name_of(Role::EastwardWind)?).map_err(|e| e.to_string())?,
        case.field(&name_of(Role::NorthwardWind)?).map_err(|e| e.to_string())?,
    )
    .map_err(|e| e.to_string())?;
    let (from, to) = ((40.0, -40.0), (64.0, -22.0));
    let section = crate::figures::section(&temperature, Some(&wind), from, to, &FigureSize::new(800, 480)).map_err(|e| e.to_string())?;
    Ok(vec![
        (hodograph, format!("Hodograph of the geostrophic wind at {site}: the wind turns with height as the layer's temperature gradient says.")),
        (profile, format!("Temperature profile at {site}.")),
        (section, "Section of temperature across the wave, from its warm side in the south-west to its cold side in the north-east, with the wind across the section as lines.".to_string()),
    ])
}
