//! Hybrid sigma-pressure model levels in CF NetCDF files written here:
//! interpolation to pressure levels, below-ground masking, the
//! standard-lapse-rate option, and bad coefficients.

use std::path::{Path, PathBuf};
use std::sync::Arc;

use baroc::constants::Constants;
use baroc::grid::Grid;
use baroc::io::model_levels::read_on_pressure_levels;
use baroc::physics::model_levels::BelowLowestLevel;

fn scratch(name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("baroc-model-levels-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    dir.join(name)
}

const T0: f64 = 255.0;
const LEVELS: usize = 20;

/// An isothermal atmosphere (T0) on hybrid levels over two columns: sea
/// level (1012 hPa) and a plateau (surface 760 hPa, 2300 m). Heights on the
/// model levels are the exact hypsometric solution
/// Z = Zs + (Rd T0 / g0) ln(ps / p) (field guide).
fn write(path: &Path, b_count: usize) {
    let c = Constants::default();
    let ap: Vec<f64> = (0..LEVELS).map(|k| 8000.0 * (1.0 - k as f64 / (LEVELS - 1) as f64)).collect();
    let b: Vec<f64> = (0..b_count).map(|k| (k as f64 / (LEVELS - 1) as f64).powi(2) * 0.995).collect();
    let ps = [101_200.0f64, 76_000.0];
    let zs = [0.0f64, 2300.0];
    let scale = c.dry_air_gas_constant * T0 / c.gravity;
    let mut z = Vec::new();
    for k in 0..LEVELS {
        for i in 0..2 {
            let p = ap[k] + b.get(k).copied().unwrap_or(0.0) * ps[i];
            z.push((zs[i] + scale * (ps[i] / p).ln()) as f32);
        }
    }
    let path = path.to_path_buf();
    baroc::io::netcdf_thread::call(move || {
        let mut f = netcdf::create(&path).unwrap();
        f.add_dimension("lev", LEVELS).unwrap();
        f.add_dimension("nb", b.len()).unwrap();
        f.add_dimension("lat", 1).unwrap();
        f.add_dimension("lon", 2).unwrap();
        let mut v = f.add_variable::<f64>("lev", &["lev"]).unwrap();
        v.put_attribute("standard_name", "atmosphere_hybrid_sigma_pressure_coordinate").unwrap();
        v.put_attribute("formula_terms", "ap: hyam b: hybm ps: ps").unwrap();
        v.put_values(&(0..LEVELS).map(|k| k as f64).collect::<Vec<_>>(), ..).unwrap();
        let mut v = f.add_variable::<f64>("hyam", &["lev"]).unwrap();
        v.put_attribute("units", "Pa").unwrap();
        v.put_values(&ap, ..).unwrap();
        let mut v = f.add_variable::<f64>("hybm", &["nb"]).unwrap();
        v.put_values(&b, ..).unwrap();
        let mut v = f.add_variable::<f64>("lat", &["lat"]).unwrap();
        v.put_attribute("units", "degrees_north").unwrap();
        v.put_values(&[45.0], ..).unwrap();
        let mut v = f.add_variable::<f64>("lon", &["lon"]).unwrap();
        v.put_attribute("units", "degrees_east").unwrap();
        v.put_values(&[0.0, 1.0], ..).unwrap();
        let mut v = f.add_variable::<f32>("ps", &["lat", "lon"]).unwrap();
        v.put_attribute("units", "hPa").unwrap();
        v.put_values(&ps.map(|p| (p / 100.0) as f32), ..).unwrap();
        let mut v = f.add_variable::<f32>("ta", &["lev", "lat", "lon"]).unwrap();
        v.put_attribute("standard_name", "air_temperature").unwrap();
        v.put_attribute("units", "K").unwrap();
        v.put_values(&vec![T0 as f32; LEVELS * 2], ..).unwrap();
        let mut v = f.add_variable::<f32>("zg", &["lev", "lat", "lon"]).unwrap();
        v.put_attribute("standard_name", "geopotential_height").unwrap();
        v.put_attribute("units", "m").unwrap();
        v.put_values(&z, ..).unwrap();
    });
}

fn grid() -> Arc<Grid> {
    Arc::new(Grid::new(vec![45.0], vec![0.0, 1.0]))
}

#[test]
fn isothermal_heights_on_pressure_levels_are_hypsometric_and_below_ground_is_missing() {
    let path = scratch("hybrid.nc");
    write(&path, LEVELS);
    let c = Constants::default();
    let targets = [85_000.0, 50_000.0, 30_000.0];
    let z = read_on_pressure_levels(&path, "zg", grid(), &targets, BelowLowestLevel::Missing, &c).unwrap();
    let scale = c.dry_air_gas_constant * T0 / c.gravity;
    for (n, &p) in targets.iter().enumerate() {
        // Exact hypsometric solution (field guide), both columns where above ground.
        let sea = scale * (101_200.0 / p).ln();
        assert!((z.data[[0, n, 0, 0]] as f64 - sea).abs() < 0.05, "{p} Pa: {} vs {sea}", z.data[[0, n, 0, 0]]);
        if p < 76_000.0 {
            let plateau = 2300.0 + scale * (76_000.0 / p).ln();
            assert!((z.data[[0, n, 0, 1]] as f64 - plateau).abs() < 0.05);
        }
    }
    assert!(z.data[[0, 0, 0, 1]].is_nan(), "850 hPa lies below the 760 hPa plateau surface");
    assert!(z.attributes.iter().any(|(k, v)| k == "vertical_interpolation" && v.contains("missing")));
}

#[test]
fn the_lapse_rate_option_extrapolates_and_says_so() {
    let path = scratch("hybrid-extrapolated.nc");
    write(&path, LEVELS);
    let c = Constants::default();
    let t = read_on_pressure_levels(&path, "ta", grid(), &[85_000.0], BelowLowestLevel::StandardLapseRate, &c).unwrap();
    // T = T_L (p / p_L)^(Rd gamma / g0) from the lowest level (U.S. Standard
    // Atmosphere 1976 lapse rate 6.5 K/km); warmer than T0 below the surface.
    let lowest = 0.995 * 76_000.0;
    let expected = T0 * (85_000.0f64 / lowest).powf(c.dry_air_gas_constant * 0.0065 / c.gravity);
    assert!((t.data[[0, 0, 0, 1]] as f64 - expected).abs() < 1e-3, "{} vs {expected}", t.data[[0, 0, 0, 1]]);
    assert!(t.attributes.iter().any(|(k, v)| k == "vertical_interpolation" && v.contains("standard lapse rate")));
}

#[test]
fn coefficients_not_matching_the_levels_are_a_clear_error_naming_the_file() {
    let path = scratch("hybrid-bad.nc");
    write(&path, LEVELS - 3);
    let err = read_on_pressure_levels(&path, "ta", grid(), &[50_000.0], BelowLowestLevel::Missing, &Constants::default()).unwrap_err().to_string();
    assert!(err.contains("hybrid-bad.nc") && err.contains("20 pressure terms") && err.contains("17 surface terms"), "{err}");
}
