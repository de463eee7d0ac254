//! The few netCDF-C calls the writer needs, made directly, so that a file
//! can be built either on disk (`nc_create`) or in memory and its bytes
//! taken: the netcdf crate offers no way to do the latter.
//!
//! In memory: a netCDF-4 file is created "diskless" (`NC_DISKLESS` without
//! `NC_PERSIST`: HDF5's core driver, nothing on disk), and after `nc_sync`
//! (netCDF-C writes all its metadata, HDF5 flushes) its bytes are written
//! to the caller's file straight from the core driver's own memory, with
//! the superblock as a closed file has it (`close_into_file`); should
//! anything about that memory be other than expected, the image is copied
//! out with HDF5's `H5Fget_file_image` instead, which gives the same bytes
//! (both as the file would be on disk). Not `nc_create_mem`/`nc_close_memio`: netCDF-C
//! builds that image without HDF5's link creation order, and netCDF-C then
//! opens such a file read-only only ("Can't write file" on append); and
//! for netCDF-3 files it hands over its whole allocation, longer than the
//! file. NetCDF-3 files are therefore not built in memory.
//!
//! Every call holds netCDF's global lock (`netcdf_sys::libnetcdf_lock`, the
//! one the netcdf crate takes), since netCDF-C is not thread-safe and a
//! program may read files through the crate on other threads meanwhile.
//! Functions fail with netCDF-C's own message (`nc_strerror`) and the name
//! of what was being defined or written; none panics on a netCDF error.

use std::ffi::{c_int, CStr, CString};

use netcdf_sys as sys;

use super::file_check::HDF5_SIGNATURE;

fn check(status: c_int, what: impl FnOnce() -> String) -> Result<(), String> {
    if status == sys::NC_NOERR {
        return Ok(());
    }
    // SAFETY: nc_strerror returns a pointer to a static, NUL-terminated string.
    let message = unsafe { CStr::from_ptr(sys::nc_strerror(status)) }.to_string_lossy().into_owned();
    Err(format!("{}: {message}", what()))
}

fn c_name(name: &str) -> Result<CString, String> {
    CString::new(name).map_err(|_| format!("the name {name:?} holds a NUL character"))
}

/// Variable storage types used by the writer.
#[derive(Debug, Clone, Copy)]
pub enum Kind {
    Float,
    Double,
    Int,
}

impl Kind {
    fn nc_type(self) -> sys::nc_type {
        match self {
            Kind::Float => sys::NC_FLOAT,
            Kind::Double => sys::NC_DOUBLE,
            Kind::Int => sys::NC_INT,
        }
    }
}

/// The id netCDF gives the dataset's global attributes.
pub const GLOBAL: c_int = sys::NC_GLOBAL;

/// A netCDF file being defined and written. Dropped without `close` or
/// `close_into_file`, it is aborted (`nc_abort`): an on-disk file is then
/// incomplete and the caller, who writes under a temporary name, removes it.
pub struct RawFile {
    ncid: c_int,
    open: bool,
    /// Whether the file lives in memory (netCDF-4, diskless).
    in_memory: bool,
    /// The name given at creation (to find the HDF5 file of a diskless one).
    name: CString,
}


/// A file's bytes, built in memory, in a block aligned to
/// `IMAGE_ALIGNMENT` (so it can go to a direct write as it is) and padded
/// with zeros to a multiple of it.
pub struct Image {
    memory: *mut u8,
    size: usize,
    layout: std::alloc::Layout,
}

/// Alignment of the images this module allocates (a disk block; see
/// `atomic::write_all_direct`).
pub const IMAGE_ALIGNMENT: usize = 4096;

// SAFETY: the image owns its block outright; nothing else refers to it.
unsafe impl Send for Image {}

impl Image {
    pub fn bytes(&self) -> &[u8] {
        if self.size == 0 || self.memory.is_null() {
            return &[];
        }
        // SAFETY: `size` initialised bytes at `memory`, owned by this value.
        unsafe { std::slice::from_raw_parts(self.memory, self.size) }
    }
}

impl Drop for Image {
    fn drop(&mut self) {
        // SAFETY: allocated in `hdf5_image` with this layout.
        unsafe { std::alloc::dealloc(self.memory, self.layout) }
    }
}

fn mode(netcdf4: bool) -> c_int {
    // Classic: netCDF-3 CDF-1, as `netcdf::Options::empty()` gave before.
    if netcdf4 {
        sys::NC_NETCDF4 | sys::NC_CLOBBER
    } else {
        sys::NC_CLOBBER
    }
}

