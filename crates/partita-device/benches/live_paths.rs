//! The two live paths on a JACK server side by side: the duplex client (`JackDuplex`: one client, the
//! engine in its process callback) against the cpal path (`LiveDevices`: two cpal clients bridged by a
//! ring), at periods of 32, 64, 128 and 256 frames, 48 kHz, dummy driver, one private `jackd --no-realtime`
//! per period (started by the bench, as the tests do).
//!
//! Per path and period: a 2 s stereo IR at the default block (64) and the default planner, 10 s of a
//! source client playing an impulse every 250 ms into the path and a sink client recording it (and the
//! source's own port, to align on what was played). Columns:
//! - `lag`: frames from the source's impulse to the sink's, measured through the graph (median over the
//!   impulses);
//! - `total`: `lag` + the system ports' capture and playback latencies JACK reports: the latency a
//!   performer connected to the physical ports would have;
//! - `reported`: what the path itself reports (duplex: JACK's port latencies plus the engine's, exact;
//!   cpal: the mean of its timestamp-based estimate);
//! - the engine callback's wall-clock time p50 / p99 / p99.9 / max (µs), host xruns, our overruns, and
//!   preempted callbacks.
//!
//! Full run: `cargo bench -p partita-device --features jack --bench live_paths` (about 2 minutes).
//! Quick mode (no `--bench` argument, as under `cargo test --benches`, or `PARTITA_BENCH_QUICK=1`): period
//! 64 only, 1 s per path. Outputs: a Markdown table on stdout and `target/partita-bench/live_paths.csv`.

#[path = "../tests/support/mod.rs"]
mod support;

use std::fmt::Write as _;
use std::time::{Duration, Instant};

use partita_core::synth::decaying_noise;
use partita_core::{Engine, EngineOptions, ImpulseResponse, Planner, Routing};
use partita_device::{DeviceOptions, DuplexOptions, JackDuplex, LiveDevices, SafetyOptions, Stats, StreamOptions};
use support::{Playlist, TestClient};

const RATE: u32 = 48_000;

fn quick_mode() -> bool {
    let forced = std::env::var("PARTITA_BENCH_QUICK").is_ok_and(|v| !v.is_empty() && v != "0");
    forced || !std::env::args().any(|a| a == "--bench")
}

fn engine(ir: &ImpulseResponse, period: usize) -> Engine {
    let plan = Planner::new().block_frames(64).host_period_frames(period).plan(ir.frames()).unwrap();
    let options = EngineOptions { host_period_frames: Some(period), ..EngineOptions::new(4096) };
    Engine::with_options(&plan, ir, Routing::Stereo, options).unwrap()
}

fn port_latency(port: &str, mode: jack::LatencyType) -> u32 {
    let (client, _) = jack::Client::new("partita_bench_probe", jack::ClientOptions::NO_START_SERVER).unwrap();
    client.port_by_name(port).map_or(0, |p| p.get_latency_range(mode).1)
}

struct Row {
    path: &'static str,
    period: u32,
    lag: Option<usize>,
    total: Option<usize>,
    reported_frames: f64,
    stats: Stats,
}

/// Median frames from each played impulse (in `played`) to the first sample above half its height in
/// `heard`.
fn median_lag(played: &[f32], heard: &[f32]) -> Option<usize> {
    let mut lags = Vec::new();
    let mut i = 0;
    while i < played.len() {
        if played[i] != 0.0 {
            if let Some(k) = heard[i..].iter().take(RATE as usize / 8).position(|v| v.abs() > 0.25) {
                lags.push(k);
            }
            i += RATE as usize / 8;
        } else {
            i += 1;
        }
    }
    lags.sort_unstable();
    lags.get(lags.len() / 2).copied()
}

/// Polls a running path (`false`) or stops it (`true`); gives its counters and its reported latency.
type Finish = Box<dyn FnMut(bool) -> (Stats, f64)>;

