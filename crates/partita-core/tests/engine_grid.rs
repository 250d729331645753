//! Layers 2 and 3: the engine against the direct-form oracle over a grid, and its invariants.

mod support;

use partita_core::{Engine, EngineError, EngineOptions, ImpulseResponse, IrError, Plan, Routing};
use support::*;

/// IR lengths for block `b`: 1, B - 1, B, B + 1 and a prime near 2.5 B.
fn lengths(b: usize) -> Vec<usize> {
    let prime = match b {
        1 => 13,
        16 => 37,
        64 => 157,
        128 => 331,
        1024 => 2539,
        _ => unreachable!(),
    };
    let mut l = vec![1, b.saturating_sub(1), b, b + 1, prime];
    l.retain(|&x| x >= 1);
    l.dedup();
    l
}

#[test]
fn uniform_grid_matches_the_oracle_for_every_routing() {
    let mut worst = (0.0f64, 0.0f64);
    let mut cells = 0;
    for b in [1usize, 16, 64, 128, 1024] {
        for l in lengths(b) {
            for (ri, (routing, channels)) in routings().into_iter().enumerate() {
                let seed = (b * 1000 + l * 10 + ri) as u64;
                let ir = random_ir(channels, l, seed);
                let plan = Plan::uniform(b, l).unwrap();
                let input_frames = 3 * b + l + 50;
                let w = check_against_oracle(&plan, &ir, routing, input_frames, seed);
                worst = (worst.0.max(w.0), worst.1.max(w.1));
                cells += 1;
            }
        }
    }
    eprintln!("uniform grid: {cells} cells, worst max/peak {:.2e}, worst rel RMS {:.2e}", worst.0, worst.1);
}

#[test]
fn uniform_b1_with_a_thousand_taps() {
    let ir = random_ir(1, 1000, 11);
    check_against_oracle(&Plan::uniform(1, 1000).unwrap(), &ir, Routing::Mono, 400, 11);
}

#[test]
fn three_seconds_at_48k_with_large_blocks() {
    // 3 s at 48 kHz = 144,000 taps; short inputs keep the oracle cheap.
    let taps = 3 * 48_000;
    for (b, (routing, channels)) in
        [(64usize, (Routing::Mono, 1usize)), (128, (Routing::Stereo, 2)), (1024, (Routing::TrueStereo, 4))]
    {
        let ir = ImpulseResponse::new(
            (0..channels).map(|c| partita_core::synth::decaying_noise(taps, 60_000.0, c as u64 + 3)).collect(),
            48_000,
        )
        .unwrap();
        check_against_oracle(&Plan::uniform(b, taps).unwrap(), &ir, routing, 1500, b as u64);
    }
}

#[test]
fn host_call_splitting_does_not_change_the_output() {
    for (routing, channels) in routings() {
        let ir = random_ir(channels, 300, 5);
        let plan = Plan::uniform(32, 300).unwrap();
        let input = random_input(routing.inputs(), 2000, 6);
        let mut reference = Engine::new(&plan, &ir, routing, 1024).unwrap();
        let want = stream(&mut reference, &input, 2400, || 32);
        for seed in 0..4 {
            let mut e = Engine::new(&plan, &ir, routing, 1024).unwrap();
            let got = stream(&mut e, &input, 2400, random_sizes(seed, 1024));
            assert_eq!(got, want, "{routing:?} split seed {seed}: outputs must be bit-identical");
        }
    }
}

