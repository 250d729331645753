//! The duplex JACK client ([`JackDuplex`]) against a real JACK server (dummy driver, 48 kHz), one
//! private server per test, run one at a time. Skipped with a message when no server can be started; a
//! failure then when `CI` is set.
//!
//! Every engine here is the one users get: the default planner (`auto` schedule, flop cost model, told
//! the server's period) and default engine options (default lateness policy).
#![cfg(feature = "jack")]

mod support;

use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

use partita_core::synth::{decaying_noise, Noise};
use partita_core::{naive, Engine, EngineOptions, ImpulseResponse, Planner, Routing, Schedule};
use partita_device::{DuplexOptions, DuplexStream, Fault, JackDuplex, RebuildFn, SafetyOptions, Stats};
use support::*;

const RATE: u32 = 48_000;

fn stereo_ir(frames: usize, gain: f32) -> ImpulseResponse {
    let taps = (0..2)
        .map(|c| decaying_noise(frames, frames as f64 / 4.0, 70 + c).iter().map(|v| gain * v).collect())
        .collect();
    ImpulseResponse::new(taps, RATE).unwrap()
}

/// The engine `partita monitor` builds: the default planner for host calls of `period` frames.
fn engine_for(
    ir: &ImpulseResponse,
    block: usize,
    zero_latency: bool,
    schedule: Option<Schedule>,
    period: usize,
) -> Engine {
    let mut planner = Planner::new().block_frames(block).host_period_frames(period).zero_latency(zero_latency);
    if let Some(s) = schedule {
        planner = planner.schedule(s);
    }
    let plan = planner.plan(ir.frames()).unwrap();
    let options = EngineOptions { host_period_frames: Some(period), ..EngineOptions::new(4096) };
    Engine::with_options(&plan, ir, Routing::Stereo, options).unwrap()
}

/// A rebuild function like monitor's: the same IR and block, planned for the new period.
fn rebuild_for(ir: &ImpulseResponse, block: usize, schedule: Option<Schedule>) -> RebuildFn {
    let ir = ir.clone();
    Box::new(move |rate, period| {
        if rate != RATE {
            return Err(format!("test IR is at {RATE} Hz, the server now runs at {rate} Hz"));
        }
        Ok(engine_for(&ir, block, false, schedule, period))
    })
}

/// `r` moved `by` frames earlier (later when negative), zero-filled.
fn shift(r: Vec<f32>, by: isize) -> Vec<f32> {
    if by >= 0 {
        r[by as usize..].to_vec()
    } else {
        let mut v = vec![0.0; (-by) as usize];
        v.extend(r);
        v
    }
}

fn no_fade() -> SafetyOptions {
    SafetyOptions { fade_in_ms: 0.0, ..SafetyOptions::default() }
}

/// Polls the stream as monitor does (every 20 ms) for `seconds`; returns the fault that ended it early.
fn run_for(stream: &mut DuplexStream, seconds: f64) -> Option<Fault> {
    let until = Instant::now() + Duration::from_secs_f64(seconds);
    while Instant::now() < until {
        if let Some(f) = stream.poll() {
            return Some(f);
        }
        std::thread::sleep(Duration::from_millis(20));
    }
    None
}

/// Latency JACK reports for a port, frames (the larger end of its range).
fn port_latency(port: &str, mode: jack::LatencyType) -> u32 {
    let (client, _) = jack::Client::new("partita_latency_probe", jack::ClientOptions::NO_START_SERVER).unwrap();
    let p = client.port_by_name(port).expect("port exists");
    p.get_latency_range(mode).1
}

fn report(what: &str, s: &Stats) {
    let t = s.callback_times;
    eprintln!(
        "{what}: {:.1} s, host xruns {}, preempted {}, ours {} (late callbacks {}, late results {}, engine errors {}); callback \
         p50 {:.1} us, p99 {:.1}, p99.9 {:.1}, max {:.1}; load {:.2}%; latency {:.3} ms",
        s.seconds,
        s.host_xruns,
        s.preempted_callbacks,
        s.overruns(),
        s.late_callbacks,
        s.late_results,
        s.engine_errors,
        t.p50_us,
        t.p99_us,
        t.p999_us,
        t.max_us,
        s.mean_load_pct,
        s.latency_ms
    );
}

