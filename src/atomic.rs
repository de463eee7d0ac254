//! Writing files so that no run leaves a half-written one: write under a
//! temporary name in the target's directory, then rename (atomic on one
//! file system). Temporary files are created private (0600); the published
//! file is made readable like any other output (0644).
//!
//! A run with several outputs (a NetCDF file and a report) checks every
//! output's folder before it computes anything (`check_writable`), writes
//! each output under a temporary name (`Outputs::stage`) and renames them
//! only when all were written (`Outputs::publish`): a run that fails leaves
//! none of them. Messages name the paths the user gave, never the
//! temporary names.

use std::path::{Path, PathBuf};

use tempfile::TempPath;

/// The folder a target is written into, as the user wrote it ("." for a
/// bare file name).
fn folder_of(target: &Path) -> &Path {
    target.parent().filter(|p| !p.as_os_str().is_empty()).unwrap_or(Path::new("."))
}

/// The folder in words: "the current folder" or "the folder /a/b".
fn folder_words(folder: &Path) -> String {
    if folder == Path::new(".") {
        "the current folder".into()
    } else {
        format!("the folder {}", folder.display())
    }
}

/// Why a file cannot be created in `folder`, in the user's words, from the
/// error the system gave (or from a look at the folder).
fn why_not_writable(folder: &Path, error: &std::io::Error) -> String {
    let words = folder_words(folder);
    match std::fs::metadata(folder) {
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => format!("{words} does not exist"),
        Ok(m) if !m.is_dir() => format!("{} is not a folder", folder.display()),
        _ => match error.kind() {
            std::io::ErrorKind::PermissionDenied => format!("{words} is not writable"),
            std::io::ErrorKind::ReadOnlyFilesystem => format!("{words} is on a read-only file system"),
            std::io::ErrorKind::StorageFull => format!("the disk holding {} is full", folder.display()),
            _ => format!("cannot create a file in {} ({})", folder.display(), plain_os_error(error)),
        },
    }
}

/// An OS error without Rust's "(os error N)" suffix, for messages.
pub fn plain_os_error(error: &std::io::Error) -> String {
    let text = error.to_string();
    match text.find(" (os error ") {
        Some(i) => text[..i].to_string(),
        None => text,
    }
}

/// Checks, before any work is done, that `target` can be written: its
/// folder exists, is a folder and takes a new file, and `target` itself is
/// not a folder. The error says what is wrong with the path the user gave
/// ("the folder /data/nodir does not exist").
pub fn check_writable(target: &Path) -> Result<(), String> {
    if target.as_os_str().is_empty() {
        return Err("the output path is empty".into());
    }
    if target.is_dir() {
        return Err(format!("{} is a folder; give a file name inside it", target.display()));
    }
    let folder = folder_of(target);
    // Creating (and at once removing) a file is the only test that holds
    // for every kind of permission, mount and file system.
    tempfile::Builder::new().prefix(".baroc-check-").tempfile_in(folder).map(drop).map_err(|e| why_not_writable(folder, &e))
}

/// A temporary path beside `target`, removed again if dropped unpublished.
/// Its error names the target's folder as the user gave it.
pub fn temporary_beside(target: &Path) -> std::io::Result<TempPath> {
    let directory = folder_of(target);
    tempfile::Builder::new()
        .prefix(".baroc-")
        .suffix(".partial")
        .tempfile_in(directory)
        .map(|f| f.into_temp_path())
        .map_err(|e| std::io::Error::new(e.kind(), why_not_writable(directory, &e)))
}

/// Gives the finished temporary file its final name and ordinary permissions.
pub fn publish(temporary: TempPath, target: &Path) -> std::io::Result<()> {
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        std::fs::set_permissions(&temporary, std::fs::Permissions::from_mode(0o644))?;
    }
    temporary.persist(target).map_err(|e| std::io::Error::new(e.error.kind(), plain_os_error(&e.error)))
}

