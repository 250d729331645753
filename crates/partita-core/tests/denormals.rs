//! Input that decays into the subnormal range (DESIGN.md T9; the load figure is a bench case, see
//! docs/benchmarks/control.md). Here: the output stays correct while the input is normal, carries no subnormal value
//! once the input is subnormal (flush-to-zero is on in `process()` and in every worker, whose threads
//! report their mode; a test switch that starts them without it shows the check failing), and the
//! caller's floating-point mode is back after each call.

mod support;

use partita_core::{Engine, EngineOptions, Lateness, Planner, Routing, Schedule};
use partita_testkit::ErrorBound;
use support::*;

/// Noise whose envelope falls by 1e-3 per 1000 frames: below f32::MIN_POSITIVE (1.18e-38, the
/// smallest normal f32, IEEE 754) after about 13,000 frames, then held at subnormal amplitudes.
fn decaying_input(frames: usize, seed: u64) -> Vec<Vec<f32>> {
    let noise = random_input(2, frames, seed);
    noise
        .into_iter()
        .map(|x| {
            x.iter()
                .enumerate()
                .map(|(i, &v)| {
                    let env = 10f64.powf(-3.0 * i as f64 / 1000.0).max(1e-44);
                    (f64::from(v) * env) as f32
                })
                .collect()
        })
        .collect()
}

fn subnormal(v: f32) -> bool {
    v != 0.0 && v.abs() < f32::MIN_POSITIVE
}

#[test]
fn subnormal_input_is_flushed_and_the_callers_mode_restored() {
    let frames = 40_000;
    let input = decaying_input(frames, 5);
    let first_subnormal = input[0].iter().position(|&v| subnormal(v)).expect("the input reaches subnormals");
    assert!(first_subnormal < 20_000, "{first_subnormal}");
    for schedule in [Schedule::Sync, Schedule::Workers, Schedule::Sliced] {
        let ir = random_ir(2, 4000, 6);
        let plan = Planner::new()
            .block_frames(32)
            .schedule(schedule)
            .min_sliced_frames(0)
            .min_worker_frames(0)
            .plan(4000)
            .unwrap();
        let options = EngineOptions { lateness: Lateness::Wait, ..EngineOptions::new(256) };
        let mut engine = Engine::with_options(&plan, &ir, Routing::Stereo, options).unwrap();
        // Every worker thread reports flush-to-zero on (read from its own MXCSR / FPCR when it started).
        let modes = engine.worker_flush_modes();
        assert_eq!(modes.len(), engine.worker_threads(), "{schedule:?}");
        assert!(modes.iter().all(|&on| on), "{schedule:?}: a worker runs without flush-to-zero: {modes:?}");
        let lat = engine.latency_frames();
        let total = frames + lat;
        let mut out = vec![vec![0.0f32; total]; 2];
        let mut sizes = random_sizes(7, 256);
        let mut at = 0;
        while at < total {
            let n = sizes().min(total - at);
            let src = |c: usize| if at < frames { &input[c][at..(at + n).min(frames)] } else { &[][..] };
            let mut ins = [vec![0.0f32; n], vec![0.0f32; n]];
            for (c, buf) in ins.iter_mut().enumerate() {
                buf[..src(c).len()].copy_from_slice(src(c));
            }
            let (l, r) = out.split_at_mut(1);
            engine.process(&[&ins[0], &ins[1]], &mut [&mut l[0][at..at + n], &mut r[0][at..at + n]]).unwrap();
            // The caller's mode is back: a subnormal result is not flushed here.
            let tiny = std::hint::black_box(f32::MIN_POSITIVE);
            assert!(std::hint::black_box(tiny * 0.5) > 0.0, "{schedule:?}: flush-to-zero leaked out of process()");
            at += n;
        }
        // While the input is normal the output is the convolution (the flushed part of the input is
        // below 1e-38 of its peak, far under the bound).
        let want = oracle(&input, &ir, Routing::Stereo, lat, total);
        let normal_until = first_subnormal.min(10_000);
        for c in 0..2 {
            ErrorBound::measure(&out[c][..normal_until], &want[c][..normal_until])
                .assert_design_bound(&format!("{schedule:?} output {c}"));
            let tail = &out[c][first_subnormal + lat + 4000..];
            assert!(!tail.iter().any(|&v| subnormal(v)), "{schedule:?}: a subnormal reached the output");
        }
    }
    // The workers' check can fail: with the test switch, worker threads start without flush-to-zero and
    // say so. (One test in this binary: the switch is process-wide.)
    partita_core::hooks::set_workers_without_flush(true);
    let plan = Planner::new().block_frames(32).schedule(Schedule::Workers).min_worker_frames(0).plan(4000).unwrap();
    let engine = Engine::new(&plan, &random_ir(2, 4000, 6), Routing::Stereo, 256).unwrap();
    partita_core::hooks::set_workers_without_flush(false);
    let modes = engine.worker_flush_modes();
    assert!(
        !modes.is_empty() && modes.iter().all(|&on| !on),
        "the switch must show in the workers' reports: {modes:?}"
    );
}
