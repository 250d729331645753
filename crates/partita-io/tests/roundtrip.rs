//! Reading hand-built files of every format, writing and reading back every output format, dither statistics,
//! and atomic replacement.

mod support;

use std::path::Path;

use partita_core::synth::Noise;
use partita_io::{
    read_wav, read_wav_info, write_wav, write_wav_atomic, Audio, Dither, Encoding, IoError, SampleFormat,
};
use support::*;

// ---------------------------------------------------------------------------------------------------------
// Reading hand-built files

#[test]
fn reads_every_pcm_width_plain_and_extensible() {
    // Interleaved stereo integers and what they must read as: value / 2^(bits-1); 8-bit is unsigned.
    let cases: [(u16, Vec<i32>); 4] = [
        (8, vec![-128, 127, 0, 1, -1, 64]),
        (16, vec![-32768, 32767, 0, 1, -1, 12345]),
        (24, vec![-8_388_608, 8_388_607, 0, 1, -1, -1_234_567]),
        (32, vec![i32::MIN, i32::MAX, 0, 256, -256, 1 << 30]),
    ];
    for (bits, values) in cases {
        let data = pcm_bytes(&values, bits);
        let scale = 2f64.powi(i32::from(bits) - 1);
        let want: Vec<f32> = values.iter().map(|&v| (f64::from(v) / scale) as f32).collect();
        for extensible in [false, true] {
            let fmt_chunk =
                if extensible { fmt_ext(ks_guid(1), 2, 44_100, bits, bits, 3) } else { fmt(1, 2, 44_100, bits) };
            let path = file(&format!("pcm{bits}-{extensible}.wav"), &riff(&[fmt_chunk, chunk(b"data", &data)]));
            let audio = read_wav(&path).unwrap();
            assert_eq!(audio.sample_rate_hz, 44_100);
            assert_eq!(interleave(&audio.channels), want, "{bits}-bit, extensible {extensible}");
            let info = read_wav_info(&path).unwrap();
            assert_eq!((info.encoding, info.bits_per_sample, info.channels, info.frames), (Encoding::Pcm, bits, 2, 3));
            assert_eq!(info.is_extensible(), extensible);
            assert_eq!(info.channel_mask, extensible.then_some(3));
        }
    }
}

#[test]
fn reads_float_32_and_64_plain_and_extensible() {
    let values = [0.5f64, -0.25, 1.0 / 3.0, -1.5, 0.0, 1e-30];
    for bits in [32u16, 64] {
        let data = if bits == 32 {
            f32_bytes(&values.iter().map(|&v| v as f32).collect::<Vec<_>>())
        } else {
            f64_bytes(&values)
        };
        for extensible in [false, true] {
            let fmt_chunk =
                if extensible { fmt_ext(ks_guid(3), 3, 96_000, bits, bits, 7) } else { fmt(3, 3, 96_000, bits) };
            let path = file(&format!("float{bits}-{extensible}.wav"), &riff(&[fmt_chunk, chunk(b"data", &data)]));
            let audio = read_wav(&path).unwrap();
            let want: Vec<f32> = values.iter().map(|&v| v as f32).collect();
            assert_eq!(interleave(&audio.channels), want, "float {bits}, extensible {extensible}");
            assert_eq!(audio.channels.len(), 3);
            let info = read_wav_info(&path).unwrap();
            assert_eq!(
                (info.encoding, info.bits_per_sample, info.is_extensible()),
                (Encoding::Float, bits, extensible)
            );
        }
    }
}

#[test]
fn extensible_valid_bits_are_reported_and_scaling_uses_the_container() {
    // 20 valid bits in a 24-bit container: values are left-justified, so scaling by 2^23 is right.
    let path = file(
        "ext-20in24.wav",
        &riff(&[fmt_ext(ks_guid(1), 1, 48_000, 24, 20, 4), chunk(b"data", &pcm_bytes(&[1 << 22, -(1 << 23)], 24))]),
    );
    let info = read_wav_info(&path).unwrap();
    assert_eq!((info.bits_per_sample, info.valid_bits_per_sample, info.channel_mask), (24, 20, Some(4)));
    assert_eq!(read_wav(&path).unwrap().channels, vec![vec![0.5, -1.0]]);
}

