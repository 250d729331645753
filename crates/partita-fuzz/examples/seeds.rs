//! Writes the seed corpus of every fuzz target into `fuzz/corpus/<target>/seed-*`: small valid inputs and
//! the hand-built bad inputs of the crates' own tests (partita-io's `bad_input.rs`, the planner's and the
//! routing's refusals, the sidecar's, the plugin state's). Run it after changing a target's input format:
//!
//! ```text
//! cargo run -p partita-fuzz --example seeds
//! ```
//!
//! The inputs the fuzzer found and kept (`corpus-*` after `scripts/fuzz --cmin`) and the regressions are
//! not touched.

use std::path::{Path, PathBuf};

use partita::sweep_file::SweepSidecar;
use partita_core::{Plan, Planner, Schedule};
use partita_room::sweep::{SweepKind, SweepSpec};

fn chunk(id: &[u8; 4], body: &[u8]) -> Vec<u8> {
    let mut v = id.to_vec();
    v.extend_from_slice(&(body.len() as u32).to_le_bytes());
    v.extend_from_slice(body);
    if body.len() % 2 == 1 {
        v.push(0);
    }
    v
}

fn riff(chunks: &[Vec<u8>]) -> Vec<u8> {
    let body = chunks.concat();
    let mut v = b"RIFF".to_vec();
    v.extend_from_slice(&(4 + body.len() as u32).to_le_bytes());
    v.extend_from_slice(b"WAVE");
    v.extend_from_slice(&body);
    v
}

fn fmt_body(tag: u16, channels: u16, rate: u32, bits: u16) -> Vec<u8> {
    let align = channels * (bits / 8);
    let mut v = Vec::new();
    for field in [&tag.to_le_bytes()[..], &channels.to_le_bytes(), &rate.to_le_bytes()] {
        v.extend_from_slice(field);
    }
    v.extend_from_slice(&(rate * u32::from(align)).to_le_bytes());
    v.extend_from_slice(&align.to_le_bytes());
    v.extend_from_slice(&bits.to_le_bytes());
    v
}

fn extensible_body(sub: u16, channels: u16, rate: u32, bits: u16) -> Vec<u8> {
    let mut v = fmt_body(0xFFFE, channels, rate, bits);
    v.extend_from_slice(&22u16.to_le_bytes());
    v.extend_from_slice(&bits.to_le_bytes());
    v.extend_from_slice(&3u32.to_le_bytes());
    v.extend_from_slice(&sub.to_le_bytes());
    v.extend_from_slice(&[0x00, 0x00, 0x00, 0x00, 0x10, 0x00, 0x80, 0x00, 0x00, 0xAA, 0x00, 0x38, 0x9B, 0x71]);
    v
}

/// A short decaying signal in the given sample format.
fn samples(bits: u16, float: bool, count: usize) -> Vec<u8> {
    let taps = partita_core::synth::decaying_noise(count, count as f64 / 3.0 + 1.0, 5);
    let mut v = Vec::new();
    for (i, t) in taps.iter().enumerate() {
        let t = if i == 0 { 0.9 } else { *t * 0.5 };
        match (float, bits) {
            (true, 32) => v.extend_from_slice(&t.to_le_bytes()),
            (true, _) => v.extend_from_slice(&f64::from(t).to_le_bytes()),
            (false, 8) => v.push((128.0 + t * 127.0) as u8),
            (false, 16) => v.extend_from_slice(&((t * 32767.0) as i16).to_le_bytes()),
            (false, 24) => v.extend_from_slice(&((t * 8_388_607.0) as i32).to_le_bytes()[..3]),
            (false, _) => v.extend_from_slice(&((f64::from(t) * 2_147_483_647.0) as i32).to_le_bytes()),
        }
    }
    v
}

fn wav(tag: u16, channels: u16, rate: u32, bits: u16, frames: usize) -> Vec<u8> {
    let float = tag == 3;
    riff(&[
        chunk(b"fmt ", &fmt_body(tag, channels, rate, bits)),
        chunk(b"data", &samples(bits, float, frames * channels as usize)),
    ])
}

