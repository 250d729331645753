//! Two-thread stress of the control side: one thread processes (allocation trap armed on it), another
//! swaps IRs more than a thousand times and changes the wet gain. The output must equal the crossfade
//! of two oracle outputs times the ramped gain, at the frames the engine reports, and every old IR must
//! come back to the control thread (the audio thread never frees: its trap count stays 0).

mod support;

use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::sync::Arc;

use partita_core::synth::Noise;
use partita_core::{Command, Engine, EngineOptions, Event, Lateness, Routing, Schedule, SwapReport};
use partita_testkit::{armed, ErrorBound, TrapAllocator};
use support::*;

#[global_allocator]
static ALLOC: TrapAllocator = TrapAllocator;

/// Frames of a parameter ramp: control::PARAM_RAMP_SECONDS at 48 kHz.
const RAMP: usize = 480;

#[test]
fn stress_thousands_of_swaps_from_another_thread_match_the_oracle_crossfade() {
    for (schedule, zero) in [(Schedule::Sliced, true), (Schedule::Workers, false)] {
        stress(schedule, zero);
    }
}

fn stress(schedule: Schedule, zero: bool) {
    let frames = 300;
    let plan = scheduled_plan(schedule, zero, frames, 16);
    let a = random_ir(2, frames, 11);
    let b = random_ir(2, frames, 12);
    let options = EngineOptions { lateness: Lateness::Wait, ..EngineOptions::new(64) };
    let mut engine = Engine::with_options(&plan, &a, Routing::Stereo, options).unwrap();
    let latency = engine.latency_frames();
    let mut control = engine.control().unwrap();
    let spare = control.prepare(&b).unwrap();
    let input_frames = 500_000;
    let input = random_input(2, input_frames, 13);
    let total = input_frames + frames + latency;
    let sizes: Vec<usize> = {
        let mut n = Noise::new(14);
        let mut v = Vec::new();
        let mut at = 0;
        while at < total {
            let s = n.range(1, 64).min(total - at);
            v.push(s);
            at += s;
        }
        v
    };
    let padded = padded(&input, total);
    let mut output = vec![vec![0.0f32; total]; 2];

    // Lock-step: control loop l waits for call l to have been made, call c for loop c to have run, so
    // neither thread runs far ahead of the other.
    let ticks = Arc::new(AtomicU64::new(0));
    let calls = Arc::new(AtomicU64::new(0));
    let done = Arc::new(AtomicBool::new(false));
    let (ticks_c, calls_c, done_c) = (Arc::clone(&ticks), Arc::clone(&calls), Arc::clone(&done));
    // The control thread: keep one spare IR, swap it in whenever the last swap has come back, and
    // toggle the wet gain now and then. Collects every event.
    let controller = std::thread::spawn(move || {
        let mut spare = Some(spare);
        let mut rng = Noise::new(15);
        let mut reports: Vec<SwapReport> = Vec::new();
        let mut gains: Vec<(u64, f64)> = Vec::new();
        let mut loops = 0u64;
        let mut wet = 1.0f32;
        while !done_c.load(Ordering::Acquire) {
            while calls_c.load(Ordering::Acquire) < loops && !done_c.load(Ordering::Acquire) {
                std::hint::spin_loop();
            }
            for ev in control.poll() {
                match ev {
                    Event::Retired { ir, report } => {
                        reports.push(report);
                        spare = Some(ir);
                    }
                    Event::Applied { command: Command::WetGain(g), frame } => gains.push((frame, f64::from(g))),
                    Event::Applied { command, .. } => panic!("unexpected {command:?}"),
                    other => panic!("unexpected event {other:?}"),
                }
            }
            if let Some(ir) = spare.take() {
                let fade = rng.range(0, 120);
                if let Err(refused) = control.swap(ir, fade) {
                    spare = Some(refused.0);
                }
            }
            if loops.is_multiple_of(97) {
                wet = if wet == 1.0 { 0.5 } else { 1.0 };
                control.send(Command::WetGain(wet)).unwrap();
            }
            loops += 1;
            ticks_c.store(loops, Ordering::Release);
        }
        for ev in control.poll() {
            match ev {
                Event::Retired { report, .. } => reports.push(report),
                Event::Applied { command: Command::WetGain(g), frame } => gains.push((frame, f64::from(g))),
                Event::Applied { .. } => {}
                other => panic!("unexpected event {other:?}"),
            }
        }
        let status = control.status();
        (reports, gains, status)
    });

    // The audio thread: this test's thread, trap armed. The wait is bounded so that a failed control
    // thread cannot hang the test (its panic is reported at join).
    let ((), heap_ops) = armed(|| {
        let mut at = 0;
        for (c, &n) in sizes.iter().enumerate() {
            let mut spins = 0u64;
            while ticks.load(Ordering::Acquire) < c as u64 && spins < 200_000_000 {
                std::hint::spin_loop();
                spins += 1;
            }
            if spins >= 200_000_000 {
                break;
            }
            let ins: [&[f32]; 2] = [&padded[0][at..at + n], &padded[1][at..at + n]];
            let (l, r) = output.split_at_mut(1);
            engine.process(&ins, &mut [&mut l[0][at..at + n], &mut r[0][at..at + n]]).unwrap();
            at += n;
            calls.store(c as u64 + 1, Ordering::Release);
        }
    });
    done.store(true, Ordering::Release);
    let (mut reports, gains, status) = controller.join().unwrap();
    assert_eq!(heap_ops, 0, "{schedule:?}: the audio thread touched the heap (an IR freed there?)");
    assert!(reports.len() >= 1000, "{schedule:?}: only {} swaps", reports.len());
    assert_eq!(status.events_dropped, 0);
    // Every completed swap handed its old IR back, except possibly the last one still retiring.
    assert!(status.swaps_completed as usize - reports.len() <= 1, "{status:?} vs {}", reports.len());
    drop(engine);
    reports.sort_by_key(|r| r.picked_up);
    let ya = oracle(&input, &a, Routing::Stereo, latency, total);
    let yb = oracle(&input, &b, Routing::Stereo, latency, total);
    let gain = ramped_gain(1.0, &gains, RAMP, total);
    // A swap still in flight at the end (picked up, its old IR not yet back) is not in the reports:
    // check up to where its crossfade starts.
    let last = reports.last().expect("swaps happened");
    let check_to =
        if status.fade_start == Some(last.fade_start) { total } else { status.fade_start.unwrap() as usize }.min(total);
    for o in 0..2 {
        let mix = swapped_output(&[&ya[o], &yb[o]], 0, &reports, total);
        let want: Vec<f64> = mix.iter().zip(&gain).map(|(m, g)| m * g).take(check_to).collect();
        ErrorBound::measure(&output[o][..check_to], &want)
            .assert_design_bound(&format!("{schedule:?} zero {zero} output {o}, {} swaps", reports.len()));
    }
}