/// A source client feeds Partita's inputs and a separate sink client records its outputs (no cycle):
/// the recording is the offline convolution (DESIGN.md bound) delayed by exactly the engine latency that
/// Partita registers on its ports (the capture latency of its outputs minus that of its inputs), for the
/// default block and for zero latency.
#[test]
fn impulse_delay_equals_the_registered_latency() {
    let _serial = serial();
    let Some(_server) = jack_or_skip("impulse_delay_equals_the_registered_latency", 64) else { return };
    let ir = stereo_ir(2400, 0.1);
    for zero_latency in [false, true] {
        // A server xrun can drop a client's cycle and so break the recording (not Partita's doing): such a
        // run is repeated, up to 4 times. A mismatch in a run without any xrun fails at once.
        for attempt in 1..=4 {
            let (verdict, stats) = impulse_run(&ir, zero_latency);
            match verdict {
                Ok(()) => break,
                Err(e) if stats.host_xruns == 0 => panic!("{e}, with no xrun: {stats:?}"),
                Err(e) if attempt < 4 => eprintln!("WARNING: {e} after {} host xruns; running again", stats.host_xruns),
                Err(e) => panic!("{e}; every one of 4 runs had host xruns that broke it (last: {})", stats.host_xruns),
            }
        }
    }
}

/// One run of [`impulse_delay_equals_the_registered_latency`]: the verdict on the recording, and the
/// run's counters.
fn impulse_run(ir: &ImpulseResponse, zero_latency: bool) -> (Result<(), String>, Stats) {
    let options = DuplexOptions { connect: false, safety: no_fade(), ..DuplexOptions::default() };
    let duplex = JackDuplex::open(&options, 2, 2).expect("duplex client");
    assert_eq!((duplex.sample_rate_hz(), duplex.period_frames()), (RATE, 64));
    let name = duplex.client_name();
    let engine = engine_for(ir, 64, zero_latency, None, 64);
    let engine_latency = engine.latency_frames();
    let mut stream = duplex.start(engine, rebuild_for(ir, 64, None)).expect("duplex starts");
    // An impulse on the left, noise on the right, from frame `start` of the source's timeline.
    let start = RATE as usize / 4;
    let mut left = vec![0.0f32; 4800];
    left[0] = 0.5;
    let right: Vec<f32> = Noise::new(5).vec(4800).iter().map(|v| 0.2 * v).collect();
    let capacity = start + 4800 + 2400 + 4800;
    // The source first; the sink records Partita's outputs and the source's third port (the
    // impulse as played), so the recording can be aligned on what was played.
    let source = TestClient::start_named(
        "partita_source",
        Playlist { start, channels: vec![left.clone(), right.clone(), left.clone()] },
        0,
        vec![format!("{name}:in_1"), format!("{name}:in_2")],
        vec![],
    );
    let sink = TestClient::start_named(
        "partita_sink",
        Playlist { start: 0, channels: vec![] },
        capacity + RATE as usize,
        vec![],
        vec![format!("{name}:out_1"), format!("{name}:out_2"), "partita_source:play_2".into()],
    );
    assert_eq!(run_for(&mut stream, capacity as f64 / f64::from(RATE) + 0.3), None);
    drop(source.stop());
    let mut rec = sink.stop();
    // The sink also records the source's third port (the impulse as played): align on it.
    let played = rec[2].iter().position(|v| *v != 0.0).expect("the source played") as isize - start as isize;
    let rec: Vec<Vec<f32>> = rec.drain(..2).map(|r| shift(r, played)).collect();
    let registered = port_latency(&format!("{name}:out_1"), jack::LatencyType::Capture)
        - port_latency(&format!("{name}:in_1"), jack::LatencyType::Capture);
    let stats = stream.stop();
    report(if zero_latency { "zero latency" } else { "block 64" }, &stats);
    // The registered latency is JACK's bookkeeping, not audio: exact whatever the server's xruns.
    assert_eq!(registered as usize, engine_latency, "registered latency");
    // The first sample above FFT rounding noise (the IR's first tap is 0.1 x 0.5).
    let first = rec[0].iter().position(|v| v.abs() > 1e-3).expect("silent recording") as isize - start as isize;
    if first != engine_latency as isize {
        return (Err(format!("the impulse's delay through the graph: {first}, registered {engine_latency}")), stats);
    }
    for (c, sig) in [&left, &right].into_iter().enumerate() {
        let mut want = vec![0.0f64; start + engine_latency];
        want.extend(naive::convolve(sig, ir.channel(c)));
        let (_, bound) = best_lag(&rec[c], &want, start..capacity, 0..1);
        if !bound.within_design_bound() {
            return (Err(format!("channel {c}: {bound:?}")), stats);
        }
    }
    assert_eq!(stats.overruns(), 0, "{stats:?}");
    (Ok(()), stats)
}

