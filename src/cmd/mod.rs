//! One module per subcommand.

pub mod plan;

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
