//! The bridge's per-callback work, driven offline (no device): the output equals the offline
//! convolution through any callback sizes and formats, drift between skewed clocks is corrected
//! without overflowing or running dry (both drift modes; `tests/drift.rs` has the rest of drift),
//! stalls and safety mutes are counted.

use partita_core::synth::{decaying_noise, Noise};
use partita_core::{naive, Command, Engine, EngineOptions, ImpulseResponse, Mix, Plan, Routing};
use partita_device::drift::DriftMode;
use partita_device::{Bridge, BridgeOptions, CallbackTime, DriftOptions, EngineSide, MuteReason, SafetyOptions};
use partita_testkit::ErrorBound;

const RATE: u32 = 48_000;

fn no_fade() -> SafetyOptions {
    SafetyOptions { fade_in_ms: 0.0, ..SafetyOptions::default() }
}

fn engine(taps: &[Vec<f32>], routing: Routing, block: usize) -> Engine {
    let ir = ImpulseResponse::new(taps.to_vec(), RATE).unwrap();
    Engine::new(&Plan::uniform(block, ir.frames()).unwrap(), &ir, routing, 1024).unwrap()
}

fn options(side: EngineSide, inputs: usize, outputs: usize) -> BridgeOptions {
    BridgeOptions { side, safety: no_fade(), ..BridgeOptions::new(RATE, inputs, outputs) }
}

fn ns(frames: u64) -> u64 {
    frames * 1_000_000_000 / u64::from(RATE)
}

/// Streams stereo noise through a stereo engine in callbacks of random sizes (capture then render,
/// one clock), on either side, and checks the output against the f64 oracle.
#[test]
fn output_is_the_convolution_through_random_callback_sizes() {
    for side in [EngineSide::Capture, EngineSide::Playback] {
        let taps: Vec<Vec<f32>> = (0..2).map(|c| decaying_noise(3000, 1500.0, 10 + c)).collect();
        let taps: Vec<Vec<f32>> = taps.iter().map(|t| t.iter().map(|v| 0.1 * v).collect()).collect();
        let e = engine(&taps, Routing::Stereo, 64);
        let latency = e.latency_frames();
        let Bridge { mut capture, mut playback, handle } = Bridge::new(e, &options(side, 2, 2)).unwrap();
        let total = 24_000;
        let mut noise = Noise::new(5);
        let x: Vec<Vec<f32>> = (0..2).map(|_| noise.vec(total).iter().map(|v| 0.3 * v).collect()).collect();
        let mut y = vec![Vec::new(); 2];
        let mut sizes = Noise::new(9);
        let mut at = 0;
        while at < total {
            // 1..=2000 frames: larger than the engine's max_host_frames (1024) too.
            let n = sizes.range(1, 2000).min(total - at);
            let inter: Vec<f32> = (0..n).flat_map(|i| [x[0][at + i], x[1][at + i]]).collect();
            let t = CallbackTime { now_ns: ns(at as u64), device_delay_ns: 0 };
            capture.capture(&inter, t);
            let mut out = vec![0.0f32; 2 * n];
            playback.play(&mut out, t);
            for i in 0..n {
                y[0].push(out[2 * i]);
                y[1].push(out[2 * i + 1]);
            }
            at += n;
        }
        let stats = handle.stats();
        // Late callbacks are wall-clock measurements (a busy test machine preempts): not judged here.
        assert_eq!(stats.ring_underruns + stats.ring_overflows, 0, "{side:?}: {stats:?}");
        assert_eq!(stats.drift_corrections(), 0);
        for c in 0..2 {
            let want = naive::convolve(&x[c], &taps[c]);
            let want: Vec<f64> = (0..total).map(|n| if n >= latency { want[n - latency] } else { 0.0 }).collect();
            ErrorBound::measure(&y[c], &want).assert_design_bound(&format!("{side:?} channel {c}"));
        }
    }
}

