//! Every malformed input gets the right `IoError` variant and a one-line message naming the file, never a
//! panic. Each file is built byte by byte here.

mod support;

use std::fs::OpenOptions;

use partita_core::synth::Noise;
use partita_io::{load_ir, read_wav, read_wav_info, read_wav_limited, ConditionError, Encoding, IoError, IrOptions};
use support::*;

#[test]
fn not_a_wav() {
    let path = file("notes.wav", b"These are my notes, not audio.");
    let err = read_wav(&path).unwrap_err();
    assert!(matches!(&err, IoError::NotWav { found, .. } if found == b"Thes"), "{err:?}");
    assert_names_file(&err, &path);
    assert!(err.to_string().contains("not a WAV file"), "{err}");

    let path = file("rf64.wav", b"RF64\xff\xff\xff\xffWAVEds64");
    let err = read_wav(&path).unwrap_err();
    assert!(matches!(err, IoError::NotWav { .. }), "{err:?}");
    assert!(err.to_string().contains("RF64"), "{err}");
}

#[test]
fn empty_file() {
    let path = file("empty.wav", b"");
    let err = read_wav(&path).unwrap_err();
    assert!(matches!(&err, IoError::NotWav { found, .. } if found.is_empty()), "{err:?}");
    assert_names_file(&err, &path);
    assert!(err.to_string().contains("empty"), "{err}");
}

#[test]
fn missing_file() {
    let path = tmp("does-not-exist.wav");
    let err = read_wav(&path).unwrap_err();
    assert!(matches!(err, IoError::Open { .. }), "{err:?}");
    assert_names_file(&err, &path);
}

#[test]
fn riff_but_not_wave() {
    let mut bytes = b"RIFF\x0c\x00\x00\x00AVI ".to_vec();
    bytes.extend_from_slice(&chunk(b"LIST", b"hdrl"));
    let path = file("movie.wav", &bytes);
    let err = read_wav(&path).unwrap_err();
    assert!(matches!(&err, IoError::NotWave { form, .. } if form == b"AVI "), "{err:?}");
    assert_names_file(&err, &path);
    assert!(err.to_string().contains("\"AVI \""), "{err}");
}

#[test]
fn truncated_riff_header() {
    let path = file("cut-header.wav", b"RIFF\x24\x00\x00\x00WA");
    let err = read_wav(&path).unwrap_err();
    assert!(
        matches!(err, IoError::TruncatedHeader { offset: 0, needed_bytes: 12, available_bytes: 10, .. }),
        "{err:?}"
    );
    assert_names_file(&err, &path);
    assert!(err.to_string().contains("truncated"), "{err}");
    // A file that stops inside "RIFF" itself is taken for a truncated WAV too.
    let path = file("two-bytes.wav", b"RI");
    let err = read_wav(&path).unwrap_err();
    assert!(matches!(err, IoError::TruncatedHeader { available_bytes: 2, .. }), "{err:?}");
}

#[test]
fn truncated_fmt_chunk() {
    let mut bytes = riff(&[]);
    bytes.extend_from_slice(&chunk_claiming(b"fmt ", 16, &fmt_body(1, 1, 48_000, 16)[..6]));
    let path = file("cut-fmt.wav", &bytes);
    let err = read_wav(&path).unwrap_err();
    assert!(
        matches!(&err, IoError::TruncatedChunk { chunk, offset: 12, declared_bytes: 16, available_bytes: 6, .. }
            if chunk == "fmt "),
        "{err:?}"
    );
    assert_names_file(&err, &path);
    assert!(err.to_string().contains("\"fmt \""), "{err}");
}

