//! Fallible allocation of the core's large arrays (fine grids, outputs, atom arrays).
//!
//! The standard collections abort the process when the allocator fails (for example under
//! `ulimit -v` or a container's memory limit). Every array whose size follows the caller's
//! input is allocated here instead, so a failure becomes [`Error::Memory`], naming the array
//! and its size, and the caller can recover.

use crate::error::{Error, Result};
use num_complex::Complex64;

/// `n` bytes in a short human form ("1.5 GiB").
pub fn human_bytes(n: f64) -> String {
    let units = ["bytes", "KiB", "MiB", "GiB", "TiB", "PiB", "EiB"];
    let mut v = n;
    let mut u = 0;
    while v >= 1024.0 && u + 1 < units.len() {
        v /= 1024.0;
        u += 1;
    }
    if u == 0 {
        format!("{n:.0} bytes")
    } else {
        format!("{v:.1} {}", units[u])
    }
}

fn refused(what: &str, n: usize, size: usize) -> Error {
    Error::Memory(format!(
        "cannot allocate {what} ({n} values, {}): out of memory",
        human_bytes(n as f64 * size as f64)
    ))
}

/// A vector of `n` copies of `value`, or [`Error::Memory`] naming `what`.
pub fn filled<T: Clone>(n: usize, value: T, what: &str) -> Result<Vec<T>> {
    let mut v = Vec::new();
    v.try_reserve_exact(n)
        .map_err(|_| refused(what, n, std::mem::size_of::<T>()))?;
    v.resize(n, value);
    Ok(v)
}

/// An empty vector with room for `n` values, or [`Error::Memory`] naming `what`.
pub fn with_capacity<T>(n: usize, what: &str) -> Result<Vec<T>> {
    let mut v = Vec::new();
    v.try_reserve_exact(n)
        .map_err(|_| refused(what, n, std::mem::size_of::<T>()))?;
    Ok(v)
}

/// A zeroed vector of `len` complex values obtained from the allocator already zeroed (fresh
/// pages from the operating system, faulted in ahead of use on Linux, see `populate`), or
/// [`Error::Memory`] naming `what`.
/// (Transparent huge pages were tried: a small gain on bare metal, but in virtual machines
/// the first touch of huge pages doubled the time.)
pub fn zeroed_complex(len: usize, what: &str) -> Result<Vec<Complex64>> {
    if len == 0 {
        return Ok(Vec::new());
    }
    let layout = std::alloc::Layout::array::<Complex64>(len).map_err(|_| refused(what, len, 16))?;
    // `vec![zero; len]` would write the zeros itself (Complex64 is not known to be all-zero
    // bits), touching every page up front on one thread.
    // SAFETY: the layout has non-zero size; alloc_zeroed returns memory valid for `len`
    // Complex64 values, all bits zero, which is 0 + 0i, or null on failure.
    let ptr = unsafe { std::alloc::alloc_zeroed(layout) } as *mut Complex64;
    if ptr.is_null() {
        return Err(refused(what, len, 16));
    }
    #[cfg(target_os = "linux")]
    populate(ptr as usize, layout.size());
    // SAFETY: `ptr` comes from the global allocator with the layout of `len` Complex64 values,
    // all of them initialised (zero), so the Vec owns exactly that allocation.
    Ok(unsafe { Vec::from_raw_parts(ptr, len, len) })
}

/// Fault in the pages of `[addr, addr + bytes)` ahead of use with `MADV_POPULATE_WRITE`
/// (Linux ≥ 5.14; older kernels refuse it and the pages fault in on first touch as usual).
/// Page faults taken one by one from several threads contend in the kernel: measured, a
/// 288³ FFT pass ran 2× slower on 2 threads than on 1 while faulting its grid in, and 10×
/// faster after populating the grid first (0.12 s for 364 MB). Chunks are populated in
/// parallel.
#[cfg(target_os = "linux")]
fn populate(addr: usize, bytes: usize) {
    use rayon::prelude::*;
    const PAGE: usize = 4096;
    const MADV_POPULATE_WRITE: libc::c_int = 23;
    const CHUNK: usize = 32 << 20;
    let start = addr.next_multiple_of(PAGE);
    let end = (addr + bytes) / PAGE * PAGE;
    if end <= start {
        return;
    }
    let n = (end - start).div_ceil(CHUNK);
    (0..n).into_par_iter().for_each(|i| {
        let a = start + i * CHUNK;
        let len = CHUNK.min(end - a);
        // SAFETY: [a, a + len) lies inside one live allocation owned by the caller;
        // MADV_POPULATE_WRITE only faults the (zero) pages in, without changing contents.
        unsafe {
            libc::madvise(a as *mut libc::c_void, len, MADV_POPULATE_WRITE);
        }
    });
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn impossible_sizes_are_errors() {
        // 2^60 complex values (16 EiB) exceed any address space: an error, not an abort.
        let e = zeroed_complex(1 << 60, "a test grid").unwrap_err();
        assert!(matches!(e, Error::Memory(_)), "{e}");
        assert!(e.to_string().contains("a test grid"), "{e}");
        let e = filled(usize::MAX / 8, 0.0f64, "a test array").unwrap_err();
        assert!(e.to_string().contains("a test array"), "{e}");
        let e = with_capacity::<[f64; 3]>(1 << 62, "positions").unwrap_err();
        assert!(matches!(e, Error::Memory(_)), "{e}");
    }

    #[test]
    fn small_sizes_work_and_are_zero() {
        let v = zeroed_complex(1000, "grid").unwrap();
        assert!(v.iter().all(|z| z.re == 0.0 && z.im == 0.0));
        assert_eq!(filled(3, 7u32, "x").unwrap(), vec![7, 7, 7]);
        assert_eq!(human_bytes(1536.0), "1.5 KiB");
    }
}