/// Device formats other than f32, and a mono device feeding a stereo engine whose outputs land on
/// channels 2 and 1 of a 3-channel device.
#[test]
fn integer_formats_and_channel_maps() {
    let e = engine(&[vec![1.0], vec![0.5]], Routing::Stereo, 32);
    let mut opts = options(EngineSide::Capture, 1, 3);
    opts.map = Some(partita_device::ChannelMap::from_lists(None, Some(&[2, 1]), 1, 3, 2, 2).unwrap());
    let Bridge { mut capture, mut playback, .. } = Bridge::new(e, &opts).unwrap();
    let input: Vec<i16> = (0..256).map(|i| ((i as i16) - 128) * 100).collect();
    let mut out = vec![0i32; 3 * 256];
    capture.capture(&input, CallbackTime::default());
    playback.play(&mut out, CallbackTime::default());
    for i in 32..256 {
        let x = f64::from(input[i - 32]) / 32768.0;
        let left = out[3 * i + 2] as f64 / 2147483648.0;
        let right = out[3 * i + 1] as f64 / 2147483648.0;
        assert!((left - x).abs() < 1e-6 && (right - 0.5 * x).abs() < 1e-6, "frame {i}");
        assert_eq!(out[3 * i], 0);
    }
}

/// Producer and consumer at rates skewed by 0.1% (both ways), with callback jitter and different
/// periods: frame slips happen at about the drift rate, resampling settles on the rate difference
/// without a slip, and either way the ring neither overflows nor runs dry.
#[test]
fn drift_between_skewed_clocks_is_corrected() {
    let cases = [(1.001, 64usize, 64usize), (0.999, 64, 256), (1.001, 256, 64)];
    for ((skew, in_frames, out_frames), mode) in
        cases.into_iter().flat_map(|c| [(c, DriftMode::FrameSlip), (c, DriftMode::Resample)])
    {
        let e = engine(&[vec![1.0]], Routing::Mono, 64);
        let mut opts = options(EngineSide::Capture, 1, 1);
        // The margin separate devices need: the smaller period (the level's sawtooth) plus the
        // drift controller's deadband and smoothing lag.
        opts.margin_frames = in_frames.min(out_frames) + 32;
        opts.drift = DriftOptions { mode, ..DriftOptions::default() };
        let Bridge { mut capture, mut playback, handle } = Bridge::new(e, &opts).unwrap();
        let seconds = 20.0;
        let in_period = in_frames as f64 / (f64::from(RATE) * skew);
        let out_period = out_frames as f64 / f64::from(RATE);
        let mut jitter = Noise::new(3);
        let (mut t_in, mut t_out) = (0.0f64, 0.3e-3);
        let input = vec![0.25f32; in_frames];
        let mut out = vec![0.0f32; out_frames];
        // The resampler's correction over the last 5 s.
        let (mut ppm_sum, mut ppm_count) = (0.0, 0);
        while t_in.min(t_out) < seconds {
            // Up to 100 us of scheduling jitter on every wake-up.
            let j = 100e-6 * jitter.unit();
            if t_in <= t_out {
                capture.capture(&input, CallbackTime { now_ns: ((t_in + j) * 1e9) as u64, device_delay_ns: 0 });
                t_in += in_period;
            } else {
                playback.play(&mut out, CallbackTime { now_ns: ((t_out + j) * 1e9) as u64, device_delay_ns: 0 });
                t_out += out_period;
                if t_out > seconds - 5.0 {
                    ppm_sum += handle.stats().drift_ppm;
                    ppm_count += 1;
                }
            }
        }
        let s = handle.stats();
        if mode == DriftMode::FrameSlip {
            let drift_frames = (skew - 1.0).abs() * f64::from(RATE) * seconds;
            let (wanted, unwanted) =
                if skew > 1.0 { (s.drift_slips, s.drift_repeats) } else { (s.drift_repeats, s.drift_slips) };
            assert!(
                wanted as f64 > 0.8 * drift_frames && (wanted as f64) < 1.05 * drift_frames,
                "skew {skew}, periods {in_frames}/{out_frames}: {wanted} corrections for {drift_frames} frames of drift"
            );
            assert_eq!(unwanted, 0, "skew {skew}: corrections the wrong way");
        } else {
            assert_eq!(s.drift_corrections(), 0, "skew {skew}: resampling slipped");
            let (want, mean) = ((skew - 1.0) * 1e6, ppm_sum / f64::from(ppm_count));
            assert!(
                (mean - want).abs() < 5.0,
                "skew {skew}, periods {in_frames}/{out_frames}: {mean:.1} ppm on average for {want}"
            );
        }
        assert_eq!(s.ring_overflows, 0, "skew {skew}: {s:?}");
        assert_eq!(s.ring_underruns, 0, "skew {skew}: {s:?}");
        assert_eq!(s.reprimes, 0, "skew {skew}: {s:?}");
    }
}

