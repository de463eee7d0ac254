//! Results shared within one run: a recipe's outputs often ask for the same
//! intermediate (the thickness of a layer for the thermal wind and for the
//! ageostrophic shear, the geostrophic wind at the layer's boundaries for
//! the advection and the turning), and without sharing each output reads
//! and computes it again.
//!
//! `SharedResults` holds fields that `diagnostics::Case` has computed,
//! keyed by everything the value depends on: which dataset (by identity,
//! the dataset being held so its address cannot be reused while the entry
//! lives), the selection (times, levels, region), the constants, the
//! equatorial band, the integration rule, and the operation with its
//! arguments. A key says nothing of names in the language, so rebinding a
//! name can never reach a stale value; the evaluator also empties the store
//! at the start of every run (a notebook cell, a recipe run), so a file
//! changed on disk between cells is read afresh.
//!
//! A value is held behind an `Arc` and served shared, not copied: the same
//! bits as computing it again (the operations are deterministic), and the
//! same memory as the caller's own (`Value::Scalar`/`Value::Vector` hold
//! the same `Arc`s, so an output that is also a shared intermediate exists
//! once). Callers that need a value of their own take it with
//! `Arc::unwrap_or_clone` (a copy only while the store holds it too). The
//! store keeps at most `budget` bytes of field data; beyond it, values are
//! simply not kept (the run is then as without sharing, never wrong).

use std::collections::HashMap;
use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::{Arc, Mutex};

use crate::grid::{Field, VectorField};
use crate::io::{DataError, Dataset, Selection};

/// Default bound on the bytes of field data kept for sharing: enough for
/// every intermediate of the thermal-wind budget over a few time steps of a
/// global 0.25-degree grid (about 4 MB per field and time step), small
/// beside the memory such a run needs anyway.
pub const DEFAULT_BUDGET: u64 = 1 << 30;

/// Reads larger than `budget / READ_SHARE` bytes are not kept: a read of
/// many levels is rarely asked for twice with the same levels, and keeping
/// it would hold its memory for the rest of the run.
pub const READ_SHARE: u64 = 16;

/// A stored value, shared with the callers it is served to (cloning it
/// clones the `Arc`, never the data).
#[derive(Clone)]
pub enum Shared {
    Field(Arc<Field>),
    Vector(Arc<VectorField>),
}

impl Shared {
    fn bytes(&self) -> u64 {
        let of = |f: &Field| (f.data.len() * std::mem::size_of::<f32>()) as u64;
        match self {
            Shared::Field(f) => of(f),
            Shared::Vector(v) => of(&v.eastward) + of(&v.northward),
        }
    }
}

#[derive(Default)]
struct Store {
    values: HashMap<String, Shared>,
    /// The datasets the keys name, held so that their addresses stay theirs.
    datasets: Vec<Arc<Dataset>>,
    bytes: u64,
}

/// Fields computed in this run, by what they depend on (see the module
/// comment). Shared between threads; cheap to clone through `Arc`.
pub struct SharedResults {
    store: Mutex<Store>,
    budget: u64,
    served: AtomicU64,
    computed: AtomicU64,
    many_layer_passes: AtomicU64,
    many_layer_layers: AtomicU64,
    one_layer_layers: AtomicU64,
}

impl Default for SharedResults {
    /// `DEFAULT_BUDGET`, or nothing kept when the environment sets
    /// `BAROC_SHARING=0` (for measuring what sharing saves:
    /// benches/end_to_end.py runs both ways).
    fn default() -> Self {
        let off = std::env::var_os("BAROC_SHARING").is_some_and(|v| v == "0");
        Self::with_budget(if off { 0 } else { DEFAULT_BUDGET })
    }
}

impl SharedResults {
    /// A store keeping at most `budget` bytes of field data (0: none, so
    /// every value is computed afresh).
    pub fn with_budget(budget: u64) -> Self {
        Self { store: Mutex::new(Store::default()), budget, served: AtomicU64::new(0), computed: AtomicU64::new(0), many_layer_passes: AtomicU64::new(0), many_layer_layers: AtomicU64::new(0), one_layer_layers: AtomicU64::new(0) }
    }

    /// Whether the store keeps anything at all (a budget of 0 keeps
    /// nothing, and work done only to be kept would be wasted).
    pub fn keeps_values(&self) -> bool {
        self.budget > 0
    }

    /// Stores `value` under `key` when it fits and nothing is stored there
    /// yet (a value computed ahead of the calls that will ask for it, such
    /// as the layers of one pass of the many-layer kernel); says whether it
    /// was kept. The value must be the bits the key's own computation gives.
    pub fn offer(&self, dataset: &Arc<Dataset>, key: String, value: Shared) -> bool {
        let mut s = self.lock();
        let size = value.bytes();
        if s.bytes + size > self.budget || s.values.contains_key(&key) {
            return false;
        }
        if !s.datasets.iter().any(|d| Arc::ptr_eq(d, dataset)) {
            s.datasets.push(dataset.clone());
        }
        s.bytes += size;
        s.values.insert(key, value);
        true
    }

    /// Counts one pass of the many-layer kernel over `layers` layers (here
    /// and in the process's timings).
    pub fn note_many_layer_pass(&self, layers: usize) {
        self.many_layer_passes.fetch_add(1, Ordering::Relaxed);
        self.many_layer_layers.fetch_add(layers as u64, Ordering::Relaxed);
        crate::io::timings::record_many_layer_pass(layers);
    }

