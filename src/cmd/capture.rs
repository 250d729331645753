//! `partita capture -o IR.wav`: measures a room in one step. Plays the sweep (`sweep`'s parameters, or a
//! sidecar's with `--sweep`) `--takes N` times back to back and records the microphone, then averages the
//! takes, deconvolves the average as `deconvolve` does, measures the loop delay from the response, compares
//! the takes, writes the IR and prints its analysis as `analyze` does. Two paths:
//!
//! - `--host jack`: one JACK client plays and records in the same callback
//!   ([`partita_device::JackCapture`]): the takes are aligned by their position in the one stream and the
//!   loop delay is exact in frames.
//! - any other host (or `--host jack --split`): an output stream and an input stream through cpal
//!   ([`partita_device::SplitCapture`]), each on its own device clock, with no drift correction. The takes
//!   are found in the recording by cross-correlation with the sweep and cut at their own arrivals
//!   ([`partita_room::align`]); their spacing measures the clock skew (a warning above
//!   [`SKEW_WARN_PPM`]); the loop delay is estimated from the two streams' callback times, within about a
//!   period.

use std::path::PathBuf;
use std::time::Duration;

use clap::Args;
use partita::sweep_file::SweepSidecar;
#[cfg(feature = "jack")]
use partita_device::{CaptureOptions, JackCapture, PortChoice};
use partita_device::{DeviceSelector, Fault, SplitCapture, SplitOptions, Stats, STOP_FADE_MS};
use partita_io::{write_wav_atomic, Dither, SampleFormat};
use partita_room::align::{aligned_takes, locate_takes, TakeAlignment, SKEW_WARN_PPM};
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

/// Recording kept after the last take on split devices, s: room for the loop delay and for the input
/// stream's start after the output's.
pub const SPLIT_TAIL_S: f64 = 1.0;

/// On split devices the first take's window starts this much before where the streams' start offset puts
/// the sweep's start in the recording, s: that offset is known only to about a period, and a window that
/// started after the sweep would lose the response's beginning.
pub const SPLIT_WINDOW_MARGIN_S: f64 = 0.05;

/// Silence played before the first take on split devices, s: streams that have just started may click or
/// settle, and a patchbay has time to connect. It costs nothing: the takes are found in the recording.
pub const SPLIT_LEAD_IN_S: f64 = 0.5;

