//! Room-acoustic analysis of impulse responses (in progress).
