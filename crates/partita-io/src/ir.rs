//! Loading an impulse response from a WAV file, ready for the engine.

use std::io::{Read, Seek, SeekFrom};
use std::path::Path;

use partita_core::{ImpulseResponse, IrError, Routing};

use crate::audio::Audio;
use crate::condition::{normalize, resample, resampled_frames, trim_tail, Normalize};
use crate::error::{ConditionError, IoError};
use crate::info::WavInfo;
use crate::read::{decode_checked, parse_header, read_checked, MAX_DECODED_BYTES};

/// The longest impulse response accepted, in frames per channel (after resampling): 2^24 = 16,777,216 taps,
/// 5.8 minutes at 48 kHz. The engine keeps about 16 bytes per tap per (input, IR channel) pair, so this is
/// about 256 MiB per pair. Checked from the WAV header before the samples are read.
pub const MAX_IR_FRAMES: u64 = 1 << 24;

/// What [`load_ir`] does to the file's taps. The default does nothing: no resampling, no trimming, no gain,
/// the routing from the channel count.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct IrOptions {
    /// Resample to this rate (the engine's) when the file's rate differs.
    pub sample_rate_hz: Option<u32>,
    /// Trim the tail below this level relative to the peak, in dB (e.g. -90); see [`trim_tail`].
    pub trim_tail_db: Option<f64>,
    /// Gain normalization; see [`Normalize`].
    pub normalize: Normalize,
    /// The routing; `None` derives it from the channel count ([`Routing::for_ir_channels`]).
    pub routing: Option<Routing>,
}

/// An impulse response loaded by [`load_ir`], with what was done to it.
#[derive(Debug, Clone, PartialEq)]
pub struct LoadedIr {
    /// The validated taps, at the engine's rate.
    pub ir: ImpulseResponse,
    /// The routing that was checked against the channel count (the one given, or the count's default).
    pub routing: Routing,
    /// The file's header.
    pub source: WavInfo,
    /// Frames removed by tail trimming (at the file's rate).
    pub trimmed_frames: usize,
    /// The gain normalization applied (1 for none).
    pub gain: f64,
}

/// Reads, checks and conditions an impulse response: read the WAV, choose its routing from its channels
/// ([`Routing::choose_for_ir`]), trim the tail, resample to the engine's rate (keeping the frequency response),
/// normalize, validate.
/// Allocates.
///
/// The length limit [`MAX_IR_FRAMES`] is checked from the header (scaled by the resampling ratio) before any
/// sample is read.
///
/// # Errors
/// Every [`read_wav`](crate::read_wav) error; [`IoError::EmptyIr`] for 0 frames; [`IoError::IrTooLong`];
/// [`IoError::Condition`] for a missing or unfitting routing, a bad threshold, a silent IR with normalization;
/// [`IoError::Ir`] if the core refuses the taps. All name the file.
pub fn load_ir(path: &Path, options: &IrOptions) -> Result<LoadedIr, IoError> {
    let (source, audio) = read_checked(path, MAX_DECODED_BYTES, |info| check_length(info, options, path))?;
    condition_ir(source, audio, options, path)
}

/// [`load_ir`] for WAV bytes from any reader (a file already open, bytes in memory), the whole content from
/// position 0; `name` is the path the errors name. Allocates.
///
/// # Errors
/// As [`load_ir`].
pub fn load_ir_from<R: Read + Seek>(mut reader: R, name: &Path, options: &IrOptions) -> Result<LoadedIr, IoError> {
    let read_err = |source| IoError::Read { path: name.to_path_buf(), source };
    let len = reader.seek(SeekFrom::End(0)).map_err(read_err)?;
    reader.seek(SeekFrom::Start(0)).map_err(read_err)?;
    let info = parse_header(&mut reader, len, name)?;
    let (source, audio) =
        decode_checked(reader, info, name, MAX_DECODED_BYTES, |info| check_length(info, options, name))?;
    condition_ir(source, audio, options, name)
}

/// Refuses, from the header, an IR longer than [`MAX_IR_FRAMES`] once resampled.
fn check_length(info: &WavInfo, options: &IrOptions, path: &Path) -> Result<(), IoError> {
    let frames = match options.sample_rate_hz {
        Some(to_hz) => resampled_frames(info.frames, info.sample_rate_hz, to_hz),
        None => info.frames,
    };
    if frames > MAX_IR_FRAMES {
        return Err(IoError::IrTooLong { path: path.to_path_buf(), frames, limit_frames: MAX_IR_FRAMES });
    }
    Ok(())
}

/// The steps of [`load_ir`] after reading: routing, trim, resample, normalize, validate.
fn condition_ir(source: WavInfo, mut audio: Audio, options: &IrOptions, path: &Path) -> Result<LoadedIr, IoError> {
    let condition_err = |source| IoError::Condition { path: path.to_path_buf(), source };
    if audio.frames() == 0 {
        return Err(IoError::EmptyIr { path: path.to_path_buf() });
    }
    let channels = audio.channel_count();
    let routing = Routing::choose_for_ir(options.routing, channels).map_err(|source| {
        condition_err(match (options.routing, source) {
            (Some(routing), source) => ConditionError::RoutingMismatch { routing, channels, source },
            (None, _) => ConditionError::RoutingNeeded { channels },
        })
    })?;
    let trimmed_frames = match options.trim_tail_db {
        Some(db) => trim_tail(&mut audio, db).map_err(condition_err)?,
        None => 0,
    };
    if let Some(to_hz) = options.sample_rate_hz {
        audio = resample(&audio, to_hz).map_err(condition_err)?;
    }
    let gain = normalize(&mut audio, options.normalize).map_err(condition_err)?;
    let ir = to_impulse_response(audio, path)?;
    Ok(LoadedIr { ir, routing, source, trimmed_frames, gain })
}

/// Turns conditioned audio into the core's [`ImpulseResponse`], naming `path` in any error. Takes the samples
/// without copying.
///
/// # Errors
/// [`IoError::EmptyIr`] for no frames or no channels, [`IoError::IrTooLong`] beyond [`MAX_IR_FRAMES`], and
/// [`IoError::Ir`] for the core's other reasons (unequal channel lengths, a NaN or infinite tap, 0 Hz).
pub fn to_impulse_response(audio: Audio, path: &Path) -> Result<ImpulseResponse, IoError> {
    let frames = audio.frames() as u64;
    if frames > MAX_IR_FRAMES {
        return Err(IoError::IrTooLong { path: path.to_path_buf(), frames, limit_frames: MAX_IR_FRAMES });
    }
    ImpulseResponse::new(audio.channels, audio.sample_rate_hz).map_err(|source| match source {
        IrError::Empty | IrError::NoChannels => IoError::EmptyIr { path: path.to_path_buf() },
        source => IoError::Ir { path: path.to_path_buf(), source },
    })
}