/// Arguments of `partita capture`.
#[derive(Debug, Args)]
pub struct CaptureArgs {
    /// The impulse response to write (32-bit float, mono; missing folders are created).
    #[arg(short = 'o', long = "output", value_name = "IR.wav")]
    output: PathBuf,
    /// Audio host: `jack` (one client plays and records: exact loop delay), or `alsa` and the other cpal
    /// hosts (separate input and output streams) [default: the platform's].
    #[arg(long, value_name = "HOST")]
    host: Option<String>,
    /// On JACK, measure through two separate streams as on the other hosts (checks that path).
    #[arg(long)]
    split: bool,
    /// Replay the sweep of a sidecar written by `partita sweep` (its rate must be the device's) instead of
    /// the sweep options.
    #[arg(long, value_name = "SWEEP.json", conflicts_with_all = ["kind", "start_hz", "end_hz", "duration_s", "fade_in_s", "fade_out_s", "level_dbfs", "silence_s"])]
    sweep: Option<PathBuf>,
    #[command(flatten)]
    params: SweepParams,
    /// Sweeps played back to back (each with its silence) and averaged; every doubling lifts the response
    /// 3 dB further out of steady noise, and two or more are compared with each other (and, on separate
    /// devices, measure the clock skew) [default: 1 on JACK, 2 otherwise].
    #[arg(long, value_name = "N", value_parser = clap::value_parser!(u32).range(1..=100))]
    takes: Option<u32>,
    #[command(flatten)]
    response: ResponseArgs,
    /// The output channel the sweep goes to (1-based): a physical playback port on JACK, a device channel
    /// otherwise.
    #[arg(long, value_name = "N", default_value_t = 1, value_parser = clap::value_parser!(u32).range(1..))]
    output_channel: u32,
    /// The input channel recorded (1-based): a physical capture port on JACK, a device channel otherwise.
    #[arg(long, value_name = "N", default_value_t = 1, value_parser = clap::value_parser!(u32).range(1..))]
    input_channel: u32,
    /// Separate streams: the device that plays the sweep: `default`, an index or a name from `partita devices`.
    #[arg(long, value_name = "DEVICE")]
    output_device: Option<DeviceSelector>,
    /// Separate streams: the device that records: `default`, an index or a name from `partita devices`.
    #[arg(long, value_name = "DEVICE")]
    input_device: Option<DeviceSelector>,
    /// Separate streams: the sample rate [default: the output device's].
    #[arg(long, value_name = "HZ")]
    rate: Option<u32>,
    /// Separate streams: the device period in frames, where the host lets us choose [default: the host's].
    #[arg(long, value_name = "N")]
    device_frames: Option<u32>,
    /// JACK: send the sweep to this port instead (e.g. `system:playback_3`).
    #[arg(long, value_name = "PORT")]
    connect_output: Option<String>,
    /// JACK: record this port instead (e.g. `system:capture_2`).
    #[arg(long, value_name = "PORT")]
    connect_input: Option<String>,
    /// JACK: leave the ports unconnected (a patchbay connects them; the sweep starts at once).
    #[arg(long, conflicts_with_all = ["connect_output", "connect_input"])]
    no_connect: bool,
    /// Ask SCHED_FIFO for the callback threads (needs the privilege, e.g. an audio group's rtprio limit).
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

/// The measurement stream, before it starts: the JACK client or the split devices.
enum Opened {
    #[cfg(feature = "jack")]
    Jack(JackCapture),
    Split(SplitCapture),
}

impl Opened {
    fn sample_rate_hz(&self) -> u32 {
        match self {
            #[cfg(feature = "jack")]
            Self::Jack(c) => c.sample_rate_hz(),
            Self::Split(c) => c.sample_rate_hz(),
        }
    }
}

/// What came back from either path, before the analysis.
struct Recorded {
    recording: Vec<f32>,
    stopped_at_frames: Option<usize>,
    stats: Stats,
    /// JACK: the port latencies read at the last take's start, frames (capture, playback).
    jack_latency: Option<(u32, u32)>,
    /// Split: the time from the first played to the first recorded callback, frames; the period of each
    /// side when the host reports it.
    split_offset_frames: Option<i64>,
    period_frames: Option<u32>,
}

/// Opens the JACK client or the split devices, refusing the options of the other path.
fn open(args: &CaptureArgs) -> Result<Opened, Box<dyn std::error::Error>> {
    let jack = args.host.as_deref().is_some_and(|h| h.eq_ignore_ascii_case("jack"));
    if jack && !args.split {
        for (flag, given) in [
            ("--output-device", args.output_device.is_some()),
            ("--input-device", args.input_device.is_some()),
            ("--rate", args.rate.is_some()),
            ("--device-frames", args.device_frames.is_some()),
        ] {
            if given {
                return Err(format!(
                    "{flag} applies to separate streams, not to the JACK client (it runs at the server's rate and \
                     period; choose ports with --output-channel/--input-channel or --connect-output/--connect-input)"
                )
                .into());
            }
        }
        #[cfg(feature = "jack")]
        {
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
            return Ok(Opened::Jack(JackCapture::open(&options)?));
        }
        #[cfg(not(feature = "jack"))]
        return Err("this build has no JACK: rebuild with `--features jack` (needs libjack-jackd2-dev), or measure \
                    through ALSA (omit --host)"
            .into());
    }
    if !jack && args.split {
        return Err("--split applies to JACK (--host jack --split); the other hosts always use separate streams".into());
    }
    for (flag, given) in [
        ("--connect-output", args.connect_output.is_some()),
        ("--connect-input", args.connect_input.is_some()),
        ("--no-connect", args.no_connect),
    ] {
        if given {
            return Err(format!(
                "{flag} applies to the JACK client only; with separate streams choose --output-device/--input-device \
                 and --output-channel/--input-channel"
            )
            .into());
        }
    }
    let options = SplitOptions {
        host: args.host.clone(),
        input: args.input_device.clone().unwrap_or_default(),
        output: args.output_device.clone().unwrap_or_default(),
        sample_rate_hz: args.rate,
        device_frames: args.device_frames,
        input_channel: args.input_channel as usize - 1,
        output_channel: args.output_channel as usize - 1,
        realtime: args.realtime,
    };
    Ok(Opened::Split(SplitCapture::open(&options)?))
}

/// Runs `partita capture`.
pub fn run(args: CaptureArgs) -> CmdResult {
    eprintln!("{CAUTIONS}\n");
    let sidecar = args.sweep.as_deref().map(SweepSidecar::read_verified).transpose()?;
    let level_dbfs = sidecar.as_ref().map_or(args.params.level_dbfs, |(_, spec, _)| spec.level_dbfs);
    check_level(level_dbfs, args.params.force)?;

    let opened = open(&args)?;
    let split = matches!(opened, Opened::Split(_));
    let rate = opened.sample_rate_hz();
    let (spec, take): (SweepSpec, Vec<f32>) = match sidecar {
        Some((_, spec, samples)) => {
            if spec.sample_rate_hz != rate {
                return Err(format!(
                    "{}: the sweep is at {} Hz but the {} runs at {rate} Hz; write a sweep at {rate} Hz",
                    args.sweep.as_ref().map(|p| p.display().to_string()).unwrap_or_default(),
                    spec.sample_rate_hz,
                    if split { "device" } else { "JACK server" }
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
    let takes = args.takes.unwrap_or(if split { 2 } else { 1 }) as usize;
    let fs = f64::from(rate);
    let lead = if split { (SPLIT_LEAD_IN_S * fs).round() as usize } else { 0 };
    let signal: Vec<f32> =
        std::iter::repeat_n(0.0, lead).chain(take.iter().copied().cycle().take(take_frames * takes)).collect();
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
    if split && takes == 1 {
        eprintln!("note: one take on separate streams: the clock skew cannot be measured (use --takes 2 or more)");
    }

    let signals = Signals::install().map_err(|e| format!("cannot install the signal handlers: {e}"))?;
    let ceiling = spec.amplitude() as f32;
    let recorded = match opened {
        #[cfg(feature = "jack")]
        Opened::Jack(client) => record_jack(client, signal, ceiling, take_frames, takes, &signals)?,
        Opened::Split(devices) => {
            let tail = (SPLIT_TAIL_S * fs).round() as usize;
            let channels = (args.output_channel, args.input_channel);
            record_split(devices, signal, ceiling, (lead, take_frames, takes, tail), channels, &signals)?
        }
    };
    if args.realtime {
        match recorded.stats.callback_priority {
            Some(Ok(p)) => eprintln!("callback thread ran at SCHED_FIFO priority {p}"),
            Some(Err(e)) => eprintln!("warning: --realtime: SCHED_FIFO was refused (OS error {e}); ran without it"),
            None => {}
        }
    }
    let complete = match recorded.stopped_at_frames {
        Some(at) => (at.saturating_sub(lead) / take_frames).min(takes),
        None if split => takes,
        None => recorded.recording.len() / take_frames,
    };
    if complete == 0 {
        return Err(format!(
            "stopped during take 1 of {takes} after {:.2} s (output faded out over {STOP_FADE_MS} ms): no complete \
             take, nothing written",
            recorded.stopped_at_frames.unwrap_or(recorded.recording.len()).saturating_sub(lead) as f64 / fs
        )
        .into());
    }
    if complete < takes {
        eprintln!(
            "warning: stopped after {complete} of {takes} takes: the response averages the {complete} complete take(s)"
        );
    }
    let xruns = recorded.stats.host_xruns;
    let host = if split { "the host" } else { "the JACK server" };
    if xruns > 0 && complete > 1 {
        eprintln!(
            "note: {host} reported {xruns} xrun(s) while recording; the take comparison below shows whether one \
             broke a take"
        );
    } else if xruns > 0 {
        eprintln!(
            "warning: {host} reported {xruns} xrun(s) while recording: a dropped cycle would break the take, and \
             one take cannot be checked against another; measure again, or with --takes 2 or more"
        );
    }
    let peak = recorded.recording.iter().fold(0.0f32, |m, v| m.max(v.abs()));
    warn_if_clipped("capture", f64::from(peak));

    // Where the sweep's start lies in the recording, frames after its first frame: the lead-in less the
    // streams' start offset (split; both 0 on JACK), and the first take's window a margin before that.
    let offset = recorded.split_offset_frames.unwrap_or(0);
    let margin = if split { (SPLIT_WINDOW_MARGIN_S * fs).round() as i64 } else { 0 };
    let first_start = (lead as i64 - offset - margin).max(0) as usize;
    // Frames from the sweep's start to the window's: added to positions in the deconvolved window.
    let window_lag = first_start as i64 + offset - lead as i64;
    // The takes: by their position in the one stream (JACK), or found in the recording (split).
    let (cut, alignment): (Vec<Vec<f32>>, Option<TakeAlignment>) = if split {
        let a = locate_takes(&recorded.recording, &spec, take_frames, complete, 0).map_err(|e| {
            format!(
                "{e} (recording peak {:.1} dBFS): check that the output reaches the microphone and the level; \
                 nothing written",
                dbfs(f64::from(peak))
            )
        })?;
        (aligned_takes(&recorded.recording, &a, first_start), Some(a))
    } else {
        let rec = &recorded.recording[..complete * take_frames];
        (rec.chunks_exact(take_frames).map(<[f32]>::to_vec).collect(), None)
    };
    let mut mean = vec![0.0f64; take_frames];
    for t in &cut {
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
    let loop_delay = (d.delay_frames + peak_after_onset) as i64 + window_lag;

    // Each take's response against the mean's, over the response's span.
    let mut differences_db = Vec::new();
    if complete > 1 {
        let raws: Vec<Vec<f32>> =
            cut.iter().map(|t| raw_response(t, &spec, options.method, 0)).collect::<Result<_, _>>()?;
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
    match recorded.jack_latency {
        Some((capture, playback)) => say!(
            json_out,
            "loop delay: {loop_delay} frames ({:.3} ms), the direct sound's peak after the sweep's start (onset {} \
             frames); JACK reports {} frames ({:.3} ms) for the connected ports = capture {capture} + playback \
             {playback}; the rest is the graph and the acoustic path",
            ms(loop_delay as f64),
            d.delay_frames,
            capture + playback,
            ms(f64::from(capture + playback))
        ),
        None => say!(
            json_out,
            "loop delay: about {loop_delay} frames ({:.3} ms), the direct sound's peak after the sweep's start, \
             estimated from the two streams' callback times{}: separate streams share no frame count",
            ms(loop_delay as f64),
            recorded.period_frames.map_or(String::new(), |p| format!(" (within about {p} frames, one period)"))
        ),
    }
    if let Some(a) = &alignment {
        match a.skew_ppm {
            Some(ppm) => {
                say!(
                    json_out,
                    "clock skew: {ppm:+.2} ppm (recorded frames per played frame, from {} takes; positive: the \
                     input device's clock runs fast)",
                    a.arrivals.len()
                );
                if ppm.abs() > SKEW_WARN_PPM {
                    let smear_us = ppm.abs() * 1e-6 * spec.sweep_duration_s() * 1e6;
                    eprintln!(
                        "warning: the devices' clocks differ by {:.1} ppm (above {SKEW_WARN_PPM} ppm): each take's \
                         response is smeared over up to {smear_us:.0} us across the band ({:.1} frames); the takes \
                         were aligned one by one, but for a sharp response play and record on one device, on devices \
                         sharing a clock (word clock), or through JACK",
                        ppm.abs(),
                        smear_us * 1e-6 * fs
                    );
                }
            }
            None => say!(json_out, "clock skew: not measured (one take)"),
        }
        if a.residual_frames > 1.0 {
            eprintln!(
                "warning: the takes arrived up to {:.1} frames off an even spacing: the devices dropped or repeated \
                 frames (xruns) during the measurement; each take was aligned on its own, but the skew figure does \
                 not hold",
                a.residual_frames
            );
        }
    }
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
            "path": if split { "split" } else { "jack" },
            "sample_rate_hz": rate,
            "period_frames": recorded.period_frames,
            "takes": complete,
            "takes_requested": takes,
            "stopped": recorded.stopped_at_frames.is_some(),
            "loop_delay_frames": loop_delay,
            "loop_delay_ms": ms(loop_delay as f64),
            "loop_delay_exact": !split,
            "onset_delay_frames": d.delay_frames as i64 + window_lag,
            "ir_start_lag_frames": d.delay_frames as i64 - d.onset_frames as i64 + window_lag,
            "jack_capture_latency_frames": recorded.jack_latency.map(|l| l.0),
            "jack_playback_latency_frames": recorded.jack_latency.map(|l| l.1),
            "stream_start_offset_frames": recorded.split_offset_frames,
            "clock_skew_ppm": alignment.as_ref().and_then(|a| a.skew_ppm),
            "take_spacing_residual_frames": alignment.as_ref().map(|a| a.residual_frames),
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

/// Waits for the measurement: a stop request on Ctrl-C, "take k of N" as each begins (calling `on_take`),
/// a fault ends it with nothing written.
fn wait(
    signals: &Signals,
    (takes, take_frames): (usize, usize),
    mut poll: impl FnMut() -> Option<Fault>,
    done: impl Fn() -> bool,
    played: impl Fn() -> u64,
    stop: impl Fn(),
    mut on_take: impl FnMut(),
) -> Result<(), Box<dyn std::error::Error>> {
    let mut shown_take = usize::MAX;
    let mut stopping = false;
    while !done() {
        if let Some(fault) = poll() {
            return Err(format!("{fault}; nothing written").into());
        }
        if signals.stop_requested() && !stopping {
            stop();
            stopping = true;
        }
        let k = (played() as usize / take_frames).min(takes - 1);
        if k != shown_take && !stopping {
            eprintln!("take {} of {takes}", k + 1);
            shown_take = k;
            on_take();
        }
        std::thread::sleep(Duration::from_millis(10));
    }
    Ok(())
}

#[cfg(feature = "jack")]
fn record_jack(
    client: JackCapture,
    signal: Vec<f32>,
    ceiling: f32,
    take_frames: usize,
    takes: usize,
    signals: &Signals,
) -> Result<Recorded, Box<dyn std::error::Error>> {
    let rate = client.sample_rate_hz();
    let mut stream = client.start(signal, ceiling, take_frames * takes)?;
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
    let latency = std::cell::Cell::new(stream.port_latency());
    {
        let stream = std::cell::RefCell::new(&mut stream);
        wait(
            signals,
            (takes, take_frames),
            || stream.borrow_mut().poll(),
            || stream.borrow().is_done(),
            || stream.borrow().position_frames(),
            || stream.borrow().request_stop(),
            || latency.set(stream.borrow().port_latency()),
        )?;
    }
    let capture = stream.finish()?;
    let latency = latency.get();
    Ok(Recorded {
        recording: capture.recording,
        stopped_at_frames: capture.stopped_at_frames,
        stats: capture.stats,
        jack_latency: Some((latency.capture_frames, latency.playback_frames)),
        split_offset_frames: None,
        period_frames: Some(info.period_frames),
    })
}

/// The split path: `(lead_frames, take_frames, takes, tail_frames)` (the signal holds the lead-in and the
/// takes), the 1-based `(output, input)` channels.
fn record_split(
    devices: SplitCapture,
    signal: Vec<f32>,
    ceiling: f32,
    (lead_frames, take_frames, takes, tail_frames): (usize, usize, usize, usize),
    (output_channel, input_channel): (u32, u32),
    signals: &Signals,
) -> Result<Recorded, Box<dyn std::error::Error>> {
    let rate = devices.sample_rate_hz();
    let mut stream = devices.start(signal, ceiling, lead_frames + take_frames * takes + tail_frames)?;
    let info = stream.info().clone();
    eprintln!(
        "{} at {rate} Hz, separate streams (no drift correction): sweep -> `{}` channel {output_channel} of {} ({}, \
         period {}), recording <- `{}` channel {input_channel} of {} ({}, period {}); Ctrl-C stops with a \
         {STOP_FADE_MS} ms fade-out",
        info.host,
        info.output.device,
        info.output.channels,
        info.output.format,
        info.output.period_text(),
        info.input.device,
        info.input.channels,
        info.input.format,
        info.input.period_text()
    );
    let handle = stream.handle().clone();
    wait(
        signals,
        (takes, take_frames),
        || stream.poll(),
        || handle.is_done(),
        || handle.played_frames().saturating_sub(lead_frames as u64),
        || handle.request_stop(),
        || {},
    )?;
    let got = stream.finish();
    let fs = f64::from(rate);
    let periods = [info.input.period_frames, info.output.period_frames];
    Ok(Recorded {
        recording: got.recording,
        stopped_at_frames: got.stopped_at_frames,
        stats: got.stats,
        jack_latency: None,
        split_offset_frames: got.start_offset_ns.map(|ns| (ns as f64 * 1e-9 * fs).round() as i64),
        period_frames: periods.into_iter().flatten().max(),
    })
}
