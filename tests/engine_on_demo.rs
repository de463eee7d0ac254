//! The diagnostics engine on the demo case and on files of other layouts,
//! end to end through the NetCDF reader and writer.

use std::path::PathBuf;
use std::sync::{Arc, OnceLock};

use baroc::diagnostics::{Case, Layer, ThicknessRoute};
use baroc::io::writer::{write_fields, Format, WriteOptions};
use baroc::io::{DataError, Dataset, Selection};

/// The demo case, written once per test binary.
fn demo_path() -> &'static PathBuf {
    static PATH: OnceLock<PathBuf> = OnceLock::new();
    PATH.get_or_init(|| {
        let dir = std::env::temp_dir().join(format!("baroc-engine-tests-{}", std::process::id()));
        baroc::demo::write(&dir).expect("demo case writes")
    })
}

fn demo_case() -> Case {
    Case::new(Arc::new(Dataset::open(&[demo_path()]).unwrap()))
}

fn max_abs_difference(a: &ndarray::Array4<f32>, b: &ndarray::Array4<f32>) -> (f32, usize) {
    let mut worst = 0.0f32;
    let mut compared = 0;
    for (x, y) in a.iter().zip(b.iter()) {
        if x.is_finite() && y.is_finite() {
            worst = worst.max((x - y).abs());
            compared += 1;
        }
    }
    (worst, compared)
}

#[test]
fn both_thermal_wind_routes_agree_on_a_hydrostatic_case() {
    // The demo's geopotential is the hydrostatic integral of its virtual
    // temperature (trapezoid in ln p), so the thickness route and the
    // mean-temperature route must agree up to the packing of geopotential
    // into shorts (scale ~ 2 m2 s-2, about 0.1 m of height) and the
    // difference between the trapezoid and Baroc's default quadratic rule
    // (a metre or so of thickness, smooth in the horizontal, so well under
    // the tolerances below: they were not changed).
    let case = demo_case();
    for (bottom, top) in [(100000.0, 50000.0), (85000.0, 30000.0), (92500.0, 70000.0)] {
        let layer = Layer::new(bottom, top).0;
        let a = case.thermal_wind(layer, ThicknessRoute::Temperature).unwrap();
        let b = case.thermal_wind(layer, ThicknessRoute::Geopotential).unwrap();
        let (du, n) = max_abs_difference(&a.eastward.data, &b.eastward.data);
        let (dv, _) = max_abs_difference(&a.northward.data, &b.northward.data);
        assert!(n > 20_000, "compared {n} points");
        // Packing noise of +-0.9 m2 s-2 gives about 0.1 m/s in the interior;
        // the one-sided edge stencils (weights 3/2, 2, 1/2) and the small f
        // of the southern edge (25 N) amplify it up to about ten times.
        assert!(du < 1.5 && dv < 1.5, "{}: routes differ by {du} and {dv} m/s", layer.label());
        let interior = |f: &baroc::grid::Field| f.data.slice(ndarray::s![.., .., 2..59, 2..105]).to_owned();
        let (du, _) = max_abs_difference(&interior(&a.eastward), &interior(&b.eastward));
        assert!(du < 0.5, "{}: interior routes differ by {du} m/s", layer.label());
    }
}

#[test]
fn thermal_wind_is_the_difference_of_geostrophic_winds() {
    // Field guide: V_T = V_g(p_t) - V_g(p_b), exactly for the thickness route
    // (the same finite differences applied to a linear combination).
    let case = demo_case();
    let layer = Layer::new(100000.0, 50000.0).0;
    let vt = case.thermal_wind(layer, ThicknessRoute::Geopotential).unwrap();
    let (top, bottom) = (case.geostrophic_wind(50000.0).unwrap(), case.geostrophic_wind(100000.0).unwrap());
    let difference = &top.eastward.data - &bottom.eastward.data;
    let (worst, n) = max_abs_difference(&vt.eastward.data, &difference);
    // f32 storage of geopotential (~0.004 m2 s-2 of rounding at 50 000)
    // amplified by the derivative is the only source of difference.
    assert!(n > 20_000 && worst < 5e-3, "worst {worst}");
}