impl RawFile {
    /// Creates (or truncates) the file at `path`.
    pub fn create(path: &std::path::Path, netcdf4: bool) -> Result<RawFile, String> {
        use std::os::unix::ffi::OsStrExt;
        let c_path = CString::new(path.as_os_str().as_bytes()).map_err(|_| "the path holds a NUL character".to_string())?;
        let mut ncid = -1;
        let _lock = sys::libnetcdf_lock.lock();
        // SAFETY: valid NUL-terminated path and out pointer.
        check(unsafe { sys::nc_create(c_path.as_ptr(), mode(netcdf4), &mut ncid) }, || "creating the file".into())?;
        Ok(RawFile { ncid, open: true, in_memory: false, name: c_path })
    }

    /// Creates a netCDF-4 file in memory (see the module comment);
    /// `expected_size` (bytes) sizes its allocations so the image seldom
    /// grows. Nothing is created on disk; the name, made unique here, serves
    /// only to find the file again inside HDF5.
    pub fn create_in_memory(expected_size: usize) -> Result<RawFile, String> {
        static COUNT: std::sync::atomic::AtomicU64 = std::sync::atomic::AtomicU64::new(0);
        let unique = format!("baroc-image-{}-{}.nc", std::process::id(), COUNT.fetch_add(1, std::sync::atomic::Ordering::Relaxed));
        let c_path = c_name(&unique)?;
        let mut ncid = -1;
        let mut chunk_size_hint = 0;
        let _lock = sys::libnetcdf_lock.lock();
        // SAFETY: valid NUL-terminated name and out pointers.
        check(
            unsafe { sys::nc__create(c_path.as_ptr(), mode(true) | sys::NC_DISKLESS, expected_size, &mut chunk_size_hint, &mut ncid) },
            || "creating the file in memory".into(),
        )?;
        Ok(RawFile { ncid, open: true, in_memory: true, name: c_path })
    }

    pub fn add_dimension(&mut self, name: &str, length: usize) -> Result<c_int, String> {
        let c = c_name(name)?;
        let mut id = -1;
        let _lock = sys::libnetcdf_lock.lock();
        // SAFETY: open file, valid name and out pointer.
        check(unsafe { sys::nc_def_dim(self.ncid, c.as_ptr(), length, &mut id) }, || format!("defining dimension {name}"))?;
        Ok(id)
    }

    pub fn add_variable(&mut self, name: &str, kind: Kind, dimensions: &[c_int]) -> Result<c_int, String> {
        let c = c_name(name)?;
        let mut id = -1;
        let _lock = sys::libnetcdf_lock.lock();
        // SAFETY: open file, valid name, `dimensions.len()` ids, out pointer.
        check(
            unsafe { sys::nc_def_var(self.ncid, c.as_ptr(), kind.nc_type(), dimensions.len() as c_int, dimensions.as_ptr(), &mut id) },
            || format!("defining variable {name}"),
        )?;
        Ok(id)
    }

    /// A text attribute of variable `variable` (or `GLOBAL`).
    pub fn put_text(&mut self, variable: c_int, name: &str, value: &str) -> Result<(), String> {
        let c = c_name(name)?;
        let _lock = sys::libnetcdf_lock.lock();
        // SAFETY: `value.len()` bytes at `value.as_ptr()`; netCDF copies them.
        check(unsafe { sys::nc_put_att_text(self.ncid, variable, c.as_ptr(), value.len(), value.as_ptr().cast()) }, || format!("writing attribute {name}"))
    }

    pub fn put_doubles(&mut self, variable: c_int, name: &str, values: &[f64]) -> Result<(), String> {
        let c = c_name(name)?;
        let _lock = sys::libnetcdf_lock.lock();
        // SAFETY: `values.len()` doubles; netCDF copies them.
        check(unsafe { sys::nc_put_att_double(self.ncid, variable, c.as_ptr(), sys::NC_DOUBLE, values.len(), values.as_ptr()) }, || format!("writing attribute {name}"))
    }

    pub fn put_float(&mut self, variable: c_int, name: &str, value: f32) -> Result<(), String> {
        let c = c_name(name)?;
        let _lock = sys::libnetcdf_lock.lock();
        // SAFETY: one float; netCDF copies it.
        check(unsafe { sys::nc_put_att_float(self.ncid, variable, c.as_ptr(), sys::NC_FLOAT, 1, &value) }, || format!("writing attribute {name}"))
    }

