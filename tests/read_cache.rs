//! Reads shared within a run (`SharedResults::read`, src/sharing.rs): the
//! same variable, levels, times and region of the same dataset are read
//! from the file once per run and served again as the same bits; a
//! different selection or dataset is never served another's data; nothing
//! outlives the run (a file rewritten between runs or cells is read
//! afresh); and large reads are not held.
//!
//! The reference is always a read straight from the file
//! (`Dataset::read`): equality of bits.

use std::path::{Path, PathBuf};
use std::sync::{Arc, OnceLock};

use baroc::grid::Field;
use baroc::io::writer::{write_fields, WriteOptions};
use baroc::io::{Dataset, Selection};
use baroc::physics::sampling::Region;
use baroc::session::Session;
use baroc::sharing::SharedResults;

fn directory() -> &'static PathBuf {
    static DIR: OnceLock<PathBuf> = OnceLock::new();
    DIR.get_or_init(|| {
        let dir = std::env::temp_dir().join(format!("baroc-read-cache-tests-{}", std::process::id()));
        baroc::demo::write(&dir.join("baroc-demo")).expect("demo case writes");
        dir
    })
}

fn demo_file() -> PathBuf {
    directory().join("baroc-demo").join(baroc::demo::FILE_NAME)
}

/// A copy of the demo's fields on levels, every temperature raised by
/// `warming` kelvin, written to `to`.
fn write_warmer(to: &Path, warming: f32) {
    let dataset = Dataset::open(&[demo_file()]).expect("demo opens");
    let names: Vec<String> = dataset.variables().filter(|v| v.levels.is_some()).map(|v| v.name.clone()).collect();
    let mut fields: Vec<Field> = names.iter().map(|n| dataset.read(n, &Selection::default()).expect("reads")).collect();
    for f in &mut fields {
        if f.standard_name.as_deref() == Some("air_temperature") {
            f.data.mapv_inplace(|t| t + warming);
        }
    }
    let refs: Vec<&Field> = fields.iter().collect();
    write_fields(to, &refs, &WriteOptions::default()).expect("writes the copy");
}

fn same_bits(a: &Field, b: &Field) -> bool {
    a.data.shape() == b.data.shape() && a.data.iter().zip(b.data.iter()).all(|(x, y)| x.to_bits() == y.to_bits()) && a.levels == b.levels && a.grid == b.grid
}

fn open(path: &Path) -> Arc<Dataset> {
    Arc::new(Dataset::open(&[path.to_path_buf()]).expect("opens"))
}

fn levels(dataset: &Dataset) -> Vec<f64> {
    dataset.resolve("temperature").expect("temperature").levels.clone().expect("levels")
}

#[test]
fn a_second_read_of_the_same_selection_is_served_as_the_same_bits() {
    let dataset = open(&demo_file());
    let store = SharedResults::default();
    let selection = Selection { levels: Some(vec![levels(&dataset)[0]]), ..Selection::default() };
    let first = store.read(&dataset, "temperature", &selection, None).unwrap();
    let held = store.bytes();
    assert!(held > 0, "a one-level read is kept");
    let served_before = baroc::io::timings::totals().cached;
    // By role and by the variable's own name: the same entry.
    let name = dataset.resolve("temperature").unwrap().name.clone();
    let second = store.read(&dataset, &name, &selection, None).unwrap();
    assert!(baroc::io::timings::totals().cached > served_before, "the second read came from the store");
    assert_eq!(store.bytes(), held, "nothing new was kept");
    let direct = dataset.read("temperature", &selection).unwrap();
    assert!(same_bits(&first, &direct) && same_bits(&second, &direct));
}

#[test]
fn other_levels_times_regions_and_variables_are_never_confused() {
    let dataset = open(&demo_file());
    let store = SharedResults::default();
    let all = levels(&dataset);
    let region = Region { south: 40.0, north: 60.0, west: -30.0, east: 0.0 };
    let selections = [
        Selection { levels: Some(vec![all[0]]), ..Selection::default() },
        Selection { levels: Some(vec![all[1]]), ..Selection::default() },
        Selection { levels: Some(vec![all[0], all[1]]), ..Selection::default() },
        Selection { levels: Some(vec![all[0]]), times: Some(vec![0]), ..Selection::default() },
        Selection { levels: Some(vec![all[0]]), times: Some(vec![1]), ..Selection::default() },
        Selection { levels: Some(vec![all[0]]), region: Some(region), ..Selection::default() },
    ];
    // Twice over: the second round is served from the store, and each
    // must still be its own selection's data.
    let mut compared = 0;
    for round in 0..2 {
        for selection in &selections {
            for name in ["temperature", "geopotential", "eastward_wind"] {
                let Ok(direct) = dataset.read(name, selection) else { continue };
                let through = store.read(&dataset, name, selection, None).unwrap();
                assert!(same_bits(&through, &direct), "round {round}: {name} under {selection:?}");
                compared += 1;
            }
        }
    }
    assert_eq!(compared, 2 * selections.len() * 3, "every variable read under every selection");
}

#[test]
fn another_dataset_is_never_served_the_first_ones_reads() {
    let warmer = directory().join("warmer-by-2K.nc");
    write_warmer(&warmer, 2.0);
    let (demo, other) = (open(&demo_file()), open(&warmer));
    let store = SharedResults::default();
    let selection = Selection { levels: Some(vec![levels(&demo)[0]]), ..Selection::default() };
    let a = store.read(&demo, "temperature", &selection, None).unwrap();
    let b = store.read(&other, "temperature", &selection, None).unwrap();
    assert!(same_bits(&a, &demo.read("temperature", &selection).unwrap()));
    assert!(same_bits(&b, &other.read("temperature", &selection).unwrap()));
    assert!(!same_bits(&a, &b), "the two files differ, and so do their reads");
}

