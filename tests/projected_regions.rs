//! Points and boxes given in latitude and longitude, through the language,
//! on a Lambert conformal grid (a GRIB2 file written by Baroc's own writer
//! from an analytic field): a box takes the block of rows and columns
//! bounding exactly the cells whose centres lie inside it, keeps the
//! projection, and area means count exactly those cells, weighted by their
//! area on the earth. Every expectation is computed here from the
//! projection's formulas (Snyder 1987, USGS PP 1395, eqs. 14-10, 15-1 to
//! 15-5), not from Baroc's grid.

use std::path::PathBuf;
use std::sync::Arc;

use baroc::grid::Field;
use baroc::io::grib2::{Earth, GridDefinition, LambertConformal};
use baroc::io::grib2_writer::{write_file, Level, Message};
use baroc::lang::value::Value;
use baroc::session::Session;

const RADIUS: f64 = 6_371_229.0; // sphere of GRIB2 code table 3.2, shape 6
const NX: usize = 61;
const NY: usize = 49;
const SPACING: f64 = 25_000.0;
const X0: f64 = -750_000.0;
const Y0: f64 = -600_000.0;
// Standard parallels 35 and 55 N, central meridian 10 W, origin 45 N.
const PHI1: f64 = 35.0;
const PHI2: f64 = 55.0;
const LON0: f64 = -10.0;
const PHI0: f64 = 45.0;

/// Snyder (1987) eqs. (15-1) to (15-3): cone constant n, F, rho0.
fn cone() -> (f64, f64, f64) {
    let t = |phi: f64| (std::f64::consts::FRAC_PI_4 + phi.to_radians() / 2.0).tan();
    let (p1, p2) = (PHI1.to_radians(), PHI2.to_radians());
    let n = (p1.cos() / p2.cos()).ln() / (t(PHI2) / t(PHI1)).ln();
    let f = p1.cos() * t(PHI1).powf(n) / n;
    let rho0 = RADIUS * f / t(PHI0).powf(n);
    (n, f, rho0)
}

/// Inverse (Snyder eqs. 14-10, 14-11, 15-5), and the scale factor k
/// (eq. 15-4) at the point.
fn inverse(x: f64, y: f64) -> (f64, f64, f64) {
    let (n, f, rho0) = cone();
    let rho = x.hypot(rho0 - y);
    let theta = x.atan2(rho0 - y);
    let phi = 2.0 * (RADIUS * f / rho).powf(1.0 / n).atan() - std::f64::consts::FRAC_PI_2;
    let k = rho * n / (RADIUS * phi.cos());
    (phi.to_degrees(), LON0 + (theta / n).to_degrees(), k)
}

fn height(lat: f64, lon: f64) -> f64 {
    5570.0 - 900.0 * lat.to_radians().sin() + 360.0 * lat.to_radians().cos() * (3.0 * lon.to_radians()).sin()
}

