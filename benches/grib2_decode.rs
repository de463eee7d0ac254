//! GRIB2 decode benchmark: every message of a realistic file (37 isobaric
//! levels x 5 variables on a global 0.25-degree grid, 1440 x 721 points)
//! decoded by Baroc (`io::Dataset`, all levels of each variable, in
//! parallel across messages) and by the ecCodes Python bindings
//! (benches/grib2_eccodes.py), in the same run, for two packings: complex
//! packing with spatial differencing, and CCSDS.
//!
//!     cargo bench --bench grib2_decode
//!
//! The files are written once with ecCodes under target/bench-grib2/ (about
//! a minute each) and reused. Environment (all optional):
//!   BAROC_BENCH_SPACING  grid spacing in degrees (default 0.25; 1 for a quick run)
//!   BAROC_BENCH_REPEATS  timed repetitions after one warm-up (default 3)
//!   BAROC_BENCH_PYTHON   Python with eccodes (default: target/test-venv made by
//!                        scripts/test-all)
//!
//! Target: Baroc at least 2 times faster than ecCodes. Both sides also
//! print the sum of all decoded values, which must agree (to f32 rounding).

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Instant;

use baroc::io::{Dataset, Selection};

fn python() -> Result<PathBuf, String> {
    let candidate = std::env::var_os("BAROC_BENCH_PYTHON")
        .map(PathBuf::from)
        .unwrap_or_else(|| Path::new(env!("CARGO_MANIFEST_DIR")).join("target/test-venv/bin/python"));
    let ok = Command::new(&candidate).args(["-c", "import eccodes"]).output().map(|o| o.status.success()).unwrap_or(false);
    ok.then_some(candidate).ok_or_else(|| "no Python with eccodes: run scripts/test-all to make target/test-venv, or set BAROC_BENCH_PYTHON".into())
}

fn script() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("benches/grib2_eccodes.py")
}

/// The benchmark file for a packing, written once.
fn bench_file(python: &Path, packing: &str, spacing: f64) -> Result<PathBuf, String> {
    let directory = Path::new(env!("CARGO_MANIFEST_DIR")).join("target/bench-grib2");
    std::fs::create_dir_all(&directory).map_err(|e| e.to_string())?;
    let suffix = if spacing == 0.25 { String::new() } else { format!("-{spacing}") };
    let path = directory.join(format!("{packing}{suffix}.grib2"));
    if !path.exists() {
        eprintln!("writing {} with ecCodes (once) ...", path.display());
        let partial = path.with_extension("partial");
        let done = Command::new(python)
            .arg(script())
            .args(["generate", &partial.display().to_string(), packing, &spacing.to_string()])
            .status()
            .map_err(|e| e.to_string())?;
        if !done.success() {
            return Err(format!("generating {} failed", path.display()));
        }
        std::fs::rename(&partial, &path).map_err(|e| e.to_string())?;
    }
    Ok(path)
}

/// Decodes every variable at every level; returns (messages, sum of values).
fn decode_all(path: &Path) -> (usize, f64) {
    let dataset = Dataset::open(&[path]).expect("the bench file opens");
    let mut messages = 0;
    let mut total = 0.0f64;
    for name in dataset.variable_names() {
        let field = dataset.read(&name, &Selection::default()).expect("decodes");
        messages += field.time_count() * field.level_count();
        total += field.data.iter().map(|&v| v as f64).sum::<f64>();
    }
    (messages, total)
}

fn main() {
    let spacing: f64 = std::env::var("BAROC_BENCH_SPACING").ok().and_then(|s| s.parse().ok()).unwrap_or(0.25);
    let repeats: usize = std::env::var("BAROC_BENCH_REPEATS").ok().and_then(|s| s.parse().ok()).unwrap_or(3).max(1);
    let python = match python() {
        Ok(p) => p,
        Err(e) => {
            eprintln!("grib2_decode: {e}");
            return;
        }
    };
    println!("GRIB2 decode, 37 levels x 5 variables, global {spacing}-degree grid, {} threads, median of {repeats}", rayon::current_num_threads());
    println!("{:<44} {:>12} {:>12} {:>8}", "packing", "Baroc ms", "ecCodes ms", "ratio");
    for packing in ["grid_complex_spatial_differencing", "grid_ccsds"] {
        let path = match bench_file(&python, packing, spacing) {
            Ok(p) => p,
            Err(e) => {
                eprintln!("{packing}: {e}");
                continue;
            }
        };
        // Baroc: one warm-up (which also indexes once), then timed runs,
        // each opening the file anew as a user's run would.
        let before = baroc::io::grib2_source::unpacker_counts();
        let (messages, baroc_sum) = decode_all(&path);
        let after = baroc::io::grib2_source::unpacker_counts();
        let unpacker = match (after.0 - before.0, after.1 - before.1) {
            (own, 0) => format!("Baroc's own unpacker (io::grib2_unpack) for all {own} messages"),
            (0, other) => format!("the grib crate's unpacker for all {other} messages"),
            (own, other) => format!("Baroc's own unpacker for {own} messages, the grib crate's for {other}"),
        };
        let mut times: Vec<f64> = (0..repeats)
            .map(|_| {
                let start = Instant::now();
                std::hint::black_box(decode_all(&path));
                start.elapsed().as_secs_f64() * 1000.0
            })
            .collect();
        times.sort_by(|a, b| a.total_cmp(b));
        let baroc_ms = times[times.len() / 2];
        let output = Command::new(&python).arg(script()).args(["time", &path.display().to_string(), &repeats.to_string()]).output();
        let reference: Option<serde_json::Value> = output.ok().and_then(|o| serde_json::from_slice(&o.stdout).ok());
        match reference {
            Some(r) => {
                let eccodes_ms = r["median_ms"].as_f64().unwrap_or(f64::NAN);
                let eccodes_sum = r["sum"].as_f64().unwrap_or(f64::NAN);
                println!("{:<44} {:>12.0} {:>12.0} {:>7.2}x", packing, baroc_ms, eccodes_ms, eccodes_ms / baroc_ms);
                println!(
                    "    {messages} messages by {unpacker}; sum of values: Baroc {baroc_sum:.6e}, ecCodes {eccodes_sum:.6e} (relative difference {:.1e}); ecCodes {}",
                    ((baroc_sum - eccodes_sum) / eccodes_sum).abs(),
                    r["eccodes"].as_str().unwrap_or("?")
                );
            }
            None => println!("{:<44} {:>12.0} {:>12} {:>8}\n    {messages} messages by {unpacker}", packing, baroc_ms, "failed", "-"),
        }
    }
    println!("target: ratio (ecCodes time / Baroc time) at least 2");
}
