//! WAV reading: our own RIFF parser (precise errors for truncated and oversized chunks, 64-bit float,
//! `WAVE_FORMAT_EXTENSIBLE`), decoding to planar f32.
//!
//! Format per the RIFF/WAVE specification (IBM/Microsoft, Multimedia Programming Interface and Data
//! Specifications 1.0, 1991) and Microsoft's `WAVEFORMATEXTENSIBLE` documentation: chunks are padded to an even
//! size, unknown chunks are skipped, 8-bit PCM is unsigned with 128 as zero, wider PCM is signed, 24-bit PCM is
//! packed in 3 little-endian bytes. Integer samples are scaled as value / 2^(bits-1) (the convention of
//! libsndfile, and so of `soundfile`).
//!
//! hound reads most of these files too, but not 64-bit float, and it reports truncation generically; parsing
//! the few header fields ourselves costs little and lets every fault name the chunk and the byte counts.

use std::fs::File;
use std::io::{self, BufReader, Read, Seek, SeekFrom};
use std::path::Path;

use crate::audio::Audio;
use crate::error::{fourcc, IoError};
use crate::info::{Encoding, WavInfo, WAVE_FORMAT_EXTENSIBLE, WAVE_FORMAT_IEEE_FLOAT, WAVE_FORMAT_PCM};

/// The most memory [`read_wav`] lets the decoded f32 samples take: 2^31 bytes (2 GiB, 2^29 samples, e.g.
/// 93 minutes of 48 kHz stereo). Checked from the header before anything is allocated.
pub const MAX_DECODED_BYTES: u64 = 1 << 31;

/// The tail of the `KSDATAFORMAT_SUBTYPE_*` GUIDs after the 2-byte format tag, as stored
/// (`xxxx0000-0000-0010-8000-00aa00389b71`, first three fields little-endian).
const KSDATAFORMAT_TAIL: [u8; 14] =
    [0x00, 0x00, 0x00, 0x00, 0x10, 0x00, 0x80, 0x00, 0x00, 0xAA, 0x00, 0x38, 0x9B, 0x71];

/// The most channels a WAV file may have for Partita to read it: 1024, the IR channels of a 32 x 32 matrix
/// routing.
pub const MAX_WAV_CHANNELS: u16 = 1024;

/// Reads the header of a WAV file: its source format, channels, rate and length. Reads no samples.
///
/// # Errors
/// Any [`IoError`] about the file's structure or format: not a WAV, truncated headers or chunks, a data chunk
/// longer than the file, 0 channels or more than [`MAX_WAV_CHANNELS`], 0 Hz, unsupported format tags or bit
/// depths, a bad block alignment.
pub fn read_wav_info(path: &Path) -> Result<WavInfo, IoError> {
    open(path).map(|(_, info)| info)
}

/// Reads a whole WAV file into planar f32: PCM 8/16/24/32-bit, IEEE float 32/64-bit, plain or
/// `WAVE_FORMAT_EXTENSIBLE`, up to [`MAX_WAV_CHANNELS`] channels. Allocates the samples.
///
/// Integer samples become value / 2^(bits-1); 64-bit floats are rounded to f32. Refuses files whose decoded
/// samples would exceed [`MAX_DECODED_BYTES`], and float files holding NaN or infinity. A trailing partial
/// frame in the data chunk is ignored.
///
/// # Errors
/// Everything [`read_wav_info`] reports, plus [`IoError::TooLarge`], [`IoError::NonFinite`] and
/// [`IoError::Read`].
pub fn read_wav(path: &Path) -> Result<Audio, IoError> {
    read_wav_limited(path, MAX_DECODED_BYTES)
}

/// [`read_wav`] with a memory limit of your choice for the decoded f32 samples, in bytes.
///
/// # Errors
/// As [`read_wav`], with [`IoError::TooLarge`] against `max_decoded_bytes`.
pub fn read_wav_limited(path: &Path, max_decoded_bytes: u64) -> Result<Audio, IoError> {
    read_checked(path, max_decoded_bytes, |_| Ok(())).map(|(_, audio)| audio)
}