/// Writes geopotential height at 500 hPa on the grid, rows south to north.
fn file() -> PathBuf {
    let dir = std::env::temp_dir().join(format!("baroc-projected-regions-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let path = dir.join("lambert.grib2");
    let (first_latitude, first_longitude, _) = inverse(X0, Y0);
    let definition = GridDefinition::LambertConformal(LambertConformal {
        nx: NX,
        ny: NY,
        first_latitude,
        first_longitude,
        true_scale_latitude: PHI0,
        orientation_longitude: LON0,
        dx_metres: SPACING,
        dy_metres: SPACING,
        projection_centre_flag: 0,
        resolution_flags: 0,
        scanning_mode: 0x40,
        first_standard_parallel: PHI1,
        second_standard_parallel: PHI2,
        south_pole_latitude: -90.0,
        south_pole_longitude: 0.0,
        earth: Earth { shape: 6, radius: None, major_axis: None, minor_axis: None },
    });
    let mut values = Vec::new();
    for j in 0..NY {
        for i in 0..NX {
            let (lat, lon, _) = inverse(X0 + SPACING * i as f64, Y0 + SPACING * j as f64);
            values.push(height(lat, lon) as f32);
        }
    }
    // Code table 4.2: discipline 0, category 3, number 5 = geopotential height.
    let message = Message { discipline: 0, category: 3, number: 5, reference_time: 0, forecast_hours: 0, level: Level::Isobaric(50_000.0), grid: &definition, values: &values, bits: 24 };
    write_file(&path, &[message]).unwrap();
    path
}

fn session() -> Session {
    let mut s = Session::new();
    s.run(&format!("open \"{}\"", file().display()), None).expect("opens");
    s
}

fn value(session: &mut Session, code: &str) -> Value {
    match session.run(code, None) {
        Ok(_) => session.last_values.last().cloned().expect("a value"),
        Err(e) => panic!("{code}\n{}", e.rendered),
    }
}

fn scalar(v: Value) -> Arc<Field> {
    match v {
        Value::Scalar(f) => f,
        other => panic!("expected a field, got {}", other.kind()),
    }
}

const BOX: &str = "box(44 north to 48 north, 14 west to 6 west)";
/// In the box; longitudes compared in -180..180 (a GRIB2 grid gives its
/// orientation longitude in 0..360, so its points' longitudes may be 350).
fn inside(lat: f64, lon: f64) -> bool {
    let lon = (lon + 180.0).rem_euclid(360.0) - 180.0;
    (44.0..=48.0).contains(&lat) && (-14.0..=-6.0).contains(&lon)
}

/// The rows and columns of the cells inside the box, from the inverse.
fn cells_inside() -> Vec<(usize, usize, f64, f64)> {
    let mut out = Vec::new();
    for j in 0..NY {
        for i in 0..NX {
            let (lat, lon, k) = inverse(X0 + SPACING * i as f64, Y0 + SPACING * j as f64);
            if inside(lat, lon) {
                out.push((j, i, height(lat, lon), k));
            }
        }
    }
    out
}

#[test]
fn a_box_selects_the_block_bounding_the_cells_inside_and_keeps_the_projection() {
    let cells = cells_inside();
    assert!(cells.len() > 50, "{} cells inside", cells.len());
    let (j0, j1) = (cells.iter().map(|c| c.0).min().unwrap(), cells.iter().map(|c| c.0).max().unwrap());
    let (i0, i1) = (cells.iter().map(|c| c.1).min().unwrap(), cells.iter().map(|c| c.1).max().unwrap());
    let mut s = session();
    // Read under the box, and cut from a field already read: the same block.
    let read = scalar(value(&mut s, &format!("geopotential_height at 500 hPa in {BOX}")));
    s.run("let whole = geopotential_height at 500 hPa", None).expect("binds");
    let cut = scalar(value(&mut s, &format!("whole in {BOX}")));
    for f in [&read, &cut] {
        let p = f.grid.projection.clone().expect("the projection is kept");
        assert_eq!(p.shape(), (j1 - j0 + 1, i1 - i0 + 1));
        // The block's corners are the grid's own points (GRIB2 stores the
        // first point to a micro-degree, about 0.1 m).
        assert!((p.x[0] - (X0 + SPACING * i0 as f64)).abs() < 1.0 && (p.y[0] - (Y0 + SPACING * j0 as f64)).abs() < 1.0, "{} {}", p.x[0], p.y[0]);
        // Every cell inside the box is in the block with its value.
        for &(j, i, z, _) in &cells {
            let v = f.data[[0, 0, j - j0, i - i0]] as f64;
            assert!((v - z).abs() < 0.01, "cell ({j}, {i}): {v} vs {z}");
        }
        // The block is no larger than needed: each edge row and column holds
        // a cell inside.
        let (ny, nx) = p.shape();
        let inside_at = |jj: usize, ii: usize| inside(p.latitude[jj * nx + ii], p.longitude[jj * nx + ii]);
        assert!((0..nx).any(|ii| inside_at(0, ii)) && (0..nx).any(|ii| inside_at(ny - 1, ii)), "rows {j0}..={j1}, block {ny} x {nx}, first row latitudes {:?}", &p.latitude[..nx]);
        assert!((0..ny).any(|jj| inside_at(jj, 0)) && (0..ny).any(|jj| inside_at(jj, nx - 1)));
    }
}

#[test]
fn an_area_mean_counts_exactly_the_cells_inside_weighted_by_their_area() {
    // A regular cell of a conformal projection covers dx dy / k^2 on the
    // earth (Snyder 1987, ch. 4: k is the linear scale in every direction).
    let cells = cells_inside();
    let (sum, weights) = cells.iter().fold((0.0, 0.0), |(s, w), c| (s + c.2 / (c.3 * c.3), w + 1.0 / (c.3 * c.3)));
    let want = sum / weights;
    let mut s = session();
    let Value::Series(series) = value(&mut s, &format!("area_mean(geopotential_height at 500 hPa, {BOX})")) else { panic!("a table") };
    let got = series.rows[0][0];
    assert!((got - want).abs() < 0.01, "{got} vs {want}");
    // An unweighted mean over the whole block would differ: the check can fail.
    let block: f64 = cells.iter().map(|c| c.2).sum::<f64>() / cells.len() as f64;
    assert!((block - want).abs() > 1e-4 || cells.len() < 2);
}

#[test]
fn a_point_is_sampled_by_bilinear_interpolation_in_projection_space() {
    // A point half-way between four grid points in x and y: bilinear in
    // projection space is the mean of the four values.
    let (x, y) = (X0 + SPACING * 20.5, Y0 + SPACING * 30.5);
    let (lat, lon, _) = inverse(x, y);
    let corners: f64 = [(20, 30), (21, 30), (20, 31), (21, 31)].iter().map(|&(i, j)| {
        let (a, b, _) = inverse(X0 + SPACING * i as f64, Y0 + SPACING * j as f64);
        height(a, b)
    }).sum::<f64>() / 4.0;
    let mut s = session();
    let code = format!(
        "geopotential_height at 500 hPa at point({:.9} {}, {:.9} {})",
        lat.abs(),
        if lat >= 0.0 { "north" } else { "south" },
        lon.abs(),
        if lon >= 0.0 { "east" } else { "west" }
    );
    let got = match value(&mut s, &code) {
        Value::Series(t) => t.rows[0][0],
        Value::Number { value, .. } => value,
        other => panic!("{}", other.kind()),
    };
    assert!((got - corners).abs() < 0.01, "{got} vs {corners}");
}

#[test]
fn a_map_of_lambert_data_is_drawn_through_the_language() {
    // `map(...)` of a field read from a Lambert GRIB2 file: drawn in the
    // grid's projection (not refused), its box keeping the projection too.
    let mut s = session();
    for code in ["map(geopotential_height at 500 hPa)", &format!("map(geopotential_height at 500 hPa in {BOX})")] {
        let Value::Figure(request) = value(&mut s, code) else { panic!("{code}: a figure") };
        let bundle = baroc::figures::draw(&request).unwrap_or_else(|e| panic!("{code}: {}", e.message));
        assert!(bundle.binary("image/png").is_some_and(|p| p.len() > 1000));
        assert!(bundle.plain_text().contains("Lambert conformal"), "{}", bundle.plain_text());
    }
}