#[test]
fn odd_sized_chunks_are_padded_and_unknown_chunks_skipped() {
    let data = pcm_bytes(&[1000, -1000, 3000], 24); // 9 bytes: odd, padded
    let bytes = riff(&[
        chunk(b"JUNK", &[0xAA; 3]),       // odd: 3 bytes + pad
        chunk(b"bext", &[1, 2, 3, 4, 5]), // odd again
        fmt(1, 1, 22_050, 24),
        chunk(b"LIST", b"INFOISFT\x05\x00\x00\x00test\x00"),
        chunk(b"data", &data),
        chunk(b"id3 ", b"tag"),
    ]);
    // Sanity: the pad bytes are there, so a reader that ignores padding would land mid-chunk.
    assert_eq!(bytes[12 + 8 + 3], 0);
    let path = file("padded.wav", &bytes);
    let audio = read_wav(&path).unwrap();
    let want: Vec<f32> = [1000.0f32, -1000.0, 3000.0].iter().map(|v| v / 8_388_608.0).collect();
    assert_eq!(audio.channels, vec![want]);
    assert_eq!(audio.sample_rate_hz, 22_050);
}

#[test]
fn data_before_fmt_and_trailing_partial_frames() {
    // Chunk order is not fixed in practice; a trailing partial frame (3 of 4 bytes) is ignored.
    let mut data = pcm_bytes(&[100, -100, 200, -200], 16);
    data.extend_from_slice(&[1, 2, 3]);
    let path =
        file("data-first.wav", &riff(&[chunk(b"data", &data), chunk(b"fact", &[2, 0, 0, 0]), fmt(1, 2, 8_000, 16)]));
    let audio = read_wav(&path).unwrap();
    assert_eq!(audio.frames(), 2);
    assert_eq!(audio.channels[1], vec![-100.0 / 32768.0, -200.0 / 32768.0]);
    assert_eq!(read_wav_info(&path).unwrap().data_bytes, 11);
}

#[test]
fn a_missing_final_pad_byte_is_tolerated() {
    let mut bytes = riff(&[fmt(1, 1, 48_000, 8), chunk(b"data", &[128, 255, 0])]);
    bytes.pop();
    let audio = read_wav(&file("no-final-pad.wav", &bytes)).unwrap();
    assert_eq!(audio.channels, vec![vec![0.0, 127.0 / 128.0, -1.0]]);
}

#[test]
fn many_channels() {
    let channels = 12u16;
    let values: Vec<i32> = (0..i32::from(channels) * 5).map(|i| i * 1000 - 20_000).collect();
    let path = file(
        "twelve.wav",
        &riff(&[fmt_ext(ks_guid(1), channels, 48_000, 16, 16, 0), chunk(b"data", &pcm_bytes(&values, 16))]),
    );
    let audio = read_wav(&path).unwrap();
    assert_eq!(audio.channel_count(), 12);
    assert_eq!(audio.channels[7][3], ((3 * 12 + 7) * 1000 - 20_000) as f32 / 32768.0);
}

// ---------------------------------------------------------------------------------------------------------
// Writing and reading back

fn test_signal(channels: usize, frames: usize, seed: u64) -> Vec<Vec<f32>> {
    let mut noise = Noise::new(seed);
    (0..channels).map(|_| noise.vec(frames).iter().map(|v| v * 0.9).collect()).collect()
}

#[test]
fn f32_round_trip_is_exact_for_any_channel_count() {
    for channels in [1, 2, 3, 6] {
        let x = test_signal(channels, 777, channels as u64);
        let path = tmp(&format!("rt-f32-{channels}.wav"));
        write_wav(&path, &x, 48_000, SampleFormat::F32, Dither::default()).unwrap();
        let audio = read_wav(&path).unwrap();
        assert_eq!(audio, Audio::new(x, 48_000));
        let info = read_wav_info(&path).unwrap();
        assert_eq!((info.encoding, info.bits_per_sample), (Encoding::Float, 32));
    }
}

#[test]
fn pcm_round_trip_without_dither_is_rounding() {
    for (format, bits) in [(SampleFormat::Pcm24, 24), (SampleFormat::Pcm16, 16)] {
        for channels in [1, 2, 3] {
            // 101 frames: an odd data chunk for 24-bit mono.
            let x = test_signal(channels, 101, 7);
            let path = tmp(&format!("rt-{format}-{channels}.wav"));
            write_wav(&path, &x, 44_100, format, Dither::OFF).unwrap();
            let info = read_wav_info(&path).unwrap();
            assert_eq!(
                (info.encoding, info.bits_per_sample, usize::from(info.channels)),
                (Encoding::Pcm, bits, channels)
            );
            let y = read_wav(&path).unwrap();
            let scale = 2f64.powi(i32::from(bits) - 1);
            for (xc, yc) in x.iter().zip(&y.channels) {
                for (a, b) in xc.iter().zip(yc) {
                    let want = (f64::from(*a) * scale).round() / scale;
                    assert_eq!(f64::from(*b), want, "{format}");
                }
            }
        }
    }
}

