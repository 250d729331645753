//! Host calls paced in real time, with the default lateness policy, as a live host makes them: calls of
//! one block, 4 blocks, 16 blocks, 1000 frames (neither a divisor nor a multiple of the block) and random
//! sizes up to the maximum, on the `workers` and `sliced` schedules with their smallest levels at 1024
//! frames and more, and on the planner's automatic choice (`Planner::new()`, a headroom small enough that
//! it must take levels out of the callback). Each engine is told the host period (`EngineOptions::host_period_frames`, and the
//! planner the same), so no worker level is shorter than two host calls.
//!
//! What each case must show: no late result, output equal to the same plan with every level `sync`
//! (<= 1e-6 of the peak), and to the direct-form oracle within the design bound (max <= 2e-6 of the
//! reference peak, relative RMS <= 1e-6; docs/DESIGN.md section 4).
//!
//! Then the worker deadline itself, deterministically (`Engine::set_worker_test_delay`): with calls of 16
//! blocks, a worker made 0.5 host periods slower is still on time; one made 3 host periods slower (more
//! than the two calls a level of twice the host period has) is counted late and the output is wrong.
//!
//! Tests in this binary run one at a time (a lock), since they measure real time on a 2-core machine.

mod support;

use std::sync::Mutex;
use std::time::{Duration, Instant};

use partita_core::{Engine, EngineOptions, ImpulseResponse, Plan, Planner, Routing, Schedule};
use partita_testkit::ErrorBound;
use support::*;

const RATE: f64 = 48_000.0;
const BLOCK: usize = 64;
static SERIAL: Mutex<()> = Mutex::new(());

/// Streams `input` (zero-padded to `total`) through `engine` in calls of `sizes()` frames, each call at
/// its place on the real-time grid (sleeping until then).
fn paced(engine: &mut Engine, input: &[Vec<f32>], total: usize, mut sizes: impl FnMut() -> usize) -> Vec<Vec<f32>> {
    let padded = padded(input, total);
    let mut out = vec![vec![0.0f32; total]; engine.outputs()];
    let t0 = Instant::now();
    let mut at = 0;
    while at < total {
        let due = t0 + Duration::from_secs_f64(at as f64 / RATE);
        if let Some(wait) = due.checked_duration_since(Instant::now()) {
            std::thread::sleep(wait);
        }
        let n = sizes().min(total - at);
        let ins: Vec<&[f32]> = padded.iter().map(|c| &c[at..at + n]).collect();
        let mut outs: Vec<&mut [f32]> = out.iter_mut().map(|c| &mut c[at..at + n]).collect();
        engine.process(&ins, &mut outs).unwrap();
        at += n;
    }
    out
}

/// The plan for `schedule` at host period `host`: 64 x 16, 512 x 6, 2048 x 10 (a layout the planner
/// checks against every offset rule), with levels from 1024 frames on out of the callback and the host
/// period's rule applied (the 2048-frame level is at least twice every period tested here).
fn plan_for(schedule: Schedule, host: usize, ir_frames: usize) -> Plan {
    let plan = Planner::new()
        .block_frames(BLOCK)
        .schedule(schedule)
        .min_worker_frames(1024)
        .min_sliced_frames(1024)
        .host_period_frames(host)
        .custom(&[(64, 16), (512, 6), (2048, 10)], ir_frames)
        .unwrap();
    assert!(plan.levels.iter().any(|l| l.schedule == schedule), "{schedule} at host period {host}: {plan:?}");
    plan
}

/// The automatic schedule's plan at host period `host` for a stereo IR: the default planner and headroom,
/// costed for a machine 100 times slower than the flop model's (on this one a 0.5 s IR fits in the
/// callback, which tests nothing new), so at one-block calls it must take levels out of the callback.
fn auto_plan(host: usize, ir_frames: usize) -> Plan {
    let stereo = partita_core::Shape { inputs: 2, outputs: 2, paths: 2 };
    let slow = partita_core::CostModel::Flops { flops_per_second: 24e7 };
    let plan =
        Planner::new().block_frames(BLOCK).shape(stereo).cost_model(slow).host_period_frames(host).plan(ir_frames);
    let plan = plan.unwrap();
    // With one-block calls every heaviest call needs levels out of the callback. With longer calls the
    // callback has more time, the sliced and worker plans gain less, and all-sync may be the right answer.
    if host == BLOCK {
        assert!(plan.levels.iter().any(|l| l.schedule != Schedule::Sync), "auto at host period {host}: {plan:?}");
    }
    plan
}