    /// No pre-filling of the variable's storage: the caller writes every
    /// value (netCDF-C `nc_def_var_fill` with no_fill set).
    pub fn set_no_fill(&mut self, variable: c_int) -> Result<(), String> {
        let _lock = sys::libnetcdf_lock.lock();
        // SAFETY: open file in define mode; a null fill value is allowed with no_fill.
        check(unsafe { sys::nc_def_var_fill(self.ncid, variable, 1, std::ptr::null()) }, || "setting no-fill mode".into())
    }

    /// Leaves define mode (needed by netCDF-3 files before data are written;
    /// netCDF-4 files leave it by themselves).
    pub fn end_definitions(&mut self) -> Result<(), String> {
        let _lock = sys::libnetcdf_lock.lock();
        // SAFETY: open file.
        check(unsafe { sys::nc_enddef(self.ncid) }, || "leaving define mode".into())
    }

    /// Writes `values` to a one-dimensional double variable from its start
    /// (a coordinate); netCDF-C refuses more values than the variable holds.
    pub fn put_doubles_from_start(&mut self, variable: c_int, name: &str, values: &[f64]) -> Result<(), String> {
        let (start, count) = ([0usize], [values.len()]);
        let _lock = sys::libnetcdf_lock.lock();
        // SAFETY: `count[0]` doubles at `values`; netCDF checks the block against the variable.
        check(unsafe { sys::nc_put_vara_double(self.ncid, variable, start.as_ptr(), count.as_ptr(), values.as_ptr()) }, || format!("writing {name}"))
    }

    /// Writes the hyperslab of a float variable at `start` with extent `count`
    /// from `values` (row-major, `count`'s product long).
    pub fn put_floats(&mut self, variable: c_int, name: &str, start: &[usize], count: &[usize], values: &[f32]) -> Result<(), String> {
        if start.len() != count.len() || count.iter().product::<usize>() != values.len() {
            return Err(format!("writing {name}: {} values for a block of {count:?}", values.len()));
        }
        let _lock = sys::libnetcdf_lock.lock();
        // SAFETY: `values` holds the block's values (checked above); netCDF checks the block against the variable.
        check(unsafe { sys::nc_put_vara_float(self.ncid, variable, start.as_ptr(), count.as_ptr(), values.as_ptr()) }, || format!("writing {name}"))
    }

    /// Closes an on-disk file (all data reach the file here).
    pub fn close(mut self) -> Result<(), String> {
        self.open = false;
        let _lock = sys::libnetcdf_lock.lock();
        // SAFETY: open file, closed once.
        check(unsafe { sys::nc_close(self.ncid) }, || "closing the file".into())
    }

    /// Finishes a file created with `create_in_memory`, writes its bytes as
    /// the whole content of the file at `path` (`atomic::write_all_direct`
    /// and `write_all_direct_with_head`: past the page cache where allowed),
    /// and closes it. The bytes are those of the same file written to disk
    /// by netCDF-C (tests/writer_paths.rs). Fails with netCDF-C's message,
    /// HDF5's refusal, or the system's error writing `path` (whose content
    /// is then undefined: the caller writes under a temporary name).
    pub fn close_into_file(self, path: &std::path::Path) -> Result<ImageWritten, String> {
        self.close_into_file_by(path, true)
    }

    /// `close_into_file`, the route from the driver's memory tried only if
    /// `from_driver_memory` (false: the copying fallback, for the tests).
    fn close_into_file_by(mut self, path: &std::path::Path, from_driver_memory: bool) -> Result<ImageWritten, String> {
        if !self.in_memory {
            return Err("the file is on disk, not in memory".into());
        }
        // Held until the file is closed: no HDF5 call can move or change the
        // core driver's memory while it is being written out.
        let _lock = sys::libnetcdf_lock.lock();
        // netCDF-C writes everything it still holds (dimension scales,
        // attributes) and flushes HDF5.
        // SAFETY: open file.
        check(unsafe { sys::nc_sync(self.ncid) }, || "finishing the file in memory".into())?;
        let file = hdf5_file_named(&self.name)?;
        let size = hdf5_image_size(file)?;
        let io_error = |e: std::io::Error| crate::atomic::plain_os_error(&e);
        // SAFETY: the lock is held and nothing else holds this file's id, so
        // no HDF5 call runs until the memory is no longer used (below).
        let own = match from_driver_memory {
            true => unsafe { core_driver_memory(file, size) }.and_then(|memory| superblock_as_closed(memory).map(|head| (memory, head))),
            false => None,
        };
        let written = match own {
            Some((memory, head)) => {
                let started = std::time::Instant::now();
                crate::atomic::write_all_direct_with_head(path, memory, &head).map_err(io_error)?;
                ImageWritten { route: ImageRoute::DriverMemory, bytes: size, writing: started.elapsed() }
            }
            None => {
                let image = hdf5_image(file, size)?;
                let started = std::time::Instant::now();
                crate::atomic::write_all_direct(path, image.bytes()).map_err(io_error)?;
                ImageWritten { route: ImageRoute::Copied, bytes: size, writing: started.elapsed() }
            }
        };
        self.open = false;
        // Diskless and not persisted: closing frees the memory, writes nothing.
        // SAFETY: open file, closed once.
        check(unsafe { sys::nc_close(self.ncid) }, || "closing the file in memory".into())?;
        Ok(written)
    }
}

