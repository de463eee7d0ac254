//! Engine benchmark: the physics kernels on one time step of a global
//! 0.25-degree, 37-level grid (1440 x 721 x 37 float32, the size of a modern
//! reanalysis), against a plain copy of the input (the memory ceiling) and
//! against the same operations in numpy (benches/engine_numpy.py).
//!
//!     CARGO_TARGET_DIR=/work/target-shared cargo bench --bench engine
//!
//! Environment (all optional):
//!   BAROC_BENCH_SPACING  grid spacing in degrees (default 0.25; 1 for a quick run)
//!   BAROC_BENCH_REPEATS  timed repetitions after one warm-up (default 5)
//!   BAROC_BENCH_PYTHON   Python with numpy for the reference (default: the
//!                        test environment target/test-venv made by
//!                        scripts/test-all, else `python3` if it has numpy)
//!   BAROC_BENCH_NUMPY=0  skip the numpy reference
//!
//! Targets: at least 10 times faster than numpy and within 3 times of the
//! copy on a 2-core machine; peak memory no more than the input plus the
//! outputs plus 25 percent.
//!
//! The fields are synthetic and invented: a smooth, hydrostatically
//! consistent atmosphere (see `synthetic_fields`), generated from the same
//! formulas on both sides so that the bench can check that Baroc and numpy
//! computed the same values.

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Instant;

use baroc::audit::{audit, AuditInputs, AuditSettings};
use baroc::constants::Constants;
use baroc::grid::Grid;
use baroc::physics::allocation::zeroed;
use baroc::physics::geostrophic::{geostrophic_wind, GeopotentialKind, DEFAULT_EQUATOR_BAND};
use baroc::physics::thermal_wind::thermal_wind_from_thickness;
use baroc::physics::layers::{adjacent_layer_thickness_and_thermal_wind, adjacent_layer_thickness_by, adjacent_layer_weights, layers_and_thermal_wind_into};
use baroc::physics::vertical::{adjacent_layer_thickness, thickness_from_temperature, thickness_from_temperature_by, IntegrationRule};
use ndarray::{Array3, Array4, ArrayView3, Axis};
use rayon::prelude::*;

/// The 37 standard pressure levels of a modern reanalysis (hPa), bottom first.
const LEVELS_HPA: [f64; 37] = [
    1000.0, 975.0, 950.0, 925.0, 900.0, 875.0, 850.0, 825.0, 800.0, 775.0, 750.0, 700.0, 650.0, 600.0, 550.0, 500.0, 450.0, 400.0, 350.0, 300.0,
    250.0, 225.0, 200.0, 175.0, 150.0, 125.0, 100.0, 70.0, 50.0, 30.0, 20.0, 10.0, 7.0, 5.0, 3.0, 2.0, 1.0,
];

/// Points compared with numpy: (level or layer index, latitude fraction,
/// longitude fraction). Must match SAMPLE_FRACTIONS in engine_numpy.py.
const SAMPLE_FRACTIONS: [(usize, f64, f64); 5] = [(5, 0.12, 0.0), (20, 0.8, 0.54), (30, 0.3, 0.999), (0, 0.001, 0.25), (35, 0.95, 0.5)];

struct Timing {
    median_ms: f64,
    min_ms: f64,
}

/// One warm-up, then `repeats` timed runs; each result is dropped before the
/// next run so that runs do not compete for memory.
fn timed<T>(repeats: usize, mut operation: impl FnMut() -> T) -> Timing {
    drop(operation());
    let mut times: Vec<f64> = (0..repeats.max(1))
        .map(|_| {
            let start = Instant::now();
            let result = operation();
            let elapsed = start.elapsed().as_secs_f64() * 1000.0;
            drop(result);
            elapsed
        })
        .collect();
    times.sort_by(f64::total_cmp);
    let n = times.len();
    let median_ms = if n % 2 == 1 { times[n / 2] } else { 0.5 * (times[n / 2 - 1] + times[n / 2]) };
    Timing { median_ms, min_ms: times[0] }
}

