//! Errors: [`IoError`] for anything tied to a file, [`ConditionError`] for conditioning IR taps in memory,
//! [`ParseError`] for option strings.
//!
//! Every `Display` is one line. File errors start with the file name, then say what is wrong and what to do.

use std::fmt;
use std::io;
use std::path::PathBuf;

use partita_core::{IrError, Routing, RoutingError};

use crate::info::Encoding;

/// A WAV file could not be read or written, or an impulse response loaded from a file was refused.
///
/// Every variant carries the file's path and the facts found; `Display` gives one line naming the file,
/// the fault and what to do about it.
#[derive(Debug)]
#[non_exhaustive]
pub enum IoError {
    /// The file could not be opened or its size read.
    Open {
        /// The file.
        path: PathBuf,
        /// What the operating system said.
        source: io::Error,
    },
    /// Reading failed part-way through.
    Read {
        /// The file.
        path: PathBuf,
        /// What the operating system said.
        source: io::Error,
    },
    /// The file does not start with `RIFF`.
    NotWav {
        /// The file.
        path: PathBuf,
        /// Its first bytes (up to 4).
        found: Vec<u8>,
    },
    /// A RIFF file whose form type is not `WAVE` (for example an AVI).
    NotWave {
        /// The file.
        path: PathBuf,
        /// The form type found at byte 8.
        form: [u8; 4],
    },
    /// The file ends inside the 12-byte RIFF header or inside an 8-byte chunk header.
    TruncatedHeader {
        /// The file.
        path: PathBuf,
        /// Byte offset where the header starts.
        offset: u64,
        /// Bytes the header needs.
        needed_bytes: u64,
        /// Bytes left in the file from `offset`.
        available_bytes: u64,
    },
    /// A chunk (other than `data`) declares more bytes than the file has left.
    TruncatedChunk {
        /// The file.
        path: PathBuf,
        /// The chunk's four-character id.
        chunk: String,
        /// Byte offset of the chunk header.
        offset: u64,
        /// Body size the chunk header declares.
        declared_bytes: u64,
        /// Bytes left in the file after the chunk header.
        available_bytes: u64,
    },
    /// The `fmt ` chunk is too short for its format (16 bytes, 40 for `WAVE_FORMAT_EXTENSIBLE`).
    FmtTooShort {
        /// The file.
        path: PathBuf,
        /// The chunk's size.
        bytes: u64,
        /// The size its format needs.
        needed_bytes: u64,
    },
    /// A required chunk is missing.
    MissingChunk {
        /// The file.
        path: PathBuf,
        /// `"fmt "` or `"data"`.
        chunk: &'static str,
    },
    /// The `data` chunk declares more bytes than the file has left.
    DataBeyondEnd {
        /// The file.
        path: PathBuf,
        /// Bytes the data chunk header declares.
        declared_bytes: u64,
        /// Bytes left in the file after the data chunk header.
        available_bytes: u64,
    },
    /// The header says 0 channels.
    ZeroChannels {
        /// The file.
        path: PathBuf,
    },
    /// More channels than Partita reads ([`MAX_WAV_CHANNELS`](crate::MAX_WAV_CHANNELS)).
    TooManyChannels {
        /// The file.
        path: PathBuf,
        /// What the header says.
        channels: u16,
    },
    /// The header says 0 Hz.
    ZeroSampleRate {
        /// The file.
        path: PathBuf,
    },
    /// A format tag other than PCM (1), IEEE float (3) or `WAVE_FORMAT_EXTENSIBLE` (0xFFFE) with one of those.
    UnsupportedFormat {
        /// The file.
        path: PathBuf,
        /// The tag (for `WAVE_FORMAT_EXTENSIBLE`, the sub-format's tag).
        format_tag: u16,
        /// Whether the tag came from an EXTENSIBLE sub-format GUID.
        extensible: bool,
    },
    /// A `WAVE_FORMAT_EXTENSIBLE` sub-format GUID that is not a standard `KSDATAFORMAT_SUBTYPE_*` GUID.
    UnknownSubformat {
        /// The file.
        path: PathBuf,
        /// The GUID bytes as stored.
        guid: [u8; 16],
    },
    /// A bit depth this reader does not decode (PCM: 8, 16, 24, 32; float: 32, 64).
    UnsupportedBits {
        /// The file.
        path: PathBuf,
        /// PCM or float.
        encoding: Encoding,
        /// The container bits per sample.
        bits_per_sample: u16,
    },
    /// The block alignment does not equal channels x bytes per sample.
    BadBlockAlign {
        /// The file.
        path: PathBuf,
        /// The header's block alignment.
        block_align: u16,
        /// channels x bytes per sample.
        expected: u64,
    },
    /// The decoded samples would take more memory than the reader allows (checked before allocating).
    TooLarge {
        /// The file.
        path: PathBuf,
        /// Channels in the file.
        channels: u16,
        /// Frames in the file.
        frames: u64,
        /// Bytes the decoded f32 samples would take.
        bytes: u64,
        /// The limit in bytes.
        limit_bytes: u64,
    },
    /// A float sample is NaN or infinite (or, for 64-bit floats, beyond the f32 range).
    NonFinite {
        /// The file.
        path: PathBuf,
        /// Channel of the first bad sample.
        channel: usize,
        /// Frame of the first bad sample.
        frame: u64,
    },
    /// An impulse response file holds no frames.
    EmptyIr {
        /// The file.
        path: PathBuf,
    },
    /// An impulse response is longer than [`MAX_IR_FRAMES`](crate::MAX_IR_FRAMES) (after resampling).
    IrTooLong {
        /// The file.
        path: PathBuf,
        /// Frames the IR has (or would have after resampling).
        frames: u64,
        /// The limit.
        limit_frames: u64,
    },
    /// The core refused the impulse response.
    Ir {
        /// The file.
        path: PathBuf,
        /// The core's reason.
        source: IrError,
    },
    /// Conditioning the impulse response (resampling, trimming, normalization) failed, or its routing does not
    /// fit it.
    Condition {
        /// The file.
        path: PathBuf,
        /// The reason.
        source: ConditionError,
    },
    /// Writing failed (creating, writing, syncing or renaming the file).
    Write {
        /// The file.
        path: PathBuf,
        /// What the operating system said.
        source: io::Error,
    },
    /// Audio to write has 0 channels or more than 65,535.
    WriteChannels {
        /// The file.
        path: PathBuf,
        /// Channels given.
        channels: usize,
    },
    /// Audio to write has channels of different lengths.
    WriteUnequalChannels {
        /// The file.
        path: PathBuf,
        /// First channel whose length differs from channel 0.
        channel: usize,
        /// Its length.
        frames: usize,
        /// Channel 0's length.
        expected: usize,
    },
    /// Audio to write has a sample rate of 0 Hz.
    WriteZeroSampleRate {
        /// The file.
        path: PathBuf,
    },
    /// The data would not fit a RIFF file (4 GiB, 32-bit sizes).
    WriteTooLarge {
        /// The file.
        path: PathBuf,
        /// Bytes of sample data.
        data_bytes: u64,
        /// The most a RIFF WAV can hold with our header.
        limit_bytes: u64,
    },
    /// A sample to write is NaN or infinite.
    WriteNonFinite {
        /// The file.
        path: PathBuf,
        /// Channel of the first bad sample.
        channel: usize,
        /// Frame of the first bad sample.
        frame: usize,
    },
}