#[test]
fn dither_is_on_by_default_and_changes_the_rounding() {
    assert!(Dither::default().enabled);
    let x = test_signal(2, 2000, 3);
    let plain = tmp("dither-off.wav");
    let dithered = tmp("dither-on.wav");
    let again = tmp("dither-on-again.wav");
    write_wav(&plain, &x, 48_000, SampleFormat::Pcm16, Dither::OFF).unwrap();
    write_wav(&dithered, &x, 48_000, SampleFormat::Pcm16, Dither::default()).unwrap();
    write_wav(&again, &x, 48_000, SampleFormat::Pcm16, Dither::default()).unwrap();
    let (p, d) = (read_wav(&plain).unwrap(), read_wav(&dithered).unwrap());
    assert_eq!(std::fs::read(&dithered).unwrap(), std::fs::read(&again).unwrap(), "seeded: reproducible");
    let differing = p.channels.iter().flatten().zip(d.channels.iter().flatten()).filter(|(a, b)| a != b).count();
    // Dither moves a sample off the rounded value with probability ~ 1/2 for random input.
    assert!(differing > 1000, "only {differing} of 4000 samples changed");
    // Never by more than 1.5 LSB from the exact value (1 LSB of dither peak plus 0.5 of rounding).
    for (xc, dc) in x.iter().zip(&d.channels) {
        for (a, b) in xc.iter().zip(dc) {
            assert!((f64::from(*b) - f64::from(*a)).abs() * 32768.0 <= 1.5);
        }
    }
}

#[test]
fn dither_error_statistics_in_written_files() {
    // A DC level a quarter LSB off the grid. TPDF (two uniforms of 1/12 LSB^2 each, arithmetic): the total error
    // has mean 0 and variance 1/12 + 1/6 = 1/4 LSB^2 (common practice). Undithered rounding would give a constant
    // error of -0.25 LSB and variance 0; a single uniform (RPDF) would give variance 1/12 + 1/12 = 1/6.
    for (format, bits) in [(SampleFormat::Pcm16, 16), (SampleFormat::Pcm24, 24)] {
        let lsb = 2f64.powi(-(bits - 1));
        let level = 100.25 * lsb;
        let x = vec![vec![level as f32; 100_000]];
        let path = tmp(&format!("dither-stats-{format}.wav"));
        write_wav(&path, &x, 48_000, format, Dither::seeded(42)).unwrap();
        let y = read_wav(&path).unwrap();
        let e: Vec<f64> = y.channels[0].iter().map(|&v| (f64::from(v) - f64::from(x[0][0])) / lsb).collect();
        assert!(e.iter().all(|v| v.abs() <= 1.5), "{format}: error beyond 1.5 LSB");
        let mean = e.iter().sum::<f64>() / e.len() as f64;
        let var = e.iter().map(|v| (v - mean) * (v - mean)).sum::<f64>() / e.len() as f64;
        assert!(mean.abs() < 0.01, "{format}: mean error {mean} LSB");
        assert!((var - 0.25).abs() < 0.01, "{format}: error variance {var} LSB^2");
    }
}

#[test]
fn integer_output_clamps_out_of_range_samples() {
    let x = vec![vec![1.0f32, 1.5, -1.0, -2.0, 0.999_99]];
    let path = tmp("clip.wav");
    write_wav(&path, &x, 48_000, SampleFormat::Pcm16, Dither::OFF).unwrap();
    let y = read_wav(&path).unwrap();
    assert_eq!(y.channels[0], vec![32767.0 / 32768.0, 32767.0 / 32768.0, -1.0, -1.0, 32767.0 / 32768.0]);
    // With dither the clamp still holds (a full-scale sample plus dither never wraps around).
    write_wav(&path, &[vec![1.0f32; 1000], vec![-1.0f32; 1000]], 48_000, SampleFormat::Pcm24, Dither::default())
        .unwrap();
    let y = read_wav(&path).unwrap();
    assert!(y.channels[0].iter().all(|&v| v > 0.999_999 && v < 1.0));
    assert!(y.channels[1].iter().all(|&v| (-1.0..-0.999_999).contains(&v)));
    // f32 output keeps values beyond full scale untouched.
    write_wav(&path, &x, 48_000, SampleFormat::F32, Dither::default()).unwrap();
    assert_eq!(read_wav(&path).unwrap().channels, x);
}

