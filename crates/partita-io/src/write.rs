//! WAV writing through hound: 32-bit float, 24- and 16-bit PCM (TPDF-dithered by default), plain files and
//! atomic replacement.
//!
//! hound writes `WAVE_FORMAT_EXTENSIBLE` for more than 2 channels or more than 16 bits (so always for f32 and
//! 24-bit), and the plain PCM header otherwise. We add the pad byte RIFF needs after an odd-sized data chunk
//! (24-bit mono with an odd frame count), which hound leaves out.

use std::fmt;
use std::fs::{self, File, OpenOptions};
use std::io::{self, BufWriter, Seek, SeekFrom, Write};
use std::path::{Path, PathBuf};
use std::str::FromStr;
use std::sync::atomic::{AtomicU64, Ordering};

use crate::dither::{Dither, Quantizer};
use crate::error::{IoError, ParseError};

/// The sample format of a written WAV.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Default)]
pub enum SampleFormat {
    /// IEEE 754 32-bit float (`f32`): the samples exactly as computed, no dither, no clipping.
    #[default]
    F32,
    /// 24-bit integer PCM (`pcm24`): x * 2^23 rounded (dithered by default), clamped to the 24-bit range.
    Pcm24,
    /// 16-bit integer PCM (`pcm16`): x * 2^15 rounded (dithered by default), clamped to the 16-bit range.
    Pcm16,
}

impl SampleFormat {
    /// Bits per sample.
    pub fn bits(self) -> u16 {
        match self {
            Self::F32 => 32,
            Self::Pcm24 => 24,
            Self::Pcm16 => 16,
        }
    }

    /// Whether the format is integer PCM (and so quantized, and dithered when enabled).
    pub fn is_integer(self) -> bool {
        self != Self::F32
    }
}

impl fmt::Display for SampleFormat {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            Self::F32 => "f32",
            Self::Pcm24 => "pcm24",
            Self::Pcm16 => "pcm16",
        })
    }
}

impl FromStr for SampleFormat {
    type Err = ParseError;

    fn from_str(s: &str) -> Result<Self, Self::Err> {
        match s.trim().to_ascii_lowercase().as_str() {
            "f32" => Ok(Self::F32),
            "pcm24" => Ok(Self::Pcm24),
            "pcm16" => Ok(Self::Pcm16),
            _ => Err(ParseError { what: "sample format", given: s.to_string(), expected: "f32, pcm24 or pcm16" }),
        }
    }
}

/// The most sample data we write to one file: 4 GiB less 256 bytes, so every RIFF size field (32-bit) fits
/// with our headers (at most 68 bytes before the data) and the pad byte.
pub const MAX_WAV_DATA_BYTES: u64 = 0xFFFF_FF00;

/// Writes planar f32 channels to a WAV file, replacing it if it exists. Allocates a write buffer.
///
/// Integer formats are scaled by 2^(bits-1), dithered when `dither.enabled` (TPDF, see [`Dither`]), rounded
/// and clamped to the representable range. If writing fails part-way, the partial file is removed (an
/// existing file of that name is lost either way; use [`write_wav_atomic`] to keep it).
///
/// # Errors
/// [`IoError::WriteChannels`], [`IoError::WriteUnequalChannels`], [`IoError::WriteZeroSampleRate`] and
/// [`IoError::WriteTooLarge`] before any file is touched; [`IoError::WriteNonFinite`] for a NaN or infinite
/// sample; [`IoError::Write`] when the operating system refuses.
pub fn write_wav<C: AsRef<[f32]>>(
    path: &Path,
    channels: &[C],
    sample_rate_hz: u32,
    format: SampleFormat,
    dither: Dither,
) -> Result<(), IoError> {
    validate(path, channels, sample_rate_hz, format)?;
    let file = File::create(path).map_err(|source| IoError::Write { path: path.to_path_buf(), source })?;
    let result = encode_file(file, path, channels, sample_rate_hz, format, dither).map(drop);
    if result.is_err() {
        let _ = fs::remove_file(path);
    }
    result
}