/// A well-known name for a WAV format tag, for messages.
pub(crate) fn tag_name(tag: u16) -> &'static str {
    match tag {
        0x0001 => "PCM",
        0x0002 => "Microsoft ADPCM",
        0x0003 => "IEEE float",
        0x0006 => "A-law",
        0x0007 => "mu-law",
        0x0011 => "IMA ADPCM",
        0x0031 => "GSM 6.10",
        0x0050 => "MPEG",
        0x0055 => "MPEG layer 3",
        0x0092 => "Dolby AC-3 SPDIF",
        0x00FF => "AAC",
        0x1610 => "HE-AAC",
        0x2000 => "Dolby AC-3",
        0xF1AC => "FLAC",
        0xFFFE => "EXTENSIBLE",
        _ => "unknown",
    }
}

/// A four-character code for messages: printable ASCII kept, anything else shown as `?`.
pub(crate) fn fourcc(bytes: &[u8]) -> String {
    bytes.iter().map(|&b| if b.is_ascii_graphic() || b == b' ' { b as char } else { '?' }).collect()
}

const CONVERT: &str = "convert it to PCM or float WAV (e.g. `ffmpeg -i IN -c:a pcm_f32le OUT.wav`)";

/// " (N GiB)" for sizes of a GiB or more, else nothing.
fn gib(bytes: u64) -> String {
    let g = bytes as f64 / f64::from(1u32 << 30);
    match g {
        g if g < 1.0 => String::new(),
        g if g.fract() == 0.0 => format!(" ({g:.0} GiB)"),
        g => format!(" ({g:.1} GiB)"),
    }
}

