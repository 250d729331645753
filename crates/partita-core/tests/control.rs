//! The control side: IR swaps crossfaded across every schedule, checked against the crossfade of two
//! oracle outputs (the documented raised-cosine weight, aligned at the frames the engine reports);
//! parameters against the documented linear ramps; refusals with clear errors.

mod support;

use partita_core::{
    Command, ControlError, Engine, EngineOptions, Event, FadeState, ImpulseResponse, Lateness, Level, Plan, Routing,
    Schedule, SendError, SwapReport,
};
use partita_testkit::ErrorBound;
use support::*;

/// Frames of a parameter ramp: control::PARAM_RAMP_SECONDS at 48 kHz.
const RAMP: usize = 480;

/// Plans covering `ir_frames` at block 16: uniform sync, two levels with a given schedule for the big
/// one, and zero latency with a head.
fn plans(ir_frames: usize) -> Vec<Plan> {
    let b: usize = 16;
    let two = |schedule: Schedule, zero: bool| {
        let head = if zero { b } else { 0 };
        let big = 4 * b;
        let small_parts: usize = 4;
        // Offset rule: s >= N - B + D (D = N for workers and sliced), s >= N + D at zero latency.
        let first_big = (head + small_parts * b).max(if zero { big + big } else { 2 * big - b });
        let small_parts = (first_big - head).div_ceil(b);
        let first_big = head + small_parts * b;
        Plan {
            block_frames: b,
            zero_latency: zero,
            head_frames: head,
            levels: vec![
                Level { block_frames: b, partitions: small_parts, offset_frames: head, schedule: Schedule::Sync },
                Level {
                    block_frames: big,
                    partitions: (ir_frames.saturating_sub(first_big)).div_ceil(big).max(1),
                    offset_frames: first_big,
                    schedule,
                },
            ],
            ir_frames,
        }
    };
    vec![
        Plan::uniform(b, ir_frames).unwrap(),
        two(Schedule::Sync, false),
        two(Schedule::Workers, false),
        two(Schedule::Sliced, false),
        two(Schedule::Sliced, true),
        two(Schedule::Workers, true),
    ]
}

fn engine(plan: &Plan, ir: &ImpulseResponse, routing: Routing, max_host: usize) -> Engine {
    plan.validate().unwrap_or_else(|e| panic!("test plan {:?}: {e}", plan.levels));
    let options = EngineOptions { lateness: Lateness::Wait, max_predelay_frames: 300, ..EngineOptions::new(max_host) };
    Engine::with_options(plan, ir, routing, options).unwrap()
}

/// Streams `input` (zero-padded to `total`) in random call sizes, running `at_call(k, engine)` before
/// call `k`.
fn stream_with(
    engine: &mut Engine,
    input: &[Vec<f32>],
    total: usize,
    seed: u64,
    mut at_call: impl FnMut(usize, usize),
) -> Vec<Vec<f32>> {
    let mut sizes = random_sizes(seed, engine.max_host_frames());
    let padded = padded(input, total);
    let mut out = vec![vec![0.0f32; total]; engine.outputs()];
    let (mut at, mut k) = (0, 0);
    while at < total {
        at_call(k, at);
        let n = sizes().min(total - at);
        let ins: Vec<&[f32]> = padded.iter().map(|x| &x[at..at + n]).collect();
        let mut outs: Vec<&mut [f32]> = out.iter_mut().map(|y| &mut y[at..at + n]).collect();
        engine.process(&ins, &mut outs).unwrap();
        at += n;
        k += 1;
    }
    out
}

