//! `partita sweep`, `deconvolve` and `analyze` end to end, and one clear error line for each kind of bad input.
//!
//! The "room" here is a known response (two impulses) applied to the sweep by partita-core's offline render
//! (the convolution sum, Oppenheim & Schafer; checked against numpy in `reference_numpy.rs`); the sweep and
//! deconvolution methods are checked against their outside references in
//! `crates/partita-room/tests/measurement.rs`.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use partita_core::offline::{offline_plan, render};
use partita_core::synth::Noise;
use partita_core::{ImpulseResponse, Routing, Shape};
use partita_io::{read_wav, write_wav, Dither, SampleFormat};
use partita_room::sweep::fnv1a64_f32;

/// A fresh, empty scratch folder for one test.
fn scratch(name: &str) -> PathBuf {
    partita_testkit::scratch_dir(env!("CARGO_TARGET_TMPDIR"), "cli-room", name)
}

fn partita(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_partita")).args(args).output().expect("run partita")
}

fn ok(out: &Output) -> (String, String) {
    let (o, e) = (String::from_utf8_lossy(&out.stdout).into_owned(), String::from_utf8_lossy(&out.stderr).into_owned());
    assert!(out.status.success(), "partita failed: {o}{e}");
    (o, e)
}

/// Exit code 1 and a single `partita: error:` line containing every needle.
fn fails(out: &Output, needles: &[&str]) -> String {
    let err = String::from_utf8_lossy(&out.stderr).into_owned();
    assert_eq!(out.status.code(), Some(1), "exit code 1 expected; stderr: {err}");
    assert_eq!(err.lines().count(), 1, "one line expected, got: {err}");
    assert!(err.starts_with("partita: error: "), "{err}");
    for n in needles {
        assert!(err.contains(n), "`{n}` missing from: {err}");
    }
    err
}

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

/// A 1.5 s synchronized sweep with 0.7 s of silence at 48 kHz in `dir`; returns (wav, sidecar).
fn make_sweep(dir: &Path) -> (PathBuf, PathBuf) {
    let wav = dir.join("sweep.wav");
    ok(&partita(&["sweep", "-o", s(&wav), "--duration-s", "1.5", "--silence-s", "0.7"]));
    (wav, dir.join("sweep.json"))
}

/// The sweep file played through `h` (one response per recorded channel), scaled by `gain`, plus `noise_rms`
/// of white noise; written as a 32-bit float WAV.
fn record(sweep: &Path, h: &[Vec<f32>], gain: f32, noise_rms: f32, out: &Path) {
    let x = read_wav(sweep).unwrap();
    let mut noise = Noise::new(5);
    let channels: Vec<Vec<f32>> = h
        .iter()
        .map(|taps| {
            let ir = ImpulseResponse::new(vec![taps.clone()], 48_000).unwrap();
            let plan = offline_plan(ir.frames(), Shape::MONO).unwrap();
            let mut y = render(&plan, &ir, Routing::Mono, &x.channels, 1, None).unwrap().remove(0);
            y.truncate(x.frames());
            y.iter().map(|v| gain * v + noise_rms * 3f32.sqrt() * noise.sample()).collect()
        })
        .collect();
    write_wav(out, &channels, 48_000, SampleFormat::F32, Dither::OFF).unwrap();
}

/// Two impulses: 1 at `delay`, 0.5 at `delay + 200`.
fn two_impulses(delay: usize) -> Vec<f32> {
    let mut h = vec![0.0f32; delay + 400];
    h[delay] = 1.0;
    h[delay + 200] = 0.5;
    h
}

