//! Real-time safety on every thread: worker and sliced schedules run under an allocation trap armed for
//! the whole process, so the worker threads' job loops are covered, not only the audio thread.
//! One test only in this binary: an all-threads trap would count other tests' allocations.

mod support;

use std::time::Duration;

use partita_core::{Engine, Planner, Routing, Schedule};
use partita_testkit::{armed_all_threads, TrapAllocator};
use support::*;

#[global_allocator]
static ALLOC: TrapAllocator = TrapAllocator;

#[test]
fn workers_and_sliced_levels_never_touch_the_heap_on_any_thread() {
    for (schedule, zero) in
        [(Schedule::Workers, false), (Schedule::Workers, true), (Schedule::Sliced, false), (Schedule::Sliced, true)]
    {
        for (routing, channels) in [(Routing::Stereo, 2usize), (Routing::TrueStereo, 4)] {
            let ir = random_ir(channels, 30_000, 7);
            let plan = Planner::new()
                .block_frames(32)
                .zero_latency(zero)
                .schedule(schedule)
                .min_sliced_frames(0)
                .min_worker_frames(0)
                .plan(30_000)
                .unwrap();
            assert!(plan.levels.iter().any(|l| l.schedule == schedule), "{:?}", plan.levels);
            let mut engine = Engine::new(&plan, &ir, routing, 256).unwrap();
            let monitor = engine.monitor();
            let input = random_input(2, 256, 8);
            let mut output = vec![vec![0.0f32; 256]; 2];
            let sizes: Vec<usize> = {
                let mut n = partita_core::synth::Noise::new(3);
                (0..3000).map(|_| n.range(1, 256)).collect()
            };
            let ((), heap_ops) = armed_all_threads(|| {
                for (k, &n) in sizes.iter().enumerate() {
                    let (a, b) = output.split_at_mut(1);
                    engine.process(&[&input[0][..n], &input[1][..n]], &mut [&mut a[0][..n], &mut b[0][..n]]).unwrap();
                    if k % 500 == 250 {
                        // Give the workers time to run jobs while the trap is armed.
                        std::thread::sleep(Duration::from_millis(2));
                    }
                    if k == 1500 {
                        engine.reset();
                    }
                }
                std::thread::sleep(Duration::from_millis(20));
            });
            assert_eq!(heap_ops, 0, "{schedule} zero={zero} {routing:?}: heap touched on some thread");
            assert!(monitor.frames_processed() > 0);
            if schedule == Schedule::Workers {
                assert!(monitor.worker_cpu_seconds() > 0.0, "the workers did run");
            }
        }
    }
}
