//! `partita render`: convolve WAV files with an impulse response offline, the full convolution with the
//! engine's latency removed, several files in parallel, each written atomically.
//!
//! The pipeline per input: read the header (all inputs and the IR are checked before any work starts), load
//! the IR at the input's rate (resampled when the rates differ, with a note), choose the routing from the IR's
//! channels (or --routing) and the input's ([`partita_core::Routing::choose`]), convolve and mix
//! `gain x (wet x convolved + dry x input)` in one pass through the engine's own mixer
//! ([`partita_core::offline::render_with_mix`]), cut the tail if asked, refuse non-finite output, and write to a temporary file beside the output that is renamed over it only when complete
//! ([`partita_io::write_wav_atomic`]).

use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};
use std::sync::Mutex;
use std::time::Instant;

use clap::Args;
use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
use partita_core::offline;
use partita_core::{Mix, Plan, Routing, Shape};
use partita_io::{
    load_ir, read_wav, read_wav_info, resample_signal, write_wav_atomic, Dither, IrOptions, LoadedIr, Normalize,
    SampleFormat, WavInfo,
};

use super::{dbfs, CmdResult};

/// Arguments of `partita render`.
#[derive(Debug, Args)]
pub struct RenderArgs {
    /// Input WAV files (the dry signals): PCM 8 to 32-bit or float 32/64-bit, mono or stereo (or the inputs of
    /// a --routing matrix:MxN).
    #[arg(value_name = "INPUT", required = true)]
    inputs: Vec<PathBuf>,
    /// Impulse response (WAV). Channels: 1 mono (serves a mono or stereo input), 2 stereo (a mono input
    /// becomes stereo), 4 true stereo LL LR RL RR (needs a stereo input).
    #[arg(long, value_name = "IR.wav")]
    ir: PathBuf,
    /// Output file (with a single input).
    #[arg(short = 'o', long = "output", value_name = "OUT.wav", conflicts_with = "out_dir")]
    output: Option<PathBuf>,
    /// Output folder (created if missing): writes <input stem>.wav for each input.
    #[arg(long, value_name = "DIR")]
    out_dir: Option<PathBuf>,
    /// Level of the convolved (wet) signal, linear.
    #[arg(long, value_name = "W", default_value_t = 1.0, allow_negative_numbers = true)]
    wet: f64,
    /// Level of the input (dry) signal mixed in, linear, aligned sample for sample with the wet signal.
    #[arg(long, value_name = "D", default_value_t = 0.0, allow_negative_numbers = true)]
    dry: f64,
    /// Gain of the final mix, dB.
    #[arg(long, value_name = "DB", default_value_t = 0.0, allow_negative_numbers = true)]
    gain_db: f64,
    /// IR normalization before use: none (the exact file), peak (largest tap 1) or energy (loudest
    /// channel at unit energy).
    #[arg(long, value_name = "MODE", default_value = "none")]
    normalize: Normalize,
    /// Cut the output to the input's length instead of keeping the full tail (input + IR - 1 frames).
    #[arg(long)]
    no_tail: bool,
    /// Output sample format: f32, pcm24 or pcm16 (integer formats are TPDF-dithered unless --no-dither).
    #[arg(long, value_name = "FORMAT", default_value = "f32")]
    format: SampleFormat,
    /// Plain rounding instead of TPDF dither for pcm24 and pcm16.
    #[arg(long)]
    no_dither: bool,
    /// Engine block in frames [default: partita-core's offline plan: the IR length rounded up to a power of
    /// two, 256 to 16384, with larger FFT levels behind it].
    #[arg(long, value_name = "N")]
    block: Option<usize>,
    /// IR routing instead of the one its channel count implies: mono, mono-to-stereo, stereo, true-stereo or
    /// matrix:MxN (M inputs, N outputs; IR channel m x N + n feeds input m to output n).
    #[arg(long = "routing", alias = "layout", value_name = "ROUTING")]
    routing: Option<Routing>,
    /// Output sample rate: inputs and the IR are resampled to it. Without it the output has each input's
    /// rate; only the IR is ever resampled.
    #[arg(long, value_name = "HZ")]
    rate: Option<u32>,
    /// Threads to use, shared among the inputs [default: all cores].
    #[arg(long, value_name = "N")]
    threads: Option<usize>,
}

