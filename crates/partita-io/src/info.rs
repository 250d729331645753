//! What a WAV header says: the source format of a file.

use std::fmt;

/// How samples are encoded.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Encoding {
    /// Integer PCM: 8-bit unsigned (offset 128), wider signed two's complement, little-endian.
    Pcm,
    /// IEEE 754 float, little-endian.
    Float,
}

impl fmt::Display for Encoding {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            Self::Pcm => "PCM",
            Self::Float => "float",
        })
    }
}

/// The format tag of `WAVE_FORMAT_EXTENSIBLE`.
pub const WAVE_FORMAT_EXTENSIBLE: u16 = 0xFFFE;
/// The format tag of integer PCM.
pub const WAVE_FORMAT_PCM: u16 = 0x0001;
/// The format tag of IEEE float.
pub const WAVE_FORMAT_IEEE_FLOAT: u16 = 0x0003;

/// The source format of a WAV file, from its header (see [`read_wav_info`](crate::read_wav_info)).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct WavInfo {
    /// The `fmt ` chunk's format tag as stored: 1 (PCM), 3 (IEEE float) or 0xFFFE (EXTENSIBLE).
    pub format_tag: u16,
    /// PCM or float (for EXTENSIBLE, from the sub-format GUID).
    pub encoding: Encoding,
    /// Container bits per sample (8, 16, 24, 32 or 64).
    pub bits_per_sample: u16,
    /// Valid bits per sample: the EXTENSIBLE header's value, otherwise `bits_per_sample`. Samples are scaled by
    /// the container size whatever this says (the valid bits are the most significant ones).
    pub valid_bits_per_sample: u16,
    /// The EXTENSIBLE speaker mask, if any.
    pub channel_mask: Option<u32>,
    /// Channels.
    pub channels: u16,
    /// Sample rate in Hz.
    pub sample_rate_hz: u32,
    /// Whole frames in the data chunk (a trailing partial frame is ignored).
    pub frames: u64,
    /// Byte offset of the sample data in the file.
    pub data_offset: u64,
    /// Size of the data chunk in bytes, as declared.
    pub data_bytes: u64,
}

impl WavInfo {
    /// Whether the file uses `WAVE_FORMAT_EXTENSIBLE`.
    pub fn is_extensible(&self) -> bool {
        self.format_tag == WAVE_FORMAT_EXTENSIBLE
    }

    /// Bytes per sample in the file.
    pub fn bytes_per_sample(&self) -> u16 {
        self.bits_per_sample / 8
    }

    /// Bytes the samples take once decoded to f32.
    pub fn decoded_bytes(&self) -> u64 {
        self.frames.saturating_mul(u64::from(self.channels)).saturating_mul(4)
    }

    /// Duration in seconds.
    pub fn duration_s(&self) -> f64 {
        self.frames as f64 / f64::from(self.sample_rate_hz.max(1))
    }
}

impl fmt::Display for WavInfo {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "{}-bit {}{}, {} channel(s), {} Hz, {} frames",
            self.bits_per_sample,
            self.encoding,
            if self.is_extensible() { " (EXTENSIBLE)" } else { "" },
            self.channels,
            self.sample_rate_hz,
            self.frames
        )
    }
}