/// Valid files and the hand-built bad ones.
fn wav_seeds() -> Vec<(&'static str, Vec<u8>)> {
    let good = wav(1, 1, 48_000, 16, 64);
    let mut truncated = good.clone();
    truncated.truncate(good.len() - 7);
    let mut claims_gigabytes = riff(&[chunk(b"fmt ", &fmt_body(3, 2, 48_000, 32))]);
    claims_gigabytes.extend_from_slice(b"data");
    claims_gigabytes.extend_from_slice(&0xFFFF_FFF0u32.to_le_bytes());
    claims_gigabytes.extend_from_slice(&[0; 16]);
    let mut nan = riff(&[chunk(b"fmt ", &fmt_body(3, 1, 48_000, 32))]);
    let mut body = samples(32, true, 8);
    body[8..12].copy_from_slice(&f32::NAN.to_le_bytes());
    nan.extend_from_slice(&chunk(b"data", &body));
    vec![
        ("pcm16-mono", good),
        ("pcm8-stereo", wav(1, 2, 44_100, 8, 32)),
        ("pcm24-mono", wav(1, 1, 96_000, 24, 40)),
        ("pcm32-4ch", wav(1, 4, 48_000, 32, 16)),
        ("float32-stereo", wav(3, 2, 48_000, 32, 48)),
        ("float64-mono", wav(3, 1, 44_100, 64, 24)),
        (
            "extensible-pcm24-stereo",
            riff(&[chunk(b"fmt ", &extensible_body(1, 2, 48_000, 24)), chunk(b"data", &samples(24, false, 40))]),
        ),
        (
            "extensible-float-mono",
            riff(&[chunk(b"fmt ", &extensible_body(3, 1, 48_000, 32)), chunk(b"data", &samples(32, true, 20))]),
        ),
        (
            "list-before-fmt",
            riff(&[
                chunk(b"LIST", b"INFOabc"),
                chunk(b"fmt ", &fmt_body(1, 1, 8_000, 16)),
                chunk(b"data", &samples(16, false, 16)),
            ]),
        ),
        ("not-a-wav", b"hello, not a wav".to_vec()),
        ("riff-not-wave", b"RIFF\x04\x00\x00\x00AVI ".to_vec()),
        ("truncated", truncated),
        ("data-claims-gigabytes", claims_gigabytes),
        ("zero-channels", riff(&[chunk(b"fmt ", &fmt_body(1, 0, 48_000, 16)), chunk(b"data", &[])])),
        ("zero-rate", riff(&[chunk(b"fmt ", &fmt_body(1, 1, 0, 16)), chunk(b"data", &[0, 0])])),
        ("bits-12", riff(&[chunk(b"fmt ", &fmt_body(1, 1, 48_000, 12)), chunk(b"data", &[0, 0])])),
        ("no-data", riff(&[chunk(b"fmt ", &fmt_body(1, 1, 48_000, 16))])),
        ("nan-sample", nan),
        ("empty-data", riff(&[chunk(b"fmt ", &fmt_body(1, 1, 48_000, 16)), chunk(b"data", &[])])),
    ]
}

fn ir_seeds() -> Vec<(&'static str, Vec<u8>)> {
    let with = |options: [u8; 4], wav: Vec<u8>| [&options[..], &wav].concat();
    vec![
        ("as-is-mono", with([0, 0, 0, 0], wav(1, 1, 48_000, 16, 64))),
        ("resample-44k1-to-48k", with([7, 0, 0, 0], wav(3, 2, 44_100, 32, 300))),
        ("resample-96k-to-48k-trim-peak", with([7, 120, 1, 0], wav(1, 1, 96_000, 24, 400))),
        ("true-stereo-energy", with([0, 0, 2, 4], wav(3, 4, 48_000, 32, 50))),
        ("matrix-1x3", with([0, 0, 0, 0x02], wav(1, 3, 48_000, 16, 30))),
        ("routing-mismatch", with([0, 0, 0, 2], wav(1, 1, 48_000, 16, 30))),
        ("bad-threshold", with([0, 254, 0, 0], wav(1, 1, 48_000, 16, 30))),
        ("silent-peak", with([0, 0, 1, 0], wav(1, 1, 48_000, 16, 0).into_iter().chain([]).collect())),
        ("odd-rate-pair", with([13, 0, 0, 0], wav(1, 1, 44_100, 16, 30))),
        ("empty-ir", with([0, 0, 0, 0], riff(&[chunk(b"fmt ", &fmt_body(1, 1, 48_000, 16)), chunk(b"data", &[])]))),
    ]
}