/// [`read_wav_limited`] for WAV bytes from any reader, e.g. a file already open or bytes in memory (a
/// `std::io::Cursor`): the WAV is the reader's whole content, from position 0 to its end; `name` is the path the
/// errors name. Allocates the samples.
///
/// Memory: besides the decoded samples (at most 4 bytes per byte of the data chunk, for 8-bit PCM, and never
/// more than `max_decoded_bytes`) reading takes one read buffer of at most 64 KiB plus one frame, and one
/// channel table. A header that claims more data than the reader holds is refused before anything is
/// allocated.
///
/// # Errors
/// As [`read_wav_limited`], naming `name`.
pub fn read_wav_from<R: Read + Seek>(mut reader: R, name: &Path, max_decoded_bytes: u64) -> Result<Audio, IoError> {
    let read_err = |source| IoError::Read { path: name.to_path_buf(), source };
    let len = reader.seek(SeekFrom::End(0)).map_err(read_err)?;
    reader.seek(SeekFrom::Start(0)).map_err(read_err)?;
    let info = parse_header(&mut reader, len, name)?;
    decode_checked(reader, info, name, max_decoded_bytes, |_| Ok(())).map(|(_, audio)| audio)
}

/// Opens, parses the header, lets `check` refuse the file from its header, then decodes.
pub(crate) fn read_checked(
    path: &Path,
    max_decoded_bytes: u64,
    check: impl FnOnce(&WavInfo) -> Result<(), IoError>,
) -> Result<(WavInfo, Audio), IoError> {
    let (reader, info) = open(path)?;
    decode_checked(reader, info, path, max_decoded_bytes, check)
}

/// Refuses a header whose samples exceed `max_decoded_bytes` or that `check` refuses, then decodes.
pub(crate) fn decode_checked<R: Read + Seek>(
    mut reader: R,
    info: WavInfo,
    path: &Path,
    max_decoded_bytes: u64,
    check: impl FnOnce(&WavInfo) -> Result<(), IoError>,
) -> Result<(WavInfo, Audio), IoError> {
    if info.decoded_bytes() > max_decoded_bytes {
        return Err(IoError::TooLarge {
            path: path.to_path_buf(),
            channels: info.channels,
            frames: info.frames,
            bytes: info.decoded_bytes(),
            limit_bytes: max_decoded_bytes,
        });
    }
    check(&info)?;
    let audio = decode(&mut reader, &info, path)?;
    Ok((info, audio))
}

fn open(path: &Path) -> Result<(BufReader<File>, WavInfo), IoError> {
    let open_err = |source| IoError::Open { path: path.to_path_buf(), source };
    let file = File::open(path).map_err(open_err)?;
    let len = file.metadata().map_err(open_err)?.len();
    let mut reader = BufReader::with_capacity(1 << 16, file);
    let info = parse_header(&mut reader, len, path)?;
    Ok((reader, info))
}

/// Reads until `buf` is full or the input ends; returns the bytes read.
fn read_up_to(r: &mut impl Read, buf: &mut [u8]) -> io::Result<usize> {
    let mut n = 0;
    while n < buf.len() {
        match r.read(&mut buf[n..]) {
            Ok(0) => break,
            Ok(k) => n += k,
            Err(e) if e.kind() == io::ErrorKind::Interrupted => {}
            Err(e) => return Err(e),
        }
    }
    Ok(n)
}

fn u16_at(b: &[u8], at: usize) -> u16 {
    u16::from_le_bytes([b[at], b[at + 1]])
}

fn u32_at(b: &[u8], at: usize) -> u32 {
    u32::from_le_bytes([b[at], b[at + 1], b[at + 2], b[at + 3]])
}

/// The parsed and validated `fmt ` chunk.
struct Fmt {
    format_tag: u16,
    encoding: Encoding,
    channels: u16,
    sample_rate_hz: u32,
    block_align: u16,
    bits_per_sample: u16,
    valid_bits_per_sample: u16,
    channel_mask: Option<u32>,
}

