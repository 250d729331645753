//! `partita render` end to end: the mix arithmetic, lengths, formats, rates, several inputs, atomic replacement,
//! and one clear line (exit code 1) for every kind of bad input.
//!
//! The expected convolutions here are direct-form sums in f64 written in the test (textbook definition,
//! y[n] = sum_k h[k] x[n - k], length M + L - 1: Oppenheim & Schafer); the cross-check against numpy is
//! `tests/reference_render.rs`.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use partita_core::synth::Noise;
use partita_io::{read_wav, read_wav_info, write_wav, Dither, SampleFormat};

/// A fresh, empty scratch folder for one test.
fn scratch(name: &str) -> PathBuf {
    partita_testkit::scratch_dir(env!("CARGO_TARGET_TMPDIR"), "cli-render", name)
}

fn partita(args: &[&Path]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_partita")).arg("render").args(args).output().expect("run partita")
}

/// Runs `partita render` with string arguments; paths are passed as they are.
fn render(args: &[&str]) -> Output {
    let args: Vec<&Path> = args.iter().map(Path::new).collect();
    partita(&args)
}

fn ok(out: &Output) -> String {
    assert!(
        out.status.success(),
        "partita render failed: {}{}",
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8_lossy(&out.stderr).into_owned()
}

/// Asserts exit code 1 and a single `partita: error:` line containing every needle; returns the line.
fn fails(out: &Output, needles: &[&str]) -> String {
    let err = String::from_utf8_lossy(&out.stderr).into_owned();
    assert_eq!(out.status.code(), Some(1), "exit code 1 expected; stderr: {err}");
    assert_eq!(err.lines().count(), 1, "one line expected, got: {err}");
    assert!(err.starts_with("partita: error: "), "{err}");
    for n in needles {
        assert!(err.contains(n), "`{n}` missing from: {err}");
    }
    assert!(!err.contains("panicked"), "{err}");
    err
}

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

fn write_f32(path: &Path, channels: &[Vec<f32>], rate: u32) {
    write_wav(path, channels, rate, SampleFormat::F32, Dither::OFF).unwrap();
}

fn write_mono(path: &Path, x: &[f32], rate: u32) {
    write_wav(path, &[x], rate, SampleFormat::F32, Dither::OFF).unwrap();
}

/// Direct-form full convolution in f64.
fn convolve(x: &[f32], h: &[f32]) -> Vec<f64> {
    let mut y = vec![0.0f64; x.len() + h.len() - 1];
    for (i, &a) in x.iter().enumerate() {
        for (k, &b) in h.iter().enumerate() {
            y[i + k] += f64::from(a) * f64::from(b);
        }
    }
    y
}

fn peak(v: &[f64]) -> f64 {
    v.iter().fold(0.0f64, |m, x| m.max(x.abs()))
}

/// max |got - want| over the peak of `want`.
fn max_rel_err(got: &[f32], want: &[f64]) -> f64 {
    assert_eq!(got.len(), want.len(), "length");
    got.iter().zip(want).map(|(&a, &b)| (f64::from(a) - b).abs()).fold(0.0, f64::max) / peak(want)
}

fn noise(frames: usize, seed: u64, level: f32) -> Vec<f32> {
    Noise::new(seed).vec(frames).into_iter().map(|v| v * level).collect()
}

// ---------------------------------------------------------------------------------------------------------
// Byte-by-byte WAV builders for the bad files
// ---------------------------------------------------------------------------------------------------------

fn chunk(id: &[u8; 4], body: &[u8]) -> Vec<u8> {
    let mut v = id.to_vec();
    v.extend_from_slice(&(body.len() as u32).to_le_bytes());
    v.extend_from_slice(body);
    if body.len() % 2 == 1 {
        v.push(0);
    }
    v
}

fn fmt_chunk(tag: u16, channels: u16, rate: u32, bits: u16) -> Vec<u8> {
    let align = channels * (bits / 8);
    let mut b = Vec::new();
    b.extend_from_slice(&tag.to_le_bytes());
    b.extend_from_slice(&channels.to_le_bytes());
    b.extend_from_slice(&rate.to_le_bytes());
    b.extend_from_slice(&(rate * u32::from(align)).to_le_bytes());
    b.extend_from_slice(&align.to_le_bytes());
    b.extend_from_slice(&bits.to_le_bytes());
    chunk(b"fmt ", &b)
}

fn riff(chunks: &[Vec<u8>]) -> Vec<u8> {
    let body = chunks.concat();
    let mut v = b"RIFF".to_vec();
    v.extend_from_slice(&(4 + body.len() as u32).to_le_bytes());
    v.extend_from_slice(b"WAVE");
    v.extend_from_slice(&body);
    v
}

/// A plain (non-EXTENSIBLE) 32-bit float WAV.
fn float_wav(channels: u16, rate: u32, samples: &[f32]) -> Vec<u8> {
    let data: Vec<u8> = samples.iter().flat_map(|v| v.to_le_bytes()).collect();
    riff(&[fmt_chunk(3, channels, rate, 32), chunk(b"data", &data)])
}

// ---------------------------------------------------------------------------------------------------------
// The mix, lengths and formats
// ---------------------------------------------------------------------------------------------------------

#[test]
fn wet_dry_and_gain_mix_as_documented() {
    let dir = scratch("mix");
    let x = noise(3000, 1, 0.5);
    let h: Vec<f32> = vec![0.5, 0.25, -0.125, 0.0625, 0.3];
    let (input, ir, out) = (dir.join("in.wav"), dir.join("ir.wav"), dir.join("out.wav"));
    write_mono(&input, &x, 48_000);
    write_mono(&ir, &h, 48_000);
    let conv = convolve(&x, &h);
    for (wet, dry, gain_db) in [(1.0, 0.0, 0.0), (0.3, 0.7, 0.0), (0.5, 0.5, -6.0), (0.0, 1.0, 3.5), (-1.0, 0.25, 0.0)]
    {
        let args = [
            s(&input),
            "--ir",
            s(&ir),
            "-o",
            s(&out),
            "--wet",
            &wet.to_string(),
            "--dry",
            &dry.to_string(),
            "--gain-db",
            &gain_db.to_string(),
        ];
        let stderr = ok(&render(&args));
        assert!(stderr.is_empty(), "no notes and no progress bar when stderr is not a terminal: {stderr}");
        let g = 10f64.powf(gain_db / 20.0);
        let want: Vec<f64> = conv
            .iter()
            .enumerate()
            .map(|(n, c)| g * (wet * c + dry * x.get(n).map_or(0.0, |&v| f64::from(v))))
            .collect();
        let got = read_wav(&out).unwrap();
        assert_eq!(got.channel_count(), 1);
        assert_eq!(got.frames(), x.len() + h.len() - 1, "full tail by default: M + L - 1");
        let e = max_rel_err(&got.channels[0], &want);
        assert!(e < 2e-6, "wet {wet} dry {dry} gain {gain_db} dB: error {e:.2e} of peak");
    }
}

#[test]
fn no_tail_keeps_the_input_length_and_formats_quantize_as_asked() {
    let dir = scratch("tail-formats");
    let x = noise(2001, 2, 0.4);
    let h = noise(700, 3, 0.05);
    let (input, ir) = (dir.join("in.wav"), dir.join("ir.wav"));
    write_mono(&input, &x, 48_000);
    write_mono(&ir, &h, 48_000);
    let conv = convolve(&x, &h);

    let out = dir.join("short.wav");
    ok(&render(&[s(&input), "--ir", s(&ir), "-o", s(&out), "--no-tail"]));
    let got = read_wav(&out).unwrap();
    assert_eq!(got.frames(), x.len(), "--no-tail: the input's length");
    assert!(max_rel_err(&got.channels[0], &conv[..x.len()]) < 2e-6);

    // Integer formats: x 2^(bits-1), rounded. Without dither within 0.5 LSB, with TPDF dither within 1.5 LSB
    // (triangular +-1 LSB, then rounding), plus the f32 render's own error.
    for (format, bits, dither, lsb_bound) in
        [("pcm24", 24, false, 0.51), ("pcm16", 16, false, 0.51), ("pcm16", 16, true, 1.51), ("f32", 32, true, 0.0)]
    {
        let out = dir.join(format!("{format}-{dither}.wav"));
        let mut args = vec![s(&input), "--ir", s(&ir), "-o", s(&out), "--format", format];
        if !dither {
            args.push("--no-dither");
        }
        ok(&render(&args));
        let info = read_wav_info(&out).unwrap();
        assert_eq!(info.bits_per_sample, bits, "{format}");
        let got = read_wav(&out).unwrap();
        let lsb = if bits == 32 { 0.0 } else { 1.0 / f64::from(1u32 << (bits - 1)) };
        let worst = got.channels[0].iter().zip(&conv).map(|(&a, &b)| (f64::from(a) - b).abs()).fold(0.0, f64::max);
        if bits == 32 {
            assert!(worst / peak(&conv) < 2e-6, "f32: {worst}");
        } else {
            // The f32 render itself may be off by up to 2e-6 of the peak (DESIGN.md section 4): about one 24-bit
            // step here, well under one 16-bit step.
            let bound = lsb_bound * lsb + 2e-6 * peak(&conv);
            assert!(worst <= bound, "{format} dither {dither}: worst {:.3} LSB", worst / lsb);
        }
    }
}

#[test]
fn pcm_clipping_is_reported() {
    let dir = scratch("clip");
    let (input, ir, out) = (dir.join("in.wav"), dir.join("ir.wav"), dir.join("out.wav"));
    write_f32(&input, &[noise(1000, 4, 0.9)], 48_000);
    write_f32(&ir, &[vec![1.0]], 48_000);
    let stderr = ok(&render(&[s(&input), "--ir", s(&ir), "-o", s(&out), "--gain-db", "12", "--format", "pcm16"]));
    assert!(stderr.contains("warning") && stderr.contains("clipped"), "{stderr}");
}

// ---------------------------------------------------------------------------------------------------------
// Routing, rates, several inputs
// ---------------------------------------------------------------------------------------------------------

#[test]
fn channel_layouts_follow_the_ir_and_the_input() {
    let dir = scratch("layouts");
    let mono = noise(1500, 5, 0.5);
    let (l, r) = (noise(1500, 6, 0.5), noise(1500, 7, 0.5));
    let (h0, h1) = (noise(300, 8, 0.1), noise(300, 9, 0.1));
    let mono_in = dir.join("mono.wav");
    let stereo_in = dir.join("stereo.wav");
    let mono_ir = dir.join("mono-ir.wav");
    let stereo_ir = dir.join("stereo-ir.wav");
    write_mono(&mono_in, &mono, 48_000);
    write_f32(&stereo_in, &[l.clone(), r.clone()], 48_000);
    write_mono(&mono_ir, &h0, 48_000);
    write_f32(&stereo_ir, &[h0.clone(), h1.clone()], 48_000);
    let out = dir.join("out.wav");

    // A mono IR on a stereo input convolves both channels.
    ok(&render(&[s(&stereo_in), "--ir", s(&mono_ir), "-o", s(&out)]));
    let got = read_wav(&out).unwrap();
    assert_eq!(got.channel_count(), 2);
    assert!(max_rel_err(&got.channels[0], &convolve(&l, &h0)) < 2e-6);
    assert!(max_rel_err(&got.channels[1], &convolve(&r, &h0)) < 2e-6);

    // A 2-channel IR on a mono input is mono to stereo; the dry mono input goes to both outputs.
    ok(&render(&[s(&mono_in), "--ir", s(&stereo_ir), "-o", s(&out), "--wet", "0.5", "--dry", "0.5"]));
    let got = read_wav(&out).unwrap();
    assert_eq!(got.channel_count(), 2);
    for (c, h) in [&h0, &h1].into_iter().enumerate() {
        let want: Vec<f64> = convolve(&mono, h)
            .iter()
            .enumerate()
            .map(|(n, v)| 0.5 * v + 0.5 * mono.get(n).map_or(0.0, |&x| f64::from(x)))
            .collect();
        assert!(max_rel_err(&got.channels[c], &want) < 2e-6, "channel {c}");
    }

    // --layout overrides the channel count's meaning: a 2-channel file as a 1x2 matrix is mono to stereo too.
    ok(&render(&[s(&mono_in), "--ir", s(&stereo_ir), "-o", s(&out), "--layout", "matrix:1x2"]));
    let got = read_wav(&out).unwrap();
    assert!(max_rel_err(&got.channels[1], &convolve(&mono, &h1)) < 2e-6);
}

#[test]
fn routing_is_given_with_routing_and_the_older_layout_flag_still_works() {
    let dir = scratch("routing-flag");
    let x = noise(1200, 21, 0.5);
    let (h0, h1) = (noise(200, 22, 0.1), noise(200, 23, 0.1));
    let (input, ir) = (dir.join("mono.wav"), dir.join("stereo-ir.wav"));
    write_mono(&input, &x, 48_000);
    write_f32(&ir, &[h0.clone(), h1.clone()], 48_000);
    let (by_routing, by_layout) = (dir.join("routing.wav"), dir.join("layout.wav"));

    // --routing matrix:1x2 (any case): input 0 to outputs 0 and 1 through IR channels 0 and 1.
    ok(&render(&[s(&input), "--ir", s(&ir), "-o", s(&by_routing), "--routing", " Matrix:1X2 "]));
    let got = read_wav(&by_routing).unwrap();
    assert_eq!(got.channel_count(), 2);
    assert!(max_rel_err(&got.channels[0], &convolve(&x, &h0)) < 2e-6);
    assert!(max_rel_err(&got.channels[1], &convolve(&x, &h1)) < 2e-6);
    // --layout is the same option under its older name: the same file, bit for bit.
    ok(&render(&[s(&input), "--ir", s(&ir), "-o", s(&by_layout), "--layout", "matrix:1x2"]));
    assert_eq!(std::fs::read(&by_layout).unwrap(), std::fs::read(&by_routing).unwrap());
    // A routing that does not fit the input says which flag to change.
    fails(
        &render(&[s(&input), "--ir", s(&ir), "-o", s(&dir.join("no.wav")), "--routing", "matrix:2x1"]),
        &[s(&input), s(&ir), "matrix:2x1", "1-channel input", "a 2-channel input", "--routing"],
    );
    // Text that names no routing is refused by the argument parser, with the accepted forms.
    let out = render(&[s(&input), "--ir", s(&ir), "-o", s(&dir.join("no.wav")), "--routing", "quad"]);
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{err}");
    assert!(err.lines().next().unwrap().contains("matrix:MxN") && err.contains("quad"), "{err}");
    assert!(!dir.join("no.wav").exists());

    // Help shows --routing only.
    for sub in ["render", "plan"] {
        let out = Command::new(env!("CARGO_BIN_EXE_partita")).args([sub, "--help"]).output().unwrap();
        let help = String::from_utf8_lossy(&out.stdout);
        assert!(out.status.success() && help.contains("--routing"), "{sub}: {help}");
        assert!(!help.contains("--layout"), "{sub} --help shows the hidden alias: {help}");
    }
}

#[test]
fn an_ir_at_another_rate_is_resampled_to_the_input_with_a_note() {
    let dir = scratch("rate-note");
    let x = noise(4800, 10, 0.5);
    let (input, ir, out) = (dir.join("in.wav"), dir.join("ir44.wav"), dir.join("out.wav"));
    write_mono(&input, &x, 48_000);
    let mut h = vec![0.0f32; 441];
    h[220] = 1.0;
    write_f32(&ir, &[h], 44_100);
    let stderr = ok(&render(&[s(&input), "--ir", s(&ir), "-o", s(&out)]));
    assert_eq!(stderr.lines().count(), 1, "{stderr}");
    assert!(stderr.starts_with("partita: note:"), "{stderr}");
    for needle in [s(&ir), "44100 Hz", "resampled to 48000 Hz", "the input is kept"] {
        assert!(stderr.contains(needle), "`{needle}` missing: {stderr}");
    }
    let got = read_wav(&out).unwrap();
    assert_eq!(got.sample_rate_hz, 48_000, "the input's rate");
    // ceil(441 x 48000 / 44100) = 480 IR frames.
    assert_eq!(got.frames(), x.len() + 480 - 1);
    // The resampled IR is a band-limited impulse at 220 / 44100 s = 239.5 frames at 48 kHz, gain kept: the
    // input comes out delayed and (below the 22.05 kHz band edge) at its level, so its energy is nearly kept.
    let energy = |v: &[f32]| v.iter().map(|&a| f64::from(a) * f64::from(a)).sum::<f64>();
    let ratio = energy(&got.channels[0]) / energy(&x);
    assert!((0.85..1.0).contains(&ratio), "energy ratio {ratio} (white noise loses the band above 22.05 kHz)");
}

#[test]
fn rate_resamples_the_input_and_the_ir() {
    let dir = scratch("rate");
    let fs = 44_100.0;
    let x: Vec<f32> =
        (0..8820).map(|n| (0.5 * (2.0 * std::f64::consts::PI * 1000.0 * n as f64 / fs).sin()) as f32).collect();
    let mut h = vec![0.0f32; 200];
    h[100] = 1.0;
    let (input, ir, out) = (dir.join("in.wav"), dir.join("ir.wav"), dir.join("out.wav"));
    write_f32(&input, &[x], 44_100);
    write_f32(&ir, &[h], 44_100);
    let stderr = ok(&render(&[s(&input), "--ir", s(&ir), "-o", s(&out), "--rate", "48000"]));
    assert_eq!(stderr.lines().count(), 2, "a note for each: {stderr}");
    assert!(stderr.contains(&format!("the IR {} is at 44100 Hz: resampled to 48000 Hz", s(&ir))), "{stderr}");
    assert!(stderr.contains(&format!("{} is at 44100 Hz: resampled to 48000 Hz (--rate)", s(&input))), "{stderr}");
    let got = read_wav(&out).unwrap();
    assert_eq!(got.sample_rate_hz, 48_000);
    // ceil(8820 x 48000 / 44100) = 9600 input frames, ceil(200 x 48000 / 44100) = 218 IR frames.
    assert_eq!(got.frames(), 9600 + 218 - 1);
    // A 1 kHz sine at amplitude 0.5 through a delayed unit impulse keeps its level at the new rate.
    let mid = &got.channels[0][2000..8000];
    let rms = (mid.iter().map(|&v| f64::from(v) * f64::from(v)).sum::<f64>() / mid.len() as f64).sqrt();
    assert!((rms / (0.5 / 2f64.sqrt()) - 1.0).abs() < 0.01, "rms {rms}");
}

#[test]
fn several_inputs_render_into_a_folder() {
    let dir = scratch("several");
    let ir = dir.join("ir.wav");
    let h = noise(400, 11, 0.1);
    write_mono(&ir, &h, 48_000);
    let signals: Vec<Vec<Vec<f32>>> = vec![
        vec![noise(20_000, 12, 0.5)],
        vec![noise(5000, 13, 0.5), noise(5000, 14, 0.5)],
        vec![noise(40_000, 15, 0.5)],
    ];
    let inputs: Vec<PathBuf> = (0..signals.len()).map(|i| dir.join(format!("take-{i}.wav"))).collect();
    for (p, sig) in inputs.iter().zip(&signals) {
        write_f32(p, sig, 48_000);
    }
    let out_dir = dir.join("wet");
    let mut args: Vec<&str> = inputs.iter().map(|p| s(p)).collect();
    args.extend(["--ir", s(&ir), "--out-dir", s(&out_dir)]);
    let out = render(&args);
    ok(&out);
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert_eq!(stdout.lines().count(), 3, "one line per file: {stdout}");
    for (i, sig) in signals.iter().enumerate() {
        let got = read_wav(&out_dir.join(format!("take-{i}.wav"))).unwrap();
        assert_eq!(got.channel_count(), sig.len());
        for (c, x) in sig.iter().enumerate() {
            assert!(max_rel_err(&got.channels[c], &convolve(x, &h)) < 2e-6, "take {i} channel {c}");
        }
    }
    let names: Vec<String> =
        std::fs::read_dir(&out_dir).unwrap().map(|e| e.unwrap().file_name().to_string_lossy().into_owned()).collect();
    assert_eq!(names.len(), 3, "nothing but the outputs: {names:?}");

    // Two inputs with one stem would write one file twice.
    let sub = dir.join("sub");
    std::fs::create_dir_all(&sub).unwrap();
    let twin = sub.join("take-0.wav");
    std::fs::copy(&inputs[0], &twin).unwrap();
    fails(&render(&[s(&inputs[0]), s(&twin), "--ir", s(&ir), "--out-dir", s(&out_dir)]), &["take-0.wav", "both write"]);
}

// ---------------------------------------------------------------------------------------------------------
// Atomic replacement
// ---------------------------------------------------------------------------------------------------------

fn listing(dir: &Path) -> Vec<String> {
    let mut v: Vec<String> =
        std::fs::read_dir(dir).unwrap().map(|e| e.unwrap().file_name().to_string_lossy().into_owned()).collect();
    v.sort();
    v
}

#[test]
fn a_render_replaces_the_output_only_when_it_succeeds() {
    let dir = scratch("atomic");
    let (input, ir, out) = (dir.join("in.wav"), dir.join("ir.wav"), dir.join("out.wav"));
    let x = noise(5000, 16, 0.5);
    let h = noise(100, 17, 0.2);
    write_mono(&input, &x, 48_000);
    write_mono(&ir, &h, 48_000);
    std::fs::write(&out, b"an old file").unwrap();

    ok(&render(&[s(&input), "--ir", s(&ir), "-o", s(&out)]));
    let got = read_wav(&out).unwrap();
    assert!(max_rel_err(&got.channels[0], &convolve(&x, &h)) < 2e-6, "the old file was replaced");
    let before = std::fs::read(&out).unwrap();
    let files = listing(&dir);

    // A failed render (the input is not a WAV) leaves the old output as it was and nothing else behind.
    let bad = dir.join("notes.wav");
    std::fs::write(&bad, b"these are notes, not audio").unwrap();
    fails(&render(&[s(&bad), "--ir", s(&ir), "-o", s(&out)]), &[s(&bad), "not a WAV"]);
    assert_eq!(std::fs::read(&out).unwrap(), before, "old output untouched");
    let mut expect = files.clone();
    expect.push("notes.wav".into());
    expect.sort();
    assert_eq!(listing(&dir), expect, "no partial or temporary file");

    // Nor does a failure while writing (the output folder does not exist).
    let missing = dir.join("no-such-folder").join("out.wav");
    fails(&render(&[s(&input), "--ir", s(&ir), "-o", s(&missing)]), &[s(&missing), "cannot write"]);
    assert_eq!(listing(&dir), expect);
}

// ---------------------------------------------------------------------------------------------------------
// Bad input: one line naming the file and the fault, exit code 1
// ---------------------------------------------------------------------------------------------------------

#[test]
fn every_bad_input_gets_one_line_naming_the_file() {
    let dir = scratch("bad");
    let good_in = dir.join("in.wav");
    let good_ir = dir.join("ir.wav");
    let stereo_in = dir.join("stereo.wav");
    write_f32(&good_in, &[noise(1000, 18, 0.5)], 48_000);
    write_f32(&good_ir, &[noise(100, 19, 0.2)], 48_000);
    write_f32(&stereo_in, &[noise(1000, 20, 0.5), noise(1000, 21, 0.5)], 48_000);
    let out = dir.join("out.wav");
    let put = |name: &str, bytes: &[u8]| {
        let p = dir.join(name);
        std::fs::write(&p, bytes).unwrap();
        p
    };

    let text = put("text.wav", b"plain text, not audio at all");
    let valid = float_wav(1, 48_000, &[0.1; 64]);
    let truncated = put("truncated.wav", &valid[..30]);
    let data: Vec<u8> = [0.1f32; 8].iter().flat_map(|v| v.to_le_bytes()).collect();
    let zero_channels = put("zero-channels.wav", &riff(&[fmt_chunk(3, 0, 48_000, 32), chunk(b"data", &data)]));
    let mp3 = put("mp3.wav", &riff(&[fmt_chunk(0x0055, 1, 48_000, 16), chunk(b"data", &[0u8; 16])]));
    let mut taps = vec![0.5f32; 16];
    taps[7] = f32::NAN;
    let nan_ir = put("nan-ir.wav", &float_wav(1, 48_000, &taps));
    let empty_ir = put("empty-ir.wav", &float_wav(1, 48_000, &[]));
    let empty_in = put("empty-in.wav", &float_wav(1, 48_000, &[]));
    let true_stereo_ir = put("true-stereo.wav", &float_wav(4, 48_000, &[0.25; 40]));

    let missing = dir.join("missing.wav");
    let cases: Vec<(Vec<&str>, Vec<&str>)> = vec![
        (vec![s(&text), "--ir", s(&good_ir), "-o", s(&out)], vec![s(&text), "not a WAV"]),
        (vec![s(&good_in), "--ir", s(&text), "-o", s(&out)], vec![s(&text), "not a WAV"]),
        (vec![s(&truncated), "--ir", s(&good_ir), "-o", s(&out)], vec![s(&truncated), "truncated"]),
        (vec![s(&good_in), "--ir", s(&truncated), "-o", s(&out)], vec![s(&truncated), "truncated"]),
        (vec![s(&zero_channels), "--ir", s(&good_ir), "-o", s(&out)], vec![s(&zero_channels), "0 channels"]),
        (vec![s(&good_in), "--ir", s(&nan_ir), "-o", s(&out)], vec![s(&nan_ir), "NaN", "frame 7"]),
        (vec![s(&good_in), "--ir", s(&empty_ir), "-o", s(&out)], vec![s(&empty_ir), "0 frames"]),
        (vec![s(&empty_in), "--ir", s(&good_ir), "-o", s(&out)], vec![s(&empty_in), "0 frames"]),
        (vec![s(&mp3), "--ir", s(&good_ir), "-o", s(&out)], vec![s(&mp3), "unsupported format tag 0x0055"]),
        (vec![s(&good_in), "--ir", s(&mp3), "-o", s(&out)], vec![s(&mp3), "unsupported format tag 0x0055"]),
        (vec![s(&good_in), "--ir", s(&good_ir), "-o", s(&good_in)], vec![s(&good_in), "overwrite the input"]),
        (vec![s(&good_in), "--ir", s(&good_ir), "-o", s(&good_ir)], vec![s(&good_ir), "overwrite the input"]),
        (vec![s(&good_in), "--ir", s(&good_ir), "--out-dir", s(&dir)], vec![s(&good_in), "overwrite the input"]),
        (vec![s(&good_in), s(&stereo_in), "--ir", s(&good_ir), "-o", s(&out)], vec![s(&out), "2 inputs", "--out-dir"]),
        (
            vec![s(&good_in), "--ir", s(&true_stereo_ir), "-o", s(&out)],
            vec![s(&good_in), s(&true_stereo_ir), "1-channel input", "true-stereo"],
        ),
        (
            vec![s(&good_in), "--ir", s(&good_ir), "-o", s(&out), "--layout", "true-stereo"],
            vec![s(&good_ir), "true-stereo", "1-channel"],
        ),
        (vec![s(&good_in), "--ir", s(&good_ir)], vec!["-o OUT.wav", "--out-dir"]),
        (vec![s(&missing), "--ir", s(&good_ir), "-o", s(&out)], vec!["missing.wav"]),
        (vec![s(&good_in), "--ir", s(&good_ir), "-o", s(&out), "--rate", "0"], vec!["--rate", "0 Hz"]),
        (vec![s(&good_in), "--ir", s(&good_ir), "-o", s(&out), "--block", "0"], vec!["--block"]),
        (vec![s(&good_in), "--ir", s(&good_ir), "-o", s(&out), "--wet", "NaN"], vec!["--wet", "finite"]),
    ];
    for (args, needles) in &cases {
        fails(&render(args), needles);
        assert!(!out.exists(), "{args:?}: nothing written");
    }
    // Nothing but the files the test made: no temporary files from any failure.
    assert!(listing(&dir).iter().all(|n| !n.contains("partita-tmp")), "{:?}", listing(&dir));
}

/// `render --wet/--dry/--gain-db` equals the live engine's own mix of the same parameters, streamed in host
/// calls with the latency removed, within the project's error bound (max <= 2e-6 of the reference peak,
/// relative RMS <= 1e-6; docs/DESIGN.md section 4): the command and the engine share one mixer. Stereo
/// input through a stereo IR, so the dry signal maps one to one.
#[test]
fn render_mix_equals_the_engines_streamed_mix() {
    use partita_core::{Engine, EngineOptions, ImpulseResponse, Mix, Planner, Routing};
    use partita_testkit::ErrorBound;
    let dir = scratch("streamed-mix");
    let x: Vec<Vec<f32>> = (0..2).map(|c| noise(20_000, 30 + c, 0.4)).collect();
    let h: Vec<Vec<f32>> = (0..2).map(|c| partita_core::synth::decaying_noise(3000, 900.0, 40 + c)).collect();
    let (input, ir, out) = (dir.join("in.wav"), dir.join("ir.wav"), dir.join("out.wav"));
    write_f32(&input, &x, 48_000);
    write_f32(&ir, &h, 48_000);
    let args = [s(&input), "--ir", s(&ir), "-o", s(&out), "--wet", "0.3", "--dry", "0.7", "--gain-db", "-2"];
    ok(&render(&args));
    let got = read_wav(&out).unwrap();
    assert_eq!((got.channel_count(), got.frames()), (2, 20_000 + 3000 - 1));

    let mix = Mix { wet: 0.3, dry: 0.7, output_gain_db: -2.0, ..Mix::default() };
    let taps = ImpulseResponse::new(h, 48_000).unwrap();
    let plan = Planner::new().block_frames(64).plan(taps.frames()).unwrap();
    let options = EngineOptions { mix, ..EngineOptions::new(256) };
    let mut engine = Engine::with_options(&plan, &taps, Routing::Stereo, options).unwrap();
    let lat = engine.latency_frames();
    let total = got.frames() + lat;
    let xs: Vec<Vec<f32>> = x.iter().map(|c| (0..total).map(|n| c.get(n).copied().unwrap_or(0.0)).collect()).collect();
    let mut ys = vec![vec![0.0f32; total]; 2];
    for at in (0..total).step_by(256) {
        let end = (at + 256).min(total);
        let ins: Vec<&[f32]> = xs.iter().map(|c| &c[at..end]).collect();
        let mut outs: Vec<&mut [f32]> = ys.iter_mut().map(|c| &mut c[at..end]).collect();
        engine.process(&ins, &mut outs).unwrap();
    }
    for (c, y) in ys.iter().enumerate() {
        let streamed: Vec<f64> = y[lat..].iter().map(|&v| f64::from(v)).collect();
        ErrorBound::measure(&got.channels[c], &streamed).assert_design_bound(&format!("channel {c}"));
    }
}