#[test]
fn writer_headers_are_what_readers_expect() {
    // pcm16 mono/stereo: plain PCM header (tag 1); 3 channels, 24-bit and f32: EXTENSIBLE (hound's rule).
    let cases = [
        (SampleFormat::Pcm16, 2usize, 1u16),
        (SampleFormat::Pcm16, 3, 0xFFFE),
        (SampleFormat::Pcm24, 1, 0xFFFE),
        (SampleFormat::F32, 1, 0xFFFE),
    ];
    for (format, channels, tag) in cases {
        let path = tmp(&format!("header-{format}-{channels}.wav"));
        write_wav(&path, &test_signal(channels, 10, 1), 32_000, format, Dither::OFF).unwrap();
        let info = read_wav_info(&path).unwrap();
        assert_eq!(info.format_tag, tag, "{format} x {channels}");
        assert_eq!(info.sample_rate_hz, 32_000);
        assert_eq!(info.frames, 10);
        let bytes = std::fs::read(&path).unwrap();
        assert_eq!(u32::from_le_bytes(bytes[4..8].try_into().unwrap()) as usize, bytes.len() - 8, "RIFF size");
    }
}

fn assert_untouched(path: &Path) {
    assert!(!path.exists(), "{} should not exist", path.display());
}

#[test]
fn write_refuses_bad_audio_before_touching_the_file() {
    let path = tmp("refused.wav");
    let empty: [Vec<f32>; 0] = [];
    let err = write_wav(&path, &empty, 48_000, SampleFormat::F32, Dither::OFF).unwrap_err();
    assert!(matches!(err, IoError::WriteChannels { channels: 0, .. }), "{err:?}");
    assert_names_file(&err, &path);
    let err = write_wav(&path, &[vec![0.0f32; 3], vec![0.0; 2]], 48_000, SampleFormat::F32, Dither::OFF).unwrap_err();
    assert!(matches!(err, IoError::WriteUnequalChannels { channel: 1, frames: 2, expected: 3, .. }), "{err:?}");
    let err = write_wav(&path, &[vec![0.0f32; 3]], 0, SampleFormat::Pcm16, Dither::OFF).unwrap_err();
    assert!(matches!(err, IoError::WriteZeroSampleRate { .. }), "{err:?}");
    // 65,536 channels (all borrowing one slice, so the test allocates little).
    let one = [0.0f32; 4];
    let many: Vec<&[f32]> = vec![&one[..]; 65_536];
    let err = write_wav(&path, &many, 48_000, SampleFormat::Pcm16, Dither::OFF).unwrap_err();
    assert!(matches!(err, IoError::WriteChannels { channels: 65_536, .. }), "{err:?}");
    // 65,535 channels x 16,385 frames x 4 bytes is just over 4 GiB: no RIFF size field could hold it.
    let long = vec![0.0f32; 16_385];
    let wide: Vec<&[f32]> = vec![&long[..]; 65_535];
    let err = write_wav_atomic(&path, &wide, 48_000, SampleFormat::F32, Dither::OFF).unwrap_err();
    assert!(matches!(err, IoError::WriteTooLarge { data_bytes, .. } if data_bytes == 65_535 * 16_385 * 4), "{err:?}");
    assert_names_file(&err, &path);
    assert_untouched(&path);
}

#[test]
fn a_nan_fails_the_write_and_leaves_no_partial_file() {
    let path = tmp("nan-out.wav");
    let mut x = test_signal(2, 50_000, 5);
    x[1][40_000] = f32::NAN;
    let err = write_wav(&path, &x, 48_000, SampleFormat::Pcm24, Dither::default()).unwrap_err();
    assert!(matches!(err, IoError::WriteNonFinite { channel: 1, frame: 40_000, .. }), "{err:?}");
    assert_names_file(&err, &path);
    assert_untouched(&path);
}

fn dir_entries(dir: &Path) -> Vec<String> {
    let mut v: Vec<String> =
        std::fs::read_dir(dir).unwrap().map(|e| e.unwrap().file_name().to_string_lossy().into_owned()).collect();
    v.sort();
    v
}

