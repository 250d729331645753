//! Real-time safety of the control side: every audio-path operation (process with random call sizes,
//! swap pick-up, crossfade, retirement, gains, pre-delay, bypass, reset, status updates) runs under an
//! allocation trap armed for the whole process, worker threads included, with every schedule and the automatic choice.
//!
//! One test only in this binary: an all-threads trap would count another test's (or the harness's
//! reporting of it) allocations. The two-thread stress test is `control_stress.rs`.

mod support;

use partita_core::synth::Noise;
use partita_core::{Command, Engine, EngineOptions, Event, FadeState, Lateness, Routing, Schedule, Shape};
use partita_testkit::{armed_all_threads, TrapAllocator};
use support::*;

#[global_allocator]
static ALLOC: TrapAllocator = TrapAllocator;

#[test]
fn every_control_operation_on_the_audio_path_is_heap_free() {
    let choices = [
        (Some(Schedule::Sync), false),
        (Some(Schedule::Workers), true),
        (Some(Schedule::Sliced), false),
        (None, false),
    ];
    for (choice, zero) in choices {
        let schedule = choice_name(choice);
        let (routing, channels) = (Routing::TrueStereo, 4);
        let a = random_ir(channels, 8000, 1);
        let plan = plan_for_choice(choice, zero, 8000, 32, Shape { inputs: 2, outputs: 2, paths: 4 });
        let options = EngineOptions { lateness: Lateness::Wait, max_predelay_frames: 1000, ..EngineOptions::new(256) };
        let mut engine = Engine::with_options(&plan, &a, routing, options).unwrap();
        let mut control = engine.control().unwrap();
        // Prepared off the audio path; the shorter one fits the same levels.
        let mut spares = vec![control.prepare(&random_ir(channels, 8000, 2)).unwrap()];
        spares.push(control.prepare(&random_ir(channels, 3000, 3)).unwrap());
        spares.push(control.prepare(&a).unwrap());
        let input = random_input(2, 256, 4);
        let mut output = vec![vec![0.0f32; 256]; 2];
        let sizes: Vec<usize> = {
            let mut n = Noise::new(5);
            (0..6000).map(|_| n.range(1, 256)).collect()
        };
        let mut seen = Vec::with_capacity(16);
        let ((), heap_ops) = armed_all_threads(|| {
            for (k, &n) in sizes.iter().enumerate() {
                match k {
                    100 | 1500 | 3000 => {
                        let ir = spares.pop().expect("three spares");
                        let fade = [500, 2000, 0][(k / 1500).min(2)];
                        control.swap(ir, fade).expect("room in the swap queue");
                    }
                    200 => control.send(Command::WetGain(0.7)).unwrap(),
                    210 => control.send(Command::DryGain(0.3)).unwrap(),
                    220 => control.send(Command::OutputGainDb(-3.0)).unwrap(),
                    230 => control.send(Command::PreDelayFrames(700)).unwrap(),
                    240 => control.send(Command::Bypass(true)).unwrap(),
                    // Commands from the audio thread itself (a plugin's parameter events).
                    250 => engine.send(Command::WetGain(0.9)).unwrap(),
                    260 => engine.send(Command::OutputGainDb(-1.0)).unwrap(),
                    400 => control.send(Command::Bypass(false)).unwrap(),
                    2000 => control.send(Command::Reset).unwrap(),
                    2100 => control.send(Command::PreDelayFrames(0)).unwrap(),
                    _ => {}
                }
                let ins: [&[f32]; 2] = [&input[0][..n], &input[1][..n]];
                let (l, r) = output.split_at_mut(1);
                engine.process(&ins, &mut [&mut l[0][..n], &mut r[0][..n]]).unwrap();
                {
                    let s = control.status();
                    if seen.len() < seen.capacity() && seen.last() != Some(&s.fade_state) {
                        seen.push(s.fade_state);
                    }
                }
            }
        });
        assert_eq!(heap_ops, 0, "{schedule}: the audio path or a worker touched the heap");
        let events = control.poll();
        let retired = events.iter().filter(|e| matches!(e, Event::Retired { .. })).count();
        let applied = events.iter().filter(|e| matches!(e, Event::Applied { .. })).count();
        assert_eq!(retired, 3, "{schedule}: every swap finished and handed its old IR back");
        assert_eq!(applied, 10, "{schedule}: every command took effect (reset included)");
        let status = control.status();
        assert_eq!(status.swaps_completed, 3);
        assert!(seen.contains(&FadeState::Crossfading), "{schedule}: states seen {seen:?}");
        assert_eq!(status.events_dropped, 0);
        assert_eq!(status.ir_id, 1, "the last IR swapped in");
    }
}
