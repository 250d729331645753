//! `partita monitor`: live convolution from an input device to an output device through an IR.
//!
//! Opens the host and devices (`partita-device`), loads the IR at the device rate, plans the engine as
//! `partita plan` does (block size, or a latency budget), starts the streams, prints a caution, a
//! one-line status a few times a second when stderr is a terminal, and a summary at the end (also as
//! JSON with `--summary-json`). Ends after `--seconds`, on Ctrl-C (or SIGTERM; a second one ends the
//! process at once), or with an error and a non-zero exit when the device or server goes away. SIGUSR1
//! toggles bypass, SIGUSR2 ends a safety mute, and SIGHUP swaps between `--ir` and `--alt-ir` with a
//! crossfade (the engine's control API: the other IR is prepared off the audio thread and handed over by
//! pointer). The signals arrive as flags from [`crate::signals`].

use std::io::{IsTerminal, Write};
use std::path::PathBuf;
use std::time::{Duration, Instant};

use clap::Args;
use partita_core::{CostModel, Engine, EngineOptions, Kernel, Mix, Planner, Routing, Shape};
use partita_device::{
    Ceiling, DeviceOptions, DeviceSelector, EngineSide, LiveDevices, SafetyOptions, Stats, StreamOptions,
};
use partita_io::{load_ir, read_wav_info, IrOptions, Normalize};
use serde_json::json;

use super::{dbfs, CmdResult};
use crate::signals::Signals;

/// The host period assumed when the audio host does not report one (frames): a long ALSA period.
const UNKNOWN_PERIOD_FRAMES: usize = 1024;
use partita::calibration::machine_costs;

/// Arguments of `partita monitor`.
#[derive(Debug, Args)]
pub struct MonitorArgs {
    /// Impulse response (WAV): 1 channel mono, 2 stereo, 4 true stereo (or --routing).
    #[arg(long, value_name = "IR.wav")]
    ir: PathBuf,
    /// A second impulse response with the same channels and routing; SIGHUP swaps between the two while running.
    #[arg(long, value_name = "IR.wav")]
    alt_ir: Option<PathBuf>,
    /// Crossfade of a swap (SIGHUP), ms.
    #[arg(long, value_name = "MS", default_value_t = 500.0)]
    swap_fade_ms: f64,
    /// Audio host: `alsa`, or `jack` in a build with the `jack` feature [default: the platform's].
    #[arg(long, value_name = "NAME")]
    host: Option<String>,
    /// Input device: `default`, an index or a name from `partita devices`.
    #[arg(long, value_name = "DEVICE", default_value = "default")]
    input: DeviceSelector,
    /// Output device: `default`, an index or a name from `partita devices`.
    #[arg(long, value_name = "DEVICE", default_value = "default")]
    output: DeviceSelector,
    /// Engine block size B in frames (the engine's latency without --zero-latency) [default: 64].
    #[arg(long, value_name = "N", conflicts_with = "latency_ms")]
    block: Option<usize>,
    /// Device period in frames, where the host lets us choose (JACK runs at the server's period)
    /// [default: the host's].
    #[arg(long, value_name = "N")]
    device_frames: Option<u32>,
    /// Latency budget for the engine in ms: chooses the block size and mode as `partita plan` does.
    /// The devices add their own latency (reported at start).
    #[arg(long, value_name = "MS", allow_negative_numbers = true)]
    latency_ms: Option<f64>,
    /// Zero latency: a direct-form head makes the engine sample-accurate.
    #[arg(long)]
    zero_latency: bool,
    #[command(flatten)]
    schedule: super::ScheduleArgs,
    /// Ask for real-time (SCHED_FIFO) priorities for engine worker threads (with --schedule workers).
    #[arg(long)]
    realtime_workers: bool,
    /// Level of the convolved (wet) signal, linear [default: 1].
    #[arg(long, value_name = "W", default_value_t = 1.0, allow_negative_numbers = true)]
    wet: f64,
    /// Level of the input (dry) signal, linear, delayed to line up with the wet signal [default: 0].
    #[arg(long, value_name = "D", default_value_t = 0.0, allow_negative_numbers = true)]
    dry: f64,
    /// IR normalization: none (the exact file), peak or energy.
    #[arg(long, value_name = "MODE", default_value = "none")]
    normalize: Normalize,
    /// IR routing instead of the one its channel count implies: mono, mono-to-stereo, stereo,
    /// true-stereo or matrix:MxN.
    #[arg(long = "routing", alias = "layout", value_name = "ROUTING")]
    routing: Option<Routing>,
    /// Sample rate for hosts that offer several [default: the output device's; JACK: the server's].
    #[arg(long, value_name = "HZ")]
    rate: Option<u32>,
    /// Device input channel of each engine input, 1-based, e.g. `3,4` [default: 1, 2, ...].
    #[arg(long, value_name = "LIST")]
    input_channels: Option<String>,
    /// Device output channel of each engine output, 1-based [default: 1, 2, ...].
    #[arg(long, value_name = "LIST")]
    output_channels: Option<String>,
    /// Output ceiling in dBFS (a soft clipper, transparent to 3 dB below it).
    #[arg(long, value_name = "DB", default_value_t = -1.0, allow_negative_numbers = true)]
    ceiling_db: f64,
    /// Hard clip at the ceiling instead of the soft clipper.
    #[arg(long)]
    hard_clip: bool,
    /// Fade-in on start, ms.
    #[arg(long, value_name = "MS", default_value_t = 250.0)]
    fade_in_ms: f64,
    /// Run the engine in the output callback instead of the input callback.
    #[arg(long)]
    engine_in_output: bool,
    /// Frames kept in the bridge's ring beyond one period [default: one period on JACK, period + 32 otherwise].
    #[arg(long, value_name = "N")]
    ring_margin: Option<usize>,
    /// Stop after this many seconds (cleanly, exit 0) [default: until Ctrl-C].
    #[arg(long, value_name = "S")]
    seconds: Option<f64>,
    /// Also write the summary as JSON to this file.
    #[arg(long, value_name = "FILE")]
    summary_json: Option<PathBuf>,
}