#[test]
fn dirty_scratch_changes_nothing() {
    let ir = random_ir(4, 500, 8);
    let plan = Plan::uniform(64, 500).unwrap();
    let input = random_input(2, 3000, 9);
    let mut clean = Engine::new(&plan, &ir, Routing::TrueStereo, 256).unwrap();
    let want = stream(&mut clean, &input, 3600, random_sizes(1, 256));
    // Garbage (NaN, huge values) written into every scratch buffer before each call.
    let mut again = Engine::new(&plan, &ir, Routing::TrueStereo, 256).unwrap();
    let mut out = vec![vec![0.0f32; 3600]; 2];
    let padded: Vec<Vec<f32>> = input
        .iter()
        .map(|x| {
            let mut v = x.clone();
            v.resize(3600, 0.0);
            v
        })
        .collect();
    let mut at = 0;
    let mut sizes = random_sizes(1, 256);
    while at < 3600 {
        again.dirty_scratch(if at % 2 == 0 { f32::NAN } else { 1.0e30 });
        let n = sizes().min(3600 - at);
        let ins: Vec<&[f32]> = padded.iter().map(|x| &x[at..at + n]).collect();
        let mut outs: Vec<&mut [f32]> = out.iter_mut().map(|y| &mut y[at..at + n]).collect();
        again.process(&ins, &mut outs).unwrap();
        at += n;
    }
    assert_eq!(out, want, "scratch garbage leaked into the output");
}

#[test]
fn reset_returns_to_the_fresh_state() {
    for (routing, channels) in routings() {
        let ir = random_ir(channels, 200, 12);
        let plan = Plan::uniform(16, 200).unwrap();
        let input = random_input(routing.inputs(), 700, 13);
        let mut fresh = Engine::new(&plan, &ir, routing, 64).unwrap();
        let want = stream(&mut fresh, &input, 1000, random_sizes(2, 64));
        let mut used = Engine::new(&plan, &ir, routing, 64).unwrap();
        let noise = random_input(routing.inputs(), 555, 14);
        stream(&mut used, &noise, 555, random_sizes(3, 64));
        used.reset();
        let got = stream(&mut used, &input, 1000, random_sizes(2, 64));
        assert_eq!(got, want, "{routing:?}");
    }
}

/// The worker and sliced levels carry state between boundaries (a partly staged input block, a result
/// being delivered, a job in slices): a reset in the middle of a level period must drop all of it.
/// Workers run with `Lateness::Wait` so that both engines compute every block.
#[test]
fn reset_mid_period_returns_scheduled_levels_to_the_fresh_state() {
    use partita_core::{EngineOptions, Lateness, Schedule};
    for schedule in [Schedule::Workers, Schedule::Sliced] {
        let ir = random_ir(2, 3000, 15);
        let plan = scheduled_plan(schedule, false, 3000, 16);
        assert!(plan.levels.iter().any(|l| l.schedule == schedule), "{plan:?}");
        let options = || {
            let mut o = EngineOptions::new(64);
            o.lateness = Lateness::Wait;
            o
        };
        let input = random_input(2, 4000, 16);
        let mut fresh = Engine::with_options(&plan, &ir, Routing::Stereo, options()).unwrap();
        let want = stream(&mut fresh, &input, 7000, random_sizes(4, 64));
        let mut used = Engine::with_options(&plan, &ir, Routing::Stereo, options()).unwrap();
        // 1000 frames: not a whole period of any level above the first, so the reset falls mid-period.
        let noise = random_input(2, 1000, 17);
        stream(&mut used, &noise, 1000, random_sizes(5, 64));
        used.reset();
        let got = stream(&mut used, &input, 7000, random_sizes(4, 64));
        assert_eq!(got, want, "{schedule:?}: {plan:?}");
    }
}

#[test]
fn impulse_appears_at_latency_frames() {
    for b in [1usize, 16, 48, 64, 96, 1024] {
        let mut taps = vec![0.0f32; 3 * b + 1];
        taps[0] = 1.0;
        taps[3 * b] = -0.5;
        let ir = ImpulseResponse::new(vec![taps], 48_000).unwrap();
        let plan = Plan::uniform(b, ir.frames()).unwrap();
        let mut e = Engine::new(&plan, &ir, Routing::Mono, 333).unwrap();
        assert_eq!(e.latency_frames(), b);
        let mut x = vec![0.0f32; 6 * b + 10];
        x[0] = 1.0;
        let y = stream(&mut e, &[x], 6 * b + 10, random_sizes(b as u64, 333));
        let peak = y[0].iter().enumerate().max_by(|a, c| a.1.abs().total_cmp(&c.1.abs())).unwrap().0;
        assert_eq!(peak, e.latency_frames(), "B={b}");
        assert!((y[0][b] - 1.0).abs() < 1e-5 && (y[0][4 * b] + 0.5).abs() < 1e-5, "B={b}");
        for (n, v) in y[0].iter().enumerate() {
            if n != b && n != 4 * b {
                assert!(v.abs() < 1e-5, "B={b}: stray output {v} at frame {n}");
            }
        }
    }
}

