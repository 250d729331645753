//! The `workers` and `sliced` schedules: lateness policy, shutdown, and even spreading of sliced work.

mod support;

use std::sync::Mutex;
use std::time::{Duration, Instant};

use partita_core::{
    live_worker_threads, Engine, EngineOptions, ImpulseResponse, Lateness, Level, Plan, Planner, Routing, Schedule,
    LATE_SPIN,
};
use support::*;

/// Tests that count live worker threads must not overlap with other tests that spawn workers.
static SERIAL: Mutex<()> = Mutex::new(());

/// Level 0 (32 x 4, taps 0..128) is sync; level 1 (128 x 4 from 224) runs on a worker. The IR is zero
/// outside level 1, so the output is exactly level 1's contribution.
fn worker_only_plan() -> (Plan, ImpulseResponse) {
    let b = 32;
    let plan = Plan {
        block_frames: b,
        zero_latency: false,
        head_frames: 0,
        levels: vec![
            Level { block_frames: b, partitions: 7, offset_frames: 0, schedule: Schedule::Sync },
            Level { block_frames: 128, partitions: 4, offset_frames: 224, schedule: Schedule::Workers },
        ],
        ir_frames: 736,
    };
    plan.validate().unwrap();
    let mut taps = partita_core::synth::Noise::new(5).vec(736);
    taps[..224].fill(0.0);
    (plan, ImpulseResponse::new(vec![taps], 48_000).unwrap())
}

#[test]
fn late_worker_results_are_dropped_counted_and_bounded_in_time() {
    let _serial = SERIAL.lock().unwrap_or_else(|e| e.into_inner());
    let (plan, ir) = worker_only_plan();
    let mut engine = Engine::new(&plan, &ir, Routing::Mono, 32).unwrap();
    assert_eq!(engine.worker_threads(), 1);
    let monitor = engine.monitor();
    // Every job now takes 100 ms longer than its 2.7 ms period: all results are late.
    engine.set_worker_test_delay(Duration::from_millis(100));
    let x = random_input(1, 32 * 40, 9);
    let mut y = vec![0.0f32; 32 * 40];
    let mut slowest = Duration::ZERO;
    for (xc, yc) in x[0].chunks(32).zip(y.chunks_mut(32)) {
        let t0 = Instant::now();
        engine.process(&[xc], &mut [yc]).unwrap();
        slowest = slowest.max(t0.elapsed());
    }
    let late = monitor.late_results();
    let refused = monitor.refused_jobs();
    // 40 blocks hold 10 input blocks of the 128 level (released at blocks 1, 5, ..., 37). The first four
    // jobs fill the hand-off slots and each comes due late (the fourth at block 17); after that the
    // worker is too far behind to take new blocks, and the six later releases are refused and counted.
    assert_eq!(late, 4, "late results counted");
    assert_eq!(refused, 6, "refused releases counted");
    // Without that level's contribution the output is silence (the IR has nothing elsewhere).
    assert!(y.iter().all(|&v| v == 0.0), "late blocks must go out without the level's contribution");
    // The audio thread waited at most the spin bound per due result, never the worker's 100 ms.
    // (A generous functional bound for a shared machine, not a performance figure.)
    assert!(slowest < Duration::from_millis(50), "a callback blocked for {slowest:?} (spin bound {LATE_SPIN:?})");
}

#[test]
fn on_time_worker_results_are_exact_and_none_late() {
    let _serial = SERIAL.lock().unwrap_or_else(|e| e.into_inner());
    let (plan, ir) = worker_only_plan();
    let options = EngineOptions { lateness: Lateness::Wait, ..EngineOptions::new(32) };
    let mut engine = Engine::with_options(&plan, &ir, Routing::Mono, options).unwrap();
    let input = random_input(1, 2000, 3);
    let got = stream(&mut engine, &input, 2800, || 32);
    let want = oracle(&input, &ir, Routing::Mono, 32, 2800);
    partita_testkit::ErrorBound::measure(&got[0], &want[0]).assert_design_bound("worker level");
    assert_eq!(engine.monitor().late_results(), 0);
}

#[test]
fn dropping_an_engine_with_busy_workers_ends_every_thread() {
    let _serial = SERIAL.lock().unwrap_or_else(|e| e.into_inner());
    let before = live_worker_threads();
    let ir = random_ir(4, 20_000, 4);
    let plan = Planner::new().block_frames(32).schedule(Schedule::Workers).min_worker_frames(0).plan(20_000).unwrap();
    let mut engine = Engine::new(&plan, &ir, Routing::TrueStereo, 32).unwrap();
    let threads = engine.worker_threads();
    assert!(threads >= 2, "{:?}", plan.levels);
    assert_eq!(live_worker_threads(), before + threads);
    engine.set_worker_test_delay(Duration::from_millis(30));
    let x = random_input(2, 32, 1);
    let mut y = vec![vec![0.0f32; 32]; 2];
    for _ in 0..600 {
        let (a, b) = y.split_at_mut(1);
        engine.process(&[&x[0], &x[1]], &mut [&mut a[0], &mut b[0]]).unwrap();
    }
    drop(engine);
    assert_eq!(live_worker_threads(), before, "a worker thread outlived its engine");
}

