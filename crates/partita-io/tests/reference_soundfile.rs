//! Cross-check of the WAV reader and writer against outside references: `soundfile` 0.14 (libsndfile) and
//! `scipy.io.wavfile` 1.17 (REFERENCES.md). Both scale integer PCM as value / 2^(bits-1) (scipy after our
//! normalisation in the script).
//!
//! - Files we write (f32, pcm24, pcm16; 1, 2 and 3 channels) must read in soundfile and scipy exactly as in our
//!   reader.
//! - Files soundfile writes (WAV: PCM_U8, PCM_16, PCM_24, PCM_32, FLOAT, DOUBLE; WAVEX, i.e.
//!   `WAVE_FORMAT_EXTENSIBLE`: PCM_16, PCM_24, FLOAT, DOUBLE with 1 to 3 channels) must read in our reader as they
//!   read in soundfile: exactly, or to f32 rounding for PCM_32 and DOUBLE (we decode to f32).
//!
//! The interpreter comes from `PARTITA_PYTHON` (scripts/check sets it). Without it the test skips loudly;
//! with `CI` set, it fails instead.

mod support;

use std::path::{Path, PathBuf};
use std::process::Command;

use partita_core::synth::Noise;
use partita_io::{read_wav, read_wav_info, write_wav, Dither, Encoding, SampleFormat};

fn python() -> Option<PathBuf> {
    partita_testkit::reference_python("soundfile/scipy WAV cross-check")
}

fn script() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../../tests/reference/wav_soundfile.py")
}

fn read_f64(path: &Path) -> Vec<f64> {
    std::fs::read(path).unwrap().chunks_exact(8).map(|c| f64::from_le_bytes(c.try_into().unwrap())).collect()
}

/// A reference read: planar samples plus the sidecar's "channels frames rate detail...".
struct RefRead {
    channels: usize,
    frames: usize,
    rate: u32,
    detail: String,
    planar: Vec<f64>,
}

impl RefRead {
    fn load(out: &Path) -> Self {
        let side = std::fs::read_to_string(format!("{}.txt", out.display())).unwrap();
        let mut it = side.split_whitespace();
        let channels = it.next().unwrap().parse().unwrap();
        let frames = it.next().unwrap().parse().unwrap();
        let rate = it.next().unwrap().parse().unwrap();
        let detail = it.collect::<Vec<_>>().join(" ");
        let planar = read_f64(out);
        assert_eq!(planar.len(), channels * frames);
        Self { channels, frames, rate, detail, planar }
    }

    fn channel(&self, c: usize) -> &[f64] {
        &self.planar[c * self.frames..(c + 1) * self.frames]
    }
}

fn signal(channels: usize, frames: usize, seed: u64) -> Vec<Vec<f32>> {
    let mut noise = Noise::new(seed);
    (0..channels).map(|_| noise.vec(frames).iter().map(|v| v * 0.95).collect()).collect()
}

