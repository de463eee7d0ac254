//! Reads of plainly stored netCDF-4 variables without netCDF-C, in parallel.
//!
//! netCDF-C (through HDF5, which is not thread-safe) reads on one thread, so
//! a large read is one core copying out of the page cache while the others
//! wait. A netCDF-4 variable stored as one contiguous, unfiltered block of
//! little-endian IEEE float32 (what netCDF-C writes unless asked to chunk
//! or compress) holds its values as plain row-major bytes from a known
//! offset: those reads are done here with `pread`, one block of whole rows
//! per task, across the thread pool.
//!
//! Two steps:
//! - `storage_of` (when the source is opened) asks HDF5 where each
//!   variable's block starts, its shape and how it is stored, and checks the
//!   first and last stored values read at that offset against HDF5's own
//!   reads of them, bit for bit. Anything else (chunked, compressed, other
//!   types or byte order, external or unallocated storage, a mismatch) gets
//!   no entry, and every read of it goes through netCDF-C.
//! - `read_block` (at each read) fills a standard-layout array with the
//!   selection, given per file dimension as one run of indices.
//!
//! `BAROC_DIRECT_READ=0` turns the whole path off.

use std::ffi::CString;
use std::path::Path;

use ndarray::Array4;
use rayon::prelude::*;

use super::file_check::HDF5_SIGNATURE;

/// Where a variable's values lie in its file (HDF5's view of it).
#[derive(Debug, Clone)]
pub(super) struct Storage {
    /// Byte offset of the first value in the file.
    offset: u64,
    /// Length of each of the variable's dimensions, in file order.
    dimensions: Vec<usize>,
}

/// Whether reads may bypass netCDF-C (`BAROC_DIRECT_READ=0` says no).
fn enabled() -> bool {
    std::env::var("BAROC_DIRECT_READ").map_or(true, |v| v != "0")
}

/// For each name, where its values lie if they can be read directly (see
/// the module comment); None for the others, and for every name of a file
/// that is not netCDF-4 with its superblock at offset 0. Makes HDF5 calls:
/// the caller is on the netCDF thread (io::netcdf_thread), with no netCDF
/// handle on this file open (HDF5 would otherwise share that handle).
pub(super) fn storage_of(path: &Path, names: &[String]) -> Vec<Option<Storage>> {
    let nothing = || vec![None; names.len()];
    if !enabled() {
        return nothing();
    }
    let Ok(file) = std::fs::File::open(path) else { return nothing() };
    let mut signature = [0u8; 8];
    if read_exact_at(&file, &mut signature, 0).is_err() || signature != HDF5_SIGNATURE {
        return nothing();
    }
    let Some(c_path) = path.to_str().and_then(|p| CString::new(p).ok()) else { return nothing() };
    use hdf5_metno_sys::h5f::{H5Fclose, H5Fopen, H5F_ACC_RDONLY};
    use hdf5_metno_sys::h5p::H5P_DEFAULT;
    let _lock = netcdf_sys::libnetcdf_lock.lock();
    // SAFETY: HDF5 calls under netCDF's lock, which serialises every HDF5
    // call of the process; every id is closed before the lock is released.
    // (A dataset HDF5 cannot open here is read through netCDF-C; this runs
    // on the netCDF thread, where HDF5's error printing is off.)
    let hdf5 = unsafe { H5Fopen(c_path.as_ptr(), H5F_ACC_RDONLY, H5P_DEFAULT) };
    if hdf5 < 0 {
        return nothing();
    }
    let found = names.iter().map(|name| unsafe { dataset_storage(hdf5, name, &file) }).collect();
    unsafe { H5Fclose(hdf5) };
    found
}

