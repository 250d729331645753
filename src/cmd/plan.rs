//! `partita plan`: choose a partition for an IR length and a block size or latency budget, show its
//! levels, latency and predicted cost, and optionally measure it on this machine.

use clap::Args;
use partita_core::{CostModel, Engine, ImpulseResponse, Plan, PlanMode, Planner, Routing, Shape};
use serde_json::json;

use super::CmdResult;
use partita::calibration::machine_costs;
use partita::measure;

/// Arguments of `partita plan`.
#[derive(Debug, Args)]
pub struct PlanArgs {
    /// IR length in seconds (a synthetic decaying IR of this length is used for --measure).
    #[arg(long, value_name = "S", conflicts_with = "ir", allow_negative_numbers = true)]
    ir_seconds: Option<f64>,
    /// IR file (WAV): its length, channel count and rate.
    #[arg(long, value_name = "FILE")]
    ir: Option<std::path::PathBuf>,
    /// Sample rate in Hz [default: 48000, or the IR file's rate].
    #[arg(long, value_name = "HZ")]
    rate: Option<u32>,
    /// Engine block size in frames (the latency without --zero-latency) [default: 64].
    #[arg(long, value_name = "N", conflicts_with = "latency_ms")]
    block: Option<usize>,
    /// Latency budget in milliseconds: picks the cheapest plan (a block size, or zero latency with a
    /// direct-form head) whose latency fits the budget and whose predicted heaviest call fits the headroom
    /// (--headroom-pct; 8% under a fixed --schedule); when none fits it, the one with the lightest heaviest
    /// call.
    #[arg(long, value_name = "X", allow_negative_numbers = true)]
    latency_ms: Option<f64>,
    /// Zero latency: a direct-form head makes the output sample-accurate.
    #[arg(long)]
    zero_latency: bool,
    /// IR channels: 1 mono, 2 stereo, 4 true stereo (LL LR RL RR) [default: 1, or the IR file's].
    #[arg(long, value_name = "N", conflicts_with = "routing")]
    channels: Option<usize>,
    /// Routing: mono, mono-to-stereo, stereo, true-stereo or matrix:MxN [default: from the IR channels].
    #[arg(long = "routing", alias = "layout", value_name = "R")]
    routing: Option<Routing>,
    #[command(flatten)]
    schedule: super::ScheduleArgs,
    /// With --schedule workers: levels below this many frames stay in the callback (lower mean load,
    /// longer callbacks when such a level completes); 0 puts every level above the block on a worker
    /// [default: the host period plus 20 ms of audio, 1024 frames at 48 kHz and block 64].
    #[arg(long, value_name = "N")]
    min_worker_frames: Option<usize>,
    /// Frames the host passes per call (its period), when more than one block: worker levels are kept at
    /// least twice as long, and --measure calls the engine with this many frames [default: one block].
    #[arg(long, value_name = "N")]
    host_period: Option<usize>,
    /// With --schedule sliced: levels below this many frames stay in the callback whole (their job is
    /// cheaper than slicing it); 0 slices every level above the block.
    #[arg(long, value_name = "N", default_value_t = 2048)]
    min_sliced_frames: usize,
    /// Uniform partitions instead of the optimal plan.
    #[arg(long)]
    uniform: bool,
    /// Your own levels, e.g. 64x15,512x14,4096x14 (block x partitions, in IR order).
    #[arg(long, value_name = "LIST", conflicts_with = "uniform")]
    levels: Option<String>,
    /// Cost model: `measured` (calibrated on this machine, cached) or `flops`.
    #[arg(long, default_value = "measured")]
    model: String,
    /// With --measure: ask for real-time (SCHED_FIFO, rate-monotonic) priorities for worker threads;
    /// reports what was granted. Off by default.
    #[arg(long)]
    realtime_workers: bool,
    /// Plan for a host that calls faster than real time (an offline bounce, a batch job): no call has a
    /// deadline, so auto picks the cheapest plan without worker threads, and --measure waits for workers.
    #[arg(long)]
    offline: bool,
    /// Measure the machine again instead of using the cached calibration.
    #[arg(long)]
    recalibrate: bool,
    /// Run the engine on this machine, paced on the real deadline grid (see --pacing), and report the
    /// measured load.
    #[arg(long)]
    measure: bool,
    /// With --measure: how calls wait for their slot on the deadline grid. `sleep` (as live: the core may
    /// run other work meanwhile), `spin` (the thread keeps its core: a diagnostic of what the sleeps cost
    /// on this machine) or `none` (back to back, not paced).
    #[arg(long, default_value = "sleep", value_name = "HOW")]
    pacing: measure::Pacing,
    /// Audio seconds to run with --measure.
    #[arg(long, default_value_t = 3.0, value_name = "S")]
    measure_seconds: f64,
    /// Print JSON instead of a table.
    #[arg(long)]
    json: bool,
}

