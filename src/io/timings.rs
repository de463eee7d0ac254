//! What reading cost in this process: wall time spent in `Dataset::read`
//! (the netCDF or GRIB2 read and its unpacking), the bytes delivered, and how
//! many reads were served from the run's read cache instead. For the split a
//! `baroc run` prints under `BAROC_TIMINGS=1` (benches/end_to_end.py); with
//! `BAROC_TIMINGS=2` every read is also listed on stderr as it ends.
//!
//! It also counts which path the layer operators took (thickness and what
//! starts from it): how many layers the one-pass kernel computed ahead
//! (`Case::prepare_layers`, in how many passes) and how many were computed
//! one layer at a time (`Case::thickness` computing afresh), so a bench can
//! say which path ran.
//!
//! Counters only: nothing here changes what is read or computed.

use std::sync::atomic::{AtomicU64, Ordering};
use std::time::Duration;

use super::Selection;

static NANOSECONDS: AtomicU64 = AtomicU64::new(0);
static BYTES: AtomicU64 = AtomicU64::new(0);
static READS: AtomicU64 = AtomicU64::new(0);
static CACHED: AtomicU64 = AtomicU64::new(0);
static DIRECT: AtomicU64 = AtomicU64::new(0);
static MANY_LAYER_PASSES: AtomicU64 = AtomicU64::new(0);
static MANY_LAYER_LAYERS: AtomicU64 = AtomicU64::new(0);
static ONE_LAYER_LAYERS: AtomicU64 = AtomicU64::new(0);

/// Totals since the process started.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct ReadTotals {
    /// Wall time inside reads, summed over reads (reads from several threads
    /// at once would count twice; a run reads from one thread at a time).
    pub seconds: f64,
    /// Bytes of field data delivered by reads from the files.
    pub bytes: u64,
    /// Reads that went to the files.
    pub reads: u64,
    /// Reads served from the run's read cache.
    pub cached: u64,
    /// Reads of the files made in parallel without netCDF-C
    /// (io::direct_read), counted in `reads` too.
    pub direct: u64,
}

fn verbose() -> bool {
    std::env::var_os("BAROC_TIMINGS").is_some_and(|v| v == "2")
}

/// Records one read that went to the files.
pub fn record_read(name: &str, selection: &Selection, elapsed: Duration, bytes: u64) {
    NANOSECONDS.fetch_add(elapsed.as_nanos() as u64, Ordering::Relaxed);
    BYTES.fetch_add(bytes, Ordering::Relaxed);
    READS.fetch_add(1, Ordering::Relaxed);
    if verbose() {
        eprintln!("read: {name} {} ({:.1} MB) in {:.3} s", describe(selection), bytes as f64 / 1e6, elapsed.as_secs_f64());
    }
}

/// Records that a read of the files went through io::direct_read.
pub fn record_direct() {
    DIRECT.fetch_add(1, Ordering::Relaxed);
}

/// Records one read served from the run's read cache.
pub fn record_cached(name: &str, selection: &Selection) {
    CACHED.fetch_add(1, Ordering::Relaxed);
    if verbose() {
        eprintln!("read: {name} {} from the read cache", describe(selection));
    }
}

fn describe(selection: &Selection) -> String {
    let levels = match &selection.levels {
        Some(l) => format!("{} level{}", l.len(), if l.len() == 1 { "" } else { "s" }),
        None => "all levels".into(),
    };
    let times = match &selection.times {
        Some(t) => format!("{} time step{}", t.len(), if t.len() == 1 { "" } else { "s" }),
        None => "all times".into(),
    };
    let region = if selection.region.is_some() { ", a region" } else { "" };
    format!("{levels}, {times}{region}")
}