#[test]
fn swap_output_is_the_crossfade_of_two_oracle_runs() {
    let (frames_a, frames_b) = (700, 1000);
    for (pi, plan) in plans(frames_b).into_iter().enumerate() {
        for (routing, channels) in [(Routing::Mono, 1), (Routing::TrueStereo, 4), (Routing::MonoToStereo, 2)] {
            for fade in [0usize, 1, 333] {
                let a = random_ir(channels, frames_a, 1 + pi as u64);
                let b = random_ir(channels, frames_b, 2 + pi as u64);
                let mut e = engine(&plan, &a, routing, 97);
                let mut control = e.control().unwrap();
                assert!(e.control().is_none(), "a second control handle");
                let mut prepared = Some(control.prepare(&b).unwrap());
                let input = random_input(routing.inputs(), 5000, 9);
                let total = 5000 + frames_b + e.latency_frames();
                let mut requested_at = 0;
                let got = stream_with(&mut e, &input, total, 5 + fade as u64, |k, at| {
                    if k == 13 {
                        control.swap(prepared.take().unwrap(), fade).unwrap();
                        requested_at = at;
                    }
                });
                let events = control.poll();
                let reports: Vec<SwapReport> = events
                    .iter()
                    .filter_map(|ev| match ev {
                        Event::Retired { ir, report } => {
                            assert_eq!(ir.id(), 0, "the IR the engine was built with comes back");
                            Some(*report)
                        }
                        _ => None,
                    })
                    .collect();
                let ctx = format!("plan {pi} {:?} {routing:?} fade {fade}", plan.levels);
                assert_eq!(reports.len(), 1, "{ctx}: one retired IR");
                let r = reports[0];
                assert_eq!(r.new_id, 1, "{ctx}");
                assert_eq!(r.fade_end - r.fade_start, fade as u64, "{ctx}");
                // Picked up at the first boundary after the request; the fade starts at most one
                // largest-level result span later (2 N for workers and sliced levels).
                let max_n = plan.levels.iter().map(|l| l.block_frames).max().unwrap() as u64;
                assert!(r.picked_up >= requested_at as u64, "{ctx}: {r:?}");
                assert!(r.picked_up <= (requested_at + 97 + 16 + e.latency_frames()) as u64, "{ctx}: {r:?}");
                assert!(r.fade_start >= r.picked_up && r.fade_start <= r.picked_up + 2 * max_n, "{ctx}: {r:?}");
                let status = control.status();
                assert_eq!(status.swaps_completed, 1, "{ctx}");
                assert_eq!(status.fade_state, FadeState::Steady, "{ctx}");
                assert_eq!((status.fade_start, status.fade_end), (Some(r.fade_start), Some(r.fade_end)));
                assert_eq!(status.ir_id, 1);

                let old = oracle(&input, &a, routing, e.latency_frames(), total);
                let new = oracle(&input, &b, routing, e.latency_frames(), total);
                for (o, y) in got.iter().enumerate() {
                    let want: Vec<f64> = (0..total)
                        .map(|n| {
                            let w = swap_weight(&r, n);
                            (1.0 - w) * old[o][n] + w * new[o][n]
                        })
                        .collect();
                    ErrorBound::measure(y, &want).assert_design_bound(&format!("{ctx} output {o}"));
                }
            }
        }
    }
}

#[test]
fn swaps_back_and_forth_reuse_the_retired_ir_and_a_shorter_ir_fits() {
    let plan = &plans(900)[3]; // sliced big level
    let a = random_ir(2, 900, 21);
    let b = random_ir(2, 250, 22); // shorter than the plan: its spectra past 250 taps are zero
    let mut e = engine(plan, &a, Routing::Stereo, 64);
    let mut control = e.control().unwrap();
    let mut spare = Some(control.prepare(&b).unwrap());
    let input = random_input(2, 20_000, 23);
    let total = 20_000 + 900 + e.latency_frames();
    let mut reports = Vec::new();
    let got = stream_with(&mut e, &input, total, 24, |k, _| {
        for ev in control.poll() {
            if let Event::Retired { ir, report } = ev {
                reports.push(report);
                spare = Some(ir);
            }
        }
        if k % 7 == 0 {
            if let Some(ir) = spare.take() {
                if let Err(refused) = control.swap(ir, 40) {
                    spare = Some(refused.0);
                }
            }
        }
    });
    reports.extend(control.poll().into_iter().filter_map(|ev| match ev {
        Event::Retired { report, .. } => Some(report),
        _ => None,
    }));
    assert!(reports.len() >= 20, "only {} swaps", reports.len());
    let ya = oracle(&input, &a, Routing::Stereo, e.latency_frames(), total);
    let yb = oracle(&input, &b, Routing::Stereo, e.latency_frames(), total);
    for o in 0..2 {
        let want = swapped_output(&[&ya[o], &yb[o]], 0, &reports, total);
        ErrorBound::measure(&got[o], &want).assert_design_bound(&format!("output {o}"));
    }
}

