//! The capture client ([`JackCapture`]) against a private JACK server (dummy driver, 48 kHz): its output
//! is clamped at the ceiling, a stop request fades it out over [`STOP_FADE_MS`] (a sink client records
//! the output port, so the ramp is checked as the server carried it), the recording follows the input
//! port, and the process callback never touches the heap (the allocation trap armed on every thread
//! while it plays, records and fades). Skipped with a message when no server can be started; a failure
//! then when `CI` is set. The binary's global allocator is the trap, so its tests hold the JACK serial
//! lock for their whole run.
#![cfg(feature = "jack")]

mod support;

use std::time::{Duration, Instant};

use partita_device::{CaptureOptions, JackCapture, PortChoice, STOP_FADE_MS};
use partita_testkit::{armed_all_threads, TrapAllocator};
use support::*;

#[global_allocator]
static ALLOC: TrapAllocator = TrapAllocator;

const RATE: usize = 48_000;

#[test]
fn capture_clamps_fades_out_on_stop_and_never_touches_the_heap() {
    let _serial = serial();
    let Some(_server) = jack_or_skip("capture_clamps_fades_out_on_stop_and_never_touches_the_heap", 64) else {
        return;
    };
    // A server xrun can drop a client's cycle and so break what the sink or the capture client recorded (not
    // Partita's doing): such a run is repeated, up to 4 times. A mismatch in a run without any xrun fails at
    // once; the heap and timing checks fail at once in every run.
    for attempt in 1..=4 {
        let (xruns, checked) = run_once();
        match checked {
            Ok(()) => return,
            Err(e) if xruns == 0 => panic!("{e}, with no xrun"),
            Err(e) if attempt < 4 => eprintln!("WARNING: {e} after {xruns} host xruns; running again"),
            Err(e) => panic!("{e}; every one of 4 runs had host xruns that broke it (last: {xruns})"),
        }
    }
}

/// Fails the calling function with a message unless the condition holds.
macro_rules! check {
    ($cond:expr, $($t:tt)*) => {
        let holds: bool = $cond;
        if !holds {
            return Err(format!($($t)*));
        }
    };
}