/// The totals so far.
pub fn totals() -> ReadTotals {
    ReadTotals {
        seconds: NANOSECONDS.load(Ordering::Relaxed) as f64 * 1e-9,
        bytes: BYTES.load(Ordering::Relaxed),
        reads: READS.load(Ordering::Relaxed),
        cached: CACHED.load(Ordering::Relaxed),
        direct: DIRECT.load(Ordering::Relaxed),
    }
}

/// Layers by path since the process started (see the module comment).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct LayerPaths {
    /// Passes of the one-pass kernel.
    pub passes: u64,
    /// Layers those passes computed.
    pub one_pass: u64,
    /// Layers computed one at a time (a layer computed ahead but not kept,
    /// the store's budget being spent, counts in both).
    pub one_layer: u64,
}

/// Records one pass of the one-pass kernel over `layers` layers.
pub fn record_many_layer_pass(layers: usize) {
    MANY_LAYER_PASSES.fetch_add(1, Ordering::Relaxed);
    MANY_LAYER_LAYERS.fetch_add(layers as u64, Ordering::Relaxed);
}

/// Records one layer computed by the one-layer path.
pub fn record_one_layer() {
    ONE_LAYER_LAYERS.fetch_add(1, Ordering::Relaxed);
}

/// The layer counts so far.
pub fn layer_paths() -> LayerPaths {
    LayerPaths { passes: MANY_LAYER_PASSES.load(Ordering::Relaxed), one_pass: MANY_LAYER_LAYERS.load(Ordering::Relaxed), one_layer: ONE_LAYER_LAYERS.load(Ordering::Relaxed) }
}

impl std::fmt::Display for LayerPaths {
    /// "layers: 12 by the one-pass kernel (2 passes), 1 one layer at a time".
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let plural = |n: u64| if n == 1 { "" } else { "es" };
        write!(f, "layers: {} by the one-pass kernel ({} pass{}), {} one layer at a time", self.one_pass, self.passes, plural(self.passes), self.one_layer)
    }
}

static WRITE_BUILD_NANOSECONDS: AtomicU64 = AtomicU64::new(0);
static WRITE_FILE_NANOSECONDS: AtomicU64 = AtomicU64::new(0);
static WRITE_BYTES: AtomicU64 = AtomicU64::new(0);
static WRITES_FROM_DRIVER_MEMORY: AtomicU64 = AtomicU64::new(0);
static WRITES_COPIED: AtomicU64 = AtomicU64::new(0);

/// Records one output written from a memory image: the time netCDF-C took
/// to build the image (with, by the copying route, the copy), the time to
/// put it in the file, its size, and whether it went straight from HDF5's
/// memory (`io::netcdf_raw::ImageRoute`).
pub fn record_write(build: Duration, file: Duration, bytes: u64, from_driver_memory: bool) {
    WRITE_BUILD_NANOSECONDS.fetch_add(build.as_nanos() as u64, Ordering::Relaxed);
    WRITE_FILE_NANOSECONDS.fetch_add(file.as_nanos() as u64, Ordering::Relaxed);
    WRITE_BYTES.fetch_add(bytes, Ordering::Relaxed);
    let route = if from_driver_memory { &WRITES_FROM_DRIVER_MEMORY } else { &WRITES_COPIED };
    route.fetch_add(1, Ordering::Relaxed);
}

/// Outputs written from memory images so far: straight from HDF5's memory,
/// and copied out first.
pub fn write_routes() -> (u64, u64) {
    (WRITES_FROM_DRIVER_MEMORY.load(Ordering::Relaxed), WRITES_COPIED.load(Ordering::Relaxed))
}

/// Seconds building images, seconds writing them to files, and bytes, of
/// the outputs written from memory images so far.
pub fn write_totals() -> (f64, f64, u64) {
    (
        WRITE_BUILD_NANOSECONDS.load(Ordering::Relaxed) as f64 * 1e-9,
        WRITE_FILE_NANOSECONDS.load(Ordering::Relaxed) as f64 * 1e-9,
        WRITE_BYTES.load(Ordering::Relaxed),
    )
}
