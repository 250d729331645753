//! Opt-in real-time priority for the audio callback's thread (`partita monitor --realtime`).
//!
//! cpal's own `realtime` option does nothing on Linux without its D-Bus variant, which needs system
//! services; a JACK server started without real-time scheduling runs its clients' threads at normal
//! priority. So the callback asks for SCHED_FIFO itself, once, on its first call: one system call, no
//! allocation. A thread that already runs real-time (a real-time JACK server's client thread) is left
//! as it is. Engine worker threads ask for priorities below this one (`EngineOptions::realtime_workers`:
//! 10 and up, the shortest worker level highest, i.e. rate-monotonic), so a worker never preempts the
//! callback that waits for nothing from it.
#![allow(unsafe_code)]

use crate::stats::BridgeCells;

/// The SCHED_FIFO priority asked for the callback thread: above the engine's worker threads.
pub const CALLBACK_PRIORITY: i32 = 40;

/// The calling thread's priority when it already runs SCHED_FIFO or SCHED_RR.
fn current_realtime_priority() -> Option<i32> {
    let mut policy = 0;
    let mut param = libc::sched_param { sched_priority: 0 };
    // SAFETY: pthread_self() is valid for the calling thread; both out-parameters are valid for writes.
    let rc = unsafe { libc::pthread_getschedparam(libc::pthread_self(), &mut policy, &mut param) };
    (rc == 0 && (policy == libc::SCHED_FIFO || policy == libc::SCHED_RR)).then_some(param.sched_priority)
}

/// Promotes the calling (callback) thread and records the outcome in the stream's counters.
pub(crate) fn promote_callback_thread(shared: &BridgeCells) {
    let granted =
        current_realtime_priority().map_or_else(|| partita_core::try_realtime_priority(CALLBACK_PRIORITY), Ok);
    shared.store_priority(granted);
}