/// `storage_of` for one dataset of an open HDF5 file.
///
/// # Safety
/// `hdf5` is an open HDF5 file id of `file`; the caller holds netCDF's lock.
unsafe fn dataset_storage(hdf5: hdf5_metno_sys::h5i::hid_t, name: &str, file: &std::fs::File) -> Option<Storage> {
    use hdf5_metno_sys::h5::HADDR_UNDEF;
    use hdf5_metno_sys::h5d::{H5D_layout_t, H5Dclose, H5Dget_create_plist, H5Dget_offset, H5Dget_space, H5Dget_type, H5Dopen2};
    use hdf5_metno_sys::h5p::{H5Pclose, H5Pget_external_count, H5Pget_layout, H5Pget_nfilters, H5P_DEFAULT};
    use hdf5_metno_sys::h5s::{H5Sclose, H5Sget_simple_extent_dims, H5Sget_simple_extent_ndims};
    use hdf5_metno_sys::h5t::{H5T_class_t, H5T_order_t, H5Tclose, H5Tget_class, H5Tget_order, H5Tget_precision, H5Tget_size};
    let c_name = CString::new(name).ok()?;
    let dataset = H5Dopen2(hdf5, c_name.as_ptr(), H5P_DEFAULT);
    if dataset < 0 {
        return None;
    }
    let plist = H5Dget_create_plist(dataset);
    let datatype = H5Dget_type(dataset);
    let space = H5Dget_space(dataset);
    let mut found = None;
    if plist >= 0 && datatype >= 0 && space >= 0 {
        let stored_plainly = H5Pget_layout(plist) == H5D_layout_t::H5D_CONTIGUOUS && H5Pget_nfilters(plist) == 0 && H5Pget_external_count(plist) == 0;
        // IEEE single precision, least significant byte first: what this
        // processor reads as f32 (little-endian builds only).
        let little_endian_f32 = cfg!(target_endian = "little")
            && H5Tget_class(datatype) == H5T_class_t::H5T_FLOAT
            && H5Tget_size(datatype) == 4
            && H5Tget_precision(datatype) == 32
            && H5Tget_order(datatype) == H5T_order_t::H5T_ORDER_LE;
        let rank = H5Sget_simple_extent_ndims(space);
        let offset = H5Dget_offset(dataset);
        if stored_plainly && little_endian_f32 && rank > 0 && offset != HADDR_UNDEF {
            let mut dims = vec![0u64; rank as usize];
            if H5Sget_simple_extent_dims(space, dims.as_mut_ptr(), std::ptr::null_mut()) == rank {
                let storage = Storage { offset, dimensions: dims.into_iter().map(|d| d as usize).collect() };
                let count: usize = storage.dimensions.iter().product();
                let agrees = count > 0 && [0, count - 1].iter().all(|&i| element_agrees(dataset, space, &storage, i, file));
                if agrees {
                    found = Some(storage);
                }
            }
        }
    }
    if space >= 0 {
        H5Sclose(space);
    }
    if datatype >= 0 {
        H5Tclose(datatype);
    }
    if plist >= 0 {
        H5Pclose(plist);
    }
    H5Dclose(dataset);
    found
}

/// Whether element `index` (row-major) read by HDF5 equals, bit for bit,
/// the four bytes at the place this module would read it from.
///
/// # Safety
/// As `dataset_storage`; `dataset` and `space` are its open ids.
unsafe fn element_agrees(dataset: hdf5_metno_sys::h5i::hid_t, space: hdf5_metno_sys::h5i::hid_t, storage: &Storage, index: usize, file: &std::fs::File) -> bool {
    use hdf5_metno_sys::h5d::H5Dread;
    use hdf5_metno_sys::h5p::H5P_DEFAULT;
    use hdf5_metno_sys::h5s::{H5S_seloper_t, H5Sclose, H5Screate_simple, H5Sselect_hyperslab};
    use hdf5_metno_sys::h5t::H5T_NATIVE_FLOAT;
    let mut start = vec![0u64; storage.dimensions.len()];
    let mut rest = index;
    for (d, &length) in storage.dimensions.iter().enumerate().rev() {
        start[d] = (rest % length) as u64;
        rest /= length;
    }
    let ones = vec![1u64; start.len()];
    if H5Sselect_hyperslab(space, H5S_seloper_t::H5S_SELECT_SET, start.as_ptr(), std::ptr::null(), ones.as_ptr(), std::ptr::null()) < 0 {
        return false;
    }
    let one = [1u64];
    let memory = H5Screate_simple(1, one.as_ptr(), std::ptr::null());
    if memory < 0 {
        return false;
    }
    let mut by_hdf5 = 0f32;
    let read = H5Dread(dataset, *H5T_NATIVE_FLOAT, memory, space, H5P_DEFAULT, (&mut by_hdf5 as *mut f32).cast());
    H5Sclose(memory);
    let mut bytes = [0u8; 4];
    let here = read_exact_at(file, &mut bytes, storage.offset + 4 * index as u64).is_ok();
    read >= 0 && here && f32::from_le_bytes(bytes).to_bits() == by_hdf5.to_bits()
}

fn read_exact_at(file: &std::fs::File, buffer: &mut [u8], offset: u64) -> std::io::Result<()> {
    #[cfg(unix)]
    {
        std::os::unix::fs::FileExt::read_exact_at(file, buffer, offset)
    }
    #[cfg(not(unix))]
    {
        let _ = (file, buffer, offset);
        Err(std::io::Error::other("direct reads need a Unix system"))
    }
}

/// Fewest values per contiguous piece `read_block` reads with one system
/// call (else it leaves the read to netCDF-C).
const MIN_PIECE: usize = 64;

/// Bytes per task of `read_block`: large enough that a `pread` costs far
/// more than handing the task out, small enough to share the work among
/// the threads of a read of a few levels.
const TASK_BYTES: usize = 1 << 20;

