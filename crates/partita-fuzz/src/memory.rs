//! Peak memory of one call, from partita-ffi's counting allocator (the global allocator of every binary that
//! links this crate). The counters are process-wide: measure one call at a time (the replay test runs its
//! inputs one after another; libFuzzer runs one input at a time).

use partita_ffi::alloc_count::{peak_bytes, reset_peak_bytes};

/// Runs `f` and returns its result and the most bytes it held at once beyond what was live before (every
/// thread counted: an engine's workers too).
pub fn peak<T>(f: impl FnOnce() -> T) -> (T, usize) {
    let before = reset_peak_bytes();
    let out = f();
    (out, peak_bytes().saturating_sub(before))
}

/// Runs `f` and checks that it held at most `limit_bytes` at once.
///
/// # Panics
/// When it held more, naming `what` and the bound's rule.
pub fn bounded<T>(what: &str, rule: &str, limit_bytes: usize, f: impl FnOnce() -> T) -> T {
    let (out, used) = peak(f);
    assert!(used <= limit_bytes, "{what} took {used} bytes at peak, over its bound ({rule}) of {limit_bytes}");
    out
}