/// Writes `bytes` as the whole content of the (temporary) file at `path`,
/// past the page cache where the system allows it (Linux `O_DIRECT`), else
/// by an ordinary write.
///
/// Why: on the virtual machines this was measured on, taking fresh
/// page-cache pages for a new file costs far more than the write itself (a
/// new 37 MB file: 0.3 s of system time through the cache, 0.03 s past it;
/// `dd` shows the same), and Baroc always writes a new file (a temporary
/// one, renamed when whole). Direct writes need block-aligned memory,
/// offsets and lengths: bytes already aligned go as they are, others
/// through a small aligned buffer in chunks, the last chunk padded with
/// zeros and the file then cut to its length. A file system that refuses
/// direct writes (EINVAL: tmpfs, some network file systems) gets the
/// ordinary write; any other error is returned.
pub fn write_all_direct(path: &Path, bytes: &[u8]) -> std::io::Result<()> {
    write_all_direct_with_head(path, bytes, &[])
}

/// As `write_all_direct`, the file's first `head.len()` bytes taken from
/// `head` instead of from `bytes` (which are only read: a file image whose
/// header must differ from the memory it lives in, such as HDF5's own
/// memory with the superblock as a closed file has it; `io::netcdf_raw`).
/// Every byte goes through one aligned buffer of at most `BOUNCE` bytes,
/// reused chunk after chunk, so memory the size of the file is never
/// allocated. Fails with `InvalidInput` if `head` is longer than `bytes` or
/// than `BOUNCE`, else as `write_all_direct`.
pub fn write_all_direct_with_head(path: &Path, bytes: &[u8], head: &[u8]) -> std::io::Result<()> {
    if head.len() > bytes.len() || head.len() > BOUNCE {
        return Err(std::io::Error::new(std::io::ErrorKind::InvalidInput, "a file header longer than the file or the write buffer"));
    }
    #[cfg(target_os = "linux")]
    if bytes.len() >= DIRECT_WRITE_MINIMUM && std::env::var_os("BAROC_DIRECT_WRITE").is_none_or(|v| v != "0") {
        match write_direct(path, bytes, head) {
            Ok(()) => return Ok(()),
            Err(e) if e.raw_os_error() == Some(libc::EINVAL) => {}
            Err(e) => return Err(e),
        }
    }
    write_ordinary(path, bytes, head)
}

/// The ordinary write of `write_all_direct_with_head` (through the page
/// cache), from the same memory: the header, then the rest as it is (the
/// kernel copies it into the page cache either way). Fails as the system
/// calls do.
fn write_ordinary(path: &Path, bytes: &[u8], head: &[u8]) -> std::io::Result<()> {
    use std::io::Write;
    let mut file = std::fs::OpenOptions::new().write(true).truncate(true).create(true).open(path)?;
    file.write_all(head)?;
    file.write_all(&bytes[head.len()..])
}

/// Below this size an ordinary write is as quick (common practice, no source).
const DIRECT_WRITE_MINIMUM: usize = 1 << 20;

/// The aligned buffer that bytes not already aligned go through on their way
/// to a direct write. Small enough to stay in the processor's cache while it
/// is reused chunk after chunk, and not itself a large fresh allocation (one
/// level of a global 0.25-degree float32 field is as large; `baroc`'s
/// allocator hands back such a block already faulted in, src/memory.rs);
/// large enough that each direct write is a few MiB (measured on the
/// project's test machine: a 37 MB file written in chunks of 1 to 36 MiB
/// took the same time within the run-to-run spread, 25-45 ms).
pub const BOUNCE: usize = 4 << 20;