impl fmt::Display for IoError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::Open { path, source } => write!(f, "{}: cannot open: {source}", path.display()),
            Self::Read { path, source } => write!(f, "{}: read failed: {source}", path.display()),
            Self::NotWav { path, found } if found.is_empty() => {
                write!(f, "{}: not a WAV file (the file is empty); give a WAV file", path.display())
            }
            Self::NotWav { path, found } => {
                let found = fourcc(found);
                let hint = match found.as_str() {
                    "RIFX" => "big-endian RIFX is not supported; ",
                    "RF64" | "BW64" => "64-bit RF64/BW64 WAV is not supported; ",
                    _ => "",
                };
                write!(
                    f,
                    "{}: not a WAV file (starts with \"{found}\", not \"RIFF\"); {hint}give a WAV file, or \
                     convert other audio (e.g. `ffmpeg -i IN -c:a pcm_f32le OUT.wav`)",
                    path.display()
                )
            }
            Self::NotWave { path, form } => write!(
                f,
                "{}: a RIFF file of type \"{}\", not a WAV (\"WAVE\"); give a WAV file",
                path.display(),
                fourcc(form)
            ),
            Self::TruncatedHeader { path, offset, needed_bytes, available_bytes } => write!(
                f,
                "{}: truncated: the file ends {available_bytes} bytes into the {needed_bytes}-byte header at byte \
                 {offset}; the file is cut short, export it again",
                path.display()
            ),
            Self::TruncatedChunk { path, chunk, offset, declared_bytes, available_bytes } => write!(
                f,
                "{}: truncated: chunk \"{chunk}\" at byte {offset} declares {declared_bytes} bytes but only \
                 {available_bytes} follow; the file is cut short or damaged, export it again",
                path.display()
            ),
            Self::FmtTooShort { path, bytes, needed_bytes } => write!(
                f,
                "{}: the fmt chunk is {bytes} bytes, its format needs {needed_bytes}; the header is damaged",
                path.display()
            ),
            Self::MissingChunk { path, chunk } => {
                write!(f, "{}: no \"{chunk}\" chunk; the file is not a complete WAV, export it again", path.display())
            }
            Self::DataBeyondEnd { path, declared_bytes, available_bytes } => write!(
                f,
                "{}: the data chunk declares {declared_bytes} bytes but the file has only {available_bytes} \
                 after its header; the file is truncated or was never finalized, export it again",
                path.display()
            ),
            Self::ZeroChannels { path } => {
                write!(f, "{}: the header says 0 channels; the header is damaged", path.display())
            }
            Self::TooManyChannels { path, channels } => write!(
                f,
                "{}: the header says {channels} channels; Partita reads at most {} (a matrix routing of 32 x 32)",
                path.display(),
                crate::MAX_WAV_CHANNELS
            ),
            Self::ZeroSampleRate { path } => {
                write!(f, "{}: the header says a sample rate of 0 Hz; the header is damaged", path.display())
            }
            Self::UnsupportedFormat { path, format_tag, extensible } => write!(
                f,
                "{}: unsupported {}format tag 0x{format_tag:04X} ({}); only PCM and IEEE float are read: {CONVERT}",
                path.display(),
                if *extensible { "EXTENSIBLE sub-" } else { "" },
                tag_name(*format_tag)
            ),
            Self::UnknownSubformat { path, guid } => {
                let hex: String = guid.iter().map(|b| format!("{b:02x}")).collect();
                write!(
                    f,
                    "{}: unsupported EXTENSIBLE sub-format GUID {hex} (not PCM or IEEE float); {CONVERT}",
                    path.display()
                )
            }
            Self::UnsupportedBits { path, encoding, bits_per_sample } => {
                let supported = match encoding {
                    Encoding::Pcm => "8, 16, 24 or 32",
                    Encoding::Float => "32 or 64",
                };
                write!(
                    f,
                    "{}: {bits_per_sample}-bit {encoding} is not supported ({encoding} must be {supported} bits); \
                     {CONVERT}",
                    path.display()
                )
            }
            Self::BadBlockAlign { path, block_align, expected } => write!(
                f,
                "{}: block alignment is {block_align} bytes but channels x bytes per sample is {expected}; \
                 the header is damaged",
                path.display()
            ),
            Self::TooLarge { path, channels, frames, bytes, limit_bytes } => write!(
                f,
                "{}: {frames} frames of {channels} channel(s) would take {bytes} bytes as f32, over the \
                 {limit_bytes}-byte{} limit; shorten or split the file",
                path.display(),
                gib(*limit_bytes)
            ),
            Self::NonFinite { path, channel, frame } => write!(
                f,
                "{}: channel {channel} has a NaN or infinite sample (or one beyond the f32 range) at frame {frame}; \
                 fix or re-export the file",
                path.display()
            ),
            Self::EmptyIr { path } => {
                write!(f, "{}: the impulse response has 0 frames; give a file with at least one frame", path.display())
            }
            Self::IrTooLong { path, frames, limit_frames } => write!(
                f,
                "{}: the impulse response would have {frames} frames, over the limit of {limit_frames} frames \
                 (about 16 bytes per tap per path in the engine); trim it (e.g. trim the tail)",
                path.display()
            ),
            Self::Ir { path, source } => write!(f, "{}: {source}", path.display()),
            Self::Condition { path, source } => write!(f, "{}: {source}", path.display()),
            Self::Write { path, source } => write!(f, "{}: cannot write: {source}", path.display()),
            Self::WriteChannels { path, channels } => {
                write!(f, "{}: cannot write {channels} channels; a WAV holds 1 to 65535", path.display())
            }
            Self::WriteUnequalChannels { path, channel, frames, expected } => write!(
                f,
                "{}: cannot write: channel {channel} has {frames} frames but channel 0 has {expected}; \
                 give channels of one length",
                path.display()
            ),
            Self::WriteZeroSampleRate { path } => {
                write!(f, "{}: cannot write a sample rate of 0 Hz", path.display())
            }
            Self::WriteTooLarge { path, data_bytes, limit_bytes } => write!(
                f,
                "{}: cannot write {data_bytes} bytes of samples; a RIFF WAV holds at most {limit_bytes}; \
                 write fewer frames or split the output",
                path.display()
            ),
            Self::WriteNonFinite { path, channel, frame } => write!(
                f,
                "{}: not written: channel {channel} has a NaN or infinite sample at frame {frame}",
                path.display()
            ),
        }
    }
}