#[test]
fn fmt_chunk_too_short_for_its_format() {
    let path =
        file("short-fmt.wav", &riff(&[chunk(b"fmt ", &fmt_body(1, 1, 48_000, 16)[..12]), chunk(b"data", &[0; 4])]));
    let err = read_wav(&path).unwrap_err();
    assert!(matches!(err, IoError::FmtTooShort { bytes: 12, needed_bytes: 16, .. }), "{err:?}");
    assert_names_file(&err, &path);

    // EXTENSIBLE needs 40 bytes.
    let path =
        file("short-ext.wav", &riff(&[chunk(b"fmt ", &fmt_body(0xFFFE, 1, 48_000, 16)), chunk(b"data", &[0; 4])]));
    let err = read_wav(&path).unwrap_err();
    assert!(matches!(err, IoError::FmtTooShort { bytes: 16, needed_bytes: 40, .. }), "{err:?}");
    assert_names_file(&err, &path);
}

#[test]
fn truncated_chunk_header() {
    let mut bytes = riff(&[fmt(1, 1, 48_000, 16)]);
    bytes.extend_from_slice(b"da");
    let path = file("cut-chunk-header.wav", &bytes);
    let err = read_wav(&path).unwrap_err();
    assert!(matches!(err, IoError::TruncatedHeader { offset: 36, needed_bytes: 8, available_bytes: 2, .. }), "{err:?}");
    assert_names_file(&err, &path);
}

#[test]
fn truncated_unknown_chunk_before_data() {
    let path = file("cut-list.wav", &riff(&[fmt(1, 1, 48_000, 16), chunk_claiming(b"LIST", 500, b"INFOISFT")]));
    let err = read_wav(&path).unwrap_err();
    assert!(
        matches!(&err, IoError::TruncatedChunk { chunk, declared_bytes: 500, available_bytes: 8, .. } if chunk == "LIST"),
        "{err:?}"
    );
    assert_names_file(&err, &path);
}

#[test]
fn data_chunk_longer_than_the_file() {
    let path = file(
        "long-data.wav",
        &riff(&[fmt(1, 2, 48_000, 16), chunk_claiming(b"data", 1000, &pcm_bytes(&[1, 2, 3, 4, 5], 16))]),
    );
    let err = read_wav(&path).unwrap_err();
    assert!(matches!(err, IoError::DataBeyondEnd { declared_bytes: 1000, available_bytes: 10, .. }), "{err:?}");
    assert_names_file(&err, &path);
    assert!(err.to_string().contains("1000 bytes"), "{err}");
    // read_wav_info sees it too: the header is checked without reading samples.
    assert!(matches!(read_wav_info(&path).unwrap_err(), IoError::DataBeyondEnd { .. }));
}

#[test]
fn zero_channels() {
    let mut body = fmt_body(1, 1, 48_000, 16);
    body[2..4].copy_from_slice(&0u16.to_le_bytes());
    let path = file("zero-channels.wav", &riff(&[chunk(b"fmt ", &body), chunk(b"data", &[0; 4])]));
    let err = read_wav(&path).unwrap_err();
    assert!(matches!(err, IoError::ZeroChannels { .. }), "{err:?}");
    assert_names_file(&err, &path);
    assert!(err.to_string().contains("0 channels"), "{err}");
}

#[test]
fn zero_sample_rate() {
    let path = file("zero-rate.wav", &wav(1, 1, 0, 16, &[0; 4]));
    let err = read_wav(&path).unwrap_err();
    assert!(matches!(err, IoError::ZeroSampleRate { .. }), "{err:?}");
    assert_names_file(&err, &path);
    assert!(err.to_string().contains("0 Hz"), "{err}");
}

#[test]
fn unsupported_format_tags() {
    for (tag, name) in
        [(0x0055u16, "MPEG layer 3"), (0x0002, "Microsoft ADPCM"), (0x0007, "mu-law"), (0x1234, "unknown")]
    {
        let path = file(&format!("tag-{tag:04x}.wav"), &wav(tag, 1, 48_000, 16, &[0; 4]));
        let err = read_wav(&path).unwrap_err();
        assert!(
            matches!(err, IoError::UnsupportedFormat { format_tag, extensible: false, .. } if format_tag == tag),
            "{err:?}"
        );
        assert_names_file(&err, &path);
        let msg = err.to_string();
        assert!(msg.contains(&format!("0x{tag:04X}")) && msg.contains(name), "{msg}");
    }
}