/// One clock, no skew: never a correction, even with different periods and jitter.
#[test]
fn one_clock_needs_no_correction() {
    let e = engine(&[vec![1.0]], Routing::Mono, 64);
    let mut opts = options(EngineSide::Playback, 1, 1);
    opts.margin_frames = 64;
    let Bridge { mut capture, mut playback, handle } = Bridge::new(e, &opts).unwrap();
    let mut jitter = Noise::new(4);
    let input = vec![0.1f32; 128];
    let mut out = vec![0.0f32; 192];
    let (mut t_in, mut t_out) = (0.0f64, 1e-3);
    while t_in < 20.0 {
        let j = 100e-6 * jitter.unit();
        if t_in <= t_out {
            capture.capture(&input, CallbackTime { now_ns: ((t_in + j) * 1e9) as u64, device_delay_ns: 0 });
            t_in += 128.0 / f64::from(RATE);
        } else {
            playback.play(&mut out, CallbackTime { now_ns: ((t_out + j) * 1e9) as u64, device_delay_ns: 0 });
            t_out += 192.0 / f64::from(RATE);
        }
    }
    let s = handle.stats();
    assert_eq!((s.drift_corrections(), s.ring_underruns + s.ring_overflows, s.resyncs), (0, 0, 0), "{s:?}");
    // The resampler (the default) never engaged: no rate change, no added delay.
    assert_eq!((s.drift_ppm, s.resampler_latency_ms), (0.0, 0.0), "{s:?}");
}

/// The counters can fail: a callback stalled for three periods is counted as an overrun.
#[test]
fn a_stalled_callback_is_an_overrun() {
    let e = engine(&[vec![1.0]], Routing::Mono, 64);
    let Bridge { mut capture, mut playback, handle } = Bridge::new(e, &options(EngineSide::Capture, 1, 1)).unwrap();
    let input = vec![0.0f32; 64];
    let mut out = vec![0.0f32; 64];
    for k in 0..10u64 {
        capture.capture(&input, CallbackTime { now_ns: ns(64 * k), device_delay_ns: 0 });
        playback.play(&mut out, CallbackTime { now_ns: ns(64 * k), device_delay_ns: 0 });
    }
    let before = handle.stats().late_callbacks;
    handle.stall_next_callback(std::time::Duration::from_nanos(3 * ns(64)));
    capture.capture(&input, CallbackTime { now_ns: ns(640), device_delay_ns: 0 });
    playback.play(&mut out, CallbackTime { now_ns: ns(640), device_delay_ns: 0 });
    let s = handle.stats();
    assert!(s.late_callbacks > before, "{s:?}");
    assert_eq!(s.overruns(), s.late_callbacks);
    assert!(s.max_callback_pct > 290.0, "{s:?}");
}

