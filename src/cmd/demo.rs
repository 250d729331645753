//! `partita demo`: the synthetic dry phrase through each imagined space of `demo-data/`, written to a folder
//! with a stated wet/dry mix and a -1 dBFS peak, with the partition plan, latency and measured cost of each.
//!
//! Needs nothing outside the repository: the files are read from the source tree's `demo-data/` (located at
//! compile time), or generated in memory by the same code as `partita make-demo-data` when that folder is
//! missing (an installed binary far from its sources).

use std::path::{Path, PathBuf};
use std::time::Instant;

use clap::Args;
use partita_core::{offline, CostModel, Engine, EngineOptions, Mix, Planner, Routing, Shape};
use partita_io::{normalize, read_wav, scale_to_peak, write_wav_atomic, Audio, Dither, Normalize, SampleFormat};

use super::{dbfs, levels_list, print_levels, CmdResult};
use partita::demo_files::{self, DemoData, DemoSpace, DEMO_FORMAT, DRY_FILE};
use partita::measure;

/// Default wet level of the demo mix (linear, on an energy-normalized IR).
pub const DEMO_WET: f64 = 0.35;
/// Default dry level of the demo mix (linear).
pub const DEMO_DRY: f64 = 0.65;
/// Peak level of every demo output, dB re. full scale.
pub const DEMO_PEAK_DBFS: f64 = -1.0;
/// Audio seconds of the unpaced live-style run per space.
const LIVE_SECONDS: f64 = 3.0;

/// Arguments of `partita demo`.
#[derive(Debug, Args)]
pub struct DemoArgs {
    /// Folder for the rendered files (created if missing).
    #[arg(long, value_name = "DIR", default_value = "partita-demo")]
    out_dir: PathBuf,
    /// Wet level, linear. Each IR is energy-normalized first (unit energy in its louder channel), so the wet
    /// signal has about the dry signal's power: the default 0.35 against 0.65 puts the room 5.4 dB below the
    /// dry sound.
    #[arg(long, value_name = "W", default_value_t = DEMO_WET, allow_negative_numbers = true)]
    wet: f64,
    /// Dry level, linear.
    #[arg(long, value_name = "D", default_value_t = DEMO_DRY, allow_negative_numbers = true)]
    dry: f64,
    /// Engine block of the live-style run, frames (its latency).
    #[arg(long, value_name = "N", default_value_t = 64)]
    block: usize,
    #[command(flatten)]
    schedule: super::ScheduleArgs,
    /// Routing of the rooms instead of the one their channels imply (the dry phrase is mono and the rooms are
    /// stereo, so mono-to-stereo): mono, mono-to-stereo, stereo, true-stereo or matrix:MxN.
    #[arg(long = "routing", alias = "layout", value_name = "ROUTING")]
    routing: Option<Routing>,
    /// Where the demo files are read from [default: demo-data/ in the source tree]. When the folder or one of
    /// its files is missing, all of them are generated in memory instead.
    #[arg(long, value_name = "DIR")]
    data_dir: Option<PathBuf>,
}

/// The source tree's `demo-data/`, fixed at compile time.
fn default_data_dir() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data")
}

/// Reads the demo files from `dir`, or generates them when any is missing. Returns the data and where it
/// came from.
fn load(dir: &Path) -> Result<(DemoData, String), Box<dyn std::error::Error>> {
    let specs = partita_room::room::RoomSpec::presets();
    let mut names = vec![DRY_FILE.to_string()];
    names.extend(specs.iter().map(demo_files::file_name));
    if names.iter().all(|n| dir.join(n).is_file()) {
        let dry = read_wav(&dir.join(DRY_FILE))?;
        let mut spaces = Vec::new();
        for spec in specs {
            let ir = read_wav(&dir.join(demo_files::file_name(&spec)))?;
            spaces.push(DemoSpace { spec, ir });
        }
        Ok((DemoData { dry, spaces }, format!("read from {}", dir.display())))
    } else {
        let start = Instant::now();
        let data = demo_files::generate();
        let why = format!(
            "generated in memory in {:.2} s ({} has no {})",
            start.elapsed().as_secs_f64(),
            dir.display(),
            names.join(", ")
        );
        Ok((data, why))
    }
}

