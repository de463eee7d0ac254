//! The `baroc` command's allocator: large blocks on huge pages, and kept
//! for reuse within the process.
//!
//! A run allocates many arrays of a few identical sizes (one level of a
//! global 0.25-degree grid is 4.2 MB as float32, 8.3 MB as float64) and
//! frees them soon after. The system allocator hands blocks this large
//! straight back to the kernel on free, so every new array is fresh memory
//! and every 4 KiB page of it a page fault that the kernel must zero; on
//! the machines Baroc was measured on (virtual, shared) those faults cost
//! more than the arithmetic and the reads together (benches/end_to_end.py
//! prints the split). So, for blocks of at least `LARGE` bytes:
//!
//! - fresh blocks are mapped on a 2 MiB boundary with transparent huge pages
//!   requested (madvise MADV_HUGEPAGE, Linux 2.6.38+; numpy does the same for
//!   its large arrays), one fault per 2 MiB instead of per 4 KiB;
//! - freed blocks are kept, up to `RETAINED_BYTES` in all and
//!   `RETAINED_BLOCK` each, and handed out again to a request of the same
//!   size class (sizes rounded up to 2 MiB), already faulted in. A block
//!   asked for zeroed is zeroed again when reused (memset at memory speed,
//!   far below a fault per page).
//!
//! Smaller blocks, and blocks with an alignment above a page, go to the
//! system allocator as before. Elsewhere than Linux everything does.
//! Values are never affected: this decides only where bytes live.

use std::alloc::{GlobalAlloc, Layout, System};
use std::sync::atomic::{AtomicUsize, Ordering};

static FRESH_BYTES: AtomicUsize = AtomicUsize::new(0);
static REUSED_BYTES: AtomicUsize = AtomicUsize::new(0);

/// Bytes of large blocks mapped fresh and bytes handed out again from the
/// kept blocks, by every `Recycling` allocator of the process so far (for
/// the split `BAROC_TIMINGS=1` prints).
pub fn large_block_bytes() -> (usize, usize) {
    (FRESH_BYTES.load(Ordering::Relaxed), REUSED_BYTES.load(Ordering::Relaxed))
}

/// Blocks from this size on are mapped and recycled here.
pub const LARGE: usize = 1 << 20;
/// Size classes (and the mapping granularity): one x86-64 huge page.
const CLASS: usize = 2 << 20;
/// At most this many bytes of freed blocks are kept for reuse: enough for
/// the intermediates of a run on a global 0.25-degree grid to cycle through
/// memory already faulted in, small beside the memory such a run holds.
pub const RETAINED_BYTES: usize = 256 << 20;
/// A freed block larger than this is returned to the kernel at once (a
/// many-level input read once is not worth holding).
pub const RETAINED_BLOCK: usize = 64 << 20;
const SLOTS: usize = 64;
const PAGE: usize = 4096;

/// The size class of a request: its length rounded up to `CLASS`.
fn class_of(size: usize) -> usize {
    size.div_ceil(CLASS) * CLASS
}

/// Whether a block of this layout is mapped here (else the system's).
fn is_ours(layout: &Layout) -> bool {
    cfg!(target_os = "linux") && layout.size() >= LARGE && layout.align() <= PAGE
}

struct Retained {
    /// (address, length) of kept blocks; length 0 marks an empty slot.
    blocks: [(usize, usize); SLOTS],
    bytes: usize,
}

/// The allocator (see the module comment). `baroc`'s main sets it as the
/// global allocator; the library itself does not.
pub struct Recycling {
    retained: std::sync::Mutex<Retained>,
    retained_bytes: usize,
}

impl Default for Recycling {
    fn default() -> Self {
        Self::new()
    }
}

impl Recycling {
    pub const fn new() -> Self {
        Self::with_retained_bytes(RETAINED_BYTES)
    }

    /// An allocator keeping at most `bytes` of freed blocks (0: none).
    pub const fn with_retained_bytes(bytes: usize) -> Self {
        Self { retained: std::sync::Mutex::new(Retained { blocks: [(0, 0); SLOTS], bytes: 0 }), retained_bytes: bytes }
    }

