//! `partita analyze IR.wav`: the room-acoustic parameters of each channel, broadband and per octave band
//! ([`partita_room::analysis::analyze`]), as a table, as JSON (`--json`) and as an SVG of the decay curves
//! (`--svg`, [`partita::decay_plot`]).

use std::path::PathBuf;

use clap::Args;
use partita::decay_plot::{smoothed_energy_db, write_svg};
use partita_io::read_wav;
use partita_room::analysis::{analyze, AnalysisOptions, BandAnalysis, ChannelAnalysis, FilterPhase, OctaveFilter};
use serde_json::{json, Value};

use super::CmdResult;

/// Arguments of `partita analyze`.
#[derive(Debug, Args)]
pub struct AnalyzeArgs {
    /// The impulse response (WAV; every channel is analysed on its own).
    #[arg(value_name = "IR.wav")]
    ir: PathBuf,
    /// Print JSON instead of the table.
    #[arg(long)]
    json: bool,
    /// Also write the decay curves per band, with the fitted lines and the noise floor, as SVG.
    #[arg(long, value_name = "PATH")]
    svg: Option<PathBuf>,
    /// How the octave filters run: time-reversed (default: their ringing stays out of the decay), causal or
    /// zero-phase.
    #[arg(long, value_name = "PHASE", default_value = "time-reversed", value_parser = parse_phase)]
    filter: FilterPhase,
}

fn parse_phase(s: &str) -> Result<FilterPhase, String> {
    FilterPhase::from_name(s).ok_or_else(|| format!("unknown filter {s:?}: use time-reversed, causal or zero-phase"))
}

fn label(b: &BandAnalysis) -> String {
    b.band.map_or("broadband".into(), |band| band.to_string())
}

fn band_json(b: &BandAnalysis, fs: f64) -> Value {
    let values: serde_json::Map<String, Value> = b
        .values
        .iter()
        .map(|m| {
            let mut v = json!({
                "value": m.value.ok(),
                "unit": m.parameter.unit(),
                "flags": m.flags.iter().map(|f| f.to_string()).collect::<Vec<_>>(),
            });
            if let Err(e) = m.value {
                v["error"] = json!(e.to_string());
            }
            (m.parameter.name().to_string(), v)
        })
        .collect();
    json!({
        "band": label(b),
        "centre_hz": b.band.map(|band| band.centre_hz()),
        "onset_s": b.onset_frames as f64 / fs,
        "noise_floor_db": b.noise.map(|n| n.level_db),
        "crossing_s": b.noise.map(|n| n.crossing_frames as f64 / fs),
        "dynamic_range_db": if b.dynamic_range_db.is_finite() { Some(b.dynamic_range_db) } else { None },
        "parameters": values,
    })
}

/// Prints channel `c`'s analysis as the table `analyze` shows, with its notes.
pub fn print_table(c: usize, a: &ChannelAnalysis) {
    println!("channel {c} ({} octave filters)", a.phase.name());
    println!(
        "  {:<10} {:>7} {:>7} {:>7} {:>7} {:>7} {:>6} {:>7} {:>6} {:>6}",
        "band", "EDT s", "T20 s", "T30 s", "C50 dB", "C80 dB", "D50", "Ts ms", "DR dB", "noise"
    );
    let mut notes = Vec::new();
    for b in std::iter::once(&a.broadband).chain(&a.bands) {
        let cell = |m: &partita_room::analysis::Measured, scale: f64, digits: usize| -> String {
            let mark = if m.flags.is_empty() { "" } else { "*" };
            match m.value {
                Ok(v) => format!("{:.*}{mark}", digits, v * scale),
                Err(_) => "-".into(),
            }
        };
        let v = &b.values;
        println!(
            "  {:<10} {:>7} {:>7} {:>7} {:>7} {:>7} {:>6} {:>7} {:>6} {:>6}",
            label(b),
            cell(&v[0], 1.0, 2),
            cell(&v[1], 1.0, 2),
            cell(&v[2], 1.0, 2),
            cell(&v[3], 1.0, 1),
            cell(&v[4], 1.0, 1),
            cell(&v[5], 1.0, 2),
            cell(&v[6], 1e3, 0),
            // Rounded down, as in the notes: 19.96 dB shows as 19, short of the 20 dB EDT needs.
            if b.dynamic_range_db.is_finite() { format!("{:.0}", b.dynamic_range_db.floor()) } else { "-".into() },
            b.noise.map_or("-".into(), |n| format!("{:.0}", n.level_db)),
        );
        for m in v {
            if !m.flags.is_empty() {
                let flags: Vec<String> = m.flags.iter().map(|f| f.to_string()).collect();
                notes.push(format!("{} {}: {}", label(b), m.parameter, flags.join("; ")));
            }
            if let Err(e) = m.value {
                notes.push(format!("{} {}: no value: {e}", label(b), m.parameter));
            }
        }
    }
    if !notes.is_empty() {
        println!("  * read with care:");
        for n in notes {
            println!("    {n}");
        }
    }
    println!(
        "  DR: how far the decay falls before it meets the noise (Lundeby); noise: its level in dB re. the peak. \
         EDT, C50, C80, D50 and Ts need 20 dB, T20 35, T30 45."
    );
}

