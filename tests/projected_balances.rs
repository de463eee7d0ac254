//! The same analytic atmosphere sampled on a latitude-longitude grid and on
//! a Lambert conformal grid (GRIB2 files from Baroc's own writer) gives the
//! same maximum Eady growth rate and the same smoothed field in the
//! interior: the projected grid takes the Coriolis parameter at each
//! point's latitude and lengths through the map factor (Snyder 1987, USGS
//! PP 1395, eq. 15-4), so the grid it is computed on does not show.

use std::path::PathBuf;
use std::sync::Arc;

use baroc::diagnostics::{point_values, smooth, Case, Layer};
use baroc::io::dataset::Dataset;
use baroc::io::grib2::{Earth, GridDefinition, LambertConformal, LatLonGrid};
use baroc::io::grib2_writer::{write_file, Level, Message};
use baroc::io::Selection;
use baroc::projection::{self, Projection};

const RADIUS: f64 = 6_371_229.0; // sphere of GRIB2 code table 3.2, shape 6
const LEVELS: [f64; 3] = [85_000.0, 70_000.0, 50_000.0];
const NX: usize = 61;
const NY: usize = 49;
const SPACING: f64 = 25_000.0;

fn scratch(name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("baroc-projected-balances-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    dir.join(name)
}

/// Analytic temperature (K), invented for the test: a lapse of about
/// 6.5 K/km in the vertical ((p/p0)^0.19, the U.S. Standard Atmosphere's
/// troposphere exponent R L / g), a front falling 16 K poleward about 45 N
/// and a weak wave in longitude.
fn temperature(lat: f64, lon: f64, p: f64) -> f64 {
    288.15 * (p / 101_325.0).powf(0.1903) - 8.0 * ((lat - 45.0) / 6.0).tanh() + 2.0 * (3.0 * lon.to_radians()).sin() * (1.0 + (85_000.0 - p) / 1.0e5)
}

fn messages<'a>(grid: &'a GridDefinition, points: &[(f64, f64)], store: &'a mut Vec<Vec<f32>>) -> Vec<Message<'a>> {
    *store = LEVELS.iter().map(|&p| points.iter().map(|&(a, b)| temperature(a, b, p) as f32).collect()).collect();
    // Code table 4.2: discipline 0, category 0, number 0 = temperature.
    store
        .iter()
        .zip(LEVELS)
        .map(|(values, p)| Message { discipline: 0, category: 0, number: 0, reference_time: 0, forecast_hours: 0, level: Level::Isobaric(p), grid, values, bits: 24 })
        .collect()
}

fn earth() -> Earth {
    Earth { shape: 6, radius: None, major_axis: None, minor_axis: None }
}

/// A quarter-degree latitude-longitude grid, 33 N to 58 N, 32 W to 12 E.
fn latlon_file(tag: &str) -> PathBuf {
    let path = scratch(&format!("latlon-{tag}.grib2"));
    let (ni, nj) = (177, 101);
    let definition = GridDefinition::LatLon(LatLonGrid {
        ni,
        nj,
        first_latitude: 58.0,
        first_longitude: -32.0,
        last_latitude: 33.0,
        last_longitude: 12.0,
        i_increment: Some(0.25),
        j_increment: Some(0.25),
        resolution_flags: 0x30,
        scanning_mode: 0,
        earth: earth(),
    });
    let points: Vec<(f64, f64)> = (0..nj).flat_map(|j| (0..ni).map(move |i| (58.0 - 0.25 * j as f64, -32.0 + 0.25 * i as f64))).collect();
    let mut store = Vec::new();
    write_file(&path, &messages(&definition, &points, &mut store)).unwrap();
    path
}

fn lambert() -> Projection {
    Projection::LambertConformal(projection::LambertConformal::new((35.0, 55.0), -10.0, 45.0, 0.0, 0.0, RADIUS).unwrap())
}

/// 61 x 49 points 25 km apart about 45 N 10 W, rows south to north.
fn lambert_file(tag: &str) -> PathBuf {
    let path = scratch(&format!("lambert-{tag}.grib2"));
    let p = lambert();
    let (x0, y0) = (-750_000.0, -600_000.0);
    let (first_latitude, first_longitude) = p.inverse(x0, y0);
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
        resolution_flags: 0,
        scanning_mode: 0x40,
        first_standard_parallel: 35.0,
        second_standard_parallel: 55.0,
        south_pole_latitude: -90.0,
        south_pole_longitude: 0.0,
        earth: earth(),
    });
    let points: Vec<(f64, f64)> = (0..NY).flat_map(|j| (0..NX).map(move |i| (i, j))).map(|(i, j)| p.inverse(x0 + SPACING * i as f64, y0 + SPACING * j as f64)).collect();
    let mut store = Vec::new();
    write_file(&path, &messages(&definition, &points, &mut store)).unwrap();
    path
}

