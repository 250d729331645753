//! Helpers shared by the core test binaries.
#![allow(dead_code)]

use partita_core::synth::Noise;
use partita_core::{naive, Engine, EngineOptions, ImpulseResponse, Lateness, Plan, Routing};

/// Every routing with an IR channel count that fits it.
pub fn routings() -> Vec<(Routing, usize)> {
    vec![
        (Routing::Mono, 1),
        (Routing::MonoToStereo, 2),
        (Routing::Stereo, 1),
        (Routing::Stereo, 2),
        (Routing::TrueStereo, 4),
        (Routing::Matrix { inputs: 2, outputs: 3 }, 6),
        (Routing::Matrix { inputs: 3, outputs: 1 }, 3),
    ]
}

/// A random IR of `channels` x `frames` taps.
pub fn random_ir(channels: usize, frames: usize, seed: u64) -> ImpulseResponse {
    let mut n = Noise::new(seed);
    ImpulseResponse::new((0..channels).map(|_| n.vec(frames)).collect(), 48_000).unwrap()
}

/// Planar random input, `channels` x `frames`.
pub fn random_input(channels: usize, frames: usize, seed: u64) -> Vec<Vec<f32>> {
    let mut n = Noise::new(seed);
    (0..channels).map(|_| n.vec(frames)).collect()
}

/// Streams `input` (zero-padded to `total` frames) through `engine` in host calls whose sizes come from
/// `next_size`, and returns `total` output frames per output.
pub fn stream(
    engine: &mut Engine,
    input: &[Vec<f32>],
    total: usize,
    mut next_size: impl FnMut() -> usize,
) -> Vec<Vec<f32>> {
    let padded = padded(input, total);
    let mut out = vec![vec![0.0f32; total]; engine.outputs()];
    let mut at = 0;
    while at < total {
        let n = next_size().clamp(1, engine.max_host_frames()).min(total - at);
        let ins: Vec<&[f32]> = padded.iter().map(|x| &x[at..at + n]).collect();
        let mut outs: Vec<&mut [f32]> = out.iter_mut().map(|y| &mut y[at..at + n]).collect();
        engine.process(&ins, &mut outs).unwrap();
        at += n;
    }
    out
}

/// `input` zero-padded (or cut) to `total` frames per channel.
pub fn padded(input: &[Vec<f32>], total: usize) -> Vec<Vec<f32>> {
    input
        .iter()
        .map(|x| {
            let mut v = x.clone();
            v.resize(total, 0.0);
            v
        })
        .collect()
}

/// The planner's default, automatic schedule (`Planner::new()`, default headroom) for an engine of
/// `shape` called every `host` frames, costed for a machine 100 times slower than the flop model's so that
/// even the short IRs of tests need levels out of the callback; checked to have some.
pub fn auto_plan(zero: bool, ir_frames: usize, block: usize, shape: partita_core::Shape, host: usize) -> Plan {
    let slow = partita_core::CostModel::Flops { flops_per_second: 24e7 };
    let plan = partita_core::Planner::new()
        .block_frames(block)
        .zero_latency(zero)
        .shape(shape)
        .cost_model(slow)
        .host_period_frames(host)
        .plan(ir_frames)
        .unwrap();
    assert!(plan.levels.iter().any(|l| l.schedule != partita_core::Schedule::Sync), "auto: {plan:?}");
    plan
}

/// `Some(schedule)`'s plan from [`scheduled_plan`], or `None`'s from [`auto_plan`] (called every block).
pub fn plan_for_choice(
    choice: Option<partita_core::Schedule>,
    zero: bool,
    ir_frames: usize,
    block: usize,
    shape: partita_core::Shape,
) -> Plan {
    match choice {
        Some(s) => scheduled_plan(s, zero, ir_frames, block),
        None => auto_plan(zero, ir_frames, block, shape, block),
    }
}

/// A schedule choice's name: the schedule's, or `auto`.
pub fn choice_name(choice: Option<partita_core::Schedule>) -> &'static str {
    choice.map_or("auto", |s| s.as_str())
}

/// A plan from the optimal planner with `schedule` for the levels above the block (sliced and worker
/// levels allowed at any size), checked to use that schedule.
pub fn scheduled_plan(schedule: partita_core::Schedule, zero: bool, ir_frames: usize, block: usize) -> Plan {
    let plan = partita_core::Planner::new()
        .block_frames(block)
        .zero_latency(zero)
        .schedule(schedule)
        .min_sliced_frames(0)
        .min_worker_frames(0)
        .plan(ir_frames)
        .unwrap();
    if schedule != partita_core::Schedule::Sync {
        assert!(plan.levels.iter().any(|l| l.schedule == schedule), "{:?}", plan.levels);
    }
    plan
}