/// The synthetic grid: latitudes 90 to -90 (north first), longitudes 0 to
/// 360 - spacing (periodic).
fn synthetic_grid(spacing: f64) -> Grid {
    let ny = (180.0 / spacing).round() as usize + 1;
    let nx = (360.0 / spacing).round() as usize;
    Grid::new((0..ny).map(|j| 90.0 - spacing * j as f64).collect(), (0..nx).map(|i| spacing * i as f64).collect())
}

/// Temperature (K) and geopotential height (m), [1, level, lat, lon].
///
/// With s = ln(p0/p), p0 = 1000 hPa (an invented atmosphere, roughly
/// standard-like: 288 K at 1000 hPa, about 250 K at 500 hPa, warming again
/// in the stratosphere):
///   T(s, lat, lon) = 200 + 88 exp(-s) + 10 s + cos(k s) H(lat, lon),
///   k = pi / 3.4 (the meridional contrast reverses near 180 hPa),
///   H = -30 (sin^2 lat - 1/3) + 5 sin^2(2 lat) cos(6 lon) + 2 cos(lat) sin(3 lon);
///   Z = Z0(lat, lon) + (Rd/g0) integral_0^s T ds'
///     = Z0 + (Rd/g0) [200 s + 88 (1 - exp(-s)) + 5 s^2 + H sin(k s)/k],
///   Z0 = 110 + 80 sin^2(2 lat) cos(4 lon + 1),
/// so that dZ/d(ln p) = -(Rd/g0) T holds exactly (hydrostatic balance,
/// field guide). Computed in f64, stored as f32.
fn synthetic_fields(grid: &Grid, constants: &Constants) -> (Array4<f32>, Array4<f32>) {
    let (ny, nx) = grid.shape();
    let mut horizontal = vec![0.0f64; ny * nx];
    let mut surface_height = vec![0.0f64; ny * nx];
    for (j, lat) in grid.latitudes.iter().map(|d| d.to_radians()).enumerate() {
        for (i, lon) in grid.longitudes.iter().map(|d| d.to_radians()).enumerate() {
            horizontal[j * nx + i] = -30.0 * (lat.sin().powi(2) - 1.0 / 3.0) + 5.0 * (2.0 * lat).sin().powi(2) * (6.0 * lon).cos() + 2.0 * lat.cos() * (3.0 * lon).sin();
            surface_height[j * nx + i] = 110.0 + 80.0 * (2.0 * lat).sin().powi(2) * (4.0 * lon + 1.0).cos();
        }
    }
    let k = std::f64::consts::PI / 3.4;
    let scale = constants.dry_air_gas_constant / constants.gravity;
    let nz = LEVELS_HPA.len();
    let mut temperature = Array4::<f32>::zeros((1, nz, ny, nx));
    let mut height = Array4::<f32>::zeros((1, nz, ny, nx));
    temperature
        .index_axis_mut(Axis(0), 0)
        .axis_iter_mut(Axis(0))
        .into_par_iter()
        .zip(height.index_axis_mut(Axis(0), 0).axis_iter_mut(Axis(0)).into_par_iter())
        .enumerate()
        .for_each(|(level, (mut t, mut z))| {
            let s = (1000.0 / LEVELS_HPA[level]).ln();
            let base_temperature = 200.0 + 88.0 * (-s).exp() + 10.0 * s;
            let base_integral = 200.0 * s + 88.0 * (1.0 - (-s).exp()) + 5.0 * s * s;
            let (cos_ks, sin_ks_over_k) = ((k * s).cos(), (k * s).sin() / k);
            let t = t.as_slice_mut().expect("fresh array");
            let z = z.as_slice_mut().expect("fresh array");
            for n in 0..ny * nx {
                t[n] = (base_temperature + cos_ks * horizontal[n]) as f32;
                z[n] = (surface_height[n] + scale * (base_integral + horizontal[n] * sin_ks_over_k)) as f32;
            }
        });
    (temperature, height)
}

/// The three slices of a [1, level, lat, lon] array as [level, lat, lon].
fn levels_of(data: &Array4<f32>) -> ArrayView3<'_, f32> {
    data.index_axis(Axis(0), 0)
}