/// The documented ramp: from `from`, sample `k` after the frame a command took effect carries
/// `from + (to - from) (k + 1) / RAMP`, and `to` from sample `RAMP - 1` on.
fn ramp(from: f64, to: f64, applied: u64, n: usize) -> f64 {
    if (n as u64) < applied {
        return from;
    }
    let k = n as u64 - applied;
    from + (to - from) * ((k + 1).min(RAMP as u64) as f64 / RAMP as f64)
}

fn applied_frames(events: Vec<Event>) -> Vec<(Command, u64)> {
    events
        .into_iter()
        .filter_map(|ev| match ev {
            Event::Applied { command, frame } => Some((command, frame)),
            _ => None,
        })
        .collect()
}

#[test]
fn gains_ramp_linearly_from_the_frame_they_take_effect() {
    for plan in [plans(600)[0].clone(), plans(600)[4].clone()] {
        let ir = random_ir(1, 600, 31);
        let mut e = engine(&plan, &ir, Routing::Mono, 50);
        let mut control = e.control().unwrap();
        let input = random_input(1, 6000, 32);
        let total = 6000 + 600 + e.latency_frames();
        let got = stream_with(&mut e, &input, total, 33, |k, _| {
            if k == 20 {
                control.send(Command::WetGain(0.5)).unwrap();
                control.send(Command::DryGain(0.25)).unwrap();
                control.send(Command::OutputGainDb(-6.0)).unwrap();
            }
        });
        let applied = applied_frames(control.poll());
        assert_eq!(applied.len(), 3, "{applied:?}");
        let f = applied[0].1;
        assert!(applied.iter().all(|a| a.1 == f), "one boundary applies all three: {applied:?}");
        let wet = oracle(&input, &ir, Routing::Mono, e.latency_frames(), total);
        let lat = e.latency_frames();
        let g_out = 10f64.powf(-6.0 / 20.0);
        let want: Vec<f64> = (0..total)
            .map(|n| {
                let dry = if n >= lat && n - lat < input[0].len() { f64::from(input[0][n - lat]) } else { 0.0 };
                let out = ramp(1.0, g_out, f, n);
                out * (ramp(1.0, 0.5, f, n) * wet[0][n] + ramp(0.0, 0.25, f, n) * dry)
            })
            .collect();
        ErrorBound::measure(&got[0], &want).assert_design_bound(&format!("{:?}", plan.levels));
    }
}

/// `Engine::send` (commands from the audio thread itself, as a plugin's parameter events) applies at the
/// same block boundary and ramps exactly as `Control::send` from before the same call: the outputs are
/// bit-identical to those of the previous test's path, which is checked against the oracle there.
#[test]
fn engine_send_applies_like_control_send() {
    for plan in [plans(600)[0].clone(), plans(600)[4].clone()] {
        let ir = random_ir(2, 600, 41);
        let input = padded(&random_input(2, 6000, 42), 7000);
        let commands =
            [Command::WetGain(0.5), Command::DryGain(0.25), Command::OutputGainDb(-6.0), Command::Bypass(true)];
        let mut runs = Vec::new();
        for by_engine in [false, true] {
            let mut e = engine(&plan, &ir, Routing::Stereo, 50);
            let mut control = e.control().unwrap();
            let mut sizes = random_sizes(43, 50);
            let mut out = vec![vec![0.0f32; 7000]; 2];
            let (mut at, mut k) = (0, 0);
            while at < 7000 {
                if k == 20 || k == 60 {
                    let batch = if k == 20 { &commands[..3] } else { &commands[3..] };
                    for &c in batch {
                        if by_engine {
                            e.send(c).unwrap();
                        } else {
                            control.send(c).unwrap();
                        }
                    }
                }
                let n = sizes().min(7000 - at);
                let (l, r) = out.split_at_mut(1);
                e.process(
                    &[&input[0][at..at + n], &input[1][at..at + n]],
                    &mut [&mut l[0][at..at + n], &mut r[0][at..at + n]],
                )
                .unwrap();
                at += n;
                k += 1;
            }
            runs.push((out, applied_frames(control.poll())));
        }
        assert_eq!(runs[0].1.len(), 4, "{:?}", runs[0].1);
        assert_eq!(runs[0].1, runs[1].1, "the same boundaries apply the commands");
        assert!(runs[0].0 == runs[1].0, "{:?}: outputs differ", plan.levels);
    }
    // Refusals are those of Control::send, and the audio-side queue holds 64 commands per boundary.
    let mut e = engine(&plans(600)[0], &random_ir(6, 600, 44), Routing::Matrix { inputs: 2, outputs: 3 }, 50);
    assert!(matches!(e.send(Command::DryGain(0.5)), Err(SendError::Invalid { .. })));
    assert!(matches!(e.send(Command::WetGain(f32::NAN)), Err(SendError::Invalid { .. })));
    assert!(matches!(e.send(Command::PreDelayFrames(301)), Err(SendError::Invalid { .. })));
    for _ in 0..64 {
        e.send(Command::WetGain(0.5)).unwrap();
    }
    assert!(matches!(e.send(Command::WetGain(0.5)), Err(SendError::QueueFull(Command::WetGain(_)))));
}

