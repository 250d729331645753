//! # partita-room
//!
//! Room acoustics beside the convolution engine: measurement sweeps ([`sweep`]) and their deconvolution into
//! impulse responses ([`deconvolve`]), decay analysis of impulse responses (Schroeder curves, EDT, T20, T30,
//! clarity, definition, centre time, Lundeby's noise floor, per octave band with flags: [`analysis::analyze`]),
//! IEC 61260-1 octave bands and filters, synthetic shoebox rooms rendered as stereo impulse responses, and a
//! dry demo phrase. Pure DSP on slices: no devices, no plotting, no file I/O, nothing for the audio thread.
//!
//! ```
//! use partita_room::analysis::t30;
//! use partita_room::room::{eyring_rt60_s, sabine_rt60_s};
//!
//! // A 10 x 8 x 4 m room with mean absorption 0.2: Eyring's reverberation time is below Sabine's.
//! let (sabine_s, eyring_s) = (sabine_rt60_s([10.0, 8.0, 4.0], 0.2), eyring_rt60_s([10.0, 8.0, 4.0], 0.2));
//! assert!(eyring_s < sabine_s);
//!
//! // Decaying noise that falls 60 dB in 24_000 frames measures about 0.5 s at 48 kHz.
//! let ir = partita_core::synth::decaying_noise(36_000, 24_000.0, 5);
//! let t30_s = t30(&ir, 48_000.0)?;
//! assert!((t30_s - 0.5).abs() < 0.02);
//! # Ok::<(), partita_room::analysis::AnalysisError>(())
//! ```
#![warn(missing_docs)]
#![deny(unsafe_op_in_unsafe_fn)]

pub mod align;
pub mod analysis;
pub mod deconvolve;
pub mod phrase;
pub mod room;
pub mod sweep;
