//! The unix implementation (libc): POSIX CPU clocks and, on Linux, `SCHED_FIFO` through
//! `pthread_setschedparam`.

/// Reads a POSIX clock in seconds; 0 when the clock cannot be read.
fn clock_seconds(clock: libc::clockid_t) -> f64 {
    let mut ts = libc::timespec { tv_sec: 0, tv_nsec: 0 };
    // SAFETY: `ts` is a valid, writable timespec; the clock ids passed in (the thread and process CPU
    // clocks) exist on Linux and macOS, and an unknown id only makes clock_gettime return an error.
    let rc = unsafe { libc::clock_gettime(clock, &mut ts) };
    if rc != 0 {
        return 0.0;
    }
    ts.tv_sec as f64 + ts.tv_nsec as f64 * 1e-9
}

/// CPU seconds used by the calling thread, on its CPU clock (`CLOCK_THREAD_CPUTIME_ID`); 0 when the clock
/// cannot be read.
pub fn thread_cpu_seconds() -> f64 {
    clock_seconds(libc::CLOCK_THREAD_CPUTIME_ID)
}

/// CPU seconds used by every thread of this process, on the process CPU clock
/// (`CLOCK_PROCESS_CPUTIME_ID`); 0 when the clock cannot be read.
pub fn process_cpu_seconds() -> f64 {
    clock_seconds(libc::CLOCK_PROCESS_CPUTIME_ID)
}

/// Tries to give the calling thread `SCHED_FIFO` priority `priority`; returns the priority granted,
/// or the OS error number when refused (commonly EPERM without the privilege), or `NO_REALTIME` (the
/// platform module's) on unix targets other than Linux. Never fails otherwise.
pub fn try_realtime_priority(priority: i32) -> Result<i32, i32> {
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
        Err(super::NO_REALTIME)
    }
}
