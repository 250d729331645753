//! Offline rendering against the direct-form oracle: full-length output with the latency removed, the
//! same result from 1, 2 and 3 threads (segment overlap-add), progress reports, and edge cases.
//! Bound: DESIGN.md section 4 (`partita_testkit::ErrorBound`).

use std::sync::Mutex;

use partita_core::offline::{self, RenderError, MIN_SEGMENT_FRAMES};
use partita_core::synth::{decaying_noise, Noise};
use partita_core::{naive, EngineError, ImpulseResponse, Plan, PlanMode, Planner, Routing, Schedule, Shape};
use partita_testkit::ErrorBound;

fn ir(channels: usize, frames: usize, seed: u64) -> ImpulseResponse {
    let taps = (0..channels).map(|c| decaying_noise(frames, frames as f64 / 2.0, seed + c as u64)).collect();
    ImpulseResponse::new(taps, 48_000).unwrap()
}

fn input(channels: usize, frames: usize, seed: u64) -> Vec<Vec<f32>> {
    let mut n = Noise::new(seed);
    (0..channels).map(|_| n.vec(frames)).collect()
}

fn oracle(x: &[Vec<f32>], ir: &ImpulseResponse, routing: Routing) -> Vec<Vec<f64>> {
    let map = routing.resolve(ir.channels()).unwrap();
    let pairs: Vec<_> = map.paths.iter().map(|p| (p.input, p.output, p.ir_channel)).collect();
    naive::convolve_routed(x, ir.as_planar(), &pairs, map.outputs)
}

fn check(context: &str, got: &[Vec<f32>], want: &[Vec<f64>]) {
    assert_eq!(got.len(), want.len(), "{context}: output count");
    for (o, (g, w)) in got.iter().zip(want).enumerate() {
        assert_eq!(g.len(), w.len(), "{context}: output {o} length");
        ErrorBound::measure(g, w).assert_design_bound(&format!("{context}, output {o}"));
    }
}

/// Several plans (block latency and zero latency, uniform and non-uniform, worker schedules that render
/// must run synchronously), three routings, 1 to 3 threads; inputs long enough to be split.
#[test]
fn render_matches_the_oracle_for_every_routing_and_thread_count() {
    let frames = 2 * MIN_SEGMENT_FRAMES + 1234; // three segments with 3 threads
    for (routing, channels) in [(Routing::Mono, 1), (Routing::Stereo, 2), (Routing::TrueStereo, 4)] {
        let h = ir(channels, 3001, channels as u64);
        let x = input(routing.inputs(), frames, 17 + channels as u64);
        let want = oracle(&x, &h, routing);
        let shape = Shape::of(&routing.resolve(channels).unwrap());
        let plans = [
            ("offline", offline::offline_plan(h.frames(), shape).unwrap()),
            ("uniform-64", Plan::uniform(64, h.frames()).unwrap()),
            ("optimal-32", Planner::new().block_frames(32).plan(h.frames()).unwrap()),
            ("zero-16", Planner::new().block_frames(16).zero_latency(true).plan(h.frames()).unwrap()),
            (
                "workers-64",
                Planner::new()
                    .block_frames(64)
                    .schedule(Schedule::Workers)
                    .min_worker_frames(0)
                    .max_level_frames(512)
                    .plan(h.frames())
                    .unwrap(),
            ),
        ];
        for (name, plan) in &plans {
            let mut first: Option<Vec<Vec<f32>>> = None;
            for threads in 1..=3 {
                let got = offline::render(plan, &h, routing, &x, threads, None).unwrap();
                check(&format!("{routing:?} {name} threads {threads}"), &got, &want);
                // Segments change the rounding only: every thread count agrees with one thread too.
                match &first {
                    None => first = Some(got),
                    Some(one) => {
                        for (a, b) in got.iter().zip(one) {
                            let b64: Vec<f64> = b.iter().map(|&v| f64::from(v)).collect();
                            ErrorBound::measure(a, &b64).assert_design_bound(&format!("{name} {threads} vs 1"));
                        }
                    }
                }
            }
        }
    }
}

#[test]
fn segments_shorter_than_the_ir_still_sum_correctly() {
    // The IR is longer than every segment, so each segment's tail overlaps several later segments.
    let frames = 3 * MIN_SEGMENT_FRAMES;
    let h = ir(2, 2 * MIN_SEGMENT_FRAMES + 77, 5);
    let x = input(2, frames, 6);
    let plan = Planner::new().block_frames(256).plan(h.frames()).unwrap();
    let want = oracle(&x, &h, Routing::Stereo);
    for threads in [2, 3, 0] {
        let got = offline::render(&plan, &h, Routing::Stereo, &x, threads, None).unwrap();
        check(&format!("long IR threads {threads}"), &got, &want);
    }
}

