//! Synthetic rooms (in progress).