fn plan_seeds() -> Vec<(&'static str, Vec<u8>)> {
    // Levels text: mode 0, block choice (6 = 64), flags (bit 0 zero latency, bits 1-2 schedule, bit 3 x64),
    // the IR length as a size byte, then the text.
    let levels = |block: u8, flags: u8, ir: u8, text: &str| [&[0u8, block, flags, ir][..], text.as_bytes()].concat();
    let json = |plan: &Plan| [&[1u8][..], serde_json::to_string(plan).unwrap().as_bytes()].concat();
    let planner = Planner::new().block_frames(64);
    let two_level = planner.custom(&[(64, 3), (256, 2)], 600).unwrap();
    let workers =
        Planner::new().block_frames(32).schedule(Schedule::Workers).custom(&[(32, 4), (128, 3)], 500).unwrap();
    let zero = Planner::new().block_frames(16).zero_latency(true).custom(&[(16, 4), (64, 4)], 300).unwrap();
    let mut gap = two_level.clone();
    gap.levels[1].offset_frames += 64;
    vec![
        ("levels-uniform", levels(6, 0, 100, "64x2")),
        ("levels-two", levels(6, 8, 9, "64x3,256x2")),
        ("levels-workers", levels(5, 4, 7, "32x4, 128x3")),
        ("levels-sliced", levels(6, 6, 12, "64x4,512x2")),
        ("levels-zero-latency", levels(4, 1, 5, "16x4,64x4")),
        ("levels-too-early", levels(6, 4, 9, "64x1,256x2")),
        ("levels-not-multiple", levels(6, 0, 150, "64x1,100x1")),
        ("levels-bad-text", levels(6, 0, 150, "64x,x3,abc")),
        ("levels-too-short", levels(6, 0, 200, "64x1")),
        ("json-two-levels", json(&two_level)),
        ("json-workers", json(&workers)),
        ("json-zero-latency", json(&zero)),
        ("json-uniform", json(&Plan::uniform(128, 1000).unwrap())),
        ("json-gap", json(&gap)),
        ("json-garbage", b"\x01{\"block_frames\": 64".to_vec()),
    ]
}

fn routing_seeds() -> Vec<(&'static str, Vec<u8>)> {
    let text = |ir: u8, inputs: u8, t: &str| [&[ir, inputs][..], t.as_bytes()].concat();
    vec![
        ("mono", text(1, 1, "mono")),
        ("mono-on-stereo", text(1, 2, "Mono")),
        ("mono-to-stereo", text(2, 1, "mono-to-stereo")),
        ("stereo", text(2, 2, " stereo ")),
        ("true-stereo", text(4, 2, "true-stereo")),
        ("truestereo", text(4, 2, "TrueStereo")),
        ("matrix", text(6, 2, "matrix:2x3")),
        ("matrix-spaces", text(6, 2, "Matrix: 2 x 3")),
        ("matrix-empty", text(0, 0, "matrix:0x3")),
        ("unknown", text(1, 1, "quad")),
        ("normalize", text(1, 1, "peak")),
        ("schedule", text(1, 1, "workers")),
    ]
}

