//! `partita devices`: the audio hosts of this build, their devices and supported configurations.

use clap::Args;
use serde_json::json;

use super::CmdResult;

/// Arguments of `partita devices`.
#[derive(Debug, Args)]
pub struct DevicesArgs {
    /// Only this host (`alsa`, `jack`, ...) [default: every host of this build].
    #[arg(long, value_name = "NAME")]
    host: Option<String>,
    /// Print JSON instead of text.
    #[arg(long)]
    json: bool,
}

/// Runs `partita devices`.
pub fn run(args: DevicesArgs) -> CmdResult {
    let names = match &args.host {
        Some(h) => vec![h.clone()],
        None => partita_device::host_names(),
    };
    let mut out = Vec::new();
    for name in &names {
        let listed = partita_device::host_by_name(Some(name)).and_then(|h| partita_device::list_devices(&h));
        match listed {
            Ok(devices) => out.push((name.clone(), Ok(devices))),
            Err(e) if args.host.is_some() => return Err(e.into()),
            Err(e) => out.push((name.clone(), Err(e.to_string()))),
        }
    }
    if args.json {
        let hosts: Vec<_> = out
            .iter()
            .map(|(name, r)| match r {
                Ok(devices) => json!({
                    "host": name,
                    "devices": devices.iter().map(|d| json!({
                        "index": d.index,
                        "name": d.name,
                        "id": d.id,
                        "default_input": d.default_input,
                        "default_output": d.default_output,
                        "input_configs": d.input_configs.iter().map(config_json).collect::<Vec<_>>(),
                        "output_configs": d.output_configs.iter().map(config_json).collect::<Vec<_>>(),
                    })).collect::<Vec<_>>(),
                }),
                Err(e) => json!({ "host": name, "error": e }),
            })
            .collect();
        println!("{}", serde_json::to_string_pretty(&json!({ "hosts": hosts }))?);
        return Ok(());
    }
    for (name, r) in &out {
        println!("host {name}");
        match r {
            Err(e) => println!("  unavailable: {e}"),
            Ok(devices) if devices.is_empty() => {
                if name.eq_ignore_ascii_case("jack") {
                    println!("  no devices: is the JACK server running? (JACK_DEFAULT_SERVER selects a named one)");
                } else {
                    println!("  no devices");
                }
            }
            Ok(devices) => {
                for d in devices {
                    let mut tags = Vec::new();
                    if d.default_input {
                        tags.push("default input");
                    }
                    if d.default_output {
                        tags.push("default output");
                    }
                    let tags = if tags.is_empty() { String::new() } else { format!(" ({})", tags.join(", ")) };
                    println!("  {:>3}  {}{tags}", d.index, d.name);
                    if !d.id.is_empty() {
                        println!("       id {}", d.id);
                    }
                    print_configs("input ", &d.input_configs);
                    print_configs("output", &d.output_configs);
                }
            }
        }
    }
    println!();
    println!("choose with `partita monitor --host NAME --input INDEX|NAME --output INDEX|NAME`");
    Ok(())
}

/// Prints configurations, runs of consecutive channel counts with one format and rate range as one line
/// (JACK offers every count from 1 to 64, ALSA plugins thousands of combinations).
fn print_configs(what: &str, configs: &[partita_device::ConfigInfo]) {
    let mut i = 0;
    while i < configs.len() {
        let first = &configs[i];
        let mut j = i + 1;
        while j < configs.len()
            && configs[j].format == first.format
            && (configs[j].min_rate_hz, configs[j].max_rate_hz) == (first.min_rate_hz, first.max_rate_hz)
            && configs[j].channels == configs[j - 1].channels + 1
        {
            j += 1;
        }
        let run = &configs[i..j];
        let channels = if run.len() > 1 {
            format!("{}-{} ch", first.channels, run[run.len() - 1].channels)
        } else {
            format!("{} ch", first.channels)
        };
        let rates = if first.min_rate_hz == first.max_rate_hz {
            format!("{} Hz", first.min_rate_hz)
        } else {
            format!("{}-{} Hz", first.min_rate_hz, first.max_rate_hz)
        };
        let lo = run.iter().filter_map(|c| c.buffer_frames.map(|b| b.0)).min();
        let hi = run.iter().filter_map(|c| c.buffer_frames.map(|b| b.1)).max();
        let period = match (lo, hi) {
            (Some(a), Some(b)) if a == b => format!("period {a} frames"),
            (Some(a), Some(b)) => format!("period {a}-{b} frames"),
            _ => "period unknown".to_string(),
        };
        println!("       {what} {channels}, {rates}, {}, {period}", first.format);
        i = j;
    }
}

fn config_json(c: &partita_device::ConfigInfo) -> serde_json::Value {
    json!({
        "channels": c.channels,
        "min_rate_hz": c.min_rate_hz,
        "max_rate_hz": c.max_rate_hz,
        "buffer_frames": c.buffer_frames.map(|(a, b)| json!({ "min": a, "max": b })),
        "format": c.format,
    })
}
