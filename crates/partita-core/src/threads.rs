//! Thread utilities for worker levels: CPU clocks and opt-in real-time priorities.

/// CPU seconds used by the calling thread (0 where the platform has no thread clock).
pub fn thread_cpu_seconds() -> f64 {
    #[cfg(unix)]
    {
        let mut ts = libc::timespec { tv_sec: 0, tv_nsec: 0 };
        // SAFETY: `ts` is a valid, writable timespec; CLOCK_THREAD_CPUTIME_ID exists on Linux and macOS.
        let rc = unsafe { libc::clock_gettime(libc::CLOCK_THREAD_CPUTIME_ID, &mut ts) };
        if rc == 0 {
            return ts.tv_sec as f64 + ts.tv_nsec as f64 * 1e-9;
        }
    }
    0.0
}

/// Tries to give the calling thread `SCHED_FIFO` priority `priority`; returns the priority granted,
/// or the OS error number when refused (commonly EPERM without the privilege). Never fails otherwise.
pub(crate) fn try_realtime_priority(priority: i32) -> Result<i32, i32> {
    #[cfg(target_os = "linux")]
    {
        // SAFETY: sched_param is plain data; pthread_self() is always valid for the calling thread.
        let rc = unsafe {
            let lo = libc::sched_get_priority_min(libc::SCHED_FIFO);
            let hi = libc::sched_get_priority_max(libc::SCHED_FIFO);
            let param = libc::sched_param { sched_priority: priority.clamp(lo, hi) };
            libc::pthread_setschedparam(libc::pthread_self(), libc::SCHED_FIFO, &param)
        };
        if rc == 0 {
            Ok(priority)
        } else {
            Err(rc)
        }
    }
    #[cfg(not(target_os = "linux"))]
    {
        let _ = priority;
        Err(-1)
    }
}