    /// Counts one layer computed by the one-layer path (here and in the
    /// process's timings).
    pub fn note_one_layer(&self) {
        self.one_layer_layers.fetch_add(1, Ordering::Relaxed);
        crate::io::timings::record_one_layer();
    }

    /// Layers computed by the one-layer path since the store was made
    /// (`clear` keeps this).
    pub fn one_layer_count(&self) -> u64 {
        self.one_layer_layers.load(Ordering::Relaxed)
    }

    /// Passes of the many-layer kernel and the layers they computed since
    /// the store was made (`clear` keeps these; for tests and benches, to
    /// say which path ran).
    pub fn many_layer_counts(&self) -> (u64, u64) {
        (self.many_layer_passes.load(Ordering::Relaxed), self.many_layer_layers.load(Ordering::Relaxed))
    }

    fn lock(&self) -> std::sync::MutexGuard<'_, Store> {
        // A panic while the lock was held leaves at worst a value missing
        // from the map, never a half-stored one: carry on with the store.
        self.store.lock().unwrap_or_else(|e| e.into_inner())
    }

    /// Forgets every value (the start of a run or a cell).
    pub fn clear(&self) {
        *self.lock() = Store::default();
    }

    /// How many values were served from the store and how many computed
    /// since it was made (`clear` keeps these; for tests and timings).
    pub fn counts(&self) -> (u64, u64) {
        (self.served.load(Ordering::Relaxed), self.computed.load(Ordering::Relaxed))
    }

    /// Bytes of field data held.
    pub fn bytes(&self) -> u64 {
        self.lock().bytes
    }

    /// The key of `operation` on `dataset` under `context` (the selection,
    /// constants and settings, written out in full by the caller).
    pub fn key(dataset: &Arc<Dataset>, context: &str, operation: &str) -> String {
        format!("{:p}|{context}|{operation}", Arc::as_ptr(dataset))
    }

    /// A read of `name` (a variable or a role) under `selection`, as a
    /// field of the caller's own (`read_shared`, copied only when the store
    /// keeps the read too). Fails as `Dataset::read_with`.
    pub fn read(&self, dataset: &Arc<Dataset>, name: &str, selection: &Selection, constants: Option<&crate::constants::Constants>) -> Result<Field, DataError> {
        self.read_shared(dataset, name, selection, constants).map(Arc::unwrap_or_clone)
    }

    /// A read of `name` (a variable or a role) under `selection`: served
    /// from the store when this run has read the same variable, levels,
    /// times and region of the same dataset before (the same bits: a read
    /// is deterministic and the store is emptied between runs), otherwise
    /// read and kept when it fits (see `READ_SHARE`); the store and the
    /// caller share one copy. Fails as `Dataset::read_with` (an unknown
    /// name, a selection outside the data, an unreadable file).
    pub fn read_shared(&self, dataset: &Arc<Dataset>, name: &str, selection: &Selection, constants: Option<&crate::constants::Constants>) -> Result<Arc<Field>, DataError> {
        let variable = dataset.resolve(name)?.name.clone();
        // The constants belong to the key: model-level data computed by the
        // hydrostatic integral depend on them.
        let key = Self::key(dataset, &format!("{selection:?} {constants:?}"), &format!("read {variable:?}"));
        if let Some(Shared::Field(field)) = self.lock().values.get(&key).cloned() {
            crate::io::timings::record_cached(&variable, selection);
            return Ok(field);
        }
        let field = Arc::new(dataset.read_with(&variable, selection, constants)?);
        let mut s = self.lock();
        let size = (field.data.len() * std::mem::size_of::<f32>()) as u64;
        if size <= self.budget / READ_SHARE && s.bytes + size <= self.budget && !s.values.contains_key(&key) {
            if !s.datasets.iter().any(|d| Arc::ptr_eq(d, dataset)) {
                s.datasets.push(dataset.clone());
            }
            s.bytes += size;
            s.values.insert(key, Shared::Field(field.clone()));
        }
        Ok(field)
    }

    /// The stored value for `key`, or `compute()`'s, stored when it fits
    /// (shared with the caller, not copied). The lock is not held while
    /// computing, so two threads asking for the same value at once may both
    /// compute it (the same bits either way). Fails as `compute` does.
    pub fn get_or_compute<E>(&self, dataset: &Arc<Dataset>, key: String, compute: impl FnOnce() -> Result<Shared, E>) -> Result<Shared, E> {
        {
            let s = self.lock();
            if let Some(v) = s.values.get(&key).cloned() {
                self.served.fetch_add(1, Ordering::Relaxed);
                return Ok(v);
            }
        }
        let value = compute()?;
        self.computed.fetch_add(1, Ordering::Relaxed);
        let mut s = self.lock();
        let size = value.bytes();
        if s.bytes + size <= self.budget && !s.values.contains_key(&key) {
            if !s.datasets.iter().any(|d| Arc::ptr_eq(d, dataset)) {
                s.datasets.push(dataset.clone());
            }
            s.bytes += size;
            s.values.insert(key, value.clone());
        }
        Ok(value)
    }
}
