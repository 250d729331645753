//! One module per subcommand, and the few helpers they share.

pub mod demo;
pub mod demo_data;
pub mod plan;
pub mod render;

/// What a subcommand returns: an error becomes one line on stderr and exit code 1.
pub type CmdResult = Result<(), Box<dyn std::error::Error>>;

/// A routing named on the command line: `mono`, `mono-to-stereo`, `stereo`, `true-stereo` or
/// `matrix:MxN`.
pub fn parse_routing(s: &str) -> Result<partita_core::Routing, String> {
    use partita_core::Routing;
    match s {
        "mono" => Ok(Routing::Mono),
        "mono-to-stereo" => Ok(Routing::MonoToStereo),
        "stereo" => Ok(Routing::Stereo),
        "true-stereo" => Ok(Routing::TrueStereo),
        _ => {
            let dims = s.strip_prefix("matrix:").ok_or_else(|| {
                format!("unknown routing `{s}`; use mono, mono-to-stereo, stereo, true-stereo or matrix:MxN")
            })?;
            let (m, n) =
                dims.split_once('x').ok_or_else(|| format!("matrix routing `{s}` needs the form matrix:MxN"))?;
            let m: usize = m.parse().map_err(|_| format!("bad input count in `{s}`"))?;
            let n: usize = n.parse().map_err(|_| format!("bad output count in `{s}`"))?;
            if m == 0 || n == 0 {
                return Err(format!("matrix routing `{s}` needs at least 1 input and 1 output"));
            }
            Ok(Routing::Matrix { inputs: m, outputs: n })
        }
    }
}

/// IR channels a routing needs (the smallest count it accepts).
pub fn ir_channels_for(routing: partita_core::Routing) -> usize {
    use partita_core::Routing;
    match routing {
        Routing::Mono => 1,
        Routing::MonoToStereo | Routing::Stereo => 2,
        Routing::TrueStereo => 4,
        Routing::Matrix { inputs, outputs } => inputs * outputs,
    }
}

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
