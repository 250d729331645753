//! Offline rendering of whole signals across threads (in progress).
