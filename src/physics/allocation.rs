//! Output arrays of the kernels.
//!
//! A kernel's output on a global grid is large (154 MB for one field of
//! 1440 x 721 x 37 float32), and the first write to fresh memory is a page
//! fault per page: with 4 KiB pages that is 37 500 faults per field, and on
//! this kind of machine those faults cost more than the arithmetic. On Linux
//! large outputs therefore ask the kernel for transparent huge pages
//! (madvise MADV_HUGEPAGE, Linux 2.6.38+), which numpy also does for its own
//! large arrays; where huge pages are enabled for "madvise" (the common
//! default) that cuts the faults up to 512-fold. Values are unchanged, and
//! where the request is refused (or elsewhere than Linux) the array is a
//! plain zeroed one.

use ndarray::{Array, Dimension, ShapeBuilder};

/// Below this size an array is not worth a huge-page request (one huge page
/// is 2 MiB on x86-64).
const HUGE_PAGE_THRESHOLD: usize = 4 << 20;

/// A zeroed f32 array, with huge pages requested for its memory when large.
/// The request is made before anything touches the memory: a large zeroed
/// allocation is a fresh, untouched mapping, and the pages are faulted in
/// by the kernel that fills the array (in parallel).
pub fn zeroed<Sh, D>(shape: Sh) -> Array<f32, D>
where
    Sh: ShapeBuilder<Dim = D>,
    D: Dimension,
{
    let array = Array::<f32, D>::zeros(shape);
    let bytes = array.len() * std::mem::size_of::<f32>();
    if bytes >= HUGE_PAGE_THRESHOLD {
        advise_huge_pages(array.as_ptr() as usize, bytes);
    }
    array
}

#[cfg(target_os = "linux")]
fn advise_huge_pages(start: usize, length: usize) {
    const PAGE: usize = 4096;
    // Only whole pages inside the allocation: round the start up and the
    // end down.
    let first = start.div_ceil(PAGE) * PAGE;
    let end = (start + length) / PAGE * PAGE;
    if end > first {
        // SAFETY: MADV_HUGEPAGE only sets a hint on the mapping that holds
        // [first, end), pages of memory this process owns (the array just
        // allocated); it neither reads, writes nor frees them. A refusal
        // (EINVAL where transparent huge pages are not built in) leaves the
        // memory as it was, so the result is ignored.
        unsafe {
            libc::madvise(first as *mut libc::c_void, end - first, libc::MADV_HUGEPAGE);
        }
    }
}

#[cfg(not(target_os = "linux"))]
fn advise_huge_pages(_start: usize, _length: usize) {}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::{Array3, Array4};

    #[test]
    fn zeroed_arrays_are_zero_and_standard_layout_at_any_size() {
        // Small (no request) and large (request made) arrays alike.
        let small = zeroed::<_, ndarray::Ix3>((2, 3, 4));
        assert_eq!(small, Array3::<f32>::zeros((2, 3, 4)));
        let large = zeroed::<_, ndarray::Ix4>((1, 3, 721, 1440));
        assert!(large.is_standard_layout());
        assert_eq!(large.dim(), (1, 3, 721, 1440));
        assert!(large.iter().all(|&v| v == 0.0));
        assert_eq!(large, Array4::<f32>::zeros((1, 3, 721, 1440)));
    }
}
