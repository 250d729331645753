//! # partita-io
//!
//! WAV files in and out, and loading and conditioning of impulse responses for the [`partita_core`] engine.
//!
//! - Reading ([`read_wav`], [`read_wav_info`]): integer PCM 8/16/24/32-bit and IEEE float 32/64-bit, plain or
//!   `WAVE_FORMAT_EXTENSIBLE`, up to [`MAX_WAV_CHANNELS`] (1024) channels, to planar f32 ([`Audio`]). Integer
//!   samples are scaled as value / 2^(bits-1). Every malformed file gets one [`IoError`] naming the file and
//!   the fault, never a panic; files whose decoded samples would exceed [`MAX_DECODED_BYTES`] are refused
//!   before allocating.
//! - Writing ([`write_wav`], [`write_wav_atomic`]): 32-bit float, or 24/16-bit PCM with TPDF [`Dither`]
//!   (on by default), through hound.
//! - Conditioning ([`condition`], [`load_ir`]): resampling to the engine's rate with the frequency response
//!   kept (taps scaled by old rate / new rate), optional tail trimming and normalization (none by default, so
//!   a render is the exact convolution with the file), and the core's [`Routing`](partita_core::Routing) (1
//!   channel mono, 2 stereo, 4 true stereo LL LR RL RR, or `matrix:MxN` given explicitly).
//!
//! ```
//! use partita_core::Routing;
//! use partita_io::{load_ir, read_wav, write_wav_atomic, Dither, IrOptions, SampleFormat};
//!
//! let dir = std::env::temp_dir().join(format!("partita-io-doc-{}", std::process::id()));
//! std::fs::create_dir_all(&dir)?;
//! let path = dir.join("ir.wav");
//!
//! // A 2-channel IR at 44.1 kHz, written as 24-bit PCM without dither.
//! let taps = partita_core::synth::decaying_noise(4410, 2000.0, 1);
//! let right: Vec<f32> = taps.iter().map(|v| 0.5 * v).collect();
//! write_wav_atomic(&path, &[&taps[..], &right[..]], 44_100, SampleFormat::Pcm24, Dither::OFF)?;
//!
//! let audio = read_wav(&path)?;
//! assert_eq!((audio.channel_count(), audio.frames(), audio.sample_rate_hz), (2, 4410, 44_100));
//! assert!((audio.channels[0][0] - 1.0).abs() < 1e-6);
//!
//! // Ready for a 48 kHz engine: 4410 frames become ceil(4410 x 48000 / 44100) = 4800.
//! let options = IrOptions { sample_rate_hz: Some(48_000), ..IrOptions::default() };
//! let loaded = load_ir(&path, &options)?;
//! assert_eq!(loaded.routing, Routing::Stereo);
//! assert_eq!((loaded.ir.frames(), loaded.ir.sample_rate_hz()), (4800, 48_000));
//!
//! // Faults are one line naming the file.
//! std::fs::write(dir.join("notes.txt"), b"hello")?;
//! let err = read_wav(&dir.join("notes.txt")).unwrap_err();
//! assert!(err.to_string().starts_with(&format!("{}: not a WAV file", dir.join("notes.txt").display())));
//! # std::fs::remove_dir_all(&dir)?;
//! # Ok::<(), Box<dyn std::error::Error>>(())
//! ```
#![warn(missing_docs)]
#![deny(unsafe_op_in_unsafe_fn)]
#![forbid(unsafe_code)]

mod audio;
pub mod condition;
mod dither;
mod error;
mod info;
mod ir;
mod read;
mod write;

pub use audio::Audio;
pub use condition::{normalize, resample, resample_signal, resampled_frames, scale_to_peak, trim_tail, Normalize};
pub use dither::Dither;
pub use error::{ConditionError, IoError, ParseError};
pub use info::{Encoding, WavInfo, WAVE_FORMAT_EXTENSIBLE, WAVE_FORMAT_IEEE_FLOAT, WAVE_FORMAT_PCM};
pub use ir::{load_ir, load_ir_from, to_impulse_response, IrOptions, LoadedIr, MAX_IR_FRAMES};
pub use read::{read_wav, read_wav_from, read_wav_info, read_wav_limited, MAX_DECODED_BYTES, MAX_WAV_CHANNELS};
pub use write::{write_wav, write_wav_atomic, SampleFormat, MAX_WAV_DATA_BYTES};