/// Thermal wind of every adjacent layer from the precomputed thickness
/// ([1, layer, lat, lon]): the thickness route of the field guide.
fn thermal_wind_all_layers(grid: &Grid, constants: &Constants, thickness: &Array4<f32>) -> (Array3<f32>, Array3<f32>) {
    thermal_wind_from_thickness(grid, constants, levels_of(thickness), DEFAULT_EQUATOR_BAND)
}

/// Resident-set figures from /proc/self/status, in bytes.
fn memory_status(key: &str) -> Option<u64> {
    let status = std::fs::read_to_string("/proc/self/status").ok()?;
    let line = status.lines().find(|l| l.starts_with(key))?;
    let kb: u64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kb * 1024)
}

/// Resets the peak resident set (VmHWM) to the current one (Linux 4.0+);
/// false where the kernel does not allow it.
fn reset_peak() -> bool {
    std::fs::write("/proc/self/clear_refs", "5").is_ok()
}

fn bytes<D: ndarray::Dimension>(a: &ndarray::Array<f32, D>) -> u64 {
    (a.len() * std::mem::size_of::<f32>()) as u64
}

fn megabytes(b: u64) -> f64 {
    b as f64 / 1.0e6
}

fn python_with_numpy() -> Option<PathBuf> {
    let manifest = Path::new(env!("CARGO_MANIFEST_DIR"));
    let mut candidates = Vec::new();
    if let Ok(p) = std::env::var("BAROC_BENCH_PYTHON") {
        candidates.push(PathBuf::from(p));
    }
    candidates.push(manifest.join("target/test-venv/bin/python"));
    candidates.push(PathBuf::from("python3"));
    candidates.into_iter().find(|python| {
        Command::new(python).args(["-c", "import numpy"]).output().map(|o| o.status.success()).unwrap_or(false)
    })
}

/// Runs the numpy reference and returns its JSON report, or why not.
fn run_numpy(spacing: f64, repeats: usize) -> Result<serde_json::Value, String> {
    if std::env::var("BAROC_BENCH_NUMPY").as_deref() == Ok("0") {
        return Err("skipped (BAROC_BENCH_NUMPY=0)".into());
    }
    let python = python_with_numpy().ok_or("skipped: no Python with numpy (run scripts/test-all to make target/test-venv, or set BAROC_BENCH_PYTHON)")?;
    let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("benches/engine_numpy.py");
    eprintln!("running the numpy reference with {} ...", python.display());
    // On some processors the machine sets OPENBLAS_CORETYPE and
    // OPENBLAS_L2_SIZE (older OpenBLAS builds misbehave on them); they slow a
    // current numpy, so they are unset for this benchmark run only, never in
    // tests or CI. numpy's element-wise operations and np.gradient do not call
    // BLAS, so this should not change the figures; the report names the BLAS
    // kernel numpy then loaded.
    let output = Command::new(&python)
        .arg(&script)
        .args(["--spacing", &spacing.to_string(), "--repeats", &repeats.to_string()])
        .env_remove("OPENBLAS_CORETYPE")
        .env_remove("OPENBLAS_L2_SIZE")
        .output()
        .map_err(|e| format!("could not start {}: {e}", python.display()))?;
    if !output.status.success() {
        return Err(format!("the numpy reference failed: {}", String::from_utf8_lossy(&output.stderr)));
    }
    serde_json::from_slice(&output.stdout).map_err(|e| format!("unreadable numpy report: {e}"))
}

fn numpy_median(report: &serde_json::Value, key: &str) -> Option<f64> {
    report.get(key)?.get("median_ms")?.as_f64()
}

fn numpy_min(report: &serde_json::Value, key: &str) -> Option<f64> {
    report.get(key)?.get("min_ms")?.as_f64()
}

/// Values of `arrays` ([slice, lat, lon]) at the sample points.
fn samples(arrays: &[ArrayView3<f32>]) -> Vec<Vec<f32>> {
    let (nz, ny, nx) = arrays[0].dim();
    SAMPLE_FRACTIONS
        .iter()
        .map(|&(level, lat_fraction, lon_fraction)| {
            let k = level.min(nz - 1);
            let j = ((lat_fraction * (ny - 1) as f64) as usize).min(ny - 1);
            let i = ((lon_fraction * (nx - 1) as f64) as usize).min(nx - 1);
            arrays.iter().map(|a| a[[k, j, i]]).collect()
        })
        .collect()
}

