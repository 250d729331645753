//! `partita deconvolve REC.wav --sweep SWEEP.json -o IR.wav`: recovers the impulse response from a recording of
//! a sweep made with any playback gear ([`partita_room::deconvolve`]), after checking the sweep's sidecar
//! ([`partita::sweep_file`]). Warns on a clipped recording and on a peak-to-noise ratio too low for T30.

use std::path::{Path, PathBuf};

use clap::Args;
use partita::sweep_file::SweepSidecar;
use partita_io::{read_wav, write_wav_atomic, Dither, SampleFormat};
use partita_room::analysis::{DecayRange, RANGE_HEADROOM_DB};
use partita_room::deconvolve::{deconvolve, Deconvolution, DeconvolveOptions, Method, DEFAULT_PRE_ONSET_MS};

use super::{dbfs, CmdResult};

/// A recorded sample at or above this level (dBFS) counts as clipped.
pub const CLIP_DBFS: f64 = -1.0;

/// Arguments of `partita deconvolve`.
#[derive(Debug, Args)]
pub struct DeconvolveArgs {
    /// The recording (WAV, up to 1024 channels): from the start of playback of the sweep file to its end.
    #[arg(value_name = "REC.wav")]
    recording: PathBuf,
    /// The sweep's sidecar written by `partita sweep` (the sweep is regenerated and its hash checked).
    #[arg(long, value_name = "SWEEP.json")]
    sweep: PathBuf,
    /// The impulse response to write (32-bit float, one channel per recorded channel).
    #[arg(short = 'o', long = "output", value_name = "IR.wav")]
    output: PathBuf,
    #[command(flatten)]
    response: ResponseArgs,
    /// Also write the harmonic distortion responses of orders 2 to N as <output stem>-h<n>.wav.
    #[arg(long, value_name = "N", default_value_t = 0)]
    harmonics: usize,
}

/// How the response is recovered and cut, shared by `deconvolve` and `capture`.
#[derive(Debug, Args)]
pub struct ResponseArgs {
    /// inverse (the time-reversed sweep with its -6 dB/octave envelope) or division (regularized spectral
    /// division).
    #[arg(long, value_name = "METHOD", default_value = "inverse", value_parser = parse_method)]
    pub method: Method,
    /// Margin kept before the onset (first sample within 20 dB of the peak).
    #[arg(long, value_name = "MS", default_value_t = DEFAULT_PRE_ONSET_MS)]
    pub pre_onset_ms: f64,
    /// Cut the tail where it meets the noise floor (Lundeby's crossing point, the latest over the channels).
    #[arg(long)]
    pub trim_tail: bool,
}

impl ResponseArgs {
    /// The deconvolution options, with harmonics up to `max_harmonic`.
    pub fn options(&self, max_harmonic: usize) -> DeconvolveOptions {
        DeconvolveOptions {
            method: self.method,
            pre_onset_ms: self.pre_onset_ms,
            trim_tail: self.trim_tail,
            max_harmonic,
            threads: 0,
        }
    }
}

/// Warns on stderr when a recording's `peak` (linear) reaches [`CLIP_DBFS`]; `what` names the recording.
pub fn warn_if_clipped(what: &str, peak: f64) {
    if dbfs(peak) >= CLIP_DBFS {
        eprintln!(
            "warning: {what}: the recording peaks at {:.2} dBFS (>= {CLIP_DBFS} dBFS): it may be clipped, which adds \
             distortion to the response; lower the recording gain or the sweep level and record again",
            dbfs(peak)
        );
    }
}

/// Prints each channel's peak-to-noise ratio (stdout, or stderr when `quiet`) and warns below what T30 needs;
/// warns when `--trim-tail` found no crossing.
pub fn report_response(d: &Deconvolution, trim_tail: bool, quiet: bool) {
    if trim_tail && !d.tail_trimmed {
        eprintln!(
            "warning: --trim-tail: no noise-floor crossing found in every channel (the decay is too short or \
             too noisy for Lundeby's fit); the tail was kept whole"
        );
    }
    let needed = -DecayRange::T30.levels_db().1 + RANGE_HEADROOM_DB;
    for (c, pnr) in d.peak_to_noise_db.iter().enumerate() {
        if quiet {
            eprintln!("channel {c}: peak-to-noise ratio {pnr:.1} dB");
        } else {
            println!("channel {c}: peak-to-noise ratio {pnr:.1} dB");
        }
        if *pnr < needed {
            eprintln!(
                "warning: channel {c}: peak-to-noise ratio {pnr:.1} dB is below the {needed:.0} dB T30 needs (its \
                 -35 dB range plus 10 dB above the noise); raise the level carefully, use a longer sweep, or \
                 quieten the room"
            );
        }
    }
}

fn parse_method(s: &str) -> Result<Method, String> {
    Method::from_name(s).ok_or_else(|| format!("unknown method {s:?}: use inverse or division"))
}

fn harmonic_path(output: &Path, order: usize) -> PathBuf {
    let stem = output.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_default();
    output.with_file_name(format!("{stem}-h{order}.wav"))
}

/// Runs `partita deconvolve`.
pub fn run(args: DeconvolveArgs) -> CmdResult {
    let (sidecar, spec, _) = SweepSidecar::read_verified(&args.sweep)?;
    let rec = read_wav(&args.recording)?;
    if rec.sample_rate_hz != spec.sample_rate_hz {
        return Err(format!(
            "{}: recorded at {} Hz but the sweep is at {} Hz; record at the sweep's rate",
            args.recording.display(),
            rec.sample_rate_hz,
            spec.sample_rate_hz
        )
        .into());
    }
    println!(
        "sweep: {} ({}, {} Hz to {} Hz, {:.4} s, {} dBFS, hash ok)",
        args.sweep.display(),
        sidecar.kind,
        spec.start_hz,
        spec.end_hz,
        spec.sweep_duration_s(),
        spec.level_dbfs
    );
    warn_if_clipped(&args.recording.display().to_string(), f64::from(rec.peak()));
    let options = args.response.options(args.harmonics);
    let d = deconvolve(&rec.channels, &spec, &options)?;
    write_wav_atomic(&args.output, &d.channels, spec.sample_rate_hz, SampleFormat::F32, Dither::OFF)?;
    let fs = f64::from(spec.sample_rate_hz);
    println!(
        "wrote {} ({} channel(s), {} frames = {:.3} s; onset {:.2} ms after the sweep's start, {:.2} ms into the file)",
        args.output.display(),
        d.channels.len(),
        d.channels[0].len(),
        d.channels[0].len() as f64 / fs,
        1e3 * d.delay_frames as f64 / fs,
        1e3 * d.onset_frames as f64 / fs
    );
    report_response(&d, args.response.trim_tail, false);
    for h in &d.harmonics {
        let path = harmonic_path(&args.output, h.order);
        write_wav_atomic(&path, &h.channels, spec.sample_rate_hz, SampleFormat::F32, Dither::OFF)?;
        println!("wrote {} (harmonic {}, {} frames)", path.display(), h.order, h.channels[0].len());
    }
    if d.harmonics.len() + 1 < args.harmonics {
        eprintln!(
            "warning: only harmonics up to {} fit before the linear response; record with a longer sweep for more",
            d.harmonics.len() + 1
        );
    }
    Ok(())
}
