//! GRIB2 Lambert conformal grids end to end: files written by Baroc's own
//! writer (template 3.30) from an analytic atmosphere, read as projected
//! grids, diagnosed by the same engine calls as latitude-longitude data.
//! The point positions are also checked against ecCodes in
//! tests/python/test_grib2_eccodes.py.

use std::path::PathBuf;
use std::sync::Arc;

use baroc::diagnostics::Case;
use baroc::io::dataset::Dataset;
use baroc::io::grib2::{Earth, GridDefinition, LambertConformal};
use baroc::io::grib2_writer::{write_file, Level, Message};
use baroc::io::Selection;
use baroc::projection::{self, Projection};

fn scratch(name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("baroc-grib2-projected-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    dir.join(name)
}

/// Sphere of code table 3.2 shape 6, which the writer declares.
const RADIUS: f64 = 6_371_229.0;
const G: f64 = 9.80665; // standard gravity (CGPM 1901)
const OMEGA: f64 = 7.292115e-5; // earth's rotation rate (IERS)
const NX: usize = 81;
const NY: usize = 65;
const SPACING: f64 = 25_000.0;

/// Analytic height (m) at 500 hPa: a zonal jet with a wave (invented for
/// the test, smooth on the grid).
fn height(lat: f64, lon: f64) -> f64 {
    let (phi, lambda) = (lat.to_radians(), lon.to_radians());
    5570.0 - 900.0 * phi.sin() + 360.0 * phi.cos() * (3.0 * lambda).sin()
}

/// Its geostrophic wind, differentiated by hand: u_g = -(g / f a) dZ/dphi,
/// v_g = (g / f a cos phi) dZ/dlambda, f = 2 Omega sin phi (Holton,
/// "An Introduction to Dynamic Meteorology", eq. 3.2 in spherical form).
fn geostrophic(lat: f64, lon: f64) -> (f64, f64) {
    let (phi, lambda) = (lat.to_radians(), lon.to_radians());
    let dz_dphi = -900.0 * phi.cos() - 360.0 * phi.sin() * (3.0 * lambda).sin();
    let dz_dlambda = 360.0 * phi.cos() * 3.0 * (3.0 * lambda).cos();
    let f = 2.0 * OMEGA * phi.sin();
    (-G / (f * RADIUS) * dz_dphi, G / (f * RADIUS * phi.cos()) * dz_dlambda)
}

/// Analytic earth-relative wind for the rotation check.
fn wind(lat: f64, lon: f64) -> (f64, f64) {
    (12.0 + 6.0 * lon.to_radians().sin(), 4.0 * lat.to_radians().cos())
}

/// Standard parallels 35 and 55 N, orientation 10 W; the first point is at
/// x = -1000 km, y = -800 km (j scanning north) or y = +800 km (south).
fn lambert() -> Projection {
    Projection::LambertConformal(projection::LambertConformal::new((35.0, 55.0), -10.0, 45.0, 0.0, 0.0, RADIUS).unwrap())
}

/// The grid definition and the (lat, lon) of each point in scan order.
fn grid(scanning_mode: u8, resolution_flags: u8) -> (GridDefinition, Vec<(f64, f64)>) {
    let p = lambert();
    let north_first = scanning_mode & 0x40 == 0;
    let y0 = if north_first { 800_000.0 } else { -800_000.0 };
    let (first_latitude, first_longitude) = p.inverse(-1_000_000.0, y0);
    let mut points = Vec::new();
    for j in 0..NY {
        let y = if north_first { y0 - SPACING * j as f64 } else { y0 + SPACING * j as f64 };
        for i in 0..NX {
            points.push(p.inverse(-1_000_000.0 + SPACING * i as f64, y));
        }
    }
    let definition = GridDefinition::LambertConformal(LambertConformal {
        nx: NX,
        ny: NY,
        first_latitude,
        first_longitude,
        true_scale_latitude: 45.0,
        orientation_longitude: -10.0,
        dx_metres: SPACING,
        dy_metres: SPACING,
        projection_centre_flag: 0,
        resolution_flags,
        scanning_mode,
        first_standard_parallel: 35.0,
        second_standard_parallel: 55.0,
        south_pole_latitude: -90.0,
        south_pole_longitude: 0.0,
        earth: Earth { shape: 6, radius: None, major_axis: None, minor_axis: None },
    });
    (definition, points)
}

/// Writes height at 500 hPa and grid-relative u, v (if `flags` has bit 5).
fn write(path: &PathBuf, scanning_mode: u8, resolution_flags: u8) -> Vec<(f64, f64)> {
    let (definition, points) = grid(scanning_mode, resolution_flags);
    let p = lambert();
    let z: Vec<f32> = points.iter().map(|&(la, lo)| height(la, lo) as f32).collect();
    let (mut u, mut v) = (Vec::new(), Vec::new());
    for &(lat, lon) in &points {
        let (ue, vn) = wind(lat, lon);
        if resolution_flags & 0x08 != 0 {
            // Grid-relative: east is the x axis turned by n (lon - lon0)
            // (Snyder 1987, eq. 15-1), the cone constant of eq. 15-3.
            let Projection::LambertConformal(l) = &p else { unreachable!() };
            let a = l.cone_constant * (lon + 10.0).to_radians();
            u.push((ue * a.cos() - vn * a.sin()) as f32);
            v.push((ue * a.sin() + vn * a.cos()) as f32);
        } else {
            u.push(ue as f32);
            v.push(vn as f32);
        }
    }
    // Code table 4.2: 0.3.5 geopotential height, 0.2.2 u, 0.2.3 v.
    let messages: Vec<Message> = [(3u8, 5u8, &z), (2, 2, &u), (2, 3, &v)]
        .into_iter()
        .map(|(category, number, values)| Message {
            discipline: 0,
            category,
            number,
            reference_time: 0,
            forecast_hours: 0,
            level: Level::Isobaric(50_000.0),
            grid: &definition,
            values,
            bits: 24,
        })
        .collect();
    write_file(path, &messages).unwrap();
    points
}

#[test]
fn a_lambert_grid_is_read_with_the_points_of_its_definition() {
    for mode in [0x40u8, 0x00] {
        let path = scratch(&format!("points-{mode}.grib2"));
        let points = write(&path, mode, 0x00);
        let field = Dataset::open(&[&path]).unwrap().read("geopotential_height", &Selection::default()).unwrap();
        let projected = field.grid.projection.clone().expect("a projected grid");
        assert_eq!(projected.shape(), (NY, NX));
        assert!(projected.y.windows(2).all(|w| w[1] > w[0]), "y ascends whatever the scan");
        // Scan order to rows: a north-first file's first row is the top row.
        for (k, &(lat, lon)) in points.iter().enumerate() {
            let (j, i) = (k / NX, k % NX);
            let row = if mode & 0x40 == 0 { NY - 1 - j } else { j };
            let m = row * NX + i;
            assert!((projected.latitude[m] - lat).abs() < 1e-6 && ((projected.longitude[m] - lon + 180.0).rem_euclid(360.0) - 180.0).abs() < 1e-6, "mode {mode:#x} point {k}: ({}, {}) vs ({lat}, {lon})", projected.latitude[m], projected.longitude[m]);
            assert!((field.data[[0, 0, row, i]] as f64 - height(lat, lon)).abs() < 1e-3, "value at point {k}");
        }
    }
}

#[test]
fn geostrophic_wind_on_a_grib2_lambert_grid_matches_the_analytic_wind() {
    // Within 1 % of the maximum speed in the interior (second-order
    // differences with the map factor and the local Coriolis parameter).
    let path = scratch("geostrophic.grib2");
    write(&path, 0x40, 0x00);
    let case = Case::new(Arc::new(Dataset::open(&[&path]).unwrap()));
    let wind = case.geostrophic_wind(50_000.0).unwrap();
    let projected = wind.eastward.grid.projection.clone().expect("a projected grid");
    let (mut worst, mut max_speed) = (0.0f64, 0.0f64);
    for j in 3..NY - 3 {
        for i in 3..NX - 3 {
            let k = j * NX + i;
            let (u, v) = geostrophic(projected.latitude[k], projected.longitude[k]);
            let (bu, bv) = (wind.eastward.data[[0, 0, j, i]] as f64, wind.northward.data[[0, 0, j, i]] as f64);
            worst = worst.max((u - bu).hypot(v - bv));
            max_speed = max_speed.max(u.hypot(v));
        }
    }
    eprintln!("geostrophic wind: worst difference {worst:.4} m/s, maximum speed {max_speed:.2} m/s");
    assert!(max_speed > 10.0, "the case must have wind ({max_speed})");
    assert!(worst < 0.01 * max_speed, "worst difference {worst:.3} m/s against a maximum of {max_speed:.1} m/s");
}

#[test]
fn grid_relative_winds_flagged_in_the_grid_come_back_earth_relative() {
    for mode in [0x40u8, 0x00] {
        let path = scratch(&format!("winds-{mode}.grib2"));
        write(&path, mode, 0x08);
        let dataset = Dataset::open(&[&path]).unwrap();
        let u = dataset.read("eastward_wind", &Selection::default()).unwrap();
        let v = dataset.read("northward_wind", &Selection::default()).unwrap();
        let projected = u.grid.projection.clone().unwrap();
        let mut turned = 0.0f64;
        for k in 0..NX * NY {
            let (ue, vn) = wind(projected.latitude[k], projected.longitude[k]);
            let (j, i) = (k / NX, k % NX);
            let (gu, gv) = (u.data[[0, 0, j, i]] as f64, v.data[[0, 0, j, i]] as f64);
            // 24-bit packing of about 20 m/s: steps of ~1e-6 m/s.
            assert!((gu - ue).abs() < 1e-3 && (gv - vn).abs() < 1e-3, "mode {mode:#x} at {j},{i}: ({gu}, {gv}) vs ({ue}, {vn})");
            turned = turned.max(projected.east_sin[k].abs());
        }
        assert!(turned > 0.15, "the grid turns east by a fair angle somewhere ({turned})");
        assert!(u.attributes.iter().any(|(k, v)| k == "wind_rotation" && v.contains("lambert_conformal_conic")), "{:?}", u.attributes);
        assert_eq!(u.standard_name.as_deref(), Some("eastward_wind"));
    }
    // Without the flag the components are read as they are.
    let path = scratch("winds-earth.grib2");
    write(&path, 0x40, 0x00);
    let u = Dataset::open(&[&path]).unwrap().read("eastward_wind", &Selection::default()).unwrap();
    assert!(!u.attributes.iter().any(|(k, _)| k == "wind_rotation"));
}

#[test]
fn a_latitude_longitude_box_selects_cells_of_a_grib2_lambert_grid() {
    let path = scratch("box.grib2");
    write(&path, 0x00, 0x00);
    let dataset = Dataset::open(&[&path]).unwrap();
    let region = baroc::physics::sampling::Region { south: 44.0, north: 48.0, west: -14.0, east: -6.0 };
    let field = dataset.read("geopotential_height", &Selection { region: Some(region), ..Selection::default() }).unwrap();
    let projected = field.grid.projection.clone().unwrap();
    let (ny, nx) = projected.shape();
    assert!(ny > 2 && nx > 2 && ny < NY && nx < NX, "{ny} x {nx}");
    for j in 0..ny {
        for i in 0..nx {
            let k = j * nx + i;
            let want = height(projected.latitude[k], projected.longitude[k]);
            assert!((field.data[[0, 0, j, i]] as f64 - want).abs() < 1e-3);
        }
    }
}

#[test]
fn a_projected_grid_names_its_axes_y_and_x_when_described() {
    // CF conventions 4.4/5.6: a projected grid's axes are projection_y_coordinate
    // and projection_x_coordinate, so `inspect` must not call them latitude
    // and longitude.
    let path = scratch("described.grib2");
    write(&path, 0x40, 0x00);
    let dataset = Dataset::open(&[&path]).unwrap();
    let described = dataset.variable("gh").or_else(|| dataset.variables().next()).unwrap().describe_dimensions();
    assert!(described.ends_with(&format!("y {NY}, x {NX}")), "{described}");
    assert!(!described.contains("latitude"), "{described}");
}