/// Runs one path for `seconds` with impulses played into it; returns the row.
fn run(path: &'static str, period: u32, seconds: f64, ir: &ImpulseResponse) -> Row {
    let len = (seconds * f64::from(RATE)) as usize;
    let mut clicks = vec![0.0f32; len];
    for k in (RATE as usize / 2..len.saturating_sub(RATE as usize / 4)).step_by(RATE as usize / 4) {
        clicks[k] = 1.0;
    }
    let quiet = SafetyOptions { fade_in_ms: 0.0, ..SafetyOptions::default() };
    let (ins, outs, mut finish): (Vec<String>, Vec<String>, Finish) = match path {
        "duplex" => {
            let d =
                JackDuplex::open(&DuplexOptions { connect: false, safety: quiet, ..DuplexOptions::default() }, 2, 2)
                    .expect("duplex client");
            let name = d.client_name();
            let stream = d.start(engine(ir, period as usize), Box::new(|_, _| Err("no rebuild".into()))).unwrap();
            let ins = vec![format!("{name}:in_1"), format!("{name}:in_2")];
            let outs = vec![format!("{name}:out_1"), format!("{name}:out_2")];
            let mut s = Some(stream);
            (
                ins,
                outs,
                Box::new(move |stop| {
                    let st = s.as_mut().unwrap();
                    let _ = st.poll();
                    let reported = f64::from(st.latency().total_frames());
                    if stop {
                        (s.take().unwrap().stop(), reported)
                    } else {
                        (st.stats(), reported)
                    }
                }),
            )
        }
        _ => {
            let devices =
                LiveDevices::open(&DeviceOptions { host: Some("jack".into()), ..DeviceOptions::default() }, 2, 2)
                    .expect("cpal JACK devices");
            let live = devices
                .start(engine(ir, period as usize), &StreamOptions { safety: quiet, ..StreamOptions::default() })
                .expect("cpal streams");
            let (cin, cout) = partita_device::jack_client_names();
            let ins = vec![format!("{cin}:in_0"), format!("{cin}:in_1")];
            let outs = vec![format!("{cout}:out_0"), format!("{cout}:out_1")];
            let mut live = Some(live);
            (
                ins,
                outs,
                Box::new(move |stop| {
                    let l = live.as_mut().unwrap();
                    let _ = l.poll_fault();
                    let st = l.stats();
                    let reported = st.latency_ms * f64::from(RATE) / 1000.0;
                    if stop {
                        (live.take().unwrap().stop(), reported)
                    } else {
                        (st, reported)
                    }
                }),
            )
        }
    };
    let source = TestClient::start_named(
        "partita_source",
        Playlist { start: 0, channels: vec![clicks.clone(), clicks.clone(), clicks] },
        0,
        ins,
        vec![],
    );
    let sink = TestClient::start_named(
        "partita_sink",
        Playlist { start: 0, channels: vec![] },
        len + RATE as usize,
        vec![],
        vec![outs[0].clone(), "partita_source:play_2".into()],
    );
    let until = Instant::now() + Duration::from_secs_f64(seconds + 0.2);
    while Instant::now() < until {
        let _ = finish(false);
        std::thread::sleep(Duration::from_millis(20));
    }
    drop(source.stop());
    let rec = sink.stop();
    let (stats, reported_frames) = finish(true);
    let lag = median_lag(&rec[1], &rec[0]);
    let system = port_latency("system:capture_1", jack::LatencyType::Capture)
        + port_latency("system:playback_1", jack::LatencyType::Playback);
    Row { path, period, lag, total: lag.map(|l| l + system as usize), reported_frames, stats }
}

fn main() {
    let quick = quick_mode();
    let periods: &[u32] = if quick { &[64] } else { &[32, 64, 128, 256] };
    let seconds = if quick { 1.5 } else { 10.0 };
    // Unit first tap, so the click comes through at full height; a short decaying tail after it.
    let taps: Vec<Vec<f32>> = (0..2)
        .map(|c| {
            let mut t: Vec<f32> =
                decaying_noise(2 * RATE as usize, 1.6 * f64::from(RATE), 90 + c).iter().map(|v| 0.05 * v).collect();
            t[0] = 1.0;
            t
        })
        .collect();
    let ir = ImpulseResponse::new(taps, RATE).unwrap();
    let mut rows = Vec::new();
    for &period in periods {
        let _serial = support::serial();
        let Some(_server) = support::jack_or_skip("live_paths bench", period) else { return };
        for path in ["duplex", "cpal"] {
            rows.push(run(path, period, seconds, &ir));
        }
    }
    let mut table = String::from(
        "| period | path | lag (frames) | total (frames) | total (ms) | reported (frames) | callback p50 / p99 / p99.9 / max (µs) | host xruns | our overruns | preempted |\n|---|---|---|---|---|---|---|---|---|---|\n",
    );
    let mut csv = String::from("period,path,lag_frames,total_frames,reported_frames,p50_us,p99_us,p999_us,max_us,host_xruns,overruns,preempted,seconds\n");
    for r in &rows {
        let t = r.stats.callback_times;
        let opt = |v: Option<usize>| v.map_or("-".to_string(), |v| v.to_string());
        let _ = writeln!(
            table,
            "| {} | {} | {} | {} | {} | {:.1} | {:.1} / {:.1} / {:.1} / {:.1} | {} | {} | {} |",
            r.period,
            r.path,
            opt(r.lag),
            opt(r.total),
            r.total.map_or("-".to_string(), |t| format!("{:.3}", t as f64 * 1000.0 / f64::from(RATE))),
            r.reported_frames,
            t.p50_us,
            t.p99_us,
            t.p999_us,
            t.max_us,
            r.stats.host_xruns,
            r.stats.overruns(),
            r.stats.preempted_callbacks
        );
        let _ = writeln!(
            csv,
            "{},{},{},{},{:.1},{:.1},{:.1},{:.1},{:.1},{},{},{},{:.2}",
            r.period,
            r.path,
            opt(r.lag),
            opt(r.total),
            r.reported_frames,
            t.p50_us,
            t.p99_us,
            t.p999_us,
            t.max_us,
            r.stats.host_xruns,
            r.stats.overruns(),
            r.stats.preempted_callbacks,
            r.stats.seconds
        );
    }
    println!("{table}");
    let dir = std::env::var_os("CARGO_TARGET_DIR")
        .map(std::path::PathBuf::from)
        .unwrap_or_else(|| std::path::PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../../target"))
        .join("partita-bench");
    std::fs::create_dir_all(&dir).unwrap();
    std::fs::write(dir.join("live_paths.csv"), csv).unwrap();
    // Every row must have heard its clicks, in quick mode too, so the bench cannot rot into a table of
    // dashes.
    for r in &rows {
        assert!(r.lag.is_some(), "{} at period {}: no click came through", r.path, r.period);
    }
}