#[test]
fn fill_values_are_decoded_and_values_match_the_generator() {
    // CF 2.5.1: _FillValue becomes NaN. Compare with the generator's own
    // arrays. (Packed shorts, CF 8.1, are read in the Python tests of other
    // layouts, written by netCDF4-python.)
    let truth = baroc::demo::generate();
    let case = demo_case();
    let z = case.field("geopotential").unwrap();
    let g0 = baroc::constants::STANDARD_GRAVITY as f32;
    let expected = truth.height.mapv(|h| h * g0);
    let (worst, n) = max_abs_difference(&z.data, &expected);
    assert_eq!(n, expected.len());
    // f32 storage of values near 1e5 m2 s-2: a relative step of 6e-8.
    assert!(worst < 0.02, "storage error {worst} m2 s-2");
    let t = case.field("temperature").unwrap();
    let (gt, gk, ref gy, ref gx) = baroc::demo::GAP;
    assert!(t.data[[gt, gk, gy.start, gx.start]].is_nan());
    assert!(t.data[[0, gk, gy.start, gx.start]].is_finite());
    let q = case.field("specific_humidity").unwrap();
    assert!(q.data.slice(ndarray::s![.., 9, .., ..]).iter().all(|x| x.is_nan()));
    assert!(q.data.slice(ndarray::s![.., 0, .., ..]).iter().all(|x| x.is_finite()));
    // Levels came in hPa and are held in Pa.
    assert_eq!(t.levels.as_ref().unwrap()[0], 100000.0);
}

#[test]
fn roles_resolve_by_standard_name() {
    let case = demo_case();
    let roles = case.dataset.roles();
    let names: Vec<(&str, &str)> = roles.iter().map(|(r, v)| (r.name(), v.as_str())).collect();
    for pair in [("temperature", "temperature"), ("geopotential", "geopotential"), ("eastward_wind", "eastward_wind"), ("northward_wind", "northward_wind"), ("specific_humidity", "specific_humidity"), ("surface_pressure", "surface_pressure")] {
        assert!(names.contains(&pair), "{pair:?} not in {names:?}");
    }
}

#[test]
fn boundaries_between_levels_are_interpolated_in_ln_p() {
    // A layer whose boundaries are not data levels lies between the layers
    // bracketing it, and splitting a layer adds up (the ln p integral is
    // additive).
    let case = demo_case().with_selection(Selection { times: Some(vec![0]), ..Default::default() });
    let t = |b: f64, top: f64| case.thickness(Layer::new(b, top).0, ThicknessRoute::Temperature).unwrap().data;
    let whole = t(95000.0, 45000.0);
    let sum = &t(95000.0, 65000.0) + &t(65000.0, 45000.0);
    let (worst, n) = max_abs_difference(&whole, &sum);
    assert!(n > 5000 && worst < 0.05, "{worst}");
}

#[test]
fn below_ground_points_are_masked_where_surface_pressure_is_lower() {
    let case = demo_case();
    let masked = case.at_pressure("temperature", 100000.0, true).unwrap();
    let ps = case.field("surface_pressure").unwrap();
    let mut below = 0;
    for (m, p) in masked.data.iter().zip(ps.data.iter()) {
        if *p < 100000.0 {
            assert!(m.is_nan());
            below += 1;
        } else {
            assert!(m.is_finite());
        }
    }
    assert!(below > 50, "the demo's low should put 1000 hPa below ground somewhere ({below})");
}

#[test]
fn errors_name_what_is_available() {
    let case = demo_case();
    let err = case.field("temperatur").unwrap_err().to_string();
    assert!(err.contains("did you mean `temperature`?") && err.contains("available variables: temperature, eastward_wind, northward_wind, specific_humidity, geopotential, surface_pressure, land_sea_mask"), "{err}");
    let err = case.at_pressure("temperature", 105000.0, false).unwrap_err().to_string();
    assert_eq!(err, "1050 hPa is outside the data's levels (200 to 1000 hPa); Baroc interpolates between levels but does not extrapolate");
    let err = case.dataset.read("temperature", &Selection { levels: Some(vec![55000.0]), ..Default::default() }).unwrap_err().to_string();
    assert!(err.contains("550 hPa is not a data level; available levels (hPa): 1000, 925, 850, 700, 600, 500, 400, 300, 250, 200"), "{err}");
}

