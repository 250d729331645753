//! Every planning mode (uniform, optimal, custom, zero latency) against the direct-form oracle, with
//! random host-call sizes; and zero latency sample accuracy.

mod support;

use partita_core::{Engine, ImpulseResponse, PlanMode, Planner, Routing, Schedule};
use support::*;

fn planners(b: usize) -> Vec<(&'static str, Planner)> {
    vec![
        ("uniform", Planner::new().block_frames(b).mode(PlanMode::Uniform)),
        ("optimal", Planner::new().block_frames(b)),
        ("zero-uniform", Planner::new().block_frames(b).mode(PlanMode::Uniform).zero_latency(true)),
        ("zero-optimal", Planner::new().block_frames(b).zero_latency(true)),
        // Small level caps force many levels on short IRs, exercising level transitions.
        ("optimal-capped", Planner::new().block_frames(b).max_level_frames(4 * b)),
        // min_worker_frames(0) / min_sliced_frames(0): every level above the block on a worker or sliced,
        // even small ones, to exercise the hand-offs and the slicing.
        ("optimal-workers", Planner::new().block_frames(b).schedule(Schedule::Workers).min_worker_frames(0)),
        ("optimal-sliced", Planner::new().block_frames(b).schedule(Schedule::Sliced).min_sliced_frames(0)),
        (
            "zero-workers",
            Planner::new().block_frames(b).zero_latency(true).schedule(Schedule::Workers).min_worker_frames(0),
        ),
        (
            "zero-sliced",
            Planner::new().block_frames(b).zero_latency(true).schedule(Schedule::Sliced).min_sliced_frames(0),
        ),
        ("sliced-capped", Planner::new().block_frames(b).schedule(Schedule::Sliced).max_level_frames(8 * b.max(2))),
    ]
}

#[test]
fn every_mode_matches_the_oracle() {
    let mut cells = 0;
    for b in [1usize, 16, 64, 128] {
        let lengths: Vec<usize> = match b {
            1 => vec![1, 2, 37, 700],
            _ => vec![1, b - 1, b, b + 1, 3 * b + 7, 17 * b + 5, 60 * b],
        };
        for l in lengths {
            for (name, planner) in planners(b) {
                let plan = planner.plan(l).unwrap();
                for (ri, (routing, channels)) in
                    [(Routing::Mono, 1usize), (Routing::TrueStereo, 4)].into_iter().enumerate()
                {
                    let seed = (b * 7919 + l * 31 + ri) as u64;
                    let ir = random_ir(channels, l, seed);
                    let input_frames = 2 * plan.max_level_frames() + 3 * b + 10;
                    check_against_oracle(&plan, &ir, routing, input_frames.min(6000), seed);
                    let _ = name;
                    cells += 1;
                }
            }
        }
    }
    eprintln!("modes grid: {cells} cells");
}

#[test]
fn long_ir_optimal_plans_match_the_oracle() {
    // 2 s at 48 kHz with blocks 64 and 256, short inputs (the oracle is direct form).
    let taps = 96_000;
    for (b, zero) in [(64usize, false), (256, true)] {
        let ir =
            ImpulseResponse::new(vec![partita_core::synth::decaying_noise(taps, 40_000.0, b as u64)], 48_000).unwrap();
        let plan = Planner::new().block_frames(b).zero_latency(zero).plan(taps).unwrap();
        assert!(plan.levels.len() >= 3, "{:?}", plan.levels);
        check_against_oracle(&plan, &ir, Routing::Mono, 2500, b as u64);
    }
}

#[test]
fn long_ir_scheduled_plans_match_the_oracle() {
    // Worker and sliced levels above 2048 frames move their input and results in chunks over several
    // boundaries (workers::TRANSFER_FRAMES, the sliced steps): 1 s stereo at 48 kHz, block 64.
    let taps = 48_000;
    let ir = ImpulseResponse::new(
        (0..2).map(|c| partita_core::synth::decaying_noise(taps, 20_000.0, 40 + c)).collect(),
        48_000,
    )
    .unwrap();
    for schedule in [Schedule::Workers, Schedule::Sliced] {
        let plan = scheduled_plan(schedule, false, taps, 64);
        assert!(
            plan.levels.iter().any(|l| l.schedule == schedule && l.block_frames > 2048),
            "{schedule:?}: {:?}",
            plan.levels
        );
        check_against_oracle(&plan, &ir, Routing::Stereo, 3000, 9);
    }
}

#[test]
fn custom_plans_run_and_invalid_ones_are_refused() {
    let b = 32;
    let planner = Planner::new().block_frames(b);
    // 32 x 3, then 96 x 2 (mixed radix, offset 96 >= 96 - 32), then 256 x 3.
    let plan = planner.custom(&[(32, 3), (96, 2), (256, 3)], 1000).unwrap();
    assert_eq!(plan.levels[1].offset_frames, 96);
    let ir = random_ir(2, 1000, 3);
    check_against_oracle(&plan, &ir, Routing::Stereo, 1500, 3);
    // 256 cannot start at 96: the rule s >= N - B needs 224.
    let err = planner.custom(&[(32, 3), (256, 4)], 1000).unwrap_err();
    assert!(err.to_string().contains("s >= N - B"), "{err}");
    // With a level period of delay (workers), 96 needs s >= 2N - B = 160.
    let workers = planner.clone().schedule(Schedule::Workers).min_worker_frames(0);
    let err = workers.custom(&[(32, 3), (96, 10)], 1000).unwrap_err();
    assert!(err.to_string().contains("2N - B"), "{err}");
    let err = planner.custom(&[(32, 3), (48, 10)], 1000).unwrap_err();
    assert!(err.to_string().contains("not a multiple"), "{err}");
    let err = planner.custom(&[(32, 3)], 1000).unwrap_err();
    assert!(err.to_string().contains("covers 96 taps"), "{err}");
    let err = planner.custom(&[(32, 0)], 1000).unwrap_err();
    assert!(err.to_string().contains("0 partitions"), "{err}");
}

#[test]
fn zero_latency_impulse_lands_on_its_own_frame() {
    for b in [16usize, 64, 96] {
        let taps = 40 * b + 3;
        let ir_taps = partita_core::synth::decaying_noise(taps, 10.0 * b as f64, 1);
        let ir = ImpulseResponse::new(vec![ir_taps.clone()], 48_000).unwrap();
        let plan = Planner::new().block_frames(b).zero_latency(true).plan(taps).unwrap();
        let mut engine = Engine::new(&plan, &ir, Routing::Mono, 257).unwrap();
        assert_eq!(engine.latency_frames(), 0);
        let frames = taps + 1200;
        let mut x = vec![0.0f32; frames];
        for n in [0usize, 5, 333, 1000] {
            x[n] += 1.0;
        }
        let y = stream(&mut engine, &[x.clone()], frames, random_sizes(b as u64, 257));
        let want = oracle(&[x], &ir, Routing::Mono, 0, frames);
        // Sample-accurate: output frame n equals the oracle's frame n, no shift.
        partita_testkit::ErrorBound::measure(&y[0], &want[0]).assert_design_bound("zero latency impulses");
        assert!((y[0][0] - ir_taps[0]).abs() < 1e-6 && (y[0][5] - (ir_taps[5] + ir_taps[0])).abs() < 1e-5);
    }
}
