//! The `partita` command: render files offline, plan a partition for a latency budget, monitor live,
//! measure rooms (sweep, deconvolve, analyze), benchmark. Each subcommand lives in its own module and stays
//! thin over the library crates.
// serde_json's json! macro recurses once per key: monitor's summary has more keys than the default 128 allow.
#![recursion_limit = "256"]

use std::process::ExitCode;

use clap::{Parser, Subcommand};

mod cmd;
#[cfg(feature = "live")]
mod signals;
mod sigpipe;

/// Real-time partitioned FFT convolution of audio with measured impulse responses.
#[derive(Debug, Parser)]
#[command(name = "partita", version, about, long_about = None)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Debug, Subcommand)]
enum Command {
    /// Render the synthetic demo: a dry phrase through two imagined spaces (wet 0.35, dry 0.65, peak -1 dBFS), with
    /// plans and measured cost.
    Demo(cmd::demo::DemoArgs),
    /// Convolve WAV files with an impulse response (offline, the full convolution).
    Render(cmd::render::RenderArgs),
    /// Choose a partition for an IR length and a block size or latency budget; show its cost.
    Plan(cmd::plan::PlanArgs),
    /// Convolve live: an input device through an IR to an output device (needs the `live` feature).
    Monitor(cmd::monitor::MonitorArgs),
    /// Write a measurement sweep (WAV) and its sidecar (JSON) to play through a loudspeaker.
    Sweep(cmd::sweep::SweepArgs),
    /// Recover an impulse response from a recording of a sweep written by `partita sweep`.
    Deconvolve(cmd::deconvolve::DeconvolveArgs),
    /// Measure a room in one step: play the sweep, record the microphone, write the impulse response and
    /// print its analysis (one JACK client with --host jack; separate streams on the other hosts; needs the
    /// `live` feature)
    Capture(cmd::capture::CaptureArgs),
    /// Room-acoustic parameters of an impulse response per octave band: EDT, T20, T30, C50, C80, D50, Ts.
    Analyze(cmd::analyze::AnalyzeArgs),
    /// List the audio hosts, their devices and supported configurations (needs the `live` feature).
    Devices(cmd::devices::DevicesArgs),
    /// (Maintainers) Regenerate the synthetic demo IRs and dry phrase of demo-data/.
    MakeDemoData(cmd::demo_data::MakeDemoDataArgs),
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    if !matches!(cli.command, Command::Monitor(_) | Command::Devices(_) | Command::Capture(_)) {
        // Not a live command: `partita analyze ir.wav | head -1` ends quietly instead of panicking.
        sigpipe::end_on_closed_pipe();
    }
    let result = match cli.command {
        Command::Demo(args) => cmd::demo::run(args),
        Command::Render(args) => cmd::render::run(args),
        Command::Plan(args) => cmd::plan::run(args),
        Command::Monitor(args) => cmd::monitor::run(args),
        Command::Devices(args) => cmd::devices::run(args),
        Command::Sweep(args) => cmd::sweep::run(args),
        Command::Deconvolve(args) => cmd::deconvolve::run(args),
        Command::Capture(args) => cmd::capture::run(args),
        Command::Analyze(args) => cmd::analyze::run(args),
        Command::MakeDemoData(args) => cmd::demo_data::run(args),
    };
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("partita: error: {e}");
            ExitCode::FAILURE
        }
    }
}