#[test]
fn unsupported_extensible_subformats() {
    let path = file("ext-adpcm.wav", &riff(&[fmt_ext(ks_guid(2), 2, 48_000, 16, 16, 3), chunk(b"data", &[0; 8])]));
    let err = read_wav(&path).unwrap_err();
    assert!(matches!(err, IoError::UnsupportedFormat { format_tag: 2, extensible: true, .. }), "{err:?}");
    assert_names_file(&err, &path);

    // Ambisonic B-format GUIDs (and any vendor GUID) do not share the KSDATAFORMAT tail.
    let mut guid = ks_guid(1);
    guid[4..].copy_from_slice(&[0x21, 0x07, 0xD3, 0x11, 0x86, 0x44, 0xC8, 0xC1, 0xCA, 0x00, 0x00, 0x00]);
    let path = file("ext-foreign-guid.wav", &riff(&[fmt_ext(guid, 4, 48_000, 16, 16, 0), chunk(b"data", &[0; 8])]));
    let err = read_wav(&path).unwrap_err();
    assert!(matches!(err, IoError::UnknownSubformat { guid: g, .. } if g == guid), "{err:?}");
    assert_names_file(&err, &path);
}

#[test]
fn unsupported_bit_depths() {
    for (tag, bits, encoding) in [(1u16, 12u16, Encoding::Pcm), (1, 64, Encoding::Pcm), (3, 16, Encoding::Float)] {
        let path = file(&format!("bits-{tag}-{bits}.wav"), &wav(tag, 1, 48_000, bits, &[0; 16]));
        let err = read_wav(&path).unwrap_err();
        assert!(
            matches!(err, IoError::UnsupportedBits { encoding: e, bits_per_sample, .. } if e == encoding && bits_per_sample == bits),
            "{err:?}"
        );
        assert_names_file(&err, &path);
    }
}

#[test]
fn bad_block_align() {
    let mut body = fmt_body(1, 2, 48_000, 16);
    body[12..14].copy_from_slice(&6u16.to_le_bytes());
    let path = file("block-align.wav", &riff(&[chunk(b"fmt ", &body), chunk(b"data", &[0; 12])]));
    let err = read_wav(&path).unwrap_err();
    assert!(matches!(err, IoError::BadBlockAlign { block_align: 6, expected: 4, .. }), "{err:?}");
    assert_names_file(&err, &path);
}

#[test]
fn missing_chunks() {
    let path = file("no-data.wav", &riff(&[fmt(1, 1, 48_000, 16), chunk(b"LIST", b"INFO")]));
    let err = read_wav(&path).unwrap_err();
    assert!(matches!(err, IoError::MissingChunk { chunk: "data", .. }), "{err:?}");
    assert_names_file(&err, &path);

    let path = file("no-fmt.wav", &riff(&[chunk(b"data", &[0; 4])]));
    let err = read_wav(&path).unwrap_err();
    assert!(matches!(err, IoError::MissingChunk { chunk: "fmt ", .. }), "{err:?}");
    assert_names_file(&err, &path);
}