#[test]
fn a_file_rewritten_between_runs_is_read_afresh() {
    let path = directory().join("rewritten.nc");
    write_warmer(&path, 0.0);
    let dataset = open(&path);
    let store = SharedResults::default();
    let selection = Selection { levels: Some(vec![levels(&dataset)[0]]), ..Selection::default() };
    let before = store.read(&dataset, "temperature", &selection, None).unwrap();
    // The run ends (the evaluator empties the store), the file changes.
    store.clear();
    assert_eq!(store.bytes(), 0);
    write_warmer(&path, 5.0);
    let after = store.read(&dataset, "temperature", &selection, None).unwrap();
    assert!(same_bits(&after, &dataset.read("temperature", &selection).unwrap()));
    let (x, y) = (before.data.iter().find(|v| v.is_finite()).unwrap(), after.data.iter().find(|v| v.is_finite()).unwrap());
    assert!((y - x - 5.0).abs() < 1e-3, "the rewritten file's values ({x} then {y})");
}

#[test]
fn large_reads_are_not_held_and_no_room_keeps_nothing() {
    let dataset = open(&demo_file());
    let all = Selection::default();
    let bytes = (dataset.read("temperature", &all).unwrap().data.len() * 4) as u64;
    // A budget that could hold the read, but not within its share for reads.
    let store = SharedResults::with_budget(bytes * baroc::sharing::READ_SHARE - 1);
    let read = store.read(&dataset, "temperature", &all, None).unwrap();
    assert_eq!(store.bytes(), 0, "a read above budget / READ_SHARE is not kept");
    assert!(same_bits(&read, &dataset.read("temperature", &all).unwrap()));
    let none = SharedResults::with_budget(0);
    none.read(&dataset, "temperature", &Selection { levels: Some(vec![levels(&dataset)[0]]), ..Selection::default() }, None).unwrap();
    assert_eq!(none.bytes(), 0);
}

fn cell(session: &mut Session, code: &str) -> baroc::lang::value::Value {
    match session.run(code, None) {
        Ok(_) => session.last_values.last().cloned().expect("a value"),
        Err(e) => panic!("{code}\n{}", e.rendered),
    }
}

#[test]
fn a_notebook_cell_after_the_file_changed_sees_the_new_data() {
    let path = directory().join("changed-between-cells.nc");
    write_warmer(&path, 0.0);
    let mut session = Session::new();
    cell(&mut session, &format!("open \"{}\"\n1", path.display()));
    let thickness = |session: &mut Session| -> Field {
        match cell(session, "thickness(1000 hPa to 500 hPa)") {
            baroc::lang::value::Value::Scalar(f) => (*f).clone(),
            other => panic!("expected a field, got {}", other.kind()),
        }
    };
    let first = thickness(&mut session);
    write_warmer(&path, 5.0);
    let second = thickness(&mut session);
    // Warmer by 5 K throughout: thicker by Rd/g * 5 K * ln(1000/500), about
    // 101 m (hypsometric equation, field guide); virtual temperature and
    // constants aside, within 2 m.
    let (a, b) = (first.data.iter().find(|v| v.is_finite()).unwrap(), second.data.iter().find(|v| v.is_finite()).unwrap());
    let expected = 287.05 / 9.80665 * 5.0 * 2f64.ln();
    assert!(((b - a) as f64 - expected).abs() < 2.0, "thickness {a} then {b}, expected a difference of {expected:.1} m");
    assert_eq!(session.evaluator().shared.bytes(), 0, "nothing held between cells");
}

/// The language's own reads (`temperature at 500 hPa`) go through the
/// run's store too: within a cell a repeated read is served, across cells
/// a changed file is read afresh (the store is emptied after every cell).
#[test]
fn a_language_read_in_a_later_cell_sees_the_new_data() {
    let path = directory().join("language-read-between-cells.nc");
    write_warmer(&path, 0.0);
    let mut session = Session::new();
    cell(&mut session, &format!("open \"{}\"\n1", path.display()));
    let at_500 = |session: &mut Session| -> f32 {
        match cell(session, "(temperature at 500 hPa) - (temperature at 500 hPa) + temperature at 500 hPa") {
            baroc::lang::value::Value::Scalar(f) => *f.data.iter().find(|v| v.is_finite()).expect("a value"),
            other => panic!("expected a field, got {}", other.kind()),
        }
    };
    let first = at_500(&mut session);
    write_warmer(&path, 5.0);
    let second = at_500(&mut session);
    // write_warmer warms the temperature by the same amount everywhere.
    let direct = Dataset::open(&[path.clone()]).unwrap();
    let level = levels(&direct).into_iter().find(|&p| (p - 50_000.0).abs() < 1.0).expect("a 500 hPa level");
    let read = direct.read("temperature", &Selection { levels: Some(vec![level]), ..Selection::default() }).unwrap();
    let now = *read.data.iter().find(|v| v.is_finite()).unwrap();
    assert!((second - first - 5.0).abs() < 1e-3 && second == now, "before {first} K, after {second} K, the file now {now} K");
    assert_eq!(session.evaluator().shared.bytes(), 0, "nothing held between cells");
}
