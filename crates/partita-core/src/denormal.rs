//! Flush-to-zero / denormals-are-zero for the duration of a scope.
//!
//! Subnormal floats make the multiply-accumulate loop many times slower on x86 (common practice; the
//! ~100x figure in DESIGN.md is quoted from memory). The guard sets FTZ and DAZ in MXCSR on x86-64, and
//! FZ in FPCR on aarch64, and restores the caller's state when dropped.
//!
//! The guard is crate-private (the crate's tests reach it through the `test-hooks` feature) and `!Send`:
//! the mode belongs to the thread that set it, so a guard dropped on another thread would restore the
//! wrong thread's mode.
//!
//! Remaining caveat: the compiler does not model the floating-point environment. The mode switches are
//! `asm!` blocks that may read and write memory (not `nomem`, not `pure`), so memory operations are not
//! moved across them, but register-only float arithmetic could in principle be. The engine therefore sets
//! the mode around whole opaque calls (`process()`, a worker's job loop), never around a few operations.

use std::marker::PhantomData;

/// Sets flush-to-zero (and denormals-are-zero where the CPU has it) until dropped, on this thread only.
///
/// ```compile_fail
/// // !Send: the guard cannot leave the thread whose mode it changed.
/// fn needs_send<T: Send>() {}
/// needs_send::<partita_core::hooks::DenormalGuard>();
/// ```
///
/// ```
/// // What the example above leans on: the type is reachable (feature `test-hooks`) and works.
/// let guard = partita_core::hooks::DenormalGuard::new();
/// assert!(partita_core::hooks::DenormalGuard::active());
/// drop(guard);
/// ```
#[derive(Debug)]
#[must_use = "the mode is restored when the guard is dropped"]
pub struct DenormalGuard {
    #[cfg_attr(not(any(target_arch = "x86_64", target_arch = "aarch64")), allow(dead_code))]
    saved: u64,
    /// A raw pointer is neither `Send` nor `Sync`.
    _thread_bound: PhantomData<*const ()>,
}

#[cfg(target_arch = "x86_64")]
const FLUSH_BITS: u32 = (1 << 15) | (1 << 6); // MXCSR FTZ | DAZ (Intel SDM vol. 1, 10.2.3)

#[cfg(target_arch = "aarch64")]
const FLUSH_BITS: u64 = 1 << 24; // FPCR.FZ (Arm ARM, FPCR register description)

impl DenormalGuard {
    /// Enables flushing and remembers the previous mode.
    #[allow(clippy::new_without_default)]
    pub fn new() -> Self {
        let saved = read_mode();
        write_mode(saved | FLUSH_BITS as u64);
        Self { saved, _thread_bound: PhantomData }
    }

    /// True when the current thread flushes subnormal results to zero.
    pub fn active() -> bool {
        #[cfg(any(target_arch = "x86_64", target_arch = "aarch64"))]
        {
            read_mode() & FLUSH_BITS as u64 == FLUSH_BITS as u64
        }
        #[cfg(not(any(target_arch = "x86_64", target_arch = "aarch64")))]
        {
            false
        }
    }
}

impl Drop for DenormalGuard {
    fn drop(&mut self) {
        write_mode(self.saved);
    }
}

#[cfg(target_arch = "x86_64")]
fn read_mode() -> u64 {
    let mut csr: u32 = 0;
    // SAFETY: stmxcsr stores the 32-bit MXCSR into the pointed-to u32, which is valid and writable.
    unsafe { std::arch::asm!("stmxcsr [{}]", in(reg) &mut csr, options(nostack, preserves_flags)) };
    u64::from(csr)
}

#[cfg(target_arch = "x86_64")]
fn write_mode(mode: u64) {
    let csr = mode as u32;
    // SAFETY: ldmxcsr loads a value read from MXCSR with only the FTZ/DAZ bits changed; both are
    // defined bits, so no reserved bit is set (which would fault).
    unsafe { std::arch::asm!("ldmxcsr [{}]", in(reg) &csr, options(nostack, preserves_flags)) };
}

#[cfg(target_arch = "aarch64")]
fn read_mode() -> u64 {
    let fpcr: u64;
    // SAFETY: reading FPCR has no side effects.
    unsafe { std::arch::asm!("mrs {}, fpcr", out(reg) fpcr, options(nostack, preserves_flags)) };
    fpcr
}

#[cfg(target_arch = "aarch64")]
fn write_mode(mode: u64) {
    // SAFETY: writes back a value read from FPCR with only the FZ bit changed.
    unsafe { std::arch::asm!("msr fpcr, {}", in(reg) mode, options(nostack, preserves_flags)) };
}

#[cfg(not(any(target_arch = "x86_64", target_arch = "aarch64")))]
const FLUSH_BITS: u64 = 0;
#[cfg(not(any(target_arch = "x86_64", target_arch = "aarch64")))]
fn read_mode() -> u64 {
    0
}
#[cfg(not(any(target_arch = "x86_64", target_arch = "aarch64")))]
fn write_mode(_mode: u64) {}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    #[cfg(any(target_arch = "x86_64", target_arch = "aarch64"))]
    fn guard_flushes_and_restores() {
        let before = read_mode();
        {
            let _guard = DenormalGuard::new();
            assert!(DenormalGuard::active());
            let tiny = std::hint::black_box(f32::MIN_POSITIVE);
            let halved = std::hint::black_box(tiny * 0.5);
            assert_eq!(halved, 0.0, "a subnormal result must flush to zero");
        }
        assert_eq!(read_mode(), before);
        let tiny = std::hint::black_box(f32::MIN_POSITIVE);
        assert!(std::hint::black_box(tiny * 0.5) > 0.0, "mode restored: subnormals are back");
    }
}
