//! Test hooks (feature `test-hooks`): switches that break a guarantee on purpose, so a test can show that
//! its check would catch the breakage. Not a stable API; the crate's own tests turn the feature on.

use std::sync::atomic::{AtomicBool, Ordering};

pub use crate::denormal::DenormalGuard;

/// When set, buffers are allocated without touching their pages ([`set_skip_prefault`]).
pub(crate) static SKIP_PREFAULT: AtomicBool = AtomicBool::new(false);

/// Engines built while this is `true` leave their buffers' pages untouched, as plain zeroed allocations
/// do, so the audio thread takes first-touch page faults in `process()`: what the page-fault test must
/// catch. Process-wide; restore it with `false`.
pub fn set_skip_prefault(skip: bool) {
    SKIP_PREFAULT.store(skip, Ordering::Relaxed);
}

/// When set, worker threads start without flush-to-zero ([`set_workers_without_flush`]).
pub(crate) static WORKERS_WITHOUT_FLUSH: AtomicBool = AtomicBool::new(false);

/// Worker threads started while this is `true` do not set flush-to-zero, so a test can show that its
/// check of the workers' mode ([`Engine::worker_flush_modes`](crate::Engine::worker_flush_modes)) fails.
/// Process-wide; restore it with `false`.
pub fn set_workers_without_flush(on: bool) {
    WORKERS_WITHOUT_FLUSH.store(on, Ordering::Relaxed);
}