fn parse_channel_list(s: &str, what: &str) -> Result<Vec<usize>, String> {
    s.split(',')
        .map(|p| match p.trim().parse::<usize>() {
            Ok(n) if n >= 1 => Ok(n - 1),
            _ => Err(format!("--{what}: `{p}` is not a channel number (1-based)")),
        })
        .collect()
}

fn db(x: f32) -> String {
    if x <= 0.0 {
        "  -inf".into()
    } else {
        format!("{:6.1}", dbfs(f64::from(x)))
    }
}

/// Runs `partita monitor`.
pub fn run(args: MonitorArgs) -> CmdResult {
    if let Some(s) = args.seconds {
        if !(s.is_finite() && s > 0.0) {
            return Err(format!("--seconds must be a positive number of seconds, got {s}").into());
        }
    }
    for (name, v) in [("--wet", args.wet), ("--dry", args.dry)] {
        if !(v.is_finite() && (0.0..=4.0).contains(&v)) {
            return Err(format!("{name} must be a linear gain from 0 to 4, got {v}").into());
        }
    }
    if !(args.ceiling_db.is_finite() && args.ceiling_db <= 0.0) {
        return Err(format!("--ceiling-db must be 0 dBFS or below, got {}", args.ceiling_db).into());
    }
    eprintln!("{}", partita_device::CAUTION);

    // The IR's header gives the routing, hence the engine's channels, before the devices are opened.
    let info = read_wav_info(&args.ir)?;
    let routing = Routing::choose_for_ir(args.routing, usize::from(info.channels))
        .map_err(|e| format!("{}: {e}", args.ir.display()))?;
    let (inputs, outputs) = (routing.inputs(), routing.outputs());
    let device_options = DeviceOptions {
        host: args.host.clone(),
        input: args.input.clone(),
        output: args.output.clone(),
        sample_rate_hz: args.rate,
        device_frames: args.device_frames,
        input_channels: args.input_channels.as_deref().map(|s| parse_channel_list(s, "input-channels")).transpose()?,
        output_channels: args
            .output_channels
            .as_deref()
            .map(|s| parse_channel_list(s, "output-channels"))
            .transpose()?,
    };
    let devices = LiveDevices::open(&device_options, inputs, outputs)?;
    let rate = devices.sample_rate_hz();

    if !(args.swap_fade_ms.is_finite() && args.swap_fade_ms >= 0.0) {
        return Err(format!("--swap-fade-ms must be a non-negative number, got {}", args.swap_fade_ms).into());
    }
    let ir_options = IrOptions {
        sample_rate_hz: Some(rate),
        normalize: args.normalize,
        routing: Some(routing),
        ..IrOptions::default()
    };
    let load = |path: &PathBuf| -> Result<partita_core::ImpulseResponse, Box<dyn std::error::Error>> {
        let loaded = load_ir(path, &ir_options)?;
        if loaded.source.sample_rate_hz != rate {
            eprintln!(
                "note: {} was resampled from {} Hz to the device's {rate} Hz",
                path.display(),
                loaded.source.sample_rate_hz
            );
        }
        Ok(loaded.ir)
    };
    let ir = load(&args.ir)?;
    let alt = args.alt_ir.as_ref().map(&load).transpose()?;
    if let Some(alt) = &alt {
        if alt.channels() != ir.channels() {
            return Err(format!(
                "{}: {} channels, but {} has {}; the two IRs need the same channels and routing",
                args.alt_ir.as_ref().map_or(String::new(), |p| p.display().to_string()),
                alt.channels(),
                args.ir.display(),
                ir.channels()
            )
            .into());
        }
    }
    // Plan for the longer of the two, so either fits the engine's levels.
    let plan_frames = ir.frames().max(alt.as_ref().map_or(0, |a| a.frames()));
    let map = routing.resolve(ir.channels())?;
    // The engine sees calls of the device's period: worker levels must be at least twice as long (see
    // Planner::host_period_frames). When the host does not say, assume 1024 frames, a long ALSA period.
    let host_period = devices.period_frames().map_or(UNKNOWN_PERIOD_FRAMES, |p| p as usize);
    let planner = Planner::new()
        .block_frames(args.block.unwrap_or(64))
        .host_period_frames(host_period)
        .zero_latency(args.zero_latency)
        .cost_model(CostModel::Measured(machine_costs(Kernel::detect(), false)))
        .shape(Shape::of(&map));
    let planner = args.schedule.apply(planner, rate)?;
    let plan = if let Some(ms) = args.latency_ms {
        if !(ms.is_finite() && ms >= 0.0) {
            return Err(format!("--latency-ms must be a non-negative number, got {ms}").into());
        }
        let budget = (ms * f64::from(rate) / 1000.0).floor() as usize;
        let (plan, why) = planner.plan_for_latency(budget, plan_frames)?;
        eprintln!("plan: {why}");
        plan
    } else {
        planner.plan(plan_frames)?
    };
    // The stream starts at its wet/dry settings, without a ramp; the engine's own mixer is the only one.
    let mix = Mix { wet: args.wet as f32, dry: args.dry as f32, ..Mix::default() };
    let options = EngineOptions {
        realtime_workers: args.realtime_workers,
        mix,
        host_period_frames: Some(host_period),
        ..EngineOptions::new(4096)
    };
    let mut engine = Engine::with_options(&plan, &ir, routing, options)?;
    let mut control = engine.control().ok_or("the engine's control handle was taken")?;
    // The IR not playing, prepared and ready to hand over; it comes back when swapped out.
    let mut spare = alt.as_ref().map(|a| control.prepare(a)).transpose()?;
    let fade_frames = control.frames_for_ms(args.swap_fade_ms);
    let mut swaps = 0u64;

    let stream_options = StreamOptions {
        side: if args.engine_in_output { EngineSide::Playback } else { EngineSide::Capture },
        margin_frames: args.ring_margin,
        safety: SafetyOptions {
            fade_in_ms: args.fade_in_ms.max(0.0),
            ceiling_dbfs: args.ceiling_db,
            ceiling: if args.hard_clip { Ceiling::Hard } else { Ceiling::Soft },
            ..SafetyOptions::default()
        },
        ..StreamOptions::default()
    };
    let signals = Signals::install().map_err(|e| format!("cannot install the signal handlers: {e}"))?;
    let mut live = devices.start(engine, &stream_options)?;
    let info = live.info().clone();
    let period = |s: &partita_device::SideInfo| match (s.period_frames, s.requested_frames) {
        (Some(p), _) => format!("{p} frames"),
        (None, Some(r)) => format!("{r} frames (requested)"),
        (None, None) => "host default".to_string(),
    };
    eprintln!(
        "monitor: {} at {} Hz; in `{}` ({} ch {}, period {}) -> out `{}` ({} ch {}, period {})",
        info.host,
        rate,
        info.input.device,
        info.input.channels,
        info.input.format,
        period(&info.input),
        info.output.device,
        info.output.channels,
        info.output.format,
        period(&info.output)
    );
    eprintln!(
        "engine: {routing:?}, block {}{}, {} level(s) ({}; schedule {}: {}), latency {} frames ({:.3} ms); wet {} dry {}; ceiling {} dBFS \
         ({}); Ctrl-C stops, SIGUSR1 toggles bypass, SIGUSR2 unmutes{}",
        plan.block_frames,
        if plan.zero_latency { " zero-latency" } else { "" },
        plan.levels.len(),
        super::levels_list(&plan),
        args.schedule.describe(),
        super::schedules_used(&plan),
        plan.latency_frames(),
        plan.latency_frames() as f64 * 1000.0 / f64::from(rate),
        args.wet,
        args.dry,
        args.ceiling_db,
        if args.hard_clip { "hard clip" } else { "soft clip" },
        if spare.is_some() { ", SIGHUP swaps to the other IR" } else { "" },
    );

    let terminal = std::io::stderr().is_terminal();
    let started = Instant::now();
    let deadline = args.seconds.map(Duration::from_secs_f64);
    let mut last_status = Instant::now();
    let mut fault = None;
    let mut bypass = false;
    loop {
        std::thread::sleep(Duration::from_millis(20));
        if let Some(f) = live.poll_fault() {
            fault = Some(f);
            break;
        }
        if signals.stop_requested() || deadline.is_some_and(|d| started.elapsed() >= d) {
            break;
        }
        if signals.take_toggle_bypass() {
            match control.send(partita_core::Command::Bypass(!bypass)) {
                Ok(()) => bypass = !bypass,
                Err(_) if !control.has_dry() => eprintln!("\nSIGUSR1: this routing has no dry signal to bypass to"),
                Err(_) => eprintln!("\nSIGUSR1: the engine's command queue is full; try again"),
            }
        }
        if signals.take_unmute() {
            live.handle().unmute();
        }
        for event in control.poll() {
            if let partita_core::Event::Retired { ir, .. } = event {
                spare = Some(ir); // freed (or kept) here, never on the audio thread
            }
        }
        if signals.take_swap() {
            match spare.take() {
                Some(next) => match control.swap(next, fade_frames) {
                    Ok(()) => swaps += 1,
                    Err(refused) => spare = Some(refused.0),
                },
                None if args.alt_ir.is_none() => eprintln!("\nSIGHUP: no --alt-ir to swap to"),
                None => eprintln!("\nSIGHUP: a swap is still in progress; try again when it has finished"),
            }
        }
        if terminal && last_status.elapsed() >= Duration::from_millis(250) {
            last_status = Instant::now();
            let peaks = live.handle().take_peaks();
            let s = live.stats();
            let mut line = format!(
                "in {} dBFS | out {} dBFS | load {:5.2}% | latency {:6.2} ms | xruns {} | overruns {}",
                db(peaks.input),
                db(peaks.output),
                s.mean_load_pct,
                s.latency_last_ms,
                s.host_xruns,
                s.overruns()
            );
            if let Some(m) = s.muted {
                line.push_str(&format!(" | MUTED: {m}"));
            }
            if bypass {
                line.push_str(" | BYPASS");
            }
            let cs = control.status();
            if args.alt_ir.is_some() {
                let which = if cs.ir_id == 1 { "alt-ir" } else { "ir" };
                line.push_str(&format!(" | {which}"));
                if cs.fade_state != partita_core::FadeState::Steady {
                    line.push_str(&format!(" ({:?})", cs.fade_state));
                }
            }
            let mut err = std::io::stderr().lock();
            let _ = write!(err, "\r\x1b[2K{line}");
            let _ = err.flush();
        }
    }
    if terminal {
        eprintln!();
    }
    let stats = live.stop();
    let swaps_completed = control.status().swaps_completed;
    print_summary(&stats, fault.as_ref().map(ToString::to_string).as_deref());
    if args.alt_ir.is_some() {
        eprintln!("  IR swaps     {swaps} requested, {swaps_completed} completed");
    }
    if let Some(path) = &args.summary_json {
        let mut j = summary_json(&stats, &info, &plan, fault.as_ref().map(ToString::to_string));
        j["swaps_requested"] = json!(swaps);
        j["swaps_completed"] = json!(swaps_completed);
        std::fs::write(path, serde_json::to_string_pretty(&j)? + "\n")
            .map_err(|e| format!("{}: cannot write the summary: {e}", path.display()))?;
    }
    match fault {
        Some(f) => Err(f.to_string().into()),
        None => Ok(()),
    }
}