/// Whether two paths name one existing file (hard links and symbolic links included).
fn same_file(a: &Path, b: &Path) -> bool {
    #[cfg(unix)]
    {
        use std::os::unix::fs::MetadataExt;
        match (std::fs::metadata(a), std::fs::metadata(b)) {
            (Ok(x), Ok(y)) => x.dev() == y.dev() && x.ino() == y.ino(),
            _ => false,
        }
    }
    #[cfg(not(unix))]
    {
        matches!((a.canonicalize(), b.canonicalize()), (Ok(x), Ok(y)) if x == y)
    }
}

/// Output path of every input, from `-o` or `--out-dir`.
fn output_paths(args: &RenderArgs) -> Result<Vec<PathBuf>, String> {
    match (&args.output, &args.out_dir) {
        (Some(out), None) => {
            if args.inputs.len() == 1 {
                Ok(vec![out.clone()])
            } else {
                Err(format!(
                    "{}: -o names one output file but {} inputs were given; use --out-dir DIR to render several",
                    out.display(),
                    args.inputs.len()
                ))
            }
        }
        (None, Some(dir)) => {
            let mut outs: Vec<PathBuf> = Vec::with_capacity(args.inputs.len());
            for input in &args.inputs {
                let stem = input
                    .file_stem()
                    .ok_or_else(|| format!("{}: no file name to name the output after", input.display()))?;
                let mut name = stem.to_os_string();
                name.push(".wav");
                let out = dir.join(name);
                if let Some(j) = outs.iter().position(|o| *o == out) {
                    return Err(format!(
                        "{}: {} and {} would both write {}; render them into different folders",
                        input.display(),
                        args.inputs[j].display(),
                        input.display(),
                        out.display()
                    ));
                }
                outs.push(out);
            }
            Ok(outs)
        }
        (None, None) => Err("give the output file with -o OUT.wav (one input) or a folder with --out-dir DIR".into()),
        (Some(_), Some(_)) => Err("give -o OUT.wav or --out-dir DIR, not both".into()),
    }
}

fn check_finite(name: &str, v: f64) -> Result<(), String> {
    if v.is_finite() {
        Ok(())
    } else {
        Err(format!("{name} must be a finite number, got {v}"))
    }
}

/// The first non-finite sample: (channel, frame).
fn first_non_finite(channels: &[Vec<f32>]) -> Option<(usize, usize)> {
    channels.iter().enumerate().find_map(|(c, x)| x.iter().position(|v| !v.is_finite()).map(|f| (c, f)))
}

/// One input to render, fully checked.
#[derive(Debug)]
struct Job {
    input: PathBuf,
    output: PathBuf,
    /// Output (and IR) rate.
    rate_hz: u32,
    /// Index into the prepared IRs.
    ir: usize,
    routing: Routing,
    plan: Plan,
    /// Work estimate for the progress bar: (frames + IR frames) x paths.
    weight: f64,
}

/// What one render wrote.
#[derive(Debug)]
struct Written {
    channels: usize,
    frames: usize,
    rate_hz: u32,
    peak: f32,
    clipped: usize,
}

/// Settings shared by every job.
#[derive(Debug, Clone, Copy)]
struct Output {
    mix: Mix,
    no_tail: bool,
    format: SampleFormat,
    dither: Dither,
}

