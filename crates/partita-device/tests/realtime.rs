//! Real-time safety of the callback bodies: capture and render (format conversion, channel mapping,
//! ring push/pop, priming, drift correction, the engine in chunks with its mix, safety stage, meters,
//! timing) run under the allocation-trapping global allocator, on both engine sides, in several formats,
//! with period changes, corrections, mutes, unmute and bypass (through the engine's `Control`) along the
//! way; with the default planner's plan (all in the callback for this short IR) and an automatic plan that
//! takes levels out of the callback.

use partita_core::synth::{decaying_noise, Noise};
use partita_core::{Command, Control, CostModel, Engine, ImpulseResponse, Routing, Schedule};
use partita_device::{Bridge, BridgeOptions, CallbackTime, EngineSide, SafetyOptions};
use partita_testkit::{armed, TrapAllocator};

#[global_allocator]
static ALLOC: TrapAllocator = TrapAllocator;

/// The default planner's plan, or with `off_callback` the automatic schedule costed for a machine 100
/// times slower than the flop model's (so it must move levels to sliced or workers).
fn bridge(side: EngineSide, off_callback: bool) -> (Bridge, Control) {
    let taps: Vec<Vec<f32>> = (0..2).map(|c| decaying_noise(2000, 800.0, c)).collect();
    let ir = ImpulseResponse::new(taps, 48_000).unwrap();
    let planner = partita_core::Planner::new().block_frames(32);
    let planner = if off_callback { planner.cost_model(CostModel::Flops { flops_per_second: 24e7 }) } else { planner };
    let plan = planner.plan(ir.frames()).unwrap();
    assert_eq!(off_callback, plan.levels.iter().any(|l| l.schedule != Schedule::Sync), "{plan:?}");
    let mut engine = Engine::new(&plan, &ir, Routing::Stereo, 512).unwrap();
    let control = engine.control().unwrap();
    let options = BridgeOptions {
        side,
        margin_frames: 40,
        safety: SafetyOptions { fade_in_ms: 5.0, runaway_ms: 20.0, ..SafetyOptions::default() },
        ..BridgeOptions::new(48_000, 2, 2)
    };
    (Bridge::new(engine, &options).unwrap(), control)
}

#[test]
fn callbacks_never_touch_the_heap() {
    for (side, off_callback) in
        [(EngineSide::Capture, false), (EngineSide::Playback, false), (EngineSide::Capture, true)]
    {
        let (Bridge { mut capture, mut playback, handle }, mut control) = bridge(side, off_callback);
        let mut noise = Noise::new(1);
        // Everything the calls use is allocated up front.
        let max = 1500;
        let in_f32: Vec<f32> = noise.vec(2 * max).iter().map(|v| 0.2 * v).collect();
        let mut in_nan = in_f32.clone();
        in_nan[11] = f32::NAN;
        let in_i16: Vec<i16> = in_f32.iter().map(|v| (v * 32767.0) as i16).collect();
        let loud: Vec<f32> = (0..2 * max).map(|i| if (i / 2) % 40 < 20 { 1.0 } else { -1.0 }).collect();
        let mut out_f32 = vec![0.0f32; 2 * max];
        let mut out_i24 = vec![cpal::I24::new_unchecked(0); 2 * max];
        let mut sizes = Noise::new(2);
        let plan: Vec<(usize, usize, u64)> =
            (0..600).map(|_| (sizes.range(1, max), sizes.range(0, 9), sizes.next_u64())).collect();
        // Warm-up outside the trap: first-use paths (thread-locals of the CPU clock, lazily
        // initialised statics) are not the steady state.
        capture.capture(&in_f32[..128], CallbackTime::default());
        playback.play(&mut out_f32[..128], CallbackTime::default());
        let ((), heap_ops) = armed(|| {
            let mut now = 0u64;
            for (k, &(n, kind, r)) in plan.iter().enumerate() {
                let t = CallbackTime { now_ns: now, device_delay_ns: 1000 };
                now += n as u64 * 20_833 + (r % 50_000);
                match kind {
                    0 => capture.capture(&in_i16[..2 * n], t),
                    1 => capture.capture(&in_nan[..2 * n], t),
                    2 if k % 50 == 0 => capture.capture(&loud[..2 * n], t),
                    _ => capture.capture(&in_f32[..2 * n], t),
                }
                // Render sizes differ from capture sizes now and then: priming, underruns, drift.
                let m = if r % 7 == 0 { (n / 2).max(1) } else { n };
                if kind == 3 {
                    playback.play(&mut out_i24[..2 * m], t);
                } else {
                    playback.play(&mut out_f32[..2 * m], t);
                }
                match k % 97 {
                    10 => handle.unmute(),
                    20 => control.send(Command::Bypass(true)).unwrap(),
                    30 => control.send(Command::Bypass(false)).unwrap(),
                    40 => handle.inject_nonfinite_output(),
                    _ => {}
                }
            }
        });
        assert_eq!(
            heap_ops, 0,
            "{side:?} (levels off the callback: {off_callback}): the callbacks allocated or freed {heap_ops} times"
        );
        let s = handle.stats();
        assert!(s.mutes > 0 && s.nonfinite_inputs > 0, "the run should exercise the mute paths: {s:?}");
    }
}

/// The entry points the cpal callbacks call, with cpal's format-tagged buffers (the format dispatch).
#[test]
fn format_dispatch_never_touches_the_heap() {
    let (Bridge { mut capture, mut playback, handle }, _control) = bridge(EngineSide::Capture, false);
    let mut input: Vec<i16> = (0..512).map(|i| (i * 37 % 2000) as i16).collect();
    let mut output = vec![0u16; 512];
    // SAFETY: both pointers come from live Vecs of the stated element type and length, which outlive
    // the `Data` views (used only within this function).
    let in_data = unsafe { cpal::Data::from_parts(input.as_mut_ptr().cast(), input.len(), cpal::SampleFormat::I16) };
    // SAFETY: as above.
    let mut out_data =
        unsafe { cpal::Data::from_parts(output.as_mut_ptr().cast(), output.len(), cpal::SampleFormat::U16) };
    capture.capture_data(&in_data, CallbackTime::default());
    playback.play_data(&mut out_data, CallbackTime::default());
    let ((), heap_ops) = armed(|| {
        for k in 0..200u64 {
            let t = CallbackTime { now_ns: k * 5_333_333, device_delay_ns: 0 };
            capture.capture_data(&in_data, t);
            playback.play_data(&mut out_data, t);
        }
    });
    assert_eq!(heap_ops, 0, "the format dispatch allocated or freed {heap_ops} times");
    assert!(handle.stats().output_callbacks > 200);
}

#[test]
fn the_trap_catches_an_allocation() {
    let (v, heap_ops) = armed(|| vec![1u8; 100]);
    assert_eq!(v.len(), 100);
    assert!(heap_ops >= 1);
}