fn print_summary(s: &Stats, fault: Option<&str>) {
    eprintln!("summary: {:.1} s of audio", s.seconds);
    eprintln!(
        "  latency      {:.3} ms mean input to output (min {:.3}, max {:.3}; engine {:.3})",
        s.latency_ms, s.latency_min_ms, s.latency_max_ms, s.engine_latency_ms
    );
    eprintln!(
        "  load         {:.3}% of one core mean; slowest callback {:.1}% of its period",
        s.mean_load_pct, s.max_callback_pct
    );
    eprintln!("  xruns        {} reported by the host", s.host_xruns);
    eprintln!(
        "  overruns     {} of ours ({} ring underruns, {} ring overflows, {} callbacks over their period)",
        s.overruns(),
        s.ring_underruns,
        s.ring_overflows,
        s.late_callbacks
    );
    eprintln!(
        "  drift        {} corrections ({} slipped, {} repeated); {} re-primes, {} resyncs",
        s.drift_corrections(),
        s.drift_slips,
        s.drift_repeats,
        s.reprimes,
        s.resyncs
    );
    eprintln!("  late results {}", s.late_results);
    eprintln!(
        "  non-finite   {} samples ({} in, {} out)",
        s.nonfinite_samples(),
        s.nonfinite_inputs,
        s.nonfinite_outputs
    );
    match s.muted {
        Some(m) => eprintln!("  safety       {} mute(s); muted at the end: {m}", s.mutes),
        None => eprintln!("  safety       {} mute(s)", s.mutes),
    }
    if let Some(f) = fault {
        eprintln!("  ended by     {f}");
    }
}