/// For each quantity, the largest difference between Baroc's and numpy's
/// sample values, relative to the largest magnitude of that quantity among
/// the samples (a difference of neighbours amplifies float32 rounding, so
/// point-by-point relative differences would mislead where a wind is near
/// zero). NaN must meet null; None when they disagree on what is missing.
fn compare_samples(ours: &[Vec<f32>], theirs: Option<&serde_json::Value>) -> Option<Vec<f64>> {
    let theirs: Vec<Vec<Option<f64>>> = theirs?.as_array()?.iter().map(|row| row.as_array().map(|r| r.iter().map(|v| v.as_f64()).collect())).collect::<Option<_>>()?;
    if theirs.len() != ours.len() {
        return None;
    }
    let quantities = ours.first().map_or(0, |row| row.len());
    (0..quantities)
        .map(|q| {
            let magnitude = theirs.iter().filter_map(|row| row.get(q).copied().flatten()).fold(0.0f64, |m, x| m.max(x.abs())).max(f64::MIN_POSITIVE);
            let mut worst: f64 = 0.0;
            for (row, their_row) in ours.iter().zip(&theirs) {
                match (row[q], *their_row.get(q)?) {
                    (value, None) if value.is_nan() => {}
                    (value, Some(x)) if value.is_finite() => worst = worst.max((value as f64 - x).abs() / magnitude),
                    _ => return None,
                }
            }
            Some(worst)
        })
        .collect()
}

