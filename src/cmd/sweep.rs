//! `partita sweep`: writes a measurement sweep ([`partita_room::sweep`]) as a 32-bit float WAV and its sidecar
//! ([`partita::sweep_file`]), after the safety cautions.

use std::path::PathBuf;

use clap::Args;
use partita::sweep_file::{sidecar_path, SweepSidecar};
use partita_io::{write_wav_atomic, Dither, SampleFormat};
use partita_room::sweep::{SweepKind, SweepSpec, DEFAULT_LEVEL_DBFS, MAX_UNFORCED_LEVEL_DBFS};

use super::CmdResult;

/// What `sweep` prints before it writes anything (and the README repeats).
pub const CAUTIONS: &str = "\
Cautions: a sweep through loudspeakers can damage hearing and equipment.
  - Start low (the default is -20 dBFS) and raise the level step by step while watching the recording.
  - Wear hearing protection near loud sources; keep people and animals out of the room.
  - Mind the neighbours.
  - In public spaces, follow local codes and licensed practice.";

/// Arguments of `partita sweep`.
#[derive(Debug, Args)]
pub struct SweepArgs {
    /// Output WAV (32-bit float, mono). The sidecar goes beside it with the extension .json.
    #[arg(short = 'o', long = "output", value_name = "SWEEP.wav")]
    output: PathBuf,
    /// Sample rate of the sweep (play it at this rate).
    #[arg(long, value_name = "HZ", default_value_t = 48_000)]
    rate: u32,
    #[command(flatten)]
    params: SweepParams,
}

/// The sweep's parameters and `--force`, shared by `sweep` and `capture` (which plays at the server's rate).
#[derive(Debug, Args)]
pub struct SweepParams {
    /// exponential (Farina 2000, exactly --duration-s) or synchronized (Novak et al. 2015: duration adjusted so
    /// that f1 L is whole, harmonic responses keep their phase).
    #[arg(long, value_name = "KIND", default_value = "synchronized", value_parser = parse_kind)]
    pub kind: SweepKind,
    /// Start frequency f1.
    #[arg(long, value_name = "HZ", default_value_t = 20.0)]
    pub start_hz: f64,
    /// End frequency f2 [default: 20 kHz, or 0.45 x the rate when lower].
    #[arg(long, value_name = "HZ")]
    pub end_hz: Option<f64>,
    /// Duration of the sweep itself.
    #[arg(long, value_name = "S", default_value_t = 10.0)]
    pub duration_s: f64,
    /// Raised-cosine fade-in.
    #[arg(long, value_name = "S", default_value_t = 0.1)]
    pub fade_in_s: f64,
    /// Raised-cosine fade-out.
    #[arg(long, value_name = "S", default_value_t = 0.01)]
    pub fade_out_s: f64,
    /// Peak level in dBFS. Above -6 dBFS only with --force.
    #[arg(long, value_name = "DB", default_value_t = DEFAULT_LEVEL_DBFS, allow_negative_numbers = true)]
    pub level_dbfs: f64,
    /// Silence after the sweep; at least the room's expected reverberation time.
    #[arg(long, value_name = "S", default_value_t = 3.0)]
    pub silence_s: f64,
    /// Allow a level above -6 dBFS.
    #[arg(long)]
    pub force: bool,
}

impl SweepParams {
    /// The sweep at `rate_hz`.
    pub fn spec(&self, rate_hz: u32) -> SweepSpec {
        let defaults = SweepSpec::new(self.kind, rate_hz);
        SweepSpec {
            start_hz: self.start_hz,
            end_hz: self.end_hz.unwrap_or(defaults.end_hz),
            duration_s: self.duration_s,
            fade_in_s: self.fade_in_s,
            fade_out_s: self.fade_out_s,
            level_dbfs: self.level_dbfs,
            silence_s: self.silence_s,
            ..defaults
        }
    }
}

/// Refuses a level above -6 dBFS unless `force` (the cautions say why).
pub fn check_level(level_dbfs: f64, force: bool) -> Result<(), String> {
    if level_dbfs > MAX_UNFORCED_LEVEL_DBFS && !force {
        return Err(format!(
            "refusing a sweep at {level_dbfs} dBFS: levels above {MAX_UNFORCED_LEVEL_DBFS} dBFS need --force (read the \
             cautions above; start low)"
        ));
    }
    Ok(())
}

fn parse_kind(s: &str) -> Result<SweepKind, String> {
    SweepKind::from_name(s).ok_or_else(|| format!("unknown sweep kind {s:?}: use exponential or synchronized"))
}

/// Runs `partita sweep`.
pub fn run(args: SweepArgs) -> CmdResult {
    println!("{CAUTIONS}\n");
    check_level(args.params.level_dbfs, args.params.force)?;
    let spec = args.params.spec(args.rate);
    let samples = spec.generate()?;
    write_wav_atomic(&args.output, &[&samples[..]], spec.sample_rate_hz, SampleFormat::F32, Dither::OFF)?;
    let sidecar = SweepSidecar::new(&spec, &samples);
    let sidecar_file = sidecar_path(&args.output);
    sidecar.write(&sidecar_file)?;
    println!(
        "wrote {} ({} sweep, {} Hz to {} Hz in {:.4} s, L = {:.6} s, {} dBFS peak, fades {} s / {} s, then {} s of \
         silence; {} frames at {} Hz)",
        args.output.display(),
        spec.kind,
        spec.start_hz,
        spec.end_hz,
        spec.sweep_duration_s(),
        spec.rate_constant_s(),
        spec.level_dbfs,
        spec.fade_in_s,
        spec.fade_out_s,
        spec.silence_s,
        samples.len(),
        spec.sample_rate_hz
    );
    println!("wrote {} (parameters and {})", sidecar_file.display(), sidecar.hash);
    println!(
        "next: play {} and record the microphone from the start of playback to the end of the file, then \
         `partita deconvolve REC.wav --sweep {} -o IR.wav`",
        args.output.display(),
        sidecar_file.display()
    );
    Ok(())
}