/// One run: the heap and stop-time checks panic; the checks of the recorded audio come back, with the
/// server's xruns during the run.
fn run_once() -> (u64, Result<(), String>) {
    // A 1 kHz sine at 0.5 against a ceiling of 0.25: the port must carry it clamped at 0.25.
    let ceiling = 0.25f32;
    let signal: Vec<f32> =
        (0..RATE * 10).map(|n| 0.5 * (2.0 * std::f32::consts::PI * 1000.0 * n as f32 / RATE as f32).sin()).collect();
    let options =
        CaptureOptions { output: PortChoice::Unconnected, input: PortChoice::Unconnected, ..CaptureOptions::default() };
    let client = JackCapture::open(&options).expect("capture client");
    let name = client.client_name();
    let mut stream = client.start(signal, ceiling, RATE * 10).expect("capture starts");
    // A source plays a ramp into in_1 (so the recording can be checked), a sink records out_1.
    let ramp: Vec<f32> = (0..RATE * 8).map(|n| n as f32 / (RATE * 8) as f32).collect();
    let source = TestClient::start_named(
        "partita_source",
        Playlist { start: 0, channels: vec![ramp.clone()] },
        0,
        vec![format!("{name}:in_1")],
        vec![],
    );
    let sink = TestClient::start_named(
        "partita_sink",
        Playlist { start: 0, channels: vec![] },
        RATE * 6,
        vec![],
        vec![format!("{name}:out_1")],
    );
    // Warm-up outside the trap (first-use paths: thread-locals of the CPU clock, lazy statics).
    std::thread::sleep(Duration::from_millis(500));
    let callbacks_before = stream.stats().output_callbacks;
    let (stop_took, heap_ops) = armed_all_threads(|| {
        let until = Instant::now() + Duration::from_millis(1500);
        while Instant::now() < until {
            assert!(stream.poll().is_none());
            std::thread::sleep(Duration::from_millis(20));
        }
        let asked = Instant::now();
        stream.request_stop();
        while !stream.is_done() {
            std::thread::sleep(Duration::from_millis(2));
        }
        let took = asked.elapsed();
        // A few cycles of silence after the fade, still under the trap.
        std::thread::sleep(Duration::from_millis(100));
        took
    });
    let callbacks = stream.stats().output_callbacks - callbacks_before;
    std::thread::sleep(Duration::from_millis(100));
    let out = sink.stop().remove(0);
    drop(source.stop());
    let capture = stream.finish().expect("the client closes");
    let xruns = capture.stats.host_xruns;
    eprintln!("{callbacks} callbacks under the trap, {heap_ops} heap operations; stop took {stop_took:?}");
    assert!(callbacks > 500, "the trap saw {callbacks} callbacks");
    assert_eq!(heap_ops, 0, "heap operations while the capture client ran");
    assert!(stop_took < Duration::from_millis(200), "{stop_took:?}");

    let checked = (|| -> Result<(), String> {
        // The output: clamped at the ceiling until the stop, then a raised-cosine fade of 20 ms (960 frames),
        // then silence. Located on the sink's timeline by the last non-zero sample.
        let peak = out.iter().fold(0.0f32, |m, v| m.max(v.abs()));
        check!(peak == ceiling, "the output peaks at {peak}, not the ceiling {ceiling}");
        let Some(last) = out.iter().rposition(|v| v.abs() > 0.0) else { return Err("the sink heard nothing".into()) };
        check!(out[last + 1..].len() > 2000 && out[last + 1..].iter().all(|&v| v == 0.0), "no silence after the fade");
        let fade = (STOP_FADE_MS * 1e-3 * RATE as f64) as usize;
        // Envelope per 48-frame window (one period of the 1 kHz tone) over the fade: within 0.02 of the
        // raised cosine at the window's start and end (the clamped tone reaches the ceiling in every window).
        let start = last + 1 - fade;
        let before = &out[start - 480..start];
        check!(before.iter().fold(0.0f32, |m, v| m.max(v.abs())) == ceiling, "not at full level up to the fade");
        let gain = |k: usize| 0.5 + 0.5 * (std::f64::consts::PI * k as f64 / fade as f64).cos();
        let mut envelope = Vec::new();
        for w in (0..fade).step_by(48) {
            let e = out[start + w..start + w + 48].iter().fold(0.0f32, |m, v| m.max(v.abs())) as f64 / ceiling as f64;
            envelope.push(e);
            check!(
                e <= gain(w) + 1e-6 && e >= gain(w + 48) - 0.02,
                "fade window at {w}: {e} vs {}..{}",
                gain(w + 48),
                gain(w)
            );
        }
        eprintln!("fade-out envelope per ms: {envelope:.3?}");
        // Not a step: no sample-to-sample jump in the fade larger than the clamped tone's own before it, plus
        // what the gain's slope adds (at most the ceiling times pi / 2 / 960 per frame, 0.0004); a cut to silence
        // from full level would jump by up to the ceiling, 0.25.
        let max_step = |x: &[f32]| x.windows(2).map(|w| (w[1] - w[0]).abs()).fold(0.0f32, f32::max);
        let (steady, fading) = (max_step(&out[start - 4800..start]), max_step(&out[start..last + 2]));
        eprintln!("largest step: {fading} in the fade, {steady} before it");
        check!(fading <= steady + 0.0005, "largest step in the fade {fading}, before it {steady}");

        // The recording: up to the stop and its fade, the source's ramp at one offset (the source's first
        // frames arrive once it is connected).
        let rec = &capture.recording;
        let stopped = capture.stopped_at_frames.expect("a stop was asked for");
        assert_eq!(rec.len(), stopped + fade, "recorded up to the end of the fade");
        let n = rec.len() - 1;
        let step = 1.0 / (RATE * 8) as f32;
        let offset = ((rec[n] / step).round() as i64 - n as i64) as f32;
        for i in (n - 4800..=n).step_by(97) {
            // A quarter of a step: a dropped or repeated frame is a whole one.
            check!(
                (rec[i] - (i as f32 + offset) * step).abs() < 0.25 * step,
                "recorded frame {i}: {} vs the ramp",
                rec[i]
            );
        }
        Ok(())
    })();
    (xruns, checked)
}

/// The trap catches an allocation on a thread other than the arming one (so a zero above means none).
#[test]
fn the_trap_sees_other_threads() {
    let _serial = serial();
    let ((), n) = armed_all_threads(|| {
        std::thread::spawn(|| drop(std::hint::black_box(vec![1u8; 64]))).join().unwrap();
    });
    assert!(n >= 1);
}
