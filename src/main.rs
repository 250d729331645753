//! The `partita` command: render files offline, plan a partition for a latency budget, monitor live,
//! benchmark. Each subcommand lives in its own module and stays thin over the library crates.

use std::process::ExitCode;

use clap::{Parser, Subcommand};

mod cmd;

/// Real-time partitioned FFT convolution of audio with measured impulse responses.
#[derive(Debug, Parser)]
#[command(name = "partita", version, about, long_about = None)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Debug, Subcommand)]
enum Command {
    /// Choose a partition for an IR length and a block size or latency budget; show its cost.
    Plan(cmd::plan::PlanArgs),
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    let result = match cli.command {
        Command::Plan(args) => cmd::plan::run(args),
    };
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("partita: error: {e}");
            ExitCode::FAILURE
        }
    }
}
