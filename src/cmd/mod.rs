//! One module per subcommand, and the few helpers they share.

pub mod analyze;
pub mod deconvolve;
pub mod demo;
pub mod demo_data;
pub mod plan;
pub mod render;
pub mod sweep;

#[cfg(feature = "live")]
pub mod capture;
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

/// `partita capture` in a build without live audio: says how to get it.
#[cfg(not(feature = "live"))]
pub mod capture {
    /// Arguments of `partita capture` (accepted and ignored: live audio is not in this build).
    #[derive(Debug, clap::Args)]
    pub struct CaptureArgs {
        #[arg(trailing_var_arg = true, allow_hyphen_values = true, hide = true)]
        args: Vec<String>,
    }

    /// Fails with how to build with live audio.
    pub fn run(_: CaptureArgs) -> super::CmdResult {
        Err(format!("{}; or use `partita sweep` and `partita deconvolve` with other playback gear", super::NO_LIVE)
            .into())
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

/// `--schedule` and `--headroom-pct`, shared by `plan`, `demo` and `monitor`.
#[derive(Debug, Clone, clap::Args)]
pub struct ScheduleArgs {
    /// Schedule of the levels larger than the block: auto (per level, the cheapest plan whose predicted
    /// heaviest host call stays within --headroom-pct of the call's deadline), sync (all in the callback
    /// that completes them), sliced (spread over the callbacks of their period, no threads) or workers
    /// (worker threads).
    #[arg(long, value_name = "S", default_value = "auto")]
    pub schedule: ScheduleChoice,
    /// The share of a host call's deadline, in percent, the predicted heaviest call may take (auto only;
    /// under a fixed --schedule, --latency-ms judges plans against the default).
    #[arg(long, value_name = "PCT", default_value_t = partita_core::DEFAULT_HEADROOM_PCT, allow_negative_numbers = true)]
    pub headroom_pct: f64,
}

impl ScheduleArgs {
    /// The planner with this schedule choice, planning against deadlines at `rate_hz`.
    pub fn apply(&self, planner: partita_core::Planner, rate_hz: u32) -> Result<partita_core::Planner, String> {
        if !(self.headroom_pct.is_finite() && self.headroom_pct > 0.0) {
            return Err(format!("--headroom-pct must be a positive number, got {}", self.headroom_pct));
        }
        let planner = planner.sample_rate_hz(rate_hz).auto(self.headroom_pct);
        Ok(match self.schedule {
            ScheduleChoice::Fixed(s) => planner.schedule(s),
            ScheduleChoice::Auto => planner,
        })
    }

    /// The choice in words: `auto (headroom 8%)` or the schedule's name.
    pub fn describe(&self) -> String {
        match self.schedule {
            ScheduleChoice::Auto => format!("auto (headroom {}%)", self.headroom_pct),
            ScheduleChoice::Fixed(s) => s.to_string(),
        }
    }
}

/// `--schedule`: one schedule for every level above the block, or the planner's choice.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum ScheduleChoice {
    /// The planner chooses per level ([`partita_core::Planner::auto`]).
    Auto,
    /// One schedule for every level above the block.
    Fixed(partita_core::Schedule),
}

impl std::str::FromStr for ScheduleChoice {
    type Err = String;

    fn from_str(s: &str) -> Result<Self, Self::Err> {
        match s {
            "auto" => Ok(Self::Auto),
            other => other
                .parse()
                .map(Self::Fixed)
                .map_err(|_| format!("unknown schedule `{other}`; use auto, sync, sliced or workers")),
        }
    }
}

/// The schedules a plan's levels use, in words: `sync`, or e.g. `sync + sliced + workers`.
pub fn schedules_used(plan: &partita_core::Plan) -> String {
    let mut names: Vec<&str> = Vec::new();
    for l in &plan.levels {
        let n = l.schedule.as_str();
        if !names.contains(&n) {
            names.push(n);
        }
    }
    if names.is_empty() {
        "direct-form head only".to_string()
    } else {
        names.join(" + ")
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
