//! Synthetic dry phrases (in progress).
