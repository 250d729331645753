//! `partita capture -o IR.wav --host jack`: measures a room in one step. Plays the sweep (`sweep`'s
//! parameters, or a sidecar's with `--sweep`) through one JACK port and records another in the same
//! client and callback ([`partita_device::JackCapture`]), `--takes N` times back to back; averages the
//! takes aligned by their position in the one stream, deconvolves the average as `deconvolve` does,
//! measures the loop delay from the response, compares the takes, writes the IR and prints its analysis
//! as `analyze` does.
//!
//! Only JACK in this version: the split-device path of the other hosts (drift correction off, alignment
//! of each take by cross-correlation, clock-skew estimate) is not there.

use std::path::PathBuf;
use std::time::Duration;

use clap::Args;
use partita::sweep_file::SweepSidecar;
use partita_device::{CaptureOptions, JackCapture, PortChoice, STOP_FADE_MS};
use partita_io::{write_wav_atomic, Dither, SampleFormat};
use partita_room::analysis::FilterPhase;
use partita_room::deconvolve::{deconvolve, raw_response};
use partita_room::sweep::SweepSpec;
use serde_json::json;

use super::analyze::{analyze_channels, channels_json, print_table};
use super::deconvolve::{report_response, warn_if_clipped, ResponseArgs};
use super::sweep::{check_level, SweepParams, CAUTIONS};
use super::{dbfs, CmdResult};
use crate::signals::Signals;

/// A take whose deconvolved response differs from the mean of the takes by more than this (the energy of
/// the difference over the mean's energy, dB) is reported: 1% of the energy, 10% in amplitude. Steady
/// background noise at a peak-to-noise ratio of 35 dB or more stays below it for responses of up to a few
/// seconds; a door, a voice, a moved microphone or a dropped cycle does not (our choice).
pub const TAKE_DIFFERENCE_WARN_DB: f64 = -20.0;

/// The loop delay is read at the largest sample within this span after the onset (ms): the direct sound's
/// peak, which the band-limited onset (the first sample within 20 dB of the peak) can precede by a few
/// frames. A reflection arriving within it (34 cm of extra path) counts as part of the direct sound.
pub const DIRECT_SPAN_MS: f64 = 1.0;

/// Arguments of `partita capture`.
#[derive(Debug, Args)]
pub struct CaptureArgs {
    /// The impulse response to write (32-bit float, mono; missing folders are created).
    #[arg(short = 'o', long = "output", value_name = "IR.wav")]
    output: PathBuf,
    /// Audio host; only `jack` in this version.
    #[arg(long, value_name = "HOST")]
    host: Option<String>,
    /// Replay the sweep of a sidecar written by `partita sweep` (its rate must be the server's) instead of
    /// the sweep options.
    #[arg(long, value_name = "SWEEP.json", conflicts_with_all = ["kind", "start_hz", "end_hz", "duration_s", "fade_in_s", "fade_out_s", "level_dbfs", "silence_s"])]
    sweep: Option<PathBuf>,
    #[command(flatten)]
    params: SweepParams,
    /// Sweeps played back to back (each with its silence) and averaged; every doubling lifts the response
    /// 3 dB further out of steady noise, and two or more are compared with each other.
    #[arg(long, value_name = "N", default_value_t = 1, value_parser = clap::value_parser!(u32).range(1..=100))]
    takes: u32,
    #[command(flatten)]
    response: ResponseArgs,
    /// The physical playback port the sweep goes to (1-based).
    #[arg(long, value_name = "N", default_value_t = 1, value_parser = clap::value_parser!(u32).range(1..))]
    output_channel: u32,
    /// The physical capture port recorded (1-based).
    #[arg(long, value_name = "N", default_value_t = 1, value_parser = clap::value_parser!(u32).range(1..))]
    input_channel: u32,
    /// Send the sweep to this JACK port instead (e.g. `system:playback_3`).
    #[arg(long, value_name = "PORT")]
    connect_output: Option<String>,
    /// Record this JACK port instead (e.g. `system:capture_2`).
    #[arg(long, value_name = "PORT")]
    connect_input: Option<String>,
    /// Leave the ports unconnected (a patchbay connects them; the sweep starts at once).
    #[arg(long, conflicts_with_all = ["connect_output", "connect_input"])]
    no_connect: bool,
    /// Ask SCHED_FIFO for the callback thread (needs the privilege, e.g. an audio group's rtprio limit).
    #[arg(long)]
    realtime: bool,
    /// Print the results and the analysis as JSON on stdout (everything else goes to stderr).
    #[arg(long)]
    json: bool,
}