#[cfg(target_os = "linux")]
fn write_direct(path: &Path, bytes: &[u8], head: &[u8]) -> std::io::Result<()> {
    use std::os::unix::fs::{FileExt, OpenOptionsExt};
    // 4096 covers devices of 512- and 4096-byte logical blocks.
    const BLOCK: usize = 4096;
    let file = std::fs::OpenOptions::new().write(true).truncate(true).create(true).custom_flags(libc::O_DIRECT).open(path)?;
    let mut offset = 0;
    if head.is_empty() && (bytes.as_ptr() as usize).is_multiple_of(BLOCK) {
        // Already aligned (an image copied out by io::netcdf_raw): its whole
        // blocks go as they are; only the tail goes through the buffer.
        let whole = bytes.len() / BLOCK * BLOCK;
        file.write_all_at(&bytes[..whole], 0)?;
        offset = whole;
    }
    if offset < bytes.len() {
        // An aligned buffer of at most BOUNCE bytes, zeroed so that every
        // byte of it is initialised before it is seen as a slice.
        let size = BOUNCE.min((bytes.len() - offset).div_ceil(BLOCK) * BLOCK);
        let layout = std::alloc::Layout::from_size_align(size, BLOCK).expect("a multiple of the block, aligned to it");
        struct Aligned(*mut u8, std::alloc::Layout);
        impl Drop for Aligned {
            fn drop(&mut self) {
                // SAFETY: allocated below with this layout.
                unsafe { std::alloc::dealloc(self.0, self.1) }
            }
        }
        // SAFETY: the layout has a non-zero size.
        let pointer = unsafe { std::alloc::alloc_zeroed(layout) };
        if pointer.is_null() {
            std::alloc::handle_alloc_error(layout);
        }
        let buffer = Aligned(pointer, layout);
        // SAFETY: `size` initialised (zeroed) bytes owned by `buffer`, used only here.
        let chunk_buffer = unsafe { std::slice::from_raw_parts_mut(buffer.0, size) };
        while offset < bytes.len() {
            let n = size.min(bytes.len() - offset);
            let padded = n.div_ceil(BLOCK) * BLOCK;
            chunk_buffer[..n].copy_from_slice(&bytes[offset..offset + n]);
            // The part of the header this chunk holds, over the bytes.
            if offset < head.len() {
                let m = (head.len() - offset).min(n);
                chunk_buffer[..m].copy_from_slice(&head[offset..offset + m]);
            }
            chunk_buffer[n..padded].fill(0);
            file.write_all_at(&chunk_buffer[..padded], offset as u64)?;
            offset += n;
        }
    }
    file.set_len(bytes.len() as u64)?;
    Ok(())
}

/// Writes bytes to `target` atomically.
pub fn write(target: &Path, bytes: &[u8]) -> std::io::Result<()> {
    let temporary = temporary_beside(target)?;
    {
        use std::io::Write;
        let mut file = std::fs::File::create(&temporary)?;
        file.write_all(bytes)?;
        file.sync_all()?;
    }
    publish(temporary, target)
}

/// The outputs of one run, published together: each is written under a
/// temporary name beside its target, and all are renamed only when every
/// one was written. Dropped unpublished (an error, a panic), the temporary
/// files are removed and no target is touched.
#[derive(Default)]
pub struct Outputs {
    staged: Vec<(TempPath, PathBuf)>,
}

impl Outputs {
    /// Checks every target before anything is computed: each folder can
    /// take a file (`check_writable`), and no two outputs share a path.
    /// `targets` pairs what each output is ("the NetCDF output", "the
    /// report") with its path.
    pub fn check(targets: &[(&str, &Path)]) -> Result<(), String> {
        for (i, (what, path)) in targets.iter().enumerate() {
            check_writable(path).map_err(|why| format!("cannot write {what} {}: {why}", path.display()))?;
            if let Some((other, _)) = targets[..i].iter().find(|(_, p)| same_path(p, path)) {
                return Err(format!("{other} and {what} are both {}: give each its own file", path.display()));
            }
        }
        Ok(())
    }

    pub fn new() -> Self {
        Self::default()
    }

    /// A temporary path to write `target`'s content into; it becomes
    /// `target` at `publish`.
    pub fn stage(&mut self, target: &Path) -> std::io::Result<PathBuf> {
        let temporary = temporary_beside(target)?;
        let path = temporary.to_path_buf();
        self.staged.push((temporary, target.to_path_buf()));
        Ok(path)
    }

