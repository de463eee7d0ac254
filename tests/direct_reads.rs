//! Reads that bypass netCDF-C (io::direct_read) give netCDF-C's values, bit
//! for bit, for every kind of selection, and are taken only for variables
//! stored as one plain block of little-endian float32. The reference is
//! netCDF-C itself (the same source with direct reads off); the Python
//! cross-check tests/python/test_direct_reads.py compares with
//! netCDF4-python.

use std::path::{Path, PathBuf};

use baroc::io::netcdf_source::NetcdfSource;
use baroc::io::{DataSource, Selection};
use baroc::physics::sampling::Region;

const LEVELS_HPA: [f64; 5] = [1000.0, 850.0, 700.0, 500.0, 300.0];
const FILL: f32 = 1.0e20;

fn scratch(name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("baroc-direct-reads-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    dir.join(name)
}

/// A value for every (time, level, latitude, longitude) index, distinct
/// enough that a read from a wrong offset cannot match, with a few fill
/// values (missing data) scattered in.
fn value(t: usize, k: usize, j: usize, i: usize) -> f32 {
    if (t + k + j * 7 + i * 3) % 97 == 0 {
        return FILL;
    }
    (200.0 + t as f64 * 1000.0 + k as f64 * 100.0 + j as f64 + i as f64 * 0.001) as f32
}

/// One file holding the same field stored six ways: `plain` (contiguous
/// little-endian f32, what direct reads serve), `compressed` (chunked with
/// deflate), `chunked` (chunked, no filter), `big_endian` (contiguous,
/// big-endian f32), `double` (f64) and `packed` (i16 with scale_factor).
fn write_file(path: &Path) {
    let (nt, nz, ny, nx) = (2, LEVELS_HPA.len(), 19, 144);
    let mut file = netcdf::create(path).unwrap();
    file.add_dimension("time", nt).unwrap();
    file.add_dimension("level", nz).unwrap();
    file.add_dimension("latitude", ny).unwrap();
    file.add_dimension("longitude", nx).unwrap();
    let coordinate = |file: &mut netcdf::FileMut, name: &str, units: &str, values: Vec<f64>| {
        let mut v = file.add_variable::<f64>(name, &[name]).unwrap();
        v.put_attribute("units", units).unwrap();
        v.put_values(&values, ..).unwrap();
    };
    coordinate(&mut file, "time", "hours since 2026-01-01 00:00:00", vec![0.0, 6.0]);
    coordinate(&mut file, "level", "hPa", LEVELS_HPA.to_vec());
    coordinate(&mut file, "latitude", "degrees_north", (0..ny).map(|j| -90.0 + 10.0 * j as f64).collect());
    coordinate(&mut file, "longitude", "degrees_east", (0..nx).map(|i| 2.5 * i as f64).collect());
    let dims = ["time", "level", "latitude", "longitude"];
    let mut values = Vec::with_capacity(nt * nz * ny * nx);
    for t in 0..nt {
        for k in 0..nz {
            for j in 0..ny {
                for i in 0..nx {
                    values.push(value(t, k, j, i));
                }
            }
        }
    }
    for name in ["plain", "compressed", "chunked", "big_endian"] {
        let mut v = file.add_variable::<f32>(name, &dims).unwrap();
        match name {
            "compressed" => v.set_compression(4, true).unwrap(),
            "chunked" => v.set_chunking(&[1, 1, ny, nx]).unwrap(),
            "big_endian" => v.set_endianness(netcdf::Endianness::Big).unwrap(),
            _ => {}
        }
        v.put_attribute("units", "K").unwrap();
        v.put_attribute("_FillValue", FILL).unwrap();
        v.put_values(&values, ..).unwrap();
    }
    let mut v = file.add_variable::<f64>("double", &dims).unwrap();
    v.put_attribute("units", "K").unwrap();
    v.put_values(&values.iter().map(|&x| x as f64).collect::<Vec<_>>(), ..).unwrap();
    let mut v = file.add_variable::<i16>("packed", &dims).unwrap();
    v.put_attribute("units", "K").unwrap();
    v.put_attribute("scale_factor", 0.5f32).unwrap();
    v.put_values(&values.iter().map(|&x| x.min(30000.0) as i16).collect::<Vec<_>>(), ..).unwrap();
}

fn selections() -> Vec<(&'static str, Selection)> {
    let levels = |l: &[f64]| Some(l.iter().map(|p| p * 100.0).collect::<Vec<_>>());
    let region = |south, north, west, east| Some(Region { south, north, west, east });
    vec![
        ("everything", Selection::default()),
        ("one level", Selection { levels: levels(&[500.0]), ..Default::default() }),
        ("two levels apart", Selection { levels: levels(&[1000.0, 500.0]), ..Default::default() }),
        ("the later time", Selection { times: Some(vec![1]), ..Default::default() }),
        ("rows of a box", Selection { region: region(-75.0, 75.0, 0.0, 357.5), ..Default::default() }),
        ("part rows of a box", Selection { region: region(20.0, 60.0, 0.0, 170.0), levels: levels(&[850.0, 700.0]), ..Default::default() }),
        ("a box across the seam", Selection { region: region(20.0, 60.0, -60.0, 120.0), ..Default::default() }),
        ("a narrow box", Selection { region: region(20.0, 60.0, 10.0, 30.0), ..Default::default() }),
    ]
}

#[test]
fn direct_reads_give_netcdf_c_values_bit_for_bit() {
    let path = scratch("six-ways.nc");
    write_file(&path);
    let direct = NetcdfSource::open(&path).unwrap();
    let reference = NetcdfSource::open(&path).unwrap().through_netcdf_only();
    for name in ["plain", "compressed", "chunked", "big_endian", "double", "packed"] {
        assert_eq!(direct.reads_directly(name), name == "plain", "{name}: direct reads only for contiguous little-endian float32");
        assert!(!reference.reads_directly(name));
        for (what, selection) in selections() {
            let a = direct.read(name, &selection).unwrap_or_else(|e| panic!("{name}, {what}: {e}"));
            let b = reference.read(name, &selection).unwrap();
            assert_eq!(a.data.dim(), b.data.dim(), "{name}, {what}");
            assert!(a.data.is_standard_layout());
            let differing = a.data.iter().zip(b.data.iter()).filter(|(x, y)| x.to_bits() != y.to_bits()).count();
            assert_eq!(differing, 0, "{name}, {what}: {differing} values differ");
            assert_eq!(a.grid.latitudes, b.grid.latitudes, "{name}, {what}");
            assert_eq!(a.grid.longitudes, b.grid.longitudes, "{name}, {what}");
            assert_eq!(a.levels, b.levels, "{name}, {what}");
        }
    }
    // Missing values came through as NaN, and a known value sits where the
    // file has it (time 1, 700 hPa, 30 N, 5 E): not only the two paths
    // agreeing, but agreeing with what was written.
    let all = direct.read("plain", &Selection::default()).unwrap();
    assert!(all.data.iter().any(|x| x.is_nan()));
    assert_eq!(all.data[[1, 2, 12, 2]], value(1, 2, 12, 2));
}

#[test]
fn a_file_shortened_after_opening_is_an_error_not_zeros() {
    // The header says more than the file holds: the read must fail (with
    // the variable named), as netCDF-C's would, never return made-up data.
    let path = scratch("shortened.nc");
    write_file(&path);
    let source = NetcdfSource::open(&path).unwrap();
    assert!(source.reads_directly("plain"));
    let length = std::fs::metadata(&path).unwrap().len();
    std::fs::OpenOptions::new().write(true).open(&path).unwrap().set_len(length.min(20_000)).unwrap();
    let failed = (0..3).any(|_| source.read("plain", &Selection::default()).is_err());
    assert!(failed, "a read past the end of the file must fail");
}