/// A NaN reaching the safety stage and a full-scale feedback-like tone both end in a mute, counted;
/// non-finite input is replaced and counted without muting; unmute brings the sound back.
#[test]
fn safety_stage_mutes_on_nan_and_on_feedback() {
    for side in [EngineSide::Capture, EngineSide::Playback] {
        let e = engine(&[vec![1.0]], Routing::Mono, 64);
        let Bridge { mut capture, mut playback, handle } = Bridge::new(e, &options(side, 1, 1)).unwrap();
        let mut t = 0u64;
        let mut step = |capture: &mut partita_device::CaptureSide,
                        playback: &mut partita_device::PlaybackSide,
                        x: &[f32]|
         -> Vec<f32> {
            let time = CallbackTime { now_ns: ns(t), device_delay_ns: 0 };
            t += x.len() as u64;
            capture.capture(x, time);
            let mut out = vec![0.0f32; x.len()];
            playback.play(&mut out, time);
            out
        };
        let quiet = vec![0.1f32; 256];
        // Non-finite input: replaced by 0 and counted, no mute.
        let mut bad = quiet.clone();
        bad[3] = f32::NAN;
        bad[7] = f32::NEG_INFINITY;
        step(&mut capture, &mut playback, &bad);
        assert_eq!(handle.stats().nonfinite_inputs, 2);
        assert_eq!(handle.stats().muted, None);
        // A NaN at the safety stage.
        handle.inject_nonfinite_output();
        step(&mut capture, &mut playback, &quiet);
        let s = handle.stats();
        assert_eq!((s.mutes, s.muted, s.nonfinite_outputs), (1, Some(MuteReason::NonFinite), 1), "{side:?}");
        let out = step(&mut capture, &mut playback, &quiet);
        assert!(out.iter().all(|&v| v == 0.0));
        handle.unmute();
        // The engine's spread reset: 10 ms fade-out, a slice of state per block, 10 ms fade-in.
        for _ in 0..12 {
            step(&mut capture, &mut playback, &quiet);
        }
        let out = step(&mut capture, &mut playback, &quiet);
        assert!((out[255] - 0.1).abs() < 1e-6, "{side:?}: {}", out[255]);
        assert_eq!(handle.stats().muted, None);
        // Feedback-like: a full-scale 1 kHz tone for a second.
        let tone: Vec<f32> =
            (0..48_000).map(|i| (2.0 * std::f32::consts::PI * 1000.0 * i as f32 / 48_000.0).sin()).collect();
        let mut last = Vec::new();
        for chunk in tone.chunks(256) {
            last = step(&mut capture, &mut playback, chunk);
        }
        let s = handle.stats();
        assert_eq!((s.mutes, s.muted), (2, Some(MuteReason::Runaway)), "{side:?}");
        assert!(last.iter().all(|&v| v == 0.0));
    }
}

/// Wet, dry and bypass sent through the engine's `Control` (the bridge has no mixer of its own): the dry
/// path is aligned with the engine's latency, bypass plays the dry signal only, as the engine's own mix
/// tests say (crates/partita-core/tests/control.rs).
#[test]
fn wet_dry_and_bypass() {
    let ir = ImpulseResponse::new(vec![vec![0.0, 0.0, 0.5]], RATE).unwrap();
    let plan = Plan::uniform(16, ir.frames()).unwrap();
    let start = Mix { wet: 1.0, dry: 1.0, ..Mix::default() };
    let mut e =
        Engine::with_options(&plan, &ir, Routing::Mono, EngineOptions { mix: start, ..EngineOptions::new(1024) })
            .unwrap();
    let mut control = e.control().unwrap();
    let opts = options(EngineSide::Capture, 1, 1);
    let Bridge { mut capture, mut playback, handle: _handle } = Bridge::new(e, &opts).unwrap();
    let mut x = vec![0.0f32; 2048];
    x[1000] = 0.5;
    let mut y = vec![0.0f32; 2048];
    for (k, (xc, yc)) in x.chunks(64).zip(y.chunks_mut(64)).enumerate() {
        let t = CallbackTime { now_ns: ns(64 * k as u64), device_delay_ns: 0 };
        capture.capture(xc, t);
        playback.play(yc, t);
    }
    // Dry at 1000 + 16 (latency), wet 2 frames later at half gain.
    assert!((y[1016] - 0.5).abs() < 1e-6 && (y[1018] - 0.25).abs() < 1e-6, "{:?}", &y[1014..1020]);
    control.send(Command::Bypass(true)).unwrap();
    let mut x2 = vec![0.0f32; 4096];
    x2[3000] = 0.5;
    let mut y2 = vec![0.0f32; 4096];
    for (k, (xc, yc)) in x2.chunks(64).zip(y2.chunks_mut(64)).enumerate() {
        let t = CallbackTime { now_ns: ns(2048 + 64 * k as u64), device_delay_ns: 0 };
        capture.capture(xc, t);
        playback.play(yc, t);
    }
    assert!((y2[3016] - 0.5).abs() < 1e-6 && y2[3018].abs() < 1e-6, "{:?}", &y2[3014..3020]);
    // Out of bypass, wet 0.5 and dry 0.25 through Control: both ramp over 10 ms (480 frames), long done
    // by the impulse at 3000.
    for command in [Command::Bypass(false), Command::WetGain(0.5), Command::DryGain(0.25)] {
        control.send(command).unwrap();
    }
    let mut y3 = vec![0.0f32; 4096];
    for (k, (xc, yc)) in x2.chunks(64).zip(y3.chunks_mut(64)).enumerate() {
        let t = CallbackTime { now_ns: ns(6144 + 64 * k as u64), device_delay_ns: 0 };
        capture.capture(xc, t);
        playback.play(yc, t);
    }
    assert!((y3[3016] - 0.125).abs() < 1e-6 && (y3[3018] - 0.125).abs() < 1e-6, "{:?}", &y3[3014..3020]);
}

