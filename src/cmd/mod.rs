//! One module per subcommand, and the few helpers they share.

pub mod analyze;
pub mod deconvolve;
pub mod demo;
pub mod demo_data;
pub mod plan;
pub mod render;
pub mod sweep;

#[cfg(feature = "live")]
pub mod devices;
#[cfg(feature = "live")]
pub mod monitor;

/// What `monitor` and `devices` say in a build without the `live` feature.
#[cfg(not(feature = "live"))]
const NO_LIVE: &str = "this build has no live audio: rebuild with `cargo build --release --features live` \
                       (ALSA; needs libasound2-dev) or `--features jack` (ALSA and JACK; needs libjack-jackd2-dev too)";

/// `partita monitor` in a build without live audio: says how to get it.
#[cfg(not(feature = "live"))]
pub mod monitor {
    /// Arguments of `partita monitor` (accepted and ignored: live audio is not in this build).
    #[derive(Debug, clap::Args)]
    pub struct MonitorArgs {
        #[arg(trailing_var_arg = true, allow_hyphen_values = true, hide = true)]
        args: Vec<String>,
    }

    /// Fails with how to build with live audio.
    pub fn run(_: MonitorArgs) -> super::CmdResult {
        Err(super::NO_LIVE.into())
    }
}

/// `partita devices` in a build without live audio: says how to get it.
#[cfg(not(feature = "live"))]
pub mod devices {
    /// Arguments of `partita devices` (accepted and ignored: live audio is not in this build).
    #[derive(Debug, clap::Args)]
    pub struct DevicesArgs {
        #[arg(trailing_var_arg = true, allow_hyphen_values = true, hide = true)]
        args: Vec<String>,
    }

    /// Fails with how to build with live audio.
    pub fn run(_: DevicesArgs) -> super::CmdResult {
        Err(super::NO_LIVE.into())
    }
}

/// What a subcommand returns: an error becomes one line on stderr and exit code 1.
pub type CmdResult = Result<(), Box<dyn std::error::Error>>;

/// Prints a plan's levels as the table `partita plan` shows: one row per level (block, partitions, IR
/// offset, taps, schedule), the direct-form head first when there is one.
pub fn print_levels(plan: &partita_core::Plan) {
    println!("  {:<6} {:>8} {:>11} {:>10} {:>10}  schedule", "level", "block", "partitions", "offset", "taps");
    if plan.head_frames > 0 {
        println!("  {:<6} {:>8} {:>11} {:>10} {:>10}  direct form", "head", "-", "-", 0, plan.head_frames);
    }
    for (i, l) in plan.levels.iter().enumerate() {
        println!(
            "  {:<6} {:>8} {:>11} {:>10} {:>10}  {}",
            i,
            l.block_frames,
            l.partitions,
            l.offset_frames,
            l.block_frames * l.partitions,
            l.schedule
        );
    }
}

/// A plan's levels in the compact `--levels` notation, e.g. `64x15,512x14` (block x partitions).
pub fn levels_list(plan: &partita_core::Plan) -> String {
    plan.levels.iter().map(|l| format!("{}x{}", l.block_frames, l.partitions)).collect::<Vec<_>>().join(",")
}

/// `20 log10(x)`, for peaks (negative infinity for 0).
pub fn dbfs(x: f64) -> f64 {
    20.0 * x.log10()
}