    fn lock(&self) -> std::sync::MutexGuard<'_, Retained> {
        // Nothing inside the lock can panic but a poisoned state is still a
        // consistent one (each update is one assignment pair).
        self.retained.lock().unwrap_or_else(|e| e.into_inner())
    }

    /// A kept block of exactly `length` bytes, taken out of the store.
    fn take(&self, length: usize) -> Option<*mut u8> {
        let mut kept = self.lock();
        let Some(slot) = kept.blocks.iter().position(|&(_, l)| l == length) else {
            FRESH_BYTES.fetch_add(length, Ordering::Relaxed);
            return None;
        };
        let (address, _) = kept.blocks[slot];
        kept.blocks[slot] = (0, 0);
        kept.bytes -= length;
        REUSED_BYTES.fetch_add(length, Ordering::Relaxed);
        Some(address as *mut u8)
    }

    /// Keeps a freed block if there is room; false if it was not kept.
    fn keep(&self, address: *mut u8, length: usize) -> bool {
        if length > RETAINED_BLOCK {
            return false;
        }
        let mut kept = self.lock();
        if kept.bytes + length > self.retained_bytes {
            return false;
        }
        let Some(slot) = kept.blocks.iter().position(|&(_, l)| l == 0) else { return false };
        kept.blocks[slot] = (address as usize, length);
        kept.bytes += length;
        true
    }

    /// Bytes of freed blocks kept now (for tests).
    pub fn retained(&self) -> usize {
        self.lock().bytes
    }
}

#[cfg(target_os = "linux")]
mod map {
    use super::CLASS;

    /// A fresh mapping of `length` bytes (a multiple of `CLASS`) starting
    /// on a `CLASS` boundary, with huge pages requested; null on failure.
    pub fn fresh(length: usize) -> *mut u8 {
        // Over-map by one class and trim both ends to the boundary.
        let Some(over) = length.checked_add(CLASS) else { return std::ptr::null_mut() };
        // SAFETY: an anonymous private mapping at an address of the kernel's
        // choosing touches no memory of this process.
        let raw = unsafe { libc::mmap(std::ptr::null_mut(), over, libc::PROT_READ | libc::PROT_WRITE, libc::MAP_PRIVATE | libc::MAP_ANONYMOUS, -1, 0) };
        if raw == libc::MAP_FAILED {
            return std::ptr::null_mut();
        }
        let start = raw as usize;
        let aligned = start.div_ceil(CLASS) * CLASS;
        let head = aligned - start;
        let tail = over - head - length;
        // SAFETY: [start, start + head) and [aligned + length, start + over)
        // lie inside the mapping just made and nothing refers to them;
        // MADV_HUGEPAGE only sets a hint on the range kept (a refusal, where
        // huge pages are not built in, leaves it as it was).
        unsafe {
            if head > 0 {
                libc::munmap(raw, head);
            }
            if tail > 0 {
                libc::munmap((aligned + length) as *mut libc::c_void, tail);
            }
            libc::madvise(aligned as *mut libc::c_void, length, libc::MADV_HUGEPAGE);
        }
        aligned as *mut u8
    }

    /// Returns a mapping made by `fresh` to the kernel.
    ///
    /// # Safety
    /// `address` and `length` are those of a live mapping from `fresh` (or
    /// `resize`) that nothing uses any more.
    pub unsafe fn release(address: *mut u8, length: usize) {
        libc::munmap(address as *mut libc::c_void, length);
    }

    /// Grows or shrinks a mapping, moving it if need be; null on failure
    /// (the old mapping then stands).
    ///
    /// # Safety
    /// As for `release`; on success the old address is no longer valid.
    pub unsafe fn resize(address: *mut u8, old: usize, new: usize) -> *mut u8 {
        let moved = libc::mremap(address as *mut libc::c_void, old, new, libc::MREMAP_MAYMOVE);
        if moved == libc::MAP_FAILED {
            return std::ptr::null_mut();
        }
        libc::madvise(moved, new, libc::MADV_HUGEPAGE);
        moved as *mut u8
    }
}

#[cfg(not(target_os = "linux"))]
mod map {
    // Never called: `is_ours` is false elsewhere than Linux.
    pub fn fresh(_length: usize) -> *mut u8 {
        std::ptr::null_mut()
    }
    pub unsafe fn release(_address: *mut u8, _length: usize) {}
    pub unsafe fn resize(_address: *mut u8, _old: usize, _new: usize) -> *mut u8 {
        std::ptr::null_mut()
    }
}