#[test]
fn sweep_writes_the_wav_and_a_sidecar_whose_hash_matches() {
    let dir = scratch("sweep");
    let wav = dir.join("sweep.wav");
    let (out, _) = ok(&partita(&["sweep", "-o", s(&wav), "--duration-s", "1.5", "--silence-s", "0.7"]));
    assert!(out.contains("Cautions") && out.contains("hearing protection") && out.contains("neighbours"), "{out}");
    let audio = read_wav(&wav).unwrap();
    let sidecar: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("sweep.json")).unwrap()).unwrap();
    assert_eq!(sidecar["format"], "partita-sweep");
    assert_eq!(sidecar["kind"], "synchronized");
    assert_eq!(sidecar["frames"].as_u64().unwrap() as usize, audio.frames());
    // FNV-1a 64 over the f32 little-endian bytes of the file's samples (sweep_file module docs).
    assert_eq!(sidecar["hash"], format!("fnv1a64-f32le:{:016x}", fnv1a64_f32(&audio.channels[0])));
    // Default level -20 dBFS (issue 16, safety), silence at the end.
    assert!((20.0 * f64::from(audio.peak()).log10() + 20.0).abs() < 0.01, "peak {}", audio.peak());
    assert!(audio.channels[0][audio.frames() - 33_600..].iter().all(|&v| v == 0.0));
}

#[test]
fn loud_sweeps_need_force_and_bad_parameters_are_refused() {
    let dir = scratch("loud");
    let wav = dir.join("loud.wav");
    fails(&partita(&["sweep", "-o", s(&wav), "--level-dbfs", "-3"]), &["-3 dBFS", "--force"]);
    assert!(!wav.exists());
    ok(&partita(&["sweep", "-o", s(&wav), "--level-dbfs", "-3", "--force", "--duration-s", "0.5"]));
    fails(&partita(&["sweep", "-o", s(&wav), "--level-dbfs", "3", "--force"]), &["0 dBFS"]);
    fails(&partita(&["sweep", "-o", s(&wav), "--end-hz", "30000"]), &["30000 Hz", "Nyquist"]);
    // clap's own refusal of an unknown value: exit code 2, naming the value and the choices.
    let out = partita(&["sweep", "-o", s(&wav), "--kind", "linear"]);
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{err}");
    assert!(err.contains("linear") && err.contains("exponential or synchronized"), "{err}");
}

#[test]
fn deconvolve_recovers_a_known_response_and_analyze_reads_it() {
    let dir = scratch("recover");
    let (wav, json) = make_sweep(&dir);
    let rec = dir.join("rec.wav");
    // Two channels with different delays (100 and 160 frames): one common onset keeps their timing.
    record(&wav, &[two_impulses(100), two_impulses(160)], 1.0, 0.0, &rec);
    let ir = dir.join("ir.wav");
    let (out, err) = ok(&partita(&["deconvolve", s(&rec), "--sweep", s(&json), "-o", s(&ir), "--harmonics", "2"]));
    assert!(out.contains("hash ok") && out.contains("peak-to-noise ratio"), "{out}");
    assert!(!err.contains("warning"), "{err}");
    let got = read_wav(&ir).unwrap();
    assert_eq!(got.channel_count(), 2);
    // Onset of the earlier channel (the first sample within 20 dB of the peak, ISO 3382-1) after the 1 ms
    // margin (48 frames); the band-limited impulse's near neighbours may start it up to 3 frames early.
    let argmax =
        |c: &[f32]| c.iter().enumerate().fold((0, 0.0f32), |m, (i, v)| if v.abs() > m.1 { (i, v.abs()) } else { m });
    let (p0, a0) = argmax(&got.channels[0]);
    let (p1, _) = argmax(&got.channels[1]);
    assert!((48..=51).contains(&p0), "{p0}");
    assert_eq!(p1, p0 + 60, "channels keep their relative delay");
    // The second impulse, 200 frames later at half the level (within 1% of the first: the band limit of 20 Hz to
    // 20 kHz shapes both alike).
    let second = got.channels[0][p0 + 200].abs();
    assert!((second / a0 - 0.5).abs() < 0.01, "{second} / {a0}");
    assert!(dir.join("ir-h2.wav").exists());

    // analyze: table, JSON (every channel, 8 bands at 48 kHz), SVG.
    let svg = dir.join("ir.svg");
    let (table, _) = ok(&partita(&["analyze", s(&ir), "--svg", s(&svg)]));
    for needle in ["channel 0", "channel 1", "broadband", "125 Hz", "8 kHz", "T30 s", "C80 dB"] {
        assert!(table.contains(needle), "`{needle}` missing: {table}");
    }
    assert!(std::fs::read_to_string(&svg).unwrap().starts_with("<svg"));
    let (json_out, _) = ok(&partita(&["analyze", s(&ir), "--json"]));
    let v: serde_json::Value = serde_json::from_str(&json_out).unwrap();
    assert_eq!(v["channels"].as_array().unwrap().len(), 2);
    assert_eq!(v["channels"][0]["bands"].as_array().unwrap().len(), 8);
    assert_eq!(v["channels"][0]["filter"], "time-reversed");
    let c80 = &v["channels"][0]["broadband"]["parameters"]["C80"];
    // All the energy arrives within 80 ms here: no late energy beyond the numerical floor, so C80 is large.
    assert!(c80["value"].as_f64().is_none_or(|c| c > 30.0), "{c80}");
}