#[test]
fn mixed_radix_blocks_match_the_oracle() {
    for b in [48usize, 96, 15] {
        let ir = random_ir(2, 5 * b + 7, b as u64);
        check_against_oracle(&Plan::uniform(b, ir.frames()).unwrap(), &ir, Routing::Stereo, 4 * b, b as u64);
    }
}

#[test]
fn non_finite_input_is_replaced_and_counted() {
    let ir = random_ir(1, 100, 21);
    let plan = Plan::uniform(16, 100).unwrap();
    let mut e = Engine::new(&plan, &ir, Routing::Mono, 64).unwrap();
    let monitor = e.monitor();
    let mut x = random_input(1, 600, 22);
    let bad = [3usize, 50, 51, 333];
    let mut want_input = x.clone();
    for (k, &i) in bad.iter().enumerate() {
        x[0][i] = [f32::NAN, f32::INFINITY, f32::NEG_INFINITY, f32::NAN][k];
        want_input[0][i] = 0.0;
    }
    let y = stream(&mut e, &x, 800, random_sizes(4, 64));
    assert_eq!(monitor.nonfinite_inputs(), bad.len() as u64);
    assert_eq!(monitor.frames_processed(), 800);
    assert!(y[0].iter().all(|v| v.is_finite()), "a NaN reached the output");
    let want = oracle(&want_input, &ir, Routing::Mono, 16, 800);
    partita_testkit::ErrorBound::measure(&y[0], &want[0]).assert_design_bound("sanitized input");
}

#[test]
fn zero_tap_ir_is_refused_clearly() {
    let err = ImpulseResponse::new(vec![vec![]], 48_000).unwrap_err();
    assert_eq!(err, IrError::Empty);
    assert!(err.to_string().contains("0 taps"), "{err}");
    assert_eq!(ImpulseResponse::new(vec![], 48_000).unwrap_err(), IrError::NoChannels);
    assert!(matches!(
        ImpulseResponse::new(vec![vec![1.0, f32::NAN]], 48_000).unwrap_err(),
        IrError::NonFinite { channel: 0, frame: 1 }
    ));
    assert!(matches!(
        ImpulseResponse::new(vec![vec![1.0], vec![1.0, 2.0]], 48_000).unwrap_err(),
        IrError::UnequalLengths { channel: 1, .. }
    ));
    assert_eq!(ImpulseResponse::new(vec![vec![1.0]], 0).unwrap_err(), IrError::SampleRateZero);
}

/// The C ABI passes u32 sizes straight through (its fuzz target reaches them): a max_host_frames of 4 billion
/// would make the engine (and the ABI's scratch)
/// allocate without bound; sizes past the documented limits are refused instead.
#[test]
fn oversized_options_are_refused_before_allocating() {
    let ir = random_ir(1, 50, 1);
    let plan = Plan::uniform(16, 50).unwrap();
    let build = |options| Engine::with_options(&plan, &ir, Routing::Mono, options);
    let max = EngineOptions::MAX_HOST_FRAMES;
    assert!(build(EngineOptions::new(max)).is_ok());
    let err = build(EngineOptions::new(u32::MAX as usize)).unwrap_err();
    assert!(
        matches!(err, EngineError::OptionTooLarge { what: "max_host_frames", limit_frames, .. } if limit_frames == max)
    );
    assert!(err.to_string().contains("ask for fewer frames"), "{err}");
    let predelay =
        EngineOptions { max_predelay_frames: EngineOptions::MAX_PREDELAY_FRAMES + 1, ..EngineOptions::new(16) };
    assert!(matches!(build(predelay), Err(EngineError::OptionTooLarge { what: "max_predelay_frames", .. })));
}

