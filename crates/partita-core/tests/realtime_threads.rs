//! Real-time safety on every thread: worker, sliced and automatic (mixed) schedules run under an allocation trap armed for
//! the whole process, so the worker threads' job loops are covered, not only the audio thread.
//! One test only in this binary: an all-threads trap would count other tests' allocations.

mod support;

use std::time::Duration;

use partita_core::{Engine, Routing, Schedule, Shape};
use partita_testkit::{armed_all_threads, TrapAllocator};
use support::*;

#[global_allocator]
static ALLOC: TrapAllocator = TrapAllocator;

#[test]
fn workers_sliced_and_auto_levels_never_touch_the_heap_on_any_thread() {
    for (choice, zero) in [
        (Some(Schedule::Workers), false),
        (Some(Schedule::Workers), true),
        (Some(Schedule::Sliced), false),
        (Some(Schedule::Sliced), true),
        (None, false),
        (None, true),
    ] {
        let schedule = choice_name(choice);
        for (routing, channels) in [(Routing::Stereo, 2usize), (Routing::TrueStereo, 4)] {
            let ir = random_ir(channels, 30_000, 7);
            let shape = Shape::of(&routing.resolve(channels).unwrap());
            let plan = plan_for_choice(choice, zero, 30_000, 32, shape);
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
            if engine.worker_threads() > 0 {
                assert!(monitor.worker_cpu_seconds() > 0.0, "the workers did run");
            }
        }
    }
}
