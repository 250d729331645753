//! Test hooks (feature `test-hooks`): switches that break a guarantee on purpose, so a test can show that
//! its check would catch the breakage. Not a stable API; the crate's own tests turn the feature on.

use std::sync::atomic::{AtomicBool, Ordering};

/// When set, buffers are allocated without touching their pages ([`set_skip_prefault`]).
pub(crate) static SKIP_PREFAULT: AtomicBool = AtomicBool::new(false);

/// Engines built while this is `true` leave their buffers' pages untouched, as plain zeroed allocations
/// do, so the audio thread takes first-touch page faults in `process()`: what the page-fault test must
/// catch. Process-wide; restore it with `false`.
pub fn set_skip_prefault(skip: bool) {
    SKIP_PREFAULT.store(skip, Ordering::Relaxed);
}
