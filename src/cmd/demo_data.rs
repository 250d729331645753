//! `partita make-demo-data` (a maintainer tool): renders the synthetic demo files kept in `demo-data/`,
//! two impulse responses of imagined spaces and a dry phrase, all made by code in this repository.
//!
//! - `tiled-stairwell.wav`, `timber-barn.wav`: [`render_room_ir`] of [`RoomSpec::tiled_stairwell`] and
//!   [`RoomSpec::timber_barn`] (image sources + band-shaped decaying noise; see
//!   `partita_room::room`) with seed [`DEMO_SEED`], stereo, 48 kHz, each peak-normalized to
//!   [`IR_PEAK_DBFS`].
//! - `dry-phrase.wav`: [`demo_phrase`] at 48 kHz (plucked strings by Karplus-Strong and percussive hits;
//!   see `partita_room::phrase`), mono, peak -3 dBFS.
//!
//! All are written as 24-bit PCM with plain rounding. No dither: the phrase's gaps stay digital silence, and
//! the IR tails, which decay about 100 dB below their -12 dBFS peaks, still end above one 24-bit step (the
//! rounding error, -149 dBFS RMS, is far below anything audible). Float32 would exceed the 3 MB budget of the
//! folder; 24-bit keeps it at 2.7 MB. `partita demo` generates the same samples in memory
//! ([`generate`]) when the folder is missing.

use std::path::{Path, PathBuf};
use std::time::Instant;

use clap::Args;
use partita_io::{write_wav_atomic, Audio, Dither, SampleFormat};
use partita_room::analysis::{t30, FilterPhase, OctaveFilter};
use partita_room::phrase::demo_phrase;
use partita_room::room::{render_room_ir, RoomSpec, DEMO_SEED, ROOM_BANDS};

use super::CmdResult;

/// File name of the dry phrase.
pub const DRY_FILE: &str = "dry-phrase.wav";

/// Sample rate of every demo file.
pub const DEMO_RATE_HZ: u32 = 48_000;

/// Peak level each demo IR is normalized to before quantizing, dB re. full scale. The rendered rooms are
/// unnormalized (direct sound 1 / r). At -12 dBFS a render through them without `--normalize` keeps about
/// the input's loudness (their energy gains, sqrt(sum h^2), are about 1.6 and 1.1, +4 and +1 dB for broadband
/// sound), so a plain `partita render` of a normal recording rarely exceeds full scale. The quietest part of
/// the tails (the last 100 ms, about 100 dB below the peak) stays 18 to 27 dB above one 24-bit step. `partita demo` energy-normalizes them, so it does not depend on this.
pub const IR_PEAK_DBFS: f64 = -12.0;

/// Format of the committed files.
pub const DEMO_FORMAT: SampleFormat = SampleFormat::Pcm24;

/// One imagined space: its parameters and its rendered, normalized, quantized IR.
#[derive(Debug, Clone)]
pub struct DemoSpace {
    /// The room it was rendered from.
    pub spec: RoomSpec,
    /// The stereo IR, on the 24-bit grid.
    pub ir: Audio,
}

impl DemoSpace {
    /// `<name>.wav`, e.g. `timber-barn.wav`.
    pub fn file_name(&self) -> String {
        file_name(&self.spec)
    }
}

/// `<name>.wav` for a room.
pub fn file_name(spec: &RoomSpec) -> String {
    format!("{}.wav", spec.name)
}

/// The demo's files: the dry phrase and every space.
#[derive(Debug, Clone)]
pub struct DemoData {
    /// The mono dry phrase, on the 24-bit grid.
    pub dry: Audio,
    /// The spaces, smallest first.
    pub spaces: Vec<DemoSpace>,
}

/// Rounds to the 24-bit PCM grid exactly as writing [`DEMO_FORMAT`] without dither and reading it back does:
/// round(x 2^23), halves away from zero, clamped to the 24-bit range, divided by 2^23.
pub fn quantize_pcm24(x: f32) -> f32 {
    const SCALE: f64 = 8_388_608.0;
    ((f64::from(x) * SCALE).round().clamp(-SCALE, SCALE - 1.0) / SCALE) as f32
}

fn quantized(channels: Vec<Vec<f32>>, gain: f64) -> Audio {
    let channels = channels
        .into_iter()
        .map(|c| c.into_iter().map(|v| quantize_pcm24((f64::from(v) * gain) as f32)).collect())
        .collect();
    Audio::new(channels, DEMO_RATE_HZ)
}