fn parse_fmt(b: &[u8], declared: u64, path: &Path) -> Result<Fmt, IoError> {
    let path_buf = || path.to_path_buf();
    if b.len() < 16 {
        return Err(IoError::FmtTooShort { path: path_buf(), bytes: declared, needed_bytes: 16 });
    }
    let format_tag = u16_at(b, 0);
    let channels = u16_at(b, 2);
    let sample_rate_hz = u32_at(b, 4);
    let block_align = u16_at(b, 12);
    let bits_per_sample = u16_at(b, 14);
    if channels == 0 {
        return Err(IoError::ZeroChannels { path: path_buf() });
    }
    if channels > MAX_WAV_CHANNELS {
        // Each channel costs a table entry before any sample: 65535 of them in a 44-byte file took 1.7 MB
        // (found by the wav_reader fuzz target against its memory bound).
        return Err(IoError::TooManyChannels { path: path_buf(), channels });
    }
    if sample_rate_hz == 0 {
        return Err(IoError::ZeroSampleRate { path: path_buf() });
    }
    let (encoding, valid_bits_per_sample, channel_mask) = match format_tag {
        WAVE_FORMAT_PCM => (Encoding::Pcm, bits_per_sample, None),
        WAVE_FORMAT_IEEE_FLOAT => (Encoding::Float, bits_per_sample, None),
        WAVE_FORMAT_EXTENSIBLE => {
            // cbSize (2) + wValidBitsPerSample (2) + dwChannelMask (4) + SubFormat GUID (16) after the 16 bytes.
            if b.len() < 40 || u16_at(b, 16) < 22 {
                return Err(IoError::FmtTooShort { path: path_buf(), bytes: declared, needed_bytes: 40 });
            }
            let guid: [u8; 16] = b[24..40].try_into().expect("16 bytes");
            if guid[2..] != KSDATAFORMAT_TAIL {
                return Err(IoError::UnknownSubformat { path: path_buf(), guid });
            }
            let encoding = match u16_at(&guid, 0) {
                WAVE_FORMAT_PCM => Encoding::Pcm,
                WAVE_FORMAT_IEEE_FLOAT => Encoding::Float,
                sub => return Err(IoError::UnsupportedFormat { path: path_buf(), format_tag: sub, extensible: true }),
            };
            let valid = match u16_at(b, 18) {
                0 => bits_per_sample,
                v => v,
            };
            (encoding, valid, Some(u32_at(b, 20)))
        }
        tag => return Err(IoError::UnsupportedFormat { path: path_buf(), format_tag: tag, extensible: false }),
    };
    let supported = match encoding {
        Encoding::Pcm => matches!(bits_per_sample, 8 | 16 | 24 | 32),
        Encoding::Float => matches!(bits_per_sample, 32 | 64),
    };
    if !supported {
        return Err(IoError::UnsupportedBits { path: path_buf(), encoding, bits_per_sample });
    }
    let expected = u64::from(channels) * u64::from(bits_per_sample / 8);
    if u64::from(block_align) != expected {
        return Err(IoError::BadBlockAlign { path: path_buf(), block_align, expected });
    }
    Ok(Fmt {
        format_tag,
        encoding,
        channels,
        sample_rate_hz,
        block_align,
        bits_per_sample,
        valid_bits_per_sample,
        channel_mask,
    })
}