#[test]
fn atomic_write_replaces_the_target_and_leaves_no_temporary_file() {
    let dir = tmp_dir("atomic-ok");
    let path = dir.join("out.wav");
    std::fs::write(&path, b"old contents").unwrap();
    let x = test_signal(2, 1000, 9);
    write_wav_atomic(&path, &x, 48_000, SampleFormat::F32, Dither::OFF).unwrap();
    assert_eq!(read_wav(&path).unwrap().channels, x);
    assert_eq!(dir_entries(&dir), vec!["out.wav".to_string()]);
}

#[test]
fn failed_atomic_write_keeps_the_old_file_and_removes_the_temporary_file() {
    let dir = tmp_dir("atomic-fail");
    let path = dir.join("out.wav");
    std::fs::write(&path, b"old contents").unwrap();
    // Fails part-way through the samples: the temporary file exists by then and must be removed.
    let mut x = test_signal(1, 100_000, 2);
    x[0][99_999] = f32::INFINITY;
    let err = write_wav_atomic(&path, &x, 48_000, SampleFormat::Pcm16, Dither::default()).unwrap_err();
    assert!(matches!(err, IoError::WriteNonFinite { frame: 99_999, .. }), "{err:?}");
    assert_eq!(std::fs::read(&path).unwrap(), b"old contents");
    assert_eq!(dir_entries(&dir), vec!["out.wav".to_string()]);

    // Fails at the rename: the target is a directory. The temporary file is complete by then.
    let target_dir = dir.join("taken.wav");
    std::fs::create_dir(&target_dir).unwrap();
    std::fs::write(target_dir.join("keep.txt"), b"x").unwrap();
    let err =
        write_wav_atomic(&target_dir, &test_signal(1, 10, 1), 48_000, SampleFormat::F32, Dither::OFF).unwrap_err();
    assert!(matches!(err, IoError::Write { .. }), "{err:?}");
    assert_names_file(&err, &target_dir);
    assert_eq!(dir_entries(&target_dir), vec!["keep.txt".to_string()]);
    assert_eq!(dir_entries(&dir), vec!["out.wav".to_string(), "taken.wav".to_string()]);
}

#[test]
fn atomic_write_into_a_path_under_a_file_fails_cleanly() {
    let dir = tmp_dir("atomic-under-file");
    let not_a_dir = dir.join("plain-file");
    std::fs::write(&not_a_dir, b"i am a file").unwrap();
    let path = not_a_dir.join("out.wav");
    let err = write_wav_atomic(&path, &test_signal(1, 10, 1), 48_000, SampleFormat::F32, Dither::OFF).unwrap_err();
    assert!(matches!(err, IoError::Write { .. }), "{err:?}");
    assert_names_file(&err, &path);
    assert_eq!(std::fs::read(&not_a_dir).unwrap(), b"i am a file");
    assert_eq!(dir_entries(&dir), vec!["plain-file".to_string()]);
    // The plain writer reports the same way.
    let err = write_wav(&path, &test_signal(1, 10, 1), 48_000, SampleFormat::F32, Dither::OFF).unwrap_err();
    assert!(matches!(err, IoError::Write { .. }), "{err:?}");
}

/// The reader versions read the same as the path versions, from the start of the reader wherever it stands
/// (a first version seeked to the end to measure the length and then read nothing: found by fuzzing).
#[test]
fn reading_from_a_reader_equals_reading_the_file() {
    let taps = partita_core::synth::decaying_noise(300, 100.0, 4);
    let path = tmp("reader.wav");
    write_wav(&path, &[&taps[..], &taps[..]], 44_100, SampleFormat::Pcm24, Dither::OFF).unwrap();
    let bytes = std::fs::read(&path).unwrap();
    let mut cursor = std::io::Cursor::new(&bytes[..]);
    cursor.set_position(17);
    let from_reader = partita_io::read_wav_from(cursor, Path::new("memory.wav"), partita_io::MAX_DECODED_BYTES);
    assert_eq!(from_reader.unwrap(), read_wav(&path).unwrap());
    let options = partita_io::IrOptions { sample_rate_hz: Some(48_000), ..Default::default() };
    let loaded = partita_io::load_ir_from(std::io::Cursor::new(&bytes[..]), Path::new("memory.wav"), &options);
    assert_eq!(loaded.unwrap(), partita_io::load_ir(&path, &options).unwrap());
    let err = partita_io::read_wav_from(std::io::Cursor::new(&b"RIFF"[..]), Path::new("memory.wav"), 1 << 20);
    assert!(err.unwrap_err().to_string().starts_with("memory.wav: "));
}