/// Reads the selection given per file dimension as the increasing indices
/// wanted, in file order, into a [time, level, latitude, longitude] array
/// of `shape` (the caller maps file dimensions onto those axes in the same
/// order, so the file's row-major order of the selection is the array's).
///
/// None when an index is outside the stored shape, the indices are not
/// increasing, or their count does not match `shape` (the caller then reads
/// through netCDF-C); an error when the file cannot be read (shortened
/// since it was opened, or the system refuses).
pub(super) fn read_block(path: &Path, storage: &Storage, indices: &[&[usize]], shape: (usize, usize, usize, usize)) -> Option<std::io::Result<Array4<f32>>> {
    let rank = storage.dimensions.len();
    if indices.len() != rank || indices.iter().zip(&storage.dimensions).any(|(wanted, &length)| wanted.windows(2).any(|w| w[1] <= w[0]) || wanted.last().is_some_and(|&i| i >= length)) {
        return None;
    }
    let selected: usize = indices.iter().map(|w| w.len()).product();
    if selected != shape.0 * shape.1 * shape.2 * shape.3 {
        return None;
    }
    // The selection is a sequence of pieces, each `piece` values long and
    // contiguous in the file: the innermost dimensions taken whole, then
    // one contiguous run of the next; the outer dimensions (0..inner) list
    // the pieces.
    let contiguous = |w: &[usize]| w.windows(2).all(|p| p[1] == p[0] + 1);
    let mut inner = rank;
    let mut piece = 1usize;
    while inner > 0 {
        let d = inner - 1;
        if !contiguous(indices[d]) {
            break;
        }
        piece *= indices[d].len();
        inner = d;
        if indices[d].len() != storage.dimensions[d] {
            break;
        }
    }
    // Pieces of part of a row (a box across the seam of the longitudes)
    // would cost a system call per value or few: netCDF-C reads those.
    if piece < MIN_PIECE && selected > piece {
        return None;
    }
    let file = match std::fs::File::open(path) {
        Ok(f) => f,
        Err(e) => return Some(Err(e)),
    };
    let mut values: Vec<f32> = Vec::with_capacity(selected);
    if selected == 0 {
        return Array4::from_shape_vec(shape, values).ok().map(Ok);
    }
    // Element strides of the file's dimensions (row-major).
    let mut strides = vec![1usize; rank];
    for d in (0..rank - 1).rev() {
        strides[d] = strides[d + 1] * storage.dimensions[d + 1];
    }
    // The file offset (in values) of piece number `n`: its index along each
    // outer dimension, from the last.
    let piece_start = |mut n: usize| -> usize {
        let mut at: usize = (inner..rank).map(|d| indices[d][0] * strides[d]).sum();
        for d in (0..inner).rev() {
            at += indices[d][n % indices[d].len()] * strides[d];
            n /= indices[d].len();
        }
        at
    };
    // Tasks of `per_task` values of the array each, in order; a task reads
    // the parts of the pieces that fall in it, one `pread` per part.
    let per_task = TASK_BYTES / 4;
    let base = storage.offset;
    let spare = &mut values.spare_capacity_mut()[..selected];
    let outcome = spare.par_chunks_mut(per_task).enumerate().try_for_each(|(task, chunk)| -> std::io::Result<()> {
        let mut done = 0usize;
        while done < chunk.len() {
            let at = task * per_task + done;
            let (n, within) = (at / piece, at % piece);
            let count = (piece - within).min(chunk.len() - done);
            let offset = base + 4 * (piece_start(n) + within) as u64;
            // SAFETY: `count` values from `done` lie inside `chunk`, memory
            // this task alone holds; `pread_all` only writes into it.
            unsafe { pread_all(&file, chunk[done..].as_mut_ptr().cast(), 4 * count, offset)? };
            done += count;
        }
        Ok(())
    });
    if let Err(e) = outcome {
        return Some(Err(e));
    }
    // SAFETY: every value of the first `selected` was written just above
    // (the tasks cover them all, each part read whole or an error returned).
    unsafe { values.set_len(selected) };
    Array4::from_shape_vec(shape, values).ok().map(Ok)
}

/// Reads exactly `length` bytes at `offset` of `file` into `buffer`, going
/// on after partial reads; an error at the end of the file (the file is
/// shorter than its header says) or when the system refuses.
///
/// # Safety
/// `buffer` is valid for writes of `length` bytes.
unsafe fn pread_all(file: &std::fs::File, buffer: *mut u8, length: usize, offset: u64) -> std::io::Result<()> {
    #[cfg(unix)]
    {
        use std::os::fd::AsRawFd;
        let mut done = 0usize;
        while done < length {
            let read = libc::pread(file.as_raw_fd(), buffer.add(done).cast(), length - done, (offset + done as u64) as libc::off_t);
            match read {
                0 => return Err(std::io::Error::new(std::io::ErrorKind::UnexpectedEof, "the file ends before the variable's values")),
                r if r < 0 => {
                    let e = std::io::Error::last_os_error();
                    if e.kind() != std::io::ErrorKind::Interrupted {
                        return Err(e);
                    }
                }
                r => done += r as usize,
            }
        }
        Ok(())
    }
    #[cfg(not(unix))]
    {
        let _ = (file, buffer, length, offset);
        Err(std::io::Error::other("direct reads need a Unix system"))
    }
}