fn sweep_seeds() -> Vec<(&'static str, Vec<u8>)> {
    let spec = |kind, rate, duration_s, silence_s| SweepSpec {
        kind,
        sample_rate_hz: rate,
        start_hz: 100.0,
        end_hz: 3_000.0,
        duration_s,
        fade_in_s: 0.01,
        fade_out_s: 0.005,
        level_dbfs: -20.0,
        silence_s,
    };
    let sidecar = |s: &SweepSpec| {
        let samples = s.generate().unwrap();
        serde_json::to_vec_pretty(&SweepSidecar::new(s, &samples)).unwrap()
    };
    let short = spec(SweepKind::Exponential, 8_000, 0.2, 0.05);
    let good = sidecar(&short);
    let text = String::from_utf8(good.clone()).unwrap();
    vec![
        ("exponential", good),
        ("synchronized", sidecar(&spec(SweepKind::Synchronized, 16_000, 0.3, 0.0))),
        ("edited-level", text.replace("-20.0", "-10.0").into_bytes()),
        ("hash-changed", text.replacen("fnv1a64-f32le:", "fnv1a64-f32le:f", 1).into_bytes()),
        ("unknown-kind", text.replace("exponential", "linear").into_bytes()),
        ("end-above-nyquist", text.replace("3000.0", "9000.0").into_bytes()),
        ("not-json", b"{\"format\": \"partita-sweep\", ".to_vec()),
        ("other-format", text.replace("partita-sweep", "something-else").into_bytes()),
    ]
}

/// C ABI call sequences (op bytes as in src/ffi.rs `step`).
fn c_abi_seeds() -> Vec<(&'static str, Vec<u8>)> {
    // plan_create: op 0, struct size choice 4 (exact), ir_frames choice 2 (byte << shift), the fields.
    let plan = [0u8, 4, 2, 200, 2, 1, 64, 0, 0, 1, 0, 0, 0, 1, 0, 0, 0];
    // engine_create: op 3, options (size exact, routing auto, matrix 0 0, max frames 64, period 0, offline,
    // predelay 100), IR (1 channel, 200 frames, 48 kHz, seed, plain, no NULL), use the plan.
    let engine = [3u8, 4, 1, 0, 0, 64, 0, 1, 100, 1, 1, 199, 2, 9, 0, 0, 0];
    let take = [5u8];
    // process: op 6, planar, engine's channels, 64 frames, finite input, no NULL.
    let process = [6u8, 1, 1, 2, 64, 3, 0, 0];
    let interleaved = [7u8, 0, 1, 2, 64, 0, 0];
    // prepare: op 8, IR (1 channel, 100 frames, 48 kHz).
    let prepare = [8u8, 1, 1, 99, 2, 4, 0, 0];
    let swap = [10u8, 64];
    let send = [11u8, 1, 3, 32];
    let event = [12u8, 4];
    let status = [13u8, 4];
    let names = [15u8, 1, 0, 0, 0, 2];
    let destroy_twice = [14u8, 0, 14, 1];
    let seq = |parts: &[&[u8]]| parts.concat();
    vec![
        ("plan-engine-process", seq(&[&plan, &engine, &process, &interleaved, &process])),
        (
            "swap-and-events",
            seq(&[&engine, &take, &prepare, &swap, &process, &process, &event, &status, &send, &process, &event]),
        ),
        ("auto-plan-engine", seq(&[&engine[..15], &[1], &take, &status, &process])),
        ("destroy-orders", seq(&[&plan, &engine, &take, &destroy_twice, &status, &send, &names])),
        ("nulls", seq(&[&[1u8, 4], &[4, 4], &[6, 1, 0, 2, 64, 0, 0, 0], &[12, 4], &[13, 0], &[2, 1], &[10, 0]])),
    ]
}