fn render_job(
    job: &Job,
    ir: &LoadedIr,
    out: Output,
    threads: usize,
    progress: &(dyn Fn(u64, u64) + Sync),
) -> Result<Written, String> {
    let name = job.input.display();
    let mut audio = read_wav(&job.input).map_err(|e| e.to_string())?;
    if audio.frames() == 0 {
        return Err(format!("{name}: the input has 0 frames; nothing to render"));
    }
    if audio.sample_rate_hz != job.rate_hz {
        audio = resample_signal(&audio, job.rate_hz).map_err(|e| format!("{name}: {e}"))?;
    }
    let frames = audio.frames();
    let mut y =
        offline::render_with_mix(&job.plan, &ir.ir, job.routing, &out.mix, &audio.channels, threads, Some(progress))
            .map_err(|e| format!("{name}: {e}"))?;
    if out.no_tail {
        y.iter_mut().for_each(|c| c.truncate(frames));
    }
    if let Some((channel, frame)) = first_non_finite(&y) {
        return Err(format!(
            "{}: not written: the mix has a NaN or infinite sample (channel {channel}, frame {frame}); lower \
             --gain-db, --wet or --dry",
            job.output.display()
        ));
    }
    let peak = y.iter().flatten().fold(0.0f32, |m, v| m.max(v.abs()));
    let clipped = if out.format.is_integer() { y.iter().flatten().filter(|v| v.abs() > 1.0).count() } else { 0 };
    write_wav_atomic(&job.output, &y, job.rate_hz, out.format, out.dither).map_err(|e| e.to_string())?;
    Ok(Written { channels: y.len(), frames: y.first().map_or(0, Vec::len), rate_hz: job.rate_hz, peak, clipped })
}

/// Steps of the progress bar.
const PROGRESS_STEPS: u64 = 1000;
/// The bar appears once the work has run this long and is projected to take at least [`PROGRESS_MIN_S`].
const PROGRESS_SHOW_AFTER_S: f64 = 0.25;
/// Work projected to take less than this gets no bar.
const PROGRESS_MIN_S: f64 = 1.0;

/// One progress bar over every job, on stderr, drawn only when stderr is a terminal and the work is
/// projected (from its progress after [`PROGRESS_SHOW_AFTER_S`]) to take over [`PROGRESS_MIN_S`].
#[derive(Debug)]
struct Progress {
    bar: Option<ProgressBar>,
    start: Instant,
    weights: Vec<f64>,
    state: Mutex<(Vec<f64>, bool)>,
}

impl Progress {
    fn new(weights: Vec<f64>, label: String) -> Self {
        let bar = std::io::stderr().is_terminal().then(|| {
            let style = ProgressStyle::with_template("{msg} [{bar:40}] {percent:>3}% eta {eta}")
                .unwrap_or_else(|_| ProgressStyle::default_bar())
                .progress_chars("=> ");
            let bar = ProgressBar::with_draw_target(Some(PROGRESS_STEPS), ProgressDrawTarget::hidden());
            bar.set_style(style);
            bar.set_message(label);
            bar
        });
        let jobs = weights.len();
        Self { bar, start: Instant::now(), weights, state: Mutex::new((vec![0.0; jobs], false)) }
    }

    fn update(&self, job: usize, done: u64, total: u64) {
        let Some(bar) = &self.bar else { return };
        let mut state = self.state.lock().unwrap_or_else(|e| e.into_inner());
        let (fractions, shown) = &mut *state;
        fractions[job] = if total == 0 { 1.0 } else { done as f64 / total as f64 };
        let all: f64 = self.weights.iter().sum::<f64>().max(f64::MIN_POSITIVE);
        let fraction = self.weights.iter().zip(fractions.iter()).map(|(w, f)| w * f).sum::<f64>() / all;
        bar.set_position((fraction * PROGRESS_STEPS as f64).round() as u64);
        let elapsed = self.start.elapsed().as_secs_f64();
        if !*shown && elapsed >= PROGRESS_SHOW_AFTER_S && fraction < 1.0 && elapsed / fraction >= PROGRESS_MIN_S {
            bar.set_draw_target(ProgressDrawTarget::stderr());
            *shown = true;
        }
    }

