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

fn median(mut values: Vec<f64>) -> f64 {
    values.sort_by(|a, b| a.total_cmp(b));
    values[values.len() / 2]
}

/// Times `a` and `b` alternately, `repeats` pairs after one warm-up of
/// each, so that a change in the machine's load (it is shared) falls on
/// both alike. Returns the medians (ms) and the median of the ratios b/a of
/// neighbouring runs.
fn paired_ms<T, U>(repeats: usize, mut a: impl FnMut() -> T, mut b: impl FnMut() -> U) -> (f64, f64, f64) {
    std::hint::black_box(a());
    std::hint::black_box(b());
    let time = |f: &mut dyn FnMut()| {
        let start = Instant::now();
        f();
        start.elapsed().as_secs_f64() * 1e3
    };
    let (mut ta, mut tb, mut ratios) = (Vec::new(), Vec::new(), Vec::new());
    for _ in 0..repeats {
        let x = time(&mut || drop(std::hint::black_box(a())));
        let y = time(&mut || drop(std::hint::black_box(b())));
        ta.push(x);
        tb.push(y);
        ratios.push(y / x);
    }
    (median(ta), median(tb), median(ratios))
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
    println!("{:<28} {:>12} {:>12} {:>8}  (medians of {} alternating pairs; ratio: median of the pairs' ratios)", "operation", "lat-lon ms", "LCC ms", "ratio", 15);
    let repeats = 15;
    let rows = [
        ("gradient", paired_ms(repeats, || gradient(&latlon, constants.earth_radius, field.view()), || gradient(&projected, constants.earth_radius, field.view()))),
        (
            "geostrophic wind",
            paired_ms(
                repeats,
                || geostrophic_wind(&latlon, &constants, field.view(), GeopotentialKind::Height, 5.0),
                || geostrophic_wind(&projected, &constants, field.view(), GeopotentialKind::Height, 5.0),
            ),
        ),
    ];
    for (name, (a, b, ratio)) in rows {
        println!("{name:<28} {a:>12.2} {b:>12.2} {ratio:>8.2}{}", if ratio > 1.3 { "  (above the 1.3x target)" } else { "" });
    }
}