impl std::error::Error for IoError {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        match self {
            Self::Open { source, .. } | Self::Read { source, .. } | Self::Write { source, .. } => Some(source),
            Self::Ir { source, .. } => Some(source),
            Self::Condition { source, .. } => Some(source),
            _ => None,
        }
    }
}

impl IoError {
    /// The file the error is about.
    pub fn path(&self) -> &std::path::Path {
        match self {
            Self::Open { path, .. }
            | Self::Read { path, .. }
            | Self::NotWav { path, .. }
            | Self::NotWave { path, .. }
            | Self::TruncatedHeader { path, .. }
            | Self::TruncatedChunk { path, .. }
            | Self::FmtTooShort { path, .. }
            | Self::MissingChunk { path, .. }
            | Self::DataBeyondEnd { path, .. }
            | Self::ZeroChannels { path }
            | Self::TooManyChannels { path, .. }
            | Self::ZeroSampleRate { path }
            | Self::UnsupportedFormat { path, .. }
            | Self::UnknownSubformat { path, .. }
            | Self::UnsupportedBits { path, .. }
            | Self::BadBlockAlign { path, .. }
            | Self::TooLarge { path, .. }
            | Self::NonFinite { path, .. }
            | Self::EmptyIr { path }
            | Self::IrTooLong { path, .. }
            | Self::Ir { path, .. }
            | Self::Condition { path, .. }
            | Self::Write { path, .. }
            | Self::WriteChannels { path, .. }
            | Self::WriteUnequalChannels { path, .. }
            | Self::WriteZeroSampleRate { path }
            | Self::WriteTooLarge { path, .. }
            | Self::WriteNonFinite { path, .. } => path,
        }
    }
}