    fn finish(&self) {
        if let Some(bar) = &self.bar {
            bar.finish_and_clear();
        }
    }
}

/// Runs `partita render`.
pub fn run(args: RenderArgs) -> CmdResult {
    check_finite("--wet", args.wet)?;
    check_finite("--dry", args.dry)?;
    check_finite("--gain-db", args.gain_db)?;
    if args.rate == Some(0) {
        return Err("--rate must be above 0 Hz".into());
    }
    if args.block == Some(0) {
        return Err("--block must be at least 1 frame".into());
    }
    let outputs = output_paths(&args)?;
    for output in &outputs {
        if let Some(victim) = args.inputs.iter().chain([&args.ir]).find(|p| same_file(p, output)) {
            return Err(format!(
                "{}: the output would overwrite the input file {}; choose another output name or folder",
                output.display(),
                victim.display()
            )
            .into());
        }
    }

    // Every header first, so a bad file stops the command before any work.
    let infos: Vec<WavInfo> = args.inputs.iter().map(|p| read_wav_info(p)).collect::<Result<_, _>>()?;
    for (input, info) in args.inputs.iter().zip(&infos) {
        if info.frames == 0 {
            return Err(format!("{}: the input has 0 frames; nothing to render", input.display()).into());
        }
    }
    let ir_info = read_wav_info(&args.ir)?;
    let ir_name = args.ir.display();

    // The IR at every output rate needed, loaded and checked once per rate.
    let rates: Vec<u32> = infos.iter().map(|i| args.rate.unwrap_or(i.sample_rate_hz)).collect();
    let mut irs: Vec<LoadedIr> = Vec::new();
    for &rate in &rates {
        if irs.iter().any(|p| p.ir.sample_rate_hz() == rate) {
            continue;
        }
        let options = IrOptions {
            sample_rate_hz: Some(rate),
            normalize: args.normalize,
            routing: args.routing,
            ..IrOptions::default()
        };
        let prepared = load_ir(&args.ir, &options)?;
        if ir_info.sample_rate_hz != rate {
            let why = match args.rate {
                Some(_) => format!("the output rate --rate {rate}"),
                None => {
                    let input = args.inputs.iter().zip(&rates).find(|(_, &r)| r == rate).map(|(p, _)| p.display());
                    format!(
                        "the rate of {}; the input is kept as it is",
                        input.map_or(String::new(), |p| p.to_string())
                    )
                }
            };
            eprintln!(
                "partita: note: the IR {ir_name} is at {} Hz: resampled to {rate} Hz ({} frames), {why}",
                ir_info.sample_rate_hz,
                prepared.ir.frames()
            );
        }
        irs.push(prepared);
    }
    if let Some(rate) = args.rate {
        for (input, info) in args.inputs.iter().zip(&infos) {
            if info.sample_rate_hz != rate {
                eprintln!(
                    "partita: note: {} is at {} Hz: resampled to {rate} Hz (--rate)",
                    input.display(),
                    info.sample_rate_hz
                );
            }
        }
    }

    // One mix for every job, applied by the engine's own mixer (10 ms ramps never start: the engines begin at it).
    let mix = Mix { wet: args.wet as f32, dry: args.dry as f32, output_gain_db: args.gain_db as f32, ..Mix::default() };
    let mut jobs = Vec::with_capacity(args.inputs.len());
    for ((input, info), (output, &rate)) in args.inputs.iter().zip(&infos).zip(outputs.iter().zip(&rates)) {
        let index = irs.iter().position(|p| p.ir.sample_rate_hz() == rate).unwrap_or(0);
        let ir = &irs[index];
        let channels = usize::from(info.channels);
        let routing = Routing::choose(args.routing, ir.ir.channels(), channels)
            .map_err(|e| format!("{}: the IR {ir_name}: {e}", input.display()))?;
        let map = routing.resolve(ir.ir.channels()).map_err(|e| format!("{ir_name}: {e}"))?;
        if mix.check(map.inputs, map.outputs, 0).is_err() && args.dry != 0.0 {
            return Err(format!(
                "{}: --dry needs the output channels to match the input's (or a mono input), but the {} IR \
                 {ir_name} maps {} inputs to {} outputs; use --dry 0",
                input.display(),
                ir.routing,
                map.inputs,
                map.outputs
            )
            .into());
        }
        let plan = offline::offline_plan_with_block(ir.ir.frames(), Shape::of(&map), args.block)
            .map_err(|e| format!("{ir_name}: {e}"))?;
        let frames = partita_io::resampled_frames(info.frames, info.sample_rate_hz, rate) as f64;
        let weight = (frames + ir.ir.frames() as f64) * map.paths.len() as f64;
        jobs.push(Job {
            input: input.clone(),
            output: output.clone(),
            rate_hz: rate,
            ir: index,
            routing,
            plan,
            weight,
        });
    }
    if let Some(dir) = &args.out_dir {
        std::fs::create_dir_all(dir).map_err(|e| format!("{}: cannot create the output folder: {e}", dir.display()))?;
    }

    let out = Output {
        mix,
        no_tail: args.no_tail,
        format: args.format,
        dither: if args.no_dither { Dither::OFF } else { Dither::default() },
    };
    let cores = std::thread::available_parallelism().map_or(1, |n| n.get());
    let budget = match args.threads {
        None | Some(0) => cores,
        Some(n) => n,
    };
    let workers = budget.min(jobs.len()).max(1);
    let threads_each = (budget / workers).max(1);
    let label = if jobs.len() == 1 { "rendering".to_string() } else { format!("rendering {} files", jobs.len()) };
    let progress = Progress::new(jobs.iter().map(|j| j.weight).collect(), label);
    let results: Vec<Mutex<Option<Result<Written, String>>>> = jobs.iter().map(|_| Mutex::new(None)).collect();
    let next = AtomicUsize::new(0);
    let failed = AtomicBool::new(false);
    std::thread::scope(|scope| {
        for _ in 0..workers {
            scope.spawn(|| loop {
                let i = next.fetch_add(1, Ordering::Relaxed);
                if i >= jobs.len() || failed.load(Ordering::Relaxed) {
                    break;
                }
                let report = |done: u64, total: u64| progress.update(i, done, total);
                let result = render_job(&jobs[i], &irs[jobs[i].ir], out, threads_each, &report);
                if result.is_err() {
                    failed.store(true, Ordering::Relaxed);
                }
                *results[i].lock().unwrap_or_else(|e| e.into_inner()) = Some(result);
            });
        }
    });
    progress.finish();

    let mut first_error = None;
    for (job, result) in jobs.iter().zip(results) {
        match result.into_inner().unwrap_or_else(|e| e.into_inner()) {
            Some(Ok(w)) => {
                println!(
                    "{} -> {}: {} channel{}, {} frames ({:.3} s) at {} Hz, {}, peak {:.1} dBFS",
                    job.input.display(),
                    job.output.display(),
                    w.channels,
                    if w.channels == 1 { "" } else { "s" },
                    w.frames,
                    w.frames as f64 / f64::from(w.rate_hz),
                    w.rate_hz,
                    out.format,
                    dbfs(f64::from(w.peak))
                );
                if w.clipped > 0 {
                    let over = dbfs(f64::from(w.peak));
                    eprintln!(
                        "partita: warning: {}: {} samples above full scale were clipped in {} (peak {over:+.1} dBFS); \
                         lower --gain-db by {over:.1} dB or write --format f32",
                        job.output.display(),
                        w.clipped,
                        out.format
                    );
                }
            }
            Some(Err(e)) => {
                first_error.get_or_insert(e);
            }
            None => {}
        }
    }
    match first_error {
        Some(e) => Err(e.into()),
        None => Ok(()),
    }
}
