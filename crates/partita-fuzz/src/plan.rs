//! Plan parsing and validation: `--levels` text through [`Planner::parse_levels`] and
//! [`Planner::custom`], and plan JSON (the serde form of [`Plan`]) through [`Plan::validate`]; then an
//! engine built from every accepted plan small enough to run here, and a short run.
//!
//! Contract: text that is not a level list is refused with [`PlanError::LevelsText`]; a refused plan gets a
//! [`PlanError`] with a message; an accepted plan passes [`Plan::validate`], covers its IR and stays within
//! [`Plan::MAX_COVERED_FRAMES`]; an engine built from it (a decaying-noise IR of the plan's length) answers
//! an impulse with its IR, delayed by `latency_frames()`, within the repository's error bound, and its
//! output is finite.

use partita_core::{Engine, EngineOptions, ImpulseResponse, Plan, PlanError, Planner, Routing, Schedule};

use crate::input::Input;
use crate::memory;

/// Accepted plans up to this many covered frames (and level blocks up to [`RUN_MAX_LEVEL_FRAMES`]) are
/// built into an engine and run; larger ones are only checked as data, to keep a run in milliseconds.
pub const RUN_MAX_COVERED_FRAMES: usize = 1 << 14;
/// See [`RUN_MAX_COVERED_FRAMES`].
pub const RUN_MAX_LEVEL_FRAMES: usize = 1 << 12;
/// And the run's multiply-accumulates, about (partitions in all levels) x (frames run), at most this: a
/// plan of 9231 one-frame partitions is valid but takes seconds to run here.
pub const RUN_MAX_MACS: usize = 1 << 22;

/// Plan parsing and validation on `data`: the first byte chooses `--levels` text (even) or plan JSON (odd).
///
/// # Panics
/// When the contract (module docs) is broken.
pub fn plan(data: &[u8]) {
    let mut input = Input::new(data);
    if input.flag() {
        levels_text(&mut input);
    } else {
        plan_json(input.rest());
    }
}

fn levels_text(input: &mut Input<'_>) {
    let block = match input.u8() % 12 {
        0 => input.size_u32() as usize,
        k => [1, 2, 3, 16, 32, 64, 100, 128, 256, 512, 1024][usize::from(k) - 1],
    };
    let flags = input.u8();
    let ir_frames = input.size_u32() as usize * if flags & 8 != 0 { 64 } else { 1 };
    let mut planner = Planner::new().block_frames(block).zero_latency(flags & 1 != 0);
    planner = match (flags >> 1) & 3 {
        0 => planner,
        1 => planner.schedule(Schedule::Sync),
        2 => planner.schedule(Schedule::Workers),
        _ => planner.schedule(Schedule::Sliced),
    };
    let text = String::from_utf8_lossy(input.rest());
    let levels = match Planner::parse_levels(&text) {
        Ok(levels) => levels,
        Err(e) => {
            assert!(matches!(e, PlanError::LevelsText { .. }), "parse_levels refused with {e:?}");
            assert!(!e.to_string().is_empty());
            return;
        }
    };
    assert!(!levels.is_empty(), "an empty level list from {text:?}");
    match planner.custom(&levels, ir_frames) {
        Ok(plan) => {
            assert_eq!(plan.levels.len(), levels.len(), "custom changed the level count");
            for (l, &(n, p)) in plan.levels.iter().zip(&levels) {
                assert_eq!((l.block_frames, l.partitions), (n, p), "custom changed a level");
            }
            check_plan(&plan);
        }
        Err(e) => assert!(!e.to_string().is_empty()),
    }
}

fn plan_json(bytes: &[u8]) {
    let Ok(plan) = serde_json::from_slice::<Plan>(bytes) else {
        return;
    };
    match plan.validate() {
        Ok(()) => check_plan(&plan),
        Err(e) => assert!(!e.to_string().is_empty()),
    }
}

/// Checks an accepted plan as data and, when it is small, builds and runs an engine on it.
pub(crate) fn check_plan(plan: &Plan) {
    if let Err(e) = plan.validate() {
        panic!("an accepted plan does not validate: {e}\n{plan:?}");
    }
    let covered = plan.covered_frames();
    assert!(covered >= plan.ir_frames, "the plan covers {covered} of {} frames", plan.ir_frames);
    assert!(covered <= Plan::MAX_COVERED_FRAMES, "an accepted plan covers {covered} frames");
    let largest = plan.levels.iter().map(|l| l.block_frames).max().unwrap_or(plan.block_frames);
    let macs = plan.levels.iter().map(|l| l.partitions).sum::<usize>().saturating_mul(covered + 2 * largest);
    if covered <= RUN_MAX_COVERED_FRAMES
        && largest <= RUN_MAX_LEVEL_FRAMES
        && plan.block_frames <= largest
        && macs <= RUN_MAX_MACS
    {
        impulse_check(plan);
    }
}

/// Builds a mono engine for `plan` with a decaying-noise IR of the plan's length and checks its answer to an
/// impulse against the IR.
fn impulse_check(plan: &Plan) {
    let taps = partita_core::synth::decaying_noise(plan.ir_frames, (plan.ir_frames as f64 / 3.0).max(1.0), 7);
    let ir = ImpulseResponse::new(vec![taps.clone()], 48_000).expect("finite taps");
    let b = plan.block_frames;
    let mut options = EngineOptions::new(b);
    // Calls come faster than real time here: worker results are waited for, not late.
    options.offline = true;
    // Engine memory: the spectra (16 bytes per bin, one bin per frame per level, x2 for the FFT size) plus
    // rings, scratch and a worker thread's buffers; well inside 256 bytes per covered or block frame.
    let rule = "256 x (covered frames + 8 x largest level block) + 4 MiB";
    let largest = plan.levels.iter().map(|l| l.block_frames).max().unwrap_or(b);
    let limit = 256 * (plan.covered_frames() + 8 * largest.max(b)) + (4 << 20);
    let mut engine =
        memory::bounded("building an engine", rule, limit, || Engine::with_options(plan, &ir, Routing::Mono, options))
            .unwrap_or_else(|e| panic!("a validated plan did not build: {e}\n{plan:?}"));
    let latency = engine.latency_frames();
    let total = latency + taps.len() + b;
    let mut out = Vec::with_capacity(total.next_multiple_of(b));
    let mut x = vec![0.0f32; b];
    let mut y = vec![0.0f32; b];
    while out.len() < total {
        x.fill(0.0);
        if out.is_empty() {
            x[0] = 1.0;
        }
        engine.process(&[&x], &mut [&mut y]).expect("calls of one block are accepted");
        out.extend_from_slice(&y);
    }
    let peak = taps.iter().fold(0f32, |m, v| m.max(v.abs()));
    for (n, &got) in out.iter().enumerate() {
        assert!(got.is_finite(), "output frame {n} is {got}");
        let want = n.checked_sub(latency).and_then(|k| taps.get(k)).copied().unwrap_or(0.0);
        assert!(
            (got - want).abs() <= 2e-5 * peak.max(1e-3),
            "impulse answer frame {n} (latency {latency}) is {got}, the IR says {want}\n{plan:?}"
        );
    }
}
