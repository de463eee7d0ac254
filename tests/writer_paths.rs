//! The writer's two ways to the disk give the same file: an output built as
//! an image in memory and written from HDF5's own memory (the default for
//! outputs up to `IN_MEMORY_LIMIT`, netCDF-4 files; the test checks that
//! route ran, not the copying fallback), and one written by netCDF-C straight to its file
//! (`memory_image_limit: Some(0)`), in both file formats. The files are read
//! back with the netcdf crate (netCDF-C's own reader), and every dimension,
//! attribute and value compared, NaN written as the _FillValue.
//! The Python cross-checks (tests/python) read the default path's files with
//! netCDF4-python and xarray. A file built in memory can be opened for
//! appending by netCDF-C (which refuses netCDF-4 files without HDF5 link
//! creation order): tested here too.

use std::path::{Path, PathBuf};
use std::sync::Arc;

use baroc::grid::{Field, Grid, TimeAxis};
use baroc::io::writer::{write_named_fields, Format, WriteOptions, FILL_VALUE};
use ndarray::Array4;

fn scratch(test: &str, name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("baroc-writer-paths-{}", std::process::id())).join(test);
    std::fs::create_dir_all(&dir).unwrap();
    dir.join(name)
}

/// Fields with a time axis, two different level sets, a field with neither,
/// NaNs and values of every size; invented for the test.
fn fields() -> Vec<Field> {
    let grid = Arc::new(Grid::new((0..37).map(|i| 60.0 - i as f64 * 0.5).collect(), (0..53).map(|j| -10.0 + j as f64 * 0.5).collect()));
    let times = TimeAxis { values: vec![0.0, 6.0], units: "hours since 2031-02-11 00:00:00".into(), calendar: "standard".into() };
    let value = |t: usize, l: usize, i: usize, j: usize| -> f32 {
        if (i * 53 + j + 7 * l + 3 * t) % 97 == 0 {
            f32::NAN
        } else {
            ((i as f32 * 0.37).sin() * 1.0e3 + j as f32 * 0.01 - l as f32 * 1.0e-4) * (1.0 + t as f32)
        }
    };
    let a = Field::new("height", "m", Array4::from_shape_fn((2, 3, 37, 53), |(t, l, i, j)| value(t, l, i, j)), Some(times.clone()), Some(vec![85_000.0, 70_000.0, 50_000.0]), grid.clone())
        .unwrap()
        .with_long_name("geopotential height")
        .with_standard_name(Some("geopotential_height"))
        .with_attribute("layer", "850 hPa to 500 hPa");
    let b = Field::new("shear", "m s-1", Array4::from_shape_fn((1, 2, 37, 53), |(_, l, i, j)| value(1, l, i, j) * 1e-3), None, Some(vec![100_000.0, 30_000.0]), grid.clone()).unwrap();
    let c = Field::new("warming", "K day-1", Array4::from_shape_fn((2, 1, 37, 53), |(t, _, i, j)| value(t, 2, i, j) * 1e-5), Some(times), None, grid.clone()).unwrap();
    let d = Field::new("mask", "1", Array4::from_shape_fn((1, 1, 37, 53), |(_, _, i, j)| value(0, 0, i, j)), None, None, grid).unwrap();
    vec![a, b, c, d]
}

fn attributes<'a>(mut list: impl Iterator<Item = netcdf::Attribute<'a>>) -> Vec<(String, String)> {
    let mut out = Vec::new();
    while let Some(a) = list.next() {
        out.push((a.name().to_string(), format!("{:?}", a.value().unwrap())));
    }
    out
}

/// Everything a reader sees of a file, as comparable text and values.
fn contents(path: &Path) -> (Vec<(String, usize)>, Vec<(String, String)>, Vec<(String, Vec<String>, Vec<(String, String)>, Vec<f64>)>) {
    let file = netcdf::open(path).unwrap();
    let dimensions = file.dimensions().map(|d| (d.name(), d.len())).collect();
    let global = attributes(file.attributes());
    let mut variables = Vec::new();
    for v in file.variables() {
        let dims = v.dimensions().iter().map(|d| d.name()).collect();
        let values: Vec<f64> = if v.dimensions().is_empty() { Vec::new() } else { v.get_values::<f64, _>(..).unwrap() };
        variables.push((v.name(), dims, attributes(v.attributes()), values));
    }
    (dimensions, global, variables)
}