/// Runs `partita plan`.
pub fn run(args: PlanArgs) -> CmdResult {
    let (ir_frames, ir_channels, rate) = match (&args.ir, args.ir_seconds) {
        (Some(path), _) => {
            // The header gives channels, rate and length; the taps themselves do not change the plan.
            let info = partita_io::read_wav_info(path)?;
            if info.frames == 0 {
                return Err(format!(
                    "{}: the impulse response has 0 frames; give a file with at least one frame",
                    path.display()
                )
                .into());
            }
            let rate = args.rate.unwrap_or(info.sample_rate_hz);
            if rate == 0 {
                return Err("--rate must be above 0 Hz".into());
            }
            // Resampled to --rate, an IR keeps its duration: ceil(frames x rate / file rate) frames.
            let frames = partita_io::resampled_frames(info.frames, info.sample_rate_hz, rate);
            if frames > partita_io::MAX_IR_FRAMES {
                return Err(format!(
                    "{}: the impulse response would have {frames} frames, over the limit of {} frames",
                    path.display(),
                    partita_io::MAX_IR_FRAMES
                )
                .into());
            }
            let channels = usize::from(info.channels);
            if args.channels.is_none() {
                // The file's channels must fit the routing given, or have a default one.
                Routing::choose_for_ir(args.routing, channels).map_err(|e| format!("{}: {e}", path.display()))?;
            }
            (frames as usize, channels, rate)
        }
        (None, Some(s)) => {
            let rate = args.rate.unwrap_or(48_000);
            if !(s.is_finite() && s > 0.0) {
                return Err(format!("--ir-seconds must be a positive number of seconds, got {s}").into());
            }
            let frames = (s * f64::from(rate)).round().max(1.0) as usize;
            (frames, args.routing.map_or(1, |r| r.ir_channels()), rate)
        }
        (None, None) => return Err("give the IR length with --ir-seconds S or an IR file with --ir FILE".into()),
    };
    if rate == 0 {
        return Err("--rate must be above 0 Hz".into());
    }
    let routing = Routing::choose_for_ir(args.routing, args.channels.unwrap_or(ir_channels))?;
    let map = routing.resolve(routing.ir_channels())?;
    let shape = Shape::of(&map);

    let model = match args.model.as_str() {
        "flops" => CostModel::default(),
        "measured" => CostModel::Measured(machine_costs(partita_core::Kernel::detect(), args.recalibrate)),
        other => return Err(format!("unknown cost model `{other}`; use measured or flops").into()),
    };
    let planner = Planner::new()
        .block_frames(args.block.unwrap_or(64))
        .zero_latency(args.zero_latency)
        .min_sliced_frames(args.min_sliced_frames)
        .mode(if args.uniform { PlanMode::Uniform } else { PlanMode::Optimal })
        .cost_model(model.clone())
        .shape(shape);
    let planner = args.schedule.apply(planner, rate)?.offline(args.offline);
    let planner = match args.min_worker_frames {
        Some(n) => planner.min_worker_frames(n),
        None => planner,
    };
    if args.host_period == Some(0) {
        return Err("--host-period must be at least 1 frame".into());
    }
    let planner = match args.host_period {
        Some(h) => planner.host_period_frames(h),
        None => planner,
    };

    let (plan, reason) = if let Some(ms) = args.latency_ms {
        if !(ms.is_finite() && ms >= 0.0) {
            return Err(format!("--latency-ms must be a non-negative number, got {ms}").into());
        }
        let budget = (ms * f64::from(rate) / 1000.0).floor() as usize;
        let (plan, why) = planner.plan_for_latency(budget, ir_frames)?;
        (plan, Some(why))
    } else if let Some(levels) = &args.levels {
        (planner.custom(&Planner::parse_levels(levels)?, ir_frames)?, None)
    } else {
        (planner.plan(ir_frames)?, None)
    };

    let uniform = Plan::uniform(plan.block_frames, ir_frames)?;
    let call_frames = args.host_period.unwrap_or(plan.block_frames);
    let groups = map.groups().iter().filter(|(i, o)| !i.is_empty() && !o.is_empty()).count();
    let direct_flops = 2.0 * ir_frames as f64;
    let rate_f = f64::from(rate);
    let predicted = model.load_pct(&plan, shape, rate_f);
    let predicted_heaviest = model.heaviest_call_pct(&plan, shape, groups, rate_f, call_frames);

    // Build the engine: it gives the exact memory figure, and --measure runs it.
    let taps = partita_core::synth::decaying_noise(ir_frames, (ir_frames as f64 / 2.0).max(1.0), 1);
    let ir = ImpulseResponse::new(vec![taps; routing.ir_channels()], rate)?;
    let options = partita_core::EngineOptions {
        realtime_workers: args.realtime_workers,
        host_period_frames: args.host_period,
        offline: args.offline,
        ..partita_core::EngineOptions::new(call_frames.max(plan.block_frames))
    };
    let mut engine = Engine::with_options(&plan, &ir, routing, options)?;
    let memory = engine.memory_bytes();
    let measured =
        args.measure.then(|| measure::run(&mut engine, rate, args.measure_seconds, call_frames, args.pacing));

    let ms = |frames: usize| frames as f64 * 1000.0 / rate_f;
    if args.json {
        let mut out = json!({
            "ir_frames": ir_frames,
            "sample_rate_hz": rate,
            "routing": format!("{routing:?}"),
            "paths": shape.paths,
            "block_frames": plan.block_frames,
            "host_period_frames": call_frames,
            "zero_latency": plan.zero_latency,
            "latency_frames": plan.latency_frames(),
            "latency_ms": ms(plan.latency_frames()),
            "head_frames": plan.head_frames,
            "schedule": args.schedule.describe(),
            "offline": args.offline,
            "levels": plan.levels.iter().map(|l| json!({
                "block_frames": l.block_frames,
                "partitions": l.partitions,
                "offset_frames": l.offset_frames,
                "schedule": l.schedule.as_str(),
            })).collect::<Vec<_>>(),
            "flops_per_sample": plan.flops_per_sample(),
            "uniform_flops_per_sample": uniform.flops_per_sample(),
            "direct_flops_per_sample": direct_flops,
            "cost_model": args.model,
            "predicted_load_pct": predicted,
            "predicted_heaviest_call_pct": predicted_heaviest,
            "memory_bytes": memory,
        });
        if let Some(why) = &reason {
            out["reason"] = json!(why);
        }
        if let Some(m) = measured {
            out["measured_load_pct"] = json!(m.mean_load_pct);
            out["measured_process_load_pct"] = json!(m.process_load_pct);
            out["worst_callback_pct"] = json!(m.max_pct);
            out["worst_callback_wall_pct"] = json!(m.max_wall_pct);
            out["p50_callback_pct"] = json!(m.p50_pct);
            out["p99_callback_pct"] = json!(m.p99_pct);
            out["p999_callback_pct"] = json!(m.p999_pct);
            out["worst_phase_median_pct"] = json!(m.worst_phase_median_pct);
            out["phase_callbacks"] = json!(m.phase_calls);
            out["measured_seconds"] = json!(m.audio_seconds);
            out["pacing"] = json!(args.pacing.as_str());
            out["late_results"] = json!(m.late);
            out["worker_threads"] = json!(engine.worker_threads());
        }
        if args.realtime_workers {
            out["worker_priorities"] = json!(priorities(&engine));
        }
        println!("{}", serde_json::to_string_pretty(&out)?);
        return Ok(());
    }

    println!(
        "Plan for a {:.3} s impulse response ({ir_frames} frames) at {rate} Hz, {routing:?} routing ({} path{})",
        ir_frames as f64 / rate_f,
        shape.paths,
        if shape.paths == 1 { "" } else { "s" }
    );
    if let Some(why) = &reason {
        println!("chosen: {why}");
    }
    println!();
    super::print_levels(&plan);
    println!();
    println!(
        "schedule     {}: {}{}",
        args.schedule.describe(),
        super::schedules_used(&plan),
        if args.offline { " (offline: no deadlines, workers waited for)" } else { "" }
    );
    println!(
        "latency      {} frames ({:.3} ms){}",
        plan.latency_frames(),
        ms(plan.latency_frames()),
        if plan.zero_latency { ", sample-accurate" } else { "" }
    );
    println!(
        "cost         {:.0} flops/sample per path (uniform partitions: {:.0}; direct form: {:.0})",
        plan.flops_per_sample(),
        uniform.flops_per_sample(),
        direct_flops
    );
    println!("predicted    {predicted:.3}% of one core ({} model, all paths)", args.model);
    println!(
        "             heaviest call {predicted_heaviest:.1}% of the {:.3} ms deadline (paced host; docs/DESIGN.md \
         section 5, R3)",
        ms(call_frames)
    );
    println!("memory       {:.1} MB", memory as f64 / 1e6);
    if let Some(h) = args.host_period {
        println!("host period  {h} frames per call ({:.3} ms): worker levels are at least {} frames", ms(h), 2 * h);
    }
    if engine.worker_threads() > 0 {
        println!("workers      {} thread(s)", engine.worker_threads());
    }
    if args.realtime_workers {
        println!("priorities   {}", priorities(&engine).join(", "));
    }
    if let Some(m) = measured {
        println!(
            "measured     {:.3}% of one core (audio-thread and worker CPU; whole process {:.3}%) over {:.1} s of \
             audio, {}; worst callback {:.1}% of the {:.3} ms deadline (thread CPU; wall {:.1}%), p99.9 {:.1}%, \
             {} late results",
            m.mean_load_pct,
            m.process_load_pct,
            m.audio_seconds,
            match args.pacing {
                measure::Pacing::Sleep => "paced",
                measure::Pacing::Spin => "paced by spinning (a diagnostic, not the live figure)",
                measure::Pacing::None => "back to back (not paced)",
            },
            m.max_pct,
            ms(call_frames),
            m.max_wall_pct,
            m.p999_pct,
            m.late
        );
        println!(
            "             heaviest position in the {}-callback period of the largest level: {:.1}% of the deadline \
             (median over the run; predicted {predicted_heaviest:.1}%)",
            m.phase_calls, m.worst_phase_median_pct
        );
    }
    Ok(())
}

/// What each worker was granted, in words.
fn priorities(engine: &Engine) -> Vec<String> {
    engine
        .worker_priorities()
        .into_iter()
        .map(|p| match p {
            Some(Ok(p)) => format!("SCHED_FIFO {p}"),
            Some(Err(e)) => format!("refused (OS error {e}), normal priority"),
            None => "not requested".to_string(),
        })
        .collect()
}
