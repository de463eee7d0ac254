//! An analytic, exactly hydrostatic atmosphere through the engine and the
//! language: layers whose bounds are not data levels, and the geostrophic
//! wind at a pressure between levels.
//!
//! The atmosphere (this project's own construction, written for these tests):
//!   T(p, lat, lon) = T0 (p/p0)^a + W(lat, lon) (p/p0)^b
//! with T0 = 288 K, a = 0.19 (about Rd * 6.5 K/km / g0, the standard
//! tropospheric lapse rate), b = 1 (a wave part that fades upward) and
//! W = 10 K sin(2 pi lon / 40 deg) cos(pi (lat - 45 deg) / 40 deg) - 0.4 K/deg (lat - 45).
//! Geopotential height is its exact hypsometric integral (field guide,
//! "Formulas": dZ/d(ln p) = -(Rd/g0) T):
//!   Z(p) = Z0(lat, lon) + (Rd/g0) [T0 (1 - (p/p0)^a)/a + W (1 - (p/p0)^b)/b]
//! with Z0 = 120 m + 60 m cos(2 pi lon / 40 deg). Levels 1000/850/700/500/300/
//! 250/200 hPa, as many analyses carry in the troposphere.

use std::path::PathBuf;
use std::sync::{Arc, OnceLock};

use baroc::constants::{DRY_AIR_GAS_CONSTANT as RD, STANDARD_GRAVITY as G0};
use baroc::diagnostics::{Case, Layer, ThicknessRoute};
use baroc::grid::{Field, Grid, TimeAxis};
use baroc::io::writer::{write_fields, WriteOptions};
use baroc::io::Dataset;
use baroc::lang::value::Value;
use baroc::physics::geostrophic::{geostrophic_wind, GeopotentialKind, DEFAULT_EQUATOR_BAND};
use baroc::session::Session;

const LEVELS: [f64; 7] = [100000.0, 85000.0, 70000.0, 50000.0, 30000.0, 25000.0, 20000.0];

fn latitudes() -> Vec<f64> {
    (0..31).map(|j| 60.0 - j as f64).collect()
}

fn longitudes() -> Vec<f64> {
    (0..41).map(|i| -20.0 + i as f64).collect()
}

fn wave(lat: f64, lon: f64) -> f64 {
    10.0 * (std::f64::consts::TAU * lon / 40.0).sin() * (std::f64::consts::PI * (lat - 45.0) / 40.0).cos() - 0.4 * (lat - 45.0)
}

fn temperature(p: f64, lat: f64, lon: f64) -> f64 {
    let x = p / 100000.0;
    288.0 * x.powf(0.19) + wave(lat, lon) * x
}

fn height(p: f64, lat: f64, lon: f64) -> f64 {
    let x = p / 100000.0;
    let base = 120.0 + 60.0 * (std::f64::consts::TAU * lon / 40.0).cos();
    base + RD / G0 * (288.0 * (1.0 - x.powf(0.19)) / 0.19 + wave(lat, lon) * (1.0 - x))
}

fn grid() -> Arc<Grid> {
    Arc::new(Grid::new(latitudes(), longitudes()))
}