    /// Renames every staged file to its target. Should a rename fail (a
    /// folder removed meanwhile), the targets already renamed are removed
    /// again, so the run still leaves none of its outputs.
    pub fn publish(self) -> Result<(), String> {
        let mut done: Vec<PathBuf> = Vec::new();
        let mut staged = self.staged.into_iter();
        for (temporary, target) in staged.by_ref() {
            if let Err(e) = publish(temporary, &target) {
                for path in &done {
                    let _ = std::fs::remove_file(path);
                }
                return Err(format!("cannot write {}: {e}", target.display()));
            }
            done.push(target);
        }
        Ok(())
    }
}

/// Whether two paths name one file (also when it does not exist yet).
fn same_path(a: &Path, b: &Path) -> bool {
    let resolve = |p: &Path| -> PathBuf {
        let folder = std::fs::canonicalize(folder_of(p)).unwrap_or_else(|_| folder_of(p).to_path_buf());
        folder.join(p.file_name().unwrap_or_default())
    };
    resolve(a) == resolve(b)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn scratch() -> tempfile::TempDir {
        tempfile::tempdir().unwrap()
    }

    #[test]
    fn a_missing_folder_is_named_as_given() {
        let dir = scratch();
        let target = dir.path().join("nodir").join("out.nc");
        let message = check_writable(&target).unwrap_err();
        assert_eq!(message, format!("the folder {} does not exist", dir.path().join("nodir").display()));
        let error = temporary_beside(&target).unwrap_err().to_string();
        assert_eq!(error, message);
        assert!(!error.contains(".partial") && !error.contains("os error"));
    }

    #[test]
    fn a_file_in_place_of_a_folder_and_a_folder_in_place_of_a_file_are_named() {
        let dir = scratch();
        let file = dir.path().join("plain");
        std::fs::write(&file, b"x").unwrap();
        assert_eq!(check_writable(&file.join("out.nc")).unwrap_err(), format!("{} is not a folder", file.display()));
        assert!(check_writable(dir.path()).unwrap_err().ends_with("is a folder; give a file name inside it"));
        assert!(check_writable(&dir.path().join("fine.nc")).is_ok());
        // The check leaves nothing behind.
        assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 1);
    }

    #[test]
    fn outputs_are_published_together_or_not_at_all() {
        let dir = scratch();
        let (a, b) = (dir.path().join("a.nc"), dir.path().join("b.html"));
        let mut outputs = Outputs::new();
        std::fs::write(outputs.stage(&a).unwrap(), b"netcdf").unwrap();
        std::fs::write(outputs.stage(&b).unwrap(), b"html").unwrap();
        assert!(!a.exists() && !b.exists(), "nothing is visible before publish");
        outputs.publish().unwrap();
        assert_eq!(std::fs::read(&a).unwrap(), b"netcdf");
        assert_eq!(std::fs::read(&b).unwrap(), b"html");
        // Dropped before publishing (the second output failed): no file.
        let (c, d) = (dir.path().join("c.nc"), dir.path().join("d.html"));
        {
            let mut outputs = Outputs::new();
            std::fs::write(outputs.stage(&c).unwrap(), b"netcdf").unwrap();
            let _ = outputs.stage(&d);
        }
        assert!(!c.exists() && !d.exists());
        let names: Vec<String> = std::fs::read_dir(dir.path()).unwrap().map(|e| e.unwrap().file_name().to_string_lossy().into_owned()).collect();
        assert!(names.iter().all(|n| !n.ends_with(".partial")), "{names:?}");
    }

    #[test]
    fn two_outputs_on_one_path_are_refused() {
        let dir = scratch();
        let a = dir.path().join("same.nc");
        let b = dir.path().join(".").join("same.nc");
        let message = Outputs::check(&[("the NetCDF output", &a), ("the report", &b)]).unwrap_err();
        assert!(message.starts_with("the NetCDF output and the report are both"), "{message}");
        let missing = dir.path().join("nodir").join("r.html");
        let message = Outputs::check(&[("the NetCDF output", &a), ("the report", &missing)]).unwrap_err();
        assert_eq!(message, format!("cannot write the report {}: the folder {} does not exist", missing.display(), dir.path().join("nodir").display()));
    }
}