#[test]
fn bypass_crossfades_to_the_aligned_input_and_back() {
    let plan = plans(800)[2].clone(); // workers
    let ir = random_ir(2, 800, 41);
    let mut e = engine(&plan, &ir, Routing::Stereo, 64);
    let mut control = e.control().unwrap();
    let input = random_input(2, 8000, 42);
    let total = 8000 + 800 + e.latency_frames();
    let got = stream_with(&mut e, &input, total, 43, |k, _| match k {
        10 => control.send(Command::Bypass(true)).unwrap(),
        60 => control.send(Command::Bypass(false)).unwrap(),
        _ => {}
    });
    let applied = applied_frames(control.poll());
    assert_eq!(applied.len(), 2);
    let (on, off) = (applied[0].1, applied[1].1);
    assert!(off > on + RAMP as u64, "the test needs the bypass to settle");
    let wet = oracle(&input, &ir, Routing::Stereo, e.latency_frames(), total);
    let lat = e.latency_frames();
    for o in 0..2 {
        let want: Vec<f64> = (0..total)
            .map(|n| {
                let x = if n >= lat && n - lat < 8000 { f64::from(input[o][n - lat]) } else { 0.0 };
                let b = if (n as u64) < off { ramp(0.0, 1.0, on, n) } else { ramp(1.0, 0.0, off, n) };
                (1.0 - b) * wet[o][n] + b * x
            })
            .collect();
        ErrorBound::measure(&got[o], &want).assert_design_bound(&format!("output {o}"));
        // Fully bypassed: the output is exactly the input, delayed by the latency.
        for n in (on as usize + RAMP)..(off as usize) {
            assert_eq!(got[o][n], input[o][n - lat], "frame {n}");
        }
    }
}

#[test]
fn predelay_crossfades_between_delays_and_is_bounded() {
    let plan = plans(500)[1].clone();
    let ir = random_ir(1, 500, 51);
    let mut e = engine(&plan, &ir, Routing::Mono, 40);
    let mut control = e.control().unwrap();
    assert_eq!(control.max_predelay_frames(), 300);
    assert!(control.send(Command::PreDelayFrames(301)).is_err(), "beyond the bound");
    let input = random_input(1, 6000, 52);
    let total = 6000 + 500 + 300 + e.latency_frames();
    let got = stream_with(&mut e, &input, total, 53, |k, _| {
        if k == 30 {
            control.send(Command::PreDelayFrames(250)).unwrap();
        }
    });
    let applied = applied_frames(control.poll());
    assert_eq!(applied, vec![(Command::PreDelayFrames(250), applied[0].1)]);
    let f = applied[0].1;
    let wet = oracle(&input, &ir, Routing::Mono, e.latency_frames(), total);
    let want: Vec<f64> = (0..total)
        .map(|n| {
            let x = ramp(0.0, 1.0, f, n);
            let late = if n >= 250 { wet[0][n - 250] } else { 0.0 };
            (1.0 - x) * wet[0][n] + x * late
        })
        .collect();
    ErrorBound::measure(&got[0], &want).assert_design_bound("pre-delay");
}