/// Renders every demo file in memory (the rooms on threads of their own). Allocates; about half a second
/// in an optimized build.
pub fn generate() -> DemoData {
    let specs: Vec<RoomSpec> = RoomSpec::presets().into_iter().map(|s| s.with_sample_rate(DEMO_RATE_HZ)).collect();
    std::thread::scope(|scope| {
        let rooms: Vec<_> = specs.iter().map(|spec| scope.spawn(move || render_room_ir(spec, DEMO_SEED))).collect();
        let dry = quantized(vec![demo_phrase(DEMO_RATE_HZ)], 1.0);
        let spaces = specs
            .iter()
            .zip(rooms)
            .map(|(spec, handle)| {
                let taps = handle.join().unwrap_or_else(|panic| std::panic::resume_unwind(panic));
                let peak = taps.iter().flatten().fold(0.0f64, |m, v| m.max(f64::from(v.abs())));
                let gain = 10f64.powf(IR_PEAK_DBFS / 20.0) / peak;
                DemoSpace { spec: spec.clone(), ir: quantized(taps, gain) }
            })
            .collect();
        DemoData { dry, spaces }
    })
}

/// Arguments of `partita make-demo-data`.
#[derive(Debug, Args)]
pub struct MakeDemoDataArgs {
    /// Folder to write into (created if missing).
    #[arg(long, value_name = "DIR", default_value = "demo-data")]
    out_dir: PathBuf,
}

fn write(dir: &Path, name: &str, audio: &Audio) -> Result<u64, Box<dyn std::error::Error>> {
    let path = dir.join(name);
    write_wav_atomic(&path, &audio.channels, audio.sample_rate_hz, DEMO_FORMAT, Dither::OFF)?;
    Ok(std::fs::metadata(&path).map_err(|e| format!("{}: {e}", path.display()))?.len())
}

/// T30 per band of [`ROOM_BANDS`] (causal octave filters, ISO 3382-1), mean of the channels; NaN where the
/// analysis finds no answer.
fn band_t30(ir: &Audio) -> Vec<f64> {
    let fs = f64::from(ir.sample_rate_hz);
    ROOM_BANDS
        .iter()
        .map(|&band| {
            let Ok(filter) = OctaveFilter::new(band, fs, FilterPhase::Causal) else { return f64::NAN };
            let each: Vec<f64> = ir.channels.iter().map(|c| t30(&filter.process(c), fs).unwrap_or(f64::NAN)).collect();
            each.iter().sum::<f64>() / each.len() as f64
        })
        .collect()
}

/// Runs `partita make-demo-data`.
pub fn run(args: MakeDemoDataArgs) -> CmdResult {
    let start = Instant::now();
    let data = generate();
    let dir = &args.out_dir;
    std::fs::create_dir_all(dir).map_err(|e| format!("{}: cannot create the folder: {e}", dir.display()))?;
    let mut total = write(dir, DRY_FILE, &data.dry)?;
    println!(
        "{:<22} {:>9} bytes  mono, {:.2} s, demo_phrase({DEMO_RATE_HZ}), peak {:.1} dBFS",
        DRY_FILE,
        total,
        data.dry.duration_s(),
        super::dbfs(f64::from(data.dry.peak()))
    );
    for space in &data.spaces {
        let bytes = write(dir, &space.file_name(), &space.ir)?;
        total += bytes;
        println!(
            "{:<22} {:>9} bytes  stereo, {:.2} s, render_room_ir({}, seed {DEMO_SEED}), peak {IR_PEAK_DBFS} dBFS",
            space.file_name(),
            bytes,
            space.ir.duration_s(),
            space.spec.name
        );
        let bands: Vec<String> = ROOM_BANDS.iter().map(|b| format!("{:>6}", b.nominal_hz())).collect();
        let want: Vec<String> = space.spec.rt60_s.iter().map(|t| format!("{t:>6.2}")).collect();
        let got: Vec<String> = band_t30(&space.ir).iter().map(|t| format!("{t:>6.2}")).collect();
        println!("    band (Hz)         {}", bands.join(""));
        println!("    intended RT60 (s) {}", want.join(""));
        println!("    measured T30 (s)  {}", got.join(""));
    }
    println!(
        "{} files, {total} bytes ({:.2} MB) in {} ({:.2} s)",
        data.spaces.len() + 1,
        total as f64 / 1e6,
        dir.display(),
        start.elapsed().as_secs_f64()
    );
    Ok(())
}