/// Runs `partita demo`.
pub fn run(args: DemoArgs) -> CmdResult {
    for (name, v) in [("--wet", args.wet), ("--dry", args.dry)] {
        if !v.is_finite() {
            return Err(format!("{name} must be a finite number, got {v}").into());
        }
    }
    if args.wet == 0.0 && args.dry == 0.0 {
        return Err("--wet and --dry are both 0: the demo would be silent".into());
    }
    if args.block == 0 {
        return Err("--block must be at least 1 frame".into());
    }
    let start = Instant::now();
    let data_dir = args.data_dir.clone().unwrap_or_else(default_data_dir);
    let (data, source) = load(&data_dir)?;
    std::fs::create_dir_all(&args.out_dir)
        .map_err(|e| format!("{}: cannot create the output folder: {e}", args.out_dir.display()))?;
    let out_dir = args.out_dir.canonicalize().unwrap_or_else(|_| args.out_dir.clone());
    if data_dir.canonicalize().is_ok_and(|d| d == out_dir) {
        return Err(format!(
            "{}: the demo would write over its own demo files; choose another --out-dir",
            args.out_dir.display()
        )
        .into());
    }

    let dry = &data.dry;
    let rate = dry.sample_rate_hz;
    let rate_f = f64::from(rate);
    let ms = |frames: usize| frames as f64 * 1000.0 / rate_f;
    println!("Partita demo: a synthetic dry phrase through {} imagined spaces", data.spaces.len());
    println!(
        "dry signal   {DRY_FILE}: {:.2} s, {} channel, {rate} Hz, plucked strings and percussive hits",
        dry.duration_s(),
        dry.channel_count()
    );
    println!("demo data    {source}");
    let balance = match (args.wet == 0.0, args.dry == 0.0) {
        (true, _) => "dry only".to_string(),
        (_, true) => "the room only".to_string(),
        _ => {
            let db = dbfs(args.wet.abs() / args.dry.abs());
            format!("the room sits {:.1} dB {} the dry sound", db.abs(), if db <= 0.0 { "below" } else { "above" })
        }
    };
    println!(
        "mix          wet {} + dry {} (linear; each IR energy-normalized first, so {balance}), then scaled so the \
         peak is {DEMO_PEAK_DBFS} dBFS",
        args.wet, args.dry
    );

    let dry_out = out_dir.join(DRY_FILE);
    write_wav_atomic(&dry_out, &dry.channels, rate, DEMO_FORMAT, Dither::OFF)?;
    let mut written = vec![(dry_out, "the dry phrase, as in demo-data".to_string())];
    let cores = std::thread::available_parallelism().map_or(1, |n| n.get());

    for space in &data.spaces {
        let spec = &space.spec;
        let ir_path = data_dir.join(space.file_name());
        let ir_name = space.file_name();
        let mut ir_audio = space.ir.clone();
        if ir_audio.sample_rate_hz != rate {
            ir_audio = partita_io::resample(&ir_audio, rate).map_err(|e| format!("{}: {e}", ir_path.display()))?;
        }
        normalize(&mut ir_audio, Normalize::Energy).map_err(|e| format!("{}: {e}", ir_path.display()))?;
        let ir = partita_io::to_impulse_response(ir_audio, &ir_path)?;
        let routing = Routing::choose(args.routing, ir.channels(), dry.channel_count())
            .map_err(|e| format!("{}: with the dry phrase: {e}", ir_path.display()))?;
        let map = routing.resolve(ir.channels()).map_err(|e| format!("{}: {e}", ir_path.display()))?;
        let shape = Shape::of(&map);

        println!();
        println!(
            "== {} ({:.1} x {:.1} x {:.1} m, intended RT60 {:.2} s at 1 kHz): {ir_name}, {:.2} s, {} channels, \
             {routing:?} routing ==",
            spec.name,
            spec.dimensions_m[0],
            spec.dimensions_m[1],
            spec.dimensions_m[2],
            spec.rt60_s[3],
            ir.frames() as f64 / rate_f,
            ir.channels()
        );

        // Offline render: the fastest plan, every core, timed end to end (engine builds included).
        let plan = offline::offline_plan(ir.frames(), shape)?;
        let mix = Mix { wet: args.wet as f32, dry: args.dry as f32, ..Mix::default() };
        let t0 = Instant::now();
        let y = offline::render_with_mix(&plan, &ir, routing, &mix, &dry.channels, 0, None)
            .map_err(|e| format!("{ir_name}: {e}"))?;
        let render_s = t0.elapsed().as_secs_f64();
        let mut y = Audio { channels: y, sample_rate_hz: rate };
        let scale = scale_to_peak(&mut y, DEMO_PEAK_DBFS)
            .map_err(|_| format!("{ir_name}: the mix is silent; nothing to scale to {DEMO_PEAK_DBFS} dBFS"))?;
        let y = y.channels;
        let out_path = out_dir.join(&ir_name);
        write_wav_atomic(&out_path, &y, rate, SampleFormat::F32, Dither::OFF)?;
        let out_s = y[0].len() as f64 / rate_f;
        println!(
            "render       {:.2} s of audio in {:.3} s on {} thread{}: {:.0}x real time (offline plan: block {}, \
             levels {})",
            dry.duration_s(),
            render_s,
            cores,
            if cores == 1 { "" } else { "s" },
            dry.duration_s() / render_s.max(1e-9),
            plan.block_frames,
            levels_list(&plan)
        );

        // Live-style run: the plan an audio callback at this block would use, run back to back on this thread.
        let model = CostModel::default();
        // The plan is the live one; the calls come back to back, faster than real time, so the engine runs
        // in offline mode (worker results waited for, none dropped).
        let live = args
            .schedule
            .apply(Planner::new().block_frames(args.block).shape(shape).cost_model(model.clone()), rate)?
            .plan(ir.frames())?;
        let options = EngineOptions { offline: true, ..EngineOptions::new(live.block_frames) };
        let mut engine = Engine::with_options(&live, &ir, routing, options)?;
        let stats = measure::run(&mut engine, rate, LIVE_SECONDS, live.block_frames, measure::Pacing::None);
        println!(
            "live plan    block {}, schedule {}: {} (optimal, flop model):",
            live.block_frames,
            args.schedule.describe(),
            super::schedules_used(&live)
        );
        print_levels(&live);
        println!("latency      {} frames ({:.3} ms)", live.latency_frames(), ms(live.latency_frames()));
        println!(
            "cost         {:.0} flops/sample per path, {} paths; predicted {:.3}% of one core",
            live.flops_per_sample(),
            shape.paths,
            model.load_pct(&live, shape, rate_f)
        );
        println!(
            "measured     {:.3}% of one core (audio-thread and worker CPU over {:.1} s of audio, calls back to \
             back); worst callback {:.1}% of the {:.3} ms deadline, p99.9 {:.1}%{}",
            stats.mean_load_pct,
            stats.audio_seconds,
            stats.max_pct,
            ms(live.block_frames),
            stats.p999_pct,
            if engine.worker_threads() > 0 { format!(", {} late worker results", stats.late) } else { String::new() }
        );
        println!(
            "wrote        {} ({:.2} s, {} channels, f32, gain {:.1} dB to peak {DEMO_PEAK_DBFS} dBFS)",
            out_path.display(),
            out_s,
            y.len(),
            dbfs(scale)
        );
        written.push((out_path, format!("{} through the {}", DRY_FILE, spec.name.replace('-', " "))));
    }

    println!();
    println!("Files are in {}:", out_dir.display());
    for (path, what) in &written {
        let name = path.file_name().map_or_else(String::new, |n| n.to_string_lossy().into_owned());
        println!("  {name:<22} {what}");
    }
    println!(
        "Listen at a low volume first: the renders peak at {DEMO_PEAK_DBFS} dBFS, as loud as a mastered track, and \
         the hits are sharp."
    );
    println!("Done in {:.2} s.", start.elapsed().as_secs_f64());
    Ok(())
}