#[cfg(test)]
mod direct_write_tests {
    use super::*;

    /// Whole content, exact length, for sizes around the block and chunk
    /// edges, over a longer earlier content; also where direct writes are
    /// refused (tmpfs), which takes the ordinary write.
    #[test]
    fn writes_every_byte_at_every_size() {
        let mut folders = vec![std::env::temp_dir()];
        if Path::new("/dev/shm").is_dir() {
            folders.push(PathBuf::from("/dev/shm"));
        }
        for folder in folders {
            let path = folder.join(format!("baroc-direct-{}.bin", std::process::id()));
            std::fs::write(&path, vec![0xAB; (20 << 20) + 1]).unwrap();
            for size in [0, 100, (1 << 20) - 1, 1 << 20, (1 << 20) + 123, 8 << 20, (8 << 20) + 1, (17 << 20) + 4095] {
                // From a block-aligned buffer and from one that is not.
                let layout = std::alloc::Layout::from_size_align(size + 1, 4096).unwrap();
                // SAFETY: non-zero size; zeroed, then every byte used is written below.
                let block = unsafe { std::alloc::alloc_zeroed(layout) };
                let whole = unsafe { std::slice::from_raw_parts_mut(block, size + 1) };
                for i in 0..=size {
                    whole[i] = (i.wrapping_mul(2_654_435_761) >> 13) as u8;
                }
                for bytes in [&whole[..size], &whole[1..]] {
                    write_all_direct(&path, bytes).unwrap();
                    let back = std::fs::read(&path).unwrap();
                    assert_eq!(back.len(), size, "length at {size} in {}", folder.display());
                    assert!(back == bytes, "content at {size} in {}", folder.display());
                }
                unsafe { std::alloc::dealloc(block, layout) };
            }
            std::fs::remove_file(&path).unwrap();
        }
    }

    /// A header replaces the file's first bytes, whatever the chunk
    /// boundaries, by the direct write and by the ordinary one; the memory
    /// written from is left as it was; a header longer than the bytes is
    /// refused.
    #[test]
    fn a_header_replaces_the_first_bytes_and_nothing_else() {
        let path = std::env::temp_dir().join(format!("baroc-direct-head-{}.bin", std::process::id()));
        std::fs::write(&path, vec![0xCD; BOUNCE * 3]).unwrap();
        for size in [48, (1 << 20) + 7, BOUNCE, BOUNCE + 1, 2 * BOUNCE + 4095] {
            let bytes: Vec<u8> = (0..size).map(|i: usize| (i.wrapping_mul(2_654_435_761) >> 11) as u8).collect();
            let before = bytes.clone();
            for head_length in [1, 48, 4097] {
                let head: Vec<u8> = (0..head_length.min(size)).map(|i| !bytes[i]).collect();
                let mut expected = bytes.clone();
                expected[..head.len()].copy_from_slice(&head);
                write_all_direct_with_head(&path, &bytes, &head).unwrap();
                assert!(std::fs::read(&path).unwrap() == expected, "direct (or refused) write of {size} bytes, header {head_length}");
                write_ordinary(&path, &bytes, &head).unwrap();
                assert!(std::fs::read(&path).unwrap() == expected, "ordinary write of {size} bytes, header {head_length}");
                assert!(bytes == before, "the bytes written from are untouched");
            }
        }
        let error = write_all_direct_with_head(&path, &[1, 2], &[1, 2, 3]).unwrap_err();
        assert_eq!(error.kind(), std::io::ErrorKind::InvalidInput);
        std::fs::remove_file(&path).unwrap();
    }
}