#[test]
fn a_file_built_in_memory_equals_one_written_straight_to_disk() {
    let fields = fields();
    let named: Vec<(&str, &Field)> = fields.iter().map(|f| (f.name.as_str(), f)).collect();
    for format in [Format::Netcdf4, Format::Classic] {
        let options = |limit| WriteOptions { format, history: "test".into(), global_attributes: vec![("baroc_script".into(), "output x = 1".into())], memory_image_limit: limit };
        let (memory, disk) = (scratch("same", &format!("memory-{format:?}.nc")), scratch("same", &format!("disk-{format:?}.nc")));
        let routes_before = baroc::io::timings::write_routes();
        write_named_fields(&memory, &named, &options(None)).unwrap();
        // The netCDF-4 image went straight from HDF5's memory to the file,
        // not copied out first (the counts are the process's, and the other
        // tests write at the same time: none of them copies).
        let (from_memory, copied) = baroc::io::timings::write_routes();
        assert_eq!(copied, routes_before.1, "no image copied out ({format:?})");
        if format == Format::Netcdf4 {
            assert!(from_memory > routes_before.0, "written from HDF5's memory");
        }
        write_named_fields(&disk, &named, &options(Some(0))).unwrap();
        // Byte for byte, in fact (netCDF-C and HDF5 lay the file out the same
        // way in memory as on disk; the superblock checksum HDF5 computed
        // for the disk file checks baroc's own lookup3 as well).
        assert!(std::fs::read(&memory).unwrap() == std::fs::read(&disk).unwrap(), "the two {format:?} files differ in their bytes");
        let (a, b) = baroc::io::netcdf_thread::call(|| (contents(&memory), contents(&disk)));
        assert_eq!(a.0, b.0, "dimensions ({format:?})");
        assert_eq!(a.1, b.1, "global attributes ({format:?})");
        assert_eq!(a.2.len(), b.2.len());
        for (x, y) in a.2.iter().zip(&b.2) {
            assert_eq!((&x.0, &x.1, &x.2), (&y.0, &y.1, &y.2), "variable {} ({format:?})", x.0);
            assert_eq!(x.3.len(), y.3.len());
            assert!(x.3.iter().zip(&y.3).all(|(p, q)| p.to_bits() == q.to_bits()), "values of {} ({format:?})", x.0);
        }
        // And the values are the fields' own, NaN as the fill value.
        for f in &fields {
            let back: Vec<f32> = baroc::io::netcdf_thread::call(|| netcdf::open(&memory).unwrap().variable(&f.name).unwrap().get_values::<f32, _>(..).unwrap());
            assert_eq!(back.len(), f.data.len());
            for (&r, &w) in back.iter().zip(f.data.iter()) {
                if w.is_nan() {
                    assert_eq!(r, FILL_VALUE, "{}: NaN written as the fill value", f.name);
                } else {
                    assert_eq!(r.to_bits(), w.to_bits(), "{}", f.name);
                }
            }
        }
        // netCDF-C opens it for appending, and what is added stays. (NetCDF-3
        // files are written on disk either way, and adding to them needs
        // define mode, which the netcdf crate does not enter by itself.)
        baroc::io::netcdf_thread::call(|| if format == Format::Netcdf4 {
            let mut file = netcdf::append(&memory).unwrap_or_else(|e| panic!("{format:?} file built in memory opened for appending: {e}"));
            file.variable_mut("height").unwrap().put_attribute("comment", "added later").unwrap();
            file.add_attribute("institution_note", "added later").unwrap();
            file.close().unwrap();
            let file = netcdf::open(&memory).unwrap();
            assert!(file.attribute("institution_note").is_some());
            assert!(file.variable("height").unwrap().attribute("comment").is_some());
        });
        let _ = std::fs::remove_file(memory);
        let _ = std::fs::remove_file(disk);
    }
}

/// Larger than the direct write's minimum and than its buffer
/// (`atomic::BOUNCE`), so the image goes past the page cache in several
/// chunks, the first with the superblock patched: still byte for byte the
/// file netCDF-C writes to disk, and read back with the same values.
#[test]
fn a_large_file_written_from_hdf5_memory_equals_one_written_straight_to_disk() {
    let grid = Arc::new(Grid::new((0..181).map(|i| 90.0 - i as f64).collect(), (0..360).map(|j| j as f64).collect()));
    let field = Field::new("temperature", "K", Array4::from_shape_fn((1, 40, 181, 360), |(_, l, i, j)| 220.0 + l as f32 + (i as f32 * 0.1).cos() * 30.0 + j as f32 * 1e-3), None, Some((0..40).map(|l| 100_000.0 - l as f64 * 2_000.0).collect()), grid)
        .unwrap();
    assert!(field.data.len() * 4 > 2 * baroc::atomic::BOUNCE);
    let named = [("temperature", &field)];
    let options = |limit| WriteOptions { history: "test".into(), memory_image_limit: limit, ..Default::default() };
    let (memory, disk) = (scratch("large", "memory.nc"), scratch("large", "disk.nc"));
    let routes_before = baroc::io::timings::write_routes();
    write_named_fields(&memory, &named, &options(None)).unwrap();
    let routes_after = baroc::io::timings::write_routes();
    assert!(routes_after.0 > routes_before.0 && routes_after.1 == routes_before.1, "written from HDF5's memory, not copied");
    write_named_fields(&disk, &named, &options(Some(0))).unwrap();
    assert!(std::fs::read(&memory).unwrap() == std::fs::read(&disk).unwrap(), "the two files differ in their bytes");
    let back: Vec<f32> = baroc::io::netcdf_thread::call(|| netcdf::open(&memory).unwrap().variable("temperature").unwrap().get_values::<f32, _>(..).unwrap());
    assert!(back.iter().zip(field.data.iter()).all(|(r, w)| r.to_bits() == w.to_bits()));
    let _ = std::fs::remove_file(memory);
    let _ = std::fs::remove_file(disk);
}

#[test]
fn a_failed_write_leaves_nothing_on_either_path() {
    let fields = fields();
    // Two results under one name: refused before anything is written.
    let named = [("x", &fields[0]), ("x", &fields[1])];
    for limit in [None, Some(0)] {
        let path = scratch("refused", &format!("refused-{limit:?}.nc"));
        let options = WriteOptions { memory_image_limit: limit, ..Default::default() };
        assert!(write_named_fields(&path, &named, &options).is_err());
        assert!(!path.exists());
        // A name netCDF itself refuses fails inside the writer, on both paths.
        let bad = [("bad/name", &fields[0])];
        let error = write_named_fields(&path, &bad, &options).unwrap_err().to_string();
        assert!(error.contains("bad/name"), "{error}");
        assert!(!path.exists());
        let folder = path.parent().unwrap();
        let partial = std::fs::read_dir(folder).unwrap().filter_map(Result::ok).any(|e| e.file_name().to_string_lossy().ends_with(".partial"));
        assert!(!partial, "no temporary file left in {}", folder.display());
    }
}