/// Prints a line on stdout, or on stderr when stdout carries JSON.
macro_rules! say {
    ($json:expr, $($t:tt)*) => {
        if $json { eprintln!($($t)*) } else { println!($($t)*) }
    };
}

/// Runs `partita capture`.
pub fn run(args: CaptureArgs) -> CmdResult {
    eprintln!("{CAUTIONS}\n");
    if !args.host.as_deref().is_some_and(|h| h.eq_ignore_ascii_case("jack")) {
        return Err(format!(
            "capture supports only JACK in this version: add --host jack (got {})",
            args.host.as_deref().map_or("no --host".to_string(), |h| format!("--host {h}"))
        )
        .into());
    }
    let sidecar = args.sweep.as_deref().map(SweepSidecar::read_verified).transpose()?;
    let level_dbfs = sidecar.as_ref().map_or(args.params.level_dbfs, |(_, spec, _)| spec.level_dbfs);
    check_level(level_dbfs, args.params.force)?;

    let choice = |name: &Option<String>, channel: u32| match name {
        _ if args.no_connect => PortChoice::Unconnected,
        Some(port) => PortChoice::Named(port.clone()),
        None => PortChoice::Physical(channel as usize - 1),
    };
    let options = CaptureOptions {
        output: choice(&args.connect_output, args.output_channel),
        input: choice(&args.connect_input, args.input_channel),
        realtime: args.realtime,
        ..CaptureOptions::default()
    };
    let client = JackCapture::open(&options)?;
    let rate = client.sample_rate_hz();
    let (spec, take): (SweepSpec, Vec<f32>) = match sidecar {
        Some((_, spec, samples)) => {
            if spec.sample_rate_hz != rate {
                return Err(format!(
                    "{}: the sweep is at {} Hz but the JACK server runs at {rate} Hz; write a sweep at {rate} Hz",
                    args.sweep.as_ref().map(|p| p.display().to_string()).unwrap_or_default(),
                    spec.sample_rate_hz
                )
                .into());
            }
            (spec, samples)
        }
        None => {
            let spec = args.params.spec(rate);
            let samples = spec.generate()?;
            (spec, samples)
        }
    };
    let take_frames = take.len();
    let takes = args.takes as usize;
    let signal: Vec<f32> = take.iter().copied().cycle().take(take_frames * takes).collect();
    let fs = f64::from(rate);
    let json_out = args.json;
    say!(
        json_out,
        "sweep: {}, {} Hz to {} Hz in {:.4} s at {} dBFS, then {} s of silence; {takes} take(s) of {:.3} s at {rate} Hz",
        spec.kind,
        spec.start_hz,
        spec.end_hz,
        spec.sweep_duration_s(),
        spec.level_dbfs,
        spec.silence_s,
        take_frames as f64 / fs
    );

    let signals = Signals::install().map_err(|e| format!("cannot install the signal handlers: {e}"))?;
    let mut stream = client.start(signal, spec.amplitude() as f32, take_frames * takes)?;
    let info = stream.info().clone();
    // The port at the other end of our port `port`'s connection.
    let show = |port: &str| {
        let ours = format!("{}{port}", info.client);
        let other = info.connections.iter().find_map(|(a, b)| {
            if *a == ours {
                Some(b.as_str())
            } else if *b == ours {
                Some(a.as_str())
            } else {
                None
            }
        });
        other.unwrap_or("(not connected)").to_string()
    };
    eprintln!(
        "JACK client {} at {rate} Hz, period {} frames: sweep -> {}, recording <- {}; Ctrl-C stops with a {STOP_FADE_MS} \
         ms fade-out",
        info.client,
        info.period_frames,
        show(":out_1"),
        show(":in_1")
    );
    let mut latency = stream.port_latency();
    let mut shown_take = usize::MAX;
    let mut stopping = false;
    while !stream.is_done() {
        if let Some(fault) = stream.poll() {
            return Err(format!("{fault}; nothing written").into());
        }
        if signals.stop_requested() && !stopping {
            stream.request_stop();
            stopping = true;
        }
        let k = (stream.position_frames() as usize / take_frames).min(takes - 1);
        if k != shown_take && !stopping {
            eprintln!("take {} of {takes}", k + 1);
            shown_take = k;
            latency = stream.port_latency();
        }
        std::thread::sleep(Duration::from_millis(10));
    }
    let capture = stream.finish()?;
    if args.realtime {
        match capture.stats.callback_priority {
            Some(Ok(p)) => eprintln!("callback thread ran at SCHED_FIFO priority {p}"),
            Some(Err(e)) => eprintln!("warning: --realtime: SCHED_FIFO was refused (OS error {e}); ran without it"),
            None => {}
        }
    }
    let complete = match capture.stopped_at_frames {
        Some(at) => (at / take_frames).min(takes),
        None => capture.recording.len() / take_frames,
    };
    if complete == 0 {
        return Err(format!(
            "stopped during take 1 of {takes} after {:.2} s (output faded out over {STOP_FADE_MS} ms): no complete \
             take, nothing written",
            capture.stopped_at_frames.unwrap_or(capture.recording.len()) as f64 / fs
        )
        .into());
    }
    if complete < takes {
        eprintln!(
            "warning: stopped after {complete} of {takes} takes: the response averages the {complete} complete take(s)"
        );
    }
    let xruns = capture.stats.host_xruns;
    if xruns > 0 && complete > 1 {
        eprintln!(
            "note: the JACK server reported {xruns} xrun(s) while recording; the take comparison below shows whether \
             one broke a take"
        );
    } else if xruns > 0 {
        eprintln!(
            "warning: the JACK server reported {xruns} xrun(s) while recording: a dropped cycle would break the take, \
             and one take cannot be checked against another; measure again, or with --takes 2 or more"
        );
    }
    let rec = &capture.recording[..complete * take_frames];
    let peak = rec.iter().fold(0.0f32, |m, v| m.max(v.abs()));
    warn_if_clipped("capture", f64::from(peak));

    // The takes aligned by their position in the stream, averaged.
    let mut mean = vec![0.0f64; take_frames];
    for t in rec.chunks_exact(take_frames) {
        for (m, &v) in mean.iter_mut().zip(t) {
            *m += f64::from(v);
        }
    }
    let mean: Vec<f32> = mean.iter().map(|&m| (m / complete as f64) as f32).collect();
    let options = args.response.options(0);
    let d = deconvolve(&[mean], &spec, &options)?;
    let ir = &d.channels[0];
    let span = ((DIRECT_SPAN_MS * 1e-3 * fs).round() as usize).max(1);
    let direct = &ir[d.onset_frames..(d.onset_frames + span).min(ir.len())];
    let peak_after_onset =
        direct.iter().enumerate().fold((0, 0.0f32), |m, (i, v)| if v.abs() > m.1 { (i, v.abs()) } else { m }).0;
    let loop_delay = d.delay_frames + peak_after_onset;

    // Each take's response against the mean's, over the response's span.
    let mut differences_db = Vec::new();
    if complete > 1 {
        let raws: Vec<Vec<f32>> = rec
            .chunks_exact(take_frames)
            .map(|t| raw_response(t, &spec, options.method, 0))
            .collect::<Result<_, _>>()?;
        let zero = spec.sweep_frames() - 1;
        let from = (zero + d.delay_frames).saturating_sub(d.onset_frames);
        let to = (zero + spec.silence_frames() + 1).min(raws[0].len());
        let mean_raw: Vec<f64> =
            (from..to).map(|i| raws.iter().map(|r| f64::from(r[i])).sum::<f64>() / complete as f64).collect();
        let energy: f64 = mean_raw.iter().map(|v| v * v).sum();
        for r in &raws {
            let diff: f64 = r[from..to].iter().zip(&mean_raw).map(|(&a, b)| (f64::from(a) - b).powi(2)).sum();
            differences_db.push(10.0 * (diff / energy).log10());
        }
    }

    if let Some(dir) = args.output.parent().filter(|d| !d.as_os_str().is_empty()) {
        std::fs::create_dir_all(dir).map_err(|e| format!("{}: {e}", dir.display()))?;
    }
    write_wav_atomic(&args.output, &d.channels, rate, SampleFormat::F32, Dither::OFF)?;
    let ms = |frames: f64| 1e3 * frames / fs;
    say!(
        json_out,
        "wrote {} ({} frames = {:.3} s; {complete} take(s) averaged; recording peak {:.1} dBFS)",
        args.output.display(),
        ir.len(),
        ir.len() as f64 / fs,
        dbfs(f64::from(peak))
    );
    say!(
        json_out,
        "loop delay: {loop_delay} frames ({:.3} ms), the direct sound's peak after the sweep's start (onset {} frames); \
         JACK reports {} frames ({:.3} ms) for the connected ports = capture {} + playback {}; the rest is the graph \
         and the acoustic path",
        ms(loop_delay as f64),
        d.delay_frames,
        latency.total_frames(),
        ms(f64::from(latency.total_frames())),
        latency.capture_frames,
        latency.playback_frames
    );
    for (k, db) in differences_db.iter().enumerate() {
        say!(json_out, "take {}: differs from the mean by {db:.1} dB", k + 1);
    }
    let worst = differences_db.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if worst > TAKE_DIFFERENCE_WARN_DB {
        eprintln!(
            "warning: the takes differ by up to {worst:.1} dB (above {TAKE_DIFFERENCE_WARN_DB} dB): something changed \
             between them (noise, movement, a dropped cycle); measure again in quiet"
        );
    }
    report_response(&d, options.trim_tail, json_out);

    let analyses = analyze_channels(&d.channels, fs, FilterPhase::TimeReversed, &args.output.display().to_string())?;
    if json_out {
        let out = json!({
            "file": args.output.display().to_string(),
            "sample_rate_hz": rate,
            "period_frames": info.period_frames,
            "takes": complete,
            "takes_requested": takes,
            "stopped": capture.stopped_at_frames.is_some(),
            "loop_delay_frames": loop_delay,
            "loop_delay_ms": ms(loop_delay as f64),
            "onset_delay_frames": d.delay_frames,
            "ir_start_lag_frames": d.delay_frames as i64 - d.onset_frames as i64,
            "jack_capture_latency_frames": latency.capture_frames,
            "jack_playback_latency_frames": latency.playback_frames,
            "take_difference_db": differences_db,
            "peak_to_noise_db": d.peak_to_noise_db,
            "recording_peak_dbfs": dbfs(f64::from(peak)),
            "host_xruns": xruns,
            "channels": channels_json(&analyses, fs),
        });
        println!("{}", serde_json::to_string_pretty(&out)?);
    } else {
        for (c, a) in analyses.iter().enumerate() {
            print_table(c, a);
        }
    }
    Ok(())
}
