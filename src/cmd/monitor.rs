//! `partita monitor`: live convolution from an input to an output through an IR.
//!
//! Opens the host (`partita-device`): with `--host jack` one duplex JACK client (ports, the engine in its
//! process callback, the latency registered with JACK), otherwise cpal input and output devices bridged
//! by a ring. Loads the IR at the host's rate, plans the engine as `partita plan` does (block size, or a
//! latency budget) for the host's period, starts, prints a caution, a one-line status a few times a
//! second when stderr is a terminal, and a summary at the end (also as JSON with `--summary-json`) that
//! tells the host's xruns, preempted callbacks and our own overruns apart. Ends after `--seconds`, on
//! Ctrl-C (or SIGTERM; a second one ends the process at once), or with an error and a non-zero exit when
//! the device or server goes away (`--reconnect` waits for it instead). SIGUSR1 toggles bypass, SIGUSR2
//! ends a safety mute, and SIGHUP swaps between `--ir` and `--alt-ir` with a crossfade (the engine's
//! control API: the other IR is prepared off the audio thread and handed over by pointer). The signals
//! arrive as flags from [`crate::signals`]. When the JACK server's rate or period changes beyond what the
//! engine takes, the duplex client asks for a new engine; it is built here, on the control thread, from
//! the same [`Recipe`].

use std::io::{IsTerminal, Write};
use std::path::PathBuf;
use std::time::{Duration, Instant};

