//! The split-device measurement's callback bodies ([`SignalPlayer::play`], [`Recorder::record`]) driven
//! without a device: callbacks of different sizes on each side, the input in i16 and the output in f32
//! (cpal's conversions), a simulated loop that hands the played channel to the input `DELAY` frames
//! later. Checked: what is recorded and from when, the ceiling, the stop fade, non-finite input, the
//! start offset, and that no callback touches the heap (the allocation trap is the binary's allocator).

use partita_device::{CallbackTime, SplitParts, STOP_FADE_MS};
use partita_testkit::{armed, TrapAllocator};

#[global_allocator]
static ALLOC: TrapAllocator = TrapAllocator;

const RATE: u32 = 48_000;
const DELAY: usize = 300;
/// Output: 2 channels, the signal on the second. Input: 3 channels, the loop on the third.
const OUT_CH: (usize, usize) = (2, 1);
const IN_CH: (usize, usize) = (3, 2);

fn ns(frames: usize) -> u64 {
    (frames as u64 * 1_000_000_000) / u64::from(RATE)
}

/// Runs the loop for `out_calls` output callbacks of `out_n` frames, each followed by as many input
/// callbacks of `in_n` frames as the played frames allow; `stop_after` output callbacks, a stop request.
/// Returns the played channel as the loop carried it, the heap operations of the callbacks, and the time
/// from the first output callback to the first input callback after it, ns.
fn run(
    parts: SplitParts,
    out_n: usize,
    in_n: usize,
    out_calls: usize,
    stop_after: Option<usize>,
) -> (Vec<f32>, u64, i64) {
    let SplitParts { mut player, mut recorder, handle } = parts;
    // Every buffer the loop uses, allocated before the trap.
    let mut out = vec![0.0f32; out_n * OUT_CH.0];
    let mut inp = vec![0i16; in_n * IN_CH.0];
    let mut line = vec![0.0f32; DELAY + out_n * out_calls + in_n];
    let mut played = vec![0.0f32; out_n * out_calls];
    let (mut written, mut read) = (DELAY, 0usize);
    let mut first_input_ns = None;
    let ((), heap_ops) = armed(|| {
        // The input runs two callbacks before the output starts: they record nothing.
        for k in 0..2 {
            recorder.record(&inp, CallbackTime { now_ns: ns(k * in_n), device_delay_ns: 0 });
        }
        for call in 0..out_calls {
            if stop_after == Some(call) {
                handle.request_stop();
            }
            let t0 = 2 * in_n + call * out_n;
            player.play(&mut out, CallbackTime { now_ns: ns(t0), device_delay_ns: 0 });
            for (i, frame) in out.chunks_exact(OUT_CH.0).enumerate() {
                assert_eq!(frame[0], 0.0, "the other output channel stays silent");
                line[written + i] = frame[OUT_CH.1];
                played[call * out_n + i] = frame[OUT_CH.1];
            }
            written += out_n;
            while read + in_n <= written {
                for (i, frame) in inp.chunks_exact_mut(IN_CH.0).enumerate() {
                    frame[0] = 1000;
                    frame[1] = -1000;
                    frame[IN_CH.1] = (line[read + i] * 32768.0).round().clamp(-32768.0, 32767.0) as i16;
                }
                let now_ns = ns(t0 + read);
                first_input_ns.get_or_insert(now_ns);
                recorder.record(&inp, CallbackTime { now_ns, device_delay_ns: 0 });
                read += in_n;
            }
        }
    });
    drop(line);
    (played, heap_ops, first_input_ns.unwrap() as i64 - ns(2 * in_n) as i64)
}

fn ramp(frames: usize) -> Vec<f32> {
    (0..frames).map(|n| 0.5 * ((n % 200) as f32 / 100.0 - 1.0)).collect()
}

