//! A plain `baroc run -o` (no --memory-limit) streams by blocks of time
//! steps when the data would not fit in its memory bound (src/bounded.rs),
//! and the file it writes holds the same variables, bit for bit, with the
//! same attributes, as a run holding every step at once. The bound is set
//! through BAROC_MEMORY_LIMIT: 1 byte forces one time step per block, 1 TiB
//! one block (the whole run, as before streaming existed).

use std::path::{Path, PathBuf};
use std::process::Command;

/// The demo case, written once per test process: the tests run in parallel
/// threads, and two writers of the same folder at once would race.
fn directory() -> PathBuf {
    static WRITTEN: std::sync::OnceLock<PathBuf> = std::sync::OnceLock::new();
    WRITTEN
        .get_or_init(|| {
            let dir = std::env::temp_dir().join(format!("baroc-streaming-tests-{}", std::process::id()));
            baroc::demo::write(&dir.join("baroc-demo")).expect("demo case writes");
            dir
        })
        .clone()
}

fn run(limit: &str, recipe: &Path, data: &Path, out: &Path) -> String {
    let done = Command::new(env!("CARGO_BIN_EXE_baroc"))
        .args(["run", &recipe.display().to_string(), "-o", &out.display().to_string(), &data.display().to_string()])
        .env("BAROC_MEMORY_LIMIT", limit)
        .output()
        .expect("baroc starts");
    assert!(done.status.success(), "{}", String::from_utf8_lossy(&done.stderr));
    String::from_utf8_lossy(&done.stdout).to_string()
}

/// Every variable's values (as bits) and attributes, by name.
fn contents(path: &Path) -> Vec<(String, Vec<String>, Vec<u32>)> {
    let file = netcdf::open(path).expect("output opens");
    let mut out = Vec::new();
    for v in file.variables() {
        let attributes: Vec<String> = v.attributes().map(|a| format!("{}={:?}", a.name(), a.value().expect("attribute reads"))).collect();
        let bits: Vec<u32> = match v.vartype() {
            netcdf::types::NcVariableType::Float(netcdf::types::FloatType::F64) => {
                v.get_values::<f64, _>(..).expect("reads").iter().flat_map(|x| { let b = x.to_bits(); [b as u32, (b >> 32) as u32] }).collect()
            }
            _ => v.get_values::<f32, _>(..).expect("reads").iter().map(|x| x.to_bits()).collect(),
        };
        out.push((v.name(), attributes, bits));
    }
    out
}

#[test]
fn a_streamed_run_writes_the_same_variables_as_a_whole_run() {
    let dir = directory();
    let data = dir.join("baroc-demo").join(baroc::demo::FILE_NAME);
    let recipe = Path::new(env!("CARGO_MANIFEST_DIR")).join("recipes/thermal-wind-budget.baroc");
    let (whole, streamed) = (dir.join("whole.nc"), dir.join("streamed.nc"));
    let said_whole = run("1TiB", &recipe, &data, &whole);
    let said_streamed = run("1", &recipe, &data, &streamed);
    assert!(!said_whole.contains("block"), "{said_whole}");
    assert!(said_streamed.contains(&format!("{} time steps in {} blocks", baroc::demo::TIME_STEPS, baroc::demo::TIME_STEPS)), "{said_streamed}");
    // The recipe's area mean is a table, not a field: printed by both runs
    // (the streamed one joining its blocks' rows), the same text.
    let table = |said: &str| said.split_once("mean_warming (a table, not written to the NetCDF file): ").map(|(_, t)| t.to_string());
    assert!(table(&said_whole).is_some(), "{said_whole}");
    assert_eq!(table(&said_whole), table(&said_streamed));
    let (a, b) = (contents(&whole), contents(&streamed));
    assert!(a.len() > 3, "the recipe writes its outputs: {:?}", a.iter().map(|v| &v.0).collect::<Vec<_>>());
    assert_eq!(a.len(), b.len());
    for (x, y) in a.iter().zip(&b) {
        assert_eq!(x.0, y.0);
        assert_eq!(x.1, y.1, "attributes of {}", x.0);
        assert!(x.2 == y.2, "values of {} differ", x.0);
    }
}

#[test]
fn a_program_that_picks_a_time_runs_whole_even_when_large() {
    let dir = directory();
    let data = dir.join("baroc-demo").join(baroc::demo::FILE_NAME);
    let script = dir.join("picks-a-time.baroc");
    std::fs::write(&script, "let t = temperature at 500 hPa at time(2)\n").unwrap();
    let said = run("1", &script, &data, &dir.join("picked.nc"));
    assert!(!said.contains("block"), "{said}");
    let file = netcdf::open(dir.join("picked.nc")).unwrap();
    assert!(file.variable("t").is_some());
}