/// Which way an image built in memory reached its file (`close_into_file`).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ImageRoute {
    /// Straight from HDF5's core driver memory, through a small reused
    /// buffer, the superblock patched on the way.
    DriverMemory,
    /// Copied out whole with `H5Fget_file_image` first (the driver's memory
    /// was not as expected).
    Copied,
}

/// What `close_into_file` did.
#[derive(Debug, Clone, Copy)]
pub struct ImageWritten {
    pub route: ImageRoute,
    /// The file's length.
    pub bytes: usize,
    /// Time spent putting the bytes in the file (the rest of the call was
    /// HDF5 finishing the image and, by the copying route, the copy).
    pub writing: std::time::Duration,
}

/// The id HDF5 gives the open file created under `name` (a diskless file
/// is found by name among HDF5's open files; netCDF-C does not give its
/// HDF5 id). Fails if HDF5 cannot list its files or none has that name.
/// The caller holds netCDF's lock.
fn hdf5_file_named(name: &CStr) -> Result<hdf5_metno_sys::h5i::hid_t, String> {
    use hdf5_metno_sys::h5f::{H5Fget_name, H5Fget_obj_count, H5Fget_obj_ids, H5F_OBJ_ALL, H5F_OBJ_FILE};
    use hdf5_metno_sys::h5i::hid_t;
    // SAFETY (of every call in this function): plain HDF5 queries on ids
    // HDF5 itself listed, into buffers of the sizes passed.
    let count = unsafe { H5Fget_obj_count(H5F_OBJ_ALL as hid_t, H5F_OBJ_FILE) };
    if count < 0 {
        return Err("listing the open HDF5 files failed".into());
    }
    let mut ids: Vec<hid_t> = vec![0; count as usize];
    let listed = unsafe { H5Fget_obj_ids(H5F_OBJ_ALL as hid_t, H5F_OBJ_FILE, ids.len(), ids.as_mut_ptr()) };
    ids.truncate(listed.max(0) as usize);
    let wanted = name.to_bytes();
    let mut buffer = vec![0u8; wanted.len() + 2];
    let file = ids.into_iter().find(|&id| {
        let length = unsafe { H5Fget_name(id, buffer.as_mut_ptr().cast(), buffer.len()) };
        length >= 0 && length as usize == wanted.len() && &buffer[..wanted.len()] == wanted
    });
    file.ok_or_else(|| "the file built in memory was not found among HDF5's open files".to_string())
}

/// The length of the file's image: HDF5's end of allocated space, which
/// `H5Fget_file_image` returns when given no buffer (HDF5 reference manual,
/// H5Fget_file_image, from memory; H5Fint.c `H5F__get_file_image` returns
/// the end of allocation). Fails if HDF5 gives none.
fn hdf5_image_size(file: hdf5_metno_sys::h5i::hid_t) -> Result<usize, String> {
    // SAFETY: a query on an open file id; no buffer is passed.
    let size = unsafe { hdf5_metno_sys::h5f::H5Fget_file_image(file, std::ptr::null_mut(), 0) };
    if size <= 0 {
        return Err("HDF5 gave no image of the file built in memory".into());
    }
    Ok(size as usize)
}

