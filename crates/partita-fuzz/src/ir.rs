//! Impulse-response loading from WAV bytes: read, route, trim, resample, normalize, validate
//! ([`partita_io::load_ir_from`]), with options chosen by the first four bytes; then a short engine run on
//! the result when it is small.
//!
//! Contract: a clear error naming the file, or an IR that is at most [`MAX_IR_FRAMES`] long, at the rate
//! asked for, whose routing fits its channels, with finite taps, a finite positive gain, a trim no longer
//! than the file, a peak of 1 after peak normalization; an engine on it gives finite output for finite
//! input. Memory: at most [`BYTES_PER_INPUT_BYTE`] x the input's size plus [`BYTES_PER_OUTPUT_TAP`] per tap
//! of the resampled IR plus [`FIXED_BYTES`] (the resampler's FFTs) at once.

use std::io::Cursor;
use std::path::Path;

use partita_core::{Engine, EngineOptions, Plan, Routing};
use partita_io::{
    load_ir_from, read_wav_from, resampled_frames, IrOptions, Normalize, MAX_DECODED_BYTES, MAX_IR_FRAMES,
};

use crate::input::Input;
use crate::wav::NAME;
use crate::{check_message, memory};

/// See the module docs.
pub const BYTES_PER_INPUT_BYTE: usize = 64;
/// See the module docs.
pub const BYTES_PER_OUTPUT_TAP: usize = 64;
/// See the module docs.
pub const FIXED_BYTES: usize = 256 << 20;

/// IRs up to this many frames and [`RUN_MAX_CHANNELS`] channels are run through an engine.
pub const RUN_MAX_FRAMES: usize = 1 << 13;
/// See [`RUN_MAX_FRAMES`].
pub const RUN_MAX_CHANNELS: usize = 16;

const RATES: [u32; 16] = [
    8_000, 11_025, 16_000, 22_050, 32_000, 44_100, 48_000, 88_200, 96_000, 176_400, 192_000, 384_000, 1, 7, 1_000,
    47_999,
];

/// IR loading on `data`: 4 option bytes (rate, trim, normalization, routing), then the WAV file.
///
/// # Panics
/// When the contract (module docs) is broken.
pub fn ir_prepare(data: &[u8]) {
    let mut input = Input::new(data);
    let sample_rate_hz = match input.u8() {
        0 => None,
        k => Some(RATES[usize::from(k) % RATES.len()]),
    };
    let trim_tail_db = match input.u8() {
        0 => None,
        255 => Some(f64::NAN),
        254 => Some(3.0),
        k => Some(-f64::from(k) / 2.0),
    };
    let normalize = input.pick(&[Normalize::None, Normalize::Peak, Normalize::Energy]);
    let routing = match input.u8() {
        0 => None,
        1 => Some(Routing::Mono),
        2 => Some(Routing::MonoToStereo),
        3 => Some(Routing::Stereo),
        4 => Some(Routing::TrueStereo),
        k => Some(Routing::Matrix { inputs: usize::from(k >> 4) + 1, outputs: usize::from(k & 15) + 1 }),
    };
    let options = IrOptions { sample_rate_hz, trim_tail_db, normalize, routing };
    let wav = input.rest();

    // The file as read, for the bound on the resampled length and the checks on trim and rate.
    let source = read_wav_from(Cursor::new(wav), Path::new(NAME), MAX_DECODED_BYTES).ok();
    let out_taps = source.as_ref().map_or(0, |a| {
        let to_hz = sample_rate_hz.unwrap_or(a.sample_rate_hz);
        resampled_frames(a.frames() as u64, a.sample_rate_hz, to_hz).min(MAX_IR_FRAMES) as usize * a.channels.len()
    });
    let rule = "64 x input bytes + 64 x resampled taps + 256 MiB";
    let limit = BYTES_PER_INPUT_BYTE * wav.len() + BYTES_PER_OUTPUT_TAP * out_taps + FIXED_BYTES;
    let result =
        memory::bounded("loading an IR", rule, limit, || load_ir_from(Cursor::new(wav), Path::new(NAME), &options));
    let loaded = match result {
        Ok(loaded) => loaded,
        Err(e) => return check_message(&e.to_string(), NAME),
    };
    let source = source.expect("an IR loaded from a file the reader refuses");
    let ir = &loaded.ir;
    assert!(ir.frames() as u64 <= MAX_IR_FRAMES, "an IR of {} frames", ir.frames());
    assert_eq!(ir.sample_rate_hz(), sample_rate_hz.unwrap_or(source.sample_rate_hz));
    assert!(loaded.routing.accepts_ir_channels(ir.channels()), "{:?} with {} channels", loaded.routing, ir.channels());
    if let Some(r) = routing {
        assert_eq!(loaded.routing, r, "the routing asked for was changed");
    }
    assert!(loaded.gain.is_finite() && loaded.gain > 0.0, "gain {}", loaded.gain);
    assert!(loaded.trimmed_frames < source.frames().max(1), "trimmed {} of {}", loaded.trimmed_frames, source.frames());
    let taps = ir.as_planar();
    for (c, channel) in taps.iter().enumerate() {
        if let Some(i) = channel.iter().position(|v| !v.is_finite()) {
            panic!("IR channel {c} tap {i} is {}", channel[i]);
        }
    }
    if normalize == Normalize::Peak {
        let peak = taps.iter().flatten().fold(0f32, |m, v| m.max(v.abs()));
        assert!((peak - 1.0).abs() <= 1e-5, "peak {peak} after peak normalization");
    }
    if ir.frames() <= RUN_MAX_FRAMES && ir.channels() <= RUN_MAX_CHANNELS {
        run_engine(ir, loaded.routing);
    }
}

/// Builds an engine on the IR and checks that noise in gives finite output.
fn run_engine(ir: &partita_core::ImpulseResponse, routing: Routing) {
    let b = 64;
    let plan = Plan::uniform(b, ir.frames()).expect("a uniform plan for a non-empty IR");
    let mut engine = Engine::with_options(&plan, ir, routing, EngineOptions::new(b))
        .unwrap_or_else(|e| panic!("an accepted IR did not build an engine: {e}"));
    let mut rng = partita_core::synth::Noise::new(3);
    let inputs: Vec<Vec<f32>> = (0..engine.inputs()).map(|_| rng.vec(b)).collect();
    let mut outputs = vec![vec![0.0f32; b]; engine.outputs()];
    let calls = (ir.frames() + engine.latency_frames()).div_ceil(b) + 1;
    for call in 0..calls {
        let x: Vec<&[f32]> = inputs.iter().map(|c| &c[..]).collect();
        let mut y: Vec<&mut [f32]> = outputs.iter_mut().map(|c| &mut c[..]).collect();
        engine.process(&x, &mut y).expect("calls of one block are accepted");
        for (o, channel) in outputs.iter().enumerate() {
            if let Some(i) = channel.iter().position(|v| !v.is_finite()) {
                panic!("call {call} output {o} frame {i} is {} for finite input", channel[i]);
            }
        }
    }
}