#[test]
fn a_worker_level_runs_every_routing_group_on_one_thread() {
    // Plain stereo has two routing groups (L->L, R->R): each worker level still wakes one thread per
    // release, not one per group. (The oracle grids check the merged jobs' output.)
    let _serial = SERIAL.lock().unwrap_or_else(|e| e.into_inner());
    let ir = random_ir(2, 20_000, 5);
    let plan = Planner::new().block_frames(64).schedule(Schedule::Workers).min_worker_frames(0).plan(20_000).unwrap();
    let worker_levels = plan.levels.iter().filter(|l| l.schedule == Schedule::Workers).count();
    assert!(worker_levels >= 2, "{:?}", plan.levels);
    let engine = Engine::new(&plan, &ir, Routing::Stereo, 64).unwrap();
    assert_eq!(engine.worker_threads(), worker_levels);
}

#[test]
fn realtime_priority_is_optional_and_reported() {
    let _serial = SERIAL.lock().unwrap_or_else(|e| e.into_inner());
    let ir = random_ir(1, 5_000, 2);
    let plan = Planner::new().block_frames(64).schedule(Schedule::Workers).min_worker_frames(0).plan(5_000).unwrap();
    let plain = Engine::new(&plan, &ir, Routing::Mono, 64).unwrap();
    assert!(plain.worker_threads() > 0, "{:?}", plan.levels);
    assert!(plain.worker_priorities().iter().all(Option::is_none), "no priority unless asked");
    let options = EngineOptions { realtime_workers: true, ..EngineOptions::new(64) };
    let asked = Engine::with_options(&plan, &ir, Routing::Mono, options).unwrap();
    // Granted or refused (EPERM without privilege), the engine runs either way and reports which.
    let got = asked.worker_priorities();
    assert_eq!(got.len(), asked.worker_threads());
    assert!(got.iter().all(Option::is_some), "{got:?}");
}

#[test]
fn sliced_work_per_callback_stays_near_the_mean() {
    // S1: 10 s stereo IR at 48 kHz, block 64, every level above the block sliced.
    let taps = 480_000;
    let ir =
        ImpulseResponse::new((0..2).map(|c| partita_core::synth::decaying_noise(taps, 200_000.0, c)).collect(), 48_000)
            .unwrap();
    let plan = Planner::new().block_frames(64).schedule(Schedule::Sliced).plan(taps).unwrap();
    let mut engine = Engine::new(&plan, &ir, Routing::Stereo, 64).unwrap();
    let period = plan.max_level_frames() / 64;
    let x = random_input(2, 64, 1);
    let mut y = vec![vec![0.0f32; 64]; 2];
    let mut counts = Vec::new();
    // Warm up one full period so every level is mid-job, then count one full period of the largest.
    for k in 0..2 * period {
        let (a, b) = y.split_at_mut(1);
        engine.process(&[&x[0], &x[1]], &mut [&mut a[0], &mut b[0]]).unwrap();
        if k >= period {
            counts.push(engine.sliced_cost_last_boundary());
        }
    }
    let mean = counts.iter().sum::<u64>() as f64 / counts.len() as f64;
    let max = *counts.iter().max().unwrap() as f64;
    // The expected mean, from the job costs: sum over sliced levels of cost / period.
    let expected: f64 = engine.sliced_job_costs().iter().map(|&(c, p)| c as f64 / p as f64).sum();
    assert!((mean - expected).abs() <= 0.02 * expected, "mean {mean} vs job costs {expected}");
    assert!(max <= 3.0 * mean, "max {max} vs mean {mean} cost units per callback");
    eprintln!("sliced S1: max/mean cost per callback {:.2} ({max} / {mean:.0})", max / mean);
}

/// An offline host (calls back to back, much faster than real time) with a `workers` plan: with the
/// default options, results come late and are dropped (the lateness policy of a live stream); with
/// `EngineOptions::offline` they are waited for, none is late, and the output is the convolution
/// (oracle, design bound).
#[test]
fn offline_mode_waits_for_workers_so_a_fast_host_drops_nothing() {
    use partita_core::{Engine, EngineOptions, Planner, Routing, Schedule};
    let ir = support::random_ir(2, 24_000, 91);
    let input = support::random_input(2, 48_000, 92);
    let plan = Planner::new().block_frames(64).schedule(Schedule::Workers).plan(ir.frames()).unwrap();
    assert!(plan.levels.iter().any(|l| l.schedule == Schedule::Workers), "{plan:?}");
    let total = 48_000 + ir.frames() + 64;
    let want = support::oracle(&input, &ir, Routing::Stereo, 64, total);

    // Each worker job takes at least 2 ms (the test hook), far longer than back-to-back calls give it, so
    // the outcome does not hang on how fast this machine happens to be.
    let slow = std::time::Duration::from_millis(2);
    let mut live = Engine::with_options(&plan, &ir, Routing::Stereo, EngineOptions::new(1024)).unwrap();
    live.set_worker_test_delay(slow);
    support::stream(&mut live, &input, total, || 1024);
    assert!(live.monitor().late_results() > 0, "a live-policy engine driven faster than real time drops results");

    let options = EngineOptions { offline: true, ..EngineOptions::new(1024) };
    let mut offline = Engine::with_options(&plan, &ir, Routing::Stereo, options).unwrap();
    offline.set_worker_test_delay(slow);
    let got = support::stream(&mut offline, &input, total, || 1024);
    assert_eq!(offline.monitor().late_results(), 0);
    for c in 0..2 {
        partita_testkit::ErrorBound::measure(&got[c], &want[c]).assert_design_bound(&format!("offline, output {c}"));
    }
}