/// Like [`write_wav`], but writes to a temporary file beside `path` and renames it over `path` only once it is
/// complete and synced. On any failure the temporary file is removed and an existing `path` is left untouched.
/// Allocates a write buffer.
///
/// # Errors
/// As [`write_wav`]; [`IoError::Write`] also when the temporary file cannot be created (for example when the
/// directory does not exist) or the rename fails (for example when `path` is a directory).
pub fn write_wav_atomic<C: AsRef<[f32]>>(
    path: &Path,
    channels: &[C],
    sample_rate_hz: u32,
    format: SampleFormat,
    dither: Dither,
) -> Result<(), IoError> {
    validate(path, channels, sample_rate_hz, format)?;
    let write_err = |source| IoError::Write { path: path.to_path_buf(), source };
    let tmp = temp_path(path).map_err(write_err)?;
    let file = OpenOptions::new().write(true).create_new(true).open(&tmp).map_err(write_err)?;
    let result = encode_file(file, path, channels, sample_rate_hz, format, dither)
        .and_then(|file| file.sync_all().map_err(write_err))
        .and_then(|()| fs::rename(&tmp, path).map_err(write_err));
    if result.is_err() {
        let _ = fs::remove_file(&tmp);
    }
    result
}

/// `.NAME.PID-N.partita-tmp` in the target's directory (a rename within one directory is atomic).
fn temp_path(path: &Path) -> io::Result<PathBuf> {
    static COUNTER: AtomicU64 = AtomicU64::new(0);
    let name =
        path.file_name().ok_or_else(|| io::Error::new(io::ErrorKind::InvalidInput, "the path has no file name"))?;
    let n = COUNTER.fetch_add(1, Ordering::Relaxed);
    let tmp = format!(".{}.{}-{n}.partita-tmp", name.to_string_lossy(), std::process::id());
    Ok(path.with_file_name(tmp))
}

fn validate<C: AsRef<[f32]>>(
    path: &Path,
    channels: &[C],
    sample_rate_hz: u32,
    format: SampleFormat,
) -> Result<(), IoError> {
    let path_buf = || path.to_path_buf();
    if channels.is_empty() || channels.len() > usize::from(u16::MAX) {
        return Err(IoError::WriteChannels { path: path_buf(), channels: channels.len() });
    }
    let expected = channels[0].as_ref().len();
    if let Some((channel, c)) = channels.iter().enumerate().find(|(_, c)| c.as_ref().len() != expected) {
        return Err(IoError::WriteUnequalChannels { path: path_buf(), channel, frames: c.as_ref().len(), expected });
    }
    if sample_rate_hz == 0 {
        return Err(IoError::WriteZeroSampleRate { path: path_buf() });
    }
    let data_bytes =
        (expected as u64).saturating_mul(channels.len() as u64).saturating_mul(u64::from(format.bits() / 8));
    if data_bytes > MAX_WAV_DATA_BYTES {
        return Err(IoError::WriteTooLarge { path: path_buf(), data_bytes, limit_bytes: MAX_WAV_DATA_BYTES });
    }
    Ok(())
}

fn hound_err(path: &Path, e: hound::Error) -> IoError {
    let source = match e {
        hound::Error::IoError(e) => e,
        other => io::Error::other(other.to_string()),
    };
    IoError::Write { path: path.to_path_buf(), source }
}

/// Encodes into `file` through a buffer; returns the flushed file.
fn encode_file<C: AsRef<[f32]>>(
    file: File,
    path: &Path,
    channels: &[C],
    sample_rate_hz: u32,
    format: SampleFormat,
    dither: Dither,
) -> Result<File, IoError> {
    let write_err = |source| IoError::Write { path: path.to_path_buf(), source };
    let mut w = BufWriter::with_capacity(1 << 16, file);
    encode(&mut w, path, channels, sample_rate_hz, format, dither)?;
    w.into_inner().map_err(|e| write_err(e.into_error()))
}