fn summary_json(
    s: &Stats,
    info: &partita_device::LiveInfo,
    plan: &partita_core::Plan,
    fault: Option<String>,
) -> serde_json::Value {
    json!({
        "seconds": s.seconds,
        "xruns": s.host_xruns,
        "overruns": s.overruns(),
        "ring_underruns": s.ring_underruns,
        "ring_overflows": s.ring_overflows,
        "late_callbacks": s.late_callbacks,
        "drift_corrections": s.drift_corrections(),
        "drift_slips": s.drift_slips,
        "drift_repeats": s.drift_repeats,
        "reprimes": s.reprimes,
        "resyncs": s.resyncs,
        "late_results": s.late_results,
        "nonfinite_samples": s.nonfinite_samples(),
        "nonfinite_inputs": s.nonfinite_inputs,
        "nonfinite_outputs": s.nonfinite_outputs,
        "mutes": s.mutes,
        "muted": s.muted.map(|m| m.to_string()),
        "latency_ms": s.latency_ms,
        "latency_min_ms": s.latency_min_ms,
        "latency_max_ms": s.latency_max_ms,
        "engine_latency_ms": s.engine_latency_ms,
        "mean_load_pct": s.mean_load_pct,
        "max_callback_pct": s.max_callback_pct,
        "host": info.host,
        "sample_rate_hz": info.sample_rate_hz,
        "input_device": info.input.device,
        "output_device": info.output.device,
        "input_period_frames": s.input_period_frames,
        "output_period_frames": s.output_period_frames,
        "block_frames": plan.block_frames,
        "zero_latency": plan.zero_latency,
        "schedules": super::schedules_used(plan),
        "engine_side": match info.side { EngineSide::Capture => "input", EngineSide::Playback => "output" },
        "fault": fault,
    })
}