#[test]
fn the_recording_follows_the_loop_from_the_first_input_after_the_output_started() {
    for (out_n, in_n) in [(256, 160), (64, 1024), (441, 441)] {
        let signal = ramp(20_000);
        let parts = SplitParts::new(signal.clone(), 0.4, 24_000, RATE, OUT_CH, IN_CH);
        let handle = parts.handle.clone();
        let calls = 24_000usize.div_ceil(out_n) + 2048 / out_n + 4;
        let (played, heap_ops, offset_ns) = run(parts, out_n, in_n, calls, None);
        assert_eq!(heap_ops, 0, "{out_n}/{in_n}: heap operations in the callbacks");
        assert!(handle.is_done(), "{out_n}/{in_n}: the recording is complete");
        // Played: the signal clamped at the ceiling, then silence.
        for (n, &v) in played.iter().enumerate() {
            let want = signal.get(n).copied().unwrap_or(0.0).clamp(-0.4, 0.4);
            assert_eq!(v, want, "{out_n}/{in_n}: played frame {n}");
        }
        // Recorded: from the first input callback after the output started, the loop's channel at i16
        // resolution; the played signal appears DELAY frames into the loop.
        let rec = handle.recording();
        assert_eq!(rec.len(), 24_000);
        for (n, &v) in rec.iter().enumerate() {
            let want = n.checked_sub(DELAY).map_or(0.0, |k| played[k]);
            assert!((v - want).abs() <= 0.5 / 32768.0 + 1e-7, "{out_n}/{in_n}: recorded frame {n}: {v} vs {want}");
        }
        // The offset is the time from the output's first callback to the first recorded one.
        assert_eq!(handle.start_offset_ns(), Some(offset_ns), "{out_n}/{in_n}");
        let stats = handle.stats();
        assert_eq!(stats.nonfinite_inputs, 0);
        assert!(stats.input_callbacks >= 2 && stats.output_callbacks as usize == calls, "{stats:?}");
    }
}

#[test]
fn a_stop_fades_out_over_twenty_ms_and_ends_the_recording() {
    let out_n = 128;
    let signal = vec![0.3f32; 48_000];
    let parts = SplitParts::new(signal, 0.25, 60_000, RATE, OUT_CH, IN_CH);
    let handle = parts.handle.clone();
    let (played, heap_ops, _) = run(parts, out_n, 256, 100, Some(40));
    assert_eq!(heap_ops, 0);
    let at = handle.stopped_at_frames().expect("a stop began") as usize;
    assert_eq!(at, 40 * out_n);
    let fade = (STOP_FADE_MS * 1e-3 * f64::from(RATE)) as usize;
    assert_eq!(played[at - 1], 0.25, "the ceiling holds before the stop");
    // A raised cosine from the ceiling to silence over 960 frames, never rising.
    for k in 0..fade {
        let want = 0.25 * (0.5 + 0.5 * (std::f64::consts::PI * k as f64 / fade as f64).cos());
        assert!((f64::from(played[at + k]) - want).abs() < 1e-6, "fade frame {k}");
    }
    assert!(played[at + fade..].iter().all(|&v| v == 0.0), "silence after the fade");
    assert!(handle.is_done(), "the recorder stops once the fade is over");
    let recorded = handle.recorded_frames() as usize;
    assert!(recorded < 60_000 && recorded >= at + fade, "{recorded}");
}

#[test]
fn non_finite_input_is_recorded_as_silence_and_counted() {
    let parts = SplitParts::new(vec![0.1; 1000], 1.0, 512, RATE, (1, 0), (1, 0));
    let SplitParts { mut player, mut recorder, handle } = parts;
    let mut out = vec![0.0f32; 256];
    player.play(&mut out, CallbackTime { now_ns: 1_000, device_delay_ns: 0 });
    let mut inp = vec![0.25f32; 256];
    inp[3] = f32::NAN;
    inp[7] = f32::INFINITY;
    let ((), heap_ops) = armed(|| recorder.record(&inp, CallbackTime { now_ns: 5_000, device_delay_ns: 0 }));
    assert_eq!(heap_ops, 0);
    let rec = handle.recording();
    assert_eq!((rec[3], rec[7], rec[8]), (0.0, 0.0, 0.25));
    assert_eq!(handle.stats().nonfinite_inputs, 2);
    assert_eq!(handle.start_offset_ns(), Some(4_000));
}