/// The first `size` bytes of the memory HDF5's core driver keeps file
/// `file` in (valid while the caller holds netCDF's lock and makes no HDF5
/// call on the file), or None if the file is not served by the core driver
/// or the driver gives no memory. None is not an error: the caller then
/// copies the image out instead.
///
/// Source: `H5Fget_vfd_handle` gives the handle the file's virtual file
/// driver works with (HDF5 reference manual, from memory); for the
/// core driver, HDF5's H5FDcore.c (`H5FD__core_get_handle`, 1.8 to 1.14)
/// hands back the address of the driver's memory pointer (`&file->mem`),
/// checked against `H5Fget_file_image`'s copy by this module's tests. The
/// memory holds at least `size` bytes after a flush: `H5Fflush` truncates
/// the core driver's file to its end of allocation rounded up to the
/// driver's increment (H5Fint.c `H5F__flush_phase2` calls `H5FD_truncate`;
/// H5FDcore.c `H5FD__core_truncate` grows the memory to that length).
///
/// # Safety
/// `file` is an open HDF5 file id; the caller holds netCDF's lock until it
/// is done with the returned bytes, and makes no HDF5 call on the file
/// meanwhile.
unsafe fn core_driver_memory<'a>(file: hdf5_metno_sys::h5i::hid_t, size: usize) -> Option<&'a [u8]> {
    use hdf5_metno_sys::h5f::{H5Fget_access_plist, H5Fget_vfd_handle};
    use hdf5_metno_sys::h5p::{H5Pclose, H5Pcreate, H5Pget_driver, H5Pset_fapl_core, H5P_CLS_FILE_ACCESS, H5P_DEFAULT};
    // The core driver's id, from an access list HDF5 itself set to it (the
    // public way on every HDF5 version; `H5FD_CORE` is a macro over a
    // function or a global, depending on the version).
    // SAFETY (of the property-list calls): ids HDF5 returned, closed once.
    let core = unsafe {
        let list = H5Pcreate(*H5P_CLS_FILE_ACCESS);
        if list < 0 {
            return None;
        }
        let driver = if H5Pset_fapl_core(list, 4096, 0) < 0 { -1 } else { H5Pget_driver(list) };
        H5Pclose(list);
        driver
    };
    let used = unsafe {
        let list = H5Fget_access_plist(file);
        if list < 0 {
            return None;
        }
        let driver = H5Pget_driver(list);
        H5Pclose(list);
        driver
    };
    if core < 0 || used != core {
        return None;
    }
    let mut handle: *mut std::ffi::c_void = std::ptr::null_mut();
    // SAFETY: an open file id and an out pointer.
    if unsafe { H5Fget_vfd_handle(file, H5P_DEFAULT, &mut handle) } < 0 || handle.is_null() {
        return None;
    }
    // SAFETY: for the core driver the handle is the address of its memory
    // pointer (see above), readable and aligned for a pointer.
    let memory = unsafe { *(handle as *const *const u8) };
    if memory.is_null() {
        return None;
    }
    // SAFETY: at least `size` bytes at `memory` (see above), unchanged while
    // the caller's conditions hold.
    Some(unsafe { std::slice::from_raw_parts(memory, size) })
}

/// The superblock of an open file's image (`image`, HDF5's own memory) as
/// the same file has it once closed: the file consistency flags cleared
/// (a closed file is marked neither open for writing nor for SWMR writing)
/// and the checksum computed again over the changed bytes. Returned as a
/// copy of the image's first bytes, up to and including the checksum; the
/// image itself is not changed.
///
/// Layout of superblock versions 2 and 3 (HDF5 File Format Specification,
/// version 3.0, "Superblock", Version 2/3): signature (8 bytes), version,
/// size of offsets O, size of lengths, file consistency flags (1 byte
/// each), base address, superblock extension address, end of file address,
/// root group object header address (O bytes each, little-endian), then a
/// Jenkins lookup3 checksum of all the bytes before it (4 bytes). Flags:
/// bit 0 file open for write access, bit 2 open for SWMR writing (version
/// 3); no other bit is defined.
///
/// None, so that the caller copies the image out instead, whenever
/// anything is not as expected: not an HDF5 signature at offset 0, a
/// superblock version other than 2 or 3, a size of offsets the
/// specification does not allow, a base address other than 0, an end of
/// file address other than the image's length, undefined flags, or a
/// stored checksum that does not match the bytes (so this was not the
/// superblock HDF5 wrote).
pub fn superblock_as_closed(image: &[u8]) -> Option<Vec<u8>> {
    if image.len() < 12 || image[..8] != HDF5_SIGNATURE || !matches!(image[8], 2 | 3) {
        return None;
    }
    let offsets = image[9] as usize;
    if !matches!(offsets, 2 | 4 | 8 | 16 | 32) {
        return None;
    }
    let covered = 12 + 4 * offsets;
    if image.len() < covered + 4 {
        return None;
    }
    let address = |i: usize| -> Option<u64> {
        let field = &image[12 + i * offsets..12 + (i + 1) * offsets];
        // Addresses wider than 8 bytes must fit in 8 to be followed here.
        if field[8.min(offsets)..].iter().any(|&b| b != 0) {
            return None;
        }
        Some(field[..8.min(offsets)].iter().rev().fold(0u64, |a, &b| (a << 8) | b as u64))
    };
    const FLAGS: usize = 11;
    const DEFINED_FLAGS: u8 = 0b101;
    if address(0)? != 0 || address(2)? != image.len() as u64 || image[FLAGS] & !DEFINED_FLAGS != 0 {
        return None;
    }
    let stored = u32::from_le_bytes(image[covered..covered + 4].try_into().expect("four bytes"));
    if lookup3(&image[..covered], 0) != stored {
        return None;
    }
    let mut head = image[..covered + 4].to_vec();
    head[FLAGS] = 0;
    let checksum = lookup3(&head[..covered], 0);
    head[covered..].copy_from_slice(&checksum.to_le_bytes());
    Some(head)
}