fn all_sync(plan: &Plan) -> Plan {
    let mut p = plan.clone();
    for l in &mut p.levels {
        l.schedule = Schedule::Sync;
    }
    p
}

fn engine(plan: &Plan, ir: &ImpulseResponse, host: usize, max: usize) -> Engine {
    let options = EngineOptions { host_period_frames: Some(host), ..EngineOptions::new(max) };
    Engine::with_options(plan, ir, Routing::Stereo, options).unwrap()
}

#[test]
fn paced_calls_of_every_size_are_on_time_and_exact_on_workers_sliced_and_auto() {
    let _serial = SERIAL.lock().unwrap_or_else(|e| e.into_inner());
    let ir = random_ir(2, 24_000, 81);
    let input = random_input(2, 24_000, 82);
    let total = 24_000 + ir.frames() + BLOCK;
    let want = oracle(&input, &ir, Routing::Stereo, BLOCK, total);
    // (label, host period the engine is told, largest call, call sizes)
    type Sizes = Box<dyn FnMut() -> usize>;
    let cases: Vec<(&str, usize, usize, Sizes)> = vec![
        ("B", BLOCK, BLOCK, Box::new(|| BLOCK)),
        ("4B", 4 * BLOCK, 4 * BLOCK, Box::new(|| 4 * BLOCK)),
        ("16B", 16 * BLOCK, 16 * BLOCK, Box::new(|| 16 * BLOCK)),
        ("1000", 1000, 1000, Box::new(|| 1000)),
        ("random", 1024, 1024, Box::new(random_sizes(83, 1024))),
    ];
    for (label, host, max, mut sizes) in cases {
        for schedule in [Some(Schedule::Workers), Some(Schedule::Sliced), None] {
            let plan = match schedule {
                Some(s) => plan_for(s, host, ir.frames()),
                None => auto_plan(host, ir.frames()),
            };
            let mut e = engine(&plan, &ir, host, max);
            let monitor = e.monitor();
            let got = paced(&mut e, &input, total, &mut sizes);
            let context = format!("{}, calls of {label}", schedule.map_or("auto", |s| s.as_str()));
            assert_eq!(monitor.late_results(), 0, "{context}: late results");
            // The same plan with every level in the callback, streamed the same way (unpaced: sync is
            // timing-free).
            let mut reference = engine(&all_sync(&plan), &ir, host, max);
            let sync_out = stream(&mut reference, &input, total, || max);
            for c in 0..2 {
                let sync_f64: Vec<f64> = sync_out[c].iter().map(|&v| f64::from(v)).collect();
                let b = ErrorBound::measure(&got[c], &sync_f64);
                assert!(b.max_over_peak <= 1e-6, "{context}, output {c}: against all-sync {b:?}");
                ErrorBound::measure(&got[c], &want[c]).assert_design_bound(&format!("{context}, output {c}"));
            }
        }
    }
}

#[test]
fn a_worker_is_on_time_with_half_a_host_period_to_spare_and_late_with_three_too_many() {
    let _serial = SERIAL.lock().unwrap_or_else(|e| e.into_inner());
    let host = 16 * BLOCK;
    let period = Duration::from_secs_f64(host as f64 / RATE);
    let ir = random_ir(2, 24_000, 84);
    let input = random_input(2, 24_000, 85);
    let total = 24_000 + ir.frames() + BLOCK;
    let want = oracle(&input, &ir, Routing::Stereo, BLOCK, total);
    let plan = plan_for(Schedule::Workers, host, ir.frames());
    let smallest = plan.levels.iter().filter(|l| l.schedule == Schedule::Workers).map(|l| l.block_frames).min();
    assert_eq!(smallest, Some(2 * host), "{plan:?}");

    let mut e = engine(&plan, &ir, host, host);
    e.set_worker_test_delay(period / 2);
    let got = paced(&mut e, &input, total, || host);
    assert_eq!(e.monitor().late_results(), 0, "a worker 0.5 H slower is still on time");
    for c in 0..2 {
        ErrorBound::measure(&got[c], &want[c]).assert_design_bound(&format!("delay 0.5 H, output {c}"));
    }

    let mut e = engine(&plan, &ir, host, host);
    e.set_worker_test_delay(3 * period);
    let got = paced(&mut e, &input, total, || host);
    let late = e.monitor().late_results();
    assert!(late > 0, "a worker 3 H slower must be counted late");
    let b = ErrorBound::measure(&got[0], &want[0]);
    assert!(!b.within_design_bound(), "late results must show in the output: {b:?} with {late} late");
}