#[test]
fn reset_fades_out_clears_in_slices_and_resumes_on_fresh_input() {
    for plan in [plans(3000)[1].clone(), plans(3000)[2].clone(), plans(3000)[3].clone()] {
        let ir = random_ir(1, 3000, 61);
        let mut e = engine(&plan, &ir, Routing::Mono, 64);
        let mut control = e.control().unwrap();
        let input = random_input(1, 20_000, 62);
        let total = 20_000 + 3000 + e.latency_frames();
        let mut sent_at = 0;
        let got = stream_with(&mut e, &input, total, 63, |k, at| {
            if k == 100 {
                control.send(Command::Reset).unwrap();
                sent_at = at;
            }
        });
        let applied = applied_frames(control.poll());
        assert_eq!(applied.len(), 1, "{applied:?}");
        let resume = applied[0].1 as usize;
        let lat = e.latency_frames();
        let ctx = format!("{:?}", plan.levels);
        assert!(resume > sent_at + RAMP, "{ctx}: resumed at {resume}, sent at {sent_at}");
        // Before the reset the output is the plain convolution; after it, the convolution of the input
        // from the resume frame on, faded in.
        let before = oracle(&input, &ir, Routing::Mono, lat, total);
        let fresh_input: Vec<Vec<f32>> =
            vec![input[0].iter().enumerate().map(|(i, &v)| if i >= resume { v } else { 0.0 }).collect()];
        let after = oracle(&fresh_input, &ir, Routing::Mono, lat, total);
        ErrorBound::measure(&got[0][..sent_at], &before[0][..sent_at]).assert_design_bound(&ctx);
        let want: Vec<f64> = (resume..total).map(|n| ramp(0.0, 1.0, resume as u64, n) * after[0][n]).collect();
        ErrorBound::measure(&got[0][resume..], &want).assert_design_bound(&ctx);
        // Between the end of the fade-out and the resume the wet signal is silent.
        let silent_from = sent_at + 64 + lat + RAMP;
        assert!(got[0][silent_from..resume].iter().all(|&v| v == 0.0), "{ctx}: tail left after the fade-out");
        assert_eq!(control.status().frames_processed, total as u64);
    }
}

#[test]
fn refusals_name_the_fault() {
    let plan = Plan::uniform(32, 1000).unwrap();
    let ir = random_ir(2, 1000, 71);
    let mut e = engine(&plan, &ir, Routing::Stereo, 32);
    let mut control = e.control().unwrap();
    let err = control.prepare(&random_ir(1, 100, 72)).unwrap_err();
    assert_eq!(err, ControlError::RoutingMismatch { expected: 2, got: 1 });
    assert!(err.to_string().contains("routing"), "{err}");
    let max = control.max_ir_frames();
    assert_eq!(max, e.ir_frames());
    assert!(max >= 1000);
    let err = control.prepare(&random_ir(2, max + 1, 73)).unwrap_err();
    assert_eq!(err, ControlError::IrTooLong { ir_frames: max + 1, max_frames: max });
    let other_rate = ImpulseResponse::new(vec![vec![1.0; 10]; 2], 44_100).unwrap();
    assert_eq!(control.prepare(&other_rate).unwrap_err(), ControlError::RateMismatch { expected: 48_000, got: 44_100 });
    // A full swap queue hands the IR back, and a full command queue the command.
    let mut refused = None;
    for i in 0..10 {
        let p = control.prepare(&ir).unwrap();
        let id = p.id();
        if let Err(r) = control.swap(p, 0) {
            assert_eq!(r.0.id(), id, "the refused IR is the one sent");
            refused = Some(i);
            break;
        }
    }
    assert_eq!(refused, Some(4), "the swap queue holds 4");
    let mut sent = 0;
    while control.send(Command::WetGain(1.0)).is_ok() {
        sent += 1;
        assert!(sent < 10_000, "the command queue never fills");
    }
    assert_eq!(sent, 64);
}