/// Random host-call sizes in 1..=max, seeded.
pub fn random_sizes(seed: u64, max: usize) -> impl FnMut() -> usize {
    let mut n = Noise::new(seed);
    move || n.range(1, max)
}

/// The oracle's output for `input` through `ir` with `routing`, delayed by `latency` frames, `total` long.
pub fn oracle(
    input: &[Vec<f32>],
    ir: &ImpulseResponse,
    routing: Routing,
    latency: usize,
    total: usize,
) -> Vec<Vec<f64>> {
    let map = routing.resolve(ir.channels()).unwrap();
    let pairs: Vec<(usize, usize, usize)> = map.paths.iter().map(|p| (p.input, p.output, p.ir_channel)).collect();
    naive::convolve_routed(input, ir.as_planar(), &pairs, map.outputs)
        .into_iter()
        .map(|y| {
            let mut v = vec![0.0f64; latency];
            v.extend(y);
            v.resize(total, 0.0);
            v
        })
        .collect()
}

/// Builds an engine, streams `input` with random call sizes, and checks every output against the oracle
/// with the DESIGN.md bound. Returns the worst (max over peak, relative RMS) seen.
pub fn check_against_oracle(
    plan: &Plan,
    ir: &ImpulseResponse,
    routing: Routing,
    input_frames: usize,
    seed: u64,
) -> (f64, f64) {
    let max_host = 1 + (seed as usize * 37) % 700;
    // Callbacks here come far faster than real time: let worker levels be waited for.
    let options = EngineOptions { lateness: Lateness::Wait, ..EngineOptions::new(max_host) };
    let mut engine = Engine::with_options(plan, ir, routing, options).unwrap();
    let input = random_input(routing.inputs(), input_frames, seed ^ 0xABCD);
    let total = input_frames + ir.frames() - 1 + engine.latency_frames();
    let got = stream(&mut engine, &input, total, random_sizes(seed, max_host));
    let want = oracle(&input, ir, routing, engine.latency_frames(), total);
    let mut worst = (0.0f64, 0.0f64);
    for (o, (g, w)) in got.iter().zip(&want).enumerate() {
        let e = partita_testkit::ErrorBound::measure(g, w);
        e.assert_design_bound(&format!(
            "{routing:?} B={} L={} output {o} plan {:?}",
            plan.block_frames,
            ir.frames(),
            plan.levels
        ));
        worst = (worst.0.max(e.max_over_peak), worst.1.max(e.relative_rms));
    }
    worst
}

/// The documented crossfade weight of the new IR at output frame `n` (partita_core::control): a raised
/// cosine from `fade_start` (0) to `fade_end` (1).
pub fn swap_weight(r: &partita_core::SwapReport, n: usize) -> f64 {
    let n = n as u64;
    if n < r.fade_start {
        0.0
    } else if n >= r.fade_end {
        1.0
    } else {
        let t = (n - r.fade_start) as f64 / (r.fade_end - r.fade_start) as f64;
        0.5 - 0.5 * (std::f64::consts::PI * t).cos()
    }
}

/// What a stream with swaps should sound like: `outs[id]` is the oracle output (one channel) of the IR
/// with that id; `reports` are the swaps in order, starting from IR `first`. Between fades the IR heard
/// alone, during one `(1 - w) old + w new`.
pub fn swapped_output(outs: &[&[f64]], first: u64, reports: &[partita_core::SwapReport], total: usize) -> Vec<f64> {
    let mut current = first as usize;
    let mut next = 0usize;
    (0..total)
        .map(|n| {
            while next < reports.len() && (n as u64) >= reports[next].fade_end {
                assert_eq!(reports[next].old_id as usize, current, "swaps chain old -> new");
                current = reports[next].new_id as usize;
                next += 1;
            }
            match reports.get(next).filter(|r| n as u64 >= r.fade_start) {
                Some(r) => {
                    let w = swap_weight(r, n);
                    (1.0 - w) * outs[current][n] + w * outs[r.new_id as usize][n]
                }
                None => outs[current][n],
            }
        })
        .collect()
}

/// A gain as the engine ramps it: each change at output frame `frame` ramps linearly from the value
/// then to the target over `ramp` frames (sample k after the change carries (k + 1) / ramp of the way).
pub fn ramped_gain(initial: f64, changes: &[(u64, f64)], ramp: usize, total: usize) -> Vec<f64> {
    let (mut value, mut from, mut target, mut k, mut frames) = (initial, initial, initial, 0usize, 0usize);
    let mut next = 0;
    (0..total)
        .map(|n| {
            while next < changes.len() && changes[next].0 as usize == n {
                from = value;
                target = changes[next].1;
                k = 0;
                frames = ramp;
                next += 1;
            }
            if k < frames {
                k += 1;
                value = if k == frames { target } else { from + (target - from) * k as f64 / frames as f64 };
            }
            value
        })
        .collect()
}