/// Unmuting clears the engine with its spread reset, not with `Engine::reset()` inside the callback: the
/// control side sees the reset's `Applied` event (sent when the wet signal starts fading back in), more
/// than the 10 ms fade-out after the unmute, and the sound comes back.
#[test]
fn unmute_uses_the_engines_spread_reset() {
    use partita_core::Event;
    let ir = ImpulseResponse::new(vec![vec![1.0]], RATE).unwrap();
    let mut e = Engine::new(&Plan::uniform(64, 1).unwrap(), &ir, Routing::Mono, 1024).unwrap();
    let mut control = e.control().unwrap();
    let Bridge { mut capture, mut playback, handle } = Bridge::new(e, &options(EngineSide::Capture, 1, 1)).unwrap();
    let quiet = vec![0.1f32; 256];
    let mut t = 0u64;
    let mut step = |capture: &mut partita_device::CaptureSide, playback: &mut partita_device::PlaybackSide| {
        let time = CallbackTime { now_ns: ns(t), device_delay_ns: 0 };
        t += 256;
        capture.capture(&quiet, time);
        let mut out = vec![0.0f32; 256];
        playback.play(&mut out, time);
        out
    };
    step(&mut capture, &mut playback);
    handle.inject_nonfinite_output();
    step(&mut capture, &mut playback);
    assert_eq!(handle.stats().muted, Some(MuteReason::NonFinite));
    let unmuted_at = 2 * 256;
    handle.unmute();
    let mut last = Vec::new();
    for _ in 0..12 {
        last = step(&mut capture, &mut playback);
    }
    let resets: Vec<u64> = control
        .poll()
        .into_iter()
        .filter_map(|ev| match ev {
            Event::Applied { command: Command::Reset, frame } => Some(frame),
            _ => None,
        })
        .collect();
    assert_eq!(resets.len(), 1, "one spread reset, reported to the control side");
    assert!(resets[0] >= unmuted_at + 480, "the reset ends after its 10 ms fade-out: frame {}", resets[0]);
    assert!((last[255] - 0.1).abs() < 1e-6, "the sound is back: {}", last[255]);
    assert_eq!(handle.stats().muted, None);
}

/// A device removed mid-run: cpal reports `DeviceNotAvailable` through the error callback, which the
/// bridge turns into a fault the control side sees (and `monitor` ends the run with, naming it). Xruns
/// are counted as the host's, apart from our overruns.
#[test]
fn device_removal_becomes_a_named_fault_and_xruns_stay_the_hosts() {
    let e = engine(&[vec![1.0]], Routing::Mono, 32);
    let Bridge { handle, .. } = Bridge::new(e, &options(EngineSide::Capture, 1, 1)).unwrap();
    assert_eq!(handle.fault(), None);
    handle.note_error(cpal::ErrorKind::Xrun, partita_device::Direction::Output);
    assert_eq!((handle.stats().host_xruns, handle.stats().overruns()), (1, 0));
    assert_eq!(handle.fault(), None, "an xrun is not a fault");
    handle.note_error(cpal::ErrorKind::DeviceNotAvailable, partita_device::Direction::Input);
    let fault = handle.fault().expect("a fault");
    assert_eq!(fault, partita_device::Fault::DeviceLost(partita_device::Direction::Input));
    assert!(fault.to_string().contains("input device is no longer available"), "{fault}");
    // The first fault is kept: a later one (the output side failing too) does not overwrite it.
    handle.note_error(cpal::ErrorKind::DeviceNotAvailable, partita_device::Direction::Output);
    assert_eq!(handle.fault(), Some(fault));
}