fn scratch(name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("baroc-engine-scratch-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    dir.join(name)
}

#[test]
fn a_file_without_latitude_is_refused_clearly() {
    let path = scratch("no-latitude.nc");
    // netCDF-C calls go through Baroc's netCDF thread (see io::netcdf_thread).
    baroc::io::netcdf_thread::call(|| {
        let mut f = netcdf::create(&path).unwrap();
        f.add_dimension("y", 3).unwrap();
        f.add_dimension("x", 4).unwrap();
        let mut v = f.add_variable::<f32>("t", &["y", "x"]).unwrap();
        v.put_attribute("units", "K").unwrap();
        v.put_values(&[0.0f32; 12], ..).unwrap();
    });
    let err = Dataset::open(&[&path]).unwrap_err().to_string();
    assert!(err.contains("no recognisable latitude coordinate") && err.contains("y (3), x (4)"), "{err}");
}

#[test]
fn a_level_axis_in_kelvin_is_not_a_pressure() {
    let path = scratch("bad-levels.nc");
    baroc::io::netcdf_thread::call(|| {
        let mut f = netcdf::create(&path).unwrap();
        for (d, n) in [("plev", 2), ("lat", 2), ("lon", 2)] {
            f.add_dimension(d, n).unwrap();
        }
        let mut p = f.add_variable::<f64>("plev", &["plev"]).unwrap();
        p.put_attribute("standard_name", "air_pressure").unwrap();
        p.put_attribute("units", "K").unwrap();
        p.put_values(&[1.0, 2.0], ..).unwrap();
        let mut la = f.add_variable::<f64>("lat", &["lat"]).unwrap();
        la.put_attribute("units", "degrees_north").unwrap();
        la.put_values(&[1.0, 2.0], ..).unwrap();
        let mut lo = f.add_variable::<f64>("lon", &["lon"]).unwrap();
        lo.put_attribute("units", "degrees_east").unwrap();
        lo.put_values(&[1.0, 2.0], ..).unwrap();
    });
    let err = Dataset::open(&[&path]).unwrap_err();
    assert!(matches!(err, DataError::NotAPressure { .. }), "{err}");
    assert!(err.to_string().contains("has units `K`, which is not a pressure (expected Pa, hPa or millibar)"));
}

#[test]
fn split_files_combine_and_mismatched_grids_do_not() {
    // One variable per file, and one time per file, give the same numbers as
    // the single file.
    let case = demo_case();
    let t = case.field("temperature").unwrap();
    let z = case.field("geopotential").unwrap();
    let t_path = scratch("only-t.nc");
    let z_paths: Vec<PathBuf> = (0..t.time_count()).map(|k| scratch(&format!("z-step-{k}.nc"))).collect();
    write_fields(&t_path, &[&t], &WriteOptions::default()).unwrap();
    for (k, p) in z_paths.iter().enumerate().rev() {
        // Written in reverse order: the dataset must sort them by time.
        write_fields(p, &[&z.at_time_index(k).unwrap()], &WriteOptions { format: Format::Classic, ..Default::default() }).unwrap();
    }
    let mut paths = vec![t_path.clone()];
    paths.extend(z_paths.iter().rev().cloned());
    let combined = Case::new(Arc::new(Dataset::open(&paths).unwrap()));
    let layer = Layer::new(100000.0, 50000.0).0;
    let a = case.thermal_wind(layer, ThicknessRoute::Geopotential).unwrap();
    let b = combined.thermal_wind(layer, ThicknessRoute::Geopotential).unwrap();
    let (worst, n) = max_abs_difference(&a.eastward.data, &b.eastward.data);
    assert!(n > 20_000 && worst < 1e-4, "{worst}");
    assert_eq!(combined.field("geopotential").unwrap().times, z.times);

    // A grid on other longitudes does not combine.
    let mut shifted = t.clone();
    let mut grid = (*t.grid).clone();
    grid.longitudes.iter_mut().for_each(|x| *x += 0.5);
    shifted.grid = Arc::new(grid);
    shifted.name = "t_shifted".into();
    let shifted_path = scratch("shifted.nc");
    write_fields(&shifted_path, &[&shifted], &WriteOptions::default()).unwrap();
    let err = Dataset::open(&[&t_path, &shifted_path]).unwrap_err().to_string();
    assert!(err.starts_with("grids do not match: temperature in "), "{err}");
}

#[test]
fn written_results_read_back_with_units_and_missing_values() {
    let case = demo_case();
    let layer = Layer::new(100000.0, 50000.0).0;
    let vt = case.thermal_wind(layer, ThicknessRoute::Temperature).unwrap();
    let t = case.field("temperature").unwrap();
    let path = scratch("results.nc");
    let options = WriteOptions { history: "baroc test".into(), ..Default::default() };
    write_fields(&path, &[&vt.eastward, &vt.northward, &t], &options).unwrap();
    let back = Dataset::open(&[&path]).unwrap();
    let u = back.read(&vt.eastward.name, &Selection::default()).unwrap();
    assert_eq!(u.units, "m s-1");
    let (worst, n) = max_abs_difference(&u.data, &vt.eastward.data);
    assert!(n > 20_000 && worst == 0.0);
    let t_back = back.read("temperature", &Selection::default()).unwrap();
    assert_eq!(t_back.data.iter().filter(|x| x.is_nan()).count(), t.data.iter().filter(|x| x.is_nan()).count());
    // No temporary file is left beside the result.
    let leftovers: Vec<_> = std::fs::read_dir(path.parent().unwrap()).unwrap().filter_map(|e| e.ok()).filter(|e| e.file_name().to_string_lossy().ends_with(".partial")).collect();
    assert!(leftovers.is_empty());
}

#[test]
fn a_region_reads_only_its_box() {
    let case = demo_case();
    let region = baroc::physics::sampling::Region { south: 45.0, north: 55.0, west: -40.0, east: -20.0 };
    let boxed = case.with_selection(Selection { region: Some(region), ..Default::default() });
    let t = boxed.field("temperature").unwrap();
    let (s, n, w, e) = t.grid.extent();
    assert!(s >= 45.0 && n <= 55.0 && w >= -40.0 && e <= -20.0);
    assert_eq!(t.grid.shape(), (14, 27));
    // Same values as the full read at the same point.
    let full = case.field("temperature").unwrap();
    let v1 = baroc::diagnostics::point_values(&t, 50.0, -30.0).unwrap();
    let v2 = baroc::diagnostics::point_values(&full, 50.0, -30.0).unwrap();
    assert_eq!(v1, v2);
}

#[test]
fn the_land_sea_mask_holds_the_invented_coastline_and_maps_draw_it() {
    // CF standard name land_binary_mask: 1 on land, 0 at sea. The island
    // sites are on land, the bank at sea; a map of the case draws the
    // mask's 0.5 contour and says so, a map without the dataset does not.
    let case = demo_case();
    let info = case.dataset.variables().find(|v| v.standard_name.as_deref() == Some("land_binary_mask")).expect("a land-sea mask");
    assert_eq!(info.name, "land_sea_mask");
    let mask = case.dataset.read("land_sea_mask", &Selection::default()).unwrap();
    let at = |lat: f64, lon: f64| baroc::diagnostics::point_values(&mask, lat, lon).unwrap()[0];
    for (site, lat, lon) in baroc::demo::SITES {
        let expected = if site == "Hollin Bank" { 0.0 } else { 1.0 };
        assert_eq!(at(lat, lon), expected, "{site}");
    }
    let land = mask.data.iter().filter(|&&x| x == 1.0).count() as f64 / mask.data.len() as f64;
    assert!((0.05..0.5).contains(&land), "land fraction {land}");
    let t = case.field("temperature").unwrap().at_time_index(0).unwrap();
    let size = baroc::render::FigureSize::new(640, 480);
    let with = baroc::figures::field_map_on(&t, None, &size, Some(&case.dataset), &Default::default()).unwrap();
    assert!(with.plain_text().contains("coastline from the land-sea mask"), "{}", with.plain_text());
    let without = baroc::figures::field_map_on(&t, None, &size, None, &Default::default()).unwrap();
    assert!(!without.plain_text().contains("coastline"));
    // A box inside the open sea has no coast to draw.
    let sea = baroc::figures::land_mask_on(&case.dataset, &[45.0, 45.75], &[-50.0, -49.25]);
    assert!(sea.is_none());
}

#[test]
fn the_summary_says_weak_wind_where_the_turning_is_not_defined() {
    // Definition: the angle between two winds is reported only where both
    // winds and their difference reach the threshold (2.5 m s-1 by default);
    // checked here against the geostrophic winds computed directly.
    let dir = std::env::temp_dir().join(format!("baroc-weak-{}", std::process::id()));
    let path = baroc::demo::write(&dir).unwrap();
    let case = baroc::diagnostics::Case::new(std::sync::Arc::new(baroc::io::Dataset::open(&[path]).unwrap()))
        .with_selection(baroc::io::Selection { times: Some(vec![baroc::demo::TIME_STEPS - 1]), ..Default::default() });
    let layer = baroc::diagnostics::Layer::new(100000.0, 50000.0).0;
    let rows = baroc::demo::summarise(&case, layer).unwrap();
    let text = baroc::demo::format_summary(&rows, layer, "t");
    let (bottom, top) = (case.geostrophic_wind(100000.0).unwrap(), case.geostrophic_wind(50000.0).unwrap());
    let at = |f: &baroc::grid::Field, lat: f64, lon: f64| baroc::diagnostics::point_values(f, lat, lon).unwrap()[0] as f64;
    let mut weak_rows = 0;
    for r in &rows {
        let (ub, vb) = (at(&bottom.eastward, r.latitude, r.longitude), at(&bottom.northward, r.latitude, r.longitude));
        let (ut, vt) = (at(&top.eastward, r.latitude, r.longitude), at(&top.northward, r.latitude, r.longitude));
        let weak = ub.hypot(vb) < 2.5 || ut.hypot(vt) < 2.5 || (ut - ub).hypot(vt - vb) < 2.5;
        assert_eq!(r.weak_wind, weak, "{}: winds {:.1} and {:.1}, shear {:.1} m s-1", r.site, ub.hypot(vb), ut.hypot(vt), (ut - ub).hypot(vt - vb));
        let line = text.lines().find(|l| l.starts_with(&r.site)).unwrap();
        if weak {
            weak_rows += 1;
            assert!(line.contains("weak wind") && !line.contains("veers") && !line.contains("backs"), "{line}");
        } else {
            assert!(line.contains("veers") || line.contains("backs"), "{line}");
        }
    }
    assert!(weak_rows >= 1, "the demo has a site of weak wind:\n{text}");
}

#[test]
fn a_missing_level_beyond_the_layer_does_not_spoil_it() {
    // The demo reports no humidity at 200 hPa. The 300-250 hPa layer's own
    // levels are complete, so its thickness exists everywhere (missing data
    // spoil only what needs them; field guide, "Grids and numerics"): the
    // quadratic rule, which reaches to 200 hPa, gives way to the trapezoid
    // over the layer's levels and the metadata say so. Thickness of a
    // 50 hPa layer near 275 hPa at about 220 K: (Rd/g0) 220 ln(300/250)
    // ~ 1174 m (hypsometric equation).
    let case = demo_case();
    let dz = case.thickness(Layer::new(30000.0, 25000.0).0, ThicknessRoute::Temperature).unwrap();
    let finite = dz.data.iter().filter(|x| x.is_finite()).count();
    assert!(finite as f64 > 0.99 * dz.data.len() as f64, "{finite} of {}", dz.data.len());
    assert!(dz.data.iter().filter(|x| x.is_finite()).all(|&x| (1000.0..1350.0).contains(&x)));
    let method = dz.attributes.iter().find(|(k, _)| k == "method").map(|(_, v)| v.clone()).unwrap();
    assert!(method.contains("trapezoid rule at 5 time step(s)"), "{method}");
}

#[test]
fn heights_between_the_top_levels_exist_although_humidity_is_missing_aloft() {
    // 225 hPa lies between the demo's 250 and 200 hPa levels; humidity is not
    // reported at 200 hPa, so the hydrostatic interpolation uses the
    // temperature itself there (humidity aloft is negligible). The height must lie
    // between the two levels' heights (height grows as pressure falls).
    let case = demo_case();
    let z = case.geopotential_at(22500.0, false).unwrap();
    let (below, above) = (case.geopotential_at(25000.0, false).unwrap(), case.geopotential_at(20000.0, false).unwrap());
    let mut checked = 0;
    for ((&m, &b), &a) in z.data.iter().zip(below.data.iter()).zip(above.data.iter()) {
        // Only the demo's gap of missing temperature at 250 hPa (a dozen
        // points) may leave a height missing.
        if m.is_finite() {
            assert!(m > b && m < a, "{b} < {m} < {a}");
            checked += 1;
        }
    }
    assert!(checked as f64 > 0.99 * z.data.len() as f64, "{checked} of {}", z.data.len());
}