#[test]
fn nan_and_infinity_in_float_files() {
    // float32 stereo, NaN in channel 1 at frame 2.
    let samples = [0.5f32, 0.25, -0.5, 0.0, 0.1, f32::NAN, 0.2, 0.3];
    let path = file("nan32.wav", &wav(3, 2, 48_000, 32, &f32_bytes(&samples)));
    let err = read_wav(&path).unwrap_err();
    assert!(matches!(err, IoError::NonFinite { channel: 1, frame: 2, .. }), "{err:?}");
    assert_names_file(&err, &path);
    // The same through the IR loader.
    let err = load_ir(&path, &IrOptions::default()).unwrap_err();
    assert!(matches!(err, IoError::NonFinite { channel: 1, frame: 2, .. }), "{err:?}");
    assert_names_file(&err, &path);

    // float64 mono: infinity at frame 1; a finite value beyond the f32 range at frame 0 of another file.
    let path = file("inf64.wav", &wav(3, 1, 48_000, 64, &f64_bytes(&[0.5, f64::NEG_INFINITY, 0.0])));
    let err = read_wav(&path).unwrap_err();
    assert!(matches!(err, IoError::NonFinite { channel: 0, frame: 1, .. }), "{err:?}");
    assert_names_file(&err, &path);
    let path = file("huge64.wav", &wav(3, 1, 48_000, 64, &f64_bytes(&[1e300, 0.0])));
    assert!(matches!(read_wav(&path).unwrap_err(), IoError::NonFinite { channel: 0, frame: 0, .. }));

    // The check covers every block of a long file, not just the first read.
    let mut long = vec![0.0f32; 3 * 40_000];
    long[3 * 30_000 + 2] = f32::INFINITY;
    let path =
        file("inf-late.wav", &riff(&[fmt_ext(ks_guid(3), 3, 48_000, 32, 32, 7), chunk(b"data", &f32_bytes(&long))]));
    assert!(matches!(read_wav(&path).unwrap_err(), IoError::NonFinite { channel: 2, frame: 30_000, .. }));
}

#[test]
fn empty_data_chunk_is_audio_but_not_an_ir() {
    let path = file("no-frames.wav", &wav(1, 2, 48_000, 16, &[]));
    let audio = read_wav(&path).unwrap();
    assert_eq!((audio.channel_count(), audio.frames()), (2, 0));
    let err = load_ir(&path, &IrOptions::default()).unwrap_err();
    assert!(matches!(err, IoError::EmptyIr { .. }), "{err:?}");
    assert_names_file(&err, &path);
    assert!(err.to_string().contains("0 frames"), "{err}");
}

#[test]
fn over_the_memory_limit_with_a_small_limit() {
    let path = file("limit-small.wav", &wav(1, 2, 48_000, 16, &pcm_bytes(&[0; 200], 16)));
    // 100 frames x 2 channels x 4 bytes = 800 bytes decoded.
    assert!(read_wav_limited(&path, 800).is_ok());
    let err = read_wav_limited(&path, 799).unwrap_err();
    assert!(matches!(err, IoError::TooLarge { channels: 2, frames: 100, bytes: 800, limit_bytes: 799, .. }), "{err:?}");
    assert_names_file(&err, &path);
}

/// A file whose header is followed by `data_bytes` bytes of (sparse) zeros, so the data chunk is really
/// there and only the size limits can refuse it.
fn sparse_wav(name: &str, tag: u16, channels: u16, rate: u32, bits: u16, data_bytes: u32) -> std::path::PathBuf {
    let mut head = riff(&[fmt(tag, channels, rate, bits)]);
    head.extend_from_slice(&chunk_claiming(b"data", data_bytes, &[]));
    let riff_size = (head.len() as u32 - 8).saturating_add(data_bytes);
    head[4..8].copy_from_slice(&riff_size.to_le_bytes());
    let path = file(name, &head);
    let f = OpenOptions::new().write(true).open(&path).unwrap();
    f.set_len(head.len() as u64 + u64::from(data_bytes)).unwrap();
    path
}

#[test]
fn over_the_default_memory_limit_is_refused_from_the_header() {
    // 4 GiB of 8-bit mono would decode to 16 GiB of f32; refused before allocating or reading samples.
    let path = sparse_wav("limit-default.wav", 1, 1, 48_000, 8, 0xFFFF_FF00);
    let info = read_wav_info(&path).unwrap();
    assert_eq!(info.frames, 0xFFFF_FF00);
    let err = read_wav(&path).unwrap_err();
    assert!(
        matches!(err, IoError::TooLarge { limit_bytes, bytes, .. } if limit_bytes == partita_io::MAX_DECODED_BYTES && bytes == 4 * 0xFFFF_FF00),
        "{err:?}"
    );
    assert_names_file(&err, &path);
    assert!(err.to_string().contains("2 GiB"), "{err}");
    std::fs::remove_file(&path).unwrap();
}