/// 30 s through a 10 s stereo IR at a 64-frame period with the default options: connected to the first
/// physical ports, no overrun of our own (the server's xruns are reported, never asserted: an idle dummy
/// server has them on these VMs), and a latency exact in frames: the engine's (64) plus the capture (64)
/// and playback (128) latencies the dummy driver reports, 256 frames = 5.333 ms; JACK reports our output
/// ports' capture latency as the system's plus the engine's. Then 3 s with zero latency: 192 frames.
#[test]
fn thirty_seconds_at_period_64_with_exact_latency() {
    let _serial = serial();
    let Some(_server) = jack_or_skip("thirty_seconds_at_period_64_with_exact_latency", 64) else { return };
    let ir = stereo_ir(10 * RATE as usize, 0.01);
    let seconds: f64 = std::env::var("PARTITA_DUPLEX_SECONDS").ok().and_then(|s| s.parse().ok()).unwrap_or(30.0);
    for (zero_latency, seconds, total) in [(false, seconds, 256), (true, 3.0, 192)] {
        let duplex = JackDuplex::open(&DuplexOptions::default(), 2, 2).expect("duplex client");
        let name = duplex.client_name();
        let engine = engine_for(&ir, 64, zero_latency, None, 64);
        let mut stream = duplex.start(engine, rebuild_for(&ir, 64, None)).expect("duplex starts");
        assert_eq!(stream.info().connections.len(), 4, "{:?}", stream.info());
        let system_capture = port_latency("system:capture_1", jack::LatencyType::Capture);
        let system_playback = port_latency("system:playback_1", jack::LatencyType::Playback);
        assert_eq!((system_capture, system_playback), (64, 128), "the dummy driver's port latencies");
        let latency = stream.latency();
        assert_eq!(latency.total_frames(), total, "{latency:?}");
        assert_eq!(
            port_latency(&format!("{name}:out_1"), jack::LatencyType::Capture),
            system_capture + latency.engine_frames,
            "capture latency JACK reports on our output port"
        );
        assert_eq!(
            port_latency(&format!("{name}:in_1"), jack::LatencyType::Playback),
            system_playback + latency.engine_frames,
            "playback latency JACK reports on our input port"
        );
        assert_eq!(run_for(&mut stream, seconds), None);
        assert_eq!(stream.latency().total_frames(), total, "at the end of the run");
        let stats = stream.stop();
        report(&format!("{seconds} s, zero latency {zero_latency}"), &stats);
        assert_eq!(stats.overruns(), 0, "{stats:?}");
        // The latency figures are JACK's port latencies sampled at each poll: the last is exact. (A poll that
        // falls while the server recomputes latencies, after an xrun, can read a partial sum: the mean is
        // not asserted.)
        assert!((stats.latency_last_ms - f64::from(total) * 1000.0 / f64::from(RATE)).abs() < 1e-6, "{stats:?}");
        assert_eq!(stats.callback_priority, None, "real-time priority is never asked by default");
        assert!(stats.callback_times.count as f64 >= 0.9 * seconds * f64::from(RATE) / 64.0, "{stats:?}");
        assert!(stats.callback_times.p50_us > 0.0 && stats.callback_times.max_us >= stats.callback_times.p999_us);
    }
}

/// A process that keeps a core busy for as long as it lives.
struct Busy(Child);

impl Busy {
    fn start() -> Self {
        Self(Command::new("sh").args(["-c", "while :; do :; done"]).stdout(Stdio::null()).spawn().expect("sh"))
    }
}

impl Drop for Busy {
    fn drop(&mut self) {
        let _ = self.0.kill();
        let _ = self.0.wait();
    }
}

/// With a second process keeping the other core busy, `sliced` and `auto` have no overrun of our own
/// through a 10 s stereo IR at period 64; `workers` is run and reported.
#[test]
fn a_busy_second_core_causes_no_overrun_of_ours() {
    let _serial = serial();
    let Some(_server) = jack_or_skip("a_busy_second_core_causes_no_overrun_of_ours", 64) else { return };
    let ir = stereo_ir(10 * RATE as usize, 0.01);
    let _busy = Busy::start();
    for schedule in [Some(Schedule::Sliced), None, Some(Schedule::Workers)] {
        let what = schedule.map_or("auto", |s| s.as_str());
        let duplex = JackDuplex::open(&DuplexOptions::default(), 2, 2).expect("duplex client");
        let engine = engine_for(&ir, 64, false, schedule, 64);
        let mut stream = duplex.start(engine, rebuild_for(&ir, 64, schedule)).expect("duplex starts");
        assert_eq!(run_for(&mut stream, 6.0), None);
        let stats = stream.stop();
        report(&format!("{what}, other core busy"), &stats);
        if schedule != Some(Schedule::Workers) {
            assert_eq!(stats.overruns(), 0, "{what}: {stats:?}");
        }
    }
}