#[test]
fn progress_is_monotonic_and_ends_at_the_total() {
    let h = ir(2, 5000, 1);
    let x = input(2, 3 * MIN_SEGMENT_FRAMES + 5, 2);
    let plan = offline::offline_plan(h.frames(), Shape { inputs: 2, outputs: 2, paths: 2 }).unwrap();
    for threads in [1, 2, 3] {
        let seen = Mutex::new(Vec::<(u64, u64)>::new());
        let cb = |done: u64, total: u64| seen.lock().unwrap().push((done, total));
        offline::render(&plan, &h, Routing::Stereo, &x, threads, Some(&cb)).unwrap();
        let seen = seen.into_inner().unwrap();
        assert!(seen.len() >= 3, "threads {threads}: only {} reports", seen.len());
        let total = seen[0].1;
        assert_eq!(seen[0].0, 0, "first report is 0");
        assert!(seen.iter().all(|&(_, t)| t == total), "total changed");
        assert!(seen.windows(2).all(|w| w[1].0 > w[0].0), "threads {threads}: not increasing: {seen:?}");
        assert_eq!(seen.last().unwrap().0, total, "threads {threads}: last report is the total");
        // Work counted: every segment's input plus its tail of ir_frames - 1 + latency.
        let segments = threads as u64;
        let tail = (h.frames() - 1 + plan.latency_frames()) as u64;
        assert_eq!(total, x[0].len() as u64 + segments * tail, "threads {threads}");
    }
}

#[test]
fn empty_and_short_inputs() {
    let h = ir(1, 700, 3);
    let plan = offline::offline_plan(h.frames(), Shape::MONO).unwrap();
    // Empty input: empty output, one progress report of (0, 0).
    let seen = Mutex::new(Vec::new());
    let cb = |d: u64, t: u64| seen.lock().unwrap().push((d, t));
    let y = offline::render(&plan, &h, Routing::Mono, &[Vec::<f32>::new()], 3, Some(&cb)).unwrap();
    assert_eq!(y, vec![Vec::<f32>::new()]);
    assert_eq!(seen.into_inner().unwrap(), vec![(0, 0)]);
    // One frame, a few frames, and fewer frames than the block: still the full convolution.
    for frames in [1usize, 2, 5, 255] {
        let x = input(1, frames, frames as u64);
        let want = oracle(&x, &h, Routing::Mono);
        for threads in [1, 4] {
            let got = offline::render(&plan, &h, Routing::Mono, &x, threads, None).unwrap();
            check(&format!("{frames} frames, threads {threads}"), &got, &want);
        }
    }
    // A one-tap IR is a gain: output as long as the input.
    let one = ImpulseResponse::new(vec![vec![0.5]], 48_000).unwrap();
    let x = input(1, 100, 9);
    let got = offline::render(&Plan::uniform(64, 1).unwrap(), &one, Routing::Mono, &x, 2, None).unwrap();
    let gain: Vec<f64> = x[0].iter().map(|&v| 0.5 * f64::from(v)).collect();
    check("one tap", &got, &[gain]);
}

#[test]
fn bad_arguments_are_errors() {
    let h = ir(2, 100, 3);
    let plan = Plan::uniform(64, 100).unwrap();
    let x = input(2, 50, 1);
    let err = offline::render(&plan, &h, Routing::Stereo, &x[..1], 1, None).unwrap_err();
    assert_eq!(err, RenderError::InputCount { expected: 2, got: 1 });
    let uneven = vec![x[0].clone(), x[1][..20].to_vec()];
    let err = offline::render(&plan, &h, Routing::Stereo, &uneven, 1, None).unwrap_err();
    assert_eq!(err, RenderError::UnequalInputs { input: 1, frames: 20, expected: 50 });
    let err = offline::render(&plan, &h, Routing::TrueStereo, &x, 1, None).unwrap_err();
    assert!(matches!(err, RenderError::Engine(EngineError::Routing(_))), "{err}");
    let short = Plan::uniform(16, 32).unwrap();
    let err = offline::render(&short, &h, Routing::Stereo, &x, 1, None).unwrap_err();
    assert!(matches!(err, RenderError::Engine(EngineError::IrLongerThanPlan { .. })), "{err}");
    assert!(err.to_string().contains("plan"), "{err}");
}

#[test]
fn the_offline_plan_is_valid_and_cheap() {
    for taps in [1usize, 100, 24_000, 96_000, 480_000] {
        let plan = offline::offline_plan(taps, Shape::MONO).unwrap();
        plan.validate().unwrap();
        assert!(plan.covered_frames() >= taps);
        assert!(plan.levels.iter().all(|l| l.schedule == Schedule::Sync));
        // Never dearer (flop model) than a uniform plan of the same block.
        let uniform = Planner::new().block_frames(plan.block_frames).mode(PlanMode::Uniform).plan(taps).unwrap();
        assert!(plan.flops_per_sample() <= uniform.flops_per_sample() + 1e-9, "{taps}: {plan:?}");
    }
    assert!(offline::offline_plan(0, Shape::MONO).is_err());
}