/// The image of the open HDF5 file `file`, `size` bytes (`hdf5_image_size`),
/// copied out with `H5Fget_file_image` into a block aligned to
/// `IMAGE_ALIGNMENT` and padded with zeros to a multiple of it. HDF5 gives
/// the bytes as the file would hold them if closed now (it clears a
/// writer's status flags in the copy; the checksum is restored here). Fails
/// if HDF5 cannot copy it. The caller holds netCDF's lock.
fn hdf5_image(file: hdf5_metno_sys::h5i::hid_t, size: usize) -> Result<Image, String> {
    let padded = size.div_ceil(IMAGE_ALIGNMENT) * IMAGE_ALIGNMENT;
    let layout = std::alloc::Layout::from_size_align(padded, IMAGE_ALIGNMENT).map_err(|e| e.to_string())?;
    // SAFETY: non-zero size; the block is zeroed, so every byte is initialised.
    let memory = unsafe { std::alloc::alloc_zeroed(layout) };
    if memory.is_null() {
        std::alloc::handle_alloc_error(layout);
    }
    let image = Image { memory, size, layout };
    // SAFETY: an open file id and a buffer of `size` bytes.
    let copied = unsafe { hdf5_metno_sys::h5f::H5Fget_file_image(file, memory.cast(), size) };
    if copied < 0 || copied as usize != size {
        return Err("HDF5 could not copy the image of the file built in memory".into());
    }
    // SAFETY: `size` bytes at `memory`, owned by `image`, not aliased.
    restore_superblock_checksum(unsafe { std::slice::from_raw_parts_mut(memory, size) });
    Ok(image)
}

/// HDF5 1.10's `H5Fget_file_image` clears the writer's status flags in the
/// copied superblock but leaves its checksum as it was, so HDF5 would refuse
/// the file ("incorrect metadata checksum"). Superblocks of versions 2 and 3
/// (HDF5 File Format Specification, "Superblock", version 2) end with a
/// Jenkins lookup3 checksum of all bytes before it: signature (8), version,
/// sizes of offsets and lengths, flags (1 each), then four addresses (base,
/// superblock extension, end of file, root group object header). This
/// recomputes it; versions 0 and 1 carry no checksum and are left alone.
/// With it, the image is byte for byte the file netCDF-C writes to disk
/// (tests/writer_paths.rs).
pub fn restore_superblock_checksum(image: &mut [u8]) {
    if image.len() < 12 || image[..8] != HDF5_SIGNATURE || !matches!(image[8], 2 | 3) {
        return;
    }
    let covered = 12 + 4 * image[9] as usize;
    if image.len() < covered + 4 {
        return;
    }
    let checksum = lookup3(&image[..covered], 0);
    image[covered..covered + 4].copy_from_slice(&checksum.to_le_bytes());
}

