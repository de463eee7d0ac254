//! The balance audit on a Lambert conformal grid, whose axes are y and x in
//! metres: latitude bands, the place of the worst residual and the area
//! weights come from each point's true latitude and longitude (the
//! projection's inverse, Snyder 1987), not from the axes.
//!
//! The atmosphere is invented and analytic: temperature linear in
//! s = ln(1000 hPa / p) with a poleward fall, heights from the hypsometric
//! equation integrated exactly (dZ/ds = (Rd/g0) T, field guide), winds the
//! analytic geostrophic wind of those heights (u_g = -(g0/(f a)) dZ/dphi,
//! v_g = g0/(f a cos phi) dZ/dlambda, f = 2 Omega sin phi; field guide). So
//! the audit must find it balanced, in the bands of its true latitudes.

use baroc::audit::{audit, AuditInputs, AuditSettings};
use baroc::constants::Constants;
use baroc::grid::Grid;
use baroc::physics::vertical::IntegrationRule;
use baroc::projection::{LambertConformal, ProjectedGrid, Projection};
use ndarray::Array4;

const LEVELS_HPA: [f64; 6] = [1000.0, 925.0, 850.0, 700.0, 500.0, 300.0];

/// T(s, lat) = 288 - 45 s - 0.5 (lat - 45) K; Z0 = 100 + 30 cos(lat) sin(2 lon) m.
fn temperature(s: f64, lat: f64) -> f64 {
    288.0 - 45.0 * s - 0.5 * (lat - 45.0)
}

fn height(c: &Constants, s: f64, lat: f64, lon: f64) -> f64 {
    let (phi, lambda) = (lat.to_radians(), lon.to_radians());
    let integral = 288.0 * s - 22.5 * s * s - 0.5 * (lat - 45.0) * s; // of T over s
    100.0 + 30.0 * phi.cos() * (2.0 * lambda).sin() + c.dry_air_gas_constant / c.gravity * integral
}

fn geostrophic(c: &Constants, s: f64, lat: f64, lon: f64) -> (f64, f64) {
    let (phi, lambda) = (lat.to_radians(), lon.to_radians());
    let dz_dphi = -30.0 * phi.sin() * (2.0 * lambda).sin() + c.dry_air_gas_constant / c.gravity * (-0.5 * 180.0 / std::f64::consts::PI) * s;
    let dz_dlambda = 60.0 * phi.cos() * (2.0 * lambda).cos();
    let f = c.coriolis(lat);
    (-c.gravity / (f * c.earth_radius) * dz_dphi, c.gravity / (f * c.earth_radius * phi.cos()) * dz_dlambda)
}

#[test]
fn the_audit_of_a_lambert_grid_uses_each_points_true_latitude() {
    let c = Constants::default();
    let lambert = LambertConformal::new((35.0, 55.0), -10.0, 45.0, 0.0, 0.0, c.earth_radius).unwrap();
    let (nx, ny, spacing) = (61, 49, 25_000.0);
    let x: Vec<f64> = (0..nx).map(|i| (i as f64 - 30.0) * spacing).collect();
    let y: Vec<f64> = (0..ny).map(|j| (j as f64 - 24.0) * spacing).collect();
    let projected = ProjectedGrid::new(Projection::LambertConformal(lambert), x, y);
    let (lats, lons) = (projected.latitude.clone(), projected.longitude.clone());
    let grid = Grid::projected(projected);
    let nz = LEVELS_HPA.len();
    let s = |k: usize| (1000.0 / LEVELS_HPA[k]).ln();
    let at = |j: usize, i: usize| (lats[j * nx + i], lons[j * nx + i]);
    let t = Array4::from_shape_fn((1, nz, ny, nx), |(_, k, j, i)| temperature(s(k), at(j, i).0) as f32);
    let z = Array4::from_shape_fn((1, nz, ny, nx), |(_, k, j, i)| height(&c, s(k), at(j, i).0, at(j, i).1) as f32);
    let u = Array4::from_shape_fn((1, nz, ny, nx), |(_, k, j, i)| geostrophic(&c, s(k), at(j, i).0, at(j, i).1).0 as f32);
    let v = Array4::from_shape_fn((1, nz, ny, nx), |(_, k, j, i)| geostrophic(&c, s(k), at(j, i).0, at(j, i).1).1 as f32);
    let inputs = AuditInputs {
        grid: &grid,
        levels: LEVELS_HPA.iter().map(|p| p * 100.0).collect(),
        temperature: t.view(),
        heights: z.view(),
        humidity: None,
        wind: Some((u.view(), v.view())),
        time_labels: vec!["analytic".into()],
    };
    let settings = AuditSettings { integration: IntegrationRule::Quadratic, ..AuditSettings::default() };
    let report = audit(&inputs, &settings).expect("the audit runs on a projected grid");

    let (south, north) = lats.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &l| (a.min(l), b.max(l)));
    let (west, east) = lons.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &l| (a.min(l), b.max(l)));
    assert!(south > 30.0 && north < 60.0 && south < 45.0 && north > 45.0, "{south} to {north}");
    // Thermal-wind rows in the bands the grid's true latitudes fall in
    // (30-45 N and 45-60 N), every point of each layer counted once.
    let bands: Vec<&str> = report.thermal_wind.iter().map(|r| r.band.as_str()).collect();
    assert!(bands.contains(&"30N-45N") && bands.contains(&"45N-60N") && bands.iter().all(|b| *b == "30N-45N" || *b == "45N-60N"), "{bands:?}");
    let per_layer: usize = report.thermal_wind.iter().filter(|r| r.bottom_hpa == 1000.0).map(|r| r.points).sum();
    assert!(per_layer > (nx - 2) * (ny - 2) && per_layer <= nx * ny, "{per_layer} points in the 1000 hPa layer");
    // The worst hydrostatic residual is placed at a true latitude and
    // longitude of the grid, not at an axis value in metres.
    for row in &report.hydrostatic {
        if row.worst_latitude.is_finite() {
            assert!(row.worst_latitude >= south && row.worst_latitude <= north, "{}", row.worst_latitude);
            assert!(row.worst_longitude >= west && row.worst_longitude <= east, "{}", row.worst_longitude);
        }
        // Exact heights, quadratic rule exact for T linear in ln p: float32
        // rounding of heights of some thousands of metres.
        assert!(row.rms_m < 0.05, "hydrostatic RMS {} m", row.rms_m);
    }
    // Balanced by construction: the thermal wind and geostrophic residuals
    // are finite-difference error on a 25 km grid.
    assert!(report.thermal_wind.iter().all(|r| r.rms_m_s < 0.5), "{:?}", report.thermal_wind);
    assert!(report.geostrophic.iter().all(|r| r.rms_m_s < 0.5), "{:?}", report.geostrophic);
    assert!(report.passed(), "{:?}", report.failures);
}