/// Analyses every channel with the default options and `phase`; an error names `what` and the channel.
pub fn analyze_channels(
    channels: &[Vec<f32>],
    fs: f64,
    phase: FilterPhase,
    what: &str,
) -> Result<Vec<ChannelAnalysis>, String> {
    let options = AnalysisOptions { phase, ..AnalysisOptions::default() };
    channels
        .iter()
        .enumerate()
        .map(|(c, x)| analyze(x, fs, &options).map_err(|e| format!("{what}: channel {c}: {e}")))
        .collect()
}

/// The analyses as the `channels` array of `analyze --json`.
pub fn channels_json(analyses: &[ChannelAnalysis], fs: f64) -> Value {
    analyses
        .iter()
        .map(|a| {
            json!({
                "filter": a.phase.name(),
                "broadband": band_json(&a.broadband, fs),
                "bands": a.bands.iter().map(|b| band_json(b, fs)).collect::<Vec<_>>(),
            })
        })
        .collect()
}

/// Runs `partita analyze`.
pub fn run(args: AnalyzeArgs) -> CmdResult {
    let audio = read_wav(&args.ir)?;
    let fs = f64::from(audio.sample_rate_hz);
    let analyses = analyze_channels(&audio.channels, fs, args.filter, &args.ir.display().to_string())?;
    if args.json {
        let channels = channels_json(&analyses, fs);
        let out = json!({ "file": args.ir.display().to_string(), "sample_rate_hz": audio.sample_rate_hz, "channels": channels });
        println!("{}", serde_json::to_string_pretty(&out)?);
    } else {
        println!(
            "{}: {} channel(s), {:.3} s at {} Hz",
            args.ir.display(),
            audio.channel_count(),
            audio.duration_s(),
            audio.sample_rate_hz
        );
        for (c, a) in analyses.iter().enumerate() {
            print_table(c, a);
        }
    }
    if let Some(path) = &args.svg {
        let energy: Vec<Vec<Vec<f64>>> = audio
            .channels
            .iter()
            .zip(&analyses)
            .map(|(x, a)| {
                let x: Vec<f64> = x.iter().map(|&v| f64::from(v)).collect();
                let mut curves = vec![smoothed_energy_db(&x, a.broadband.onset_frames, fs)];
                for b in &a.bands {
                    let band = b.band.expect("bands have a band");
                    let y = OctaveFilter::new(band, fs, a.phase).map(|f| f.process(&x)).unwrap_or_default();
                    curves.push(smoothed_energy_db(&y, b.onset_frames, fs));
                }
                curves
            })
            .collect();
        write_svg(path, &analyses, &energy)?;
        if args.json {
            eprintln!("wrote {}", path.display());
        } else {
            println!("wrote {}", path.display());
        }
    }
    Ok(())
}