fn plugin_state_seeds() -> Vec<(&'static str, Vec<u8>)> {
    use partita_io::Audio;
    use partita_plugin::state::{SavedFile, SavedState, STATE_MAGIC, STATE_VERSION};
    // Every parameter at its default, as a fresh instance saves it.
    let defaults: Vec<(u32, f64)> = partita_plugin::params::ParamValues::new(0)
        .snapshot()
        .iter()
        .enumerate()
        .filter(|&(id, _)| id != 10)
        .map(|(id, &v)| (id as u32, v))
        .collect();
    let state = |params: Vec<(u32, f64)>, file: Option<SavedFile>| SavedState { params, file }.encode();
    let file = |path: &str, audio: Option<Audio>| Some(SavedFile { path: path.into(), audio });
    let good = state(defaults.clone(), None);
    let with_version = |v: u32| {
        let mut b = good.clone();
        b[8..12].copy_from_slice(&v.to_le_bytes());
        b
    };
    let mut huge = STATE_MAGIC.to_vec();
    for word in [STATE_VERSION, 0] {
        huge.extend_from_slice(&word.to_le_bytes());
    }
    huge.push(1);
    huge.extend_from_slice(&1u32.to_le_bytes());
    huge.push(b'a');
    huge.push(1);
    huge.extend_from_slice(&48_000u32.to_le_bytes());
    huge.extend_from_slice(&4u32.to_le_bytes());
    huge.extend_from_slice(&(1u64 << 40).to_le_bytes());
    let mut nan_sample = state(vec![], file("x.wav", Some(Audio::new(vec![vec![0.0]], 48_000))));
    let n = nan_sample.len();
    nan_sample[n - 4..].copy_from_slice(&f32::NAN.to_le_bytes());
    let mut trailing = good.clone();
    trailing.push(0);
    vec![
        ("defaults", good.clone()),
        ("custom-room", state(vec![(6, 0.0), (7, 2400.0), (8, 3.2), (9, 0.35), (0, 55.0)], None)),
        ("file-path", state(defaults.clone(), file("/home/user/irs/stairwell.wav", None))),
        (
            "file-embedded-stereo",
            state(
                defaults.clone(),
                file(
                    "irs/hall.wav",
                    Some(Audio::new(vec![vec![1.0, -0.5, 0.25, 0.0], vec![0.5, 0.25, -0.125, 0.0]], 44_100)),
                ),
            ),
        ),
        (
            "file-embedded-true-stereo",
            state(
                vec![(0, 100.0)],
                file(
                    "ts.wav",
                    Some(Audio::new(vec![vec![1.0, 0.1], vec![0.2, 0.3], vec![0.0, -0.1], vec![0.9, 0.0]], 48_000)),
                ),
            ),
        ),
        ("out-of-range-values", state(vec![(0, 1e9), (3, -1e9), (8, f64::INFINITY), (5, -3.0), (99, 1.0)], None)),
        ("nan-value", state(vec![(2, f64::NAN)], None)),
        ("newer-version", with_version(STATE_VERSION + 1)),
        ("version-zero", with_version(0)),
        ("not-ours", b"RIFF\x24\x00\x00\x00WAVEfmt ".to_vec()),
        ("truncated", good[..37].to_vec()),
        ("trailing", trailing),
        ("nan-sample", nan_sample),
        ("huge-frames", huge),
        ("empty", Vec::new()),
    ]
}

fn write(root: &Path, target: &str, seeds: Vec<(&'static str, Vec<u8>)>) {
    let dir = root.join("corpus").join(target);
    std::fs::create_dir_all(&dir).unwrap();
    for entry in std::fs::read_dir(&dir).unwrap() {
        let path = entry.unwrap().path();
        if path.file_name().unwrap().to_string_lossy().starts_with("seed-") {
            std::fs::remove_file(path).unwrap();
        }
    }
    for (name, bytes) in seeds {
        std::fs::write(dir.join(format!("seed-{name}")), bytes).unwrap();
    }
}

fn main() {
    let root = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../../fuzz");
    write(&root, "wav_reader", wav_seeds());
    write(&root, "ir_prepare", ir_seeds());
    write(&root, "plan", plan_seeds());
    write(&root, "routing_text", routing_seeds());
    write(&root, "sweep_sidecar", sweep_seeds());
    write(&root, "c_abi", c_abi_seeds());
    write(&root, "plugin_state", plugin_state_seeds());
    println!("seeds written under {}", root.join("corpus").display());
}