/// Compares a field on the Lambert grid with the latitude-longitude one
/// sampled at the same points, `border` cells in from the edges; returns
/// the largest difference and the largest magnitude of the
/// latitude-longitude field there.
fn compare(lambert: &baroc::grid::Field, latlon: &baroc::grid::Field, border: usize) -> (f64, f64) {
    let p = lambert.grid.projection.clone().unwrap();
    let (ny, nx) = p.shape();
    let (mut worst, mut largest) = (0.0f64, 0.0f64);
    for j in border..ny - border {
        for i in border..nx - border {
            let k = j * nx + i;
            let here = lambert.data[[0, 0, j, i]] as f64;
            let there = point_values(latlon, p.latitude[k], p.longitude[k]).unwrap()[0] as f64;
            assert!(here.is_finite() && there.is_finite(), "({j}, {i}): {here} vs {there}");
            worst = worst.max((here - there).abs());
            largest = largest.max(there.abs());
        }
    }
    (worst, largest)
}

#[test]
fn eady_growth_rate_on_a_lambert_grid_matches_the_latitude_longitude_one() {
    let layer = Layer::new(85_000.0, 50_000.0).0;
    let on_lambert = Case::new(Arc::new(Dataset::open(&[&lambert_file("eady")]).unwrap())).eady_growth_rate(layer).expect("Eady on a projected grid");
    let on_latlon = Case::new(Arc::new(Dataset::open(&[&latlon_file("eady")]).unwrap())).eady_growth_rate(layer).unwrap();
    assert!(on_lambert.grid.projection.is_some());
    // Second-order differences on grids of 25 km and a quarter degree:
    // both within a small fraction of the front's scale (6 degrees).
    let (worst, largest) = compare(&on_lambert, &on_latlon, 2);
    let relative = worst / largest;
    assert!(relative < 0.02, "largest difference {:.2} % of the largest growth rate", 100.0 * relative);
}

#[test]
fn smoothing_on_a_lambert_grid_matches_the_latitude_longitude_one() {
    let read = |path: PathBuf| Dataset::open(&[&path]).unwrap().read("temperature", &Selection { levels: Some(vec![50_000.0]), ..Selection::default() }).unwrap();
    let (lambert, latlon) = (read(lambert_file("smooth")), read(latlon_file("smooth")));
    let constants = baroc::constants::Constants::default();
    let sigma = 150e3;
    let (a, b) = (smooth(&lambert, &constants, sigma).expect("smoothing on a projected grid"), smooth(&latlon, &constants, sigma).unwrap());
    // Away from the edges by three sigma (18 cells of 25 km), where the
    // truncated kernels are whole on both grids. Compared as the change
    // each grid's smoothing makes, so agreement is not read off the 250 K
    // mean. The two filters are not identical: the latitude-longitude one
    // averages along parallels, which are not straight on the sphere, and
    // so leaves out the metric term -tan(lat)/a dT/dy of the spherical
    // Laplacian (a Gaussian changes a field by sigma^2/2 times its
    // Laplacian to leading order), which the projection plane keeps. Their
    // difference is bounded by that term: sigma^2/2 tan(lat)/a |dT/dy| with
    // |dT/dy| at most 8 K / (6 degrees of latitude) at the front's centre.
    let mut departure_a = a.clone();
    departure_a.data = &a.data - &lambert.data;
    let mut departure_b = b.clone();
    departure_b.data = &b.data - &latlon.data;
    let (worst, largest) = compare(&departure_a, &departure_b, 18);
    let gradient = 8.0 / (6.0f64.to_radians() * RADIUS);
    let metric = sigma * sigma / 2.0 * 46.0f64.to_radians().tan() / RADIUS * gradient;
    assert!(worst < 1.2 * metric, "largest difference {worst:.4} K; the filters may differ by {metric:.4} K");
    // The smoothing itself changes the field by more than that, so the
    // check can tell a filter of the wrong width.
    assert!(largest > 3.0 * metric, "smoothing changes the field by at most {largest:.4} K");
}