/// Parses the RIFF header and walks the chunks up to `fmt ` and `data`, checking every size against the
/// file's length `len`. Leaves `r` anywhere.
pub(crate) fn parse_header<R: Read + Seek>(r: &mut R, len: u64, path: &Path) -> Result<WavInfo, IoError> {
    let read_err = |source| IoError::Read { path: path.to_path_buf(), source };
    let mut head = [0u8; 12];
    let n = read_up_to(r, &mut head).map_err(read_err)?;
    let magic = n.min(4);
    if n == 0 || head[..magic] != b"RIFF"[..magic] {
        return Err(IoError::NotWav { path: path.to_path_buf(), found: head[..magic].to_vec() });
    }
    if n < 12 {
        return Err(IoError::TruncatedHeader {
            path: path.to_path_buf(),
            offset: 0,
            needed_bytes: 12,
            available_bytes: n as u64,
        });
    }
    if &head[8..12] != b"WAVE" {
        return Err(IoError::NotWave { path: path.to_path_buf(), form: head[8..12].try_into().expect("4 bytes") });
    }

    let mut fmt: Option<Fmt> = None;
    let mut data: Option<(u64, u64)> = None;
    let mut pos = 12u64;
    while fmt.is_none() || data.is_none() {
        if pos >= len {
            break;
        }
        if len - pos < 8 {
            return Err(IoError::TruncatedHeader {
                path: path.to_path_buf(),
                offset: pos,
                needed_bytes: 8,
                available_bytes: len - pos,
            });
        }
        r.seek(SeekFrom::Start(pos)).map_err(read_err)?;
        let mut ch = [0u8; 8];
        r.read_exact(&mut ch).map_err(read_err)?;
        let id: [u8; 4] = ch[..4].try_into().expect("4 bytes");
        let size = u64::from(u32_at(&ch, 4));
        let body = pos + 8;
        let available = len - body;
        match &id {
            b"data" => {
                if size > available {
                    return Err(IoError::DataBeyondEnd {
                        path: path.to_path_buf(),
                        declared_bytes: size,
                        available_bytes: available,
                    });
                }
                if data.is_none() {
                    data = Some((body, size));
                }
            }
            _ if size > available => {
                return Err(IoError::TruncatedChunk {
                    path: path.to_path_buf(),
                    chunk: fourcc(&id),
                    offset: pos,
                    declared_bytes: size,
                    available_bytes: available,
                });
            }
            b"fmt " if fmt.is_none() => {
                let mut b = [0u8; 40];
                let take = size.min(40) as usize;
                r.read_exact(&mut b[..take]).map_err(read_err)?;
                fmt = Some(parse_fmt(&b[..take], size, path)?);
            }
            // LIST, fact, PEAK, JUNK, bext, cue, a second fmt: not needed.
            _ => {}
        }
        // Chunks are padded to an even size; a missing pad byte at the very end is tolerated.
        pos = body + size + (size & 1);
    }
    let fmt = fmt.ok_or(IoError::MissingChunk { path: path.to_path_buf(), chunk: "fmt " })?;
    let (data_offset, data_bytes) = data.ok_or(IoError::MissingChunk { path: path.to_path_buf(), chunk: "data" })?;
    Ok(WavInfo {
        format_tag: fmt.format_tag,
        encoding: fmt.encoding,
        bits_per_sample: fmt.bits_per_sample,
        valid_bits_per_sample: fmt.valid_bits_per_sample,
        channel_mask: fmt.channel_mask,
        channels: fmt.channels,
        sample_rate_hz: fmt.sample_rate_hz,
        frames: data_bytes / u64::from(fmt.block_align),
        data_offset,
        data_bytes,
    })
}

/// One sample's bytes to f32.
type DecodeFn = fn(&[u8]) -> f32;

fn pcm8(b: &[u8]) -> f32 {
    (f32::from(b[0]) - 128.0) / 128.0
}

fn pcm16(b: &[u8]) -> f32 {
    f32::from(i16::from_le_bytes([b[0], b[1]])) / 32_768.0
}

fn pcm24(b: &[u8]) -> f32 {
    // Sign-extend by placing the 3 bytes in the top of an i32 and shifting back arithmetically.
    let v = i32::from_le_bytes([0, b[0], b[1], b[2]]) >> 8;
    v as f32 / 8_388_608.0
}

fn pcm32(b: &[u8]) -> f32 {
    // Rounding to f32 first and then scaling by an exact power of two equals rounding value / 2^31.
    i32::from_le_bytes([b[0], b[1], b[2], b[3]]) as f32 * (1.0 / 2_147_483_648.0)
}

fn float32(b: &[u8]) -> f32 {
    f32::from_le_bytes([b[0], b[1], b[2], b[3]])
}

