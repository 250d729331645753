//! WAV I/O and IR preparation (in progress).