#[test]
fn deconvolve_warns_on_clipping_and_on_a_low_peak_to_noise_ratio() {
    let dir = scratch("warn");
    let (wav, json) = make_sweep(&dir);
    let ir = dir.join("ir.wav");
    // The sweep peaks at -20 dBFS: a gain of 9.5 brings the recording to -0.4 dBFS (>= -1 dBFS).
    let loud = dir.join("loud.wav");
    record(&wav, &[two_impulses(10)], 9.5, 0.0, &loud);
    let (_, err) = ok(&partita(&["deconvolve", s(&loud), "--sweep", s(&json), "-o", s(&ir)]));
    assert!(err.contains("warning") && err.contains("clipped"), "{err}");
    // White noise as loud as the sweep's peak: the response's peak-to-noise ratio falls below 45 dB.
    let noisy = dir.join("noisy.wav");
    record(&wav, &[two_impulses(10)], 1.0, 0.1, &noisy);
    let (out, err) = ok(&partita(&["deconvolve", s(&noisy), "--sweep", s(&json), "-o", s(&ir)]));
    assert!(err.contains("below the 45 dB T30 needs"), "{out}{err}");
    // --trim-tail cuts at the noise floor: on two impulses there is no decay to fit, so it says so and keeps
    // the tail; on a decaying response (T60 0.1 s) with noise 60 dB below the sweep's peak the written response
    // ends at the crossing point, well before the recording does. --method division puts the peak where the
    // inverse filter does (within 2 frames: the two band-limit the noisy response differently) with about the
    // same energy (within 0.5 dB; 0.22 dB measured: the response is white, the sweep stops at 20 kHz and the two
    // methods shape that band edge differently, with a sixth of a white signal's energy above it).
    let (_, err) = ok(&partita(&["deconvolve", s(&noisy), "--sweep", s(&json), "-o", s(&ir), "--trim-tail"]));
    assert!(err.contains("the tail was kept whole"), "{err}");
    let decaying = dir.join("decaying.wav");
    record(&wav, &[partita_core::synth::decaying_noise(9600, 4800.0, 3)], 1.0, 1e-4, &decaying);
    let trimmed = dir.join("trimmed.wav");
    ok(&partita(&["deconvolve", s(&decaying), "--sweep", s(&json), "-o", s(&ir)]));
    let (out, err) = ok(&partita(&["deconvolve", s(&decaying), "--sweep", s(&json), "-o", s(&trimmed), "--trim-tail"]));
    let (whole, cut) = (read_wav(&ir).unwrap().frames(), read_wav(&trimmed).unwrap().frames());
    assert!(cut < whole / 2 && cut > 2400, "{cut} of {whole} frames; {out}{err}");
    ok(&partita(&["deconvolve", s(&decaying), "--sweep", s(&json), "-o", s(&ir)]));
    let full = read_wav(&ir).unwrap();
    let divided = dir.join("divided.wav");
    ok(&partita(&["deconvolve", s(&decaying), "--sweep", s(&json), "-o", s(&divided), "--method", "division"]));
    let argmax =
        |c: &[f32]| c.iter().enumerate().fold((0, 0.0f32), |m, (i, v)| if v.abs() > m.1 { (i, v.abs()) } else { m }).0;
    let div = read_wav(&divided).unwrap();
    let (a, b) = (argmax(&div.channels[0]) as i64, argmax(&full.channels[0]) as i64);
    assert!((a - b).abs() <= 2, "peaks at {a} and {b}");
    let energy = |c: &[f32]| c.iter().map(|&v| f64::from(v) * f64::from(v)).sum::<f64>();
    let ratio_db = 10.0 * (energy(&div.channels[0]) / energy(&full.channels[0])).log10();
    assert!(ratio_db.abs() < 0.5, "energies differ by {ratio_db} dB");
}