/// Conditioning impulse-response taps in memory (resampling, trimming, normalization) failed, or no routing fits
/// them. [`load_ir`](crate::load_ir) wraps it in [`IoError::Condition`] with the file name.
#[derive(Debug, Clone, PartialEq)]
#[non_exhaustive]
pub enum ConditionError {
    /// Resampling from or to 0 Hz.
    ResampleZeroRate {
        /// Source rate.
        from_hz: u32,
        /// Target rate.
        to_hz: u32,
    },
    /// The two rates share too small a common divisor: the FFT resampler would need huge transforms.
    ResampleRates {
        /// Source rate.
        from_hz: u32,
        /// Target rate.
        to_hz: u32,
        /// FFT frames it would need.
        fft_frames: usize,
    },
    /// The resampler refused the job.
    Resampler {
        /// rubato's message.
        reason: String,
    },
    /// Channels of different lengths.
    UnequalChannels {
        /// First channel whose length differs from channel 0.
        channel: usize,
        /// Its length.
        frames: usize,
        /// Channel 0's length.
        expected: usize,
    },
    /// A trim threshold above 0 dB (above the peak) or not a number.
    BadThreshold {
        /// The threshold given.
        threshold_db: f64,
    },
    /// Peak or energy normalization of an all-zero impulse response.
    Silent,
    /// No routing follows from this channel count; the user must give one.
    RoutingNeeded {
        /// IR channels.
        channels: usize,
    },
    /// The routing given does not fit the IR's channel count.
    RoutingMismatch {
        /// The routing given.
        routing: Routing,
        /// IR channels.
        channels: usize,
        /// The core's reason.
        source: RoutingError,
    },
}

impl fmt::Display for ConditionError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::ResampleZeroRate { from_hz, to_hz } => {
                write!(f, "cannot resample from {from_hz} Hz to {to_hz} Hz; both rates must be above 0")
            }
            Self::ResampleRates { from_hz, to_hz, fft_frames } => write!(
                f,
                "cannot resample {from_hz} Hz to {to_hz} Hz: the rates share too small a common divisor (the FFT \
                 resampler would need {fft_frames}-frame transforms); convert the file with another tool first"
            ),
            Self::Resampler { reason } => write!(f, "resampler refused: {reason}"),
            Self::UnequalChannels { channel, frames, expected } => write!(
                f,
                "channel {channel} has {frames} frames but channel 0 has {expected}; give channels of one length"
            ),
            Self::BadThreshold { threshold_db } => write!(
                f,
                "tail trim threshold {threshold_db} dB is not at or below 0 dB (relative to the peak); \
                 give a negative value such as -90"
            ),
            Self::Silent => write!(f, "the impulse response is all zeros; it cannot be normalized (use none)"),
            Self::RoutingNeeded { channels } => write!(
                f,
                "no default routing for a {channels}-channel impulse response (1 is mono, 2 stereo, 4 true \
                 stereo); give the routing explicitly, e.g. matrix:MxN with M x N = {channels}"
            ),
            Self::RoutingMismatch { routing, channels, source } => {
                write!(f, "routing {routing} does not fit a {channels}-channel impulse response: {source}")
            }
        }
    }
}

impl std::error::Error for ConditionError {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        match self {
            Self::RoutingMismatch { source, .. } => Some(source),
            _ => None,
        }
    }
}

/// An option string (sample format, normalization) was not understood.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ParseError {
    /// What was being parsed, e.g. `"sample format"`.
    pub what: &'static str,
    /// The text given.
    pub given: String,
    /// The accepted forms.
    pub expected: &'static str,
}

impl fmt::Display for ParseError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "unknown {} \"{}\"; use {}", self.what, self.given, self.expected)
    }
}

impl std::error::Error for ParseError {}