/// Writes a whole WAV to `w` (validated input). Leaves `w` flushed.
fn encode<W: Write + Seek, C: AsRef<[f32]>>(
    w: &mut W,
    path: &Path,
    channels: &[C],
    sample_rate_hz: u32,
    format: SampleFormat,
    dither: Dither,
) -> Result<(), IoError> {
    let write_err = |source| IoError::Write { path: path.to_path_buf(), source };
    let spec = hound::WavSpec {
        channels: channels.len() as u16,
        sample_rate: sample_rate_hz,
        bits_per_sample: format.bits(),
        sample_format: match format {
            SampleFormat::F32 => hound::SampleFormat::Float,
            SampleFormat::Pcm24 | SampleFormat::Pcm16 => hound::SampleFormat::Int,
        },
    };
    let frames = channels[0].as_ref().len();
    let mut writer = hound::WavWriter::new(&mut *w, spec).map_err(|e| hound_err(path, e))?;
    let mut quantizer = Quantizer::new(u32::from(format.bits()), dither);
    for frame in 0..frames {
        for (channel, samples) in channels.iter().enumerate() {
            let x = samples.as_ref()[frame];
            if !x.is_finite() {
                return Err(IoError::WriteNonFinite { path: path.to_path_buf(), channel, frame });
            }
            let written = match format {
                SampleFormat::F32 => writer.write_sample(x),
                SampleFormat::Pcm24 | SampleFormat::Pcm16 => writer.write_sample(quantizer.quantize(x)),
            };
            written.map_err(|e| hound_err(path, e))?;
        }
    }
    writer.finalize().map_err(|e| hound_err(path, e))?;
    // RIFF chunks are padded to an even size, and the RIFF size counts the pad byte.
    let end = w.seek(SeekFrom::End(0)).map_err(write_err)?;
    if end % 2 == 1 {
        w.write_all(&[0]).map_err(write_err)?;
        w.seek(SeekFrom::Start(4)).map_err(write_err)?;
        w.write_all(&((end + 1 - 8) as u32).to_le_bytes()).map_err(write_err)?;
    }
    w.flush().map_err(write_err)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sample_format_parses_and_displays() {
        for f in [SampleFormat::F32, SampleFormat::Pcm24, SampleFormat::Pcm16] {
            assert_eq!(f.to_string().parse::<SampleFormat>().unwrap(), f);
        }
        assert_eq!(" PCM16 ".parse::<SampleFormat>().unwrap(), SampleFormat::Pcm16);
        let err = "pcm8".parse::<SampleFormat>().unwrap_err();
        assert_eq!(err.to_string(), "unknown sample format \"pcm8\"; use f32, pcm24 or pcm16");
    }

    #[test]
    fn odd_data_chunk_gets_a_pad_byte_counted_in_the_riff_size() {
        let mut cur = io::Cursor::new(Vec::new());
        let x = [0.5f32, -0.5, 0.25];
        encode(&mut cur, Path::new("mem.wav"), &[&x[..]], 48_000, SampleFormat::Pcm24, Dither::OFF).unwrap();
        let bytes = cur.into_inner();
        assert_eq!(bytes.len() % 2, 0);
        assert_eq!(u32::from_le_bytes(bytes[4..8].try_into().unwrap()) as usize, bytes.len() - 8);
        assert_eq!(*bytes.last().unwrap(), 0);
        // data chunk size stays 9 (3 frames x 3 bytes): the pad is not part of the chunk.
        let data = bytes.windows(4).position(|w| w == b"data").unwrap();
        assert_eq!(u32::from_le_bytes(bytes[data + 4..data + 8].try_into().unwrap()), 9);
        assert_eq!(bytes.len(), data + 8 + 9 + 1);
    }
}