use clap::Args;
use partita_core::{Control, CostModel, Engine, EngineOptions, Kernel, Mix, Planner, PreparedIr, Routing, Shape};
use partita_device::{
    Ceiling, DeviceOptions, DeviceSelector, EngineSide, Fault, LiveDevices, SafetyOptions, Stats, StreamOptions,
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
    /// Ask for real-time (SCHED_FIFO) priority for the audio callback thread on its first callback, and
    /// for worker threads below it; the summary says what was granted. Needs the privilege (rtprio).
    #[arg(long)]
    realtime: bool,
    /// JACK: connect partita's ports to the server's physical ports (default; --input-channels and
    /// --output-channels choose which, 1-based).
    #[arg(long, overrides_with = "no_connect")]
    connect: bool,
    /// JACK: leave partita's ports unconnected (connect them with a patchbay or jack_connect).
    #[arg(long)]
    no_connect: bool,
    /// Level of the convolved (wet) signal, linear.
    #[arg(long, value_name = "W", default_value_t = 1.0, allow_negative_numbers = true)]
    wet: f64,
    /// Level of the input (dry) signal, linear, delayed to line up with the wet signal.
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
    /// Clock-drift correction between separate input and output devices (not JACK): `resample`
    /// (adaptive resampling, click-free, adds 0.33 ms once engaged) or `slip` (drops or repeats a
    /// frame: a click each time).
    #[arg(long, value_name = "MODE", default_value = "resample", value_parser = ["resample", "slip"])]
    drift: String,
    /// Run the engine in the output callback instead of the input callback.
    #[arg(long)]
    engine_in_output: bool,
    /// Frames kept in the bridge's ring beyond one period [default: one period on JACK, period + 32 otherwise].
    #[arg(long, value_name = "N")]
    ring_margin: Option<usize>,
    /// When the JACK server or the device goes away, retry every second until it is back (or Ctrl-C,
    /// or --seconds) instead of ending with an error.
    #[arg(long)]
    reconnect: bool,
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

/// What an engine is built from, kept so that the duplex JACK client can build a new one when the
/// server's rate or period changes (on the control thread).
#[derive(Debug, Clone)]
struct Recipe {
    ir: PathBuf,
    alt_ir: Option<PathBuf>,
    ir_options: IrOptions,
    routing: Routing,
    block: usize,
    zero_latency: bool,
    latency_ms: Option<f64>,
    schedule: super::ScheduleArgs,
    realtime_workers: bool,
    mix: Mix,
}

/// An engine with its plan, and the other IR prepared for it.
struct Built {
    engine: Engine,
    plan: partita_core::Plan,
    /// How `--latency-ms` chose the plan.
    why: Option<String>,
    alt: Option<partita_core::ImpulseResponse>,
}

impl Recipe {
    /// Loads the IRs at `rate` and builds the engine for host calls of `host_period` frames. `say`
    /// receives notes for the user (resampling, the latency plan).
    fn build(
        &self,
        rate: u32,
        host_period: usize,
        say: &mut dyn FnMut(String),
    ) -> Result<Built, Box<dyn std::error::Error>> {
        let ir_options = IrOptions { sample_rate_hz: Some(rate), ..self.ir_options };
        let mut load = |path: &PathBuf| -> Result<partita_core::ImpulseResponse, Box<dyn std::error::Error>> {
            let loaded = load_ir(path, &ir_options)?;
            if loaded.source.sample_rate_hz != rate {
                say(format!(
                    "note: {} was resampled from {} Hz to the device's {rate} Hz",
                    path.display(),
                    loaded.source.sample_rate_hz
                ));
            }
            Ok(loaded.ir)
        };
        let ir = load(&self.ir)?;
        let alt = self.alt_ir.as_ref().map(&mut load).transpose()?;
        if let Some(alt) = &alt {
            if alt.channels() != ir.channels() {
                return Err(format!(
                    "{}: {} channels, but {} has {}; the two IRs need the same channels and routing",
                    self.alt_ir.as_ref().map_or(String::new(), |p| p.display().to_string()),
                    alt.channels(),
                    self.ir.display(),
                    ir.channels()
                )
                .into());
            }
        }
        // Plan for the longer of the two, so either fits the engine's levels.
        let plan_frames = ir.frames().max(alt.as_ref().map_or(0, |a| a.frames()));
        let map = self.routing.resolve(ir.channels())?;
        // The engine sees calls of the device's period: worker levels must be at least twice as long (see
        // Planner::host_period_frames).
        let planner = Planner::new()
            .block_frames(self.block)
            .host_period_frames(host_period)
            .zero_latency(self.zero_latency)
            .cost_model(CostModel::Measured(machine_costs(Kernel::detect(), false)))
            .shape(Shape::of(&map));
        let planner = self.schedule.apply(planner, rate)?;
        let (plan, why) = if let Some(ms) = self.latency_ms {
            let budget = (ms * f64::from(rate) / 1000.0).floor() as usize;
            let (plan, why) = planner.plan_for_latency(budget, plan_frames)?;
            (plan, Some(why))
        } else {
            (planner.plan(plan_frames)?, None)
        };
        let options = EngineOptions {
            realtime_workers: self.realtime_workers,
            mix: self.mix,
            host_period_frames: Some(host_period),
            ..EngineOptions::new(MAX_HOST_FRAMES.max(host_period))
        };
        let engine = Engine::with_options(&plan, &ir, self.routing, options)?;
        Ok(Built { engine, plan, why, alt })
    }
}

/// The largest host call the engine takes in one piece (longer calls are split).
const MAX_HOST_FRAMES: usize = 4096;

/// The running stream: the duplex JACK client, or the cpal streams and their ring for other hosts.
// One value per run, on the control thread's stack: its size does not matter.
#[allow(clippy::large_enum_variant)]
enum Live {
    /// Between a fault and a reconnection.
    Closed,
    Bridged(partita_device::LiveStream),
    #[cfg(feature = "jack")]
    Duplex(partita_device::DuplexStream),
}

impl Live {
    fn poll_fault(&mut self) -> Option<Fault> {
        match self {
            Self::Closed => None,
            Self::Bridged(l) => l.poll_fault(),
            #[cfg(feature = "jack")]
            Self::Duplex(d) => d.poll(),
        }
    }

    fn unmute(&self) {
        match self {
            Self::Closed => {}
            Self::Bridged(l) => l.handle().unmute(),
            #[cfg(feature = "jack")]
            Self::Duplex(d) => d.unmute(),
        }
    }

    fn take_peaks(&self) -> partita_device::Peaks {
        match self {
            Self::Closed => partita_device::Peaks::default(),
            Self::Bridged(l) => l.handle().take_peaks(),
            #[cfg(feature = "jack")]
            Self::Duplex(d) => d.take_peaks(),
        }
    }

    fn stats(&self) -> Stats {
        match self {
            Self::Closed => Stats::default(),
            Self::Bridged(l) => l.stats(),
            #[cfg(feature = "jack")]
            Self::Duplex(d) => d.stats(),
        }
    }

    /// The duplex client's latency now: capture, engine and playback frames.
    fn jack_latency(&self) -> Option<(u32, u32, u32)> {
        match self {
            #[cfg(feature = "jack")]
            Self::Duplex(d) => {
                let l = d.latency();
                Some((l.capture_frames, l.engine_frames, l.playback_frames))
            }
            _ => None,
        }
    }

    fn stop(self) -> Stats {
        match self {
            Self::Closed => Stats::default(),
            Self::Bridged(l) => l.stop(),
            #[cfg(feature = "jack")]
            Self::Duplex(d) => d.stop(),
        }
    }
}

/// What the summary says about where the audio went.
struct Route {
    host: String,
    rate: u32,
    input: String,
    output: String,
    engine_side: &'static str,
    /// The duplex client's latency as JACK reports it: capture, engine, playback frames.
    jack_latency: Option<(u32, u32, u32)>,
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
    if !(args.swap_fade_ms.is_finite() && args.swap_fade_ms >= 0.0) {
        return Err(format!("--swap-fade-ms must be a non-negative number, got {}", args.swap_fade_ms).into());
    }
    if let Some(ms) = args.latency_ms {
        if !(ms.is_finite() && ms >= 0.0) {
            return Err(format!("--latency-ms must be a non-negative number, got {ms}").into());
        }
    }
    eprintln!("{}", partita_device::CAUTION);

    // The IR's header gives the routing, hence the engine's channels, before the devices are opened.
    let info = read_wav_info(&args.ir)?;
    let routing = Routing::choose_for_ir(args.routing, usize::from(info.channels))
        .map_err(|e| format!("{}: {e}", args.ir.display()))?;
    let (inputs, outputs) = (routing.inputs(), routing.outputs());
    let input_channels = args.input_channels.as_deref().map(|s| parse_channel_list(s, "input-channels")).transpose()?;
    let output_channels =
        args.output_channels.as_deref().map(|s| parse_channel_list(s, "output-channels")).transpose()?;
    let safety = SafetyOptions {
        fade_in_ms: args.fade_in_ms.max(0.0),
        ceiling_dbfs: args.ceiling_db,
        ceiling: if args.hard_clip { Ceiling::Hard } else { Ceiling::Soft },
        ..SafetyOptions::default()
    };
    let recipe = Recipe {
        ir: args.ir.clone(),
        alt_ir: args.alt_ir.clone(),
        ir_options: IrOptions { normalize: args.normalize, routing: Some(routing), ..IrOptions::default() },
        routing,
        block: args.block.unwrap_or(64),
        zero_latency: args.zero_latency,
        latency_ms: args.latency_ms,
        schedule: args.schedule.clone(),
        realtime_workers: args.realtime_workers || args.realtime,
        // The stream starts at its wet/dry settings, without a ramp; the engine's own mixer is the only one.
        mix: Mix { wet: args.wet as f32, dry: args.dry as f32, ..Mix::default() },
    };
    // New engines built by the duplex client after a rate or period change send their control handle
    // (and the other IR, prepared for them) here.
    let (rebuilt_tx, rebuilt_rx) = std::sync::mpsc::channel::<(Control, Option<PreparedIr>)>();
    let swap_fade_ms = args.swap_fade_ms;

    let opener = Opener {
        args: &args,
        recipe: &recipe,
        safety,
        inputs,
        outputs,
        input_channels,
        output_channels,
        rebuilt_tx: rebuilt_tx.clone(),
    };
    let (built, mut live, mut route) = opener.open()?;
    let mut faults: Vec<String> = Vec::new();
    let mut reconnects = 0u64;
    let mut lost_seconds = 0.0;
    drop(rebuilt_tx);
    let mut plan = built.plan;
    let rate = route.rate;
    if let Some(why) = &built.why {
        eprintln!("plan: {why}");
    }
    let (mut control, mut spare) = rebuilt_rx.recv().map_err(|_| "the engine's control handle was lost")?;
    let mut fade_frames = control.frames_for_ms(swap_fade_ms);
    let mut swaps = 0u64;
    let signals = Signals::install().map_err(|e| format!("cannot install the signal handlers: {e}"))?;
    eprintln!(
        "engine: {routing:?}, block {}{}, {} level(s) ({}; schedule {}: {}), latency {} frames ({:.3} ms); wet {} dry {}; ceiling {} dBFS \
         ({}){}; Ctrl-C stops, SIGUSR1 toggles bypass, SIGUSR2 unmutes{}",
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
        if args.realtime { "; real-time priority asked" } else { "" },
        if spare.is_some() { ", SIGHUP swaps to the other IR" } else { "" },
    );

    let terminal = std::io::stderr().is_terminal();
    let started = Instant::now();
    let deadline = args.seconds.map(Duration::from_secs_f64);
    let mut last_status = Instant::now();
    let mut fault = None;
    let mut bypass = false;
    let mut rebuilds = 0u64;
    loop {
        std::thread::sleep(Duration::from_millis(20));
        if let Some(f) = live.poll_fault() {
            if !args.reconnect {
                fault = Some(f);
                break;
            }
            // --reconnect: close the dead stream, then try to open it again every second.
            faults.push(f.to_string());
            eprintln!("\n{f}\n--reconnect: retrying every second (Ctrl-C stops)");
            let closed = std::mem::replace(&mut live, Live::Closed).stop();
            lost_seconds += closed.seconds;
            match reopen(&opener, &signals, deadline.map(|d| started + d)) {
                Some(Ok((note, again, where_to))) => {
                    let (c, s) = rebuilt_rx.recv().map_err(|_| "the engine's control handle was lost")?;
                    control = c;
                    spare = s;
                    fade_frames = control.frames_for_ms(swap_fade_ms);
                    bypass = false;
                    live = again;
                    route = where_to;
                    plan = note.plan;
                    reconnects += 1;
                    eprintln!("reconnected");
                }
                Some(Err(e)) => return Err(e),
                None => break,
            }
            continue;
        }
        if signals.stop_requested() || deadline.is_some_and(|d| started.elapsed() >= d) {
            break;
        }
        while let Ok((c, s)) = rebuilt_rx.try_recv() {
            // The server's rate or period changed and the engine was rebuilt: its control handle replaces
            // the old one, and the new engine starts on the first IR, unbypassed.
            control = c;
            spare = s;
            fade_frames = control.frames_for_ms(swap_fade_ms);
            bypass = false;
            rebuilds += 1;
            eprintln!("\nnote: the JACK server's rate or period changed; the engine was rebuilt for it");
        }
        if signals.take_toggle_bypass() {
            match control.send(partita_core::Command::Bypass(!bypass)) {
                Ok(()) => bypass = !bypass,
                Err(_) if !control.has_dry() => eprintln!("\nSIGUSR1: this routing has no dry signal to bypass to"),
                Err(_) => eprintln!("\nSIGUSR1: the engine's command queue is full; try again"),
            }
        }
        if signals.take_unmute() {
            live.unmute();
        }
        while let Some(event) = control.next_event() {
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
            let peaks = live.take_peaks();
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
    // The duplex client's latency as JACK reports it now (the figures at start may have changed with a
    // rebuild or a reconnection).
    if let Some(l) = live.jack_latency() {
        route.jack_latency = Some(l);
    }
    let stats = live.stop();
    let swaps_completed = control.status().swaps_completed;
    print_summary(&stats, &route, fault.as_ref().map(ToString::to_string).as_deref());
    if args.alt_ir.is_some() {
        eprintln!("  IR swaps     {swaps} requested, {swaps_completed} completed");
    }
    if rebuilds > 0 {
        eprintln!("  rebuilds     {rebuilds} (the server's rate or period changed)");
    }
    if reconnects > 0 || !faults.is_empty() {
        eprintln!(
            "  reconnects   {reconnects} (faults survived: {}); the figures above are the last connection's, {:.1} s \
             of audio before it",
            faults.join("; "),
            lost_seconds
        );
    }
    if let Some(path) = &args.summary_json {
        let mut j = summary_json(&stats, &route, &plan, fault.as_ref().map(ToString::to_string));
        j["swaps_requested"] = json!(swaps);
        j["swaps_completed"] = json!(swaps_completed);
        j["rebuilds"] = json!(rebuilds);
        j["reconnects"] = json!(reconnects);
        j["faults_survived"] = json!(faults);
        std::fs::write(path, serde_json::to_string_pretty(&j)? + "\n")
            .map_err(|e| format!("{}: cannot write the summary: {e}", path.display()))?;
    }
    match fault {
        Some(f) => Err(f.to_string().into()),
        None => Ok(()),
    }
}

/// What opening the live stream needs; [`Opener::open`] runs once at start and again on each
/// `--reconnect`.
struct Opener<'a> {
    args: &'a MonitorArgs,
    recipe: &'a Recipe,
    safety: SafetyOptions,
    inputs: usize,
    outputs: usize,
    input_channels: Option<Vec<usize>>,
    output_channels: Option<Vec<usize>>,
    /// Where the engine's control handle (and the other IR, prepared for it) goes, for this engine and
    /// any the duplex client rebuilds.
    rebuilt_tx: std::sync::mpsc::Sender<(Control, Option<PreparedIr>)>,
}

impl Opener<'_> {
    /// Opens the host, builds the engine for its rate and period, starts the stream and prints where the
    /// audio goes.
    fn open(&self) -> Result<Opened, Box<dyn std::error::Error>> {
        let args = self.args;
        let recipe = self.recipe;
        let rebuilt_tx = &self.rebuilt_tx;
        let (inputs, outputs, safety) = (self.inputs, self.outputs, self.safety);
        let input_channels = self.input_channels.clone();
        let output_channels = self.output_channels.clone();
        let jack = args.host.as_deref().is_some_and(|h| h.eq_ignore_ascii_case("jack"));
        Ok(if jack {
            #[cfg(feature = "jack")]
            {
                for (flag, given) in [
                    ("--input", args.input != DeviceSelector::Default),
                    ("--output", args.output != DeviceSelector::Default),
                    ("--engine-in-output", args.engine_in_output),
                    ("--ring-margin", args.ring_margin.is_some()),
                    ("--drift", args.drift != "resample"),
                ] {
                    if given {
                        return Err(format!(
                            "{flag} does not apply to JACK: partita runs as one JACK client with its own ports \
                             (connect them with --input-channels/--output-channels, --no-connect, or a patchbay)"
                        )
                        .into());
                    }
                }
                let options = partita_device::DuplexOptions {
                    connect: !args.no_connect,
                    input_channels,
                    output_channels,
                    safety,
                    realtime: args.realtime,
                    ..partita_device::DuplexOptions::default()
                };
                let duplex = partita_device::JackDuplex::open(&options, inputs, outputs)?;
                let (rate, period) = (duplex.sample_rate_hz(), duplex.period_frames());
                if let Some(r) = args.rate.filter(|&r| r != rate) {
                    return Err(format!(
                        "--rate {r}: the JACK server runs at {rate} Hz; restart it at {r} Hz or omit --rate"
                    )
                    .into());
                }
                if let Some(f) = args.device_frames.filter(|&f| f != period) {
                    return Err(format!(
                        "--device-frames {f}: the JACK server runs at {period} frames per period; change it (jack_bufsize {f}) \
                         or omit --device-frames"
                    )
                    .into());
                }
                let built = recipe.build(rate, period as usize, &mut |note| eprintln!("{note}"))?;
                // A rebuild keeps the block and mode this plan chose (under --latency-ms too).
                let again = Recipe {
                    block: built.plan.block_frames,
                    zero_latency: built.plan.zero_latency,
                    latency_ms: None,
                    ..recipe.clone()
                };
                let tx = rebuilt_tx.clone();
                let rebuild: partita_device::RebuildFn = Box::new(move |rate, period| {
                    let b = again.build(rate, period, &mut |_| {}).map_err(|e| e.to_string())?;
                    let mut engine = b.engine;
                    let control = engine.control().ok_or("the engine's control handle was taken")?;
                    let spare = b.alt.as_ref().map(|a| control.prepare(a)).transpose().map_err(|e| e.to_string())?;
                    let _ = tx.send((control, spare));
                    Ok(engine)
                });
                let mut built = built;
                let control = built.engine.control().ok_or("the engine's control handle was taken")?;
                let spare = built.alt.as_ref().map(|a| control.prepare(a)).transpose()?;
                let _ = rebuilt_tx.send((control, spare));
                let stream = duplex.start(built.engine, rebuild)?;
                let latency = stream.latency();
                // The ports at the other end of our connections, inputs then outputs.
                let mine = format!("{}:", stream.info().client);
                let ports = |ours: &str| {
                    let list: Vec<&str> = stream
                        .info()
                        .connections
                        .iter()
                        .filter(|(a, b)| {
                            a.starts_with(&format!("{mine}{ours}")) || b.starts_with(&format!("{mine}{ours}"))
                        })
                        .map(|(a, b)| if a.starts_with(&mine) { b.as_str() } else { a.as_str() })
                        .collect();
                    if list.is_empty() {
                        "(not connected)".to_string()
                    } else {
                        list.join(", ")
                    }
                };
                let route = Route {
                    host: "JACK".into(),
                    rate,
                    input: ports("in_"),
                    output: ports("out_"),
                    engine_side: "duplex",
                    jack_latency: Some((latency.capture_frames, latency.engine_frames, latency.playback_frames)),
                };
                eprintln!(
                    "monitor: JACK at {rate} Hz, period {period} frames; client `{}` (one duplex client, no ring); in {} -> out {}",
                    stream.info().client,
                    route.input,
                    route.output
                );
                eprintln!(
                    "latency: {} frames ({:.3} ms) = capture {} + engine {} + playback {}, as JACK reports the connected ports",
                    latency.total_frames(),
                    f64::from(latency.total_frames()) * 1000.0 / f64::from(rate),
                    latency.capture_frames,
                    latency.engine_frames,
                    latency.playback_frames
                );
                (PlanNote { plan: built.plan, why: built.why }, Live::Duplex(stream), route)
            }
            #[cfg(not(feature = "jack"))]
            {
                return Err(partita_device::DeviceError::NoHost {
                    name: "jack".into(),
                    available: partita_device::host_names(),
                }
                .into());
            }
        } else {
            let device_options = DeviceOptions {
                host: args.host.clone(),
                input: args.input.clone(),
                output: args.output.clone(),
                sample_rate_hz: args.rate,
                device_frames: args.device_frames,
                input_channels,
                output_channels,
            };
            let devices = LiveDevices::open(&device_options, inputs, outputs)?;
            let rate = devices.sample_rate_hz();
            // When the host does not say, assume 1024 frames, a long ALSA period.
            let host_period = devices.period_frames().map_or(UNKNOWN_PERIOD_FRAMES, |p| p as usize);
            let mut built = recipe.build(rate, host_period, &mut |note| eprintln!("{note}"))?;
            let control = built.engine.control().ok_or("the engine's control handle was taken")?;
            let spare = built.alt.as_ref().map(|a| control.prepare(a)).transpose()?;
            let _ = rebuilt_tx.send((control, spare));
            let stream_options = StreamOptions {
                side: if args.engine_in_output { EngineSide::Playback } else { EngineSide::Capture },
                margin_frames: args.ring_margin,
                safety,
                realtime: args.realtime,
                drift: partita_device::DriftOptions {
                    mode: if args.drift == "slip" {
                        partita_device::DriftMode::FrameSlip
                    } else {
                        partita_device::DriftMode::Resample
                    },
                    ..partita_device::DriftOptions::default()
                },
            };
            let stream = devices.start(built.engine, &stream_options)?;
            let info = stream.info().clone();
            eprintln!(
                "monitor: {} at {} Hz; in `{}` ({} ch {}, period {}) -> out `{}` ({} ch {}, period {})",
                info.host,
                rate,
                info.input.device,
                info.input.channels,
                info.input.format,
                info.input.period_text(),
                info.output.device,
                info.output.channels,
                info.output.format,
                info.output.period_text()
            );
            let route = Route {
                host: info.host.clone(),
                rate,
                input: info.input.device.clone(),
                output: info.output.device.clone(),
                engine_side: match info.side {
                    EngineSide::Capture => "input",
                    EngineSide::Playback => "output",
                },
                jack_latency: None,
            };
            (PlanNote { plan: built.plan, why: built.why }, Live::Bridged(stream), route)
        })
    }
}

/// `--reconnect`: tries to open the stream again every second until it opens (`Some(Ok)`), a
/// set-up error that retrying cannot cure (`Some(Err)`: a bad IR, say), Ctrl-C or the deadline (`None`).
/// Errors of the host (no server, no device) are retried, each new one printed once.
fn reopen(
    opener: &Opener<'_>,
    signals: &Signals,
    deadline: Option<Instant>,
) -> Option<Result<Opened, Box<dyn std::error::Error>>> {
    let mut last = String::new();
    loop {
        for _ in 0..50 {
            if signals.stop_requested() || deadline.is_some_and(|d| Instant::now() >= d) {
                return None;
            }
            std::thread::sleep(Duration::from_millis(20));
        }
        match opener.open() {
            Ok(opened) => return Some(Ok(opened)),
            Err(e) if e.downcast_ref::<partita_device::DeviceError>().is_some() => {
                let msg = e.to_string();
                if msg != last {
                    eprintln!("--reconnect: {msg}");
                    last = msg;
                }
            }
            Err(e) => return Some(Err(e)),
        }
    }
}

/// An opened stream: the plan it runs, the stream, and where its audio goes.
type Opened = (PlanNote, Live, Route);

/// The plan and the note of a [`Built`] whose engine went to the stream.
struct PlanNote {
    plan: partita_core::Plan,
    why: Option<String>,
}

fn print_summary(s: &Stats, route: &Route, fault: Option<&str>) {
    eprintln!("summary: {:.1} s of audio", s.seconds);
    match route.jack_latency {
        Some((capture, engine, playback)) => eprintln!(
            "  latency      {} frames = {:.3} ms input to output (capture {capture} + engine {engine} + playback \
             {playback}, as JACK reports the connected ports)",
            capture + engine + playback,
            f64::from(capture + engine + playback) * 1000.0 / f64::from(route.rate)
        ),
        None => eprintln!(
            "  latency      {:.3} ms mean input to output (min {:.3}, max {:.3}; engine {:.3})",
            s.latency_ms, s.latency_min_ms, s.latency_max_ms, s.engine_latency_ms
        ),
    }
    eprintln!(
        "  load         {:.3}% of one core mean; slowest callback {:.1}% of its period",
        s.mean_load_pct, s.max_callback_pct
    );
    let t = &s.callback_times;
    eprintln!(
        "  callback     {:.1} us p50, {:.1} us p99, {:.1} us p99.9, {:.1} us max (engine callback, wall clock, {} calls)",
        t.p50_us, t.p99_us, t.p999_us, t.max_us, t.count
    );
    eprintln!(
        "  host         {} xruns reported by the host; {} callbacks preempted (over their period with CPU time \
         within it: the thread lacked real-time priority)",
        s.host_xruns, s.preempted_callbacks
    );
    eprintln!(
        "  overruns     {} of ours ({} late worker/sliced results, {} callbacks over their period, {} ring underruns, \
         {} ring overflows, {} engine errors)",
        s.overruns(),
        s.late_results,
        s.late_callbacks,
        s.ring_underruns,
        s.ring_overflows,
        s.engine_errors
    );
    if route.jack_latency.is_none() {
        eprintln!(
            "  drift        resampling at {:+.1} ppm (adds {:.2} ms); {} slipped, {} repeated; {} re-primes, {} resyncs",
            s.drift_ppm, s.resampler_latency_ms, s.drift_slips, s.drift_repeats, s.reprimes, s.resyncs
        );
    }
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
    match s.callback_priority {
        None => {}
        Some(Ok(p)) => eprintln!("  real-time    granted: SCHED_FIFO priority {p} for the callback thread"),
        Some(Err(e)) => eprintln!(
            "  real-time    refused ({}): the callback ran at normal priority (grant rtprio, e.g. the audio group's \
             limits, or run as a user allowed SCHED_FIFO)",
            std::io::Error::from_raw_os_error(e)
        ),
    }
    if let Some(f) = fault {
        eprintln!("  ended by     {f}");
    }
}

fn summary_json(s: &Stats, route: &Route, plan: &partita_core::Plan, fault: Option<String>) -> serde_json::Value {
    let t = &s.callback_times;
    json!({
        "seconds": s.seconds,
        "xruns": s.host_xruns,
        "preempted_callbacks": s.preempted_callbacks,
        "overruns": s.overruns(),
        "late_results": s.late_results,
        "late_callbacks": s.late_callbacks,
        "ring_underruns": s.ring_underruns,
        "ring_overflows": s.ring_overflows,
        "engine_errors": s.engine_errors,
        "drift_corrections": s.drift_corrections(),
        "drift_slips": s.drift_slips,
        "drift_repeats": s.drift_repeats,
        "drift_ppm": s.drift_ppm,
        "resampler_latency_ms": s.resampler_latency_ms,
        "reprimes": s.reprimes,
        "resyncs": s.resyncs,
        "nonfinite_samples": s.nonfinite_samples(),
        "nonfinite_inputs": s.nonfinite_inputs,
        "nonfinite_outputs": s.nonfinite_outputs,
        "mutes": s.mutes,
        "muted": s.muted.map(|m| m.to_string()),
        // Duplex JACK: exact, from the ports' latencies at the end; otherwise the mean of the estimates.
        "latency_ms": route.jack_latency.map_or(s.latency_ms, |(c, e, p)| f64::from(c + e + p) * 1000.0 / f64::from(route.rate)),
        "latency_min_ms": s.latency_min_ms,
        "latency_max_ms": s.latency_max_ms,
        "latency_frames": route.jack_latency.map(|(c, e, p)| c + e + p),
        "capture_latency_frames": route.jack_latency.map(|l| l.0),
        "playback_latency_frames": route.jack_latency.map(|l| l.2),
        "engine_latency_ms": s.engine_latency_ms,
        "mean_load_pct": s.mean_load_pct,
        "max_callback_pct": s.max_callback_pct,
        "callback_us": { "p50": t.p50_us, "p99": t.p99_us, "p99_9": t.p999_us, "max": t.max_us, "count": t.count },
        "realtime": match s.callback_priority {
            None => serde_json::Value::Null,
            Some(Ok(p)) => json!({ "granted": true, "priority": p }),
            Some(Err(e)) => json!({ "granted": false, "error": std::io::Error::from_raw_os_error(e).to_string() }),
        },
        "host": route.host,
        "sample_rate_hz": route.rate,
        "input_device": route.input,
        "output_device": route.output,
        "input_period_frames": s.input_period_frames,
        "output_period_frames": s.output_period_frames,
        "block_frames": plan.block_frames,
        "zero_latency": plan.zero_latency,
        "schedules": super::schedules_used(plan),
        "engine_side": route.engine_side,
        "fault": fault,
    })
}