#[test]
fn ir_longer_than_the_limit_is_refused_from_the_header() {
    let limit = partita_io::MAX_IR_FRAMES;
    // 16-bit mono, limit + 1 frames.
    let path = sparse_wav("ir-too-long.wav", 1, 1, 48_000, 16, 2 * (limit as u32 + 1));
    let err = load_ir(&path, &IrOptions::default()).unwrap_err();
    assert!(
        matches!(err, IoError::IrTooLong { frames, limit_frames, .. } if frames == limit + 1 && limit_frames == limit),
        "{err:?}"
    );
    assert_names_file(&err, &path);
    std::fs::remove_file(&path).unwrap();

    // Under the limit at 44.1 kHz, over it once resampled to 48 kHz.
    let frames = limit - 1000;
    let path = sparse_wav("ir-too-long-resampled.wav", 1, 1, 44_100, 8, frames as u32);
    let options = IrOptions { sample_rate_hz: Some(48_000), ..IrOptions::default() };
    let err = load_ir(&path, &options).unwrap_err();
    let want = partita_io::resampled_frames(frames, 44_100, 48_000);
    assert!(matches!(err, IoError::IrTooLong { frames, .. } if frames == want), "{err:?}");
    std::fs::remove_file(&path).unwrap();
}

#[test]
fn routing_faults_name_the_file() {
    let path = file("three.wav", &wav(1, 3, 48_000, 16, &pcm_bytes(&[100, 200, 300], 16)));
    let err = load_ir(&path, &IrOptions::default()).unwrap_err();
    assert!(matches!(err, IoError::Condition { source: ConditionError::RoutingNeeded { channels: 3 }, .. }), "{err:?}");
    assert_names_file(&err, &path);
    assert!(err.to_string().contains("matrix:MxN"), "{err}");
}

/// Reads `bytes` as a WAV and requires an error (or, when `may_succeed`, anything but a panic).
fn no_panic(name: &str, bytes: &[u8], may_succeed: bool) {
    let path = file(name, bytes);
    match read_wav(&path) {
        Ok(_) => assert!(may_succeed, "{name} ({} bytes) was accepted", bytes.len()),
        Err(err) => assert_names_file(&err, &path),
    }
}

#[test]
fn every_truncation_of_a_valid_file_is_an_error() {
    let data = pcm_bytes(&(0..20).map(|i| i * 100 - 1000).collect::<Vec<_>>(), 24);
    let bytes = riff(&[chunk(b"JUNK", &[0; 5]), fmt_ext(ks_guid(1), 2, 48_000, 24, 24, 3), chunk(b"data", &data)]);
    assert!(read_wav(&file("whole.wav", &bytes)).is_ok());
    for cut in 0..bytes.len() {
        no_panic("cut.wav", &bytes[..cut], false);
    }
}

#[test]
fn random_header_corruption_never_panics() {
    let data = f32_bytes(&[0.5, -0.25, 0.125, 0.0, 1.0, -1.0]);
    let good = riff(&[
        chunk(b"LIST", b"INFOabc"),
        fmt(3, 2, 44_100, 32),
        chunk(b"fact", &[3, 0, 0, 0]),
        chunk(b"data", &data),
    ]);
    let mut noise = Noise::new(99);
    for _ in 0..1500 {
        let mut bytes = good.clone();
        for _ in 0..noise.range(1, 4) {
            let at = noise.range(0, bytes.len() - data.len() - 1);
            bytes[at] = noise.next_u64() as u8;
        }
        no_panic("corrupt.wav", &bytes, true);
    }
}
