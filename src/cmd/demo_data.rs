//! `partita make-demo-data` (a maintainer tool): writes the synthetic demo files kept in `demo-data/`
//! ([`partita::demo_files`] says what they are and makes them) and reports each room's measured T30
//! against its intended RT60.

use std::path::{Path, PathBuf};
use std::time::Instant;

use clap::Args;
use partita::demo_files::{generate, DEMO_FORMAT, DEMO_RATE_HZ, DRY_FILE, IR_PEAK_DBFS};
use partita_io::{write_wav_atomic, Audio, Dither};
use partita_room::analysis::{t30, FilterPhase, OctaveFilter};
use partita_room::room::{DEMO_SEED, ROOM_BANDS};

use super::CmdResult;

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