/// A period change the engine can take keeps it (no rebuild, no silence); one it cannot (a worker level
/// shorter than twice the new period) rebuilds it off the audio thread and the sound comes back.
#[test]
fn period_changes_keep_or_rebuild_the_engine() {
    let _serial = serial();
    let Some(server) = jack_or_skip("period_changes_keep_or_rebuild_the_engine", 64) else { return };
    let ir = stereo_ir(RATE as usize, 0.05);
    let duplex = JackDuplex::open(&DuplexOptions { connect: false, ..DuplexOptions::default() }, 2, 2).unwrap();
    let name = duplex.client_name();
    let engine = engine_for(&ir, 64, false, Some(Schedule::Workers), 64);
    assert!(engine.worker_threads() > 0);
    let mut stream = duplex.start(engine, rebuild_for(&ir, 64, Some(Schedule::Workers))).unwrap();
    // Steady noise in, so that silence out would show.
    let noise: Vec<f32> = Noise::new(9).vec(20 * RATE as usize).iter().map(|v| 0.1 * v).collect();
    let client = TestClient::start_with(
        Playlist { start: 0, channels: vec![noise.clone(), noise] },
        20 * RATE as usize,
        vec![format!("{name}:in_1"), format!("{name}:in_2")],
        vec![format!("{name}:out_1")],
    );
    assert_eq!(run_for(&mut stream, 1.0), None);
    server.set_period(32);
    assert_eq!(run_for(&mut stream, 1.0), None);
    assert_eq!(stream.rebuilds(), 0, "a shorter period fits the engine");
    server.set_period(1024);
    assert_eq!(run_for(&mut stream, 2.0), None);
    assert_eq!(stream.rebuilds(), 1, "a period of 1024 breaks the worker levels' rule: rebuilt");
    let rec = client.stop();
    let stats = stream.stop();
    report("period changes", &stats);
    let tail = &rec[0][rec[0].len() - RATE as usize / 2..];
    let rms = (tail.iter().map(|v| f64::from(*v).powi(2)).sum::<f64>() / tail.len() as f64).sqrt();
    assert!(rms > 1e-3, "sound after the rebuild: rms {rms}");
    assert_eq!(stats.engine_errors, 0);
}

/// The server is killed mid-run: `poll` names the fault within 2 s and `stop` returns promptly.
#[test]
fn server_killed_mid_run_is_a_fault_within_two_seconds() {
    let _serial = serial();
    let Some(mut server) = jack_or_skip("server_killed_mid_run_is_a_fault_within_two_seconds", 64) else { return };
    let ir = stereo_ir(RATE as usize / 2, 0.05);
    let duplex = JackDuplex::open(&DuplexOptions::default(), 2, 2).unwrap();
    let mut stream = duplex.start(engine_for(&ir, 64, false, None, 64), rebuild_for(&ir, 64, None)).unwrap();
    assert_eq!(run_for(&mut stream, 1.0), None);
    server.kill_now();
    let killed = Instant::now();
    let fault = run_for(&mut stream, 5.0);
    let found = killed.elapsed();
    assert!(matches!(fault, Some(Fault::ServerStopped) | Some(Fault::Stalled(_))), "{fault:?} after {found:?}");
    assert!(found < Duration::from_secs(2), "fault seen after {found:?}");
    let t = Instant::now();
    let stats = stream.stop();
    assert!(t.elapsed() < Duration::from_millis(1500), "stop took {:?}", t.elapsed());
    eprintln!("killed: {fault:?} after {found:?}; {}", fault.unwrap());
    report("killed", &stats);
}

/// A callback that overruns its period is counted as ours, apart from the server's xruns.
#[test]
fn a_stalled_callback_is_an_overrun_of_ours() {
    let _serial = serial();
    let Some(_server) = jack_or_skip("a_stalled_callback_is_an_overrun_of_ours", 64) else { return };
    let ir = stereo_ir(4800, 0.05);
    let duplex = JackDuplex::open(&DuplexOptions::default(), 2, 2).unwrap();
    let mut stream = duplex.start(engine_for(&ir, 64, false, None, 64), rebuild_for(&ir, 64, None)).unwrap();
    assert_eq!(run_for(&mut stream, 0.5), None);
    stream.stall_next_callback(Duration::from_millis(5));
    assert_eq!(run_for(&mut stream, 0.5), None);
    let stats = stream.stop();
    report("stalled", &stats);
    assert!(stats.late_callbacks >= 1, "{stats:?}");
    assert!(stats.overruns() >= 1);
    assert!(stats.callback_times.max_us >= 5000.0, "{stats:?}");
}
