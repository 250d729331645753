//! Platform services for the engine's threads: thread and process CPU clocks and opt-in real-time
//! priorities. The one module of this crate with OS-specific code: `unix.rs` (libc) on unix targets,
//! `fallback.rs` (std only, no clocks, no priorities) on the others and under the test-only
//! `portable-fallback` feature.

#[cfg(all(unix, not(feature = "portable-fallback")))]
mod unix;
#[cfg(all(unix, not(feature = "portable-fallback")))]
use unix as imp;

#[cfg(any(not(unix), feature = "portable-fallback"))]
mod fallback;
#[cfg(any(not(unix), feature = "portable-fallback"))]
use fallback as imp;

pub use imp::{process_cpu_seconds, thread_cpu_seconds, try_realtime_priority};

/// The error [`try_realtime_priority`] returns where this build cannot set real-time priorities (the
/// portable fallback, unix targets other than Linux). Not an OS error number: those are small positive
/// integers, and this is `i32::MAX`. Not needed (so not compiled) where the Linux implementation runs.
#[cfg(any(not(target_os = "linux"), feature = "portable-fallback"))]
pub const NO_REALTIME: i32 = i32::MAX;

#[cfg(test)]
mod tests {
    use super::*;

    /// Busy work the optimiser cannot remove, for `ms` milliseconds of wall-clock time.
    #[cfg(all(unix, not(feature = "portable-fallback")))]
    fn spin(ms: u64) -> u64 {
        let start = std::time::Instant::now();
        let mut x = 1u64;
        while start.elapsed() < std::time::Duration::from_millis(ms) {
            for _ in 0..1000 {
                x = std::hint::black_box(x.wrapping_mul(6364136223846793005).wrapping_add(1));
            }
        }
        x
    }

    #[test]
    #[cfg(all(unix, not(feature = "portable-fallback")))]
    fn unix_cpu_clocks_advance_under_busy_work() {
        let (t0, p0) = (thread_cpu_seconds(), process_cpu_seconds());
        assert!(t0 > 0.0 && p0 > 0.0, "thread {t0} s, process {p0} s");
        std::hint::black_box(spin(50));
        let (t1, p1) = (thread_cpu_seconds(), process_cpu_seconds());
        // 50 ms of spinning is at least a few ms of CPU even on a loaded machine.
        assert!(t1 - t0 > 0.005, "thread clock {t0} -> {t1}");
        assert!(p1 - p0 >= t1 - t0 - 0.001, "process clock {p0} -> {p1} behind the thread's {t0} -> {t1}");
    }

    #[test]
    #[cfg(all(unix, not(feature = "portable-fallback")))]
    fn unix_thread_clock_is_per_thread() {
        let t0 = thread_cpu_seconds();
        std::thread::spawn(|| spin(50)).join().unwrap();
        let idle = thread_cpu_seconds() - t0;
        assert!(idle < 0.040, "this thread was charged {idle} s for another thread's spin");
    }

    #[test]
    #[cfg(feature = "portable-fallback")]
    fn fallback_returns_its_documented_values() {
        assert_eq!(thread_cpu_seconds(), 0.0);
        assert_eq!(process_cpu_seconds(), 0.0);
        assert_eq!(try_realtime_priority(10), Err(NO_REALTIME));
    }
}