/// Bob Jenkins' lookup3 hash (`hashlittle`, lookup3.c, 2006, public
/// domain), byte by byte as HDF5's `H5_checksum_lookup3` computes it.
pub fn lookup3(key: &[u8], initial: u32) -> u32 {
    fn mix(a: &mut u32, b: &mut u32, c: &mut u32) {
        *a = a.wrapping_sub(*c);
        *a ^= c.rotate_left(4);
        *c = c.wrapping_add(*b);
        *b = b.wrapping_sub(*a);
        *b ^= a.rotate_left(6);
        *a = a.wrapping_add(*c);
        *c = c.wrapping_sub(*b);
        *c ^= b.rotate_left(8);
        *b = b.wrapping_add(*a);
        *a = a.wrapping_sub(*c);
        *a ^= c.rotate_left(16);
        *c = c.wrapping_add(*b);
        *b = b.wrapping_sub(*a);
        *b ^= a.rotate_left(19);
        *a = a.wrapping_add(*c);
        *c = c.wrapping_sub(*b);
        *c ^= b.rotate_left(4);
        *b = b.wrapping_add(*a);
    }
    fn last(a: &mut u32, b: &mut u32, c: &mut u32) {
        *c ^= *b;
        *c = c.wrapping_sub(b.rotate_left(14));
        *a ^= *c;
        *a = a.wrapping_sub(c.rotate_left(11));
        *b ^= *a;
        *b = b.wrapping_sub(a.rotate_left(25));
        *c ^= *b;
        *c = c.wrapping_sub(b.rotate_left(16));
        *a ^= *c;
        *a = a.wrapping_sub(c.rotate_left(4));
        *b ^= *a;
        *b = b.wrapping_sub(a.rotate_left(14));
        *c ^= *b;
        *c = c.wrapping_sub(b.rotate_left(24));
    }
    let word = |k: &[u8]| k.iter().enumerate().fold(0u32, |w, (i, &byte)| w.wrapping_add((byte as u32) << (8 * i)));
    let start = 0xdead_beef_u32.wrapping_add(key.len() as u32).wrapping_add(initial);
    let (mut a, mut b, mut c) = (start, start, start);
    let mut k = key;
    while k.len() > 12 {
        a = a.wrapping_add(word(&k[0..4]));
        b = b.wrapping_add(word(&k[4..8]));
        c = c.wrapping_add(word(&k[8..12]));
        mix(&mut a, &mut b, &mut c);
        k = &k[12..];
    }
    if k.is_empty() {
        return c;
    }
    a = a.wrapping_add(word(&k[..k.len().min(4)]));
    if k.len() > 4 {
        b = b.wrapping_add(word(&k[4..k.len().min(8)]));
    }
    if k.len() > 8 {
        c = c.wrapping_add(word(&k[8..]));
    }
    last(&mut a, &mut b, &mut c);
    c
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Check values printed by lookup3.c's own self-test (driver5) for
    /// `hashlittle` (value from memory of that file's comments), and the
    /// empty key, which returns the starting value by the algorithm's
    /// definition.
    #[test]
    fn lookup3_matches_its_published_check_values() {
        assert_eq!(lookup3(b"", 0), 0xdead_beef);
        assert_eq!(lookup3(b"Four score and seven years ago", 0), 0x1777_0551);
        assert_eq!(lookup3(b"Four score and seven years ago", 1), 0xcd62_8161);
    }

    /// A version 2/3 superblock laid out as the HDF5 File Format
    /// Specification ("Superblock", version 2) says, 8-byte offsets, for an
    /// image of `length` bytes, with its checksum computed over the bytes.
    fn superblock(version: u8, flags: u8, length: u64) -> Vec<u8> {
        let mut bytes = HDF5_SIGNATURE.to_vec();
        bytes.extend([version, 8, 8, flags]);
        for address in [0u64, u64::MAX, length, 48] {
            bytes.extend(address.to_le_bytes());
        }
        let checksum = lookup3(&bytes, 0);
        bytes.extend(checksum.to_le_bytes());
        bytes.resize(length as usize, 0);
        bytes
    }

    #[test]
    fn the_superblock_is_restored_as_a_closed_file_has_it() {
        // Open for writing (and SWMR writing): flags cleared, checksum
        // that of the cleared bytes; equal to a superblock written closed.
        for (version, flags) in [(2, 0), (3, 1), (3, 5)] {
            let open = superblock(version, flags, 100);
            let closed = superblock(version, 0, 100);
            assert_eq!(superblock_as_closed(&open).unwrap(), closed[..48]);
        }
        // Anything unexpected: None (the caller copies the image instead).
        let good = superblock(3, 1, 100);
        assert!(superblock_as_closed(&superblock(3, 1, 100)[..51]).is_none(), "shorter than the superblock");
        let mut stale = good.clone();
        stale[11] = 0;
        assert!(superblock_as_closed(&stale).is_none(), "checksum not of these bytes");
        assert!(superblock_as_closed(&superblock(3, 2, 100)).is_none(), "undefined flag");
        assert!(superblock_as_closed(&superblock(3, 1, 100)[..99]).is_none(), "end of file address not the image's length");
        let mut version_0 = good.clone();
        version_0[8] = 0;
        assert!(superblock_as_closed(&version_0).is_none(), "version 0");
        let mut based = superblock(2, 0, 100);
        based[12] = 1;
        let checksum = lookup3(&based[..44], 0);
        based[44..48].copy_from_slice(&checksum.to_le_bytes());
        assert!(superblock_as_closed(&based).is_none(), "base address not 0");
        let mut foreign = good;
        foreign[1] = b'h';
        assert!(superblock_as_closed(&foreign).is_none(), "no HDF5 signature");
    }

    /// Both routes to the file give the same bytes, from a file large enough
    /// to go past the page cache in several chunks (`atomic::BOUNCE`).
    #[test]
    fn both_routes_write_the_same_file() {
        let build = || {
            let mut file = RawFile::create_in_memory(1 << 20).unwrap();
            let x = file.add_dimension("x", 3_000_000).unwrap();
            let v = file.add_variable("v", Kind::Float, &[x]).unwrap();
            file.set_no_fill(v).unwrap();
            file.end_definitions().unwrap();
            let values: Vec<f32> = (0..3_000_000).map(|i| (i as f32 * 0.37).sin() * 250.0).collect();
            file.put_floats(v, "v", &[0], &[3_000_000], &values).unwrap();
            file
        };
        let path = |route: &str| std::env::temp_dir().join(format!("baroc-routes-{}-{route}.nc", std::process::id()));
        crate::io::netcdf_thread::call(|| {
            let own = build().close_into_file_by(&path("own"), true).unwrap();
            let copied = build().close_into_file_by(&path("copied"), false).unwrap();
            assert_eq!((own.route, copied.route), (ImageRoute::DriverMemory, ImageRoute::Copied));
            assert!(own.bytes > 2 * crate::atomic::BOUNCE && own.bytes == copied.bytes);
        });
        assert!(std::fs::read(path("own")).unwrap() == std::fs::read(path("copied")).unwrap());
        for route in ["own", "copied"] {
            std::fs::remove_file(path(route)).unwrap();
        }
    }

    /// The core driver's memory, reached through `H5Fget_vfd_handle`, is the
    /// image `H5Fget_file_image` copies, but for the superblock, which
    /// `superblock_as_closed` gives as the copy has it (flags cleared,
    /// checksum restored); the memory itself is left unchanged.
    #[test]
    fn the_core_driver_memory_is_the_image_hdf5_copies() {
        crate::io::netcdf_thread::call(|| {
            let mut file = RawFile::create_in_memory(1 << 20).unwrap();
            let x = file.add_dimension("x", 300_000).unwrap();
            let v = file.add_variable("v", Kind::Float, &[x]).unwrap();
            file.set_no_fill(v).unwrap();
            file.put_text(v, "units", "K").unwrap();
            file.end_definitions().unwrap();
            let values: Vec<f32> = (0..300_000).map(|i| (i as f32 * 0.37).sin() * 250.0).collect();
            file.put_floats(v, "v", &[0], &[300_000], &values).unwrap();
            let _lock = sys::libnetcdf_lock.lock();
            check(unsafe { sys::nc_sync(file.ncid) }, || "sync".into()).unwrap();
            let id = hdf5_file_named(&file.name).unwrap();
            let size = hdf5_image_size(id).unwrap();
            assert!(size > 1_200_000, "{size} bytes");
            let copy = hdf5_image(id, size).unwrap();
            let memory = unsafe { core_driver_memory(id, size) }.expect("the core driver's memory");
            let before = memory.to_vec();
            let head = superblock_as_closed(memory).expect("a superblock restored");
            assert!(copy.bytes()[..head.len()] == head[..], "superblock");
            assert!(copy.bytes()[head.len()..] == memory[head.len()..], "the rest of the image");
            assert!(memory == &before[..], "HDF5's memory untouched");
            drop(_lock);
            // And that is what reaches the file, by this route.
            let path = std::env::temp_dir().join(format!("baroc-core-memory-{}.nc", std::process::id()));
            let written = file.close_into_file(&path).unwrap();
            assert_eq!(written.route, ImageRoute::DriverMemory);
            assert!(std::fs::read(&path).unwrap() == copy.bytes(), "the file is the copied image");
            std::fs::remove_file(&path).unwrap();
        });
    }
}

impl Drop for RawFile {
    fn drop(&mut self) {
        if self.open {
            let _lock = sys::libnetcdf_lock.lock();
            // SAFETY: open file, released once; its content is abandoned.
            unsafe { sys::nc_abort(self.ncid) };
        }
    }
}
