//! Projected grids end to end: CF NetCDF files written here, read by the
//! dataset reader, diagnosed by the same engine calls as latitude-longitude
//! data.

use std::path::{Path, PathBuf};
use std::sync::Arc;

use baroc::diagnostics::{Case, Layer, ThicknessRoute};
use baroc::io::dataset::Dataset;
use baroc::io::Selection;

fn scratch(name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("baroc-projected-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    dir.join(name)
}

/// An analytic height field (m) at 1000 and 500 hPa: a zonal jet with a
/// wave, stronger aloft (invented for the test; smooth on both grids).
fn height(lat: f64, lon: f64, pressure: f64) -> f64 {
    let (phi, lambda) = (lat.to_radians(), lon.to_radians());
    let (base, amplitude) = if pressure > 75_000.0 { (110.0, 150.0) } else { (5570.0, 900.0) };
    base - amplitude * phi.sin() + 0.4 * amplitude * phi.cos() * (3.0 * lambda).sin()
}

/// Analytic earth-relative wind for the rotation check.
fn wind(lat: f64, lon: f64) -> (f64, f64) {
    (12.0 + 6.0 * lon.to_radians().sin(), 4.0 * lat.to_radians().cos())
}

const LEVELS: [f64; 2] = [1000.0, 500.0];

fn write_latitude_longitude(path: &Path) {
    let lats: Vec<f64> = (0..=160).map(|j| 25.0 + 0.25 * j as f64).collect();
    let lons: Vec<f64> = (0..=280).map(|i| -45.0 + 0.25 * i as f64).collect();
    let mut z: Vec<f32> = Vec::new();
    for &p in &LEVELS {
        for &la in &lats {
            z.extend(lons.iter().map(|&lo| height(la, lo, p * 100.0) as f32));
        }
    }
    let path = path.to_path_buf();
    baroc::io::netcdf_thread::call(move || {
        let mut f = netcdf::create(&path).unwrap();
        f.add_dimension("plev", 2).unwrap();
        f.add_dimension("lat", lats.len()).unwrap();
        f.add_dimension("lon", lons.len()).unwrap();
        let mut v = f.add_variable::<f64>("plev", &["plev"]).unwrap();
        v.put_attribute("units", "hPa").unwrap();
        v.put_values(&LEVELS, ..).unwrap();
        let mut v = f.add_variable::<f64>("lat", &["lat"]).unwrap();
        v.put_attribute("units", "degrees_north").unwrap();
        v.put_values(&lats, ..).unwrap();
        let mut v = f.add_variable::<f64>("lon", &["lon"]).unwrap();
        v.put_attribute("units", "degrees_east").unwrap();
        v.put_values(&lons, ..).unwrap();
        let mut v = f.add_variable::<f32>("zg", &["plev", "lat", "lon"]).unwrap();
        v.put_attribute("standard_name", "geopotential_height").unwrap();
        v.put_attribute("units", "m").unwrap();
        v.put_values(&z, ..).unwrap();
    });
}

/// Lambert conformal conic, standard parallels 35 and 55 N, central
/// meridian 10 W, 25 km spacing, coordinates written in km.
const CONE_PARALLELS: [f64; 2] = [35.0, 55.0];
const CENTRAL_MERIDIAN: f64 = -10.0;

fn write_lambert(path: &Path, complete: bool) {
    let projection = baroc::projection::LambertConformal::new((35.0, 55.0), CENTRAL_MERIDIAN, 45.0, 0.0, 0.0, 6_371_000.0).unwrap();
    let p = baroc::projection::Projection::LambertConformal(projection.clone());
    let x_km: Vec<f64> = (0..81).map(|i| -1000.0 + 25.0 * i as f64).collect();
    let y_km: Vec<f64> = (0..65).map(|j| -800.0 + 25.0 * j as f64).collect();
    let mut z = Vec::new();
    let (mut ux, mut uy) = (Vec::new(), Vec::new());
    // Cone constant from Snyder (1987) eq. (15-3), written out here.
    let (p1, p2) = (CONE_PARALLELS[0].to_radians(), CONE_PARALLELS[1].to_radians());
    let t = |phi: f64| (std::f64::consts::FRAC_PI_4 + phi / 2.0).tan();
    let n = (p1.cos() / p2.cos()).ln() / (t(p2) / t(p1)).ln();
    for &level in &LEVELS {
        for &y in &y_km {
            for &x in &x_km {
                let (lat, lon) = p.inverse(x * 1000.0, y * 1000.0);
                z.push(height(lat, lon, level * 100.0) as f32);
                // Grid-relative components: east is the x axis turned by
                // n (lon - lon0) (Snyder eq. 15-1).
                let a = n * (lon - CENTRAL_MERIDIAN).to_radians();
                let (ue, vn) = wind(lat, lon);
                ux.push((ue * a.cos() - vn * a.sin()) as f32);
                uy.push((ue * a.sin() + vn * a.cos()) as f32);
            }
        }
    }
    let path = path.to_path_buf();
    baroc::io::netcdf_thread::call(move || {
        let mut f = netcdf::create(&path).unwrap();
        f.add_dimension("plev", 2).unwrap();
        f.add_dimension("y", y_km.len()).unwrap();
        f.add_dimension("x", x_km.len()).unwrap();
        let mut v = f.add_variable::<f64>("plev", &["plev"]).unwrap();
        v.put_attribute("units", "hPa").unwrap();
        v.put_values(&LEVELS, ..).unwrap();
        let mut v = f.add_variable::<f64>("y", &["y"]).unwrap();
        v.put_attribute("standard_name", "projection_y_coordinate").unwrap();
        v.put_attribute("units", "km").unwrap();
        v.put_values(&y_km, ..).unwrap();
        let mut v = f.add_variable::<f64>("x", &["x"]).unwrap();
        v.put_attribute("standard_name", "projection_x_coordinate").unwrap();
        v.put_attribute("units", "km").unwrap();
        v.put_values(&x_km, ..).unwrap();
        let mut m = f.add_variable::<i32>("lambert", &[]).unwrap();
        m.put_attribute("grid_mapping_name", "lambert_conformal_conic").unwrap();
        m.put_attribute("standard_parallel", vec![35.0f64, 55.0]).unwrap();
        if complete {
            m.put_attribute("longitude_of_central_meridian", CENTRAL_MERIDIAN).unwrap();
        }
        m.put_attribute("latitude_of_projection_origin", 45.0f64).unwrap();
        m.put_attribute("earth_radius", 6_371_000.0f64).unwrap();
        for (name, standard_name, units, data) in
            [("zg", "geopotential_height", "m", &z), ("ux", "x_wind", "m s-1", &ux), ("uy", "y_wind", "m s-1", &uy)]
        {
            let mut v = f.add_variable::<f32>(name, &["plev", "y", "x"]).unwrap();
            v.put_attribute("standard_name", standard_name).unwrap();
            v.put_attribute("units", units).unwrap();
            v.put_attribute("grid_mapping", "lambert").unwrap();
            v.put_values(data, ..).unwrap();
        }
    });
}

/// Bilinear interpolation on a regular latitude-longitude field.
fn bilinear(data: &ndarray::ArrayView2<f32>, lats: &[f64], lons: &[f64], lat: f64, lon: f64) -> f64 {
    let fj = (lat - lats[0]) / (lats[1] - lats[0]);
    let fi = (lon - lons[0]) / (lons[1] - lons[0]);
    let (j, i) = (fj.floor() as usize, fi.floor() as usize);
    let (wy, wx) = (fj - j as f64, fi - i as f64);
    let v = |jj: usize, ii: usize| data[[jj, ii]] as f64;
    (1.0 - wy) * ((1.0 - wx) * v(j, i) + wx * v(j, i + 1)) + wy * ((1.0 - wx) * v(j + 1, i) + wx * v(j + 1, i + 1))
}

#[test]
fn the_same_atmosphere_on_latitude_longitude_and_lambert_grids_gives_the_same_winds() {
    // Requirement of the projected-grid work: geostrophic and thermal wind
    // from the same analytic atmosphere agree within 1 % of the maximum
    // speed in the interior (second-order differences on both grids; the
    // map factor and local Coriolis make the Lambert result earth-true).
    let (ll_path, lcc_path) = (scratch("latlon.nc"), scratch("lambert.nc"));
    write_latitude_longitude(&ll_path);
    write_lambert(&lcc_path, true);
    let ll = Case::new(Arc::new(Dataset::open(&[&ll_path]).unwrap()));
    let lcc = Case::new(Arc::new(Dataset::open(&[&lcc_path]).unwrap()));
    let layer = Layer::new(100_000.0, 50_000.0).0;
    let pairs = [
        (ll.geostrophic_wind(50_000.0).unwrap(), lcc.geostrophic_wind(50_000.0).unwrap()),
        (ll.thermal_wind(layer, ThicknessRoute::Geopotential).unwrap(), lcc.thermal_wind(layer, ThicknessRoute::Geopotential).unwrap()),
    ];
    for (which, (a, b)) in ["geostrophic wind at 500 hPa", "thermal wind 1000-500 hPa"].iter().zip(pairs) {
        let projected = b.eastward.grid.projection.clone().expect("the Lambert file is read as a projected grid");
        let (lats, lons) = (&a.eastward.grid.latitudes, &a.eastward.grid.longitudes);
        let au = a.eastward.data.index_axis(ndarray::Axis(0), 0).index_axis(ndarray::Axis(0), 0).to_owned();
        let av = a.northward.data.index_axis(ndarray::Axis(0), 0).index_axis(ndarray::Axis(0), 0).to_owned();
        let (ny, nx) = projected.shape();
        let (mut worst, mut max_speed) = (0.0f64, 0.0f64);
        for j in 3..ny - 3 {
            for i in 3..nx - 3 {
                let k = j * nx + i;
                let (lat, lon) = (projected.latitude[k], projected.longitude[k]);
                let (u, v) = (bilinear(&au.view(), lats, lons, lat, lon), bilinear(&av.view(), lats, lons, lat, lon));
                let (bu, bv) = (b.eastward.data[[0, 0, j, i]] as f64, b.northward.data[[0, 0, j, i]] as f64);
                worst = worst.max((u - bu).hypot(v - bv));
                max_speed = max_speed.max(u.hypot(v));
            }
        }
        eprintln!("{which}: worst difference {worst:.4} m/s, maximum speed {max_speed:.2} m/s");
        assert!(max_speed > 10.0, "{which}: the case must have wind ({max_speed})");
        assert!(worst < 0.01 * max_speed, "{which}: worst difference {worst:.3} m/s against a maximum of {max_speed:.1} m/s");
    }
}

#[test]
fn grid_relative_winds_are_turned_to_earth_relative_and_the_angle_recorded() {
    let path = scratch("lambert-winds.nc");
    write_lambert(&path, true);
    let dataset = Dataset::open(&[&path]).unwrap();
    let u = dataset.read("eastward_wind", &Selection::default()).unwrap();
    let v = dataset.read("northward_wind", &Selection::default()).unwrap();
    let projected = u.grid.projection.clone().unwrap();
    let (ny, nx) = projected.shape();
    for j in 0..ny {
        for i in 0..nx {
            let k = j * nx + i;
            let (ue, vn) = wind(projected.latitude[k], projected.longitude[k]);
            assert!((u.data[[0, 1, j, i]] as f64 - ue).abs() < 1e-4 && (v.data[[0, 1, j, i]] as f64 - vn).abs() < 1e-4, "at {j},{i}");
        }
    }
    assert!(u.attributes.iter().any(|(k, v)| k == "wind_rotation" && v.contains("lambert_conformal_conic")), "{:?}", u.attributes);
    assert_eq!(u.standard_name.as_deref(), Some("eastward_wind"));
}

#[test]
fn a_latitude_longitude_box_selects_the_cells_inside_it() {
    let path = scratch("lambert-box.nc");
    write_lambert(&path, true);
    let dataset = Dataset::open(&[&path]).unwrap();
    let region = baroc::physics::sampling::Region { south: 42.0, north: 48.0, west: -15.0, east: -5.0 };
    let z = dataset.read("zg", &Selection { region: Some(region), ..Default::default() }).unwrap();
    let projected = z.grid.projection.clone().unwrap();
    // The block is the smallest holding every centre inside the box: each
    // edge row/column has at least one point inside, and the block is
    // smaller than the whole grid.
    let inside = |k: usize| (42.0..=48.0).contains(&projected.latitude[k]) && (-15.0..=-5.0).contains(&projected.longitude[k]);
    let (ny, nx) = projected.shape();
    assert!(ny < 65 && nx < 81 && ny > 5 && nx > 5);
    assert!((0..nx).any(|i| inside(i)) && (0..nx).any(|i| inside((ny - 1) * nx + i)));
    assert!((0..ny).any(|j| inside(j * nx)) && (0..ny).any(|j| inside(j * nx + nx - 1)));
    // Values read are those of the analytic field at the cells' positions.
    let k = (ny / 2) * nx + nx / 2;
    let expected = height(projected.latitude[k], projected.longitude[k], 50_000.0);
    assert!((z.data[[0, 1, ny / 2, nx / 2]] as f64 - expected).abs() < 1e-2);
}

#[test]
fn a_projection_with_a_missing_parameter_is_a_clear_error_naming_the_file() {
    let path = scratch("lambert-incomplete.nc");
    write_lambert(&path, false);
    let err = Dataset::open(&[&path]).unwrap_err().to_string();
    assert!(err.contains("lambert-incomplete.nc") && err.contains("longitude_of_central_meridian"), "{err}");
}

#[test]
fn a_point_given_in_latitude_longitude_samples_the_right_cells() {
    // Bilinear interpolation in the grid's own coordinates at the point's
    // forward projection: close to the analytic field there (25 km cells,
    // smooth field).
    let path = scratch("lambert-point.nc");
    write_lambert(&path, true);
    let dataset = Dataset::open(&[&path]).unwrap();
    let z = dataset.read("zg", &Selection::default()).unwrap();
    let slice = z.data.index_axis(ndarray::Axis(0), 0).index_axis(ndarray::Axis(0), 1).to_owned();
    for (lat, lon) in [(45.0, -10.0), (47.3, -3.2), (41.2, -16.8)] {
        let value = baroc::physics::sampling::bilinear(&z.grid, slice.view(), lat, lon).unwrap() as f64;
        let expected = height(lat, lon, 50_000.0);
        assert!((value - expected).abs() < 1.0, "{lat}, {lon}: {value} vs {expected}");
    }
    assert!(baroc::physics::sampling::bilinear(&z.grid, slice.view(), 10.0, 60.0).is_err(), "a point off the grid is an error");
}

#[test]
fn results_on_a_projected_grid_are_written_with_their_grid_mapping_and_read_back() {
    let path = scratch("lambert-source.nc");
    write_lambert(&path, true);
    let case = Case::new(Arc::new(Dataset::open(&[&path]).unwrap()));
    let wind = case.geostrophic_wind(50_000.0).unwrap();
    let out = scratch("lambert-result.nc");
    baroc::io::writer::write_fields(&out, &[&wind.eastward], &baroc::io::writer::WriteOptions::default()).unwrap();
    let back = Dataset::open(&[&out]).unwrap();
    let field = back.read(&wind.eastward.name, &Selection::default()).unwrap();
    let (a, b) = (wind.eastward.grid.projection.clone().unwrap(), field.grid.projection.clone().expect("read back as projected"));
    assert_eq!(a.projection, b.projection);
    assert_eq!((a.x.clone(), a.y.clone()), (b.x.clone(), b.y.clone()));
}
