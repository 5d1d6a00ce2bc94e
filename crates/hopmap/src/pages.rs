//! Grid-sized arrays that are read at random (the union-find of a percolation sweep, the keys
//! of its visit order, the images of a flood) on memory the kernel is asked to back with huge
//! pages.
//!
//! With 4 KiB pages, a look-up scattered over an array of 100 MB or more misses the
//! translation buffers as well as the caches: the processor's second-level TLB covers about
//! 12 MB. Linux backs an anonymous region with 2 MiB pages when the region is marked with
//! `madvise(MADV_HUGEPAGE)` (transparent huge pages in `madvise` mode, the common default);
//! the same array then needs about a hundred entries. The hint changes neither the contents
//! nor the layout: elsewhere, or where the system has huge pages switched off, these are
//! plain vectors.

/// Arrays smaller than this are left alone: they fit the TLB's reach with small pages, and a
/// huge page would be cleared in full for them.
const LEAST_BYTES: usize = 8 << 20;

/// Size and alignment of a huge page on x86-64 and aarch64 Linux.
#[cfg(target_os = "linux")]
const HUGE_PAGE: usize = 2 << 20;

/// An empty vector with room for `n` items, its memory marked for huge pages when it is large.
/// The marking must come before the items are written: a page is backed when first touched.
pub(crate) fn with_capacity<T>(n: usize) -> Vec<T> {
    let v = Vec::with_capacity(n);
    advise_huge(&v);
    v
}

/// `n` copies of `value`, on memory marked for huge pages when it is large.
pub(crate) fn filled<T: Clone>(n: usize, value: T) -> Vec<T> {
    let mut v = with_capacity(n);
    v.resize(n, value);
    v
}

/// Marks the whole huge pages inside the vector's allocation (Linux only; a hint whose
/// failure is ignored).
fn advise_huge<T>(v: &Vec<T>) {
    let bytes = v.capacity().saturating_mul(std::mem::size_of::<T>());
    if bytes < LEAST_BYTES {
        return;
    }
    #[cfg(target_os = "linux")]
    {
        let start = v.as_ptr() as usize;
        let first = start.next_multiple_of(HUGE_PAGE);
        let end = (start + bytes) / HUGE_PAGE * HUGE_PAGE;
        if end > first {
            // SAFETY: `[first, end)` lies inside the vector's allocation, which this process
            // owns; MADV_HUGEPAGE only changes how the kernel backs those pages, never what
            // they hold, so no Rust value is affected. An error (an old kernel, huge pages
            // not built in) leaves the memory as it was.
            unsafe {
                libc::madvise(first as *mut libc::c_void, end - first, libc::MADV_HUGEPAGE);
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_vectors_hold_what_was_asked() {
        let v = filled(3 << 20, 7u32);
        assert_eq!(v.len(), 3 << 20);
        assert!(v.iter().all(|&x| x == 7));
        let w: Vec<u64> = with_capacity(5);
        assert!(w.is_empty() && w.capacity() >= 5);
    }

    /// The kernel's own account (`/proc/self/smaps`, "hg" among a mapping's flags: marked
    /// with MADV_HUGEPAGE) says whether the hint reached it. Skipped where the kernel has no
    /// transparent huge pages.
    #[cfg(target_os = "linux")]
    #[test]
    fn a_large_vector_is_marked_for_huge_pages_and_a_small_one_is_not() {
        if !std::path::Path::new("/sys/kernel/mm/transparent_hugepage").exists() {
            eprintln!("skipped: this kernel has no transparent huge pages");
            return;
        }
        let flags_at = |address: usize| -> Option<String> {
            let smaps = std::fs::read_to_string("/proc/self/smaps").ok()?;
            let mut inside = false;
            for line in smaps.lines() {
                let head = line.split_whitespace().next().unwrap_or("");
                if let Some((lo, hi)) = head.split_once('-')
                    && let (Ok(lo), Ok(hi)) =
                        (usize::from_str_radix(lo, 16), usize::from_str_radix(hi, 16))
                {
                    inside = (lo..hi).contains(&address);
                } else if inside && let Some(flags) = line.strip_prefix("VmFlags:") {
                    return Some(flags.to_string());
                }
            }
            None
        };
        let large = filled(64 << 20, 1u8);
        let middle = large.as_ptr() as usize + (32 << 20);
        let flags = flags_at(middle).expect("the vector's mapping is listed");
        assert!(flags.split_whitespace().any(|f| f == "hg"), "{flags}");
        let small = filled(1 << 20, 1u8);
        let flags = flags_at(small.as_ptr() as usize + (1 << 19)).unwrap_or_default();
        assert!(!flags.split_whitespace().any(|f| f == "hg"), "{flags}");
    }
}