#[test]
fn bad_calls_are_refused_without_touching_state() {
    let ir = random_ir(2, 50, 1);
    let plan = Plan::uniform(16, 50).unwrap();
    let mut e = Engine::new(&plan, &ir, Routing::Stereo, 32).unwrap();
    let x = [0.5f32; 33];
    let mut y0 = [1.0f32; 33];
    let mut y1 = [1.0f32; 33];
    let err = e.process(&[&x, &x], &mut [&mut y0, &mut y1]).unwrap_err();
    assert!(err.to_string().contains("at most 32"), "{err}");
    assert!(y0.iter().all(|&v| v == 0.0), "refused call must zero the outputs");
    assert!(e.process(&[&x], &mut [&mut y0, &mut y1]).is_err());
    assert!(e.process(&[&x[..3], &x[..4]], &mut [&mut y0[..3], &mut y1[..3]]).is_err());
    assert_eq!(e.monitor().frames_processed(), 0);
    assert!(Engine::new(&plan, &ir, Routing::Stereo, 0).is_err());
    assert!(Engine::new(&Plan::uniform(16, 10).unwrap(), &ir, Routing::Stereo, 8).is_err(), "IR longer than plan");
    let e = Engine::new(&plan, &ir, Routing::TrueStereo, 8).unwrap_err();
    assert!(e.to_string().contains("4 channel"), "{e}");
}

/// A huge but finite input sample (3e38, near `f32::MAX`) would overflow the FFTs into infinities and the
/// delay lines into NaN for a whole IR length. Sanitizing clamps it to `INPUT_LIMIT` and counts it in
/// `clamped_inputs` (not in `nonfinite_inputs`): every output stays finite, on every schedule, with the
/// default options (default lateness policy), in host calls shorter and longer than the block.
#[test]
fn a_huge_finite_input_sample_is_clamped_and_every_output_stays_finite() {
    use partita_core::{Planner, Schedule, INPUT_LIMIT};
    let taps: Vec<Vec<f32>> = (0..2)
        .map(|c| partita_core::synth::decaying_noise(4800, 1500.0, 70 + c).iter().map(|v| 0.5 * v).collect())
        .collect();
    let ir = ImpulseResponse::new(taps, 48_000).unwrap();
    for schedule in [Schedule::Sync, Schedule::Sliced, Schedule::Workers] {
        for call in [37usize, 200] {
            let plan = Planner::new().block_frames(64).schedule(schedule).plan(ir.frames()).unwrap();
            let mut engine = Engine::new(&plan, &ir, Routing::Stereo, 256).unwrap();
            let monitor = engine.monitor();
            let mut noise = partita_core::synth::Noise::new(71);
            let mut x: Vec<Vec<f32>> = (0..2).map(|_| noise.vec(24_000).iter().map(|v| 0.1 * v).collect()).collect();
            x[0][1000] = 3e38;
            x[1][5000] = -2.0 * INPUT_LIMIT;
            let mut y = vec![vec![0.0f32; 24_000]; 2];
            for at in (0..24_000).step_by(call) {
                let end = (at + call).min(24_000);
                let ins: Vec<&[f32]> = x.iter().map(|c| &c[at..end]).collect();
                let mut outs: Vec<&mut [f32]> = y.iter_mut().map(|c| &mut c[at..end]).collect();
                engine.process(&ins, &mut outs).unwrap();
            }
            let context = format!("{schedule}, calls of {call}");
            assert!(y.iter().flatten().all(|v| v.is_finite()), "{context}: a non-finite output");
            assert_eq!((monitor.clamped_inputs(), monitor.nonfinite_inputs()), (2, 0), "{context}");
            // The clamped sample went through: the output is loud after it, not silenced.
            let lat = engine.latency_frames();
            let after = y[0][1000 + lat..1000 + lat + 4800].iter().fold(0.0f32, |m, v| m.max(v.abs()));
            assert!(after > 1e4, "{context}: the clamped impulse should ring through the IR, peak {after}");
        }
    }
}
