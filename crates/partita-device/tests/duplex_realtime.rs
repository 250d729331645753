//! Real-time safety of the duplex JACK client's callbacks: the process callback (ports to scratch, the
//! engine with every level in the callback and with an automatic plan that moves levels out of it, the
//! safety stage), the xrun and latency callbacks, and the period-change callback for a period the engine
//! keeps, all run with the allocation trap armed on every thread of the process while a source and a
//! sink client stream through it. libjack's own threads allocate with C's malloc, which this trap does
//! not see; every Rust allocation in the process counts (the control thread's polls included).
//! The tests of this binary hold the JACK serial lock for their whole run: the trap counts every thread.
#![cfg(feature = "jack")]

mod support;

use std::time::{Duration, Instant};

use partita_core::synth::{decaying_noise, Noise};
use partita_core::{CostModel, Engine, EngineOptions, ImpulseResponse, Planner, Routing, Schedule};
use partita_device::{DuplexOptions, JackDuplex};
use partita_testkit::{armed_all_threads, TrapAllocator};
use support::*;

#[global_allocator]
static ALLOC: TrapAllocator = TrapAllocator;

#[test]
fn duplex_callbacks_never_touch_the_heap() {
    let _serial = serial();
    let Some(server) = jack_or_skip("duplex_callbacks_never_touch_the_heap", 64) else { return };
    let taps: Vec<Vec<f32>> = (0..2).map(|c| decaying_noise(24_000, 8000.0, c)).collect();
    let ir = ImpulseResponse::new(taps, 48_000).unwrap();
    for off_callback in [false, true] {
        // All levels in the callback, or the automatic schedule costed for a machine 100 times slower
        // than the flop model's, which moves levels to sliced or worker threads.
        let planner = Planner::new().block_frames(64).host_period_frames(64);
        let planner = if off_callback {
            planner.cost_model(CostModel::Flops { flops_per_second: 24e7 })
        } else {
            planner.schedule(Schedule::Sync)
        };
        let plan = planner.plan(ir.frames()).unwrap();
        assert_eq!(off_callback, plan.levels.iter().any(|l| l.schedule != Schedule::Sync), "{plan:?}");
        let options = EngineOptions { host_period_frames: Some(64), ..EngineOptions::new(4096) };
        let engine = Engine::with_options(&plan, &ir, Routing::Stereo, options).unwrap();
        let duplex = JackDuplex::open(&DuplexOptions { connect: false, ..DuplexOptions::default() }, 2, 2).unwrap();
        let name = duplex.client_name();
        let mut stream = duplex.start(engine, Box::new(|_, _| Err("no rebuild in this test".into()))).unwrap();
        let noise: Vec<f32> = Noise::new(3).vec(48_000 * 6).iter().map(|v| 0.2 * v).collect();
        let source = TestClient::start_named(
            "partita_source",
            Playlist { start: 0, channels: vec![noise.clone(), noise] },
            0,
            vec![format!("{name}:in_1"), format!("{name}:in_2")],
            vec![],
        );
        let sink = TestClient::start_named(
            "partita_sink",
            Playlist { start: 0, channels: vec![] },
            48_000 * 8,
            vec![],
            vec![format!("{name}:out_1"), format!("{name}:out_2")],
        );
        // Warm-up outside the trap (first-use paths: thread-locals of the CPU clock, lazy statics).
        std::thread::sleep(Duration::from_millis(500));
        let callbacks_before = stream.stats().output_callbacks;
        let ((), heap_ops) = armed_all_threads(|| {
            let until = Instant::now() + Duration::from_secs(2);
            while Instant::now() < until {
                assert!(stream.poll().is_none());
                std::thread::sleep(Duration::from_millis(20));
            }
        });
        // A period change the engine takes (shorter), outside the trap for jack_bufsize's own process,
        // then more callbacks at the new period inside it.
        server.set_period(32);
        std::thread::sleep(Duration::from_millis(300));
        let ((), heap_ops_after) = armed_all_threads(|| {
            let until = Instant::now() + Duration::from_secs(1);
            while Instant::now() < until {
                assert!(stream.poll().is_none());
                std::thread::sleep(Duration::from_millis(20));
            }
        });
        server.set_period(64);
        let stats = stream.stats();
        let callbacks = stats.output_callbacks - callbacks_before;
        drop(source.stop());
        let rec = sink.stop();
        let _ = stream.stop();
        eprintln!(
            "off_callback {off_callback}: {callbacks} callbacks, {heap_ops} + {heap_ops_after} heap operations; host \
             xruns {}",
            stats.host_xruns
        );
        assert!(callbacks > 1000, "the trap saw {callbacks} callbacks");
        assert!(rec[0].iter().any(|v| v.abs() > 1e-3), "the engine produced sound");
        assert_eq!(heap_ops + heap_ops_after, 0, "heap operations while the duplex client ran");
    }
}

/// The trap catches an allocation on a thread other than the arming one (so a zero above means none).
#[test]
fn the_trap_sees_other_threads() {
    let _serial = serial();
    let ((), n) = armed_all_threads(|| {
        std::thread::spawn(|| drop(std::hint::black_box(vec![1u8; 64]))).join().unwrap();
    });
    assert!(n >= 1);
}