fn float64(b: &[u8]) -> f32 {
    f64::from_le_bytes([b[0], b[1], b[2], b[3], b[4], b[5], b[6], b[7]]) as f32
}

/// Decodes the data chunk `info` describes into planar f32.
pub(crate) fn decode<R: Read + Seek>(r: &mut R, info: &WavInfo, path: &Path) -> Result<Audio, IoError> {
    let read_err = |source| IoError::Read { path: path.to_path_buf(), source };
    let decode: DecodeFn = match (info.encoding, info.bits_per_sample) {
        (Encoding::Pcm, 8) => pcm8,
        (Encoding::Pcm, 16) => pcm16,
        (Encoding::Pcm, 24) => pcm24,
        (Encoding::Pcm, 32) => pcm32,
        (Encoding::Float, 32) => float32,
        (Encoding::Float, 64) => float64,
        // parse_fmt refuses everything else.
        (encoding, bits_per_sample) => {
            return Err(IoError::UnsupportedBits { path: path.to_path_buf(), encoding, bits_per_sample })
        }
    };
    let channels = usize::from(info.channels);
    let bytes = usize::from(info.bytes_per_sample());
    let block = channels * bytes;
    // The caller checked the decoded size against a limit far below usize::MAX on 64-bit targets; on 32-bit
    // ones a frame count that does not fit is refused here rather than truncated.
    let frames = usize::try_from(info.frames).map_err(|_| IoError::TooLarge {
        path: path.to_path_buf(),
        channels: info.channels,
        frames: info.frames,
        bytes: info.decoded_bytes(),
        limit_bytes: usize::MAX as u64,
    })?;
    let mut out: Vec<Vec<f32>> = (0..channels).map(|_| Vec::with_capacity(frames)).collect();
    r.seek(SeekFrom::Start(info.data_offset)).map_err(read_err)?;
    let frames_per_read = (1 << 16) / block + 1;
    let mut buf = vec![0u8; frames_per_read * block];
    let check_finite = info.encoding == Encoding::Float;
    let mut done = 0usize;
    while done < frames {
        let n = frames_per_read.min(frames - done);
        let chunk = &mut buf[..n * block];
        r.read_exact(chunk).map_err(read_err)?;
        for frame in chunk.chunks_exact(block) {
            for (c, sample) in frame.chunks_exact(bytes).enumerate() {
                out[c].push(decode(sample));
            }
        }
        if check_finite {
            for (channel, samples) in out.iter().enumerate() {
                if let Some(i) = samples[done..].iter().position(|v| !v.is_finite()) {
                    return Err(IoError::NonFinite { path: path.to_path_buf(), channel, frame: (done + i) as u64 });
                }
            }
        }
        done += n;
    }
    Ok(Audio { channels: out, sample_rate_hz: info.sample_rate_hz })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn integer_decoders_scale_by_two_to_the_bits_minus_one() {
        assert_eq!(pcm8(&[0]), -1.0);
        assert_eq!(pcm8(&[128]), 0.0);
        assert_eq!(pcm8(&[255]), 127.0 / 128.0);
        assert_eq!(pcm16(&(-32768i16).to_le_bytes()), -1.0);
        assert_eq!(pcm16(&1i16.to_le_bytes()), 1.0 / 32768.0);
        assert_eq!(pcm24(&[0x00, 0x00, 0x80]), -1.0);
        assert_eq!(pcm24(&[0xFF, 0xFF, 0x7F]), 8_388_607.0 / 8_388_608.0);
        assert_eq!(pcm24(&[0xFF, 0xFF, 0xFF]), -1.0 / 8_388_608.0);
        assert_eq!(pcm24(&[0x01, 0x00, 0x00]), 1.0 / 8_388_608.0);
        assert_eq!(pcm32(&i32::MIN.to_le_bytes()), -1.0);
        assert_eq!(pcm32(&256i32.to_le_bytes()), 256.0 / 2_147_483_648.0);
        assert_eq!(float64(&0.25f64.to_le_bytes()), 0.25);
        assert!(!float64(&1e300f64.to_le_bytes()).is_finite());
    }
}