fn analytic_file() -> &'static PathBuf {
    static PATH: OnceLock<PathBuf> = OnceLock::new();
    PATH.get_or_init(|| {
        let dir = std::env::temp_dir().join(format!("baroc-hydrostatic-tests-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let path = dir.join("analytic-atmosphere.nc");
        let (lats, lons) = (latitudes(), longitudes());
        let shape = (1, LEVELS.len(), lats.len(), lons.len());
        let times = Some(TimeAxis { values: vec![0.0], units: "hours since 2026-10-01 00:00:00".into(), calendar: "standard".into() });
        // f64 values rounded once to f32, as a file stores them.
        let t = ndarray::Array4::from_shape_fn(shape, |(_, k, j, i)| temperature(LEVELS[k], lats[j], lons[i]) as f32);
        let z = ndarray::Array4::from_shape_fn(shape, |(_, k, j, i)| height(LEVELS[k], lats[j], lons[i]) as f32);
        let t = Field::new("t", "K", t, times.clone(), Some(LEVELS.to_vec()), grid()).unwrap().with_standard_name(Some("air_temperature"));
        let z = Field::new("zg", "m", z, times, Some(LEVELS.to_vec()), grid()).unwrap().with_standard_name(Some("geopotential_height"));
        write_fields(&path, &[&t, &z], &WriteOptions::default()).unwrap();
        path
    })
}

fn case() -> Case {
    Case::new(Arc::new(Dataset::open(&[analytic_file()]).unwrap()))
}

/// Largest |computed - exact| over the grid for a thickness field.
fn worst_thickness_error(field: &Field, layer: Layer) -> f64 {
    let (lats, lons) = (latitudes(), longitudes());
    let mut worst = 0.0f64;
    for j in 0..lats.len() {
        for i in 0..lons.len() {
            let exact = height(layer.top, lats[j], lons[i]) - height(layer.bottom, lats[j], lons[i]);
            worst = worst.max((field.data[[0, 0, j, i]] as f64 - exact).abs());
        }
    }
    worst
}

#[test]
fn thickness_on_and_off_levels_by_both_routes_within_half_a_metre() {
    // The exact thickness is the difference of the analytic heights; both
    // routes must reach it within 0.5 m (well under the 60 m contour
    // interval of thickness maps, common practice), on layers whose bounds
    // are data levels (1000-500, 850-300) and layers whose bounds are not
    // (900-400, 950-220).
    let case = case();
    for (bottom, top) in [(100000.0, 50000.0), (85000.0, 30000.0), (90000.0, 40000.0), (95000.0, 22000.0)] {
        let layer = Layer::new(bottom, top).0;
        for route in [ThicknessRoute::Temperature, ThicknessRoute::Geopotential] {
            let dz = case.thickness(layer, route).unwrap();
            let worst = worst_thickness_error(&dz, layer);
            assert!(worst < 0.5, "{} by {route:?}: off by up to {worst:.3} m", layer.label());
        }
    }
}

#[test]
fn the_trapezoid_remains_available_and_is_the_coarser_rule() {
    // On this convex-in-ln-p profile the trapezoid over 1000-500 hPa (four
    // levels) is off by about a metre; the default rule by centimetres.
    let mut case = case();
    let layer = Layer::new(100000.0, 50000.0).0;
    let quadratic = worst_thickness_error(&case.thickness(layer, ThicknessRoute::Temperature).unwrap(), layer);
    case.integration = baroc::physics::vertical::IntegrationRule::Trapezoid;
    let dz = case.thickness(layer, ThicknessRoute::Temperature).unwrap();
    let trapezoid = worst_thickness_error(&dz, layer);
    assert!(trapezoid > 0.5 && quadratic < trapezoid / 4.0, "trapezoid {trapezoid:.3} m, quadratic {quadratic:.3} m");
    let method = dz.attributes.iter().find(|(k, _)| k == "method").map(|(_, v)| v.clone()).unwrap();
    assert!(method.contains("trapezoid"), "{method}");
}

#[test]
fn geostrophic_wind_between_levels_within_half_a_percent_of_its_maximum() {
    // The geostrophic wind of the exact 400 hPa heights (the same finite
    // differences, so only the vertical interpolation is under test) against
    // Baroc's at 400 hPa, which lies between the 500 and 300 hPa levels.
    let case = case();
    let computed = case.geostrophic_wind(40000.0).unwrap();
    let (lats, lons) = (latitudes(), longitudes());
    let exact_z = ndarray::Array3::from_shape_fn((1, lats.len(), lons.len()), |(_, j, i)| height(40000.0, lats[j], lons[i]) as f32);
    let (u, v) = geostrophic_wind(&grid(), &case.constants, exact_z.view(), GeopotentialKind::Height, DEFAULT_EQUATOR_BAND);
    let maximum = u.iter().zip(v.iter()).map(|(a, b)| (a.hypot(*b)) as f64).fold(0.0, f64::max);
    assert!(maximum > 10.0, "the test wind is too weak to mean anything: {maximum}");
    let mut worst = 0.0f64;
    for j in 0..lats.len() {
        for i in 0..lons.len() {
            let du = computed.eastward.data[[0, 0, j, i]] as f64 - u[[0, j, i]] as f64;
            let dv = computed.northward.data[[0, 0, j, i]] as f64 - v[[0, j, i]] as f64;
            worst = worst.max(du.hypot(dv));
        }
    }
    assert!(worst < 0.005 * maximum, "off by up to {worst:.4} m/s of a maximum {maximum:.2} m/s");
    // The heights behind it say how they were interpolated.
    let z = case.geopotential_at(40000.0, false).unwrap();
    let how = z.attributes.iter().find(|(k, _)| k == "vertical_interpolation").map(|(_, v)| v.clone()).unwrap();
    assert!(how.starts_with("hydrostatic") && how.contains("500 hPa"), "{how}");
}

#[test]
fn the_language_names_the_integration_rule() {
    let mut s = Session::new();
    s.run(&format!("open \"{}\"", analytic_file().display()), None).unwrap();
    let field = |s: &mut Session, code: &str| -> Arc<Field> {
        s.run(code, None).unwrap_or_else(|e| panic!("{code}\n{}", e.rendered));
        match s.last_values.last().cloned() {
            Some(Value::Scalar(f)) => f,
            _ => panic!("{code}: not a scalar field"),
        }
    };
    let layer = Layer::new(90000.0, 40000.0).0;
    let by_heights = field(&mut s, "thickness(900 hPa to 400 hPa) with route geopotential");
    assert!(worst_thickness_error(&by_heights, layer) < 0.5);
    let quadratic = field(&mut s, "thickness(900 hPa to 400 hPa)");
    let trapezoid = field(&mut s, "thickness(900 hPa to 400 hPa) with integration trapezoid");
    assert!(worst_thickness_error(&quadratic, layer) < worst_thickness_error(&trapezoid, layer));
    let err = s.run("thickness(900 hPa to 400 hPa) with integration simpson", None).unwrap_err();
    assert!(err.rendered.contains("quadratic") && err.rendered.contains("trapezoid"), "{}", err.rendered);
}
