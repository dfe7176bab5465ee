//! Fresh zeroed vectors for the solvers' large working arrays.
//!
//! A first write to a fresh 4 KiB page costs a page fault: about 1.7 µs on the development
//! machine, so the biharmonic fill of a 2048² frame spent 0.15 s of its 0.95 s mapping the
//! 400 MB its vectors and levels touch. Linux maps a 2 MiB huge page in one fault (zeroing it
//! costs about as much as zeroing 512 small pages, without the 512 faults) where transparent huge
//! pages are enabled for memory that asks for them (`madvise`, the default of many
//! distributions). Only vectors written nearly whole ask: a huge page is mapped whole on its
//! first touch, and the grid storages rely on untouched cells far from the holes costing nothing.

/// Vectors smaller than this are left to small pages: a few huge pages' worth of faults is not
/// worth the advice.
const HUGE_MIN_BYTES: usize = 4 << 20;

/// `n` zeros in pages not yet touched (mapped on first write). With `dense`, the caller writes
/// nearly every element, and a large vector is advised onto huge pages.
pub(crate) fn zeros<T: Clone + Default>(n: usize, dense: bool) -> Vec<T> {
    // `vec!` of a zero value allocates zeroed memory (`calloc`), which for large sizes is fresh
    // pages that nothing has touched yet.
    let v = vec![T::default(); n];
    if dense && std::mem::size_of_val(v.as_slice()) >= HUGE_MIN_BYTES {
        advise_huge(v.as_ptr().cast(), std::mem::size_of_val(v.as_slice()));
    }
    v
}

/// Asks the kernel to back the whole 2 MiB pages inside `len` bytes at `ptr` with huge pages.
/// Only advice: the contents do not change, and where the kernel declines nothing happens.
#[cfg(target_os = "linux")]
fn advise_huge(ptr: *const u8, len: usize) {
    use std::ffi::{c_int, c_void};
    unsafe extern "C" {
        fn madvise(addr: *mut c_void, len: usize, advice: c_int) -> c_int;
    }
    const HUGE_PAGE: usize = 2 << 20;
    /// `MADV_HUGEPAGE` from Linux's `<asm-generic/mman-common.h>` (the same on every
    /// architecture).
    const MADV_HUGEPAGE: c_int = 14;
    let start = (ptr as usize).next_multiple_of(HUGE_PAGE);
    let end = (ptr as usize + len) / HUGE_PAGE * HUGE_PAGE;
    if end > start {
        // SAFETY: the range lies inside one live allocation; the advice changes how its pages are
        // backed, never their contents. A failure (THP compiled out, an old kernel) is harmless.
        unsafe {
            madvise(start as *mut c_void, end - start, MADV_HUGEPAGE);
        }
    }
}

#[cfg(not(target_os = "linux"))]
fn advise_huge(_: *const u8, _: usize) {}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn zeros_are_zeros_whether_advised_or_not() {
        for (n, dense) in [(0, true), (10, true), (3 << 20, true), (3 << 20, false)] {
            let mut v: Vec<f64> = zeros(n, dense);
            assert_eq!(v.len(), n);
            assert!(v.iter().all(|&x| x == 0.0));
            // Writable whole after the advice.
            v.iter_mut().enumerate().for_each(|(i, x)| *x = i as f64);
            assert!(v.iter().enumerate().all(|(i, &x)| x == i as f64));
        }
    }
}