#[test]
fn wav_reader_and_writer_match_soundfile_and_scipy() {
    let Some(py) = python() else { return };
    let dir = support::tmp_dir("soundfile");
    let mut jobs = String::new();

    // 1. Ours -> soundfile and scipy.
    let ours = [
        (SampleFormat::F32, 1usize, "FLOAT", "float32"),
        (SampleFormat::F32, 3, "FLOAT", "float32"),
        (SampleFormat::Pcm24, 1, "PCM_24", "int32"),
        (SampleFormat::Pcm24, 2, "PCM_24", "int32"),
        (SampleFormat::Pcm16, 2, "PCM_16", "int16"),
        (SampleFormat::Pcm16, 3, "PCM_16", "int16"),
    ];
    for (format, channels, _, _) in ours {
        let wav = dir.join(format!("ours-{format}-{channels}.wav"));
        // 1001 frames: odd, so 24-bit mono gets a pad byte.
        write_wav(&wav, &signal(channels, 1001, channels as u64), 44_100, format, Dither::default()).unwrap();
        jobs.push_str(&format!("read\t{}\t{}.sf.f64\n", wav.display(), wav.display()));
        jobs.push_str(&format!("read-scipy\t{}\t{}.sp.f64\n", wav.display(), wav.display()));
    }

    // 2. soundfile -> ours. The input is f64 noise that is not on any grid, so every conversion rounds.
    let theirs = [
        ("PCM_U8", "WAV", 1usize, Encoding::Pcm, 8u16, false),
        ("PCM_16", "WAV", 2, Encoding::Pcm, 16, false),
        ("PCM_24", "WAV", 2, Encoding::Pcm, 24, false),
        ("PCM_32", "WAV", 2, Encoding::Pcm, 32, false),
        ("FLOAT", "WAV", 2, Encoding::Float, 32, false),
        ("DOUBLE", "WAV", 2, Encoding::Float, 64, false),
        ("PCM_16", "WAVEX", 1, Encoding::Pcm, 16, true),
        ("PCM_24", "WAVEX", 3, Encoding::Pcm, 24, true),
        ("FLOAT", "WAVEX", 3, Encoding::Float, 32, true),
        ("DOUBLE", "WAVEX", 3, Encoding::Float, 64, true),
    ];
    let mut noise = Noise::new(77);
    for (subtype, container, channels, ..) in theirs {
        let input = dir.join(format!("theirs-{subtype}-{container}-{channels}.in.f64"));
        let planar: Vec<f64> = (0..channels * 999).map(|_| (2.0 * noise.unit() - 1.0) * 0.9).collect();
        std::fs::write(&input, planar.iter().flat_map(|v| v.to_le_bytes()).collect::<Vec<u8>>()).unwrap();
        let wav = dir.join(format!("theirs-{subtype}-{container}-{channels}.wav"));
        jobs.push_str(&format!(
            "write\t{subtype}\t{container}\t96000\t{channels}\t{}\t{}\n",
            input.display(),
            wav.display()
        ));
        jobs.push_str(&format!("read\t{}\t{}.sf.f64\n", wav.display(), wav.display()));
    }

    let jobs_path = dir.join("jobs.txt");
    std::fs::write(&jobs_path, jobs).unwrap();
    let out = Command::new(&py).arg(script()).arg(&jobs_path).output().expect("run the reference interpreter");
    assert!(out.status.success(), "reference script failed: {}", String::from_utf8_lossy(&out.stderr));
    eprintln!("{}", String::from_utf8_lossy(&out.stdout).trim());

    for (format, channels, subtype, scipy_dtype) in ours {
        let wav = dir.join(format!("ours-{format}-{channels}.wav"));
        let mine = read_wav(&wav).unwrap();
        for (suffix, detail) in [("sf", subtype), ("sp", scipy_dtype)] {
            let r = RefRead::load(&PathBuf::from(format!("{}.{suffix}.f64", wav.display())));
            // Reference: soundfile.read (libsndfile) / scipy.io.wavfile.read of the file we wrote.
            assert_eq!((r.channels, r.frames, r.rate), (channels, 1001, 44_100), "{}", wav.display());
            assert!(r.detail.starts_with(detail), "{}: {suffix} says {}", wav.display(), r.detail);
            for c in 0..channels {
                let want = r.channel(c);
                let got: Vec<f64> = mine.channels[c].iter().map(|&v| f64::from(v)).collect();
                assert_eq!(got, want, "{} channel {c}: ours vs {suffix}", wav.display());
            }
        }
        if format == SampleFormat::F32 {
            // f32 output is bit-exact against the samples we gave.
            assert_eq!(mine.channels, signal(channels, 1001, channels as u64));
        }
    }

    for (subtype, container, channels, encoding, bits, extensible) in theirs {
        let wav = dir.join(format!("theirs-{subtype}-{container}-{channels}.wav"));
        let info = read_wav_info(&wav).unwrap();
        assert_eq!(
            (
                info.encoding,
                info.bits_per_sample,
                info.is_extensible(),
                usize::from(info.channels),
                info.sample_rate_hz
            ),
            (encoding, bits, extensible, channels, 96_000),
            "{}",
            wav.display()
        );
        // Reference: soundfile.read(dtype='float64') (libsndfile) of the file soundfile wrote.
        let r = RefRead::load(&PathBuf::from(format!("{}.sf.f64", wav.display())));
        assert_eq!((r.channels, r.frames, r.rate), (channels, 999, 96_000));
        assert!(r.detail.starts_with(subtype), "{}", r.detail);
        let mine = read_wav(&wav).unwrap();
        assert_eq!((mine.channel_count(), mine.frames()), (channels, 999));
        let exact = !matches!(subtype, "PCM_32" | "DOUBLE");
        for c in 0..channels {
            for (i, (&got, &want)) in mine.channels[c].iter().zip(r.channel(c)).enumerate() {
                let got = f64::from(got);
                if exact {
                    assert_eq!(got, want, "{} channel {c} frame {i}", wav.display());
                } else {
                    // We decode to f32: within half an f32 ulp of soundfile's f64 value.
                    assert!(
                        (got - want).abs() <= want.abs() * 2f64.powi(-24),
                        "{} ch {c} frame {i}: {got} vs {want}",
                        wav.display()
                    );
                }
            }
        }
    }
}