// SAFETY: blocks of our layouts are whole mappings of `class_of(size)` bytes,
// page aligned (so any alignment up to a page holds), owned by exactly one
// caller between alloc and dealloc (kept blocks are in the store only while
// no caller holds them); `dealloc` and `realloc` are given the layout the
// block was allocated with, so `is_ours` and `class_of` give back how it
// was made. Everything else is the system allocator's.
unsafe impl GlobalAlloc for Recycling {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        if !is_ours(&layout) {
            return System.alloc(layout);
        }
        let length = class_of(layout.size());
        self.take(length).unwrap_or_else(|| map::fresh(length))
    }

    unsafe fn alloc_zeroed(&self, layout: Layout) -> *mut u8 {
        if !is_ours(&layout) {
            return System.alloc_zeroed(layout);
        }
        let length = class_of(layout.size());
        match self.take(length) {
            Some(block) => {
                // A reused block holds old data: zero what the caller sees.
                std::ptr::write_bytes(block, 0, layout.size());
                block
            }
            // A fresh anonymous mapping reads as zeros already.
            None => map::fresh(length),
        }
    }

    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        if !is_ours(&layout) {
            return System.dealloc(ptr, layout);
        }
        let length = class_of(layout.size());
        if !self.keep(ptr, length) {
            map::release(ptr, length);
        }
    }

    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, new_size: usize) -> *mut u8 {
        let Ok(new_layout) = Layout::from_size_align(new_size, layout.align()) else { return std::ptr::null_mut() };
        match (is_ours(&layout), is_ours(&new_layout)) {
            (false, false) => System.realloc(ptr, layout, new_size),
            (true, true) => {
                let (old, new) = (class_of(layout.size()), class_of(new_size));
                if old == new {
                    return ptr;
                }
                map::resize(ptr, old, new)
            }
            // Crossing the threshold: a new block, the contents copied.
            _ => {
                let block = self.alloc(new_layout);
                if !block.is_null() {
                    std::ptr::copy_nonoverlapping(ptr, block, layout.size().min(new_size));
                    self.dealloc(ptr, layout);
                }
                block
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn layout(size: usize) -> Layout {
        Layout::from_size_align(size, 8).unwrap()
    }

    #[test]
    fn a_reused_block_asked_for_zeroed_is_zero() {
        let a = Recycling::new();
        let size = 721 * 1440 * 4;
        unsafe {
            let block = a.alloc(layout(size));
            assert!(!block.is_null());
            std::ptr::write_bytes(block, 0xAB, size);
            a.dealloc(block, layout(size));
            assert_eq!(a.retained(), class_of(size));
            // Same class: the same block comes back, zeroed.
            let again = a.alloc_zeroed(layout(size - 1000));
            assert_eq!(again, block, "a block of the same class is reused");
            let bytes = std::slice::from_raw_parts(again, size - 1000);
            assert!(bytes.iter().all(|&b| b == 0));
            assert_eq!(a.retained(), 0);
            a.dealloc(again, layout(size - 1000));
        }
    }

    #[test]
    fn fresh_blocks_start_on_a_huge_page_boundary_and_read_zero() {
        let a = Recycling::with_retained_bytes(0);
        unsafe {
            let block = a.alloc_zeroed(layout(3 << 20));
            assert_eq!(block as usize % CLASS, 0);
            assert!(std::slice::from_raw_parts(block, 3 << 20).iter().all(|&b| b == 0));
            a.dealloc(block, layout(3 << 20));
            assert_eq!(a.retained(), 0, "nothing is kept with no room");
        }
    }

    #[test]
    fn realloc_keeps_contents_across_classes_and_the_threshold() {
        let a = Recycling::new();
        unsafe {
            // Small (system) to large (mapped) to larger to small again.
            let mut size = 1000;
            let mut block = a.alloc(layout(size));
            for i in 0..size {
                *block.add(i) = (i % 251) as u8;
            }
            for new_size in [LARGE + 5, 5 << 20, 9 << 20, 3 << 20, 500] {
                let grown = a.realloc(block, layout(size), new_size);
                assert!(!grown.is_null());
                for i in 0..size.min(new_size).min(1000) {
                    assert_eq!(*grown.add(i), (i % 251) as u8, "byte {i} after {size} -> {new_size}");
                }
                block = grown;
                size = new_size;
            }
            a.dealloc(block, layout(size));
        }
    }

    #[test]
    fn the_store_keeps_no_more_than_its_bound() {
        let a = Recycling::with_retained_bytes(5 << 20);
        unsafe {
            let blocks: Vec<*mut u8> = (0..4).map(|_| a.alloc(layout(2 << 20))).collect();
            for &b in &blocks {
                a.dealloc(b, layout(2 << 20));
            }
            // Two 2 MiB blocks fit in 5 MiB; the others went back.
            assert_eq!(a.retained(), 4 << 20);
            let big = a.alloc(layout(RETAINED_BLOCK + 1));
            a.dealloc(big, layout(RETAINED_BLOCK + 1));
            assert_eq!(a.retained(), 4 << 20, "a block above the per-block bound is not kept");
        }
    }

    #[test]
    fn blocks_used_from_many_threads_stay_separate() {
        static SHARED: Recycling = Recycling::with_retained_bytes(64 << 20);
        let handles: Vec<_> = (0..4u8)
            .map(|t| {
                std::thread::spawn(move || unsafe {
                    for round in 0..20u8 {
                        let size = (2 + (round as usize % 3)) << 20;
                        let block = SHARED.alloc(layout(size));
                        std::ptr::write_bytes(block, t ^ round, size);
                        std::thread::yield_now();
                        let bytes = std::slice::from_raw_parts(block, size);
                        assert!(bytes.iter().all(|&b| b == t ^ round), "another thread wrote into this block");
                        SHARED.dealloc(block, layout(size));
                    }
                })
            })
            .collect();
        for h in handles {
            h.join().unwrap();
        }
    }
}