/// A pre-delay change that arrives while a pre-delay crossfade runs does not jump to the running one's
/// target: it starts at the first block boundary after that crossfade ends, from where it ended, and its
/// `Applied` event carries that frame. Checked against the oracle: the documented ramps, one after the other.
#[test]
fn a_predelay_change_during_a_running_crossfade_starts_where_it_ends() {
    let plan = plans(500)[1].clone();
    let b = plan.block_frames as u64;
    let ir = random_ir(1, 500, 54);
    let mut e = engine(&plan, &ir, Routing::Mono, 40);
    let mut control = e.control().unwrap();
    let input = random_input(1, 8000, 55);
    let total = 8000 + 500 + 300 + e.latency_frames();
    let got = stream_with(&mut e, &input, total, 56, |k, _| match k {
        30 => control.send(Command::PreDelayFrames(250)).unwrap(),
        32 => control.send(Command::PreDelayFrames(100)).unwrap(),
        _ => {}
    });
    let applied = applied_frames(control.poll());
    assert_eq!(
        applied.iter().map(|a| a.0).collect::<Vec<_>>(),
        [Command::PreDelayFrames(250), Command::PreDelayFrames(100)]
    );
    let (f1, f2) = (applied[0].1, applied[1].1);
    assert!(f2 >= f1 + RAMP as u64 && f2 < f1 + RAMP as u64 + b, "second fade at {f2}, first at {f1}");
    assert_eq!(f2 % b, 0, "the deferred crossfade starts at a block boundary");
    let wet = oracle(&input, &ir, Routing::Mono, e.latency_frames(), total);
    let late = |n: usize, d: usize| if n >= d { wet[0][n - d] } else { 0.0 };
    let want: Vec<f64> = (0..total)
        .map(|n| {
            if (n as u64) < f2 {
                let x = ramp(0.0, 1.0, f1, n);
                (1.0 - x) * wet[0][n] + x * late(n, 250)
            } else {
                let x = ramp(0.0, 1.0, f2, n);
                (1.0 - x) * late(n, 250) + x * late(n, 100)
            }
        })
        .collect();
    ErrorBound::measure(&got[0], &want).assert_design_bound("pre-delay change during a crossfade");
}

/// `Control::send` refuses what does not fit the engine with the reason, and queues nothing: non-finite
/// gains, an output gain whose linear value overflows, a pre-delay beyond the bound, and a dry signal or
/// bypass on a shape without a dry path (2 inputs to 3 outputs). What fits is queued and applied.
#[test]
fn send_refuses_what_does_not_fit_and_queues_nothing() {
    use partita_core::{MixError, SendError};
    let plan = Plan::uniform(16, 64).unwrap();
    let mut e = engine(&plan, &random_ir(1, 64, 57), Routing::Mono, 64);
    let mut control = e.control().unwrap();
    let invalid = |r: Result<(), SendError>| match r {
        Err(SendError::Invalid { reason, .. }) => reason,
        other => panic!("expected a refusal, got {other:?}"),
    };
    assert_eq!(invalid(control.send(Command::WetGain(f32::NAN))), MixError::NotFinite { parameter: "wet" });
    assert_eq!(invalid(control.send(Command::DryGain(f32::INFINITY))), MixError::NotFinite { parameter: "dry" });
    assert_eq!(invalid(control.send(Command::OutputGainDb(1000.0))), MixError::NotFinite { parameter: "output gain" });
    let too_long = invalid(control.send(Command::PreDelayFrames(301)));
    assert_eq!(too_long, MixError::PreDelayTooLong { predelay_frames: 301, max_predelay_frames: 300 });
    let err = control.send(Command::PreDelayFrames(301)).unwrap_err();
    assert!(err.to_string().contains("max_predelay_frames"), "{err}");
    assert_eq!(err.command(), Command::PreDelayFrames(301));
    control.send(Command::WetGain(0.5)).unwrap();
    let (x, mut y) = (vec![0.1f32; 64], vec![0.0f32; 64]);
    for _ in 0..4 {
        e.process(&[&x], &mut [&mut y]).unwrap();
    }
    let applied: Vec<Command> = applied_frames(control.poll()).into_iter().map(|a| a.0).collect();
    assert_eq!(applied, [Command::WetGain(0.5)], "only what fits was queued");

    let matrix = Routing::Matrix { inputs: 2, outputs: 3 };
    let mut m = engine(&plan, &random_ir(6, 64, 58), matrix, 64);
    let mut control = m.control().unwrap();
    assert!(!control.has_dry());
    assert_eq!(invalid(control.send(Command::DryGain(0.5))), MixError::NoDryPath { inputs: 2, outputs: 3 });
    assert_eq!(invalid(control.send(Command::Bypass(true))), MixError::NoDryPath { inputs: 2, outputs: 3 });
    control.send(Command::DryGain(0.0)).unwrap();
    control.send(Command::Bypass(false)).unwrap();
}