fn main() {
    let spacing: f64 = std::env::var("BAROC_BENCH_SPACING").ok().and_then(|s| s.parse().ok()).unwrap_or(0.25);
    let repeats: usize = std::env::var("BAROC_BENCH_REPEATS").ok().and_then(|s| s.parse().ok()).unwrap_or(5);
    let constants = Constants::default();
    let grid = synthetic_grid(spacing);
    let levels: Vec<f64> = LEVELS_HPA.iter().map(|p| p * 100.0).collect();
    let (temperature, height) = synthetic_fields(&grid, &constants);
    let (nz, ny, nx) = levels_of(&height).dim();
    println!(
        "engine benchmark: {} x {} x {} float32 ({:.1} MB per field), {} repetitions after one warm-up, {} rayon threads",
        nx,
        ny,
        nz,
        megabytes(bytes(&height)),
        repeats,
        rayon::current_num_threads()
    );
    println!("grid: {}", grid.describe());

    // Peak memory first, each operation once, keeping every result (what a
    // user holding all outputs would need).
    let resident_before = memory_status("VmRSS:").unwrap_or(0);
    let can_reset = reset_peak();
    let geostrophic = geostrophic_wind(&grid, &constants, levels_of(&height), GeopotentialKind::Height, DEFAULT_EQUATOR_BAND);
    let thickness = adjacent_layer_thickness(&levels, temperature.view(), constants.dry_air_gas_constant, constants.gravity).expect("37 distinct levels");
    let thermal = thermal_wind_all_layers(&grid, &constants, &thickness);
    let peak = memory_status("VmHWM:").unwrap_or(0);
    let inputs = bytes(&temperature) + bytes(&height);
    let outputs = bytes(&geostrophic.0) + bytes(&geostrophic.1) + bytes(&thickness) + bytes(&thermal.0) + bytes(&thermal.1);

    let geostrophic_samples = samples(&[geostrophic.0.view(), geostrophic.1.view()]);
    let thermal_samples = samples(&[levels_of(&thickness), thermal.0.view(), thermal.1.view()]);
    drop((geostrophic, thermal));

    // Timings.
    // The memory ceiling: a copy of one input into a new array allocated the
    // way Baroc's kernels allocate their outputs (huge pages requested), the
    // same with `.to_owned()` (plain 4 KiB pages), and into an existing
    // array (no page faults: memory bandwidth alone).
    let copy = timed(repeats, || {
        let mut out: Array4<f32> = zeroed(height.raw_dim());
        out.as_slice_mut().expect("fresh array").copy_from_slice(height.as_slice().expect("standard layout"));
        out
    });
    let plain_copy = timed(repeats, || height.to_owned());
    let mut buffer = height.to_owned();
    let existing_copy = timed(repeats, || buffer.as_slice_mut().expect("standard layout").copy_from_slice(height.as_slice().expect("standard layout")));
    drop(buffer);
    let geostrophic_time = timed(repeats, || geostrophic_wind(&grid, &constants, levels_of(&height), GeopotentialKind::Height, DEFAULT_EQUATOR_BAND));
    let thickness_time = timed(repeats, || adjacent_layer_thickness(&levels, temperature.view(), constants.dry_air_gas_constant, constants.gravity));
    // The same 36 thicknesses through the general layer integral, one call
    // per layer (what a user asking for each layer separately would run).
    let general_thickness_time = timed(repeats, || {
        (0..levels.len() - 1)
            .map(|k| thickness_from_temperature(&levels, temperature.view(), None, levels[k], levels[k + 1], constants.dry_air_gas_constant, constants.gravity).expect("data levels"))
            .collect::<Vec<_>>()
    });
    let thermal_time = timed(repeats, || thermal_wind_all_layers(&grid, &constants, &thickness));
    let separate_pair_time = timed(repeats, || {
        let dz = adjacent_layer_thickness(&levels, temperature.view(), constants.dry_air_gas_constant, constants.gravity).expect("37 distinct levels");
        thermal_wind_all_layers(&grid, &constants, &dz)
    });
    // The pair in one pass (physics::layers::layers_and_thermal_wind): each
    // band of a layer's thickness written out and differentiated while in
    // cache, two layers per task. Checked here to give the bits of the
    // separate calls. Timed into new arrays, as the copy it is compared
    // with: the three fresh outputs' pages are faulted in and zeroed by the
    // operating system inside the timing, as they are for a caller that
    // allocates per call.
    let fused = || adjacent_layer_thickness_and_thermal_wind(&grid, &constants, &levels, temperature.view(), IntegrationRule::Trapezoid, DEFAULT_EQUATOR_BAND).expect("37 distinct levels");
    let fused_same_bits = {
        let (dz, u, v) = fused();
        let same = |a: &Array4<f32>, b: ArrayView3<f32>| a.iter().zip(b.iter()).all(|(x, y)| x.to_bits() == y.to_bits());
        let separate = thermal_wind_all_layers(&grid, &constants, &thickness);
        same(&dz, levels_of(&thickness)) && same(&u, separate.0.view()) && same(&v, separate.1.view())
    };
    let both_time = timed(repeats, fused);
    // The same pair into outputs already held (a caller reusing its arrays
    // from one time step to the next): no page faults, beside the copy into
    // an existing array. The row above, into new arrays, stays the goal's
    // yardstick; this one shows how much of it is the operating system
    // zeroing the fresh outputs' pages.
    let pair_layers = adjacent_layer_weights(&levels, IntegrationRule::Trapezoid).expect("37 distinct levels");
    let mut held = fused();
    let held_time = timed(repeats, || {
        let (dz, u, v) = &mut held;
        layers_and_thermal_wind_into(&grid, &constants, temperature.view(), None, &pair_layers, DEFAULT_EQUATOR_BAND, |t, _| t, [dz.view_mut(), u.view_mut(), v.view_mut()])
    });
    drop(held);
    // The quadratic rule (Baroc's default; each layer reaches one level
    // beyond it on either side): one pass over the levels in cache-sized
    // bands (physics::layers), against one general call per layer.
    let quadratic_time = timed(repeats, || adjacent_layer_thickness_by(&levels, temperature.view(), IntegrationRule::Quadratic, constants.dry_air_gas_constant, constants.gravity).expect("37 distinct levels"));
    let general_quadratic_time = timed(repeats, || {
        (0..levels.len() - 1)
            .map(|k| thickness_from_temperature_by(&levels, temperature.view(), None, levels[k], levels[k + 1], constants.dry_air_gas_constant, constants.gravity, IntegrationRule::Quadratic).expect("data levels"))
            .collect::<Vec<_>>()
    });
    drop(thickness);

    // The balance audit of the same case (hydrostatic residual of all 36
    // layers, thermal-wind residual by latitude band, geostrophic departure
    // at all 37 levels, plausibility), with the geostrophic wind of the
    // heights standing in for the analysed wind. Goal: no more than 3 times
    // one thickness + thermal-wind evaluation of all layers.
    let (analysed_u, analysed_v) = geostrophic_wind(&grid, &constants, levels_of(&height), GeopotentialKind::Height, DEFAULT_EQUATOR_BAND);
    let (analysed_u, analysed_v) = (analysed_u.insert_axis(Axis(0)), analysed_v.insert_axis(Axis(0)));
    let audit_inputs = AuditInputs {
        grid: &grid,
        levels: levels.clone(),
        temperature: temperature.view(),
        heights: height.view(),
        humidity: None,
        wind: Some((analysed_u.view(), analysed_v.view())),
        time_labels: vec!["synthetic".into()],
    };
    // The quadratic rule: this atmosphere is smooth in ln p up to 1 hPa,
    // where the trapezoid's error on the thick top layers would fail the
    // hydrostatic check and add the search for causes to the timing.
    let audit_settings = AuditSettings { integration: IntegrationRule::Quadratic, ..AuditSettings::default() };
    let audit_passed = audit(&audit_inputs, &audit_settings).map(|r| r.passed()).unwrap_or(false);
    let audit_time = timed(repeats, || audit(&audit_inputs, &audit_settings).expect("the synthetic case audits"));
    drop(audit_inputs);
    drop((analysed_u, analysed_v));

    let numpy = run_numpy(spacing, repeats);

    println!();
    println!(
        "{:<44} {:>10} {:>10} {:>10} {:>10} {:>11} {:>10}  targets (>=10x numpy, <=3x copy)",
        "operation", "Baroc ms", "Baroc min", "numpy ms", "numpy min", "numpy/Baroc", "Baroc/copy"
    );
    // (label, Baroc timing, numpy key, whether the targets apply: not to the
    // copies, which are the ceiling).
    let rows: [(&str, &Timing, &str, bool); 12] = [
        ("copy of one input field into a new array", &copy, "copy", false),
        ("  same, .to_owned() (4 KiB pages)", &plain_copy, "-", false),
        ("  same, into an existing array", &existing_copy, "copy_into_existing", false),
        ("geostrophic wind, all 37 levels", &geostrophic_time, "geostrophic_wind", true),
        ("thickness, all 36 adjacent layers", &thickness_time, "thickness", true),
        ("  same, 36 general layer calls", &general_thickness_time, "thickness", true),
        ("thermal wind, 36 layers (given thickness)", &thermal_time, "thermal_wind", true),
        ("thickness + thermal wind, 36 layers, fused", &both_time, "thickness_and_thermal_wind", true),
        ("  same, two separate calls", &separate_pair_time, "thickness_and_thermal_wind", true),
        ("  same, fused, into outputs already held", &held_time, "-", false),
        ("thickness, 36 layers, quadratic, one pass", &quadratic_time, "-", true),
        ("  same, 36 general layer calls", &general_quadratic_time, "-", true),
    ];
    for (label, timing, key, has_targets) in rows {
        let (numpy_ms, numpy_min_ms) = match &numpy {
            Ok(report) => (numpy_median(report, key), numpy_min(report, key)),
            Err(_) => (None, None),
        };
        let speedup = numpy_ms.map(|n| n / timing.median_ms);
        let of_copy = timing.median_ms / copy.median_ms;
        let verdict = if !has_targets {
            if key == "copy" { "(reference for the ratios)".to_string() } else { String::new() }
        } else {
            let numpy_verdict = match speedup {
                Some(s) if s >= 10.0 => "numpy: met",
                Some(_) => "numpy: MISSED",
                None => "numpy: n/a",
            };
            let copy_verdict = if of_copy <= 3.0 { "copy: met" } else { "copy: MISSED" };
            format!("{numpy_verdict}, {copy_verdict}")
        };
        let show = |v: Option<f64>| v.map_or("-".to_string(), |v| format!("{v:.1}"));
        println!(
            "{:<44} {:>10.1} {:>10.1} {:>10} {:>10} {:>11} {:>10.2}  {}",
            label,
            timing.median_ms,
            timing.min_ms,
            show(numpy_ms),
            show(numpy_min_ms),
            speedup.map_or("-".to_string(), |s| format!("{s:.1}x")),
            of_copy,
            verdict
        );
    }
    let pair_ratio = both_time.median_ms / copy.median_ms;
    println!(
        "thickness + thermal wind, fused: {:.2}x a copy (goal <= 2.5x: {}), {:.2}x the separate calls; same bits as the separate calls: {}",
        pair_ratio,
        if pair_ratio <= 2.5 { "met" } else { "MISSED" },
        both_time.median_ms / separate_pair_time.median_ms,
        if fused_same_bits { "yes" } else { "NO" }
    );
    println!(
        "thickness + thermal wind, fused, into outputs already held: {:.2}x a copy into an existing array (neither faults in new pages; {:.2}x a copy into a new array)",
        held_time.median_ms / existing_copy.median_ms,
        held_time.median_ms / copy.median_ms
    );
    let audit_ratio = audit_time.median_ms / both_time.median_ms;
    println!(
        "{:<44} {:>10.1} {:>10.1}  = {:.2}x thickness + thermal wind of all layers (goal <= 3x: {}); the synthetic case {} the audit",
        "balance audit, 36 layers and 37 levels",
        audit_time.median_ms,
        audit_time.min_ms,
        audit_ratio,
        if audit_ratio <= 3.0 { "met" } else { "MISSED" },
        if audit_passed { "passes" } else { "FAILS" }
    );
    println!();
    let ratio = peak as f64 / (inputs + outputs) as f64;
    if can_reset && peak > 0 {
        println!(
            "peak memory: {:.1} MB resident at most (VmHWM; {:.1} MB before the operations) for inputs {:.1} MB + outputs {:.1} MB = {:.1} MB: ratio {:.3} (target <= 1.25: {})",
            megabytes(peak),
            megabytes(resident_before),
            megabytes(inputs),
            megabytes(outputs),
            megabytes(inputs + outputs),
            ratio,
            if ratio <= 1.25 { "met" } else { "MISSED" }
        );
    } else {
        println!("peak memory: not measured (/proc/self/status or clear_refs unavailable)");
    }
    match &numpy {
        Ok(report) => {
            let version = report.get("numpy_version").and_then(|v| v.as_str()).unwrap_or("?");
            let blas = report.get("blas").map(|b| b.to_string()).unwrap_or_default();
            println!("numpy {version} (single thread for these operations; BLAS loaded: {blas}; OPENBLAS_CORETYPE and OPENBLAS_L2_SIZE unset for this run)");
            let samples_of = |key: &str| report.get("samples").and_then(|s| s.get(key));
            // Expected agreement: float32 rounding. numpy forms the thickness
            // in float32 (Baroc sums in f64), and the thermal wind, a
            // difference of neighbouring thicknesses, magnifies that rounding
            // to about 1e-3 of the largest wind on a 0.25-degree grid.
            let checks: [(&[&str], &Vec<Vec<f32>>, &str, f64); 2] = [
                (&["u_g", "v_g"], &geostrophic_samples, "geostrophic_wind", 1e-5),
                (&["thickness", "u_T", "v_T"], &thermal_samples, "thermal_wind", 1e-2),
            ];
            for (names, ours, key, tolerance) in checks {
                match compare_samples(ours, samples_of(key)) {
                    Some(differences) => {
                        let listed: Vec<String> = names.iter().zip(&differences).map(|(n, d)| format!("{n} {d:.1e}")).collect();
                        let worst = differences.iter().copied().fold(0.0, f64::max);
                        println!(
                            "check against numpy at {} points, largest difference over largest value: {} ({})",
                            SAMPLE_FRACTIONS.len(),
                            listed.join(", "),
                            if worst <= tolerance { format!("within float32 rounding, <= {tolerance:.0e}") } else { format!("LARGER than {tolerance:.0e}") }
                        );
                    }
                    None => println!("check against numpy, {key}: MISMATCH (missing values differ or report incomplete)"),
                }
            }
        }
        Err(reason) => println!("numpy reference: {reason}"),
    }
}
