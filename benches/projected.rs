//! Projected-grid derivatives against latitude-longitude ones, same size,
//! same number of levels, one run: `cargo bench --bench projected`.
//! Target (issue 8): the projected grid costs no more than 1.3x.

use std::time::Instant;

use baroc::constants::Constants;
use baroc::grid::Grid;
use baroc::physics::differences::gradient;
use baroc::physics::geostrophic::{geostrophic_wind, GeopotentialKind};
use baroc::projection::{LambertConformal, ProjectedGrid, Projection};
use ndarray::Array3;

/// Median of `repeats` timings in milliseconds (after one warm-up run).
fn median_ms<T>(repeats: usize, mut operation: impl FnMut() -> T) -> f64 {
    std::hint::black_box(operation());
    let mut times: Vec<f64> = (0..repeats)
        .map(|_| {
            let start = Instant::now();
            std::hint::black_box(operation());
            start.elapsed().as_secs_f64() * 1e3
        })
        .collect();
    times.sort_by(|a, b| a.total_cmp(b));
    times[times.len() / 2]
}

fn main() {
    let constants = Constants::default();
    let (ny, nx, levels) = (400usize, 560usize, 37usize);
    // Latitude-longitude: 0.1 degree over 25-65 N, 56 degrees wide.
    let latlon = Grid::new((0..ny).map(|j| 25.0 + 0.1 * j as f64).collect(), (0..nx).map(|i| -40.0 + 0.1 * i as f64).collect());
    // Lambert conformal: 10 km spacing, the same number of points.
    let lcc = Projection::LambertConformal(LambertConformal::new((35.0, 55.0), -10.0, 45.0, 0.0, 0.0, constants.earth_radius).unwrap());
    let setup = Instant::now();
    let projected = Grid::projected(ProjectedGrid::new(
        lcc,
        (0..nx).map(|i| -2.8e6 + 1.0e4 * i as f64).collect(),
        (0..ny).map(|j| -2.0e6 + 1.0e4 * j as f64).collect(),
    ));
    let setup_ms = setup.elapsed().as_secs_f64() * 1e3;
    let field = Array3::from_shape_fn((levels, ny, nx), |(k, j, i)| (5000.0 + 10.0 * k as f64 + 300.0 * (j as f64 * 0.02).sin() + 200.0 * (i as f64 * 0.015).cos()) as f32);
    println!("{levels} levels x {ny} x {nx} points; projected grid set-up (once per file) {setup_ms:.1} ms");
    println!("{:<28} {:>12} {:>12} {:>8}", "operation", "lat-lon ms", "LCC ms", "ratio");
    let repeats = 9;
    let rows = [
        ("gradient", median_ms(repeats, || gradient(&latlon, constants.earth_radius, field.view())), median_ms(repeats, || gradient(&projected, constants.earth_radius, field.view()))),
        (
            "geostrophic wind",
            median_ms(repeats, || geostrophic_wind(&latlon, &constants, field.view(), GeopotentialKind::Height, 5.0)),
            median_ms(repeats, || geostrophic_wind(&projected, &constants, field.view(), GeopotentialKind::Height, 5.0)),
        ),
    ];
    for (name, a, b) in rows {
        println!("{name:<28} {a:>12.2} {b:>12.2} {:>8.2}{}", b / a, if b / a > 1.3 { "  (above the 1.3x target)" } else { "" });
    }
}
