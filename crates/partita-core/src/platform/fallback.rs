//! The portable fallback (std only), for targets without the unix implementation. On Linux it is built
//! only under the test-only `portable-fallback` feature, so that CI checks it compiles.

/// Not a CPU clock: this build has no thread CPU clock, and this always returns 0.0. CPU times and
/// loads computed from it (worker CPU seconds, the `partita` command's measured loads) read 0.
pub fn thread_cpu_seconds() -> f64 {
    0.0
}

/// Not a CPU clock: this build has no process CPU clock, and this always returns 0.0.
pub fn process_cpu_seconds() -> f64 {
    0.0
}

/// Always refused with [`NO_REALTIME`](super::NO_REALTIME): this build cannot set real-time priorities,
/// so worker threads run at normal priority.
pub fn try_realtime_priority(priority: i32) -> Result<i32, i32> {
    let _ = priority;
    Err(super::NO_REALTIME)
}
