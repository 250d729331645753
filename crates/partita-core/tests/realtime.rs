//! Real-time safety: every audio-path call runs under an allocation-trapping global allocator.
//! The trap counts heap operations (alloc, realloc, free) on the armed thread, in debug and release.

mod support;

use partita_core::synth::Noise;
use partita_core::{Engine, Level, Plan, Schedule};
use partita_testkit::{armed, TrapAllocator};
use support::*;

#[global_allocator]
static ALLOC: TrapAllocator = TrapAllocator;

fn plans(ir_frames: usize) -> Vec<Plan> {
    let b = 32;
    let zero = Plan {
        block_frames: b,
        zero_latency: true,
        head_frames: b,
        levels: vec![Level {
            block_frames: b,
            partitions: (ir_frames - b).div_ceil(b),
            offset_frames: b,
            schedule: Schedule::Sync,
        }],
        ir_frames,
    };
    let two_level = Plan {
        block_frames: b,
        zero_latency: false,
        head_frames: 0,
        levels: vec![
            Level { block_frames: b, partitions: 4, offset_frames: 0, schedule: Schedule::Sync },
            Level {
                block_frames: 4 * b,
                partitions: (ir_frames - 4 * b).div_ceil(4 * b),
                offset_frames: 4 * b,
                schedule: Schedule::Sync,
            },
        ],
        ir_frames,
    };
    vec![Plan::uniform(b, ir_frames).unwrap(), zero, two_level]
}

#[test]
fn process_never_touches_the_heap() {
    for plan in plans(2000) {
        for (routing, channels) in routings() {
            let ir = random_ir(channels, 2000, 3);
            let max_host = 300;
            let mut engine = Engine::new(&plan, &ir, routing, max_host).unwrap();
            let mut sizes = Noise::new(77);
            let input = random_input(routing.inputs(), max_host, 4);
            let mut output = vec![vec![0.0f32; max_host]; routing.outputs()];
            let calls: Vec<usize> = (0..400).map(|_| sizes.range(1, max_host)).collect();
            let (ni, no) = (routing.inputs(), routing.outputs());
            let ((), heap_ops) = armed(|| {
                for (k, &n) in calls.iter().enumerate() {
                    // Stack arrays of slices: nothing here may allocate.
                    let mut ins: [&[f32]; 3] = Default::default();
                    for (slot, x) in ins.iter_mut().zip(&input) {
                        *slot = &x[..n];
                    }
                    let mut outs: [&mut [f32]; 3] = Default::default();
                    for (slot, y) in outs.iter_mut().zip(output.iter_mut()) {
                        *slot = &mut y[..n];
                    }
                    engine.process(&ins[..ni], &mut outs[..no]).unwrap();
                    if k == 200 {
                        engine.reset();
                    }
                }
                // Error paths stay heap-free too.
                assert!(engine.process(&[], &mut []).is_err());
            });
            assert_eq!(heap_ops, 0, "{routing:?} plan {:?}: process() touched the heap", plan.levels);
            assert!(engine.monitor().frames_processed() > 0);
        }
    }
}

#[test]
fn the_trap_catches_an_allocation_made_on_purpose() {
    let (v, heap_ops) = armed(|| std::hint::black_box(vec![1u8; 64]));
    assert!(heap_ops >= 1, "the trap missed an allocation");
    let ((), frees) = armed(|| drop(v));
    assert!(frees >= 1, "the trap missed a free");
}