#[test]
fn deconvolve_refuses_a_changed_sidecar_and_missing_files() {
    let dir = scratch("refuse");
    let (wav, json) = make_sweep(&dir);
    let rec = dir.join("rec.wav");
    record(&wav, &[two_impulses(10)], 1.0, 0.0, &rec);
    let ir = dir.join("ir.wav");
    // The level edited in the sidecar: the regenerated sweep's hash differs.
    let edited = dir.join("edited.json");
    let text = std::fs::read_to_string(&json).unwrap().replace("\"level_dbfs\": -20.0", "\"level_dbfs\": -21.0");
    std::fs::write(&edited, text).unwrap();
    fails(&partita(&["deconvolve", s(&rec), "--sweep", s(&edited), "-o", s(&ir)]), &["edited.json", "hash"]);
    assert!(!ir.exists());
    fails(&partita(&["deconvolve", s(&dir.join("none.wav")), "--sweep", s(&json), "-o", s(&ir)]), &["none.wav"]);
    fails(&partita(&["deconvolve", s(&rec), "--sweep", s(&dir.join("none.json")), "-o", s(&ir)]), &["none.json"]);
    fails(&partita(&["deconvolve", s(&rec), "--sweep", s(&wav), "-o", s(&ir)]), &["sweep.wav", "not a sweep sidecar"]);
    // A recording shorter than the sweep, and one at another rate.
    let short = dir.join("short.wav");
    write_wav(&short, &[vec![0.0f32; 1000]], 48_000, SampleFormat::F32, Dither::OFF).unwrap();
    fails(&partita(&["deconvolve", s(&short), "--sweep", s(&json), "-o", s(&ir)]), &["1000 frames", "sweep"]);
    let other_rate = dir.join("rate.wav");
    write_wav(&other_rate, &[vec![0.0f32; 100_000]], 44_100, SampleFormat::F32, Dither::OFF).unwrap();
    fails(&partita(&["deconvolve", s(&other_rate), "--sweep", s(&json), "-o", s(&ir)]), &["44100 Hz", "48000 Hz"]);
    fails(&partita(&["analyze", s(&dir.join("none.wav"))]), &["none.wav"]);
}

/// `partita analyze ir.wav | head -1`: a reader that closes its end before the table is printed ends the
/// command quietly (SIGPIPE, as Unix filters end), without the panic std's print macros raise on EPIPE.
#[cfg(unix)]
#[test]
fn analyze_into_a_closed_pipe_ends_quietly() {
    use std::os::unix::process::ExitStatusExt;
    use std::process::Stdio;

    let ir = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data/timber-barn.wav");
    let mut child = Command::new(env!("CARGO_BIN_EXE_partita"))
        .args(["analyze", s(&ir)])
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("run partita");
    // The reader goes away at once, so the command's first line already meets a closed pipe.
    drop(child.stdout.take());
    let out = child.wait_with_output().expect("wait for partita");
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(!err.contains("panicked"), "partita panicked on a closed stdout: {err}");
    assert!(err.is_empty(), "partita wrote to stderr: {err}");
    assert!(
        out.status.signal() == Some(libc::SIGPIPE) || out.status.success(),
        "ended by SIGPIPE or successfully expected, got {:?}",
        out.status
    );
}