/// `render_with_mix` against the oracle mixed by hand (published: output = gain x (wet x (x * h) delayed by
/// the pre-delay + dry x x), the mix `Mix` documents), over 1 and 3 threads, mono and stereo, with and
/// without a zero-latency head; and the same engine streamed live with `EngineOptions::mix`, its latency
/// removed, gives the same samples (the live and offline paths share one mixer).
#[test]
fn render_with_mix_applies_the_engines_own_mix() {
    use partita_core::{Engine, EngineOptions, Mix};
    let frames = 2 * MIN_SEGMENT_FRAMES + 777;
    let mix = Mix { wet: 0.35, dry: 0.65, output_gain_db: -3.0, predelay_frames: 300, bypass: false };
    for (routing, ir_channels) in [(Routing::Mono, 1), (Routing::Stereo, 2), (Routing::MonoToStereo, 2)] {
        let h = ir(ir_channels, 3000, 40);
        let x = input(routing.inputs(), frames, 41);
        let conv = oracle(&x, &h, routing);
        let g = 10f64.powf(-3.0 / 20.0);
        let want: Vec<Vec<f64>> = conv
            .iter()
            .enumerate()
            .map(|(o, c)| {
                let src = if routing.inputs() == 1 { 0 } else { o };
                (0..frames + h.frames() + mix.predelay_frames - 1)
                    .map(|n| {
                        let wet = n.checked_sub(mix.predelay_frames).and_then(|k| c.get(k)).copied().unwrap_or(0.0);
                        let dry = x[src].get(n).map_or(0.0, |&v| f64::from(v));
                        g * (0.35f32 as f64 * wet + 0.65f32 as f64 * dry)
                    })
                    .collect()
            })
            .collect();
        for zero in [false, true] {
            let plan = Planner::new().block_frames(64).zero_latency(zero).plan(h.frames()).unwrap();
            for threads in [1, 3] {
                let got = offline::render_with_mix(&plan, &h, routing, &mix, &x, threads, None).unwrap();
                check(&format!("{routing:?}, zero latency {zero}, {threads} threads"), &got, &want);
            }
            // Streamed live in host calls of 100 frames, started at the same mix.
            let options = EngineOptions { max_predelay_frames: 300, mix, ..EngineOptions::new(100) };
            let mut engine = Engine::with_options(&plan, &h, routing, options).unwrap();
            let lat = engine.latency_frames();
            let total = want[0].len() + lat;
            let xs: Vec<Vec<f32>> =
                x.iter().map(|c| (0..total).map(|n| c.get(n).copied().unwrap_or(0.0)).collect()).collect();
            let mut ys = vec![vec![0.0f32; total]; engine.outputs()];
            for at in (0..total).step_by(100) {
                let end = (at + 100).min(total);
                let ins: Vec<&[f32]> = xs.iter().map(|c| &c[at..end]).collect();
                let mut outs: Vec<&mut [f32]> = ys.iter_mut().map(|c| &mut c[at..end]).collect();
                engine.process(&ins, &mut outs).unwrap();
            }
            let live: Vec<Vec<f32>> = ys.into_iter().map(|c| c[lat..].to_vec()).collect();
            check(&format!("{routing:?} streamed, zero latency {zero}"), &live, &want);
        }
    }
}

/// A dry signal or bypass where the shape has no dry path is refused before any work; the default mix
/// renders such a shape as before.
#[test]
fn render_with_mix_refuses_a_dry_signal_without_a_dry_path() {
    use partita_core::{Mix, MixError};
    let routing = Routing::Matrix { inputs: 2, outputs: 3 };
    let h = ir(6, 200, 50);
    let plan = Plan::uniform(64, 200).unwrap();
    let x = input(2, 1000, 51);
    let dry = Mix { dry: 0.5, ..Mix::default() };
    let err = offline::render_with_mix(&plan, &h, routing, &dry, &x, 1, None).unwrap_err();
    assert_eq!(err, RenderError::Engine(EngineError::Mix(MixError::NoDryPath { inputs: 2, outputs: 3 })));
    assert!(err.to_string().contains("no dry signal"), "{err}");
    let wet_only = offline::render_with_mix(&plan, &h, routing, &Mix::default(), &x, 1, None).unwrap();
    check("2x3 matrix, default mix", &wet_only, &oracle(&x, &h, routing));
}
