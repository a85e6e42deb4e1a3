//! A software prefetch: asks for the cache line holding a value without waiting for it.

/// Asks for the cache line holding `r` (PREFETCHT0 on x86-64: a hint that loads nothing into a
/// register, so the loop does not stall on it; elsewhere a plain read of its first byte, which
/// can).
#[inline(always)]
pub fn prefetch<T>(r: &T) {
    let p = r as *const T as *const i8;
    #[cfg(target_arch = "x86_64")]
    // SAFETY: PREFETCHT0 is a hint: it neither faults nor changes memory or registers, and `p`
    // comes from a live reference.
    #[allow(unused_unsafe)]
    unsafe {
        std::arch::x86_64::_mm_prefetch::<{ std::arch::x86_64::_MM_HINT_T0 }>(p)
    };
    #[cfg(not(target_arch = "x86_64"))]
    // SAFETY: `p` points at the first byte of a live `T`.
    std::hint::black_box(unsafe { std::ptr::read_volatile(p) });
}
